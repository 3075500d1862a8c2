//! Field totals of a run (`[totals]`): spatially correlated realizations of every target the
//! totals need, their P10/P50/P90 beside the two naive rules, and the same totals computed from a
//! synthetic field's truth for `score`.
//!
//! The stage reads the fitted model, the written maps of every step and the training set:
//! [`super::nodes`] gives each target's error correlation from its held-out wells and every
//! node's calibrated distribution; [`crate::spatial::totals::simulate`] draws the realizations
//! (circulant embedding, Dietrich & Newsam 1997; conditioning by simple kriging, Journel 1974) and
//! adds up the totals. Outputs: `totals.csv` (one line per quantity and step), `totals.json` (the
//! definitions, every realization's total, the variogram fits; what `score` and the report read)
//! and, when asked, the first realizations' maps under `realizations/<step>/`.
//!
//! Seeds derive from the run's seed and the realization index only, so the numbers are the same
//! for any thread count.

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use super::nodes::{CalibratedNodes, Correlation, correlation, value_scores, well_scores};
use super::outputs::Writer;
use crate::grid::Grid;
use crate::io;
use crate::project::{Direction, Survey};
use crate::sample::{self, TrainingSet};
use crate::spatial::krige::WellScore;
use crate::spatial::totals::{
    self as engine, Band, ErrorField, Layer, Measure, NodeDistribution, Quantity, Summary,
    TotalDefinition, TotalRule, TotalsInput, TotalsOutput, TotalsSettings, WellConditioning,
};
use crate::spatial::unknown_mean::MeanRule;
use crate::spatial::{Lattice, derive_seed};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// The file `score` and the report read.
pub const TOTALS_JSON: &str = "totals.json";
/// The table of totals.
pub const TOTALS_CSV: &str = "totals.csv";
/// Seed stream of the totals (mixed with the run's seed).
const STREAM_TOTALS: u64 = 0x0707_4a15;
/// Seed stream (under [`STREAM_TOTALS`]) of the randomised levels of measured values at wells.
const STREAM_MEASURED: u64 = 0x77e1;

/// One total at one step, as `totals.json` holds it.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct QuantityRecord {
    /// Quantity name.
    pub quantity: String,
    /// Step name.
    pub step: String,
    /// Unit after `scale`.
    pub unit: String,
    /// Target it is computed from.
    pub target: String,
    /// What is added up.
    pub rule: TotalRule,
    /// Sum totals: the weight map's file.
    pub weight_file: Option<String>,
    /// Factor applied to the total.
    pub scale: f64,
    /// P10/P50/P90 (run's convention), mean and sd over the correlated realizations.
    pub summary: Summary,
    /// Naive rule: every node at its own P10 / P50 / P90 at once.
    pub comonotone: Band,
    /// Naive rule: nodes drawn independently (same number of realizations).
    pub independent: Option<Summary>,
    /// The total of every realization, in realization order.
    pub totals: Vec<f64>,
    /// The independent-nodes total of every realization.
    pub independent_totals: Vec<f64>,
}

/// Contents of `totals.json`.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct TotalsRecord {
    /// Label convention, in words.
    pub convention: String,
    /// Whether the P10 label is the low value (percentile convention) or the high value.
    pub p10_is_low: bool,
    /// Realizations drawn.
    pub realizations: usize,
    /// Seed of the realizations.
    pub seed: u64,
    /// One entry per quantity and step.
    pub quantities: Vec<QuantityRecord>,
    /// Error correlation per target used (written for the reader; `score` does not read it
    /// back).
    #[serde(default, skip_deserializing)]
    pub correlations: Vec<Correlation>,
    /// The calibration draw per layer (empty when `[totals] calibration_uncertainty` is off).
    #[serde(default)]
    pub calibration_draw: Vec<DrawSummary>,
    /// The mean of each conditioned layer's well scores ([`crate::spatial::unknown_mean`]).
    #[serde(default)]
    pub means: Vec<MeanSummary>,
    /// What the realizations reproduce at the well nodes (`[totals] conditioning`):
    /// `well_nodes`, `measured` or `held_out` (absent in records written before the choice
    /// existed: `held_out`).
    #[serde(default = "held_out_name")]
    pub conditioning: String,
}

