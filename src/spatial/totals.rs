//! Field totals from spatially correlated realizations, with the two naive rules beside them.
//!
//! **Realizations.** For each error field (one per target: the covariance of the wells' normal
//! scores) pair `p` of realizations is one circulant-embedding simulation (real and imaginary
//! parts: realizations `2p` and `2p + 1`) seeded by `(seed, field, p)`. Each layer (a target at a
//! step, with its own wells and node distributions) conditions the field to its wells by simple
//! kriging (the kriging residual of the realization is shared by layers whose wells sit on the
//! same nodes; see [`super::krige`]) and maps every node through its predictive distribution:
//! `y = Q_node(Phi(z))`. The
//! steps of one target share the unconditioned field and differ by their conditioning data, so a
//! realization is coherent over time; a total concerns one target at one step, so that sharing does
//! not change any total's distribution. Fields are rescaled to unit variance, so `Phi(z)` is
//! uniform at every node before conditioning and each realization honours the node's band.
//!
//! **Unknown mean** ([`TotalsSettings::mean`], [`super::unknown_mean`]). With
//! [`MeanRule::Estimated`] each conditioned layer's mean normal score is estimated from its
//! wells (generalised least squares) and drawn per realization from its estimation error,
//! `m = m_hat + se xi` with one standard normal `xi` per field and realization (seeded
//! `(seed, field, realization)`, shared by the field's steps), and added where the wells leave
//! the field free: `z += m (1 - sum of the simple-kriging weights)`. That is conditional
//! simulation with an unknown mean (ordinary kriging); it replaces the calibration draw, whose
//! shift of the wells' mean is the same uncertainty. Unconditioned layers keep the mean at zero.
//!
//! **Totals.** An area total is `scale x cell area x #{nodes where the value crosses the
//! threshold}`; crossing is decided in normal-score space, `z > Phi^-1(F(t))` for "above" and
//! `z < Phi^-1(F(t-))` for "below", which is `Q(Phi(z)) > t` (resp. `< t`) for the generalised
//! inverse `Q` (e.g. Embrechts & Hofert 2013, *Math. Meth. Oper. Res.* 77:423, prop. 1), so
//! thresholds cost one distribution call per node per quantity, not one per realization. A sum
//! total is `scale x sum_node w_node y_node` over the nodes where the weight is finite.
//!
//! **Streaming.** Realizations are processed in chunks of pairs (rayon, one pair per task); each
//! pair returns its totals and its node crossing counts, merged in pair order. Memory is the
//! per-node tables, one simulation workspace per thread, a chunk of results, the totals (one number
//! per quantity per realization) and the maps of the first `keep_maps` realizations: it does not
//! grow with the number of realizations. Seeds derive from indices only, so the numbers are the
//! same for any thread count, and the first `n` realizations are the same whatever the count.
//!
//! **Naive rules**, computed beside every total: (a) comonotone, every node at the same level
//! `u`: the total at `u = 0.1, 0.5, 0.9` (the sum of node P10 / P50 / P90 maps for a sum with
//! non-negative weights); (b) independent nodes, a Monte Carlo with an independent uniform level per
//! node and the same number of realizations (seeded by `(seed, layer, realization)`).
//!
//! **Summaries.** P10 / P50 / P90 are the 10 %, 50 % and 90 % sample quantiles of the totals
//! (linear interpolation between order statistics, Hyndman & Fan 1996, *Am. Stat.* 50:361, type
//! 7); under the exceedance convention the P10 and P90 labels swap so that P90 is the low value.

use std::sync::{Arc, Mutex, PoisonError};

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::bootstrap::{LayerScores, apply_shift, dirichlet_weights_seeded, unit_variance_factors};
use super::field::{CirculantField, EmbeddingReport, EmbeddingSettings, Workspace};
use super::krige::{Conditioning, ConditioningReport, LagTable, WellScore, nearest_node};
use super::model::VariogramModel;
use super::normal::{self, LEVEL_MAX, LEVEL_MIN};
use super::unknown_mean::{MeanEstimate, MeanRule, add_mean, drawn_mean};
use super::{Lattice, SpatialError, derive_seed};
use crate::project::{Convention, Direction};

const STREAM_FIELD: u64 = 0xF1E1D;
const STREAM_INDEPENDENT: u64 = 0x1DE9;
const STREAM_BOOTSTRAP: u64 = 0xB007;
const STREAM_MEAN: u64 = 0x3EA7;

/// A node's predictive distribution, as its quantile function. Implemented for closures
/// `Fn(node, u) -> y`.
pub trait NodeDistribution: Sync {
    /// The quantile `Q(u) = inf{y : F(y) >= u}` of node `node` (index `j * nx + i`) at level `u`
    /// in `(0, 1)`; non-decreasing in `u`. `NaN` marks a null node (left out of every total).
    fn quantile(&self, node: usize, u: f64) -> f64;

    /// `F(y) = P(Y <= y)`. The default bisects the quantile function: `sup{u : Q(u) <= y}` to
    /// 64 halvings; override it when the distribution function is known.
    fn cdf(&self, node: usize, y: f64) -> f64 {
        bisect(|u| self.quantile(node, u) <= y)
    }

    /// `F(y-) = P(Y < y)` (differs from [`cdf`](Self::cdf) at an atom). The default bisects the
    /// quantile function: `sup{u : Q(u) < y}`.
    fn cdf_left(&self, node: usize, y: f64) -> f64 {
        bisect(|u| self.quantile(node, u) < y)
    }
}

impl<F> NodeDistribution for F
where
    F: Fn(usize, f64) -> f64 + Sync,
{
    fn quantile(&self, node: usize, u: f64) -> f64 {
        self(node, u)
    }
}

