//! [`ReportInput`]: the plain data the review page is built from.
//!
//! Plain numbers and strings only (no types of other modules), so that `run` can save it as
//! `RESULTS/report-data.json` and `tidemark report RESULTS` can rebuild the page later. Every
//! piece is optional in the sense that an empty list or a `null` makes the page say "not computed"
//! instead of failing. Scalars that may be missing are `Option<f64>`; number lists store `NaN` as
//! JSON `null`.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use super::ReportError;

/// File name of the saved page input inside a results folder.
pub const DATA_FILE: &str = "report-data.json";
/// File name of the page inside a results folder.
pub const PAGE_FILE: &str = "report.html";

/// Everything the review page shows.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct ReportInput {
    /// Project (field) name shown as the page title.
    pub project: String,
    /// Run metadata.
    pub run: RunInfo,
    /// Statement of the P10/P50/P90 convention in force.
    pub convention: String,
    /// Cautions that go with the outputs (decision support, not a reserves estimate; qualified
    /// review before drilling or disclosure; local rules). Defaults are used when empty.
    pub cautions: Vec<String>,
    /// Unit of the map coordinates (e.g. "m").
    pub xy_unit: String,
    /// Names of the time steps (monitor-minus-base differences), in order.
    pub steps: Vec<String>,
    /// Per target: summary, diagnostics and sensitivity studies.
    pub targets: Vec<TargetReport>,
    /// Map pictures, per target and step (and per step for applicability).
    pub maps: Vec<MapEntry>,
    /// Risked infill targets, when ranked.
    pub infill: Option<InfillSection>,
    /// Scores against truth maps (synthetic projects), when computed.
    pub truth: Option<TruthSection>,
    /// The skill-verdict rule in plain words (shown under the verdict table); empty: not stated.
    pub skill_rule: String,
    /// Names of the band's lower and upper edges in the convention in force (e.g. "P10",
    /// "P90"); empty: the page says "lower edge" and "upper edge".
    pub band_labels: [String; 2],
    /// Nodes next to injectors outside the area of applicability, per step.
    #[serde(default)]
    pub injector_cores: Vec<super::area::InjectorCores>,
    /// Ground inside the project's outlines of unsampled ground, when it has any.
    #[serde(default)]
    pub marked_ground: Option<super::area::MarkedGround>,
    /// Field totals, when the manifest asks for them.
    pub totals: Option<super::totals::TotalsReport>,
}

/// Run metadata.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct RunInfo {
    /// tidemark version that made the results.
    pub tidemark_version: String,
    /// When the run was made (free text, e.g. an RFC 3339 time stamp).
    pub created: String,
    /// Master seed.
    pub seed: Option<u64>,
    /// The manifest the run read.
    pub project_file: String,
    /// Settings worth showing, as name/value pairs.
    pub settings: Vec<KeyValue>,
    /// Wall time per stage.
    pub timings: Vec<Timing>,
    /// Run-level warnings.
    pub warnings: Vec<String>,
}

/// A name/value pair.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct KeyValue {
    /// Name.
    pub key: String,
    /// Value, as text.
    pub value: String,
}

/// Wall time of one stage.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Timing {
    /// Stage name.
    pub stage: String,
    /// Seconds.
    pub seconds: Option<f64>,
}

/// Everything about one predicted quantity (dP, dSw, dSg, ...).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TargetReport {
    /// Short name, as in the manifest (e.g. "dSw").
    pub name: String,
    /// Longer description (e.g. "change in water saturation").
    pub description: String,
    /// Unit of the values (e.g. "fraction", "MPa").
    pub unit: String,
    /// Summary metrics (leave-wells-out).
    pub summary: TargetSummary,
    /// Truth against out-of-fold prediction at wells, before and after the end-bias correction.
    pub crossplot: Option<CrossplotData>,
    /// Band coverage by decile of the truth.
    pub coverage_by_decile: Option<DecileCoverage>,
    /// Reliability of the exceedance probabilities, one table per threshold.
    pub reliability: Vec<ReliabilityTable>,
    /// Histogram of the probability integral transform of the truth.
    pub pit: Option<PitHistogram>,
    /// Skill and coverage against the number of training wells.
    pub learning_curve: Option<LearningCurve>,
    /// Permutation importance by attribute and by family.
    pub importance: Option<Importance>,
    /// Skill with and without the angle-dependent attributes.
    pub ablation: Option<Ablation>,
    /// Leave-wells-out skill against the wells' average, steps pooled, with its verdict.
    pub skill: Option<SkillVerdict>,
    /// The same per step, by step name.
    pub skill_by_step: Vec<SkillVerdict>,
    /// The band away from the wells: scale against dissimilarity and the rule beyond.
    pub spread: Option<SpreadProfile>,
    /// Whether the target was modelled with a "no change" atom at zero, and why.
    pub zero_change: Option<ZeroDecision>,
    /// Regression kriging of the held-out wells' errors: variogram, band decision, middle gain.
    pub kriging: Option<KrigingSummary>,
    /// Smoothing of the attribute maps: the width kept and every candidate's score at held-out
    /// wells (`None` in pages written before it existed).
    #[serde(default)]
    pub smoothing: Option<SmoothingChoice>,
}

