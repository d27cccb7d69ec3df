//! Frame CSV parser and the video detectors.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let options = latchtime::decode::FrameOptions { fps: Some(1000.0), ..Default::default() };
    if let Ok(series) = latchtime::decode::decode_frames(std::path::Path::new("f.frames.csv"), data, &options) {
        let _ = latchtime::detect::detect_video(&series, &latchtime::RigProfile::default());
    }
});
