//! Applying a calibrated target at new rows (grid nodes): one pass of the ensemble, then the
//! correction, the band and the probability maps per row. The maps are those of the calibration
//! ([`super::target`]): the isotonic correction, the conformal band (Mondrian or forest-localised
//! quantiles, Lu & Hardin 2021; Tibshirani et al. 2019) and the conformal predictive system
//! (Vovk et al. 2019) or the recalibrated forest CDF (Kuleshov et al. 2018).
//!
//! Every row is predicted on its own, with one exception that the caller sets: a hurdle
//! target's probability of a change is adjusted to the share of change of the whole mapped
//! population ([`CalibratedTarget::set_prior`], [`super::prior`]), which is estimated once from
//! all the nodes and then applied to each row alike.
//!
//! With the nodes' context the spread rule widens the band, and the same stretch about the middle
//! is applied to the distribution the probabilities come from, so the band and the probability
//! maps stay one distribution per node; a last step clips any probability the band contradicts.

use super::conformal::{BandBase, BandMethod};
use super::error::CalibrateError;
use super::exceedance::{ExceedMethod, band_consistent, bounded_cdf, crossing_probability};
use super::hurdle;
use super::prior::PriorShift;
use super::stages::hurdle::{self as stage, CpsAt, HurdleModel};
use super::target::{CalibratedTarget, TargetPrediction};
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

/// What one pass of the ensemble gives for every row.
struct EnsemblePass {
    /// Forest mean (when the forest has weight in the point prediction).
    forest_mean: Option<Vec<f64>>,
    /// Forest quantiles at `(1-level)/2`, 0.5, `(1+level)/2` and CDF at each threshold (when the
    /// band or a probability needs them).
    dist: Option<(Array2<f64>, Array2<f64>)>,
    /// Localised side quantiles `(Q_lo, Q_hi)` of the band (when the band is localised).
    local_q: Option<Vec<(Option<f64>, Option<f64>)>>,
    /// Booster prediction (when the booster has weight in the point prediction).
    boost: Option<Vec<f64>>,
}

/// The conditional part of a hurdle target at every row (its middle; `None` for a continuous
/// target, whose middle is the band's) and every row's residual scale.
#[derive(Clone, Copy)]
struct Conditional<'a> {
    mid: Option<&'a [f64]>,
    scale: &'a [f64],
}

/// The continuous model's own prediction at every row, without the residual kriging's shift and
/// band factor: what [`CalibratedTarget::conditional_at`] gives, kept from the pass that made the
/// maps so that the node distributions of the field totals need not walk the ensemble again.
#[derive(Clone, Debug, PartialEq)]
pub struct ConditionalPart {
    /// The conditional middle per row.
    pub mid: Vec<f64>,
    /// The residual scale per row; `None` where it is 1 at every row (every band but the
    /// normalised one).
    pub scale: Option<Vec<f64>>,
}

/// Where the predicted rows lie relative to the training wells.
#[derive(Clone, Copy, Debug)]
pub struct NodeContext<'a> {
    /// Dissimilarity index of each row to the training rows (Meyer & Pebesma 2021).
    pub dissimilarity: &'a [f64],
    /// Distance of each row to the nearest training well, in map units.
    pub distance: &'a [f64],
    /// Location of each row (world coordinates, as the wells'); with `step`, the target's
    /// residual kriging applies.
    pub xy: Option<&'a [(f64, f64)]>,
    /// Step index of each row.
    pub step: Option<&'a [usize]>,
    /// A hurdle target's probability of a change at each row, calibrated on the wells and before
    /// any [`PriorShift`], when already computed on these rows
    /// ([`CalibratedTarget::change_probability`]): the change forest is then not walked again.
    /// Ignored unless it holds one value per row.
    pub change: Option<&'a [f64]>,
}

impl<'a> NodeContext<'a> {
    /// A context with dissimilarity and distance only (no kriging).
    pub fn new(dissimilarity: &'a [f64], distance: &'a [f64]) -> Self {
        Self {
            dissimilarity,
            distance,
            xy: None,
            step: None,
            change: None,
        }
    }
}

