//! `score`: the maps of a finished run against the truth maps of a synthetic project, at every
//! node, with the metrics of `summary.json` ([`crate::metrics::Metrics`]) and the band figures
//! of [`BandFigures`].
//!
//! Nodes are scored three ways: every node with a prediction, nodes inside the area of
//! applicability, and nodes away from the wells (farther than [`AWAY_FROM_WELLS`] grid spacings
//! from every training well) — the honest test of a map is away from the data it was fitted to.
//!
//! The band figures ([`SetFigures`]) are computed on the node sets `all`, `changed` (truth not
//! zero), `unchanged` (truth exactly zero), every well-free region masked in `truth/masks/` and
//! the bottom and top deciles of the truth, for the calibrated maps and for the engine's own
//! uncalibrated quantile regression forest (Meinshausen 2006) at the same levels, so that what
//! calibration gains is visible: coverage, mean width, the interval score (Gneiting & Raftery
//! 2007, eq. 43), the pinball loss at `(1 - level)/2`, 0.5 and `(1 + level)/2` (Koenker &
//! Bassett 1978), a three-quantile approximation of the CRPS (see [`BandFigures::crps_3q`]),
//! silent misses and the mean P50.

use super::PipelineError;
use super::model::SavedModel;
use crate::grid::Grid;
use crate::io;
use crate::metrics::{ExceedInput, Metrics, MetricsInput};
use crate::metrics::{crps_from_quantiles, decile_cuts, interval_score_one, pinball_one};
use crate::project::Direction;
use ndarray::Axis;
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

/// Figures of one band (the calibrated maps or the uncalibrated forest) on one node set. Nodes
/// count when the truth and both bands' three quantiles are finite. `NaN` (JSON `null`) marks a
/// figure without nodes to compute it from.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BandFigures {
    /// Fraction of nodes with `lo <= truth <= hi`.
    pub coverage: f64,
    /// Mean of `hi - lo`.
    pub mean_width: f64,
    /// Mean interval score at miss rate `1 - level` (Gneiting & Raftery 2007, eq. 43).
    pub interval_score: f64,
    /// Mean pinball loss of `lo` at `(1 - level)/2`.
    pub pinball_lo: f64,
    /// Mean pinball loss of the P50 at 0.5.
    pub pinball_mid: f64,
    /// Mean pinball loss of `hi` at `(1 + level)/2`.
    pub pinball_hi: f64,
    /// Mean of the three pinball losses.
    pub pinball_mean: f64,
    /// Mean three-quantile CRPS, `2 (w_lo rho_lo + w_mid rho_mid + w_hi rho_hi)` with the
    /// midpoint-rule weights of the levels (0.3, 0.4, 0.3 at level 0.8): a quadrature of
    /// `CRPS = 2 integral_0^1 rho_tau(y - F^-1(tau)) dtau` (Gneiting & Raftery 2007, section
    /// 4.2; Laio & Tamea 2007). As a positive combination of pinball losses it is proper for
    /// the three quantiles (Gneiting & Ranjan 2011), so it ranks two forecasts of the same
    /// quantiles fairly; it is not the CRPS of a full distribution: for a calibrated normal
    /// forecast its expectation is 0.530 sigma where the CRPS is 0.564 sigma (6 % low).
    pub crps_3q: f64,
    /// Fraction of the set's nodes whose truth lies outside the band while the node is inside
    /// the area of applicability (a miss nothing warned of).
    pub silent_misses: f64,
    /// Mean P50.
    pub mean_p50: f64,
    /// Mean P50 at the set's nodes whose truth is exactly zero.
    pub mean_p50_unchanged: f64,
}

