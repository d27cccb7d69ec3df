//! The campaign table `summary.csv`: one row per trial, written from records, ready for R and
//! pandas. Every measure sits beside its standard uncertainty, named by one rule,
//! `<measure>_sd_<unit>` (`<measure>_sd` for a ratio). Numbers are written in plain decimals
//! at a precision suited to each measure ([`Precision`]), never as `-0`; each flag has its own
//! `true`/`false` column beside the `flags` list, so a table can be filtered without parsing
//! strings.
//!
//! Every cell is made safe for spreadsheets ([`safe_cell`]): text that a spreadsheet would run
//! as a formula gets a leading single quote, as the OWASP "CSV Injection" page recommends.

use std::io::Write;

use crate::measure::{Flag, TrialRecord};

/// How a number is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Precision {
    /// A fixed number of decimals: times on a clock (7, 0.1 us) and differences near zero,
    /// where significant digits would claim more or less than the clock resolves.
    Decimals(usize),
    /// A fixed number of significant digits, for durations, ratios and rates.
    Significant(usize),
}

/// Times on a clock, s: 0.1 us.
const CLOCK: Precision = Precision::Decimals(7);
/// Durations and rates, ms or Hz.
const DURATION: Precision = Precision::Significant(6);
/// Dimensionless ratios.
const RATIO: Precision = Precision::Significant(5);
/// Standard uncertainties: three digits, one more than the two usually quoted.
const SD: Precision = Precision::Significant(3);
/// Clock residuals and tolerances, ms: 0.1 us.
const RESIDUAL: Precision = Precision::Decimals(4);
/// Levels, dB.
const LEVEL: Precision = Precision::Decimals(2);

/// `v` written at `precision` in plain decimals (no exponent); empty for null or a value that
/// is not finite. A value that rounds to zero is written without a minus sign.
pub fn number(v: Option<f64>, precision: Precision) -> String {
    let Some(v) = v.filter(|v| v.is_finite()) else {
        return String::new();
    };
    let decimals = match precision {
        Precision::Decimals(d) => d,
        Precision::Significant(s) if v == 0.0 => s.saturating_sub(1),
        Precision::Significant(s) => {
            let magnitude = v.abs().log10().floor() as i64;
            (s as i64 - 1 - magnitude).clamp(0, 17) as usize
        }
    };
    let text = format!("{v:.decimals$}");
    match text.strip_prefix('-') {
        Some(unsigned) if unsigned.bytes().all(|b| b == b'0' || b == b'.') => unsigned.to_string(),
        _ => text,
    }
}

fn boolean(v: Option<bool>) -> String {
    v.map_or_else(String::new, |b| b.to_string())
}

fn count<T>(v: Option<&Vec<T>>) -> String {
    v.map_or_else(String::new, |c| c.len().to_string())
}

/// One cell of a record.
type CellFn = fn(&TrialRecord) -> String;