impl CalibratedTarget {
    /// Predict band, middle and threshold probabilities for every row of `x` (same feature
    /// columns as the training rows), with one band rule everywhere. Errors when the column count
    /// differs.
    pub fn predict(&self, x: ArrayView2<f64>) -> Result<TargetPrediction, CalibrateError> {
        self.predict_at(x, None)
    }

    /// As [`Self::predict`]; with a `context`, the band also widens with each row's
    /// dissimilarity and beyond the ground cross-validation spanned (the target's spread rule),
    /// and, when the context has locations and steps, the middle takes the kriged held-out error
    /// and the band the kriging-variance scale (the target's residual kriging, before the
    /// spread).
    pub fn predict_at(
        &self,
        x: ArrayView2<f64>,
        context: Option<NodeContext>,
    ) -> Result<TargetPrediction, CalibrateError> {
        Ok(self.predict_keeping(x, context, false)?.0)
    }

    /// Whether the node distributions of this target need the conditional part of the model
    /// rather than the map's middle with unit scale: a hurdle target, or a normalised band.
    pub fn needs_conditional(&self) -> bool {
        self.hurdle.is_some() || self.band.method == BandMethod::Normalized
    }

    /// As [`Self::predict_at`]; with `keep` and a target that [needs](Self::needs_conditional)
    /// it, also the conditional part [`Self::conditional_at`] would give, from the same pass of
    /// the ensemble (the same numbers, bit for bit).
    pub fn predict_keeping(
        &self,
        x: ArrayView2<f64>,
        context: Option<NodeContext>,
        keep: bool,
    ) -> Result<(TargetPrediction, Option<ConditionalPart>), CalibrateError> {
        let adj = context.and_then(|c| self.kriging_at(x.nrows(), c));
        let keep = keep && self.needs_conditional();
        let (parts, scale, conditional) = self.continuous_parts(x, adj.as_deref(), keep)?;
        let (mut out, cond_mid) = match &self.hurdle {
            Some(h) => {
                let known = context.and_then(|c| c.change);
                let out = self.mixture(h, x, &parts, &scale, known);
                (out, Some(parts.mid))
            }
            None => (parts, None),
        };
        if let (Some(sp), Some(c)) = (&self.spread, context) {
            let mut factors = vec![(1.0, 1.0); out.mid.len()];
            for (i, f) in factors.iter_mut().enumerate() {
                let di = c.dissimilarity.get(i).copied().unwrap_or(f64::NAN);
                let dist = c.distance.get(i).copied().unwrap_or(f64::NAN);
                *f = sp.factors(out.mid[i], out.lo[i], out.hi[i], di, dist);
                let (lo, hi) = sp.apply(out.mid[i], out.lo[i], out.hi[i], di, dist, self.bounds);
                out.lo[i] = lo;
                out.hi[i] = hi;
            }
            let cond = Conditional {
                mid: cond_mid.as_deref(),
                scale: &scale,
            };
            self.widen_exceedance(x, &mut out, &factors, cond);
        }
        self.make_consistent(&mut out);
        Ok((out, conditional))
    }