/// The band figures of one node set.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SetFigures {
    /// Kind of set: `all`, `changed`, `unchanged`, `region` (a mask), `bottom_decile` or
    /// `top_decile` (of the truth, Hyndman & Fan type 7 cuts: `truth <= q(0.1)`,
    /// `truth >= q(0.9)`).
    pub kind: String,
    /// Name of the set: the kind, or the region's name for `region`.
    pub name: String,
    /// Nodes scored.
    pub nodes: usize,
    /// Of them, nodes whose truth is exactly zero.
    pub unchanged_nodes: usize,
    /// The calibrated maps (`None` without nodes).
    pub calibrated: Option<BandFigures>,
    /// The uncalibrated quantile forest at the same levels (`None` without nodes or when the
    /// forest could not be evaluated; `TruthScore::forest_note` says why).
    pub forest: Option<BandFigures>,
    /// `100 (forest - calibrated) / forest` of the interval score: positive when calibration
    /// helps.
    pub interval_score_gain_pct: Option<f64>,
    /// `100 (forest - calibrated) / forest` of the mean pinball loss.
    pub pinball_gain_pct: Option<f64>,
}

/// Scores of one target on one step.
#[derive(Clone, Debug, Serialize)]
pub struct StepScore {
    /// Step name.
    pub step: String,
    /// Scores.
    pub scores: NodeScores,
    /// Band figures per node set.
    pub figures: Vec<SetFigures>,
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
    /// Band figures per node set, all steps pooled.
    pub pooled_figures: Vec<SetFigures>,
}

/// A well-free region read from `truth/masks/<name>.tif`.
#[derive(Clone, Debug, Serialize)]
pub struct RegionInfo {
    /// Region name (the file stem).
    pub name: String,
    /// The mask file.
    pub file: String,
    /// Nodes inside the region (mask value 1).
    pub nodes: usize,
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
    /// Quantile levels of the band figures: `(1 - level)/2`, 0.5, `(1 + level)/2`.
    pub quantile_levels: [f64; 3],
    /// The masked regions found beside the truth.
    pub regions: Vec<RegionInfo>,
    /// The project whose maps fed the uncalibrated forest, when found.
    pub forest_project: Option<String>,
    /// Why the forest's figures are missing, when they are.
    pub forest_note: Option<String>,
    /// Per target.
    pub targets: Vec<TargetScore>,
    /// Field totals from the truth maps beside the run's P10/P50/P90 and the naive rules' (empty
    /// when the run computed none).
    pub totals: Vec<super::totals::TotalScore>,
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

/// The quantile levels of a band at `level`: `(1 - level)/2`, 0.5, `(1 + level)/2`.
pub fn band_levels(level: f64) -> [f64; 3] {
    [(1.0 - level) / 2.0, 0.5, (1.0 + level) / 2.0]
}

/// The three quantiles of a band at every node (`NaN` where there is no prediction).
#[derive(Clone, Debug, Default)]
pub struct Band {
    /// Lower edge, the `(1 - level)/2` quantile.
    pub lo: Vec<f64>,
    /// The P50.
    pub mid: Vec<f64>,
    /// Upper edge, the `(1 + level)/2` quantile.
    pub hi: Vec<f64>,
}

impl Band {
    fn extend(&mut self, other: &Band) {
        self.lo.extend(&other.lo);
        self.mid.extend(&other.mid);
        self.hi.extend(&other.hi);
    }

