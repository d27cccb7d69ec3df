//! Command-line interface: clap arguments, their conversion into library settings, progress
//! drawing and exit codes. No analysis logic lives here.
//!
//! Exit codes: 0 the command ran (trials may be flagged or failed); 1 `trial` could not
//! analyse its trial; 2 usage error (bad option, missing input, bad rig profile); 3 the output
//! folder cannot be written (the run stopped at the first failed write); 4 `--strict` and at
//! least one trial failed, or discovery warned; 5 some trials' inputs could not be read and
//! their earlier records were kept; 6 another run writes the results folder; 7 the folder's
//! records were made with different settings, so no tables were written.

mod campaign;
mod inspect;
mod progress;

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand, ValueEnum};

use crate::error::Error;
use crate::measure::Status;
use crate::pipeline::{self, Scratch, TrialSpec};
use crate::report;
use crate::rig::RigProfile;
use crate::synth::{self, SampleEncoding, SynthConfig, TrialKind};
use crate::validate;

#[derive(Parser, Debug)]
#[command(
    name = "latchtime",
    version,
    about = "Times latch-mediated spring actuation trials from audio and high-speed video"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Analyse one trial and print its record.
    Trial(TrialArgs),
    /// Analyse every trial of a folder or manifest into an output folder.
    Batch(BatchArgs),
    /// Measure a video (image-sequence folder, AVI, or H.264 MP4/MOV) and write its per-frame measures as CSV.
    Frames(FramesArgs),
    /// Rebuild summary.csv and groups.csv of an output folder from its records.
    Summarize(SummarizeArgs),
    /// Write the review page report.html and per-trial figures for an output folder.
    Report(ReportArgs),
    /// Write synthetic trials with known truth.
    Synth(SynthArgs),
    /// Measure detector accuracy on synthetic trials shaped like a rig.
    Validate(ValidateArgs),
    /// Run one pipeline stage on raw arrays (for cross-checks against reference libraries).
    #[command(subcommand)]
    Inspect(inspect::Stage),
}

#[derive(Args, Debug)]
struct ValidateArgs {
    /// Rig profile (JSON): clock relation and detector settings.
    #[arg(long)]
    rig: Option<PathBuf>,
    /// Number of synthetic trials.
    #[arg(long, default_value_t = 300)]
    count: usize,
    /// Random seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Click SNR range, dB, as LO:HI.
    #[arg(long, value_parser = parse_range, default_value = "10:40")]
    snr_db: (f64, f64),
    /// Audio sample rate, Hz (default 96000, or measured with --like).
    #[arg(long)]
    sample_rate_hz: Option<u32>,
    /// Frame rate (default: the rig's fps, 1000, or measured with --like).
    #[arg(long)]
    fps: Option<f64>,
    /// Shape the trials like the recordings in this folder (rates, click SNR, video noise).
    #[arg(long)]
    like: Option<PathBuf>,
    /// Round timestamps to this many significant digits.
    #[arg(long)]
    timestamp_digits: Option<u32>,
    /// Families to draw from, comma-separated (default: all, equally often; `--like` weights
    /// them by what it measures).
    #[arg(long, value_delimiter = ',', value_parser = parse_family)]
    family: Vec<synth::Family>,
    /// Write the synthetic trials that disagree with their truth (audio, frames, truth) into
    /// this new or empty folder, to look at one by one.
    #[arg(long)]
    save_disagreements: Option<PathBuf>,
    /// Also render video-only trials as image sequences (a bar swinging 30 or 3 degrees, with
    /// and without a 100 Hz lamp) in a temporary folder, measure them from their frames and
    /// score them in a section of their own.
    #[arg(long)]
    video: bool,
    /// Number of rendered video trials (with --video), spread evenly over the four scenes.
    #[arg(long, default_value_t = 40, requires = "video")]
    video_count: usize,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Text)]
    format: Format,
}

fn parse_family(s: &str) -> Result<synth::Family, String> {
    synth::Family::parse(s.trim()).ok_or_else(|| {
        let names: Vec<&str> = synth::Family::ALL.iter().map(|f| f.as_str()).collect();
        format!("unknown family {s:?}; one of {}", names.join(", "))
    })
}

