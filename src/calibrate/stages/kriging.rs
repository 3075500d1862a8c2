//! Regression kriging of the held-out wells' errors: a spatial correction of the middle and a band
//! that follows the kriging variance.
//!
//! The forest predicts from the attributes only; what it gets wrong at one well it tends to get
//! wrong at the nodes around it. Regression kriging (Odeh, McBratney & Chittleborough 1995,
//! *Geoderma* 67:215; Hengl, Heuvelink & Rossiter 2007, *Computers & Geosciences* 33:1301) adds
//! the kriged residuals of the regression to its prediction. Here the residuals are the
//! held-out (out-of-fold) errors `e = y - middle` at the wells, so that they are the errors the
//! model makes where it has not seen the data, and:
//!
//! 1. **Pooling.** The errors of one step form one field (one survey); pairs are taken within a
//!    step only and the steps pooled bin by bin. The error variance grows with the change, so each
//!    step's errors are first divided by their root mean square (each well weighing one): the
//!    steps share the shape of the correlation (nugget share and range), not its scale.
//! 2. **Variogram.** The robust estimator of Cressie & Hawkins (1980) over twelve lags to half the
//!    largest distance, fitted by Cressie's (1985) weighted least squares
//!    ([`crate::spatial::variogram`]), best of exponential, spherical and Matern 3/2. When the fit
//!    falls back (too few pairs or lags) nothing is kriged: the fallback model of the library is
//!    meant for totals, where a long range is the cautious side, and it would be the bold side
//!    here.
//! 3. **Kriging.** Simple kriging with mean 0 and the nugget filtered out of the estimate
//!    ([`crate::calibrate::kriging`]), per step from the wells measured at that step; its variance
//!    ratio `r^2 = sigma^2 / sill` lies between the nugget share (next to wells) and 1 (far from
//!    them).
//! 4. **Cross-fitted decision, middle.** For each fold, the variogram is fitted on the other
//!    folds' errors and they are kriged to the fold's wells; the correction is kept only if it
//!    lowers the out-of-fold squared error (each well weighing one) by more than one standard
//!    error of the wells' paired differences (the one-standard-error rule of Breiman, Friedman,
//!    Olshen & Stone 1984, *Classification and Regression Trees*, section 3.4.3).
//! 5. **Band.** Normalised conformal scores (Papadopoulos, Vovk & Gammerman 2011; Lei et al.
//!    2018): a held-out row's needed scale of the band around the corrected middle
//!    ([`crate::calibrate::profile::needed_scale`]) divided by its `r`; the `level` conformal
//!    quantile `c` of those scores (wells weigh one) scales the band at a node by `c r(x)`. Where
//!    a node's `r` exceeds the largest `r` a held-out well had (farther from wells than
//!    cross-validation saw), the factor is at least 1: the band never narrows there. Near wells it
//!    narrows, never below `c` times the square root of the nugget share, nor below `c` times
//!    `r_floor`, the fitted variogram's value at the shortest lag with pairs (relative to the
//!    sill): the model is not trusted nearer than the closest wells. The scaled band is a
//!    candidate: kept only if its cross-fitted interval score (Gneiting & Raftery 2007) is no
//!    worse than the band's without it.
//!
//! Held-out wells stand 0.8 to 2.3 well spacings from the other folds' wells on our generated
//! fields, so cross-validation checks the rule at those distances only; nearer than that, the
//! narrowing rests on the fitted variogram.

use crate::calibrate::conformal::conformal_quantile;
use crate::calibrate::kriging::PointKriging;
use crate::calibrate::profile::needed_scale;
use crate::calibrate::units::well_unit_weights;
use crate::metrics::{interval_score_one, serde_nan};
use crate::spatial::model::VariogramModel;
use crate::spatial::variogram::{
    self, Estimator, ExperimentalVariogram, FitSettings, Lags, Sample, VariogramFit,
};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// One held-out error at a well and step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ErrorDatum {
    /// x (world coordinates).
    pub x: f64,
    /// y (world coordinates).
    pub y: f64,
    /// Step index.
    pub step: usize,
    /// Held-out error `truth - middle`.
    pub error: f64,
}

