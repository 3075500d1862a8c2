//! Pictures of a run and the input of its review page.
//!
//! Draws, per step and target, P50 (diverging colour map for signed changes), band width and each
//! exceedance probability (viridis), and per step the dissimilarity index, with wells posted (by
//! kind when the wells CSV says it), outlines, a scale bar, a north arrow, the coordinate system
//! and the survey dates, and nodes outside the area of applicability hatched; the infill targets
//! over the chance of remaining oil; error maps against a synthetic truth. The P10/P50/P90
//! convention is stated once per figure set (on the review page), not under every map. Then
//! assembles [`ReportInput`] from the run's diagnostics and studies, saves it as
//! `report-data.json` and writes `report.html`.

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use super::outputs::Writer;
use super::studies::{Sensitivity, Summary};
use crate::decide::Target;
use crate::grid::Grid;
use crate::io::wells::WellKind;
use crate::metrics::quantile_sorted;
use crate::report::colormap::ColourScale;
use crate::report::input as ri;
use crate::report::picture::{MapGeometry, MapLine, MapPicture, MapWell, WellSymbol, map_png};
use crate::report::{PictureRef, ReportInput};
use rayon::prelude::*;

/// Size in pixels of every map picture: wide enough for a slide, with text sized to it.
pub const MAP_SIZE: (u32, u32) = (1000, 840);

/// What every map of a run shares: the grid, its coordinate system, the wells (with their kind
/// when known), outlines and fault traces, and the survey dates of each step.
#[derive(Clone, Debug)]
pub struct MapSetting {
    /// The grid of the maps.
    pub grid: Grid,
    /// The coordinate system in words ([`crs_text`]).
    pub crs: String,
    /// Wells to post.
    pub wells: Vec<MapWell>,
    /// Outlines and fault traces to draw over every map (from the project's polyline files).
    pub lines: Vec<MapLine>,
    /// Per step name: base and monitor survey dates, when the manifest gives them.
    pub dates: Vec<(String, Option<String>, Option<String>)>,
}

/// The coordinate system of `grid` in words: its EPSG code, or the local engineering system the
/// maps are written in when it has none.
pub fn crs_text(grid: &Grid) -> String {
    match grid.epsg {
        Some(code) => format!("EPSG:{code}"),
        None => "local engineering coordinates in metres (no EPSG code)".to_string(),
    }
}

fn symbol(kind: Option<WellKind>) -> WellSymbol {
    match kind {
        Some(WellKind::Producer) => WellSymbol::Producer,
        Some(WellKind::Injector) => WellSymbol::Injector,
        Some(WellKind::Observer) => WellSymbol::Observer,
        None => WellSymbol::Unknown,
    }
}

impl MapSetting {
    /// The setting of a run's maps: the model's training wells (by kind when `well_rows` says
    /// it), the grid's coordinate system and the survey dates of the project's steps.
    pub fn new(
        grid: &Grid,
        model: &SavedModel,
        steps: &[crate::project::StepSpec],
        well_rows: &[crate::io::wells::WellRecord],
    ) -> Self {
        let kind_of = |name: &str| {
            well_rows
                .iter()
                .filter(|r| r.well == name)
                .find_map(|r| r.kind)
        };
        MapSetting {
            grid: grid.clone(),
            crs: crs_text(grid),
            wells: model
                .wells
                .iter()
                .map(|(n, x, y)| MapWell {
                    x: *x,
                    y: *y,
                    name: n.clone(),
                    symbol: symbol(kind_of(n)),
                })
                .collect(),
            lines: Vec::new(),
            dates: steps
                .iter()
                .map(|s| (s.name.clone(), s.base_date.clone(), s.monitor_date.clone()))
                .collect(),
        }
    }

    /// Reads outline and fault polylines (see [`crate::io::polylines`]) to draw over every map.
    pub fn add_lines(&mut self, paths: &[std::path::PathBuf]) -> Result<(), PipelineError> {
        for path in paths {
            for p in crate::io::polylines::read(path)? {
                self.lines.push(MapLine { points: p.points });
            }
        }
        Ok(())
    }

    /// The setting of a survey's maps (see [`MapSetting::new`]).
    pub fn of_survey(survey: &crate::project::Survey, model: &SavedModel) -> Self {
        let p = &survey.project;
        Self::new(&p.grid, model, &p.steps, &survey.wells)
    }

    /// The line under a map's title: the step and its survey dates when known.
    pub fn subtitle(&self, step: &str) -> String {
        match self.dates.iter().find(|(s, _, _)| s == step) {
            Some((_, Some(base), Some(monitor))) => {
                format!("step {step}: monitor {monitor} minus base {base}")
            }
            Some((_, None, Some(monitor))) => format!("step {step}: monitor {monitor}"),
            Some((_, Some(base), None)) => format!("step {step}: base {base}"),
            _ => format!("step {step}"),
        }
    }

