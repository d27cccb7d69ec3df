//! Frame-stream decoding: a CSV with a header row, an optional time column (`time_s`, or
//! `time_ms` / `time_us` read in their units; video clock), an optional integer `frame` column,
//! and one or more per-frame measures. Header names match without regard to case. The motion
//! column is the first numeric column other than time and frame unless named; the loading
//! column defaults to the motion column.
//!
//! The separator (comma, semicolon or tab) is the one that splits the header and the first rows
//! into the same number of fields, as spreadsheet exports are sniffed (common practice); with a
//! semicolon or tab, numbers may use a decimal comma (`1,25`). A blank, `NaN` or non-numeric
//! cell drops its row, which is counted and named; the rows after it keep their own times.
//! While parsing, the step of the last printed digit of each number is kept (the printing
//! resolution), for the frame clock.

use std::path::Path;

use crate::error::{Error, Result};
use crate::signal::{ColumnOrigin, ColumnUse, FrameSeries, FramesInput};

/// Fewest frames a stream must have for any video event to be located.
pub const MIN_FRAMES: usize = 10;

/// Rows after the header looked at to find the separator and the decimal mark.
const SNIFF_ROWS: usize = 20;

/// Dropped rows named in the record and in messages.
const DROPPED_LINES_KEPT: usize = 10;

/// How to read a frame CSV.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FrameOptions {
    /// Motion column name; default: first numeric column other than time and `frame`.
    pub motion_column: Option<String>,
    /// Loading column name; default: the motion column.
    pub loading_column: Option<String>,
    /// Frame rate used when there is no time column, frames per second.
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

/// Shortens a field for an error message (a hostile file may hold one enormous field).
fn clip(text: &str) -> String {
    if text.chars().count() > 40 {
        let head: String = text.chars().take(40).collect();
        format!("{head}...")
    } else {
        text.to_string()
    }
}

/// The separator as a person reads it in a message.
fn separator_name(sep: u8) -> &'static str {
    match sep {
        b';' => "semicolon",
        b'\t' => "tab",
        _ => "comma",
    }
}

/// What one cell holds.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Cell {
    /// Blank, or a missing-value marker (`NaN`, `NA`), as spreadsheets and data frames write
    /// a missing value.
    Missing,
    /// Text that is not a number.
    NotNumber,
    /// A number, and the step of its last printed digit (same units).
    Number { value: f64, step: f64 },
}

/// Powers of ten as the nearest doubles (`1e-4` parsed, not `10^-4` multiplied out).
struct Powers([f64; 81]);

impl Powers {
    const LOW: i32 = -40;

    fn new() -> Self {
        let mut table = [0.0; 81];
        for (i, v) in table.iter_mut().enumerate() {
            let k = i as i32 + Self::LOW;
            *v = format!("1e{k}").parse().unwrap_or(0.0);
        }
        Powers(table)
    }

    fn get(&self, k: i32) -> f64 {
        let i = k - Self::LOW;
        match usize::try_from(i).ok().and_then(|i| self.0.get(i)) {
            Some(v) => *v,
            None => format!("1e{k}").parse().unwrap_or(f64::NAN),
        }
    }
}

