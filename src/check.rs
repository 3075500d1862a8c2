//! `check`: load and validate a whole project without fitting anything, and summarise it.
//!
//! Reads the manifest, every attribute map and the wells CSV, extracts the attributes at the wells,
//! and lists every problem found. A project is runnable when no problem is an error; rows left out
//! of training (outside the grid, null nodes, nothing measured) are warnings that name well and
//! step. The manifest comes first: when it does not parse, or a setting in it is unusable, that is
//! the only problem listed (nothing else can be read without it), and the message says so.
//!
//! Whether a loaded project can be run is decided by one function, [`verdict`], which `run` calls
//! too ([`ensure_runnable`]), so the two never disagree: a map with every node null, no usable well
//! row, or a target measured at fewer wells than the calibration's folds need.
//!
//! Problems of the same kind (the same message about many files, lines or well rows) are grouped
//! into one line with a count and the first few. Two hints help with common slips: well points
//! outside the grid that would fall inside with x and y swapped, and a measured value far outside
//! the other wells' values of its target and step (a unit slip such as percent among fractions),
//! found with the modified z-score of Iglewicz & Hoaglin (1993, "How to Detect and Handle
//! Outliers", ASQC Quality Press; median and median absolute deviation).

use crate::grid::Grid;
use crate::io::IoError;
use crate::io::wells::WellRecord;
use crate::project::{
    CalibrationSection, FoldMethod, Project, ProjectError, Survey, ThresholdSpec,
};
use crate::sample::{self, TrainingSet};
use serde::{Deserialize, Serialize};
use std::collections::{HashMap, HashSet};
use std::fmt;
use std::path::{Path, PathBuf};

/// How many groups of bad wells CSV rows are listed.
const MAX_ROW_ERRORS: usize = 20;
/// Problems of one kind listed one by one up to this count; more become one line.
const GROUP_MIN: usize = 3;
/// Subjects named in a grouped problem.
const GROUP_SHOWN: usize = 3;
/// Modified z-score beyond which a value is an outlier (Iglewicz & Hoaglin 1993).
pub const MODIFIED_Z_CUT: f64 = 3.5;
/// Values of a target and step needed before outliers are looked for.
pub const MIN_VALUES_FOR_OUTLIERS: usize = 5;
/// How much farther from the median than every other value an outlier must lie to be reported.
// common practice, no published source: legitimate extremes (an injector's first water) reach
// modified z of 10-14 on our generated fields but sit within 4x the next value's distance; the
// factor keeps a value that stands alone from being reported together with a tail of them.
pub const OUTLIER_GAP: f64 = 2.0;

/// How serious a problem is.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Severity {
    /// The project cannot be run until this is fixed.
    Error,
    /// The project runs, but something is left out or looks odd.
    Warning,
}

/// One problem found.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Problem {
    /// Error or warning.
    pub severity: Severity,
    /// What is wrong, naming the file and line or the manifest key.
    pub message: String,
    /// How many files, lines or rows the message covers (1 unless it groups several).
    #[serde(default = "one")]
    pub count: usize,
}

fn one() -> usize {
    1
}

/// One finding before grouping: `what` is wrong with `subject`.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    /// What is wrong, without the subject: findings with the same `what` are grouped.
    pub what: String,
    /// The file, line or well row it is about, with the plural that names a group of them
    /// (`"files"`, `"lines"`, `"rows"`).
    pub subject: Option<(&'static str, String)>,
    /// The whole message, for a finding listed alone.
    pub message: String,
}

impl Finding {
    /// A finding about nothing in particular (never grouped).
    pub fn plain(message: impl Into<String>) -> Self {
        let message = message.into();
        Finding {
            what: message.clone(),
            subject: None,
            message,
        }
    }

