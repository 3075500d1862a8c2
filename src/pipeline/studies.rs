//! What a run adds around the maps: the infill ranking, `summary.json` and its printed table, and
//! the sensitivity studies of the report (learning curve over the number of wells; ablation of the
//! angle-dependent attributes).

use super::PipelineError;
use super::fit::{calibrate_rows, calibration_settings, target_rows};
use super::model::{SavedModel, StepMaps, convention_text};
use super::outputs::Writer;
use super::stages::Stages;
use crate::calibrate::{CalibratedTarget, CalibrationSettings, LearnerChoice};
use crate::decide::{self, InfillSettings, RankInputs, Target};
use crate::metrics::{crps_from_quantiles, quantile_sorted};
use crate::project::Survey;
use crate::sample::TrainingSet;
use crate::skill::{Skill, SkillInput, SkillSettings, StepSkill, assess, assess_by_step};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use serde::{Deserialize, Serialize};

/// The infill ranking of a run.
pub struct Infill {
    /// Ranked targets.
    pub targets: Vec<Target>,
    /// Index of the step ranked on.
    pub step: usize,
    /// Chance of a favourable outcome per node.
    pub chance: Vec<f64>,
    /// The criterion, in words.
    pub criterion: String,
}

/// Ranks infill targets when the manifest asks for it and writes `targets.csv`.
pub fn infill(
    survey: &Survey,
    model: &SavedModel,
    maps: &[StepMaps],
    w: &mut Writer,
) -> Result<Option<Infill>, PipelineError> {
    let project = &survey.project;
    let Some(spec) = &project.infill else {
        return Ok(None);
    };
    let (t, k) = model
        .targets
        .iter()
        .enumerate()
        .find_map(|(t, _)| {
            model
                .thresholds_of(t)
                .iter()
                .position(|th| th.label == spec.threshold)
                .map(|k| (t, k))
        })
        .ok_or_else(|| {
            PipelineError::Invalid(format!(
                "{}: [infill] threshold = \"{}\" names no [[threshold]] label",
                project.manifest_path.display(),
                spec.threshold
            ))
        })?;
    let s = match &spec.step {
        Some(name) => project
            .steps
            .iter()
            .position(|st| &st.name == name)
            .ok_or_else(|| {
                PipelineError::Invalid(format!(
                    "{}: [infill] step = \"{name}\" names no [[step]]",
                    project.manifest_path.display()
                ))
            })?,
        None => project.steps.len() - 1,
    };
    let volume = match &spec.volume_map {
        Some(path) => Some(crate::io::read_map(
            path,
            &project.grid,
            project.snap_tolerance,
        )?),
        None => None,
    };
    // Chance of remaining oil: the threshold NOT being crossed.
    let chance: Vec<f64> = maps[s].targets[t].exceed[k]
        .iter()
        .map(|p| 1.0 - p)
        .collect();
    let wells = &model.wells;
    let settings = InfillSettings {
        drainage_radius: spec.drainage_radius,
        min_well_spacing: spec.min_well_spacing,
        min_target_spacing: spec.min_target_spacing,
        count: spec.count,
    };
    let targets = decide::rank_targets(
        &RankInputs {
            grid: &project.grid,
            chance: &chance,
            volume: volume.as_deref(),
            inside: &maps[s].applicability.inside,
            wells,
        },
        &settings,
    )?;
    let th = model.thresholds_of(t)[k];
    let table = decide::TargetsTable {
        step: project.steps[s].name.clone(),
        threshold_label: th.label.clone(),
        criterion: format!(
            "{} not {} {} (not {})",
            th.target,
            match th.direction {
                crate::project::Direction::Above => "above",
                crate::project::Direction::Below => "below",
            },
            th.value,
            th.label
        ),
        volume_unit: spec.risked_volume_unit(),
        crs: decide::crs_label(&project.grid),
    };
    w.bytes("targets.csv", decide::to_csv(&targets, &table).as_bytes())?;
    w.json("targets.json", &table.sidecar(&targets))?;
    let criterion = format!(
        "the chance that {} is not {} (not {}), step {}",
        th.target,
        match th.direction {
            crate::project::Direction::Above => format!("above {}", th.value),
            crate::project::Direction::Below => format!("below {}", th.value),
        },
        th.label,
        project.steps[s].name
    );
    Ok(Some(Infill {
        targets,
        step: s,
        chance,
        criterion,
    }))
}

