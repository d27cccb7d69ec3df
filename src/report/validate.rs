//! The validation table for the terminal.

use std::fmt::Write;

use crate::validate::ValidationReport;

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
        "{:<14} {:>5} {:>5} {:>5} {:>10} {:>8} {:>12}",
        "flag", "TP", "FP", "FN", "precision", "recall", "false alarm"
    );
    for f in &r.flags {
        let _ = writeln!(
            s,
            "{:<14} {:>5} {:>5} {:>5} {:>10} {:>8} {:>12}",
            f.flag,
            f.true_positives,
            f.false_positives,
            f.false_negatives,
            num(f.precision, 3),
            num(f.recall, 3),
            num(f.false_alarm_rate, 3)
        );
    }
    s
}