    /// A finding from a reader's error: same message, grouped by what is wrong.
    pub fn io(e: &IoError) -> Self {
        let file = e.path().display().to_string();
        let (what, subject) = match e {
            IoError::Os { source, .. } => (source.to_string(), Some(("files", file))),
            IoError::Line { line, message, .. } => (
                format!("{file}: {message}"),
                Some(("lines", line.to_string())),
            ),
            IoError::Cell {
                line,
                column,
                message,
                ..
            } => (
                format!("{file}, column '{column}': {message}"),
                Some(("lines", line.to_string())),
            ),
            IoError::GridMismatch { differences, .. } => (
                format!(
                    "grid differs from the manifest grid: {}",
                    differences.join("; ")
                ),
                Some(("files", file)),
            ),
            IoError::Format { message, .. } => (message.clone(), Some(("files", file))),
            _ => (e.to_string(), None),
        };
        Finding {
            what,
            subject,
            message: e.to_string(),
        }
    }
}

/// Groups findings with the same `what` and a subject: up to two of them are
/// listed one by one, more become one problem with the count and the first few subjects.
/// Groups keep the order of their first finding.
pub fn group(findings: Vec<Finding>, severity: Severity) -> Vec<Problem> {
    let mut order: Vec<String> = Vec::new();
    let mut groups: HashMap<String, Vec<Finding>> = HashMap::new();
    let mut alone: Vec<(usize, Finding)> = Vec::new();
    for f in findings {
        if f.subject.is_none() {
            alone.push((order.len(), f));
            order.push(String::new());
            continue;
        }
        let g = groups.entry(f.what.clone()).or_default();
        if g.is_empty() {
            order.push(f.what.clone());
        }
        g.push(f);
    }
    let mut alone = alone.into_iter().peekable();
    let mut out = Vec::new();
    for (k, key) in order.iter().enumerate() {
        if alone.peek().is_some_and(|(at, _)| *at == k) {
            if let Some((_, f)) = alone.next() {
                out.push(Problem {
                    severity,
                    message: f.message,
                    count: 1,
                });
            }
            continue;
        }
        let Some(members) = groups.remove(key) else {
            continue;
        };
        if members.len() < GROUP_MIN {
            out.extend(members.into_iter().map(|f| Problem {
                severity,
                message: f.message,
                count: 1,
            }));
            continue;
        }
        let n = members.len();
        let plural = members[0].subject.as_ref().map_or("", |s| s.0);
        let shown: Vec<&str> = members
            .iter()
            .take(GROUP_SHOWN)
            .filter_map(|f| f.subject.as_ref().map(|s| s.1.as_str()))
            .collect();
        let more = if n > GROUP_SHOWN {
            format!(" and {} more", n - GROUP_SHOWN)
        } else {
            String::new()
        };
        let sep = if plural == "rows" { "; " } else { ", " };
        out.push(Problem {
            severity,
            message: format!("{key} ({n} {plural}: {}{more})", shown.join(sep)),
            count: n,
        });
    }
    out
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        write!(f, "{s}: {}", self.message)
    }
}

/// Summary of one attribute map of one step. Statistics are `None` when the map could not be read
/// or has no non-null node.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AttributeSummary {
    /// Attribute name.
    pub name: String,
    /// The map file.
    pub file: PathBuf,
    /// Smallest non-null value.
    pub min: Option<f64>,
    /// Largest non-null value.
    pub max: Option<f64>,
    /// Mean of the non-null values.
    pub mean: Option<f64>,
    /// Fraction of null nodes.
    pub null_fraction: Option<f64>,
}

/// Summary of one step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepSummary {
    /// Step name.
    pub name: String,
    /// Base survey date, as written.
    pub base_date: Option<String>,
    /// Monitor survey date, as written.
    pub monitor_date: Option<String>,
    /// Its attribute maps, in project order.
    pub attributes: Vec<AttributeSummary>,
    /// Rows of the wells CSV for this step.
    pub well_rows: usize,
    /// Of those, rows usable for training.
    pub usable_rows: usize,
}

