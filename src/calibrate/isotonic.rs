//! Weighted isotonic regression by pool-adjacent-violators.
//!
//! Least-squares monotone fit of `y` on `x` with positive weights by the pool-adjacent-violators
//! algorithm (PAV; Ayer et al. 1955; Best & Chakravarti 1990, Math. Programming 47:425). Tied `x`
//! values follow the *secondary* approach of de Leeuw (1977; de Leeuw, Hornik & Mair 2009, J. Stat.
//! Softw. 32(5), R package `isotone`): tied points receive one common fitted value, which amounts to
//! pooling each tie block into its weighted mean (weights summed) before PAV.
//!
//! The fitted map interpolates linearly between the fitted values at the distinct `x` and is
//! constant beyond the smallest and largest `x` (clipping at the ends), as scikit-learn's
//! `IsotonicRegression(out_of_bounds="clip")`. Optional bounds clip the fitted values; for a
//! least-squares fit, clipping the unbounded solution gives the bounded solution.
//!
//! The *centred* variant (centred isotonic regression, Oron & Flournoy 2017, Stat. Biopharm.
//! Res. 9:258) keeps the same block values but places each block's knot at the weighted mean of
//! its `x` (plus the extreme `x` at the two ends), so the map rises steadily between block
//! centres instead of jumping at block edges; it has less variance as a recalibration map.
//!
//! Used twice: the end-bias correction (out-of-fold prediction -> truth) and the recalibration of
//! predictive CDFs on PIT values (Kuleshov, Fenner & Ermon 2018).

use super::error::CalibrateError;
use serde::{Deserialize, Serialize};

/// Settings of an isotonic fit.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct IsotonicSettings {
    /// `true` (default): non-decreasing fit; `false`: non-increasing.
    pub increasing: bool,
    /// Lower clip of the fitted values; `None` (default) for none.
    pub y_min: Option<f64>,
    /// Upper clip of the fitted values; `None` (default) for none. Must be >= `y_min`.
    pub y_max: Option<f64>,
    /// `false` (default): knots at every distinct `x`; `true`: centred isotonic regression,
    /// knots at block centres.
    pub centred: bool,
}

impl Default for IsotonicSettings {
    fn default() -> Self {
        Self {
            increasing: true,
            y_min: None,
            y_max: None,
            centred: false,
        }
    }
}

/// A fitted isotonic map: knots at distinct input values, linear between them, constant outside.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct IsotonicMap {
    /// Knot positions, strictly increasing (at least one).
    pub x: Vec<f64>,
    /// Fitted values at the knots, monotone in the fitted direction.
    pub y: Vec<f64>,
}

/// Pool-adjacent-violators on points already in order: the non-decreasing sequence minimising
/// `sum w_i (y_i - f_i)^2`. Weights must be positive. Returns one fitted value per point.
pub fn pav(y: &[f64], w: &[f64]) -> Vec<f64> {
    // Blocks on a stack: (weighted sum, weight sum, number of points).
    let mut blocks: Vec<(f64, f64, usize)> = Vec::with_capacity(y.len());
    for (&yi, &wi) in y.iter().zip(w) {
        blocks.push((yi * wi, wi, 1));
        while blocks.len() > 1 {
            let (s1, w1, _) = blocks[blocks.len() - 1];
            let (s0, w0, _) = blocks[blocks.len() - 2];
            // Violation: previous block mean above the last one's (cross-multiplied, weights > 0).
            if s0 * w1 > s1 * w0 {
                let (s, wt, c) = blocks.pop().unwrap_or((0.0, 0.0, 0));
                if let Some(last) = blocks.last_mut() {
                    last.0 += s;
                    last.1 += wt;
                    last.2 += c;
                }
            } else {
                break;
            }
        }
    }
    let mut out = Vec::with_capacity(y.len());
    for (s, wt, c) in blocks {
        out.extend(std::iter::repeat_n(s / wt, c));
    }
    out
}

