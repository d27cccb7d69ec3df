//! Group statistics (`groups.csv`): per group of trials, and over all trials, the count of each
//! status and flag, and for loading_ms, release_ms, amplification, oscillation frequency and
//! amplitude ratio: n, mean, sample standard deviation, median, quartiles (linear
//! interpolation between order statistics, numpy's default) and a percentile bootstrap 95 %
//! interval of the mean (2000 resamples, fixed seed, so the table is reproducible).

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

/// The flags counted per group, in column order.
pub const FLAGS: [Flag; 8] = [
    Flag::NoClick,
    Flag::DoubleClick,
    Flag::NoLoading,
    Flag::NoRelease,
    Flag::Clipped,
    Flag::SyncMismatch,
    Flag::LowSnr,
    Flag::FrameGaps,
];

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
    pub fn header() -> Vec<String> {
        let mut h: Vec<String> = ["group", "trials", "ok", "flagged", "error"]
            .map(String::from)
            .to_vec();
        h.extend(FLAGS.iter().map(|f| format!("n_{}", f.as_str())));
        for (m, _) in METRICS {
            for s in [
                "n",
                "mean",
                "sd",
                "median",
                "q1",
                "q3",
                "iqr",
                "ci95_low",
                "ci95_high",
            ] {
                h.push(format!("{m}_{s}"));
            }
        }
        h
    }

    /// Rows of `groups.csv`: each group in name order, then the row over all trials; cells made
    /// safe for spreadsheets (group names come from the manifest).
    pub fn rows(&self) -> Vec<Vec<String>> {
        let fmt = |v: f64| {
            if v.is_finite() {
                format!("{v:.6}")
            } else {
                String::new()
            }
        };
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
        order
            .into_iter()
            .map(|g| {
                let a = &self.groups[g];
                let mut row = vec![g.clone(), a.trials.to_string()];
                row.extend(a.status.iter().map(|c| c.to_string()));
                row.extend(a.flags.iter().map(|c| c.to_string()));
                for s in stats_by_group.get(g).into_iter().flatten() {
                    match s {
                        Some(s) => row.extend([
                            s.n.to_string(),
                            fmt(s.mean),
                            fmt(s.sd),
                            fmt(s.median),
                            fmt(s.q1),
                            fmt(s.q3),
                            fmt(s.q3 - s.q1),
                            fmt(s.ci_low),
                            fmt(s.ci_high),
                        ]),
                        None => {
                            row.push("0".into());
                            row.extend(std::iter::repeat_n(String::new(), 8));
                        }
                    }
                }
                row.into_iter().map(super::csv::safe_cell).collect()
            })
            .collect()
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
        assert_eq!(rows.len(), 2);
        let h = GroupTable::header();
        let col = |name: &str| h.iter().position(|c| c == name).unwrap();
        assert_eq!(rows[0][0], "g1");
        assert_eq!(rows[0][col("n_double_click")], "1");
        assert_eq!(rows[0][col("error")], "1");
        assert_eq!(rows[0][col("loading_ms_n")], "1");
        assert_eq!(rows[0][col("loading_ms_mean")], "80.000000");
        assert_eq!(rows[1][0], ALL_GROUPS);
        assert_eq!(rows[0].len(), h.len());
    }
}
