//! Writing a generated field as a complete tidemark project (layout in DEVELOPERS.md, manifest keys
//! in docs/manifest.md):
//!
//! ```text
//! project.toml  wells.csv  synth.json
//! maps/<step>/<attribute>.tif      attributes per step
//! static/hcpv.tif                  hydrocarbon pore volume per node (m3)
//! truth/<step>/<target>.tif        the true change at every node
//! truth/masks/<region>.tif         1 inside a well-free region (lobe, gas_cap), 0 outside
//! ```
//!
//! Every file goes through the atomic writer. The writer never replaces a file it did not write:
//! a folder counts as its own earlier output only when it holds a `synth.json` written by this
//! generator, and then only the files that `synth.json` lists are replaced or, when no longer
//! produced, removed.

use super::settings::{SynthError, SynthSettings};
use super::{SynthField, SynthWell, TARGET_BOUNDS};
use crate::io::{atomic, geotiff};
use serde::{Deserialize, Serialize};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Name of the invented field.
pub const FIELD_NAME: &str = "Skerrow Bank";
/// Value of `generator` in `synth.json`, by which the writer recognises its own output.
pub const GENERATOR: &str = "tidemark synth";

/// Units of the targets, in [`super::TARGET_NAMES`] order.
const TARGET_UNITS: [&str; 3] = ["MPa", "fraction", "fraction"];

/// One monitor step as recorded in `synth.json`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepRecord {
    /// Step name.
    pub name: String,
    /// Base survey date.
    pub base_date: String,
    /// Monitor survey date.
    pub monitor_date: String,
    /// Monitor time, years after the base.
    pub years: f64,
}

/// The content of `synth.json`: every setting (the seed among them), what was written and the
/// wells with their rates and start times.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SynthRecord {
    /// Always [`GENERATOR`].
    pub generator: String,
    /// The field's name.
    pub field: String,
    /// The seed (also inside `settings`).
    pub seed: u64,
    /// Every setting.
    pub settings: SynthSettings,
    /// The steps with their dates.
    pub steps: Vec<StepRecord>,
    /// Attribute names per step, in manifest order.
    pub attributes: Vec<String>,
    /// Target names.
    pub targets: Vec<String>,
    /// The wells.
    pub wells: Vec<SynthWell>,
    /// Every file written, relative to the project folder, with '/' separators.
    pub files: Vec<String>,
}

impl SynthRecord {
    /// Reads a `synth.json`.
    pub fn read(path: &Path) -> Result<SynthRecord, SynthError> {
        let text = std::fs::read_to_string(path).map_err(|e| SynthError::Output {
            path: path.to_path_buf(),
            message: e.to_string(),
        })?;
        Self::from_json(&text).map_err(|message| SynthError::Output {
            path: path.to_path_buf(),
            message,
        })
    }

    /// Parses the text of a `synth.json`, every float exactly as written.
    pub fn from_json(text: &str) -> Result<SynthRecord, String> {
        let value = super::json::parse(text)?;
        serde_json::from_value(value).map_err(|e| format!("not a synth.json of this version: {e}"))
    }
}

/// The relative paths of every file a project of `field` consists of.
fn output_files(field: &SynthField) -> Vec<String> {
    let mut files = vec![
        "project.toml".to_string(),
        "wells.csv".to_string(),
        "synth.json".to_string(),
        "static/hcpv.tif".to_string(),
    ];
    for step in &field.step_names {
        for a in &field.attribute_names {
            files.push(format!("maps/{step}/{a}.tif"));
        }
        for t in &field.target_names {
            files.push(format!("truth/{step}/{t}.tif"));
        }
    }
    for (name, _) in &field.masks {
        files.push(format!("truth/masks/{name}.tif"));
    }
    files
}

/// True when `dir` holds a `synth.json` written by this generator; returns the files it lists.
fn previous_output(dir: &Path) -> Option<Vec<String>> {
    let record = SynthRecord::read(&dir.join("synth.json")).ok()?;
    (record.generator == GENERATOR).then_some(record.files)
}

/// Checks that writing a project into `out` replaces no file the generator did not write.
fn check_no_foreign_files(
    field: &SynthField,
    out: &Path,
) -> Result<Option<Vec<String>>, SynthError> {
    if !out.exists() {
        return Ok(None);
    }
    if !out.is_dir() {
        return Err(SynthError::Output {
            path: out.to_path_buf(),
            message: "exists and is not a folder".into(),
        });
    }
    let previous = previous_output(out);
    let ours: Vec<String> = previous.clone().unwrap_or_default();
    for f in output_files(field) {
        let p = out.join(&f);
        if p.exists() && !ours.contains(&f) {
            return Err(SynthError::Output {
                path: p,
                message: "exists and was not written by tidemark synth; refusing to replace it"
                    .into(),
            });
        }
    }
    Ok(previous)
}

fn fmt_f64(v: f64) -> String {
    // Debug formatting of f64 is the shortest representation that reads back exactly and always
    // has a decimal point or exponent, which TOML needs for a float.
    format!("{v:?}")
}