fn held_out_name() -> String {
    WellConditioning::HeldOut.name().to_string()
}

/// One layer's estimated mean normal score (generalised least squares over its wells).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct MeanSummary {
    /// Target and step, e.g. `dP m2`.
    pub layer: String,
    /// The rule of the run (`zero` or `estimated`).
    pub rule: String,
    /// Whether the realizations carry the estimated mean (rule `estimated`).
    pub applied: bool,
    /// Distinct well nodes.
    pub wells: usize,
    /// The estimate `1' C^-1 z / 1' C^-1 1`.
    pub mean: f64,
    /// Its standard error `sqrt(1 / 1' C^-1 1)`.
    pub se: f64,
    /// Plain mean of the well scores.
    pub plain_mean: f64,
}

/// One layer's calibration draw ([`crate::spatial::bootstrap`]): the realizations' shared shift
/// of the wells' mean normal score.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct DrawSummary {
    /// Target and step, e.g. `dP m2`.
    pub layer: String,
    /// Held-out wells whose scores are reweighted.
    pub wells: usize,
    /// Standard deviation of the shift, in normal scores.
    pub shift_sd: f64,
}

/// What the stage computed: the record and the engine's full output (node crossing frequencies
/// and kept maps), and the layer of each kept map as (step, target).
pub struct Computed {
    /// `totals.json`.
    pub record: TotalsRecord,
    /// Engine output.
    pub output: TotalsOutput,
    /// (step name, target name) of every layer, in engine order.
    pub layers: Vec<(String, String)>,
}

/// How the stage runs (what the manifest does not say).
#[derive(Clone, Copy, Debug)]
pub struct TotalsOptions {
    /// Realization maps to keep (overrides `totals.keep_realizations`).
    pub keep: Option<usize>,
    /// Realizations (overrides `totals.realizations`).
    pub realizations: Option<usize>,
    /// Condition the fields to the wells' scores (always in a run; off for checks of the node
    /// distributions).
    pub condition: bool,
}

impl Default for TotalsOptions {
    fn default() -> Self {
        Self {
            keep: None,
            realizations: None,
            condition: true,
        }
    }
}

/// (target, step) pairs the totals of the project's `[totals]` need, in order of first use
/// (none without `[totals]`).
pub fn needed_layers(survey: &Survey, model: &SavedModel) -> Vec<(usize, usize)> {
    let project = &survey.project;
    let mut out: Vec<(usize, usize)> = Vec::new();
    let Some(section) = &project.totals else {
        return out;
    };
    for q in &section.quantities {
        let Some(t) = model.targets.iter().position(|s| s.name == q.target) else {
            continue;
        };
        for s in steps_of(project, &q.steps) {
            if !out.contains(&(t, s)) {
                out.push((t, s));
            }
        }
    }
    out
}

/// The node distributions of every layer `(target, step)`, from the maps; a step's nodes are
/// predicted again only where its maps did not keep the conditional part a target needs.
fn node_distributions<'m>(
    survey: &Survey,
    model: &'m SavedModel,
    kept: &'m [StepMaps],
    layers: &[(usize, usize)],
) -> Result<Vec<CalibratedNodes<'m>>, PipelineError> {
    let mut dists = Vec::with_capacity(layers.len());
    for &(t, s) in layers {
        let (cal, maps) = (&model.calibrated[t], &kept[s].targets[t]);
        let d = match CalibratedNodes::from_maps(cal, maps) {
            Some(d) => d,
            None => {
                let x = sample::node_features_at(survey, s, model.width(t));
                CalibratedNodes::new(cal, maps, x.view()).map_err(|source| {
                    PipelineError::Calibrate {
                        target: model.targets[t].name.clone(),
                        source,
                    }
                })?
            }
        };
        dists.push(d);
    }
    Ok(dists)
}