fn parse_range(s: &str) -> Result<(f64, f64), String> {
    let (a, b) = s.split_once(':').ok_or("expected LO:HI, e.g. 10:40")?;
    let lo: f64 = a
        .trim()
        .parse()
        .map_err(|_| format!("{a:?} is not a number"))?;
    let hi: f64 = b
        .trim()
        .parse()
        .map_err(|_| format!("{b:?} is not a number"))?;
    if !(lo.is_finite() && hi.is_finite() && lo <= hi) {
        return Err(format!("{s}: need finite LO <= HI"));
    }
    Ok((lo, hi))
}

#[derive(Args, Debug, Clone)]
struct RigArgs {
    /// Rig profile (JSON).
    #[arg(long)]
    rig: Option<PathBuf>,
    /// Frame rate for frame CSVs without time_s and for image sequences (overrides the rig
    /// profile; an AVI states its own).
    #[arg(long)]
    fps: Option<f64>,
    /// Audio channel to analyse, from 0, or `auto` for the channel with the clearest click
    /// (overrides the rig profile).
    #[arg(long, value_parser = parse_channel)]
    channel: Option<ChannelArg>,
    /// Frame CSV column with the motion measure (overrides the rig profile).
    #[arg(long)]
    column: Option<String>,
    /// Frame CSV column for loading onset (overrides the rig profile).
    #[arg(long)]
    loading_column: Option<String>,
    /// Audio clock minus video clock, seconds (overrides the rig profile's video_offset_s).
    #[arg(long, allow_hyphen_values = true)]
    video_offset_s: Option<f64>,
    /// Video: a point of the moving part to track, pixels `x,y` (overrides the rig profile).
    #[arg(long, value_parser = parse_point)]
    track: Option<[f64; 2]>,
    /// Video: the joint the part turns about, pixels `x,y`; gives the angle (overrides the
    /// rig profile).
    #[arg(long, value_parser = parse_point)]
    pivot: Option<[f64; 2]>,
    /// Video: a region whose mean brightness to measure, `name=x,y,w,h` pixels; repeat for
    /// more (replaces the rig profile's regions).
    #[arg(long, value_parser = parse_roi)]
    roi: Vec<crate::track::Roi>,
}

/// `x,y` in pixels.
fn parse_point(s: &str) -> Result<[f64; 2], String> {
    let (a, b) = s
        .split_once(',')
        .ok_or("expected x,y in pixels, e.g. 120,80")?;
    let num = |t: &str| -> Result<f64, String> {
        t.trim()
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| format!("{t:?} is not a number"))
    };
    Ok([num(a)?, num(b)?])
}

/// `name=x,y,w,h` in pixels.
fn parse_roi(s: &str) -> Result<crate::track::Roi, String> {
    let (name, rest) = s
        .split_once('=')
        .ok_or("expected name=x,y,w,h in pixels, e.g. tip=100,40,20,20")?;
    let parts: Vec<&str> = rest.split(',').collect();
    let nums: Result<Vec<usize>, String> = parts
        .iter()
        .map(|t| {
            t.trim()
                .parse()
                .map_err(|_| format!("{t:?} is not a whole number"))
        })
        .collect();
    match nums?.as_slice() {
        &[x, y, w, h] => Ok(crate::track::Roi {
            name: name.trim().to_string(),
            x,
            y,
            w,
            h,
        }),
        _ => Err("expected four numbers x,y,w,h".into()),
    }
}

/// `--channel N` or `--channel auto`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum ChannelArg {
    Index(usize),
    Auto,
}

