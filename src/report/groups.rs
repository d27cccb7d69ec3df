//! Group statistics (`groups.csv`): per group of trials, and over all trials, the count of each
//! status and flag, and for loading_ms, release_ms, amplification, oscillation frequency and
//! amplitude ratio: n, mean, sample standard deviation, median, quartiles (linear
//! interpolation between order statistics, numpy's default) and a percentile bootstrap 95 %
//! interval of the mean (2000 resamples, fixed seed, so the table is reproducible).
//!
//! The table is in long form, one number per row (`group, measure, statistic, value, note`),
//! so R and pandas read it as it is and pivot it as they need. A statistic that cannot be given
//! is an empty value with the reason in `note`: a standard deviation below n = 2, and a
//! bootstrap interval below [`MIN_N_BOOTSTRAP`] trials.

use std::collections::BTreeMap;
use std::io::Write;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::measure::{Flag, Status, TrialRecord};

/// Bootstrap resamples per interval.
pub const BOOTSTRAP_RESAMPLES: usize = 2000;
/// Seed of the bootstrap generator.
pub const BOOTSTRAP_SEED: u64 = 0x1a7c_4e11;
/// Fewest values a bootstrap interval is given for. With fewer, the percentile bootstrap of
/// the mean is little more than the range of the values and covers the true mean far less
/// often than 95 % (common practice puts the least useful n at about 5 to 10).
pub const MIN_N_BOOTSTRAP: usize = 5;
/// Name of the row over every trial.
pub const ALL_GROUPS: &str = "(all)";
/// Name used for trials without a group.
pub const NO_GROUP: &str = "(none)";

/// Reads one measure from a record.
pub type MetricFn = fn(&TrialRecord) -> Option<f64>;

/// The measures summarised per group, with how to read them from a record.
pub const METRICS: [(&str, MetricFn); 5] = [
    ("loading_ms", |r| r.loading_ms),
    ("release_ms", |r| r.release_ms),
    ("amplification", |r| r.amplification),
    ("frequency_hz", |r| {
        r.oscillation.as_ref().map(|o| o.frequency_hz)
    }),
    ("amplitude_ratio", |r| {
        r.oscillation.as_ref().map(|o| o.amplitude_ratio)
    }),
];

/// The flags counted per group, in the order records list them.
pub const FLAGS: [Flag; Flag::ALL.len()] = Flag::ALL;

/// Summary statistics of one sample.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Stats {
    pub n: usize,
    pub mean: f64,
    /// Sample standard deviation (n - 1); NaN for n < 2.
    pub sd: f64,
    pub median: f64,
    pub q1: f64,
    pub q3: f64,
    pub ci_low: f64,
    pub ci_high: f64,
}

/// Quantile `q` (0..1) of sorted values, linear interpolation between order statistics
/// (numpy.quantile's default, Hyndman and Fan type 7).
pub fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Statistics of `values`; `None` when empty.
pub fn stats(values: &[f64]) -> Option<Stats> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let mean = values.iter().sum::<f64>() / n as f64;
    let sd = if n > 1 {
        (values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / (n - 1) as f64).sqrt()
    } else {
        f64::NAN
    };
    let mut rng = ChaCha8Rng::seed_from_u64(BOOTSTRAP_SEED);
    let mut means: Vec<f64> = (0..BOOTSTRAP_RESAMPLES)
        .map(|_| (0..n).map(|_| values[rng.gen_range(0..n)]).sum::<f64>() / n as f64)
        .collect();
    means.sort_by(f64::total_cmp);
    Some(Stats {
        n,
        mean,
        sd,
        median: quantile_sorted(&sorted, 0.5),
        q1: quantile_sorted(&sorted, 0.25),
        q3: quantile_sorted(&sorted, 0.75),
        ci_low: quantile_sorted(&means, 0.025),
        ci_high: quantile_sorted(&means, 0.975),
    })
}

/// Significant digits of every statistic: one more than the trial values carry.
const STATISTIC_DIGITS: super::csv::Precision = super::csv::Precision::Significant(6);

