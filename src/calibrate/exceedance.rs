//! Calibrated probabilities of crossing a decision threshold.
//!
//! Two predictive distributions, both calibrated on held-out wells; the calibration step picks per
//! threshold the one with the lower out-of-fold Brier score (Brier 1950; Gneiting & Raftery 2007):
//!
//! - **Conformal predictive system** ([`PredictiveSystem`]; Vovk, Shen, Manokhin & Xie 2019,
//!   Machine Learning 108:445): with held-out residuals `a_i = y_i - mid_i`,
//!   `Q(y) = [#{mid + a_i < y} + tau (#{mid + a_i = y} + 1)] / (n + 1)`. `Q(Y)` is uniform for a
//!   new exchangeable point when `tau ~ U(0,1)`; maps use `tau = 1/2`. Counts are well weights
//!   (each well weighs one) and residuals are pooled within the Mondrian bin of `mid`
//!   (the Mondrian taxonomy of Vovk, Gammerman & Shafer 2005 applied to the predictive system).
//! - **Recalibrated forest CDF** ([`PitRecalibration`]; Kuleshov, Fenner & Ermon 2018, ICML): the
//!   quantile forest's conditional CDF `F(t|x)` (Meinshausen 2006) composed with an isotonic map
//!   `R` fitted to `{(p_i, P^(p_i))}` where `p_i = F(y_i|x_i)` are out-of-fold PIT values and
//!   `P^(p) = #{p_j <= p}/n` (well-weighted); the calibrated CDF is `R o F`.
//!
//! Probabilities respect the target's physical bounds: `P(Y <= t) = 0` below the lower bound and
//! `1` at or above the upper bound.

use super::conformal::MondrianBins;
use super::error::CalibrateError;
use super::isotonic::{IsotonicMap, IsotonicSettings};
use super::units::Units;
use serde::{Deserialize, Serialize};

/// How the probability of one threshold is computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ExceedMethod {
    /// Conformal predictive system on held-out residuals of the corrected predictor.
    Conformal,
    /// The forest's conditional CDF recalibrated by isotonic regression on held-out PIT values.
    ForestRecalibrated,
}

/// Probability that `Y` crosses `value` in the threshold's direction, from `P(Y <= value)`.
pub fn crossing_probability(p_below_or_at: f64, above: bool) -> f64 {
    if above {
        1.0 - p_below_or_at
    } else {
        p_below_or_at
    }
}

/// `P(Y <= t)` forced to the physical bounds: 0 below the lower bound, 1 at or above the upper.
pub fn bounded_cdf(p: f64, t: f64, bounds: (f64, f64)) -> f64 {
    if t < bounds.0 {
        0.0
    } else if t >= bounds.1 {
        1.0
    } else {
        p.clamp(0.0, 1.0)
    }
}

/// `P(Y <= t)` (or `P(Y < t)` when `strict`) made consistent with a band: a distribution whose
/// quantile at level `u_k` is `y_k` (`Q(u) = inf{y : F(y) >= u}`) has `F(t) >= u_k` for
/// `t >= y_k` and `F(t) < u_k` for `t < y_k` (for `P(Y < t)`: `>= u_k` when `t > y_k`, `<= u_k`
/// when `t <= y_k`). `p` is clipped to the interval those constraints leave (closed at its upper
/// end), so that the band's quantiles and the crossing probabilities describe one distribution.
/// A `NaN` `p` or band value leaves `p` as it is.
pub fn band_consistent(p: f64, t: f64, strict: bool, band: &[(f64, f64)]) -> f64 {
    if p.is_nan() || t.is_nan() {
        return p;
    }
    let (mut lo, mut hi) = (0.0f64, 1.0f64);
    for &(u, y) in band {
        if y.is_nan() || u.is_nan() {
            continue;
        }
        let reached = if strict { t > y } else { t >= y };
        if reached {
            lo = lo.max(u);
        } else {
            hi = hi.min(u);
        }
    }
    if lo > hi {
        return p;
    }
    p.clamp(lo, hi)
}

