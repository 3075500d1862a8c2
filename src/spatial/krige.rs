//! Conditioning simulated fields to the wells by simple kriging.
//!
//! For a zero-mean, unit-variance field with covariance `C`, an unconditioned realization `z_u` and
//! well values `z_w` at well nodes `w`, the conditioned realization is
//! `z_c(x) = z_u(x) + k(x)' C_ww^-1 (z_w - z_u(w))`, `k(x) = C(x - w)`: the simple-kriging estimate
//! from the data plus the simulated kriging error. It has the conditional distribution of the
//! field given the wells and equals `z_w` at the well nodes (Journel 1974, *Geophysics* 39:85;
//! Journel & Huijbregts 1978, *Mining Geostatistics*, section VII.C).
//!
//! **Wells on nodes.** The simulated field exists at nodes, so each well is moved to its nearest
//! node. Wells farther than half a cell outside the lattice are left out and listed; wells that
//! land on the same node are merged into one datum, the mean of their scores (names listed).
//!
//! **Solving once.** `C_ww` is factorised once per set of wells (Cholesky). Per realization only
//! `r = C_ww^-1 (z_w - z_u(w))` is solved (two triangular solves), and `k(x)' r` is added at every
//! node from a table of the covariance by lag `(di, dj)` (on a lattice the covariance between a node
//! and a well node depends only on their index offsets), so the kriging weights `C_ww^-1 k(x)` are
//! never stored: memory stays `O(nodes)` instead of `O(nodes x wells)`, at the same
//! `nodes x wells` multiply-adds per realization. Since the correction is linear,
//! `z_c = [z_u - k' C^-1 z_u(w)] + k' C^-1 z_w`: the second term (the kriged data) is computed once
//! per set of wells, and the first (the kriging residual of the realization) once per realization
//! for all sets of wells on the same nodes, e.g. the steps of a target measured at the same wells.
//!
//! **Regularisation.** `1e-10` (a ten-billionth of the unit variance) is added to the diagonal of
//! `C_ww` before factorising, and multiplied by ten up to `1e-4` while the factorisation fails (two
//! wells a node apart under a long, smooth model make `C_ww` nearly singular). The value used is
//! reported; with nugget 0 the well nodes are then reproduced to about that many standard
//! deviations times the size of `r`.

use std::sync::Arc;

use serde::{Deserialize, Serialize};

use super::model::VariogramModel;
use super::unknown_mean::MeanEstimate;
use super::{Lattice, SpatialError};

/// First diagonal regularisation tried.
pub const JITTER_START: f64 = 1e-10;
/// Largest diagonal regularisation tried before giving up.
pub const JITTER_MAX: f64 = 1e-4;

/// A well's normal score at a location in grid-local metres (`x = i dx`, `y = j dy`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WellScore {
    /// Well name (for messages).
    pub name: String,
    /// x in grid-local metres.
    pub x: f64,
    /// y in grid-local metres.
    pub y: f64,
    /// The normal score of the well's prediction error.
    pub score: f64,
}

/// Covariance by lattice offset: `C(di dx, dj dy)` for `|di| < nx`, `|dj| < ny`.
#[derive(Clone, Debug)]
pub struct LagTable {
    lattice: Lattice,
    width: usize,
    values: Vec<f64>,
}

impl LagTable {
    /// Tabulates `model`'s covariance over every offset of `lattice`.
    pub fn new(lattice: Lattice, model: &VariogramModel) -> Result<Self, SpatialError> {
        lattice.check()?;
        model.check("covariance model of the conditioning")?;
        let (nx, ny) = (lattice.nx, lattice.ny);
        let width = 2 * nx - 1;
        let mut values = vec![0.0; width * (2 * ny - 1)];
        for (r, row) in values.chunks_mut(width).enumerate() {
            let dj = r as f64 - (ny - 1) as f64;
            for (c, v) in row.iter_mut().enumerate() {
                let di = c as f64 - (nx - 1) as f64;
                *v = model.covariance((di * lattice.dx).hypot(dj * lattice.dy));
            }
        }
        Ok(LagTable {
            lattice,
            width,
            values,
        })
    }