/// The statistic rows of one measure: (statistic, value, note), an empty value with the reason
/// where the statistic cannot be given.
fn statistic_cells(s: Option<Stats>) -> Vec<(&'static str, String, &'static str)> {
    let Some(s) = s else {
        return vec![("n", "0".into(), "no trial has this value")];
    };
    let num = |v: f64| super::csv::number(Some(v), STATISTIC_DIGITS);
    let cell = |name, v: f64, given: bool, reason| {
        if given {
            (name, num(v), "")
        } else {
            (name, String::new(), reason)
        }
    };
    let spread = s.n >= 2;
    let boot = s.n >= MIN_N_BOOTSTRAP;
    const NO_SD: &str = "n < 2: no standard deviation";
    const NO_CI: &str = "n < 5: no bootstrap interval (it would be little more than the range)";
    vec![
        ("n", s.n.to_string(), ""),
        ("mean", num(s.mean), ""),
        cell("sd", s.sd, spread, NO_SD),
        ("median", num(s.median), ""),
        ("q1", num(s.q1), ""),
        ("q3", num(s.q3), ""),
        ("iqr", num(s.q3 - s.q1), ""),
        cell("ci95_low", s.ci_low, boot, NO_CI),
        cell("ci95_high", s.ci_high, boot, NO_CI),
    ]
}

/// Accumulates records group by group; holds only the few numbers per trial it needs.
#[derive(Debug, Default)]
pub struct GroupTable {
    groups: BTreeMap<String, Accumulator>,
    /// Each group's statistics per measure, once [`GroupTable::compute_stats`] ran.
    stats: Option<GroupStats>,
}

/// Each group's [`Stats`] per measure (in [`METRICS`] order), by group name.
pub type GroupStats = BTreeMap<String, Vec<Option<Stats>>>;

#[derive(Debug, Default)]
struct Accumulator {
    trials: usize,
    status: [usize; 3],
    flags: [usize; FLAGS.len()],
    values: [Vec<f64>; METRICS.len()],
}

impl Accumulator {
    fn add(&mut self, r: &TrialRecord) {
        self.trials += 1;
        self.status[match r.status {
            Status::Ok => 0,
            Status::Flagged => 1,
            Status::Error => 2,
        }] += 1;
        for (i, f) in FLAGS.iter().enumerate() {
            if r.flags.contains(f) {
                self.flags[i] += 1;
            }
        }
        if r.status != Status::Error {
            for (i, (_, get)) in METRICS.iter().enumerate() {
                if let Some(v) = get(r).filter(|v| v.is_finite()) {
                    self.values[i].push(v);
                }
            }
        }
    }
}

impl GroupTable {
    /// Adds one record to its group and to the row over all trials.
    pub fn add(&mut self, r: &TrialRecord) {
        let group = r.group.clone().unwrap_or_else(|| NO_GROUP.to_string());
        self.groups.entry(group).or_default().add(r);
        self.groups
            .entry(ALL_GROUPS.to_string())
            .or_default()
            .add(r);
    }

    /// Computes every group's statistics, each distinct sample once: with no groups, the row
    /// over all trials holds the same values as the one group, and its bootstrap is not run
    /// again. `run` maps the distinct samples to their [`stats`], in order; the caller chooses
    /// whether in parallel (the samples are independent). [`GroupTable::rows`] then uses them.
    pub fn compute_stats(&mut self, run: impl FnOnce(&[&[f64]]) -> Vec<Option<Stats>>) {
        self.stats = Some(self.stats_of_groups(run));
    }

