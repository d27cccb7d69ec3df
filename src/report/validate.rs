//! The validation table for the terminal.

use std::fmt::Write;

use crate::validate::ValidationReport;

/// Disagreeing trials listed in the text table.
const SHOWN: usize = 20;

fn num(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(|| "-".to_string(), |v| format!("{v:.decimals$}"))
}

/// Renders a validation report as aligned text tables.
pub fn render(r: &ValidationReport) -> String {
    let c = &r.config;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "validation: {} synthetic trials at {} Hz / {} fps, click SNR {}-{} dB, video noise {:.2} (jump 40-70), seed {}; {} error records",
        r.trials, c.sample_rate_hz, c.fps, c.snr_db.0, c.snr_db.1, c.video_noise, c.seed, r.errors
    );
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "{:<34} {:<10} {:<13} {:>5} {:>6} {:>10} {:>10} {:>9}",
        "event", "SNR band", "unit", "n", "missed", "median", "p95", "cover95"
    );
    for e in &r.events {
        let _ = writeln!(
            s,
            "{:<34} {:<10} {:<13} {:>5} {:>6} {:>10} {:>10} {:>9}",
            e.event,
            e.band,
            e.unit,
            e.n,
            e.misses,
            num(e.median_abs_error, 3),
            num(e.p95_abs_error, 3),
            num(e.coverage_95, 3)
        );
    }
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "{:<30} {:>5} {:>5} {:>5} {:>10} {:>8} {:>12}",
        "flag", "TP", "FP", "FN", "precision", "recall", "false alarm"
    );
    for f in &r.flags {
        let _ = writeln!(
            s,
            "{:<30} {:>5} {:>5} {:>5} {:>10} {:>8} {:>12}",
            f.flag,
            f.true_positives,
            f.false_positives,
            f.false_negatives,
            num(f.precision, 3),
            num(f.recall, 3),
            num(f.false_alarm_rate, 3)
        );
    }
    if !r.disagreements.is_empty() {
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "{} trials disagree with their truth (all are in --format json); the first {}:",
            r.disagreements.len(),
            r.disagreements.len().min(SHOWN)
        );
        let list = |v: &[f64]| {
            v.iter()
                .map(|t| format!("{t:.5}"))
                .collect::<Vec<_>>()
                .join(" ")
        };
        for d in r.disagreements.iter().take(SHOWN) {
            let flags =
                |v: &[crate::Flag]| v.iter().map(|f| f.as_str()).collect::<Vec<_>>().join(",");
            let _ = writeln!(
                s,
                "  {} {:<13} snr {:>5} dB  missed [{}] extra [{}]  clicks true [{}] found [{}]",
                d.trial,
                d.kind.as_str(),
                num(d.click_snr_db, 1),
                flags(&d.missed_flags),
                flags(&d.extra_flags),
                list(&d.true_clicks_s),
                list(&d.found_clicks_s)
            );
        }
    }
    s
}