/// The band's kriging-variance scale: factor `c r` at a node with variance ratio `r^2`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandScale {
    /// Conformal quantile of the normalised scores.
    pub c: f64,
    /// Largest `r` of a held-out row; beyond it the factor is at least 1.
    pub r_max: f64,
    /// Smallest `r` used: the fitted variogram at the shortest lag with pairs, over the sill
    /// (square root). Nearer than the closest pairs of wells the variogram is not trusted, so
    /// the band narrows no further than the error between the closest wells allows.
    pub r_floor: f64,
}

impl BandScale {
    /// The band factor at variance ratio `r`: `c max(r, r_floor)`, at least 1 beyond `r_max`.
    pub fn factor(&self, r: f64) -> f64 {
        let f = self.c * r.max(self.r_floor);
        if r > self.r_max { f.max(1.0) } else { f }
    }
}

/// A target's fitted residual kriging, as saved in the model.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ResidualKriging {
    /// Variogram of the standardised errors.
    pub variogram: VariogramModel,
    /// Root mean square error per step (step index, value).
    pub step_rms: Vec<(usize, f64)>,
    /// The wells' held-out errors.
    pub data: Vec<ErrorDatum>,
    /// The kriged error is added to the middle.
    pub shift: bool,
    /// The band follows the kriging variance (`None`: the band keeps its width).
    pub band: Option<BandScale>,
}

/// What the stage decided and measured (`summary.json`, per target).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct KrigingDiagnostics {
    /// The target's maps use the kriging (false for a target with a "no change" atom, where it
    /// is measured only, or when neither part was kept).
    pub applied: bool,
    /// Plain-language decision.
    pub decision: String,
    /// The variogram of the standardised errors (all rows), when there were pairs.
    pub variogram: Option<VariogramSummary>,
    /// Root mean square error per step (step index, value).
    pub step_rms: Vec<(usize, f64)>,
    /// Folds whose variogram fell back (nothing kriged for their wells).
    pub folds_fallen_back: usize,
    /// Out-of-fold weighted MSE of the middle without kriging.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_plain: f64,
    /// The same with the cross-fitted kriged error added.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_kriged: f64,
    /// `100 (mse_plain - mse_kriged) / mse_plain`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_gain_pct: f64,
    /// One standard error of that gain (wells' paired differences), in %.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_gain_se_pct: f64,
    /// The middle is corrected.
    pub shift_kept: bool,
    /// Out-of-fold interval score of the band before this stage.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub is_plain: f64,
    /// ... of the band moved with the corrected middle.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub is_shifted: f64,
    /// ... of the band scaled by the kriging variance.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub is_scaled: f64,
    /// Out-of-fold coverage of the band before this stage.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage_plain: f64,
    /// ... of the band this stage leaves.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage_kriged: f64,
    /// The band follows the kriging variance.
    pub band_kept: bool,
    /// Final band scale (all rows), when computed.
    pub band: Option<BandScale>,
    /// Smallest `r` of a held-out row (its kriging standard deviation over the sill's root).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub r_min: f64,
    /// Largest `r` of a held-out row.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub r_max: f64,
    /// The smallest factor the band can reach at a node (`c` times `r_floor`).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub narrowest_factor: f64,
}

/// The experimental variogram's lags with pairs and the fitted model.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct VariogramSummary {
    /// Lags with pairs: mean distance, pairs, semivariance (Cressie-Hawkins).
    pub lags: Vec<(f64, usize, f64)>,
    /// The fitted model (the library's fallback model when `fallback`).
    pub model: VariogramModel,
    /// The fit fell back (nothing is kriged then).
    pub fallback: bool,
    /// The fit's note, if any.
    pub message: Option<String>,
}

impl VariogramSummary {
    fn of(ev: &ExperimentalVariogram, fit: &VariogramFit) -> Self {
        Self {
            lags: ev
                .lags
                .iter()
                .filter(|l| l.pairs > 0 && l.distance.is_finite() && l.gamma.is_finite())
                .map(|l| (l.distance, l.pairs, l.gamma))
                .collect(),
            model: fit.model,
            fallback: fit.fallback,
            message: fit.message.clone(),
        }
    }
}

