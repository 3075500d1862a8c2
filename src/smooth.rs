//! Gaussian smoothing of attribute maps on the node lattice, with nulls left out.
//!
//! Time-lapse attribute maps carry non-repeatability noise from node to node, while the changes
//! they respond to (pressure above all) vary smoothly over many nodes. A smoothed copy of every
//! attribute lets a target's trees see the local average instead of one noisy node; which width
//! (if any) helps a target is decided by whole-well cross-validation
//! (`pipeline::scale`), never assumed.
//!
//! The smoothing is normalised convolution (Knutsson & Westin 1993, "Normalized and differential
//! convolution", Proc. IEEE CVPR, 515-523) with a Gaussian applicability function and a certainty
//! of 1 at nodes with a value and 0 at null nodes and beyond the grid:
//! `s(p) = sum_q g(p - q) c(q) v(q) / sum_q g(p - q) c(q)`. A null node stays null; a node next
//! to nulls or the grid's edge averages only the nodes that have values. The Gaussian is
//! separable, so the two sums are computed by one pass along each grid axis, and it is cut at
//! [`TRUNCATE`] standard deviations, as `scipy.ndimage.gaussian_filter` cuts it by default
//! (radius `floor(TRUNCATE * sigma + 0.5)` nodes along each axis). The width is in metres and
//! isotropic on the ground: along the grid's axes it is `sigma / dx` and `sigma / dy` nodes
//! (rotation does not change distances).
//!
//! [`at_point`] evaluates the same sums centred on any point (a well between nodes), so a row
//! sampled at a well on a node equals that node's smoothed value.

use crate::grid::Grid;
use rayon::prelude::*;

/// Where the Gaussian is cut, in standard deviations.
pub const TRUNCATE: f64 = 4.0;

/// Half-width of the kernel in nodes along an axis of spacing `spacing` for width `sigma`
/// (both metres): `floor(TRUNCATE * sigma / spacing + 0.5)`.
pub fn radius_nodes(sigma: f64, spacing: f64) -> usize {
    (TRUNCATE * sigma / spacing + 0.5).floor().max(0.0) as usize
}

/// Gaussian weights `exp(-(k spacing)^2 / (2 sigma^2))` for `k` in `-r..=r`.
fn kernel(sigma: f64, spacing: f64) -> Vec<f64> {
    let r = radius_nodes(sigma, spacing) as isize;
    (-r..=r)
        .map(|k| {
            let d = k as f64 * spacing / sigma;
            (-0.5 * d * d).exp()
        })
        .collect()
}

/// One pass along x (`along_x`) or y: convolves `value` and `weight` (both `nx * ny`, index
/// `j * nx + i`) with `k`, which is centred on its middle entry; positions beyond the grid
/// contribute nothing.
fn pass(
    value: &[f64],
    weight: &[f64],
    k: &[f64],
    nx: usize,
    ny: usize,
    along_x: bool,
) -> [Vec<f64>; 2] {
    let r = (k.len() / 2) as isize;
    let mut out_v = vec![0.0; nx * ny];
    let mut out_w = vec![0.0; nx * ny];
    out_v
        .par_chunks_mut(nx)
        .zip(out_w.par_chunks_mut(nx))
        .enumerate()
        .for_each(|(j, (row_v, row_w))| {
            for i in 0..nx {
                let (mut sv, mut sw) = (0.0, 0.0);
                for (t, &g) in k.iter().enumerate() {
                    let d = t as isize - r;
                    let (ii, jj) = if along_x {
                        (i as isize + d, j as isize)
                    } else {
                        (i as isize, j as isize + d)
                    };
                    if ii < 0 || jj < 0 || ii >= nx as isize || jj >= ny as isize {
                        continue;
                    }
                    let q = jj as usize * nx + ii as usize;
                    sv += g * value[q];
                    sw += g * weight[q];
                }
                row_v[i] = sv;
                row_w[i] = sw;
            }
        });
    [out_v, out_w]
}

/// The map smoothed with a Gaussian of standard deviation `sigma` metres (normalised
/// convolution; null nodes stay null). `sigma <= 0` (or not finite) returns the map unchanged.
/// `map` has the grid's `nx * ny` values.
pub fn smooth_map(grid: &Grid, map: &[f64], sigma: f64) -> Vec<f64> {
    if !(sigma.is_finite() && sigma > 0.0) || map.len() != grid.len() {
        return map.to_vec();
    }
    let (nx, ny) = (grid.nx, grid.ny);
    let weight: Vec<f64> = map
        .iter()
        .map(|v| f64::from(u8::from(!v.is_nan())))
        .collect();
    let value: Vec<f64> = map
        .iter()
        .map(|v| if v.is_nan() { 0.0 } else { *v })
        .collect();
    let [v1, w1] = pass(&value, &weight, &kernel(sigma, grid.dx), nx, ny, true);
    let [v2, w2] = pass(&v1, &w1, &kernel(sigma, grid.dy), nx, ny, false);
    map.iter()
        .zip(v2.iter().zip(&w2))
        .map(|(orig, (v, w))| {
            if orig.is_nan() || *w <= 0.0 {
                f64::NAN
            } else {
                v / w
            }
        })
        .collect()
}

/// The smoothed value centred on the world point `(x, y)`: the normalised Gaussian average of
/// the non-null nodes within the kernel's reach of it. On a node it equals [`smooth_map`]'s
/// value there (up to rounding); `None` when the point lies outside the grid or no node in
/// reach has a value. `sigma <= 0` gives `None` (use the plain sampling then).
pub fn at_point(grid: &Grid, map: &[f64], x: f64, y: f64, sigma: f64) -> Option<f64> {
    if !(sigma.is_finite() && sigma > 0.0) || map.len() != grid.len() || !grid.contains(x, y) {
        return None;
    }
    let (fi, fj) = grid.fractional_ij(x, y);
    let ri = radius_nodes(sigma, grid.dx) as f64;
    let rj = radius_nodes(sigma, grid.dy) as f64;
    // Small tolerance so that a point on a node reaches exactly the node window of smooth_map.
    let eps = 1e-9;
    let lo_i = (fi - ri - eps).ceil().max(0.0) as usize;
    let hi_i = ((fi + ri + eps).floor()).min(grid.nx as f64 - 1.0) as usize;
    let lo_j = (fj - rj - eps).ceil().max(0.0) as usize;
    let hi_j = ((fj + rj + eps).floor()).min(grid.ny as f64 - 1.0) as usize;
    let (mut sv, mut sw) = (0.0, 0.0);
    for j in lo_j..=hi_j {
        let dv = (j as f64 - fj) * grid.dy / sigma;
        let gj = (-0.5 * dv * dv).exp();
        for i in lo_i..=hi_i {
            let v = map[grid.index(i, j)];
            if v.is_nan() {
                continue;
            }
            let du = (i as f64 - fi) * grid.dx / sigma;
            let g = gj * (-0.5 * du * du).exp();
            sv += g * v;
            sw += g;
        }
    }
    (sw > 0.0).then(|| sv / sw)
}
