//! `run`: check -> fit and calibrate per target -> predict every node of every step -> write maps,
//! pictures, infill targets, `summary.json`, `run.json`, `model.json` and the report.

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use super::outputs::{Formats, MapEntry, Writer, write_step_maps};
use crate::applicability::Applicability;
use crate::calibrate::shift::{self, CovariateShift, RowShift, ShiftSettings};
use crate::calibrate::{self, CalibratedTarget, CalibrationSettings, TargetData, Threshold};
use crate::ensemble::{BoostSettings, ForestSettings};
use crate::project::{self, Direction, Project, Survey};
use crate::sample::{self, TrainingSet};
use indicatif::{ProgressBar, ProgressStyle};
use ndarray::Axis;
use rayon::prelude::*;
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Options of one run.
#[derive(Clone, Debug)]
pub struct RunOptions {
    /// The project manifest.
    pub project: PathBuf,
    /// The results folder (created; must not hold any input).
    pub out: PathBuf,
    /// Overrides `[model] seed`.
    pub seed: Option<u64>,
    /// Silences progress bars and stage messages.
    pub quiet: bool,
    /// Map formats.
    pub formats: Formats,
    /// Draw PNG pictures.
    pub pictures: bool,
    /// Write the HTML report (needs pictures).
    pub report: bool,
}

impl RunOptions {
    /// Options with every output on.
    pub fn new(project: impl Into<PathBuf>, out: impl Into<PathBuf>) -> Self {
        Self {
            project: project.into(),
            out: out.into(),
            seed: None,
            quiet: true,
            formats: Formats::default(),
            pictures: true,
            report: true,
        }
    }
}

/// Duration of one stage.
#[derive(Clone, Debug, Serialize)]
pub struct Timing {
    /// Stage name.
    pub stage: String,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// Hash of one input file.
#[derive(Clone, Debug, Serialize)]
pub struct InputHash {
    /// Path as given in the manifest (absolute).
    pub path: String,
    /// SHA-256, hex.
    pub sha256: String,
}

/// Contents of `run.json`.
#[derive(Clone, Debug, Serialize)]
pub struct RunRecord {
    /// tidemark version.
    pub version: String,
    /// Manifest path.
    pub project: String,
    /// Seed used.
    pub seed: u64,
    /// rayon threads used.
    pub threads: usize,
    /// Settings as checked from the manifest.
    pub settings: serde_json::Value,
    /// Label convention, in words.
    pub convention: String,
    /// Input hashes.
    pub inputs: Vec<InputHash>,
    /// Stage timings.
    pub timings: Vec<Timing>,
    /// Warnings gathered on the way.
    pub warnings: Vec<String>,
    /// Cautions that go with the results.
    pub cautions: Vec<String>,
    /// Files written, relative to the results folder.
    pub files: Vec<String>,
}

/// What a run returns to its caller.
pub struct RunOutcome {
    /// The results folder (canonical).
    pub out: PathBuf,
    /// The calibrated model.
    pub model: SavedModel,
    /// `run.json` contents.
    pub record: RunRecord,
}

/// Stage reporting: a message per stage unless quiet, and a timing record.
pub struct Stages {
    quiet: bool,
    start: Instant,
    /// Timings of the stages done so far.
    pub timings: Vec<Timing>,
}

impl Stages {
    /// Starts timing.
    pub fn new(quiet: bool) -> Self {
        Self {
            quiet,
            start: Instant::now(),
            timings: Vec::new(),
        }
    }

    /// Ends a stage.
    pub fn done(&mut self, stage: &str) {
        let seconds = self.start.elapsed().as_secs_f64();
        if !self.quiet {
            eprintln!("  {stage:<28} {seconds:7.2} s");
        }
        self.timings.push(Timing {
            stage: stage.to_string(),
            seconds,
        });
        self.start = Instant::now();
    }