fn steps_of(project: &crate::project::Project, names: &[String]) -> Vec<usize> {
    if names.is_empty() {
        (0..project.steps.len()).collect()
    } else {
        names.iter().filter_map(|n| project.step_index(n)).collect()
    }
}

/// Runs the realizations of the project's `[totals]` (none: `Ok(None)`).
pub fn compute(
    survey: &Survey,
    ts: &TrainingSet,
    model: &SavedModel,
    kept: &[StepMaps],
    seed: u64,
    opts: TotalsOptions,
) -> Result<Option<Computed>, PipelineError> {
    let project = &survey.project;
    let Some(section) = &project.totals else {
        return Ok(None);
    };
    let definitions = section.check()?;
    if definitions.is_empty() {
        return Ok(None);
    }
    let grid = &project.grid;
    let lattice = Lattice::of_grid(grid);
    let layer_keys = needed_layers(survey, model);
    // Error fields: one per target used, from its held-out wells.
    let mut field_of: Vec<Option<usize>> = vec![None; model.targets.len()];
    let mut correlations = Vec::new();
    let mut scores: Vec<Vec<(usize, WellScore)>> = vec![Vec::new(); model.targets.len()];
    for &(t, _) in &layer_keys {
        if field_of[t].is_some() {
            continue;
        }
        scores[t] = well_scores(&model.calibrated[t], ts, t, grid);
        correlations.push(correlation(&model.targets[t].name, &scores[t], lattice)?);
        field_of[t] = Some(correlations.len() - 1);
    }
    let fields: Vec<ErrorField> = correlations
        .iter()
        .map(|c| ErrorField {
            name: c.target.clone(),
            model: c.fit.model,
        })
        .collect();
    let dists = node_distributions(survey, model, kept, &layer_keys)?;
    let measured = |t: usize, s: usize, d: &CalibratedNodes<'_>| {
        value_scores(
            &model.calibrated[t],
            ts,
            t,
            grid,
            s,
            d as &dyn NodeDistribution,
            derive_seed(seed, &[STREAM_TOTALS, STREAM_MEASURED]),
        )
    };
    let layers: Vec<Layer<'_>> = layer_keys
        .iter()
        .zip(&dists)
        .map(|(&(t, s), d)| Layer {
            name: format!("{} {}", model.targets[t].name, project.steps[s].name),
            field: field_of[t].expect("field of a used target"),
            wells: match (opts.condition, section.conditioning) {
                (true, WellConditioning::Measured) => measured(t, s, d),
                (true, WellConditioning::HeldOut) => at_step(&scores[t], s),
                _ => Vec::new(),
            },
            pins: match (opts.condition, section.conditioning) {
                (true, WellConditioning::WellNodes) => measured(t, s, d),
                _ => Vec::new(),
            },
            calibration: at_step(&scores[t], s),
            distribution: d as &dyn NodeDistribution,
        })
        .collect();
    let weights = read_weights(survey, &definitions)?;
    let (quantities, meta) = build_quantities(survey, model, &definitions, &layer_keys, &weights);
    let settings = TotalsSettings {
        realizations: opts.realizations.unwrap_or(section.realizations),
        seed: derive_seed(seed, &[STREAM_TOTALS]),
        keep_maps: opts.keep.unwrap_or(section.keep_realizations),
        convention: model.convention,
        calibration_draw: section.calibration_uncertainty,
        mean: section.mean,
        ..TotalsSettings::default()
    };
    let output = engine::simulate(
        &TotalsInput {
            lattice,
            fields,
            layers,
            quantities,
        },
        &settings,
    )?;
    let record = TotalsRecord {
        convention: convention_text(model.convention, model.level),
        p10_is_low: model.convention == crate::project::Convention::Percentile,
        realizations: output.realizations,
        seed: output.seed,
        quantities: output
            .quantities
            .iter()
            .zip(meta)
            .map(|(q, (d, weight_file))| QuantityRecord {
                quantity: q.name.clone(),
                step: q.step.clone(),
                unit: q.unit.clone(),
                target: d.target.clone(),
                rule: d.rule.clone(),
                weight_file,
                scale: d.scale,
                summary: q.summary,
                comonotone: q.comonotone,
                independent: q.independent,
                totals: q.totals.clone(),
                independent_totals: q.independent_totals.clone(),
            })
            .collect(),
        correlations,
        calibration_draw: output
            .layers
            .iter()
            .filter(|l| l.calibration_wells > 0)
            .map(|l| DrawSummary {
                layer: l.name.clone(),
                wells: l.calibration_wells,
                shift_sd: l.calibration_shift_sd,
            })
            .collect(),
        means: mean_summaries(&output, section.mean),
        conditioning: section.conditioning.name().to_string(),
    };
    let layers = layer_keys
        .iter()
        .map(|&(t, s)| (project.steps[s].name.clone(), model.targets[t].name.clone()))
        .collect();
    Ok(Some(Computed {
        record,
        output,
        layers,
    }))
}

