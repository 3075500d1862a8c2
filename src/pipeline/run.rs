//! `run`: the main job, top to bottom. Each stage is a call into a module below this one:
//! load and extract ([`crate::project`], [`crate::sample`]) -> fit and calibrate every target
//! ([`super::fit`]) -> predict and write the maps of every step ([`SavedModel::predict`],
//! [`super::outputs`]) -> infill ranking, `summary.json` and `model.json` ([`super::studies`]) ->
//! pictures ([`super::pictures`]) -> sensitivity studies and the review page ([`super::studies`],
//! [`super::assemble`]) -> `run.json`.

use super::PipelineError;
use super::assemble::{self, ReportParts};
use super::fit;
use super::model::{SavedModel, StepMaps, convention_text};
use super::outputs::{Formats, MapEntry, Writer, write_step_maps};
use super::pictures;
use super::stages::{Stages, Timing};
use super::studies;
use super::totals::{self, TotalsOptions};
use super::warnings::RunWarning;
use crate::project::{self, Project, Survey};
use crate::report::input as ri;
use crate::sample;
use crate::skill::Verdict;
use rayon::prelude::*;
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// Options of one run.
#[derive(Clone, Debug)]
pub struct RunOptions {
    /// The project manifest.
    pub project: PathBuf,
    /// The results folder (created; must not hold any input).
    pub out: PathBuf,
    /// Overrides `[model] seed`.
    pub seed: Option<u64>,
    /// Silences progress bars, stage messages and the validation table. Warnings are never
    /// silenced: they are in [`RunRecord::warnings`] for the caller to print.
    pub quiet: bool,
    /// Map formats.
    pub formats: Formats,
    /// Draw PNG pictures.
    pub pictures: bool,
    /// Write the HTML report (needs pictures).
    pub report: bool,
    /// Realization maps of the field totals to write (overrides `totals.keep_realizations`).
    pub keep_realizations: Option<usize>,
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
            keep_realizations: None,
        }
    }

    /// Options for maps and figures only: GeoTIFF maps, no XYZ, no pictures, no report (the
    /// harnesses and the tests that score many fields).
    pub fn maps_only(project: impl Into<PathBuf>, out: impl Into<PathBuf>) -> Self {
        Self {
            formats: Formats {
                geotiff: true,
                xyz: false,
            },
            pictures: false,
            report: false,
            ..Self::new(project, out)
        }
    }
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
    /// The codes of the `maps/<step>/area_reason` maps, in words.
    pub area_reason_codes: String,
}

/// What a run returns to its caller.
pub struct RunOutcome {
    /// The results folder (canonical).
    pub out: PathBuf,
    /// The calibrated model.
    pub model: SavedModel,
    /// `run.json` contents.
    pub record: RunRecord,
    /// `summary.json` contents.
    pub summary: studies::Summary,
}

