//! Grid geometry: a regular, possibly rotated lattice of map nodes.
//!
//! Node `(i, j)` (`i` in `0..nx` along the grid's x axis, `j` in `0..ny` along its y axis) lies at
//! `x = x0 + i dx cos r - j dy sin r`, `y = y0 + i dx sin r + j dy cos r` with `r` the rotation in
//! degrees counter-clockwise from east. Maps are `Vec<f64>` of length `nx * ny` indexed `j * nx + i`,
//! `NaN` for null.
//!
//! Sampling between nodes is bilinear interpolation on the unit cell (the tensor-product linear
//! interpolant, e.g. Press et al., *Numerical Recipes*, 3rd ed. 2007, section 3.6), or the mean of the
//! non-null nodes within a radius.

use serde::{Deserialize, Serialize};

/// Tolerance, in index units, for a point to count as lying on the grid's hull or on a cell edge.
const EDGE_EPS: f64 = 1e-9;

/// A regular grid of map nodes in world coordinates.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Grid {
    /// World x of node (0, 0).
    pub origin_x: f64,
    /// World y of node (0, 0).
    pub origin_y: f64,
    /// Node spacing along the grid's x axis (> 0).
    pub dx: f64,
    /// Node spacing along the grid's y axis (> 0).
    pub dy: f64,
    /// Number of nodes along the grid's x axis.
    pub nx: usize,
    /// Number of nodes along the grid's y axis.
    pub ny: usize,
    /// Rotation of the grid's x axis, degrees counter-clockwise from east.
    pub rotation: f64,
    /// EPSG code of the coordinate reference system, if known.
    pub epsg: Option<u32>,
    /// Null marker used in files (in memory nulls are `NaN`).
    pub null_value: f64,
}

/// Why a [`Grid`] is unusable.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GridError {
    /// A spacing is zero, negative or not finite.
    #[error("{key} must be a finite number > 0, got {value}")]
    BadSpacing {
        /// `dx` or `dy`.
        key: &'static str,
        /// The value given.
        value: f64,
    },
    /// Fewer than two nodes along an axis.
    #[error("{key} must be >= 2, got {value}")]
    TooFewNodes {
        /// `nx` or `ny`.
        key: &'static str,
        /// The value given.
        value: usize,
    },
    /// A value that must be finite is not.
    #[error("{key} must be a finite number, got {value}")]
    NotFinite {
        /// Name of the field.
        key: &'static str,
        /// The value given.
        value: f64,
    },
}

impl Grid {
    /// Checks that the grid is usable: finite origin, rotation and null value, spacings > 0 and at
    /// least two nodes along each axis.
    pub fn validate(&self) -> Result<(), GridError> {
        for (key, value) in [
            ("origin_x", self.origin_x),
            ("origin_y", self.origin_y),
            ("rotation", self.rotation),
            ("null_value", self.null_value),
        ] {
            if !value.is_finite() {
                return Err(GridError::NotFinite { key, value });
            }
        }
        for (key, value) in [("dx", self.dx), ("dy", self.dy)] {
            if !(value.is_finite() && value > 0.0) {
                return Err(GridError::BadSpacing { key, value });
            }
        }
        for (key, value) in [("nx", self.nx), ("ny", self.ny)] {
            if value < 2 {
                return Err(GridError::TooFewNodes { key, value });
            }
        }
        Ok(())
    }

    /// Number of nodes, `nx * ny`.
    pub fn len(&self) -> usize {
        self.nx * self.ny
    }

    /// True when the grid has no nodes.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Index of node `(i, j)` in a map vector: `j * nx + i`.
    pub fn index(&self, i: usize, j: usize) -> usize {
        j * self.nx + i
    }

    /// `(i, j)` of the node stored at `index` (inverse of [`Grid::index`]).
    pub fn ij(&self, index: usize) -> (usize, usize) {
        (index % self.nx, index / self.nx)
    }

    /// `(cos r, sin r)` of the rotation.
    fn cos_sin(&self) -> (f64, f64) {
        let r = self.rotation.to_radians();
        (r.cos(), r.sin())
    }

    /// World coordinates of node `(i, j)`.
    pub fn node_xy(&self, i: usize, j: usize) -> (f64, f64) {
        self.fractional_xy(i as f64, j as f64)
    }

    /// World coordinates of the fractional node position `(fi, fj)`.
    pub fn fractional_xy(&self, fi: f64, fj: f64) -> (f64, f64) {
        let (c, s) = self.cos_sin();
        let u = fi * self.dx;
        let v = fj * self.dy;
        (self.origin_x + u * c - v * s, self.origin_y + u * s + v * c)
    }

