//! Targets with a "no change" atom: a point mass at exactly zero mixed with a continuous change.
//!
//! Saturation changes are exactly zero wherever no flood front or gas reached, and wells measure
//! that zero with noise. A hurdle model (Mullahy 1986, Journal of Econometrics 33:341; for
//! continuous outcomes, the two-part model of Duan et al. 1983) writes the predictive distribution
//! of the change at a location as
//!
//! ```text
//! F(y) = (1 - p) 1{y >= 0} + p G(y)
//! ```
//!
//! where `p` is the probability that anything changed and `G` the distribution of the change given
//! that it changed. Quantiles are the generalised inverse `F^-1(u) = inf {y : F(y) >= u}`, so the
//! median is exactly zero wherever `1 - p` covers the middle of the distribution, and band edges may
//! sit exactly at zero.
//!
//! With a point mass the PIT value `F(Y)` is not uniform. Calibration is judged on the randomised
//! PIT of Czado, Gneiting & Held (2009, Biometrics 65:1254): `U = F(y-) + V (F(y) - F(y-))` with
//! `V ~ U(0, 1)`, uniform for a calibrated forecast whatever its atoms.
//!
//! Whether a target has the atom, and how wide the measurement noise around it is, is decided from
//! the wells ([`ZeroRule::decide`]).

use serde::{Deserialize, Serialize};

/// The hurdle mixture at one location: `p` the probability of a change, `G` the conditional
/// distribution given by its CDF and quantile function.
pub trait Conditional {
    /// `G(y) = P(Y <= y | changed)`.
    fn cdf(&self, y: f64) -> f64;
    /// `G^-1(v)` for `v` in `[0, 1]`.
    fn quantile(&self, v: f64) -> f64;
}

/// `P(Y <= y)` of the mixture.
pub fn cdf<G: Conditional>(p: f64, g: &G, y: f64) -> f64 {
    let atom = if y >= 0.0 { 1.0 - p } else { 0.0 };
    (atom + p * g.cdf(y)).clamp(0.0, 1.0)
}

/// `P(Y < y)` of the mixture when `G` has no atoms.
pub fn cdf_left<G: Conditional>(p: f64, g: &G, y: f64) -> f64 {
    let atom = if y > 0.0 { 1.0 - p } else { 0.0 };
    (atom + p * g.cdf(y)).clamp(0.0, 1.0)
}

/// Quantile `F^-1(u) = inf {y : F(y) >= u}` of the mixture, for `u` in `(0, 1)`.
///
/// Below the atom the mixture follows `p G`, so `F^-1(u) = G^-1(u / p)` while `u <= p G(0)`; the
/// atom covers `(p G(0), p G(0) + 1 - p]`; above it `F^-1(u) = G^-1((u - 1 + p) / p)`. Results are
/// kept on their side of zero so that a step-function `G` cannot put a low quantile above the atom.
pub fn quantile<G: Conditional>(p: f64, g: &G, u: f64) -> f64 {
    if !(p.is_finite() && u.is_finite()) {
        return f64::NAN;
    }
    let p = p.clamp(0.0, 1.0);
    if p <= 0.0 {
        return 0.0;
    }
    let below = p * g.cdf(0.0);
    if u <= below {
        g.quantile((u / p).clamp(0.0, 1.0)).min(0.0)
    } else if u <= below + (1.0 - p) {
        0.0
    } else {
        g.quantile(((u - 1.0 + p) / p).clamp(0.0, 1.0)).max(0.0)
    }
}

/// Probability that the mixture crosses `t` upwards (`Y > t`) or downwards (`Y < t`).
pub fn crossing<G: Conditional>(p: f64, g: &G, t: f64, above: bool) -> f64 {
    if above {
        1.0 - cdf(p, g, t)
    } else {
        cdf_left(p, g, t)
    }
}

/// Randomised PIT (Czado, Gneiting & Held 2009) of observation `y` with `v` in `[0, 1]`.
pub fn randomised_pit<G: Conditional>(p: f64, g: &G, y: f64, v: f64) -> f64 {
    let lo = cdf_left(p, g, y);
    let hi = cdf(p, g, y);
    lo + v * (hi - lo)
}