/// Summary of the wells CSV.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WellsSummary {
    /// The CSV file.
    pub file: PathBuf,
    /// Data rows.
    pub rows: usize,
    /// Distinct wells.
    pub wells: usize,
    /// Rows usable for training.
    pub usable_rows: usize,
    /// Wells with at least one usable row.
    pub usable_wells: usize,
}

/// Summary of one target over the usable rows.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TargetSummary {
    /// Target name.
    pub name: String,
    /// Wells CSV column.
    pub column: String,
    /// Unit.
    pub unit: String,
    /// Declared physical lower bound.
    pub lower_bound: f64,
    /// Declared physical upper bound.
    pub upper_bound: f64,
    /// Usable rows where it was measured.
    pub count: usize,
    /// Distinct wells among those rows.
    pub wells: usize,
    /// Smallest measured value.
    pub min: Option<f64>,
    /// Largest measured value.
    pub max: Option<f64>,
}

/// Everything `check` found.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CheckReport {
    /// The manifest checked.
    pub manifest: PathBuf,
    /// True when no problem is an error.
    pub runnable: bool,
    /// Project name, when the manifest could be loaded.
    pub project: Option<String>,
    /// The grid, when the manifest could be loaded.
    pub grid: Option<Grid>,
    /// Per-step summaries.
    pub steps: Vec<StepSummary>,
    /// The wells CSV, when it could be read.
    pub wells: Option<WellsSummary>,
    /// Per-target summaries.
    pub targets: Vec<TargetSummary>,
    /// Decision thresholds.
    pub thresholds: Vec<ThresholdSpec>,
    /// Every problem found, errors first in the order found, then warnings.
    pub problems: Vec<Problem>,
}

impl CheckReport {
    /// Number of problems that are errors.
    pub fn error_count(&self) -> usize {
        self.problems
            .iter()
            .filter(|p| p.severity == Severity::Error)
            .count()
    }
}

/// Statistics of a map: (min, max, mean, null fraction).
fn map_stats(values: &[f64]) -> (Option<f64>, Option<f64>, Option<f64>, f64) {
    let (mut lo, mut hi, mut sum, mut n) = (f64::INFINITY, f64::NEG_INFINITY, 0.0, 0usize);
    for &v in values {
        if !v.is_nan() {
            lo = lo.min(v);
            hi = hi.max(v);
            sum += v;
            n += 1;
        }
    }
    let null_fraction = if values.is_empty() {
        1.0
    } else {
        1.0 - n as f64 / values.len() as f64
    };
    if n == 0 {
        (None, None, None, null_fraction)
    } else {
        (Some(lo), Some(hi), Some(sum / n as f64), null_fraction)
    }
}

/// Wells a calibration needs per target.
fn wells_needed(c: &CalibrationSection) -> usize {
    match c.fold_method {
        FoldMethod::Wells | FoldMethod::Blocks => c.folds,
        FoldMethod::OneWell => 2,
    }
}

/// Why a loaded project cannot be run: the one verdict `check` and `run` share. `set` is the
/// training set extracted at the wells. With `complete` false (some input could not be read, so
/// the wells counted here are not all there will be) only the maps are judged.
///
/// The project cannot be run when a map has every node null, when no well row is usable for
/// training, or when a target is measured at fewer usable wells than the calibration's folds need.
/// Names too long for file names and sizes beyond the limits are refused earlier, when the
/// manifest loads (see [`crate::project::limits`]).
pub fn verdict(survey: &Survey, set: &TrainingSet, complete: bool) -> Vec<Finding> {
    let project = &survey.project;
    let mut out = Vec::new();
    let mut all_null = false;
    for (s, step) in project.steps.iter().enumerate() {
        for (a, (name, file)) in step.attributes.iter().enumerate() {
            let Some(map) = survey.maps.get(s).and_then(|m| m.get(a)) else {
                continue;
            };
            if map.len() == project.grid.len() && map.iter().all(|v| v.is_nan()) {
                all_null = true;
                out.push(Finding {
                    what: "every node is null".into(),
                    subject: Some(("files", file.display().to_string())),
                    message: format!(
                        "{}: every node is null (step '{}', attribute '{name}')",
                        file.display(),
                        step.name
                    ),
                });
            }
        }
    }
    if !complete || all_null {
        return out;
    }
    let wells = project.wells.file.display();
    if set.n_rows() == 0 {
        out.push(Finding::plain(format!(
            "{wells}: no well row is usable for training (the warnings say why each row was left out)"
        )));
        return out;
    }
    let needed = wells_needed(&project.calibration);
    for (t, spec) in project.targets.iter().enumerate() {
        let n: HashSet<usize> = set
            .rows_with_target(t)
            .iter()
            .map(|&r| set.group[r])
            .collect();
        if n.len() < needed {
            out.push(Finding::plain(format!(
                "target '{}' is measured at {} usable well(s); calibration ({:?} folds, folds = {}) needs at least {needed}",
                spec.name,
                n.len(),
                project.calibration.fold_method,
                project.calibration.folds
            )));
        }
    }
    out
}