    /// A map picture of `values` in this setting (no caption, no markers, no hatching).
    pub fn picture<'a>(
        &'a self,
        values: &'a [f64],
        title: String,
        subtitle: String,
        unit: String,
        scale: ColourScale,
    ) -> MapPicture<'a> {
        MapPicture {
            geometry: MapGeometry::from(&self.grid),
            values,
            title,
            subtitle,
            unit,
            xy_unit: "m".into(),
            crs: self.crs.clone(),
            scale,
            wells: &self.wells,
            outside: None,
            caption: String::new(),
            markers: &[],
            lines: &self.lines,
        }
    }
}

/// One map to draw.
struct Job {
    rel: String,
    step: String,
    target: Option<String>,
    kind: String,
    title: String,
    unit: String,
    scale: ColourScale,
    values: Vec<f64>,
    hatch: bool,
}

/// Attribute family for grouped importance: amplitudes, AVO intercept/gradient, timing,
/// repeatability (NRMS, which measures how alike the two surveys are, not an amplitude), time
/// step.
pub fn family(attribute: &str) -> &'static str {
    let l = attribute.to_lowercase();
    if l == "step" {
        "time step"
    } else if l.contains("nrms") {
        "repeatability (NRMS)"
    } else if l.contains("intercept") || l.contains("gradient") {
        "AVO intercept/gradient"
    } else if l.contains("shift") || l.contains("strain") || l.contains("time") {
        "timing"
    } else {
        "amplitudes"
    }
}

/// Draws the map pictures of one step into `pictures/<step>/` and returns their report entries.
pub fn step_pictures(
    w: &mut Writer,
    model: &SavedModel,
    setting: &MapSetting,
    step: &str,
    maps: &StepMaps,
) -> Result<Vec<ri::MapEntry>, PipelineError> {
    let mut jobs = Vec::new();
    for (t, tm) in maps.targets.iter().enumerate() {
        let spec = &model.targets[t];
        jobs.push(Job {
            rel: format!("pictures/{step}/{}_p50.png", spec.name),
            step: step.into(),
            target: Some(spec.name.clone()),
            kind: "P50".into(),
            title: format!("{} P50 (most likely change)", spec.name),
            unit: spec.unit.clone(),
            scale: ColourScale::diverging_from(&tm.mid),
            values: tm.mid.clone(),
            hatch: true,
        });
        let width: Vec<f64> = tm.hi.iter().zip(&tm.lo).map(|(h, l)| h - l).collect();
        let (lo_l, hi_l) = model.band_labels();
        jobs.push(Job {
            rel: format!("pictures/{step}/{}_width.png", spec.name),
            step: step.into(),
            target: Some(spec.name.clone()),
            kind: "band width".into(),
            title: format!(
                "{} band width ({}-{})",
                spec.name,
                lo_l.to_uppercase(),
                hi_l.to_uppercase()
            ),
            unit: spec.unit.clone(),
            scale: ColourScale::sequential_from(&width),
            values: width,
            hatch: true,
        });
        for (th, p) in model.thresholds_of(t).iter().zip(&tm.exceed) {
            let dir = match th.direction {
                crate::project::Direction::Above => ">",
                crate::project::Direction::Below => "<",
            };
            jobs.push(Job {
                rel: format!("pictures/{step}/{}_exceed_{}.png", spec.name, th.label),
                step: step.into(),
                target: Some(spec.name.clone()),
                kind: format!("P({})", th.label),
                title: format!(
                    "P({} {dir} {} {}): {}",
                    spec.name, th.value, spec.unit, th.label
                ),
                unit: "probability".into(),
                scale: ColourScale::Probability,
                values: p.clone(),
                hatch: true,
            });
        }
    }
    jobs.push(Job {
        rel: format!("pictures/{step}/dissimilarity.png"),
        step: step.into(),
        target: None,
        kind: "dissimilarity".into(),
        title: format!(
            "Dissimilarity to the wells (hatched: above {:.3} or outside their range)",
            model.applicability.threshold
        ),
        unit: "DI".into(),
        scale: ColourScale::sequential_from(&maps.applicability.di),
        values: maps.applicability.di.clone(),
        hatch: true,
    });
    draw(w, setting, jobs, &maps.applicability.inside)
}