/// A conditional distribution given by sorted support points with weights (an empirical or
/// conformal predictive distribution), with the inverse of its step CDF as quantile function.
#[derive(Clone, Debug, PartialEq)]
pub struct Steps {
    /// Support points, ascending.
    pub values: Vec<f64>,
    /// Cumulative weights normalised to end at 1, aligned with `values`.
    pub cum: Vec<f64>,
}

impl Steps {
    /// From values and non-negative weights (any order; non-finite values and zero weights
    /// dropped). `None` when nothing is left.
    pub fn new(values: &[f64], weights: &[f64]) -> Option<Self> {
        let mut vw: Vec<(f64, f64)> = values
            .iter()
            .zip(weights)
            .filter(|(v, w)| v.is_finite() && w.is_finite() && **w > 0.0)
            .map(|(&v, &w)| (v, w))
            .collect();
        if vw.is_empty() {
            return None;
        }
        vw.sort_by(|a, b| a.0.total_cmp(&b.0));
        let total: f64 = vw.iter().map(|p| p.1).sum();
        let mut c = 0.0;
        let cum = vw
            .iter()
            .map(|p| {
                c += p.1;
                c / total
            })
            .collect();
        Some(Self {
            values: vw.iter().map(|p| p.0).collect(),
            cum,
        })
    }
}

impl Conditional for Steps {
    fn cdf(&self, y: f64) -> f64 {
        let k = self.values.partition_point(|&v| v <= y);
        if k == 0 { 0.0 } else { self.cum[k - 1] }
    }
    fn quantile(&self, v: f64) -> f64 {
        let k = self.cum.partition_point(|&c| c < v - 1e-12);
        self.values[k.min(self.values.len() - 1)]
    }
}

/// Whether a target carries a "no change" atom, as set in the manifest.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ZeroChange {
    /// Decided from the wells ([`ZeroRule::decide`]).
    #[default]
    Auto,
    /// Always a hurdle target.
    On,
    /// Never.
    Off,
}

/// What the wells said about a target's atom at zero.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ZeroRule {
    /// Whether the target is modelled with the atom.
    pub enabled: bool,
    /// Measured values with `|y| <= tolerance` count as "no change".
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub tolerance: f64,
    /// How the tolerance was set: `"manifest"`, `"estimated"` or `"exact zeros"`.
    pub tolerance_source: String,
    /// Share of training rows within the tolerance.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub zero_share: f64,
    /// Estimated standard deviation of the measurement noise (NaN when not estimated).
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub noise_sd: f64,
    /// The decision in words.
    pub reason: String,
}

/// Fewest rows on the minority side of zero to estimate the noise from.
const MIN_NOISE_ROWS: usize = 5;
/// Smallest share of rows within the tolerance for `auto` to switch the atom on.
pub const AUTO_MIN_ZERO_SHARE: f64 = 0.2;
/// Largest ratio of the noise estimate to the 90th percentile of `|y|` for `auto`: the minority
/// side must look like noise around an atom, not like a second population of real changes.
pub const AUTO_MAX_NOISE_RATIO: f64 = 0.25;
/// Tolerance in noise standard deviations.
pub const TOLERANCE_SDS: f64 = 2.0;

impl ZeroRule {
    /// Decide from the training values `y`, the manifest's setting and optional tolerance.
    ///
    /// The noise is estimated from the minority side of zero (the side opposite to the sign of the
    /// sum of `y`): if the true changes there are zero, the measured values are the noise's
    /// half-normal tail and their root mean square estimates its standard deviation. The tolerance is
    /// `2 sd`. `auto` turns the atom on when at least 20 % of rows lie within the tolerance and the
    /// noise estimate is at most a quarter of the 90th percentile of `|y|`.
    pub fn decide(y: &[f64], setting: ZeroChange, tolerance: Option<f64>) -> ZeroRule {
        Self::decide_for(y, setting, tolerance, &[])
    }