fn parse_channel(s: &str) -> Result<ChannelArg, String> {
    if s.eq_ignore_ascii_case("auto") {
        return Ok(ChannelArg::Auto);
    }
    s.trim()
        .parse()
        .map(ChannelArg::Index)
        .map_err(|_| format!("{s:?} is neither a channel number (from 0) nor `auto`"))
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum Format {
    Text,
    Json,
}

#[derive(Args, Debug)]
struct TrialArgs {
    /// Audio file of the trial.
    #[arg(long)]
    audio: Option<PathBuf>,
    /// Frame CSV of the trial.
    #[arg(long)]
    frames: Option<PathBuf>,
    /// Video of the trial: a folder holding one image sequence, an AVI file, or an H.264 MP4/MOV file (feature h264).
    #[arg(long)]
    video: Option<PathBuf>,
    #[command(flatten)]
    rig: RigArgs,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Text)]
    format: Format,
}

#[derive(Args, Debug)]
struct FramesArgs {
    /// The video: a folder holding one image sequence, an AVI file, or an H.264 MP4/MOV file (feature h264).
    video: PathBuf,
    /// CSV file to write (default: standard output).
    #[arg(long)]
    out: Option<PathBuf>,
    #[command(flatten)]
    rig: RigArgs,
}

#[derive(Args, Debug)]
struct BatchArgs {
    /// Folder of trials, or a manifest CSV (trial,audio,frames,group).
    input: PathBuf,
    /// Output folder (created if missing).
    #[arg(long)]
    out: PathBuf,
    #[command(flatten)]
    rig: RigArgs,
    /// Worker threads (default: one per core).
    #[arg(long)]
    jobs: Option<usize>,
    /// Recompute every trial, even those with a current record.
    #[arg(long)]
    force: bool,
    /// Only the trials of shard K of N, e.g. 3/8 (for cluster job arrays).
    #[arg(long, value_parser = parse_shard)]
    shard: Option<(u64, u64)>,
    /// No progress output.
    #[arg(long, short)]
    quiet: bool,
    /// Exit with status 4 when any trial failed.
    #[arg(long)]
    strict: bool,
    /// Also write report.html and plots/NAME.svg for review.
    #[arg(long)]
    report: bool,
    /// Also take trials in subfolders; their names are paths such as day1/t01.
    #[arg(long)]
    recursive: bool,
}

