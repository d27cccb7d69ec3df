//! Inputs read right, flagged, or refused with a message naming the file and the fault
//! (issue 15). Each test runs the binary as a user does, on files in tests/data/ (made with
//! real encoders, see tests/data/README.md) or built here from them: the same click must come
//! out at the same time whatever the container, or the trial must say why not.

mod common;

use std::path::{Path, PathBuf};

use common::wav_builder::WavBuilder;
use common::{bin, repo};
use serde_json::Value;

fn data(name: &str) -> PathBuf {
    repo().join("tests/data").join(name)
}

/// `trial --format json` on the given arguments: (exit code, record).
fn trial(args: &[&str], files: &[(&str, &Path)]) -> (i32, Value) {
    let mut cmd = bin();
    cmd.args(["trial", "--format", "json"]).args(args);
    for (flag, path) in files {
        cmd.arg(flag).arg(path);
    }
    let out = cmd.output().unwrap();
    let record = serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)));
    (out.status.code().unwrap_or(-1), record)
}

fn audio_record(path: &Path, args: &[&str]) -> Value {
    trial(args, &[("--audio", path)]).1
}

fn flags(r: &Value) -> Vec<String> {
    r["flags"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_str().unwrap().to_string())
        .collect()
}

fn click_s(r: &Value) -> f64 {
    r["click_onset_s"]
        .as_f64()
        .unwrap_or_else(|| panic!("no click: {r}"))
}

/// The reference: the 16-bit WAV the encoded files were made from.
fn wav_click_s() -> f64 {
    click_s(&audio_record(&data("click-48kHz-16bit-mono.wav"), &[]))
}

/// The reference WAV's samples as 16-bit codes.
fn wav_codes() -> Vec<i16> {
    let bytes = std::fs::read(data("click-48kHz-16bit-mono.wav")).unwrap();
    // The file is a plain 44-byte-header PCM WAV (hound's writer).
    bytes[44..]
        .chunks_exact(2)
        .map(|b| i16::from_le_bytes([b[0], b[1]]))
        .collect()
}

#[test]
fn lossy_files_are_trimmed_of_encoder_delay_and_flagged_lossy_audio() {
    let reference = wav_click_s();
    for (name, delay) in [
        // LAME's Info header: 576 encoder + 529 decoder samples (symphonia adds the 529).
        ("click-48kHz-mono-lame.mp3", 1105),
        // ffmpeg's MP4 edit list: 1024 samples of AAC priming.
        ("click-48kHz-mono-ffmpeg-aac.m4a", 1024),
        // Ogg granule positions: the first sample is sample 0.
        ("click-48kHz-mono-oggenc.ogg", 0),
    ] {
        let r = audio_record(&data(name), &[]);
        assert_eq!(flags(&r), ["lossy_audio"], "{name}: {r}");
        assert_eq!(r["audio_input"]["encoder_delay_samples"], delay, "{name}");
        // Delay and padding removed to the sample: as long as the source.
        assert_eq!(r["audio_samples"], 19_200, "{name}");
        assert_eq!(r["audio_duration_s"], 0.4, "{name}");
        // Untrimmed, the click would be 21-23 ms late; the codec smears the onset by less
        // than a codec frame (measured: 0.19 ms for this MP3, none for AAC and Vorbis).
        let late_ms = (click_s(&r) - reference) * 1e3;
        assert!(
            late_ms.abs() < 0.5,
            "{name}: click {late_ms:.3} ms from the WAV's"
        );
    }
}

#[test]
fn lossy_files_that_state_no_encoder_delay_are_flagged_so() {
    let reference = wav_click_s();
    for name in [
        "click-48kHz-mono-lame-no-info-tag.mp3",
        "click-48kHz-mono-ffmpeg-aac-adts.aac",
    ] {
        let r = audio_record(&data(name), &[]);
        assert_eq!(
            flags(&r),
            ["lossy_audio", "encoder_delay_unknown"],
            "{name}: {r}"
        );
        assert!(r["audio_input"]["encoder_delay_samples"].is_null());
        // What the flag warns of: the click is late by the unstated delay (1105 or 1024
        // samples at 48 kHz).
        assert!(click_s(&r) - reference > 0.020, "{name}: {r}");
    }
}

#[test]
fn flac_reads_as_its_wav() {
    let r = audio_record(&data("click-48kHz-mono.flac"), &[]);
    assert_eq!(r["status"], "ok", "{r}");
    assert_eq!(click_s(&r), wav_click_s());
    assert_eq!(r["audio_input"]["format"], "FLAC");
}

