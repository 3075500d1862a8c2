//! Honest uncertainty for one target, with wells as the unit of validation.
//!
//! Rows of one well (all its steps), and of neighbouring wells, are alike, so every out-of-fold
//! quantity here holds out whole wells ([`folds`]) and every row weighs its share of a well
//! ([`units`]). On those held-out wells the module
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
//!   Fenner & Ermon 2018),
//! - and corrects the middle and band by kriging the held-out wells' errors (regression kriging,
//!   Odeh, McBratney & Chittleborough 1995; [`kriging`] for the solver, [`stages::kriging`] for
//!   the decision).
//!
//! When the wells are too few for a finite band at the requested level, the answer says so and the
//! band widens to the target's physical bounds.
//!
//! [`calibrate_target`] ([`target`]) runs these as named stages ([`stages`], one module each,
//! listed there with their inputs and outputs) on a target's [`TargetData`] ([`input`]);
//! [`CalibratedTarget::predict`] applies the result at the grid nodes, with a hurdle target's
//! probability of a change adjusted to the nodes' share of change when the caller has set one
//! ([`prior`]; Saerens, Latinne & Decaestecker 2002). The method modules
//! ([`folds`], [`isotonic`], [`conformal`], [`exceedance`], [`shift`], [`units`], [`prior`],
//! [`kriging`]) sit below the
//! stages and know nothing of them; this module only declares and re-exports.

pub mod conformal;
pub mod error;
pub mod exceedance;
pub mod folds;
pub mod hurdle;
pub mod input;
pub mod isotonic;
pub mod kriging;
pub mod predict;
pub mod prior;
pub mod profile;
pub mod shift;
pub mod stages;
pub mod target;
pub mod units;

pub use error::CalibrateError;
pub use folds::FoldMethod;
pub use input::{CalibrationSettings, LearnerChoice, TargetData, Threshold};
pub use stages::band::{BandCandidate, BandDiagnostics};
pub use stages::correction::{CorrectionScore, EndCorrectionDiagnostics};
pub use stages::exceedance::ExceedanceDiagnostics;
pub use stages::learner::{LearnerDiagnostics, LearnerScore};
pub use stages::metrics::StepMetrics;
pub use target::{CalibratedTarget, OofRow, TargetDiagnostics, TargetPrediction, calibrate_target};
pub use units::{count_wells, well_unit_weights};
