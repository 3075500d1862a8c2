//! Calibrating one target end to end: held-out-well predictions, learner choice, end-bias
//! correction, conformal band and exceedance probabilities, with every diagnostic kept.
//!
//! [`calibrate_target`] runs, with one fold vector from [`super::folds::assign`]:
//!
//! 1. For each fold, a forest and (unless the learner is fixed to the forest) a booster fitted
//!    on the other folds' wells predict the held-out wells: the forest's mean, its conditional
//!    quantiles at `(1-level)/2`, 0.5, `(1+level)/2` and CDF at each threshold and at the truth
//!    (the PIT value), and the booster's prediction.
//! 2. Learner: forest, booster, or a blend `w forest + (1-w) booster` with `w` in
//!    {1, 0.75, 0.5, 0.25, 0}, whichever has the lowest out-of-fold weighted mean squared error
//!    (a consistent scoring function for the mean, Gneiting 2011, JASA 106:746).
//! 3. End-bias correction: a cross-fitted centred isotonic map `iso` (prediction -> truth),
//!    applied at a strength `s` in {1/4, 1/2, 3/4, 1} as `raw + s (iso(raw) - raw)`, the strength
//!    with the lowest out-of-fold squared error kept, and only if it beats the uncorrected
//!    predictor. The final map is fitted on all out-of-fold pairs.
//! 4. Band: [`BandMethod::CvResidual`], [`BandMethod::Normalized`] and [`BandMethod::Cqr`], each
//!    with 1..`max_bins` Mondrian bins and localised at several localities, cross-fitted on
//!    held-out wells; the one with the lowest out-of-fold interval score (Gneiting & Raftery
//!    2007) is kept. With [`TargetData::shift`] the wells are weighted by the nodes-to-wells
//!    density ratio in the calibration and in that score (weighted conformal under covariate
//!    shift, Tibshirani et al. 2019; see [`super::shift`]).
//! 5. Exceedance per threshold: conformal predictive system or recalibrated forest CDF, whichever
//!    has the lower out-of-fold Brier score.
//! 6. Metrics overall and per step on the out-of-fold rows; final models fitted on all rows.
//!
//! The final models predict every grid node with [`CalibratedTarget::predict`]: one pass of the
//! ensemble (mean, three quantiles, CDF at the thresholds) plus O(log n) maps per row and
//! threshold.
//!
//! Out-of-fold calibration quantities are cross-fitted: the correction, band and probabilities
//! of a held-out row are fitted on the other folds' out-of-fold rows. Those rows' predictions
//! came from models that saw the held-out fold, a second-order leak that nested cross-validation
//! would remove at K times the cost.

use super::conformal::{
    BandBase, BandCalibration, BandMethod, BinInfo, MondrianBins, Units, cross_fitted_band,
    cross_fitted_local_band, finite_band_possible, min_wells_for_band, pick,
};
use super::exceedance::{
    ExceedMethod, PitRecalibration, PredictiveSystem, bounded_cdf, crossing_probability,
};
use super::isotonic::{IsotonicMap, IsotonicSettings, cross_fit};
use super::shift::{RowShift, ShiftDiagnostics};
use super::{CalibrateError, FoldMethod, LearnerChoice, count_wells, folds};
use crate::ensemble::{BoostSettings, Booster, Forest, ForestSettings};
use crate::metrics::{
    ExceedInput, Metrics, MetricsInput, ReliabilityBin, brier, end_bias, interval_score_one,
    pit_histogram, reliability, serde_nan, slope,
};
use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Settings of the calibration of one target (the manifest's `[calibration]` and `[model]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationSettings {
    /// Nominal level of the band, in (0, 1). Default 0.8 (P10-P90).
    pub level: f64,
    /// How wells are split into folds. Default [`FoldMethod::Wells`].
    pub fold_method: FoldMethod,
    /// Number of folds for `Wells` and `Blocks`, at least 2 (clamped to the number of wells).
    /// Default 5.
    pub folds: usize,
    /// Try the isotonic end-bias correction (kept only if it improves the out-of-fold score).
    /// Default true.
    pub end_correction: bool,
    /// Mondrian bins of the predicted value to start from, at least 1. Default 3.
    pub max_bins: usize,
    /// Bins are merged until each holds at least this many wells (never fewer than a finite
    /// band needs), at least 1. Default 10.
    pub min_wells_per_bin: usize,
    /// Which learner makes the point prediction. Default [`LearnerChoice::Auto`].
    pub learner: LearnerChoice,
    /// Forest settings; its `seed` is replaced by one derived from `seed`.
    pub forest: ForestSettings,
    /// Booster settings; its `seed` is replaced by one derived from `seed`.
    pub boost: BoostSettings,
    /// Seed of every random choice (folds, forests, boosters). Default 42.
    pub seed: u64,
}

impl Default for CalibrationSettings {
    fn default() -> Self {
        Self {
            level: 0.8,
            fold_method: FoldMethod::Wells,
            folds: 5,
            end_correction: true,
            max_bins: 3,
            min_wells_per_bin: 10,
            learner: LearnerChoice::Auto,
            forest: ForestSettings::default(),
            boost: BoostSettings::default(),
            seed: 42,
        }
    }
}

impl CalibrationSettings {
    /// Check every setting's range (including the forest's and booster's).
    pub fn check(&self) -> Result<(), CalibrateError> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(CalibrateError::Setting {
                key: "level",
                expected: "in (0, 1)",
                got: self.level.to_string(),
            });
        }
        if self.folds < 2 && self.fold_method != FoldMethod::OneWell {
            return Err(CalibrateError::Setting {
                key: "folds",
                expected: "at least 2",
                got: self.folds.to_string(),
            });
        }
        if self.max_bins == 0 {
            return Err(CalibrateError::Setting {
                key: "max_bins",
                expected: "at least 1",
                got: "0".to_string(),
            });
        }
        if self.min_wells_per_bin == 0 {
            return Err(CalibrateError::Setting {
                key: "min_wells_per_bin",
                expected: "at least 1",
                got: "0".to_string(),
            });
        }
        self.forest.check()?;
        self.boost.check()?;
        Ok(())
    }
}