/// What the stage reads: the held-out rows after the band (and the spread is fitted after it).
#[derive(Clone, Copy, Debug)]
pub struct KrigingInput<'a> {
    /// Truth.
    pub y: &'a [f64],
    /// Out-of-fold middle.
    pub mid: &'a [f64],
    /// Out-of-fold lower edge.
    pub lo: &'a [f64],
    /// Out-of-fold upper edge.
    pub hi: &'a [f64],
    /// Well location per row (world coordinates).
    pub xy: &'a [[f64; 2]],
    /// Step per row.
    pub step: &'a [usize],
    /// Well per row.
    pub group: &'a [usize],
    /// Fold per row.
    pub folds: &'a [usize],
    /// Nominal band level.
    pub level: f64,
    /// Physical bounds.
    pub bounds: (f64, f64),
    /// Let the decision correct the middle (when false its gain is measured only).
    pub correct_middle: bool,
}

/// The stage's result: the saved rule (when any part was kept), the diagnostics and the new
/// cross-fitted held-out rows `(mid, lo, hi)`.
pub struct Kriged {
    /// The rule for the nodes.
    pub model: Option<ResidualKriging>,
    /// Diagnostics.
    pub diagnostics: KrigingDiagnostics,
    /// Held-out middle and band after the stage (equal to the input when nothing was kept).
    pub rows: (Vec<f64>, Vec<f64>, Vec<f64>),
}

/// Per step, the root mean square of `e` over `rows` (each well weighing one).
fn step_rms(e: &[f64], step: &[usize], w: &[f64], rows: &[usize]) -> BTreeMap<usize, f64> {
    let mut acc: BTreeMap<usize, (f64, f64)> = BTreeMap::new();
    for &i in rows {
        let a = acc.entry(step[i]).or_default();
        a.0 += w[i] * e[i] * e[i];
        a.1 += w[i];
    }
    acc.into_iter()
        .filter(|(_, (s, n))| *n > 0.0 && *s > 0.0)
        .map(|(k, (s, n))| (k, (s / n).sqrt()))
        .collect()
}

/// The errors of `rows`, one datum per location and step (rows of one well at one step merged
/// into their mean), standardised by their step's RMS.
fn data(
    input: &KrigingInput,
    e: &[f64],
    rms: &BTreeMap<usize, f64>,
    rows: &[usize],
) -> Vec<ErrorDatum> {
    let mut sums: BTreeMap<(usize, u64, u64), (f64, usize)> = BTreeMap::new();
    for &i in rows {
        if !rms.contains_key(&input.step[i]) {
            continue;
        }
        let [x, y] = input.xy[i];
        let a = sums
            .entry((input.step[i], x.to_bits(), y.to_bits()))
            .or_default();
        a.0 += e[i];
        a.1 += 1;
    }
    sums.into_iter()
        .map(|((step, xb, yb), (s, n))| ErrorDatum {
            x: f64::from_bits(xb),
            y: f64::from_bits(yb),
            step,
            error: s / n as f64 / rms[&step],
        })
        .collect()
}

/// The pooled within-step variogram of standardised data and its fit (`None` when fewer than
/// two distinct locations).
fn variogram_of(
    points: &[ErrorDatum],
    diagonal: f64,
) -> Option<(ExperimentalVariogram, VariogramFit)> {
    let samples: Vec<Sample> = points
        .iter()
        .map(|d| Sample {
            x: d.x,
            y: d.y,
            value: d.error,
        })
        .collect();
    let groups: Vec<usize> = points.iter().map(|d| d.step).collect();
    let lags = Lags::half_extent(&samples)?;
    let ev =
        variogram::experimental_within(&samples, Some(&groups), lags, Estimator::CressieHawkins)
            .ok()?;
    let fit = variogram::fit(&ev, &FitSettings::default(), diagonal).ok()?;
    Some((ev, fit))
}

/// The smallest `r` the fit supports: `sqrt(gamma(h1) / sill)` at the mean distance `h1` of the
/// shortest lag with pairs (never below the root of the nugget share).
fn r_floor(ev: &ExperimentalVariogram, model: &VariogramModel) -> f64 {
    let h1 = ev
        .lags
        .iter()
        .find(|l| l.pairs > 0 && l.distance.is_finite() && l.distance > 0.0)
        .map_or(0.0, |l| l.distance);
    let g = if h1 > 0.0 {
        model.gamma(h1)
    } else {
        model.nugget
    };
    (g.max(model.nugget) / model.sill).sqrt().min(1.0)
}