    /// The covariance between nodes `di` and `dj` apart (`|di| < nx`, `|dj| < ny`).
    pub fn covariance(&self, di: isize, dj: isize) -> f64 {
        let r = (dj + self.lattice.ny as isize - 1) as usize;
        let c = (di + self.lattice.nx as isize - 1) as usize;
        self.values[r * self.width + c]
    }

    /// The covariances of nodes `(0..nx, j)` with node `(iw, jw)`.
    fn row(&self, j: usize, iw: usize, jw: usize) -> &[f64] {
        let (nx, ny) = (self.lattice.nx, self.lattice.ny);
        let r = j + ny - 1 - jw;
        let start = r * self.width + (nx - 1 - iw);
        &self.values[start..start + nx]
    }

    /// The lattice tabulated.
    pub fn lattice(&self) -> Lattice {
        self.lattice
    }
}

/// What happened to the wells of one conditioning (goes into a run's summary).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct ConditioningReport {
    /// Distinct well nodes used.
    pub nodes_used: usize,
    /// Wells left out because they lie off the lattice.
    pub outside: Vec<String>,
    /// Groups of wells that share a node (merged into their mean score), names joined by `+`.
    pub merged: Vec<String>,
    /// Diagonal regularisation used in the factorisation.
    pub jitter: f64,
}

/// A factorised simple-kriging system for one set of wells on one lattice and covariance.
#[derive(Clone, Debug)]
pub struct Conditioning {
    table: Arc<LagTable>,
    nodes: Vec<(usize, usize)>,
    data: Vec<f64>,
    /// Lower Cholesky factor of `C_ww + jitter I`, row-major `n x n`.
    chol: Vec<f64>,
    /// Simple-kriging estimate of the data at every node (empty without wells).
    mean: Vec<f64>,
    report: ConditioningReport,
}

/// Lower Cholesky factor of symmetric `a` (`n x n`, row-major); `None` when not positive definite.
fn cholesky(a: &[f64], n: usize) -> Option<Vec<f64>> {
    let mut l = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = (0..j).map(|k| l[i * n + k] * l[j * n + k]).sum();
            let v = a[i * n + j] - s;
            if i == j {
                if !(v > 0.0 && v.is_finite()) {
                    return None;
                }
                l[i * n + i] = v.sqrt();
            } else {
                l[i * n + j] = v / l[j * n + j];
            }
        }
    }
    Some(l)
}

/// Solves `L L' x = b` in place.
fn cholesky_solve(l: &[f64], n: usize, b: &mut [f64]) {
    for i in 0..n {
        let s: f64 = (0..i).map(|k| l[i * n + k] * b[k]).sum();
        b[i] = (b[i] - s) / l[i * n + i];
    }
    for i in (0..n).rev() {
        let s: f64 = (i + 1..n).map(|k| l[k * n + i] * b[k]).sum();
        b[i] = (b[i] - s) / l[i * n + i];
    }
}

/// The lattice node `(i, j)` nearest to well `w`, `None` when it lies off the lattice. Errors
/// name a well (of the set `layer`) with a non-finite coordinate or score.
pub(crate) fn nearest_node(
    layer: &str,
    lat: &Lattice,
    w: &WellScore,
) -> Result<Option<(usize, usize)>, SpatialError> {
    if !(w.x.is_finite() && w.y.is_finite() && w.score.is_finite()) {
        return Err(SpatialError::Input {
            what: format!("well {} of {layer}", w.name),
            problem: format!(
                "location and score must be finite, got x {}, y {}, score {}",
                w.x, w.y, w.score
            ),
        });
    }
    let (fi, fj) = ((w.x / lat.dx).round(), (w.y / lat.dy).round());
    let inside = fi >= 0.0 && fj >= 0.0 && fi < lat.nx as f64 && fj < lat.ny as f64;
    Ok(inside.then_some((fi as usize, fj as usize)))
}

