//! GeoTIFF round trips, and an outside check with GDAL's gdalinfo / gdal_translate (Debian gdal-bin).

use super::fixtures::list_files;
use std::path::Path;
use std::process::Command;
use tidemark::grid::Grid;
use tidemark::io::{IoError, geotiff};

fn grid(rotation: f64, epsg: Option<u32>) -> Grid {
    Grid {
        origin_x: 500000.0,
        origin_y: 3300000.0,
        dx: 25.0,
        dy: 12.5,
        nx: 7,
        ny: 5,
        rotation,
        epsg,
        null_value: -999.25,
    }
}

fn values(g: &Grid) -> Vec<f64> {
    let mut v: Vec<f64> = (0..g.len())
        .map(|k| (k as f64 * 0.37).sin() * 3.0)
        .collect();
    v[3] = f64::NAN;
    v[g.len() - 1] = f64::NAN;
    v
}

fn assert_same_values(a: &[f64], b: &[f64]) {
    assert_eq!(a.len(), b.len());
    for (k, (x, y)) in a.iter().zip(b).enumerate() {
        if x.is_nan() {
            assert!(y.is_nan(), "node {k}: expected null, got {y}");
        } else {
            // float32 storage: relative precision 2^-24.
            assert!(
                (x - y).abs() <= 1e-6 * x.abs().max(1.0),
                "node {k}: {x} vs {y}"
            );
        }
    }
}

#[test]
fn round_trip_unrotated_and_rotated() {
    let dir = tempfile::tempdir().unwrap();
    for (k, (rotation, epsg)) in [(0.0, Some(32625)), (30.0, Some(32625)), (-112.5, None)]
        .into_iter()
        .enumerate()
    {
        let g = grid(rotation, epsg);
        let v = values(&g);
        let path = dir.path().join(format!("map{k}.tif"));
        geotiff::write(&path, &g, &v, Some("Skerrow Bank test map")).unwrap();
        let r = geotiff::read(&path).unwrap();
        assert!(
            g.differences(&r.grid).is_empty(),
            "{:?}",
            g.differences(&r.grid)
        );
        assert!((r.grid.rotation - rotation).abs() < 1e-9);
        assert!((r.grid.origin_x - g.origin_x).abs() < 1e-6);
        assert!((r.grid.origin_y - g.origin_y).abs() < 1e-6);
        assert_eq!(r.grid.epsg, epsg);
        assert_eq!(r.grid.null_value, -999.25);
        assert_eq!(r.description.as_deref(), Some("Skerrow Bank test map"));
        assert_same_values(&v, &r.values);
        assert_same_values(&v, &geotiff::read_on_grid(&path, &g).unwrap());
    }
}

#[test]
fn read_on_grid_says_how_grids_differ() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("m.tif");
    let g = grid(0.0, Some(32625));
    geotiff::write(&path, &g, &values(&g), None).unwrap();
    let mut other = g.clone();
    other.nx = 8;
    other.origin_x += 5.0;
    other.epsg = Some(32626);
    let err = geotiff::read_on_grid(&path, &other).unwrap_err();
    let msg = err.to_string();
    assert!(matches!(err, IoError::GridMismatch { .. }));
    assert!(msg.contains("m.tif"), "{msg}");
    assert!(msg.contains("size 7 x 5 nodes, expected 8 x 5"), "{msg}");
    assert!(msg.contains("origin"), "{msg}");
    assert!(msg.contains("EPSG:32625, expected EPSG:32626"), "{msg}");
}

#[test]
fn wrong_length_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let g = grid(0.0, None);
    let err = geotiff::write(&dir.path().join("m.tif"), &g, &[1.0; 5], None).unwrap_err();
    assert!(err.to_string().contains("m.tif"), "{err}");
    assert!(list_files(dir.path()).is_empty());
}

pub(crate) fn gdal(program: &str, args: &[&str]) -> std::process::Output {
    match Command::new(program).args(args).output() {
        Ok(out) => {
            assert!(
                out.status.success(),
                "{program} {args:?} failed: {}",
                String::from_utf8_lossy(&out.stderr)
            );
            out
        }
        Err(e) => panic!(
            "{program} could not be run ({e}). This test needs GDAL's command-line tools: \
             install Debian's gdal-bin (apt-get update && apt-get install -y gdal-bin)"
        ),
    }
}

pub(crate) fn gdalinfo_json(path: &Path) -> serde_json::Value {
    let out = gdal("gdalinfo", &["-json", path.to_str().unwrap()]);
    serde_json::from_slice(&out.stdout).expect("gdalinfo -json prints JSON")
}