    /// The spread rule applied to the whole predictive distribution, not only its band: each
    /// side is stretched about the middle by its factor `s` ([`super::stages::spread::Spread::factors`]), so that
    /// `F(t) = F0(mid + (t - mid) / s)` with `F0` the distribution the probability of threshold
    /// `t` was computed from (the conformal predictive system, the recalibrated forest CDF, or
    /// the recalibrated hurdle mixture). Rows whose factor on the threshold's side is 1 keep
    /// their probability bit for bit.
    fn widen_exceedance(
        &self,
        x: ArrayView2<f64>,
        out: &mut TargetPrediction,
        factors: &[(f64, f64)],
        cond: Conditional,
    ) {
        let n = out.mid.len();
        for (k, th) in self.thresholds.iter().enumerate() {
            let t0: Vec<f64> = (0..n)
                .map(|i| {
                    let mid = out.mid[i];
                    let s = if th.value < mid {
                        factors[i].0
                    } else {
                        factors[i].1
                    };
                    if mid.is_nan() || s == 1.0 {
                        f64::NAN
                    } else {
                        mid + (th.value - mid) / s
                    }
                })
                .collect();
            if t0.iter().all(|v| v.is_nan()) {
                continue;
            }
            let forest_cdf = match (&self.hurdle, self.exceed_methods[k]) {
                (None, ExceedMethod::ForestRecalibrated) => Some(self.forest.cdf_at(x, 0, &t0)),
                _ => None,
            };
            let old = &out.exceed[k];
            let p_change = out.p_change.as_deref();
            let new: Vec<f64> = (0..n)
                .into_par_iter()
                .map(|i| {
                    let t = t0[i];
                    if t.is_nan() {
                        return old[i];
                    }
                    let below = match (&self.hurdle, &forest_cdf, cond.mid, p_change) {
                        (Some(h), _, Some(m), Some(p)) => {
                            let g = CpsAt {
                                cps: &self.cps,
                                mid: m[i],
                                scale: cond.scale[i],
                                bounds: self.bounds,
                            };
                            let e = stage::crossing(p[i], &g, t, th.above, Some(&h.recalibration));
                            crossing_probability(e, th.above)
                        }
                        (Some(_), ..) => return old[i],
                        (None, Some(c), ..) => {
                            bounded_cdf(self.recalibration.apply(c[i]), t, self.bounds)
                        }
                        (None, None, ..) => {
                            self.cps
                                .prob_below(out.mid[i], cond.scale[i], t, self.bounds)
                        }
                    };
                    crossing_probability(bounded_cdf(below, th.value, self.bounds), th.above)
                })
                .collect();
            out.exceed[k] = new;
        }
    }

    /// Crossing probabilities made consistent with the band ([`band_consistent`]): where the
    /// two models disagree on the order of a threshold and a band edge, the probability moves to
    /// the nearest value one distribution can have, so that a node's band and its probabilities
    /// never contradict each other (the band wins: it is written as calibrated quantiles). A band
    /// at the physical bounds for want of wells states no quantile and is left out.
    fn make_consistent(&self, out: &mut TargetPrediction) {
        if self.band.too_few_wells() {
            return;
        }
        let a = (1.0 - self.level) / 2.0;
        for (k, th) in self.thresholds.iter().enumerate() {
            let strict = !th.above;
            for i in 0..out.mid.len() {
                let band = [(a, out.lo[i]), (0.5, out.mid[i]), (1.0 - a, out.hi[i])]
                    .map(|(u, y)| (u, if y.is_finite() { y } else { f64::NAN }));
                let e = out.exceed[k][i];
                let below = crossing_probability(e, th.above);
                let c = band_consistent(below, th.value, strict, &band);
                if c != below {
                    out.exceed[k][i] = crossing_probability(c, th.above);
                }
            }
        }
    }

    /// `(shift of the middle, band factor)` of every row from the residual kriging, when the
    /// target has one (continuous targets only) and `c` gives locations and steps.
    fn kriging_at(&self, n: usize, c: NodeContext) -> Option<Vec<(f64, f64)>> {
        let (k, xy, step) = (self.kriging.as_ref()?, c.xy?, c.step?);
        if self.hurdle.is_some() || xy.len() != n || step.len() != n {
            return None;
        }
        let systems = k.systems();
        Some(
            (0..n)
                .into_par_iter()
                .map(|i| k.at(&systems, [xy[i].0, xy[i].1], step[i]))
                .collect(),
        )
    }

    /// Errors unless `x` has the training rows' feature columns.
    fn check_columns(&self, x: ArrayView2<f64>) -> Result<(), CalibrateError> {
        if x.ncols() == self.n_features {
            return Ok(());
        }
        Err(CalibrateError::Length {
            target: self.name.clone(),
            what: "feature columns",
            got: x.ncols(),
            expected: self.n_features,
        })
    }

