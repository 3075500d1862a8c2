//! The project manifest (`project.toml`) and the survey it describes.
//!
//! The manifest is parsed into raw serde types that reject unknown keys, then checked into a
//! [`Project`] whose settings are known to be usable: every problem is a typed [`ManifestError`]
//! naming the manifest key at fault. [`load_survey`] then reads every attribute map and the wells
//! CSV into a [`Survey`]. The keys, their defaults and meanings are documented in `docs/manifest.md`.

use crate::calibrate::hurdle::ZeroChange;
use crate::grid::{Grid, GridError};
use crate::io::wells::{TargetColumn, WellColumns, WellRecord};
use crate::io::{self, IoError};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashSet};
use std::path::{Path, PathBuf};

/// Default null marker in files.
pub const DEFAULT_NULL_VALUE: f64 = -999.25;
/// Default XYZ snapping tolerance, as a fraction of the node spacing.
pub const DEFAULT_SNAP_TOLERANCE: f64 = 0.01;
/// Substrings that mark an attribute as angle-dependent when `report.angle_attributes` is absent.
pub const ANGLE_MARKERS: [&str; 5] = ["near", "mid", "far", "intercept", "gradient"];

/// The label convention and threshold directions, shared with the totals' manifest types.
pub mod choices;
/// Limits on every manifest value that sizes an allocation or a loop. They are checked when the
/// manifest is loaded, so `check` and `run` refuse the same projects, and each message names the
/// key and the limit. All are far above what a field study needs (docs/manifest.md lists them).
pub mod limits;
/// Checking of the `[totals]` section (field totals from spatially correlated realizations).
pub mod totals;
pub use choices::{Convention, Direction};

/// How attribute maps are read at a well.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "method", rename_all = "snake_case")]
pub enum Extract {
    /// Bilinear interpolation between the four surrounding nodes.
    Bilinear,
    /// Mean of the non-null nodes within `radius` (world units).
    Mean {
        /// Search radius, world units (> 0).
        radius: f64,
    },
}

/// Which learner the model uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LearnerChoice {
    /// Chosen per target by out-of-fold score.
    Auto,
    /// Bagged (quantile) forest.
    Forest,
    /// Gradient boosting.
    Boost,
}

/// How calibration folds are formed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FoldMethod {
    /// k folds of whole wells.
    Wells,
    /// k spatial clusters of wells.
    Blocks,
    /// Leave one well out.
    OneWell,
}

/// One monitor-minus-base difference and its attribute maps.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepSpec {
    /// Unique step name.
    pub name: String,
    /// Date of the base survey, free text.
    pub base_date: Option<String>,
    /// Date of the monitor survey, free text.
    pub monitor_date: Option<String>,
    /// Attribute name -> absolute file path, in the project's attribute order.
    pub attributes: Vec<(String, PathBuf)>,
}

/// Where the wells CSV is and which columns hold what.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WellsSpec {
    /// Absolute path of the wells CSV.
    pub file: PathBuf,
    /// Column of well names.
    pub well_column: String,
    /// Column of x coordinates.
    pub x_column: String,
    /// Column of y coordinates.
    pub y_column: String,
    /// Column of step names.
    pub step_column: String,
    /// Column of row weights; when the manifest does not name one, `"weight"` is used if present.
    pub weight_column: String,
    /// True when the manifest names the weight column (then it must exist).
    pub weight_column_given: bool,
}

/// A quantity measured at wells and mapped by the tool.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TargetSpec {
    /// Name used in output file names.
    pub name: String,
    /// Wells CSV column.
    pub column: String,
    /// Unit, free text.
    pub unit: String,
    /// Physical lower bound.
    pub min: f64,
    /// Physical upper bound (> min).
    pub max: f64,
    /// Whether the target has a "no change" atom at zero (`zero_change`, default `auto`).
    #[serde(default)]
    pub zero_change: ZeroChange,
    /// Measured values within this distance of zero count as "no change" (`zero_tolerance`;
    /// absent: estimated from the wells).
    #[serde(default)]
    pub zero_tolerance: Option<f64>,
}

/// A decision threshold on a target.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ThresholdSpec {
    /// Name of the target.
    pub target: String,
    /// Which side counts as crossing.
    pub direction: Direction,
    /// Threshold value, inside the target's bounds.
    pub value: f64,
    /// Unique label, used in file names.
    pub label: String,
}

/// Model settings (`[model]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ModelSection {
    /// Seed every random choice derives from (default 42).
    pub seed: u64,
    /// Learner (default auto).
    pub learner: LearnerChoice,
    /// Forest size (default 300, >= 1).
    pub trees: usize,
    /// Forest leaf size (default 3, >= 1).
    pub min_samples_leaf: usize,
    /// Fraction of features tried per split, in (0, 1] (default 0.5).
    pub max_features: f64,
    /// Forest depth limit, 0 = unlimited (default 0).
    pub max_depth: usize,
    /// Boosting rounds (default 300, >= 1).
    pub boost_rounds: usize,
    /// Boosting learning rate, in (0, 1] (default 0.05).
    pub learning_rate: f64,
    /// Depth of boosted trees (default 3, >= 1).
    pub boost_max_depth: usize,
}

impl Default for ModelSection {
    fn default() -> Self {
        ModelSection {
            seed: 42,
            learner: LearnerChoice::Auto,
            trees: 300,
            min_samples_leaf: 3,
            max_features: 0.5,
            max_depth: 0,
            boost_rounds: 300,
            learning_rate: 0.05,
            boost_max_depth: 3,
        }
    }
}

/// Calibration settings (`[calibration]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationSection {
    /// Nominal band level, in (0, 1) (default 0.8).
    pub level: f64,
    /// How folds are formed (default wells).
    pub fold_method: FoldMethod,
    /// Number of folds for wells/blocks, >= 2 (default 5).
    pub folds: usize,
    /// Isotonic end-bias correction (default true).
    pub end_correction: bool,
    /// Mondrian bins of the predicted value, >= 1 (default 3).
    pub max_bins: usize,
    /// Wells each bin needs, >= 1 (default 10).
    pub min_wells_per_bin: usize,
    /// Calibrate the band for the mapped nodes by weighting the wells with the covariate-shift
    /// ratio of the nodes' attributes to theirs (default false).
    pub covariate_shift: bool,
}

impl Default for CalibrationSection {
    fn default() -> Self {
        CalibrationSection {
            level: 0.8,
            fold_method: FoldMethod::Wells,
            folds: 5,
            end_correction: true,
            max_bins: 3,
            min_wells_per_bin: 10,
            covariate_shift: false,
        }
    }
}

