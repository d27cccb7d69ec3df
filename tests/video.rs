//! Video input: every image and AVI format read right against its source, bad videos as
//! error records naming the file and frame, and rendered trials (a bar swinging about a pivot,
//! `latchtime::synth::video`) timed by the binary against their truth.

mod common;

use std::path::{Path, PathBuf};

use latchtime::decode::video::{self, Frame};
use latchtime::rig::RigProfile;
use latchtime::synth::{self, SynthConfig, TrialKind};
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    common::repo().join("tests/data/video").join(name)
}

use common::read_all_frames as read_all;

/// The committed files' source: frame k, pixel (x, y) = min(255, 40 + 4x + 3y + 5k).
fn gradient(k: usize, x: usize, y: usize) -> f32 {
    (40 + 4 * x + 3 * y + 5 * k).min(255) as f32
}

/// Largest and mean absolute difference from the source over every frame.
fn error_against_source(frames: &[Frame]) -> (f32, f32) {
    let (mut worst, mut sum, mut n) = (0.0f32, 0.0f32, 0.0f32);
    for (k, f) in frames.iter().enumerate() {
        assert_eq!((f.width, f.height, f.index), (32, 24, k as i64));
        for y in 0..24 {
            for x in 0..32 {
                let e = (f.luma[y * 32 + x] - gradient(k, x, y)).abs();
                worst = worst.max(e);
                sum += e;
                n += 1.0;
            }
        }
    }
    (worst, sum / n)
}

#[test]
fn raw_grey_avi_is_the_source_exactly_at_the_stated_rate() {
    let path = data("gradient-32x24-12frames-500fps-ffmpeg-raw-gray.avi");
    let source = video::open(&path).unwrap();
    assert_eq!(source.info().format, "avi-raw");
    assert_eq!(source.info().container_fps, Some(500.0));
    let frames = read_all(&path).unwrap();
    assert_eq!(frames.len(), 12);
    assert_eq!(error_against_source(&frames).0, 0.0);
}

#[test]
fn raw_bgr_avi_and_bmp_sequence_are_the_source_within_rounding() {
    for path in [
        data("gradient-32x24-12frames-500fps-ffmpeg-raw-bgr24.avi"),
        data("gradient-32x24-ffmpeg-bmp"),
    ] {
        let frames = read_all(&path).unwrap();
        assert_eq!(frames.len(), 12, "{}", path.display());
        // Grey stored as equal R, G, B: BT.601 weights sum to 1, so luma is the grey level
        // up to float rounding.
        let (worst, _) = error_against_source(&frames);
        assert!(worst <= 0.5, "{}: {worst}", path.display());
    }
}

#[test]
fn mjpeg_avi_and_jpeg_sequence_are_the_source_within_jpeg_loss() {
    for path in [
        data("gradient-32x24-12frames-500fps-ffmpeg-mjpeg.avi"),
        data("gradient-32x24-ffmpeg-jpeg"),
    ] {
        let frames = read_all(&path).unwrap();
        assert_eq!(frames.len(), 12, "{}", path.display());
        // Quality 2 on a smooth gradient: a few grey levels at worst (measured here: see the
        // assertion message), well under the 5-level step between frames.
        let (worst, mean) = error_against_source(&frames);
        assert!(
            worst <= 8.0 && mean <= 2.0,
            "{}: {worst} {mean}",
            path.display()
        );
    }
}

fn write_tiff_pages(path: &Path, pages: &[Vec<u16>], w: u32, h: u32, sixteen: bool) {
    use tiff::encoder::{colortype, TiffEncoder};
    let file = std::fs::File::create(path).unwrap();
    let mut enc = TiffEncoder::new(file).unwrap();
    for p in pages {
        if sixteen {
            enc.write_image::<colortype::Gray16>(w, h, p).unwrap();
        } else {
            let bytes: Vec<u8> = p.iter().map(|&v| v as u8).collect();
            enc.write_image::<colortype::Gray8>(w, h, &bytes).unwrap();
        }
    }
}

