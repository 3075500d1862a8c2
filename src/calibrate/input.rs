//! What calibrating one target takes: its training rows ([`TargetData`]), its decision
//! thresholds ([`Threshold`]) and the settings ([`CalibrationSettings`], [`LearnerChoice`]), with
//! the checks that turn bad input into a clear error before any model is fitted.

use super::error::CalibrateError;
use super::folds::FoldMethod;
use super::hurdle::ZeroChange;
use super::shift::RowShift;
use super::units::{Units, count_wells};
use crate::ensemble::{BoostSettings, ForestSettings};
use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// Settings of the calibration of one target (the manifest's `[calibration]` and `[model]`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationSettings {
    /// Nominal level of the band, in (0, 1). Default 0.8 (P10-P90).
    pub level: f64,
    /// How wells are split into folds. Default [`FoldMethod::Wells`].
    pub fold_method: FoldMethod,
    /// Number of folds for `Wells` and `Blocks`, at least 2 (clamped to the number of wells).
    /// Default 5.
    pub folds: usize,
    /// Try the isotonic end-bias correction (kept only if it improves the out-of-fold score).
    /// Default true.
    pub end_correction: bool,
    /// Mondrian bins of the predicted value to start from, at least 1. Default 3.
    pub max_bins: usize,
    /// Bins are merged until each holds at least this many wells (never fewer than a finite
    /// band needs), at least 1. Default 10.
    pub min_wells_per_bin: usize,
    /// Which learner makes the point prediction. Default [`LearnerChoice::Auto`].
    pub learner: LearnerChoice,
    /// Forest settings; its `seed` is replaced by one derived from `seed`.
    pub forest: ForestSettings,
    /// Booster settings; its `seed` is replaced by one derived from `seed`.
    pub boost: BoostSettings,
    /// Seed of every random choice (folds, forests, boosters). Default 42.
    pub seed: u64,
}

impl Default for CalibrationSettings {
    fn default() -> Self {
        Self {
            level: 0.8,
            fold_method: FoldMethod::Wells,
            folds: 5,
            end_correction: true,
            max_bins: 3,
            min_wells_per_bin: 10,
            learner: LearnerChoice::Auto,
            forest: ForestSettings::default(),
            boost: BoostSettings::default(),
            seed: 42,
        }
    }
}

impl CalibrationSettings {
    /// Check every setting's range (including the forest's and booster's).
    pub fn check(&self) -> Result<(), CalibrateError> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(CalibrateError::Setting {
                key: "level",
                expected: "in (0, 1)",
                got: self.level.to_string(),
            });
        }
        if self.folds < 2 && self.fold_method != FoldMethod::OneWell {
            return Err(CalibrateError::Setting {
                key: "folds",
                expected: "at least 2",
                got: self.folds.to_string(),
            });
        }
        if self.max_bins == 0 {
            return Err(CalibrateError::Setting {
                key: "max_bins",
                expected: "at least 1",
                got: "0".to_string(),
            });
        }
        if self.min_wells_per_bin == 0 {
            return Err(CalibrateError::Setting {
                key: "min_wells_per_bin",
                expected: "at least 1",
                got: "0".to_string(),
            });
        }
        self.forest.check()?;
        self.boost.check()?;
        Ok(())
    }
}

/// Which learner makes the point prediction.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LearnerChoice {
    /// Forest, booster or a blend of the two, whichever has the lowest out-of-fold squared error.
    #[default]
    Auto,
    /// The bagged forest only.
    Forest,
    /// The gradient-boosted trees only.
    Boost,
}

/// A decision threshold of a target.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Threshold {
    /// Label used in file names and scores.
    pub label: String,
    /// Threshold value in the target's unit.
    pub value: f64,
    /// `true`: the event is crossing upwards (`Y > value`); `false`: downwards (`Y < value`).
    pub above: bool,
}

/// The training rows of one target (rows where the target is present).
#[derive(Clone, Debug)]
pub struct TargetData<'a> {
    /// Target name (for messages).
    pub name: &'a str,
    /// Features, rows x columns (NaN = missing).
    pub x: ArrayView2<'a, f64>,
    /// Truth per row (finite).
    pub y: &'a [f64],
    /// Well id per row.
    pub group: &'a [usize],
    /// Well location per row (world coordinates), for spatial blocks.
    pub xy: &'a [[f64; 2]],
    /// Step index per row.
    pub step: &'a [usize],
    /// Sample weight per row (finite, >= 0, not all zero).
    pub weight: &'a [f64],
    /// Physical bounds `(min, max)` of the target, `min < max`.
    pub bounds: (f64, f64),
    /// Decision thresholds.
    pub thresholds: Vec<Threshold>,
    /// Covariate-shift ratios from the wells to the mapped nodes ([`super::shift`]); `None`
    /// calibrates the band for the wells' own population.
    pub shift: Option<RowShift<'a>>,
    /// Whether the target has a "no change" atom at zero ([`super::hurdle`]).
    pub zero: ZeroSetting,
    /// The rows in the space of the dissimilarity index (Meyer & Pebesma 2021), which lets the band
    /// widen with dissimilarity ([`super::profile`]); `None` keeps one band rule everywhere.
    pub dissimilarity: Option<Space<'a>>,
}

