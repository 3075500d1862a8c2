//! Area of applicability: where a prediction stands on ground the training wells cover.
//!
//! Follows Meyer & Pebesma (2021), "Predicting into unknown space? Estimating the area of
//! applicability of spatial prediction models", Methods in Ecology and Evolution 12:1620-1633:
//!
//! 1. each predictor is standardised with the training mean and standard deviation and multiplied by
//!    its importance weight;
//! 2. the dissimilarity index of a location is the distance to its nearest training point divided by
//!    the mean pairwise distance between training points, `DI = d_min / d_bar`;
//! 3. for training points the nearest neighbour is searched only outside the point's own
//!    cross-validation fold, so the training DI shows what the validation saw;
//! 4. the threshold is the upper whisker of the training DI: the largest training DI that does not
//!    exceed `Q3 + 1.5 IQR`.
//!
//! A per-attribute training-range check complements the index: a node whose attribute lies outside
//! the range seen at the wells is flagged even when its DI is small.
//!
//! # Ground the wells do not sample ([`Ground`])
//!
//! The index above compares one row (one node at one step) with the training rows. On generated
//! fields a well-free region with its own history (the synthetic lobe) falls mostly inside that
//! area: at any one step its attributes lie within what the wells show. [`Ground`] adds a check of
//! the location as a whole, from two distances:
//!
//! - `g`, the distance from the node to the nearest well in units of the well spacing (the median
//!   distance from a well to its nearest neighbour), the geographic distance that nearest-neighbour
//!   distance matching compares with the distances seen in cross-validation (Milà, Mateu, Pebesma &
//!   Meyer 2022, "Nearest neighbour distance matching Leave-One-Out Cross-Validation for map
//!   validation", Methods in Ecology and Evolution 13:1304-1316);
//! - `h`, the dissimilarity index of Meyer & Pebesma (2021) computed on the location's attribute
//!   history: every attribute at every step, each standardised with the wells' mean and standard
//!   deviation at that step, nearest well divided by the mean distance between wells.
//!
//! The score is `g h^2`: a location is unlike the ground the wells sample when it is both far from
//! them and unlike their histories; `h` enters squared because on the generated fields attribute
//! dissimilarity separated the lobe from the rest of the well-free ground better than distance
//! alone did (see DEVELOPERS.md for the measurements). As in Meyer & Pebesma (2021), the threshold
//! is the upper whisker of the scores the wells get in cross-validation: each well against the
//! wells outside its fold.
//!
//! # The area the main job writes
//!
//! A node is outside the area when its row DI exceeds the threshold, when [`Ground`] flags its
//! location, or when an attribute lies beyond the wells' range by more than [`RANGE_MARGIN`] of
//! that range's width ([`Applicability::with_range_margin`]; the plain range flagged scattered
//! nodes next to wells for the ends of a range that a few hundred noisy rows set). Density-based
//! alternatives on the histories (whitened principal components, k nearest wells, the share of
//! a node's nearest nodes in history space that lie near wells, after the local outlier factor
//! of Breunig, Kriegel, Ng & Sander 2000, "LOF: identifying density-based local outliers", ACM
//! SIGMOD) were measured and not kept (DEVELOPERS.md).
//!
//! # Why a node is flagged ([`Applicability::reasons`])
//!
//! Each node gets one code: [`REASON_INSIDE`] (0) inside the area; [`REASON_UNLIKE`] (1) unlike
//! every well (the row's DI above the threshold, or the location flagged by [`Ground`]);
//! [`REASON_RANGE`] (2) some attribute outside the training range; [`REASON_BOTH`] (3) both;
//! [`REASON_NO_DATA`] (255) an attribute is missing, so nothing is predicted there. The codes are
//! bits: [`REASON_MARKED`] (4) is added where the node lies inside an outline the user marked as
//! ground no well samples (`[area] unsampled`), so 4-7 are 0-3 plus "marked". Some unlike ground
//! shows in no attribute and at no unusual distance from the wells (DEVELOPERS.md measures a
//! culmination that even a classifier trained on its outline cannot find); only the user's
//! knowledge of the field can flag it.

