//! Fitting and calibrating: the manifest's settings mapped onto [`CalibrationSettings`], the
//! training rows of one target, one target calibrated on chosen rows and feature columns
//! ([`calibrate_rows`], shared by the main run and the studies), permutation importance, and the
//! whole model of a run ([`fit_model`]: every target, the covariate-shift estimate, the area of
//! applicability, and the nodes' share of change for each target with a "no change" atom,
//! [`node_priors`]).
//!
//! The method itself lives in [`crate::calibrate`] (leave-wells-out calibration) and
//! [`crate::applicability`] (Meyer & Pebesma 2021); permutation importance is Breiman's (2001,
//! Machine Learning 45) on the forest of each target.

use super::PipelineError;
use super::model::SavedModel;
use super::scale::WidthChoice;
use super::stages::Stages;
use crate::applicability::{self, Applicability, Ground};
use crate::calibrate::input::{Space, ZeroSetting};
use crate::calibrate::shift::{self, CovariateShift, RowShift, ShiftSettings};
use crate::calibrate::{self, CalibratedTarget, CalibrationSettings, TargetData, Threshold};
use crate::ensemble::{BoostSettings, ForestSettings};
use crate::project::{self, Direction, Project, Survey};
use crate::sample::{self, TrainingSet};
use ndarray::Axis;

/// Grid nodes sampled (over all steps) to estimate the covariate shift from wells to nodes.
pub const SHIFT_NODE_SAMPLE: usize = 4000;

/// Maps the manifest's settings onto the calibration settings.
pub fn calibration_settings(project: &Project, seed: u64) -> CalibrationSettings {
    let m = &project.model;
    let c = &project.calibration;
    CalibrationSettings {
        level: c.level,
        fold_method: match c.fold_method {
            project::FoldMethod::Wells => calibrate::FoldMethod::Wells,
            project::FoldMethod::Blocks => calibrate::FoldMethod::Blocks,
            project::FoldMethod::OneWell => calibrate::FoldMethod::OneWell,
        },
        folds: c.folds,
        end_correction: c.end_correction,
        max_bins: c.max_bins,
        min_wells_per_bin: c.min_wells_per_bin,
        learner: match m.learner {
            project::LearnerChoice::Auto => calibrate::LearnerChoice::Auto,
            project::LearnerChoice::Forest => calibrate::LearnerChoice::Forest,
            project::LearnerChoice::Boost => calibrate::LearnerChoice::Boost,
        },
        forest: ForestSettings {
            n_trees: m.trees,
            max_depth: (m.max_depth > 0).then_some(m.max_depth),
            min_samples_leaf: m.min_samples_leaf,
            max_features: m.max_features,
            seed,
            ..ForestSettings::default()
        },
        boost: BoostSettings {
            n_rounds: m.boost_rounds,
            learning_rate: m.learning_rate,
            max_depth: m.boost_max_depth,
            seed: seed.wrapping_add(1),
            ..BoostSettings::default()
        },
        seed,
    }
}

/// The rows of `ts` where target `t` was measured.
pub fn target_rows(ts: &TrainingSet, t: usize) -> Vec<usize> {
    (0..ts.x.nrows())
        .filter(|&r| ts.y[[r, t]].is_finite())
        .collect()
}

/// Calibration thresholds of target `t`.
pub fn thresholds_for(project: &Project, t: usize) -> Vec<Threshold> {
    project
        .thresholds
        .iter()
        .filter(|th| th.target == project.targets[t].name)
        .map(|th| Threshold {
            label: th.label.clone(),
            value: th.value,
            above: matches!(th.direction, Direction::Above),
        })
        .collect()
}

