//! Skill at held-out wells: does a map carry information beyond the wells' average?
//!
//! For one target (pooled over steps, or one step) this module takes out-of-fold rows (wells held
//! out whole) and reports two skill scores against climatology, each with a bootstrap interval
//! from resampling whole wells, and a verdict:
//!
//! - **R2** `= 1 - sum w (y - p)^2 / sum w (y - ybar_w)^2`: the point prediction against the
//!   weighted mean of the rows scored (the usual R2; row weights `w`).
//! - **CRPS skill** `= 1 - sum w CRPS_model / sum w CRPS_clim` (the skill score of Gneiting &
//!   Raftery 2007, "Strictly proper scoring rules, prediction, and estimation", JASA 102:359,
//!   section 2.2): the model's predictive distribution against climatology.
//! - **Climatology** ([`climatology_crps`]): the predictive distribution of a held-out row is the
//!   weighted empirical distribution of the values of *all other wells* (optionally only the rows
//!   of the same stratum, e.g. the same step). All other wells rather than the training-fold wells:
//!   it does not depend on the fold split, the held-out well's own values never enter its
//!   reference, and it uses every other well, so it is at least as well informed as the model's
//!   training folds; the skill is therefore, if anything, understated.
//! - **CRPS of a weighted sample** ([`crps_sample`]): the energy form
//!   `E|X - y| - E|X - X'|/2` (Gneiting & Raftery 2007, eq. 22) with weighted expectations, which
//!   equals the integral `int (F(x) - 1{x >= y})^2 dx` of the weighted step CDF (Hersbach 2000,
//!   "Decomposition of the continuous ranked probability score for ensemble prediction systems",
//!   Weather and Forecasting 15:559).
//! - **Intervals**: a cluster (block) bootstrap that draws wells with replacement and keeps all
//!   rows of each drawn well, as wells are the independent units (Davison & Hinkley 1997,
//!   "Bootstrap Methods and their Application", section 3.8; Field & Welsh 2007, "Bootstrapping
//!   clustered data", JRSS B 69:369). Both scores are recomputed on the same resamples. The
//!   interval is the percentile interval (Efron & Tibshirani 1993, "An Introduction to the
//!   Bootstrap", section 13.3): with `B` finite replicates and `a = 1 - level`, `k =
//!   floor((B + 1) a / 2)`, the interval runs from the `k`-th to the `(B + 1 - k)`-th smallest
//!   replicate (their section 12.5 convention). Default: level 0.9, `B = 999`, so the 50th and
//!   950th replicates.
//!
//! **Verdict** ([`Verdict`], [`verdict`]):
//! - `none`: no demonstrated skill. The lower end of the R2 interval or of the CRPS-skill interval
//!   is at or below 0 (or undefined). With a 90 % two-sided interval that is a one-sided test at
//!   5 % that each skill is positive; both must pass, since a map is read for its P50 (R2) and
//!   its band (CRPS).
//! - `useful`: both lower ends clear a bar: R2 at least 0.5 (half the variance between held-out
//!   wells explained: the residual spread is at most 71 % of the wells' own spread) and CRPS
//!   skill at least `1 - sqrt(0.5) = 0.293`, the CRPS skill a calibrated Gaussian forecast has
//!   when R2 = 0.5 (for `y ~ N(mu, s^2)` and the forecast `N(mu, s^2)` the expected CRPS is
//!   `s / sqrt(pi)`, Gneiting & Raftery 2007 eq. 21, so the skill is `1 - sqrt(1 - R2)`). The 0.5
//!   bar is a rule of thumb of the trade, not a published threshold.
//! - `weak`: skill is demonstrated (both lower ends above 0) but not clearly useful.
//!
//! Fewer than two wells with usable rows give undefined scores and the verdict `none`.

use crate::metrics::serde_nan;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use serde::{Deserialize, Deserializer, Serialize};

/// Errors of the skill computation (bad arguments; data problems give undefined scores instead).
#[derive(Debug, thiserror::Error)]
pub enum SkillError {
    /// An input that must have one entry per row has another length.
    #[error("skill: `{what}` has {got} entries, expected {expected} (one per row)")]
    Length {
        /// Which input.
        what: &'static str,
        /// Its length.
        got: usize,
        /// Expected length.
        expected: usize,
    },
    /// A setting is out of range.
    #[error("skill: {0}")]
    Setting(String),
    /// A row weight is negative or not finite.
    #[error("skill: row {row} has weight {weight}; weights must be finite and >= 0")]
    Weight {
        /// Row index.
        row: usize,
        /// The weight given.
        weight: f64,
    },
}