/// The columns after the flags, with how each is read from a record.
const MEASURE_COLUMNS: [(&str, CellFn); 35] = [
    ("click_onset_s", |r| number(r.click_onset_s, CLOCK)),
    ("click_onset_sd_ms", |r| {
        number(r.click.as_ref().map(|c| c.onset_sd_ms), SD)
    }),
    ("clicks", |r| count(r.clicks_s.as_ref())),
    ("ticks", |r| count(r.ticks_s.as_ref())),
    ("thumps", |r| count(r.thumps_s.as_ref())),
    ("loading_onset_s", |r| number(r.loading_onset_s, CLOCK)),
    ("loading_onset_sd_ms", |r| {
        number(r.loading_onset_uncertainty_ms.map(|u| u / 1.96), SD)
    }),
    ("loading_before_record", |r| {
        boolean(r.loading_before_record)
    }),
    ("loading_departure_s", |r| {
        number(r.loading_departure_s, CLOCK)
    }),
    ("latch_release_s", |r| number(r.latch_release_s, CLOCK)),
    ("latch_release_sd_ms", |r| number(r.latch_release_sd_ms, SD)),
    ("latch_release_video_s", |r| {
        number(r.latch_release_video_s, CLOCK)
    }),
    ("latch_release_video_sd_ms", |r| {
        number(r.latch_release_video_sd_ms, SD)
    }),
    ("motion_peak_s", |r| number(r.motion_peak_s, CLOCK)),
    ("motion_peak_sd_ms", |r| number(r.motion_peak_sd_ms, SD)),
    ("fast_phase_end_s", |r| number(r.fast_phase_end_s, CLOCK)),
    ("fast_phase_end_sd_ms", |r| {
        number(r.fast_phase_end_sd_ms, SD)
    }),
    ("loading_ms", |r| number(r.loading_ms, DURATION)),
    ("loading_sd_ms", |r| number(r.loading_ms_sd, SD)),
    ("release_ms", |r| number(r.release_ms, DURATION)),
    ("release_sd_ms", |r| number(r.release_ms_sd, SD)),
    ("amplification_lossless", |r| {
        number(r.amplification_lossless, RATIO)
    }),
    ("efficiency", |r| number(r.efficiency, RATIO)),
    ("amplification", |r| number(r.amplification, RATIO)),
    ("amplification_sd", |r| number(r.amplification_sd, SD)),
    ("frequency_hz", |r| {
        number(r.oscillation.as_ref().map(|o| o.frequency_hz), DURATION)
    }),
    ("amplitude_ratio", |r| {
        number(r.oscillation.as_ref().map(|o| o.amplitude_ratio), RATIO)
    }),
    ("amplitude_ratio_sd", |r| {
        number(
            r.oscillation.as_ref().and_then(|o| o.amplitude_ratio_sd),
            SD,
        )
    }),
    ("damping_ratio", |r| {
        number(r.oscillation.as_ref().map(|o| o.damping_ratio), RATIO)
    }),
    ("sync_residual_ms", |r| {
        number(r.sync.as_ref().map(|s| s.residual_ms), RESIDUAL)
    }),
    ("sync_tolerance_ms", |r| {
        number(r.sync.as_ref().map(|s| s.tolerance_ms), RESIDUAL)
    }),
    ("click_peak_dbfs", |r| {
        number(r.click.as_ref().map(|c| c.peak_dbfs), LEVEL)
    }),
    ("click_snr_db", |r| {
        number(r.click.as_ref().map(|c| c.snr_db), LEVEL)
    }),
    ("missing_frames", |r| {
        r.missing_frames.map_or_else(String::new, |m| m.to_string())
    }),
    ("error", |r| r.error.clone().unwrap_or_default()),
];

/// The boolean column of a flag: `flag_<name>`.
pub fn flag_column(flag: Flag) -> String {
    format!("flag_{}", flag.as_str())
}

/// Column names of `summary.csv`, in order: `trial, group, status, flags`, one
/// `flag_<name>` column per flag, then the measures.
pub fn summary_columns() -> Vec<String> {
    let mut h: Vec<String> = ["trial", "group", "status", "flags"]
        .map(String::from)
        .to_vec();
    h.extend(Flag::ALL.iter().map(|f| flag_column(*f)));
    h.extend(MEASURE_COLUMNS.iter().map(|(name, _)| name.to_string()));
    h
}

/// Characters that make a spreadsheet read a cell as a formula when they start it: `=`, `+`,
/// `-`, `@`, tab and carriage return (OWASP, "CSV Injection").
pub const FORMULA_STARTS: [char; 6] = ['=', '+', '-', '@', '\t', '\r'];

/// `cell` as a spreadsheet may safely open it: text starting with one of [`FORMULA_STARTS`]
/// gets a leading single quote (spreadsheets show it as text; the quote is the OWASP
/// recommendation). Plain numbers such as `-0.5` or `-1e-3` stay as they are, so they stay
/// numbers.
pub fn safe_cell(cell: String) -> String {
    let risky = cell.starts_with(FORMULA_STARTS);
    let number = cell
        .bytes()
        .all(|b| b.is_ascii_digit() || b".eE+-".contains(&b))
        && cell.parse::<f64>().is_ok_and(f64::is_finite);
    if risky && !number {
        format!("'{cell}")
    } else {
        cell
    }
}

/// The summary row of one record, as fields matching [`summary_columns`], each made safe with
/// [`safe_cell`].
pub fn summary_row(r: &TrialRecord) -> Vec<String> {
    raw_summary_row(r).into_iter().map(safe_cell).collect()
}

