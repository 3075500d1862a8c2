//! The saved, calibrated model (`model.json`) and prediction of every node of a step.

use super::PipelineError;
use crate::applicability::{Applicability, Assessment, Ground, node_histories};
use crate::calibrate::CalibratedTarget;
use crate::calibrate::predict::{ConditionalPart, NodeContext};
use crate::calibrate::shift::ShiftSummary;
use crate::project::{Convention, TargetSpec, ThresholdSpec};
use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Format version of `model.json`; bumped whenever its layout changes.
///
/// Version 2 added the ground check ([`SavedModel::ground`]) and the range tolerance of the area
/// of applicability; version 1 models still load and map with the row check alone (no ground
/// check, plain range). Version 3 added each target's residual kriging
/// ([`CalibratedTarget::kriging`]); version 1 and 2 models load without it and map as before.
/// Version 4 added each target's smoothing width ([`SavedModel::smoothing`]); older models map
/// every target from the plain attributes.
pub const MODEL_FORMAT: u32 = 4;

/// Oldest `model.json` format this build reads.
pub const OLDEST_MODEL_FORMAT: u32 = 1;

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
    /// Area of applicability (rows: one node at one step).
    pub applicability: Applicability,
    /// Ground the wells do not sample (locations: attribute history over the training steps);
    /// absent in models written before it was used, or when too few wells have a full history.
    #[serde(default)]
    pub ground: Option<Ground>,
    /// Training wells (name, x, y), one entry per distinct position, for pictures and scoring.
    pub wells: Vec<(String, f64, f64)>,
    /// How representative the wells' attributes are of the mapped nodes (absent in models
    /// written before it was computed, or when it could not be estimated).
    #[serde(default)]
    pub wells_vs_nodes: Option<ShiftSummary>,
    /// Per target (model order), the Gaussian width in metres its attribute maps are smoothed by
    /// before its trees see them ([`crate::smooth`], chosen by `pipeline::scale`); 0 = the plain
    /// attributes. Empty (models before format 4) = 0 for every target.
    #[serde(default)]
    pub smoothing: Vec<f64>,
    /// Per target, how every smoothing width scored in cross-validation and which was kept
    /// ([`super::scale::WidthChoice`]); empty in models before format 4.
    #[serde(default)]
    pub smoothing_choice: Vec<super::scale::WidthChoice>,
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
    /// The model's conditional middle and scale at every node, for the node distributions of the
    /// field totals ([`super::nodes::CalibratedNodes::from_maps`]); kept only when asked for
    /// ([`SavedModel::predict_keeping`]) and only for a target that
    /// [needs](CalibratedTarget::needs_conditional) it.
    pub conditional: Option<ConditionalPart>,
}

fn pick_rows(v: &[f64], rows: &[usize]) -> Vec<f64> {
    rows.iter().map(|&r| v[r]).collect()
}

/// Everything predicted on one step.
#[derive(Clone, Debug, Default)]
pub struct StepMaps {
    /// Per target, in model order.
    pub targets: Vec<TargetMaps>,
    /// Applicability per node. `inside` is the area the run reports: the row check, the
    /// widened range check and the ground check together (inside exactly where `reasons` is 0).
    pub applicability: Assessment,
    /// Why each node is outside the area: [`crate::applicability::REASON_INSIDE`] (0),
    /// `REASON_UNLIKE` (1), `REASON_RANGE` (2), `REASON_BOTH` (3), each plus `REASON_MARKED` (4)
    /// inside the user's outlines of unsampled ground, `REASON_NO_DATA` (255).
    pub reasons: Vec<u8>,
}

impl SavedModel {
    /// Target `t`'s smoothing width in metres (0 = plain attributes).
    pub fn width(&self, t: usize) -> f64 {
        self.smoothing.get(t).copied().unwrap_or(0.0)
    }

    /// The distinct positive smoothing widths of the targets, ascending: the blocks of
    /// [`Self::node_features`] after the plain attributes.
    pub fn widths(&self) -> Vec<f64> {
        let mut w: Vec<f64> = self
            .smoothing
            .iter()
            .copied()
            .filter(|&v| v > 0.0)
            .collect();
        w.sort_by(f64::total_cmp);
        w.dedup();
        w
    }

