//! `score`: the maps of a finished run against the truth maps of a synthetic project, at every
//! node, with the metrics of `summary.json` ([`crate::metrics::Metrics`]).
//!
//! Nodes are scored three ways: every node with a prediction, nodes inside the area of
//! applicability, and nodes away from the wells (farther than [`AWAY_FROM_WELLS`] grid spacings
//! from every training well) — the honest test of a map is away from the data it was fitted to.

use super::PipelineError;
use super::model::SavedModel;
use crate::grid::Grid;
use crate::io;
use crate::metrics::{ExceedInput, Metrics, MetricsInput};
use crate::project::Direction;
use serde::Serialize;
use std::path::{Path, PathBuf};

/// Distance from the nearest well, in grid spacings, beyond which a node counts as away from wells.
pub const AWAY_FROM_WELLS: f64 = 4.0;

/// Scores of one node set.
#[derive(Clone, Debug, Serialize)]
pub struct NodeScores {
    /// Every node with a prediction and a truth.
    pub all: Option<Metrics>,
    /// Nodes inside the area of applicability.
    pub inside: Option<Metrics>,
    /// Nodes farther than [`AWAY_FROM_WELLS`] spacings from every well.
    pub away_from_wells: Option<Metrics>,
    /// Nodes inside the area of applicability and away from wells.
    pub inside_away: Option<Metrics>,
    /// Nodes where the truth is exactly zero: the reservoir did not change there (unswept, no
    /// gas out of solution). A band whose central part straddles zero covers every such node,
    /// so for a target with many of them the coverage on all nodes exceeds nominal even when
    /// each node's band is calibrated; [`NodeScores::changed`] is the informative set.
    pub unchanged: Option<Metrics>,
    /// Nodes where the truth is not zero.
    pub changed: Option<Metrics>,
}

/// Scores of one target on one step.
#[derive(Clone, Debug, Serialize)]
pub struct StepScore {
    /// Step name.
    pub step: String,
    /// Scores.
    pub scores: NodeScores,
}

/// Scores of one target.
#[derive(Clone, Debug, Serialize)]
pub struct TargetScore {
    /// Target name.
    pub target: String,
    /// Per step.
    pub steps: Vec<StepScore>,
    /// All steps pooled.
    pub pooled: NodeScores,
}

/// Contents of `truth-score.json`.
#[derive(Clone, Debug, Serialize)]
pub struct TruthScore {
    /// tidemark version.
    pub version: String,
    /// Folder of the truth maps.
    pub truth: String,
    /// Nominal band level.
    pub level: f64,
    /// Definition of "away from wells".
    pub away_from_wells: String,
    /// Per target.
    pub targets: Vec<TargetScore>,
}

/// Error maps (P50 minus truth) per step and target, for pictures.
pub struct ErrorMaps {
    /// Grid of the maps.
    pub grid: Grid,
    /// (step, target, unit, values).
    pub maps: Vec<(String, String, String, Vec<f64>)>,
}

/// The folder holding `<step>/<target>.tif`: `truth` itself or `truth/truth`.
fn truth_root(truth: &Path) -> PathBuf {
    let nested = truth.join("truth");
    if nested.is_dir() {
        nested
    } else {
        truth.to_path_buf()
    }
}

struct Pooled {
    truth: Vec<f64>,
    mid: Vec<f64>,
    lo: Vec<f64>,
    hi: Vec<f64>,
    exceed: Vec<Vec<f64>>,
}

fn score_set(
    model: &SavedModel,
    t: usize,
    data: &Pooled,
    keep: &dyn Fn(usize) -> bool,
) -> Option<Metrics> {
    let idx: Vec<usize> = (0..data.truth.len()).filter(|&k| keep(k)).collect();
    let pick = |v: &[f64]| -> Vec<f64> { idx.iter().map(|&k| v[k]).collect() };
    let (truth, mid, lo, hi) = (
        pick(&data.truth),
        pick(&data.mid),
        pick(&data.lo),
        pick(&data.hi),
    );
    let ths = model.thresholds_of(t);
    let probs: Vec<Vec<f64>> = data.exceed.iter().map(|e| pick(e)).collect();
    let exceed = ths
        .iter()
        .zip(&probs)
        .map(|(th, p)| ExceedInput {
            label: &th.label,
            value: th.value,
            above: matches!(th.direction, Direction::Above),
            prob: p,
        })
        .collect();
    Metrics::compute(&MetricsInput {
        truth: &truth,
        mid: &mid,
        lo: &lo,
        hi: &hi,
        level: model.level,
        quantiles: None,
        exceed,
        n_wells: 0,
    })
    .ok()
}