    fn stats_of_groups(&self, run: impl FnOnce(&[&[f64]]) -> Vec<Option<Stats>>) -> GroupStats {
        let mut distinct: Vec<&[f64]> = Vec::new();
        let mut index: BTreeMap<&str, Vec<usize>> = BTreeMap::new();
        for (g, a) in &self.groups {
            let at = a
                .values
                .iter()
                .map(|v| match distinct.iter().position(|d| *d == &v[..]) {
                    Some(k) => k,
                    None => {
                        distinct.push(v);
                        distinct.len() - 1
                    }
                });
            index.insert(g, at.collect());
        }
        let computed = run(&distinct);
        index
            .into_iter()
            .map(|(g, at)| {
                let row = at.iter().map(|&k| computed.get(k).cloned().flatten());
                (g.to_string(), row.collect())
            })
            .collect()
    }

    /// Column names of `groups.csv`.
    pub fn header() -> [&'static str; 5] {
        ["group", "measure", "statistic", "value", "note"]
    }

    /// Rows of `groups.csv`: each group in name order, then the row over all trials; within a
    /// group the counts, then each measure's statistics. Cells are made safe for spreadsheets
    /// (group names come from the manifest).
    pub fn rows(&self) -> Vec<[String; 5]> {
        let computed;
        let stats_by_group = match &self.stats {
            Some(s) => s,
            None => {
                computed = self.stats_of_groups(|d| d.iter().map(|v| stats(v)).collect());
                &computed
            }
        };
        let mut order: Vec<&String> = self.groups.keys().filter(|g| *g != ALL_GROUPS).collect();
        order.extend(self.groups.keys().filter(|g| *g == ALL_GROUPS));
        let mut rows = Vec::new();
        for g in order {
            let a = &self.groups[g];
            let mut push = |measure: &str, statistic: &str, value: String, note: &str| {
                rows.push(
                    [
                        g.clone(),
                        measure.into(),
                        statistic.into(),
                        value,
                        note.into(),
                    ]
                    .map(super::csv::safe_cell),
                );
            };
            push("trials", "count", a.trials.to_string(), "");
            for (name, n) in ["ok", "flagged", "error"].iter().zip(a.status) {
                push("trials", name, n.to_string(), "");
            }
            for (flag, n) in FLAGS.iter().zip(a.flags) {
                push(&super::csv::flag_column(*flag), "count", n.to_string(), "");
            }
            let group_stats = stats_by_group.get(g).into_iter().flatten();
            for ((measure, _), s) in METRICS.iter().zip(group_stats) {
                for (statistic, value, note) in statistic_cells(s.clone()) {
                    push(measure, statistic, value, note);
                }
            }
        }
        rows
    }