    fn finite(&self, k: usize) -> bool {
        self.lo[k].is_finite() && self.mid[k].is_finite() && self.hi[k].is_finite()
    }
}

fn mean_of(v: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = v.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    if n == 0 { f64::NAN } else { s / n as f64 }
}

/// The figures of `band` over the nodes `idx` (`None` when `idx` is empty). `inside[k]` is true
/// when node `k` lies inside the area of applicability.
pub fn band_figures(
    truth: &[f64],
    band: &Band,
    inside: &[bool],
    idx: &[usize],
    level: f64,
) -> Option<BandFigures> {
    if idx.is_empty() {
        return None;
    }
    let levels = band_levels(level);
    let alpha = 1.0 - level;
    let at = |f: &dyn Fn(usize) -> f64| mean_of(idx.iter().map(|&k| f(k)));
    let miss = |k: usize| truth[k] < band.lo[k] || truth[k] > band.hi[k];
    let pinball_lo = at(&|k| pinball_one(truth[k], band.lo[k], levels[0]));
    let pinball_mid = at(&|k| pinball_one(truth[k], band.mid[k], levels[1]));
    let pinball_hi = at(&|k| pinball_one(truth[k], band.hi[k], levels[2]));
    Some(BandFigures {
        coverage: at(&|k| f64::from(u8::from(!miss(k)))),
        mean_width: at(&|k| band.hi[k] - band.lo[k]),
        interval_score: at(&|k| interval_score_one(truth[k], band.lo[k], band.hi[k], alpha)),
        pinball_lo,
        pinball_mid,
        pinball_hi,
        pinball_mean: (pinball_lo + pinball_mid + pinball_hi) / 3.0,
        crps_3q: at(&|k| {
            crps_from_quantiles(truth[k], &levels, &[band.lo[k], band.mid[k], band.hi[k]])
        }),
        silent_misses: at(&|k| f64::from(u8::from(miss(k) && inside[k]))),
        mean_p50: at(&|k| band.mid[k]),
        mean_p50_unchanged: mean_of(
            idx.iter()
                .filter(|&&k| truth[k] == 0.0)
                .map(|&k| band.mid[k]),
        ),
    })
}

fn gain_pct(forest: f64, calibrated: f64) -> Option<f64> {
    (forest.is_finite() && calibrated.is_finite() && forest > 0.0)
        .then(|| 100.0 * (forest - calibrated) / forest)
}

/// The band figures of every node set: `all`, `changed`, `unchanged`, each region of `regions`
/// (name, true inside), `bottom_decile` and `top_decile` of the truth. A node counts when its
/// truth and the three quantiles of `calibrated` (and of `forest`, when given) are finite.
pub fn set_figures(
    truth: &[f64],
    calibrated: &Band,
    forest: Option<&Band>,
    inside: &[bool],
    regions: &[RegionMask],
    level: f64,
) -> Vec<SetFigures> {
    let valid: Vec<usize> = (0..truth.len())
        .filter(|&k| {
            truth[k].is_finite() && calibrated.finite(k) && forest.is_none_or(|f| f.finite(k))
        })
        .collect();
    let pick = |keep: &dyn Fn(usize) -> bool| -> Vec<usize> {
        valid.iter().copied().filter(|&k| keep(k)).collect()
    };
    let valid_truth: Vec<f64> = valid.iter().map(|&k| truth[k]).collect();
    let (q10, q90) = decile_cuts(&valid_truth);
    let mut sets: Vec<(String, String, Vec<usize>)> = vec![
        ("all".into(), "all".into(), valid.clone()),
        (
            "changed".into(),
            "changed".into(),
            pick(&|k| truth[k] != 0.0),
        ),
        (
            "unchanged".into(),
            "unchanged".into(),
            pick(&|k| truth[k] == 0.0),
        ),
    ];
    for (name, mask) in regions {
        sets.push(("region".into(), name.clone(), pick(&|k| mask[k])));
    }
    sets.push((
        "bottom_decile".into(),
        "bottom_decile".into(),
        pick(&|k| truth[k] <= q10),
    ));
    sets.push((
        "top_decile".into(),
        "top_decile".into(),
        pick(&|k| truth[k] >= q90),
    ));
    sets.into_iter()
        .map(|(kind, name, idx)| {
            let cal = band_figures(truth, calibrated, inside, &idx, level);
            let fr = forest.and_then(|f| band_figures(truth, f, inside, &idx, level));
            let (is_gain, pb_gain) = match (&cal, &fr) {
                (Some(c), Some(f)) => (
                    gain_pct(f.interval_score, c.interval_score),
                    gain_pct(f.pinball_mean, c.pinball_mean),
                ),
                _ => (None, None),
            };
            SetFigures {
                kind,
                name,
                nodes: idx.len(),
                unchanged_nodes: idx.iter().filter(|&&k| truth[k] == 0.0).count(),
                calibrated: cal,
                forest: fr,
                interval_score_gain_pct: is_gain,
                pinball_gain_pct: pb_gain,
            }
        })
        .collect()
}

/// A region's name and, per node, whether the node lies inside it.
pub type RegionMask = (String, Vec<bool>);

/// The masks under `<truth root>/masks/*.tif` (1 inside), in name order, read on `grid`.
fn read_regions(
    troot: &Path,
    grid: &Grid,
) -> Result<(Vec<RegionInfo>, Vec<RegionMask>), PipelineError> {
    let dir = troot.join("masks");
    let mut files: Vec<PathBuf> = match std::fs::read_dir(&dir) {
        Ok(entries) => entries
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.is_file() && p.extension().is_some_and(|x| x == "tif"))
            .collect(),
        Err(_) => return Ok((Vec::new(), Vec::new())),
    };
    files.sort();
    let mut info = Vec::new();
    let mut masks = Vec::new();
    for f in files {
        let name = f
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let values = io::geotiff::read_on_grid(&f, grid)?;
        if let Some(k) = values
            .iter()
            .position(|v| !(v.is_nan() || *v == 0.0 || *v == 1.0))
        {
            return Err(PipelineError::Invalid(format!(
                "{}: node {k} holds {}; a region mask holds 1 inside and 0 (or null) outside",
                f.display(),
                values[k]
            )));
        }
        let mask: Vec<bool> = values.iter().map(|v| *v == 1.0).collect();
        info.push(RegionInfo {
            name: name.clone(),
            file: f.display().to_string(),
            nodes: mask.iter().filter(|m| **m).count(),
        });
        masks.push((name, mask));
    }
    Ok((info, masks))
}