fn raw_summary_row(r: &TrialRecord) -> Vec<String> {
    let mut row = vec![
        r.trial.clone(),
        r.group.clone().unwrap_or_default(),
        format!("{:?}", r.status).to_lowercase(),
        r.flags_joined(),
    ];
    row.extend(Flag::ALL.iter().map(|f| r.flags.contains(f).to_string()));
    row.extend(MEASURE_COLUMNS.iter().map(|(_, cell)| cell(r)));
    row
}

/// Writes the header and one row per record to `out`.
pub fn write_summary<'a, W: Write>(
    out: W,
    records: impl IntoIterator<Item = &'a TrialRecord>,
) -> csv::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    w.write_record(summary_columns())?;
    for r in records {
        w.write_record(summary_row(r))?;
    }
    w.flush()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_have_one_field_per_column_and_quote_commas() {
        let mut r = TrialRecord::failed("t1", None, "bad, very bad".into());
        r.loading_ms = Some(84.0);
        assert_eq!(summary_row(&r).len(), summary_columns().len());
        let mut buf = Vec::new();
        write_summary(&mut buf, [&r]).unwrap();
        let text = String::from_utf8(buf).unwrap();
        assert!(text.contains("84.0000"));
        assert!(text.contains("\"bad, very bad\""));
    }

    #[test]
    fn formula_like_cells_become_text_and_numbers_stay_numbers() {
        // The OWASP list of formula starts: = + - @ tab CR.
        for (cell, want) in [
            ("=HYPERLINK(\"x\")", "'=HYPERLINK(\"x\")"),
            ("+1+1", "'+1+1"),
            ("-cmd", "'-cmd"),
            ("@SUM(A1)", "'@SUM(A1)"),
            ("\tx", "'\tx"),
            ("\rx", "'\rx"),
            ("-0.5", "-0.5"),
            ("-1e-3", "-1e-3"),
            ("+2", "+2"),
            ("-inf", "'-inf"),
            ("-", "'-"),
            ("trial-01", "trial-01"),
            ("", ""),
        ] {
            assert_eq!(safe_cell(cell.to_string()), want, "{cell:?}");
        }
        let mut r = TrialRecord::empty("=1+2", Some("@g"));
        r.loading_ms = Some(-0.5);
        let row = summary_row(&r);
        assert_eq!(row[0], "'=1+2");
        assert_eq!(row[1], "'@g");
        let col = |name: &str| summary_columns().iter().position(|c| c == name).unwrap();
        assert_eq!(row[col("loading_ms")], "-0.500000");
    }

    #[test]
    fn numbers_keep_their_precision_and_never_read_minus_zero() {
        let sig = Precision::Significant;
        assert_eq!(number(Some(999.9999999999998), sig(6)), "1000.00");
        assert_eq!(number(Some(83.98765432), sig(6)), "83.9877");
        assert_eq!(number(Some(0.000123456), sig(3)), "0.000123");
        assert_eq!(number(Some(0.0), sig(3)), "0.00");
        assert_eq!(number(Some(-0.0), Precision::Decimals(2)), "0.00");
        assert_eq!(number(Some(-0.0004), Precision::Decimals(2)), "0.00");
        assert_eq!(number(Some(-0.004), Precision::Decimals(2)), "0.00");
        assert_eq!(number(Some(-0.006), Precision::Decimals(2)), "-0.01");
        assert_eq!(number(Some(123456789.0), sig(3)), "123456789");
        assert_eq!(number(Some(f64::NAN), sig(3)), "");
        assert_eq!(number(None, sig(3)), "");
    }

    #[test]
    fn each_flag_has_a_boolean_column_beside_the_list() {
        let mut r = TrialRecord::empty("t", None);
        r.add_flags([Flag::DoubleClick, Flag::Clipped]);
        let row = summary_row(&r);
        let header = summary_columns();
        let cell = |name: &str| &row[header.iter().position(|c| c == name).unwrap()];
        assert_eq!(cell("flags"), "double_click;clipped");
        assert_eq!(cell("flag_double_click"), "true");
        assert_eq!(cell("flag_clipped"), "true");
        assert_eq!(cell("flag_no_click"), "false");
        let flag_columns = header.iter().filter(|c| c.starts_with("flag_")).count();
        assert_eq!(flag_columns, Flag::ALL.len());
    }
}