use crate::grid::Grid;
use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Errors raised while building an applicability model.
#[derive(Debug, thiserror::Error)]
pub enum ApplicabilityError {
    /// Fewer than two training rows: no pairwise distance exists.
    #[error("the area of applicability needs at least 2 training rows, got {0}")]
    TooFewRows(usize),
    /// Lengths of the inputs disagree.
    #[error("{what}: expected {expected}, got {got}")]
    Shape {
        /// What disagrees.
        what: &'static str,
        /// Expected length.
        expected: usize,
        /// Length given.
        got: usize,
    },
    /// Every training point coincides after scaling (all weights zero or constant features).
    #[error("all training points coincide after scaling; the dissimilarity index is undefined")]
    Degenerate,
}

/// A fitted area-of-applicability model (serialisable with the calibrated model).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Applicability {
    /// Feature names, in column order.
    pub feature_names: Vec<String>,
    /// Training mean per feature.
    pub mean: Vec<f64>,
    /// Training standard deviation per feature (1 where a feature is constant).
    pub scale: Vec<f64>,
    /// Importance weight per feature (non-negative, sums to the number of features).
    pub weight: Vec<f64>,
    /// Scaled, weighted training points (rows x features, row-major).
    pub train: Vec<f64>,
    /// Mean pairwise distance between training points.
    pub mean_distance: f64,
    /// DI of each training point against points outside its fold.
    pub train_di: Vec<f64>,
    /// Threshold: upper whisker of `train_di`.
    pub threshold: f64,
    /// Training minimum per feature.
    pub min: Vec<f64>,
    /// Training maximum per feature.
    pub max: Vec<f64>,
    /// Features that take part in the range check (e.g. not the step index).
    pub range_checked: Vec<bool>,
    /// Tolerance of the range check as a fraction of each feature's training width: a value
    /// counts as outside the training range only beyond `[min - m w, max + m w]` (`w = max -
    /// min`). 0 (the default, and what models saved without it hold) is the plain range.
    #[serde(default)]
    pub range_margin: f64,
}

/// What the applicability model says about a set of locations.
#[derive(Clone, Debug, Default)]
pub struct Assessment {
    /// Dissimilarity index per row (`NaN` where a feature is missing).
    pub di: Vec<f64>,
    /// Number of range-checked attributes outside the training range per row.
    pub outside_range: Vec<u32>,
    /// True inside the area of applicability: DI at most the threshold and every checked
    /// attribute within the training range.
    pub inside: Vec<bool>,
}

