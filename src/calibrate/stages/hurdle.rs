//! The "no change" hurdle of a target with an atom at zero ([`crate::calibrate::hurdle`]).
//!
//! When the wells show that a target is exactly zero over much of the field (blurred by
//! measurement noise), the target is calibrated in two parts (a two-part or hurdle model;
//! Mullahy 1986, Duan et al. 1983):
//!
//! 1. **Did it change?** A regression forest on the indicator `|y| > tolerance` estimates the
//!    probability of a change (a probability forest; Malley, Kruppa, Dasgupta, Malley & Ziegler
//!    2012, Methods Inf. Med. 51:74), recalibrated by isotonic regression of the indicator on the
//!    out-of-fold estimate (Zadrozny & Elkan 2002, KDD), cross-fitted on the folds of whole wells.
//!    Its weighted mean is the wells' weighted share of changed rows, kept as the training prior
//!    ([`HurdleModel::training_prior`]) so that the nodes' share of change can replace it
//!    ([`crate::calibrate::prior`]).
//! 2. **By how much, given that it changed?** Every continuous stage runs on the changed rows
//!    only; its conformal predictive system (Vovk et al. 2019) is the conditional distribution `G`.
//! 3. **The mixture.** `F = (1 - p) 1{y >= 0} + p G`. Its randomised PIT values at held-out rows
//!    (Czado, Gneiting & Held 2009) are computed against the denoised truth (values within the
//!    tolerance are zero); the band's probability levels are their conformal quantiles at
//!    `(1 - level)/2` and `(1 + level)/2`, so the band is calibrated on held-out wells as a whole,
//!    atom included. The middle stays the mixture's median (level 1/2): moving it to the wells'
//!    median PIT would carry the wells' bias towards changed ground onto every node (on three
//!    generated fields it raised the mean P50 of dSw at unchanged nodes from 0.035 to 0.065). Exceedance probabilities
//!    pass the mixture CDF through the isotonic recalibration of those PIT values (Kuleshov,
//!    Fenner & Ermon 2018). Out-of-fold values of every map are cross-fitted on the folds.
//!
//! The conditional part's held-out rows are out of fold. Rows that did not change never enter the
//! conditional fit, so the final conditional model gives their `G`; it has seen other rows of the
//! same wells (at other steps), a leak that nested folds would remove at several times the cost.

use super::models::fit_models;
use super::{STREAM_FOREST, derive_seed};
use crate::calibrate::conformal::conformal_quantile;
use crate::calibrate::error::CalibrateError;
use crate::calibrate::exceedance::{PitRecalibration, PredictiveSystem};
use crate::calibrate::folds::Folds;
use crate::calibrate::hurdle::{self, Conditional, ZeroRule};
use crate::calibrate::input::{CalibrationSettings, Space, TargetData};
use crate::calibrate::isotonic::{IsotonicMap, IsotonicSettings, cross_fit};
use crate::calibrate::prior::PriorShift;
use crate::calibrate::units::{Units, count_wells, pick};
use crate::ensemble::{Forest, ForestSettings};
use crate::metrics::brier;
use ndarray::{Array2, ArrayView2, Axis};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Seed stream of the change-probability forests.
const STREAM_CHANGE: u64 = 11;
/// Seed stream of the randomised PIT draws.
const STREAM_PIT: u64 = 12;

/// The conformal predictive system at one row: `G` of the mixture.
pub struct CpsAt<'a> {
    /// The system.
    pub cps: &'a PredictiveSystem,
    /// The row's conditional middle.
    pub mid: f64,
    /// The row's residual scale.
    pub scale: f64,
    /// Physical bounds of the target.
    pub bounds: (f64, f64),
}

impl Conditional for CpsAt<'_> {
    fn cdf(&self, y: f64) -> f64 {
        self.cps.prob_below(self.mid, self.scale, y, self.bounds)
    }
    fn quantile(&self, v: f64) -> f64 {
        self.cps
            .quantile(self.mid, self.scale, v, self.bounds)
            .clamp(self.bounds.0, self.bounds.1)
    }
}