/// `sup{u in (0, 1) : holds(u)}` for a predicate that holds on an initial segment.
fn bisect(mut holds: impl FnMut(f64) -> bool) -> f64 {
    let (mut lo, mut hi) = (0.0f64, 1.0f64);
    for _ in 0..64 {
        let mid = 0.5 * (lo + hi);
        if holds(mid.clamp(LEVEL_MIN, LEVEL_MAX)) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

// ---------------------------------------------------------------------------------------------
// Manifest types

/// What a total adds up.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TotalKind {
    /// Area of the nodes where the target crosses a threshold.
    Area,
    /// Sum of the target times a static weight map.
    Sum,
}

fn one() -> f64 {
    1.0
}

/// One total as written in the manifest (raw; [`TotalSpec::check`] turns it into a
/// [`TotalDefinition`]). Example:
/// ```toml
/// [[totals.quantities]]
/// quantity = "swept_pore_volume"
/// kind = "sum"
/// target = "dSw"
/// steps = ["m4"]
/// weight = "hcpv"
/// unit = "m3"
/// ```
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TotalSpec {
    /// Name of the quantity (unique), e.g. `swept_area`.
    pub quantity: String,
    /// `area` or `sum`.
    pub kind: TotalKind,
    /// The target it is computed from, e.g. `dSw`.
    pub target: String,
    /// Steps to compute it at; empty = every step.
    #[serde(default)]
    pub steps: Vec<String>,
    /// Area totals: the threshold.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<f64>,
    /// Area totals: which side of the threshold counts (`above` or `below`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub direction: Option<Direction>,
    /// Sum totals: name of the static weight map (e.g. `hcpv`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub weight: Option<String>,
    /// Unit of the total after `scale`, e.g. `km2`, `m3`.
    pub unit: String,
    /// Factor applied to the total (e.g. `1e-6` for m2 to km2). Default 1.
    #[serde(default = "one")]
    pub scale: f64,
}

/// The rule of a checked total.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TotalRule {
    /// Area where the target crosses `threshold` on side `direction`.
    Area {
        /// The threshold.
        threshold: f64,
        /// Which side counts.
        direction: Direction,
    },
    /// Sum of the target times the named weight map.
    Sum {
        /// Name of the static weight map.
        weight: String,
    },
}

/// A checked total definition.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TotalDefinition {
    /// Name of the quantity.
    pub quantity: String,
    /// Target it is computed from.
    pub target: String,
    /// Steps (empty = every step).
    pub steps: Vec<String>,
    /// What is added up.
    pub rule: TotalRule,
    /// Unit after `scale`.
    pub unit: String,
    /// Factor applied to the total.
    pub scale: f64,
}

fn bad(key: &str, expected: &str, got: impl std::fmt::Display) -> SpatialError {
    SpatialError::Setting {
        key: key.to_string(),
        expected: expected.to_string(),
        got: got.to_string(),
    }
}

impl TotalSpec {
    /// Checks the entry; `key` names it in errors (e.g. `totals.quantities[2]`).
    pub fn check(&self, key: &str) -> Result<TotalDefinition, SpatialError> {
        for (field, v) in [
            ("quantity", &self.quantity),
            ("target", &self.target),
            ("unit", &self.unit),
        ] {
            if v.trim().is_empty() {
                return Err(bad(&format!("{key}.{field}"), "a non-empty name", "\"\""));
            }
        }
        for (k, s) in self.steps.iter().enumerate() {
            if s.trim().is_empty() {
                return Err(bad(&format!("{key}.steps[{k}]"), "a step name", "\"\""));
            }
            if self.steps[..k].contains(s) {
                return Err(bad(
                    &format!("{key}.steps[{k}]"),
                    "a step not already listed",
                    s,
                ));
            }
        }
        if !(self.scale.is_finite() && self.scale != 0.0) {
            return Err(bad(
                &format!("{key}.scale"),
                "a finite non-zero number",
                self.scale,
            ));
        }
        let rule = match self.kind {
            TotalKind::Area => {
                if self.weight.is_some() {
                    return Err(bad(
                        &format!("{key}.weight"),
                        "absent for kind = \"area\" (area totals count cells)",
                        self.weight.as_deref().unwrap_or(""),
                    ));
                }
                let threshold = self.threshold.ok_or_else(|| {
                    bad(
                        &format!("{key}.threshold"),
                        "a number for kind = \"area\"",
                        "nothing",
                    )
                })?;
                if !threshold.is_finite() {
                    return Err(bad(
                        &format!("{key}.threshold"),
                        "a finite number",
                        threshold,
                    ));
                }
                let direction = self.direction.ok_or_else(|| {
                    bad(
                        &format!("{key}.direction"),
                        "\"above\" or \"below\" for kind = \"area\"",
                        "nothing",
                    )
                })?;
                TotalRule::Area {
                    threshold,
                    direction,
                }
            }
            TotalKind::Sum => {
                if let Some(t) = self.threshold {
                    return Err(bad(
                        &format!("{key}.threshold"),
                        "absent for kind = \"sum\"",
                        t,
                    ));
                }
                if self.direction.is_some() {
                    return Err(bad(
                        &format!("{key}.direction"),
                        "absent for kind = \"sum\"",
                        "a direction",
                    ));
                }
                let weight = match &self.weight {
                    Some(w) if !w.trim().is_empty() => w.clone(),
                    _ => {
                        return Err(bad(
                            &format!("{key}.weight"),
                            "the name of a static map for kind = \"sum\"",
                            "nothing",
                        ));
                    }
                };
                TotalRule::Sum { weight }
            }
        };
        Ok(TotalDefinition {
            quantity: self.quantity.clone(),
            target: self.target.clone(),
            steps: self.steps.clone(),
            rule,
            unit: self.unit.clone(),
            scale: self.scale,
        })
    }
}

fn default_realizations() -> usize {
    200
}

