//! Decoding: files on disk into the in-memory forms of [`crate::signal`]. Audio goes through
//! the WAV-family reader (`wav`) or symphonia (every other container and codec);
//! frame streams are CSV read with the `csv` crate. Decoders take the file's bytes, so a batch
//! reads each input once and hashes the same bytes for resume.

pub mod audio;
pub mod frames;
mod mp4;
pub mod video;
mod wav;

pub use audio::{
    decode_audio, decode_audio_in_place, decode_audio_reusing, decode_audio_with_info, AudioInfo,
    DecodedAudio, InputBytes,
};
pub use frames::{decode_frames, FrameOptions};

use std::path::Path;

use crate::error::{Error, Result};

/// Reads a whole input file, naming it on failure.
pub fn read_input(path: &Path) -> Result<Vec<u8>> {
    std::fs::read(path).map_err(|e| Error::io(path, e))
}