impl Applicability {
    /// Fits the model.
    ///
    /// `x` holds the training rows (no missing values), `importance` one non-negative weight per
    /// feature (all zero falls back to equal weights), `fold` the cross-validation fold of each row
    /// and `range_checked` which features take part in the training-range check.
    pub fn fit(
        feature_names: &[String],
        x: ArrayView2<f64>,
        importance: &[f64],
        fold: &[usize],
        range_checked: &[bool],
    ) -> Result<Self, ApplicabilityError> {
        let (n, p) = x.dim();
        if n < 2 {
            return Err(ApplicabilityError::TooFewRows(n));
        }
        for (what, got) in [
            ("importance weights", importance.len()),
            ("feature names", feature_names.len()),
            ("range-check flags", range_checked.len()),
        ] {
            if got != p {
                return Err(ApplicabilityError::Shape {
                    what,
                    expected: p,
                    got,
                });
            }
        }
        if fold.len() != n {
            return Err(ApplicabilityError::Shape {
                what: "fold per training row",
                expected: n,
                got: fold.len(),
            });
        }
        let mean: Vec<f64> = (0..p).map(|c| x.column(c).mean().unwrap_or(0.0)).collect();
        let scale: Vec<f64> = (0..p)
            .map(|c| {
                let sd = x.column(c).std(1.0);
                if sd.is_finite() && sd > 0.0 { sd } else { 1.0 }
            })
            .collect();
        let clean: Vec<f64> = importance
            .iter()
            .map(|w| if w.is_finite() && *w > 0.0 { *w } else { 0.0 })
            .collect();
        let total: f64 = clean.iter().sum();
        let weight: Vec<f64> = if total > 0.0 {
            clean.iter().map(|w| w * p as f64 / total).collect()
        } else {
            vec![1.0; p]
        };
        let mut train = Vec::with_capacity(n * p);
        for row in x.axis_iter(Axis(0)) {
            for c in 0..p {
                train.push((row[c] - mean[c]) / scale[c] * weight[c]);
            }
        }
        let dist = |a: usize, b: usize| -> f64 {
            let (ra, rb) = (&train[a * p..(a + 1) * p], &train[b * p..(b + 1) * p]);
            ra.iter()
                .zip(rb)
                .map(|(u, v)| (u - v) * (u - v))
                .sum::<f64>()
                .sqrt()
        };
        // Mean pairwise distance, summed row by row in a fixed order.
        let row_sums: Vec<f64> = (0..n)
            .into_par_iter()
            .map(|a| ((a + 1)..n).map(|b| dist(a, b)).sum::<f64>())
            .collect();
        let pairs = (n * (n - 1) / 2) as f64;
        let mean_distance = row_sums.iter().sum::<f64>() / pairs;
        if mean_distance <= 0.0 || !mean_distance.is_finite() {
            return Err(ApplicabilityError::Degenerate);
        }
        let train_di: Vec<f64> = (0..n)
            .into_par_iter()
            .map(|a| {
                let d = (0..n)
                    .filter(|&b| fold[b] != fold[a])
                    .map(|b| dist(a, b))
                    .fold(f64::INFINITY, f64::min);
                d / mean_distance
            })
            .collect();
        let threshold = upper_whisker(&train_di);
        let min = (0..p)
            .map(|c| x.column(c).iter().copied().fold(f64::INFINITY, f64::min))
            .collect();
        let max = (0..p)
            .map(|c| {
                x.column(c)
                    .iter()
                    .copied()
                    .fold(f64::NEG_INFINITY, f64::max)
            })
            .collect();
        Ok(Self {
            feature_names: feature_names.to_vec(),
            mean,
            scale,
            weight,
            train,
            mean_distance,
            train_di,
            threshold,
            min,
            max,
            range_checked: range_checked.to_vec(),
            range_margin: 0.0,
        })
    }

    /// The same model with a range-check tolerance of `margin` (a fraction of each feature's
    /// training width, see [`Applicability::range_margin`]; negative or non-finite values give 0).
    pub fn with_range_margin(mut self, margin: f64) -> Self {
        self.range_margin = if margin.is_finite() && margin > 0.0 {
            margin
        } else {
            0.0
        };
        self
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.mean.len()
    }

