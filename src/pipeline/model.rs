//! The saved, calibrated model (`model.json`) and prediction of every node of a step.

use super::PipelineError;
use crate::applicability::{Applicability, Assessment};
use crate::calibrate::CalibratedTarget;
use crate::calibrate::predict::NodeContext;
use crate::calibrate::shift::ShiftSummary;
use crate::project::{Convention, TargetSpec, ThresholdSpec};
use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Format version of `model.json`; bumped whenever its layout changes.
pub const MODEL_FORMAT: u32 = 1;

/// Everything needed to map a project with the same attributes.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct SavedModel {
    /// Layout version, [`MODEL_FORMAT`] when written by this build.
    pub format: u32,
    /// tidemark version that wrote the model.
    pub version: String,
    /// Feature columns: attributes in manifest order, then `step`.
    pub feature_names: Vec<String>,
    /// Step names of the training project (the `step` feature is the index into this list).
    pub step_names: Vec<String>,
    /// Targets, in training order.
    pub targets: Vec<TargetSpec>,
    /// Decision thresholds, in manifest order.
    pub thresholds: Vec<ThresholdSpec>,
    /// Label convention.
    pub convention: Convention,
    /// Nominal band level, e.g. 0.8 for P10-P90.
    pub level: f64,
    /// One calibrated model per target.
    pub calibrated: Vec<CalibratedTarget>,
    /// Area of applicability.
    pub applicability: Applicability,
    /// Training wells (name, x, y), one entry per distinct position, for pictures and scoring.
    pub wells: Vec<(String, f64, f64)>,
    /// How representative the wells' attributes are of the mapped nodes (absent in models
    /// written before it was computed, or when it could not be estimated).
    #[serde(default)]
    pub wells_vs_nodes: Option<ShiftSummary>,
}

/// Predicted maps of one target on one step (values in node order, `NaN` where a node has a null
/// attribute).
#[derive(Clone, Debug, Default)]
pub struct TargetMaps {
    /// Lower band edge: the `(1 - level) / 2` quantile.
    pub lo: Vec<f64>,
    /// Most likely change (corrected median).
    pub mid: Vec<f64>,
    /// Upper band edge.
    pub hi: Vec<f64>,
    /// Probability of crossing each of the target's thresholds, in [`SavedModel::thresholds_of`] order.
    pub exceed: Vec<Vec<f64>>,
    /// Probability that anything changed (targets with a "no change" atom only).
    pub p_change: Option<Vec<f64>>,
}

fn pick_rows(v: &[f64], rows: &[usize]) -> Vec<f64> {
    rows.iter().map(|&r| v[r]).collect()
}

/// Everything predicted on one step.
#[derive(Clone, Debug, Default)]
pub struct StepMaps {
    /// Per target, in model order.
    pub targets: Vec<TargetMaps>,
    /// Applicability per node.
    pub applicability: Assessment,
}

impl SavedModel {
    /// Thresholds that belong to target `t`, in manifest order.
    pub fn thresholds_of(&self, t: usize) -> Vec<&ThresholdSpec> {
        let name = &self.targets[t].name;
        self.thresholds
            .iter()
            .filter(|th| &th.target == name)
            .collect()
    }

    /// File-name labels of the lower and upper band edges under the model's convention,
    /// e.g. (`p10`, `p90`) for a percentile 80 % band and (`p90`, `p10`) for the exceedance one.
    pub fn band_labels(&self) -> (String, String) {
        band_labels(self.convention, self.level)
    }