/// Mondrian conformal predictive system (Vovk et al. 2019): sorted held-out residuals per bin of
/// the predicted value, with cumulative well weights. Residuals may be scaled by a local spread
/// `s` (`a_i = (y_i - mid_i)/s_i`, and `Q(t)` uses `(t - mid)/s`), which keeps the system's
/// validity for any fixed scale function.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PredictiveSystem {
    /// Bins of the predicted value.
    pub bins: MondrianBins,
    /// Scaled residuals `(y - mid)/s` per bin, ascending.
    pub residuals: Vec<Vec<f64>>,
    /// Cumulative well weight per bin, aligned with `residuals` (last entry = bin total).
    pub cum_weight: Vec<Vec<f64>>,
    /// Weight of the new point (one well without a covariate shift; see [`Units`]).
    #[serde(default = "one")]
    pub test_weight: f64,
}

fn one() -> f64 {
    1.0
}

impl PredictiveSystem {
    /// Fit from held-out rows: predicted value `mid`, truth `y`, the rows' `units`, and the
    /// bins; residuals unscaled.
    pub fn fit(mid: &[f64], y: &[f64], units: &Units, bins: MondrianBins) -> Self {
        Self::fit_scaled(mid, &vec![1.0; mid.len()], y, units, bins)
    }

    /// As [`PredictiveSystem::fit`] with residuals divided by `scale` (> 0) per row.
    pub fn fit_scaled(
        mid: &[f64],
        scale: &[f64],
        y: &[f64],
        units: &Units,
        bins: MondrianBins,
    ) -> Self {
        let w = &units.weight;
        let nb = bins.len();
        let mut per: Vec<Vec<(f64, f64)>> = vec![Vec::new(); nb];
        for i in 0..mid.len().min(y.len()).min(scale.len()) {
            let r = (y[i] - mid[i]) / scale[i];
            if r.is_finite() {
                per[bins.bin(mid[i])].push((r, w[i]));
            }
        }
        let mut residuals = Vec::with_capacity(nb);
        let mut cum_weight = Vec::with_capacity(nb);
        for mut v in per {
            v.sort_by(|a, b| a.0.total_cmp(&b.0));
            let mut c = 0.0;
            let mut cw = Vec::with_capacity(v.len());
            for &(_, wi) in &v {
                c += wi;
                cw.push(c);
            }
            residuals.push(v.iter().map(|p| p.0).collect());
            cum_weight.push(cw);
        }
        Self {
            bins,
            residuals,
            cum_weight,
            test_weight: units.test_weight,
        }
    }

    /// `Q(t)` at predicted value `mid` with tie-breaking `tau` in `[0, 1]`:
    /// `[W{mid + a_i < t} + tau (W{mid + a_i = t} + w)] / (W + w)` (unscaled residuals; `w` the
    /// new point's weight, one well without a covariate shift).
    pub fn cdf(&self, mid: f64, t: f64, tau: f64) -> f64 {
        self.cdf_scaled(mid, 1.0, t, tau)
    }

    /// `Q(t)` for scaled residuals: `[W{mid + s a_i < t} + tau (W{mid + s a_i = t} + w)] / (W + w)`.
    pub fn cdf_scaled(&self, mid: f64, scale: f64, t: f64, tau: f64) -> f64 {
        if !mid.is_finite() || !t.is_finite() || scale.is_nan() || scale <= 0.0 {
            return f64::NAN;
        }
        let b = self.bins.bin(mid).min(self.residuals.len() - 1);
        let r = &self.residuals[b];
        let cw = &self.cum_weight[b];
        let total = cw.last().copied().unwrap_or(0.0);
        let d = (t - mid) / scale;
        let below = r.partition_point(|&a| a < d);
        let at_or_below = r.partition_point(|&a| a <= d);
        let w_below = if below == 0 { 0.0 } else { cw[below - 1] };
        let w_at = if at_or_below == 0 {
            0.0
        } else {
            cw[at_or_below - 1]
        } - w_below;
        let w = self.test_weight;
        (w_below + tau * (w_at + w)) / (total + w)
    }