/// A decision threshold of a target.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Threshold {
    /// Label used in file names and scores.
    pub label: String,
    /// Threshold value in the target's unit.
    pub value: f64,
    /// `true`: the event is crossing upwards (`Y > value`); `false`: downwards (`Y < value`).
    pub above: bool,
}

/// The training rows of one target (rows where the target is present).
#[derive(Clone, Debug)]
pub struct TargetData<'a> {
    /// Target name (for messages).
    pub name: &'a str,
    /// Features, rows x columns (NaN = missing).
    pub x: ArrayView2<'a, f64>,
    /// Truth per row (finite).
    pub y: &'a [f64],
    /// Well id per row.
    pub group: &'a [usize],
    /// Well location per row (world coordinates), for spatial blocks.
    pub xy: &'a [[f64; 2]],
    /// Step index per row.
    pub step: &'a [usize],
    /// Sample weight per row (finite, >= 0, not all zero).
    pub weight: &'a [f64],
    /// Physical bounds `(min, max)` of the target, `min < max`.
    pub bounds: (f64, f64),
    /// Decision thresholds.
    pub thresholds: Vec<Threshold>,
    /// Covariate-shift ratios from the wells to the mapped nodes ([`super::shift`]); `None`
    /// calibrates the band for the wells' own population.
    pub shift: Option<RowShift<'a>>,
}

/// One out-of-fold row of the diagnostics.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct OofRow {
    /// Truth.
    pub truth: f64,
    /// Learner's prediction from the fold that held this row's well out.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub raw: f64,
    /// Cross-fitted corrected prediction (equals `raw`, clipped to the bounds, when the
    /// correction is not kept).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub corrected: f64,
    /// Cross-fitted lower band edge.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub lo: f64,
    /// Cross-fitted upper band edge.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub hi: f64,
    /// PIT value `Q(truth)` of the cross-fitted conformal predictive system (`tau = 1/2`).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub pit: f64,
    /// PIT value of the recalibrated forest CDF (cross-fitted).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub pit_forest: f64,
    /// Fold of the row.
    pub fold: usize,
    /// Well id.
    pub group: usize,
    /// Step index.
    pub step: usize,
}

/// Out-of-fold score of one learner candidate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LearnerScore {
    /// Weight of the forest in the blend (1 = forest only, 0 = booster only).
    pub forest_weight: f64,
    /// Out-of-fold weighted mean squared error.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse: f64,
}

/// The learner choice and the scores that made it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LearnerDiagnostics {
    /// The setting.
    pub setting: LearnerChoice,
    /// `"forest"`, `"boost"` or `"blend"`.
    pub chosen: String,
    /// Forest weight of the chosen candidate.
    pub forest_weight: f64,
    /// Every candidate tried.
    pub scores: Vec<LearnerScore>,
}

/// Out-of-fold score of one strength of the end-bias correction.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CorrectionScore {
    /// Strength `s` in `raw + s (iso(raw) - raw)`; 0 is the uncorrected predictor.
    pub strength: f64,
    /// Out-of-fold weighted mean squared error.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse: f64,
}

/// What the end-bias correction did. "After" values describe the cross-fitted correction at the
/// kept strength, or at full strength when it was not kept (what it would have done).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EndCorrectionDiagnostics {
    /// The setting.
    pub enabled: bool,
    /// Whether the corrected predictor is used.
    pub kept: bool,
    /// Kept strength (0 when not kept).
    pub strength: f64,
    /// Why, in words.
    pub reason: String,
    /// Out-of-fold MSE of every strength tried.
    pub scores: Vec<CorrectionScore>,
    /// Out-of-fold weighted MSE before the correction.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_before: f64,
    /// Out-of-fold weighted MSE after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_after: f64,
    /// Slope of truth on prediction before (1 = no shrinkage).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub slope_before: f64,
    /// Slope after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub slope_after: f64,
    /// Mean bias (prediction - truth) in the bottom decile of the truth, before.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_bottom_before: f64,
    /// Same in the top decile, before.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_top_before: f64,
    /// Bottom-decile bias after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_bottom_after: f64,
    /// Top-decile bias after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_top_after: f64,
    /// Knots of the final isotonic map (0 when not kept).
    pub knots: usize,
}

/// Out-of-fold result of one band candidate (method and number of Mondrian bins).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandCandidate {
    /// Scores used.
    pub method: BandMethod,
    /// Mondrian bins asked for (merged down when wells are too few).
    pub max_bins: usize,
    /// Share of forest-proximity weights in the localised band (0: global quantiles per bin;
    /// see [`super::conformal::Localisation`]).
    #[serde(default)]
    pub locality: f64,
    /// Out-of-fold mean interval score (lower is better); under a covariate shift, each row
    /// weighted by its calibration weight, the estimate of the score at the mapped nodes.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub interval_score: f64,
    /// Out-of-fold coverage.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage: f64,
    /// Out-of-fold mean width.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mean_width: f64,
}