/// A loaded project that cannot be run, with every reason ([`verdict`]).
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{}: the project cannot be run:\n  {}", manifest.display(), problems.join("\n  "))]
pub struct NotRunnable {
    /// The manifest.
    pub manifest: PathBuf,
    /// Every reason, grouped as `check` lists them.
    pub problems: Vec<String>,
}

/// `Ok` when [`verdict`] finds nothing against a fully loaded project; `run` calls this before it
/// writes anything.
pub fn ensure_runnable(survey: &Survey, set: &TrainingSet) -> Result<(), NotRunnable> {
    let problems = group(verdict(survey, set, true), Severity::Error);
    if problems.is_empty() {
        Ok(())
    } else {
        Err(NotRunnable {
            manifest: survey.project.manifest_path.clone(),
            problems: problems.into_iter().map(|p| p.message).collect(),
        })
    }
}

/// Modified z-scores of `values` (Iglewicz & Hoaglin 1993): `0.6745 (x - median) / MAD`, with
/// MAD the median absolute deviation from the median. `None` when fewer than two values or the
/// MAD is zero.
pub fn modified_z(values: &[f64]) -> Option<Vec<f64>> {
    fn median(v: &mut [f64]) -> f64 {
        v.sort_by(f64::total_cmp);
        let n = v.len();
        if n % 2 == 1 {
            v[n / 2]
        } else {
            0.5 * (v[n / 2 - 1] + v[n / 2])
        }
    }
    if values.len() < 2 {
        return None;
    }
    let m = median(&mut values.to_vec());
    let mad = median(&mut values.iter().map(|v| (v - m).abs()).collect::<Vec<_>>());
    (mad > 0.0).then(|| values.iter().map(|v| 0.6745 * (v - m) / mad).collect())
}

/// Indices of values that stand far outside the others: modified z beyond [`MODIFIED_Z_CUT`] and
/// more than [`OUTLIER_GAP`] times as far from the median as any other value. At least
/// [`MIN_VALUES_FOR_OUTLIERS`] values are needed.
pub fn lone_outliers(values: &[f64]) -> Vec<usize> {
    if values.len() < MIN_VALUES_FOR_OUTLIERS {
        return Vec::new();
    }
    let Some(z) = modified_z(values) else {
        return Vec::new();
    };
    let dev: Vec<f64> = z.iter().map(|z| z.abs()).collect();
    // Only the farthest value can be farther than twice every other: compare it with the second.
    let (mut first, mut second) = (0usize, f64::NEG_INFINITY);
    for k in 1..dev.len() {
        if dev[k] > dev[first] {
            second = dev[first];
            first = k;
        } else if dev[k] > second {
            second = dev[k];
        }
    }
    if dev[first] > MODIFIED_Z_CUT && dev[first] > OUTLIER_GAP * second {
        vec![first]
    } else {
        Vec::new()
    }
}