    /// Writes `groups.csv` to `out`.
    pub fn write<W: Write>(&self, out: W) -> csv::Result<()> {
        let mut w = csv::Writer::from_writer(out);
        w.write_record(Self::header())?;
        for row in self.rows() {
            w.write_record(row)?;
        }
        w.flush()?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_worked_statistics_of_five_values() {
        // Worked by hand: values 2, 4, 4, 5, 10. Mean 5; deviations -3,-1,-1,0,5, squares sum
        // 36, sd = sqrt(36/4) = 3. Median 4; type-7 quartiles at positions 1 and 3: 4 and 5.
        let s = stats(&[10.0, 4.0, 2.0, 5.0, 4.0]).unwrap();
        assert_eq!(s.n, 5);
        assert!((s.mean - 5.0).abs() < 1e-12);
        assert!((s.sd - 3.0).abs() < 1e-12);
        assert_eq!((s.median, s.q1, s.q3), (4.0, 4.0, 5.0));
        assert!(s.ci_low <= s.mean && s.mean <= s.ci_high);
    }

    #[test]
    fn quantiles_interpolate_like_numpy() {
        // numpy.quantile([1, 2, 3, 4], [0.25, 0.5, 0.9]) = [1.75, 2.5, 3.7].
        let v = [1.0, 2.0, 3.0, 4.0];
        assert!((quantile_sorted(&v, 0.25) - 1.75).abs() < 1e-12);
        assert!((quantile_sorted(&v, 0.5) - 2.5).abs() < 1e-12);
        assert!((quantile_sorted(&v, 0.9) - 3.7).abs() < 1e-12);
    }

    #[test]
    fn bootstrap_interval_matches_the_normal_approximation_for_a_large_sample() {
        // For n = 400 draws the percentile bootstrap of the mean is close to
        // mean +- 1.96 sd / sqrt(n) (central limit theorem).
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let v: Vec<f64> = (0..400).map(|_| rng.gen::<f64>() * 10.0).collect();
        let s = stats(&v).unwrap();
        let half = 1.96 * s.sd / 20.0;
        assert!(
            ((s.ci_high - s.ci_low) / 2.0 - half).abs() < 0.15 * half,
            "{s:?}"
        );
    }

    #[test]
    fn each_distinct_sample_is_bootstrapped_once_and_rows_do_not_change() {
        let mut t = GroupTable::default();
        for (i, v) in [80.0, 95.0, 70.0].into_iter().enumerate() {
            let mut r = TrialRecord::empty(&format!("t{i}"), None);
            r.loading_ms = Some(v);
            r.release_ms = Some(v / 10.0);
            t.add(&r);
        }
        let serial = t.rows();
        let mut samples = 0;
        t.compute_stats(|d| {
            samples = d.len();
            d.iter().map(|v| stats(v)).collect()
        });
        // Groups "(none)" and "(all)" hold the same values: 5 measures, of which 3 are empty
        // and alike, so loading_ms, release_ms and the empty sample.
        assert_eq!(samples, 3);
        assert_eq!(t.rows(), serial);
    }

    #[test]
    fn rows_count_flags_and_leave_error_records_out_of_the_measures() {
        let mut t = GroupTable::default();
        let mut a = TrialRecord::empty("a", Some("g1"));
        a.loading_ms = Some(80.0);
        a.flags = vec![Flag::DoubleClick];
        a.status = Status::Flagged;
        let mut b = TrialRecord::failed("b", Some("g1"), "broken".into());
        b.loading_ms = Some(1e9);
        t.add(&a);
        t.add(&b);
        let rows = t.rows();
        let find = |g: &str, m: &str, s: &str| {
            rows.iter()
                .find(|r| r[0] == g && r[1] == m && r[2] == s)
                .unwrap_or_else(|| panic!("no row {g} {m} {s}"))
                .clone()
        };
        assert_eq!(find("g1", "flag_double_click", "count")[3], "1");
        assert_eq!(find("g1", "trials", "error")[3], "1");
        assert_eq!(find("g1", "loading_ms", "n")[3], "1");
        assert_eq!(find("g1", "loading_ms", "mean")[3], "80.0000");
        assert_eq!(find("g1", "loading_ms", "sd")[3], "");
        assert_eq!(find("(all)", "trials", "count")[3], "2");
        assert_eq!(rows.last().unwrap()[0], ALL_GROUPS);
        assert!(rows.iter().all(|r| r.len() == GroupTable::header().len()));
    }

    #[test]
    fn no_bootstrap_interval_below_five_values_and_the_reason_is_given() {
        let mut t = GroupTable::default();
        for (i, v) in [80.0, 82.0, 79.0, 85.0, 81.0].iter().enumerate() {
            let mut r =
                TrialRecord::empty(&format!("t{i}"), Some(if i < 4 { "small" } else { "x" }));
            r.loading_ms = Some(*v);
            t.add(&r);
        }
        let rows = t.rows();
        let find = |g: &str, s: &str| {
            rows.iter()
                .find(|r| r[0] == g && r[1] == "loading_ms" && r[2] == s)
                .unwrap()
                .clone()
        };
        let small = find("small", "ci95_low");
        assert_eq!(small[3], "");
        assert!(small[4].contains("n < 5"), "{small:?}");
        assert_eq!(find("small", "sd")[4], "");
        let all_low: f64 = find(ALL_GROUPS, "ci95_low")[3].parse().unwrap();
        let all_high: f64 = find(ALL_GROUPS, "ci95_high")[3].parse().unwrap();
        assert!(all_low < 81.4 && 81.4 < all_high, "{all_low} {all_high}");
        assert_eq!(find(ALL_GROUPS, "ci95_low")[4], "");
    }
}
