//! The validation table for the terminal.

use std::fmt::Write;

use crate::validate::video::{Share, VideoEvent, VideoValidation};
use crate::validate::{EventAccuracy, FamilyAccuracy, MeasuredRig, ValidationReport};

/// Disagreeing trials listed in the text table.
const SHOWN: usize = 20;

fn num(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(|| "-".to_string(), |v| format!("{v:.decimals$}"))
}

/// The unit, count, misses, error quantiles and coverage columns of an event row.
fn stats(e: &EventAccuracy) -> String {
    format!(
        "{:<13} {:>5} {:>6} {:>10} {:>10} {:>9}",
        e.unit,
        e.n,
        e.misses,
        num(e.median_abs_error, 3),
        num(e.p95_abs_error, 3),
        num(e.coverage_95, 3)
    )
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
    let weights: Vec<String> = c
        .families
        .iter()
        .map(|(f, w)| format!("{} {w:.2}", f.as_str()))
        .collect();
    let _ = writeln!(s, "families drawn, by weight: {}", weights.join(", "));
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "{:<34} {:<10} {:<13} {:>5} {:>6} {:>10} {:>10} {:>9}",
        "event", "SNR band", "unit", "n", "missed", "median", "p95", "cover95"
    );
    for e in &r.events {
        let _ = writeln!(s, "{:<34} {:<10} {}", e.event, e.band, stats(e));
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
    let (held, tuned): (Vec<&FamilyAccuracy>, Vec<&FamilyAccuracy>) =
        r.families.iter().partition(|f| f.held_out);
    if !tuned.is_empty() {
        let _ = writeln!(s);
        let _ = writeln!(s, "per family (all SNR bands pooled):");
        s.push_str(&families_table(&tuned));
    }
    if !held.is_empty() {
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "held out (no setting was tuned on these; all SNR bands pooled):"
        );
        s.push_str(&families_table(&held));
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
                "  {} {:<16} {:<13} snr {:>5} dB  missed [{}] extra [{}]  clicks true [{}] found [{}]",
                d.trial,
                d.family.as_str(),
                d.kind.as_str(),
                num(d.click_snr_db, 1),
                flags(&d.missed_flags),
                flags(&d.extra_flags),
                list(&d.true_clicks_s),
                list(&d.found_clicks_s)
            );
        }
    }
    if let Some(v) = &r.video {
        let _ = writeln!(s);
        s.push_str(&render_video(v));
    }
    s
}

/// The rendered-video section: one row per scene and the pooled row, then the targets.
pub fn render_video(v: &VideoValidation) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "rendered video: {} video-only trials at {} fps, {} x {} px PGM sequences, camera noise {} grey levels, lamp {} Hz +- {}, seed {}",
        v.trials, v.fps, v.width_px, v.height_px, v.noise_grey, v.lamp_hz, v.lamp_depth, v.seed
    );
    let _ = writeln!(
        s,
        "{:<22} {:>6} {:>6} {:>11} {:>22} {:>22} {:>10} {:>10}",
        "scene",
        "trials",
        "errors",
        "track/pca1",
        "release n/miss/med/p95",
        "peak n/miss/med/p95",
        "load 5 ms",
        "freq 3 %"
    );
    for row in &v.scenes {
        let _ = writeln!(
            s,
            "{:<22} {:>6} {:>6} {:>11} {:>22} {:>22} {:>10} {:>10}",
            row.scene,
            row.trials,
            row.errors,
            format!("{}/{}", row.measure_track, row.measure_pca),
            frames(&row.release),
            frames(&row.motion_peak),
            share(&row.loading_within_5_ms),
            share(&row.frequency_within_3_pct)
        );
    }
    let _ = writeln!(s, "video targets (all scenes pooled):");
    for t in &v.targets {
        let _ = writeln!(
            s,
            "  {:<38} {:>7} target {:<8} {}",
            t.name,
            num(t.value, 3),
            t.target,
            if t.met { "met" } else { "NOT met" }
        );
    }
    s
}

/// n/misses/median/p95 of an event, frames.
fn frames(e: &VideoEvent) -> String {
    format!(
        "{}/{}/{}/{}",
        e.n,
        e.misses,
        num(e.median_abs_error_frames, 2),
        num(e.p95_abs_error_frames, 2)
    )
}

fn share(x: &Share) -> String {
    format!("{}/{}", x.ok, x.n)
}