impl Conditioning {
    /// Places `wells` on the nodes of `table`'s lattice, merges wells sharing a node and
    /// factorises the kriging system. `layer` names the set in errors. Errors name a well with a
    /// non-finite coordinate or score.
    pub fn new(
        layer: &str,
        table: Arc<LagTable>,
        wells: &[WellScore],
    ) -> Result<Self, SpatialError> {
        let lat = table.lattice();
        let mut report = ConditioningReport::default();
        let mut nodes: Vec<(usize, usize)> = Vec::new();
        let mut sums: Vec<(f64, usize, Vec<&str>)> = Vec::new();
        for w in wells {
            let Some(node) = nearest_node(layer, &lat, w)? else {
                report.outside.push(w.name.clone());
                continue;
            };
            match nodes.iter().position(|&n| n == node) {
                Some(k) => {
                    sums[k].0 += w.score;
                    sums[k].1 += 1;
                    sums[k].2.push(&w.name);
                }
                None => {
                    nodes.push(node);
                    sums.push((w.score, 1, vec![&w.name]));
                }
            }
        }
        let data: Vec<f64> = sums.iter().map(|(s, c, _)| s / *c as f64).collect();
        report.merged = sums
            .iter()
            .filter(|(_, c, _)| *c > 1)
            .map(|(_, _, names)| names.join("+"))
            .collect();
        report.nodes_used = nodes.len();
        let n = nodes.len();
        let mut c = vec![0.0; n * n];
        for (a, &(ia, ja)) in nodes.iter().enumerate() {
            for (b, &(ib, jb)) in nodes.iter().enumerate() {
                c[a * n + b] =
                    table.covariance(ia as isize - ib as isize, ja as isize - jb as isize);
            }
        }
        let mut jitter = JITTER_START;
        let chol = loop {
            let mut cj = c.clone();
            for k in 0..n {
                cj[k * n + k] += jitter;
            }
            if let Some(l) = cholesky(&cj, n) {
                break l;
            }
            if jitter >= JITTER_MAX {
                return Err(SpatialError::NotPositiveDefinite {
                    layer: layer.to_string(),
                    jitter,
                });
            }
            jitter *= 10.0;
        };
        report.jitter = jitter;
        let mut cond = Conditioning {
            table,
            nodes,
            data,
            chol,
            mean: Vec::new(),
            report,
        };
        if n > 0 {
            let mut mean = vec![0.0; lat.len()];
            cond.add_kriged(cond.data.clone(), &mut mean);
            cond.mean = mean;
        }
        Ok(cond)
    }

    /// What happened to the wells.
    pub fn report(&self) -> &ConditioningReport {
        &self.report
    }

