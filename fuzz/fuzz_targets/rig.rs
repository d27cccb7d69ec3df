//! Rig profile parser and validation.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        if let Ok(rig) = latchtime::RigProfile::from_json(text) {
            let _ = rig.acoustic_delay_s();
            let _ = rig.pressure_pa(0.5);
        }
    }
});
