//! Conformal bands from held-out-well scores.
//!
//! **Split conformal** (Vovk, Gammerman & Shafer 2005; Lei, G'Sell, Rinaldo, Tibshirani & Wasserman
//! 2018, JASA 113:1094): with `n` calibration scores, the `ceil((n+1)(1-a))`-th smallest bounds a
//! new score with probability at least `1-a`, and at most `1-a+1/(n+1)` for distinct scores. Each
//! band edge is calibrated on its own side at `a/2` (the asymmetric form of Romano, Patterson &
//! Candes 2019, Theorem 2), so that the lower edge is a calibrated `a/2` quantile (P10 at the
//! default level) and the upper edge a calibrated `1-a/2` quantile (P90).
//!
//! **Wells as units.** Rows of a well are not exchangeable with each other, wells are. Every row
//! carries weight `1/(rows of its well)` (see [`super::units::well_unit_weights`]), so each well counts
//! once; `n` is the total weight and the quantile is the smallest score whose cumulative weight
//! reaches `(1-a/2)(n+1)`. This is the "pooled CDF" construction for hierarchical data (Dunn,
//! Wasserman & Ramdas, JASA 2023); it reduces to the ordinary rule when every well has one row.
//! The expected fraction of a new well's rows inside the band is at least `1-a`.
//!
//! **Scores.** Each row has a base band `[b_lo, b_hi]` around its prediction and a scale `s > 0`;
//! the scores are `(b_lo - y)/s` and `(y - b_hi)/s`, and the band is
//! `[b_lo - Q_lo s, b_hi + Q_hi s]`.
//! - [`BandMethod::CvResidual`]: `b_lo = b_hi = mid`, `s = 1`: residuals of the corrected
//!   predictor on held-out wells, the band centred on the predictor. This is the K-fold "CV"
//!   band that Barber, Candes, Ramdas & Tibshirani (2021, Ann. Stat. 49:486) set beside CV+; it
//!   needs one final model at prediction time instead of the K fold models CV+ needs at every
//!   grid node.
//! - [`BandMethod::Cqr`]: conformalised quantile regression (Romano, Patterson & Candes 2019,
//!   NeurIPS): `b_lo`, `b_hi` are conditional quantiles, `s = 1`.
//! - [`BandMethod::Normalized`]: `b_lo = b_hi = mid` with `s` a local spread (locally weighted
//!   split conformal; Papadopoulos, Gammerman & Vovk 2008; Lei et al. 2018 sec. 5.2), so the
//!   width follows the local uncertainty.
//!
//! **Ends.** Scores are calibrated separately in Mondrian bins of the predicted value (Vovk et al.
//! 2005, ch. 4.5), starting from `max_bins` equal-weight bins and merging the smallest bin into its
//! smaller neighbour until every bin holds enough wells. Every bin pays the finite-sample price
//! of conformal validity (about `1/(n_bin + 1)` extra coverage per edge), so bins are worth it only
//! when the scores differ between them; the calibration step chooses the number of bins by the
//! out-of-fold interval score.
//!
//! **Localised quantiles.** Wells sit where the reservoir changed and most grid nodes did not, so
//! the wells' score population is not a typical node's. A localised band weighs each held-out-well
//! score by the query's likeness to that row, read from the forest: the quantile-forest weights
//! `w_i(x)` (Meinshausen 2006, JMLR 7:983), as Lu & Hardin (2021, "A unified framework for random
//! forest prediction error estimation", JMLR 22(8)) weight out-of-bag errors to estimate the
//! error distribution at `x`. Row `i` weighs `v_i(x) = (1 - l) u_i + l N w_i(x)` (`u_i` its
//! well-unit weight, `N` the number of wells, `l` the locality) and the edge is the weighted
//! conformal quantile of Tibshirani, Barber, Candes & Ramdas (2019, "Conformal prediction under
//! covariate shift", NeurIPS; [`weighted_conformal_quantile`]) with the new node's point mass of
//! one well at `+inf`, the localised form of Guan (2023, "Localized conformal prediction",
//! Biometrika 110:33). At `l = 0` this is the global rule above with its finite-sample guarantee;
//! for `l > 0` the weights depend on the query and the guarantee is only approximate (the
//! neighbourhoods of a few dozen wells are small), so the calibration step checks the candidates
//! on held-out wells ([`Localisation`], [`cross_fitted_local_band`]).
//!
//! **Too few wells.** When `ceil((n+1)(1-a/2)) > n` the data cannot back a finite edge at the
//! requested level; the edge is then the target's physical bound and the band is flagged.