    /// As [`Self::decide`], knowing the target's decision thresholds. A tolerance that reaches a
    /// non-zero threshold would score every measured change up to that threshold as "no
    /// change", so the maps would under-state the probability of crossing it: `auto` then
    /// declines the atom and says why, and a manifest's `zero_change = true` keeps it with that
    /// caution in the reason.
    pub fn decide_for(
        y: &[f64],
        setting: ZeroChange,
        tolerance: Option<f64>,
        thresholds: &[f64],
    ) -> ZeroRule {
        let mut rule = Self::decide_plain(y, setting, tolerance);
        let swallowed = thresholds
            .iter()
            .copied()
            .filter(|t| t.is_finite() && *t != 0.0 && t.abs() <= rule.tolerance)
            .min_by(|a, b| a.abs().total_cmp(&b.abs()));
        if let (true, Some(t)) = (rule.enabled, swallowed) {
            let why = format!(
                "the tolerance {:.4} reaches the decision threshold {t}, so changes up to it \
                 would count as no change",
                rule.tolerance
            );
            match setting {
                ZeroChange::Auto => {
                    rule.enabled = false;
                    rule.reason = format!("auto: {why}; no atom");
                }
                _ => rule.reason = format!("{}; caution: {why}", rule.reason),
            }
        }
        rule
    }

    /// The decision from the wells alone.
    fn decide_plain(y: &[f64], setting: ZeroChange, tolerance: Option<f64>) -> ZeroRule {
        let finite: Vec<f64> = y.iter().copied().filter(|v| v.is_finite()).collect();
        let n = finite.len().max(1) as f64;
        let sign = if finite.iter().sum::<f64>() >= 0.0 {
            1.0
        } else {
            -1.0
        };
        let minority: Vec<f64> = finite.iter().copied().filter(|&v| v * sign < 0.0).collect();
        let noise_sd = if minority.len() >= MIN_NOISE_ROWS {
            (minority.iter().map(|v| v * v).sum::<f64>() / minority.len() as f64).sqrt()
        } else {
            f64::NAN
        };
        let (tol, source) = match tolerance {
            Some(t) => (t.max(0.0), "manifest"),
            None if noise_sd.is_finite() => (TOLERANCE_SDS * noise_sd, "estimated"),
            None => (0.0, "exact zeros"),
        };
        let zero_share = finite.iter().filter(|v| v.abs() <= tol).count() as f64 / n;
        let mut mags: Vec<f64> = finite.iter().map(|v| v.abs()).collect();
        mags.sort_by(f64::total_cmp);
        let p90 = if mags.is_empty() {
            f64::NAN
        } else {
            crate::metrics::quantile_sorted(&mags, 0.9)
        };
        let noise_ratio = noise_sd / p90;
        let (enabled, reason) = match setting {
            ZeroChange::On => (true, "zero_change = true in the manifest".to_string()),
            ZeroChange::Off => (false, "zero_change = false in the manifest".to_string()),
            ZeroChange::Auto => {
                let looks_like_noise = match source {
                    "exact zeros" => true,
                    _ => noise_ratio <= AUTO_MAX_NOISE_RATIO,
                };
                let on = zero_share >= AUTO_MIN_ZERO_SHARE && looks_like_noise && tol.is_finite();
                let why = if on {
                    format!(
                        "auto: {:.0} % of well values lie within {tol:.4} of zero ({source} \
                         tolerance); modelled as 'no change' or a change",
                        100.0 * zero_share
                    )
                } else if !looks_like_noise {
                    format!(
                        "auto: values on both sides of zero are real changes (minority-side \
                         spread {noise_sd:.4} is {:.0} % of the 90th percentile of |change|); \
                         no atom",
                        100.0 * noise_ratio
                    )
                } else {
                    format!(
                        "auto: only {:.0} % of well values lie within {tol:.4} of zero; no atom",
                        100.0 * zero_share
                    )
                };
                (on, why)
            }
        };
        ZeroRule {
            enabled,
            tolerance: tol,
            tolerance_source: source.to_string(),
            zero_share,
            noise_sd,
            reason,
        }
    }

    /// Whether a measured value counts as a change.
    pub fn changed(&self, y: f64) -> bool {
        y.abs() > self.tolerance
    }

