//! Gaussian smoothing of attribute maps (`tidemark::smooth`): normalised convolution against
//! SciPy's Gaussian filter, nulls, rotation, and the point evaluation at wells.

use tidemark::grid::Grid;
use tidemark::smooth::{at_point, radius_nodes, smooth_map};

/// 7 x 5 grid, dx 10 m, dy 20 m, three null nodes.
fn field(rotation: f64) -> (Grid, Vec<f64>) {
    let g = Grid {
        origin_x: 431_000.0,
        origin_y: 6_122_000.0,
        dx: 10.0,
        dy: 20.0,
        nx: 7,
        ny: 5,
        rotation,
        epsg: None,
        null_value: -999.25,
    };
    let mut v = Vec::with_capacity(g.len());
    for j in 0..g.ny {
        for i in 0..g.nx {
            v.push(((i * 7 + j * 3) % 11) as f64 - 5.0 + 0.25 * i as f64);
        }
    }
    for (i, j) in [(2, 1), (5, 3), (0, 0)] {
        v[j * g.nx + i] = f64::NAN;
    }
    (g, v)
}

/// Reference: SciPy 1.17.1, `scipy.ndimage.gaussian_filter(v * c, (0.75, 1.5), mode="constant",
/// cval=0, truncate=4.0) / gaussian_filter(c, ...)` with `c` = 1 at non-null nodes and 0 at
/// nulls (normalised convolution), sigma 15 m = 1.5 nodes along x and 0.75 along y.
#[test]
fn normalised_convolution_matches_scipy() {
    let (g, v) = field(0.0);
    let s = smooth_map(&g, &v, 15.0);
    let expected = [
        ((0, 1), 0.9062024861234663),
        ((3, 2), 0.8332009522237017),
        ((6, 4), 2.6612879795945807),
        ((2, 2), 0.7839314499545224),
        ((4, 0), 1.7718138272327753),
    ];
    for ((i, j), want) in expected {
        let got = s[j * g.nx + i];
        assert!(
            (got - want).abs() < 1e-12,
            "node ({i}, {j}): {got} against {want}"
        );
    }
    // Null nodes stay null; every other node gets a value.
    for (k, (a, b)) in v.iter().zip(&s).enumerate() {
        assert_eq!(a.is_nan(), b.is_nan(), "node {k}");
    }
    // SciPy's radius rule, int(truncate * sd + 0.5).
    assert_eq!(radius_nodes(15.0, 10.0), 6);
    assert_eq!(radius_nodes(15.0, 20.0), 3);
}

#[test]
fn constant_map_and_zero_width_are_unchanged() {
    let (g, mut v) = field(0.0);
    let plain = v.clone();
    let same = smooth_map(&g, &v, 0.0);
    assert!(
        same.iter()
            .zip(&plain)
            .all(|(a, b)| a.to_bits() == b.to_bits())
    );
    for x in v.iter_mut().filter(|x| !x.is_nan()) {
        *x = 3.5;
    }
    // A weighted mean of equal values is that value, whatever the nulls around.
    for (k, x) in smooth_map(&g, &v, 40.0).iter().enumerate() {
        assert!(x.is_nan() || (x - 3.5).abs() < 1e-12, "node {k}: {x}");
    }
}

#[test]
fn point_on_a_node_equals_the_map_and_rotation_changes_nothing() {
    for rotation in [0.0, 33.0] {
        let (g, v) = field(rotation);
        let s = smooth_map(&g, &v, 25.0);
        for j in 0..g.ny {
            for i in 0..g.nx {
                let (x, y) = g.node_xy(i, j);
                let k = j * g.nx + i;
                if v[k].is_nan() {
                    continue;
                }
                let p = at_point(&g, &v, x, y, 25.0).expect("a node with a value");
                assert!(
                    (p - s[k]).abs() < 1e-9,
                    "rotation {rotation}, node ({i}, {j})"
                );
            }
        }
    }
    // Between nodes the point value lies within the range of the map; outside the grid, none.
    let (g, v) = field(0.0);
    let (x, y) = g.fractional_xy(2.4, 1.7);
    let p = at_point(&g, &v, x, y, 25.0).expect("inside");
    let (lo, hi) = v
        .iter()
        .filter(|x| !x.is_nan())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        });
    assert!(p > lo && p < hi);
    assert!(at_point(&g, &v, g.origin_x - 100.0, g.origin_y, 25.0).is_none());
}