    /// Fractional node position `(fi, fj)` of world point `(x, y)` (inverse of [`Grid::node_xy`]).
    pub fn fractional_ij(&self, x: f64, y: f64) -> (f64, f64) {
        let (c, s) = self.cos_sin();
        let ex = x - self.origin_x;
        let ey = y - self.origin_y;
        let u = ex * c + ey * s;
        let v = -ex * s + ey * c;
        (u / self.dx, v / self.dy)
    }

    /// True when `(x, y)` lies inside (or on the edge of) the hull of the nodes.
    pub fn contains(&self, x: f64, y: f64) -> bool {
        let (fi, fj) = self.fractional_ij(x, y);
        self.contains_fractional(fi, fj)
    }

    fn contains_fractional(&self, fi: f64, fj: f64) -> bool {
        fi.is_finite()
            && fj.is_finite()
            && fi >= -EDGE_EPS
            && fj >= -EDGE_EPS
            && fi <= (self.nx as f64 - 1.0) + EDGE_EPS
            && fj <= (self.ny as f64 - 1.0) + EDGE_EPS
    }

    /// The node nearest to `(x, y)`, or `None` when the point is outside the hull of the nodes.
    pub fn nearest_node(&self, x: f64, y: f64) -> Option<(usize, usize)> {
        let (fi, fj) = self.fractional_ij(x, y);
        if !self.contains_fractional(fi, fj) {
            return None;
        }
        let i = (fi.round().max(0.0) as usize).min(self.nx - 1);
        let j = (fj.round().max(0.0) as usize).min(self.ny - 1);
        Some((i, j))
    }

    /// Bilinear interpolation of `values` (a map on this grid) at `(x, y)`.
    ///
    /// `None` when the point is outside the hull of the nodes, when `values` has the wrong length, or
    /// when a corner that carries weight is null (`NaN`). A point on a node or a cell edge uses only
    /// the nodes it touches, so a null neighbour does not spoil it.
    pub fn bilinear(&self, values: &[f64], x: f64, y: f64) -> Option<f64> {
        if values.len() != self.len() || self.nx < 2 || self.ny < 2 {
            return None;
        }
        let (fi, fj) = self.fractional_ij(x, y);
        if !self.contains_fractional(fi, fj) {
            return None;
        }
        let (i0, t) = cell(fi, self.nx);
        let (j0, u) = cell(fj, self.ny);
        let corners = [
            (i0, j0, (1.0 - t) * (1.0 - u)),
            (i0 + 1, j0, t * (1.0 - u)),
            (i0, j0 + 1, (1.0 - t) * u),
            (i0 + 1, j0 + 1, t * u),
        ];
        let mut sum = 0.0;
        for (i, j, w) in corners {
            if w == 0.0 {
                continue;
            }
            let v = values[self.index(i, j)];
            if v.is_nan() {
                return None;
            }
            sum += w * v;
        }
        Some(sum)
    }

    /// Mean of the non-null nodes of `values` within `radius` (world units) of `(x, y)`.
    ///
    /// `None` when no non-null node lies within the radius or `values` has the wrong length.
    pub fn window_mean(&self, values: &[f64], x: f64, y: f64, radius: f64) -> Option<f64> {
        if values.len() != self.len() || radius.is_nan() || radius < 0.0 {
            return None;
        }
        let (fi, fj) = self.fractional_ij(x, y);
        if !fi.is_finite() || !fj.is_finite() {
            return None;
        }
        // Rotation preserves distances, so the circle is an axis-aligned ellipse in index space.
        let ri = radius / self.dx;
        let rj = radius / self.dy;
        let lo_i = (fi - ri).ceil().max(0.0);
        let hi_i = (fi + ri).floor().min(self.nx as f64 - 1.0);
        let lo_j = (fj - rj).ceil().max(0.0);
        let hi_j = (fj + rj).floor().min(self.ny as f64 - 1.0);
        if lo_i > hi_i || lo_j > hi_j {
            return None;
        }
        let r2 = radius * radius;
        let (mut sum, mut n) = (0.0, 0usize);
        for j in lo_j as usize..=hi_j as usize {
            for i in lo_i as usize..=hi_i as usize {
                let du = (i as f64 - fi) * self.dx;
                let dv = (j as f64 - fj) * self.dy;
                if du * du + dv * dv > r2 * (1.0 + 1e-12) {
                    continue;
                }
                let v = values[self.index(i, j)];
                if !v.is_nan() {
                    sum += v;
                    n += 1;
                }
            }
        }
        (n > 0).then(|| sum / n as f64)
    }