    /// A progress bar (hidden when quiet).
    pub fn bar(&self, len: u64, what: &str) -> ProgressBar {
        if self.quiet {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::new(len);
        if let Ok(style) = ProgressStyle::with_template("  {msg:<28} [{bar:30}] {pos}/{len}") {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_message(what.to_string());
        bar
    }
}

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
pub fn calibrate_rows(
    project: &Project,
    ts: &TrainingSet,
    t: usize,
    rows: &[usize],
    cols: &[usize],
    settings: &CalibrationSettings,
    shift: Option<&CovariateShift>,
) -> Result<CalibratedTarget, PipelineError> {
    let x = ts.x.select(Axis(0), rows).select(Axis(1), cols);
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
    };
    calibrate::calibrate_target(&data, settings).map_err(|source| PipelineError::Calibrate {
        target: spec.name.clone(),
        source,
    })
}

/// Permutation importance per feature for each target (forest on the target's rows), each
/// normalised to sum to one (all zero when no feature helps).
pub fn importance(
    ts: &TrainingSet,
    settings: &CalibrationSettings,
) -> Result<Vec<Vec<f64>>, PipelineError> {
    let mut out = Vec::new();
    for t in 0..ts.target_names.len() {
        let rows = target_rows(ts, t);
        if rows.len() < 4 {
            out.push(vec![0.0; ts.x.ncols()]);
            continue;
        }
        let x = ts.x.select(Axis(0), &rows);
        let y = ts.y.select(Axis(0), &rows).select(Axis(1), &[t]);
        let w: Vec<f64> = rows.iter().map(|&r| ts.weight[r]).collect();
        let forest = settings.forest.fit(x.view(), y.view(), Some(&w))?;
        let imp = forest.permutation_importance(x.view(), y.view(), 3, settings.seed ^ 0x5eed);
        let clean: Vec<f64> = imp.iter().map(|v| v.max(0.0)).collect();
        let total: f64 = clean.iter().sum();
        out.push(if total > 0.0 {
            clean.iter().map(|v| v / total).collect()
        } else {
            clean
        });
    }
    Ok(out)
}

fn hash_inputs(paths: &[PathBuf]) -> Vec<InputHash> {
    paths
        .par_iter()
        .map(|p| {
            let sha256 = match std::fs::read(p) {
                Ok(bytes) => format!("{:x}", Sha256::digest(&bytes)),
                Err(e) => format!("unreadable: {e}"),
            };
            InputHash {
                path: p.display().to_string(),
                sha256,
            }
        })
        .collect()
}

/// Loads the project named in `opts`, for callers that need the survey too.
pub fn load(path: &Path) -> Result<Survey, PipelineError> {
    Ok(project::load_survey(path)?)
}

/// Fits everything on a loaded survey: calibrated targets, importance and the area of
/// applicability. Returns the model and the per-target importance.
pub fn fit_model(
    survey: &Survey,
    ts: &TrainingSet,
    seed: u64,
    stages: &mut Stages,
) -> Result<(SavedModel, Vec<Vec<f64>>), PipelineError> {
    let project = &survey.project;
    let settings = calibration_settings(project, seed);
    let all_cols: Vec<usize> = (0..ts.x.ncols()).collect();
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
    let bar = stages.bar(project.targets.len() as u64, "calibrate targets");
    let mut calibrated = Vec::new();
    for t in 0..project.targets.len() {
        let rows = target_rows(ts, t);
        calibrated.push(calibrate_rows(
            project,
            ts,
            t,
            &rows,
            &all_cols,
            &settings,
            shift.as_ref(),
        )?);
        bar.inc(1);
    }
    bar.finish_and_clear();
    stages.done("fit and calibrate");

    let imp = importance(ts, &settings)?;
    let p = ts.x.ncols();
    let mean_imp: Vec<f64> = (0..p)
        .map(|c| imp.iter().map(|v| v[c]).sum::<f64>() / imp.len().max(1) as f64)
        .collect();
    let folds = calibrate::folds::assign(
        &ts.group,
        &ts.xy,
        settings.fold_method,
        settings.folds,
        settings.seed,
    );
    // Every feature, the step index included, takes part in the range check: a step the wells
    // never saw is an extrapolation in time.
    let checked = vec![true; p];
    let applicability =
        Applicability::fit(&ts.feature_names, ts.x.view(), &mean_imp, &folds, &checked)?;
    stages.done("importance, applicability");

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
        wells: well_positions(survey),
        wells_vs_nodes,
    };
    Ok((model, imp))
}

/// Distinct (well, x, y) positions of the survey's well records, in file order.
pub fn well_positions(survey: &Survey) -> Vec<(String, f64, f64)> {
    let mut out: Vec<(String, f64, f64)> = Vec::new();
    for r in &survey.wells {
        if !out
            .iter()
            .any(|(n, x, y)| n == &r.well && *x == r.x && *y == r.y)
        {
            out.push((r.well.clone(), r.x, r.y));
        }
    }
    out
}

/// The current time, UTC, as `YYYY-MM-DD HH:MM:SS UTC` (civil-from-days, Hinnant's algorithm).
pub fn utc_now() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02}:{:02} UTC",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

