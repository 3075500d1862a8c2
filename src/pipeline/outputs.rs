//! Writing a results folder: maps in GeoTIFF and XYZ text with their metadata, and JSON files.
//!
//! Layout (relative to the results folder):
//! ```text
//! maps/<step>/<target>_<p50|pNN>.{tif,xyz}     most likely change and band edges
//! maps/<step>/<target>_exceed_<label>.{tif,xyz} probability of crossing a threshold
//! maps/<step>/dissimilarity.{tif,xyz}          dissimilarity index to the wells
//! maps/<step>/applicable.{tif,xyz}             1 inside the area of applicability, 0 outside
//! maps/<step>/outside_range.{tif,xyz}          attributes outside the training range
//! maps/<step>/area_reason.{tif,xyz}            why a node is outside the area (codes below)
//! maps/metadata.json                           what each map holds, units, convention
//! ```
//!
//! `area_reason` is an 8-bit GeoTIFF (GDAL_NODATA 255) holding [`AREA_REASON_CODES`]: 0 inside
//! the area of applicability, 1 unlike every well, 2 outside the training range, 3 both, 255 no
//! data; in XYZ text 255 is written as the grid's null value. The codes are stated in the
//! GeoTIFF's ImageDescription, the XYZ sidecar's metadata and `maps/metadata.json`.
//!
//! Run integrity. A results folder is written by one process at a time and never looks complete
//! before it is:
//! 1. [`Writer::new`] takes an advisory lock on `.tidemark.lock` in the folder (an OS file lock,
//!    released by the OS when the process ends, so a killed run never leaves a stale lock); a
//!    second run into the same folder is refused with a message saying so.
//! 2. It then removes the record of an earlier run (`run.json`), removes temporary files a killed
//!    run left (`.<name>.tmp-<pid>-<n>`), and writes the marker `RUNNING`, which names the files
//!    of earlier runs and then, line by line, every file this run writes.
//! 3. Every file is written atomically (temporary file, `fsync`, rename, `fsync` of the folder).
//! 4. [`Writer::finish`] removes the files of earlier runs that this run did not write again,
//!    removes the marker, writes the record (`run.json`) last and releases the lock.
//!
//! So a folder with a `run.json` holds exactly the files it lists (beside any files of the user's
//! own), and a folder with `RUNNING` is a run in progress or an interrupted one.

use super::PipelineError;
use super::model::{SavedModel, StepMaps, convention_text};
use crate::grid::Grid;
use crate::io;
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeSet;
use std::fs::{File, OpenOptions};
use std::io::Write as _;
use std::path::{Component, Path, PathBuf};

/// The lock file of a results folder (see the module documentation).
pub const LOCK_FILE: &str = ".tidemark.lock";
/// The marker of a run in progress or interrupted (see the module documentation).
pub const RUNNING_FILE: &str = "RUNNING";
/// The record a run writes last.
pub const RUN_RECORD: &str = "run.json";
/// First line of the marker.
const RUNNING_HEADER: &str = "# tidemark is writing this folder, or a run into it was interrupted; \
the record (run.json or predict.json) is written last. Files written so far, and files of earlier \
runs, one per line:";

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

/// Writes files under one results folder, refusing to touch any input; holds the folder's lock
/// from [`Writer::new`] to [`Writer::finish`] (see the module documentation).
pub struct Writer {
    /// The results folder.
    pub root: PathBuf,
    inputs: Vec<PathBuf>,
    formats: Formats,
    /// Every file written, relative to `root`, in order.
    pub written: Vec<String>,
    /// The record written by [`Writer::finish`] (`run.json`, `predict.json`).
    record: String,
    /// Files of earlier runs into this folder (from their record or marker).
    earlier: BTreeSet<String>,
    /// The marker, open for appending the name of each file written.
    journal: Option<File>,
    /// The locked lock file; closing it releases the lock.
    lock: Option<File>,
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
    /// A writer for `root` whose record is `run.json`. Fails when `root` is, or lies inside, the
    /// folder of an input (outputs must never be mixed with, or written over, the data they came
    /// from) and when another run holds the folder's lock. Then, before anything new is written,
    /// removes an earlier `run.json` and leftover temporary files and writes the `RUNNING` marker.
    pub fn new(root: &Path, inputs: &[PathBuf], formats: Formats) -> Result<Self, PipelineError> {
        Self::with_record(root, inputs, formats, RUN_RECORD)
    }

