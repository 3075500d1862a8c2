//! `check`: load and validate a whole project without fitting anything, and summarise it.
//!
//! Reads the manifest, every attribute map and the wells CSV, extracts the attributes at the wells,
//! and lists every problem found. A project is runnable when no problem is an error; rows left out
//! of training (outside the grid, null nodes, nothing measured) are warnings that name well and
//! step.

use crate::grid::Grid;
use crate::project::{CalibrationSection, FoldMethod, Project, Survey, ThresholdSpec};
use crate::sample;
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use std::fmt;
use std::path::{Path, PathBuf};

/// How many bad wells CSV rows are listed one by one.
const MAX_ROW_ERRORS: usize = 20;

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

/// Loads and validates the project at `path`, collecting every problem instead of stopping at the
/// first (a manifest problem does stop it: nothing else can be read without the manifest).
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
    let mut errors: Vec<String> = Vec::new();
    let mut warnings: Vec<String> = Vec::new();
    let project = match Project::load(path) {
        Ok(p) => p,
        Err(e) => {
            report.problems.push(Problem {
                severity: Severity::Error,
                message: e.to_string(),
            });
            return report;
        }
    };
    report.project = Some(project.name.clone());
    report.grid = Some(project.grid.clone());
    report.thresholds = project.thresholds.clone();

    // Maps.
    let nulls = vec![f64::NAN; project.grid.len()];
    let mut maps: Vec<Vec<Vec<f64>>> = Vec::with_capacity(project.steps.len());
    let mut step_ok: Vec<bool> = Vec::with_capacity(project.steps.len());
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
                        ok = false;
                        errors.push(format!(
                            "{}: every node is null (step '{}', attribute '{name}')",
                            file.display(),
                            spec.name
                        ));
                    } else if lo == hi {
                        warnings.push(format!(
                            "{}: constant map (every non-null node is {}) (step '{}', attribute '{name}')",
                            file.display(),
                            lo.unwrap_or_default(),
                            spec.name
                        ));
                    }
                    step_maps.push(values);
                }
                Err(e) => {
                    ok = false;
                    errors.push(e.to_string());
                    step_maps.push(nulls.clone());
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
        errors.push(e.to_string());
    }

    // Wells and extraction.
    match project.read_wells_all() {
        Err(e) => errors.push(e.to_string()),
        Ok((records, row_errors)) => {
            let n_bad = row_errors.len();
            errors.extend(
                row_errors
                    .iter()
                    .take(MAX_ROW_ERRORS)
                    .map(ToString::to_string),
            );
            if n_bad > MAX_ROW_ERRORS {
                errors.push(format!(
                    "{}: {} more bad row(s) not listed",
                    project.wells.file.display(),
                    n_bad - MAX_ROW_ERRORS
                ));
            }
            let mut rows_per_step = vec![0usize; project.steps.len()];
            for r in &records {
                if let Some(s) = project.step_index(&r.step) {
                    rows_per_step[s] += 1;
                }
            }
            let all_wells: HashSet<&str> = records.iter().map(|r| r.well.as_str()).collect();
            let n_wells = all_wells.len();
            let n_rows = records.len();
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
                warnings.push(format!(
                    "attributes not extracted at wells for step(s) {} because a map could not be used",
                    skipped_steps.join(", ")
                ));
            }
            let survey = Survey {
                project: project.clone(),
                maps,
                wells: usable,
            };
            let (set, sample_warnings) = sample::at_wells(&survey);
            warnings.extend(sample_warnings.iter().map(|w| w.to_string()));
            for (s, summary) in report.steps.iter_mut().enumerate() {
                summary.well_rows = rows_per_step[s];
                summary.usable_rows = set.step.iter().filter(|&&t| t == s).count();
                if rows_per_step[s] == 0 {
                    warnings.push(format!(
                        "{}: no well rows for step '{}'",
                        project.wells.file.display(),
                        summary.name
                    ));
                }
            }
            report.wells = Some(WellsSummary {
                file: project.wells.file.clone(),
                rows: n_rows,
                wells: n_wells,
                usable_rows: set.n_rows(),
                usable_wells: set.n_wells(),
            });
            if set.n_rows() == 0 && n_bad == 0 && skipped_steps.len() < project.steps.len() {
                errors.push(format!(
                    "{}: no well row is usable for training",
                    project.wells.file.display()
                ));
            }
            let needed = wells_needed(&project.calibration);
            for (t, spec) in project.targets.iter().enumerate() {
                let rows = set.rows_with_target(t);
                let wells: HashSet<usize> = rows.iter().map(|&r| set.group[r]).collect();
                let vals: Vec<f64> = rows.iter().map(|&r| set.y[[r, t]]).collect();
                let (lo, hi, _, _) = map_stats(&vals);
                if skipped_steps.is_empty() && n_bad == 0 && wells.len() < needed {
                    errors.push(format!(
                        "target '{}' is measured at {} usable well(s); calibration ({:?} folds, folds = {}) needs at least {needed}",
                        spec.name,
                        wells.len(),
                        project.calibration.fold_method,
                        project.calibration.folds
                    ));
                }
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
    report.runnable = errors.is_empty();
    report
        .problems
        .extend(errors.into_iter().map(|message| Problem {
            severity: Severity::Error,
            message,
        }));
    report
        .problems
        .extend(warnings.into_iter().map(|message| Problem {
            severity: Severity::Warning,
            message,
        }));
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