/// Runs the main job.
pub fn run(opts: &RunOptions) -> Result<RunOutcome, PipelineError> {
    let mut stages = Stages::new(opts.quiet);
    let survey = load(&opts.project)?;
    let project = &survey.project;
    let (ts, left_out) = sample::at_wells(&survey);
    // The verdict `check` gives, before anything is written.
    crate::check::ensure_runnable(&survey, &ts)
        .map_err(|e| PipelineError::Invalid(e.to_string()))?;
    project.read_volume_map()?;
    let mut w = Writer::new(&opts.out, &project.input_paths(), opts.formats)?;
    let seed = opts.seed.unwrap_or(project.model.seed);
    // Warnings of no single target; the page shows target warnings beside their target.
    let run_warnings: Vec<RunWarning> = left_out.iter().map(RunWarning::extraction).collect();
    stages.done("load and extract");

    let (model, imp, mut known) = fit::fit_model_keeping(&survey, &ts, seed, &mut stages)?;
    let kept = predict_and_write(&survey, &model, &mut known, &mut w, &mut stages)?;
    let field_totals = field_totals(&survey, &ts, &model, &kept, seed, opts, &mut w)?;
    if field_totals.is_some() {
        stages.done("field totals");
    }

    let infill = studies::infill(&survey, &model, &kept, &mut w)?;
    stages.done("infill targets");

    let targets = infill
        .as_ref()
        .map(|i| i.targets.clone())
        .unwrap_or_default();
    let mut summary = studies::summary(&survey, &ts, &model, &imp, &targets);
    summary.totals = field_totals.as_ref().map(|c| c.record.summary());
    w.json("summary.json", &summary)?;
    model.save(&w.root.join("model.json"))?;
    w.written.push("model.json".into());
    stages.done("summary and model");

    if opts.pictures {
        let setting = pictures::MapSetting::of_survey(&survey, &model).with_verdicts(&summary);
        let maps = step_pictures(&mut w, &model, &setting, project, &kept)?;
        let infill_section = infill_section(&mut w, &setting, project, &kept, infill.as_ref())?;
        stages.done("pictures");
        if opts.report {
            let sensitivity =
                studies::sensitivity(&survey, &ts, &model.smoothing, seed, &mut stages)?;
            w.json("studies.json", &sensitivity)?;
            let texts = run_warnings.iter().map(ToString::to_string).collect();
            let mut input = assemble::build_report(ReportParts {
                summary: &summary,
                model: &model,
                maps,
                infill: infill_section,
                studies: &sensitivity,
                run: assemble::run_info(project, &model, seed, &stages.timings, texts),
            });
            input.injector_cores = super::model::injector_cores(&survey, &model, &kept);
            input.marked_ground = super::model::marked_ground(&survey, &kept);
            input.totals = field_totals
                .as_ref()
                .map(|c| totals::report_section(&c.record));
            input.save(&w.root)?;
            crate::report::write_html(&input, &w.root)?;
            w.written.push(crate::report::DATA_FILE.into());
            w.written.push(crate::report::PAGE_FILE.into());
            stages.done("report");
        }
    }

    let warnings = warnings(run_warnings, &model, &summary);
    let mut record = run_record(opts, project, seed, &model, &stages, warnings, &w.written);
    record.cautions = summary.cautions.clone();
    let out = w.root.clone();
    w.finish(&record)?;
    stages.clear();
    Ok(RunOutcome {
        out,
        model,
        record,
        summary,
    })
}