    /// A measured value with the noise around the atom removed: values within the tolerance are
    /// taken as exactly zero, the truth the maps are scored against.
    pub fn denoised(&self, y: f64) -> f64 {
        if self.changed(y) { y } else { 0.0 }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_invert_their_cdf() {
        let s = Steps::new(&[3.0, 1.0, 2.0, 4.0], &[1.0; 4]).unwrap();
        assert_eq!(s.cdf(0.5), 0.0);
        assert_eq!(s.cdf(2.0), 0.5);
        assert_eq!(s.quantile(0.5), 2.0);
        assert_eq!(s.quantile(0.51), 3.0);
        assert_eq!(s.quantile(1.0), 4.0);
        assert_eq!(s.quantile(0.0), 1.0);
    }

    #[test]
    fn median_is_zero_when_no_change_is_likelier() {
        let g = Steps::new(&[0.1, 0.2, 0.3], &[1.0; 3]).unwrap();
        assert_eq!(quantile(0.49, &g, 0.5), 0.0);
        assert!(quantile(0.51, &g, 0.5) > 0.0);
        // The lower edge is at the atom whenever 1 - p >= u.
        assert_eq!(quantile(0.8, &g, 0.1), 0.0);
    }

    #[test]
    fn auto_rule_sees_an_atom_and_refuses_two_sided_changes() {
        // 40 noisy zeros (sd 0.01, half below zero) and 40 real changes of 0.1-0.5.
        let mut y: Vec<f64> = (0..40)
            .map(|i| 0.01 * (if i % 2 == 0 { 1.0 } else { -1.0 }) * (0.5 + (i % 5) as f64 * 0.25))
            .collect();
        y.extend((0..40).map(|i| 0.1 + 0.01 * i as f64));
        let r = ZeroRule::decide(&y, ZeroChange::Auto, None);
        assert!(r.enabled, "{}", r.reason);
        assert!(r.tolerance > 0.01 && r.tolerance < 0.05, "{}", r.tolerance);
        // Pressure-like: changes of both signs and similar size.
        let p: Vec<f64> = (0..80)
            .map(|i| {
                if i % 3 == 0 {
                    2.0 + i as f64 * 0.05
                } else {
                    -3.0 - i as f64 * 0.1
                }
            })
            .collect();
        let r = ZeroRule::decide(&p, ZeroChange::Auto, None);
        assert!(!r.enabled, "{}", r.reason);
        let r = ZeroRule::decide(&p, ZeroChange::On, Some(0.5));
        assert!(r.enabled && r.tolerance == 0.5);
    }

    #[test]
    fn auto_declines_an_atom_whose_tolerance_reaches_a_decision_threshold() {
        // Depletion-like: 30 wells near zero (noise sd 1) and 50 real drops of 3-8 units, one
        // decision threshold at -2: the estimated tolerance (2 sd, about 2) reaches it.
        let mut y: Vec<f64> = (0..30)
            .map(|i| (if i % 2 == 0 { 1.0 } else { -1.0 }) * (0.4 + (i % 6) as f64 * 0.3))
            .collect();
        y.extend((0..50).map(|i| -3.0 - 0.1 * i as f64));
        let plain = ZeroRule::decide(&y, ZeroChange::Auto, None);
        assert!(plain.enabled, "{}", plain.reason);
        assert!(plain.tolerance >= 2.0, "{}", plain.tolerance);
        let r = ZeroRule::decide_for(&y, ZeroChange::Auto, None, &[-2.0]);
        assert!(!r.enabled, "{}", r.reason);
        assert!(r.reason.contains("threshold -2"), "{}", r.reason);
        assert_eq!(r.tolerance, plain.tolerance);
        // A threshold beyond the tolerance leaves the decision as it was.
        let far = ZeroRule::decide_for(&y, ZeroChange::Auto, None, &[-6.0]);
        assert_eq!(far, plain);
        // The manifest's word stands, with the caution.
        let on = ZeroRule::decide_for(&y, ZeroChange::On, None, &[-2.0]);
        assert!(on.enabled && on.reason.contains("caution"), "{}", on.reason);
    }
}