    /// Assesses every row of `x` (same columns as the training rows). Rows are independent, so
    /// the result does not depend on the thread count or on row order.
    pub fn assess(&self, x: ArrayView2<f64>) -> Assessment {
        let p = self.n_features();
        let n_train = self.train.len() / p.max(1);
        // Rows are taken in chunks; within a chunk the nearest training row of the previous row
        // is measured first, so that the early exit below prunes more (neighbouring grid nodes
        // are alike). The minimum distance, and so the result, does not depend on that order:
        // every pair's distance is summed in the same order and only full sums can lower it.
        const CHUNK: usize = 512;
        let n = x.nrows();
        let rows: Vec<(f64, u32)> = (0..n.div_ceil(CHUNK))
            .into_par_iter()
            .flat_map_iter(|c| {
                let mut z = vec![0.0; p];
                let mut hint = 0usize;
                let mut out = Vec::with_capacity(CHUNK);
                for r in c * CHUNK..((c + 1) * CHUNK).min(n) {
                    let row = x.row(r);
                    let m = self.range_margin;
                    let mut outside = 0u32;
                    let mut finite = true;
                    for c in 0..p {
                        let v = row[c];
                        if !v.is_finite() {
                            finite = false;
                            break;
                        }
                        z[c] = (v - self.mean[c]) / self.scale[c] * self.weight[c];
                        let tol = m * (self.max[c] - self.min[c]);
                        if self.range_checked[c] && (v < self.min[c] - tol || v > self.max[c] + tol)
                        {
                            outside += 1;
                        }
                    }
                    if !finite {
                        out.push((f64::NAN, 0));
                        continue;
                    }
                    let dist = |t: usize, best: f64| -> f64 {
                        let tr = &self.train[t * p..(t + 1) * p];
                        let mut s = 0.0;
                        for c in 0..p {
                            let d = z[c] - tr[c];
                            s += d * d;
                            if s >= best {
                                return f64::INFINITY;
                            }
                        }
                        s
                    };
                    let mut best = if n_train > 0 {
                        dist(hint, f64::INFINITY)
                    } else {
                        f64::INFINITY
                    };
                    for t in 0..n_train {
                        let s = dist(t, best);
                        if s < best {
                            best = s;
                            hint = t;
                        }
                    }
                    out.push((best.sqrt() / self.mean_distance, outside));
                }
                out
            })
            .collect();
        let di: Vec<f64> = rows.iter().map(|r| r.0).collect();
        let outside_range: Vec<u32> = rows.iter().map(|r| r.1).collect();
        let inside = rows
            .iter()
            .map(|&(d, o)| d.is_finite() && d <= self.threshold && o == 0)
            .collect();
        Assessment {
            di,
            outside_range,
            inside,
        }
    }
}

/// Range-check tolerance the main job uses ([`Applicability::with_range_margin`]): a value counts
/// as outside the training range when it lies beyond the wells' range by more than a tenth of that
/// range's width.
///
/// The trade-off, measured: against a tolerance of 0, it raises the lobe's flag precision from
/// 0.49 to 0.65 (seed 1, no gas cap, `tests/applicability/area.rs`) and moves silent misses on
/// `calib_bench` seeds 1-3 by less than 0.01, but on the smaller field of
/// `tests/calibrate/between_wells.rs` it lets more of the gas cap go silently missed (dSw 0.317 ->
/// 0.409, dSg 0.339 -> 0.385 of its nodes).
// common practice, no published source: a tolerance keeps the noise at the ends of a range of a
// few hundred rows from flagging nodes next to the wells (measured in DEVELOPERS.md).
pub const RANGE_MARGIN: f64 = 0.1;

/// Reason code: inside the area of applicability.
pub const REASON_INSIDE: u8 = 0;
/// Reason code: unlike every well (dissimilarity index above the threshold, or ground the wells do
/// not sample).
pub const REASON_UNLIKE: u8 = 1;
/// Reason code: at least one checked attribute outside the range seen at the wells.
pub const REASON_RANGE: u8 = 2;
/// Reason code: both unlike every well and outside the training range.
pub const REASON_BOTH: u8 = 3;
/// Reason bit: inside an outline the user marked as ground no well samples (added to 0-3).
pub const REASON_MARKED: u8 = 4;
/// Reason code: an attribute is missing at the node (no prediction is made there).
pub const REASON_NO_DATA: u8 = 255;

/// Location flag ([`Applicability::reasons`]'s `ground`): the location check finds the node's
/// ground unlike every well's ([`Ground::assess`]).
pub const GROUND_UNLIKE: u8 = 1;
/// Location flag: the node lies inside an outline the user marked as unsampled.
pub const GROUND_MARKED: u8 = REASON_MARKED;

/// Combines the two reasons into one code (see the module documentation).
pub fn reason_code(unlike: bool, outside_range: bool) -> u8 {
    u8::from(unlike) | (u8::from(outside_range) << 1)
}