impl IsotonicMap {
    /// Fit the map to `(x, y)` pairs with optional non-negative weights (zero-weight points are
    /// ignored). Errors when lengths differ, a value is not finite, a weight is negative, no point
    /// has positive weight, or the bounds are inverted.
    pub fn fit(
        x: &[f64],
        y: &[f64],
        w: Option<&[f64]>,
        settings: &IsotonicSettings,
    ) -> Result<IsotonicMap, CalibrateError> {
        if x.len() != y.len() {
            return Err(CalibrateError::Isotonic(format!(
                "x has {} values but y has {}",
                x.len(),
                y.len()
            )));
        }
        if let Some(w) = w
            && w.len() != x.len()
        {
            return Err(CalibrateError::Isotonic(format!(
                "{} weights for {} points",
                w.len(),
                x.len()
            )));
        }
        if let (Some(lo), Some(hi)) = (settings.y_min, settings.y_max)
            && lo
                .partial_cmp(&hi)
                .is_none_or(|o| o == std::cmp::Ordering::Greater)
        {
            return Err(CalibrateError::Isotonic(format!(
                "y_min {lo} must not exceed y_max {hi}"
            )));
        }
        let mut pts: Vec<(f64, f64, f64)> = Vec::with_capacity(x.len());
        for i in 0..x.len() {
            let wi = w.map_or(1.0, |w| w[i]);
            if !x[i].is_finite() || !y[i].is_finite() || !wi.is_finite() || wi < 0.0 {
                return Err(CalibrateError::Isotonic(format!(
                    "point {i} is (x {}, y {}, weight {wi}); expected finite values and a weight >= 0",
                    x[i], y[i]
                )));
            }
            if wi > 0.0 {
                pts.push((x[i], y[i], wi));
            }
        }
        if pts.is_empty() {
            return Err(CalibrateError::Isotonic(
                "no point with positive weight".to_string(),
            ));
        }
        pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        // Secondary approach to ties: pool each tie block into its weighted mean.
        let mut ux: Vec<f64> = Vec::new();
        let mut uy: Vec<f64> = Vec::new();
        let mut uw: Vec<f64> = Vec::new();
        let sign = if settings.increasing { 1.0 } else { -1.0 };
        for (xi, yi, wi) in pts {
            match ux.last() {
                Some(&last) if last == xi => {
                    let n = uy.len() - 1;
                    uy[n] += sign * yi * wi;
                    uw[n] += wi;
                }
                _ => {
                    ux.push(xi);
                    uy.push(sign * yi * wi);
                    uw.push(wi);
                }
            }
        }
        for (s, wt) in uy.iter_mut().zip(&uw) {
            *s /= wt;
        }
        let fitted: Vec<f64> = pav(&uy, &uw)
            .into_iter()
            .map(|v| {
                let mut v = sign * v;
                if let Some(lo) = settings.y_min {
                    v = v.max(lo);
                }
                if let Some(hi) = settings.y_max {
                    v = v.min(hi);
                }
                v
            })
            .collect();
        let n = ux.len();
        let mut kx = Vec::with_capacity(n);
        let mut ky = Vec::with_capacity(n);
        if settings.centred {
            // One knot per block of equal fitted values at its weighted mean x, plus the extreme
            // x values at the ends.
            let mut i = 0;
            while i < n {
                let mut j = i;
                let (mut sx, mut sw) = (0.0, 0.0);
                while j < n && fitted[j] == fitted[i] {
                    sx += ux[j] * uw[j];
                    sw += uw[j];
                    j += 1;
                }
                if i == 0 && ux[0] < sx / sw {
                    kx.push(ux[0]);
                    ky.push(fitted[0]);
                }
                kx.push(sx / sw);
                ky.push(fitted[i]);
                if j == n && ux[n - 1] > sx / sw {
                    kx.push(ux[n - 1]);
                    ky.push(fitted[n - 1]);
                }
                i = j;
            }
        } else {
            // Drop interior knots whose value equals both neighbours' (linear interpolation is
            // unchanged), as scikit-learn does.
            for i in 0..n {
                let interior_flat =
                    i > 0 && i + 1 < n && fitted[i] == fitted[i - 1] && fitted[i] == fitted[i + 1];
                if !interior_flat {
                    kx.push(ux[i]);
                    ky.push(fitted[i]);
                }
            }
        }
        Ok(IsotonicMap { x: kx, y: ky })
    }

    /// A map that returns `value` everywhere.
    pub fn constant(value: f64) -> IsotonicMap {
        IsotonicMap {
            x: vec![0.0],
            y: vec![value],
        }
    }

    /// Map one value: linear between knots, constant beyond the ends; `NaN` stays `NaN`.
    pub fn predict(&self, v: f64) -> f64 {
        if v.is_nan() || self.x.is_empty() {
            return f64::NAN;
        }
        let n = self.x.len();
        if v <= self.x[0] {
            return self.y[0];
        }
        if v >= self.x[n - 1] {
            return self.y[n - 1];
        }
        // First knot strictly above v; 1 <= j <= n-1 here.
        let j = self.x.partition_point(|&k| k <= v);
        let (x0, x1, y0, y1) = (self.x[j - 1], self.x[j], self.y[j - 1], self.y[j]);
        y0 + (y1 - y0) * (v - x0) / (x1 - x0)
    }