/// Settings of the bootstrap and of the verdict.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SkillSettings {
    /// Level of the percentile intervals, in (0, 1) \[0.9\].
    pub level: f64,
    /// Bootstrap resamples of the wells, >= 1 \[999\].
    pub resamples: usize,
    /// Seed of the resampling \[0\].
    pub seed: u64,
    /// Lower R2 bound that makes a skill `useful` \[0.5\].
    pub useful_r2: f64,
    /// Lower CRPS-skill bound that makes a skill `useful` \[`1 - sqrt(0.5)`\].
    pub useful_crps_skill: f64,
}

impl Default for SkillSettings {
    fn default() -> Self {
        SkillSettings {
            level: 0.9,
            resamples: 999,
            seed: 0,
            useful_r2: 0.5,
            useful_crps_skill: 1.0 - 0.5f64.sqrt(),
        }
    }
}

impl SkillSettings {
    fn check(&self) -> Result<(), SkillError> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(SkillError::Setting(format!(
                "level must be in (0, 1), got {}",
                self.level
            )));
        }
        if self.resamples == 0 {
            return Err(SkillError::Setting("resamples must be at least 1".into()));
        }
        if !(self.useful_r2.is_finite() && self.useful_crps_skill.is_finite()) {
            return Err(SkillError::Setting(
                "the `useful` bounds must be finite".into(),
            ));
        }
        Ok(())
    }
}

/// What the wells can back (see the module documentation for the rule).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// No demonstrated skill: the map shows little more than the wells' average.
    None,
    /// Skill demonstrated, but below the `useful` bar.
    Weak,
    /// Both lower interval ends clear the `useful` bar.
    Useful,
}

impl Verdict {
    /// The verdict's name as written in JSON.
    pub fn as_str(&self) -> &'static str {
        match self {
            Verdict::None => "none",
            Verdict::Weak => "weak",
            Verdict::Useful => "useful",
        }
    }

    /// What the verdict means for the maps, in plain words, with the bars of `s` (the rule of
    /// [`verdict`]).
    pub fn meaning(&self, s: &SkillSettings) -> String {
        let pct = (s.level * 100.0).round();
        match self {
            Verdict::None => {
                format!("{NO_SKILL} (the {pct:.0} % interval of R2 or of CRPS skill reaches 0)")
            }
            Verdict::Weak => format!(
                "skill beyond the wells' average is shown (both {pct:.0} % intervals lie above \
                 0) but stays below the bars of useful: lean on the band more than on the P50"
            ),
            Verdict::Useful => format!(
                "useful: even the low ends of the {pct:.0} % intervals clear R2 {} and CRPS skill \
                 {:.3}",
                s.useful_r2, s.useful_crps_skill
            ),
        }
    }
}

/// What a `none` verdict means for the maps of that target and step: the warning of `run.json`
/// and the caption of every picture they have.
pub const NO_SKILL: &str =
    "no demonstrated skill at wells held out: this map shows little more than the wells' average";

/// The verdict rule in plain words, with the bars of `s`.
pub fn rule_text(s: &SkillSettings) -> String {
    let pct = (s.level * 100.0).round();
    format!(
        "Both skills are measured on wells held out of training, against climatology (the other \
         wells' values at the same step), with {pct:.0} % intervals from resampling whole wells. \
         none: the interval of R2 or of CRPS skill reaches 0 or below, so the wells cannot show \
         that the map beats their average. useful: the low end of the R2 interval is at least {} \
         and that of CRPS skill at least {:.3} (the CRPS skill of a calibrated Gaussian forecast \
         at R2 {}). weak: skill shown, below those bars.",
        s.useful_r2, s.useful_crps_skill, s.useful_r2
    )
}

fn pair_or_nan<'de, D: Deserializer<'de>>(d: D) -> Result<[f64; 2], D::Error> {
    let [a, b] = <[Option<f64>; 2]>::deserialize(d)?;
    Ok([a.unwrap_or(f64::NAN), b.unwrap_or(f64::NAN)])
}