/// How the band was made.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandDiagnostics {
    /// The method kept.
    pub method: BandMethod,
    /// Mondrian bins asked for by the kept candidate.
    pub max_bins: usize,
    /// Locality of the kept candidate (0: global quantiles per Mondrian bin).
    #[serde(default)]
    pub locality: f64,
    /// Smallest scale of normalised scores (a tenth of the median forest spread).
    pub scale_floor: f64,
    /// Every candidate, with its out-of-fold scores.
    pub candidates: Vec<BandCandidate>,
    /// Mondrian bins of the final band, with their wells and quantiles.
    pub bins: Vec<BinInfo>,
    /// True when the wells cannot back a finite band: the band is the physical bounds.
    pub too_few_wells: bool,
    /// Fewest wells a finite band at this level needs.
    pub min_wells_needed: usize,
    /// Plain statement for the user when `too_few_wells`.
    pub message: Option<String>,
    /// Out-of-fold rows whose cross-fitted band fell back to a bound (their calibration folds
    /// held too few wells).
    pub oof_rows_at_bounds: usize,
    /// The covariate shift's effect, when the band was calibrated for the mapped nodes.
    #[serde(default)]
    pub shift: Option<ShiftDiagnostics>,
}

/// How one threshold's probabilities are made and how reliable they were out of fold.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ExceedanceDiagnostics {
    /// Threshold label.
    pub label: String,
    /// Threshold value.
    pub value: f64,
    /// Direction.
    pub above: bool,
    /// Method kept (lower Brier score).
    pub method: ExceedMethod,
    /// Out-of-fold Brier score of the conformal predictive system.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_conformal: f64,
    /// Out-of-fold Brier score of the recalibrated forest CDF.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_forest: f64,
    /// Out-of-fold Brier score of always predicting the base rate (climatology), for reference.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_base_rate: f64,
    /// Fraction of out-of-fold rows where the event happened.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub base_rate: f64,
    /// Reliability table of the kept method (10 bins).
    pub reliability: Vec<ReliabilityBin>,
}

/// Metrics of the out-of-fold rows of one step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepMetrics {
    /// Step index.
    pub step: usize,
    /// Its metrics.
    pub metrics: Metrics,
}

/// Everything about a target's calibration, for `summary.json` and the report.
/// Schema: `docs/summary-schema.md`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TargetDiagnostics {
    /// Target name.
    pub target: String,
    /// Nominal band level.
    pub level: f64,
    /// Training rows.
    pub n_rows: usize,
    /// Distinct wells.
    pub n_wells: usize,
    /// Folds used.
    pub n_folds: usize,
    /// Fold method.
    pub fold_method: FoldMethod,
    /// Learner choice.
    pub learner: LearnerDiagnostics,
    /// End-bias correction.
    pub end_correction: EndCorrectionDiagnostics,
    /// Band.
    pub band: BandDiagnostics,
    /// Exceedance, one entry per threshold.
    pub exceedance: Vec<ExceedanceDiagnostics>,
    /// Histogram (10 bins) of the conformal PIT values; flat when calibrated.
    pub pit_histogram: Vec<f64>,
    /// Histogram (10 bins) of the recalibrated forest PIT values.
    pub pit_histogram_forest: Vec<f64>,
    /// Out-of-fold metrics over all rows.
    pub metrics: Metrics,
    /// Out-of-fold metrics per step.
    pub metrics_by_step: Vec<StepMetrics>,
    /// Out-of-fold rows.
    pub rows: Vec<OofRow>,
    /// Plain-language warnings.
    pub warnings: Vec<String>,
}

/// A calibrated target: final models, correction, band and probability maps, and diagnostics.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct CalibratedTarget {
    /// Diagnostics of the calibration.
    pub diagnostics: TargetDiagnostics,
    /// Target name.
    pub name: String,
    /// Nominal band level.
    pub level: f64,
    /// Physical bounds.
    pub bounds: (f64, f64),
    /// Thresholds, in the order of [`TargetPrediction::exceed`].
    pub thresholds: Vec<Threshold>,
    /// Number of feature columns the models expect.
    pub n_features: usize,
    /// Forest fitted on all rows.
    pub forest: Forest,
    /// Booster fitted on all rows (present when its blend weight is above zero).
    pub booster: Option<Booster>,
    /// Forest weight of the point prediction.
    pub forest_weight: f64,
    /// End-bias correction map (`None` when not kept).
    pub correction: Option<IsotonicMap>,
    /// Strength of the correction: `mid = raw + strength (map(raw) - raw)`.
    pub correction_strength: f64,
    /// Band calibration.
    pub band: BandCalibration,
    /// Smallest scale of normalised scores.
    pub scale_floor: f64,
    /// Conformal predictive system.
    pub cps: PredictiveSystem,
    /// Recalibration map of the forest CDF.
    pub recalibration: PitRecalibration,
    /// Probability method per threshold.
    pub exceed_methods: Vec<ExceedMethod>,
}

/// Predictions of a calibrated target for many rows.
#[derive(Clone, Debug, PartialEq)]
pub struct TargetPrediction {
    /// Lower band edge, the `(1 - level)/2` quantile (P10 at the default level).
    pub lo: Vec<f64>,
    /// Corrected point prediction (P50).
    pub mid: Vec<f64>,
    /// Upper band edge, the `(1 + level)/2` quantile (P90 at the default level).
    pub hi: Vec<f64>,
    /// Per threshold, per row: the probability of crossing in the threshold's direction.
    pub exceed: Vec<Vec<f64>>,
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014) to derive independent seeds.
fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

fn derive_seed(seed: u64, stream: u64, index: u64) -> u64 {
    mix(seed ^ mix(stream.wrapping_mul(0x1_0000_0001).wrapping_add(index)))
}

/// Localities of the localised band candidates (share of forest-proximity weights).
const LOCALITIES: &[f64] = &[0.25, 0.5, 0.75, 1.0];

const STREAM_FOLDS: u64 = 1;
const STREAM_FOREST: u64 = 2;
const STREAM_BOOST: u64 = 3;

/// Floor of the normalised-score scale: a tenth of the median positive spread, or a millionth of
/// the bounds' range when no spread is positive (common practice, no published source).
fn scale_floor(spread: &[f64], bounds: (f64, f64)) -> f64 {
    let mut s: Vec<f64> = spread
        .iter()
        .copied()
        .filter(|v| v.is_finite() && *v > 0.0)
        .collect();
    let fallback = 1e-6 * (bounds.1 - bounds.0);
    if s.is_empty() {
        return fallback;
    }
    s.sort_by(|a, b| a.total_cmp(b));
    (0.1 * s[s.len() / 2]).max(fallback)
}

