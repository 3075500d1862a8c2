//! Pictures of a run.
//!
//! Draws, per step and target, P50 (diverging colour map for signed changes), band width and each
//! exceedance probability (viridis), and per step the dissimilarity index, with wells posted (by
//! kind when the wells CSV says it), outlines, a scale bar, a north arrow, the coordinate system
//! and the survey dates, and nodes outside the area of applicability hatched; the infill targets
//! over the chance of remaining oil; error maps against a synthetic truth. The P10/P50/P90
//! convention is stated once per figure set (on the review page), not under every map. The review
//! page that shows them is assembled in [`super::assemble`]. Pictures of a target and step without
//! demonstrated skill at held-out wells (verdict `none`) carry that sentence as their caption.

use super::PipelineError;
use super::model::{SavedModel, StepMaps};
use super::outputs::Writer;
use crate::decide::Target;
use crate::grid::Grid;
use crate::io::wells::WellKind;
use crate::report::PictureRef;
use crate::report::colormap::ColourScale;
use crate::report::input as ri;
use crate::report::picture::{MapGeometry, MapLine, MapPicture, MapWell, WellSymbol, map_png};
use crate::skill::{NO_SKILL, Verdict};
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
    /// Targets and steps (by name) whose maps lack demonstrated skill at held-out wells (a skill
    /// verdict `none`, [`crate::skill`]); their pictures say so in the caption. A target with no
    /// skill pooled over steps lists every step.
    pub no_skill: Vec<(String, String)>,
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
            no_skill: Vec::new(),
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
    /// The outlines of unsampled ground (`[area] unsampled`) are drawn over every map.
    pub fn of_survey(survey: &crate::project::Survey, model: &SavedModel) -> Self {
        let p = &survey.project;
        let mut setting = Self::new(&p.grid, model, &p.steps, &survey.wells);
        for o in &survey.unsampled {
            let mut points = o.points.clone();
            points.extend(o.points.first().copied());
            setting.lines.push(MapLine { points });
        }
        setting
    }

    /// The setting with the skill verdicts of a run's summary: every step of a target whose
    /// pooled verdict is `none`, and each step whose own verdict is.
    pub fn with_verdicts(mut self, summary: &super::studies::Summary) -> Self {
        let steps: Vec<String> = self.dates.iter().map(|d| d.0.clone()).collect();
        for t in &summary.targets {
            let pooled = t.skill.as_ref().is_some_and(|s| s.verdict == Verdict::None);
            for s in &t.skill_by_step {
                if pooled || s.skill.verdict == Verdict::None {
                    self.no_skill.push((t.name.clone(), s.step.clone()));
                }
            }
            if pooled {
                for s in &steps {
                    if !self.lacks_skill(&t.name, s) {
                        self.no_skill.push((t.name.clone(), s.clone()));
                    }
                }
            }
        }
        self
    }

    /// Whether the maps of `target` at `step` lack demonstrated skill.
    pub fn lacks_skill(&self, target: &str, step: &str) -> bool {
        self.no_skill.iter().any(|(t, s)| t == target && s == step)
    }

    /// The caption of a picture of `target` at `step`: the no-skill sentence, or nothing.
    pub fn caption(&self, target: &str, step: &str) -> String {
        if self.lacks_skill(target, step) {
            format!("Caution: {NO_SKILL}.")
        } else {
            String::new()
        }
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
    caption: String,
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
            caption: setting.caption(&spec.name, step),
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
            caption: setting.caption(&spec.name, step),
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
                caption: setting.caption(&spec.name, step),
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
        caption: String::new(),
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
            p.caption = j.caption.clone();
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
            caption: j.caption,
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