/// Skill of one target (pooled over steps, or one step). Undefined values are `NaN`, written as
/// JSON `null`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Skill {
    /// Leave-wells-out R2 of the point prediction.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub r2: f64,
    /// Leave-wells-out CRPS skill against climatology.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub crps_skill: f64,
    /// Percentile interval of `r2` from resampling whole wells, `[low, high]`.
    #[serde(deserialize_with = "pair_or_nan")]
    pub r2_interval: [f64; 2],
    /// Percentile interval of `crps_skill` from resampling whole wells, `[low, high]`.
    #[serde(deserialize_with = "pair_or_nan")]
    pub crps_skill_interval: [f64; 2],
    /// The verdict.
    pub verdict: Verdict,
}

/// Skill of one target at one step, named by the step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepSkill {
    /// The step's name.
    pub step: String,
    /// The scores, intervals and verdict (flattened into this object in JSON).
    #[serde(flatten)]
    pub skill: Skill,
}

/// Out-of-fold rows of one target: everything on plain slices, one entry per row.
#[derive(Clone, Copy, Debug)]
pub struct SkillInput<'a> {
    /// The measured value.
    pub truth: &'a [f64],
    /// The out-of-fold point prediction (P50).
    pub prediction: &'a [f64],
    /// CRPS of the model's out-of-fold predictive distribution.
    pub crps_model: &'a [f64],
    /// CRPS of climatology ([`climatology_crps`]).
    pub crps_climatology: &'a [f64],
    /// Well id of each row (any integers; rows of one well share one).
    pub well: &'a [usize],
    /// Row weight (finite, >= 0).
    pub weight: &'a [f64],
}

impl SkillInput<'_> {
    fn check(&self) -> Result<(), SkillError> {
        let n = self.truth.len();
        for (what, got) in [
            ("prediction", self.prediction.len()),
            ("crps_model", self.crps_model.len()),
            ("crps_climatology", self.crps_climatology.len()),
            ("well", self.well.len()),
            ("weight", self.weight.len()),
        ] {
            if got != n {
                return Err(SkillError::Length {
                    what,
                    got,
                    expected: n,
                });
            }
        }
        if let Some((row, &weight)) = self
            .weight
            .iter()
            .enumerate()
            .find(|(_, w)| !(w.is_finite() && **w >= 0.0))
        {
            return Err(SkillError::Weight { row, weight });
        }
        Ok(())
    }
}

/// Weighted R2 `1 - sum w (y - p)^2 / sum w (y - ybar_w)^2`; `NaN` when the weighted truth has no
/// spread or no weight. With unit weights this is [`crate::metrics::r2`].
pub fn weighted_r2(truth: &[f64], prediction: &[f64], weight: &[f64]) -> f64 {
    let sw: f64 = weight.iter().sum();
    if sw.is_nan() || sw <= 0.0 {
        return f64::NAN;
    }
    let mean = truth.iter().zip(weight).map(|(y, w)| w * y).sum::<f64>() / sw;
    let ss_tot: f64 = truth
        .iter()
        .zip(weight)
        .map(|(y, w)| w * (y - mean).powi(2))
        .sum();
    let ss_res: f64 = truth
        .iter()
        .zip(prediction)
        .zip(weight)
        .map(|((y, p), w)| w * (y - p).powi(2))
        .sum();
    if ss_tot > 0.0 {
        1.0 - ss_res / ss_tot
    } else {
        f64::NAN
    }
}

/// CRPS skill `1 - sum w c_model / sum w c_clim`; `NaN` when climatology scores 0 in total.
pub fn crps_skill(crps_model: &[f64], crps_climatology: &[f64], weight: &[f64]) -> f64 {
    let m: f64 = crps_model.iter().zip(weight).map(|(c, w)| c * w).sum();
    let c: f64 = crps_climatology
        .iter()
        .zip(weight)
        .map(|(c, w)| c * w)
        .sum();
    if c > 0.0 { 1.0 - m / c } else { f64::NAN }
}

/// A weighted sample prepared for repeated CRPS evaluation: sorted values with running sums, so
/// each [`WeightedSample::crps`] costs O(log m).
#[derive(Clone, Debug)]
pub struct WeightedSample {
    values: Vec<f64>,
    /// Running sums of the normalised weights, `cum_w[k] = sum_{j < k} p_j`.
    cum_w: Vec<f64>,
    /// Running sums of `p_j x_j`.
    cum_wx: Vec<f64>,
    /// `E|X - X'|` under the weights.
    spread: f64,
}