    /// The feature table the model predicts a step of `survey` from: one row per node, the
    /// plain attributes, then the attributes smoothed at each of [`Self::widths`] (one block
    /// each), then the step index. Without smoothing it is [`crate::sample::node_features`].
    ///
    /// # Panics
    /// If `step` is not a step of the survey.
    pub fn node_features(&self, survey: &crate::project::Survey, step: usize) -> Array2<f64> {
        let plain = crate::sample::node_features(survey, step);
        let widths = self.widths();
        if widths.is_empty() {
            return plain;
        }
        let na = plain.ncols() - 1;
        let mut out = Array2::from_elem((plain.nrows(), na * (1 + widths.len()) + 1), f64::NAN);
        out.slice_mut(ndarray::s![.., ..na])
            .assign(&plain.slice(ndarray::s![.., ..na]));
        for (b, &w) in widths.iter().enumerate() {
            let c0 = na * (1 + b);
            out.slice_mut(ndarray::s![.., c0..c0 + na])
                .assign(&crate::sample::smoothed_attributes(survey, step, w));
        }
        let last = out.ncols() - 1;
        out.column_mut(last).assign(&plain.column(na));
        out
    }

    /// Columns of a [`Self::node_features`] table that target `t` reads (the plain attributes,
    /// its width's block if it smooths, then the step: the layout of
    /// [`crate::sample::node_features_at`]), or the plain attributes and the step for `t = None`
    /// (the area of applicability's space).
    pub fn columns(&self, t: Option<usize>) -> Vec<usize> {
        let na = self.feature_names.len() - 1;
        let widths = self.widths();
        let mut cols: Vec<usize> = (0..na).collect();
        if let Some(b) = t
            .map(|t| self.width(t))
            .filter(|&w| w > 0.0)
            .and_then(|w| widths.iter().position(|&v| v == w))
        {
            cols.extend(na * (1 + b)..na * (2 + b));
        }
        cols.push(na * (1 + widths.len()));
        cols
    }

    /// Target `t`'s own columns of a [`Self::node_features`] table.
    pub fn target_table(&self, x: ArrayView2<f64>, t: usize) -> Array2<f64> {
        x.select(Axis(1), &self.columns(Some(t)))
    }

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

    /// The ground check ([`Ground`]) at the nodes `nodes` (indices into the grid, in order) of a
    /// survey: each node's attribute history over the model's training steps, matched by step
    /// name, one set of location flags per node ([`crate::applicability::GROUND_UNLIKE`]: unlike
    /// the ground the wells sample). `Ok(None)` for a model without a ground check; an error
    /// message when the survey lacks a training step or an attribute (the caller warns and maps
    /// with the row check alone). [`SavedModel::location_flags`] adds the user's outlines.
    pub fn ground_flags(
        &self,
        survey: &crate::project::Survey,
        nodes: std::ops::Range<usize>,
    ) -> Result<Option<Vec<u8>>, String> {
        let Some(ground) = &self.ground else {
            return Ok(None);
        };
        let p = &survey.project;
        let mut maps: Vec<&Vec<Vec<f64>>> = Vec::new();
        for name in &self.step_names {
            let Some(s) = p.steps.iter().position(|st| &st.name == name) else {
                return Err(format!(
                    "the project has no step {name}, which the model was trained on; the area of \
                     applicability uses the row check alone (no check of the attribute history)"
                ));
            };
            maps.push(&survey.maps[s]);
        }
        let q: usize = maps.iter().map(|m| m.len()).sum();
        if q != ground.mean.len() {
            return Err(format!(
                "the project's attribute history has {q} columns, the model's {}; the area of \
                 applicability uses the row check alone",
                ground.mean.len()
            ));
        }
        let grid = &p.grid;
        let xy = grid.node_coordinates();
        // Histories in chunks of nodes, so memory stays a few maps' worth on large grids.
        const CHUNK: usize = 1 << 16;
        let mut flags = Vec::with_capacity(nodes.len());
        let mut start = nodes.start;
        while start < nodes.end {
            let end = (start + CHUNK).min(nodes.end);
            let part: Vec<Vec<Vec<f64>>> = maps
                .iter()
                .map(|step| step.iter().map(|m| m[start..end].to_vec()).collect())
                .collect();
            let hist = node_histories(&part, end - start);
            let pos: Vec<[f64; 2]> = xy[start..end].iter().map(|&(x, y)| [x, y]).collect();
            let unlike = ground.assess(&pos, hist.view()).unlike;
            flags.extend(unlike.iter().map(|&u| {
                if u {
                    crate::applicability::GROUND_UNLIKE
                } else {
                    0
                }
            }));
            start = end;
        }
        Ok(Some(flags))
    }