/// The project whose maps the uncalibrated forest is evaluated on: `explicit` when given, else
/// `project.toml` in the truth folder or beside its `truth/` folder (a synthetic project), else
/// the manifest named in the run's `run.json`.
fn find_project(results: &Path, truth: &Path, explicit: Option<&Path>) -> Option<PathBuf> {
    if let Some(p) = explicit {
        return Some(p.to_path_buf());
    }
    let mut candidates = vec![truth.join("project.toml")];
    if let Some(parent) = truth.parent() {
        candidates.push(parent.join("project.toml"));
    }
    if let Some(p) = std::fs::read_to_string(results.join("run.json"))
        .ok()
        .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
        .and_then(|v| v["project"].as_str().map(PathBuf::from))
    {
        candidates.push(p);
    }
    candidates.into_iter().find(|p| p.is_file())
}

/// Loads the survey for the forest figures and checks that it matches the model and the grid.
fn forest_survey(
    model: &SavedModel,
    grid: &Grid,
    path: &Path,
) -> Result<crate::project::Survey, String> {
    let survey = crate::project::load_survey(path).map_err(|e| e.to_string())?;
    let p = &survey.project;
    let mut names = p.attribute_names.clone();
    names.push(crate::sample::STEP_FEATURE.to_string());
    if names != model.feature_names {
        return Err(format!(
            "{}: its attributes {:?} are not the model's features {:?}",
            path.display(),
            p.attribute_names,
            model.feature_names
        ));
    }
    let differences = p.grid.differences(grid);
    if !differences.is_empty() {
        return Err(format!(
            "{}: its grid differs from the results' maps ({})",
            path.display(),
            differences.join("; ")
        ));
    }
    for (k, name) in model.step_names.iter().enumerate() {
        if p.steps.get(k).map(|s| &s.name) != Some(name) {
            return Err(format!(
                "{}: step {} is not the model's step `{name}`",
                path.display(),
                k + 1
            ));
        }
    }
    Ok(survey)
}