#[test]
fn a_cut_flac_keeps_what_it_decoded_in_place_and_is_flagged_truncated() {
    let r = audio_record(&data("click-48kHz-mono-cut-at-60-percent.flac"), &[]);
    // The click lies past the cut: `no_click` with the reason beside it.
    assert_eq!(flags(&r), ["no_click", "truncated_audio"], "{r}");
    assert_eq!(r["audio_input"]["declared_duration_s"], 0.4);
    assert!(r["audio_duration_s"].as_f64().unwrap() < 0.4);
    // What was decoded is the start of the whole file, sample for sample.
    let dir = tempfile::tempdir().unwrap();
    let decode = |name: &str| {
        let out = dir.path().join("x.f64");
        bin()
            .args(["inspect", "decode", "--audio"])
            .arg(data(name))
            .arg("--out")
            .arg(&out)
            .assert()
            .success();
        std::fs::read(&out).unwrap()
    };
    let whole = decode("click-48kHz-mono.flac");
    let cut = decode("click-48kHz-mono-cut-at-60-percent.flac");
    assert!(!cut.is_empty() && whole.starts_with(&cut));
}

#[test]
fn a_flac_with_a_damaged_frame_is_refused_naming_where() {
    let path = data("regress/flac-40-bytes-damaged-mid-file-48kHz-mono.flac");
    let (code, r) = trial(&[], &[("--audio", &path)]);
    assert_eq!(code, 1);
    let e = r["error"].as_str().unwrap();
    assert!(
        e.contains("flac-40-bytes-damaged-mid-file-48kHz-mono.flac")
            && e.contains("sample 8192 (0.170667 s)")
            && e.contains("samples are missing"),
        "{e}"
    );
}

/// Writes `bytes` into `dir` as `name` and returns its record.
fn record_of(dir: &Path, name: &str, bytes: &[u8], args: &[&str]) -> Value {
    let path = dir.join(name);
    std::fs::write(&path, bytes).unwrap();
    audio_record(&path, args)
}

#[test]
fn wav_family_encodings_put_the_click_where_the_plain_wav_does() {
    let reference = wav_click_s();
    let codes = wav_codes();
    let le16: Vec<u8> = codes.iter().flat_map(|c| c.to_le_bytes()).collect();
    let be16: Vec<u8> = codes.iter().flat_map(|c| c.to_be_bytes()).collect();
    // 12 valid bits in 16-bit containers (the low 4 bits zero, left-justified) and 20 valid
    // bits in 24-bit containers.
    let le12: Vec<u8> = codes
        .iter()
        .flat_map(|c| (c & !0xF).to_le_bytes())
        .collect();
    let le20in24: Vec<u8> = codes
        .iter()
        .flat_map(|&c| {
            let b = (i32::from(c) << 8).to_le_bytes();
            [b[0], b[1], b[2]]
        })
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let cases: Vec<(&str, Vec<u8>, &str)> = vec![
        (
            "rf64.wav",
            WavBuilder {
                magic: b"RF64",
                ..WavBuilder::default()
            }
            .build(&le16),
            "RF64 PCM 16-bit",
        ),
        (
            "bw64.wav",
            WavBuilder {
                magic: b"BW64",
                ..WavBuilder::default()
            }
            .build(&le16),
            "BW64 PCM 16-bit",
        ),
        (
            "rifx.wav",
            WavBuilder {
                magic: b"RIFX",
                ..WavBuilder::default()
            }
            .build(&be16),
            "RIFX PCM 16-bit",
        ),
        (
            "pcm12.wav",
            WavBuilder {
                bits: 12,
                ..WavBuilder::default()
            }
            .build(&le12),
            "WAV PCM 12-bit in 16-bit containers",
        ),
        (
            "pcm20.wav",
            WavBuilder {
                bits: 24,
                valid_bits: Some(20),
                ..WavBuilder::default()
            }
            .build(&le20in24),
            "WAV (extensible) PCM 20-bit in 24-bit containers",
        ),
        (
            // The trap: block_align 4 for mono 16-bit. Read as channels x container
            // bytes, as libsndfile does, the click stays where it is.
            "block-align-4.wav",
            WavBuilder {
                block_align: Some(4),
                ..WavBuilder::default()
            }
            .build(&le16),
            "WAV PCM 16-bit",
        ),
    ];
    for (name, bytes, format) in cases {
        let r = record_of(dir.path(), name, &bytes, &[]);
        assert_eq!(r["status"], "ok", "{name}: {r}");
        assert_eq!(r["audio_input"]["format"], format, "{name}");
        assert_eq!(r["audio_samples"], 19_200, "{name}");
        assert_eq!(click_s(&r), reference, "{name}");
    }
}

