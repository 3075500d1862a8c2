//! The main job, end to end: `run` (fit, calibrate, map, rank, report), `predict` (apply a saved
//! model, optionally to one tile of the grid) and `score` (maps against a synthetic field's truth).
//!
//! The pipeline is glue: every number it writes comes from [`crate::calibrate`],
//! [`crate::applicability`] and [`crate::decide`]. What it owns is the file layout of a results
//! folder, the P10/P50/P90 labels, provenance (`run.json`) and the refusal to write over inputs.
//!
//! Its modules call only downwards (a test keeps it so):
//! - [`run`]: the main job as a sequence of stages;
//! - [`assemble`]: the review page's input from what the run produced;
//! - [`studies`] (infill ranking, `summary.json`, sensitivity studies), [`pictures`], [`score`],
//!   [`predict`];
//! - [`fit`]: one target fitted and calibrated on chosen rows and columns, the whole model of a run;
//! - [`stages`], [`warnings`], [`outputs`], [`model`] and this file's shared items.

pub mod assemble;
pub mod fit;
pub mod kinds;
pub mod model;
pub mod nodes;
pub mod outputs;
pub mod pictures;
pub mod predict;
pub mod run;
pub mod scale;
pub mod score;
pub mod stages;
pub mod studies;
pub mod totals;
pub mod warnings;

use std::path::PathBuf;

/// Cautions printed with every result: in the README, `run.json`, `summary.json` and the report.
pub const CAUTIONS: &[&str] = &[
    "These maps and rankings are decision support, not a reserves estimate.",
    "Bands and probabilities are calibrated on the wells available; they cannot anticipate effects \
     that no well has sampled. Predictions outside the area of applicability are extrapolations.",
    "Wells usually stand where the reservoir changed most, so bands calibrated on them tend to be \
     wider between wells than their nominal level implies; summary.json (wells_vs_nodes) says how \
     typical of the mapped nodes the wells' attributes are.",
    "Have results reviewed by qualified reservoir engineers and geoscientists before they inform \
     drilling, development or reserves decisions or any disclosure, and follow the rules and \
     reporting standards that apply where the field lies.",
];

/// Added to [`CAUTIONS`] when every calibration well has a stated kind and none of them is an
/// observer (measured on generated fields: `calib_bench --observers 8`, DEVELOPERS.md).
pub const FLOWING_WELLS_CAUTION: &str = "Every calibration well is a producer or an injector: \
     they stand at the sources of change, so the bands between them are likely wider than their \
     nominal level and the P50 leans toward the wells' larger changes. On generated fields, 8 \
     observation wells added to 45 flowing ones improved the bands' interval score by 3 to 6 \
     points; add any observation, appraisal or pilot well that measured a change.";

/// The cautions of a run whose calibration wells have the kinds `kinds` (one per well; `None`
/// where the wells file gives no kind): [`CAUTIONS`], then [`FLOWING_WELLS_CAUTION`] when every
/// well has a kind and none is an observer.
pub fn cautions(kinds: &[Option<crate::io::wells::WellKind>]) -> Vec<String> {
    use crate::io::wells::WellKind;
    let mut out: Vec<String> = CAUTIONS.iter().map(|s| s.to_string()).collect();
    let all_flowing = !kinds.is_empty()
        && kinds
            .iter()
            .all(|k| matches!(k, Some(WellKind::Producer | WellKind::Injector)));
    if all_flowing {
        out.push(FLOWING_WELLS_CAUTION.to_string());
    }
    out
}

/// Errors of the pipeline. Each wraps the error of the stage it came from.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// Loading or checking the project failed.
    #[error(transparent)]
    Project(#[from] crate::project::ProjectError),
    /// Reading or writing a file failed.
    #[error(transparent)]
    Io(#[from] crate::io::IoError),
    /// Calibration of a target failed.
    #[error("target {target}: {source}")]
    Calibrate {
        /// Target name.
        target: String,
        /// Cause.
        source: crate::calibrate::CalibrateError,
    },
    /// Fitting a forest for importance failed.
    #[error(transparent)]
    Ensemble(#[from] crate::ensemble::EnsembleError),
    /// The area of applicability could not be built.
    #[error(transparent)]
    Applicability(#[from] crate::applicability::ApplicabilityError),
    /// Infill ranking failed.
    #[error(transparent)]
    Decide(#[from] crate::decide::DecideError),
    /// Drawing a picture or the report failed.
    #[error(transparent)]
    Report(#[from] crate::report::ReportError),
    /// A saved model or results folder does not fit what is asked of it.
    #[error("{0}")]
    Invalid(String),
    /// Field totals could not be computed.
    #[error(transparent)]
    Spatial(#[from] crate::spatial::SpatialError),
    /// JSON (de)serialisation failed.
    #[error("{path}: {source}")]
    Json {
        /// File concerned.
        path: PathBuf,
        /// Cause.
        source: serde_json::Error,
    },
}

impl PipelineError {
    pub(crate) fn json(path: impl Into<PathBuf>, source: serde_json::Error) -> Self {
        Self::Json {
            path: path.into(),
            source,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::wells::WellKind::{Injector, Observer, Producer};

    #[test]
    fn flowing_wells_caution_only_when_every_kind_is_known_and_none_observes() {
        let with = |kinds: &[Option<crate::io::wells::WellKind>]| {
            cautions(kinds).iter().any(|c| c == FLOWING_WELLS_CAUTION)
        };
        assert!(with(&[Some(Producer), Some(Injector), Some(Producer)]));
        assert!(!with(&[Some(Producer), Some(Observer)]));
        // A well without a kind may be an observer: say nothing.
        assert!(!with(&[Some(Producer), None]));
        assert!(!with(&[]));
        assert_eq!(cautions(&[None]).len(), CAUTIONS.len());
    }
}