/// The fitted hurdle of a target, applied at the grid nodes after the conditional part.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct HurdleModel {
    /// What the wells said about the atom.
    pub rule: ZeroRule,
    /// Forest on the change indicator, fitted on all rows.
    pub forest: Forest,
    /// Isotonic recalibration of its estimate (out-of-fold estimate -> probability of a change).
    pub map: IsotonicMap,
    /// Probability levels of the band edges and middle: `(lower, middle, upper)`.
    pub levels: (f64, f64, f64),
    /// Recalibration of the mixture's CDF for exceedance probabilities.
    pub recalibration: PitRecalibration,
    /// A plain quantile forest on all rows (changed or not), kept as the uncalibrated reference
    /// that scoring compares the mixture with; the maps never use it.
    pub reference: Forest,
    /// The wells' weighted share of changed rows (all steps): the prior the recalibrated
    /// probability of a change carries (absent in models written before it was kept).
    #[serde(default)]
    pub training_prior: Option<f64>,
    /// The probability of a change adjusted to the nodes' share of change, when the caller
    /// estimated it ([`crate::calibrate::prior`]); `None`: the wells' share stands.
    #[serde(default)]
    pub prior: Option<PriorShift>,
}

/// What the hurdle did, for `summary.json` and the report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HurdleDiagnostics {
    /// The atom's rule.
    pub rule: ZeroRule,
    /// Rows measured as changed.
    pub changed_rows: usize,
    /// Wells with at least one changed row.
    pub changed_wells: usize,
    /// Out-of-fold Brier score of the probability of a change.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub brier_change: f64,
    /// Brier score of the base rate (climatology), for reference.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub brier_change_base_rate: f64,
    /// Probability levels of the band edges and middle.
    pub levels: (f64, f64, f64),
    /// Held-out rows whose denoised truth is zero and whose band includes zero, as a share of
    /// those rows.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub zero_coverage: f64,
    /// The nodes' share of change and the adjustment of the probability of a change to it (as
    /// [`HurdleModel::prior`]).
    #[serde(default)]
    pub prior: Option<PriorShift>,
}

/// What the hurdle stage returns to the assembly of the target.
pub struct Hurdle {
    /// The model for the nodes.
    pub model: HurdleModel,
    /// Its diagnostics.
    pub diagnostics: HurdleDiagnostics,
    /// Denoised truth per row (the scored truth).
    pub truth: Vec<f64>,
    /// Out-of-fold probability of a change per row.
    pub p_change: Vec<f64>,
    /// Out-of-fold mixture middle, lower and upper edges per row.
    pub mid: Vec<f64>,
    /// Lower edge.
    pub lo: Vec<f64>,
    /// Upper edge.
    pub hi: Vec<f64>,
    /// Out-of-fold randomised PIT per row.
    pub pit: Vec<f64>,
    /// Out-of-fold exceedance probability per threshold and row.
    pub prob: Vec<Vec<f64>>,
}

/// The rows of `data` at `rows`, as owned columns a sub-[`TargetData`] can borrow.
pub struct Subset {
    /// Features.
    pub x: Array2<f64>,
    /// Truth.
    pub y: Vec<f64>,
    /// Wells.
    pub group: Vec<usize>,
    /// Locations.
    pub xy: Vec<[f64; 2]>,
    /// Steps.
    pub step: Vec<usize>,
    /// Weights.
    pub weight: Vec<f64>,
    /// Points in the dissimilarity space, and its dimension and unit.
    pub space: Option<(Vec<f64>, usize, f64)>,
}

impl Subset {
    /// Copy `rows` of `data`.
    pub fn of(data: &TargetData, rows: &[usize]) -> Self {
        Self {
            x: data.x.select(Axis(0), rows),
            y: pick(data.y, rows),
            group: pick(data.group, rows),
            xy: rows.iter().map(|&i| data.xy[i]).collect(),
            step: pick(data.step, rows),
            weight: pick(data.weight, rows),
            space: data.dissimilarity.map(|sp| {
                let pts = rows
                    .iter()
                    .flat_map(|&i| sp.points[i * sp.dim..(i + 1) * sp.dim].iter().copied())
                    .collect();
                (pts, sp.dim, sp.mean_distance)
            }),
        }
    }

    /// A [`TargetData`] over these rows, otherwise as `data` (no atom, no covariate shift).
    pub fn data<'a>(&'a self, data: &TargetData, name: &'a str) -> TargetData<'a> {
        TargetData {
            name,
            x: self.x.view(),
            y: &self.y,
            group: &self.group,
            xy: &self.xy,
            step: &self.step,
            weight: &self.weight,
            bounds: data.bounds,
            thresholds: data.thresholds.clone(),
            shift: None,
            zero: Default::default(),
            dissimilarity: self
                .space
                .as_ref()
                .map(|(points, dim, mean_distance)| Space {
                    points,
                    dim: *dim,
                    mean_distance: *mean_distance,
                }),
        }
    }
}