/// Importance of one feature for one target.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct FeatureImportance {
    /// Feature name.
    pub feature: String,
    /// Share of the permutation importance (sums to one over features).
    pub share: f64,
}

/// One target's entry of `summary.json`.
#[derive(Clone, Debug, Serialize)]
pub struct TargetSummary {
    /// Target name.
    pub name: String,
    /// Unit.
    pub unit: String,
    /// Physical bounds.
    pub bounds: [f64; 2],
    /// Permutation importance per feature.
    pub importance: Vec<FeatureImportance>,
    /// Leave-wells-out diagnostics from calibration (schema in docs/summary-schema.md); written
    /// as [`named_steps`] gives them.
    #[serde(skip)]
    pub diagnostics: crate::calibrate::TargetDiagnostics,
    /// `diagnostics` as written in `summary.json`: each `metrics_by_step` entry names its step.
    #[serde(rename = "diagnostics")]
    pub diagnostics_json: serde_json::Value,
    /// Leave-wells-out skill against the wells' climatology, steps pooled, with its verdict.
    pub skill: Option<Skill>,
    /// The same per step, by name.
    pub skill_by_step: Vec<StepSkill>,
    /// The out-of-fold band at held-out wells of each kind (empty when the wells file gives no
    /// kind; [`super::kinds`]).
    pub by_kind: Vec<super::kinds::KindFigures>,
    /// The width the target's attribute maps are smoothed by and how every candidate scored at
    /// held-out wells ([`super::scale`]); width 0 and no candidates when smoothing is off.
    pub smoothing: super::scale::WidthChoice,
}

/// Contents of `summary.json`.
#[derive(Clone, Debug, Serialize)]
pub struct Summary {
    /// tidemark version.
    pub version: String,
    /// Project name.
    pub project: String,
    /// Label convention, in words.
    pub convention: String,
    /// Nominal band level.
    pub level: f64,
    /// Wells in the training set.
    pub wells: usize,
    /// Rows (well, step) in the training set.
    pub rows: usize,
    /// Per target.
    pub targets: Vec<TargetSummary>,
    /// Area-of-applicability threshold on the dissimilarity index.
    pub applicability_threshold: f64,
    /// How representative the wells' attributes are of the mapped nodes (`None` when it could
    /// not be estimated).
    pub wells_vs_nodes: Option<crate::calibrate::shift::ShiftSummary>,
    /// Ranked infill targets (empty without `[infill]`).
    pub infill: Vec<Target>,
    /// Cautions that go with the results.
    pub cautions: Vec<String>,
    /// Field totals and the variogram of each target's held-out errors (with `[totals]`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub totals: Option<super::totals::TotalsSummary>,
}

/// Builds `summary.json`.
pub fn summary(
    survey: &Survey,
    ts: &TrainingSet,
    model: &SavedModel,
    importance: &[Vec<f64>],
    infill: &[Target],
) -> Summary {
    let kinds = super::kinds::well_kinds(survey, &ts.well_names);
    let targets = model
        .targets
        .iter()
        .zip(&model.calibrated)
        .zip(importance)
        .map(|((spec, cal), imp)| (spec, cal, imp, target_skill(cal, &model.step_names)))
        .enumerate()
        .map(
            |(t, (spec, cal, imp, (skill, skill_by_step)))| TargetSummary {
                name: spec.name.clone(),
                unit: spec.unit.clone(),
                bounds: [spec.min, spec.max],
                importance: ts
                    .feature_names
                    .iter()
                    .zip(imp)
                    .map(|(f, &share)| FeatureImportance {
                        feature: f.clone(),
                        share,
                    })
                    .collect(),
                diagnostics: cal.diagnostics.clone(),
                diagnostics_json: named_steps(&cal.diagnostics, &model.step_names),
                skill,
                skill_by_step,
                by_kind: super::kinds::by_kind(&cal.diagnostics.rows, &kinds, model.level),
                smoothing: model
                    .smoothing_choice
                    .get(t)
                    .cloned()
                    .unwrap_or_else(super::scale::WidthChoice::none),
            },
        )
        .collect();
    Summary {
        version: env!("CARGO_PKG_VERSION").to_string(),
        project: survey.project.name.clone(),
        convention: convention_text(model.convention, model.level),
        level: model.level,
        wells: ts.well_names.len(),
        rows: ts.x.nrows(),
        targets,
        applicability_threshold: model.applicability.threshold,
        wells_vs_nodes: model.wells_vs_nodes.clone(),
        infill: infill.to_vec(),
        cautions: super::cautions(&kinds),
        totals: None,
    }
}

