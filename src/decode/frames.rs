//! Frame-stream decoding: a CSV with a header row, an optional `time_s` column (video clock,
//! seconds), an optional integer `frame` column, and one or more per-frame measures. The motion
//! column is the first numeric column other than those two unless named; the loading column
//! defaults to the motion column.

use std::path::Path;

use crate::error::{Error, Result};
use crate::signal::FrameSeries;

/// Fewest frames a stream must have for any video event to be located.
pub const MIN_FRAMES: usize = 10;

/// How to read a frame CSV.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FrameOptions {
    /// Motion column name; default: first numeric column other than `time_s` and `frame`.
    pub motion_column: Option<String>,
    /// Loading column name; default: the motion column.
    pub loading_column: Option<String>,
    /// Frame rate used when there is no `time_s` column, frames per second.
    pub fps: Option<f64>,
}

impl From<&crate::rig::RigProfile> for FrameOptions {
    fn from(rig: &crate::rig::RigProfile) -> Self {
        FrameOptions {
            motion_column: rig.frames_column.clone(),
            loading_column: rig.loading_column.clone(),
            fps: rig.fps,
        }
    }
}

fn parse_number(path: &Path, line: u64, column: &str, text: &str) -> Result<f64> {
    let v: f64 = text.parse().map_err(|_| {
        Error::malformed(
            path,
            format!(
                "line {line}, column `{column}`: {:?} is not a number",
                clip(text)
            ),
        )
    })?;
    if !v.is_finite() {
        return Err(Error::malformed(
            path,
            format!(
                "line {line}, column `{column}`: {:?} is not a finite number",
                clip(text)
            ),
        ));
    }
    Ok(v)
}

/// Shortens a field for an error message (a hostile file may hold one enormous field).
fn clip(text: &str) -> String {
    if text.chars().count() > 40 {
        let head: String = text.chars().take(40).collect();
        format!("{head}...")
    } else {
        text.to_string()
    }
}