fn draw(
    w: &mut Writer,
    setting: &MapSetting,
    jobs: Vec<Job>,
    inside: &[bool],
) -> Result<Vec<ri::MapEntry>, PipelineError> {
    let outside: Vec<bool> = inside.iter().map(|i| !i).collect();
    let drawn: Vec<Result<Vec<u8>, crate::report::ReportError>> = jobs
        .par_iter()
        .map(|j| {
            let mut p = setting.picture(
                &j.values,
                j.title.clone(),
                setting.subtitle(&j.step),
                j.unit.clone(),
                j.scale,
            );
            p.outside = (j.hatch && outside.len() == j.values.len()).then_some(&outside[..]);
            map_png(&p, MAP_SIZE.0, MAP_SIZE.1)
        })
        .collect();
    let mut entries = Vec::new();
    for (j, png) in jobs.into_iter().zip(drawn) {
        w.bytes(&j.rel, &png?)?;
        entries.push(ri::MapEntry {
            step: j.step,
            target: j.target,
            kind: j.kind,
            picture: PictureRef::File(j.rel),
            caption: String::new(),
        });
    }
    Ok(entries)
}

/// Draws the infill targets over the chance map of the ranking step.
#[allow(clippy::too_many_arguments)]
pub fn infill_picture(
    w: &mut Writer,
    setting: &MapSetting,
    step: &str,
    chance: &[f64],
    inside: &[bool],
    targets: &[Target],
    criterion: &str,
) -> Result<PictureRef, PipelineError> {
    let outside: Vec<bool> = inside.iter().map(|i| !i).collect();
    let markers: Vec<(f64, f64, String)> = targets
        .iter()
        .map(|t| (t.x, t.y, format!("#{}", t.rank)))
        .collect();
    let mut p = setting.picture(
        chance,
        "Risked infill targets".to_string(),
        setting.subtitle(step),
        "probability".into(),
        ColourScale::Probability,
    );
    p.outside = Some(&outside);
    p.markers = &markers;
    p.caption = format!(
        "Colours: {criterion}. Triangles: ranked targets, outside the hatched area and spaced \
         from the wells and each other. Decision support only."
    );
    let png = map_png(&p, MAP_SIZE.0, MAP_SIZE.1)?;
    w.bytes("pictures/targets.png", &png)?;
    Ok(PictureRef::File("pictures/targets.png".into()))
}

fn opt(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// Band coverage by decile of the truth at the wells (out-of-fold rows).
fn decile_coverage(d: &crate::calibrate::TargetDiagnostics) -> ri::DecileCoverage {
    let mut truth: Vec<f64> = d.rows.iter().map(|r| r.truth).collect();
    truth.sort_by(f64::total_cmp);
    let cuts: Vec<f64> = (0..=10)
        .map(|k| quantile_sorted(&truth, k as f64 / 10.0))
        .collect();
    let rows = (0..10)
        .map(|k| {
            let (a, b) = (cuts[k], cuts[k + 1]);
            let inn: Vec<&crate::calibrate::OofRow> = d
                .rows
                .iter()
                .filter(|r| r.truth >= a && (r.truth < b || (k == 9 && r.truth <= b)))
                .collect();
            let n = inn.len();
            let cov = inn
                .iter()
                .filter(|r| r.truth >= r.lo && r.truth <= r.hi)
                .count() as f64
                / n.max(1) as f64;
            let width = inn.iter().map(|r| r.hi - r.lo).sum::<f64>() / n.max(1) as f64;
            ri::DecileRow {
                decile: k + 1,
                truth_low: opt(a),
                truth_high: opt(b),
                count: n,
                coverage: (n > 0).then_some(cov),
                mean_width: (n > 0).then_some(width),
            }
        })
        .collect();
    ri::DecileCoverage {
        nominal: Some(d.level),
        rows,
    }
}

/// Everything [`build_report`] needs.
pub struct ReportParts<'a> {
    /// The run's summary.
    pub summary: &'a Summary,
    /// The model.
    pub model: &'a SavedModel,
    /// Map picture entries.
    pub maps: Vec<ri::MapEntry>,
    /// Infill section, if ranked.
    pub infill: Option<ri::InfillSection>,
    /// Sensitivity studies.
    pub studies: &'a Sensitivity,
    /// Run information.
    pub run: ri::RunInfo,
}

