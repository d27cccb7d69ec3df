//! A readable one-trial summary for the terminal.

use std::fmt::Write;

use crate::measure::{Status, TrialRecord};

fn opt(v: Option<f64>, decimals: usize, unit: &str) -> String {
    v.map_or_else(|| "-".to_string(), |v| format!("{v:.decimals$}{unit}"))
}

/// Renders `record` as a few aligned lines.
pub fn render(record: &TrialRecord) -> String {
    let mut s = String::new();
    let status = format!("{:?}", record.status).to_lowercase();
    let _ = writeln!(s, "trial     {}  [{}]", record.trial, status);
    if !record.flags.is_empty() {
        let _ = writeln!(s, "flags     {}", record.flags_joined().replace(';', ", "));
    }
    if record.status == Status::Error {
        let _ = writeln!(s, "error     {}", record.error.as_deref().unwrap_or(""));
        return s;
    }
    let _ = writeln!(s, "audio clock");
    let _ = writeln!(
        s,
        "  click onset       {}",
        opt(record.click_onset_s, 6, " s")
    );
    if let Some(clicks) = &record.clicks_s {
        let list: Vec<String> = clicks.iter().map(|c| format!("{c:.6}")).collect();
        let _ = writeln!(
            s,
            "  clicks            {}",
            if list.is_empty() {
                "-".into()
            } else {
                list.join(", ")
            }
        );
    }
    if let Some(c) = &record.click {
        let _ = writeln!(
            s,
            "  click             peak {:.1} dBFS, SNR {:.1} dB, {:.2} ms, centroid {:.0} Hz",
            c.peak_dbfs, c.snr_db, c.duration_ms, c.centroid_hz
        );
        if let Some(spl) = c.peak_spl_db {
            let _ = writeln!(s, "  peak SPL          {spl:.1} dB re 20 uPa");
        }
    }
    let _ = writeln!(s, "video clock");
    if let Some(v) = &record.video_input {
        let _ = writeln!(
            s,
            "  video             {} {}x{}, {} frames",
            v.format, v.width_px, v.height_px, v.frames_decoded
        );
        let _ = writeln!(s, "  motion measure    {}: {}", v.measure, v.measure_reason);
        let _ = writeln!(
            s,
            "  loading measure   {}: {}",
            v.loading_measure, v.loading_measure_reason
        );
    }
    let _ = writeln!(
        s,
        "  loading onset     {}",
        opt(record.loading_onset_s, 6, " s")
    );
    let _ = writeln!(
        s,
        "  latch release     {}",
        opt(record.latch_release_s, 6, " s")
    );
    let _ = writeln!(
        s,
        "  motion peak       {}",
        opt(record.motion_peak_s, 6, " s")
    );
    let _ = writeln!(s, "timing");
    let _ = writeln!(
        s,
        "  loading           {}",
        opt(record.loading_ms, 2, " ms")
    );
    let _ = writeln!(
        s,
        "  release           {}",
        opt(record.release_ms, 3, " ms")
    );
    let _ = writeln!(
        s,
        "  amplification     {} lossless, efficiency {}, {} net",
        opt(record.amplification_lossless, 2, ""),
        opt(record.efficiency, 3, ""),
        opt(record.amplification, 2, "")
    );
    if let Some(o) = &record.oscillation {
        let _ = writeln!(
            s,
            "oscillation         {:.1} Hz, ratio {:.3}/cycle, log decrement {:.3}, zeta {:.4}",
            o.frequency_hz, o.amplitude_ratio, o.log_decrement, o.damping_ratio
        );
    }
    if let Some(sync) = &record.sync {
        let _ = writeln!(
            s,
            "sync                offset {:.3} ms, acoustic delay {:.3} ms, residual {:.3} ms (tolerance {:.3})",
            sync.offset_ms, sync.acoustic_delay_ms, sync.residual_ms, sync.tolerance_ms
        );
    }
    s
}