    /// Quantile of the system at predicted value `mid` with residual scale `scale`: the smallest
    /// `t = mid + scale a_k` whose `Q(t)` (with `tau = 1/2`) reaches `v`, the upper bound when none
    /// does (the new point's own weight sits at `+inf`), clipped to `bounds`.
    pub fn quantile(&self, mid: f64, scale: f64, v: f64, bounds: (f64, f64)) -> f64 {
        if !mid.is_finite() || scale.is_nan() || scale <= 0.0 || v.is_nan() {
            return f64::NAN;
        }
        let b = self.bins.bin(mid).min(self.residuals.len() - 1);
        let r = &self.residuals[b];
        let cw = &self.cum_weight[b];
        let total = cw.last().copied().unwrap_or(0.0);
        let w = self.test_weight;
        // Q at the k-th residual counts every residual equal to it as "at".
        let q_at = |k: usize| -> f64 {
            let first = r.partition_point(|&a| a < r[k]);
            let last = r.partition_point(|&a| a <= r[k]);
            let below = if first == 0 { 0.0 } else { cw[first - 1] };
            let at = cw[last - 1] - below;
            (below + 0.5 * (at + w)) / (total + w)
        };
        let (mut lo, mut hi) = (0usize, r.len());
        while lo < hi {
            let m = (lo + hi) / 2;
            if q_at(m) < v { lo = m + 1 } else { hi = m }
        }
        let t = if lo == r.len() {
            bounds.1
        } else {
            mid + scale * r[lo]
        };
        t.clamp(bounds.0, bounds.1)
    }

    /// `P(Y <= t)` for a map: `Q(t)` with `tau = 1/2` and residual scale `scale` (1 when
    /// unscaled), forced to the physical bounds.
    pub fn prob_below(&self, mid: f64, scale: f64, t: f64, bounds: (f64, f64)) -> f64 {
        bounded_cdf(self.cdf_scaled(mid, scale, t, 0.5), t, bounds)
    }
}

/// Kuleshov, Fenner & Ermon (2018) recalibration map of a predictive CDF.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PitRecalibration {
    /// Isotonic map from the model's CDF value to the calibrated probability.
    pub map: IsotonicMap,
}

impl PitRecalibration {
    /// Fit on held-out PIT values `p_i = F(y_i | x_i)` with per-row weights (well weights): the
    /// isotonic regression of the weighted empirical frequency `P^(p_i) = W{p_j <= p_i} / W` on
    /// `p_i`.
    pub fn fit(pit: &[f64], weights: &[f64]) -> Result<Self, CalibrateError> {
        let mut pw: Vec<(f64, f64)> = pit
            .iter()
            .zip(weights)
            .filter(|(p, w)| p.is_finite() && w.is_finite() && **w > 0.0)
            .map(|(&p, &w)| (p.clamp(0.0, 1.0), w))
            .collect();
        if pw.is_empty() {
            return Err(CalibrateError::Isotonic(
                "no finite PIT value to recalibrate on".to_string(),
            ));
        }
        pw.sort_by(|a, b| a.0.total_cmp(&b.0));
        let total: f64 = pw.iter().map(|p| p.1).sum();
        // Empirical frequency at each p: weight of all p_j <= p (ties share the tie's total).
        let mut freq = vec![0.0; pw.len()];
        let mut i = 0;
        let mut cum = 0.0;
        while i < pw.len() {
            let mut j = i;
            while j < pw.len() && pw[j].0 == pw[i].0 {
                cum += pw[j].1;
                j += 1;
            }
            for f in &mut freq[i..j] {
                *f = cum / total;
            }
            i = j;
        }
        let x: Vec<f64> = pw.iter().map(|p| p.0).collect();
        let w: Vec<f64> = pw.iter().map(|p| p.1).collect();
        let map = IsotonicMap::fit(
            &x,
            &freq,
            Some(&w),
            &IsotonicSettings {
                increasing: true,
                y_min: Some(0.0),
                y_max: Some(1.0),
                centred: false,
            },
        )?;
        Ok(Self { map })
    }