fn toml_string(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => {
                let _ = write!(out, "\\u{:04X}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// The default field totals of a generated project, at every step: depleted area (dP below
/// -2 MPa), swept area (dSw above 0.1), gas-out area (dSg above 0.05), swept pore volume
/// (sum of hcpv x dSw) and gas-out volume (sum of hcpv x dSg).
const TOTALS: &str = r#"[totals]
realizations = 200

[totals.maps]
hcpv = "static/hcpv.tif"

[[totals.quantities]]
quantity = "depleted_area"
kind = "area"
target = "dP"
threshold = -2.0
direction = "below"
unit = "km2"
scale = 1e-6

[[totals.quantities]]
quantity = "swept_area"
kind = "area"
target = "dSw"
threshold = 0.1
direction = "above"
unit = "km2"
scale = 1e-6

[[totals.quantities]]
quantity = "gas_out_area"
kind = "area"
target = "dSg"
threshold = 0.05
direction = "above"
unit = "km2"
scale = 1e-6

[[totals.quantities]]
quantity = "swept_pore_volume"
kind = "sum"
target = "dSw"
weight = "hcpv"
unit = "1e6 m3"
scale = 1e-6

[[totals.quantities]]
quantity = "gas_out_volume"
kind = "sum"
target = "dSg"
weight = "hcpv"
unit = "1e6 m3"
scale = 1e-6

"#;

/// The manifest text.
fn manifest(field: &SynthField, settings: &SynthSettings, steps: &[StepRecord]) -> String {
    let g = &field.grid;
    let mut t = String::new();
    let _ = writeln!(
        t,
        "# {FIELD_NAME}: a synthetic time-lapse field written by `tidemark synth` (seed {}).\n\
         # Every setting is in synth.json; truth/<step>/<target>.tif holds the true changes.\n",
        settings.seed
    );
    let _ = writeln!(t, "[project]");
    let _ = writeln!(
        t,
        "name = {}",
        toml_string(&format!("{FIELD_NAME} (synthetic, seed {})", settings.seed))
    );
    let _ = writeln!(t, "convention = \"percentile\"\n");
    let _ = writeln!(t, "[grid]");
    let _ = writeln!(t, "origin_x = {}", fmt_f64(g.origin_x));
    let _ = writeln!(t, "origin_y = {}", fmt_f64(g.origin_y));
    let _ = writeln!(t, "dx = {}", fmt_f64(g.dx));
    let _ = writeln!(t, "dy = {}", fmt_f64(g.dy));
    let _ = writeln!(t, "nx = {}", g.nx);
    let _ = writeln!(t, "ny = {}", g.ny);
    let _ = writeln!(t, "rotation = {}", fmt_f64(g.rotation));
    if let Some(e) = g.epsg {
        let _ = writeln!(t, "epsg = {e}");
    }
    let _ = writeln!(t, "null_value = {}\n", fmt_f64(g.null_value));
    for st in steps {
        let _ = writeln!(t, "[[step]]");
        let _ = writeln!(t, "name = {}", toml_string(&st.name));
        let _ = writeln!(t, "base_date = {}", toml_string(&st.base_date));
        let _ = writeln!(t, "monitor_date = {}", toml_string(&st.monitor_date));
        let _ = writeln!(t, "[step.attributes]");
        for a in &field.attribute_names {
            let _ = writeln!(
                t,
                "{a} = {}",
                toml_string(&format!("maps/{}/{a}.tif", st.name))
            );
        }
        let _ = writeln!(t);
    }
    let _ = writeln!(t, "[wells]\nfile = \"wells.csv\"\n");
    for (k, name) in field.target_names.iter().enumerate() {
        let _ = writeln!(t, "[[target]]");
        let _ = writeln!(t, "name = {}", toml_string(name));
        let _ = writeln!(t, "unit = {}", toml_string(TARGET_UNITS[k]));
        let _ = writeln!(t, "min = {}", fmt_f64(TARGET_BOUNDS[k].0));
        let _ = writeln!(t, "max = {}\n", fmt_f64(TARGET_BOUNDS[k].1));
    }
    for (target, direction, value, label) in [
        ("dSw", "above", 0.10, "swept"),
        ("dP", "below", -2.0, "depleted"),
        ("dSg", "above", 0.05, "gas_out"),
    ] {
        let _ = writeln!(t, "[[threshold]]");
        let _ = writeln!(t, "target = \"{target}\"");
        let _ = writeln!(t, "direction = \"{direction}\"");
        let _ = writeln!(t, "value = {}", fmt_f64(value));
        let _ = writeln!(t, "label = \"{label}\"\n");
    }
    let _ = writeln!(t, "[infill]");
    let _ = writeln!(t, "threshold = \"swept\"");
    let _ = writeln!(t, "volume_map = \"static/hcpv.tif\"");
    let _ = writeln!(t, "volume_unit = \"m3\"\n");
    t.push_str(TOTALS);
    let _ = writeln!(t, "[report]");
    let angle: Vec<String> = field
        .attribute_names
        .iter()
        .filter(|a| {
            ["near", "mid", "far", "intercept", "gradient"]
                .iter()
                .any(|m| a.contains(m))
        })
        .map(|a| toml_string(a))
        .collect();
    let _ = writeln!(t, "angle_attributes = [{}]", angle.join(", "));
    t
}

/// The wells CSV text: well,x,y,step,kind,dP,dSw,dSg.
fn wells_csv(field: &SynthField) -> String {
    let kinds: std::collections::HashMap<&str, &str> = field
        .wells
        .iter()
        .map(|w| (w.name.as_str(), w.kind.as_str()))
        .collect();
    let mut t = String::from("well,x,y,step,kind");
    for name in &field.target_names {
        t.push(',');
        t.push_str(name);
    }
    t.push('\n');
    for (well, x, y, step, values) in &field.well_rows {
        let kind = kinds.get(well.as_str()).copied().unwrap_or("");
        let _ = write!(t, "{well},{x:.3},{y:.3},{step},{kind}");
        for v in values {
            let _ = write!(t, ",{v:.6}");
        }
        t.push('\n');
    }
    t
}

/// Writes the field as a project in `out` (created if missing). Refuses to replace a file that
/// an earlier run of the generator did not write; files listed by an earlier `synth.json` in `out`
/// that this field does not produce are removed.
pub fn write_project(
    field: &SynthField,
    settings: &SynthSettings,
    out: &Path,
) -> Result<(), SynthError> {
    let previous = check_no_foreign_files(field, out)?;
    let years = settings.monitor_years();
    let steps: Vec<StepRecord> = field
        .step_names
        .iter()
        .zip(settings.monitor_dates())
        .zip(&years)
        .map(|((name, monitor_date), y)| StepRecord {
            name: name.clone(),
            base_date: settings.base_date.clone(),
            monitor_date,
            years: *y,
        })
        .collect();
    let grid = &field.grid;
    let map = |rel: String, values: &[f64], description: String| -> Result<(), SynthError> {
        geotiff::write(&out.join(&rel), grid, values, Some(&description)).map_err(SynthError::Io)
    };
    for (s, step) in field.step_names.iter().enumerate() {
        for (a, name) in field.attribute_names.iter().enumerate() {
            map(
                format!("maps/{step}/{name}.tif"),
                &field.attributes[s][a],
                format!("{FIELD_NAME} synthetic: {name}, {step} monitor minus base"),
            )?;
        }
        for (k, name) in field.target_names.iter().enumerate() {
            map(
                format!("truth/{step}/{name}.tif"),
                &field.truth[s][k],
                format!(
                    "{FIELD_NAME} synthetic: true {name} ({}), {step}",
                    TARGET_UNITS[k]
                ),
            )?;
        }
    }
    for (name, values) in &field.masks {
        map(
            format!("truth/masks/{name}.tif"),
            values,
            format!("{FIELD_NAME} synthetic: well-free region `{name}` (1 inside, 0 outside)"),
        )?;
    }
    map(
        "static/hcpv.tif".into(),
        &field.hcpv,
        format!("{FIELD_NAME} synthetic: hydrocarbon pore volume per node, m3"),
    )?;
    atomic::write_bytes(&out.join("wells.csv"), wells_csv(field).as_bytes())
        .map_err(SynthError::Io)?;
    let files = output_files(field);
    let record = SynthRecord {
        generator: GENERATOR.into(),
        field: FIELD_NAME.into(),
        seed: settings.seed,
        settings: settings.clone(),
        steps: steps.clone(),
        attributes: field.attribute_names.clone(),
        targets: field.target_names.clone(),
        wells: field.wells.clone(),
        files: files.clone(),
    };
    let json = serde_json::to_string_pretty(&record).map_err(|e| SynthError::Output {
        path: out.join("synth.json"),
        message: e.to_string(),
    })?;
    atomic::write_bytes(&out.join("synth.json"), json.as_bytes()).map_err(SynthError::Io)?;
    atomic::write_bytes(
        &out.join("project.toml"),
        manifest(field, settings, &steps).as_bytes(),
    )
    .map_err(SynthError::Io)?;
    // remove what an earlier run wrote and this one did not
    if let Some(old) = previous {
        for f in old.iter().filter(|f| !files.contains(f)) {
            let safe = Path::new(f)
                .components()
                .all(|c| matches!(c, std::path::Component::Normal(_)));
            if !safe {
                continue;
            }
            let p: PathBuf = out.join(f);
            if p.is_file() {
                std::fs::remove_file(&p).map_err(|e| SynthError::Output {
                    path: p.clone(),
                    message: format!("cannot remove an earlier output: {e}"),
                })?;
            }
            if let Some(dir) = p.parent() {
                // leave a folder in place unless it became empty
                let _ = std::fs::remove_dir(dir);
            }
        }
    }
    Ok(())
}