#[derive(Args, Debug)]
struct ReportArgs {
    /// Output folder of a batch.
    dir: PathBuf,
    /// Settings for a folder made by a version without run files; otherwise the batch's
    /// settings (in run.json) are used and these are refused.
    #[command(flatten)]
    rig: RigArgs,
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum GroupBy {
    /// The manifest's `group` column.
    Group,
}

#[derive(Args, Debug)]
struct SummarizeArgs {
    /// Output folder of a batch.
    dir: PathBuf,
    /// What groups.csv groups trials by.
    #[arg(long, value_enum, default_value_t = GroupBy::Group)]
    by: GroupBy,
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum KindArg {
    Mix,
    Normal,
    DoubleClick,
    Failed,
    Empty,
    Clipped,
    OutOfSync,
}

#[derive(ValueEnum, Debug, Clone, Copy, PartialEq, Eq)]
enum EncodingArg {
    Int16,
    Int24,
    Float32,
}

#[derive(Args, Debug)]
struct SynthArgs {
    /// Output folder (created if missing).
    #[arg(long)]
    out: PathBuf,
    /// Number of trials.
    #[arg(long, default_value_t = 6)]
    count: usize,
    /// Random seed; the same seed gives the same files.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Kind of trial; `mix` cycles through every kind.
    #[arg(long, value_enum, default_value_t = KindArg::Mix)]
    kind: KindArg,
    /// Audio sample rate, Hz.
    #[arg(long, default_value_t = 96_000)]
    sample_rate_hz: u32,
    /// Video frame rate, frames per second.
    #[arg(long, default_value_t = 1000.0)]
    fps: f64,
    /// Trial duration, seconds.
    #[arg(long, default_value_t = 0.4)]
    duration_s: f64,
    /// Audio sample encoding.
    #[arg(long, value_enum, default_value_t = EncodingArg::Int16)]
    encoding: EncodingArg,
    /// Audio channels.
    #[arg(long, default_value_t = 1)]
    channels: u16,
    /// Name prefix of the trials.
    #[arg(long, default_value = "synth")]
    prefix: String,
    /// Rig profile whose clock relation places the clicks.
    #[arg(long)]
    rig: Option<PathBuf>,
    /// Write the demo campaign shipped in sample-audio/ (ignores the other options but --out).
    #[arg(long)]
    demo: bool,
}

fn parse_shard(s: &str) -> Result<(u64, u64), String> {
    let (k, n) = s.split_once('/').ok_or("expected K/N, e.g. 2/8")?;
    let k: u64 = k
        .trim()
        .parse()
        .map_err(|_| format!("{k:?} is not a shard number"))?;
    let n: u64 = n
        .trim()
        .parse()
        .map_err(|_| format!("{n:?} is not a shard count"))?;
    if n == 0 || k == 0 || k > n {
        return Err(format!("shard {k}/{n}: need 1 <= K <= N"));
    }
    Ok((k, n))
}

const EXIT_TRIAL_FAILED: u8 = 1;
const EXIT_USAGE: u8 = 2;
const EXIT_OUTPUT: u8 = 3;
const EXIT_STRICT: u8 = 4;
const EXIT_INPUTS_KEPT: u8 = 5;
const EXIT_BUSY: u8 = 6;
const EXIT_MIXED: u8 = 7;

fn fail(code: u8, message: impl std::fmt::Display) -> ExitCode {
    eprintln!("latchtime: {message}");
    ExitCode::from(code)
}

/// Writes `text` to standard output. A reader that closed the pipe early (`| head`) is no error
/// of ours: the rest is dropped. Any other write error is reported, with `code`, instead of
/// the panic `print!` would raise.
fn emit(text: &str, code: ExitCode) -> ExitCode {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => {
            fail(EXIT_OUTPUT, format!("cannot write to standard output: {e}"))
        }
        _ => code,
    }
}

/// The rig profile at `path`, or the defaults without one.
fn load_rig(path: Option<&Path>) -> Result<RigProfile, Error> {
    path.map_or_else(|| Ok(RigProfile::default()), RigProfile::from_path)
}

impl RigArgs {
    /// Whether any rig setting was given on the command line.
    fn any_given(&self) -> bool {
        self.rig.is_some()
            || self.fps.is_some()
            || self.channel.is_some()
            || self.column.is_some()
            || self.loading_column.is_some()
            || self.video_offset_s.is_some()
            || self.track.is_some()
            || self.pivot.is_some()
            || !self.roi.is_empty()
    }

    fn profile(&self) -> Result<RigProfile, Error> {
        let mut rig = load_rig(self.rig.as_deref())?;
        if self.fps.is_some() {
            rig.fps = self.fps;
        }
        match self.channel {
            Some(ChannelArg::Index(c)) => {
                rig.audio_channel = c;
                rig.audio_channel_auto = false;
            }
            Some(ChannelArg::Auto) => rig.audio_channel_auto = true,
            None => {}
        }
        if self.column.is_some() {
            rig.frames_column = self.column.clone();
        }
        if self.loading_column.is_some() {
            rig.loading_column = self.loading_column.clone();
        }
        if let Some(offset) = self.video_offset_s {
            rig.video_offset_s = offset;
        }
        if self.track.is_some() {
            rig.track_point = self.track;
        }
        if self.pivot.is_some() {
            rig.pivot = self.pivot;
        }
        if !self.roi.is_empty() {
            rig.rois = self.roi.clone();
        }
        rig.validate()?;
        Ok(rig)
    }
}

/// Parses the command line, runs the command and returns the exit code.
pub fn run() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Trial(args) => run_trial(args),
        Command::Batch(args) => campaign::run_batch(args),
        Command::Frames(args) => run_frames(args),
        Command::Summarize(args) => {
            let GroupBy::Group = args.by;
            campaign::run_summarize(&args.dir)
        }
        Command::Synth(args) => run_synth(args),
        Command::Report(args) => campaign::run_report_command(args),
        Command::Validate(args) => run_validate(args),
        Command::Inspect(stage) => match inspect::run(&stage) {
            Ok(value) => emit(&format!("{value}\n"), ExitCode::SUCCESS),
            Err(e) => fail(EXIT_TRIAL_FAILED, e),
        },
    }
}