/// How a target's attribute maps were smoothed, as the page shows it.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct SmoothingChoice {
    /// Gaussian width kept, metres (0 = plain attributes only).
    pub width: f64,
    /// Wells scored.
    pub wells: usize,
    /// Each candidate: width (metres), mean held-out pinball loss, excess over the best and its
    /// standard error; empty when smoothing is off.
    pub candidates: Vec<[f64; 4]>,
    /// False when the manifest's `[smoothing] targets` leaves the target out.
    #[serde(default = "yes")]
    pub offered: bool,
}

fn yes() -> bool {
    true
}

/// The residual-kriging stage of a target, as the page shows it: the variogram fitted to the
/// held-out wells' standardised errors, whether the band scaled by the kriging variance was kept
/// (its out-of-fold interval score against the band without it), and the middle's measured gain.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct KrigingSummary {
    /// Variogram model kind (`exponential`, `spherical`, `matern32`); empty when no variogram.
    pub model: String,
    /// Nugget of the standardised errors.
    pub nugget: Option<f64>,
    /// Total sill of the standardised errors.
    pub sill: Option<f64>,
    /// Range in map units.
    pub range: Option<f64>,
    /// Pairs of well rows over every lag of the experimental variogram.
    pub pairs: Option<usize>,
    /// The fit fell back (nothing kriged then).
    pub fallback: bool,
    /// The target's maps use the stage.
    pub applied: bool,
    /// A target with a "no change" atom: the stage is measured only.
    pub measured_only: bool,
    /// The band scaled by the kriging variance passed its test.
    pub band_kept: bool,
    /// Out-of-fold interval score of the band scaled by the kriging variance.
    pub is_scaled: Option<f64>,
    /// Out-of-fold interval score of the band without the scaling.
    pub is_without: Option<f64>,
    /// Out-of-fold MSE gain of adding the kriged error to the middle, in %.
    pub mse_gain_pct: Option<f64>,
    /// One standard error of that gain, in %.
    pub mse_gain_se_pct: Option<f64>,
    /// The middle was corrected.
    pub middle_applied: bool,
    /// The stage's decision in words.
    pub decision: String,
}

/// Leave-wells-out skill of a target (steps pooled, or one step) with its verdict.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct SkillVerdict {
    /// Step name; `None` for all steps pooled.
    pub step: Option<String>,
    /// R2 of the out-of-fold P50.
    pub r2: Option<f64>,
    /// Interval of the R2 from resampling whole wells, `[low, high]`.
    pub r2_interval: [Option<f64>; 2],
    /// CRPS skill against climatology.
    pub crps_skill: Option<f64>,
    /// Interval of the CRPS skill, `[low, high]`.
    pub crps_skill_interval: [Option<f64>; 2],
    /// Level of both intervals (e.g. 0.9).
    pub level: Option<f64>,
    /// `none`, `weak` or `useful`.
    pub verdict: String,
    /// What the verdict means, in plain words.
    pub meaning: String,
}