/// The uncalibrated quantile forest of target `t` at every node of step `s` (the model's step
/// index): the forest's conditional quantiles at [`band_levels`], clipped to the target's bounds;
/// `NaN` where an attribute is null.
pub fn forest_band(
    model: &SavedModel,
    survey: &crate::project::Survey,
    t: usize,
    s: usize,
) -> Result<Band, PipelineError> {
    let cal = &model.calibrated[t];
    let x = crate::sample::node_features_at(survey, s, model.width(t));
    if x.ncols() != cal.reference_forest().n_features() {
        return Err(PipelineError::Invalid(format!(
            "target {}: the forest expects {} features, the project gives {}",
            cal.name,
            cal.reference_forest().n_features(),
            x.ncols()
        )));
    }
    let n = x.nrows();
    let n_attr = x.ncols() - 1;
    let valid: Vec<usize> = (0..n)
        .filter(|&r| x.row(r).iter().take(n_attr).all(|v| v.is_finite()))
        .collect();
    let compact = x.select(Axis(0), &valid);
    let levels = band_levels(cal.level);
    let (q, _) = cal
        .reference_forest()
        .predict_distribution(compact.view(), 0, &levels, &[]);
    let (lo_b, hi_b) = cal.bounds;
    let mut band = Band {
        lo: vec![f64::NAN; n],
        mid: vec![f64::NAN; n],
        hi: vec![f64::NAN; n],
    };
    for (k, &r) in valid.iter().enumerate() {
        band.lo[r] = q[[k, 0]].clamp(lo_b, hi_b);
        band.mid[r] = q[[k, 1]].clamp(lo_b, hi_b);
        band.hi[r] = q[[k, 2]].clamp(lo_b, hi_b);
    }
    Ok(band)
}

/// Scores the run in `results` against the truth maps under `truth`; writes `truth-score.json`
/// into `results` and returns it with the error maps. The uncalibrated forest is evaluated on the
/// project found as [`score_with`] describes.
pub fn score(results: &Path, truth: &Path) -> Result<(TruthScore, ErrorMaps), PipelineError> {
    score_with(results, truth, None)
}

/// [`score`] with the project whose maps feed the uncalibrated forest: `project` when given,
/// else `project.toml` in the truth folder or beside its `truth/` folder, else the manifest
/// named in `run.json`. When none is found or it does not match the model, the forest's figures
/// are left out and `forest_note` says why.
pub fn score_with(
    results: &Path,
    truth: &Path,
    project: Option<&Path>,
) -> Result<(TruthScore, ErrorMaps), PipelineError> {
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
    let (regions, masks) = read_regions(&troot, &grid)?;
    let (survey, forest_note) = forest_project(&model, &grid, results, truth, project);
    let level = model.level;
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
        let (mut pooled_cal, mut pooled_forest) = (Band::default(), Band::default());
        let mut pooled_masks: Vec<RegionMask> =
            masks.iter().map(|(n, _)| (n.clone(), Vec::new())).collect();
        let mut steps = Vec::new();
        for (s, step) in model.step_names.iter().enumerate() {
            let (data, inside) = read_step(
                &results.join("maps").join(step),
                &troot.join(step).join(format!("{}.tif", spec.name)),
                &spec.name,
                &ths,
                (&lo_label, &hi_label),
                &grid,
            )?;
            let cal_band = Band {
                lo: data.lo.clone(),
                mid: data.mid.clone(),
                hi: data.hi.clone(),
            };
            let forest = match &survey {
                Some(sv) => Some(forest_band(&model, sv, t, s)?),
                None => None,
            };
            steps.push(StepScore {
                step: step.clone(),
                scores: scores(&model, t, &data, &inside, &away),
                figures: set_figures(
                    &data.truth,
                    &cal_band,
                    forest.as_ref(),
                    &inside,
                    &masks,
                    level,
                ),
            });
            pooled_cal.extend(&cal_band);
            if let Some(f) = &forest {
                pooled_forest.extend(f);
            }
            for ((_, acc), (_, m)) in pooled_masks.iter_mut().zip(&masks) {
                acc.extend(m);
            }
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
            pooled_figures: set_figures(
                &pooled.truth,
                &pooled_cal,
                survey.as_ref().map(|_| &pooled_forest),
                &pooled_inside,
                &pooled_masks,
                level,
            ),
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
        quantile_levels: band_levels(level),
        regions,
        forest_project: survey
            .as_ref()
            .map(|s| s.project.manifest_path.display().to_string()),
        forest_note,
        targets,
        totals: super::totals::score_totals(results, &troot, &grid)?,
    };
    let text = serde_json::to_string_pretty(&out)
        .map_err(|e| PipelineError::json(results.join("truth-score.json"), e))?;
    io::atomic::write_bytes(&results.join("truth-score.json"), text.as_bytes())?;
    Ok((out, ErrorMaps { grid, maps: errors }))
}