/// Weighted mean squared error.
fn wmse(y: &[f64], p: &[f64], w: &[f64]) -> f64 {
    let (mut s, mut sw) = (0.0, 0.0);
    for i in 0..y.len() {
        s += w[i] * (y[i] - p[i]).powi(2);
        sw += w[i];
    }
    if sw > 0.0 { s / sw } else { f64::NAN }
}

/// What one fold's models say about its held-out rows.
struct FoldOutput {
    rows: Vec<usize>,
    forest_mean: Vec<f64>,
    boost: Vec<f64>,
    q: [Vec<f64>; 3],
    cdf_thresholds: Vec<Vec<f64>>,
    pit_raw: Vec<f64>,
    /// Quantile-forest weights of each held-out row over the fold's training rows.
    prox: Vec<Vec<f64>>,
}

fn check_data(d: &TargetData) -> Result<(), CalibrateError> {
    let n = d.y.len();
    let len = |what: &'static str, got: usize| {
        if got == n {
            Ok(())
        } else {
            Err(CalibrateError::Length {
                target: d.name.to_string(),
                what,
                got,
                expected: n,
            })
        }
    };
    len("x rows", d.x.nrows())?;
    len("group", d.group.len())?;
    len("xy", d.xy.len())?;
    len("step", d.step.len())?;
    len("weight", d.weight.len())?;
    let bad = |what: &'static str, row: usize, value: f64, expected: &'static str| {
        CalibrateError::BadValue {
            target: d.name.to_string(),
            what,
            row,
            value,
            expected,
        }
    };
    for (i, &v) in d.y.iter().enumerate() {
        if !v.is_finite() {
            return Err(bad("y", i, v, "a finite value"));
        }
    }
    for (i, &v) in d.weight.iter().enumerate() {
        if !v.is_finite() || v < 0.0 {
            return Err(bad("weight", i, v, "a finite value >= 0"));
        }
    }
    if d.weight.iter().all(|&w| w == 0.0) {
        return Err(bad("weight", 0, 0.0, "at least one positive weight"));
    }
    let (lo, hi) = d.bounds;
    if !(lo.is_finite() && hi.is_finite() && lo < hi) {
        return Err(CalibrateError::Setting {
            key: "target min/max",
            expected: "finite with min < max",
            got: format!("({lo}, {hi}) for target `{}`", d.name),
        });
    }
    for (i, t) in d.thresholds.iter().enumerate() {
        if !t.value.is_finite() {
            return Err(bad("threshold value", i, t.value, "a finite value"));
        }
    }
    Ok(())
}

