//! H.264 in MP4/MOV (cargo feature `h264`): the committed streams in `tests/data/video/h264/`
//! decoded frame by frame, each frame's luma sum and time compared with the reference decoder's
//! (PyAV over FFmpeg's libavcodec, `reference-sums.json`, written by `make.py` beside them).
#![cfg(feature = "h264")]

mod common;

use std::path::PathBuf;

use latchtime::decode::video::{self, Frame};
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    common::repo().join("tests/data/video/h264").join(name)
}

use common::read_all_frames as read_all;

/// (time_s, luma sum) per frame as PyAV decoded `name` (its version is named in the file).
fn reference(name: &str) -> Vec<(f64, u64)> {
    let text = std::fs::read_to_string(data("reference-sums.json")).unwrap();
    let json: Value = serde_json::from_str(&text).unwrap();
    assert!(json["decoder"].as_str().unwrap().starts_with("PyAV "));
    json["streams"][name]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["time_s"].as_f64().unwrap(),
                f["luma_sum"].as_u64().unwrap(),
            )
        })
        .collect()
}

/// Decodes `name` and checks every frame's luma sum equals the reference decoder's exactly (both
/// give the coded Y plane, so a bit-exact decoder matches to the unit), and that its time (index
/// over the container's rate) is the reference's presentation time less the first one's.
fn matches_reference(name: &str) -> Vec<Frame> {
    let path = data(name);
    let fps = video::open(&path).unwrap().info().container_fps.unwrap();
    let frames = read_all(&path).unwrap();
    let want = reference(name);
    assert_eq!(frames.len(), want.len(), "{name}: frame count");
    for (f, &(t_s, sum)) in frames.iter().zip(&want) {
        let got: f64 = f.luma.iter().map(|&v| f64::from(v)).sum();
        assert_eq!(got as u64, sum, "{name}: frame {} luma sum", f.index);
        let t0 = want[0].0;
        assert!(
            (f.index as f64 / fps - (t_s - t0)).abs() < 1e-6,
            "{name}: frame {} at {} s, reference {} s",
            f.index,
            f.index as f64 / fps,
            t_s - t0
        );
    }
    frames
}

#[test]
fn baseline_stream_matches_the_reference_decoder_frame_by_frame() {
    let name = "bar-64x48-40frames-240fps-x264-baseline.mp4";
    let source = video::open(&data(name)).unwrap();
    assert_eq!(source.info().format, "mp4-h264");
    assert_eq!(source.info().container_fps, Some(240.0));
    assert_eq!(source.info().frames_listed, 40);
    let frames = matches_reference(name);
    assert_eq!((frames[0].width, frames[0].height), (64, 48));
    assert_eq!(frames.last().unwrap().index, 39);
}

#[test]
fn b_frame_stream_comes_out_in_display_order_matching_the_reference() {
    let frames = matches_reference("bar-64x48-40frames-240fps-x264-high-bframes.mp4");
    let index: Vec<i64> = frames.iter().map(|f| f.index).collect();
    assert_eq!(index, (0..40).collect::<Vec<_>>());
}

#[test]
fn a_missing_presentation_time_in_a_mov_is_a_dropped_frame() {
    let name = "bar-64x48-39frames-240fps-x264-high-bframes-frame-20-dropped.mov";
    let source = video::open(&data(name)).unwrap();
    assert_eq!(source.info().format, "mov-h264");
    // A 1/90000 time scale, 375 ticks a frame.
    assert_eq!(source.info().container_fps, Some(240.0));
    let frames = matches_reference(name);
    let index: Vec<i64> = frames.iter().map(|f| f.index).collect();
    let want: Vec<i64> = (0..40).filter(|&k| k != 20).collect();
    assert_eq!(index, want);
}

#[test]
fn an_hevc_stream_is_an_error_naming_the_file_and_the_codec() {
    let path = data("bar-64x48-40frames-240fps-x265.mp4");
    let err = video::open(&path).err().unwrap().to_string();
    assert!(err.contains("x265.mp4"), "{err}");
    assert!(err.contains("hev1") || err.contains("hvc1"), "{err}");
    assert!(err.contains("HEVC"), "{err}");
}

#[test]
fn a_truncated_stream_is_an_error_naming_the_file_never_a_panic() {
    let dir = tempfile::tempdir().unwrap();
    let bytes = std::fs::read(data("bar-64x48-40frames-240fps-x264-high-bframes.mp4")).unwrap();
    for keep in [bytes.len() * 9 / 10, bytes.len() / 2, bytes.len() / 5, 40] {
        let cut = dir.path().join(format!("cut-{keep}.mp4"));
        std::fs::write(&cut, &bytes[..keep]).unwrap();
        let err = read_all(&cut).err().unwrap().to_string();
        assert!(err.contains(&format!("cut-{keep}.mp4")), "{err}");
    }
}

#[test]
fn a_stream_cut_after_its_sample_table_is_an_error_naming_the_file_and_sample() {
    let path = data("bar-64x48-40frames-240fps-x264-baseline-faststart-cut-at-60-percent.mp4");
    let err = read_all(&path).err().unwrap().to_string();
    assert!(err.contains("faststart-cut-at-60-percent.mp4"), "{err}");
    assert!(err.contains("past the end of the file"), "{err}");
}

#[test]
fn damaged_bytes_anywhere_give_frames_or_an_error_never_a_panic() {
    // Fixed-seed corruption (a xorshift walk): 300 copies of the B-frame stream with 1-4 bytes
    // replaced each, covering the sample data and the sample table.
    let dir = tempfile::tempdir().unwrap();
    let bytes = std::fs::read(data("bar-64x48-40frames-240fps-x264-high-bframes.mp4")).unwrap();
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut next = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        state
    };
    let path = dir.path().join("damaged.mp4");
    for _ in 0..300 {
        let mut copy = bytes.clone();
        for _ in 0..=(next() % 4) {
            let at = (next() % copy.len() as u64) as usize;
            copy[at] = next() as u8;
        }
        std::fs::write(&path, &copy).unwrap();
        if let Err(e) = read_all(&path) {
            assert!(e.to_string().contains("damaged.mp4"), "{e}");
        }
    }
}
