//! Errors of the calibration module family: bad settings or inputs (naming the setting, target,
//! input and row), too few wells to hold any out, and failures passed up from the isotonic fit,
//! the covariate-shift estimate, the ensembles and the metrics.

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
