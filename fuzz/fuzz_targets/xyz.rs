//! XYZ text maps: arbitrary bytes through the guarded reader onto a small grid.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;
use tidemark::io::{text::Guarded, xyz};

#[path = "common.rs"]
mod common;

fuzz_target!(|data: &[u8]| {
    let g = common::grid();
    let reader = Guarded::new(data, xyz::max_bytes(&g), "fuzz", xyz::MAX_LINE_BYTES);
    if let Err(e) = xyz::parse_reader(Path::new("fuzz.xyz"), reader, &g, 0.01) {
        assert!(e.to_string().contains("fuzz.xyz"));
    }
});