use super::units::pick;
use serde::{Deserialize, Serialize};

/// The calibration rows as units, defined in [`super::units`] and kept here under their old path.
pub use super::units::Units;

/// Which conformity scores make the band.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum BandMethod {
    /// Held-out-well residuals of the corrected predictor; band `[mid - Q_lo, mid + Q_hi]`.
    CvResidual,
    /// Conformalised quantile regression on the forest's quantiles; band `[q_lo - Q_lo, q_hi + Q_hi]`.
    Cqr,
    /// Residuals scaled by a local spread `s`; band `[mid - Q_lo s, mid + Q_hi s]`.
    Normalized,
}

/// Tolerance on cumulative weights (guards `0.9 * 10 = 9.000000000000002`).
const WEIGHT_EPS: f64 = 1e-9;

/// Weighted split-conformal quantile: the smallest score whose cumulative weight (scores in
/// increasing order) reaches `(1 - alpha) (n + 1)`, where `n` is the total weight. `None` when the
/// total weight is too small for that (the quantile is `+inf`), or when there are no scores.
///
/// With unit weights this is the `ceil((n+1)(1-alpha))`-th smallest score (Lei et al. 2018). It
/// is [`weighted_conformal_quantile`] with a test weight of one (the new well weighs as much as a
/// calibration well).
pub fn conformal_quantile(scores: &[f64], weights: &[f64], alpha: f64) -> Option<f64> {
    weighted_conformal_quantile(scores, weights, 1.0, alpha)
}

/// Weighted conformal quantile (Tibshirani, Barber, Candes & Ramdas 2019, "Conformal prediction
/// under covariate shift", NeurIPS, eq. 7): the `1 - alpha` quantile of the distribution
/// `sum_i p_i delta(s_i) + p_test delta(+inf)` with `p_i = w_i / (sum_j w_j + w_test)` and
/// `p_test = w_test / (sum_j w_j + w_test)`; that is, the smallest score whose cumulative weight
/// reaches `(1 - alpha) (sum_j w_j + w_test)`. `None` when only the point mass at `+inf` gets
/// there. Scores or weights that are not finite, and weights `<= 0`, are left out.
pub fn weighted_conformal_quantile(
    scores: &[f64],
    weights: &[f64],
    test_weight: f64,
    alpha: f64,
) -> Option<f64> {
    let mut pairs: Vec<(f64, f64)> = scores
        .iter()
        .zip(weights)
        .filter(|(s, w)| s.is_finite() && w.is_finite() && **w > 0.0)
        .map(|(&s, &w)| (s, w))
        .collect();
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    quantile_of_sorted(pairs.into_iter(), test_weight, alpha)
}

/// [`weighted_conformal_quantile`] of `(score, weight)` pairs already in increasing score order
/// (pairs with a weight `<= 0` add nothing).
fn quantile_of_sorted(
    pairs: impl Iterator<Item = (f64, f64)> + Clone,
    test_weight: f64,
    alpha: f64,
) -> Option<f64> {
    let total: f64 = pairs.clone().map(|p| p.1.max(0.0)).sum();
    if total <= 0.0 {
        return None;
    }
    let target = (1.0 - alpha) * (total + test_weight.max(0.0));
    if total < target - WEIGHT_EPS {
        return None;
    }
    let mut cum = 0.0;
    let mut last = None;
    for (s, w) in pairs {
        if w <= 0.0 {
            continue;
        }
        cum += w;
        last = Some(s);
        if cum >= target - WEIGHT_EPS {
            return Some(s);
        }
    }
    last
}

/// Whether `n` wells (total unit weight) can back a finite two-sided band at `level`:
/// `ceil((n+1)(1-a/2)) <= n` with `a = 1 - level`.
pub fn finite_band_possible(n_wells: f64, level: f64) -> bool {
    let a = 1.0 - level;
    (n_wells + 1.0) * (1.0 - a / 2.0) <= n_wells + WEIGHT_EPS
}