/// Calibrates target `t` on the rows `rows` of the training set, using only the feature columns
/// `cols` (all columns for the main run; fewer for ablation studies). With `shift` (one ratio per
/// training-set row), the band is calibrated for the mapped nodes ([`calibrate::shift`]).
#[allow(clippy::too_many_arguments)]
pub fn calibrate_rows(
    project: &Project,
    ts: &TrainingSet,
    t: usize,
    rows: &[usize],
    cols: &[usize],
    settings: &CalibrationSettings,
    shift: Option<&CovariateShift>,
    space: Option<&Applicability>,
) -> Result<CalibratedTarget, PipelineError> {
    let x = ts.x.select(Axis(0), rows).select(Axis(1), cols);
    // The rows as points of the applicability model's space (the plain attributes and the
    // step); only when the target reads all its columns (not in the ablation's fewer).
    let points: Option<Vec<f64>> = space.filter(|_| cols.len() == ts.x.ncols()).map(|a| {
        let p = a.n_features();
        rows.iter()
            .flat_map(|&r| a.train[r * p..(r + 1) * p].iter().copied())
            .collect()
    });
    let y: Vec<f64> = rows.iter().map(|&r| ts.y[[r, t]]).collect();
    let group: Vec<usize> = rows.iter().map(|&r| ts.group[r]).collect();
    let xy: Vec<[f64; 2]> = rows.iter().map(|&r| ts.xy[r]).collect();
    let step: Vec<usize> = rows.iter().map(|&r| ts.step[r]).collect();
    let weight: Vec<f64> = rows.iter().map(|&r| ts.weight[r]).collect();
    let ratio: Vec<f64> = shift.map_or_else(Vec::new, |s| {
        rows.iter().map(|&r| s.well_ratio[r]).collect()
    });
    let spec = &project.targets[t];
    let data = TargetData {
        name: &spec.name,
        x: x.view(),
        y: &y,
        group: &group,
        xy: &xy,
        step: &step,
        weight: &weight,
        bounds: (spec.min, spec.max),
        thresholds: thresholds_for(project, t),
        shift: shift.map(|s| RowShift {
            ratio: &ratio,
            test_ratio: s.node_mean_ratio,
        }),
        zero: ZeroSetting {
            change: spec.zero_change,
            tolerance: spec.zero_tolerance,
        },
        dissimilarity: match (&points, space) {
            (Some(points), Some(a)) => Some(Space {
                points,
                dim: a.n_features(),
                mean_distance: a.mean_distance,
            }),
            _ => None,
        },
    };
    calibrate::calibrate_target(&data, settings).map_err(|source| PipelineError::Calibrate {
        target: spec.name.clone(),
        source,
    })
}

/// Permutation importance per feature for each target (forest on the target's rows of its own
/// training set, `sets[t]`: the attributes at the target's smoothing width), each normalised to
/// sum to one (all zero when no feature helps). Columns are the plain training set's (a smoothed
/// attribute counts for the attribute it smooths).
pub fn importance(
    sets: &[TrainingSet],
    settings: &CalibrationSettings,
) -> Result<Vec<Vec<f64>>, PipelineError> {
    let mut out = Vec::new();
    // The plain training set's columns: the names of a target set without smoothed ones.
    let plain_names: Vec<&String> = sets
        .first()
        .map(|s| {
            s.feature_names
                .iter()
                .filter(|n| !n.contains('~'))
                .collect()
        })
        .unwrap_or_default();
    for (t, ts) in sets.iter().enumerate() {
        let rows = target_rows(ts, t);
        if rows.len() < 4 {
            out.push(vec![0.0; plain_names.len()]);
            continue;
        }
        let x = ts.x.select(Axis(0), &rows);
        let y = ts.y.select(Axis(0), &rows).select(Axis(1), &[t]);
        let w: Vec<f64> = rows.iter().map(|&r| ts.weight[r]).collect();
        let forest = settings.forest.fit(x.view(), y.view(), Some(&w))?;
        let imp = forest.permutation_importance(x.view(), y.view(), 3, settings.seed ^ 0x5eed);
        // A smoothed attribute's share goes to the attribute it smooths (plain columns only).
        let plain_cols = plain_names.len();
        let mut clean = vec![0.0; plain_cols];
        for (name, v) in ts.feature_names.iter().zip(&imp) {
            let a = sample::attribute_of(name);
            if let Some(c) = plain_names.iter().position(|n| n.as_str() == a) {
                clean[c] += v.max(0.0);
            }
        }
        let total: f64 = clean.iter().sum();
        out.push(if total > 0.0 {
            clean.iter().map(|v| v / total).collect()
        } else {
            clean
        });
    }
    Ok(out)
}

/// Each target's smoothing width ([`super::scale::choose`]; none for a target that `offered`
/// leaves out, `[smoothing] targets`) and its own training set (the plain one's rows with the
/// attributes at that width).
pub fn target_sets(
    ts: &TrainingSet,
    folds: &[usize],
    settings: &CalibrationSettings,
    offered: &[bool],
) -> Result<(Vec<WidthChoice>, Vec<TrainingSet>), PipelineError> {
    let mut choices = Vec::new();
    let mut sets = Vec::new();
    for t in 0..ts.target_names.len() {
        let rows = target_rows(ts, t);
        let choice = if offered.get(t).copied().unwrap_or(true) {
            super::scale::choose(ts, t, &rows, folds, settings)?
        } else {
            WidthChoice::not_offered()
        };
        sets.push(
            ts.at_width(choice.width)
                .expect("the chosen width is one of the training set's"),
        );
        choices.push(choice);
    }
    Ok((choices, sets))
}

/// Fits everything on a loaded survey: calibrated targets, importance and the area of
/// applicability. Returns the model and the per-target importance.
pub fn fit_model(
    survey: &Survey,
    ts: &TrainingSet,
    seed: u64,
    stages: &mut Stages,
) -> Result<(SavedModel, Vec<Vec<f64>>), PipelineError> {
    fit_model_keeping(survey, ts, seed, stages).map(|(model, imp, _)| (model, imp))
}