    /// World coordinates of every node, in index order.
    pub fn node_coordinates(&self) -> Vec<(f64, f64)> {
        let mut out = Vec::with_capacity(self.len());
        for j in 0..self.ny {
            for i in 0..self.nx {
                out.push(self.node_xy(i, j));
            }
        }
        out
    }

    /// How `other` differs from this grid, one phrase per difference (empty when they agree).
    ///
    /// Origins agree within 0.1 % of the spacing, spacings within 1e-6 relative, rotations within
    /// 1e-6 degrees. EPSG codes are compared only when both are known; null values are not compared
    /// (nulls are `NaN` in memory whatever marker a file uses).
    pub fn differences(&self, other: &Grid) -> Vec<String> {
        let mut out = Vec::new();
        if self.nx != other.nx || self.ny != other.ny {
            out.push(format!(
                "size {} x {} nodes, expected {} x {}",
                other.nx, other.ny, self.nx, self.ny
            ));
        }
        let rel = |a: f64, b: f64| (a - b).abs() <= 1e-6 * a.abs().max(b.abs());
        if !rel(self.dx, other.dx) || !rel(self.dy, other.dy) {
            out.push(format!(
                "spacing dx={} dy={}, expected dx={} dy={}",
                other.dx, other.dy, self.dx, self.dy
            ));
        }
        let tol = 1e-3 * self.dx.min(self.dy);
        if (self.origin_x - other.origin_x).abs() > tol
            || (self.origin_y - other.origin_y).abs() > tol
        {
            out.push(format!(
                "origin (node 0,0) at ({}, {}), expected ({}, {})",
                other.origin_x, other.origin_y, self.origin_x, self.origin_y
            ));
        }
        let mut dr = (self.rotation - other.rotation).rem_euclid(360.0);
        if dr > 180.0 {
            dr -= 360.0;
        }
        if dr.abs() > 1e-6 {
            out.push(format!(
                "rotation {} degrees, expected {}",
                other.rotation, self.rotation
            ));
        }
        if let (Some(a), Some(b)) = (self.epsg, other.epsg)
            && a != b
        {
            out.push(format!("EPSG:{b}, expected EPSG:{a}"));
        }
        out
    }
}

/// Lower cell index and fraction for a fractional position already known to lie in `[0, n-1]`
/// (within [`EDGE_EPS`]). Fractions within `EDGE_EPS` of 0 or 1 are snapped so that a point on a
/// node or edge gives zero weight to the far nodes.
fn cell(f: f64, n: usize) -> (usize, f64) {
    let max0 = n - 2;
    let f = f.clamp(0.0, (n - 1) as f64);
    let mut i0 = (f.floor() as usize).min(max0);
    let mut t = f - i0 as f64;
    if t < EDGE_EPS {
        t = 0.0;
    } else if t > 1.0 - EDGE_EPS {
        if i0 < max0 {
            i0 += 1;
            t = 0.0;
        } else {
            t = 1.0;
        }
    }
    (i0, t)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(rotation: f64) -> Grid {
        Grid {
            origin_x: 1000.0,
            origin_y: 2000.0,
            dx: 10.0,
            dy: 20.0,
            nx: 4,
            ny: 3,
            rotation,
            epsg: None,
            null_value: -999.25,
        }
    }

    #[test]
    fn node_round_trip_rotated() {
        let g = grid(30.0);
        for j in 0..g.ny {
            for i in 0..g.nx {
                let (x, y) = g.node_xy(i, j);
                let (fi, fj) = g.fractional_ij(x, y);
                assert!((fi - i as f64).abs() < 1e-9 && (fj - j as f64).abs() < 1e-9);
                assert_eq!(g.nearest_node(x, y), Some((i, j)));
            }
        }
    }

    #[test]
    fn cell_snaps_edges() {
        assert_eq!(cell(3.0, 4), (2, 1.0));
        assert_eq!(cell(1.0 - 1e-12, 4), (1, 0.0));
        assert_eq!(cell(0.25, 4), (0, 0.25));
    }

    #[test]
    fn validate_rejects() {
        let mut g = grid(0.0);
        g.dx = -1.0;
        assert!(matches!(
            g.validate(),
            Err(GridError::BadSpacing { key: "dx", .. })
        ));
        let mut g = grid(0.0);
        g.ny = 1;
        assert!(matches!(
            g.validate(),
            Err(GridError::TooFewNodes { key: "ny", .. })
        ));
        assert!(grid(0.0).validate().is_ok());
    }
}