    /// As [`Writer::new`], for a command whose record is `record` (e.g. `predict.json`).
    pub fn with_record(
        root: &Path,
        inputs: &[PathBuf],
        formats: Formats,
        record: &str,
    ) -> Result<Self, PipelineError> {
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
        let lock = acquire_lock(&canon, root)?;
        let folder_err = |what: &str, e: std::io::Error| {
            PipelineError::Invalid(format!("{}: cannot {what}: {e}", root.display()))
        };
        // What earlier runs wrote, from their record and from an interrupted run's marker.
        let mut earlier = BTreeSet::new();
        let record_path = canon.join(record);
        if let Ok(text) = std::fs::read_to_string(&record_path)
            && let Ok(v) = serde_json::from_str::<serde_json::Value>(&text)
            && let Some(files) = v.get("files").and_then(|f| f.as_array())
        {
            earlier.extend(files.iter().filter_map(|f| f.as_str()).map(str::to_string));
        }
        if let Ok(text) = std::fs::read_to_string(canon.join(RUNNING_FILE)) {
            earlier.extend(
                text.lines()
                    .filter(|l| !l.starts_with('#'))
                    .map(str::to_string),
            );
        }
        earlier.retain(|f| is_relative_inside(f) && f != record && f != RUNNING_FILE);
        // The earlier record goes first: from here on the folder does not look complete.
        match std::fs::remove_file(&record_path) {
            Ok(()) => io::atomic::sync_dir(&canon)?,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(folder_err(&format!("remove the earlier {record}"), e)),
        }
        remove_temp_files(&canon, 0).map_err(|e| folder_err("remove temporary files", e))?;
        let mut journal = File::create(canon.join(RUNNING_FILE))
            .map_err(|e| folder_err(&format!("write {RUNNING_FILE}"), e))?;
        let mut text = format!("{RUNNING_HEADER}\n");
        for f in &earlier {
            text.push_str(f);
            text.push('\n');
        }
        journal
            .write_all(text.as_bytes())
            .and_then(|()| journal.sync_all())
            .map_err(|e| folder_err(&format!("write {RUNNING_FILE}"), e))?;
        io::atomic::sync_dir(&canon)?;
        Ok(Self {
            root: canon,
            inputs: inputs.to_vec(),
            formats,
            written: Vec::new(),
            record: record.to_string(),
            earlier,
            journal: Some(journal),
            lock: Some(lock),
        })
    }

    /// Ends the run: removes the files of earlier runs that this run did not write again, removes
    /// the `RUNNING` marker, writes `record` as the run's record (`run.json` for [`Writer::new`])
    /// last and releases the folder's lock.
    pub fn finish<T: Serialize>(mut self, record: &T) -> Result<(), PipelineError> {
        let written: BTreeSet<&str> = self.written.iter().map(String::as_str).collect();
        for stale in self
            .earlier
            .iter()
            .filter(|f| !written.contains(f.as_str()))
        {
            let path = self.root.join(stale);
            if std::fs::symlink_metadata(&path).is_ok_and(|m| m.is_file()) {
                std::fs::remove_file(&path).map_err(|e| {
                    PipelineError::Invalid(format!(
                        "{}: cannot remove a file of an earlier run: {e}",
                        path.display()
                    ))
                })?;
            }
        }
        // The marker goes just before the record, so that no moment shows both.
        self.journal = None;
        let marker = self.root.join(RUNNING_FILE);
        std::fs::remove_file(&marker).map_err(|e| {
            PipelineError::Invalid(format!("{}: cannot remove: {e}", marker.display()))
        })?;
        let name = self.record.clone();
        self.json(&name, record)?;
        // Remove the lock file while still holding the lock; a run that opened it meanwhile
        // sees that it is no longer the folder's lock file and opens a new one.
        let _ = std::fs::remove_file(self.root.join(LOCK_FILE));
        self.lock = None;
        Ok(())
    }