/// The conditional part at every row: `(mid, scale)` out of fold for changed rows, from the final
/// conditional model for the others.
pub struct ConditionalRows<'a> {
    /// The conditional predictive system.
    pub cps: &'a PredictiveSystem,
    /// Middle per row.
    pub mid: Vec<f64>,
    /// Residual scale per row.
    pub scale: Vec<f64>,
}

/// Fit the probability of a change and the mixture's calibration on all rows of `data`, given
/// the rule, the folds of all rows and the conditional part at every row.
pub fn calibrate(
    data: &TargetData,
    settings: &CalibrationSettings,
    rule: &ZeroRule,
    folds: &Folds,
    cond: &ConditionalRows,
) -> Result<Hurdle, CalibrateError> {
    let n = data.y.len();
    let truth: Vec<f64> = data.y.iter().map(|&v| rule.denoised(v)).collect();
    let changed: Vec<f64> = data
        .y
        .iter()
        .map(|&v| f64::from(u8::from(rule.changed(v))))
        .collect();
    let (p_raw, forest) = change_forests(data.x, &changed, data.weight, settings, folds)?;
    let prob_settings = IsotonicSettings {
        increasing: true,
        y_min: Some(0.0),
        y_max: Some(1.0),
        centred: false,
    };
    let p_change = cross_fit(&folds.of_row, &p_raw, &changed, data.weight, &prob_settings)?;
    let map = IsotonicMap::fit(&p_raw, &changed, Some(data.weight), &prob_settings)?;
    let all: Vec<usize> = (0..n).collect();
    let (reference, _) = fit_models(data, settings, &all, false, folds.count as u64)?;
    let g = |i: usize| CpsAt {
        cps: cond.cps,
        mid: cond.mid[i],
        scale: cond.scale[i],
        bounds: data.bounds,
    };
    let mut rng = StdRng::seed_from_u64(derive_seed(settings.seed, STREAM_PIT, 0));
    let pit: Vec<f64> = (0..n)
        .map(|i| {
            let v: f64 = rng.random();
            hurdle::randomised_pit(p_change[i], &g(i), truth[i], v)
        })
        .collect();
    let units = Units::wells(data.group);
    let alpha = 1.0 - settings.level;
    let levels_of = |rows: &[usize]| -> (f64, f64, f64) {
        let u = pick(&pit, rows);
        let w = pick(&units.weight, rows);
        pit_levels(&u, &w, alpha)
    };
    // Cross-fitted out-of-fold band and probabilities.
    let mut lo = vec![f64::NAN; n];
    let mut mid = vec![f64::NAN; n];
    let mut hi = vec![f64::NAN; n];
    let mut prob = vec![vec![f64::NAN; n]; data.thresholds.len()];
    for f in 0..folds.count {
        let train: Vec<usize> = (0..n).filter(|&i| folds.of_row[i] != f).collect();
        let (u_lo, u_mid, u_hi) = levels_of(&train);
        let rec = PitRecalibration::fit(&pick(&pit, &train), &pick(&units.weight, &train)).ok();
        for i in (0..n).filter(|&i| folds.of_row[i] == f) {
            let gi = g(i);
            lo[i] = hurdle::quantile(p_change[i], &gi, u_lo);
            mid[i] = hurdle::quantile(p_change[i], &gi, u_mid);
            hi[i] = hurdle::quantile(p_change[i], &gi, u_hi);
            for (t, th) in data.thresholds.iter().enumerate() {
                prob[t][i] = crossing(p_change[i], &gi, th.value, th.above, rec.as_ref());
            }
        }
    }
    let levels = levels_of(&(0..n).collect::<Vec<_>>());
    let recalibration = PitRecalibration::fit(&pit, &units.weight)?;
    let outcome: Vec<bool> = changed.iter().map(|&c| c > 0.5).collect();
    let rate = outcome.iter().filter(|&&o| o).count() as f64 / n as f64;
    let zeros: Vec<usize> = (0..n).filter(|&i| truth[i] == 0.0).collect();
    let zero_coverage = zeros
        .iter()
        .filter(|&&i| lo[i] <= 0.0 && 0.0 <= hi[i])
        .count() as f64
        / zeros.len().max(1) as f64;
    let changed_rows: Vec<usize> = (0..n).filter(|&i| outcome[i]).collect();
    let diagnostics = HurdleDiagnostics {
        rule: rule.clone(),
        changed_rows: changed_rows.len(),
        changed_wells: count_wells(&pick(data.group, &changed_rows)),
        brier_change: brier(&p_change, &outcome),
        brier_change_base_rate: brier(&vec![rate; n], &outcome),
        levels,
        zero_coverage,
        prior: None,
    };
    let total_weight: f64 = data.weight.iter().sum();
    let training_prior = (total_weight > 0.0).then(|| {
        changed
            .iter()
            .zip(data.weight)
            .map(|(c, w)| c * w)
            .sum::<f64>()
            / total_weight
    });
    Ok(Hurdle {
        model: HurdleModel {
            rule: rule.clone(),
            forest,
            map,
            levels,
            recalibration,
            reference,
            training_prior,
            prior: None,
        },
        diagnostics,
        truth,
        p_change,
        mid,
        lo,
        hi,
        pit,
        prob,
    })
}