/// Per step, the kriging system of the data of that step.
pub fn systems(model: &VariogramModel, data: &[ErrorDatum]) -> BTreeMap<usize, PointKriging> {
    let mut by_step: BTreeMap<usize, (Vec<[f64; 2]>, Vec<f64>)> = BTreeMap::new();
    for d in data {
        let e = by_step.entry(d.step).or_default();
        e.0.push([d.x, d.y]);
        e.1.push(d.error);
    }
    by_step
        .into_iter()
        .filter_map(|(s, (p, z))| PointKriging::new(model, &p, &z).map(|k| (s, k)))
        .collect()
}

impl ResidualKriging {
    /// The kriging systems of every step (build once per prediction call).
    pub fn systems(&self) -> BTreeMap<usize, PointKriging> {
        systems(&self.variogram, &self.data)
    }

    /// `(shift of the middle, band factor)` at location `p` of step `step`, from `systems`.
    pub fn at(
        &self,
        systems: &BTreeMap<usize, PointKriging>,
        p: [f64; 2],
        step: usize,
    ) -> (f64, f64) {
        let (est, r) = match (
            systems.get(&step),
            self.step_rms.iter().find(|s| s.0 == step),
        ) {
            (Some(k), Some(&(_, rms))) if p[0].is_finite() && p[1].is_finite() => {
                let (e, v) = k.at(p);
                (e * rms, (v / self.variogram.sill).sqrt())
            }
            _ => (0.0, 1.0),
        };
        let shift = if self.shift { est } else { 0.0 };
        let factor = self.band.map_or(1.0, |b| b.factor(r));
        (shift, factor)
    }
}

/// Weighted mean.
fn wmean(v: impl Iterator<Item = f64>, w: &[f64]) -> f64 {
    let (mut s, mut n) = (0.0, 0.0);
    for (x, &wi) in v.zip(w) {
        s += wi * x;
        n += wi;
    }
    s / n
}

/// The band of row `i` around `m` scaled by `f`, clipped to `bounds`.
fn scaled(m: f64, lo: f64, hi: f64, f: f64, bounds: (f64, f64)) -> (f64, f64) {
    (
        (m - f * (m - lo)).clamp(bounds.0, bounds.1),
        (m + f * (hi - m)).clamp(bounds.0, bounds.1),
    )
}

/// Cross-fitted kriging of every held-out row: `(kriged error, r)` per row, and how many folds
/// fell back.
fn cross_fit(
    input: &KrigingInput,
    e: &[f64],
    w: &[f64],
    diagonal: f64,
) -> (Vec<f64>, Vec<f64>, usize) {
    let n = e.len();
    let mut est = vec![0.0; n];
    let mut r = vec![1.0; n];
    let mut fallen = 0;
    let mut folds: Vec<usize> = input.folds.to_vec();
    folds.sort_unstable();
    folds.dedup();
    for &k in &folds {
        let train: Vec<usize> = (0..n).filter(|&i| input.folds[i] != k).collect();
        let rms = step_rms(e, input.step, w, &train);
        let pts = data(input, e, &rms, &train);
        let fit = variogram_of(&pts, diagonal);
        let Some((ev, fit)) = fit.filter(|(_, f)| !f.fallback) else {
            fallen += 1;
            continue;
        };
        let floor = r_floor(&ev, &fit.model);
        let sys = systems(&fit.model, &pts);
        for i in (0..n).filter(|&i| input.folds[i] == k) {
            if let (Some(s), Some(&q)) = (sys.get(&input.step[i]), rms.get(&input.step[i])) {
                let (v, var) = s.at(input.xy[i]);
                est[i] = v * q;
                r[i] = (var / fit.model.sill).sqrt().max(floor);
            }
        }
    }
    (est, r, fallen)
}

/// Length of the diagonal of the rows' bounding box (the variogram fit's fallback scale).
fn diagonal(xy: &[[f64; 2]]) -> f64 {
    let (mut x0, mut x1, mut y0, mut y1) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for p in xy {
        x0 = x0.min(p[0]);
        x1 = x1.max(p[0]);
        y0 = y0.min(p[1]);
        y1 = y1.max(p[1]);
    }
    (x1 - x0).hypot(y1 - y0).max(1.0)
}