/// Each hurdle target's calibrated probability of a change (before the nodes' share) at the
/// mapped nodes of every step of the survey a model was fitted on: `[step][target]`, `None` for
/// a continuous target; the rows of each step are the nodes with every attribute, in order.
pub type KnownChange = Vec<Vec<Option<Vec<f64>>>>;

/// As [`fit_model`], also returning the probabilities of a change that fitting computed at every
/// node ([`node_priors`]), so that mapping the same survey need not compute them again
/// ([`SavedModel::predict_known`]).
pub fn fit_model_keeping(
    survey: &Survey,
    ts: &TrainingSet,
    seed: u64,
    stages: &mut Stages,
) -> Result<(SavedModel, Vec<Vec<f64>>, KnownChange), PipelineError> {
    let project = &survey.project;
    let settings = calibration_settings(project, seed);
    // How typical of the nodes the wells are: always estimated and reported (summary.json);
    // used to weight the band's calibration only when the manifest asks for it.
    let nodes = sample::node_sample(survey, SHIFT_NODE_SAMPLE, seed ^ 0x5a1f);
    let applied = project.calibration.covariate_shift;
    let shift = match shift::estimate(
        ts.x.view(),
        &ts.group,
        nodes.view(),
        &ShiftSettings::default(),
    ) {
        Ok(s) => Some(s),
        // Only a grid without any mapped node or fewer than two wells get here; the
        // calibration below reports the latter in its own words.
        Err(_) if !applied => None,
        Err(source) => {
            return Err(PipelineError::Calibrate {
                target: "(covariate shift from the wells to the nodes)".into(),
                source,
            });
        }
    };
    let wells_vs_nodes = shift.as_ref().map(|s| s.summary(&ts.group, applied));
    let shift = shift.filter(|_| applied);
    stages.done("wells against nodes");
    let folds = calibrate::folds::assign(
        &ts.group,
        &ts.xy,
        settings.fold_method,
        settings.folds,
        settings.seed,
    );
    let offered: Vec<bool> = ts
        .target_names
        .iter()
        .map(|n| survey.project.may_smooth(n))
        .collect();
    let (choices, sets) = target_sets(ts, &folds, &settings, &offered)?;
    let imp = importance(&sets, &settings)?;
    // The area of applicability lives in the plain attributes' space, so its weights are the
    // importance of forests on the plain attributes, whatever each target smooths: the area
    // does not move with the smoothing choice.
    let plain_imp = if sets.iter().any(|s| s.x.ncols() != ts.x.ncols()) {
        importance(&vec![ts.clone(); sets.len()], &settings)?
    } else {
        imp.clone()
    };
    let p = ts.x.ncols();
    let mean_imp: Vec<f64> = (0..p)
        .map(|c| plain_imp.iter().map(|v| v[c]).sum::<f64>() / plain_imp.len().max(1) as f64)
        .collect();
    // Every feature, the step index included, takes part in the range check: a step the wells
    // never saw is an extrapolation in time.
    let checked = vec![true; p];
    let applicability =
        Applicability::fit(&ts.feature_names, ts.x.view(), &mean_imp, &folds, &checked)?
            .with_range_margin(applicability::RANGE_MARGIN);
    let ground = fit_ground(survey, ts, &folds);
    stages.done("importance, applicability");

    let bar = stages.bar(project.targets.len() as u64, "calibrate targets");
    let mut calibrated = Vec::new();
    for (t, set) in sets.iter().enumerate() {
        let rows = target_rows(ts, t);
        calibrated.push(calibrate_rows(
            project,
            set,
            t,
            &rows,
            &(0..set.x.ncols()).collect::<Vec<_>>(),
            &settings,
            shift.as_ref(),
            Some(&applicability),
        )?);
        bar.inc(1);
    }
    bar.finish_and_clear();
    let widths: Vec<f64> = choices.iter().map(|c| c.width).collect();
    let known = node_priors(survey, &mut calibrated, &widths)?;
    stages.done("fit and calibrate");

    let model = SavedModel {
        format: super::model::MODEL_FORMAT,
        version: env!("CARGO_PKG_VERSION").to_string(),
        feature_names: ts.feature_names.clone(),
        step_names: project.steps.iter().map(|s| s.name.clone()).collect(),
        targets: project.targets.clone(),
        thresholds: project.thresholds.clone(),
        convention: project.convention,
        level: project.calibration.level,
        calibrated,
        applicability,
        ground,
        wells: well_positions(survey),
        wells_vs_nodes,
        smoothing: widths,
        smoothing_choice: choices,
    };
    Ok((model, imp, known))
}

