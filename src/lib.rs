//! # latchtime
//!
//! Times latch-mediated spring actuation trials. Each trial is a high-speed video, reduced to a
//! per-frame measure (mean brightness of a region of interest, a tracked coordinate or angle),
//! and a microphone recording. latchtime finds when loading began, when the latch released,
//! when the fast movement peaked and when the click was heard; it measures loading time,
//! release duration, the power-amplification ratio and the damping of the post-release
//! oscillation, cross-checks the audio and video clocks, and flags what a person must look at.
//!
//! The pipeline is decode -> detect -> measure -> report:
//! [`decode`] turns files into [`signal`] types, [`detect`] finds events, [`measure`] builds a
//! [`TrialRecord`], [`report`] writes it; [`batch`] runs campaigns, [`synth`] makes trials with
//! known truth, and [`cli`] is the thin command line on top.
//!
//! ```
//! use latchtime::{detect, measure, rig::RigProfile, synth};
//!
//! let rig = RigProfile::from_json(synth::DEMO_RIG_JSON).unwrap();
//! let trial = synth::generate("demo", synth::TrialKind::Normal, &synth::SynthConfig::default(), &rig, 7);
//! let frames = trial.frames.as_ref().unwrap();
//! let series = latchtime::signal::FrameSeries {
//!     time_s: frames.iter().map(|f| f.1).collect(),
//!     frame_index: None,
//!     motion: frames.iter().map(|f| f.2).collect(),
//!     loading: frames.iter().map(|f| f.2).collect(),
//!     motion_column: "brightness".into(),
//!     loading_column: "brightness".into(),
//!     timestamps_given: true,
//!     ..Default::default()
//! };
//! let video = detect::detect_video(&series, &rig);
//! let mut record = measure::TrialRecord::empty("demo", None);
//! measure::measure(&mut record, None, Some(&video), &rig);
//! let truth = trial.truth.latch_release_s.unwrap();
//! assert!((record.latch_release_s.unwrap() - truth).abs() < 2e-3);
//! ```

pub mod batch;
pub mod cli;
pub mod decode;
pub mod detect;
pub mod error;
pub mod measure;
pub mod pipeline;
pub mod report;
pub mod rig;
pub mod signal;
pub mod synth;
pub mod track;
pub mod validate;

pub use error::{Error, Result};
pub use measure::{Flag, Status, TrialRecord};
pub use pipeline::{analyze_files, TrialSpec};
pub use rig::RigProfile;