/// The fewest wells that can back a finite two-sided band at `level` (9 at the default 0.8).
pub fn min_wells_for_band(level: f64) -> usize {
    let a = 1.0 - level;
    if a <= 0.0 {
        return usize::MAX;
    }
    // (n+1)(1-a/2) <= n  <=>  n >= (1-a/2)/(a/2) = 2/a - 1
    let mut n = ((2.0 / a) - 1.0).floor().max(1.0) as usize;
    while !finite_band_possible(n as f64, level) {
        n += 1;
    }
    n
}

fn one() -> f64 {
    1.0
}

/// Mondrian bins of the predicted value: `edges.len() + 1` bins; bin `i` holds values in
/// `(edges[i-1], edges[i]]`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MondrianBins {
    /// Interior cut points, strictly increasing.
    pub edges: Vec<f64>,
}

impl MondrianBins {
    /// One bin holding everything.
    pub fn single() -> Self {
        Self { edges: Vec::new() }
    }

    /// Number of bins.
    pub fn len(&self) -> usize {
        self.edges.len() + 1
    }

    /// Always false: there is at least one bin.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Bin of a predicted value (`NaN` goes to bin 0).
    pub fn bin(&self, v: f64) -> usize {
        if v.is_nan() {
            return 0;
        }
        self.edges.partition_point(|&e| e < v)
    }

    /// Build bins from predicted values: `max_bins` bins at equal-weight quantiles of `pred` (each
    /// row weighing its unit weight), then the bin with the least weight is merged into its lighter neighbour
    /// until every bin holds at least `min_wells` wells of weight.
    pub fn build(pred: &[f64], units: &Units, max_bins: usize, min_wells: f64) -> Self {
        let w = &units.weight;
        let mut pw: Vec<(f64, f64)> = pred
            .iter()
            .zip(w)
            .filter(|(p, _)| p.is_finite())
            .map(|(&p, &w)| (p, w))
            .collect();
        if pw.is_empty() || max_bins <= 1 {
            return Self::single();
        }
        pw.sort_by(|a, b| a.0.total_cmp(&b.0));
        let total: f64 = pw.iter().map(|p| p.1).sum();
        let mut edges: Vec<f64> = Vec::new();
        for j in 1..max_bins {
            let target = total * j as f64 / max_bins as f64;
            let mut cum = 0.0;
            for &(p, wi) in &pw {
                cum += wi;
                if cum >= target - WEIGHT_EPS {
                    if edges.last().is_none_or(|&l| p > l) && p < pw[pw.len() - 1].0 {
                        edges.push(p);
                    }
                    break;
                }
            }
        }
        let mut bins = Self { edges };
        loop {
            if bins.edges.is_empty() {
                break;
            }
            let mut weight = vec![0.0; bins.len()];
            for &(p, wi) in &pw {
                weight[bins.bin(p)] += wi;
            }
            let (light, lw) = weight
                .iter()
                .enumerate()
                .fold(
                    (0, f64::INFINITY),
                    |acc, (i, &v)| if v < acc.1 { (i, v) } else { acc },
                );
            if lw + WEIGHT_EPS >= min_wells {
                break;
            }
            // Merge with the lighter neighbour: remove the edge between them.
            let merge_left =
                light > 0 && (light == bins.len() - 1 || weight[light - 1] <= weight[light + 1]);
            let edge = if merge_left { light - 1 } else { light };
            bins.edges.remove(edge);
        }
        bins
    }
}

/// Facts about one Mondrian bin of a calibrated band.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BinInfo {
    /// Lower edge of the bin on the predicted value (exclusive); `None` for the lowest bin.
    pub lower: Option<f64>,
    /// Upper edge (inclusive); `None` for the highest bin.
    pub upper: Option<f64>,
    /// Distinct wells with at least one row in the bin.
    pub wells: usize,
    /// Total well weight in the bin (each well weighs one, shared among its rows): the `n` of the
    /// conformal rule.
    pub well_weight: f64,
    /// Rows in the bin.
    pub rows: usize,
    /// Conformal quantile of the lower-side scores; `None` when the bin cannot back a finite edge.
    pub q_lo: Option<f64>,
    /// Conformal quantile of the upper-side scores; `None` likewise.
    pub q_hi: Option<f64>,
}

