//! XYZ maps as GIS tools see them: GDAL's "ASCII Gridded XYZ" driver (Debian gdal-bin, GDAL 3.6)
//! must open what tidemark writes, with the nodata value and coordinate system of the sidecar, and
//! tidemark must still read XYZ files written before the header line was dropped.

use super::geotiff::{gdal, gdalinfo_json};
use std::path::Path;
use tidemark::grid::Grid;
use tidemark::io::{geotiff, xyz};

fn grid(epsg: Option<u32>) -> Grid {
    Grid {
        origin_x: 500000.0,
        origin_y: 3300000.0,
        dx: 25.0,
        dy: 12.5,
        nx: 9,
        ny: 6,
        rotation: 0.0,
        epsg,
        null_value: -999.25,
    }
}

fn values(g: &Grid) -> Vec<f64> {
    let mut v: Vec<f64> = (0..g.len())
        .map(|k| (k as f64 * 0.61).cos() * 2.5 + 0.125)
        .collect();
    v[4] = f64::NAN;
    v[g.len() - 2] = f64::NAN;
    v
}

// Outside check: gdalinfo opens the XYZ as a raster of the grid's size and spacing, takes the
// nodata value and the coordinate system from the sidecar, and gdal_translate turns it into a
// GeoTIFF whose every node holds the value written (float32 precision), nulls as nodata.
#[test]
fn gdal_opens_written_xyz() {
    let dir = tempfile::tempdir().unwrap();
    for epsg in [Some(32625u32), None] {
        let g = grid(epsg);
        let v = values(&g);
        let path = dir.path().join(format!("m{}.xyz", epsg.unwrap_or(0)));
        xyz::write(&path, &g, &v).unwrap();
        assert!(xyz::sidecar_path(&path).exists());
        let first = std::fs::read_to_string(&path).unwrap();
        assert!(
            first.lines().next().unwrap().split(' ').count() == 3,
            "first line must be data: {first:.60}"
        );
        let info = gdalinfo_json(&path);
        assert_eq!(info["driverShortName"], "XYZ", "{info}");
        assert_eq!(info["size"], serde_json::json!([g.nx, g.ny]), "{info}");
        let gt: Vec<f64> = info["geoTransform"]
            .as_array()
            .expect("geoTransform")
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        // The XYZ driver keeps the file's row order (y increasing): first pixel corner half a
        // cell below and left of node (0, 0), rows stepping +dy.
        let want = [g.origin_x - 12.5, 25.0, 0.0, g.origin_y - 6.25, 0.0, 12.5];
        for (k, (a, b)) in gt.iter().zip(want).enumerate() {
            assert!((a - b).abs() < 1e-6, "geoTransform[{k}] {a} vs {b}");
        }
        assert_eq!(
            info["bands"][0]["noDataValue"].as_f64(),
            Some(-999.25),
            "{info}"
        );
        let wkt = info["coordinateSystem"]["wkt"].as_str().expect("wkt");
        match epsg {
            Some(code) => assert!(wkt.ends_with(&format!("ID[\"EPSG\",{code}]]")), "{wkt}"),
            None => assert!(
                wkt.starts_with(&format!("ENGCRS[\"{}\"", geotiff::LOCAL_CRS_NAME)),
                "{wkt}"
            ),
        }
        let tif = dir.path().join(format!("m{}.tif", epsg.unwrap_or(0)));
        gdal(
            "gdal_translate",
            &["-q", path.to_str().unwrap(), tif.to_str().unwrap()],
        );
        let back = geotiff::read(&tif).unwrap();
        assert_eq!((back.grid.nx, back.grid.ny), (g.nx, g.ny));
        assert!(
            g.differences(&back.grid).is_empty(),
            "{:?}",
            g.differences(&back.grid)
        );
        for (k, (a, b)) in v.iter().zip(&back.values).enumerate() {
            if a.is_nan() {
                assert!(b.is_nan(), "node {k}: null expected, got {b}");
            } else {
                // Float32 in GDAL's copy: relative precision 2^-24.
                assert!(
                    (a - b).abs() <= 1e-6 * a.abs().max(1.0),
                    "node {k}: {a} vs {b}"
                );
            }
        }
    }
}

// Files written by earlier versions began with a '#' line describing the grid; they must still
// read, to the same values as the header-less file.
#[test]
fn reads_old_and_new_xyz() {
    let dir = tempfile::tempdir().unwrap();
    let g = grid(None);
    let v = values(&g);
    let new = dir.path().join("new.xyz");
    xyz::write(&new, &g, &v).unwrap();
    let text = std::fs::read_to_string(&new).unwrap();
    let old = dir.path().join("old.xyz");
    std::fs::write(
        &old,
        format!("# x y value; 9 x 6 nodes, dx=25 dy=12.5 rotation=0, null=-999.25\n{text}"),
    )
    .unwrap();
    let a = xyz::read_on_grid(&new, &g, 0.01).unwrap();
    let b = xyz::read_on_grid(&old, &g, 0.01).unwrap();
    for (k, ((x, y), z)) in a.iter().zip(&b).zip(&v).enumerate() {
        assert!(
            (x.is_nan() && y.is_nan() && z.is_nan()) || (x == y && x == z),
            "node {k}: {x} {y} {z}"
        );
    }
}

// The sidecar describes the grid for a reader that does not know it.
#[test]
fn sidecar_describes_the_grid() {
    let g = Grid {
        rotation: 30.0,
        ..grid(None)
    };
    let text = xyz::sidecar_text(&g, Some("{\"quantity\": \"dSw <P50>\"}"));
    for want in [
        "<MDI key=\"nodes\">9 x 6</MDI>",
        "<MDI key=\"dx\">25</MDI>",
        "<MDI key=\"dy\">12.5</MDI>",
        "<MDI key=\"rotation_degrees\">30</MDI>",
        "<NoDataValue>-999.25</NoDataValue>",
        "&quot;dSw &lt;P50&gt;&quot;",
        "LOCAL_CS[",
    ] {
        assert!(text.contains(want), "{want} missing from {text}");
    }
    assert!(!Path::new(&xyz::sidecar_path(Path::new("a/b.xyz"))).is_absolute());
    assert_eq!(
        xyz::sidecar_path(Path::new("a/b.xyz")),
        Path::new("a/b.xyz.aux.xml")
    );
}