/// The conformal band scale fitted on `rows`: `c` and the largest `r` (`None`: too few wells).
fn band_scale(
    score: &[f64],
    r: &[f64],
    w: &[f64],
    rows: &[usize],
    level: f64,
    r_floor: f64,
) -> Option<BandScale> {
    let s: Vec<f64> = rows.iter().map(|&i| score[i]).collect();
    let ww: Vec<f64> = rows.iter().map(|&i| w[i]).collect();
    let c = conformal_quantile(&s, &ww, 1.0 - level)?;
    let r_max = rows.iter().map(|&i| r[i]).fold(0.0, f64::max);
    Some(BandScale { c, r_max, r_floor })
}

/// Out-of-fold weighted MSE without and with the kriged error `est` subtracted from the errors
/// `e`, the gain in % and one standard error of it (wells' paired differences).
fn mse_gain(e: &[f64], est: &[f64], w: &[f64], group: &[usize]) -> (f64, f64, f64, f64) {
    let n = e.len();
    let mse_plain = wmean(e.iter().map(|v| v * v), w);
    let mse_kriged = wmean((0..n).map(|i| (e[i] - est[i]).powi(2)), w);
    let mut per_well: BTreeMap<usize, f64> = BTreeMap::new();
    for i in 0..n {
        *per_well.entry(group[i]).or_default() += w[i] * (e[i] * e[i] - (e[i] - est[i]).powi(2));
    }
    let nw = per_well.len() as f64;
    let d_mean = per_well.values().sum::<f64>() / nw;
    let d_var = per_well.values().map(|d| (d - d_mean).powi(2)).sum::<f64>() / (nw - 1.0).max(1.0);
    let se = (d_var / nw).sqrt();
    (
        mse_plain,
        mse_kriged,
        100.0 * (mse_plain - mse_kriged) / mse_plain,
        100.0 * se / mse_plain,
    )
}

/// The band scaled by `c r` for every held-out row, `c` from the other folds' normalised
/// `score`s; `rows` holds the middle and the unscaled band. `None` when a fold has too few wells
/// for the conformal quantile.
fn cross_fitted_band(
    input: &KrigingInput,
    score: &[f64],
    r: &[f64],
    w: &[f64],
    rows: (&[f64], &[f64], &[f64]),
) -> Option<(Vec<f64>, Vec<f64>)> {
    let n = score.len();
    let (mid, lo_b, hi_b) = rows;
    let (mut lo_s, mut hi_s) = (lo_b.to_vec(), hi_b.to_vec());
    let mut folds: Vec<usize> = input.folds.to_vec();
    folds.sort_unstable();
    folds.dedup();
    for &k in &folds {
        let train: Vec<usize> = (0..n).filter(|&i| input.folds[i] != k).collect();
        // Each held-out row's r already sits at or above its fold's floor.
        let b = band_scale(score, r, w, &train, input.level, 0.0)?;
        for i in (0..n).filter(|&i| input.folds[i] == k) {
            let (l, h) = scaled(mid[i], lo_b[i], hi_b[i], b.factor(r[i]), input.bounds);
            lo_s[i] = l;
            hi_s[i] = h;
        }
    }
    Some((lo_s, hi_s))
}