    /// The location flags every prediction at `nodes` takes: [`Self::ground_flags`] joined with
    /// the survey's outlines of unsampled ground ([`crate::outline`]), which apply even when the
    /// ground check cannot run (its message is then returned beside the flags).
    pub fn location_flags(
        &self,
        survey: &crate::project::Survey,
        nodes: std::ops::Range<usize>,
    ) -> (Option<Vec<u8>>, Option<String>) {
        let marked =
            crate::outline::marked_nodes(&survey.unsampled, &survey.project.grid, nodes.clone());
        let (ground, message) = match self.ground_flags(survey, nodes) {
            Ok(g) => (g, None),
            Err(m) => (None, Some(m)),
        };
        (crate::outline::join(ground, marked), message)
    }

    /// Predicts every row of `x` located at `xy` (world coordinates, one per row; rows with a
    /// missing attribute give `NaN` everywhere and are not in the area of applicability). Bands
    /// widen with each row's dissimilarity to the training rows and with its distance to the
    /// nearest well beyond what cross-validation spanned (each target's spread rule). `ground`,
    /// one set of location flags per row from [`SavedModel::location_flags`] (or
    /// [`SavedModel::ground_flags`]), joins the area of applicability as "unlike every well" and
    /// "marked as unsampled" ([`crate::applicability::Applicability::reasons`]).
    pub fn predict(
        &self,
        x: ArrayView2<f64>,
        xy: &[(f64, f64)],
        ground: Option<&[u8]>,
    ) -> Result<StepMaps, PipelineError> {
        self.predict_keeping(x, xy, ground, &[])
    }

    /// As [`Self::predict`], also keeping [`TargetMaps::conditional`] for the targets whose
    /// index is in `keep` (from the same pass of the ensemble, so the field totals need not
    /// predict the nodes again).
    pub fn predict_keeping(
        &self,
        x: ArrayView2<f64>,
        xy: &[(f64, f64)],
        ground: Option<&[u8]>,
        keep: &[usize],
    ) -> Result<StepMaps, PipelineError> {
        self.predict_known(x, xy, ground, keep, &[])
    }