fn scores(
    model: &SavedModel,
    t: usize,
    data: &Pooled,
    inside: &[bool],
    away: &[bool],
) -> NodeScores {
    NodeScores {
        all: score_set(model, t, data, &|_| true),
        inside: score_set(model, t, data, &|k| inside[k]),
        away_from_wells: score_set(model, t, data, &|k| away[k]),
        inside_away: score_set(model, t, data, &|k| inside[k] && away[k]),
        unchanged: score_set(model, t, data, &|k| data.truth[k] == 0.0),
        changed: score_set(model, t, data, &|k| data.truth[k] != 0.0),
    }
}

/// Scores the run in `results` against the truth maps under `truth`; writes `truth-score.json`
/// into `results` and returns it with the error maps.
pub fn score(results: &Path, truth: &Path) -> Result<(TruthScore, ErrorMaps), PipelineError> {
    let model = SavedModel::load(&results.join("model.json"))?;
    let troot = truth_root(truth);
    let (lo_label, hi_label) = model.band_labels();
    let first = &model.step_names[0];
    let probe = results
        .join("maps")
        .join(first)
        .join(format!("{}_p50.tif", model.targets[0].name));
    let grid = io::geotiff::read(&probe)
        .map_err(|e| {
            PipelineError::Invalid(format!(
                "{e}\n(score reads the GeoTIFF maps of a `tidemark run` results folder)"
            ))
        })?
        .grid;
    let reach = AWAY_FROM_WELLS * grid.dx.min(grid.dy);
    let away: Vec<bool> = grid
        .node_coordinates()
        .iter()
        .map(|&(x, y)| {
            model
                .wells
                .iter()
                .all(|(_, wx, wy)| (wx - x).hypot(wy - y) > reach)
        })
        .collect();
    let read = |rel: PathBuf| io::geotiff::read_on_grid(&rel, &grid);
    let mut targets = Vec::new();
    let mut errors = Vec::new();
    for (t, spec) in model.targets.iter().enumerate() {
        let ths = model.thresholds_of(t);
        let mut pooled = Pooled {
            truth: vec![],
            mid: vec![],
            lo: vec![],
            hi: vec![],
            exceed: vec![vec![]; ths.len()],
        };
        let (mut pooled_inside, mut pooled_away) = (Vec::new(), Vec::new());
        let mut steps = Vec::new();
        for step in &model.step_names {
            let dir = results.join("maps").join(step);
            let base = |suffix: &str| dir.join(format!("{}_{suffix}.tif", spec.name));
            let data = Pooled {
                truth: read(troot.join(step).join(format!("{}.tif", spec.name)))?,
                mid: read(base("p50"))?,
                lo: read(base(&lo_label))?,
                hi: read(base(&hi_label))?,
                exceed: ths
                    .iter()
                    .map(|th| read(base(&format!("exceed_{}", th.label))))
                    .collect::<Result<_, _>>()?,
            };
            // Results folders written before the maps were renamed call it inside.tif.
            let area = dir.join("applicable.tif");
            let area = if area.exists() {
                area
            } else {
                dir.join("inside.tif")
            };
            let inside: Vec<bool> = read(area)?.iter().map(|v| *v == 1.0).collect();
            steps.push(StepScore {
                step: step.clone(),
                scores: scores(&model, t, &data, &inside, &away),
            });
            let err: Vec<f64> = data
                .mid
                .iter()
                .zip(&data.truth)
                .map(|(p, y)| p - y)
                .collect();
            errors.push((step.clone(), spec.name.clone(), spec.unit.clone(), err));
            pooled.truth.extend(&data.truth);
            pooled.mid.extend(&data.mid);
            pooled.lo.extend(&data.lo);
            pooled.hi.extend(&data.hi);
            for (acc, e) in pooled.exceed.iter_mut().zip(&data.exceed) {
                acc.extend(e);
            }
            pooled_inside.extend(inside);
            pooled_away.extend(&away);
        }
        targets.push(TargetScore {
            target: spec.name.clone(),
            pooled: scores(&model, t, &pooled, &pooled_inside, &pooled_away),
            steps,
        });
    }
    let out = TruthScore {
        version: env!("CARGO_PKG_VERSION").to_string(),
        truth: troot.display().to_string(),
        level: model.level,
        away_from_wells: format!(
            "nodes farther than {AWAY_FROM_WELLS} grid spacings from every training well"
        ),
        targets,
    };
    let text = serde_json::to_string_pretty(&out)
        .map_err(|e| PipelineError::json(results.join("truth-score.json"), e))?;
    io::atomic::write_bytes(&results.join("truth-score.json"), text.as_bytes())?;
    Ok((out, ErrorMaps { grid, maps: errors }))
}

