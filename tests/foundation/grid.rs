//! Bilinear and window sampling against hand-computed values, on unrotated and rotated grids.

use tidemark::grid::Grid;

/// 3 x 3 grid; values by (i, j):
/// ```text
/// j=2:  0  -2   8
/// j=1:  3   7   5
/// j=0:  1   2   4
/// ```
fn grid(rotation: f64, origin: (f64, f64)) -> (Grid, Vec<f64>) {
    let g = Grid {
        origin_x: origin.0,
        origin_y: origin.1,
        dx: 10.0,
        dy: 20.0,
        nx: 3,
        ny: 3,
        rotation,
        epsg: None,
        null_value: -999.25,
    };
    let v = vec![1.0, 2.0, 4.0, 3.0, 7.0, 5.0, 0.0, -2.0, 8.0];
    (g, v)
}

/// World point of fractional node position (fi, fj), written out from the convention in
/// DEVELOPERS.md (x = x0 + i dx cos r - j dy sin r, y = y0 + i dx sin r + j dy cos r), independently
/// of `Grid::node_xy`.
fn world(g: &Grid, fi: f64, fj: f64) -> (f64, f64) {
    let r = g.rotation.to_radians();
    (
        g.origin_x + fi * g.dx * r.cos() - fj * g.dy * r.sin(),
        g.origin_y + fi * g.dx * r.sin() + fj * g.dy * r.cos(),
    )
}

// Hand computation with the bilinear formula (Press et al., Numerical Recipes 3rd ed., eq. 3.6.5):
// f = (1-t)(1-u) f00 + t(1-u) f10 + (1-t)u f01 + t u f11.
// (fi, fj) = (0.5, 0.5): cell (0,0), t = u = 0.5 -> (1 + 2 + 3 + 7) / 4 = 3.25.
// (fi, fj) = (1.2, 1.5): cell (1,1), t = 0.2, u = 0.5 -> 0.4*7 + 0.1*5 + 0.4*(-2) + 0.1*8 = 3.3.
// (fi, fj) = (0.25, 2.0): top edge, t = 0.25 -> 0.75*0 + 0.25*(-2) = -0.5.
// (fi, fj) = (2.0, 0.75): right edge, u = 0.75 -> 0.25*4 + 0.75*5 = 4.75.
const CASES: [(f64, f64, f64); 5] = [
    (0.5, 0.5, 3.25),
    (1.2, 1.5, 3.3),
    (0.25, 2.0, -0.5),
    (2.0, 0.75, 4.75),
    (2.0, 2.0, 8.0),
];

#[test]
fn bilinear_hand_computed_unrotated_and_rotated() {
    for rotation in [0.0, 90.0, 30.0, -47.5] {
        let (g, v) = grid(rotation, (512000.0, 7340000.0));
        for (fi, fj, want) in CASES {
            let (x, y) = world(&g, fi, fj);
            let got = g.bilinear(&v, x, y).expect("inside");
            assert!(
                (got - want).abs() < 1e-9,
                "rotation {rotation}, ({fi}, {fj}): got {got}, want {want}"
            );
        }
    }
}

#[test]
fn bilinear_rotated_90_explicit_coordinates() {
    // Rotation 90 deg: node (i, j) lies at (x0 - j dy, y0 + i dx). (fi, fj) = (1.2, 1.5) is at
    // (100 - 30, 200 + 12) = (70, 212), written out by hand.
    let (g, v) = grid(90.0, (100.0, 200.0));
    let got = g.bilinear(&v, 70.0, 212.0).expect("inside");
    assert!((got - 3.3).abs() < 1e-9, "{got}");
    // Node (2, 0) is at (100, 220) and holds 4.
    assert!((g.bilinear(&v, 100.0, 220.0).expect("node") - 4.0).abs() < 1e-9);
}