/// The manifest's totals section (raw). Example:
/// ```toml
/// [totals]
/// realizations = 200
/// keep_realizations = 0
/// [[totals.quantities]]
/// quantity = "depleted_area"
/// kind = "area"
/// target = "dP"
/// threshold = -2.0
/// direction = "below"
/// unit = "km2"
/// scale = 1e-6
/// ```
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TotalsSection {
    /// Number of realizations (default 200).
    #[serde(default = "default_realizations")]
    pub realizations: usize,
    /// Realization maps to keep and write (the first ones), default 0.
    #[serde(default)]
    pub keep_realizations: usize,
    /// Draw the calibration per realization, so that totals carry its uncertainty
    /// ([`super::bootstrap`]); default on. Not used when `mean = "estimated"`, which carries
    /// the same uncertainty.
    #[serde(default = "default_true")]
    pub calibration_uncertainty: bool,
    /// The mean of each step's normal scores: `"zero"` (known, simple kriging) or
    /// `"estimated"` (unknown, estimated from the wells per step; [`super::unknown_mean`]).
    #[serde(default)]
    pub mean: MeanRule,
    /// What the realizations reproduce at the well nodes: `"well_nodes"` (default),
    /// `"measured"` or `"held_out"` ([`WellConditioning`]).
    #[serde(default)]
    pub conditioning: WellConditioning,
    /// The totals.
    #[serde(default)]
    pub quantities: Vec<TotalSpec>,
    /// Static weight maps by name (e.g. `hcpv = "static/hcpv.tif"`), for `sum` totals; paths
    /// relative to the manifest's folder (the project resolves them when it loads).
    #[serde(default, skip_serializing_if = "std::collections::BTreeMap::is_empty")]
    pub maps: std::collections::BTreeMap<String, String>,
}

/// What the realizations are conditioned to at the well nodes (`[totals] conditioning`). The
/// error correlation is fitted on the held-out wells' normal scores either way.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum WellConditioning {
    /// Each well's measured value, by kriging: its level under the predictive distribution of
    /// its own node (the final model's, which has seen the well), so every realization gives
    /// the measured value at the well's node and the nodes around it follow.
    Measured,
    /// The well's held-out normal score (its error when its fold was left out), so every
    /// realization gives the node's value at that score's level.
    HeldOut,
    /// Each well's measured value at its own node only: the node takes the value (its level as
    /// under [`WellConditioning::Measured`]) and the field elsewhere is not conditioned, because
    /// neither score tells the final model's errors between the wells (see DEVELOPERS.md,
    /// "Spatial errors and field totals").
    #[default]
    WellNodes,
}

impl WellConditioning {
    /// The manifest's word for the rule.
    pub fn name(self) -> &'static str {
        match self {
            WellConditioning::Measured => "measured",
            WellConditioning::HeldOut => "held_out",
            WellConditioning::WellNodes => "well_nodes",
        }
    }
}

fn default_true() -> bool {
    true
}

impl TotalsSection {
    /// Checks every entry (keys named `totals.quantities[k]`) and that quantity names are unique.
    pub fn check(&self) -> Result<Vec<TotalDefinition>, SpatialError> {
        if self.realizations < 2 {
            return Err(bad("totals.realizations", ">= 2", self.realizations));
        }
        if self.mean == MeanRule::Estimated && self.conditioning == WellConditioning::WellNodes {
            return Err(bad(
                "totals.mean",
                "\"zero\" unless the wells are kriged in (totals.conditioning = \"measured\" or \
                 \"held_out\"): \"estimated\" estimates the mean of the kriged wells' scores",
                "\"estimated\" with totals.conditioning = \"well_nodes\"",
            ));
        }
        if self.keep_realizations > self.realizations {
            return Err(bad(
                "totals.keep_realizations",
                &format!("at most totals.realizations ({})", self.realizations),
                self.keep_realizations,
            ));
        }
        let mut out: Vec<TotalDefinition> = Vec::with_capacity(self.quantities.len());
        for (k, q) in self.quantities.iter().enumerate() {
            let key = format!("totals.quantities[{k}]");
            let d = q.check(&key)?;
            if out.iter().any(|o| o.quantity == d.quantity) {
                return Err(bad(
                    &format!("{key}.quantity"),
                    "a name not used by another total",
                    &d.quantity,
                ));
            }
            out.push(d);
        }
        Ok(out)
    }
}

// ---------------------------------------------------------------------------------------------
// Engine input and output

/// The error field of one target: the covariance of its normal scores (rescaled to unit
/// variance before simulation).
#[derive(Clone, Debug, PartialEq)]
pub struct ErrorField {
    /// Name, e.g. the target.
    pub name: String,
    /// Variogram model of the normal scores.
    pub model: VariogramModel,
}

/// A target at a step: which error field, the wells' normal scores at that step, and every
/// node's predictive distribution.
pub struct Layer<'a> {
    /// Name, e.g. `dSw m4`.
    pub name: String,
    /// Index into [`TotalsInput::fields`].
    pub field: usize,
    /// Wells to condition to (grid-local metres); may be empty.
    pub wells: Vec<WellScore>,
    /// The held-out wells' normal scores at this step that the calibration rests on, for the
    /// calibration draw ([`TotalsSettings::calibration_draw`]); may be empty (no draw).
    pub calibration: Vec<WellScore>,
    /// Scores that set their own node only (grid-local metres; wells sharing a node give their
    /// mean), after the conditioning and the draws: the node takes that score in every
    /// realization and no other node moves. May be empty.
    pub pins: Vec<WellScore>,
    /// The nodes' predictive distributions.
    pub distribution: &'a dyn NodeDistribution,
}

/// How a quantity is measured on a layer.
#[derive(Clone, Copy, Debug)]
pub enum Measure<'a> {
    /// Cell area of the nodes crossing `threshold` on side `direction`.
    Area {
        /// The threshold.
        threshold: f64,
        /// Which side counts.
        direction: Direction,
    },
    /// Sum of `weights[node] x value[node]` (nodes with a non-finite weight are left out).
    Sum {
        /// One weight per node (`j * nx + i`).
        weights: &'a [f64],
    },
}

/// One total to compute.
#[derive(Clone, Debug)]
pub struct Quantity<'a> {
    /// Quantity name.
    pub name: String,
    /// Step label.
    pub step: String,
    /// Unit after `scale`.
    pub unit: String,
    /// Index into [`TotalsInput::layers`].
    pub layer: usize,
    /// What is added up.
    pub measure: Measure<'a>,
    /// Factor applied to the total.
    pub scale: f64,
}