/// Risked infill-target ranking settings (`[infill]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct InfillSection {
    /// Label of the threshold whose non-exceedance is the chance of remaining oil.
    pub threshold: String,
    /// Absolute path of a map of in-place volume per node; `None` means 1 per node.
    pub volume_map: Option<PathBuf>,
    /// Unit of the volume map's values (free text, e.g. `m3`); `None` when not given.
    pub volume_unit: Option<String>,
    /// Step to rank on; after loading always `Some` (the manifest's default is the last step).
    pub step: Option<String>,
    /// Drainage radius, world units (> 0, default 300).
    pub drainage_radius: f64,
    /// Minimum distance from existing wells (>= 0, default 400).
    pub min_well_spacing: f64,
    /// Minimum distance between targets (>= 0, default 400).
    pub min_target_spacing: f64,
    /// Targets to list (>= 1, default 10).
    pub count: usize,
}

impl InfillSection {
    /// The unit of the risked volume: the volume map's unit, `"nodes"` without a volume map
    /// (every node counts 1), or `"unit of the volume map, not given"`.
    pub fn risked_volume_unit(&self) -> String {
        match (&self.volume_map, &self.volume_unit) {
            (None, _) => "nodes".into(),
            (Some(_), Some(u)) => u.clone(),
            (Some(_), None) => "unit of the volume map, not given".into(),
        }
    }
}

/// Report settings (`[report]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ReportSection {
    /// Draw the learning curve (default true).
    pub learning_curve: bool,
    /// Repeats per learning-curve point, >= 1 (default 5).
    pub learning_curve_repeats: usize,
    /// Skill without the angle-dependent attributes (default true).
    pub ablation: bool,
    /// Names of angle-dependent attributes (default: names containing near, mid, far, intercept or
    /// gradient).
    pub angle_attributes: Vec<String>,
}

/// A checked project: every setting is known to be usable.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Project {
    /// Absolute path of the manifest.
    pub manifest_path: PathBuf,
    /// Absolute folder of the manifest; relative paths are resolved against it.
    pub root: PathBuf,
    /// Project name (default: the manifest folder's name).
    pub name: String,
    /// Percentile label convention.
    pub convention: Convention,
    /// The map grid.
    pub grid: Grid,
    /// XYZ snapping tolerance, fraction of the spacing (default 0.01).
    pub snap_tolerance: f64,
    /// Steps in manifest order.
    pub steps: Vec<StepSpec>,
    /// Attribute names in the project's order (the first step's order in the manifest).
    pub attribute_names: Vec<String>,
    /// The wells CSV.
    pub wells: WellsSpec,
    /// Targets in manifest order.
    pub targets: Vec<TargetSpec>,
    /// Decision thresholds in manifest order.
    pub thresholds: Vec<ThresholdSpec>,
    /// How attributes are read at wells.
    pub extract: Extract,
    /// Gaussian widths (standard deviations, metres) each target may smooth its attribute maps by
    /// (`[smoothing] widths`; empty = no smoothing), ascending. Each target picks none or one of
    /// them by whole-well cross-validation (`pipeline::scale`).
    #[serde(default)]
    pub smoothing: Vec<f64>,
    /// Targets that may choose a smoothing width (`[smoothing] targets`), in manifest order;
    /// empty: every target. The others read the plain attributes only.
    #[serde(default)]
    pub smoothing_targets: Vec<String>,
    /// Model settings.
    pub model: ModelSection,
    /// Calibration settings.
    pub calibration: CalibrationSection,
    /// Infill ranking settings, when asked for.
    pub infill: Option<InfillSection>,
    /// Report settings.
    pub report: ReportSection,
    /// Field totals (`[totals]`), when asked for; map paths resolved.
    pub totals: Option<crate::spatial::totals::TotalsSection>,
    /// Closed outlines of ground no well samples (`[area] unsampled`, polyline CSV files, paths
    /// resolved): nodes inside are outside the area of applicability whatever their attributes.
    #[serde(default)]
    pub unsampled: Vec<PathBuf>,
}

/// A problem with the manifest's settings; every variant names the key at fault.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ManifestError {
    /// The grid is unusable.
    #[error("grid.{0}")]
    Grid(GridError),
    /// A number outside its allowed range.
    #[error("{key} must be {expected}, got {value}")]
    OutOfRange {
        /// Manifest key.
        key: String,
        /// The allowed range, in words.
        expected: &'static str,
        /// The value given.
        value: String,
    },
    /// A value above the limit that keeps memory and time bounded.
    #[error("{key} = {value} is above the limit: {limit}")]
    Limit {
        /// Manifest key.
        key: String,
        /// The limit, in words.
        limit: String,
        /// The value given.
        value: String,
    },
    /// A name longer than [`limits::MAX_NAME_BYTES`].
    #[error(
        "{key} = '{name}' is {len} bytes long; names are at most {max} bytes (they become file names)"
    )]
    LongName {
        /// Manifest key.
        key: String,
        /// The start of the name given.
        name: String,
        /// Its length in bytes.
        len: usize,
        /// The limit.
        max: usize,
    },
    /// A name with characters other than letters, digits, `_` and `-`.
    #[error("{key} = '{name}': names may only use letters, digits, '_' and '-'")]
    BadName {
        /// Manifest key.
        key: String,
        /// The name given.
        name: String,
    },
    /// The same name twice where names must be unique.
    #[error("{key} = '{name}' is used twice")]
    Duplicate {
        /// Manifest key.
        key: String,
        /// The repeated name.
        name: String,
    },
    /// A list that must not be empty is.
    #[error("at least one {0} is required")]
    Missing(&'static str),
    /// A reference to something the manifest does not define.
    #[error("{key} = '{name}' names no {what} (known: {known})")]
    Unknown {
        /// Manifest key.
        key: String,
        /// The name given.
        name: String,
        /// What kind of thing it should name.
        what: &'static str,
        /// The names that exist.
        known: String,
    },
    /// A step lacks an attribute the first step has.
    #[error(
        "step '{step}' has no attribute '{attribute}' (step '{first}' has it; every step must list the same attributes)"
    )]
    MissingAttribute {
        /// The step lacking it.
        step: String,
        /// The attribute.
        attribute: String,
        /// The first step, which has it.
        first: String,
    },
    /// A step has an attribute the first step lacks.
    #[error(
        "step '{step}' has attribute '{attribute}' that step '{first}' lacks (every step must list the same attributes)"
    )]
    ExtraAttribute {
        /// The step having it.
        step: String,
        /// The attribute.
        attribute: String,
        /// The first step, which lacks it.
        first: String,
    },
    /// A target whose bounds are not increasing.
    #[error("target '{target}': min ({min}) must be < max ({max})")]
    Bounds {
        /// Target name.
        target: String,
        /// Lower bound.
        min: f64,
        /// Upper bound.
        max: f64,
    },
    /// A threshold outside the bounds of its target.
    #[error(
        "threshold '{label}': value {value} lies outside target '{target}' bounds [{min}, {max}]"
    )]
    ThresholdOutsideBounds {
        /// Threshold label.
        label: String,
        /// Target name.
        target: String,
        /// Threshold value.
        value: f64,
        /// Target lower bound.
        min: f64,
        /// Target upper bound.
        max: f64,
    },
    /// A key that is required in this combination of settings is absent, or one that does not
    /// apply is present.
    #[error("{key}: {message}")]
    Inconsistent {
        /// Manifest key.
        key: String,
        /// What is wrong.
        message: String,
    },
}