#[test]
fn bilinear_outside_and_nulls() {
    let (g, mut v) = grid(30.0, (0.0, 0.0));
    let (x, y) = world(&g, -0.01, 1.0);
    assert_eq!(g.bilinear(&v, x, y), None, "outside the hull");
    let (x, y) = world(&g, 1.0, 2.01);
    assert_eq!(g.bilinear(&v, x, y), None, "outside the hull");
    v[8] = f64::NAN; // node (2, 2)
    let (x, y) = world(&g, 1.2, 1.5);
    assert_eq!(g.bilinear(&v, x, y), None, "a weighted corner is null");
    // On node (1, 1) and on the edge j = 1 the null corner carries no weight.
    let (x, y) = world(&g, 1.0, 1.0);
    assert!((g.bilinear(&v, x, y).expect("on a node") - 7.0).abs() < 1e-9);
    let (x, y) = world(&g, 1.5, 1.0);
    assert!((g.bilinear(&v, x, y).expect("on an edge") - 6.0).abs() < 1e-9);
}

#[test]
fn window_mean_hand_computed() {
    for rotation in [0.0, 30.0] {
        let (g, mut v) = grid(rotation, (500.0, 800.0));
        // Around node (1, 1), radius 10.5 m: nodes (0,1), (1,1), (2,1) at 10, 0, 10 m; (1,0) and
        // (1,2) are 20 m away. Mean (3 + 7 + 5) / 3 = 5.
        let (x, y) = world(&g, 1.0, 1.0);
        assert!((g.window_mean(&v, x, y, 10.5).expect("nodes") - 5.0).abs() < 1e-12);
        // Radius 22.37 m (just over sqrt(10^2 + 20^2) = 22.36) takes all nine nodes: mean 28/9.
        assert!((g.window_mean(&v, x, y, 22.37).expect("nodes") - 28.0 / 9.0).abs() < 1e-12);
        // Nulls are skipped: without node (0, 1) the 10.5 m mean is (7 + 5) / 2.
        v[3] = f64::NAN;
        assert!((g.window_mean(&v, x, y, 10.5).expect("nodes") - 6.0).abs() < 1e-12);
        // No node within 4 m of the centre of cell (0, 0) (nearest is 11.2 m away).
        let (x, y) = world(&g, 0.5, 0.5);
        assert_eq!(g.window_mean(&v, x, y, 4.0), None);
    }
}

#[test]
fn node_xy_fractional_ij_inverse_rotated() {
    let (g, _) = grid(-123.4, (512000.0, 7340000.0));
    for (fi, fj) in [(0.0, 0.0), (1.3, 0.2), (2.0, 2.0), (-1.0, 5.5)] {
        let (x, y) = world(&g, fi, fj);
        let (gi, gj) = g.fractional_ij(x, y);
        assert!((gi - fi).abs() < 1e-9 && (gj - fj).abs() < 1e-9);
    }
    assert!(g.contains(world(&g, 2.0, 0.0).0, world(&g, 2.0, 0.0).1));
    assert!(!g.contains(world(&g, 2.1, 0.0).0, world(&g, 2.1, 0.0).1));
}

mod properties {
    use proptest::prelude::*;
    use tidemark::grid::Grid;

    proptest! {
        // Identity: bilinear interpolation reproduces any affine function a + b i + c j exactly
        // (Numerical Recipes 3rd ed., section 3.6: the interpolant is linear along each axis), on any
        // rotation, spacing and origin.
        #[test]
        fn bilinear_is_exact_for_affine_maps(
            rotation in -180.0f64..180.0,
            dx in 0.5f64..100.0,
            dy in 0.5f64..100.0,
            a in -10.0f64..10.0,
            b in -3.0f64..3.0,
            c in -3.0f64..3.0,
            fi in 0.0f64..6.0,
            fj in 0.0f64..4.0,
        ) {
            let g = Grid { origin_x: 512000.0, origin_y: 7340000.0, dx, dy, nx: 7, ny: 5,
                           rotation, epsg: None, null_value: -999.25 };
            let mut v = vec![0.0; g.len()];
            for j in 0..g.ny {
                for i in 0..g.nx {
                    v[g.index(i, j)] = a + b * i as f64 + c * j as f64;
                }
            }
            let (x, y) = g.fractional_xy(fi, fj);
            let got = g.bilinear(&v, x, y).expect("inside");
            prop_assert!((got - (a + b * fi + c * fj)).abs() < 1e-7);
        }
    }
}