fn write_png(path: &Path, values: &[u16], w: u32, h: u32, sixteen: bool) {
    let file = std::fs::File::create(path).unwrap();
    let mut enc = png::Encoder::new(file, w, h);
    enc.set_color(png::ColorType::Grayscale);
    let bytes: Vec<u8> = if sixteen {
        enc.set_depth(png::BitDepth::Sixteen);
        values.iter().flat_map(|v| v.to_be_bytes()).collect()
    } else {
        enc.set_depth(png::BitDepth::Eight);
        values.iter().map(|&v| v as u8).collect()
    };
    enc.write_header()
        .unwrap()
        .write_image_data(&bytes)
        .unwrap();
}

/// A 6 x 4 frame whose values are distinct and span the given bit depth.
fn pattern(k: usize, max: u16) -> Vec<u16> {
    (0..24)
        .map(|i| ((i * 1009 + k * 7919) % (usize::from(max) + 1)) as u16)
        .collect()
}

#[test]
fn tiff_png_and_pgm_sequences_keep_8_12_and_16_bit_values() {
    let dir = tempfile::tempdir().unwrap();
    for (kind, max) in [
        ("tif8", 255u16),
        ("tif16", 65535),
        ("png8", 255),
        ("png16", 65535),
        ("pgm12", 4095),
        ("pgm16", 65535),
    ] {
        let folder = dir.path().join(kind);
        std::fs::create_dir(&folder).unwrap();
        // Frame numbers 3, 4, 6: frame 5 was dropped.
        for k in [3usize, 4, 6] {
            let v = pattern(k, max);
            match kind {
                "tif8" | "tif16" => write_tiff_pages(
                    &folder.join(format!("cam_{k:03}.tif")),
                    &[v],
                    6,
                    4,
                    max > 255,
                ),
                "png8" | "png16" => {
                    write_png(&folder.join(format!("cam_{k:03}.png")), &v, 6, 4, max > 255)
                }
                _ => {
                    let mut b = format!("P5\n6 4\n{max}\n").into_bytes();
                    for x in v {
                        b.extend(x.to_be_bytes());
                    }
                    std::fs::write(folder.join(format!("cam_{k:03}.pgm")), b).unwrap();
                }
            }
        }
        let frames = read_all(&folder).unwrap();
        let index: Vec<i64> = frames.iter().map(|f| f.index).collect();
        assert_eq!(index, [3, 4, 6], "{kind}");
        for (f, k) in frames.iter().zip([3usize, 4, 6]) {
            let want: Vec<f32> = pattern(k, max).into_iter().map(f32::from).collect();
            assert_eq!(f.luma, want, "{kind} frame {k}");
        }
    }
}

#[test]
fn a_multi_page_tiff_alone_in_its_folder_is_one_frame_per_page() {
    let dir = tempfile::tempdir().unwrap();
    let pages: Vec<Vec<u16>> = (0..5).map(|k| pattern(k, 65535)).collect();
    write_tiff_pages(&dir.path().join("stack.tif"), &pages, 6, 4, true);
    let frames = read_all(dir.path()).unwrap();
    assert_eq!(frames.len(), 5);
    for (k, f) in frames.iter().enumerate() {
        assert_eq!(f.index, k as i64);
        assert_eq!(f.luma[5], f32::from(pages[k][5]));
    }
}

fn error_of(path: &Path) -> String {
    match read_all(path) {
        Ok(f) => panic!("{} read as {} frames", path.display(), f.len()),
        Err(e) => e.to_string(),
    }
}