/// Decodes `bytes` (the content of `path`) into a frame series.
pub fn decode_frames(path: &Path, bytes: &[u8], options: &FrameOptions) -> Result<FrameSeries> {
    if bytes.is_empty() {
        return Err(Error::malformed(path, "file is empty (0 bytes)"));
    }
    // Fields are trimmed where they are read: the reader's own trimming builds a new record
    // for every row.
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(bytes);
    let headers: Vec<String> = reader
        .headers()
        .map_err(|e| Error::malformed(path, format!("cannot read the header row: {e}")))?
        .iter()
        .map(|h| h.trim().to_string())
        .collect();
    if headers.iter().all(|h| h.parse::<f64>().is_ok()) {
        return Err(Error::malformed(
            path,
            "the first row holds numbers; a header row naming the columns is required",
        ));
    }
    let find = |name: &str| headers.iter().position(|h| h == name);
    let time_col = find("time_s");
    let frame_col = find("frame");
    // One record is read into again and again (a new record per row costs an allocation).
    let mut record = csv::StringRecord::new();
    let read_row = |reader: &mut csv::Reader<&[u8]>, record: &mut csv::StringRecord, line: u64| {
        reader
            .read_record(record)
            .map_err(|e| Error::malformed(path, format!("cannot read line {line}: {e}")))
    };
    if !read_row(&mut reader, &mut record, 2)? {
        return Err(Error::malformed(path, "no frames after the header row"));
    }
    let first = &record;
    let motion_col = match &options.motion_column {
        Some(name) => find(name).ok_or_else(|| {
            Error::malformed(
                path,
                format!("no column named `{name}` (columns: {})", headers.join(", ")),
            )
        })?,
        None => (0..headers.len())
            .find(|&i| {
                Some(i) != time_col
                    && Some(i) != frame_col
                    && first
                        .get(i)
                        .is_some_and(|v| v.trim().parse::<f64>().is_ok())
            })
            .ok_or_else(|| {
                Error::malformed(path, "no numeric column besides `time_s` and `frame`")
            })?,
    };
    let loading_col = match &options.loading_column {
        Some(name) => find(name).ok_or_else(|| {
            Error::malformed(
                path,
                format!(
                    "no loading column named `{name}` (columns: {})",
                    headers.join(", ")
                ),
            )
        })?,
        None => motion_col,
    };
    let mut time_s = Vec::new();
    let mut frame_index = Vec::new();
    let mut motion = Vec::new();
    let mut loading = Vec::new();
    let mut line = 2u64;
    loop {
        let field = |col: usize| {
            record.get(col).map(str::trim).ok_or_else(|| {
                Error::malformed(
                    path,
                    format!("line {line}: missing column `{}`", headers[col]),
                )
            })
        };
        if let Some(c) = time_col {
            time_s.push(parse_number(path, line, "time_s", field(c)?)?);
        }
        if let Some(c) = frame_col {
            let v = parse_number(path, line, "frame", field(c)?)?;
            if v.fract() != 0.0 || v.abs() > 1e15 {
                return Err(Error::malformed(
                    path,
                    format!("line {line}, column `frame`: {v} is not a frame number"),
                ));
            }
            frame_index.push(v as i64);
        }
        motion.push(parse_number(
            path,
            line,
            &headers[motion_col],
            field(motion_col)?,
        )?);
        if loading_col != motion_col {
            loading.push(parse_number(
                path,
                line,
                &headers[loading_col],
                field(loading_col)?,
            )?);
        }
        line += 1;
        if !read_row(&mut reader, &mut record, line)? {
            break;
        }
    }
    if motion.len() < MIN_FRAMES {
        return Err(Error::malformed(
            path,
            format!(
                "only {} frame(s); at least {MIN_FRAMES} are needed",
                motion.len()
            ),
        ));
    }
    if frame_col.is_some() {
        if let Some(w) = frame_index.windows(2).position(|w| w[1] <= w[0]) {
            return Err(Error::malformed(
                path,
                format!("column `frame` does not increase at line {}", w + 3),
            ));
        }
    }
    let timestamps_given = time_col.is_some();
    if timestamps_given {
        // Equal neighbours are allowed: rounded timestamps repeat at high frame rates, and the
        // frame clock fit (detect::clock) resolves them. A step back is an error.
        if let Some(w) = time_s.windows(2).position(|w| w[1] < w[0]) {
            return Err(Error::malformed(
                path,
                format!(
                    "column `time_s` goes backwards at line {} ({} after {})",
                    w + 3,
                    time_s[w + 1],
                    time_s[w]
                ),
            ));
        }
    } else {
        let fps = options.fps.ok_or_else(|| {
            Error::malformed(
                path,
                "no `time_s` column and no frame rate given (use --fps or the rig profile's fps)",
            )
        })?;
        time_s = if frame_col.is_some() {
            frame_index.iter().map(|&k| k as f64 / fps).collect()
        } else {
            (0..motion.len()).map(|k| k as f64 / fps).collect()
        };
    }
    if loading_col == motion_col {
        loading = motion.clone();
    }
    Ok(FrameSeries {
        time_s,
        frame_index: frame_col.map(|_| frame_index),
        motion,
        loading,
        motion_column: headers[motion_col].clone(),
        loading_column: headers[loading_col].clone(),
        timestamps_given,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn csv_text(header: &str, rows: usize, f: impl Fn(usize) -> String) -> Vec<u8> {
        let mut s = format!("{header}\n");
        for i in 0..rows {
            s.push_str(&f(i));
            s.push('\n');
        }
        s.into_bytes()
    }

    #[test]
    fn time_column_and_first_numeric_column_are_found() {
        let bytes = csv_text("frame,time_s,label,brightness", 20, |i| {
            format!("{i},{},roi,{}", i as f64 * 0.001, 100 + i)
        });
        let f = decode_frames(Path::new("a.frames.csv"), &bytes, &FrameOptions::default()).unwrap();
        assert_eq!(f.motion_column, "brightness");
        assert_eq!(f.len(), 20);
        assert_eq!(f.time_s[3], 0.003);
        assert_eq!(f.motion[3], 103.0);
    }

    #[test]
    fn spaces_around_names_and_values_are_ignored() {
        let bytes = csv_text(" frame , time_s , brightness ", 20, |i| {
            format!(" {i} ,  {} , {} ", i as f64 * 0.001, 100 + i)
        });
        let f = decode_frames(Path::new("s.frames.csv"), &bytes, &FrameOptions::default()).unwrap();
        assert_eq!(f.motion_column, "brightness");
        assert_eq!(f.time_s[3], 0.003);
        assert_eq!(f.motion[3], 103.0);
    }

    #[test]
    fn without_time_s_fps_is_required() {
        let bytes = csv_text("brightness", 20, |i| format!("{i}"));
        let e =
            decode_frames(Path::new("b.frames.csv"), &bytes, &FrameOptions::default()).unwrap_err();
        assert!(e.to_string().contains("b.frames.csv") && e.to_string().contains("fps"));
        let opts = FrameOptions {
            fps: Some(500.0),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("b.frames.csv"), &bytes, &opts).unwrap();
        assert_eq!(f.time_s[10], 0.02);
    }

    #[test]
    fn text_in_a_numeric_column_names_line_and_column() {
        let bytes = csv_text("time_s,brightness", 20, |i| {
            if i == 5 {
                format!("{},oops", i as f64 * 0.001)
            } else {
                format!("{},{i}", i as f64 * 0.001)
            }
        });
        let e = decode_frames(Path::new("c.csv"), &bytes, &FrameOptions::default()).unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.contains("line 7") && msg.contains("brightness"),
            "{msg}"
        );
    }

    #[test]
    fn headerless_nan_and_non_monotonic_inputs_are_rejected() {
        let headerless = csv_text("0.0,1.0", 20, |i| format!("{},{i}", i as f64));
        assert!(decode_frames(Path::new("h.csv"), &headerless, &FrameOptions::default()).is_err());
        let nan = csv_text("time_s,b", 20, |i| {
            format!(
                "{},{}",
                i as f64,
                if i == 3 { "NaN".into() } else { i.to_string() }
            )
        });
        let e = decode_frames(Path::new("n.csv"), &nan, &FrameOptions::default()).unwrap_err();
        assert!(e.to_string().contains("finite"), "{e}");
        let back = csv_text("time_s,b", 20, |i| {
            format!("{},{i}", if i == 9 { 1.0 } else { i as f64 })
        });
        let e = decode_frames(Path::new("m.csv"), &back, &FrameOptions::default()).unwrap_err();
        assert!(e.to_string().contains("goes backwards"), "{e}");
    }

    #[test]
    fn a_separate_loading_column_is_read() {
        let bytes = csv_text("time_s,angle_deg,spring_px", 12, |i| {
            format!("{i},{},{}", i * 2, i * 3)
        });
        let opts = FrameOptions {
            loading_column: Some("spring_px".into()),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("l.csv"), &bytes, &opts).unwrap();
        assert_eq!(f.motion[4], 8.0);
        assert_eq!(f.loading[4], 12.0);
        assert_eq!(f.loading_column, "spring_px");
    }
}