/// Reads one cell. `decimal_comma`: the file writes `1,25`; `scale_exp`: the column's unit is
/// 10^scale_exp seconds (-3 for ms), applied to the decimal text so that the value is the
/// nearest double to the exact scaled number.
fn parse_cell(text: &str, decimal_comma: bool, scale_exp: i32, powers: &Powers) -> Cell {
    let t = text.trim();
    if t.is_empty()
        || t.eq_ignore_ascii_case("nan")
        || t.eq_ignore_ascii_case("na")
        || t.eq_ignore_ascii_case("n/a")
    {
        return Cell::Missing;
    }
    // Marks and exponent letters are ASCII, so they are looked for byte by byte (a byte
    // below 0x80 is never part of a longer UTF-8 character): the same indices as a search
    // by char, at a fraction of its cost, once per cell of every row.
    let (mark, other) = if decimal_comma {
        (b',', b'.')
    } else {
        (b'.', b',')
    };
    // A decimal point in a decimal-comma file (or a comma in a decimal-point file) is refused
    // as not a number: it may be a thousands separator.
    if t.as_bytes().contains(&other) {
        return Cell::NotNumber;
    }
    let (mantissa, exponent) = match t.bytes().position(|b| b == b'e' || b == b'E') {
        Some(i) => (&t[..i], &t[i + 1..]),
        None => (t, ""),
    };
    let exp: i32 = if exponent.is_empty() {
        0
    } else {
        match exponent.parse() {
            Ok(e) => e,
            Err(_) => return Cell::NotNumber,
        }
    };
    let digits = mantissa.trim_start_matches(['+', '-']);
    let (whole, frac) = match digits.bytes().position(|b| b == mark) {
        Some(i) => (&digits[..i], &digits[i + 1..]),
        None => (digits, ""),
    };
    let all_digits = |s: &str| s.bytes().all(|b| b.is_ascii_digit());
    if (whole.is_empty() && frac.is_empty()) || !all_digits(whole) || !all_digits(frac) {
        // Not plain decimal text; Rust's parser still takes `inf` and the like, which the
        // caller refuses as non-finite.
        return match t.parse::<f64>() {
            Ok(v) if !v.is_finite() => Cell::Number {
                value: v,
                step: f64::NAN,
            },
            _ => Cell::NotNumber,
        };
    }
    let decimals = frac.len() as i32;
    let total_exp = exp.saturating_add(scale_exp);
    let value = if decimal_comma || scale_exp != 0 {
        let sign = if mantissa.starts_with('-') { "-" } else { "" };
        let whole = if whole.is_empty() { "0" } else { whole };
        let frac = if frac.is_empty() { "0" } else { frac };
        format!("{sign}{whole}.{frac}e{total_exp}").parse::<f64>()
    } else {
        t.parse::<f64>()
    };
    match value {
        Ok(value) => Cell::Number {
            value,
            step: powers.get(total_exp.saturating_sub(decimals)),
        },
        Err(_) => Cell::NotNumber,
    }
}

/// Separator and decimal mark of a CSV, from its header and first rows.
fn sniff(path: &Path, bytes: &[u8]) -> Result<(u8, bool)> {
    let count_fields = |sep: u8| -> Vec<usize> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .delimiter(sep)
            .from_reader(bytes);
        reader
            .records()
            .take(SNIFF_ROWS + 1)
            .map_while(|r| r.ok())
            .map(|r| r.len())
            .collect()
    };
    let candidates = [b',', b';', b'\t'];
    let counts: Vec<Vec<usize>> = candidates.iter().map(|&s| count_fields(s)).collect();
    let header_fields = |i: usize| counts[i].first().copied().unwrap_or(0);
    let consistent =
        |i: usize| header_fields(i) >= 2 && counts[i].iter().all(|&n| n == header_fields(i));
    let sep_index = (0..candidates.len())
        .filter(|&i| consistent(i))
        .max_by_key(|&i| (header_fields(i), std::cmp::Reverse(i)))
        .or_else(|| {
            // No separator splits every row alike: take the one that splits the header most,
            // and let the row that disagrees be reported with the separator named.
            (0..candidates.len()).max_by_key(|&i| (header_fields(i), std::cmp::Reverse(i)))
        })
        .unwrap_or(0);
    let sep = candidates[sep_index];
    if sep == b',' {
        return Ok((sep, false));
    }
    // With a semicolon or tab, a decimal comma shows as a comma between digits.
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .delimiter(sep)
        .from_reader(bytes);
    let mut comma = None;
    let mut point = None;
    for (row, record) in reader.records().take(SNIFF_ROWS).enumerate() {
        let Ok(record) = record else { break };
        for cell in record.iter().map(str::trim) {
            let numeric_like = !cell.is_empty()
                && cell
                    .bytes()
                    .all(|b| b.is_ascii_digit() || b"+-.,eE".contains(&b))
                && cell.bytes().any(|b| b.is_ascii_digit());
            if numeric_like && cell.contains(',') {
                comma.get_or_insert((row + 2, cell.to_string()));
            }
            if numeric_like && cell.contains('.') {
                point.get_or_insert((row + 2, cell.to_string()));
            }
        }
    }
    match (comma, point) {
        (Some((lc, c)), Some((lp, p))) => Err(Error::malformed(
            path,
            format!(
                "{}-separated, but numbers use both a decimal comma (line {lc}: {:?}) and a decimal point (line {lp}: {:?}); write them one way",
                separator_name(sep),
                clip(&c),
                clip(&p)
            ),
        )),
        (Some(_), None) => Ok((sep, true)),
        _ => Ok((sep, false)),
    }
}