impl WeightedSample {
    /// Builds the sample from values and non-negative weights (pairs with a non-finite value or a
    /// zero weight are dropped). `None` when no weight is left.
    pub fn new(values: &[f64], weights: &[f64]) -> Option<Self> {
        let mut pairs: Vec<(f64, f64)> = values
            .iter()
            .zip(weights)
            .filter(|(v, w)| v.is_finite() && w.is_finite() && **w > 0.0)
            .map(|(&v, &w)| (v, w))
            .collect();
        let total: f64 = pairs.iter().map(|p| p.1).sum();
        if pairs.is_empty() || total.is_nan() || total <= 0.0 {
            return None;
        }
        pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
        let m = pairs.len();
        let mut cum_w = Vec::with_capacity(m + 1);
        let mut cum_wx = Vec::with_capacity(m + 1);
        let (mut sw, mut swx, mut pair_sum) = (0.0, 0.0, 0.0);
        cum_w.push(0.0);
        cum_wx.push(0.0);
        for &(v, w) in &pairs {
            let p = w / total;
            // sum_{j<k} p_j p_k (x_k - x_j) over the sorted values, each pair once
            pair_sum += p * (v * sw - swx);
            sw += p;
            swx += p * v;
            cum_w.push(sw);
            cum_wx.push(swx);
        }
        Some(WeightedSample {
            values: pairs.into_iter().map(|p| p.0).collect(),
            cum_w,
            cum_wx,
            spread: 2.0 * pair_sum,
        })
    }

    /// CRPS of the sample's distribution at `y`: `E|X - y| - E|X - X'|/2`.
    pub fn crps(&self, y: f64) -> f64 {
        let k = self.values.partition_point(|&v| v <= y);
        let (w_lo, wx_lo) = (self.cum_w[k], self.cum_wx[k]);
        let m = self.values.len();
        let (w_hi, wx_hi) = (self.cum_w[m] - w_lo, self.cum_wx[m] - wx_lo);
        let abs_dev = (y * w_lo - wx_lo) + (wx_hi - y * w_hi);
        abs_dev - 0.5 * self.spread
    }
}

/// CRPS at `y` of the weighted empirical distribution of `values` (weights need not sum to 1;
/// non-finite values and zero weights are ignored). `NaN` when no weight is left.
pub fn crps_sample(y: f64, values: &[f64], weights: &[f64]) -> f64 {
    WeightedSample::new(values, weights).map_or(f64::NAN, |s| s.crps(y))
}

/// CRPS of climatology for every row: the weighted empirical distribution of the truth of the
/// rows of *all other wells* (and, when `stratum` is given, of the same stratum only, e.g. the
/// same step), evaluated at the row's truth. `NaN` where no other well has a row (or the truth is
/// not finite).
///
/// # Errors
/// If the slices differ in length or a weight is negative or not finite.
pub fn climatology_crps(
    truth: &[f64],
    well: &[usize],
    weight: &[f64],
    stratum: Option<&[usize]>,
) -> Result<Vec<f64>, SkillError> {
    let n = truth.len();
    for (what, got) in [
        ("well", well.len()),
        ("weight", weight.len()),
        ("stratum", stratum.map_or(n, <[usize]>::len)),
    ] {
        if got != n {
            return Err(SkillError::Length {
                what,
                got,
                expected: n,
            });
        }
    }
    if let Some((row, &w)) = weight
        .iter()
        .enumerate()
        .find(|(_, w)| !(w.is_finite() && **w >= 0.0))
    {
        return Err(SkillError::Weight { row, weight: w });
    }
    let st = |r: usize| stratum.map_or(0, |s| s[r]);
    // One reference sample per (stratum, held-out well), built once.
    let mut keys: Vec<(usize, usize)> = (0..n).map(|r| (st(r), well[r])).collect();
    keys.sort_unstable();
    keys.dedup();
    let samples: Vec<Option<WeightedSample>> = keys
        .iter()
        .map(|&(s, w)| {
            let rows: Vec<usize> = (0..n).filter(|&r| st(r) == s && well[r] != w).collect();
            let v: Vec<f64> = rows.iter().map(|&r| truth[r]).collect();
            let wt: Vec<f64> = rows.iter().map(|&r| weight[r]).collect();
            WeightedSample::new(&v, &wt)
        })
        .collect();
    Ok((0..n)
        .map(|r| {
            let k = keys
                .binary_search(&(st(r), well[r]))
                .expect("every row's key is listed");
            match &samples[k] {
                Some(s) if truth[r].is_finite() => s.crps(truth[r]),
                _ => f64::NAN,
            }
        })
        .collect())
}