/// Fit the stage (see the module docs).
pub fn fit(input: &KrigingInput) -> Kriged {
    let n = input.y.len();
    let w = well_unit_weights(input.group);
    let e: Vec<f64> = (0..n).map(|i| input.y[i] - input.mid[i]).collect();
    let diag = diagonal(input.xy);
    let all: Vec<usize> = (0..n).collect();
    let rms_all = step_rms(&e, input.step, &w, &all);
    let pts_all = data(input, &e, &rms_all, &all);
    let full = variogram_of(&pts_all, diag);
    let (est, r, fallen) = cross_fit(input, &e, &w, diag);
    let (mse_plain, mse_kriged, gain, gain_se) = mse_gain(&e, &est, &w, input.group);
    let full_ok = full.as_ref().is_some_and(|(_, f)| !f.fallback);
    let shift_kept = input.correct_middle && full_ok && fallen == 0 && gain > 0.0 && gain > gain_se;
    let sh = if shift_kept { 1.0 } else { 0.0 };
    let mid: Vec<f64> = (0..n)
        .map(|i| (input.mid[i] + sh * est[i]).clamp(input.bounds.0, input.bounds.1))
        .collect();
    let lo_b: Vec<f64> = (0..n)
        .map(|i| input.lo[i] + (mid[i] - input.mid[i]))
        .collect();
    let hi_b: Vec<f64> = (0..n)
        .map(|i| input.hi[i] + (mid[i] - input.mid[i]))
        .collect();
    let alpha = 1.0 - input.level;
    let is = |lo: &[f64], hi: &[f64]| {
        wmean(
            (0..n).map(|i| interval_score_one(input.y[i], lo[i], hi[i], alpha)),
            &w,
        )
    };
    let cov = |lo: &[f64], hi: &[f64]| {
        wmean(
            (0..n).map(|i| f64::from(u8::from(input.y[i] >= lo[i] && input.y[i] <= hi[i]))),
            &w,
        )
    };
    let is_plain = is(input.lo, input.hi);
    let is_shifted = is(&lo_b, &hi_b);
    // Normalised scores and their cross-fitted band.
    let score: Vec<f64> = (0..n)
        .map(|i| needed_scale(input.y[i], mid[i], lo_b[i], hi_b[i]) / r[i].max(1e-12))
        .collect();
    let scaled_band = (full_ok && fallen == 0)
        .then(|| cross_fitted_band(input, &score, &r, &w, (&mid, &lo_b, &hi_b)))
        .flatten();
    let scaled_ok = scaled_band.is_some();
    let (lo_s, hi_s) = scaled_band.unwrap_or_else(|| (lo_b.clone(), hi_b.clone()));
    let is_scaled = if scaled_ok {
        is(&lo_s, &hi_s)
    } else {
        f64::NAN
    };
    let floor_all = full.as_ref().map_or(1.0, |(ev, f)| r_floor(ev, &f.model));
    let band_final = if scaled_ok {
        band_scale(&score, &r, &w, &all, input.level, floor_all)
    } else {
        None
    };
    let band_kept = band_final.is_some() && is_scaled <= is_shifted;
    let (lo_out, hi_out) = if band_kept {
        (lo_s, hi_s)
    } else {
        (lo_b, hi_b)
    };
    let r_range = r
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
    let decision = match (&full, shift_kept, band_kept) {
        (None, ..) => "too few distinct well locations for a variogram: nothing kriged".to_string(),
        (Some((_, f)), ..) if f.fallback => format!(
            "the variogram of the held-out errors could not be fitted ({}): nothing kriged",
            f.message.as_deref().unwrap_or("fallback")
        ),
        _ if fallen > 0 => format!(
            "the variogram fell back in {fallen} fold(s), so the gain cannot be measured: nothing kriged"
        ),
        (_, s, b) => format!(
            "kriged held-out errors change the out-of-fold MSE by {gain:.1} % (one standard error \
             {gain_se:.1} %): middle {}; band scaled by the kriging variance: interval score {:.4} \
             against {:.4}: {}",
            if s { "corrected" } else { "not corrected" },
            is_scaled,
            is_shifted,
            if b { "kept" } else { "not kept" }
        ),
    };
    let model = full
        .as_ref()
        .filter(|_| shift_kept || band_kept)
        .map(|(_, f)| ResidualKriging {
            variogram: f.model,
            step_rms: rms_all.iter().map(|(&k, &v)| (k, v)).collect(),
            data: pts_all,
            shift: shift_kept,
            band: if band_kept { band_final } else { None },
        });
    let diagnostics = KrigingDiagnostics {
        applied: model.is_some(),
        decision,
        variogram: full.as_ref().map(|(ev, f)| VariogramSummary::of(ev, f)),
        step_rms: rms_all.iter().map(|(&k, &v)| (k, v)).collect(),
        folds_fallen_back: fallen,
        mse_plain,
        mse_kriged,
        mse_gain_pct: gain,
        mse_gain_se_pct: gain_se,
        shift_kept,
        is_plain,
        is_shifted,
        is_scaled,
        coverage_plain: cov(input.lo, input.hi),
        coverage_kriged: cov(&lo_out, &hi_out),
        band_kept,
        band: band_final,
        r_min: r_range.0,
        r_max: r_range.1,
        narrowest_factor: band_final.map_or(f64::NAN, |b| b.factor(0.0)),
    };
    let rows = if model.is_some() {
        (mid, lo_out, hi_out)
    } else {
        (input.mid.to_vec(), input.lo.to_vec(), input.hi.to_vec())
    };
    Kriged {
        model,
        diagnostics,
        rows,
    }
}