    /// As [`Self::predict_keeping`], with each hurdle target's calibrated probability of a change
    /// at the rows of `x` that have every attribute (in row order) where it is already known:
    /// `known[t]`, as [`crate::pipeline::fit::fit_model_keeping`] returns it for a step of the
    /// survey it was fitted on. Same numbers, one walk of the change forest fewer per target.
    pub fn predict_known(
        &self,
        x: ArrayView2<f64>,
        xy: &[(f64, f64)],
        ground: Option<&[u8]>,
        keep: &[usize],
        known: &[Option<Vec<f64>>],
    ) -> Result<StepMaps, PipelineError> {
        let n = x.nrows();
        if let Some(g) = ground
            && g.len() != n
        {
            return Err(PipelineError::Invalid(format!(
                "{} ground flags for {n} nodes",
                g.len()
            )));
        }
        let width = (self.feature_names.len() - 1) * (1 + self.widths().len()) + 1;
        if x.ncols() != width {
            return Err(PipelineError::Invalid(format!(
                "a feature table of {} columns for a model that reads {width} (plain attributes, \
                 one block per smoothing width, step): build it with SavedModel::node_features",
                x.ncols()
            )));
        }
        let plain = x.select(Axis(1), &self.columns(None));
        let mut applicability = self.applicability.assess(plain.view());
        let reasons = self.applicability.reasons(&applicability, ground);
        for (inside, &code) in applicability.inside.iter_mut().zip(&reasons) {
            *inside = code == crate::applicability::REASON_INSIDE;
        }
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
        let node_xy: Vec<(f64, f64)> = valid
            .iter()
            .map(|&r| xy.get(r).copied().unwrap_or((f64::NAN, f64::NAN)))
            .collect();
        // The step feature (last column) of each row; a row without one is not kriged.
        let step: Vec<usize> = valid
            .iter()
            .map(|&r| {
                let s = x[[r, width - 1]];
                if s.is_finite() && s >= 0.0 {
                    s.round() as usize
                } else {
                    usize::MAX
                }
            })
            .collect();
        let context = NodeContext {
            xy: Some(&node_xy),
            step: Some(&step),
            ..NodeContext::new(&di, &distance)
        };
        let mut targets = Vec::new();
        for (t, cal) in self.calibrated.iter().enumerate() {
            let context = NodeContext {
                change: known.get(t).and_then(|k| k.as_deref()),
                ..context
            };
            let own = self.target_table(compact.view(), t);
            let (p, conditional) = cal
                .predict_keeping(own.view(), Some(context), keep.contains(&t))
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
                conditional: conditional.map(|c| ConditionalPart {
                    mid: scatter(&c.mid),
                    scale: c.scale.as_deref().map(scatter),
                }),
            });
        }
        Ok(StepMaps {
            targets,
            applicability,
            reasons,
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
        if !format.is_some_and(|f| (OLDEST_MODEL_FORMAT.into()..=MODEL_FORMAT.into()).contains(&f))
        {
            return Err(PipelineError::Invalid(format!(
                "{}: model format {} is not a format this build reads ({OLDEST_MODEL_FORMAT} to \
                 {MODEL_FORMAT}); re-run `tidemark run` to save the model again",
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

/// Per step, the nodes with data within one well spacing (of the ground check, else the median
/// nearest-neighbour distance of the model's wells) of an injector (wells CSV `kind`), and how
/// many of them are flagged for each reason; empty without injectors.
pub fn injector_cores(
    survey: &crate::project::Survey,
    model: &SavedModel,
    steps: &[StepMaps],
) -> Vec<crate::report::area::InjectorCores> {
    use crate::applicability::{REASON_BOTH, REASON_NO_DATA, REASON_RANGE, REASON_UNLIKE};
    let mut injectors: Vec<(f64, f64)> = survey
        .wells
        .iter()
        .filter(|w| w.kind == Some(crate::io::wells::WellKind::Injector))
        .map(|w| (w.x, w.y))
        .collect();
    injectors.dedup();
    if injectors.is_empty() {
        return Vec::new();
    }
    let spacing = model.ground.as_ref().map_or_else(
        || {
            let xy: Vec<[f64; 2]> = model.wells.iter().map(|w| [w.1, w.2]).collect();
            crate::applicability::well_spacing(&xy)
        },
        |g| g.spacing,
    );
    let near: Vec<bool> = survey
        .project
        .grid
        .node_coordinates()
        .iter()
        .map(|&(x, y)| {
            injectors
                .iter()
                .any(|w| (w.0 - x).hypot(w.1 - y) <= spacing)
        })
        .collect();
    model
        .step_names
        .iter()
        .zip(steps)
        .map(|(name, maps)| {
            let codes: Vec<u8> = maps
                .reasons
                .iter()
                .zip(&near)
                .filter(|(c, n)| **n && **c != REASON_NO_DATA)
                .map(|(c, _)| *c)
                .collect();
            // The user's mark (bit 4) does not change why the data flag a node.
            let count = |code: u8| codes.iter().filter(|&&c| c & 3 == code).count();
            crate::report::area::InjectorCores {
                step: name.clone(),
                nodes: codes.len(),
                unlike: count(REASON_UNLIKE),
                range: count(REASON_RANGE),
                both: count(REASON_BOTH),
            }
        })
        .collect()
}

/// How much mapped ground (at the first step) lies inside the survey's outlines of unsampled
/// ground (`[area] unsampled`); `None` without outlines.
pub fn marked_ground(
    survey: &crate::project::Survey,
    steps: &[StepMaps],
) -> Option<crate::report::area::MarkedGround> {
    use crate::applicability::{REASON_MARKED, REASON_NO_DATA};
    let first = steps.first()?;
    if survey.unsampled.is_empty() {
        return None;
    }
    let mapped: Vec<u8> = first
        .reasons
        .iter()
        .copied()
        .filter(|&c| c != REASON_NO_DATA)
        .collect();
    let outlines = survey
        .unsampled
        .iter()
        .map(|o| {
            let file = o.file.file_name().map_or_else(
                || o.file.display().to_string(),
                |f| f.to_string_lossy().into(),
            );
            if o.name.is_empty() {
                file
            } else {
                format!("{file} ({})", o.name)
            }
        })
        .collect();
    Some(crate::report::area::MarkedGround {
        outlines,
        nodes: mapped.iter().filter(|&&c| c & REASON_MARKED != 0).count(),
        mapped: mapped.len(),
    })
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