impl Applicability {
    /// Why each row of `a` is flagged: one reason code per row ([`REASON_INSIDE`],
    /// [`REASON_UNLIKE`], [`REASON_RANGE`], [`REASON_BOTH`], or [`REASON_NO_DATA`] where the DI is
    /// undefined). `ground`, when given, holds one set of location flags per row (rows in the
    /// same node order): [`GROUND_UNLIKE`] from [`Ground::assess`] counts as "unlike every well",
    /// [`GROUND_MARKED`] adds [`REASON_MARKED`]. A row is inside exactly when its code is
    /// [`REASON_INSIDE`]; without `ground` that agrees with [`Assessment::inside`].
    ///
    /// # Panics
    /// If `ground` is given with a length other than the number of rows.
    pub fn reasons(&self, a: &Assessment, ground: Option<&[u8]>) -> Vec<u8> {
        if let Some(g) = ground {
            assert_eq!(g.len(), a.di.len(), "one ground flag per row");
        }
        a.di.iter()
            .zip(&a.outside_range)
            .enumerate()
            .map(|(r, (&di, &out))| {
                if !di.is_finite() {
                    return REASON_NO_DATA;
                }
                let flags = ground.map_or(0, |g| g[r]);
                let unlike = di > self.threshold || flags & GROUND_UNLIKE != 0;
                reason_code(unlike, out > 0) | (flags & GROUND_MARKED)
            })
            .collect()
    }
}

/// The attribute history of every node: one row per node (index order), the columns step by step,
/// each step's attributes in order (`maps[step][attribute][node]`). Missing values stay `NaN`.
pub fn node_histories(maps: &[Vec<Vec<f64>>], n_nodes: usize) -> Array2<f64> {
    let cols: Vec<&Vec<f64>> = maps.iter().flatten().collect();
    let mut x = Array2::from_elem((n_nodes, cols.len()), f64::NAN);
    for (c, map) in cols.iter().enumerate() {
        for (r, &v) in map.iter().enumerate().take(n_nodes) {
            x[[r, c]] = v;
        }
    }
    x
}

/// The attribute history at a point: every map of [`node_histories`]'s columns interpolated
/// bilinearly at `(x, y)` ([`Grid::bilinear`]); `NaN` outside the grid or next to a null node.
pub fn history_at(maps: &[Vec<Vec<f64>>], grid: &Grid, x: f64, y: f64) -> Vec<f64> {
    maps.iter()
        .flatten()
        .map(|m| grid.bilinear(m, x, y).unwrap_or(f64::NAN))
        .collect()
}

/// The well spacing: the median distance from a well to its nearest neighbour (upper median for
/// an even count). `NaN` with fewer than two distinct positions.
pub fn well_spacing(xy: &[[f64; 2]]) -> f64 {
    let nn: Vec<f64> = (0..xy.len())
        .map(|a| {
            (0..xy.len())
                .filter(|&b| b != a)
                .map(|b| planar(xy[a], xy[b]))
                .fold(f64::INFINITY, f64::min)
        })
        .filter(|d| d.is_finite() && *d > 0.0)
        .collect();
    if nn.is_empty() {
        return f64::NAN;
    }
    let mut s = nn;
    s.sort_by(f64::total_cmp);
    s[s.len() / 2]
}

fn planar(a: [f64; 2], b: [f64; 2]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt()
}

/// Ground the wells do not sample: distance to the wells in well spacings combined with the
/// dissimilarity of the location's attribute history (module documentation). Serialisable.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Ground {
    /// Well spacing (median nearest-neighbour distance between wells), map units.
    pub spacing: f64,
    /// Well positions.
    pub wells_xy: Vec<[f64; 2]>,
    /// Mean of each history column over the wells.
    pub mean: Vec<f64>,
    /// Standard deviation of each history column over the wells (1 where constant).
    pub scale: Vec<f64>,
    /// Standardised well histories, wells x columns, row-major.
    pub wells: Vec<f64>,
    /// Mean distance between well histories.
    pub mean_distance: f64,
    /// Power of the history dissimilarity in the score `g h^exponent`.
    pub exponent: f64,
    /// Cross-validated score of each well (against wells outside its fold).
    pub train_score: Vec<f64>,
    /// Threshold: upper whisker of `train_score`.
    pub threshold: f64,
}