    /// The well nodes `(i, j)` and their (merged) scores.
    pub fn data(&self) -> impl Iterator<Item = ((usize, usize), f64)> + '_ {
        self.nodes.iter().copied().zip(self.data.iter().copied())
    }

    /// Conditions `field` (an unconditioned realization, `j * nx + i`) to the wells in place.
    pub fn apply(&self, field: &mut [f64]) {
        let lat = self.table.lattice();
        if self.nodes.is_empty() {
            return;
        }
        assert_eq!(field.len(), lat.len(), "field length must be nx * ny");
        let r: Vec<f64> = self
            .nodes
            .iter()
            .zip(&self.data)
            .map(|(&(i, j), d)| d - field[j * lat.nx + i])
            .collect();
        self.add_kriged(r, field);
    }

    /// Replaces `field` by its simple-kriging residual `z_u(x) - k(x)' C_ww^-1 z_u(w)` (zero at
    /// the well nodes). [`apply`](Self::apply) equals this plus
    /// [`kriged_mean`](Self::kriged_mean), so sets of wells on the same nodes (the steps of a
    /// target measured at the same wells) can share one residual per realization.
    pub fn residual(&self, field: &mut [f64]) {
        let lat = self.table.lattice();
        if self.nodes.is_empty() {
            return;
        }
        assert_eq!(field.len(), lat.len(), "field length must be nx * ny");
        let r: Vec<f64> = self
            .nodes
            .iter()
            .map(|&(i, j)| -field[j * lat.nx + i])
            .collect();
        self.add_kriged(r, field);
    }

    /// The simple-kriging estimate `k(x)' C_ww^-1 z_w` of the wells' scores at every node
    /// (`None` without wells, where it is zero).
    pub fn kriged_mean(&self) -> Option<&[f64]> {
        (!self.nodes.is_empty()).then_some(&self.mean[..])
    }

    /// The generalised-least-squares estimate of an unknown constant mean of the (merged) well
    /// scores and its standard error ([`super::unknown_mean`]); `None` without wells.
    pub fn mean_estimate(&self) -> Option<MeanEstimate> {
        let n = self.nodes.len();
        if n == 0 {
            return None;
        }
        let mut a = vec![1.0; n];
        cholesky_solve(&self.chol, n, &mut a);
        let s: f64 = a.iter().sum();
        let weighted: f64 = a.iter().zip(&self.data).map(|(a, z)| a * z).sum();
        (s > 0.0 && s.is_finite()).then(|| MeanEstimate {
            wells: n,
            mean: weighted / s,
            se: (1.0 / s).sqrt(),
            plain_mean: self.data.iter().sum::<f64>() / n as f64,
        })
    }

    /// `1 - sum of the simple-kriging weights` at every node: the share of a constant mean the
    /// wells leave free (0 at a well node, about 1 far from the wells; 1 everywhere without
    /// wells).
    pub fn free_share(&self) -> Vec<f64> {
        let mut free = vec![1.0; self.table.lattice().len()];
        if !self.nodes.is_empty() {
            self.add_kriged(vec![-1.0; self.nodes.len()], &mut free);
        }
        free
    }

    /// True when both use the same well nodes in the same order on the same lattice and
    /// covariance table, so that their residuals are the same.
    pub fn same_nodes(&self, other: &Conditioning) -> bool {
        Arc::ptr_eq(&self.table, &other.table) && self.nodes == other.nodes
    }

    /// Adds `k(x)' C_ww^-1 r` to `field` at every node.
    fn add_kriged(&self, mut r: Vec<f64>, field: &mut [f64]) {
        let lat = self.table.lattice();
        let n = self.nodes.len();
        cholesky_solve(&self.chol, n, &mut r);
        // four wells per pass over a row: one read-modify-write of the row per four wells
        let nodes4 = self.nodes.chunks_exact(4);
        let r4 = r.chunks_exact(4);
        let (rest_nodes, rest_r) = (nodes4.remainder(), r4.remainder());
        for (j, row) in field.chunks_mut(lat.nx).enumerate() {
            for (nd, rw) in self.nodes.chunks_exact(4).zip(r.chunks_exact(4)) {
                let t0 = self.table.row(j, nd[0].0, nd[0].1);
                let t1 = self.table.row(j, nd[1].0, nd[1].1);
                let t2 = self.table.row(j, nd[2].0, nd[2].1);
                let t3 = self.table.row(j, nd[3].0, nd[3].1);
                for ((((v, a), b), c), d) in row.iter_mut().zip(t0).zip(t1).zip(t2).zip(t3) {
                    *v += (rw[0] * a + rw[1] * b) + (rw[2] * c + rw[3] * d);
                }
            }
            for (&(iw, jw), &rw) in rest_nodes.iter().zip(rest_r) {
                for (v, c) in row.iter_mut().zip(self.table.row(j, iw, jw)) {
                    *v += rw * c;
                }
            }
        }
    }
}