    /// Calibrated probability for a model CDF value `p`.
    pub fn apply(&self, p: f64) -> f64 {
        self.map.predict(p.clamp(0.0, 1.0))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cps_formula_by_hand() {
        // Residuals 1, 2, 3 (three wells, one row each), mid 0:
        // Q(2.5) = (2 + tau (0 + 1)) / 4; Q(2) = (1 + tau (1 + 1)) / 4 (Vovk et al. 2019).
        let cps = PredictiveSystem::fit(
            &[0.0; 3],
            &[1.0, 2.0, 3.0],
            &Units::wells(&[0, 1, 2]),
            MondrianBins::single(),
        );
        assert!((cps.cdf(0.0, 2.5, 0.5) - 2.5 / 4.0).abs() < 1e-12);
        assert!((cps.cdf(0.0, 2.0, 0.25) - 1.5 / 4.0).abs() < 1e-12);
        assert!((cps.cdf(10.0, 12.0, 0.0) - 0.25).abs() < 1e-12);
        assert_eq!(cps.prob_below(0.0, 1.0, -1.0, (-0.5, 5.0)), 0.0);
        assert_eq!(cps.prob_below(0.0, 1.0, 5.0, (-0.5, 5.0)), 1.0);
        // Scaled: residuals 1, 2, 3 with scale 2 are 0.5, 1, 1.5; at scale 4, t = 5 is 1.25.
        let s = PredictiveSystem::fit_scaled(
            &[0.0; 3],
            &[2.0; 3],
            &[1.0, 2.0, 3.0],
            &Units::wells(&[0, 1, 2]),
            MondrianBins::single(),
        );
        assert!((s.cdf_scaled(0.0, 4.0, 5.0, 0.5) - 2.5 / 4.0).abs() < 1e-12);
    }

    #[test]
    fn recalibration_of_an_overconfident_cdf() {
        // PIT values piled at the ends (too narrow a CDF): the map spreads them out.
        let pit = [0.0, 0.0, 0.02, 0.5, 0.98, 1.0, 1.0, 0.01, 0.99, 0.5];
        let r = PitRecalibration::fit(&pit, &[1.0; 10]).unwrap();
        assert!((r.apply(0.0) - 0.2).abs() < 1e-12);
        assert!((r.apply(0.5) - 0.6).abs() < 1e-12);
        assert!((r.apply(1.0) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn probabilities_are_clipped_to_what_the_band_allows() {
        // Band: Q(0.1) = -5, Q(0.5) = -1, Q(0.9) = 2. Worked by hand from the definition
        // Q(u) = inf{y : F(y) >= u}: t >= y_k needs F(t) >= u_k, t < y_k needs F(t) < u_k.
        let band = [(0.1, -5.0), (0.5, -1.0), (0.9, 2.0)];
        // t = -2 lies between P10 and P50: F(-2) in [0.1, 0.5]
        assert_eq!(band_consistent(0.7, -2.0, false, &band), 0.5);
        assert_eq!(band_consistent(0.05, -2.0, false, &band), 0.1);
        assert_eq!(band_consistent(0.3, -2.0, false, &band), 0.3);
        // t below P10: F(t) <= 0.1; at P50 exactly: F(t) >= 0.5 for P(Y <= t), <= 0.5 for P(Y < t)
        assert_eq!(band_consistent(0.4, -6.0, false, &band), 0.1);
        assert_eq!(band_consistent(0.3, -1.0, false, &band), 0.5);
        assert_eq!(band_consistent(0.7, -1.0, true, &band), 0.5);
        // above P90: F(t) >= 0.9
        assert_eq!(band_consistent(0.2, 3.0, false, &band), 0.9);
        // NaN band values are left out, NaN probabilities stay NaN
        let partial = [(0.1, f64::NAN), (0.5, -1.0), (0.9, f64::NAN)];
        assert_eq!(band_consistent(0.05, -2.0, false, &partial), 0.05);
        assert!(band_consistent(f64::NAN, -2.0, false, &band).is_nan());
    }
}
