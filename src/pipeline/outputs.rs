//! Writing a results folder: maps in GeoTIFF and XYZ text with their metadata, and JSON files.
//!
//! Layout (relative to the results folder):
//! ```text
//! maps/<step>/<target>_<p50|pNN>.{tif,xyz}     most likely change and band edges
//! maps/<step>/<target>_exceed_<label>.{tif,xyz} probability of crossing a threshold
//! maps/<step>/dissimilarity.{tif,xyz}          dissimilarity index to the wells
//! maps/<step>/applicable.{tif,xyz}             1 inside the area of applicability, 0 outside
//! maps/<step>/outside_range.{tif,xyz}          attributes outside the training range
//! maps/metadata.json                           what each map holds, units, convention
//! ```

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use crate::grid::Grid;
use crate::io;
use rayon::prelude::*;
use serde::Serialize;
use std::path::{Path, PathBuf};

/// Which map formats to write.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct Formats {
    /// GeoTIFF float32.
    pub geotiff: bool,
    /// XYZ text with explicit nulls.
    pub xyz: bool,
}

impl Default for Formats {
    fn default() -> Self {
        Self {
            geotiff: true,
            xyz: true,
        }
    }
}

/// Writes files under one results folder, refusing to touch any input.
pub struct Writer {
    /// The results folder.
    pub root: PathBuf,
    inputs: Vec<PathBuf>,
    formats: Formats,
    /// Every file written, relative to `root`, in order.
    pub written: Vec<String>,
}

/// One entry of `maps/metadata.json`.
#[derive(Clone, Debug, Serialize)]
pub struct MapEntry {
    /// Path relative to the results folder, without extension.
    pub name: String,
    /// What the map holds.
    pub quantity: String,
    /// Unit of the values.
    pub unit: String,
}

impl Writer {
    /// A writer for `root`. Fails when `root` is, or lies inside, the folder of an input: outputs
    /// must never be mixed with (or written over) the data they came from.
    pub fn new(root: &Path, inputs: &[PathBuf], formats: Formats) -> Result<Self, PipelineError> {
        std::fs::create_dir_all(root).map_err(|e| {
            PipelineError::Invalid(format!("{}: cannot create folder: {e}", root.display()))
        })?;
        let canon = std::fs::canonicalize(root).map_err(|e| {
            PipelineError::Invalid(format!("{}: cannot resolve folder: {e}", root.display()))
        })?;
        for input in inputs {
            if let Ok(ci) = std::fs::canonicalize(input)
                && ci.starts_with(&canon)
            {
                return Err(PipelineError::Invalid(format!(
                    "{}: this output folder holds the input {}; choose a folder of its own",
                    root.display(),
                    input.display()
                )));
            }
        }
        Ok(Self {
            root: canon,
            inputs: inputs.to_vec(),
            formats,
            written: Vec::new(),
        })
    }

    fn target(&mut self, rel: &str) -> Result<PathBuf, PipelineError> {
        let path = self.root.join(rel);
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| {
                PipelineError::Invalid(format!("{}: cannot create folder: {e}", dir.display()))
            })?;
        }
        io::atomic::ensure_not_input(&path, &self.inputs)?;
        self.written.push(rel.to_string());
        Ok(path)
    }

    /// Writes bytes atomically to `rel`.
    pub fn bytes(&mut self, rel: &str, bytes: &[u8]) -> Result<(), PipelineError> {
        let path = self.target(rel)?;
        io::atomic::write_bytes(&path, bytes)?;
        Ok(())
    }

    /// Writes a value as pretty JSON to `rel`.
    pub fn json<T: Serialize>(&mut self, rel: &str, value: &T) -> Result<(), PipelineError> {
        let text = serde_json::to_string_pretty(value).map_err(|e| PipelineError::json(rel, e))?;
        self.bytes(rel, text.as_bytes())
    }

    /// Reserves the files of one map in every chosen format (`rel` has no extension) and returns
    /// their paths; the caller writes them (see [`io::write_map`]).
    pub fn reserve_map(&mut self, rel: &str) -> Result<Vec<PathBuf>, PipelineError> {
        let mut out = Vec::new();
        if self.formats.geotiff {
            out.push(self.target(&format!("{rel}.tif"))?);
        }
        if self.formats.xyz {
            out.push(self.target(&format!("{rel}.xyz"))?);
        }
        Ok(out)
    }
}