/// Warnings for measured values far outside the other wells' values of the same target and step.
fn implausible_values(project: &Project, records: &[WellRecord]) -> Vec<Finding> {
    let mut out = Vec::new();
    for (t, spec) in project.targets.iter().enumerate() {
        for step in &project.steps {
            let rows: Vec<&WellRecord> = records
                .iter()
                .filter(|r| r.step == step.name && r.targets.get(t).is_some_and(|v| !v.is_nan()))
                .collect();
            let values: Vec<f64> = rows.iter().map(|r| r.targets[t]).collect();
            let z = modified_z(&values).unwrap_or_default();
            for k in lone_outliers(&values) {
                let r = rows[k];
                out.push(Finding {
                    what: format!(
                        "{}, column '{}': a value far outside the other wells' values at step '{}'",
                        project.wells.file.display(),
                        spec.column,
                        step.name
                    ),
                    subject: Some(("lines", r.line.to_string())),
                    message: format!(
                        "{}, line {}, column '{}': {} at well '{}' step '{}' lies far outside the other wells' values (modified z-score {:.0}); is it in another unit (e.g. percent among fractions)?",
                        project.wells.file.display(),
                        r.line,
                        spec.column,
                        r.targets[t],
                        crate::io::excerpt(&r.well),
                        step.name,
                        z.get(k).copied().unwrap_or(f64::NAN)
                    ),
                });
            }
        }
    }
    out
}

