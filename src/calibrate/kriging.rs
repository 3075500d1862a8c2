//! Simple kriging of scattered point data with a nugget filtered out of the estimate.
//!
//! For a zero-mean field `e(x) = S(x) + eps(x)` with a structured part `S` (covariance
//! `(s - c0) rho(h)`) and a nugget `eps` (variance `c0`, no spatial correlation: measurement noise
//! and variation below the smallest well distance), observed at points `x_1..x_n`:
//!
//! - data covariance `C_ij = (s - c0) rho(|x_i - x_j|) + c0 [i = j]`;
//! - covariance of the data with a new location `x` (not a data point):
//!   `k_i = (s - c0) rho(|x - x_i|)`, also when `x` coincides with `x_i`, because the new
//!   location's own nugget is independent of the datum's (the filtered or "error-in-data" form of
//!   kriging, Cressie 1993, *Statistics for Spatial Data*, section 3.2.1);
//! - estimate `e*(x) = k' C^-1 z` (simple kriging with known mean 0: Journel & Huijbregts 1978,
//!   *Mining Geostatistics*, section V.A; Goovaerts 1997, *Geostatistics for Natural Resources
//!   Evaluation*, section 5.2);
//! - error variance `sigma^2(x) = s - k' C^-1 k`, which never falls below the nugget `c0`
//!   (`k' C^-1 k <= s - c0`) and reaches the sill `s` far from every datum.
//!
//! `C` is factorised once (Cholesky, `C = L L'`); when that fails (two data at one place without
//! a nugget) a diagonal regularisation of `1e-10 s` is added and raised tenfold up to `1e-4 s`; per location the estimate costs
//! `O(n)` (`k' alpha` with `alpha = C^-1 z`) and the variance `O(n^2)` (`|L^-1 k|^2`).

use crate::spatial::model::VariogramModel;

/// A factorised simple-kriging system for one set of points.
#[derive(Clone, Debug)]
pub struct PointKriging {
    model: VariogramModel,
    points: Vec<[f64; 2]>,
    /// Lower Cholesky factor of `C` (row-major `n x n`).
    chol: Vec<f64>,
    /// `C^-1 z`.
    alpha: Vec<f64>,
}

/// Lower Cholesky factor of the symmetric `n x n` row-major matrix `a`, `None` when it is not
/// positive definite.
fn cholesky(a: &[f64], n: usize) -> Option<Vec<f64>> {
    let mut l = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..=i {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= l[i * n + k] * l[j * n + k];
            }
            if i == j {
                if !(s > 0.0 && s.is_finite()) {
                    return None;
                }
                l[i * n + i] = s.sqrt();
            } else {
                l[i * n + j] = s / l[j * n + j];
            }
        }
    }
    Some(l)
}

/// Solves `L v = b` in place (`L` lower triangular, row-major `n x n`).
fn forward(l: &[f64], n: usize, b: &mut [f64]) {
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= l[i * n + k] * b[k];
        }
        b[i] = s / l[i * n + i];
    }
}

/// Solves `L' v = b` in place.
fn backward(l: &[f64], n: usize, b: &mut [f64]) {
    for i in (0..n).rev() {
        let mut s = b[i];
        for k in i + 1..n {
            s -= l[k * n + i] * b[k];
        }
        b[i] = s / l[i * n + i];
    }
}

impl PointKriging {
    /// The system of `points` with values `z` under `model`. `None` without points, with a
    /// length mismatch, a non-finite value or a matrix that stays singular up to the largest
    /// regularisation.
    pub fn new(model: &VariogramModel, points: &[[f64; 2]], z: &[f64]) -> Option<Self> {
        let n = points.len();
        if n == 0 || z.len() != n || z.iter().any(|v| !v.is_finite()) {
            return None;
        }
        let structured = model.sill - model.nugget;
        let mut c = vec![0.0; n * n];
        for i in 0..n {
            for j in 0..n {
                let h = dist(points[i], points[j]);
                c[i * n + j] = if i == j {
                    model.sill
                } else {
                    structured * model.kind.correlation(h, model.range)
                };
            }
        }
        let mut jitter = 0.0;
        let chol = loop {
            let mut a = c.clone();
            for i in 0..n {
                a[i * n + i] += jitter;
            }
            if let Some(l) = cholesky(&a, n) {
                break l;
            }
            jitter = if jitter == 0.0 {
                1e-10 * model.sill
            } else {
                jitter * 10.0
            };
            if jitter > 1e-4 * model.sill {
                return None;
            }
        };
        let mut alpha = z.to_vec();
        forward(&chol, n, &mut alpha);
        backward(&chol, n, &mut alpha);
        Some(Self {
            model: *model,
            points: points.to_vec(),
            chol,
            alpha,
        })
    }

    /// The covariance vector `k` of the data with location `p` (nugget filtered).
    fn k(&self, p: [f64; 2]) -> Vec<f64> {
        let structured = self.model.sill - self.model.nugget;
        self.points
            .iter()
            .map(|&q| structured * self.model.kind.correlation(dist(p, q), self.model.range))
            .collect()
    }

    /// The estimate `k' C^-1 z` at `p`.
    pub fn estimate(&self, p: [f64; 2]) -> f64 {
        self.k(p).iter().zip(&self.alpha).map(|(a, b)| a * b).sum()
    }

    /// The estimate and the kriging error variance (in `[nugget, sill]`) at `p`.
    pub fn at(&self, p: [f64; 2]) -> (f64, f64) {
        let mut k = self.k(p);
        let est = k.iter().zip(&self.alpha).map(|(a, b)| a * b).sum();
        forward(&self.chol, self.points.len(), &mut k);
        let explained: f64 = k.iter().map(|v| v * v).sum();
        let var = (self.model.sill - explained).clamp(self.model.nugget, self.model.sill);
        (est, var)
    }

    /// The simple-kriging weights `C^-1 k` at `p` (for checks against worked examples).
    pub fn weights(&self, p: [f64; 2]) -> Vec<f64> {
        let n = self.points.len();
        let mut w = self.k(p);
        forward(&self.chol, n, &mut w);
        backward(&self.chol, n, &mut w);
        w
    }
}

/// Euclidean distance.
pub fn dist(a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - b[0]).hypot(a[1] - b[1])
}