/// The band away from the wells: a monotone band scale against dissimilarity, and the widening
/// beyond the ground cross-validation spans.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct SpreadProfile {
    /// Knots of the profile: dissimilarity index (ascending).
    #[serde(with = "nan_as_null")]
    pub di: Vec<f64>,
    /// Band scale at each knot (non-decreasing); flat outside the knots.
    #[serde(with = "nan_as_null")]
    pub scale: Vec<f64>,
    /// Largest dissimilarity of a held-out well row to its training folds: the edge of the
    /// ground cross-validation spans.
    pub di_edge: Option<f64>,
    /// Largest distance from a held-out well to the nearest well of its training folds (map
    /// units).
    pub distance_edge: Option<f64>,
    /// Lowest and highest value measured at any well: what the band widens towards beyond the
    /// edges.
    pub envelope: [Option<f64>; 2],
    /// Spearman rank correlation of the band scale held-out rows needed with their
    /// dissimilarity.
    pub spearman: Option<f64>,
    /// Held-out-well coverage of the band before and after scaling.
    pub coverage: [Option<f64>; 2],
}

/// The "no change" decision of a target.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct ZeroDecision {
    /// Whether the rule asked for the atom.
    pub enabled: bool,
    /// Whether the maps were made with it (a rule that asked for it can still fall back to a
    /// continuous model when too few wells changed; the target's warnings say so).
    pub applied: bool,
    /// The decision in words (the manifest setting, or what `auto` saw).
    pub reason: String,
    /// Tolerance around zero that counts as "no change", in the target's unit.
    pub tolerance: Option<f64>,
    /// Share of well values within the tolerance.
    pub zero_share: Option<f64>,
}

/// Summary metrics of one target, from held-out wells.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TargetSummary {
    /// Wells with this target measured.
    pub wells: Option<usize>,
    /// Training rows (well x step) with this target.
    pub rows: Option<usize>,
    /// Learner chosen (e.g. "forest", "booster").
    pub learner: Option<String>,
    /// Whether the end-bias (isotonic) correction was kept.
    pub end_correction_kept: Option<bool>,
    /// Why it was or was not kept, from the correction's diagnostics (empty: not recorded).
    pub end_correction_reason: String,
    /// Coefficient of determination of the out-of-fold P50.
    pub r2: Option<f64>,
    /// Root mean square error, in the target's unit.
    pub rmse: Option<f64>,
    /// Mean of prediction minus truth, in the target's unit.
    pub bias: Option<f64>,
    /// Nominal coverage of the band (e.g. 0.8 for P10-P90).
    pub nominal_coverage: Option<f64>,
    /// Fraction of held-out truths inside the band.
    pub coverage: Option<f64>,
    /// Coverage among the lowest tenth of truths.
    pub coverage_bottom_decile: Option<f64>,
    /// Coverage among the highest tenth of truths.
    pub coverage_top_decile: Option<f64>,
    /// Mean band width (P90 - P10), in the target's unit.
    pub mean_width: Option<f64>,
    /// Warnings about this target.
    pub warnings: Vec<String>,
    /// The band at held-out wells of each kind (empty when the wells file gives no kind).
    pub by_kind: Vec<KindRow>,
}

/// The band at the held-out wells of one kind (each well weighing one).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct KindRow {
    /// `producer`, `injector`, `observer` or `unstated`.
    pub kind: String,
    /// Wells of the kind.
    pub wells: usize,
    /// Their rows.
    pub rows: usize,
    /// Share of truths inside the band.
    pub coverage: f64,
    /// Mean band width, in the target's unit.
    pub mean_width: f64,
    /// Mean interval score at the band's level, in the target's unit.
    pub interval_score: f64,
}

/// Paired values at wells: truth, raw out-of-fold prediction, corrected prediction.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct CrossplotData {
    /// Truth at each row.
    #[serde(with = "nan_as_null")]
    pub truth: Vec<f64>,
    /// Out-of-fold P50 before the end-bias correction.
    #[serde(with = "nan_as_null")]
    pub raw: Vec<f64>,
    /// Out-of-fold P50 after the correction (empty when there is none).
    #[serde(with = "nan_as_null")]
    pub corrected: Vec<f64>,
}

/// Band coverage per decile of the truth.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct DecileCoverage {
    /// Nominal coverage (e.g. 0.8).
    pub nominal: Option<f64>,
    /// One row per decile, lowest truths first.
    pub rows: Vec<DecileRow>,
}