#[test]
fn bad_videos_are_errors_naming_the_file_and_frame() {
    let dir = tempfile::tempdir().unwrap();
    let pgm = |w: usize, h: usize| {
        let mut b = format!("P5\n{w} {h}\n255\n").into_bytes();
        b.extend(vec![7u8; w * h]);
        b
    };
    // Two sequences in one folder.
    let two = dir.path().join("two");
    std::fs::create_dir(&two).unwrap();
    for k in 0..3 {
        std::fs::write(two.join(format!("a_{k}.pgm")), pgm(4, 4)).unwrap();
        std::fs::write(two.join(format!("b_{k}.pgm")), pgm(4, 4)).unwrap();
    }
    let e = error_of(&two);
    assert!(e.contains("two") && e.contains("2 image sequences"), "{e}");
    // Mixed sizes.
    let mixed = dir.path().join("mixed");
    std::fs::create_dir(&mixed).unwrap();
    std::fs::write(mixed.join("f_1.pgm"), pgm(4, 4)).unwrap();
    std::fs::write(mixed.join("f_2.pgm"), pgm(5, 4)).unwrap();
    let e = error_of(&mixed);
    assert!(e.contains("f_2.pgm") && e.contains("frame 2"), "{e}");
    // Mixed bit depths.
    let depths = dir.path().join("depths");
    std::fs::create_dir(&depths).unwrap();
    std::fs::write(depths.join("f_1.pgm"), pgm(4, 4)).unwrap();
    let mut wide = b"P5\n4 4\n65535\n".to_vec();
    wide.extend(vec![1u8; 32]);
    std::fs::write(depths.join("f_2.pgm"), wide).unwrap();
    let e = error_of(&depths);
    assert!(
        e.contains("f_2.pgm") && e.contains("frame 2") && e.contains("16-bit"),
        "{e}"
    );
    // A corrupt frame.
    let corrupt = dir.path().join("corrupt");
    std::fs::create_dir(&corrupt).unwrap();
    std::fs::write(corrupt.join("f_1.png"), b"\x89PNG\r\n\x1a\nnot really").unwrap();
    let e = error_of(&corrupt);
    assert!(e.contains("f_1.png"), "{e}");
    // A truncated AVI.
    let bytes = std::fs::read(data("gradient-32x24-12frames-500fps-ffmpeg-raw-gray.avi")).unwrap();
    let cut = dir.path().join("cut.avi");
    std::fs::write(&cut, &bytes[..bytes.len() * 2 / 3]).unwrap();
    let e = error_of(&cut);
    assert!(e.contains("cut.avi") && e.contains("frame"), "{e}");
}

#[test]
fn frames_at_keeps_only_the_frames_asked_for_and_reads_no_more_than_it_must() {
    let path = data("gradient-32x24-12frames-500fps-ffmpeg-raw-gray.avi");
    let frames = video::frames_at(&path, &[7, 2, 40]).unwrap();
    let indices: Vec<i64> = frames.iter().map(|f| f.index).collect();
    assert_eq!(indices, [2, 7], "frame 40 is not in the video");
    assert_eq!(frames[1].luma[0], gradient(7, 0, 0));
    // Reading stops at the last frame asked for, so a cut later in the file does not matter.
    let dir = tempfile::tempdir().unwrap();
    let bytes = std::fs::read(&path).unwrap();
    let cut = dir.path().join("cut.avi");
    std::fs::write(&cut, &bytes[..bytes.len() * 2 / 3]).unwrap();
    assert_eq!(video::frames_at(&cut, &[1]).unwrap().len(), 1);
    assert!(read_all(&cut).is_err());
    // An image sequence's files before a wanted frame are passed over unread (a corrupt one
    // does not matter), and a dropped frame does not cost the next one wanted.
    let seq = dir.path().join("seq");
    std::fs::create_dir(&seq).unwrap();
    for entry in std::fs::read_dir(data("gradient-32x24-ffmpeg-bmp")).unwrap() {
        let entry = entry.unwrap();
        std::fs::copy(entry.path(), seq.join(entry.file_name())).unwrap();
    }
    std::fs::write(seq.join("frame_0001.bmp"), b"BM not really").unwrap();
    std::fs::remove_file(seq.join("frame_0003.bmp")).unwrap();
    assert!(read_all(&seq).is_err());
    let frames = video::frames_at(&seq, &[6, 3, 4]).unwrap();
    let indices: Vec<i64> = frames.iter().map(|f| f.index).collect();
    assert_eq!(indices, [4, 6]);
    // BMP grey as equal R, G, B: luma is the grey level up to float rounding.
    assert!((frames[0].luma[0] - gradient(4, 0, 0)).abs() <= 0.5);
}