/// What [`Ground`] says about each node.
#[derive(Clone, Debug, Default)]
pub struct GroundAssessment {
    /// Distance to the nearest well, in well spacings.
    pub distance: Vec<f64>,
    /// Dissimilarity index of the attribute history (`NaN` where a value is missing).
    pub dissimilarity: Vec<f64>,
    /// Score `distance * dissimilarity^exponent`.
    pub score: Vec<f64>,
    /// True where the score exceeds the threshold (never where it is undefined).
    pub unlike: Vec<bool>,
}

impl Ground {
    /// Default power of the history dissimilarity in the score.
    pub const EXPONENT: f64 = 2.0;

    /// Fits the model on the wells: one position, one attribute history ([`history_at`]) and one
    /// cross-validation fold per well. Wells with a missing history value are left out of the
    /// history part but still count for distances. Needs at least two wells with a full history
    /// at distinct positions.
    pub fn fit(
        wells_xy: &[[f64; 2]],
        histories: ArrayView2<f64>,
        fold: &[usize],
    ) -> Result<Self, ApplicabilityError> {
        Self::fit_with_exponent(wells_xy, histories, fold, Self::EXPONENT)
    }

    /// [`Ground::fit`] with another power of the history dissimilarity in the score (0 gives
    /// distance alone).
    pub fn fit_with_exponent(
        wells_xy: &[[f64; 2]],
        histories: ArrayView2<f64>,
        fold: &[usize],
        exponent: f64,
    ) -> Result<Self, ApplicabilityError> {
        let n = wells_xy.len();
        for (what, got) in [
            ("well histories", histories.nrows()),
            ("fold per well", fold.len()),
        ] {
            if got != n {
                return Err(ApplicabilityError::Shape {
                    what,
                    expected: n,
                    got,
                });
            }
        }
        let full: Vec<usize> = (0..n)
            .filter(|&w| histories.row(w).iter().all(|v| v.is_finite()))
            .collect();
        if full.len() < 2 {
            return Err(ApplicabilityError::TooFewRows(full.len()));
        }
        let spacing = well_spacing(wells_xy);
        if !spacing.is_finite() {
            return Err(ApplicabilityError::Degenerate);
        }
        let q = histories.ncols();
        let m = full.len() as f64;
        let mean: Vec<f64> = (0..q)
            .map(|c| full.iter().map(|&w| histories[[w, c]]).sum::<f64>() / m)
            .collect();
        let scale: Vec<f64> = (0..q)
            .map(|c| {
                let v = full
                    .iter()
                    .map(|&w| (histories[[w, c]] - mean[c]).powi(2))
                    .sum::<f64>()
                    / (m - 1.0);
                let sd = v.sqrt();
                if sd.is_finite() && sd > 0.0 { sd } else { 1.0 }
            })
            .collect();
        let mut wells = vec![f64::NAN; n * q];
        for &w in &full {
            for c in 0..q {
                wells[w * q + c] = (histories[[w, c]] - mean[c]) / scale[c];
            }
        }
        let hist = |a: usize, b: usize| -> f64 {
            (0..q)
                .map(|c| (wells[a * q + c] - wells[b * q + c]).powi(2))
                .sum::<f64>()
                .sqrt()
        };
        let mut sum = 0.0;
        let mut pairs = 0usize;
        for (k, &a) in full.iter().enumerate() {
            for &b in &full[k + 1..] {
                sum += hist(a, b);
                pairs += 1;
            }
        }
        let mean_distance = sum / pairs as f64;
        if !(mean_distance > 0.0 && mean_distance.is_finite()) {
            return Err(ApplicabilityError::Degenerate);
        }
        let train_score: Vec<f64> = full
            .iter()
            .map(|&a| {
                let others = full.iter().copied().filter(|&b| fold[b] != fold[a]);
                let g = (0..n)
                    .filter(|&b| fold[b] != fold[a])
                    .map(|b| planar(wells_xy[a], wells_xy[b]))
                    .fold(f64::INFINITY, f64::min)
                    / spacing;
                let h = others.map(|b| hist(a, b)).fold(f64::INFINITY, f64::min) / mean_distance;
                g * h.powf(exponent)
            })
            .collect();
        let threshold = upper_whisker(&train_score);
        Ok(Self {
            spacing,
            wells_xy: wells_xy.to_vec(),
            mean,
            scale,
            wells,
            mean_distance,
            exponent,
            train_score,
            threshold,
        })
    }