    /// The uncalibrated quantile forest on all the target's rows: the forest itself for a
    /// continuous target, the hurdle's reference forest for a target with an atom at zero.
    pub fn reference_forest(&self) -> &crate::ensemble::Forest {
        self.hurdle.as_ref().map_or(&self.forest, |h| &h.reference)
    }

    /// A hurdle target's probability of a change at every row of `x` as calibrated on the wells
    /// (under the wells' share of change, before any [`PriorShift`]), and that share; `None` for
    /// a continuous target or a model without the share. Errors when the column count differs.
    pub fn change_probability(
        &self,
        x: ArrayView2<f64>,
    ) -> Result<Option<(Vec<f64>, f64)>, CalibrateError> {
        let Some((h, training)) = self
            .hurdle
            .as_ref()
            .and_then(|h| h.training_prior.map(|t| (h, t)))
        else {
            return Ok(None);
        };
        self.check_columns(x)?;
        let raw = h.forest.predict(x);
        let p = raw.column(0).iter().map(|&r| h.map.predict(r)).collect();
        Ok(Some((p, training)))
    }

    /// Adjusts the probability of a change of a hurdle target to the nodes' share of change
    /// from now on (every later prediction, and the diagnostics); `None` restores the wells'
    /// share. Does nothing for a continuous target.
    pub fn set_prior(&mut self, shift: Option<PriorShift>) {
        if let Some(h) = &mut self.hurdle {
            h.prior = shift.clone();
            if let Some(d) = &mut self.diagnostics.hurdle {
                d.prior = shift;
            }
        }
    }

    /// The conditional part's middle and residual scale at every row of `x` (the continuous
    /// model's own prediction).
    pub fn conditional_at(
        &self,
        x: ArrayView2<f64>,
    ) -> Result<(Vec<f64>, Vec<f64>), CalibrateError> {
        let (p, scale, _) = self.continuous_parts(x, None, false)?;
        Ok((p.mid, scale))
    }

    /// The hurdle mixture at every row from the conditional `parts` and their `scale`.
    fn mixture(
        &self,
        h: &HurdleModel,
        x: ArrayView2<f64>,
        parts: &TargetPrediction,
        scale: &[f64],
        known: Option<&[f64]>,
    ) -> TargetPrediction {
        let n = parts.mid.len();
        // The calibrated probability before the nodes' share, as `change_probability` gives it.
        let walked: Vec<f64>;
        let calibrated: &[f64] = match known.filter(|k| k.len() == n) {
            Some(k) => k,
            None => {
                let raw = h.forest.predict(x);
                walked = raw.column(0).iter().map(|&r| h.map.predict(r)).collect();
                &walked
            }
        };
        let p: Vec<f64> = calibrated
            .iter()
            .map(|&p| h.prior.as_ref().map_or(p, |s| s.apply(p)))
            .collect();
        let (u_lo, u_mid, u_hi) = h.levels;
        let nt = self.thresholds.len();
        let rows: Vec<(f64, f64, f64, Vec<f64>)> = (0..n)
            .into_par_iter()
            .map(|i| {
                if parts.mid[i].is_nan() {
                    return (f64::NAN, f64::NAN, f64::NAN, vec![f64::NAN; nt]);
                }
                let g = CpsAt {
                    cps: &self.cps,
                    mid: parts.mid[i],
                    scale: scale[i],
                    bounds: self.bounds,
                };
                let q = |u: f64| hurdle::quantile(p[i], &g, u);
                let e = self
                    .thresholds
                    .iter()
                    .map(|th| stage::crossing(p[i], &g, th.value, th.above, Some(&h.recalibration)))
                    .collect();
                (q(u_lo), q(u_mid), q(u_hi), e)
            })
            .collect();
        TargetPrediction {
            lo: rows.iter().map(|r| r.0).collect(),
            mid: rows.iter().map(|r| r.1).collect(),
            hi: rows.iter().map(|r| r.2).collect(),
            exceed: (0..nt)
                .map(|t| rows.iter().map(|r| r.3[t]).collect())
                .collect(),
            p_change: Some(p),
        }
    }