/// Renders a trial of `config` into `dir` as an 8-bit PGM sequence; returns its truth.
fn render_trial(dir: &Path, scene: &synth::video::Scene, fps: f64, seed: u64) -> synth::Truth {
    let config = SynthConfig {
        fps,
        audio: false,
        video_noise: 0.0,
        ..SynthConfig::default()
    };
    let rig = RigProfile::default();
    let trial = synth::generate("bar", TrialKind::Normal, &config, &rig, seed);
    std::fs::create_dir_all(dir).unwrap();
    for (k, img) in synth::video::render(&trial, scene) {
        let bytes = synth::video::pgm_bytes(scene.width, scene.height, &img, 255);
        std::fs::write(dir.join(format!("bar_{k:05}.pgm")), bytes).unwrap();
    }
    trial.truth
}

fn json_of(output: &[u8]) -> Value {
    serde_json::from_slice(output).unwrap()
}

#[test]
fn a_rendered_swing_is_timed_by_tracking_within_a_frame_with_a_flickering_lamp() {
    let dir = tempfile::tempdir().unwrap();
    let video_dir = dir.path().join("bar");
    let fps = 2000.0;
    let scene = synth::video::Scene {
        flicker: Some((100.0, 0.04)),
        ..synth::video::Scene::default()
    };
    let truth = render_trial(&video_dir, &scene, fps, 7);
    let out = common::bin()
        .args(["trial", "--format", "json", "--fps", "2000", "--video"])
        .arg(&video_dir)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    let record = json_of(&out.stdout);
    let input = &record["video_input"];
    assert_eq!(input["measure"], "track_px", "{input}");
    let lamp = input["lamp_hz"].as_f64().unwrap();
    assert!((lamp - 100.0).abs() < 1.0, "{lamp}");
    let release = record["latch_release_video_s"].as_f64().unwrap();
    let want = truth.latch_release_s.unwrap();
    // Target: median 0.3 frame over many trials; one trial may miss by up to a frame.
    assert!((release - want).abs() * fps <= 1.0, "{release} vs {want}");
}

#[test]
fn a_small_swing_takes_its_loading_from_the_principal_component() {
    let dir = tempfile::tempdir().unwrap();
    let video_dir = dir.path().join("bar");
    let fps = 1000.0;
    let scene = synth::video::Scene {
        swing_rad: 3f64.to_radians(),
        ..synth::video::Scene::default()
    };
    let truth = render_trial(&video_dir, &scene, fps, 3);
    for (column, motion) in [(None, "track_px"), (Some("pca1"), "pca1")] {
        let mut cmd = common::bin();
        cmd.args(["trial", "--format", "json", "--fps", "1000", "--video"])
            .arg(&video_dir);
        if let Some(c) = column {
            cmd.args(["--column", c]);
        }
        let record = json_of(&cmd.output().unwrap().stdout);
        let input = &record["video_input"];
        assert_eq!(input["measure"], motion, "{record}");
        assert_eq!(input["loading_measure"], "pca1", "{record}");
        let release = record["latch_release_video_s"].as_f64().unwrap();
        let want = truth.latch_release_s.unwrap();
        assert!(
            (release - want).abs() * fps <= 1.0,
            "{motion}: {release} vs {want}"
        );
        let onset = record["loading_onset_s"].as_f64().unwrap();
        let want = truth.loading_onset_s.unwrap();
        // The target: loading onset within 5 ms.
        assert!((onset - want).abs() <= 5e-3, "{motion}: {onset} vs {want}");
    }
}