/// A target's diagnostics as JSON with steps by name: each `metrics_by_step` entry becomes
/// `{"step": name, "step_index": index, "metrics": ...}` (the calibration knows steps by their
/// index, the step feature; `step_names[index]` is the manifest's name, or the index as text when
/// there is none).
pub fn named_steps(
    d: &crate::calibrate::TargetDiagnostics,
    step_names: &[String],
) -> serde_json::Value {
    let mut v = serde_json::to_value(d).unwrap_or(serde_json::Value::Null);
    if let Some(list) = v
        .get_mut("metrics_by_step")
        .and_then(serde_json::Value::as_array_mut)
    {
        for (entry, sm) in list.iter_mut().zip(&d.metrics_by_step) {
            let name = step_names
                .get(sm.step)
                .cloned()
                .unwrap_or_else(|| sm.step.to_string());
            if let Some(o) = entry.as_object_mut() {
                o.insert("step".into(), name.into());
                o.insert("step_index".into(), sm.step.into());
            }
        }
    }
    v
}

/// Prints the leave-wells-out table of a summary.
pub fn print_table(summary: &Summary) {
    let pct = (summary.level * 100.0).round();
    eprintln!(
        "\n  leave-wells-out validation ({} wells, {} rows; band = {pct}% interval)",
        summary.wells, summary.rows
    );
    eprintln!(
        "  {:<8} {:>7} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9}  {:<8} skill",
        "target", "R2", "RMSE", "bias", "coverage", "cov.low", "cov.high", "width", "learner"
    );
    for t in &summary.targets {
        let m = &t.diagnostics.metrics;
        eprintln!(
            "  {:<8} {:>7.3} {:>9.4} {:>9.4} {:>9.3} {:>9.3} {:>9.3} {:>9.4}  {:<8} {}",
            t.name,
            m.r2,
            m.rmse,
            m.bias,
            m.coverage,
            m.coverage_bottom_decile,
            m.coverage_top_decile,
            m.mean_width,
            t.diagnostics.learner.chosen,
            skill_words(t)
        );
    }
    eprintln!();
}

/// A target's verdicts in a few words: the pooled verdict, then the steps whose own verdict
/// differs from it (e.g. `weak (none at m1)`).
pub fn skill_words(t: &TargetSummary) -> String {
    let Some(pooled) = &t.skill else {
        return "not computed".to_string();
    };
    let others: Vec<String> = t
        .skill_by_step
        .iter()
        .filter(|s| s.skill.verdict != pooled.verdict)
        .map(|s| format!("{} at {}", s.skill.verdict.as_str(), s.step))
        .collect();
    if others.is_empty() {
        pooled.verdict.as_str().to_string()
    } else {
        format!("{} ({})", pooled.verdict.as_str(), others.join(", "))
    }
}

/// One point of the learning curve: a number of wells and the skill over repeated subsets.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct CurvePoint {
    /// Target name.
    pub target: String,
    /// Wells in each subset.
    pub wells: usize,
    /// Leave-wells-out R2 of each repeat.
    pub r2: Vec<f64>,
    /// Band coverage of each repeat.
    pub coverage: Vec<f64>,
}

/// Skill with and without the angle-dependent attributes.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct Ablation {
    /// Target name.
    pub target: String,
    /// Attributes removed.
    pub removed: Vec<String>,
    /// Leave-wells-out R2 with every attribute.
    pub r2_all: f64,
    /// Leave-wells-out R2 without the removed attributes.
    pub r2_without: f64,
    /// Coverage with every attribute.
    pub coverage_all: f64,
    /// Coverage without the removed attributes.
    pub coverage_without: f64,
}

/// Results of the sensitivity studies.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
pub struct Sensitivity {
    /// Settings the studies used (a lighter forest than the main run; see [`study_settings`]).
    pub note: String,
    /// Learning curve points, per target and number of wells.
    pub curve: Vec<CurvePoint>,
    /// Ablation per target.
    pub ablation: Vec<Ablation>,
}