/// Calibrate one target on its training rows (see the module documentation for the steps).
///
/// Errors: inconsistent or non-finite inputs, settings out of range, fewer than two wells, or a
/// model that cannot be fitted. Too few wells for a finite band is not an error: the band is
/// widened to the physical bounds and flagged in the diagnostics.
pub fn calibrate_target(
    data: &TargetData,
    settings: &CalibrationSettings,
) -> Result<CalibratedTarget, CalibrateError> {
    settings.check()?;
    check_data(data)?;
    let n = data.y.len();
    let n_wells = count_wells(data.group);
    if n_wells < 2 {
        return Err(CalibrateError::TooFewWells {
            target: data.name.to_string(),
            wells: n_wells,
            rows: n,
            needed: 2,
        });
    }
    let level = settings.level;
    let alpha = 1.0 - level;
    let bounds = data.bounds;
    let mut warnings = Vec::new();
    let outside = data
        .y
        .iter()
        .filter(|&&v| v < bounds.0 || v > bounds.1)
        .count();
    if outside > 0 {
        warnings.push(format!(
            "{outside} of {n} training values of `{}` lie outside its bounds [{}, {}]",
            data.name, bounds.0, bounds.1
        ));
    }

    // 1. Folds and out-of-fold predictions.
    let fold = folds::assign(
        data.group,
        data.xy,
        settings.fold_method,
        settings.folds,
        derive_seed(settings.seed, STREAM_FOLDS, 0),
    );
    let k = folds::n_folds(&fold);
    if settings.fold_method != FoldMethod::OneWell && k < settings.folds {
        warnings.push(format!(
            "{} folds requested but only {k} could be formed from {n_wells} wells",
            settings.folds
        ));
    }
    let q_levels = [alpha / 2.0, 0.5, 1.0 - alpha / 2.0];
    let t_values: Vec<f64> = data.thresholds.iter().map(|t| t.value).collect();
    let use_boost = settings.learner != LearnerChoice::Forest;
    let outputs: Vec<FoldOutput> = (0..k)
        .into_par_iter()
        .map(|f| fit_fold(data, settings, &fold, f, use_boost, &q_levels, &t_values))
        .collect::<Result<Vec<_>, CalibrateError>>()?;
    let mut forest_oof = vec![f64::NAN; n];
    let mut boost_oof = vec![f64::NAN; n];
    let mut q_oof = [vec![f64::NAN; n], vec![f64::NAN; n], vec![f64::NAN; n]];
    let mut cdf_oof = vec![vec![f64::NAN; n]; t_values.len()];
    let mut pit_raw = vec![f64::NAN; n];
    let mut prox_oof: Vec<Vec<f64>> = vec![Vec::new(); n];
    for o in &outputs {
        for (j, &i) in o.rows.iter().enumerate() {
            forest_oof[i] = o.forest_mean[j];
            if use_boost {
                boost_oof[i] = o.boost[j];
            }
            for (col, q) in q_oof.iter_mut().zip(&o.q) {
                col[i] = q[j];
            }
            for (col, c) in cdf_oof.iter_mut().zip(&o.cdf_thresholds) {
                col[i] = c[j];
            }
            pit_raw[i] = o.pit_raw[j];
            prox_oof[i] = o.prox[j].clone();
        }
    }

    // 2. Learner choice by out-of-fold weighted MSE.
    let candidates: Vec<f64> = match settings.learner {
        LearnerChoice::Forest => vec![1.0],
        LearnerChoice::Boost => vec![0.0],
        LearnerChoice::Auto => vec![1.0, 0.75, 0.5, 0.25, 0.0],
    };
    let blend = |w: f64| -> Vec<f64> {
        (0..n)
            .map(|i| {
                if w >= 1.0 {
                    forest_oof[i]
                } else if w <= 0.0 {
                    boost_oof[i]
                } else {
                    w * forest_oof[i] + (1.0 - w) * boost_oof[i]
                }
            })
            .collect()
    };
    let scores: Vec<LearnerScore> = candidates
        .iter()
        .map(|&w| LearnerScore {
            forest_weight: w,
            mse: wmse(data.y, &blend(w), data.weight),
        })
        .collect();
    let best = scores
        .iter()
        .fold(None::<&LearnerScore>, |acc, s| match acc {
            Some(a) if a.mse <= s.mse || s.mse.is_nan() => Some(a),
            _ => Some(s),
        })
        .map_or(1.0, |s| s.forest_weight);
    let raw_oof = blend(best);
    let learner = LearnerDiagnostics {
        setting: settings.learner,
        chosen: if best >= 1.0 {
            "forest"
        } else if best <= 0.0 {
            "boost"
        } else {
            "blend"
        }
        .to_string(),
        forest_weight: best,
        scores,
    };

    // 3. End-bias correction, cross-fitted.
    let iso_settings = IsotonicSettings {
        increasing: true,
        y_min: Some(bounds.0),
        y_max: Some(bounds.1),
        centred: true,
    };
    let raw_clipped: Vec<f64> = raw_oof
        .iter()
        .map(|v| v.clamp(bounds.0, bounds.1))
        .collect();
    let corrected_cf = cross_fit(&fold, &raw_oof, data.y, data.weight, &iso_settings)?;
    let mse_before = wmse(data.y, &raw_clipped, data.weight);
    // Strength of the correction: raw + strength (iso(raw) - raw), chosen by out-of-fold MSE;
    // strength 0 keeps the uncorrected predictor.
    let with_strength = |lambda: f64| -> Vec<f64> {
        raw_clipped
            .iter()
            .zip(&corrected_cf)
            .map(|(r, c)| r + lambda * (c - r))
            .collect()
    };
    let strength_scores: Vec<CorrectionScore> = [0.0, 0.25, 0.5, 0.75, 1.0]
        .iter()
        .map(|&lambda| CorrectionScore {
            strength: lambda,
            mse: wmse(data.y, &with_strength(lambda), data.weight),
        })
        .collect();
    let best_strength = strength_scores
        .iter()
        .filter(|c| c.strength > 0.0 && c.mse < mse_before)
        .fold(None::<&CorrectionScore>, |acc, c| match acc {
            Some(a) if a.mse <= c.mse => Some(a),
            _ => Some(c),
        })
        .map_or(0.0, |c| c.strength);
    let kept = settings.end_correction && best_strength > 0.0;
    let strength = if kept { best_strength } else { 0.0 };
    let after = with_strength(if kept { strength } else { 1.0 });
    let mse_after = wmse(data.y, &after, data.weight);
    let reason = if !settings.end_correction {
        "end correction disabled in the settings".to_string()
    } else if kept {
        format!(
            "kept at strength {strength}: out-of-fold mean squared error {mse_before:.6} -> \
             {mse_after:.6}"
        )
    } else {
        format!(
            "not kept: at every strength the correction would raise the out-of-fold mean \
             squared error ({mse_before:.6}; at full strength {mse_after:.6})"
        )
    };
    if settings.end_correction && !kept {
        warnings.push(format!("end-bias correction {reason}"));
    }
    let correction = if kept {
        Some(IsotonicMap::fit(
            &raw_oof,
            data.y,
            Some(data.weight),
            &iso_settings,
        )?)
    } else {
        None
    };
    let mid_oof: Vec<f64> = if kept {
        after.clone()
    } else {
        raw_clipped.clone()
    };
    let (bb0, bt0) = end_bias(data.y, &raw_clipped);
    let (bb1, bt1) = end_bias(data.y, &after);
    let end_diag = EndCorrectionDiagnostics {
        enabled: settings.end_correction,
        kept,
        strength,
        reason,
        scores: strength_scores,
        mse_before,
        mse_after,
        slope_before: slope(data.y, &raw_clipped),
        slope_after: slope(data.y, &after),
        bias_bottom_before: bb0,
        bias_top_before: bt0,
        bias_bottom_after: bb1,
        bias_top_after: bt1,
        knots: correction.as_ref().map_or(0, |m| m.x.len()),
    };

    // 4. Band: every method and number of bins cross-fitted; the lowest interval score kept.
    let spread: Vec<f64> = (0..n).map(|i| 0.5 * (q_oof[2][i] - q_oof[0][i])).collect();
    let scale_floor = scale_floor(&spread, bounds);
    let base_of = |method: BandMethod, i: usize| -> BandBase {
        let mid = mid_oof[i];
        match method {
            BandMethod::CvResidual => BandBase::centred(mid),
            BandMethod::Normalized => BandBase {
                scale: spread[i].max(scale_floor),
                ..BandBase::centred(mid)
            },
            BandMethod::Cqr => {
                let shift = mid - q_oof[1][i];
                BandBase {
                    mid,
                    lo: q_oof[0][i] + shift,
                    hi: q_oof[2][i] + shift,
                    scale: 1.0,
                }
            }
        }
    };
    struct Candidate {
        method: BandMethod,
        max_bins: usize,
        locality: f64,
        base: Vec<BandBase>,
        lo: Vec<f64>,
        hi: Vec<f64>,
        few: Vec<bool>,
        score: f64,
    }
    let units = match data.shift {
        Some(sh) => Units::shifted(data.group, sh.ratio, sh.test_ratio),
        None => Units::wells(data.group),
    };
    // Candidates are compared by their mean interval score over the held-out rows; under a
    // covariate shift each row weighs its calibration weight, which estimates the score at the
    // mapped nodes.
    let score_weight: Vec<f64> = match data.shift {
        Some(_) => units.weight.clone(),
        None => vec![1.0; n],
    };
    let band_score = |lo: &[f64], hi: &[f64]| -> f64 {
        let (mut s, mut w) = (0.0, 0.0);
        for i in 0..n {
            s += score_weight[i] * interval_score_one(data.y[i], lo[i], hi[i], alpha);
            w += score_weight[i];
        }
        s / w
    };
    let mut candidates: Vec<Candidate> = Vec::new();
    for method in [
        BandMethod::CvResidual,
        BandMethod::Normalized,
        BandMethod::Cqr,
    ] {
        let base: Vec<BandBase> = (0..n).map(|i| base_of(method, i)).collect();
        for max_bins in 1..=settings.max_bins {
            let (lo, hi, few) = cross_fitted_band(
                method,
                &fold,
                &base,
                data.y,
                &units,
                level,
                max_bins,
                settings.min_wells_per_bin,
                bounds,
            );
            let score = band_score(&lo, &hi);
            candidates.push(Candidate {
                method,
                max_bins,
                locality: 0.0,
                base: base.clone(),
                lo,
                hi,
                few,
                score,
            });
        }
        for &locality in LOCALITIES {
            let (lo, hi, few) = cross_fitted_local_band(
                method, &fold, &base, data.y, &units, level, locality, &prox_oof, bounds,
            );
            let score = band_score(&lo, &hi);
            candidates.push(Candidate {
                method,
                max_bins: 1,
                locality,
                base: base.clone(),
                lo,
                hi,
                few,
                score,
            });
        }
    }
    let chosen = (0..candidates.len()).fold(0, |b, c| {
        if candidates[c].score < candidates[b].score {
            c
        } else {
            b
        }
    });
    let band_candidates: Vec<BandCandidate> = candidates
        .iter()
        .map(|c| BandCandidate {
            method: c.method,
            max_bins: c.max_bins,
            locality: c.locality,
            interval_score: c.score,
            coverage: crate::metrics::coverage(data.y, &c.lo, &c.hi),
            mean_width: crate::metrics::mean_width(&c.lo, &c.hi),
        })
        .collect();
    let Candidate {
        method,
        max_bins: band_bins,
        locality,
        base,
        lo: lo_oof,
        hi: hi_oof,
        few: few_oof,
        ..
    } = candidates.swap_remove(chosen);
    drop(candidates);
    let band = if locality > 0.0 {
        BandCalibration::fit_local(method, &base, data.y, &units, level, locality)
    } else {
        BandCalibration::fit(
            method,
            &base,
            data.y,
            &units,
            level,
            band_bins,
            settings.min_wells_per_bin,
        )
    };
    let need = min_wells_for_band(level);
    let too_few = band.too_few_wells() || !finite_band_possible(n_wells as f64, level);
    let message = too_few.then(|| {
        format!(
            "only {n_wells} wells for `{}`: a finite {:.0} % band needs at least {need} \
             (ceil((n+1)(1-a/2)) <= n); the band is widened to the physical bounds [{}, {}]",
            data.name,
            100.0 * level,
            bounds.0,
            bounds.1
        )
    });
    if let Some(m) = &message {
        warnings.push(m.clone());
    }
    let at_bounds = few_oof.iter().filter(|&&b| b).count();
    if at_bounds > 0 && !too_few {
        warnings.push(format!(
            "{at_bounds} of {n} out-of-fold rows had too few wells in their calibration folds; \
             their held-out bands are the physical bounds"
        ));
    }
    let band_diag = BandDiagnostics {
        method,
        max_bins: band_bins,
        locality,
        scale_floor,
        candidates: band_candidates,
        bins: band.bin_info.clone(),
        too_few_wells: too_few,
        min_wells_needed: need,
        message,
        oof_rows_at_bounds: at_bounds,
        shift: data.shift.map(|_| {
            let covered = |w: &[f64]| -> f64 {
                let (mut c, mut t) = (0.0, 0.0);
                for i in 0..n {
                    t += w[i];
                    if lo_oof[i] <= data.y[i] && data.y[i] <= hi_oof[i] {
                        c += w[i];
                    }
                }
                c / t
            };
            ShiftDiagnostics {
                effective_wells: units.effective_wells(),
                test_weight: units.test_weight,
                coverage_wells: covered(&super::well_unit_weights(data.group)),
                coverage_nodes: covered(&units.weight),
            }
        }),
    };
    // The predictive system uses the band's residual scale and bins.
    let cps_scale: Vec<f64> = base
        .iter()
        .map(|b| {
            if method == BandMethod::Normalized {
                b.scale
            } else {
                1.0
            }
        })
        .collect();

    // 5. Exceedance: conformal predictive system vs recalibrated forest CDF, cross-fitted.
    let mut p_cps = vec![vec![f64::NAN; n]; t_values.len()];
    let mut p_rec = vec![vec![f64::NAN; n]; t_values.len()];
    let mut pit = vec![f64::NAN; n];
    let mut pit_forest = vec![f64::NAN; n];
    for f in 0..k {
        let train: Vec<usize> = (0..n).filter(|&i| fold[i] != f).collect();
        let test: Vec<usize> = (0..n).filter(|&i| fold[i] == f).collect();
        let tr_mid = pick(&mid_oof, &train);
        let tr_units = units.pick(&train);
        let bins = MondrianBins::build(
            &tr_mid,
            &tr_units,
            band_bins,
            settings.min_wells_per_bin as f64,
        );
        let cps = PredictiveSystem::fit_scaled(
            &tr_mid,
            &pick(&cps_scale, &train),
            &pick(data.y, &train),
            &tr_units,
            bins,
        );
        let rec = PitRecalibration::fit(&pick(&pit_raw, &train), &tr_units.weight).ok();
        for &i in &test {
            pit[i] = cps.cdf_scaled(mid_oof[i], cps_scale[i], data.y[i], 0.5);
            if let Some(r) = &rec {
                pit_forest[i] = r.apply(pit_raw[i]);
            }
            for (t, &tv) in t_values.iter().enumerate() {
                p_cps[t][i] = crossing_probability(
                    cps.prob_below(mid_oof[i], cps_scale[i], tv, bounds),
                    data.thresholds[t].above,
                );
                if let Some(r) = &rec {
                    p_rec[t][i] = crossing_probability(
                        bounded_cdf(r.apply(cdf_oof[t][i]), tv, bounds),
                        data.thresholds[t].above,
                    );
                }
            }
        }
    }
    let mut exceed_methods = Vec::new();
    let mut exceed_diag = Vec::new();
    let mut p_chosen = Vec::new();
    for (t, th) in data.thresholds.iter().enumerate() {
        let outcome: Vec<bool> = data
            .y
            .iter()
            .map(|&v| if th.above { v > th.value } else { v < th.value })
            .collect();
        let b_cps = brier(&p_cps[t], &outcome);
        let b_rec = brier(&p_rec[t], &outcome);
        let method = if b_rec < b_cps {
            ExceedMethod::ForestRecalibrated
        } else {
            ExceedMethod::Conformal
        };
        let p = match method {
            ExceedMethod::Conformal => p_cps[t].clone(),
            ExceedMethod::ForestRecalibrated => p_rec[t].clone(),
        };
        let rate = outcome.iter().filter(|&&o| o).count() as f64 / n as f64;
        exceed_methods.push(method);
        exceed_diag.push(ExceedanceDiagnostics {
            label: th.label.clone(),
            value: th.value,
            above: th.above,
            method,
            brier_conformal: b_cps,
            brier_forest: b_rec,
            brier_base_rate: brier(&vec![rate; n], &outcome),
            base_rate: rate,
            reliability: reliability(&p, &outcome, 10),
        });
        p_chosen.push(p);
    }

    // 6. Metrics overall and per step.
    let metrics_of = |rows: &[usize]| -> Result<Metrics, CalibrateError> {
        let truth = pick(data.y, rows);
        let mid = pick(&mid_oof, rows);
        let lo = pick(&lo_oof, rows);
        let hi = pick(&hi_oof, rows);
        let probs: Vec<Vec<f64>> = p_chosen.iter().map(|p| pick(p, rows)).collect();
        let exceed = data
            .thresholds
            .iter()
            .zip(&probs)
            .map(|(th, p)| ExceedInput {
                label: &th.label,
                value: th.value,
                above: th.above,
                prob: p,
            })
            .collect();
        Metrics::compute(&MetricsInput {
            truth: &truth,
            mid: &mid,
            lo: &lo,
            hi: &hi,
            level,
            quantiles: None,
            exceed,
            n_wells: count_wells(&pick(data.group, rows)),
        })
        .map_err(CalibrateError::from)
    };
    let all: Vec<usize> = (0..n).collect();
    let metrics = metrics_of(&all)?;
    let mut steps: Vec<usize> = data.step.to_vec();
    steps.sort_unstable();
    steps.dedup();
    let metrics_by_step = steps
        .iter()
        .map(|&s| {
            let rows: Vec<usize> = (0..n).filter(|&i| data.step[i] == s).collect();
            metrics_of(&rows).map(|metrics| StepMetrics { step: s, metrics })
        })
        .collect::<Result<Vec<_>, _>>()?;

    // Final models on all rows, and the final probability maps.
    let (forest, booster) = fit_models(data, settings, &all, use_boost && best < 1.0, k as u64)?;
    let cps_bins = MondrianBins::build(
        &mid_oof,
        &units,
        band_bins,
        settings.min_wells_per_bin as f64,
    );
    let cps = PredictiveSystem::fit_scaled(&mid_oof, &cps_scale, data.y, &units, cps_bins);
    let recalibration = PitRecalibration::fit(&pit_raw, &units.weight)?;

    let rows = (0..n)
        .map(|i| OofRow {
            truth: data.y[i],
            raw: raw_oof[i],
            corrected: mid_oof[i],
            lo: lo_oof[i],
            hi: hi_oof[i],
            pit: pit[i],
            pit_forest: pit_forest[i],
            fold: fold[i],
            group: data.group[i],
            step: data.step[i],
        })
        .collect();
    let diagnostics = TargetDiagnostics {
        target: data.name.to_string(),
        level,
        n_rows: n,
        n_wells,
        n_folds: k,
        fold_method: settings.fold_method,
        learner,
        end_correction: end_diag,
        band: band_diag,
        exceedance: exceed_diag,
        pit_histogram: pit_histogram(&pit, 10),
        pit_histogram_forest: pit_histogram(&pit_forest, 10),
        metrics,
        metrics_by_step,
        rows,
        warnings,
    };
    Ok(CalibratedTarget {
        diagnostics,
        name: data.name.to_string(),
        level,
        bounds,
        thresholds: data.thresholds.clone(),
        n_features: data.x.ncols(),
        forest,
        booster,
        forest_weight: best,
        correction,
        correction_strength: strength,
        band,
        scale_floor,
        cps,
        recalibration,
        exceed_methods,
    })
}

