//! The review report over the sample data: report.html is well-formed (it is written as
//! XHTML-compatible HTML, so an XML parser must accept it), every trial appears once in the
//! table, and every linked figure exists and parses as SVG.

mod common;

use common::{bin, repo};

fn parse_xml(text: &str) -> Result<usize, String> {
    let mut reader = quick_xml::Reader::from_str(text);
    let mut elements = 0;
    loop {
        match reader.read_event() {
            Ok(quick_xml::events::Event::Eof) => return Ok(elements),
            Ok(quick_xml::events::Event::Start(_)) | Ok(quick_xml::events::Event::Empty(_)) => {
                elements += 1
            }
            Ok(_) => {}
            Err(e) => return Err(format!("at byte {}: {e}", reader.buffer_position())),
        }
    }
}

#[test]
fn report_over_the_sample_data_links_a_figure_for_every_trial() {
    let out = tempfile::tempdir().unwrap();
    common::sample_batch("sample-audio/manifest.csv", out.path(), &["--report"]);
    let html = std::fs::read_to_string(out.path().join("report.html")).unwrap();
    let elements = parse_xml(&html).unwrap_or_else(|e| panic!("report.html does not parse: {e}"));
    assert!(elements > 100);
    // No network: the only URLs are the SVG namespace declarations.
    for (i, _) in html.match_indices("http") {
        assert!(
            html[i..].starts_with("http://www.w3.org/2000/svg"),
            "external reference at {i}"
        );
    }
    let names: Vec<String> = std::fs::read_dir(repo().join("sample-audio"))
        .unwrap()
        .flatten()
        .filter_map(|e| {
            e.file_name()
                .to_string_lossy()
                .strip_suffix(".truth.json")
                .map(str::to_string)
        })
        .collect();
    assert_eq!(names.len(), 14);
    for name in &names {
        let cell = format!("<td>{name}</td>");
        assert_eq!(html.matches(&cell).count(), 1, "{name} rows");
        let link = format!("href=\"plots/{name}.svg\"");
        assert!(html.contains(&link), "{name} link");
        let svg = std::fs::read_to_string(out.path().join(format!("plots/{name}.svg"))).unwrap();
        parse_xml(&svg).unwrap_or_else(|e| panic!("{name}.svg does not parse: {e}"));
        assert!(svg.contains(name.as_str()), "{name}.svg has no title");
        // Frame crops belong to video trials only; these are audio and frames-CSV trials.
        assert!(
            !svg.contains("<image") && !svg.contains("Frames at the events"),
            "{name}: crops in a trial without a video"
        );
        // Every panel names its axes with units; a trial with a release has its close-up,
        // with the fitted oscillation drawn over the frames when the record holds the fit.
        let record = common::read_json(&out.path().join(format!("trials/{name}.json")));
        if record["audio_file"].is_string() {
            assert!(svg.contains("time, s (audio clock)"), "{name}: axis title");
        }
        if record["frames_file"].is_string() {
            assert!(svg.contains("time, s (video clock)"), "{name}: axis title");
        }
        if record["latch_release_s"].is_number() {
            assert!(svg.contains("Release close-up"), "{name}: no close-up");
            assert!(
                svg.contains("time from latch release, ms (video clock)"),
                "{name}"
            );
            assert!(svg.contains("\nrelease\n"), "{name}: release label");
            assert!(svg.contains("\nmotion peak\n"), "{name}: peak label");
        }
        if record["oscillation"]["model"].is_array() {
            assert!(svg.contains("damped fit after the peak"), "{name}: fit");
        }
        if record["release_fit"].is_object() {
            assert!(
                svg.contains("the release fit (orange"),
                "{name}: release fit"
            );
            let fit = &record["release_fit"];
            assert_eq!(fit["release_s"], record["latch_release_video_s"], "{name}");
        }
        if record["loading_ms"].is_number() {
            assert!(svg.contains("(sd "), "{name}: uncertainty in the title");
        }
    }
    // What made the page is at its top, the settings at its bottom, and the switch that puts
    // flagged trials into the group means is there; chart points are named and linked.
    let run = common::read_json(&out.path().join("run.json"));
    let hash = run["settings_blake3"].as_str().unwrap();
    assert!(html.find(hash).unwrap() < html.find("<h2>Groups</h2>").unwrap());
    assert!(html.contains("calibration/demo-rig.json"));
    assert!(html.find("<h2>Settings</h2>").unwrap() > html.find("<h2>Trials</h2>").unwrap());
    assert!(html.contains("id=\"with-flagged\""));
    assert!(html.contains("<title>ls2-mid-01: "), "no hover name");
    assert!(html.contains("Recording time from: file modification time"));
    // Flagged trials are listed before the others.
    let first_ok = html.find("<tr class=\"ok\">").unwrap();
    let last_flagged = html.rfind("<tr class=\"flagged\">").unwrap();
    assert!(last_flagged < first_ok);
}

#[test]
fn report_command_on_a_folder_without_records_is_a_usage_error() {
    let dir = tempfile::tempdir().unwrap();
    bin().arg("report").arg(dir.path()).assert().code(2);
}

#[test]
fn the_clock_chart_takes_recording_times_from_the_manifest_and_names_the_source() {
    let dir = tempfile::tempdir().unwrap();
    let sample = repo().join("sample-audio");
    let mut manifest = String::from("trial,audio,frames,group,recorded_at\n");
    for (i, name) in ["ls2-mid-01", "ls2-mid-02", "ls2-thin-01"]
        .iter()
        .enumerate()
    {
        manifest.push_str(&format!(
            "{name},{}/{name}.wav,{}/{name}.frames.csv,g,2026-03-01 2{i}:15:00\n",
            sample.display(),
            sample.display()
        ));
    }
    let path = dir.path().join("m.csv");
    std::fs::write(&path, manifest).unwrap();
    let out = dir.path().join("out");
    common::sample_batch(path.to_str().unwrap(), &out, &["--report"]);
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(
        html.contains("Recording time from: manifest column recorded_at (3)."),
        "source not named"
    );
    // Two hours from the first to the last recording: the axis is in hours.
    assert!(html.contains("hours since the first recording, 2026-03-01T20:15:00Z"));
}
