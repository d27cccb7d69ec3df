//! A video's per-frame measures as CSV (`trials/NAME.frames.csv`), in the frames-CSV layout
//! latchtime reads back (`frame`, `time_s`, then one column per measure), so a person can
//! inspect the measures, plot them, or analyse them again with `--frames` and `--column`.
//! Fixed formatting: times to 1 ns, gain to 1e-6, the rest to 1e-4 of their units. A tracked
//! point's cells are blank from the frame where it was lost.

use std::fmt::Write;

use crate::pipeline::VideoMeasures;

/// The CSV text of one video's measures.
pub fn measures_csv(v: &VideoMeasures) -> String {
    let m = &v.measures;
    let mut header = vec!["frame", "time_s", "gain", "pca1"];
    if m.track.is_some() {
        header.extend(["track_x_px", "track_y_px", "track_px"]);
    }
    if m.angle_rad.is_some() {
        header.push("angle_rad");
    }
    let mut out = header.join(",");
    for (name, _) in &m.rois {
        let _ = write!(out, ",roi_{name}");
    }
    out.push('\n');
    let cell = |out: &mut String, v: f64, digits: usize| {
        if v.is_finite() {
            let _ = write!(out, ",{v:.digits$}");
        } else {
            out.push(',');
        }
    };
    for (i, (index, t)) in m.frame_index.iter().zip(&v.time_s).enumerate() {
        let _ = write!(out, "{index},{t:.9}");
        cell(&mut out, m.gain[i], 6);
        cell(&mut out, m.pca1[i], 4);
        if let Some(track) = &m.track {
            let lost = track.lost_at.is_some_and(|l| i >= l);
            for v in [track.x_px[i], track.y_px[i], track.along_px[i]] {
                cell(&mut out, if lost { f64::NAN } else { v }, 4);
            }
        }
        if let Some(a) = &m.angle_rad {
            cell(&mut out, a[i], 6);
        }
        for (_, v) in &m.rois {
            cell(&mut out, v[i], 4);
        }
        out.push('\n');
    }
    out
}