/// Adjusts every hurdle target's probability of a change to the share of change among the
/// survey's mapped nodes ([`crate::calibrate::prior`]; Saerens, Latinne & Decaestecker 2002):
/// the calibrated probability at every node with all attributes of every step, one EM estimate
/// of the nodes' share over all steps together (the probability forest and its recalibration
/// pool the steps, so its prior is the wells' share over all steps), set on the target. A
/// target whose estimate cannot be made keeps the wells' share; an iteration that did not
/// settle is kept and warned about. `widths[t]` is target `t`'s smoothing width (metres, 0 =
/// plain attributes). Returns the probabilities it computed ([`KnownChange`]).
pub fn node_priors(
    survey: &Survey,
    calibrated: &mut [CalibratedTarget],
    widths: &[f64],
) -> Result<KnownChange, PipelineError> {
    let n_steps = survey.project.steps.len();
    let mut known: KnownChange = vec![vec![None; calibrated.len()]; n_steps];
    let hurdles: Vec<usize> = (0..calibrated.len())
        .filter(|&t| {
            calibrated[t]
                .hurdle
                .as_ref()
                .is_some_and(|h| h.training_prior.is_some())
        })
        .collect();
    if hurdles.is_empty() {
        return Ok(known);
    }
    // Per hurdle target: the wells' share, and each step's name and node probabilities.
    let mut training = vec![f64::NAN; hurdles.len()];
    let mut probs: Vec<Vec<(String, Vec<f64>)>> = vec![Vec::new(); hurdles.len()];
    for (s, step) in survey.project.steps.iter().enumerate() {
        let x = sample::node_features(survey, s);
        let n_attr = x.ncols() - 1;
        let valid: Vec<usize> = (0..x.nrows())
            .filter(|&r| x.row(r).iter().take(n_attr).all(|v| v.is_finite()))
            .collect();
        let plain = x.select(Axis(0), &valid);
        for (k, &t) in hurdles.iter().enumerate() {
            let cal = &calibrated[t];
            let w = widths.get(t).copied().unwrap_or(0.0);
            let smoothed =
                (w > 0.0).then(|| sample::node_features_at(survey, s, w).select(Axis(0), &valid));
            let compact = smoothed.as_ref().unwrap_or(&plain);
            let found = cal.change_probability(compact.view()).map_err(|source| {
                PipelineError::Calibrate {
                    target: cal.name.clone(),
                    source,
                }
            })?;
            if let Some((p, share)) = found {
                training[k] = share;
                probs[k].push((step.name.clone(), p));
            }
        }
    }
    for (k, &t) in hurdles.iter().enumerate() {
        let shift = calibrate::prior::PriorShift::fit(training[k], &probs[k]);
        let cal = &mut calibrated[t];
        if let Some(sh) = &shift
            && !sh.converged
        {
            cal.diagnostics.warnings.push(format!(
                "the share of change at the nodes did not settle in {} iterations; the \
                 probability of a change uses the last estimate, {:.3} (wells: {:.3})",
                sh.iterations, sh.estimated, sh.training
            ));
        }
        cal.set_prior(shift);
    }
    for (k, &t) in hurdles.iter().enumerate() {
        for (name, p) in std::mem::take(&mut probs[k]) {
            if let Some(s) = survey.project.step_index(&name) {
                known[s][t] = Some(p);
            }
        }
    }
    Ok(known)
}

/// The ground check ([`Ground`]) fitted on the wells of the training set: one position, one
/// attribute history (every step's attributes at the well) and one cross-validation fold per well
/// (its first row's; folds hold whole wells). `None` when fewer than two wells have a full history
/// at distinct positions: the area is then the row check alone.
pub fn fit_ground(survey: &Survey, ts: &TrainingSet, folds: &[usize]) -> Option<Ground> {
    let grid = &survey.project.grid;
    let mut xy: Vec<[f64; 2]> = Vec::new();
    let mut fold = Vec::new();
    let mut rows: Vec<f64> = Vec::new();
    for g in 0..ts.n_wells() {
        if let Some(r) = (0..ts.n_rows()).find(|&r| ts.group[r] == g) {
            xy.push(ts.xy[r]);
            fold.push(folds[r]);
            rows.extend(applicability::history_at(
                &survey.maps,
                grid,
                ts.xy[r][0],
                ts.xy[r][1],
            ));
        }
    }
    let q = rows.len() / xy.len().max(1);
    let hist = ndarray::Array2::from_shape_vec((xy.len(), q), rows).ok()?;
    Ground::fit(&xy, hist.view(), &fold).ok()
}

/// Distinct (well, x, y) positions of the survey's well records, in file order.
pub fn well_positions(survey: &Survey) -> Vec<(String, f64, f64)> {
    crate::sample::well_positions(survey)
}
