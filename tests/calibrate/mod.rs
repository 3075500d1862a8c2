//! Integration tests: calibrate (folds, isotonic regression, conformal bands, exceedance
//! probabilities, metrics).

pub(crate) mod between_wells;
mod coverage;
mod end_correction;
mod folds;
mod generated;
mod hurdle;
mod isotonic;
mod kriging;
mod local;
mod metrics;
mod pit;
mod prior;
mod shift;
mod stages;
mod target;
mod too_few;
mod widening;