    /// Assesses nodes: positions and attribute histories ([`node_histories`]), one row per node.
    /// Nodes are independent, so the result does not depend on the thread count.
    ///
    /// # Panics
    /// If `xy` and `histories` differ in length or the history has the wrong number of columns.
    pub fn assess(&self, xy: &[[f64; 2]], histories: ArrayView2<f64>) -> GroundAssessment {
        let q = self.mean.len();
        assert_eq!(xy.len(), histories.nrows(), "one history per node");
        assert_eq!(histories.ncols(), q, "history columns");
        let full: Vec<usize> = (0..self.wells_xy.len())
            .filter(|&w| self.wells[w * q].is_finite())
            .collect();
        let rows: Vec<(f64, f64)> = (0..xy.len())
            .into_par_iter()
            .map(|r| {
                let g = self
                    .wells_xy
                    .iter()
                    .map(|&w| planar(xy[r], w))
                    .fold(f64::INFINITY, f64::min)
                    / self.spacing;
                let row = histories.row(r);
                if row.iter().any(|v| !v.is_finite()) {
                    return (g, f64::NAN);
                }
                let z: Vec<f64> = (0..q)
                    .map(|c| (row[c] - self.mean[c]) / self.scale[c])
                    .collect();
                let best = full
                    .iter()
                    .map(|&w| {
                        let t = &self.wells[w * q..(w + 1) * q];
                        z.iter().zip(t).map(|(a, b)| (a - b) * (a - b)).sum::<f64>()
                    })
                    .fold(f64::INFINITY, f64::min);
                (g, best.sqrt() / self.mean_distance)
            })
            .collect();
        let distance: Vec<f64> = rows.iter().map(|r| r.0).collect();
        let dissimilarity: Vec<f64> = rows.iter().map(|r| r.1).collect();
        let score: Vec<f64> = rows
            .iter()
            .map(|&(g, h)| g * h.powf(self.exponent))
            .collect();
        let unlike = score.iter().map(|&s| s > self.threshold).collect();
        GroundAssessment {
            distance,
            dissimilarity,
            score,
            unlike,
        }
    }
}

