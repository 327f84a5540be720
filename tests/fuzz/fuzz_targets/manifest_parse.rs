//! Fuzz target: any text given to the manifest parser returns a manifest or a located error; it
//! never panics, and a manifest it accepts expands into a plan.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        if let Ok(m) = tabcard::manifest::parse(std::path::Path::new("fuzz.toml"), text) {
            let _ = tabcard::manifest::canonical_hash(&m);
            let _ = tabcard::experiment::plan::build(&m, &tabcard::experiment::plan::RunNaming::Inputs("fuzz".into()));
        }
    }
});