/// The scores of `scores` at step `step`.
fn at_step(scores: &[(usize, WellScore)], step: usize) -> Vec<WellScore> {
    scores
        .iter()
        .filter(|(st, _)| *st == step)
        .map(|(_, w)| w.clone())
        .collect()
}

/// Every conditioned layer's estimated mean normal score, under the run's rule.
fn mean_summaries(output: &TotalsOutput, rule: MeanRule) -> Vec<MeanSummary> {
    output
        .layers
        .iter()
        .filter_map(|l| {
            l.mean.map(|m| MeanSummary {
                layer: l.name.clone(),
                rule: rule.name().to_string(),
                applied: l.mean_applied,
                wells: m.wells,
                mean: m.mean,
                se: m.se,
                plain_mean: m.plain_mean,
            })
        })
        .collect()
}

/// A weight map of `[totals.maps]`: name, file, values.
type WeightMap = (String, String, Vec<f64>);

/// The weight maps the `sum` totals use.
fn read_weights(
    survey: &Survey,
    definitions: &[TotalDefinition],
) -> Result<Vec<WeightMap>, PipelineError> {
    let project = &survey.project;
    let mut weights = Vec::new();
    let Some(section) = &project.totals else {
        return Ok(weights);
    };
    for (name, path) in &section.maps {
        let used = definitions
            .iter()
            .any(|d| matches!(&d.rule, TotalRule::Sum { weight } if weight == name));
        if used {
            let v = io::read_map(Path::new(path), &project.grid, project.snap_tolerance)?;
            weights.push((name.clone(), path.clone(), v));
        }
    }
    Ok(weights)
}

/// Every total at every step it is asked for, with its definition and weight file.
fn build_quantities<'w>(
    survey: &Survey,
    model: &SavedModel,
    definitions: &[TotalDefinition],
    layer_keys: &[(usize, usize)],
    weights: &'w [WeightMap],
) -> (Vec<Quantity<'w>>, Vec<(TotalDefinition, Option<String>)>) {
    let project = &survey.project;
    let mut quantities = Vec::new();
    let mut meta = Vec::new();
    for d in definitions {
        let Some(t) = model.targets.iter().position(|s| s.name == d.target) else {
            continue;
        };
        for s in steps_of(project, &d.steps) {
            let layer = layer_keys
                .iter()
                .position(|&k| k == (t, s))
                .expect("layer of a quantity");
            let (measure, weight_file) = match &d.rule {
                TotalRule::Area {
                    threshold,
                    direction,
                } => (
                    Measure::Area {
                        threshold: *threshold,
                        direction: *direction,
                    },
                    None,
                ),
                TotalRule::Sum { weight } => {
                    let w = weights
                        .iter()
                        .find(|w| &w.0 == weight)
                        .expect("weight map checked at load");
                    (Measure::Sum { weights: &w.2 }, Some(w.1.clone()))
                }
            };
            quantities.push(Quantity {
                name: d.quantity.clone(),
                step: project.steps[s].name.clone(),
                unit: d.unit.clone(),
                layer,
                measure,
                scale: d.scale,
            });
            meta.push((d.clone(), weight_file));
        }
    }
    (quantities, meta)
}

