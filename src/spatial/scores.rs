//! Normal scores of prediction errors, from probability-integral-transform (PIT) values.
//!
//! A well's observation `y` under its own (held-out) predictive distribution `F` has PIT
//! `u = F(y)`; if `F` is calibrated, `u` is uniform and `Phi^-1(u)` is standard normal, whatever
//! the shape of `F`. These normal scores are what the variogram and the conditioning use.
//!
//! When `F` has an atom (a point mass at "no change"), `F(y)` is not uniform. The randomised PIT
//! `u = F(y-) + V (F(y) - F(y-))` with `V ~ U(0, 1)` independent of everything else is uniform for
//! a calibrated `F` (Czado, Gneiting & Held 2009, *Biometrics* 65:1254, eq. 1; Brockwell 2007).
//!
//! PIT values of exactly 0 or 1 (an observation outside the predictive support) would give
//! infinite scores, so levels are clamped to `[clamp, 1 - clamp]` first. [`PIT_CLAMP`] = 0.001
//! caps scores at about +-3.09: beyond the reach of a few hundred wells, and finite.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};

use super::{SpatialError, derive_seed, normal};

/// Default clamp of PIT values before the normal score: `u` is kept in `[0.001, 0.999]`.
pub const PIT_CLAMP: f64 = 1e-3;

/// The normal score `Phi^-1(u)` of a PIT value, with `u` clamped to `[clamp, 1 - clamp]`.
/// `clamp` must lie in `(0, 0.5)`; a `NaN` PIT gives `NaN`.
pub fn normal_score(pit: f64, clamp: f64) -> f64 {
    if pit.is_nan() {
        return f64::NAN;
    }
    normal::quantile(pit.clamp(clamp, 1.0 - clamp))
}

/// The randomised PIT `F(y-) + v (F(y) - F(y-))` for one observation, given `F(y-)` = P(Y < y),
/// `F(y)` = P(Y <= y) and a uniform draw `v` in `[0, 1]`. For a continuous `F` the two
/// probabilities coincide and the result is plain `F(y)`.
pub fn randomized_pit(cdf_left: f64, cdf: f64, v: f64) -> f64 {
    cdf_left + v * (cdf - cdf_left)
}

/// One observation's predictive probabilities: `left` = P(Y < y), `right` = P(Y <= y).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PitInput {
    /// P(Y < y), the predictive distribution just below the observation.
    pub left: f64,
    /// P(Y <= y), the predictive distribution at the observation.
    pub right: f64,
}

/// Randomised PIT values of many observations; observation `k` draws its `V` from a stream seeded
/// by `(seed, k)`, so a value does not depend on the others or on the order of computation.
/// Errors name the observation whose probabilities are not `0 <= left <= right <= 1`.
pub fn randomized_pits(inputs: &[PitInput], seed: u64) -> Result<Vec<f64>, SpatialError> {
    inputs
        .iter()
        .enumerate()
        .map(|(k, p)| {
            let ok = p.left.is_finite()
                && p.right.is_finite()
                && 0.0 <= p.left
                && p.left <= p.right
                && p.right <= 1.0;
            if !ok {
                return Err(SpatialError::Input {
                    what: format!("observation {k}"),
                    problem: format!(
                        "predictive probabilities must satisfy 0 <= P(Y < y) <= P(Y <= y) <= 1, got {} and {}",
                        p.left, p.right
                    ),
                });
            }
            if p.left == p.right {
                return Ok(p.right);
            }
            let mut rng = StdRng::seed_from_u64(derive_seed(seed, &[0x9170, k as u64]));
            let v: f64 = rng.random();
            Ok(randomized_pit(p.left, p.right, v))
        })
        .collect()
}