/// Everything the engine needs.
pub struct TotalsInput<'a> {
    /// The lattice (grid-local metres).
    pub lattice: Lattice,
    /// One error field per target.
    pub fields: Vec<ErrorField>,
    /// Targets at steps.
    pub layers: Vec<Layer<'a>>,
    /// The totals.
    pub quantities: Vec<Quantity<'a>>,
}

/// Engine settings.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct TotalsSettings {
    /// Number of realizations (>= 2).
    pub realizations: usize,
    /// Seed of every random stream.
    pub seed: u64,
    /// Keep the value maps of the first `keep_maps` realizations of every layer.
    pub keep_maps: usize,
    /// Label convention of the summaries.
    pub convention: Convention,
    /// Also run the independent-nodes Monte Carlo (naive rule b).
    pub independent_rule: bool,
    /// Embedding limits.
    pub embedding: EmbeddingSettings,
    /// Pairs of realizations per parallel chunk (bounds the results in flight; no effect on
    /// the numbers).
    pub chunk: usize,
    /// Draw the calibration per realization (a Bayesian bootstrap over the wells of their mean
    /// normal score, shared by every node; [`super::bootstrap`]).
    #[serde(default)]
    pub calibration_draw: bool,
    /// How the conditioning treats the mean of each layer's normal scores
    /// ([`super::unknown_mean`]); [`MeanRule::Estimated`] switches the calibration draw off.
    #[serde(default)]
    pub mean: MeanRule,
}

impl Default for TotalsSettings {
    fn default() -> Self {
        TotalsSettings {
            realizations: 200,
            seed: 0,
            keep_maps: 0,
            convention: Convention::Percentile,
            independent_rule: true,
            embedding: EmbeddingSettings::default(),
            chunk: 16,
            calibration_draw: false,
            mean: MeanRule::Zero,
        }
    }
}

/// Sample summary of a total's realizations.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// P10 under the run's convention.
    pub p10: f64,
    /// P50 (median).
    pub p50: f64,
    /// P90 under the run's convention.
    pub p90: f64,
    /// Mean.
    pub mean: f64,
    /// Standard deviation (divisor `n - 1`).
    pub sd: f64,
}

/// A low / mid / high triple under the run's convention.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Band {
    /// P10 under the run's convention.
    pub p10: f64,
    /// P50.
    pub p50: f64,
    /// P90 under the run's convention.
    pub p90: f64,
}

impl Band {
    /// Labels a low, mid and high value by `convention` (exceedance: P90 is the low value).
    pub fn labelled(low: f64, mid: f64, high: f64, convention: Convention) -> Band {
        match convention {
            Convention::Percentile => Band {
                p10: low,
                p50: mid,
                p90: high,
            },
            Convention::Exceedance => Band {
                p10: high,
                p50: mid,
                p90: low,
            },
        }
    }
}

/// Sample quantile at level `q` of sorted values (Hyndman & Fan 1996, type 7).
pub fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    let n = sorted.len();
    if n == 0 {
        return f64::NAN;
    }
    let h = (n - 1) as f64 * q.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

impl Summary {
    /// P10 / P50 / P90 (type 7 sample quantiles, labelled by `convention`), mean and sd.
    pub fn of(values: &[f64], convention: Convention) -> Summary {
        let n = values.len();
        let mut sorted = values.to_vec();
        sorted.sort_by(f64::total_cmp);
        let mean = values.iter().sum::<f64>() / n as f64;
        let sd = if n > 1 {
            (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
        } else {
            f64::NAN
        };
        let b = Band::labelled(
            quantile_sorted(&sorted, 0.1),
            quantile_sorted(&sorted, 0.5),
            quantile_sorted(&sorted, 0.9),
            convention,
        );
        Summary {
            p10: b.p10,
            p50: b.p50,
            p90: b.p90,
            mean,
            sd,
        }
    }
}

/// One total's results.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct QuantityResult {
    /// Quantity name.
    pub name: String,
    /// Step label.
    pub step: String,
    /// Unit.
    pub unit: String,
    /// Layer name.
    pub layer: String,
    /// Summary over the correlated realizations.
    pub summary: Summary,
    /// Naive rule (a): every node at its own P10 / P50 / P90 at once.
    pub comonotone: Band,
    /// Naive rule (b): independent nodes (when computed).
    pub independent: Option<Summary>,
    /// The total of every realization, in realization order.
    pub totals: Vec<f64>,
    /// The independent-nodes total of every realization (empty when not computed).
    pub independent_totals: Vec<f64>,
    /// Area totals: the fraction of realizations in which each node crosses the threshold
    /// (`NaN` at null nodes); compare with the exceedance map.
    pub mean_indicator: Option<Vec<f64>>,
}

/// One error field's simulation report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FieldReport {
    /// Field name.
    pub name: String,
    /// The unit-variance model simulated.
    pub model: VariogramModel,
    /// The embedding (absent when no layer uses the field).
    pub embedding: Option<EmbeddingReport>,
}

/// One layer's report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LayerReport {
    /// Layer name.
    pub name: String,
    /// Nodes with a distribution (not null).
    pub active_nodes: usize,
    /// What happened to its wells.
    pub conditioning: ConditioningReport,
    /// Wells behind the calibration draw (0: no draw).
    #[serde(default)]
    pub calibration_wells: usize,
    /// Standard deviation of the drawn shift of the wells' mean normal score (0: no draw).
    #[serde(default)]
    pub calibration_shift_sd: f64,
    /// The generalised-least-squares estimate of the mean of the conditioning wells' scores
    /// (absent without wells), reported under either rule.
    #[serde(default)]
    pub mean: Option<MeanEstimate>,
    /// Whether the realizations carry that mean ([`MeanRule::Estimated`]).
    #[serde(default)]
    pub mean_applied: bool,
}