#[test]
fn a_campaign_folder_of_image_sequences_writes_records_and_measures_csvs() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("campaign");
    let scene = synth::video::Scene::default();
    render_trial(&input.join("t01"), &scene, 2000.0, 11);
    // The camera dropped frame 100.
    std::fs::remove_file(input.join("t01/bar_00100.pgm")).unwrap();
    // A folder of a few figures is not a trial.
    std::fs::create_dir_all(input.join("figures")).unwrap();
    std::fs::write(input.join("figures/plot1.png"), b"x").unwrap();
    let out = dir.path().join("out");
    common::bin()
        .args(["batch", "--quiet", "--report", "--fps", "2000", "--out"])
        .arg(&out)
        .arg(&input)
        .assert()
        .success();
    let record: Value =
        serde_json::from_slice(&std::fs::read(out.join("trials/t01.json")).unwrap()).unwrap();
    assert_ne!(record["status"], "error", "{record}");
    assert!(record["video_file"].as_str().unwrap().ends_with("t01"));
    assert_eq!(record["missing_frames"], 1, "{record}");
    assert!(record["flags"]
        .as_array()
        .unwrap()
        .iter()
        .any(|f| f == "frame_gaps"));
    assert!(!out.join("trials/figures.json").exists());
    // The review figure draws the measure from the CSV beside the record.
    let figure = std::fs::read_to_string(out.join("plots/t01.svg")).unwrap();
    assert!(figure.contains("<path") || figure.contains("<polyline"));
    crop_strip_shows_the_events(&figure, &record, 2000.0);
    let csv = out.join("trials/t01.frames.csv");
    let text = std::fs::read_to_string(&csv).unwrap();
    assert!(text.starts_with("frame,time_s,gain,pca1,track_x_px,track_y_px,track_px\n"));
    // The CSV reads back as frames and gives the same release.
    let again = common::bin()
        .args([
            "trial", "--format", "json", "--column", "track_px", "--frames",
        ])
        .arg(&csv)
        .output()
        .unwrap();
    let again = json_of(&again.stdout);
    let (a, b) = (
        record["latch_release_video_s"].as_f64().unwrap(),
        again["latch_release_video_s"].as_f64().unwrap(),
    );
    // The CSV prints the track to 1e-4 px: the same release to well within a frame.
    assert!((a - b).abs() < 0.1 / 2000.0, "{a} {b}");
}

/// A video trial's figure holds four frame crops, embedded (PNG data URIs, nothing fetched),
/// each labelled with its event and the frame nearest to it, the tracked point crossed.
fn crop_strip_shows_the_events(figure: &str, record: &Value, fps: f64) {
    let mut reader = quick_xml::Reader::from_str(figure);
    loop {
        match reader.read_event() {
            Ok(quick_xml::events::Event::Eof) => break,
            Ok(_) => {}
            Err(e) => panic!("figure does not parse at {}: {e}", reader.buffer_position()),
        }
    }
    assert!(figure.contains("Frames at the events"), "no crop row");
    let prefix = "href=\"data:image/png;base64,";
    assert_eq!(figure.matches("<image class=\"frame-crop\"").count(), 4);
    assert_eq!(figure.matches(prefix).count(), 4);
    // The tracked point's cross: an outline and a colour stroke per crop.
    assert_eq!(figure.matches("class=\"tracked-point\"").count(), 4);
    for (field, label) in [
        ("loading_onset_s", "loading onset"),
        ("latch_release_s", "release"),
        ("motion_peak_s", "motion peak"),
    ] {
        let t = record[field].as_f64().unwrap();
        // Frames are numbered from 0 in the rendered files, so the nearest is t * fps.
        let frame = (t * fps).round() as i64;
        assert!(figure.contains(&format!("\n{label}\n")), "{label}");
        let text = format!("\nframe {frame}, {:.4} s\n", frame as f64 / fps);
        assert!(figure.contains(&text), "{label} at {frame}");
    }
    assert!(figure.contains("\nfirst ringing extremum\n"));
    // The first crop decodes as a square greyscale PNG at least 96 px wide that shows
    // something (the bar against the background).
    use base64::Engine;
    let start = figure.find(prefix).unwrap() + prefix.len();
    let end = start + figure[start..].find('"').unwrap();
    let bytes = base64::engine::general_purpose::STANDARD
        .decode(&figure[start..end])
        .unwrap();
    let mut decoder = png::Decoder::new(std::io::Cursor::new(bytes))
        .read_info()
        .unwrap();
    let mut px = vec![0; decoder.output_buffer_size().unwrap()];
    let info = decoder.next_frame(&mut px).unwrap();
    assert_eq!(info.color_type, png::ColorType::Grayscale);
    assert!(info.width == info.height && info.width >= 96, "{info:?}");
    let (lo, hi) = (px.iter().min().unwrap(), px.iter().max().unwrap());
    assert!(hi - lo > 150, "flat crop: {lo}..{hi}");
}