/// Fit the forest (and the booster when asked) on `rows`; `index` numbers the fit for seeds.
fn fit_models(
    data: &TargetData,
    settings: &CalibrationSettings,
    rows: &[usize],
    with_boost: bool,
    index: u64,
) -> Result<(Forest, Option<Booster>), CalibrateError> {
    let x = data.x.select(Axis(0), rows);
    let y = pick(data.y, rows);
    let w = pick(data.weight, rows);
    let g = pick(data.group, rows);
    let fs = ForestSettings {
        seed: derive_seed(settings.seed, STREAM_FOREST, index),
        ..settings.forest.clone()
    };
    let y2 = Array2::from_shape_fn((y.len(), 1), |(i, _)| y[i]);
    let forest = fs.fit(x.view(), y2.view(), Some(&w))?;
    let booster = if with_boost {
        let bs = BoostSettings {
            seed: derive_seed(settings.seed, STREAM_BOOST, index),
            ..settings.boost.clone()
        };
        Some(bs.fit(x.view(), &y, Some(&w), Some(&g))?)
    } else {
        None
    };
    Ok((forest, booster))
}

fn fit_fold(
    data: &TargetData,
    settings: &CalibrationSettings,
    fold: &[usize],
    f: usize,
    use_boost: bool,
    q_levels: &[f64; 3],
    t_values: &[f64],
) -> Result<FoldOutput, CalibrateError> {
    let n = fold.len();
    let train: Vec<usize> = (0..n).filter(|&i| fold[i] != f).collect();
    let test: Vec<usize> = (0..n).filter(|&i| fold[i] == f).collect();
    let (forest, booster) = fit_models(data, settings, &train, use_boost, f as u64)?;
    let xt = data.x.select(Axis(0), &test);
    let (mean, q, cdf) = forest.predict_with_distribution(xt.view(), 0, q_levels, t_values);
    let pit_raw = forest.cdf_at(xt.view(), 0, &pick(data.y, &test));
    let prox = xt
        .rows()
        .into_iter()
        .map(|r| forest.quantile_weights(&r.to_vec()))
        .collect();
    let boost = booster.map_or_else(|| vec![f64::NAN; test.len()], |b| b.predict(xt.view()));
    Ok(FoldOutput {
        forest_mean: mean,
        boost,
        q: [
            q.column(0).to_vec(),
            q.column(1).to_vec(),
            q.column(2).to_vec(),
        ],
        cdf_thresholds: (0..t_values.len())
            .map(|t| cdf.column(t).to_vec())
            .collect(),
        pit_raw,
        prox,
        rows: test,
    })
}