/// Assembles the review page's input.
pub fn build_report(p: ReportParts) -> ReportInput {
    let model = p.model;
    let targets = p
        .summary
        .targets
        .iter()
        .map(|t| {
            let d = &t.diagnostics;
            let m = &d.metrics;
            let curve_points: Vec<ri::LearningPoint> = p
                .studies
                .curve
                .iter()
                .filter(|c| c.target == t.name && !c.r2.is_empty())
                .map(|c| {
                    let n = c.r2.len() as f64;
                    ri::LearningPoint {
                        wells: c.wells,
                        r2_mean: opt(c.r2.iter().sum::<f64>() / n),
                        r2_min: opt(c.r2.iter().copied().fold(f64::INFINITY, f64::min)),
                        r2_max: opt(c.r2.iter().copied().fold(f64::NEG_INFINITY, f64::max)),
                        coverage_mean: opt(c.coverage.iter().sum::<f64>() / n),
                    }
                })
                .collect();
            let by_attribute: Vec<ri::AttributeImportance> = t
                .importance
                .iter()
                .map(|fi| ri::AttributeImportance {
                    attribute: fi.feature.clone(),
                    family: family(&fi.feature).into(),
                    value: opt(fi.share),
                    spread: None,
                })
                .collect();
            let mut by_family: Vec<ri::FamilyImportance> = Vec::new();
            for a in &by_attribute {
                match by_family.iter_mut().find(|f| f.family == a.family) {
                    Some(f) => f.value = Some(f.value.unwrap_or(0.0) + a.value.unwrap_or(0.0)),
                    None => by_family.push(ri::FamilyImportance {
                        family: a.family.clone(),
                        value: a.value,
                    }),
                }
            }
            let ablation = p
                .studies
                .ablation
                .iter()
                .find(|a| a.target == t.name)
                .map(|a| ri::Ablation {
                    description: format!(
                        "leave-wells-out skill with every attribute and without the \
                         angle-dependent ones ({})",
                        p.studies.note
                    ),
                    removed: a.removed.clone(),
                    with_all: ri::Skill {
                        r2: opt(a.r2_all),
                        coverage: opt(a.coverage_all),
                        ..ri::Skill::default()
                    },
                    without: ri::Skill {
                        r2: opt(a.r2_without),
                        coverage: opt(a.coverage_without),
                        ..ri::Skill::default()
                    },
                });
            let n_rows = d.rows.len();
            ri::TargetReport {
                name: t.name.clone(),
                description: format!("change in {} ({})", t.name, t.unit),
                unit: t.unit.clone(),
                summary: ri::TargetSummary {
                    wells: Some(d.n_wells),
                    rows: Some(d.n_rows),
                    learner: Some(d.learner.chosen.clone()),
                    end_correction_kept: Some(d.end_correction.kept),
                    r2: opt(m.r2),
                    rmse: opt(m.rmse),
                    bias: opt(m.bias),
                    nominal_coverage: Some(d.level),
                    coverage: opt(m.coverage),
                    coverage_bottom_decile: opt(m.coverage_bottom_decile),
                    coverage_top_decile: opt(m.coverage_top_decile),
                    mean_width: opt(m.mean_width),
                    warnings: d.warnings.clone(),
                },
                crossplot: Some(ri::CrossplotData {
                    truth: d.rows.iter().map(|r| r.truth).collect(),
                    raw: d.rows.iter().map(|r| r.raw).collect(),
                    corrected: d.rows.iter().map(|r| r.corrected).collect(),
                }),
                coverage_by_decile: Some(decile_coverage(d)),
                reliability: d
                    .exceedance
                    .iter()
                    .map(|e| ri::ReliabilityTable {
                        label: e.label.clone(),
                        threshold: Some(e.value),
                        brier: opt(match e.method {
                            crate::calibrate::exceedance::ExceedMethod::Conformal => {
                                e.brier_conformal
                            }
                            _ => e.brier_forest,
                        }),
                        bins: e
                            .reliability
                            .iter()
                            .map(|b| ri::ReliabilityBin {
                                forecast_low: b.p_lo,
                                forecast_high: b.p_hi,
                                mean_forecast: opt(b.mean_prob),
                                observed_frequency: opt(b.observed),
                                count: b.n,
                            })
                            .collect(),
                    })
                    .collect(),
                pit: Some(ri::PitHistogram {
                    counts: d
                        .pit_histogram
                        .iter()
                        .map(|f| (f * n_rows as f64).round() as usize)
                        .collect(),
                }),
                learning_curve: (!curve_points.is_empty()).then(|| ri::LearningCurve {
                    repeats: p
                        .studies
                        .curve
                        .iter()
                        .map(|c| c.r2.len())
                        .max()
                        .unwrap_or(0),
                    note: p.studies.note.clone(),
                    points: curve_points,
                }),
                importance: Some(ri::Importance {
                    measure: "permutation importance (increase in out-of-bag error when an \
                              attribute is shuffled), share of the total"
                        .into(),
                    unit: "share".into(),
                    by_attribute,
                    by_family,
                    family_note: String::new(),
                }),
                ablation,
            }
        })
        .collect();
    ReportInput {
        project: p.summary.project.clone(),
        run: p.run,
        convention: convention_text(model.convention, model.level),
        cautions: super::CAUTIONS.iter().map(|s| s.to_string()).collect(),
        xy_unit: "m".into(),
        steps: model.step_names.clone(),
        targets,
        maps: p.maps,
        infill: p.infill,
        truth: None,
    }
}