/// A kept realization map.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct KeptMap {
    /// Layer index.
    pub layer: usize,
    /// Realization index.
    pub realization: usize,
    /// Values `j * nx + i` (`NaN` at null nodes).
    pub values: Vec<f64>,
}

/// Everything the engine returns.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TotalsOutput {
    /// Label convention used.
    pub convention: Convention,
    /// Number of realizations.
    pub realizations: usize,
    /// Seed used.
    pub seed: u64,
    /// One result per quantity, in input order.
    pub quantities: Vec<QuantityResult>,
    /// One report per error field.
    pub fields: Vec<FieldReport>,
    /// One report per layer.
    pub layers: Vec<LayerReport>,
    /// Maps of the first `keep_maps` realizations, by realization then layer.
    pub kept: Vec<KeptMap>,
}

// ---------------------------------------------------------------------------------------------
// Engine

struct AreaPrep {
    quantity: usize,
    direction: Direction,
    /// Crossing in normal-score space (`NaN` at null nodes: never crosses).
    z_threshold: Vec<f64>,
    /// Crossing in level space, for the independent rule.
    u_threshold: Vec<f64>,
}

struct SumPrep {
    quantity: usize,
    /// Scaled weights, 0 where the weight is not finite or the node is null.
    weights: Vec<f64>,
}

/// The nodes of `pins` (nearest node of each location; locations off the lattice are left out)
/// with the mean score of the pins on each. Errors name a pin with a non-finite location or score.
fn pinned_nodes(
    layer: &str,
    lattice: Lattice,
    pins: &[WellScore],
) -> Result<Vec<(usize, f64)>, SpatialError> {
    let mut out: Vec<(usize, f64, usize)> = Vec::new();
    for w in pins {
        let Some((i, j)) = nearest_node(layer, &lattice, w)? else {
            continue;
        };
        let node = j * lattice.nx + i;
        match out.iter_mut().find(|(n, _, _)| *n == node) {
            Some(e) => {
                e.1 += w.score;
                e.2 += 1;
            }
            None => out.push((node, w.score, 1)),
        }
    }
    Ok(out.into_iter().map(|(n, s, c)| (n, s / c as f64)).collect())
}

/// A layer's calibration draw: its wells' scores, the share of each node left free by the
/// wells and the unit-variance factors.
struct Draw {
    scores: LayerScores,
    free: Vec<f64>,
    factor: Vec<f64>,
}

struct PreparedLayer<'a> {
    field: usize,
    conditioning: Conditioning,
    /// `(node, score)` set after everything else ([`Layer::pins`]).
    pins: Vec<(usize, f64)>,
    draw: Option<Draw>,
    /// The estimated mean and the share of every node the wells leave free (rule
    /// [`MeanRule::Estimated`] with wells only).
    unknown_mean: Option<(MeanEstimate, Vec<f64>)>,
    distribution: &'a dyn NodeDistribution,
    active: Vec<bool>,
    areas: Vec<AreaPrep>,
    sums: Vec<SumPrep>,
}

/// What one pair of realizations returns.
struct PairResult {
    /// `[quantity][0 or 1]`.
    totals: Vec<[f64; 2]>,
    independent: Vec<[f64; 2]>,
    /// Per area prep (in layer order), crossings per node: 0, 1 or 2.
    crossings: Vec<Vec<u8>>,
    kept: Vec<KeptMap>,
}

fn crosses(direction: Direction, value: f64, threshold: f64) -> bool {
    match direction {
        Direction::Above => value > threshold,
        Direction::Below => value < threshold,
    }
}

struct Engine<'a> {
    lattice: Lattice,
    settings: TotalsSettings,
    sims: Vec<Option<CirculantField>>,
    layers: Vec<PreparedLayer<'a>>,
    n_quantities: usize,
    /// Wells per field for the calibration draw.
    field_wells: Vec<usize>,
}

impl<'a> Engine<'a> {
    fn run_pair(&self, ws: &mut Workspace, p: usize) -> PairResult {
        let r_total = self.settings.realizations;
        let reals: Vec<usize> = [2 * p, 2 * p + 1]
            .into_iter()
            .filter(|&r| r < r_total)
            .collect();
        let n = self.lattice.len();
        let mut out = PairResult {
            totals: vec![[f64::NAN; 2]; self.n_quantities],
            independent: vec![[f64::NAN; 2]; self.n_quantities],
            crossings: self
                .layers
                .iter()
                .flat_map(|l| l.areas.iter().map(|_| vec![0u8; n]))
                .collect(),
            kept: Vec::new(),
        };
        let mut a = vec![0.0; n];
        let mut b = vec![0.0; n];
        let mut z = vec![0.0; n];
        let mut area_base = 0;
        let mut area_offsets = Vec::with_capacity(self.layers.len());
        for l in &self.layers {
            area_offsets.push(area_base);
            area_base += l.areas.len();
        }
        for (f, sim) in self.sims.iter().enumerate() {
            let Some(sim) = sim else { continue };
            sim.simulate_pair_into(
                derive_seed(self.settings.seed, &[STREAM_FIELD, f as u64, p as u64]),
                ws,
                &mut a,
                &mut b,
            );
            for (t, &r) in reals.iter().enumerate() {
                let base = if t == 0 { &a } else { &b };
                // kriging residuals of this realization, one per distinct set of well nodes
                let mut residuals: Vec<(usize, Vec<f64>)> = Vec::new();
                // the field's calibration draw of this realization, shared by its layers
                let mut weights: Option<Vec<f64>> = None;
                // the field's standard normal draw of the unknown mean, shared by its layers
                let mut xi: Option<f64> = None;
                for (li, layer) in self.layers.iter().enumerate() {
                    if layer.field != f {
                        continue;
                    }
                    let cond = &layer.conditioning;
                    let k = match residuals
                        .iter()
                        .position(|(o, _)| self.layers[*o].conditioning.same_nodes(cond))
                    {
                        Some(k) => k,
                        None => {
                            let mut res = base.clone();
                            cond.residual(&mut res);
                            residuals.push((li, res));
                            residuals.len() - 1
                        }
                    };
                    let res = &residuals[k].1;
                    match cond.kriged_mean() {
                        Some(mean) => {
                            for ((zi, ri), mi) in z.iter_mut().zip(res).zip(mean) {
                                *zi = ri + mi;
                            }
                        }
                        None => z.copy_from_slice(res),
                    }
                    if let Some((estimate, free)) = &layer.unknown_mean {
                        let xi = *xi.get_or_insert_with(|| {
                            let mut rng = StdRng::seed_from_u64(derive_seed(
                                self.settings.seed,
                                &[STREAM_MEAN, f as u64, r as u64],
                            ));
                            StandardNormal.sample(&mut rng)
                        });
                        add_mean(&mut z, drawn_mean(estimate, xi), free);
                    }
                    if let Some(draw) = &layer.draw {
                        let w = weights.get_or_insert_with(|| {
                            dirichlet_weights_seeded(
                                self.field_wells[f],
                                derive_seed(
                                    self.settings.seed,
                                    &[STREAM_BOOTSTRAP, f as u64, r as u64],
                                ),
                            )
                        });
                        let d = draw.scores.shift(w);
                        apply_shift(&mut z, d, &draw.free, &draw.factor);
                    }
                    for &(node, score) in &layer.pins {
                        z[node] = score;
                    }
                    self.evaluate(li, layer, &z, r, t, area_offsets[li], &mut out);
                }
            }
        }
        if self.settings.independent_rule {
            for (li, layer) in self.layers.iter().enumerate() {
                for (t, &r) in reals.iter().enumerate() {
                    self.independent(li, layer, r, t, &mut out);
                }
            }
        }
        out
    }