/// Percentile interval of bootstrap replicates (Efron & Tibshirani 1993, sections 12.5 and 13.3):
/// with `B` finite replicates and `a = 1 - level`, `k = floor((B + 1) a / 2)` (at least 1), the
/// `k`-th and `(B + 1 - k)`-th smallest. `[NaN, NaN]` when fewer than half the replicates are
/// finite or none is.
pub fn percentile_interval(replicates: &[f64], level: f64) -> [f64; 2] {
    let mut v: Vec<f64> = replicates
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .collect();
    if v.is_empty() || 2 * v.len() < replicates.len() {
        return [f64::NAN; 2];
    }
    v.sort_by(f64::total_cmp);
    let b = v.len();
    // `1 - level` is inexact in binary (1 - 0.9 = 0.0999...), so a product that should be whole
    // is nudged up before the floor.
    let k = ((((b + 1) as f64) * (1.0 - level) / 2.0 + 1e-9).floor() as usize).clamp(1, b);
    [v[k - 1], v[b - k]]
}

/// The verdict from the two intervals (module documentation).
pub fn verdict(r2_interval: [f64; 2], crps_skill_interval: [f64; 2], s: &SkillSettings) -> Verdict {
    let (r2_lo, crps_lo) = (r2_interval[0], crps_skill_interval[0]);
    if !(r2_lo > 0.0 && crps_lo > 0.0) {
        Verdict::None
    } else if r2_lo >= s.useful_r2 && crps_lo >= s.useful_crps_skill {
        Verdict::Useful
    } else {
        Verdict::Weak
    }
}

/// Per-well sums the scores are made of, so that a resample costs O(wells).
#[derive(Clone, Copy, Default)]
struct WellSums {
    w: f64,
    wy: f64,
    wyy: f64,
    wres: f64,
    wcm: f64,
    wcc: f64,
}

impl WellSums {
    fn add(&mut self, o: &WellSums, times: f64) {
        self.w += times * o.w;
        self.wy += times * o.wy;
        self.wyy += times * o.wyy;
        self.wres += times * o.wres;
        self.wcm += times * o.wcm;
        self.wcc += times * o.wcc;
    }

    fn scores(&self) -> (f64, f64) {
        let ss_tot = self.wyy - self.wy * self.wy / self.w;
        // a resample whose truth has (numerically) no spread has no R2
        let r2 = if self.w > 0.0 && ss_tot > 1e-12 * self.wyy.abs().max(f64::MIN_POSITIVE) {
            1.0 - self.wres / ss_tot
        } else {
            f64::NAN
        };
        let crps = if self.wcc > 0.0 {
            1.0 - self.wcm / self.wcc
        } else {
            f64::NAN
        };
        (r2, crps)
    }
}

fn undefined() -> Skill {
    Skill {
        r2: f64::NAN,
        crps_skill: f64::NAN,
        r2_interval: [f64::NAN; 2],
        crps_skill_interval: [f64::NAN; 2],
        verdict: Verdict::None,
    }
}