    fn target(&mut self, rel: &str) -> Result<PathBuf, PipelineError> {
        let path = self.root.join(rel);
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| {
                PipelineError::Invalid(format!("{}: cannot create folder: {e}", dir.display()))
            })?;
        }
        io::atomic::ensure_not_input(&path, &self.inputs)?;
        if let Some(j) = self.journal.as_mut() {
            // The marker lists what this run wrote, for a rerun after an interruption.
            j.write_all(format!("{rel}\n").as_bytes()).map_err(|e| {
                PipelineError::Invalid(format!("{}: cannot write: {e}", RUNNING_FILE))
            })?;
        }
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
            // The XYZ writer puts its GDAL sidecar beside the map; listed so that `run.json`
            // describes every file of the folder.
            self.target(&format!("{rel}.xyz.aux.xml"))?;
        }
        Ok(out)
    }
}

/// True for a relative path without `..`, root or prefix parts (a name read from an earlier
/// record may only ever point inside the results folder).
fn is_relative_inside(rel: &str) -> bool {
    !rel.is_empty()
        && Path::new(rel)
            .components()
            .all(|c| matches!(c, Component::Normal(_) | Component::CurDir))
}

/// Removes the temporary files of atomic writes ([`io::atomic::is_temp_name`]) under `dir`,
/// without following links.
fn remove_temp_files(dir: &Path, depth: usize) -> std::io::Result<()> {
    // Results folders are two levels deep; a few more cover any folder a user added.
    if depth > 8 {
        return Ok(());
    }
    for entry in std::fs::read_dir(dir)? {
        let entry = entry?;
        let kind = entry.file_type()?;
        let name = entry.file_name();
        if kind.is_dir() {
            remove_temp_files(&entry.path(), depth + 1)?;
        } else if kind.is_file() && name.to_str().is_some_and(io::atomic::is_temp_name) {
            std::fs::remove_file(entry.path())?;
        }
    }
    Ok(())
}

/// Takes the advisory lock of the results folder `canon` (`shown` names it in messages).
fn acquire_lock(canon: &Path, shown: &Path) -> Result<File, PipelineError> {
    let path = canon.join(LOCK_FILE);
    let err =
        |e: std::io::Error| PipelineError::Invalid(format!("{}: cannot lock: {e}", path.display()));
    // A run that finishes removes the lock file; if it did so between our open and our lock,
    // the file we locked is no longer the folder's, and we try again with a new one.
    for _ in 0..100 {
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(&path)
            .map_err(err)?;
        match file.try_lock() {
            Ok(()) => {}
            Err(std::fs::TryLockError::WouldBlock) => {
                let holder = std::fs::read_to_string(&path).unwrap_or_default();
                return Err(PipelineError::Invalid(format!(
                    "{}: another tidemark run is writing into this folder ({}holds {LOCK_FILE}); \
                     wait for it to finish or choose another output folder",
                    shown.display(),
                    if holder.trim().is_empty() {
                        String::new()
                    } else {
                        format!("{} ", holder.trim())
                    }
                )));
            }
            Err(std::fs::TryLockError::Error(e)) => return Err(err(e)),
        }
        if same_file(&file, &path) {
            let mut f = &file;
            let _ = file.set_len(0);
            let _ = writeln!(f, "process {}", std::process::id());
            return Ok(file);
        }
    }
    Err(PipelineError::Invalid(format!(
        "{}: could not take the lock {LOCK_FILE}",
        shown.display()
    )))
}