/// A calibrated band: scores' conformal quantiles per Mondrian bin.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandCalibration {
    /// Which scores.
    pub method: BandMethod,
    /// Nominal level of the two-sided band.
    pub level: f64,
    /// Bins of the predicted value.
    pub bins: MondrianBins,
    /// Per-bin facts and quantiles.
    pub bin_info: Vec<BinInfo>,
    /// Localised quantiles (forest-proximity weights), when this band uses them; the per-bin
    /// quantiles are then those of a single bin and serve the finiteness check.
    #[serde(default)]
    pub local: Option<Localisation>,
}

/// Held-out-well scores kept for localised quantiles: each query weighs calibration row `i` by
/// `v_i(x) = (1 - locality) u_i + locality N w_i(x)`, where `u_i` is the row's well-unit weight,
/// `N = sum_i u_i` the number of wells and `w_i(x)` the forest's quantile weights (summing to one
/// over the calibration rows, which are the final forest's training rows in the same order). The
/// new node carries a point mass of one well at `+inf` (see the module docs).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Localisation {
    /// Share of the proximity weights, in (0, 1]; 0 would be the global band.
    pub locality: f64,
    /// Unit weight `u_i` of every calibration row, in row order.
    pub unit_weights: Vec<f64>,
    /// Weight of the new node's point mass at `+inf` (one well when there is no covariate
    /// shift; see [`Units`]).
    #[serde(default = "one")]
    pub test_weight: f64,
    /// Calibration rows in increasing order of their lower-side score.
    pub lo_rows: Vec<u32>,
    /// Lower-side scores in increasing order (finite only).
    pub lo_scores: Vec<f64>,
    /// Calibration rows in increasing order of their upper-side score.
    pub hi_rows: Vec<u32>,
    /// Upper-side scores in increasing order (finite only).
    pub hi_scores: Vec<f64>,
}

impl Localisation {
    /// Keep the scores of the calibration rows (`s_lo`, `s_hi`, `units` in row order).
    pub fn new(locality: f64, s_lo: &[f64], s_hi: &[f64], units: &Units) -> Self {
        let sorted = |s: &[f64]| -> (Vec<u32>, Vec<f64>) {
            let mut idx: Vec<u32> = (0..s.len() as u32)
                .filter(|&i| s[i as usize].is_finite())
                .collect();
            idx.sort_by(|&a, &b| s[a as usize].total_cmp(&s[b as usize]));
            let v = idx.iter().map(|&i| s[i as usize]).collect();
            (idx, v)
        };
        let (lo_rows, lo_scores) = sorted(s_lo);
        let (hi_rows, hi_scores) = sorted(s_hi);
        Self {
            locality,
            unit_weights: units.weight.clone(),
            test_weight: units.test_weight,
            lo_rows,
            lo_scores,
            hi_rows,
            hi_scores,
        }
    }

    /// Localised conformal quantiles `(Q_lo, Q_hi)` at side level `alpha_side` for a query whose
    /// forest weights over the calibration rows are `prox` (row order; a shorter or longer
    /// slice is read as zeros / cut). `None` where only the point mass at `+inf` reaches the
    /// level.
    pub fn quantiles(&self, prox: &[f64], alpha_side: f64) -> (Option<f64>, Option<f64>) {
        let lam = self.locality;
        let n_w: f64 = self.unit_weights.iter().sum();
        let weight = |r: u32| -> f64 {
            let r = r as usize;
            (1.0 - lam) * self.unit_weights[r] + lam * n_w * prox.get(r).copied().unwrap_or(0.0)
        };
        let lo = self
            .lo_scores
            .iter()
            .zip(&self.lo_rows)
            .map(|(&s, &r)| (s, weight(r)));
        let hi = self
            .hi_scores
            .iter()
            .zip(&self.hi_rows)
            .map(|(&s, &r)| (s, weight(r)));
        (
            quantile_of_sorted(lo, self.test_weight, alpha_side),
            quantile_of_sorted(hi, self.test_weight, alpha_side),
        )
    }
}