// Outside check: GDAL (gdal-bin, Debian 12: GDAL 3.6) reads our files with the same size, origin,
// pixel size, nodata and EPSG code. GDAL's geotransform is the upper-left pixel corner and the pixel
// steps: GT = (x_ul, dx cos r, dy sin r, y_ul, dx sin r, -dy cos r) for row 0 = grid row ny - 1.
#[test]
fn gdalinfo_agrees() {
    let dir = tempfile::tempdir().unwrap();
    for (rotation, epsg) in [(0.0, Some(32625u32)), (30.0, Some(32625)), (-112.5, None)] {
        let g = grid(rotation, epsg);
        let path = dir.path().join(format!("rot{rotation}.tif"));
        geotiff::write(&path, &g, &values(&g), None).unwrap();
        let info = gdalinfo_json(&path);
        assert_eq!(info["size"], serde_json::json!([7, 5]), "{info}");
        let gt: Vec<f64> = info["geoTransform"]
            .as_array()
            .expect("geoTransform")
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let r = rotation.to_radians();
        let (c, s) = (r.cos(), r.sin());
        // Upper-left corner = node (0, ny-1) minus half a pixel along each axis.
        let (fi, fj) = (-0.5, g.ny as f64 - 0.5);
        let x_ul = g.origin_x + fi * g.dx * c - fj * g.dy * s;
        let y_ul = g.origin_y + fi * g.dx * s + fj * g.dy * c;
        let want = [x_ul, g.dx * c, g.dy * s, y_ul, g.dx * s, -g.dy * c];
        for (k, (a, b)) in gt.iter().zip(want).enumerate() {
            assert!((a - b).abs() < 1e-6, "geoTransform[{k}] {a} vs {b}");
        }
        let band = &info["bands"][0];
        assert_eq!(band["noDataValue"].as_f64(), Some(-999.25), "{band}");
        assert_eq!(band["type"], "Float32");
        let wkt = info["coordinateSystem"]["wkt"].as_str().expect("wkt");
        match epsg {
            Some(code) => assert!(
                wkt.ends_with(&format!("ID[\"EPSG\",{code}]]")),
                "EPSG code missing from {wkt}"
            ),
            // No EPSG code: GDAL must still see a named local engineering system in metres.
            None => {
                assert!(
                    wkt.starts_with(&format!("ENGCRS[\"{}\"", geotiff::LOCAL_CRS_NAME)),
                    "{wkt}"
                );
                assert!(wkt.contains("LENGTHUNIT[\"metre\",1"), "{wkt}");
            }
        }
    }
}

// Outside check of the node layout and values: GDAL's XYZ export prints each pixel centre and value;
// they must be our node coordinates and values (null written as the nodata value).
#[test]
fn gdal_translate_xyz_matches_nodes() {
    let dir = tempfile::tempdir().unwrap();
    let g = grid(0.0, Some(32625));
    let v = values(&g);
    let tif = dir.path().join("m.tif");
    let xyz = dir.path().join("m.xyz");
    geotiff::write(&tif, &g, &v, None).unwrap();
    gdal(
        "gdal_translate",
        &[
            "-q",
            "-of",
            "XYZ",
            tif.to_str().unwrap(),
            xyz.to_str().unwrap(),
        ],
    );
    let text = std::fs::read_to_string(&xyz).unwrap();
    let mut n = 0;
    for line in text.lines().filter(|l| !l.trim().is_empty()) {
        let f: Vec<f64> = line
            .split_whitespace()
            .map(|s| s.parse().unwrap())
            .collect();
        let (fi, fj) = g.fractional_ij(f[0], f[1]);
        let (i, j) = (fi.round() as usize, fj.round() as usize);
        assert!(
            (fi - i as f64).abs() < 1e-9 && (fj - j as f64).abs() < 1e-9,
            "{line}"
        );
        let want = v[g.index(i, j)];
        if want.is_nan() {
            assert_eq!(f[2], -999.25);
        } else {
            assert!((f[2] - want).abs() < 1e-5, "{line} vs {want}");
        }
        n += 1;
    }
    assert_eq!(n, g.len());
}

// GDAL writes other sample types, compression and tiling; our reader must decode them all.
#[test]
fn reads_gdal_written_variants() {
    let dir = tempfile::tempdir().unwrap();
    let g = grid(0.0, Some(32625));
    let v: Vec<f64> = (0..g.len()).map(|k| (k % 11) as f64 - 3.0).collect();
    let src = dir.path().join("src.tif");
    geotiff::write(&src, &g, &v, None).unwrap();
    let variants: [&[&str]; 4] = [
        &["-ot", "Int16", "-co", "COMPRESS=LZW"],
        &[
            "-ot",
            "Float64",
            "-co",
            "COMPRESS=DEFLATE",
            "-co",
            "TILED=YES",
            "-co",
            "BLOCKXSIZE=16",
            "-co",
            "BLOCKYSIZE=16",
        ],
        &["-ot", "Int32", "-co", "COMPRESS=PACKBITS"],
        &[
            "-ot",
            "Float32",
            "-co",
            "COMPRESS=LZW",
            "-co",
            "PREDICTOR=1",
        ],
    ];
    for (k, opts) in variants.iter().enumerate() {
        let out = dir.path().join(format!("v{k}.tif"));
        let mut args = vec!["-q"];
        args.extend_from_slice(opts);
        args.push(src.to_str().unwrap());
        args.push(out.to_str().unwrap());
        gdal("gdal_translate", &args);
        let read =
            geotiff::read_on_grid(&out, &g).unwrap_or_else(|e| panic!("variant {opts:?}: {e}"));
        assert_eq!(read, v, "variant {opts:?}");
    }
}