/// Probability levels `(lower, middle, upper)` from held-out PIT values `u` with unit weights
/// `w`: the lower edge's level is the conformal `alpha/2` quantile of `u` from below (the largest
/// level that at most `alpha/2` of the wells fall under, with the finite-sample correction of
/// split conformal prediction), the upper edge's the mirror image; the middle is 1/2 (see the
/// module docs).
pub fn pit_levels(u: &[f64], w: &[f64], alpha: f64) -> (f64, f64, f64) {
    let hi = conformal_quantile(u, w, alpha / 2.0).map_or(1.0, |q| q.min(1.0));
    let neg: Vec<f64> = u.iter().map(|v| -v).collect();
    let lo = conformal_quantile(&neg, w, alpha / 2.0).map_or(0.0, |q| (-q).max(0.0));
    (lo, 0.5, hi)
}

/// Calibrated probability of crossing `t`: the mixture CDF through the PIT recalibration.
pub fn crossing<G: Conditional>(
    p: f64,
    g: &G,
    t: f64,
    above: bool,
    rec: Option<&PitRecalibration>,
) -> f64 {
    let r = |v: f64| rec.map_or(v, |r| r.apply(v));
    if above {
        1.0 - r(hurdle::cdf(p, g, t))
    } else {
        r(hurdle::cdf_left(p, g, t))
    }
}

/// Out-of-fold estimates of the change forests, and the forest fitted on all rows.
fn change_forests(
    x: ArrayView2<f64>,
    changed: &[f64],
    weight: &[f64],
    settings: &CalibrationSettings,
    folds: &Folds,
) -> Result<(Vec<f64>, Forest), CalibrateError> {
    let fit = |rows: &[usize], index: u64| -> Result<Forest, CalibrateError> {
        let xs = x.select(Axis(0), rows);
        let y = Array2::from_shape_fn((rows.len(), 1), |(i, _)| changed[rows[i]]);
        let fs = ForestSettings {
            seed: derive_seed(settings.seed, STREAM_CHANGE + STREAM_FOREST, index),
            ..settings.forest.clone()
        };
        Ok(fs.fit(xs.view(), y.view(), Some(&pick(weight, rows)))?)
    };
    let n = changed.len();
    let parts = (0..folds.count)
        .into_par_iter()
        .map(|f| {
            let train: Vec<usize> = (0..n).filter(|&i| folds.of_row[i] != f).collect();
            let test: Vec<usize> = (0..n).filter(|&i| folds.of_row[i] == f).collect();
            let forest = fit(&train, f as u64)?;
            let p = forest.predict(x.select(Axis(0), &test).view());
            Ok((test, p.column(0).to_vec()))
        })
        .collect::<Result<Vec<_>, CalibrateError>>()?;
    let mut p_raw = vec![f64::NAN; n];
    for (test, p) in parts {
        for (k, i) in test.into_iter().enumerate() {
            p_raw[i] = p[k];
        }
    }
    let all: Vec<usize> = (0..n).collect();
    let forest = fit(&all, folds.count as u64)?;
    Ok((p_raw, forest))
}