/// Quartiles by linear interpolation between order statistics (the default "type 7" of R's
/// `quantile` and of numpy).
pub fn quantile_type7(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Upper whisker of a box plot (Tukey): the largest value not above `Q3 + 1.5 IQR`.
/// Non-finite values are ignored; an empty input gives `NaN`.
pub fn upper_whisker(values: &[f64]) -> f64 {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let q1 = quantile_type7(&v, 0.25);
    let q3 = quantile_type7(&v, 0.75);
    let fence = q3 + 1.5 * (q3 - q1);
    v.iter()
        .copied()
        .filter(|&x| x <= fence)
        .fold(f64::NEG_INFINITY, f64::max)
}

/// Convenience: builds a training matrix from row slices (used by tests and examples).
pub fn matrix(rows: &[Vec<f64>]) -> Array2<f64> {
    let p = rows.first().map_or(0, Vec::len);
    let flat: Vec<f64> = rows.iter().flat_map(|r| r.iter().copied()).collect();
    Array2::from_shape_vec((rows.len(), p), flat).expect("rows of equal length")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn whisker_matches_boxplot_definition() {
        // R 4.x: x <- c(1:9, 30); boxplot.stats(x)$stats[5] == 9 (the outlier 30 lies beyond
        // Q3 + 1.5 IQR = 7.75 + 1.5 * 4.5 = 14.5). Quartiles here are type 7 (R's default):
        // quantile(x, c(.25, .75)) = 3.25, 7.75.
        let x: Vec<f64> = (1..=9).map(f64::from).chain([30.0]).collect();
        let mut s = x.clone();
        s.sort_by(f64::total_cmp);
        assert!((quantile_type7(&s, 0.25) - 3.25).abs() < 1e-12);
        assert!((quantile_type7(&s, 0.75) - 7.75).abs() < 1e-12);
        assert_eq!(upper_whisker(&x), 9.0);
    }

    #[test]
    fn di_by_hand_on_a_line() {
        // Training points 0, 1, 3 on one feature (sd = sqrt(7/3)), equal weights, each its own
        // fold. Pairwise distances 1, 3, 2 -> mean 2 (in raw units); the DI is scale free.
        let names = vec!["a".to_string()];
        let x = matrix(&[vec![0.0], vec![1.0], vec![3.0]]);
        let aoa = Applicability::fit(&names, x.view(), &[1.0], &[0, 1, 2], &[true]).unwrap();
        // Training DI: nearest other point 1, 1, 2 -> 0.5, 0.5, 1.0.
        for (got, want) in aoa.train_di.iter().zip([0.5, 0.5, 1.0]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
        let a = aoa.assess(matrix(&[vec![2.0], vec![7.0], vec![f64::NAN]]).view());
        // 2.0: nearest 1 or 3 at distance 1 -> 0.5; 7.0: nearest 3 at 4 -> 2.0.
        assert!((a.di[0] - 0.5).abs() < 1e-12);
        assert!((a.di[1] - 2.0).abs() < 1e-12);
        assert!(a.di[2].is_nan());
        assert!(a.inside[0] && !a.inside[1] && !a.inside[2]);
        assert_eq!(a.outside_range, vec![0, 1, 0]);
    }

    #[test]
    fn chunked_search_equals_brute_force_and_row_order() {
        // 1,300 query rows (three chunks) on a smooth path, 40 training rows, 3 features:
        // the nearest-neighbour DI must equal a plain search over every training row, and
        // reversing the query rows must reverse the answers.
        let pseudo = |k: usize| ((k as f64 * 12.9898).sin() * 43758.5453).fract();
        let train: Vec<Vec<f64>> = (0..40)
            .map(|i| (0..3).map(|c| pseudo(i * 3 + c) * (c + 1) as f64).collect())
            .collect();
        let x = matrix(&train);
        let fold: Vec<usize> = (0..40).map(|i| i % 5).collect();
        let aoa = Applicability::fit(
            &["a".into(), "b".into(), "c".into()],
            x.view(),
            &[1.0, 2.0, 0.5],
            &fold,
            &[true; 3],
        )
        .unwrap();
        let q: Vec<Vec<f64>> = (0..1300)
            .map(|r| {
                let t = r as f64 / 1300.0;
                vec![t * 1.2 - 0.1, (6.0 * t).sin() + 1.0, 3.0 * t * t]
            })
            .collect();
        let got = aoa.assess(matrix(&q).view());
        let p = 3;
        for (r, row) in q.iter().enumerate() {
            let z: Vec<f64> = (0..p)
                .map(|c| (row[c] - aoa.mean[c]) / aoa.scale[c] * aoa.weight[c])
                .collect();
            let best = (0..40)
                .map(|t| {
                    (0..p)
                        .map(|c| (z[c] - aoa.train[t * p + c]).powi(2))
                        .sum::<f64>()
                })
                .fold(f64::INFINITY, f64::min);
            let want = best.sqrt() / aoa.mean_distance;
            assert!((got.di[r] - want).abs() <= 1e-12 * want.max(1.0), "row {r}");
        }
        let rev: Vec<Vec<f64>> = q.iter().rev().cloned().collect();
        let back = aoa.assess(matrix(&rev).view());
        let mut di = back.di.clone();
        di.reverse();
        assert_eq!(di, got.di);
    }

    #[test]
    fn too_few_rows_is_an_error() {
        let x = matrix(&[vec![1.0]]);
        let e = Applicability::fit(&["a".into()], x.view(), &[1.0], &[0], &[true]);
        assert!(matches!(e, Err(ApplicabilityError::TooFewRows(1))));
    }
}
