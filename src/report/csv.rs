//! The campaign table `summary.csv`: one row per trial, written from records. Times on their
//! own clock in seconds with 7 decimals (0.1 us), durations in ms with 4, ratios with 5.
//!
//! Every cell is made safe for spreadsheets ([`safe_cell`]): text that a spreadsheet would run
//! as a formula gets a leading single quote, as the OWASP "CSV Injection" page recommends.

use std::io::Write;

use crate::measure::TrialRecord;

/// Column names of `summary.csv`, in order.
pub const SUMMARY_COLUMNS: [&str; 22] = [
    "trial",
    "group",
    "status",
    "flags",
    "click_onset_s",
    "clicks",
    "loading_onset_s",
    "latch_release_s",
    "motion_peak_s",
    "loading_ms",
    "release_ms",
    "amplification_lossless",
    "efficiency",
    "amplification",
    "frequency_hz",
    "amplitude_ratio",
    "damping_ratio",
    "sync_residual_ms",
    "click_peak_dbfs",
    "click_snr_db",
    "missing_frames",
    "error",
];

fn fixed(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(String::new, |v| format!("{v:.decimals$}"))
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

/// The summary row of one record, as fields matching [`SUMMARY_COLUMNS`], each made safe with
/// [`safe_cell`].
pub fn summary_row(r: &TrialRecord) -> Vec<String> {
    raw_summary_row(r).into_iter().map(safe_cell).collect()
}

fn raw_summary_row(r: &TrialRecord) -> Vec<String> {
    let osc = r.oscillation.as_ref();
    vec![
        r.trial.clone(),
        r.group.clone().unwrap_or_default(),
        format!("{:?}", r.status).to_lowercase(),
        r.flags_joined(),
        fixed(r.click_onset_s, 7),
        r.clicks_s
            .as_ref()
            .map_or_else(String::new, |c| c.len().to_string()),
        fixed(r.loading_onset_s, 7),
        fixed(r.latch_release_s, 7),
        fixed(r.motion_peak_s, 7),
        fixed(r.loading_ms, 4),
        fixed(r.release_ms, 4),
        fixed(r.amplification_lossless, 5),
        fixed(r.efficiency, 5),
        fixed(r.amplification, 5),
        fixed(osc.map(|o| o.frequency_hz), 3),
        fixed(osc.map(|o| o.amplitude_ratio), 5),
        fixed(osc.map(|o| o.damping_ratio), 5),
        fixed(r.sync.as_ref().map(|s| s.residual_ms), 4),
        fixed(r.click.as_ref().map(|c| c.peak_dbfs), 2),
        fixed(r.click.as_ref().map(|c| c.snr_db), 2),
        r.missing_frames.map_or_else(String::new, |m| m.to_string()),
        r.error.clone().unwrap_or_default(),
    ]
}

/// Writes the header and one row per record to `out`.
pub fn write_summary<'a, W: Write>(
    out: W,
    records: impl IntoIterator<Item = &'a TrialRecord>,
) -> csv::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    w.write_record(SUMMARY_COLUMNS)?;
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
        assert_eq!(summary_row(&r).len(), SUMMARY_COLUMNS.len());
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
        assert_eq!(row[9], "-0.5000");
    }
}
