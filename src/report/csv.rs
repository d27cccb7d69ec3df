//! The campaign table `summary.csv`: one row per trial, written from records. Times on their
//! own clock in seconds with 7 decimals (0.1 us), durations in ms with 4, ratios with 5.

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

/// The summary row of one record, as fields matching [`SUMMARY_COLUMNS`].
pub fn summary_row(r: &TrialRecord) -> Vec<String> {
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
}