fn run_trial(args: TrialArgs) -> ExitCode {
    let rig = match args.rig.profile() {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    let name_source = args
        .audio
        .as_deref()
        .or(args.frames.as_deref())
        .or(args.video.as_deref());
    let Some(name_source) = name_source else {
        return fail(EXIT_USAGE, "give --audio, --frames or --video");
    };
    let spec = TrialSpec {
        name: pipeline::trial_name(name_source),
        group: None,
        audio: args.audio.clone(),
        frames: args.frames.clone(),
        video: args.video.clone(),
    };
    let record = pipeline::analyze_files(&spec, &rig, &mut Scratch::default());
    let text = match args.format {
        Format::Json => report::json::record_json(&record),
        Format::Text => report::text::render(&record),
    };
    let code = if record.status == Status::Error {
        ExitCode::from(EXIT_TRIAL_FAILED)
    } else {
        ExitCode::SUCCESS
    };
    emit(&text, code)
}

fn run_frames(args: FramesArgs) -> ExitCode {
    let rig = match args.rig.profile() {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    let measures = match pipeline::measure_video_file(&args.video, &rig) {
        Ok((m, _)) => m,
        Err(e) => return fail(EXIT_TRIAL_FAILED, e),
    };
    let text = report::measures::measures_csv(&measures);
    match &args.out {
        Some(path) => match crate::batch::atomic::write_atomic(path, text.as_bytes()) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => fail(EXIT_TRIAL_FAILED, e),
        },
        None => emit(&text, ExitCode::SUCCESS),
    }
}

fn run_synth(args: SynthArgs) -> ExitCode {
    let rig = match load_rig(args.rig.as_deref()) {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    if let Err(e) = std::fs::create_dir_all(&args.out) {
        return fail(EXIT_OUTPUT, format!("{}: {e}", args.out.display()));
    }
    if args.demo {
        return match synth::write_demo(&args.out) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => fail(EXIT_OUTPUT, e),
        };
    }
    let fps_ok = args.fps > 0.0 && args.fps.is_finite();
    let duration_ok = args.duration_s > 0.0 && args.duration_s <= 60.0;
    if !fps_ok || !duration_ok {
        return fail(
            EXIT_USAGE,
            "--fps must be positive and --duration-s in (0, 60]",
        );
    }
    if !(1000..=1_000_000).contains(&args.sample_rate_hz) || args.channels == 0 {
        return fail(
            EXIT_USAGE,
            "--sample-rate-hz must be 1000..1000000 and --channels at least 1",
        );
    }
    let config = SynthConfig {
        sample_rate_hz: args.sample_rate_hz,
        fps: args.fps,
        duration_s: args.duration_s,
        encoding: match args.encoding {
            EncodingArg::Int16 => SampleEncoding::Int16,
            EncodingArg::Int24 => SampleEncoding::Int24,
            EncodingArg::Float32 => SampleEncoding::Float32,
        },
        channels: args.channels,
        ..SynthConfig::default()
    };
    for i in 0..args.count {
        let kind = match args.kind {
            KindArg::Mix => TrialKind::ALL[i % TrialKind::ALL.len()],
            KindArg::Normal => TrialKind::Normal,
            KindArg::DoubleClick => TrialKind::DoubleClick,
            KindArg::Failed => TrialKind::Failed,
            KindArg::Empty => TrialKind::Empty,
            KindArg::Clipped => TrialKind::Clipped,
            KindArg::OutOfSync => TrialKind::OutOfSync,
        };
        let name = format!("{}-{:04}-{}", args.prefix, i + 1, kind.as_str());
        let seed = args.seed.wrapping_mul(1_000_003).wrapping_add(i as u64);
        let trial = synth::generate(&name, kind, &config, &rig, seed);
        if let Err(e) = synth::write_trial(&args.out, &trial) {
            return fail(EXIT_OUTPUT, e);
        }
    }
    ExitCode::SUCCESS
}

/// Runs the rendered-video validation in a new temporary folder, removed afterwards.
fn validate_video(
    rig: &RigProfile,
    config: &validate::ValidateConfig,
    count: usize,
) -> Result<validate::video::VideoValidation, Error> {
    let work = new_temp_dir("latchtime-validate-video")?;
    let result = validate::video::validate_video(rig, config, count, &work);
    let removed = std::fs::remove_dir_all(&work).map_err(|e| Error::io(&work, e));
    let v = result?;
    removed?;
    Ok(v)
}

/// Creates a folder of its own under the system's temporary folder (a random name, created
/// exclusively, so that no other process's folder is reused).
fn new_temp_dir(prefix: &str) -> Result<PathBuf, Error> {
    let base = std::env::temp_dir();
    for _ in 0..16 {
        let dir = base.join(format!("{prefix}-{:016x}", rand::random::<u64>()));
        match std::fs::create_dir(&dir) {
            Ok(()) => return Ok(dir),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(Error::io(&dir, e)),
        }
    }
    let taken = std::io::Error::new(
        std::io::ErrorKind::AlreadyExists,
        "no free temporary folder name in 16 tries",
    );
    Err(Error::io(&base, taken))
}

fn run_validate(args: ValidateArgs) -> ExitCode {
    let rig = match load_rig(args.rig.as_deref()) {
        Ok(r) => r,
        Err(e) => return fail(EXIT_USAGE, e),
    };
    let mut config = validate::ValidateConfig {
        count: args.count,
        seed: args.seed,
        snr_db: args.snr_db,
        fps: rig.fps.unwrap_or(1000.0),
        timestamp_digits: args.timestamp_digits,
        ..validate::ValidateConfig::default()
    };
    if !args.family.is_empty() {
        config.families = args.family.iter().map(|f| (*f, 1.0)).collect();
    }
    if let Some(folder) = &args.like {
        match validate::measure_like(folder, &rig) {
            Ok(m) => {
                eprint!("{}", report::validate::render_measured(&m, folder));
                config = config.shaped_like(&m);
            }
            Err(e) => return fail(EXIT_USAGE, e),
        }
    }
    if let Some(r) = args.sample_rate_hz {
        config.sample_rate_hz = r;
    }
    if let Some(f) = args.fps {
        config.fps = f;
    }
    let rate_ok = (1000..=1_000_000).contains(&config.sample_rate_hz);
    let fps_ok = config.fps > 0.0 && config.fps.is_finite();
    if !(rate_ok && fps_ok) {
        return fail(
            EXIT_USAGE,
            "sample rate must be 1000..1000000 Hz and fps positive",
        );
    }
    if let Some(dir) = &args.save_disagreements {
        let occupied = std::fs::read_dir(dir).is_ok_and(|mut d| d.next().is_some());
        if occupied {
            return fail(
                EXIT_USAGE,
                format!(
                    "{}: --save-disagreements needs a new or empty folder",
                    dir.display()
                ),
            );
        }
    }
    let (mut report, kept) =
        validate::validate_keeping(&rig, &config, args.save_disagreements.is_some());
    if args.video {
        match validate_video(&rig, &config, args.video_count) {
            Ok(v) => report.video = Some(v),
            Err(e) => return fail(EXIT_OUTPUT, e),
        }
    }
    if let Some(dir) = &args.save_disagreements {
        if let Err(e) = std::fs::create_dir_all(dir) {
            return fail(EXIT_OUTPUT, format!("{}: {e}", dir.display()));
        }
        for trial in &kept {
            if let Err(e) = synth::write_trial_with(dir, trial, config.timestamp_digits) {
                return fail(EXIT_OUTPUT, e);
            }
        }
    }
    let text = match args.format {
        Format::Json => match serde_json::to_string_pretty(&report) {
            Ok(text) => text + "\n",
            Err(e) => return fail(EXIT_OUTPUT, e),
        },
        Format::Text => report::validate::render(&report),
    };
    emit(&text, ExitCode::SUCCESS)
}
