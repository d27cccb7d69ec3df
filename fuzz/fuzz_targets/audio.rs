//! Audio front end (hound fast path, symphonia for the rest) and the audio detectors.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    for name in ["f.wav", "f.flac", "f.mp3", "f.ogg", "f.m4a", "f.caf", "f.aiff"] {
        if let Ok(signal) = latchtime::decode::decode_audio(std::path::Path::new(name), data, 0) {
            let rig = latchtime::RigProfile::default();
            let _ = latchtime::detect::detect_audio(&signal, &rig, &mut Default::default());
        }
    }
});