/// The settings shown on the review page, with how typical of the nodes the wells are.
fn settings_table(
    project: &Project,
    wells_vs_nodes: Option<&shift::ShiftSummary>,
) -> Vec<crate::report::input::KeyValue> {
    let kv = |k: &str, v: String| crate::report::input::KeyValue {
        key: k.into(),
        value: v,
    };
    let m = &project.model;
    let c = &project.calibration;
    vec![
        kv("learner", format!("{:?}", m.learner).to_lowercase()),
        kv(
            "forest",
            format!(
                "{} trees, min leaf {}, max features {}",
                m.trees, m.min_samples_leaf, m.max_features
            ),
        ),
        kv(
            "booster",
            format!(
                "{} rounds, learning rate {}, depth {}",
                m.boost_rounds, m.learning_rate, m.boost_max_depth
            ),
        ),
        kv("band level", format!("{}", c.level)),
        kv("folds", format!("{:?}, k = {}", c.fold_method, c.folds)),
        kv("end correction", format!("{}", c.end_correction)),
        kv(
            "Mondrian bins",
            format!(
                "at most {}, at least {} wells each",
                c.max_bins, c.min_wells_per_bin
            ),
        ),
        kv(
            "wells against nodes",
            wells_vs_nodes.map_or_else(
                || "not estimated".to_string(),
                |s| {
                    format!(
                        "AUC {:.2} (0.5: wells look like any node), {:.1} effective wells of {}; \
                         bands {} by the nodes' density ratio",
                        s.auc,
                        s.effective_wells,
                        s.wells,
                        if s.applied {
                            "weighted"
                        } else {
                            "not weighted"
                        }
                    )
                },
            ),
        ),
    ]
}