/// Loads and validates the project at `path`, collecting every problem instead of stopping at the
/// first. A manifest problem does stop it: nothing else can be read without the manifest, and
/// the message says so.
pub fn check_project(path: &Path) -> CheckReport {
    let mut report = CheckReport {
        manifest: path.to_path_buf(),
        runnable: false,
        project: None,
        grid: None,
        steps: Vec::new(),
        wells: None,
        targets: Vec::new(),
        thresholds: Vec::new(),
        problems: Vec::new(),
    };
    let mut errors: Vec<Finding> = Vec::new();
    let mut row_errors: Vec<Finding> = Vec::new();
    let mut later_errors: Vec<Finding> = Vec::new();
    let mut warnings: Vec<Finding> = Vec::new();
    let project = match Project::load(path) {
        Ok(p) => p,
        Err(e) => {
            let note = match e {
                ProjectError::Parse { .. } => {
                    "; nothing else was checked: the manifest must parse before its settings, maps and wells CSV can be checked"
                }
                ProjectError::Manifest { .. } => {
                    "; nothing else was checked: settings are checked in manifest order up to the first unusable one, and the maps and wells CSV only once every setting is usable"
                }
                _ => "",
            };
            report.problems.push(Problem {
                severity: Severity::Error,
                message: format!("{e}{note}"),
                count: 1,
            });
            return report;
        }
    };
    report.project = Some(project.name.clone());
    report.grid = Some(project.grid.clone());
    report.thresholds = project.thresholds.clone();

    // Maps (one that cannot be read stays an empty placeholder).
    let mut maps: Vec<Vec<Vec<f64>>> = Vec::with_capacity(project.steps.len());
    let mut step_ok: Vec<bool> = Vec::with_capacity(project.steps.len());
    let mut read_failed = false;
    for (s, results) in project.read_maps_each().into_iter().enumerate() {
        let spec = &project.steps[s];
        let mut ok = true;
        let mut step_maps = Vec::with_capacity(results.len());
        let mut attributes = Vec::with_capacity(results.len());
        for (a, result) in results.into_iter().enumerate() {
            let (name, file) = &spec.attributes[a];
            let mut summary = AttributeSummary {
                name: name.clone(),
                file: file.clone(),
                min: None,
                max: None,
                mean: None,
                null_fraction: None,
            };
            match result {
                Ok(values) => {
                    let (lo, hi, mean, nf) = map_stats(&values);
                    summary.min = lo;
                    summary.max = hi;
                    summary.mean = mean;
                    summary.null_fraction = Some(nf);
                    if lo.is_none() {
                        // The verdict reports it.
                        ok = false;
                    } else if lo == hi {
                        warnings.push(Finding {
                            what: format!(
                                "constant map (every non-null node is {})",
                                lo.unwrap_or_default()
                            ),
                            subject: Some(("files", file.display().to_string())),
                            message: format!(
                                "{}: constant map (every non-null node is {}) (step '{}', attribute '{name}')",
                                file.display(),
                                lo.unwrap_or_default(),
                                spec.name
                            ),
                        });
                    }
                    step_maps.push(values);
                }
                Err(e) => {
                    ok = false;
                    read_failed = true;
                    errors.push(Finding::io(&e));
                    step_maps.push(Vec::new());
                }
            }
            attributes.push(summary);
        }
        maps.push(step_maps);
        step_ok.push(ok);
        report.steps.push(StepSummary {
            name: spec.name.clone(),
            base_date: spec.base_date.clone(),
            monitor_date: spec.monitor_date.clone(),
            attributes,
            well_rows: 0,
            usable_rows: 0,
        });
    }
    if let Err(e) = project.read_volume_map() {
        read_failed = true;
        errors.push(Finding::io(&e));
    }
    if let Err(e) = crate::outline::read_all(&project.unsampled) {
        errors.push(Finding::io(&e));
    }
    if let Some(infill) = &project.infill
        && infill.volume_map.is_some()
        && infill.volume_unit.is_none()
    {
        warnings.push(Finding::plain(format!(
            "{}: infill.volume_unit is not given, so targets.csv cannot say the unit of the risked volume",
            project.manifest_path.display()
        )));
    }
    if project.smoothing.is_empty() && !project.smoothing_targets.is_empty() {
        warnings.push(Finding::plain(format!(
            "{}: smoothing.targets lists targets but the smoothing widths are off, so nothing is \
             smoothed (set smoothing.widths to \"auto\" or a list of widths)",
            project.manifest_path.display()
        )));
    }

    // Wells and extraction.
    match project.read_wells_all() {
        Err(e) => errors.push(Finding::io(&e)),
        Ok((records, bad_rows)) => {
            let n_bad = bad_rows.len();
            row_errors.extend(bad_rows.iter().map(Finding::io));
            let mut rows_per_step = vec![0usize; project.steps.len()];
            for r in &records {
                if let Some(s) = project.step_index(&r.step) {
                    rows_per_step[s] += 1;
                }
            }
            let all_wells: HashSet<&str> = records.iter().map(|r| r.well.as_str()).collect();
            let n_wells = all_wells.len();
            let n_rows = records.len();
            warnings.extend(implausible_values(&project, &records));
            let usable: Vec<_> = records
                .iter()
                .filter(|r| project.step_index(&r.step).is_some_and(|s| step_ok[s]))
                .cloned()
                .collect();
            let skipped_steps: Vec<&str> = project
                .steps
                .iter()
                .zip(&step_ok)
                .filter(|(_, ok)| !**ok)
                .map(|(s, _)| s.name.as_str())
                .collect();
            if !skipped_steps.is_empty() {
                warnings.push(Finding::plain(format!(
                    "attributes not extracted at wells for step(s) {} because a map could not be used",
                    skipped_steps.join(", ")
                )));
            }
            let survey = Survey {
                project: project.clone(),
                maps,
                wells: usable,
                unsampled: Vec::new(),
            };
            let (set, sample_warnings) = sample::at_wells(&survey);
            let swapped = sample_warnings
                .iter()
                .filter(|w| w.kind == sample::SWAPPED_XY)
                .count();
            let wells_file = project.wells.file.display().to_string();
            warnings.extend(sample_warnings.iter().map(|w| Finding {
                what: format!("{wells_file}: well rows left out of training: {}", w.kind),
                subject: Some((
                    "rows",
                    format!("well '{}' step '{}'", crate::io::excerpt(&w.well), w.step),
                )),
                message: w.to_string(),
            }));
            if swapped > 0 {
                warnings.push(Finding::plain(format!(
                    "{wells_file}: {swapped} well row(s) outside the grid would lie inside it with x and y swapped: do wells.x_column = '{}' and wells.y_column = '{}' name the right columns?",
                    project.wells.x_column, project.wells.y_column
                )));
            }
            for (s, summary) in report.steps.iter_mut().enumerate() {
                summary.well_rows = rows_per_step[s];
                summary.usable_rows = set.step.iter().filter(|&&t| t == s).count();
                if rows_per_step[s] == 0 {
                    warnings.push(Finding::plain(format!(
                        "{}: no well rows for step '{}'",
                        project.wells.file.display(),
                        summary.name
                    )));
                }
            }
            report.wells = Some(WellsSummary {
                file: project.wells.file.clone(),
                rows: n_rows,
                wells: n_wells,
                usable_rows: set.n_rows(),
                usable_wells: set.n_wells(),
            });
            let complete = !read_failed && n_bad == 0 && skipped_steps.is_empty();
            later_errors.extend(verdict(&survey, &set, complete));
            for (t, spec) in project.targets.iter().enumerate() {
                let rows = set.rows_with_target(t);
                let wells: HashSet<usize> = rows.iter().map(|&r| set.group[r]).collect();
                let vals: Vec<f64> = rows.iter().map(|&r| set.y[[r, t]]).collect();
                let (lo, hi, _, _) = map_stats(&vals);
                report.targets.push(TargetSummary {
                    name: spec.name.clone(),
                    column: spec.column.clone(),
                    unit: spec.unit.clone(),
                    lower_bound: spec.min,
                    upper_bound: spec.max,
                    count: rows.len(),
                    wells: wells.len(),
                    min: lo,
                    max: hi,
                });
            }
        }
    }
    let mut problems = group(errors, Severity::Error);
    let mut rows = group(row_errors, Severity::Error);
    if rows.len() > MAX_ROW_ERRORS {
        let rest: usize = rows[MAX_ROW_ERRORS..].iter().map(|p| p.count).sum();
        rows.truncate(MAX_ROW_ERRORS);
        rows.push(Problem {
            severity: Severity::Error,
            message: format!(
                "{}: {rest} more bad row(s) not listed",
                project.wells.file.display()
            ),
            count: rest,
        });
    }
    problems.extend(rows);
    problems.extend(group(later_errors, Severity::Error));
    report.runnable = problems.is_empty();
    problems.extend(group(warnings, Severity::Warning));
    report.problems = problems;
    report
}