/// Scores the run (see [`score`]), draws the error maps into `pictures/errors/` and, when the run
/// wrote a review page, adds a truth section to it and writes it again.
pub fn score_and_report(results: &Path, truth: &Path) -> Result<TruthScore, PipelineError> {
    score_and_report_with(results, truth, None)
}

/// [`score_and_report`] with the project for the uncalibrated forest (see [`score_with`]).
pub fn score_and_report_with(
    results: &Path,
    truth: &Path,
    project: Option<&Path>,
) -> Result<TruthScore, PipelineError> {
    use crate::report::input as ri;
    use crate::report::picture::map_png;
    let (scores, errors) = score_with(results, truth, project)?;
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
        if let Some(tot) = input.totals.as_mut() {
            for q in &mut tot.quantities {
                let hit = scores
                    .totals
                    .iter()
                    .find(|t| t.quantity == q.quantity && t.step == q.step);
                q.truth = hit.map(|t| t.truth);
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

/// One step's maps of one target (`maps_dir` the step's folder of a results folder), its truth,
/// and the area-of-applicability flag per node.
fn read_step(
    maps_dir: &Path,
    truth: &Path,
    target: &str,
    ths: &[&crate::project::ThresholdSpec],
    (lo_label, hi_label): (&str, &str),
    grid: &Grid,
) -> Result<(Pooled, Vec<bool>), PipelineError> {
    let read = |p: PathBuf| io::geotiff::read_on_grid(&p, grid);
    let base = |suffix: &str| maps_dir.join(format!("{target}_{suffix}.tif"));
    let data = Pooled {
        truth: read(truth.to_path_buf())?,
        mid: read(base("p50"))?,
        lo: read(base(lo_label))?,
        hi: read(base(hi_label))?,
        exceed: ths
            .iter()
            .map(|th| read(base(&format!("exceed_{}", th.label))))
            .collect::<Result<_, _>>()?,
    };
    // Results folders written before the maps were renamed call it inside.tif.
    let area = maps_dir.join("applicable.tif");
    let area = if area.exists() {
        area
    } else {
        maps_dir.join("inside.tif")
    };
    let inside: Vec<bool> = read(area)?.iter().map(|v| *v == 1.0).collect();
    Ok((data, inside))
}

/// The project the uncalibrated forest is evaluated on (`--project`, else `project.toml` in or
/// beside the truth folder, else the run's), or why it is not evaluated.
fn forest_project(
    model: &SavedModel,
    grid: &Grid,
    results: &Path,
    truth: &Path,
    project: Option<&Path>,
) -> (Option<crate::project::Survey>, Option<String>) {
    match &find_project(results, truth, project) {
        None => (
            None,
            Some(
                "no project found (give --project, or keep project.toml beside truth/): the \
                 uncalibrated forest was not evaluated"
                    .to_string(),
            ),
        ),
        Some(p) => match forest_survey(model, grid, p) {
            Ok(s) => (Some(s), None),
            Err(e) => (
                None,
                Some(format!("the uncalibrated forest was not evaluated: {e}")),
            ),
        },
    }
}