/// Rows as points of the dissimilarity index's space: standardised, importance-weighted features
/// (row-major, `dim` per row) and the training points' mean pairwise distance.
#[derive(Clone, Copy, Debug)]
pub struct Space<'a> {
    /// Points, one row of `dim` values per training row.
    pub points: &'a [f64],
    /// Values per point.
    pub dim: usize,
    /// Mean pairwise distance of the training points (the index's unit).
    pub mean_distance: f64,
}

impl Space<'_> {
    /// Dissimilarity index of every row to the rows of the other folds: the distance to the nearest
    /// such row over the mean distance (Meyer & Pebesma 2021, cross-validation form).
    pub fn fold_di(&self, folds: &[usize]) -> Vec<f64> {
        let p = self.dim;
        let n = folds.len();
        let dist = |a: usize, b: usize| -> f64 {
            let (ra, rb) = (
                &self.points[a * p..(a + 1) * p],
                &self.points[b * p..(b + 1) * p],
            );
            ra.iter()
                .zip(rb)
                .map(|(u, v)| (u - v) * (u - v))
                .sum::<f64>()
                .sqrt()
        };
        (0..n)
            .map(|a| {
                let d = (0..n)
                    .filter(|&b| folds[b] != folds[a])
                    .map(|b| dist(a, b))
                    .fold(f64::INFINITY, f64::min);
                d / self.mean_distance
            })
            .collect()
    }
}

/// The manifest's say on a target's atom at zero.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct ZeroSetting {
    /// `auto`, on or off.
    pub change: ZeroChange,
    /// Measured values within this distance of zero count as "no change" (`None`: estimated from
    /// the wells).
    pub tolerance: Option<f64>,
}

impl Default for ZeroSetting {
    /// Off: a continuous target (what a caller that says nothing gets).
    fn default() -> Self {
        Self {
            change: ZeroChange::Off,
            tolerance: None,
        }
    }
}

impl TargetData<'_> {
    /// Check the settings and these rows before anything is fitted, and return the warnings the
    /// rows deserve (training values outside the physical bounds).
    ///
    /// Errors: settings out of range, inputs of different lengths, a value that is not finite (or
    /// a negative weight, or no positive one), bounds that are not `min < max`, a threshold that
    /// is not finite, or fewer than two wells.
    pub(crate) fn check(
        &self,
        settings: &CalibrationSettings,
    ) -> Result<Vec<String>, CalibrateError> {
        settings.check()?;
        check_rows(self)?;
        let n = self.y.len();
        let n_wells = count_wells(self.group);
        if n_wells < 2 {
            return Err(CalibrateError::TooFewWells {
                target: self.name.to_string(),
                wells: n_wells,
                rows: n,
                needed: 2,
            });
        }
        let (lo, hi) = self.bounds;
        let outside = self.y.iter().filter(|&&v| v < lo || v > hi).count();
        Ok(if outside > 0 {
            vec![format!(
                "{outside} of {n} training values of `{}` lie outside its bounds [{lo}, {hi}]",
                self.name
            )]
        } else {
            Vec::new()
        })
    }

    /// The rows as calibration units: wells weighing one each, or, with a covariate shift, each
    /// row weighted by its ratio and the new node by the nodes' mean ratio ([`Units::shifted`]).
    pub fn units(&self) -> Units {
        match self.shift {
            Some(sh) => Units::shifted(self.group, sh.ratio, sh.test_ratio),
            None => Units::wells(self.group),
        }
    }
}

fn check_rows(d: &TargetData) -> Result<(), CalibrateError> {
    let n = d.y.len();
    let len = |what: &'static str, got: usize| {
        if got == n {
            Ok(())
        } else {
            Err(CalibrateError::Length {
                target: d.name.to_string(),
                what,
                got,
                expected: n,
            })
        }
    };
    len("x rows", d.x.nrows())?;
    len("group", d.group.len())?;
    len("xy", d.xy.len())?;
    len("step", d.step.len())?;
    len("weight", d.weight.len())?;
    if let Some(sp) = d.dissimilarity {
        len("dissimilarity points", sp.points.len() / sp.dim.max(1))?;
    }
    let bad = |what: &'static str, row: usize, value: f64, expected: &'static str| {
        CalibrateError::BadValue {
            target: d.name.to_string(),
            what,
            row,
            value,
            expected,
        }
    };
    for (i, &v) in d.y.iter().enumerate() {
        if !v.is_finite() {
            return Err(bad("y", i, v, "a finite value"));
        }
    }
    for (i, &v) in d.weight.iter().enumerate() {
        if !v.is_finite() || v < 0.0 {
            return Err(bad("weight", i, v, "a finite value >= 0"));
        }
    }
    if d.weight.iter().all(|&w| w == 0.0) {
        return Err(bad("weight", 0, 0.0, "at least one positive weight"));
    }
    let (lo, hi) = d.bounds;
    if !(lo.is_finite() && hi.is_finite() && lo < hi) {
        return Err(CalibrateError::Setting {
            key: "target min/max",
            expected: "finite with min < max",
            got: format!("({lo}, {hi}) for target `{}`", d.name),
        });
    }
    for (i, t) in d.thresholds.iter().enumerate() {
        if !t.value.is_finite() {
            return Err(bad("threshold value", i, t.value, "a finite value"));
        }
    }
    Ok(())
}