    /// Predicts every row of `x` located at `xy` (world coordinates, one per row; rows with a
    /// missing attribute give `NaN` everywhere and are not in the area of applicability). Bands
    /// widen with each row's dissimilarity to the training rows and with its distance to the
    /// nearest well beyond what cross-validation spanned (each target's spread rule).
    pub fn predict(
        &self,
        x: ArrayView2<f64>,
        xy: &[(f64, f64)],
    ) -> Result<StepMaps, PipelineError> {
        let n = x.nrows();
        let applicability = self.applicability.assess(x);
        let n_attr = self.feature_names.len() - 1;
        let valid: Vec<usize> = (0..n)
            .filter(|&r| x.row(r).iter().take(n_attr).all(|v| v.is_finite()))
            .collect();
        let compact: Array2<f64> = x.select(Axis(0), &valid);
        let scatter = |vals: &[f64]| -> Vec<f64> {
            let mut out = vec![f64::NAN; n];
            for (k, &r) in valid.iter().enumerate() {
                out[r] = vals[k];
            }
            out
        };
        let di = pick_rows(&applicability.di, &valid);
        let distance: Vec<f64> = valid
            .par_iter()
            .map(|&r| {
                let (x0, y0) = xy.get(r).copied().unwrap_or((f64::NAN, f64::NAN));
                self.wells
                    .iter()
                    .map(|w| ((w.1 - x0).powi(2) + (w.2 - y0).powi(2)).sqrt())
                    .fold(f64::INFINITY, f64::min)
            })
            .collect();
        let context = NodeContext {
            dissimilarity: &di,
            distance: &distance,
        };
        let mut targets = Vec::new();
        for cal in &self.calibrated {
            let p = cal
                .predict_at(compact.view(), Some(context))
                .map_err(|source| PipelineError::Calibrate {
                    target: cal.name.clone(),
                    source,
                })?;
            targets.push(TargetMaps {
                lo: scatter(&p.lo),
                mid: scatter(&p.mid),
                hi: scatter(&p.hi),
                exceed: p.exceed.iter().map(|e| scatter(e)).collect(),
                p_change: p.p_change.as_deref().map(scatter),
            });
        }
        Ok(StepMaps {
            targets,
            applicability,
        })
    }

    /// Reads a saved model, checking its format version.
    pub fn load(path: &Path) -> Result<Self, PipelineError> {
        let text = std::fs::read_to_string(path).map_err(|e| {
            PipelineError::Invalid(format!("{}: cannot read the model: {e}", path.display()))
        })?;
        let probe: serde_json::Value =
            serde_json::from_str(&text).map_err(|e| PipelineError::json(path, e))?;
        let format = probe.get("format").and_then(serde_json::Value::as_u64);
        if format != Some(u64::from(MODEL_FORMAT)) {
            return Err(PipelineError::Invalid(format!(
                "{}: model format {} is not the format this build reads ({MODEL_FORMAT}); \
                 re-run `tidemark run` to save the model again",
                path.display(),
                format.map_or("missing".to_string(), |f| f.to_string())
            )));
        }
        serde_json::from_value(probe).map_err(|e| PipelineError::json(path, e))
    }

    /// Writes the model atomically.
    pub fn save(&self, path: &Path) -> Result<(), PipelineError> {
        let text = serde_json::to_string(self).map_err(|e| PipelineError::json(path, e))?;
        crate::io::atomic::write_bytes(path, text.as_bytes())?;
        Ok(())
    }
}

/// File-name labels (`pNN`) of the lower and upper band edges for a convention and level.
pub fn band_labels(convention: Convention, level: f64) -> (String, String) {
    let tail = (100.0 * (1.0 - level) / 2.0).round() as i64;
    let (low_pct, high_pct) = (tail, 100 - tail);
    match convention {
        Convention::Percentile => (format!("p{low_pct:02}"), format!("p{high_pct:02}")),
        Convention::Exceedance => (format!("p{high_pct:02}"), format!("p{low_pct:02}")),
    }
}

/// One sentence that states the label convention, for metadata and captions.
pub fn convention_text(convention: Convention, level: f64) -> String {
    let (lo, hi) = band_labels(convention, level);
    let pct = (level * 100.0).round();
    match convention {
        Convention::Percentile => format!(
            "Percentile convention: {} is the low value ({}% of outcomes fall below it), {} the high \
             value; the {lo}-{hi} band is a {pct}% prediction interval; P50 is the median.",
            lo.to_uppercase(),
            lo.trim_start_matches('p').trim_start_matches('0'),
            hi.to_uppercase()
        ),
        Convention::Exceedance => format!(
            "Exceedance (reserves) convention: {} is the low value ({}% of outcomes exceed it), {} \
             the high value; the band is a {pct}% prediction interval; P50 is the median.",
            lo.to_uppercase(),
            lo.trim_start_matches('p'),
            hi.to_uppercase()
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_follow_the_convention() {
        assert_eq!(
            band_labels(Convention::Percentile, 0.8),
            ("p10".into(), "p90".into())
        );
        assert_eq!(
            band_labels(Convention::Exceedance, 0.8),
            ("p90".into(), "p10".into())
        );
        assert_eq!(
            band_labels(Convention::Percentile, 0.9),
            ("p05".into(), "p95".into())
        );
        assert!(convention_text(Convention::Percentile, 0.8).contains("P10 is the low value"));
        assert!(convention_text(Convention::Exceedance, 0.8).contains("P90 is the low value"));
    }
}