/// Scores the run (see [`score`]), draws the error maps into `pictures/errors/` and, when the run
/// wrote a review page, adds a truth section to it and writes it again.
pub fn score_and_report(results: &Path, truth: &Path) -> Result<TruthScore, PipelineError> {
    use crate::report::input as ri;
    use crate::report::picture::map_png;
    let (scores, errors) = score(results, truth)?;
    let model = SavedModel::load(&results.join("model.json"))?;
    // The synthetic project beside its truth gives the survey dates and the wells' kinds; without
    // it the maps name the steps only and draw every well alike.
    let manifest = [truth.join("project.toml"), truth.join("../project.toml")]
        .into_iter()
        .find(|m| m.is_file());
    let (steps, rows) = manifest
        .and_then(|m| crate::project::Project::load(&m).ok())
        .map(|p| {
            let rows = p.read_wells().unwrap_or_default();
            (p.steps, rows)
        })
        .unwrap_or_default();
    let setting = super::pictures::MapSetting::new(&errors.grid, &model, &steps, &rows);
    let mut entries = Vec::new();
    for (step, target, unit, values) in &errors.maps {
        let rel = format!("pictures/errors/{step}/{target}_error.png");
        let mut p = setting.picture(
            values,
            format!("{target} P50 minus truth"),
            setting.subtitle(step),
            unit.clone(),
            crate::report::colormap::ColourScale::diverging_from(values),
        );
        p.caption = "Error of the most likely change against the synthetic truth.".into();
        let png = map_png(&p, super::pictures::MAP_SIZE.0, super::pictures::MAP_SIZE.1)?;
        let path = results.join(&rel);
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| {
                PipelineError::Invalid(format!("{}: cannot create folder: {e}", dir.display()))
            })?;
        }
        io::atomic::write_bytes(&path, &png)?;
        entries.push(ri::MapEntry {
            step: step.clone(),
            target: Some(target.clone()),
            kind: "error".into(),
            picture: crate::report::PictureRef::File(rel),
            caption: "P50 minus truth".into(),
        });
    }
    let data = results.join(crate::report::DATA_FILE);
    if data.is_file() {
        let mut input = crate::report::ReportInput::load(&data)?;
        let mut rows = Vec::new();
        for t in &scores.targets {
            let unit = model
                .targets
                .iter()
                .find(|s| s.name == t.target)
                .map(|s| s.unit.clone())
                .unwrap_or_default();
            let row = |step: Option<String>, m: &Option<Metrics>| {
                m.as_ref().map(|m| ri::TruthScore {
                    target: t.target.clone(),
                    step,
                    unit: unit.clone(),
                    nodes: Some(m.n_rows),
                    r2: m.r2.is_finite().then_some(m.r2),
                    rmse: m.rmse.is_finite().then_some(m.rmse),
                    bias: m.bias.is_finite().then_some(m.bias),
                    coverage: m.coverage.is_finite().then_some(m.coverage),
                    mean_width: m.mean_width.is_finite().then_some(m.mean_width),
                })
            };
            rows.extend(row(None, &t.pooled.all));
            for s in &t.steps {
                rows.extend(row(Some(s.step.clone()), &s.scores.all));
            }
        }
        input.truth = Some(ri::TruthSection {
            scores: rows,
            error_maps: entries,
        });
        input.save(results)?;
        crate::report::write_html(&input, results)?;
    }
    Ok(scores)
}
