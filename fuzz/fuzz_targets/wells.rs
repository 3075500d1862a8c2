//! The wells CSV: arbitrary bytes with a fixed column layout.
#![no_main]

use libfuzzer_sys::fuzz_target;
use std::path::Path;
use tidemark::io::wells::{self, TargetColumn, WellColumns};

fuzz_target!(|data: &[u8]| {
    let columns = WellColumns {
        well: "well".into(),
        x: "x".into(),
        y: "y".into(),
        step: "step".into(),
        weight: "weight".into(),
        weight_required: false,
        targets: vec![TargetColumn {
            column: "dSw".into(),
            min: -1.0,
            max: 1.0,
        }],
    };
    let steps = vec!["m1".to_string(), "m2".to_string()];
    match wells::parse_all(Path::new("fuzz.csv"), data, &columns, &steps) {
        Ok((_, errors)) => {
            for e in errors {
                assert!(e.to_string().contains("fuzz.csv"));
            }
        }
        Err(e) => assert!(e.to_string().contains("fuzz.csv")),
    }
});