/// One row's inputs to a band: the predicted value, the base edges the scores refer to (`mid`
/// itself for [`BandMethod::CvResidual`] and [`BandMethod::Normalized`], forest quantiles for
/// [`BandMethod::Cqr`]) and the scale of the scores (1 except for `Normalized`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BandBase {
    /// Corrected point prediction (decides the Mondrian bin).
    pub mid: f64,
    /// Base lower edge.
    pub lo: f64,
    /// Base upper edge.
    pub hi: f64,
    /// Scale of the scores, > 0.
    pub scale: f64,
}

impl BandBase {
    /// A base centred on `mid` with unit scale (residual scores).
    pub fn centred(mid: f64) -> Self {
        Self {
            mid,
            lo: mid,
            hi: mid,
            scale: 1.0,
        }
    }
}

impl BandCalibration {
    /// Calibrate on held-out-well rows: `base` per row, truth `y`, the rows' `units`.
    /// `max_bins`/`min_wells` control the Mondrian bins; the effective minimum is never below
    /// [`min_wells_for_band`] so that a bin only exists if it can back a finite band.
    pub fn fit(
        method: BandMethod,
        base: &[BandBase],
        y: &[f64],
        units: &Units,
        level: f64,
        max_bins: usize,
        min_wells: usize,
    ) -> Self {
        let alpha_side = (1.0 - level) / 2.0;
        let mids: Vec<f64> = base.iter().map(|b| b.mid).collect();
        let need = min_wells.max(min_wells_for_band(level)) as f64;
        let bins = MondrianBins::build(&mids, units, max_bins, need);
        let (w, group) = (&units.weight, &units.group);
        let nb = bins.len();
        let mut s_lo: Vec<Vec<f64>> = vec![Vec::new(); nb];
        let mut s_hi: Vec<Vec<f64>> = vec![Vec::new(); nb];
        let mut wt: Vec<Vec<f64>> = vec![Vec::new(); nb];
        let mut wells: Vec<Vec<usize>> = vec![Vec::new(); nb];
        for i in 0..base.len().min(y.len()).min(group.len()) {
            let b = bins.bin(base[i].mid);
            s_lo[b].push((base[i].lo - y[i]) / base[i].scale);
            s_hi[b].push((y[i] - base[i].hi) / base[i].scale);
            wt[b].push(w[i]);
            wells[b].push(group[i]);
        }
        let bin_info = (0..nb)
            .map(|b| {
                let mut distinct = wells[b].clone();
                distinct.sort_unstable();
                distinct.dedup();
                BinInfo {
                    lower: if b == 0 {
                        None
                    } else {
                        Some(bins.edges[b - 1])
                    },
                    upper: bins.edges.get(b).copied(),
                    wells: distinct.len(),
                    well_weight: wt[b].iter().sum(),
                    rows: wt[b].len(),
                    q_lo: weighted_conformal_quantile(
                        &s_lo[b],
                        &wt[b],
                        units.test_weight,
                        alpha_side,
                    ),
                    q_hi: weighted_conformal_quantile(
                        &s_hi[b],
                        &wt[b],
                        units.test_weight,
                        alpha_side,
                    ),
                }
            })
            .collect();
        Self {
            method,
            level,
            bins,
            bin_info,
            local: None,
        }
    }

    /// Calibrate a localised band (one bin; see [`Localisation`]) on held-out-well rows, which
    /// must be the training rows of the forest whose weights [`Self::apply_local`] is given, in
    /// the same order.
    pub fn fit_local(
        method: BandMethod,
        base: &[BandBase],
        y: &[f64],
        units: &Units,
        level: f64,
        locality: f64,
    ) -> Self {
        let mut cal = Self::fit(method, base, y, units, level, 1, 1);
        let (s_lo, s_hi): (Vec<f64>, Vec<f64>) = base
            .iter()
            .zip(y)
            .map(|(b, &v)| ((b.lo - v) / b.scale, (v - b.hi) / b.scale))
            .unzip();
        cal.local = Some(Localisation::new(locality, &s_lo, &s_hi, units));
        cal
    }

    /// Band for one row of a localised calibration, with the row's forest weights `prox` over the
    /// calibration rows; as [`Self::apply`] when the calibration is not localised.
    pub fn apply_local(&self, base: BandBase, bounds: (f64, f64), prox: &[f64]) -> (f64, f64, f64) {
        match &self.local {
            Some(l) => {
                let (q_lo, q_hi) = l.quantiles(prox, (1.0 - self.level) / 2.0);
                self.apply_quantiles(base, bounds, q_lo, q_hi)
            }
            None => self.apply(base, bounds),
        }
    }

