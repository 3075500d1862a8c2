//! The four readers (XYZ, wells CSV, manifest, GeoTIFF) on arbitrary and mutated bytes: every
//! input ends in a value or an error naming the input, never a panic or an allocation the input
//! asks for. A few hundred cases per reader keep this within seconds; `fuzz/` holds the
//! coverage-guided targets for the long runs (see its README).

use super::fixtures::*;
use proptest::prelude::*;
use std::path::Path;
use tidemark::io::text::Guarded;
use tidemark::io::wells::{self, TargetColumn, WellColumns};
use tidemark::io::{geotiff, xyz};
use tidemark::project::Project;

fn config() -> ProptestConfig {
    ProptestConfig {
        cases: 256,
        ..ProptestConfig::default()
    }
}

fn columns() -> WellColumns {
    WellColumns {
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
    }
}

/// Applies `edits` (position as a fraction of the length, new byte) to `bytes`.
fn mutate(mut bytes: Vec<u8>, edits: &[(f64, u8)]) -> Vec<u8> {
    for &(at, b) in edits {
        if !bytes.is_empty() {
            let k = ((at * bytes.len() as f64) as usize).min(bytes.len() - 1);
            bytes[k] = b;
        }
    }
    bytes
}

fn read_xyz(bytes: &[u8]) -> Result<Vec<f64>, tidemark::io::IoError> {
    let g = tiny_grid();
    let reader = Guarded::new(bytes, xyz::max_bytes(&g), "test", xyz::MAX_LINE_BYTES);
    xyz::parse_reader(Path::new("fuzz.xyz"), reader, &g, 0.01)
}

fn valid_xyz() -> Vec<u8> {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("m.xyz");
    xyz::write(&path, &tiny_grid(), &tiny_map(0, 0)).unwrap();
    std::fs::read(path).unwrap()
}

fn valid_tiff() -> Vec<u8> {
    geotiff::encode(&tiny_grid(), &tiny_map(0, 0), Some("fuzz")).unwrap()
}

const VALID_WELLS: &[u8] = b"well,x,y,step,dSw,weight\nA,1005,2004,m1,0.1,1\nB,1012,2011,m1,,2\n";

proptest! {
    #![proptest_config(config())]

    #[test]
    fn xyz_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        if let Err(e) = read_xyz(&bytes) {
            prop_assert!(e.to_string().contains("fuzz.xyz"));
        }
    }

    #[test]
    fn xyz_mutated(edits in proptest::collection::vec((0.0..1.0f64, any::<u8>()), 1..8)) {
        if let Err(e) = read_xyz(&mutate(valid_xyz(), &edits)) {
            prop_assert!(e.to_string().contains("fuzz.xyz"));
        }
    }

    #[test]
    fn wells_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        let steps = vec!["m1".to_string()];
        match wells::parse_all(Path::new("fuzz.csv"), &bytes, &columns(), &steps) {
            Ok((_, errors)) => {
                for e in errors {
                    prop_assert!(e.to_string().contains("fuzz.csv"));
                }
            }
            Err(e) => prop_assert!(e.to_string().contains("fuzz.csv")),
        }
    }

    #[test]
    fn wells_mutated(edits in proptest::collection::vec((0.0..1.0f64, any::<u8>()), 1..8)) {
        let steps = vec!["m1".to_string()];
        let bytes = mutate(VALID_WELLS.to_vec(), &edits);
        if let Err(e) = wells::parse_all(Path::new("fuzz.csv"), &bytes, &columns(), &steps) {
            prop_assert!(e.to_string().contains("fuzz.csv"));
        }
    }

    #[test]
    fn manifest_arbitrary_text(text in "\\PC{0,600}") {
        if let Err(e) = Project::from_toml_str(Path::new("fuzz.toml"), &text) {
            prop_assert!(e.to_string().contains("fuzz.toml"));
        }
    }

    #[test]
    fn manifest_mutated(edits in proptest::collection::vec((0.0..1.0f64, any::<u8>()), 1..6)) {
        let bytes = mutate(TINY_MANIFEST.as_bytes().to_vec(), &edits);
        let text = String::from_utf8_lossy(&bytes);
        if let Err(e) = Project::from_toml_str(Path::new("fuzz.toml"), &text) {
            prop_assert!(e.to_string().contains("fuzz.toml"));
        }
    }

    #[test]
    fn geotiff_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        let mut with_magic = b"II*\0".to_vec();
        with_magic.extend_from_slice(&bytes);
        for b in [&bytes, &with_magic] {
            if let Err(e) = geotiff::decode_on_grid(Path::new("fuzz.tif"), b, &tiny_grid()) {
                prop_assert!(e.to_string().contains("fuzz.tif"));
            }
            if let Err(e) = geotiff::decode(Path::new("fuzz.tif"), b) {
                prop_assert!(e.to_string().contains("fuzz.tif"));
            }
        }
    }

    #[test]
    fn geotiff_mutated(edits in proptest::collection::vec((0.0..1.0f64, any::<u8>()), 1..8)) {
        // Most of a tiny GeoTIFF is its header and tags, so most edits land on them.
        let bytes = mutate(valid_tiff(), &edits);
        if let Err(e) = geotiff::decode_on_grid(Path::new("fuzz.tif"), &bytes, &tiny_grid()) {
            prop_assert!(e.to_string().contains("fuzz.tif"));
        }
        if let Err(e) = geotiff::decode(Path::new("fuzz.tif"), &bytes) {
            prop_assert!(e.to_string().contains("fuzz.tif"));
        }
    }
}
