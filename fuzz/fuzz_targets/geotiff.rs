//! GeoTIFF maps: arbitrary bytes decoded on a small grid and on their own.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;
use tidemark::io::geotiff;

#[path = "common.rs"]
mod common;

fuzz_target!(|data: &[u8]| {
    if let Err(e) = geotiff::decode_on_grid(Path::new("fuzz.tif"), data, &common::grid()) {
        assert!(e.to_string().contains("fuzz.tif"));
    }
    if let Err(e) = geotiff::decode(Path::new("fuzz.tif"), data) {
        assert!(e.to_string().contains("fuzz.tif"));
    }
});