    #[allow(clippy::too_many_arguments)]
    fn evaluate(
        &self,
        li: usize,
        layer: &PreparedLayer<'_>,
        z: &[f64],
        r: usize,
        t: usize,
        area_offset: usize,
        out: &mut PairResult,
    ) {
        let cell = self.lattice.cell_area();
        for (k, area) in layer.areas.iter().enumerate() {
            let marks = &mut out.crossings[area_offset + k];
            let mut count: u64 = 0;
            match area.direction {
                Direction::Above => {
                    for ((m, &zi), &th) in marks.iter_mut().zip(z).zip(&area.z_threshold) {
                        let c = (zi > th) as u8;
                        *m += c;
                        count += c as u64;
                    }
                }
                Direction::Below => {
                    for ((m, &zi), &th) in marks.iter_mut().zip(z).zip(&area.z_threshold) {
                        let c = (zi < th) as u8;
                        *m += c;
                        count += c as u64;
                    }
                }
            }
            out.totals[area.quantity][t] = count as f64 * cell;
        }
        let keep = r < self.settings.keep_maps;
        if layer.sums.is_empty() && !keep {
            return;
        }
        let mut acc = vec![0.0; layer.sums.len()];
        let mut map = if keep {
            vec![f64::NAN; z.len()]
        } else {
            Vec::new()
        };
        for (i, &zi) in z.iter().enumerate() {
            if !layer.active[i] {
                continue;
            }
            let y = layer.distribution.quantile(i, normal::level(zi));
            for (s, a) in layer.sums.iter().zip(acc.iter_mut()) {
                *a += s.weights[i] * y;
            }
            if keep {
                map[i] = y;
            }
        }
        for (s, a) in layer.sums.iter().zip(acc) {
            out.totals[s.quantity][t] = a;
        }
        if keep {
            out.kept.push(KeptMap {
                layer: li,
                realization: r,
                values: map,
            });
        }
    }

    fn independent(
        &self,
        li: usize,
        layer: &PreparedLayer<'_>,
        r: usize,
        t: usize,
        out: &mut PairResult,
    ) {
        let mut rng = StdRng::seed_from_u64(derive_seed(
            self.settings.seed,
            &[STREAM_INDEPENDENT, li as u64, r as u64],
        ));
        let mut counts = vec![0u64; layer.areas.len()];
        let mut acc = vec![0.0; layer.sums.len()];
        let need_values = !layer.sums.is_empty();
        for i in 0..self.lattice.len() {
            if !layer.active[i] {
                continue;
            }
            let u: f64 = rng.random::<f64>().clamp(LEVEL_MIN, LEVEL_MAX);
            for (c, area) in counts.iter_mut().zip(&layer.areas) {
                *c += crosses(area.direction, u, area.u_threshold[i]) as u64;
            }
            if need_values {
                let y = layer.distribution.quantile(i, u);
                for (s, a) in layer.sums.iter().zip(acc.iter_mut()) {
                    *a += s.weights[i] * y;
                }
            }
        }
        let cell = self.lattice.cell_area();
        for (area, c) in layer.areas.iter().zip(counts) {
            out.independent[area.quantity][t] = c as f64 * cell;
        }
        for (s, a) in layer.sums.iter().zip(acc) {
            out.independent[s.quantity][t] = a;
        }
    }
}

fn input_error(what: &str, problem: impl Into<String>) -> SpatialError {
    SpatialError::Input {
        what: what.to_string(),
        problem: problem.into(),
    }
}

/// A layer's calibration draw (`None` with fewer than two finite scores): the scores by well
/// index in the field, and the share of every node the wells leave free, `1 - sum of the
/// simple-kriging weights` (the kriged value of scores all 1; 1 everywhere without wells).
fn prepare_draw(
    l: &Layer<'_>,
    names: &[String],
    table: Arc<LagTable>,
    conditioning: &Conditioning,
) -> Result<Option<Draw>, SpatialError> {
    let scores: Vec<(usize, f64)> = l
        .calibration
        .iter()
        .filter(|w| w.score.is_finite())
        .filter_map(|w| {
            names
                .iter()
                .position(|n| *n == w.name)
                .map(|k| (k, w.score))
        })
        .collect();
    let Some(scores) = LayerScores::new(scores) else {
        return Ok(None);
    };
    let n = table.lattice().len();
    let free: Vec<f64> = if conditioning.kriged_mean().is_some() {
        let ones: Vec<WellScore> = l
            .wells
            .iter()
            .map(|w| WellScore {
                score: 1.0,
                ..w.clone()
            })
            .collect();
        let unit = Conditioning::new(&l.name, table, &ones)?;
        match unit.kriged_mean() {
            Some(k) => k.iter().map(|&v| (1.0 - v).clamp(0.0, 1.0)).collect(),
            None => vec![1.0; n],
        }
    } else {
        vec![1.0; n]
    };
    let factor = unit_variance_factors(scores.variance, &free);
    Ok(Some(Draw {
        scores,
        free,
        factor,
    }))
}