/// In a one-column file a blank cell is an empty line, which a CSV reader skips: it would
/// move every later row up one slot. Such lines (not those at the end) become `""`, a row with
/// one blank cell. `None` when nothing needs quoting.
fn blank_lines_quoted(bytes: &[u8], sep: u8) -> Option<Vec<u8>> {
    let header_end = bytes.iter().position(|&b| b == b'\n')?;
    let header = &bytes[..header_end];
    if header.contains(&sep) || header.contains(&b'"') {
        return None;
    }
    let body = &bytes[header_end + 1..];
    let lines: Vec<&[u8]> = body.split(|&b| b == b'\n').collect();
    let blank = |l: &[u8]| l.iter().all(|&b| b == b'\r');
    let last = lines.iter().rposition(|l| !blank(l))?;
    if !lines[..last].iter().any(|l| blank(l)) {
        return None;
    }
    let mut out = bytes[..=header_end].to_vec();
    for (i, l) in lines.iter().enumerate() {
        if i <= last && blank(l) {
            out.extend_from_slice(b"\"\"");
        }
        out.extend_from_slice(l);
        if i + 1 < lines.len() {
            out.push(b'\n');
        }
    }
    Some(out)
}

/// The column headed `name` without regard to case; two such columns are an error.
fn find_column(path: &Path, headers: &[String], name: &str) -> Result<Option<usize>> {
    let matches: Vec<usize> = (0..headers.len())
        .filter(|&i| headers[i].eq_ignore_ascii_case(name))
        .collect();
    match matches.as_slice() {
        [] => Ok(None),
        [i] => Ok(Some(*i)),
        _ => Err(Error::malformed(
            path,
            format!(
                "columns {} all match `{name}` without regard to case; rename all but one",
                matches
                    .iter()
                    .map(|&i| format!("`{}`", headers[i]))
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        )),
    }
}

/// Time column headers and the power of ten of their unit in seconds.
const TIME_COLUMNS: [(&str, i32, &str); 3] = [
    ("time_s", 0, "s"),
    ("time_ms", -3, "ms"),
    ("time_us", -6, "us"),
];

/// Decodes `bytes` (the content of `path`) into a frame series.
pub fn decode_frames(path: &Path, bytes: &[u8], options: &FrameOptions) -> Result<FrameSeries> {
    if bytes.is_empty() {
        return Err(Error::malformed(path, "file is empty (0 bytes)"));
    }
    // A byte-order mark, as spreadsheet programs write before UTF-8 text.
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let (sep, decimal_comma) = sniff(path, bytes)?;
    let quoted;
    let bytes = match blank_lines_quoted(bytes, sep) {
        Some(b) => {
            quoted = b;
            &quoted[..]
        }
        None => bytes,
    };
    let how = if decimal_comma {
        format!("{}-separated, decimal comma", separator_name(sep))
    } else {
        format!("{}-separated", separator_name(sep))
    };
    let powers = Powers::new();
    // Fields are trimmed where they are read: the reader's own trimming builds a new record
    // for every row.
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .delimiter(sep)
        .from_reader(bytes);
    let headers: Vec<String> = reader
        .headers()
        .map_err(|e| Error::malformed(path, format!("cannot read the header row ({how}): {e}")))?
        .iter()
        .map(|h| h.trim().to_string())
        .collect();
    if headers.iter().all(|h| {
        matches!(
            parse_cell(h, decimal_comma, 0, &powers),
            Cell::Number { .. }
        )
    }) {
        return Err(Error::malformed(
            path,
            "the first row holds numbers; a header row naming the columns is required",
        ));
    }
    let mut time = None;
    for (name, scale_exp, unit) in TIME_COLUMNS {
        if let Some(c) = find_column(path, &headers, name)? {
            time = Some((c, scale_exp, unit));
            break;
        }
    }
    let time_col = time.map(|t| t.0);
    let frame_col = find_column(path, &headers, "frame")?;
    // One record is read into again and again (a new record per row costs an allocation).
    let mut record = csv::StringRecord::new();
    let read_row = |reader: &mut csv::Reader<&[u8]>, record: &mut csv::StringRecord, line: u64| {
        reader.read_record(record).map_err(|e| {
            let hint = if sep == b',' && matches!(e.kind(), csv::ErrorKind::UnequalLengths { .. }) {
                " (numbers with a decimal comma need a semicolon or tab as the separator)"
            } else {
                ""
            };
            Error::malformed(path, format!("cannot read line {line} ({how}): {e}{hint}"))
        })
    };
    if !read_row(&mut reader, &mut record, 2)? {
        return Err(Error::malformed(path, "no frames after the header row"));
    }
    let columns_list = || headers.join(", ");
    let (motion_col, motion_from) = match &options.motion_column {
        Some(name) => (
            find_column(path, &headers, name)?.ok_or_else(|| {
                Error::malformed(
                    path,
                    format!("no column named `{name}` (columns: {})", columns_list()),
                )
            })?,
            ColumnOrigin::Named,
        ),
        None => {
            // The first column other than time and frame holding a number in one of the first
            // rows (a blank first cell does not hide a numeric column).
            let mut sniffer = csv::ReaderBuilder::new()
                .has_headers(true)
                .flexible(true)
                .delimiter(sep)
                .from_reader(bytes);
            let rows: Vec<csv::StringRecord> = sniffer
                .records()
                .take(SNIFF_ROWS)
                .map_while(|r| r.ok())
                .collect();
            let numeric = |i: usize| {
                rows.iter().any(|r| {
                    r.get(i).is_some_and(|v| {
                        matches!(parse_cell(v, decimal_comma, 0, &powers), Cell::Number { value, .. } if value.is_finite())
                    })
                })
            };
            let col = (0..headers.len())
                .find(|&i| Some(i) != time_col && Some(i) != frame_col && numeric(i))
                .ok_or_else(|| {
                    Error::malformed(
                        path,
                        format!(
                            "no numeric column besides time and `frame` (columns: {}; read as {how})",
                            columns_list()
                        ),
                    )
                })?;
            (col, ColumnOrigin::FirstNumeric)
        }
    };
    let (loading_col, loading_from) = match &options.loading_column {
        Some(name) => (
            find_column(path, &headers, name)?.ok_or_else(|| {
                Error::malformed(
                    path,
                    format!(
                        "no loading column named `{name}` (columns: {})",
                        columns_list()
                    ),
                )
            })?,
            ColumnOrigin::Named,
        ),
        None => (motion_col, ColumnOrigin::MotionColumn),
    };
    let time_scale = time.map_or(0, |t| t.1);
    let mut time_s = Vec::new();
    let mut time_step_s = Vec::new();
    let mut frame_index = Vec::new();
    let mut motion = Vec::new();
    let mut loading = Vec::new();
    let mut row_index = Vec::new();
    let mut motion_step = f64::INFINITY;
    let mut loading_step = f64::INFINITY;
    let mut dropped_rows = 0u64;
    let mut dropped_lines = Vec::new();
    let mut first_drop: Option<(u64, String, String)> = None;
    let mut line = 2u64;
    let mut row = 0u64;
    loop {
        // Every cell the series uses, read before any is kept, so a dropped row leaves no
        // trace in any column.
        let mut cells = [None; 4];
        let mut drop_cell: Option<usize> = None;
        let separate_loading = (loading_col != motion_col).then_some(loading_col);
        let wanted = [time_col, frame_col, Some(motion_col), separate_loading];
        for (slot, col) in wanted.iter().enumerate() {
            let Some(col) = *col else { continue };
            let text = record.get(col).ok_or_else(|| {
                Error::malformed(
                    path,
                    format!("line {line}: missing column `{}` ({how})", headers[col]),
                )
            })?;
            let scale = if slot == 0 { time_scale } else { 0 };
            match parse_cell(text, decimal_comma, scale, &powers) {
                Cell::Number { value, step } => {
                    if !value.is_finite() {
                        return Err(Error::malformed(
                            path,
                            format!(
                                "line {line}, column `{}`: {:?} is not a finite number",
                                headers[col],
                                clip(text.trim())
                            ),
                        ));
                    }
                    cells[slot] = Some((value, step));
                }
                Cell::Missing | Cell::NotNumber => {
                    drop_cell.get_or_insert(col);
                }
            }
        }
        if let Some(col) = drop_cell {
            dropped_rows += 1;
            if dropped_lines.len() < DROPPED_LINES_KEPT {
                dropped_lines.push(line);
            }
            first_drop.get_or_insert_with(|| {
                (
                    line,
                    headers[col].clone(),
                    clip(record.get(col).unwrap_or("").trim()),
                )
            });
        } else {
            if let Some((t, step)) = cells[0] {
                time_s.push(t);
                time_step_s.push(step);
            }
            if let Some((k, _)) = cells[1] {
                if k.fract() != 0.0 || k.abs() > 1e15 {
                    return Err(Error::malformed(
                        path,
                        format!(
                            "line {line}, column `{}`: {k} is not a frame number",
                            headers[frame_col.unwrap_or(0)]
                        ),
                    ));
                }
                frame_index.push(k as i64);
            }
            if let Some((m, step)) = cells[2] {
                motion.push(m);
                motion_step = motion_step.min(step);
            }
            if loading_col != motion_col {
                if let Some((l, step)) = cells[3] {
                    loading.push(l);
                    loading_step = loading_step.min(step);
                }
            }
            row_index.push(row);
        }
        line += 1;
        row += 1;
        if !read_row(&mut reader, &mut record, line)? {
            break;
        }
    }
    if motion.len() < MIN_FRAMES {
        let dropped = match &first_drop {
            Some((l, col, text)) => format!(
                "; {dropped_rows} row(s) dropped for a blank or non-numeric cell, the first at line {l}, column `{col}`: {text:?} (read as {how})"
            ),
            None => String::new(),
        };
        return Err(Error::malformed(
            path,
            format!(
                "only {} frame(s); at least {MIN_FRAMES} are needed{dropped}",
                motion.len()
            ),
        ));
    }
    let line_of = |k: usize| row_index[k] + 2;
    if let Some(frame_c) = frame_col {
        if let Some(w) = frame_index.windows(2).position(|w| w[1] <= w[0]) {
            return Err(Error::malformed(
                path,
                format!(
                    "column `{}` does not increase at line {}",
                    headers[frame_c],
                    line_of(w + 1)
                ),
            ));
        }
    }
    let timestamps_given = time_col.is_some();
    let time_use = match time {
        Some((c, _, unit)) => {
            // Equal neighbours are allowed: rounded timestamps repeat at high frame rates, and
            // the frame clock fit (detect::clock) resolves them. A step back is an error.
            if let Some(w) = time_s.windows(2).position(|w| w[1] < w[0]) {
                return Err(Error::malformed(
                    path,
                    format!(
                        "column `{}` goes backwards at line {} ({} after {} s)",
                        headers[c],
                        line_of(w + 1),
                        time_s[w + 1],
                        time_s[w]
                    ),
                ));
            }
            ColumnUse {
                column: Some(headers[c].clone()),
                unit: Some(unit.to_string()),
                from: ColumnOrigin::TimeHeader,
            }
        }
        None => {
            let fps = options.fps.ok_or_else(|| {
                Error::malformed(
                    path,
                    format!(
                        "no time column (`time_s`, `time_ms` or `time_us`; columns: {}) and no frame rate given (use --fps or the rig profile's fps)",
                        columns_list()
                    ),
                )
            })?;
            // Without a frame column a dropped row keeps its slot: row k is at k / fps.
            time_s = if frame_col.is_some() {
                frame_index.iter().map(|&k| k as f64 / fps).collect()
            } else {
                row_index.iter().map(|&k| k as f64 / fps).collect()
            };
            ColumnUse {
                column: frame_col.map(|c| headers[c].clone()),
                unit: None,
                from: if frame_col.is_some() {
                    ColumnOrigin::FrameOverFps
                } else {
                    ColumnOrigin::RowOverFps
                },
            }
        }
    };
    if loading_col == motion_col {
        loading = motion.clone();
        loading_step = motion_step;
    }
    let finite = |s: f64| s.is_finite().then_some(s);
    Ok(FrameSeries {
        time_s,
        frame_index: frame_col.map(|_| frame_index),
        motion,
        loading,
        motion_column: headers[motion_col].clone(),
        loading_column: headers[loading_col].clone(),
        timestamps_given,
        row_index,
        time_step_s: timestamps_given.then_some(time_step_s),
        motion_step: finite(motion_step),
        loading_step: finite(loading_step),
        input: FramesInput {
            separator: (sep as char).to_string(),
            decimal_comma,
            time: time_use,
            motion: ColumnUse {
                column: Some(headers[motion_col].clone()),
                unit: None,
                from: motion_from,
            },
            loading: ColumnUse {
                column: Some(headers[loading_col].clone()),
                unit: None,
                from: loading_from,
            },
            dropped_rows,
            dropped_lines,
        },
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

    fn read(name: &str, bytes: &[u8]) -> Result<FrameSeries> {
        decode_frames(Path::new(name), bytes, &FrameOptions::default())
    }

    #[test]
    fn time_column_and_first_numeric_column_are_found() {
        let bytes = csv_text("frame,time_s,label,brightness", 20, |i| {
            format!("{i},{},roi,{}", i as f64 * 0.001, 100 + i)
        });
        let f = read("a.frames.csv", &bytes).unwrap();
        assert_eq!(f.motion_column, "brightness");
        assert_eq!(f.len(), 20);
        assert_eq!(f.time_s[3], 0.003);
        assert_eq!(f.motion[3], 103.0);
        assert_eq!(f.input.separator, ",");
        assert_eq!(f.input.motion.from, ColumnOrigin::FirstNumeric);
        assert_eq!(f.input.loading.from, ColumnOrigin::MotionColumn);
        assert_eq!(f.input.time.column.as_deref(), Some("time_s"));
        assert_eq!(f.input.time.from, ColumnOrigin::TimeHeader);
        assert_eq!(f.row_index, (0..20).collect::<Vec<u64>>());
    }

    #[test]
    fn spaces_around_names_and_values_are_ignored() {
        let bytes = csv_text(" frame , time_s , brightness ", 20, |i| {
            format!(" {i} ,  {} , {} ", i as f64 * 0.001, 100 + i)
        });
        let f = read("s.frames.csv", &bytes).unwrap();
        assert_eq!(f.motion_column, "brightness");
        assert_eq!(f.time_s[3], 0.003);
        assert_eq!(f.motion[3], 103.0);
    }

    #[test]
    fn header_names_match_without_regard_to_case() {
        let bytes = csv_text("Frame,Time_S,Brightness", 20, |i| {
            format!("{i},{},{}", i as f64 * 0.001, 100 + 2 * i)
        });
        let f = read("case.frames.csv", &bytes).unwrap();
        assert_eq!(f.motion_column, "Brightness");
        assert!(f.timestamps_given);
        assert_eq!(f.frame_index.as_ref().unwrap()[4], 4);
        assert_eq!(f.motion[4], 108.0);
        let named = FrameOptions {
            motion_column: Some("brightness".into()),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("case.frames.csv"), &bytes, &named).unwrap();
        assert_eq!(f.input.motion.from, ColumnOrigin::Named);
        assert_eq!(f.motion[4], 108.0);
        let twice = csv_text("time_s,Time_S,b", 20, |i| format!("{i},{i},{i}"));
        let e = read("twice.csv", &twice).unwrap_err().to_string();
        assert!(e.contains("twice.csv") && e.contains("`Time_S`"), "{e}");
    }

    #[test]
    fn time_in_milliseconds_and_microseconds_is_read_in_its_unit() {
        let ms = csv_text("frame,time_ms,angle_deg", 20, |i| {
            format!("{i},{:.2},{}", 12.5 + i as f64 * 0.25, i)
        });
        let f = read("ms.frames.csv", &ms).unwrap();
        // The scaled value is the nearest double to the exact decimal (13.0 ms = 0.013 s).
        assert_eq!(f.time_s[2], 0.013);
        assert_eq!(f.input.time.unit.as_deref(), Some("ms"));
        assert_eq!(f.time_step_s.as_ref().unwrap()[2], 1e-5);
        let us = csv_text("TIME_US,angle_deg", 20, |i| format!("{},{i}", 250 * i));
        let f = read("us.frames.csv", &us).unwrap();
        assert_eq!(f.time_s[4], 0.001);
        assert_eq!(f.time_step_s.as_ref().unwrap()[4], 1e-6);
        assert_eq!(f.motion_column, "angle_deg");
    }

    #[test]
    fn semicolon_files_with_decimal_commas_are_read() {
        let bytes = csv_text("frame;time_s;brightness", 20, |i| {
            format!("{i};0,{:03};{},5", i, 100 + i)
        });
        let f = read("de.frames.csv", &bytes).unwrap();
        assert_eq!(f.input.separator, ";");
        assert!(f.input.decimal_comma);
        assert_eq!(f.time_s[7], 0.007);
        assert_eq!(f.motion[7], 107.5);
        assert_eq!(f.time_step_s.as_ref().unwrap()[7], 1e-3);
        assert_eq!(f.motion_step, Some(0.1));
    }

    #[test]
    fn tab_separated_files_are_read() {
        let bytes = csv_text("time_s\tbrightness", 20, |i| {
            format!("{}\t{}", i as f64 / 500.0, i)
        });
        let f = read("tab.frames.csv", &bytes).unwrap();
        assert_eq!(f.input.separator, "\t");
        assert_eq!(f.time_s[5], 0.01);
    }

    #[test]
    fn mixed_decimal_marks_and_decimal_commas_in_a_comma_file_are_refused_naming_them() {
        let mixed = csv_text("time_s;brightness", 20, |i| format!("0.{i:03};{i},5"));
        let e = read("mixed.csv", &mixed).unwrap_err().to_string();
        assert!(
            e.contains("mixed.csv")
                && e.contains("semicolon")
                && e.contains("decimal comma")
                && e.contains("decimal point"),
            "{e}"
        );
        // `0,001,5` splits into three fields where the header has two.
        let comma = csv_text("time_s,brightness", 20, |i| format!("0,{i:03},{i}"));
        let e = read("comma.csv", &comma).unwrap_err().to_string();
        assert!(
            e.contains("comma.csv") && e.contains("comma-separated") && e.contains("decimal comma"),
            "{e}"
        );
    }

    #[test]
    fn without_a_time_column_fps_is_required() {
        let bytes = csv_text("brightness", 20, |i| format!("{i}"));
        let e = read("b.frames.csv", &bytes).unwrap_err();
        assert!(e.to_string().contains("b.frames.csv") && e.to_string().contains("fps"));
        let opts = FrameOptions {
            fps: Some(500.0),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("b.frames.csv"), &bytes, &opts).unwrap();
        assert_eq!(f.time_s[10], 0.02);
        assert_eq!(f.input.time.from, ColumnOrigin::RowOverFps);
        assert!(f.time_step_s.is_none());
    }

    #[test]
    fn a_blank_or_non_numeric_cell_drops_its_row_and_later_rows_keep_their_times() {
        let bytes = csv_text("time_s,brightness", 20, |i| match i {
            5 => format!("{},oops", i as f64 * 0.001),
            9 => format!("{},", i as f64 * 0.001),
            12 => format!("{},NaN", i as f64 * 0.001),
            _ => format!("{},{i}", i as f64 * 0.001),
        });
        let f = read("c.csv", &bytes).unwrap();
        assert_eq!(f.len(), 17);
        assert_eq!(f.input.dropped_rows, 3);
        // The header is line 1, row 0 is line 2.
        assert_eq!(f.input.dropped_lines, vec![7, 11, 14]);
        assert_eq!(f.row_index[5], 6);
        assert_eq!(f.time_s[5], 0.006);
        assert_eq!(f.motion[5], 6.0);
        assert_eq!(f.time_step_s.as_ref().unwrap().len(), 17);
    }

    #[test]
    fn a_dropped_row_keeps_its_slot_when_only_row_order_gives_time() {
        let bytes = csv_text("brightness", 20, |i| {
            if i == 3 {
                String::new()
            } else {
                format!("{i}")
            }
        });
        // A single-column file: a blank line is a row with a blank cell, not the end.
        let opts = FrameOptions {
            fps: Some(1000.0),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("r.csv"), &bytes, &opts).unwrap();
        assert_eq!(f.len(), 19);
        assert_eq!(f.row_index[3], 4);
        assert_eq!(f.time_s[3], 0.004);
        assert_eq!(f.motion[3], 4.0);
    }

    #[test]
    fn too_many_dropped_rows_name_the_first_cell() {
        let bytes = csv_text("time_s,brightness", 20, |i| {
            if i < 3 {
                format!("{},{i}", i as f64 * 0.001)
            } else {
                format!("{},n/a?", i as f64 * 0.001)
            }
        });
        let e = read("all.csv", &bytes).unwrap_err().to_string();
        assert!(
            e.contains("all.csv")
                && e.contains("17 row(s) dropped")
                && e.contains("line 5")
                && e.contains("brightness"),
            "{e}"
        );
    }

    #[test]
    fn headerless_infinite_and_non_monotonic_inputs_are_rejected() {
        let headerless = csv_text("0.0,1.0", 20, |i| format!("{},{i}", i as f64));
        assert!(read("h.csv", &headerless).is_err());
        let inf = csv_text("time_s,b", 20, |i| {
            format!(
                "{},{}",
                i as f64,
                if i == 3 { "inf".into() } else { i.to_string() }
            )
        });
        let e = read("n.csv", &inf).unwrap_err();
        assert!(e.to_string().contains("finite"), "{e}");
        let back = csv_text("time_s,b", 20, |i| {
            format!("{},{i}", if i == 9 { 1.0 } else { i as f64 })
        });
        let e = read("m.csv", &back).unwrap_err();
        assert!(
            e.to_string().contains("goes backwards") && e.to_string().contains("line 11"),
            "{e}"
        );
    }

    #[test]
    fn a_separate_loading_column_is_read() {
        let bytes = csv_text("time_s,angle_deg,spring_px", 12, |i| {
            format!("{i},{},{}.5", i * 2, i * 3)
        });
        let opts = FrameOptions {
            loading_column: Some("Spring_PX".into()),
            ..FrameOptions::default()
        };
        let f = decode_frames(Path::new("l.csv"), &bytes, &opts).unwrap();
        assert_eq!(f.motion[4], 8.0);
        assert_eq!(f.loading[4], 12.5);
        assert_eq!(f.loading_column, "spring_px");
        assert_eq!(f.input.loading.from, ColumnOrigin::Named);
        assert_eq!(f.motion_step, Some(1.0));
        assert_eq!(f.loading_step, Some(0.1));
    }

    #[test]
    fn printed_steps_follow_the_last_digit() {
        let powers = Powers::new();
        let step = |t: &str| match parse_cell(t, false, 0, &powers) {
            Cell::Number { step, .. } => step,
            other => panic!("{t}: {other:?}"),
        };
        assert_eq!(step("1.2345"), 1e-4);
        assert_eq!(step("0.000125"), 1e-6);
        assert_eq!(step("12"), 1.0);
        assert_eq!(step("-3.50"), 1e-2);
        assert_eq!(step("1.5e-3"), 1e-4);
        assert_eq!(step("2.25E+02"), 1.0);
        assert_eq!(step(".5"), 0.1);
        assert_eq!(step("7."), 1.0);
        assert_eq!(step("1e-7"), 1e-7);
        let comma = |t: &str| parse_cell(t, true, 0, &powers);
        assert_eq!(
            comma("1,25"),
            Cell::Number {
                value: 1.25,
                step: 0.01
            }
        );
        assert_eq!(comma("1.250"), Cell::NotNumber);
        assert_eq!(parse_cell("1,25", false, 0, &powers), Cell::NotNumber);
        assert_eq!(parse_cell("  ", false, 0, &powers), Cell::Missing);
        assert_eq!(parse_cell("0x10", false, 0, &powers), Cell::NotNumber);
        // Milliseconds scaled in the decimal text: 0.1 ms is the double nearest 1e-4 s.
        assert_eq!(
            parse_cell("0.1", false, -3, &powers),
            Cell::Number {
                value: 1e-4,
                step: 1e-4
            }
        );
    }

    #[test]
    fn a_byte_order_mark_does_not_hide_the_first_header() {
        let mut bytes = b"\xEF\xBB\xBF".to_vec();
        bytes.extend(csv_text("time_s,brightness", 12, |i| {
            format!("{},{i}", i as f64 * 0.01)
        }));
        let f = read("bom.csv", &bytes).unwrap();
        assert_eq!(f.input.time.column.as_deref(), Some("time_s"));
    }
}