    /// The continuous model's prediction at every row, and each row's residual scale; `adj`
    /// (per row, the kriged shift of the middle and the band factor) moves the middle before the
    /// band and the predictive system are placed around it, and scales both. With `keep`, also
    /// the middle and scale without `adj` (as `adj = None` gives them).
    fn continuous_parts(
        &self,
        x: ArrayView2<f64>,
        adj: Option<&[(f64, f64)]>,
        keep: bool,
    ) -> Result<(TargetPrediction, Vec<f64>, Option<ConditionalPart>), CalibrateError> {
        self.check_columns(x)?;
        let n = x.nrows();
        let pass = self.ensemble_pass(x);
        let adj_of = |i: usize| adj.map_or((0.0, 1.0), |a| a[i]);
        // The unshifted middle and scale, computed as without `adj` (its shift 0 and factor 1).
        let conditional = keep.then(|| ConditionalPart {
            mid: (0..n)
                .into_par_iter()
                .map(|i| (self.middle(&pass, i) + 0.0).clamp(self.bounds.0, self.bounds.1))
                .collect(),
            scale: (self.band.method == BandMethod::Normalized)
                .then(|| (0..n).map(|i| self.scale(&pass, i) * 1.0).collect()),
        });
        let mids: Vec<f64> = (0..n)
            .into_par_iter()
            .map(|i| {
                let m = self.middle(&pass, i) + adj_of(i).0;
                m.clamp(self.bounds.0, self.bounds.1)
            })
            .collect();
        let edges: Vec<(f64, f64)> = (0..n)
            .into_par_iter()
            .map(|i| {
                let (lo, hi) = self.edges(&pass, i, mids[i]);
                let (m, f) = (mids[i], adj_of(i).1);
                if f == 1.0 {
                    return (lo, hi);
                }
                (
                    (m - f * (m - lo)).clamp(self.bounds.0, self.bounds.1),
                    (m + f * (hi - m)).clamp(self.bounds.0, self.bounds.1),
                )
            })
            .collect();
        let exceed: Vec<Vec<f64>> = (0..self.thresholds.len())
            .map(|t| {
                (0..n)
                    .into_par_iter()
                    .map(|i| self.probability(&pass, t, i, mids[i], adj_of(i).1))
                    .collect()
            })
            .collect();
        let scale: Vec<f64> = (0..n).map(|i| self.scale(&pass, i) * adj_of(i).1).collect();
        let out = TargetPrediction {
            lo: edges.iter().map(|e| e.0).collect(),
            mid: mids,
            hi: edges.iter().map(|e| e.1).collect(),
            exceed,
            p_change: None,
        };
        Ok((out, scale, conditional))
    }

