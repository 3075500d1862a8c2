//! `predict`: applies a saved model to a project with the same attributes (for example a new
//! monitor survey), on the whole grid or on one tile of it so that a batch scheduler can spread a
//! very large grid over many machines. Tiles are bands of whole grid rows; put together they equal
//! the whole map exactly, because every node is predicted independently of the others given the
//! model.
//!
//! One quantity of the model concerns the whole mapped population rather than a node: the share
//! of change at the nodes, to which a hurdle target's probability of a change is adjusted
//! ([`crate::calibrate::prior`]). `run` estimates it once over every mapped node of every step
//! and stores it in `model.json`; `predict` reuses that stored estimate and never re-estimates it,
//! on a tile, a sub-area or a new project alike. A tile or a sub-area is not a fair sample of
//! the field (a tile over the flooded ground would find a higher share), and re-estimating would
//! break the equality of tiles with the whole map. For a new survey whose share of change is
//! expected to differ much from the training run's, fit a new run on it.

use super::PipelineError;
use super::model::{SavedModel, convention_text};
use super::outputs::{Formats, Writer, write_step_maps};
use crate::grid::Grid;
use crate::project;
use ndarray::s;
use serde::Serialize;
use std::path::{Path, PathBuf};

/// One tile of a grid: tile `index` (1-based) of `count` bands of rows.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Tile {
    /// 1-based tile number.
    pub index: usize,
    /// Number of tiles.
    pub count: usize,
}

impl std::str::FromStr for Tile {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let bad = || format!("--tile expects i/N with 1 <= i <= N (e.g. 2/8), got {s:?}");
        let (a, b) = s.split_once('/').ok_or_else(bad)?;
        let index: usize = a.trim().parse().map_err(|_| bad())?;
        let count: usize = b.trim().parse().map_err(|_| bad())?;
        if count == 0 || index == 0 || index > count {
            return Err(bad());
        }
        Ok(Self { index, count })
    }
}

impl Tile {
    /// The grid rows `[j0, j1)` of this tile.
    pub fn rows(&self, ny: usize) -> (usize, usize) {
        let j0 = (self.index - 1) * ny / self.count;
        let j1 = self.index * ny / self.count;
        (j0, j1)
    }

    /// The sub-grid of this tile (same geometry, origin moved to its first row).
    pub fn grid(&self, grid: &Grid) -> Grid {
        let (j0, j1) = self.rows(grid.ny);
        let (x, y) = grid.node_xy(0, j0);
        Grid {
            origin_x: x,
            origin_y: y,
            ny: j1 - j0,
            ..grid.clone()
        }
    }
}

/// Record written as `predict.json`.
#[derive(Clone, Debug, Serialize)]
pub struct PredictRecord {
    /// tidemark version.
    pub version: String,
    /// Model file.
    pub model: String,
    /// Project manifest.
    pub project: String,
    /// Tile, when one was asked for.
    pub tile: Option<Tile>,
    /// Label convention.
    pub convention: String,
    /// Warnings.
    pub warnings: Vec<String>,
    /// Cautions.
    pub cautions: Vec<String>,
    /// Files written.
    pub files: Vec<String>,
    /// The codes of the `maps/<step>/area_reason` maps, in words.
    pub area_reason_codes: String,
}

/// Applies `model_path` to the project `project_path`, writing maps under `out`.
pub fn predict(
    model_path: &Path,
    project_path: &Path,
    out: &Path,
    tile: Option<Tile>,
    formats: Formats,
) -> Result<PredictRecord, PipelineError> {
    let model = SavedModel::load(model_path)?;
    let survey = project::load_survey(project_path)?;
    let p = &survey.project;
    let want = &model.feature_names[..model.feature_names.len() - 1];
    if p.attribute_names != want {
        return Err(PipelineError::Invalid(format!(
            "{}: the project's attributes [{}] differ from the model's [{}] (names and order must match)",
            p.manifest_path.display(),
            p.attribute_names.join(", "),
            want.join(", ")
        )));
    }
    let mut inputs: Vec<PathBuf> = p.input_paths();
    inputs.push(model_path.to_path_buf());
    let mut w = Writer::with_record(out, &inputs, formats, "predict.json")?;
    let mut warnings = Vec::new();
    let grid = match tile {
        Some(t) => t.grid(&p.grid),
        None => p.grid.clone(),
    };
    let (j0, j1) = tile.map_or((0, p.grid.ny), |t| t.rows(p.grid.ny));
    let xy = p.grid.node_coordinates();
    let nodes = j0 * p.grid.nx..j1 * p.grid.nx;
    let (ground, message) = model.location_flags(&survey, nodes.clone());
    warnings.extend(message);
    for (s, step) in p.steps.iter().enumerate() {
        let step_value = match model.step_names.iter().position(|n| n == &step.name) {
            Some(k) => k as f64,
            None => {
                warnings.push(format!(
                    "step {} is not a training step; its step feature is {s}, and nodes are \
                     flagged outside the training range when that lies beyond the steps trained on",
                    step.name
                ));
                s as f64
            }
        };
        let full = model.node_features(&survey, s);
        let mut x = full
            .slice(s![j0 * p.grid.nx..j1 * p.grid.nx, ..])
            .to_owned();
        let last = x.ncols() - 1;
        x.column_mut(last).fill(step_value);
        let maps = model.predict(x.view(), &xy[nodes.clone()], ground.as_deref())?;
        write_step_maps(&mut w, &model, &grid, &step.name, &maps)?;
    }
    let record = PredictRecord {
        version: env!("CARGO_PKG_VERSION").to_string(),
        model: model_path.display().to_string(),
        project: p.manifest_path.display().to_string(),
        tile,
        convention: convention_text(model.convention, model.level),
        warnings,
        cautions: super::CAUTIONS.iter().map(|s| s.to_string()).collect(),
        files: w.written.clone(),
        area_reason_codes: super::outputs::AREA_REASON_CODES.to_string(),
    };
    w.finish(&record)?;
    Ok(record)
}