/// `totals.csv`: one line per quantity and step with the realizations' P10/P50/P90 (run's
/// convention), mean and sd, then the comonotone rule's and the independent rule's P10/P50/P90.
pub fn csv_text(record: &TotalsRecord) -> Result<Vec<u8>, PipelineError> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let err = |e: csv::Error| PipelineError::Invalid(format!("{TOTALS_CSV}: {e}"));
    w.write_record([
        "quantity",
        "step",
        "unit",
        "p10",
        "p50",
        "p90",
        "mean",
        "sd",
        "sum_of_node_p10",
        "sum_of_node_p50",
        "sum_of_node_p90",
        "independent_p10",
        "independent_p50",
        "independent_p90",
    ])
    .map_err(err)?;
    let f = |v: f64| {
        if v.is_finite() {
            format!("{v}")
        } else {
            String::new()
        }
    };
    for q in &record.quantities {
        let ind = q
            .independent
            .map_or([f64::NAN; 3], |s| [s.p10, s.p50, s.p90]);
        let s = &q.summary;
        let c = &q.comonotone;
        w.write_record([
            q.quantity.clone(),
            q.step.clone(),
            q.unit.clone(),
            f(s.p10),
            f(s.p50),
            f(s.p90),
            f(s.mean),
            f(s.sd),
            f(c.p10),
            f(c.p50),
            f(c.p90),
            f(ind[0]),
            f(ind[1]),
            f(ind[2]),
        ])
        .map_err(err)?;
    }
    w.into_inner()
        .map_err(|e| PipelineError::Invalid(format!("{TOTALS_CSV}: {e}")))
}

/// Writes `totals.csv`, `totals.json` and the kept realization maps (GeoTIFF,
/// `realizations/<step>/<target>_r<NNN>.tif`).
pub fn write(w: &mut Writer, grid: &Grid, computed: &Computed) -> Result<(), PipelineError> {
    w.bytes(TOTALS_CSV, &csv_text(&computed.record)?)?;
    w.json(TOTALS_JSON, &computed.record)?;
    for k in &computed.output.kept {
        let (step, target) = &computed.layers[k.layer];
        let desc = serde_json::json!({
            "tidemark": env!("CARGO_PKG_VERSION"),
            "step": step,
            "quantity": format!("{target} realization {}", k.realization + 1),
        })
        .to_string();
        let bytes = io::geotiff::encode(grid, &k.values, Some(&desc))?;
        w.bytes(
            &format!("realizations/{step}/{target}_r{:03}.tif", k.realization + 1),
            &bytes,
        )?;
    }
    Ok(())
}

/// The totals part of `summary.json`: the figures of `totals.csv` and the variogram fits.
#[derive(Clone, Debug, Serialize)]
pub struct TotalsSummary {
    /// Realizations drawn.
    pub realizations: usize,
    /// Seed of the realizations.
    pub seed: u64,
    /// Label convention, in words.
    pub convention: String,
    /// Per quantity and step.
    pub quantities: Vec<QuantitySummary>,
    /// Error correlation per target used.
    pub variograms: Vec<Correlation>,
    /// The calibration draw per layer (empty when it is off).
    pub calibration_draw: Vec<DrawSummary>,
    /// The estimated mean normal score per conditioned layer and whether it was applied.
    pub means: Vec<MeanSummary>,
    /// What the realizations reproduce at the well nodes: `well_nodes`, `measured` or
    /// `held_out`.
    pub conditioning: String,
}