#[test]
fn an_unfinalised_wav_is_read_to_its_last_whole_frame_and_flagged() {
    let reference = wav_click_s();
    let mut le16: Vec<u8> = wav_codes().iter().flat_map(|c| c.to_le_bytes()).collect();
    // The recorder stopped mid-frame: one odd byte at the end.
    le16.push(0x7F);
    let dir = tempfile::tempdir().unwrap();
    for (riff, data_size) in [(0u32, 0u32), (36, 0), (0xFFFF_FFFF, 0xFFFF_FFFF)] {
        let bytes = WavBuilder {
            riff_size: Some(riff),
            data_size: Some(data_size),
            ..WavBuilder::default()
        }
        .build(&le16);
        let r = record_of(dir.path(), "unfinalised.wav", &bytes, &[]);
        assert_eq!(
            flags(&r),
            ["unfinalised_wav"],
            "{riff:#x}/{data_size:#x}: {r}"
        );
        assert_eq!(r["audio_samples"], 19_200);
        assert_eq!(click_s(&r), reference);
    }
}

#[test]
fn broadcast_wav_keeps_its_wall_clock_start() {
    let le16: Vec<u8> = wav_codes().iter().flat_map(|c| c.to_le_bytes()).collect();
    // 13:45:10 at 48 kHz, as samples since midnight.
    let reference = 48_000u64 * (13 * 3600 + 45 * 60 + 10);
    let bytes = WavBuilder {
        bext_time_reference: Some(reference),
        ..WavBuilder::default()
    }
    .build(&le16);
    let dir = tempfile::tempdir().unwrap();
    let r = record_of(dir.path(), "bwf.wav", &bytes, &[]);
    assert_eq!(r["status"], "ok", "{r}");
    let rec = &r["recording"];
    assert_eq!(rec["bext_time_reference_samples"], reference);
    assert_eq!(rec["origination_date"], "2031-04-05");
    assert_eq!(rec["origination_time"], "13:45:10");
    assert_eq!(rec["start_s_since_midnight"], 49_510.0);
}