    /// One walk of the forest gives the mean and the distribution together, and for a
    /// localised band the proximity weights' side quantiles from the same leaves; the booster
    /// predicts when it has weight.
    fn ensemble_pass(&self, x: ArrayView2<f64>) -> EnsemblePass {
        let a = 1.0 - self.level;
        let w = self.forest_weight;
        let need_dist = self.band.method != BandMethod::CvResidual
            || self
                .exceed_methods
                .contains(&ExceedMethod::ForestRecalibrated);
        let t_values: Vec<f64> = self.thresholds.iter().map(|t| t.value).collect();
        let levels = [a / 2.0, 0.5, 1.0 - a / 2.0];
        let mut local_q: Option<Vec<(Option<f64>, Option<f64>)>> = None;
        let (forest_mean, dist) = match (w > 0.0, need_dist) {
            _ if self.band.local.is_some() => {
                let local = self.band.local.as_ref().expect("checked");
                let alpha_side = a / 2.0;
                let (m, q, c, lq) =
                    self.forest
                        .predict_with_proximity(x, 0, &levels, &t_values, |prox| {
                            local.quantiles(prox, alpha_side)
                        });
                local_q = Some(lq);
                (Some(m), Some((q, c)))
            }
            (true, true) => {
                let (m, q, c) = self
                    .forest
                    .predict_with_distribution(x, 0, &levels, &t_values);
                (Some(m), Some((q, c)))
            }
            (true, false) => (Some(self.forest.predict(x).column(0).to_vec()), None),
            (false, true) => (
                None,
                Some(self.forest.predict_distribution(x, 0, &levels, &t_values)),
            ),
            (false, false) => (None, None),
        };
        let boost = match (&self.booster, w < 1.0) {
            (Some(b), true) => Some(b.predict(x)),
            _ => None,
        };
        EnsemblePass {
            forest_mean,
            dist,
            local_q,
            boost,
        }
    }

    /// Corrected point prediction of row `i`: the blend, clipped, corrected, clipped.
    fn middle(&self, pass: &EnsemblePass, i: usize) -> f64 {
        let w = self.forest_weight;
        let raw = match (&pass.forest_mean, &pass.boost) {
            (Some(f), Some(b)) => w * f[i] + (1.0 - w) * b[i],
            (Some(f), None) => f[i],
            (None, Some(b)) => b[i],
            (None, None) => f64::NAN,
        };
        let raw = raw.clamp(self.bounds.0, self.bounds.1);
        let mid = self.correction.as_ref().map_or(raw, |m| {
            raw + self.correction_strength * (m.predict(raw) - raw)
        });
        mid.clamp(self.bounds.0, self.bounds.1)
    }

    /// Scale of row `i`'s residuals: the floored forest spread for normalised scores, else 1.
    fn scale(&self, pass: &EnsemblePass, i: usize) -> f64 {
        match (&self.band.method, &pass.dist) {
            (BandMethod::Normalized, Some((q, _))) => {
                (0.5 * (q[[i, 2]] - q[[i, 0]])).max(self.scale_floor)
            }
            _ => 1.0,
        }
    }

    /// Band edges `(lo, hi)` of row `i` around its middle `mid` (`NaN` where `mid` is).
    fn edges(&self, pass: &EnsemblePass, i: usize, mid: f64) -> (f64, f64) {
        if mid.is_nan() {
            return (f64::NAN, f64::NAN);
        }
        let base = match (&self.band.method, &pass.dist) {
            (BandMethod::Cqr, Some((q, _))) => {
                let shift = mid - q[[i, 1]];
                BandBase {
                    mid,
                    lo: q[[i, 0]] + shift,
                    hi: q[[i, 2]] + shift,
                    scale: 1.0,
                }
            }
            _ => BandBase {
                scale: self.scale(pass, i),
                ..BandBase::centred(mid)
            },
        };
        let (lo, _, hi) = match &pass.local_q {
            Some(lq) => self
                .band
                .apply_quantiles(base, self.bounds, lq[i].0, lq[i].1),
            None => self.band.apply(base, self.bounds),
        };
        (lo, hi)
    }

    /// Probability that row `i` (middle `mid`, residual scale multiplied by `factor`) crosses
    /// threshold `t` in its direction.
    fn probability(&self, pass: &EnsemblePass, t: usize, i: usize, mid: f64, factor: f64) -> f64 {
        if mid.is_nan() {
            return f64::NAN;
        }
        let th = &self.thresholds[t];
        let below = match (&self.exceed_methods[t], &pass.dist) {
            (ExceedMethod::ForestRecalibrated, Some((_, c))) => {
                bounded_cdf(self.recalibration.apply(c[[i, t]]), th.value, self.bounds)
            }
            _ => self
                .cps
                .prob_below(mid, self.scale(pass, i) * factor, th.value, self.bounds),
        };
        crossing_probability(below, th.above)
    }
}