/// One total in `summary.json`.
#[derive(Clone, Debug, Serialize)]
pub struct QuantitySummary {
    /// Quantity name.
    pub quantity: String,
    /// Step name.
    pub step: String,
    /// Unit.
    pub unit: String,
    /// P10/P50/P90, mean, sd of the correlated realizations.
    #[serde(flatten)]
    pub summary: Summary,
    /// Every node at its P10 / P50 / P90 at once.
    pub sum_of_node_bands: Band,
    /// Nodes independent.
    pub independent: Option<Summary>,
}

impl TotalsRecord {
    /// The summary part of this record.
    pub fn summary(&self) -> TotalsSummary {
        TotalsSummary {
            realizations: self.realizations,
            seed: self.seed,
            convention: self.convention.clone(),
            quantities: self
                .quantities
                .iter()
                .map(|q| QuantitySummary {
                    quantity: q.quantity.clone(),
                    step: q.step.clone(),
                    unit: q.unit.clone(),
                    summary: q.summary,
                    sum_of_node_bands: q.comonotone,
                    independent: q.independent,
                })
                .collect(),
            variograms: self.correlations.clone(),
            calibration_draw: self.calibration_draw.clone(),
            means: self.means.clone(),
            conditioning: self.conditioning.clone(),
        }
    }
}

/// One total scored against the truth.
#[derive(Clone, Debug, Serialize)]
pub struct TotalScore {
    /// Quantity name.
    pub quantity: String,
    /// Step name.
    pub step: String,
    /// Unit.
    pub unit: String,
    /// The total of the truth maps over the nodes that have a prediction.
    pub truth: f64,
    /// P10 (run's convention).
    pub p10: f64,
    /// P50.
    pub p50: f64,
    /// P90.
    pub p90: f64,
    /// True when the truth lies between P10 and P90.
    pub inside: bool,
    /// The same for the sum of node P10 / P50 / P90 maps.
    pub sum_of_node_bands: RuleScore,
    /// The same for independent nodes.
    pub independent: Option<RuleScore>,
}

/// A naive rule's band and whether it holds the truth.
#[derive(Clone, Debug, Serialize)]
pub struct RuleScore {
    /// P10.
    pub p10: f64,
    /// P50.
    pub p50: f64,
    /// P90.
    pub p90: f64,
    /// True when the truth lies between P10 and P90.
    pub inside: bool,
}

fn inside(truth: f64, a: f64, b: f64) -> bool {
    truth.is_finite() && truth >= a.min(b) && truth <= a.max(b)
}