#[test]
fn a_click_on_the_other_channel_is_named_and_auto_picks_that_channel() {
    let reference = wav_click_s();
    // Channel 0 silent, channel 1 the click.
    let stereo: Vec<u8> = wav_codes()
        .iter()
        .flat_map(|c| [0i16, *c])
        .flat_map(|c| c.to_le_bytes())
        .collect();
    let bytes = WavBuilder {
        channels: 2,
        ..WavBuilder::default()
    }
    .build(&stereo);
    let dir = tempfile::tempdir().unwrap();
    let r = record_of(dir.path(), "stereo.wav", &bytes, &[]);
    assert_eq!(flags(&r), ["no_click", "click_on_other_channel"], "{r}");
    assert_eq!(r["click_other_channel"], 1);
    assert_eq!(r["audio_input"]["channel"], 0);
    let r = record_of(dir.path(), "stereo.wav", &bytes, &["--channel", "auto"]);
    assert_eq!(r["status"], "ok", "{r}");
    assert_eq!(r["audio_input"]["channel"], 1);
    assert_eq!(r["audio_input"]["channel_from"], "auto");
    assert_eq!(click_s(&r), reference);
    let out = bin()
        .args(["trial", "--channel", "left", "--audio"])
        .arg(dir.path().join("stereo.wav"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("neither a channel number"));
}

/// The reference frames file rewritten line by line.
fn frames_variant(f: impl Fn(usize, &str) -> String) -> String {
    let text = std::fs::read_to_string(data("release-1000fps.frames.csv")).unwrap();
    text.lines()
        .enumerate()
        .map(|(i, l)| f(i, l) + "\n")
        .collect()
}

#[test]
fn frames_in_other_cases_units_separators_and_with_blank_cells_time_the_release_alike() {
    let path = data("release-1000fps.frames.csv");
    let (_, reference) = trial(&[], &[("--frames", &path)]);
    assert_eq!(reference["status"], "ok", "{reference}");
    let release = reference["latch_release_video_s"].as_f64().unwrap();
    let dir = tempfile::tempdir().unwrap();
    let ms = |l: &str| {
        let mut c: Vec<String> = l.split(',').map(str::to_string).collect();
        if let Ok(t) = c[1].parse::<f64>() {
            c[1] = format!("{:.4}", t * 1e3);
        }
        c.join(",")
    };
    let variants: Vec<(&str, String)> = vec![
        (
            "upper",
            frames_variant(|i, l| {
                if i == 0 {
                    "Frame,Time_S,Brightness".into()
                } else {
                    l.into()
                }
            }),
        ),
        (
            "ms",
            frames_variant(|i, l| {
                if i == 0 {
                    "frame,time_ms,brightness".into()
                } else {
                    ms(l)
                }
            }),
        ),
        (
            "semicolon",
            frames_variant(|_, l| l.replace(',', ";").replace('.', ",")),
        ),
        ("tab", frames_variant(|_, l| l.replace(',', "\t"))),
    ];
    for (name, text) in variants {
        let p = dir.path().join(format!("{name}.frames.csv"));
        std::fs::write(&p, text).unwrap();
        let (code, r) = trial(&[], &[("--frames", &p)]);
        assert_eq!(code, 0, "{name}: {r}");
        assert_eq!(r["status"], "ok", "{name}: {r}");
        assert_eq!(r["frames_decoded"], reference["frames_decoded"], "{name}");
        let got = r["latch_release_video_s"].as_f64().unwrap();
        assert!((got - release).abs() < 1e-9, "{name}: {got} vs {release}");
        assert_eq!(r["frames_input"]["motion"]["from"], "first_numeric");
    }
    // One blank cell far from the release: that row is dropped, the trial measured.
    let p = dir.path().join("blank.frames.csv");
    std::fs::write(
        &p,
        frames_variant(|i, l| {
            if i == 20 {
                l.rsplit_once(',').unwrap().0.to_string() + ","
            } else {
                l.into()
            }
        }),
    )
    .unwrap();
    let (code, r) = trial(&[], &[("--frames", &p)]);
    assert_eq!(code, 0, "{r}");
    assert!(
        flags(&r).contains(&"frames_dropped_cells".to_string()),
        "{r}"
    );
    assert_eq!(r["frames_input"]["dropped_rows"], 1);
    assert_eq!(r["frames_input"]["dropped_lines"], serde_json::json!([21]));
    assert_eq!(
        r["frames_decoded"].as_u64().unwrap() + 1,
        reference["frames_decoded"].as_u64().unwrap()
    );
    let got = r["latch_release_video_s"].as_f64().unwrap();
    assert!((got - release).abs() < 1e-6, "{got} vs {release}");
    // A comma file with decimal commas is refused naming the separator.
    let p = dir.path().join("comma.frames.csv");
    std::fs::write(
        &p,
        frames_variant(|i, l| {
            if i == 0 {
                l.into()
            } else {
                l.replace('.', ",")
            }
        }),
    )
    .unwrap();
    let (code, r) = trial(&[], &[("--frames", &p)]);
    assert_eq!(code, 1);
    let e = r["error"].as_str().unwrap();
    assert!(
        e.contains("comma.frames.csv")
            && e.contains("comma-separated")
            && e.contains("decimal comma"),
        "{e}"
    );
}

#[test]
fn every_record_states_what_was_decoded() {
    let (_, r) = trial(
        &[],
        &[
            ("--audio", &data("click-48kHz-16bit-mono.wav")),
            ("--frames", &data("release-1000fps.frames.csv")),
        ],
    );
    assert_eq!(r["audio_samples"], 19_200);
    assert_eq!(r["audio_duration_s"], 0.4);
    assert_eq!(r["audio_input"]["channels"], 1);
    assert_eq!(r["audio_input"]["channel_from"], "named");
    assert!(r["frames_decoded"].as_u64().unwrap() > 300);
    assert!(r["video_duration_s"].as_f64().unwrap() > 0.3);
    let columns = &r["frames_input"];
    assert_eq!(columns["time"]["column"], "time_s");
    assert_eq!(columns["time"]["from"], "time_header");
    assert_eq!(columns["motion"]["column"], "brightness");
    assert_eq!(columns["loading"]["from"], "motion_column");
    let (_, named) = trial(
        &["--column", "BRIGHTNESS", "--loading-column", "brightness"],
        &[("--frames", &data("release-1000fps.frames.csv"))],
    );
    assert_eq!(named["frames_input"]["motion"]["from"], "named");
    assert_eq!(named["frames_input"]["loading"]["from"], "named");
}