#[test]
fn an_image_sequence_without_a_frame_rate_is_an_error_record_saying_so() {
    let dir = tempfile::tempdir().unwrap();
    let video_dir = dir.path().join("bar");
    render_trial(&video_dir, &synth::video::Scene::default(), 1000.0, 1);
    let out = common::bin()
        .args(["trial", "--format", "json", "--video"])
        .arg(&video_dir)
        .output()
        .unwrap();
    let record = json_of(&out.stdout);
    assert_eq!(record["status"], "error");
    assert!(
        record["error"].as_str().unwrap().contains("--fps"),
        "{record}"
    );
}

#[test]
fn frames_command_writes_the_measures_of_an_avi_at_its_own_rate() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("m.csv");
    common::bin()
        .arg("frames")
        .arg(data("gradient-32x24-12frames-500fps-ffmpeg-raw-gray.avi"))
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let text = std::fs::read_to_string(&out).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert!(
        lines[0].starts_with("frame,time_s,gain,pca1"),
        "{}",
        lines[0]
    );
    assert_eq!(lines.len(), 13);
    // Frame 5 at 500 fps: 10 ms.
    assert!(lines[6].starts_with("5,0.010000000,"), "{}", lines[6]);
}

#[test]
fn a_named_point_and_pivot_give_the_angle_and_a_named_region_its_mean() {
    let dir = tempfile::tempdir().unwrap();
    let video_dir = dir.path().join("bar");
    let fps = 2000.0;
    let scene = synth::video::Scene::default();
    let truth = render_trial(&video_dir, &scene, fps, 5);
    // A dark band's edge 56 px along the bar from the pivot (40, 60), bar held at -0.25 rad.
    let point = "94.26,46.15";
    let out = common::bin()
        .args([
            "trial", "--format", "json", "--fps", "2000", "--pivot", "40,60",
        ])
        .args(["--track", point, "--video"])
        .arg(&video_dir)
        .output()
        .unwrap();
    let record = json_of(&out.stdout);
    assert_eq!(record["video_input"]["measure"], "angle_rad", "{record}");
    let release = record["latch_release_video_s"].as_f64().unwrap();
    let want = truth.latch_release_s.unwrap();
    assert!((release - want).abs() * fps <= 1.0, "{release} vs {want}");
    let out = common::bin()
        .args([
            "frames", "--fps", "2000", "--pivot", "40,60", "--track", point,
        ])
        .args(["--roi", "corner=0,0,20,20"])
        .arg(&video_dir)
        .output()
        .unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(header[7..], ["angle_rad", "roi_corner"]);
    let first: Vec<f64> = lines
        .next()
        .unwrap()
        .split(',')
        .map(|c| c.parse().unwrap())
        .collect();
    // The held angle as rendered, to the point's placement (a hundredth of a radian).
    assert!((first[7] + 0.25).abs() < 0.01, "{}", first[7]);
    assert!(first[8] > 0.0 && first[8] < 255.0);
}

#[test]
fn a_named_point_the_bar_sweeps_over_is_lost_and_flagged() {
    let dir = tempfile::tempdir().unwrap();
    let video_dir = dir.path().join("bar");
    render_trial(&video_dir, &synth::video::Scene::default(), 2000.0, 5);
    // Background 50 px from the pivot at +0.1 rad: inside the arc the bar sweeps.
    let out = common::bin()
        .args([
            "trial",
            "--format",
            "json",
            "--fps",
            "2000",
            "--track",
            "89.75,64.99",
        ])
        .arg("--video")
        .arg(&video_dir)
        .output()
        .unwrap();
    let record = json_of(&out.stdout);
    assert_eq!(record["video_input"]["measure"], "pca1", "{record}");
    let flags = record["flags"].as_array().unwrap();
    assert!(flags.iter().any(|f| f == "track_lost"), "{record}");
    assert!(record["video_input"]["track_lost_frame"].as_i64().is_some());
}