/// The totals of the run in `results` computed from the truth maps under `truth_root`
/// (`<step>/<target>.tif`) over the nodes the run predicted (its P50 map is not null), beside the
/// run's bands. Empty when the run computed no totals.
pub fn score_totals(
    results: &Path,
    truth_root: &Path,
    grid: &Grid,
) -> Result<Vec<TotalScore>, PipelineError> {
    let path = results.join(TOTALS_JSON);
    if !path.is_file() {
        return Ok(Vec::new());
    }
    let text = std::fs::read_to_string(&path)
        .map_err(|e| PipelineError::Invalid(format!("{}: cannot read: {e}", path.display())))?;
    let record: TotalsRecord =
        serde_json::from_str(&text).map_err(|e| PipelineError::json(&path, e))?;
    let cell = grid.dx * grid.dy;
    let read = |p: &Path| -> Result<Vec<f64>, PipelineError> { Ok(io::geotiff::read(p)?.values) };
    let mut out = Vec::new();
    for q in &record.quantities {
        let truth = read(&truth_root.join(&q.step).join(format!("{}.tif", q.target)))?;
        let mid = read(
            &results
                .join("maps")
                .join(&q.step)
                .join(format!("{}_p50.tif", q.target)),
        )?;
        let active = |i: usize| mid[i].is_finite() && truth[i].is_finite();
        let total = match &q.rule {
            TotalRule::Area {
                threshold,
                direction,
            } => {
                let count = (0..truth.len())
                    .filter(|&i| {
                        active(i)
                            && match direction {
                                Direction::Above => truth[i] > *threshold,
                                Direction::Below => truth[i] < *threshold,
                            }
                    })
                    .count();
                count as f64 * cell * q.scale
            }
            TotalRule::Sum { .. } => {
                let file = q.weight_file.as_deref().unwrap_or_default();
                let w = io::read_map(Path::new(file), grid, 0.01)?;
                (0..truth.len())
                    .filter(|&i| active(i) && w[i].is_finite())
                    .map(|i| w[i] * truth[i])
                    .sum::<f64>()
                    * q.scale
            }
        };
        let s = &q.summary;
        let c = &q.comonotone;
        out.push(TotalScore {
            quantity: q.quantity.clone(),
            step: q.step.clone(),
            unit: q.unit.clone(),
            truth: total,
            p10: s.p10,
            p50: s.p50,
            p90: s.p90,
            inside: inside(total, s.p10, s.p90),
            sum_of_node_bands: RuleScore {
                p10: c.p10,
                p50: c.p50,
                p90: c.p90,
                inside: inside(total, c.p10, c.p90),
            },
            independent: q.independent.map(|i| RuleScore {
                p10: i.p10,
                p50: i.p50,
                p90: i.p90,
                inside: inside(total, i.p10, i.p90),
            }),
        });
    }
    Ok(out)
}

/// The page's totals section from the record (the truth is added by `score`).
pub fn report_section(record: &TotalsRecord) -> crate::report::totals::TotalsReport {
    use crate::report::totals::{DrawEntry, TotalEntry, TotalsReport, VariogramEntry};
    let variograms = record
        .correlations
        .iter()
        .map(|c| {
            let lags: Vec<_> = c
                .experimental
                .lags
                .iter()
                .filter(|l| l.pairs > 0 && l.distance.is_finite())
                .collect();
            let last = c.experimental.lags.last().map_or(1.0, |l| l.upper);
            let curve_distance: Vec<f64> = (1..=60).map(|k| last * k as f64 / 60.0).collect();
            VariogramEntry {
                target: c.target.clone(),
                kind: c.kind.clone(),
                nugget: c.nugget,
                sill: c.sill,
                range: c.range,
                pairs: c.pairs,
                fallback: c.fallback,
                message: c.message.clone(),
                distance: lags.iter().map(|l| l.distance).collect(),
                gamma: lags.iter().map(|l| l.gamma).collect(),
                curve_gamma: curve_distance
                    .iter()
                    .map(|&h| c.fit.model.gamma(h))
                    .collect(),
                curve_distance,
            }
        })
        .collect();
    TotalsReport {
        conditioning: record.conditioning.clone(),
        convention: record.convention.clone(),
        realizations: record.realizations,
        quantities: record
            .quantities
            .iter()
            .map(|q| TotalEntry {
                quantity: q.quantity.clone(),
                step: q.step.clone(),
                unit: q.unit.clone(),
                band: [q.summary.p10, q.summary.p50, q.summary.p90],
                node_bands: [q.comonotone.p10, q.comonotone.p50, q.comonotone.p90],
                independent: q.independent.map(|s| [s.p10, s.p50, s.p90]),
                totals: q.totals.clone(),
                truth: None,
            })
            .collect(),
        variograms,
        calibration_draw: record
            .calibration_draw
            .iter()
            .map(|d| DrawEntry {
                layer: d.layer.clone(),
                wells: d.wells,
                shift_sd: d.shift_sd,
            })
            .collect(),
    }
}