impl CalibratedTarget {
    /// Predict band, middle and threshold probabilities for every row of `x` (same feature
    /// columns as the training rows). Errors when the column count differs.
    pub fn predict(&self, x: ArrayView2<f64>) -> Result<TargetPrediction, CalibrateError> {
        if x.ncols() != self.n_features {
            return Err(CalibrateError::Length {
                target: self.name.clone(),
                what: "feature columns",
                got: x.ncols(),
                expected: self.n_features,
            });
        }
        let n = x.nrows();
        let a = 1.0 - self.level;
        let w = self.forest_weight;
        let need_dist = self.band.method != BandMethod::CvResidual
            || self
                .exceed_methods
                .contains(&ExceedMethod::ForestRecalibrated);
        let t_values: Vec<f64> = self.thresholds.iter().map(|t| t.value).collect();
        let levels = [a / 2.0, 0.5, 1.0 - a / 2.0];
        // One walk of the forest gives the mean and the distribution together, and for a
        // localised band the proximity weights' side quantiles from the same leaves.
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
        let nt = self.thresholds.len();
        let mids: Vec<f64> = (0..n)
            .into_par_iter()
            .map(|i| {
                let raw = match (&forest_mean, &boost) {
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
            })
            .collect();
        let scale_of = |i: usize| -> f64 {
            match (&self.band.method, &dist) {
                (BandMethod::Normalized, Some((q, _))) => {
                    (0.5 * (q[[i, 2]] - q[[i, 0]])).max(self.scale_floor)
                }
                _ => 1.0,
            }
        };
        let edges: Vec<(f64, f64)> = (0..n)
            .into_par_iter()
            .map(|i| {
                let mid = mids[i];
                if mid.is_nan() {
                    return (f64::NAN, f64::NAN);
                }
                let base = match (&self.band.method, &dist) {
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
                        scale: scale_of(i),
                        ..BandBase::centred(mid)
                    },
                };
                let (lo, _, hi) = match &local_q {
                    Some(lq) => self
                        .band
                        .apply_quantiles(base, self.bounds, lq[i].0, lq[i].1),
                    None => self.band.apply(base, self.bounds),
                };
                (lo, hi)
            })
            .collect();
        let exceed: Vec<Vec<f64>> = (0..nt)
            .map(|t| {
                let th = &self.thresholds[t];
                (0..n)
                    .into_par_iter()
                    .map(|i| {
                        let mid = mids[i];
                        if mid.is_nan() {
                            return f64::NAN;
                        }
                        let below = match (&self.exceed_methods[t], &dist) {
                            (ExceedMethod::ForestRecalibrated, Some((_, c))) => bounded_cdf(
                                self.recalibration.apply(c[[i, t]]),
                                th.value,
                                self.bounds,
                            ),
                            _ => self.cps.prob_below(mid, scale_of(i), th.value, self.bounds),
                        };
                        crossing_probability(below, th.above)
                    })
                    .collect()
            })
            .collect();
        let out = TargetPrediction {
            lo: edges.iter().map(|e| e.0).collect(),
            mid: mids,
            hi: edges.iter().map(|e| e.1).collect(),
            exceed,
        };
        Ok(out)
    }
}