/// Runs the realizations and returns every total with its naive-rule companions. Errors name the
/// field, layer or quantity whose input is unusable.
pub fn simulate(
    input: &TotalsInput<'_>,
    settings: &TotalsSettings,
) -> Result<TotalsOutput, SpatialError> {
    let lattice = input.lattice;
    lattice.check()?;
    if settings.realizations < 2 {
        return Err(bad("totals.realizations", ">= 2", settings.realizations));
    }
    if settings.chunk == 0 {
        return Err(bad("totals chunk", ">= 1", 0));
    }
    let n = lattice.len();
    for f in &input.fields {
        f.model.check(&format!("error field {}", f.name))?;
    }
    for l in &input.layers {
        if l.field >= input.fields.len() {
            return Err(input_error(
                &format!("layer {}", l.name),
                format!(
                    "refers to error field {} but there are {}",
                    l.field,
                    input.fields.len()
                ),
            ));
        }
    }
    for q in &input.quantities {
        let what = format!("total {} at {}", q.name, q.step);
        if q.layer >= input.layers.len() {
            return Err(input_error(
                &what,
                format!(
                    "refers to layer {} but there are {}",
                    q.layer,
                    input.layers.len()
                ),
            ));
        }
        if !(q.scale.is_finite() && q.scale != 0.0) {
            return Err(input_error(
                &what,
                format!("scale must be finite and non-zero, got {}", q.scale),
            ));
        }
        match q.measure {
            Measure::Area { threshold, .. } if !threshold.is_finite() => {
                return Err(input_error(
                    &what,
                    format!("threshold must be finite, got {threshold}"),
                ));
            }
            Measure::Sum { weights } if weights.len() != n => {
                return Err(input_error(
                    &what,
                    format!(
                        "the weight map has {} values, the grid {} nodes",
                        weights.len(),
                        n
                    ),
                ));
            }
            _ => {}
        }
    }

    // fields used by at least one layer
    let used: Vec<bool> = (0..input.fields.len())
        .map(|f| input.layers.iter().any(|l| l.field == f))
        .collect();
    let units: Vec<VariogramModel> = input
        .fields
        .iter()
        .map(|f| f.model.unit_variance())
        .collect();
    let sims: Vec<Option<CirculantField>> = units
        .iter()
        .zip(&used)
        .map(|(m, &u)| {
            u.then(|| CirculantField::new(lattice, *m, settings.embedding))
                .transpose()
        })
        .collect::<Result<_, _>>()?;
    let tables: Vec<Option<Arc<LagTable>>> = units
        .iter()
        .zip(&used)
        .map(|(m, &u)| {
            u.then(|| LagTable::new(lattice, m).map(Arc::new))
                .transpose()
        })
        .collect::<Result<_, _>>()?;

    // the wells of each field, by name, for the calibration draw
    let mut well_names: Vec<Vec<String>> = vec![Vec::new(); input.fields.len()];
    if settings.calibration_draw && settings.mean == MeanRule::Zero {
        for l in &input.layers {
            for w in &l.calibration {
                if !well_names[l.field].contains(&w.name) {
                    well_names[l.field].push(w.name.clone());
                }
            }
        }
    }
    let mut layers = Vec::with_capacity(input.layers.len());
    for (li, l) in input.layers.iter().enumerate() {
        let table = tables[l.field].clone().expect("table of a used field");
        let conditioning = Conditioning::new(&l.name, table.clone(), &l.wells)?;
        let estimated = settings.mean == MeanRule::Estimated;
        let unknown_mean = if estimated {
            conditioning
                .mean_estimate()
                .map(|e| (e, conditioning.free_share()))
        } else {
            None
        };
        let draw = if settings.calibration_draw && !estimated {
            prepare_draw(l, &well_names[l.field], table, &conditioning)?
        } else {
            None
        };
        let dist = l.distribution;
        let active: Vec<bool> = (0..n)
            .into_par_iter()
            .map(|i| dist.quantile(i, 0.5).is_finite())
            .collect();
        let mut areas = Vec::new();
        let mut sums = Vec::new();
        for (qi, q) in input.quantities.iter().enumerate() {
            if q.layer != li {
                continue;
            }
            match q.measure {
                Measure::Area {
                    threshold,
                    direction,
                } => {
                    let u_threshold: Vec<f64> = (0..n)
                        .into_par_iter()
                        .map(|i| {
                            if !active[i] {
                                f64::NAN
                            } else {
                                match direction {
                                    Direction::Above => dist.cdf(i, threshold),
                                    Direction::Below => dist.cdf_left(i, threshold),
                                }
                            }
                        })
                        .collect();
                    let z_threshold = u_threshold.iter().map(|&u| normal::quantile(u)).collect();
                    areas.push(AreaPrep {
                        quantity: qi,
                        direction,
                        z_threshold,
                        u_threshold,
                    });
                }
                Measure::Sum { weights } => {
                    let w = weights
                        .iter()
                        .zip(&active)
                        .map(|(&w, &a)| if a && w.is_finite() { w * q.scale } else { 0.0 })
                        .collect();
                    sums.push(SumPrep {
                        quantity: qi,
                        weights: w,
                    });
                }
            }
        }
        layers.push(PreparedLayer {
            field: l.field,
            conditioning,
            pins: pinned_nodes(&l.name, lattice, &l.pins)?,
            draw,
            unknown_mean,
            distribution: dist,
            active,
            areas,
            sums,
        });
    }
    // area totals carry their scale through the cell area: fold it in at the end
    let engine = Engine {
        lattice,
        settings: *settings,
        sims,
        layers,
        n_quantities: input.quantities.len(),
        field_wells: well_names.iter().map(Vec::len).collect(),
    };

    let r_total = settings.realizations;
    let pairs = r_total.div_ceil(2);
    let nq = input.quantities.len();
    let mut totals = vec![Vec::with_capacity(r_total); nq];
    let mut indep = vec![Vec::with_capacity(r_total); nq];
    let area_count: usize = engine.layers.iter().map(|l| l.areas.len()).sum();
    let mut counts = vec![vec![0u32; n]; area_count];
    let mut kept = Vec::new();
    // One simulation workspace per running task, reused by later pairs and chunks (a field does
    // not depend on what its workspace held); a fresh one per rayon split would allocate and
    // clear the whole torus for nearly every pair.
    let pool: Mutex<Vec<Workspace>> = Mutex::new(Vec::new());
    let mut start = 0;
    while start < pairs {
        let end = (start + settings.chunk).min(pairs);
        let results: Vec<PairResult> = (start..end)
            .into_par_iter()
            .map(|p| {
                let mut ws = pool
                    .lock()
                    .unwrap_or_else(PoisonError::into_inner)
                    .pop()
                    .unwrap_or_default();
                let result = engine.run_pair(&mut ws, p);
                pool.lock().unwrap_or_else(PoisonError::into_inner).push(ws);
                result
            })
            .collect();
        for (k, res) in results.into_iter().enumerate() {
            let p = start + k;
            let m = if 2 * p + 1 < r_total { 2 } else { 1 };
            for q in 0..nq {
                totals[q].extend_from_slice(&res.totals[q][..m]);
                indep[q].extend_from_slice(&res.independent[q][..m]);
            }
            for (acc, marks) in counts.iter_mut().zip(&res.crossings) {
                for (c, &m) in acc.iter_mut().zip(marks) {
                    *c += m as u32;
                }
            }
            kept.extend(res.kept);
        }
        start = end;
    }
    kept.sort_by_key(|k| (k.realization, k.layer));

    // comonotone rule and summaries
    let mut mean_indicator: Vec<Option<Vec<f64>>> = vec![None; nq];
    let mut a = 0;
    for l in &engine.layers {
        for area in &l.areas {
            mean_indicator[area.quantity] = Some(
                counts[a]
                    .iter()
                    .zip(&l.active)
                    .map(|(&c, &act)| {
                        if act {
                            c as f64 / r_total as f64
                        } else {
                            f64::NAN
                        }
                    })
                    .collect(),
            );
            a += 1;
        }
    }
    let mut quantities = Vec::with_capacity(nq);
    for (qi, q) in input.quantities.iter().enumerate() {
        let layer = &engine.layers[q.layer];
        let scale_area = match q.measure {
            Measure::Area { .. } => q.scale,
            Measure::Sum { .. } => 1.0,
        };
        let t: Vec<f64> = totals[qi].iter().map(|v| v * scale_area).collect();
        let it: Vec<f64> = if settings.independent_rule {
            indep[qi].iter().map(|v| v * scale_area).collect()
        } else {
            Vec::new()
        };
        let co: Vec<f64> = [0.1, 0.5, 0.9]
            .iter()
            .map(|&u| comonotone_total(&lattice, layer, &q.measure, q.scale, u))
            .collect();
        let comonotone = Band::labelled(
            co[0].min(co[2]),
            co[1],
            co[0].max(co[2]),
            settings.convention,
        );
        quantities.push(QuantityResult {
            name: q.name.clone(),
            step: q.step.clone(),
            unit: q.unit.clone(),
            layer: input.layers[q.layer].name.clone(),
            summary: Summary::of(&t, settings.convention),
            comonotone,
            independent: settings
                .independent_rule
                .then(|| Summary::of(&it, settings.convention)),
            totals: t,
            independent_totals: it,
            mean_indicator: mean_indicator[qi].take(),
        });
    }
    let fields = input
        .fields
        .iter()
        .zip(&units)
        .zip(&engine.sims)
        .map(|((f, m), s)| FieldReport {
            name: f.name.clone(),
            model: *m,
            embedding: s.as_ref().map(|s| s.report().clone()),
        })
        .collect();
    let layer_reports = input
        .layers
        .iter()
        .zip(&engine.layers)
        .map(|(l, p)| LayerReport {
            name: l.name.clone(),
            active_nodes: p.active.iter().filter(|&&a| a).count(),
            conditioning: p.conditioning.report().clone(),
            calibration_wells: p.draw.as_ref().map_or(0, |d| d.scores.scores.len()),
            calibration_shift_sd: p.draw.as_ref().map_or(0.0, |d| d.scores.variance.sqrt()),
            mean: p.conditioning.mean_estimate(),
            mean_applied: p.unknown_mean.is_some(),
        })
        .collect();
    Ok(TotalsOutput {
        convention: settings.convention,
        realizations: r_total,
        seed: settings.seed,
        quantities,
        fields,
        layers: layer_reports,
        kept,
    })
}

/// The total with every node at level `u` (naive rule a).
fn comonotone_total(
    lattice: &Lattice,
    layer: &PreparedLayer<'_>,
    measure: &Measure<'_>,
    scale: f64,
    u: f64,
) -> f64 {
    let dist = layer.distribution;
    match *measure {
        Measure::Area {
            threshold,
            direction,
        } => {
            let count = (0..lattice.len())
                .filter(|&i| layer.active[i] && crosses(direction, dist.quantile(i, u), threshold))
                .count();
            count as f64 * lattice.cell_area() * scale
        }
        Measure::Sum { weights } => {
            (0..lattice.len())
                .filter(|&i| layer.active[i] && weights[i].is_finite())
                .map(|i| weights[i] * dist.quantile(i, u))
                .sum::<f64>()
                * scale
        }
    }
}
