//! Honest uncertainty for one target, with wells as the unit of validation.
//!
//! Rows of one well (all its steps), and of neighbouring wells, are alike, so every out-of-fold
//! quantity here holds out whole wells ([`folds`]). On those held-out wells the module
//!
//! - compares the learners by an out-of-fold proper score,
//! - corrects the shrinkage towards the mean at the low and high ends with a cross-fitted
//!   isotonic map of prediction to truth ([`isotonic`]; Best & Chakravarti 1990, ties per
//!   de Leeuw 1977),
//! - calibrates the band by conformal prediction on held-out-well scores ([`conformal`]:
//!   split conformal, Lei et al. 2018; the cross-validation residual band beside CV+ of
//!   Barber, Candes, Ramdas & Tibshirani 2021; conformalised quantile regression, Romano,
//!   Patterson & Candes 2019), in Mondrian bins of the predicted value (Vovk et al. 2005),
//! - and calibrates exceedance probabilities ([`exceedance`]: conformal predictive systems,
//!   Vovk, Shen, Manokhin & Xie 2019; isotonic recalibration of the forest's CDF, Kuleshov,
//!   Fenner & Ermon 2018).
//!
//! When the wells are too few for a finite band at the requested level, the answer says so and the
//! band widens to the target's physical bounds.

pub mod conformal;
pub mod exceedance;
pub mod folds;
pub mod hurdle;
pub mod isotonic;
pub mod profile;
pub mod shift;
pub mod target;

pub use target::{
    BandCandidate, BandDiagnostics, CalibratedTarget, CalibrationSettings, CorrectionScore,
    EndCorrectionDiagnostics, ExceedanceDiagnostics, LearnerDiagnostics, LearnerScore, OofRow,
    StepMetrics, TargetData, TargetDiagnostics, TargetPrediction, Threshold, calibrate_target,
};

use serde::{Deserialize, Serialize};

/// How rows are split into folds. Every method keeps all rows of one well in one fold.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FoldMethod {
    /// k folds of whole wells, wells dealt to folds in a seeded random order (default).
    #[default]
    Wells,
    /// k spatial blocks: wells clustered by location (k-means with a seeded k-means++ start).
    Blocks,
    /// Leave one well out: one fold per well (small projects).
    OneWell,
}

/// Which learner makes the point prediction.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LearnerChoice {
    /// Forest, booster or a blend of the two, whichever has the lowest out-of-fold squared error.
    #[default]
    Auto,
    /// The bagged forest only.
    Forest,
    /// The gradient-boosted trees only.
    Boost,
}

/// Errors of the calibration module family.
#[derive(Debug, thiserror::Error)]
pub enum CalibrateError {
    /// A setting is outside its valid range.
    #[error("calibration setting `{key}` must be {expected}, got {got}")]
    Setting {
        /// Setting name as in the manifest's `[calibration]` / `[model]` table.
        key: &'static str,
        /// The valid range, in words.
        expected: &'static str,
        /// The value given.
        got: String,
    },
    /// Two inputs that must have one entry per row disagree in length.
    #[error("target `{target}`: `{what}` has {got} entries, expected {expected} (one per row)")]
    Length {
        /// Target name.
        target: String,
        /// Which input.
        what: &'static str,
        /// Its length.
        got: usize,
        /// The expected length.
        expected: usize,
    },
    /// A value that must be finite (or positive) is not.
    #[error("target `{target}`: `{what}` at row {row} is {value}, expected {expected}")]
    BadValue {
        /// Target name.
        target: String,
        /// Which input.
        what: &'static str,
        /// Row index (0-based) within the rows of this target.
        row: usize,
        /// The value given.
        value: f64,
        /// What was expected, in words.
        expected: &'static str,
    },
    /// Not enough wells to hold any out.
    #[error(
        "target `{target}`: {wells} well(s) with {rows} row(s); at least {needed} wells are needed to hold wells out"
    )]
    TooFewWells {
        /// Target name.
        target: String,
        /// Distinct wells.
        wells: usize,
        /// Rows.
        rows: usize,
        /// Wells needed.
        needed: usize,
    },
    /// The covariate shift from wells to nodes could not be estimated.
    #[error("covariate shift from the wells to the nodes: {0}")]
    Shift(String),
    /// Isotonic regression input was unusable.
    #[error("isotonic regression: {0}")]
    Isotonic(String),
    /// A forest or booster could not be fitted (bad settings or data).
    #[error("model: {0}")]
    Ensemble(#[from] crate::ensemble::EnsembleError),
    /// Metrics could not be computed.
    #[error(transparent)]
    Metrics(#[from] crate::metrics::MetricsError),
}

/// Number of distinct well ids in `group`.
pub fn count_wells(group: &[usize]) -> usize {
    let mut ids = group.to_vec();
    ids.sort_unstable();
    ids.dedup();
    ids.len()
}

/// Per-row weights that give every well a total weight of one: `1 / (rows of that well)`.
///
/// Wells, not rows, are the exchangeable units of held-out validation; pooling each well's
/// empirical distribution of scores with equal weight is the "pooled CDF" construction for
/// two-layer hierarchical data (Dunn, Wasserman & Ramdas, "Distribution-free prediction sets for
/// two-layer hierarchical models", JASA 2023).
pub fn well_unit_weights(group: &[usize]) -> Vec<f64> {
    let mut counts = std::collections::HashMap::<usize, usize>::new();
    for &g in group {
        *counts.entry(g).or_insert(0) += 1;
    }
    group.iter().map(|g| 1.0 / counts[g] as f64).collect()
}