/// One decile of the truth.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct DecileRow {
    /// Decile number, 1 (lowest truths) to 10.
    pub decile: usize,
    /// Lowest truth in the decile.
    pub truth_low: Option<f64>,
    /// Highest truth in the decile.
    pub truth_high: Option<f64>,
    /// Rows in the decile.
    pub count: usize,
    /// Fraction of rows whose truth lies inside the band.
    pub coverage: Option<f64>,
    /// Mean band width in the decile.
    pub mean_width: Option<f64>,
}

/// Reliability of the probability of exceeding one threshold.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct ReliabilityTable {
    /// Label of the event (e.g. "dSw > 0.2").
    pub label: String,
    /// Threshold value, in the target's unit.
    pub threshold: Option<f64>,
    /// Brier score of the forecasts.
    pub brier: Option<f64>,
    /// Forecast-probability bins.
    pub bins: Vec<ReliabilityBin>,
}

/// One bin of a reliability diagram.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct ReliabilityBin {
    /// Lower edge of the forecast-probability bin.
    pub forecast_low: f64,
    /// Upper edge of the bin.
    pub forecast_high: f64,
    /// Mean forecast probability of the rows in the bin.
    pub mean_forecast: Option<f64>,
    /// Observed frequency of the event among them.
    pub observed_frequency: Option<f64>,
    /// Rows in the bin.
    pub count: usize,
}

/// PIT histogram: counts in equal-width bins on [0, 1].
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct PitHistogram {
    /// Count per bin, from 0 upwards.
    pub counts: Vec<usize>,
}

/// Learning curve: leave-wells-out skill against the number of training wells.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct LearningCurve {
    /// Random well subsets drawn per size.
    pub repeats: usize,
    /// How the curve's models were fitted (e.g. the forest alone with fewer trees than the main
    /// model), shown beside the curve; empty when not recorded.
    pub note: String,
    /// One point per subset size.
    pub points: Vec<LearningPoint>,
}

/// One subset size of the learning curve.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct LearningPoint {
    /// Number of training wells.
    pub wells: usize,
    /// Mean R2 over repeats.
    pub r2_mean: Option<f64>,
    /// Lowest R2 over repeats.
    pub r2_min: Option<f64>,
    /// Highest R2 over repeats.
    pub r2_max: Option<f64>,
    /// Mean band coverage over repeats.
    pub coverage_mean: Option<f64>,
}

/// Permutation importance.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Importance {
    /// What the value measures (e.g. "increase in RMSE when the attribute is permuted").
    pub measure: String,
    /// Unit of the values.
    pub unit: String,
    /// One entry per attribute.
    pub by_attribute: Vec<AttributeImportance>,
    /// One entry per family (amplitudes, AVO intercept/gradient, timing, ...).
    pub by_family: Vec<FamilyImportance>,
    /// How the family values were obtained; empty means the sum of the family's attribute values.
    pub family_note: String,
}

/// Importance of one attribute.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct AttributeImportance {
    /// Attribute name.
    pub attribute: String,
    /// Family it belongs to.
    pub family: String,
    /// Importance value.
    pub value: Option<f64>,
    /// Spread over repeats (e.g. one standard deviation).
    pub spread: Option<f64>,
}

/// Importance of one family of attributes (permuted together).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct FamilyImportance {
    /// Family name.
    pub family: String,
    /// Importance value.
    pub value: Option<f64>,
}

/// Skill with all attributes and without some (e.g. the angle-dependent ones).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Ablation {
    /// What was removed and why.
    pub description: String,
    /// Attributes removed.
    pub removed: Vec<String>,
    /// Skill with all attributes.
    pub with_all: Skill,
    /// Skill without the removed attributes.
    pub without: Skill,
}

/// Leave-wells-out skill figures.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Skill {
    /// R2 of the P50.
    pub r2: Option<f64>,
    /// RMSE, in the target's unit.
    pub rmse: Option<f64>,
    /// Band coverage.
    pub coverage: Option<f64>,
    /// Mean band width, in the target's unit.
    pub mean_width: Option<f64>,
}

/// Where a picture comes from: a PNG file inside the results folder, or PNG bytes in base64.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PictureRef {
    /// Path relative to the results folder (e.g. "maps/2026/dSw_p50.png").
    File(String),
    /// PNG bytes, base64 (standard alphabet).
    PngBase64(String),
}

