//! A readable one-trial summary for the terminal.

use std::fmt::Write;

use crate::measure::{Status, TrialRecord};

fn opt(v: Option<f64>, decimals: usize, unit: &str) -> String {
    v.map_or_else(|| "-".to_string(), |v| format!("{v:.decimals$}{unit}"))
}

/// A value with its standard uncertainty beside it, when there is one.
fn with_sd(v: Option<f64>, decimals: usize, unit: &str, sd: Option<f64>, sd_unit: &str) -> String {
    match (v, sd) {
        (Some(_), Some(sd)) => format!("{}  (sd {sd:.3}{sd_unit})", opt(v, decimals, unit)),
        _ => opt(v, decimals, unit),
    }
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
        with_sd(
            record.click_onset_s,
            6,
            " s",
            record.click.as_ref().map(|c| c.onset_sd_ms),
            " ms"
        )
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
        with_sd(
            record.loading_onset_s,
            6,
            " s",
            record.loading_onset_uncertainty_ms.map(|u| u / 1.96),
            " ms"
        )
    );
    let _ = writeln!(
        s,
        "  latch release     {}",
        with_sd(
            record.latch_release_s,
            6,
            " s",
            record.latch_release_sd_ms,
            " ms"
        )
    );
    let _ = writeln!(
        s,
        "  motion peak       {}",
        with_sd(
            record.motion_peak_s,
            6,
            " s",
            record.motion_peak_sd_ms,
            " ms"
        )
    );
    let _ = writeln!(s, "timing");
    let _ = writeln!(
        s,
        "  loading           {}",
        with_sd(record.loading_ms, 2, " ms", record.loading_ms_sd, " ms")
    );
    let _ = writeln!(
        s,
        "  release           {}",
        with_sd(record.release_ms, 3, " ms", record.release_ms_sd, " ms")
    );
    let _ = writeln!(
        s,
        "  amplification     {} = {} lossless x efficiency {}",
        with_sd(record.amplification, 2, "", record.amplification_sd, ""),
        opt(record.amplification_lossless, 2, ""),
        opt(record.efficiency, 3, "")
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_measure_is_shown_with_its_uncertainty() {
        let mut r = TrialRecord::empty("t", None);
        r.latch_release_s = Some(0.2);
        r.latch_release_sd_ms = Some(0.0125);
        r.loading_ms = Some(84.0);
        r.loading_ms_sd = Some(1.5);
        r.amplification_lossless = Some(21.0);
        r.efficiency = Some(0.4);
        r.amplification = Some(8.4);
        r.amplification_sd = Some(0.9);
        let text = render(&r);
        assert!(text.contains("0.200000 s  (sd 0.013 ms)"), "{text}");
        assert!(text.contains("84.00 ms  (sd 1.500 ms)"), "{text}");
        assert!(
            text.contains("8.40  (sd 0.900) = 21.00 lossless x efficiency 0.400"),
            "{text}"
        );
    }
}
