//! Pictures of a run.
//!
//! Draws, per step and target, P50 (diverging colour map for signed changes), band width and each
//! exceedance probability (viridis), and per step the dissimilarity index, with wells posted and
//! nodes outside the area of applicability hatched; the infill targets over the chance of remaining
//! oil; error maps against a synthetic truth. The review page that shows them is assembled in
//! [`super::assemble`].

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use super::outputs::Writer;
use crate::decide::Target;
use crate::grid::Grid;
use crate::report::PictureRef;
use crate::report::colormap::ColourScale;
use crate::report::input as ri;
use crate::report::picture::{MapGeometry, MapPicture, map_png};
use rayon::prelude::*;

/// Size in pixels of every map picture.
pub const MAP_SIZE: (u32, u32) = (900, 720);

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

fn wells_of(model: &SavedModel) -> Vec<(f64, f64, String)> {
    model
        .wells
        .iter()
        .map(|(n, x, y)| (*x, *y, n.clone()))
        .collect()
}

/// Draws the map pictures of one step into `pictures/<step>/` and returns their report entries.
pub fn step_pictures(
    w: &mut Writer,
    model: &SavedModel,
    grid: &Grid,
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
            title: format!("{} P50, step {step}", spec.name),
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
                "{} band width ({}-{}), step {step}",
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
                    "P({} {dir} {} {}) - {}, step {step}",
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
        rel: format!("pictures/{step}/applicability.png"),
        step: step.into(),
        target: None,
        kind: "applicability".into(),
        title: format!(
            "Dissimilarity index, step {step} (hatched: DI > {:.3} or outside the training range)",
            model.applicability.threshold
        ),
        unit: "DI".into(),
        scale: ColourScale::sequential_from(&maps.applicability.di),
        values: maps.applicability.di.clone(),
        hatch: true,
    });
    draw(w, model, grid, jobs, &maps.applicability.inside)
}

fn draw(
    w: &mut Writer,
    model: &SavedModel,
    grid: &Grid,
    jobs: Vec<Job>,
    inside: &[bool],
) -> Result<Vec<ri::MapEntry>, PipelineError> {
    let geometry = MapGeometry::from(grid);
    let wells = wells_of(model);
    let outside: Vec<bool> = inside.iter().map(|i| !i).collect();
    let caption = convention_text(model.convention, model.level);
    let drawn: Vec<Result<Vec<u8>, crate::report::ReportError>> = jobs
        .par_iter()
        .map(|j| {
            map_png(
                &MapPicture {
                    geometry,
                    values: &j.values,
                    title: j.title.clone(),
                    unit: j.unit.clone(),
                    xy_unit: "m".into(),
                    scale: j.scale,
                    wells: &wells,
                    outside: (j.hatch && outside.len() == j.values.len()).then_some(&outside[..]),
                    caption: caption.clone(),
                    markers: &[],
                },
                MAP_SIZE.0,
                MAP_SIZE.1,
            )
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
            caption: caption.clone(),
        });
    }
    Ok(entries)
}

/// Draws the infill targets over the chance map of the ranking step.
pub fn infill_picture(
    w: &mut Writer,
    model: &SavedModel,
    grid: &Grid,
    chance: &[f64],
    inside: &[bool],
    targets: &[Target],
    criterion: &str,
) -> Result<PictureRef, PipelineError> {
    let wells = wells_of(model);
    let outside: Vec<bool> = inside.iter().map(|i| !i).collect();
    let markers: Vec<(f64, f64, String)> = targets
        .iter()
        .map(|t| (t.x, t.y, format!("#{}", t.rank)))
        .collect();
    let png = map_png(
        &MapPicture {
            geometry: MapGeometry::from(grid),
            values: chance,
            title: format!("Risked infill targets over {criterion}"),
            unit: "probability".into(),
            xy_unit: "m".into(),
            scale: ColourScale::Probability,
            wells: &wells,
            outside: Some(&outside),
            caption: "Triangles: ranked targets (outside the hatched area, spaced from wells and \
                      each other). Decision support only."
                .into(),
            markers: &markers,
        },
        MAP_SIZE.0,
        MAP_SIZE.1,
    )?;
    w.bytes("pictures/targets.png", &png)?;
    Ok(PictureRef::File("pictures/targets.png".into()))
}