/// Settings of the studies: the run's calibration with the forest as the only learner and at most
/// 100 trees, so that dozens of repeated calibrations stay affordable. Both arms of every
/// comparison use the same settings.
pub fn study_settings(base: &CalibrationSettings) -> CalibrationSettings {
    let mut s = base.clone();
    s.learner = LearnerChoice::Forest;
    s.forest.n_trees = s.forest.n_trees.min(100);
    s
}

/// Names of the angle-dependent attributes: those the manifest lists, or else attributes whose
/// names mention near, mid, far, intercept or gradient.
pub fn angle_attributes(survey: &Survey) -> Vec<String> {
    let p = &survey.project;
    if !p.report.angle_attributes.is_empty() {
        return p.report.angle_attributes.clone();
    }
    p.attribute_names
        .iter()
        .filter(|a| {
            let l = a.to_lowercase();
            ["near", "mid", "far", "intercept", "gradient"]
                .iter()
                .any(|k| l.contains(k))
        })
        .cloned()
        .collect()
}

/// Well counts of the learning curve: five sizes from 30 % of the wells (at least 6) to all.
pub fn curve_sizes(n_wells: usize) -> Vec<usize> {
    let lo = (n_wells * 3 / 10).max(6).min(n_wells);
    let mut sizes: Vec<usize> = (0..5).map(|k| lo + (n_wells - lo) * k / 4).collect();
    sizes.dedup();
    sizes
}

/// A seeded random subset of `k` wells out of `n` (sorted).
pub fn well_subset(n: usize, k: usize, seed: u64) -> Vec<usize> {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut idx: Vec<usize> = (0..n).collect();
    for i in 0..k.min(n) {
        let j = rng.random_range(i..n);
        idx.swap(i, j);
    }
    let mut out = idx[..k.min(n)].to_vec();
    out.sort_unstable();
    out
}

/// Runs the learning curve and the ablation as the manifest's `[report]` asks; each target on
/// its own training set (`widths[t]`, its smoothing width in metres, as the model chose it).
pub fn sensitivity(
    survey: &Survey,
    ts: &TrainingSet,
    widths: &[f64],
    seed: u64,
    stages: &mut Stages,
) -> Result<Sensitivity, PipelineError> {
    let own = |t: usize| {
        ts.at_width(widths.get(t).copied().unwrap_or(0.0))
            .unwrap_or_else(|| ts.clone())
    };
    let project = &survey.project;
    let settings = study_settings(&calibration_settings(project, seed));
    let mut out = Sensitivity {
        note: format!(
            "studies use the forest alone with {} trees; both arms of each comparison alike",
            settings.forest.n_trees
        ),
        ..Sensitivity::default()
    };
    let n_wells = ts.well_names.len();
    if project.report.learning_curve {
        let sizes = curve_sizes(n_wells);
        let repeats = project.report.learning_curve_repeats.max(1);
        let bar = stages.bar(
            (sizes.len() * repeats * project.targets.len()) as u64,
            "learning curve",
        );
        for t in 0..project.targets.len() {
            let ts = &own(t);
            let all_cols: Vec<usize> = (0..ts.x.ncols()).collect();
            for (si, &k) in sizes.iter().enumerate() {
                let mut point = CurvePoint {
                    target: project.targets[t].name.clone(),
                    wells: k,
                    ..CurvePoint::default()
                };
                for r in 0..repeats {
                    let rows = curve_rows(ts, t, n_wells, k, seed, si, r);
                    let cal =
                        calibrate_rows(project, ts, t, &rows, &all_cols, &settings, None, None);
                    if let Ok(cal) = cal {
                        point.r2.push(cal.diagnostics.metrics.r2);
                        point.coverage.push(cal.diagnostics.metrics.coverage);
                    }
                    bar.inc(1);
                }
                out.curve.push(point);
            }
        }
        bar.finish_and_clear();
        stages.done("learning curve");
    }
    if project.report.ablation {
        let removed = angle_attributes(survey);
        if !removed.is_empty() {
            for t in 0..project.targets.len() {
                let ts = &own(t);
                // The angle attributes go with their smoothed copies.
                let keep: Vec<usize> = ts
                    .feature_names
                    .iter()
                    .enumerate()
                    .filter(|(_, f)| !removed.iter().any(|r| r == crate::sample::attribute_of(f)))
                    .map(|(c, _)| c)
                    .collect();
                if keep.len() <= 1 {
                    continue;
                }
                let all_cols: Vec<usize> = (0..ts.x.ncols()).collect();
                let rows = target_rows(ts, t);
                let all = calibrate_rows(project, ts, t, &rows, &all_cols, &settings, None, None)?;
                let without = calibrate_rows(project, ts, t, &rows, &keep, &settings, None, None)?;
                out.ablation.push(Ablation {
                    target: project.targets[t].name.clone(),
                    removed: removed.clone(),
                    r2_all: all.diagnostics.metrics.r2,
                    r2_without: without.diagnostics.metrics.r2,
                    coverage_all: all.diagnostics.metrics.coverage,
                    coverage_without: without.diagnostics.metrics.coverage,
                });
            }
        }
        stages.done("ablation");
    }
    Ok(out)
}

