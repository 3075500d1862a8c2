//! Tree ensembles that know their leaves: binned regression trees, bagged forests with quantile
//! weights, and gradient boosting.
//!
//! Why this module exists: calibrated uncertainty needs more than point predictions. A quantile
//! regression forest must know which training rows share each leaf, conformal calibration needs
//! out-of-bag and per-tree predictions, and the end-bias correction needs a second learner
//! (gradient boosting). So tidemark owns its tree engine.
//!
//! Methods and where they come from:
//! - Random forests with bootstrap aggregation and random feature subsets per split
//!   (Breiman 2001, "Random forests", Machine Learning 45:5-32), regression trees grown by
//!   variance reduction (Breiman, Friedman, Olshen & Stone 1984, CART).
//! - Histogram-based split finding on quantile bins with histogram subtraction and a learned
//!   direction for missing values (Ke et al. 2017, "LightGBM", NeurIPS; Chen & Guestrin 2016,
//!   "XGBoost", KDD, sparsity-aware split finding).
//! - Quantile regression forests (Meinshausen 2006, JMLR 7:983-999): the forest's leaves define
//!   weights over the training rows, and the weighted empirical distribution of the training
//!   targets estimates the conditional distribution P(Y <= y | x).
//! - Gradient boosting (Friedman 2001, "Greedy function approximation", Ann. Stat. 29(5)) with
//!   squared, absolute, Huber and quantile (pinball) losses, and row subsampling (Friedman 2002,
//!   "Stochastic gradient boosting", CSDA 38(4)).
//! - Non-crossing quantiles by sorting (rearrangement; Chernozhukov, Fernandez-Val & Galichon
//!   2010, Econometrica 78(3)).
//! - Permutation importance (Breiman 2001).
//!
//! Layout: [`binning`] (quantile bins), [`tree`] (flat node arrays, growing, `apply`),
//! [`forest`] (bagged forests, OOB, importance), [`quantile`] (weighted quantiles and the
//! quantile-forest kernel), [`proximity`] (quantile-forest weights of the training rows at
//! prediction time), [`boost`] (gradient boosting), [`persist`] (versioned JSON).
//!
//! Determinism: every random choice derives its seed from the user's seed and the index of the
//! item (tree, round, feature, repeat), never from thread identity, and every reduction runs in
//! a fixed order. Results are identical for any thread count and any row order of prediction.

pub mod binning;
pub mod boost;
pub mod forest;
pub mod persist;
pub mod proximity;
pub mod quantile;
pub mod tree;

pub use binning::BinMapper;
pub use boost::{BoostSettings, Booster, Loss, QuantileBoosters, fit_quantile_boosters};
pub use forest::{Forest, ForestSettings};
pub use quantile::{weighted_quantile, weighted_quantiles};
pub use tree::Tree;

use ndarray::ArrayView2;

/// Errors raised by the ensemble engine: bad settings, bad training data, or a persisted model
/// that this build cannot read.
#[derive(Debug, thiserror::Error)]
pub enum EnsembleError {
    /// A setting is outside its valid range, e.g. "min_samples_leaf must be at least 1, got 0".
    #[error("{name} {requirement}, got {got}")]
    InvalidSetting {
        /// The setting's field name.
        name: &'static str,
        /// What the setting must satisfy, e.g. "must be at least 1".
        requirement: String,
        /// The value that was given.
        got: String,
    },
    /// There is nothing to fit: no rows, no features or no outputs.
    #[error("empty training data: {0}")]
    EmptyData(String),
    /// Two inputs disagree in size.
    #[error("shape mismatch: {what} has {got}, expected {expected}")]
    ShapeMismatch {
        /// Which input is the wrong size.
        what: String,
        /// The size that was expected.
        expected: usize,
        /// The size that was given.
        got: usize,
    },
    /// A training target is NaN or infinite.
    #[error("training target is not finite at row {row}, output {output} (value {value})")]
    NonFiniteTarget {
        /// Row index (0-based).
        row: usize,
        /// Output (target column) index (0-based).
        output: usize,
        /// The offending value.
        value: f64,
    },
    /// A training feature is infinite (NaN is allowed and means missing).
    #[error(
        "training feature is infinite at row {row}, feature {feature}; NaN marks a missing value, infinities are not allowed"
    )]
    InfiniteFeature {
        /// Row index (0-based).
        row: usize,
        /// Feature (column) index (0-based).
        feature: usize,
    },
    /// Sample weights are negative, not finite, or all zero.
    #[error("invalid sample weights: {0}")]
    InvalidWeights(String),
    /// A persisted model has a different format name or version than this build reads.
    #[error(
        "model file format mismatch: found {found_format} version {found_version}, this build reads {expected_format} version {expected_version}"
    )]
    FormatVersion {
        /// Format name found in the file.
        found_format: String,
        /// Version found in the file.
        found_version: u32,
        /// Format name this build reads.
        expected_format: &'static str,
        /// Version this build reads.
        expected_version: u32,
    },
    /// The persisted model is not valid JSON or does not match the model layout.
    #[error("model JSON: {0}")]
    Json(#[from] serde_json::Error),
    /// A fitted model is internally inconsistent (e.g. a hand-edited file).
    #[error("corrupt model: {0}")]
    CorruptModel(String),
}