/// Predicts every node of every step, writes the maps and `maps/metadata.json`, and returns the
/// maps for the infill ranking and the pictures. `known` holds the probabilities of a change
/// that fitting computed; each step's are used, then dropped.
fn predict_and_write(
    survey: &Survey,
    model: &SavedModel,
    known: &mut fit::KnownChange,
    w: &mut Writer,
    stages: &mut Stages,
) -> Result<Vec<StepMaps>, PipelineError> {
    let project = &survey.project;
    let mut metadata: Vec<MapEntry> = Vec::new();
    let mut kept: Vec<StepMaps> = Vec::new();
    let bar = stages.bar(project.steps.len() as u64, "predict and write maps");
    let node_xy = project.grid.node_coordinates();
    // The ground check looks at each node's whole attribute history: once for every step.
    let (ground, message) = model.location_flags(survey, 0..project.grid.len());
    if let Some(m) = message {
        return Err(PipelineError::Invalid(m));
    }
    // The field totals' node distributions take the model's conditional part from these maps.
    let layers = totals::needed_layers(survey, model);
    for (s, step) in project.steps.iter().enumerate() {
        let x = model.node_features(survey, s);
        let keep: Vec<usize> = layers.iter().filter(|l| l.1 == s).map(|l| l.0).collect();
        let step_known = known.get_mut(s).map(std::mem::take).unwrap_or_default();
        let maps =
            model.predict_known(x.view(), &node_xy, ground.as_deref(), &keep, &step_known)?;
        metadata.extend(write_step_maps(w, model, &project.grid, &step.name, &maps)?);
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
    Ok(kept)
}

/// The field totals of `[totals]` (none without it): realizations, `totals.csv`, `totals.json`
/// and the kept realization maps.
fn field_totals(
    survey: &Survey,
    ts: &sample::TrainingSet,
    model: &SavedModel,
    kept: &[StepMaps],
    seed: u64,
    opts: &RunOptions,
    w: &mut Writer,
) -> Result<Option<totals::Computed>, PipelineError> {
    let computed = totals::compute(
        survey,
        ts,
        model,
        kept,
        seed,
        TotalsOptions {
            keep: opts.keep_realizations,
            ..TotalsOptions::default()
        },
    )?;
    if let Some(c) = &computed {
        totals::write(w, &survey.project.grid, c)?;
    }
    Ok(computed)
}

/// Draws the map pictures of every step and returns their entries on the page.
fn step_pictures(
    w: &mut Writer,
    model: &SavedModel,
    setting: &pictures::MapSetting,
    project: &Project,
    kept: &[StepMaps],
) -> Result<Vec<ri::MapEntry>, PipelineError> {
    let mut entries = Vec::new();
    for (step, maps) in project.steps.iter().zip(kept) {
        entries.extend(pictures::step_pictures(
            w, model, setting, &step.name, maps,
        )?);
    }
    Ok(entries)
}

/// Draws the infill targets over the chance map and returns the page's infill section.
fn infill_section(
    w: &mut Writer,
    setting: &pictures::MapSetting,
    project: &Project,
    kept: &[StepMaps],
    infill: Option<&studies::Infill>,
) -> Result<Option<ri::InfillSection>, PipelineError> {
    let Some(i) = infill else {
        return Ok(None);
    };
    let picture = pictures::infill_picture(
        w,
        setting,
        &project.steps[i.step].name,
        &i.chance,
        &kept[i.step].applicability.inside,
        &i.targets,
        &i.criterion,
    )?;
    Ok(Some(assemble::infill_section(project, i, picture)))
}

/// Every warning of the run, each naming its stage, target, well and step where it has them:
/// the rows left out at extraction, then each target's calibration warnings.
fn warnings(
    run_warnings: Vec<RunWarning>,
    model: &SavedModel,
    summary: &studies::Summary,
) -> Vec<RunWarning> {
    // Targets and steps without demonstrated skill come first.
    let mut all: Vec<RunWarning> = Vec::new();
    for t in &summary.targets {
        if t.skill.as_ref().is_some_and(|s| s.verdict == Verdict::None) {
            all.push(RunWarning::no_skill(&t.name, None));
        }
        for s in &t.skill_by_step {
            if s.skill.verdict == Verdict::None {
                all.push(RunWarning::no_skill(&t.name, Some(&s.step)));
            }
        }
    }
    all.extend(run_warnings);
    for (spec, cal) in model.targets.iter().zip(&model.calibrated) {
        all.extend(
            cal.diagnostics
                .warnings
                .iter()
                .map(|m| RunWarning::calibration(&spec.name, m)),
        );
    }
    all
}

/// The contents of `run.json`.
fn run_record(
    opts: &RunOptions,
    project: &Project,
    seed: u64,
    model: &SavedModel,
    stages: &Stages,
    warnings: Vec<RunWarning>,
    written: &[String],
) -> RunRecord {
    RunRecord {
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
            "totals": project.totals,
            "area": { "unsampled": project.unsampled },
            "smoothing": {
                "widths": project.smoothing,
                "targets": if project.smoothing_targets.is_empty() {
                    project.targets.iter().map(|t| t.name.clone()).collect()
                } else {
                    project.smoothing_targets.clone()
                },
            },
            "formats": opts.formats,
        }),
        convention: convention_text(model.convention, model.level),
        inputs: hash_inputs(&project.input_paths()),
        timings: stages.timings.clone(),
        warnings: warnings.iter().map(ToString::to_string).collect(),
        cautions: super::CAUTIONS.iter().map(|s| s.to_string()).collect(),
        files: written.to_vec(),
        area_reason_codes: super::outputs::AREA_REASON_CODES.to_string(),
    }
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
