//! The calibration's own uncertainty, shared by every node of a realization.
//!
//! The node distributions are calibrated on `n` held-out wells. A conformal calibration is valid
//! on average over the wells it could have been fitted on, so each node's distribution already
//! carries that uncertainty; but every node of a field uses the *same* wells, so the calibration
//! error is one error shared by all of them, which the variogram of the wells' scores cannot see
//! (it is constant over the field). A total over many nodes feels it in full.
//!
//! Per realization the wells' normal scores `s_i` are reweighted by a Bayesian bootstrap (Rubin
//! 1981, *Ann. Stat.* 9:130): weights `w ~ Dirichlet(1, ..., 1)` over the wells, drawn as
//! independent unit exponentials divided by their sum, one draw per field and realization shared
//! by the field's steps (a well keeps its weight at every step). The draw's shift of the wells'
//! mean normal score, `d = sum w_i s_i - mean(s)`, has posterior variance
//! `v = sum (s_i - mean(s))^2 / (n (n + 1))` and is added to the realization's normal scores
//! where the wells do not already fix them: `z' = (z + d k) / sqrt(1 + v k^2)`, with
//! `k = 1 - sum of the simple-kriging weights` at the node (1 without conditioning, 0 at a well).
//! Dividing by `sqrt(1 + v k^2)` keeps every node's marginal distribution (its written band and
//! exceedance map) as it was: only the dependence between nodes grows.

use rand::SeedableRng;
use rand::rngs::StdRng;
use rand_distr::{Distribution, Exp1};

/// Bayesian-bootstrap weights over `n` items: `Dirichlet(1, ..., 1)`, as `n` unit exponentials
/// divided by their sum (Rubin 1981). Empty for `n = 0`.
pub fn dirichlet_weights(n: usize, rng: &mut StdRng) -> Vec<f64> {
    let mut w: Vec<f64> = (0..n).map(|_| Exp1.sample(rng)).collect();
    let total: f64 = w.iter().sum();
    if total > 0.0 {
        for x in &mut w {
            *x /= total;
        }
    }
    w
}

/// Weights of `n` items from `seed` (a fresh generator per draw).
pub fn dirichlet_weights_seeded(n: usize, seed: u64) -> Vec<f64> {
    dirichlet_weights(n, &mut StdRng::seed_from_u64(seed))
}

/// One layer's wells for the draw: each score with the index of its well among the field's
/// wells (so that the field's steps share a well's weight).
#[derive(Clone, Debug, Default)]
pub struct LayerScores {
    /// `(well index in the field, normal score)`.
    pub scores: Vec<(usize, f64)>,
    /// Mean of the scores.
    pub mean: f64,
    /// Posterior variance of the reweighted mean, `sum (s - mean)^2 / (n (n + 1))`.
    pub variance: f64,
}

impl LayerScores {
    /// The layer's scores; `None` with fewer than two.
    pub fn new(scores: Vec<(usize, f64)>) -> Option<Self> {
        let n = scores.len();
        if n < 2 {
            return None;
        }
        let mean = scores.iter().map(|s| s.1).sum::<f64>() / n as f64;
        let ss: f64 = scores.iter().map(|s| (s.1 - mean).powi(2)).sum();
        Some(Self {
            scores,
            mean,
            variance: ss / (n as f64 * (n as f64 + 1.0)),
        })
    }

    /// The shift `d` of the reweighted mean under the field's well weights `w` (renormalised
    /// over this layer's wells, which keeps them Dirichlet(1, ..., 1) over those wells).
    pub fn shift(&self, w: &[f64]) -> f64 {
        let (mut sw, mut sws) = (0.0, 0.0);
        for &(k, s) in &self.scores {
            sw += w[k];
            sws += w[k] * s;
        }
        if sw > 0.0 { sws / sw - self.mean } else { 0.0 }
    }
}

/// The factors `1 / sqrt(1 + v k^2)` that keep unit variance at nodes whose share left free by
/// the wells is `free` (`k` in the module docs), for shifts of variance `variance`.
pub fn unit_variance_factors(variance: f64, free: &[f64]) -> Vec<f64> {
    free.iter()
        .map(|&k| 1.0 / (1.0 + variance * k * k).sqrt())
        .collect()
}

/// Adds a drawn shift `d` to the normal scores `z` where the wells leave them free (`free[i]`)
/// and rescales by `factor` ([`unit_variance_factors`]).
pub fn apply_shift(z: &mut [f64], d: f64, free: &[f64], factor: &[f64]) {
    for ((zi, &k), &f) in z.iter_mut().zip(free).zip(factor) {
        *zi = (*zi + d * k) * f;
    }
}