/// Returns an `InvalidSetting` error.
pub(crate) fn invalid(
    name: &'static str,
    requirement: impl Into<String>,
    got: impl std::fmt::Display,
) -> EnsembleError {
    EnsembleError::InvalidSetting {
        name,
        requirement: requirement.into(),
        got: got.to_string(),
    }
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014), used to derive independent seeds.
pub(crate) fn splitmix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Derives the seed of item `index` in stream `stream` from a user seed. Depends only on the
/// three numbers, never on threads.
pub(crate) fn derive_seed(seed: u64, stream: u64, index: u64) -> u64 {
    splitmix64(splitmix64(seed ^ splitmix64(stream.wrapping_mul(0xA24B_AED4_963E_E407))) ^ index)
}

/// Checks the feature matrix and targets shared by the forest and booster: non-empty,
/// matching row counts, finite targets, no infinite features.
pub(crate) fn check_training_x(x: ArrayView2<f64>) -> Result<(), EnsembleError> {
    let (n, p) = x.dim();
    if n == 0 {
        return Err(EnsembleError::EmptyData("x has no rows".into()));
    }
    if p == 0 {
        return Err(EnsembleError::EmptyData("x has no feature columns".into()));
    }
    for ((row, feature), v) in x.indexed_iter() {
        if v.is_infinite() {
            return Err(EnsembleError::InfiniteFeature { row, feature });
        }
    }
    Ok(())
}

/// Checks optional sample weights: length, finite, non-negative, positive sum. Returns the
/// weights (all ones when none were given).
pub(crate) fn check_weights(weights: Option<&[f64]>, n: usize) -> Result<Vec<f64>, EnsembleError> {
    match weights {
        None => Ok(vec![1.0; n]),
        Some(w) => {
            if w.len() != n {
                return Err(EnsembleError::ShapeMismatch {
                    what: "weights".into(),
                    expected: n,
                    got: w.len(),
                });
            }
            if let Some(i) = w.iter().position(|v| !v.is_finite() || *v < 0.0) {
                return Err(EnsembleError::InvalidWeights(format!(
                    "weight at row {i} is {}, weights must be finite and non-negative",
                    w[i]
                )));
            }
            if w.iter().sum::<f64>() <= 0.0 {
                return Err(EnsembleError::InvalidWeights("all weights are zero".into()));
            }
            Ok(w.to_vec())
        }
    }
}

/// Copies rows `start..end` of a (possibly strided) view into the layout the tree walk
/// reads: row-major, each value twice, first with NaN replaced by +inf, then with NaN
/// replaced by -inf. A split compares the first copy when missing values go right and the
/// second when they go left, so one `>` sends NaN to its learned side without a branch.
pub(crate) fn copy_rows_wide(x: &ArrayView2<f64>, start: usize, end: usize, buf: &mut Vec<f64>) {
    buf.clear();
    for r in start..end {
        for &v in x.row(r) {
            push_wide(buf, v);
        }
    }
}

/// Appends one value in the two-copy layout of [`copy_rows_wide`].
#[inline]
pub(crate) fn push_wide(buf: &mut Vec<f64>, v: f64) {
    if v.is_nan() {
        buf.push(f64::INFINITY);
        buf.push(f64::NEG_INFINITY);
    } else {
        buf.push(v);
        buf.push(v);
    }
}

/// Copies rows of a (possibly strided) view into a contiguous row-major buffer.
pub(crate) fn copy_rows(x: &ArrayView2<f64>, start: usize, end: usize, buf: &mut Vec<f64>) {
    buf.clear();
    for r in start..end {
        buf.extend(x.row(r).iter().copied());
    }
}

/// Rows per parallel prediction task.
pub(crate) const PREDICT_CHUNK: usize = 128;