/// Writes every map of one step and returns their metadata entries.
pub fn write_step_maps(
    w: &mut Writer,
    model: &SavedModel,
    grid: &Grid,
    step: &str,
    maps: &StepMaps,
) -> Result<Vec<MapEntry>, PipelineError> {
    let (lo_label, hi_label) = model.band_labels();
    let conv = convention_text(model.convention, model.level);
    let mut entries = Vec::new();
    // Files are reserved in order (so `run.json` lists them deterministically), then encoded and
    // written in parallel: map formatting, XYZ text above all, dominates large grids.
    let mut jobs: Vec<(PathBuf, Vec<f64>, String)> = Vec::new();
    let mut put = |w: &mut Writer,
                   name: String,
                   values: &[f64],
                   quantity: String,
                   unit: &str|
     -> Result<(), PipelineError> {
        let desc = serde_json::json!({
            "tidemark": env!("CARGO_PKG_VERSION"),
            "step": step,
            "quantity": quantity,
            "unit": unit,
            "convention": conv,
        })
        .to_string();
        for path in w.reserve_map(&name)? {
            jobs.push((path, values.to_vec(), desc.clone()));
        }
        entries.push(MapEntry {
            name,
            quantity,
            unit: unit.to_string(),
        });
        Ok(())
    };
    for (t, tm) in maps.targets.iter().enumerate() {
        let spec = &model.targets[t];
        let base = format!("maps/{step}/{}", spec.name);
        put(
            w,
            format!("{base}_p50"),
            &tm.mid,
            format!("{} P50 (most likely change)", spec.name),
            &spec.unit,
        )?;
        put(
            w,
            format!("{base}_{lo_label}"),
            &tm.lo,
            format!(
                "{} {} (low edge of the band)",
                spec.name,
                lo_label.to_uppercase()
            ),
            &spec.unit,
        )?;
        put(
            w,
            format!("{base}_{hi_label}"),
            &tm.hi,
            format!(
                "{} {} (high edge of the band)",
                spec.name,
                hi_label.to_uppercase()
            ),
            &spec.unit,
        )?;
        for (th, prob) in model.thresholds_of(t).iter().zip(&tm.exceed) {
            let dir = match th.direction {
                crate::project::Direction::Above => "above",
                crate::project::Direction::Below => "below",
            };
            put(
                w,
                format!("{base}_exceed_{}", th.label),
                prob,
                format!(
                    "probability that {} is {dir} {} ({})",
                    spec.name, th.value, th.label
                ),
                "probability",
            )?;
        }
    }
    let a = &maps.applicability;
    put(
        w,
        format!("maps/{step}/dissimilarity"),
        &a.di,
        format!(
            "dissimilarity index (Meyer & Pebesma 2021); area-of-applicability threshold {:.4}",
            model.applicability.threshold
        ),
        "dimensionless",
    )?;
    let inside: Vec<f64> = a
        .inside
        .iter()
        .zip(&a.di)
        .map(|(&i, d)| {
            if d.is_nan() {
                f64::NAN
            } else {
                f64::from(u8::from(i))
            }
        })
        .collect();
    put(
        w,
        format!("maps/{step}/applicable"),
        &inside,
        "1 inside the area of applicability, 0 outside".into(),
        "flag",
    )?;
    let outside: Vec<f64> = a
        .outside_range
        .iter()
        .zip(&a.di)
        .map(|(&o, d)| if d.is_nan() { f64::NAN } else { f64::from(o) })
        .collect();
    put(
        w,
        format!("maps/{step}/outside_range"),
        &outside,
        "number of attributes outside the range seen at the wells".into(),
        "count",
    )?;
    let coords = jobs
        .iter()
        .any(|(path, _, _)| !io::is_geotiff(path))
        .then(|| io::xyz::Coordinates::new(grid));
    jobs.par_iter()
        .map(|(path, values, desc)| {
            io::write_map_with(path, grid, values, Some(desc), coords.as_ref())
        })
        .collect::<Result<Vec<()>, _>>()?;
    Ok(entries)
}