/// Runs the main job.
pub fn run(opts: &RunOptions) -> Result<RunOutcome, PipelineError> {
    let mut stages = Stages::new(opts.quiet);
    let survey = load(&opts.project)?;
    let project = &survey.project;
    let inputs = project.input_paths();
    let mut w = Writer::new(&opts.out, &inputs, opts.formats)?;
    let seed = opts.seed.unwrap_or(project.model.seed);
    let (ts, sample_warnings) = sample::at_wells(&survey);
    let mut warnings: Vec<String> = sample_warnings.iter().map(|w| w.to_string()).collect();
    stages.done("load and extract");

    let (model, imp) = fit_model(&survey, &ts, seed, &mut stages)?;
    // The page shows target warnings beside their target; its run section lists the others.
    let run_warnings = warnings.clone();
    for cal in &model.calibrated {
        warnings.extend(cal.diagnostics.warnings.iter().cloned());
    }

    // Predict and write every step; keep what the infill ranking and the report need.
    let mut metadata: Vec<MapEntry> = Vec::new();
    let mut kept: Vec<StepMaps> = Vec::new();
    let bar = stages.bar(project.steps.len() as u64, "predict and write maps");
    for (s, step) in project.steps.iter().enumerate() {
        let x = sample::node_features(&survey, s);
        let maps = model.predict(x.view())?;
        metadata.extend(write_step_maps(
            &mut w,
            &model,
            &project.grid,
            &step.name,
            &maps,
        )?);
        kept.push(maps);
        bar.inc(1);
    }
    bar.finish_and_clear();
    w.json(
        "maps/metadata.json",
        &serde_json::json!({
            "convention": convention_text(model.convention, model.level),
            "null_value": project.grid.null_value,
            "maps": metadata,
        }),
    )?;
    stages.done("predict and write maps");

    let infill = super::studies::infill(&survey, &model, &kept, &mut w)?;
    let targets: Vec<crate::decide::Target> = infill
        .as_ref()
        .map(|i| i.targets.clone())
        .unwrap_or_default();
    stages.done("infill targets");

    let summary = super::studies::summary(&survey, &ts, &model, &imp, &targets);
    w.json("summary.json", &summary)?;
    model.save(&w.root.join("model.json"))?;
    w.written.push("model.json".into());
    if !opts.quiet {
        super::studies::print_table(&summary);
    }
    stages.done("summary and model");

    if opts.pictures {
        let mut entries = Vec::new();
        let setting = super::pictures::MapSetting::of_survey(&survey, &model);
        for (s, step) in project.steps.iter().enumerate() {
            entries.extend(super::pictures::step_pictures(
                &mut w, &model, &setting, &step.name, &kept[s],
            )?);
        }
        let infill_section = match &infill {
            Some(i) => Some(crate::report::input::InfillSection {
                criterion: i.criterion.clone(),
                volume_unit: if project
                    .infill
                    .as_ref()
                    .is_some_and(|s| s.volume_map.is_some())
                {
                    "m3".into()
                } else {
                    "nodes".into()
                },
                picture: Some(super::pictures::infill_picture(
                    &mut w,
                    &setting,
                    &project.steps[i.step].name,
                    &i.chance,
                    &kept[i.step].applicability.inside,
                    &i.targets,
                    &i.criterion,
                )?),
                rows: i
                    .targets
                    .iter()
                    .map(|t| crate::report::input::InfillRow {
                        rank: t.rank,
                        x: t.x,
                        y: t.y,
                        chance: Some(t.chance),
                        risked_volume: Some(t.risked_volume),
                        nearest_well: t.nearest_well.clone(),
                        distance: t.nearest_distance.is_finite().then_some(t.nearest_distance),
                        inside: t.inside,
                        drainage_inside_fraction: Some(t.drainage_inside_fraction),
                    })
                    .collect(),
            }),
            None => None,
        };
        stages.done("pictures");
        if opts.report {
            let studies = super::studies::sensitivity(&survey, &ts, seed, &mut stages)?;
            w.json("studies.json", &studies)?;
            let input = super::pictures::build_report(super::pictures::ReportParts {
                summary: &summary,
                model: &model,
                maps: entries,
                infill: infill_section,
                studies: &studies,
                run: crate::report::input::RunInfo {
                    tidemark_version: env!("CARGO_PKG_VERSION").into(),
                    created: utc_now(),
                    seed: Some(seed),
                    project_file: project.manifest_path.display().to_string(),
                    settings: settings_table(project, model.wells_vs_nodes.as_ref()),
                    timings: stages
                        .timings
                        .iter()
                        .map(|t| crate::report::input::Timing {
                            stage: t.stage.clone(),
                            seconds: Some(t.seconds),
                        })
                        .collect(),
                    warnings: run_warnings.clone(),
                },
            });
            input.save(&w.root)?;
            crate::report::write_html(&input, &w.root)?;
            w.written.push(crate::report::DATA_FILE.into());
            w.written.push(crate::report::PAGE_FILE.into());
            stages.done("report");
        }
    }

    let record = RunRecord {
        version: env!("CARGO_PKG_VERSION").to_string(),
        project: project.manifest_path.display().to_string(),
        seed,
        threads: rayon::current_num_threads(),
        settings: serde_json::json!({
            "model": project.model,
            "calibration": project.calibration,
            "infill": project.infill,
            "report": project.report,
            "extract": project.extract,
            "formats": opts.formats,
        }),
        convention: convention_text(model.convention, model.level),
        inputs: hash_inputs(&inputs),
        timings: stages.timings.clone(),
        warnings,
        cautions: super::CAUTIONS.iter().map(|s| s.to_string()).collect(),
        files: w.written.clone(),
    };
    w.json("run.json", &record)?;
    Ok(RunOutcome {
        out: w.root.clone(),
        model,
        record,
    })
}