#[test]
fn a_folder_of_numbered_images_is_a_video_but_a_folder_with_trials_of_its_own_is_not() {
    use latchtime::batch::discover::{discover_with, DiscoverOptions};
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path();
    let pgm = b"P5\n2 2\n255\n\x01\x02\x03\x04";
    for k in 0..12 {
        std::fs::create_dir_all(root.join("t01")).unwrap();
        std::fs::write(root.join(format!("t01/img{k:04}.pgm")), pgm).unwrap();
        std::fs::create_dir_all(root.join("day2")).unwrap();
        std::fs::write(root.join(format!("day2/plot{k}.pgm")), pgm).unwrap();
    }
    std::fs::write(root.join("day2/t05.frames.csv"), "time_s,y\n0,1\n").unwrap();
    // Nine numbered images are too few to be taken for a video.
    std::fs::create_dir_all(root.join("figs")).unwrap();
    for k in 0..9 {
        std::fs::write(root.join(format!("figs/f{k}.pgm")), pgm).unwrap();
    }
    let options = DiscoverOptions {
        recursive: true,
        ..DiscoverOptions::default()
    };
    let found = discover_with(root, &options).unwrap();
    let names: Vec<(&str, bool)> = found
        .trials
        .iter()
        .map(|t| (t.spec.name.as_str(), t.spec.video.is_some()))
        .collect();
    assert_eq!(names, [("day2/t05", false), ("t01", true)]);
}

#[test]
fn the_terminal_summary_names_the_video_and_its_measures() {
    let out = common::bin()
        .args(["trial", "--video"])
        .arg(data("gradient-32x24-12frames-500fps-ffmpeg-raw-gray.avi"))
        .output()
        .unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("video             avi-raw 32x24, 12 frames"),
        "{text}"
    );
    assert!(text.contains("motion measure    pca1: "), "{text}");
}

#[test]
fn a_video_moved_with_the_same_bytes_rewrites_its_record_with_the_new_path() {
    let dir = tempfile::tempdir().unwrap();
    let scene = synth::video::Scene::default();
    render_trial(&dir.path().join("a/t01"), &scene, 1000.0, 5);
    let manifest = dir.path().join("manifest.csv");
    let out = dir.path().join("out");
    let run = |folder: &str| {
        std::fs::write(&manifest, format!("trial,video\nt01,{folder}/t01\n")).unwrap();
        common::bin()
            .current_dir(dir.path())
            .args(["batch", "--fps", "1000", "--out"])
            .arg(&out)
            .arg(&manifest)
            .output()
            .unwrap()
    };
    assert!(run("a").status.success());
    std::fs::rename(dir.path().join("a"), dir.path().join("b")).unwrap();
    let second = run("b");
    assert!(second.status.success());
    let err = String::from_utf8_lossy(&second.stderr);
    assert!(err.contains("1 record(s) rewritten"), "{err}");
    let record: Value =
        serde_json::from_slice(&std::fs::read(out.join("trials/t01.json")).unwrap()).unwrap();
    let video = record["video_file"].as_str().unwrap();
    assert!(video.ends_with("b/t01"), "{video}");
}

/// Without the `h264` feature, an H.264 MP4 is an error that says how to build with it; an
/// HEVC one names its codec either way (`tests/video_h264.rs` covers the feature).
#[cfg(not(feature = "h264"))]
#[test]
fn an_h264_mp4_without_the_feature_says_to_build_with_it() {
    let path = data("h264/bar-64x48-40frames-240fps-x264-baseline.mp4");
    let err = video::open(&path).err().unwrap().to_string();
    assert!(
        err.contains("baseline.mp4") && err.contains("--features h264"),
        "{err}"
    );
    let hevc = data("h264/bar-64x48-40frames-240fps-x265.mp4");
    let err = video::open(&hevc).err().unwrap().to_string();
    assert!(err.contains("x265.mp4") && err.contains("HEVC"), "{err}");
}