    /// Band for one row from given side quantiles (`None`: the physical bound).
    pub fn apply_quantiles(
        &self,
        base: BandBase,
        bounds: (f64, f64),
        q_lo: Option<f64>,
        q_hi: Option<f64>,
    ) -> (f64, f64, f64) {
        let lo = q_lo.map_or(bounds.0, |q| base.lo - q * base.scale);
        let hi = q_hi.map_or(bounds.1, |q| base.hi + q * base.scale);
        order_within_bounds(lo, base.mid, hi, bounds)
    }

    /// True when some bin cannot back a finite edge (that edge falls back to the bound).
    pub fn too_few_wells(&self) -> bool {
        self.bin_info
            .iter()
            .any(|b| b.q_lo.is_none() || b.q_hi.is_none())
    }

    /// Band for one row: `(lo, mid, hi)` inside `bounds` with `lo <= mid <= hi`. An edge whose bin
    /// cannot back it is the physical bound.
    pub fn apply(&self, base: BandBase, bounds: (f64, f64)) -> (f64, f64, f64) {
        let info = &self.bin_info[self.bins.bin(base.mid).min(self.bin_info.len() - 1)];
        self.apply_quantiles(base, bounds, info.q_lo, info.q_hi)
    }
}

/// Clip `mid` to the bounds, then make `lo <= mid <= hi` inside the bounds (an edge on the wrong
/// side of the middle moves to the middle, which can only widen the band).
pub fn order_within_bounds(lo: f64, mid: f64, hi: f64, bounds: (f64, f64)) -> (f64, f64, f64) {
    let clip = |v: f64| v.clamp(bounds.0, bounds.1);
    let mid = clip(mid);
    let lo = if lo.is_nan() {
        bounds.0
    } else {
        clip(lo.min(mid))
    };
    let hi = if hi.is_nan() {
        bounds.1
    } else {
        clip(hi.max(mid))
    };
    (lo, mid, hi)
}

/// Cross-fitted band on out-of-fold rows: the rows of fold `k` get the band calibrated on the rows
/// of all other folds, so no row's band saw that row. Returns `(lo, hi, too_few)` per row, where
/// `too_few` marks rows whose band fell back to a bound.
#[allow(clippy::too_many_arguments)]
pub fn cross_fitted_band(
    method: BandMethod,
    folds: &[usize],
    base: &[BandBase],
    y: &[f64],
    units: &Units,
    level: f64,
    max_bins: usize,
    min_wells: usize,
    bounds: (f64, f64),
) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
    cross_fit(
        folds,
        bounds,
        |train| {
            BandCalibration::fit(
                method,
                &pick(base, train),
                &pick(y, train),
                &units.pick(train),
                level,
                max_bins,
                min_wells,
            )
        },
        |cal, i| {
            let (l, _, h) = cal.apply(base[i], bounds);
            let info = &cal.bin_info[cal.bins.bin(base[i].mid).min(cal.bin_info.len() - 1)];
            (l, h, info.q_lo.is_none() || info.q_hi.is_none())
        },
    )
}

/// Cross-fitted localised band on out-of-fold rows, as [`cross_fitted_band`]: the rows of fold
/// `k` get the band calibrated on the rows of all other folds, weighted by `prox[i]`, the
/// quantile weights of row `i` from the forest fitted on those other folds' rows (in increasing
/// row order, the order [`BandCalibration::fit_local`] keeps them in).
#[allow(clippy::too_many_arguments)]
pub fn cross_fitted_local_band(
    method: BandMethod,
    folds: &[usize],
    base: &[BandBase],
    y: &[f64],
    units: &Units,
    level: f64,
    locality: f64,
    prox: &[Vec<f64>],
    bounds: (f64, f64),
) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
    let alpha_side = (1.0 - level) / 2.0;
    cross_fit(
        folds,
        bounds,
        |train| {
            BandCalibration::fit_local(
                method,
                &pick(base, train),
                &pick(y, train),
                &units.pick(train),
                level,
                locality,
            )
        },
        |cal, i| {
            let local = cal.local.as_ref().expect("localised");
            let (q_lo, q_hi) = local.quantiles(&prox[i], alpha_side);
            let (l, _, h) = cal.apply_quantiles(base[i], bounds, q_lo, q_hi);
            (l, h, q_lo.is_none() || q_hi.is_none())
        },
    )
}