/// Skill of the rows given: point scores, bootstrap intervals over wells and the verdict.
///
/// Rows with a non-finite truth, prediction or CRPS, or a zero weight, are left out. Fewer than
/// two wells left give undefined scores and the verdict `none`. The resamples come from one
/// `StdRng` seeded with `settings.seed`, so the same seed gives the same intervals.
///
/// # Errors
/// Slices of different lengths, a negative or non-finite weight, or a setting out of range.
pub fn assess(input: &SkillInput, settings: &SkillSettings) -> Result<Skill, SkillError> {
    input.check()?;
    settings.check()?;
    let keep: Vec<usize> = (0..input.truth.len())
        .filter(|&r| {
            input.truth[r].is_finite()
                && input.prediction[r].is_finite()
                && input.crps_model[r].is_finite()
                && input.crps_climatology[r].is_finite()
                && input.weight[r] > 0.0
        })
        .collect();
    let mut wells: Vec<usize> = keep.iter().map(|&r| input.well[r]).collect();
    wells.sort_unstable();
    wells.dedup();
    if wells.len() < 2 {
        return Ok(undefined());
    }
    // Centre the truth on its weighted mean so that the sums of squares keep their precision.
    let sw: f64 = keep.iter().map(|&r| input.weight[r]).sum();
    let centre = keep
        .iter()
        .map(|&r| input.weight[r] * input.truth[r])
        .sum::<f64>()
        / sw;
    let mut sums = vec![WellSums::default(); wells.len()];
    for &r in &keep {
        let g = wells.binary_search(&input.well[r]).expect("listed well");
        let w = input.weight[r];
        let y = input.truth[r] - centre;
        let s = &mut sums[g];
        s.w += w;
        s.wy += w * y;
        s.wyy += w * y * y;
        s.wres += w * (input.truth[r] - input.prediction[r]).powi(2);
        s.wcm += w * input.crps_model[r];
        s.wcc += w * input.crps_climatology[r];
    }
    let mut all = WellSums::default();
    for s in &sums {
        all.add(s, 1.0);
    }
    let (r2, crps) = all.scores();
    let g = wells.len();
    let mut rng = StdRng::seed_from_u64(settings.seed);
    let mut times = vec![0u32; g];
    let mut rep_r2 = Vec::with_capacity(settings.resamples);
    let mut rep_crps = Vec::with_capacity(settings.resamples);
    for _ in 0..settings.resamples {
        times.iter_mut().for_each(|t| *t = 0);
        for _ in 0..g {
            times[rng.random_range(0..g)] += 1;
        }
        let mut s = WellSums::default();
        for (k, &t) in times.iter().enumerate() {
            if t > 0 {
                s.add(&sums[k], f64::from(t));
            }
        }
        let (a, b) = s.scores();
        rep_r2.push(a);
        rep_crps.push(b);
    }
    let r2_interval = percentile_interval(&rep_r2, settings.level);
    let crps_skill_interval = percentile_interval(&rep_crps, settings.level);
    Ok(Skill {
        r2,
        crps_skill: crps,
        r2_interval,
        crps_skill_interval,
        verdict: verdict(r2_interval, crps_skill_interval, settings),
    })
}

/// Skill per step: the rows of each step in `step_names` order (`step[r]` indexes it), each with
/// its own seed `settings.seed + step index` (wrapping). Steps without rows get undefined scores
/// and the verdict `none`.
///
/// # Errors
/// As [`assess`], and when `step` has the wrong length or names a step beyond `step_names`.
pub fn assess_by_step(
    input: &SkillInput,
    step: &[usize],
    step_names: &[String],
    settings: &SkillSettings,
) -> Result<Vec<StepSkill>, SkillError> {
    input.check()?;
    if step.len() != input.truth.len() {
        return Err(SkillError::Length {
            what: "step",
            got: step.len(),
            expected: input.truth.len(),
        });
    }
    if let Some(&s) = step.iter().find(|&&s| s >= step_names.len()) {
        return Err(SkillError::Setting(format!(
            "step index {s} but only {} step names",
            step_names.len()
        )));
    }
    step_names
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let rows: Vec<usize> = (0..step.len()).filter(|&r| step[r] == k).collect();
            let pick = |v: &[f64]| rows.iter().map(|&r| v[r]).collect::<Vec<f64>>();
            let (truth, prediction, cm, cc, weight) = (
                pick(input.truth),
                pick(input.prediction),
                pick(input.crps_model),
                pick(input.crps_climatology),
                pick(input.weight),
            );
            let well: Vec<usize> = rows.iter().map(|&r| input.well[r]).collect();
            let sub = SkillInput {
                truth: &truth,
                prediction: &prediction,
                crps_model: &cm,
                crps_climatology: &cc,
                well: &well,
                weight: &weight,
            };
            let per_step = SkillSettings {
                seed: settings.seed.wrapping_add(k as u64),
                ..settings.clone()
            };
            Ok(StepSkill {
                step: name.clone(),
                skill: assess(&sub, &per_step)?,
            })
        })
        .collect()
}
