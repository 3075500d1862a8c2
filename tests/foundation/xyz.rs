//! XYZ text grids: snapping, nulls, round trip, errors naming file and line.

use super::fixtures::list_files;
use std::path::Path;
use tidemark::grid::Grid;
use tidemark::io::{IoError, xyz};

fn grid(rotation: f64) -> Grid {
    Grid {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 20.0,
        dy: 10.0,
        nx: 4,
        ny: 3,
        rotation,
        epsg: None,
        null_value: -999.25,
    }
}

#[test]
fn snapping_within_tolerance() {
    // Node (2, 1) of the unrotated grid is at (1040, 2010); 1 % of the spacing is 0.2 m in x and
    // 0.1 m in y.
    let g = grid(0.0);
    let p = Path::new("snap.xyz");
    let v = xyz::parse(p, "1040.15 2009.93 5.5\n", &g, 0.01).unwrap();
    assert_eq!(v[g.index(2, 1)], 5.5);
    assert_eq!(
        v.iter().filter(|x| !x.is_nan()).count(),
        1,
        "absent nodes are null"
    );
    // 0.25 m off in x is 1.25 % of dx: off the grid.
    let err = xyz::parse(
        p,
        "# header comment\n1040 2010 1\n1040.25 2010 5.5\n",
        &g,
        0.01,
    )
    .unwrap_err();
    let msg = err.to_string();
    assert!(matches!(err, IoError::OffGrid { count: 1, .. }), "{msg}");
    assert!(msg.contains("snap.xyz") && msg.contains("line 3"), "{msg}");
    // A wider tolerance accepts it.
    let v = xyz::parse(p, "1040.25 2010 5.5\n", &g, 0.02).unwrap();
    assert_eq!(v[g.index(2, 1)], 5.5);
}

#[test]
fn snapping_on_a_rotated_grid() {
    // Rotation 90 deg: node (i, j) at (x0 - j dy, y0 + i dx); node (3, 2) at (980, 2060).
    let g = grid(90.0);
    let v = xyz::parse(Path::new("r.xyz"), "980.05 2060.1 -1.5\n", &g, 0.01).unwrap();
    assert_eq!(v[g.index(3, 2)], -1.5);
    // (1040, 2010) is outside the rotated grid.
    assert!(xyz::parse(Path::new("r.xyz"), "1040 2010 1\n", &g, 0.01).is_err());
}

#[test]
fn off_grid_error_counts_and_lists_the_first_few() {
    let g = grid(0.0);
    let mut text = String::from("x,y,z\n");
    for k in 0..8 {
        text.push_str(&format!("{} 2005 1\n", 1000 + 20 * (k % 4)));
    }
    let err = xyz::parse(Path::new("many.xyz"), &text, &g, 0.01).unwrap_err();
    let msg = err.to_string();
    assert!(msg.contains("8 point(s)"), "{msg}");
    assert!(
        msg.contains("line 2 (1000, 2005)") && msg.contains("line 6"),
        "{msg}"
    );
    assert!(
        !msg.contains("line 7"),
        "only the first five are listed: {msg}"
    );
}

#[test]
fn round_trip_with_nulls_rotated() {
    let dir = tempfile::tempdir().unwrap();
    for rotation in [0.0, 33.3] {
        let g = grid(rotation);
        let mut v: Vec<f64> = (0..g.len()).map(|k| k as f64 / 7.0 - 0.5).collect();
        v[5] = f64::NAN;
        let path = dir.path().join(format!("m{rotation}.xyz"));
        xyz::write(&path, &g, &v).unwrap();
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(
            text.contains(" -999.25\n"),
            "null written as the null value"
        );
        let back = xyz::read_on_grid(&path, &g, 0.01).unwrap();
        for (a, b) in v.iter().zip(&back) {
            assert!(a == b || (a.is_nan() && b.is_nan()), "{a} vs {b}");
        }
    }
}

#[test]
fn duplicate_node_and_malformed_lines_name_the_line() {
    let g = grid(0.0);
    let p = Path::new("d.xyz");
    let e = xyz::parse(p, "1000 2000 1\n1020 2000 2\n1000.01 2000 3\n", &g, 0.01).unwrap_err();
    assert!(
        e.to_string().contains("d.xyz, line 3") && e.to_string().contains("line 1"),
        "{e}"
    );
    let e = xyz::parse(p, "1000 2000 1\n1020;2000;2\n", &g, 0.01).unwrap_err();
    assert!(e.to_string().contains("d.xyz, line 2"), "{e}");
    let e = xyz::parse(p, "1000 2000 1 4\n", &g, 0.01).unwrap_err();
    assert!(e.to_string().contains("line 1: expected 3 fields"), "{e}");
    let e = xyz::parse(p, "1000 2000 inf\n", &g, 0.01).unwrap_err();
    assert!(e.to_string().contains("line 1"), "{e}");
    let e = xyz::parse(p, "# only a comment\n", &g, 0.01).unwrap_err();
    assert!(e.to_string().contains("no data points"), "{e}");
}

#[test]
fn wrong_length_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    assert!(xyz::write(&dir.path().join("m.xyz"), &grid(0.0), &[0.0; 3]).is_err());
    assert!(list_files(dir.path()).is_empty());
}

#[test]
fn shared_coordinates_write_the_same_text() {
    // Every line must read `x y value` with the node's own coordinates, in index order, whether
    // the coordinates are formatted per map or once per grid; a grid of another size is refused.
    let dir = tempfile::tempdir().unwrap();
    let g = grid(33.3);
    let coords = xyz::Coordinates::new(&g);
    let v: Vec<f64> = (0..g.len()).map(|k| (k as f64).sqrt() - 1e-7).collect();
    let (a, b) = (dir.path().join("a.xyz"), dir.path().join("b.xyz"));
    xyz::write(&a, &g, &v).unwrap();
    xyz::write_with_coordinates(&b, &g, &v, &coords).unwrap();
    let text = std::fs::read_to_string(&b).unwrap();
    assert_eq!(std::fs::read_to_string(&a).unwrap(), text);
    assert_eq!(
        text.lines().count(),
        g.len(),
        "one line per node, no header"
    );
    for (k, line) in text.lines().enumerate() {
        let f: Vec<f64> = line.split(' ').map(|s| s.parse().unwrap()).collect();
        let (x, y) = g.node_xy(k % g.nx, k / g.nx);
        assert_eq!((f[0], f[1], f[2]), (x, y, v[k]), "line {}", k + 1);
    }
    let other = Grid { nx: 5, ..grid(0.0) };
    let c = dir.path().join("c.xyz");
    let e = xyz::write_with_coordinates(&c, &g, &v, &xyz::Coordinates::new(&other)).unwrap_err();
    assert!(e.to_string().contains("c.xyz"), "{e}");
    assert!(!c.exists());
}
