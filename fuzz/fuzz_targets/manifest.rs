//! The project manifest: arbitrary text through parsing and every check of the settings.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;
use tidemark::project::Project;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    if let Err(e) = Project::from_toml_str(Path::new("/fuzz/project.toml"), &text) {
        assert!(e.to_string().contains("project.toml"));
    }
});
