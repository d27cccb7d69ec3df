//! Manifest reader (trial discovery from a CSV) and trial-name checks.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let dir = std::env::temp_dir().join(format!("latchtime-fuzz-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join("manifest.csv");
    if std::fs::write(&path, data).is_ok() {
        if let Ok(trials) = latchtime::batch::discover(&path) {
            for t in trials {
                let _ = latchtime::batch::discover::check_name(&t.spec.name);
                let _ = latchtime::batch::discover::safe_stand_in(&t.spec.name);
            }
        }
    }
});