    /// Map many values.
    pub fn predict_many(&self, v: &[f64]) -> Vec<f64> {
        v.iter().map(|&a| self.predict(a)).collect()
    }
}

/// Cross-fitted isotonic correction: the rows of fold `k` are mapped by the isotonic map fitted on
/// the `(pred, y)` pairs of all other folds, so no row's correction saw that row. Rows of a fold
/// with nothing to fit on keep their prediction.
pub fn cross_fit(
    folds: &[usize],
    pred: &[f64],
    y: &[f64],
    w: &[f64],
    settings: &IsotonicSettings,
) -> Result<Vec<f64>, CalibrateError> {
    if folds.len() != pred.len() || y.len() != pred.len() || w.len() != pred.len() {
        return Err(CalibrateError::Isotonic(format!(
            "cross-fit inputs differ in length: folds {}, pred {}, y {}, weights {}",
            folds.len(),
            pred.len(),
            y.len(),
            w.len()
        )));
    }
    let mut out = pred.to_vec();
    for f in 0..super::folds::n_folds(folds) {
        let train: Vec<usize> = (0..pred.len())
            .filter(|&i| folds[i] != f && w[i] > 0.0)
            .collect();
        if train.is_empty() {
            continue;
        }
        let px: Vec<f64> = train.iter().map(|&i| pred[i]).collect();
        let py: Vec<f64> = train.iter().map(|&i| y[i]).collect();
        let pw: Vec<f64> = train.iter().map(|&i| w[i]).collect();
        let map = IsotonicMap::fit(&px, &py, Some(&pw), settings)?;
        for i in (0..pred.len()).filter(|&i| folds[i] == f) {
            out[i] = map.predict(pred[i]);
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pav_pools_violators() {
        assert_eq!(
            pav(&[1.0, 3.0, 2.0, 4.0], &[1.0; 4]),
            vec![1.0, 2.5, 2.5, 4.0]
        );
        assert_eq!(pav(&[3.0, 2.0, 1.0], &[1.0, 1.0, 2.0]), vec![1.75; 3]);
    }

    #[test]
    fn decreasing_and_interpolation() {
        let m = IsotonicMap::fit(
            &[0.0, 1.0, 2.0],
            &[3.0, 1.0, 2.0],
            None,
            &IsotonicSettings {
                increasing: false,
                ..Default::default()
            },
        )
        .unwrap();
        assert_eq!(m.predict_many(&[0.0, 1.0, 2.0]), vec![3.0, 1.5, 1.5]);
        assert_eq!(m.predict(-5.0), 3.0);
        assert_eq!(m.predict(0.5), 2.25);
        assert!(m.predict(f64::NAN).is_nan());
    }

    #[test]
    fn centred_knots_sit_at_block_centres() {
        // Blocks {1} -> 1 and {2, 3} -> 2.5; the second block's centre is x = 2.5.
        let s = IsotonicSettings {
            centred: true,
            ..Default::default()
        };
        let m = IsotonicMap::fit(&[1.0, 2.0, 3.0], &[1.0, 3.0, 2.0], None, &s).unwrap();
        assert_eq!(m.x, vec![1.0, 2.5, 3.0]);
        assert_eq!(m.y, vec![1.0, 2.5, 2.5]);
        assert_eq!(m.predict(2.0), 2.0);
        // Without violations the centred map is the classic one.
        let a = IsotonicMap::fit(&[1.0, 2.0, 4.0], &[0.0, 1.0, 5.0], None, &s).unwrap();
        assert_eq!(a.x, vec![1.0, 2.0, 4.0]);
        assert_eq!(a.y, vec![0.0, 1.0, 5.0]);
    }

    #[test]
    fn bad_input_is_an_error() {
        let s = IsotonicSettings::default();
        assert!(IsotonicMap::fit(&[1.0], &[1.0, 2.0], None, &s).is_err());
        assert!(IsotonicMap::fit(&[1.0], &[f64::NAN], None, &s).is_err());
        assert!(IsotonicMap::fit(&[1.0], &[1.0], Some(&[-1.0]), &s).is_err());
        assert!(IsotonicMap::fit(&[1.0], &[1.0], Some(&[0.0]), &s).is_err());
    }
}