/// Why a project could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum ProjectError {
    /// The manifest could not be read.
    #[error("{}: {source}", path.display())]
    Read {
        /// The manifest.
        path: PathBuf,
        /// What the operating system said.
        source: std::io::Error,
    },
    /// The manifest is not valid TOML, has an unknown key, lacks a required key or has a value of
    /// the wrong type.
    #[error("{}, line {line}, column {column}: {message}", path.display())]
    Parse {
        /// The manifest.
        path: PathBuf,
        /// 1-based line.
        line: usize,
        /// 1-based column.
        column: usize,
        /// What the parser said (names the key).
        message: String,
    },
    /// A setting is unusable.
    #[error("{}: {source}", path.display())]
    Manifest {
        /// The manifest.
        path: PathBuf,
        /// What is wrong, naming the key.
        source: ManifestError,
    },
    /// A map or the wells CSV could not be read.
    #[error(transparent)]
    Io(#[from] IoError),
}

// ---------------------------------------------------------------------------------------------
// Raw manifest, as written (unknown keys rejected).

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawManifest {
    project: Option<RawProject>,
    grid: RawGrid,
    #[serde(default)]
    step: Vec<RawStep>,
    wells: RawWells,
    #[serde(default)]
    target: Vec<RawTarget>,
    #[serde(default)]
    threshold: Vec<RawThreshold>,
    extract: Option<RawExtract>,
    smoothing: Option<RawSmoothing>,
    model: Option<RawModel>,
    calibration: Option<RawCalibration>,
    infill: Option<RawInfill>,
    report: Option<RawReport>,
    totals: Option<crate::spatial::totals::TotalsSection>,
    area: Option<RawArea>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawArea {
    #[serde(default)]
    unsampled: Vec<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawProject {
    name: Option<String>,
    convention: Option<Convention>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawGrid {
    origin_x: f64,
    origin_y: f64,
    dx: f64,
    dy: f64,
    nx: i64,
    ny: i64,
    rotation: Option<f64>,
    epsg: Option<i64>,
    null_value: Option<f64>,
    snap_tolerance: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStep {
    name: String,
    base_date: Option<String>,
    monitor_date: Option<String>,
    #[serde(default)]
    attributes: BTreeMap<toml::Spanned<String>, String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawWells {
    file: String,
    well_column: Option<String>,
    x_column: Option<String>,
    y_column: Option<String>,
    step_column: Option<String>,
    weight_column: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTarget {
    name: String,
    column: Option<String>,
    unit: Option<String>,
    min: f64,
    max: f64,
    zero_change: Option<RawZero>,
    zero_tolerance: Option<f64>,
}

/// `zero_change = "auto" | true | false`.
#[derive(Deserialize)]
#[serde(untagged)]
enum RawZero {
    Flag(bool),
    Word(String),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawThreshold {
    target: String,
    direction: Direction,
    value: f64,
    label: String,
}

#[derive(Deserialize)]
#[serde(rename_all = "snake_case")]
enum RawExtractMethod {
    Bilinear,
    Mean,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawExtract {
    method: Option<RawExtractMethod>,
    radius: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSmoothing {
    widths: Option<RawWidths>,
    targets: Option<Vec<String>>,
}

/// `widths = "auto" | "off" | [metres, ...]`.
#[derive(Deserialize)]
#[serde(untagged)]
enum RawWidths {
    Word(String),
    List(Vec<f64>),
}

/// Node spacings of `[smoothing] widths = "auto"`. Smoothing is off unless the manifest asks for
/// it: on generated fields it lowers dP's and dSg's interval score by 12-18 % but can cost the
/// coverage of the largest changes (DEVELOPERS.md, "Smoothing the attribute maps").
pub const AUTO_SMOOTHING_SPACINGS: [f64; 5] = [1.0, 2.0, 3.0, 5.0, 8.0];

/// The checked smoothing widths (metres, ascending, distinct) of `[smoothing]`.
fn smoothing_widths(raw: Option<RawSmoothing>, grid: &Grid) -> Result<Vec<f64>, ManifestError> {
    let key = "smoothing.widths";
    let spacing = grid.dx.min(grid.dy);
    let mut widths = match raw.and_then(|r| r.widths) {
        None => Vec::new(),
        Some(RawWidths::Word(w)) if w == "auto" => AUTO_SMOOTHING_SPACINGS
            .iter()
            .map(|k| k * spacing)
            .collect(),
        Some(RawWidths::Word(w)) if w == "off" => Vec::new(),
        Some(RawWidths::Word(w)) => {
            return Err(ManifestError::Inconsistent {
                key: key.into(),
                message: format!(
                    "expected \"auto\", \"off\" or a list of widths in metres, got \"{}\"",
                    io::excerpt(&w)
                ),
            });
        }
        Some(RawWidths::List(list)) => {
            if list.len() > limits::MAX_SMOOTHING_WIDTHS {
                return Err(ManifestError::Limit {
                    key: key.into(),
                    limit: format!("at most {} widths", limits::MAX_SMOOTHING_WIDTHS),
                    value: list.len().to_string(),
                });
            }
            let mut out = Vec::with_capacity(list.len());
            for w in list {
                let w = number(key, Some(w), 0.0, "> 0", |v| v > 0.0)?;
                out.push(radius(key, w, grid, limits::MAX_SMOOTHING_NODES)?);
            }
            out
        }
    };
    widths.sort_by(f64::total_cmp);
    widths.dedup();
    Ok(widths)
}

/// The checked `[smoothing] targets`: each a target of the manifest, none twice, kept in
/// manifest order; absent means every target (an empty list is refused: it would switch
/// smoothing off, which `widths = "off"` says plainly).
fn smoothed_targets(
    raw: Option<&[String]>,
    targets: &[TargetSpec],
) -> Result<Vec<String>, ManifestError> {
    let Some(list) = raw else {
        return Ok(Vec::new());
    };
    let key = "smoothing.targets";
    if list.is_empty() {
        return Err(ManifestError::Inconsistent {
            key: key.into(),
            message: "an empty list; leave the key out for every target, or set \
                      widths = \"off\" for none"
                .into(),
        });
    }
    for (i, name) in list.iter().enumerate() {
        let known = targets.iter().any(|t| &t.name == name);
        if !known || list[..i].contains(name) {
            let names: Vec<&str> = targets.iter().map(|t| t.name.as_str()).collect();
            return Err(ManifestError::Inconsistent {
                key: format!("{key}[{i}]"),
                message: if known {
                    format!("target \"{}\" is listed twice", io::excerpt(name))
                } else {
                    format!(
                        "\"{}\" is not a target of the manifest (targets: {})",
                        io::excerpt(name),
                        names.join(", ")
                    )
                },
            });
        }
    }
    Ok(targets
        .iter()
        .filter(|t| list.contains(&t.name))
        .map(|t| t.name.clone())
        .collect())
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawModel {
    seed: Option<u64>,
    learner: Option<LearnerChoice>,
    trees: Option<i64>,
    min_samples_leaf: Option<i64>,
    max_features: Option<f64>,
    max_depth: Option<i64>,
    boost_rounds: Option<i64>,
    learning_rate: Option<f64>,
    boost_max_depth: Option<i64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCalibration {
    level: Option<f64>,
    fold_method: Option<FoldMethod>,
    folds: Option<i64>,
    end_correction: Option<bool>,
    max_bins: Option<i64>,
    min_wells_per_bin: Option<i64>,
    covariate_shift: Option<bool>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInfill {
    threshold: String,
    volume_map: Option<String>,
    volume_unit: Option<String>,
    step: Option<String>,
    drainage_radius: Option<f64>,
    min_well_spacing: Option<f64>,
    min_target_spacing: Option<f64>,
    count: Option<i64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReport {
    learning_curve: Option<bool>,
    learning_curve_repeats: Option<i64>,
    ablation: Option<bool>,
    angle_attributes: Option<Vec<String>>,
}

// ---------------------------------------------------------------------------------------------
// Checking.

/// True for a non-empty name of letters, digits, `_` and `-`.
pub fn is_valid_name(name: &str) -> bool {
    !name.is_empty()
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
}

fn check_name(key: String, name: &str) -> Result<(), ManifestError> {
    if name.len() > limits::MAX_NAME_BYTES {
        Err(ManifestError::LongName {
            key,
            name: crate::io::excerpt(name),
            len: name.len(),
            max: limits::MAX_NAME_BYTES,
        })
    } else if is_valid_name(name) {
        Ok(())
    } else {
        Err(ManifestError::BadName {
            key,
            name: crate::io::excerpt(name),
        })
    }
}

fn out_of_range(key: &str, expected: &'static str, value: impl ToString) -> ManifestError {
    ManifestError::OutOfRange {
        key: key.to_string(),
        expected,
        value: value.to_string(),
    }
}

/// An integer count that must lie in `min..=max`.
fn count(
    key: &str,
    value: Option<i64>,
    default: usize,
    min: i64,
    max: i64,
) -> Result<usize, ManifestError> {
    match value {
        None => Ok(default),
        Some(v) if (min..=max).contains(&v) => {
            usize::try_from(v).map_err(|_| ManifestError::Limit {
                key: key.to_string(),
                limit: format!("at most {max}"),
                value: v.to_string(),
            })
        }
        Some(v) if v > max => Err(ManifestError::Limit {
            key: key.to_string(),
            limit: format!("at most {max}"),
            value: v.to_string(),
        }),
        Some(v) => Err(out_of_range(
            key,
            if min == 0 {
                ">= 0"
            } else if min == 1 {
                ">= 1"
            } else {
                ">= 2"
            },
            v,
        )),
    }
}

/// A finite number in the range accepted by `ok`.
fn number(
    key: &str,
    value: Option<f64>,
    default: f64,
    expected: &'static str,
    ok: impl Fn(f64) -> bool,
) -> Result<f64, ManifestError> {
    let v = value.unwrap_or(default);
    if v.is_finite() && ok(v) {
        Ok(v)
    } else {
        Err(out_of_range(key, expected, v))
    }
}

/// A radius (world units) that must span at most `max_nodes` node spacings along either axis.
fn radius(key: &str, r: f64, grid: &Grid, max_nodes: f64) -> Result<f64, ManifestError> {
    let spacings = r / grid.dx.min(grid.dy);
    if spacings > max_nodes {
        return Err(ManifestError::Limit {
            key: key.to_string(),
            limit: format!(
                "at most {max_nodes} node spacings ({} world units on this grid)",
                max_nodes * grid.dx.min(grid.dy)
            ),
            value: format!("{r:?}"),
        });
    }
    Ok(r)
}

/// 1-based line and column of a byte offset in `text`.
fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text[..offset];
    let line = before.matches('\n').count() + 1;
    let column = before.rfind('\n').map_or(offset, |k| offset - k - 1) + 1;
    (line, column)
}

impl Project {
    /// Whether target `name` may choose a smoothing width (`[smoothing] targets`).
    pub fn may_smooth(&self, name: &str) -> bool {
        self.smoothing_targets.is_empty() || self.smoothing_targets.iter().any(|t| t == name)
    }

    /// Reads and checks a manifest. Paths in it are resolved against its folder.
    pub fn load(path: &Path) -> Result<Project, ProjectError> {
        let read_err = |source| ProjectError::Read {
            path: path.to_path_buf(),
            source,
        };
        let bytes = crate::io::text::read_capped(
            path,
            limits::MAX_MANIFEST_BYTES,
            "the limit for a manifest",
        )
        .map_err(read_err)?;
        let text = String::from_utf8(bytes).map_err(|e| {
            read_err(std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                format!(
                    "not UTF-8 text (line {})",
                    e.as_bytes()[..e.utf8_error().valid_up_to()]
                        .iter()
                        .filter(|&&b| b == b'\n')
                        .count()
                        + 1
                ),
            ))
        })?;
        Project::from_toml_str(path, &text)
    }

    /// Parses and checks manifest text; `path` is where it lives (for resolving relative paths and
    /// naming errors).
    pub fn from_toml_str(path: &Path, text: &str) -> Result<Project, ProjectError> {
        // A UTF-8 byte-order mark (some editors write one) is not part of the TOML.
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        let raw: RawManifest = toml::from_str(text).map_err(|e| {
            let (line, column) = e
                .span()
                .map(|s| line_column(text, s.start))
                .unwrap_or((1, 1));
            ProjectError::Parse {
                path: path.to_path_buf(),
                line,
                column,
                // The parser may quote a key or value; quote no more than a short piece of it.
                message: crate::io::excerpt_long(e.message().trim()),
            }
        })?;
        let manifest_path = std::path::absolute(path).map_err(|e| ProjectError::Read {
            path: path.to_path_buf(),
            source: e,
        })?;
        check(raw, manifest_path).map_err(|source| ProjectError::Manifest {
            path: path.to_path_buf(),
            source,
        })
    }

    /// Every file the project reads: the manifest, each attribute map, the wells CSV and the volume
    /// map. Outputs must never be written over these.
    pub fn input_paths(&self) -> Vec<PathBuf> {
        let mut out = vec![self.manifest_path.clone()];
        for s in &self.steps {
            out.extend(s.attributes.iter().map(|(_, p)| p.clone()));
        }
        out.push(self.wells.file.clone());
        if let Some(v) = self.infill.as_ref().and_then(|i| i.volume_map.clone()) {
            out.push(v);
        }
        for u in &self.unsampled {
            if !out.contains(u) {
                out.push(u.clone());
            }
        }
        if let Some(t) = &self.totals {
            for m in t.maps.values().map(PathBuf::from) {
                if !out.contains(&m) {
                    out.push(m);
                }
            }
        }
        out
    }

    /// Index of the step called `name`.
    pub fn step_index(&self, name: &str) -> Option<usize> {
        self.steps.iter().position(|s| s.name == name)
    }

    /// Index of the target called `name`.
    pub fn target_index(&self, name: &str) -> Option<usize> {
        self.targets.iter().position(|t| t.name == name)
    }

    /// The column layout the wells reader needs.
    pub fn well_columns(&self) -> WellColumns {
        WellColumns {
            well: self.wells.well_column.clone(),
            x: self.wells.x_column.clone(),
            y: self.wells.y_column.clone(),
            step: self.wells.step_column.clone(),
            weight: self.wells.weight_column.clone(),
            weight_required: self.wells.weight_column_given,
            targets: self
                .targets
                .iter()
                .map(|t| TargetColumn {
                    column: t.column.clone(),
                    min: t.min,
                    max: t.max,
                })
                .collect(),
        }
    }

    /// Reads the wells CSV.
    pub fn read_wells(&self) -> Result<Vec<WellRecord>, IoError> {
        let steps: Vec<String> = self.steps.iter().map(|s| s.name.clone()).collect();
        io::wells::read(&self.wells.file, &self.well_columns(), &steps)
    }

    /// Reads the wells CSV, keeping going after bad rows: the good rows and every row error
    /// (`Err` only for a problem with the file as a whole).
    pub fn read_wells_all(&self) -> Result<(Vec<WellRecord>, Vec<IoError>), IoError> {
        let steps: Vec<String> = self.steps.iter().map(|s| s.name.clone()).collect();
        io::wells::read_all(&self.wells.file, &self.well_columns(), &steps)
    }

    /// Reads one attribute map of one step.
    pub fn read_map(&self, step: usize, attribute: usize) -> Result<Vec<f64>, IoError> {
        let (_, path) = &self.steps[step].attributes[attribute];
        io::read_map(path, &self.grid, self.snap_tolerance)
    }

    /// Reads every attribute map (in parallel), keeping each result: `[step][attribute]`.
    pub fn read_maps_each(&self) -> Vec<Vec<Result<Vec<f64>, IoError>>> {
        let na = self.attribute_names.len();
        let jobs: Vec<(usize, usize)> = (0..self.steps.len())
            .flat_map(|s| (0..na).map(move |a| (s, a)))
            .collect();
        let mut results: Vec<Result<Vec<f64>, IoError>> =
            jobs.par_iter().map(|&(s, a)| self.read_map(s, a)).collect();
        let mut out = Vec::with_capacity(self.steps.len());
        for _ in 0..self.steps.len() {
            let rest = results.split_off(na.min(results.len()));
            out.push(std::mem::replace(&mut results, rest));
        }
        out
    }

    /// Reads the infill volume map, if the manifest names one.
    pub fn read_volume_map(&self) -> Result<Option<Vec<f64>>, IoError> {
        match self.infill.as_ref().and_then(|i| i.volume_map.as_ref()) {
            Some(p) => io::read_map(p, &self.grid, self.snap_tolerance).map(Some),
            None => Ok(None),
        }
    }
}

fn check(raw: RawManifest, manifest_path: PathBuf) -> Result<Project, ManifestError> {
    let root = manifest_path
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("."));
    let resolve = |p: &str| root.join(p);

    // [project]
    let (name, convention) = match raw.project {
        Some(p) => (p.name, p.convention),
        None => (None, None),
    };
    let name = name.unwrap_or_else(|| {
        root.file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "project".into())
    });
    let convention = convention.unwrap_or(Convention::Percentile);

    // [grid]
    let g = raw.grid;
    let nx = usize::try_from(g.nx).map_err(|_| out_of_range("grid.nx", ">= 2", g.nx))?;
    let ny = usize::try_from(g.ny).map_err(|_| out_of_range("grid.ny", ">= 2", g.ny))?;
    let epsg = match g.epsg {
        None => None,
        Some(c) if (1..=32767).contains(&c) => Some(c as u32),
        Some(c) => return Err(out_of_range("grid.epsg", "an EPSG code in 1..=32767", c)),
    };
    let grid = Grid {
        origin_x: g.origin_x,
        origin_y: g.origin_y,
        dx: g.dx,
        dy: g.dy,
        nx,
        ny,
        rotation: g.rotation.unwrap_or(0.0),
        epsg,
        null_value: g.null_value.unwrap_or(DEFAULT_NULL_VALUE),
    };
    grid.validate().map_err(ManifestError::Grid)?;
    let nodes = u128::from(nx as u64) * u128::from(ny as u64);
    if nodes > u128::from(limits::MAX_GRID_NODES) {
        return Err(ManifestError::Limit {
            key: "grid.nx * grid.ny".into(),
            limit: format!("at most {} nodes", limits::MAX_GRID_NODES),
            value: format!("{nx} * {ny} = {nodes}"),
        });
    }
    let snap_tolerance = number(
        "grid.snap_tolerance",
        g.snap_tolerance,
        DEFAULT_SNAP_TOLERANCE,
        "> 0 and < 0.5",
        |v| v > 0.0 && v < 0.5,
    )?;

    // [[step]]
    if raw.step.is_empty() {
        return Err(ManifestError::Missing("[[step]]"));
    }
    let mut seen = HashSet::new();
    let mut steps = Vec::with_capacity(raw.step.len());
    let mut attribute_names: Vec<String> = Vec::new();
    for (k, s) in raw.step.into_iter().enumerate() {
        check_name(format!("step[{k}].name"), &s.name)?;
        if !seen.insert(s.name.clone()) {
            return Err(ManifestError::Duplicate {
                key: "step.name".into(),
                name: s.name,
            });
        }
        let mut attrs: Vec<(toml::Spanned<String>, String)> = s.attributes.into_iter().collect();
        attrs.sort_by_key(|(name, _)| name.span().start);
        let attrs: Vec<(String, String)> = attrs
            .into_iter()
            .map(|(n, p)| (n.into_inner(), p))
            .collect();
        if attrs.is_empty() {
            return Err(ManifestError::Inconsistent {
                key: format!("step '{}'.attributes", s.name),
                message: "a step needs at least one attribute map".into(),
            });
        }
        for (a, p) in &attrs {
            check_name(format!("step '{}'.attributes.{a}", s.name), a)?;
            if p.trim().is_empty() {
                return Err(ManifestError::Inconsistent {
                    key: format!("step '{}'.attributes.{a}", s.name),
                    message: "empty file path".into(),
                });
            }
        }
        if k == 0 {
            attribute_names = attrs.iter().map(|(a, _)| a.clone()).collect();
        }
        let first_name = steps
            .first()
            .map_or_else(|| s.name.clone(), |f: &StepSpec| f.name.clone());
        for a in &attribute_names {
            if !attrs.iter().any(|(b, _)| b == a) {
                return Err(ManifestError::MissingAttribute {
                    step: s.name,
                    attribute: a.clone(),
                    first: first_name,
                });
            }
        }
        if let Some((extra, _)) = attrs.iter().find(|(b, _)| !attribute_names.contains(b)) {
            return Err(ManifestError::ExtraAttribute {
                step: s.name,
                attribute: extra.clone(),
                first: first_name,
            });
        }
        let attributes = attribute_names
            .iter()
            .map(|a| {
                let p = attrs
                    .iter()
                    .find(|(b, _)| b == a)
                    .map_or("", |(_, p)| p.as_str());
                (a.clone(), resolve(p))
            })
            .collect();
        steps.push(StepSpec {
            name: s.name,
            base_date: s.base_date,
            monitor_date: s.monitor_date,
            attributes,
        });
    }
    let step_names: Vec<String> = steps.iter().map(|s| s.name.clone()).collect();
    let values = nodes * steps.len() as u128 * attribute_names.len() as u128;
    if values > u128::from(limits::MAX_MAP_VALUES) {
        return Err(ManifestError::Limit {
            key: "[[step]] attribute maps".into(),
            limit: format!(
                "at most {} map values (steps x attributes x grid nodes) held in memory",
                limits::MAX_MAP_VALUES
            ),
            value: format!(
                "{} x {} x {nodes} = {values}",
                steps.len(),
                attribute_names.len()
            ),
        });
    }

    // [wells]
    let w = raw.wells;
    if w.file.trim().is_empty() {
        return Err(ManifestError::Inconsistent {
            key: "wells.file".into(),
            message: "empty file path".into(),
        });
    }
    let col = |key: &str, v: Option<String>, default: &str| -> Result<String, ManifestError> {
        let v = v.unwrap_or_else(|| default.to_string());
        if v.is_empty() {
            Err(ManifestError::Inconsistent {
                key: key.to_string(),
                message: "empty column name".into(),
            })
        } else {
            Ok(v)
        }
    };
    let weight_column_given = w.weight_column.is_some();
    let wells = WellsSpec {
        file: resolve(&w.file),
        well_column: col("wells.well_column", w.well_column, "well")?,
        x_column: col("wells.x_column", w.x_column, "x")?,
        y_column: col("wells.y_column", w.y_column, "y")?,
        step_column: col("wells.step_column", w.step_column, "step")?,
        weight_column: col("wells.weight_column", w.weight_column, "weight")?,
        weight_column_given,
    };
    let fixed_columns = [
        &wells.well_column,
        &wells.x_column,
        &wells.y_column,
        &wells.step_column,
        &wells.weight_column,
    ];
    for (k, a) in fixed_columns.iter().enumerate() {
        if fixed_columns[..k].contains(a) {
            return Err(ManifestError::Duplicate {
                key: "wells.*_column".into(),
                name: a.to_string(),
            });
        }
    }

    // [[target]]
    if raw.target.is_empty() {
        return Err(ManifestError::Missing("[[target]]"));
    }
    let mut targets: Vec<TargetSpec> = Vec::new();
    for (k, t) in raw.target.into_iter().enumerate() {
        check_name(format!("target[{k}].name"), &t.name)?;
        if targets.iter().any(|u| u.name == t.name) {
            return Err(ManifestError::Duplicate {
                key: "target.name".into(),
                name: t.name,
            });
        }
        let column = t.column.unwrap_or_else(|| t.name.clone());
        if column.is_empty() {
            return Err(ManifestError::Inconsistent {
                key: format!("target '{}'.column", t.name),
                message: "empty column name".into(),
            });
        }
        if targets.iter().any(|u| u.column == column) || fixed_columns.contains(&&column) {
            return Err(ManifestError::Duplicate {
                key: format!("target '{}'.column", t.name),
                name: column,
            });
        }
        if !t.min.is_finite() || !t.max.is_finite() || t.min >= t.max {
            return Err(ManifestError::Bounds {
                target: t.name,
                min: t.min,
                max: t.max,
            });
        }
        let zero_change = match t.zero_change {
            None => ZeroChange::Auto,
            Some(RawZero::Flag(true)) => ZeroChange::On,
            Some(RawZero::Flag(false)) => ZeroChange::Off,
            Some(RawZero::Word(w)) if w == "auto" => ZeroChange::Auto,
            Some(RawZero::Word(w)) => {
                return Err(ManifestError::Inconsistent {
                    key: format!("target '{}'.zero_change", t.name),
                    message: format!("expected \"auto\", true or false, got \"{w}\""),
                });
            }
        };
        if let Some(tol) = t.zero_tolerance
            && !(tol.is_finite() && tol >= 0.0 && tol < t.max - t.min)
        {
            return Err(ManifestError::Inconsistent {
                key: format!("target '{}'.zero_tolerance", t.name),
                message: format!(
                    "expected a value >= 0 and below the target's range {}, got {tol}",
                    t.max - t.min
                ),
            });
        }
        targets.push(TargetSpec {
            name: t.name,
            column,
            unit: t.unit.unwrap_or_default(),
            min: t.min,
            max: t.max,
            zero_change,
            zero_tolerance: t.zero_tolerance,
        });
    }
    let target_names: Vec<String> = targets.iter().map(|t| t.name.clone()).collect();

    // [[threshold]]
    let mut thresholds: Vec<ThresholdSpec> = Vec::new();
    for (k, t) in raw.threshold.into_iter().enumerate() {
        check_name(format!("threshold[{k}].label"), &t.label)?;
        if thresholds.iter().any(|u| u.label == t.label) {
            return Err(ManifestError::Duplicate {
                key: "threshold.label".into(),
                name: t.label,
            });
        }
        let Some(target) = targets.iter().find(|u| u.name == t.target) else {
            return Err(ManifestError::Unknown {
                key: format!("threshold '{}'.target", t.label),
                name: t.target,
                what: "target",
                known: target_names.join(", "),
            });
        };
        if !t.value.is_finite() || t.value < target.min || t.value > target.max {
            return Err(ManifestError::ThresholdOutsideBounds {
                label: t.label,
                target: t.target,
                value: t.value,
                min: target.min,
                max: target.max,
            });
        }
        thresholds.push(ThresholdSpec {
            target: t.target,
            direction: t.direction,
            value: t.value,
            label: t.label,
        });
    }

    // [extract]
    let extract = match raw.extract {
        None => Extract::Bilinear,
        Some(e) => match (e.method.unwrap_or(RawExtractMethod::Bilinear), e.radius) {
            (RawExtractMethod::Bilinear, None) => Extract::Bilinear,
            (RawExtractMethod::Bilinear, Some(_)) => {
                return Err(ManifestError::Inconsistent {
                    key: "extract.radius".into(),
                    message: "applies to method = \"mean\" only".into(),
                });
            }
            (RawExtractMethod::Mean, None) => {
                return Err(ManifestError::Inconsistent {
                    key: "extract.radius".into(),
                    message: "required when method = \"mean\"".into(),
                });
            }
            (RawExtractMethod::Mean, Some(r)) => Extract::Mean {
                radius: radius(
                    "extract.radius",
                    number("extract.radius", Some(r), 0.0, "> 0", |v| v > 0.0)?,
                    &grid,
                    limits::MAX_EXTRACT_NODES,
                )?,
            },
        },
    };

    // [smoothing]
    let smoothing_targets = smoothed_targets(
        raw.smoothing.as_ref().and_then(|r| r.targets.as_deref()),
        &targets,
    )?;
    let smoothing = smoothing_widths(raw.smoothing, &grid)?;

    // [model]
    let d = ModelSection::default();
    let model = match raw.model {
        None => d,
        Some(m) => ModelSection {
            seed: m.seed.unwrap_or(d.seed),
            learner: m.learner.unwrap_or(d.learner),
            trees: count("model.trees", m.trees, d.trees, 1, limits::MAX_TREES)?,
            min_samples_leaf: count(
                "model.min_samples_leaf",
                m.min_samples_leaf,
                d.min_samples_leaf,
                1,
                limits::MAX_COUNT,
            )?,
            max_features: number(
                "model.max_features",
                m.max_features,
                d.max_features,
                "in (0, 1]",
                |v| v > 0.0 && v <= 1.0,
            )?,
            max_depth: count(
                "model.max_depth",
                m.max_depth,
                d.max_depth,
                0,
                limits::MAX_COUNT,
            )?,
            boost_rounds: count(
                "model.boost_rounds",
                m.boost_rounds,
                d.boost_rounds,
                1,
                limits::MAX_BOOST_ROUNDS,
            )?,
            learning_rate: number(
                "model.learning_rate",
                m.learning_rate,
                d.learning_rate,
                "in (0, 1]",
                |v| v > 0.0 && v <= 1.0,
            )?,
            boost_max_depth: count(
                "model.boost_max_depth",
                m.boost_max_depth,
                d.boost_max_depth,
                1,
                limits::MAX_COUNT,
            )?,
        },
    };

    // [calibration]
    let d = CalibrationSection::default();
    let calibration = match raw.calibration {
        None => d,
        Some(c) => CalibrationSection {
            level: number("calibration.level", c.level, d.level, "in (0, 1)", |v| {
                v > 0.0 && v < 1.0
            })?,
            fold_method: c.fold_method.unwrap_or(d.fold_method),
            folds: count("calibration.folds", c.folds, d.folds, 2, limits::MAX_FOLDS)?,
            end_correction: c.end_correction.unwrap_or(d.end_correction),
            max_bins: count(
                "calibration.max_bins",
                c.max_bins,
                d.max_bins,
                1,
                limits::MAX_BINS,
            )?,
            min_wells_per_bin: count(
                "calibration.min_wells_per_bin",
                c.min_wells_per_bin,
                d.min_wells_per_bin,
                1,
                limits::MAX_COUNT,
            )?,
            covariate_shift: c.covariate_shift.unwrap_or(d.covariate_shift),
        },
    };

    // [infill]
    let infill = match raw.infill {
        None => None,
        Some(i) => {
            if !thresholds.iter().any(|t| t.label == i.threshold) {
                return Err(ManifestError::Unknown {
                    key: "infill.threshold".into(),
                    name: i.threshold,
                    what: "threshold label",
                    known: thresholds
                        .iter()
                        .map(|t| t.label.clone())
                        .collect::<Vec<_>>()
                        .join(", "),
                });
            }
            let step = match i.step {
                Some(s) if step_names.contains(&s) => s,
                Some(s) => {
                    return Err(ManifestError::Unknown {
                        key: "infill.step".into(),
                        name: s,
                        what: "step",
                        known: step_names.join(", "),
                    });
                }
                None => step_names.last().cloned().unwrap_or_default(),
            };
            Some(InfillSection {
                threshold: i.threshold,
                volume_map: i.volume_map.as_deref().map(resolve),
                volume_unit: match (&i.volume_map, i.volume_unit) {
                    (None, Some(_)) => {
                        return Err(ManifestError::Inconsistent {
                            key: "infill.volume_unit".into(),
                            message: "applies to infill.volume_map, which is not given".into(),
                        });
                    }
                    (_, u) => u.filter(|u| !u.trim().is_empty()),
                },
                step: Some(step),
                drainage_radius: radius(
                    "infill.drainage_radius",
                    number(
                        "infill.drainage_radius",
                        i.drainage_radius,
                        300.0,
                        "> 0",
                        |v| v > 0.0,
                    )?,
                    &grid,
                    limits::MAX_DRAINAGE_NODES,
                )?,
                min_well_spacing: number(
                    "infill.min_well_spacing",
                    i.min_well_spacing,
                    400.0,
                    ">= 0",
                    |v| v >= 0.0,
                )?,
                min_target_spacing: number(
                    "infill.min_target_spacing",
                    i.min_target_spacing,
                    400.0,
                    ">= 0",
                    |v| v >= 0.0,
                )?,
                count: count("infill.count", i.count, 10, 1, limits::MAX_INFILL_COUNT)?,
            })
        }
    };

    // [report]
    let default_angles = || -> Vec<String> {
        attribute_names
            .iter()
            .filter(|a| {
                let l = a.to_ascii_lowercase();
                ANGLE_MARKERS.iter().any(|m| l.contains(m))
            })
            .cloned()
            .collect()
    };
    let report = match raw.report {
        None => ReportSection {
            learning_curve: true,
            learning_curve_repeats: 5,
            ablation: true,
            angle_attributes: default_angles(),
        },
        Some(r) => {
            let angle_attributes = match r.angle_attributes {
                None => default_angles(),
                Some(list) => {
                    for a in &list {
                        if !attribute_names.contains(a) {
                            return Err(ManifestError::Unknown {
                                key: "report.angle_attributes".into(),
                                name: a.clone(),
                                what: "attribute",
                                known: attribute_names.join(", "),
                            });
                        }
                    }
                    list
                }
            };
            ReportSection {
                learning_curve: r.learning_curve.unwrap_or(true),
                learning_curve_repeats: count(
                    "report.learning_curve_repeats",
                    r.learning_curve_repeats,
                    5,
                    1,
                    limits::MAX_REPEATS,
                )?,
                ablation: r.ablation.unwrap_or(true),
                angle_attributes,
            }
        }
    };

    // [totals]
    let totals = match raw.totals {
        None => None,
        Some(t) => {
            let bounds: Vec<totals::TargetBounds> = targets
                .iter()
                .map(|t| totals::TargetBounds {
                    name: &t.name,
                    min: t.min,
                    max: t.max,
                })
                .collect();
            let names: Vec<&str> = steps.iter().map(|s| s.name.as_str()).collect();
            let checked = totals::check(t, &root, &bounds, &names).map_err(|e| {
                ManifestError::Inconsistent {
                    key: e.key,
                    message: e.message,
                }
            })?;
            Some(checked)
        }
    };

    // [area]
    let unsampled: Vec<PathBuf> = raw
        .area
        .map(|a| a.unsampled.iter().map(|f| resolve(f)).collect())
        .unwrap_or_default();

    Ok(Project {
        manifest_path,
        root,
        name,
        convention,
        grid,
        snap_tolerance,
        steps,
        attribute_names,
        wells,
        targets,
        thresholds,
        extract,
        smoothing,
        smoothing_targets,
        model,
        calibration,
        infill,
        report,
        totals,
        unsampled,
    })
}

// ---------------------------------------------------------------------------------------------
// Survey.

/// A loaded project: settings, every attribute map and the well records.
#[derive(Clone, Debug)]
pub struct Survey {
    /// The checked project.
    pub project: Project,
    /// `maps[step][attribute]`: `nx * ny` values in node index order, `NaN` for null.
    pub maps: Vec<Vec<Vec<f64>>>,
    /// The wells CSV rows, in file order.
    pub wells: Vec<WellRecord>,
    /// Outlines of ground no well samples (`[area] unsampled`), checked.
    pub unsampled: Vec<crate::outline::Outline>,
}

/// Loads a project and reads every attribute map (in parallel) and the wells CSV. The first error
/// in manifest order is returned; `tidemark check` uses the lower-level readers to list them all.
pub fn load_survey(path: &Path) -> Result<Survey, ProjectError> {
    let project = Project::load(path)?;
    let mut maps = Vec::with_capacity(project.steps.len());
    for step in project.read_maps_each() {
        maps.push(step.into_iter().collect::<Result<Vec<_>, _>>()?);
    }
    let wells = project.read_wells()?;
    let unsampled = crate::outline::read_all(&project.unsampled)?;
    Ok(Survey {
        project,
        maps,
        wells,
        unsampled,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"
[grid]
origin_x = 0.0
origin_y = 0.0
dx = 10.0
dy = 10.0
nx = 3
ny = 3

[[step]]
name = "m1"
[step.attributes]
zeta = "z1.xyz"
alpha = "a1.xyz"

[[step]]
name = "m2"
[step.attributes]
alpha = "a2.xyz"
zeta = "z2.xyz"

[wells]
file = "wells.csv"

[[target]]
name = "dSw"
min = -1.0
max = 1.0
"#;

    #[test]
    fn attribute_order_follows_first_step_and_defaults_apply() {
        let p = Project::from_toml_str(Path::new("/tmp/field/project.toml"), MINIMAL).unwrap();
        assert_eq!(p.attribute_names, vec!["zeta", "alpha"]);
        assert_eq!(p.steps[1].attributes[0].0, "zeta");
        assert_eq!(p.steps[1].attributes[0].1, Path::new("/tmp/field/z2.xyz"));
        assert_eq!(p.name, "field");
        assert_eq!(p.grid.null_value, -999.25);
        assert_eq!(p.model, ModelSection::default());
        assert_eq!(p.extract, Extract::Bilinear);
        assert_eq!(p.wells.weight_column, "weight");
        assert!(!p.wells.weight_column_given);
        assert_eq!(p.targets[0].column, "dSw");
        assert!(p.report.angle_attributes.is_empty());
    }

    #[test]
    fn unknown_key_is_named_with_line() {
        let text = MINIMAL.replace("nx = 3", "nx = 3\nnz = 4");
        let e = Project::from_toml_str(Path::new("p.toml"), &text).unwrap_err();
        let s = e.to_string();
        assert!(s.contains("`nz`") && s.contains("line 8"), "{s}");
    }

    #[test]
    fn line_column_counts() {
        assert_eq!(line_column("ab\ncd", 4), (2, 2));
        assert_eq!(line_column("ab", 0), (1, 1));
    }
}