/// One block per family: its events, then the flags its trials raise or should raise.
fn families_table(families: &[&FamilyAccuracy]) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{:<22} {:<34} {:<13} {:>5} {:>6} {:>10} {:>10} {:>9}",
        "family", "event", "unit", "n", "missed", "median", "p95", "cover95"
    );
    for f in families {
        let name = format!("{} ({})", f.family.as_str(), f.trials);
        for e in f.events.iter().filter(|e| e.n > 0) {
            let _ = writeln!(s, "{name:<22} {:<34} {}", e.event, stats(e));
        }
        let scored = f
            .flags
            .iter()
            .filter(|g| g.true_positives + g.false_positives + g.false_negatives > 0);
        for g in scored {
            let _ = writeln!(
                s,
                "{:<22} {:<34} {:<13} {:>5} {:>6} {:>10} {:>10}",
                name,
                g.flag,
                "TP/FP/FN",
                format!(
                    "{}/{}/{}",
                    g.true_positives, g.false_positives, g.false_negatives
                ),
                "",
                format!("P {}", num(g.precision, 3)),
                format!("R {}", num(g.recall, 3)),
            );
        }
        if f.errors > 0 {
            let _ = writeln!(s, "{name:<22} {} error records", f.errors);
        }
    }
    s
}

/// What `validate --like` measured from a lab's trials, one line per measure.
pub fn render_measured(m: &MeasuredRig, folder: &std::path::Path) -> String {
    let pair = |v: Option<(f64, f64)>| v.map_or("-".to_string(), |(a, b)| format!("{a:.1}-{b:.1}"));
    let share = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{:.0} %", 100.0 * v));
    let sh = &m.shares;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "latchtime: measured {} trials in {}:",
        m.trials_read,
        folder.display()
    );
    let _ = writeln!(
        s,
        "  sample rate {} Hz, frame rate {} fps, click SNR {} dB, video noise/jump {}",
        m.sample_rate_hz.map_or("-".to_string(), |r| r.to_string()),
        num(m.fps, 2),
        pair(m.snr_db),
        num(m.noise_per_jump, 4)
    );
    let _ = writeln!(
        s,
        "  ringing/release speed {} (ringing steeper on {}), loading drift/noise {} (under 6 on {})",
        num(m.ring_per_release_speed, 2),
        share(sh.fast_ringing),
        num(m.drift_per_noise, 1),
        share(sh.weak_drift)
    );
    let _ = writeln!(
        s,
        "  click decay to -20 dB {} ms (over 2 ms on {}), timestamp step {} frame periods (half a period or more on {})",
        num(m.click_decay_ms, 2),
        share(sh.ringing_click),
        num(m.timestamp_step_frames, 3),
        share(sh.rounded_stamps)
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::validate::video::{VideoScene, VideoTarget};

    #[test]
    fn the_video_section_lists_each_scene_and_says_which_targets_are_missed() {
        let event = VideoEvent {
            n: 2,
            misses: 1,
            median_abs_error_frames: Some(0.25),
            p95_abs_error_frames: Some(0.5),
        };
        let ok = Share {
            ok: 1,
            n: 2,
            share: Some(0.5),
        };
        let v = VideoValidation {
            trials: 2,
            fps: 2000.0,
            seed: 3,
            width_px: 160,
            height_px: 120,
            noise_grey: 2.0,
            lamp_hz: 100.0,
            lamp_depth: 0.04,
            scenes: vec![VideoScene {
                scene: "30 deg, no lamp".into(),
                swing_deg: Some(30.0),
                lamp_hz: None,
                trials: 2,
                errors: 0,
                measure_track: 2,
                measure_pca: 0,
                release: event.clone(),
                motion_peak: event,
                loading_within_5_ms: ok.clone(),
                frequency_within_3_pct: ok,
            }],
            targets: vec![VideoTarget {
                name: "loading onset within 5 ms, share".into(),
                target: ">= 0.80".into(),
                value: Some(0.5),
                met: false,
            }],
        };
        let text = render_video(&v);
        assert!(text.starts_with("rendered video: 2 video-only trials at 2000 fps"));
        assert!(text.contains("30 deg, no lamp"), "{text}");
        assert!(text.contains("2/1/0.25/0.50"), "{text}");
        assert!(text.contains("0.500 target >= 0.80  NOT met"), "{text}");
    }
}