/// Formats an optional number for the text summary.
fn num(v: Option<f64>) -> String {
    match v {
        Some(v) => format!("{}", SigFig(v)),
        None => "-".into(),
    }
}

/// A number shown with about 5 significant figures.
struct SigFig(f64);

impl fmt::Display for SigFig {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = self.0;
        if v == 0.0 || (1e-3..1e6).contains(&v.abs()) {
            let digits = if v == 0.0 {
                0
            } else {
                (4 - v.abs().log10().floor() as i32).max(0) as usize
            };
            let s = format!("{v:.digits$}");
            let s = if s.contains('.') {
                s.trim_end_matches('0').trim_end_matches('.').to_string()
            } else {
                s
            };
            f.write_str(&s)
        } else {
            let s = format!("{v:.4e}");
            match s.split_once('e') {
                Some((m, e)) if m.contains('.') => {
                    write!(f, "{}e{e}", m.trim_end_matches('0').trim_end_matches('.'))
                }
                _ => f.write_str(&s),
            }
        }
    }
}

impl fmt::Display for CheckReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "manifest: {}", self.manifest.display())?;
        if let Some(name) = &self.project {
            writeln!(f, "project: {name}")?;
        }
        if let Some(g) = &self.grid {
            writeln!(
                f,
                "grid: {} x {} nodes ({} nodes), dx {} dy {}, node (0,0) at ({}, {}), rotation {} deg, {}, null value {}",
                g.nx,
                g.ny,
                g.len(),
                g.dx,
                g.dy,
                g.origin_x,
                g.origin_y,
                g.rotation,
                g.epsg
                    .map_or("no EPSG code".to_string(), |c| format!("EPSG:{c}")),
                g.null_value
            )?;
        }
        if !self.steps.is_empty() {
            let names: Vec<&str> = self.steps[0]
                .attributes
                .iter()
                .map(|a| a.name.as_str())
                .collect();
            writeln!(
                f,
                "steps: {}; attributes per step: {} ({})",
                self.steps.len(),
                names.len(),
                names.join(", ")
            )?;
        }
        let width = self
            .steps
            .iter()
            .flat_map(|s| s.attributes.iter().map(|a| a.name.len()))
            .max()
            .unwrap_or(9)
            .max(9);
        for s in &self.steps {
            let dates = match (&s.base_date, &s.monitor_date) {
                (Some(b), Some(m)) => format!(" ({b} -> {m})"),
                (Some(b), None) => format!(" (base {b})"),
                (None, Some(m)) => format!(" (monitor {m})"),
                (None, None) => String::new(),
            };
            writeln!(
                f,
                "\nstep {}{dates}: {} well row(s), {} usable",
                s.name, s.well_rows, s.usable_rows
            )?;
            writeln!(
                f,
                "  {:<width$}  {:>12}  {:>12}  {:>12}  {:>7}",
                "attribute", "min", "max", "mean", "null %"
            )?;
            for a in &s.attributes {
                writeln!(
                    f,
                    "  {:<width$}  {:>12}  {:>12}  {:>12}  {:>7}",
                    a.name,
                    num(a.min),
                    num(a.max),
                    num(a.mean),
                    a.null_fraction
                        .map_or("-".to_string(), |n| format!("{:.1}", 100.0 * n))
                )?;
            }
        }
        if let Some(w) = &self.wells {
            writeln!(
                f,
                "\nwells: {}: {} row(s) at {} well(s); {} row(s) at {} well(s) usable for training",
                w.file.display(),
                w.rows,
                w.wells,
                w.usable_rows,
                w.usable_wells
            )?;
        }
        if !self.targets.is_empty() {
            writeln!(f, "targets (usable rows):")?;
            for t in &self.targets {
                let unit = if t.unit.is_empty() {
                    String::new()
                } else {
                    format!(" [{}]", t.unit)
                };
                writeln!(
                    f,
                    "  {}{unit}, bounds [{}, {}]: {} value(s) at {} well(s), range {} .. {}",
                    t.name,
                    t.lower_bound,
                    t.upper_bound,
                    t.count,
                    t.wells,
                    num(t.min),
                    num(t.max)
                )?;
            }
        }
        if !self.thresholds.is_empty() {
            writeln!(f, "thresholds:")?;
            for t in &self.thresholds {
                let dir = match t.direction {
                    crate::project::Direction::Above => "above",
                    crate::project::Direction::Below => "below",
                };
                writeln!(f, "  {}: {} {dir} {}", t.label, t.target, t.value)?;
            }
        }
        if !self.problems.is_empty() {
            writeln!(f, "\nproblems ({}):", self.problems.len())?;
            for p in &self.problems {
                writeln!(f, "  {p}")?;
            }
        }
        let errors = self.error_count();
        if self.runnable {
            write!(f, "\nOK: the project can be run")
        } else {
            write!(f, "\nNOT RUNNABLE: {errors} error(s) must be fixed first")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sig_fig_formatting() {
        assert_eq!(SigFig(0.123456).to_string(), "0.12346");
        assert_eq!(SigFig(1234.5678).to_string(), "1234.6");
        assert_eq!(SigFig(0.0).to_string(), "0");
        assert_eq!(SigFig(-2.0).to_string(), "-2");
        assert_eq!(SigFig(1.5e-5).to_string(), "1.5e-5");
        assert_eq!(SigFig(-3.04129e-4).to_string(), "-3.0413e-4");
        assert_eq!(SigFig(2.0e7).to_string(), "2e7");
    }
}