/// The fold loop of the cross-fitted bands: for each fold, `fit` on the other folds' rows (in
/// increasing row order) and `apply(calibration, i) -> (lo, hi, too_few)` to each held-out row
/// `i`. Rows of a fold with no other rows keep the physical bounds and are flagged.
fn cross_fit<C>(
    folds: &[usize],
    bounds: (f64, f64),
    fit: impl Fn(&[usize]) -> C,
    apply: impl Fn(&C, usize) -> (f64, f64, bool),
) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
    let n = folds.len();
    let mut lo = vec![bounds.0; n];
    let mut hi = vec![bounds.1; n];
    let mut few = vec![true; n];
    for f in 0..super::folds::n_folds(folds) {
        let train: Vec<usize> = (0..n).filter(|&i| folds[i] != f).collect();
        if train.is_empty() {
            continue;
        }
        let cal = fit(&train);
        for i in (0..n).filter(|&i| folds[i] == f) {
            (lo[i], hi[i], few[i]) = apply(&cal, i);
        }
    }
    (lo, hi, few)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_is_the_ceil_rank() {
        // Lei et al. (2018): q = the ceil((n+1)(1-a))-th smallest score.
        let s: Vec<f64> = (1..=20).map(f64::from).collect();
        let w = vec![1.0; 20];
        // n = 20, a = 0.1: ceil(21 * 0.9) = ceil(18.9) = 19.
        assert_eq!(conformal_quantile(&s, &w, 0.1), Some(19.0));
        // a = 0.2: ceil(16.8) = 17.
        assert_eq!(conformal_quantile(&s, &w, 0.2), Some(17.0));
        // n = 9, a = 0.1: ceil(9.0) = 9, the largest; n = 8: ceil(8.1) = 9 > 8.
        assert_eq!(conformal_quantile(&s[..9], &w[..9], 0.1), Some(9.0));
        assert_eq!(conformal_quantile(&s[..8], &w[..8], 0.1), None);
    }

    #[test]
    fn minimum_wells_at_80_percent_is_nine() {
        // reference-checks: an 80 % two-sided band from a 10 %/90 % split needs n >= 9.
        assert_eq!(min_wells_for_band(0.8), 9);
        assert!(finite_band_possible(9.0, 0.8));
        assert!(!finite_band_possible(8.0, 0.8));
        // 90 % band, 5 % per side: ceil((n+1) 0.95) <= n  <=>  n >= 19.
        assert_eq!(min_wells_for_band(0.9), 19);
    }

    #[test]
    fn bins_merge_until_each_holds_enough_wells() {
        let pred: Vec<f64> = (0..30).map(f64::from).collect();
        let group = Units::wells(&(0..30).collect::<Vec<usize>>());
        let b = MondrianBins::build(&pred, &group, 3, 10.0);
        assert_eq!(b.len(), 3);
        // 30 wells in 3 bins of 10 cannot give bins of 11 by merging neighbours.
        let b = MondrianBins::build(&pred, &group, 3, 11.0);
        assert_eq!(b.len(), 1);
        // 4 bins hold 8, 7, 8, 7 wells; merging for 8 gives two bins of 15.
        let b = MondrianBins::build(&pred, &group, 4, 8.0);
        assert_eq!(b.edges, vec![14.0]);
    }

    #[test]
    fn band_is_ordered_and_bounded() {
        assert_eq!(
            order_within_bounds(2.0, 1.0, 0.5, (0.0, 3.0)),
            (1.0, 1.0, 1.0)
        );
        assert_eq!(
            order_within_bounds(-5.0, 1.0, 9.0, (0.0, 3.0)),
            (0.0, 1.0, 3.0)
        );
        assert_eq!(
            order_within_bounds(-5.0, 7.0, 9.0, (0.0, 3.0)),
            (0.0, 3.0, 3.0)
        );
    }
}
