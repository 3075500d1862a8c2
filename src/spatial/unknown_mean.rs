//! Conditioning with an unknown mean: a field-wide error shared by every node of a step.
//!
//! Simple kriging ([`super::krige`]) takes the normal scores' mean as known and zero: away from
//! the wells a conditioned realization returns to the node's own distribution. When the whole
//! field errs one way at a step (every held-out well of the step scores on the same side), that
//! shared error is not in the range of a total. The textbook remedy is to treat the mean `m` of
//! the step's scores as unknown and estimate it from the wells (ordinary kriging, Matheron 1971;
//! Journel & Huijbregts 1978, *Mining Geostatistics*, chapter V): with `C` the wells'
//! covariance matrix and `z` their scores, the generalised-least-squares estimate and its
//! variance are
//!
//! ```text
//! m_hat = 1' C^-1 z / 1' C^-1 1,      var(m_hat) = 1 / 1' C^-1 1.
//! ```
//!
//! Conditional simulation with an unknown mean (Chiles & Delfiner 2012, *Geostatistics*, 2nd ed.,
//! chapter 7, conditioning by kriging with the mean drawn from its posterior under a flat
//! prior) draws `m ~ N(m_hat, var(m_hat))` once per realization and conditions the simulated
//! residual field to `z - m` by simple kriging:
//!
//! ```text
//! z_c(x) = [z_u(x) - k(x)' C^-1 z_u(w)] + k(x)' C^-1 z + m (1 - k(x)' C^-1 1).
//! ```
//!
//! The realization still equals the wells' scores at their nodes (the last factor is zero
//! there), its mean at a node is the ordinary-kriging estimate and its variance about that the
//! ordinary-kriging variance, `sigma_SK^2(x) + (1 - 1' lambda_SK(x))^2 var(m_hat)`
//! ([`ordinary_kriging`] solves the bordered system directly; the tests check the two agree).
//! Without wells nothing is estimated and the mean stays zero, so unconditioned realizations
//! keep every node's distribution.

use serde::{Deserialize, Serialize};

use super::SpatialError;

/// How the conditioning treats the mean of a step's normal scores (`[totals] mean`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MeanRule {
    /// Known and zero: simple kriging; the field-wide error is left out.
    #[default]
    Zero,
    /// Unknown: estimated per step from the wells and drawn per realization from its
    /// estimation error (ordinary kriging).
    Estimated,
}

impl MeanRule {
    /// The manifest's word for the rule.
    pub fn name(self) -> &'static str {
        match self {
            MeanRule::Zero => "zero",
            MeanRule::Estimated => "estimated",
        }
    }
}

/// The generalised-least-squares estimate of a layer's mean normal score from its wells.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct MeanEstimate {
    /// Distinct well nodes used.
    pub wells: usize,
    /// `m_hat = 1' C^-1 z / 1' C^-1 1`.
    pub mean: f64,
    /// Standard error `sqrt(1 / 1' C^-1 1)` (unit-variance scores).
    pub se: f64,
    /// Plain mean of the (node-merged) scores, for comparison.
    pub plain_mean: f64,
}

/// The ordinary-kriging solution at one location.
#[derive(Clone, Debug, PartialEq)]
pub struct OrdinaryKriging {
    /// Weights of the data (they sum to one).
    pub weights: Vec<f64>,
    /// Lagrange multiplier `mu` of the unbiasedness condition (system written
    /// `sum_j lambda_j C_ij + mu = C_i0`).
    pub lagrange: f64,
    /// Kriging variance `C(0) - sum lambda_i C_i0 - mu`.
    pub variance: f64,
}

/// Solves the ordinary-kriging system for `n` data with covariance matrix `c_ww` (row-major
/// `n x n`), covariances `c_w0` between the data and the target and the target's variance
/// `c_00`, by Gaussian elimination with partial pivoting of the bordered `(n + 1)` system.
pub fn ordinary_kriging(
    c_ww: &[f64],
    c_w0: &[f64],
    c_00: f64,
) -> Result<OrdinaryKriging, SpatialError> {
    let n = c_w0.len();
    if n == 0 || c_ww.len() != n * n {
        return Err(SpatialError::Input {
            what: "ordinary kriging".into(),
            problem: format!(
                "needs n >= 1 data and an n x n matrix, got n = {n} and {} entries",
                c_ww.len()
            ),
        });
    }
    let m = n + 1;
    let mut a = vec![0.0; m * (m + 1)];
    for i in 0..n {
        for j in 0..n {
            a[i * (m + 1) + j] = c_ww[i * n + j];
        }
        a[i * (m + 1) + n] = 1.0;
        a[i * (m + 1) + m] = c_w0[i];
        a[n * (m + 1) + i] = 1.0;
    }
    a[n * (m + 1) + m] = 1.0;
    for col in 0..m {
        let pivot = (col..m)
            .max_by(|&p, &q| {
                a[p * (m + 1) + col]
                    .abs()
                    .total_cmp(&a[q * (m + 1) + col].abs())
            })
            .unwrap_or(col);
        if a[pivot * (m + 1) + col].abs() < 1e-14 {
            return Err(SpatialError::Input {
                what: "ordinary kriging".into(),
                problem: "the system is singular (two data at one place?)".into(),
            });
        }
        if pivot != col {
            for k in 0..=m {
                a.swap(pivot * (m + 1) + k, col * (m + 1) + k);
            }
        }
        for r in 0..m {
            if r == col {
                continue;
            }
            let f = a[r * (m + 1) + col] / a[col * (m + 1) + col];
            if f != 0.0 {
                for k in col..=m {
                    a[r * (m + 1) + k] -= f * a[col * (m + 1) + k];
                }
            }
        }
    }
    let x: Vec<f64> = (0..m)
        .map(|i| a[i * (m + 1) + m] / a[i * (m + 1) + i])
        .collect();
    let weights = x[..n].to_vec();
    let lagrange = x[n];
    let variance = c_00 - weights.iter().zip(c_w0).map(|(w, c)| w * c).sum::<f64>() - lagrange;
    Ok(OrdinaryKriging {
        weights,
        lagrange,
        variance,
    })
}

/// The realization's mean for one layer: `m_hat + se * xi`, with `xi` a standard normal draw of
/// the realization (the estimate's posterior under a flat prior).
pub fn drawn_mean(estimate: &MeanEstimate, xi: f64) -> f64 {
    estimate.mean + estimate.se * xi
}

/// Adds the drawn mean `m` where the wells leave the field free: `z += m * free`, with
/// `free = 1 - sum of the simple-kriging weights` (zero at the well nodes).
pub fn add_mean(z: &mut [f64], m: f64, free: &[f64]) {
    for (zi, &k) in z.iter_mut().zip(free) {
        *zi += m * k;
    }
}