impl PictureRef {
    /// Wraps PNG bytes.
    pub fn from_png(bytes: &[u8]) -> Self {
        use base64::Engine;
        PictureRef::PngBase64(base64::engine::general_purpose::STANDARD.encode(bytes))
    }
}

/// One map picture.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MapEntry {
    /// Step name.
    pub step: String,
    /// Target name; `None` for step-wide maps such as applicability.
    #[serde(default)]
    pub target: Option<String>,
    /// What the map shows (e.g. "P50", "band width P90 - P10", "P(dSw > 0.2)", "applicability").
    pub kind: String,
    /// The picture.
    pub picture: PictureRef,
    /// Optional caption.
    #[serde(default)]
    pub caption: String,
}

/// Ranked infill targets.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct InfillSection {
    /// The remaining-oil criterion and ranking rule, in words.
    pub criterion: String,
    /// Unit of the risked volume (e.g. "m3").
    pub volume_unit: String,
    /// Map of the targets.
    pub picture: Option<PictureRef>,
    /// Ranked locations.
    pub rows: Vec<InfillRow>,
}

/// One ranked infill location.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct InfillRow {
    /// Rank, 1 first.
    pub rank: usize,
    /// x coordinate.
    pub x: f64,
    /// y coordinate.
    pub y: f64,
    /// Chance of the criterion (e.g. of not being swept).
    pub chance: Option<f64>,
    /// Chance times in-place volume within the drainage radius.
    pub risked_volume: Option<f64>,
    /// Nearest existing well.
    pub nearest_well: String,
    /// Distance to it.
    pub distance: Option<f64>,
    /// Inside the area of applicability.
    pub inside: bool,
    /// Share of the drainage area (nodes within the drainage radius) inside the area of
    /// applicability.
    pub drainage_inside_fraction: Option<f64>,
}

/// Scores of the maps against the truth at every node (synthetic projects).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TruthSection {
    /// One row per target (and step, when scored per step).
    pub scores: Vec<TruthScore>,
    /// Maps of prediction minus truth.
    pub error_maps: Vec<MapEntry>,
}

/// Scores of one target against the truth.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TruthScore {
    /// Target name.
    pub target: String,
    /// Step name, or `None` for all steps together.
    pub step: Option<String>,
    /// Unit of the target.
    pub unit: String,
    /// Nodes scored.
    pub nodes: Option<usize>,
    /// R2 of the P50.
    pub r2: Option<f64>,
    /// RMSE.
    pub rmse: Option<f64>,
    /// Mean of prediction minus truth.
    pub bias: Option<f64>,
    /// Fraction of nodes whose truth lies in the band.
    pub coverage: Option<f64>,
    /// Mean band width.
    pub mean_width: Option<f64>,
}

impl ReportInput {
    /// Reads `RESULTS/report-data.json` (or any path); errors name the file, line and column.
    pub fn load(path: &Path) -> Result<ReportInput, ReportError> {
        let text = std::fs::read_to_string(path).map_err(|source| ReportError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        serde_json::from_str(&text).map_err(|e| ReportError::Json {
            path: path.to_path_buf(),
            line: e.line(),
            column: e.column(),
            message: e.to_string(),
        })
    }

    /// Writes the input as pretty JSON to `results_dir/report-data.json` (temporary file, then
    /// rename) and returns the path.
    pub fn save(&self, results_dir: &Path) -> Result<PathBuf, ReportError> {
        let text = serde_json::to_string_pretty(self).map_err(|e| ReportError::Json {
            path: results_dir.join(DATA_FILE),
            line: 0,
            column: 0,
            message: e.to_string(),
        })?;
        let path = results_dir.join(DATA_FILE);
        super::write_atomic(&path, text.as_bytes())?;
        Ok(path)
    }
}

/// Serialises `Vec<f64>` with `NaN` (and infinities) as JSON `null`, and reads `null` back as `NaN`.
pub mod nan_as_null {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    /// Serialises the values, non-finite ones as `null`.
    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        let o: Vec<Option<f64>> = v
            .iter()
            .map(|x| if x.is_finite() { Some(*x) } else { None })
            .collect();
        o.serialize(s)
    }

    /// Reads numbers and `null`s, `null` becoming `NaN`.
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        let o: Vec<Option<f64>> = Vec::deserialize(d)?;
        Ok(o.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
    }
}