/// True when the open `file` is the file at `path` now.
#[cfg(unix)]
fn same_file(file: &File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (file.metadata(), std::fs::metadata(path)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

/// True when the open `file` is the file at `path` now (without inode numbers: when it exists).
#[cfg(not(unix))]
fn same_file(_file: &File, path: &Path) -> bool {
    path.exists()
}

/// The reason codes of the `area_reason` maps, in words (metadata, `run.json`, documentation).
pub const AREA_REASON_CODES: &str = "0 inside the area of applicability; 1 unlike every well \
(the node's attributes at this step are farther from every training row than the cross-validated \
threshold, or its location and attribute history are unlike the ground the wells sample); 2 \
outside the training range (an attribute beyond the wells' range by more than a tenth of its \
width, or a step the wells never saw); 3 both; 4 inside an outline of ground no well samples \
that the project marks ([area] unsampled), added to the others: 5 marked and unlike, 6 marked \
and outside the range, 7 all three; 255 no data (an attribute is missing, nothing is \
predicted)";

/// Name of the reason-code map of a step (without extension).
pub const AREA_REASON_MAP: &str = "area_reason";

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
        if let Some(p) = &tm.p_change {
            put(
                w,
                format!("{base}_p_change"),
                p,
                format!(
                    "probability that {} changed at all (beyond the wells' noise tolerance)",
                    spec.name
                ),
                "probability",
            )?;
        }
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
    let (inside, outside) = flag_maps(a);
    put(
        w,
        format!("maps/{step}/applicable"),
        &inside,
        "1 inside the area of applicability, 0 outside (the reason is in area_reason)".into(),
        "flag",
    )?;
    put(
        w,
        format!("maps/{step}/outside_range"),
        &outside,
        format!(
            "number of attributes beyond the range seen at the wells by more than {} of its width",
            model.applicability.range_margin
        ),
        "count",
    )?;
    entries.push(write_reason_map(w, grid, step, &maps.reasons)?);
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

/// Writes the reason codes of one step (`maps/<step>/area_reason`): an 8-bit GeoTIFF, XYZ text
/// like the other maps (no data as the grid's null value); returns its metadata entry.
fn write_reason_map(
    w: &mut Writer,
    grid: &Grid,
    step: &str,
    reasons: &[u8],
) -> Result<MapEntry, PipelineError> {
    use crate::applicability::REASON_NO_DATA;
    let name = format!("maps/{step}/{AREA_REASON_MAP}");
    let desc = serde_json::json!({
        "tidemark": env!("CARGO_PKG_VERSION"),
        "step": step,
        "quantity": "why a node is outside the area of applicability",
        "unit": "code",
        "codes": AREA_REASON_CODES,
    })
    .to_string();
    for path in w.reserve_map(&name)? {
        if io::is_geotiff(&path) {
            io::geotiff::write_u8(&path, grid, reasons, REASON_NO_DATA, Some(&desc))?;
        } else {
            let values: Vec<f64> = reasons
                .iter()
                .map(|&c| {
                    if c == REASON_NO_DATA {
                        f64::NAN
                    } else {
                        f64::from(c)
                    }
                })
                .collect();
            io::write_map(&path, grid, &values, Some(&desc))?;
        }
    }
    Ok(MapEntry {
        name,
        quantity: format!("why a node is outside the area of applicability: {AREA_REASON_CODES}"),
        unit: "code".into(),
    })
}

/// The area-of-applicability flag (1 inside, 0 outside) and the count of attributes outside the
/// training range, as maps (`NaN` where the node has no dissimilarity).
fn flag_maps(a: &crate::applicability::Assessment) -> (Vec<f64>, Vec<f64>) {
    let inside = a
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
    let outside = a
        .outside_range
        .iter()
        .zip(&a.di)
        .map(|(&o, d)| if d.is_nan() { f64::NAN } else { f64::from(o) })
        .collect();
    (inside, outside)
}