/// Rows of target `t` that belong to the `r`-th random subset of `k` wells for curve size index
/// `si`. Public so that tests can repeat the computation directly.
pub fn curve_rows(
    ts: &TrainingSet,
    t: usize,
    n_wells: usize,
    k: usize,
    seed: u64,
    si: usize,
    r: usize,
) -> Vec<usize> {
    let subset_seed = seed ^ ((si as u64) << 32) ^ (r as u64).wrapping_mul(0x9e37_79b9);
    let wells = well_subset(n_wells, k, subset_seed);
    target_rows(ts, t)
        .into_iter()
        .filter(|&row| wells.binary_search(&ts.group[row]).is_ok())
        .collect()
}

/// Settings of the skill verdicts of a run (the defaults of [`SkillSettings`]); the report states
/// the rule with the same bars.
pub fn skill_settings() -> SkillSettings {
    SkillSettings::default()
}

/// Skill of a calibrated target's held-out rows against climatology (the other wells' values at the
/// same step), pooled and per step, with well-bootstrap intervals and verdicts ([`crate::skill`]).
/// Both CRPS are the three-quantile CRPS at the band's levels (`metrics::crps_from_quantiles`), so
/// that the model and climatology are scored alike. `None` and no steps when it cannot be scored.
pub fn target_skill(
    cal: &CalibratedTarget,
    step_names: &[String],
) -> (Option<Skill>, Vec<StepSkill>) {
    let rows = &cal.diagnostics.rows;
    let a = 1.0 - cal.level;
    let levels = [a / 2.0, 0.5, 1.0 - a / 2.0];
    let truth: Vec<f64> = rows.iter().map(|r| r.truth).collect();
    let mid: Vec<f64> = rows.iter().map(|r| r.corrected).collect();
    let well: Vec<usize> = rows.iter().map(|r| r.group).collect();
    let step: Vec<usize> = rows.iter().map(|r| r.step).collect();
    let weight = vec![1.0; rows.len()];
    let crps_model: Vec<f64> = rows
        .iter()
        .map(|r| crps_from_quantiles(r.truth, &levels, &[r.lo, r.corrected, r.hi]))
        .collect();
    // Climatology of a row: the values of every other well at the same step.
    let crps_climatology: Vec<f64> = (0..rows.len())
        .map(|i| {
            let mut v: Vec<f64> = (0..rows.len())
                .filter(|&j| well[j] != well[i] && step[j] == step[i])
                .map(|j| truth[j])
                .collect();
            if v.is_empty() {
                return f64::NAN;
            }
            v.sort_by(f64::total_cmp);
            let q: Vec<f64> = levels.iter().map(|&l| quantile_sorted(&v, l)).collect();
            crps_from_quantiles(truth[i], &levels, &q)
        })
        .collect();
    let input = SkillInput {
        truth: &truth,
        prediction: &mid,
        crps_model: &crps_model,
        crps_climatology: &crps_climatology,
        well: &well,
        weight: &weight,
    };
    let settings = skill_settings();
    let step_names: Vec<String> = step_names.to_vec();
    (
        assess(&input, &settings).ok(),
        assess_by_step(&input, &step, &step_names, &settings).unwrap_or_default(),
    )
}
