//! Every node's full calibrated predictive distribution, as a quantile function for the field
//! totals ([`crate::spatial::totals`]), and the spatial correlation of the wells' held-out errors.
//!
//! **Node distributions** ([`CalibratedNodes`]). One distribution per node, the same for the
//! band, the exceedance maps and the totals. The maps give three quantiles per node (the band
//! edges and the middle, after the spread rule) and, per threshold, the probability of crossing
//! it, which [`crate::calibrate::CalibratedTarget::predict_at`] has already widened with the
//! band (the spread stretches the whole distribution about the middle) and made consistent with
//! it. The node's quantile function passes through all of them: the points `(u, y)` are the
//! band's `((1 - level)/2, lo)`, `(1/2, mid)`, `((1 + level)/2, hi)` and each threshold's
//! `(P(Y below t), t)`. The model's predictive system gives the shape between and beyond them:
//! the conformal predictive system around the node's conditional middle (Vovk, Shen, Manokhin &
//! Xie 2019), made continuous by linear interpolation between its residuals' levels, mixed with
//! the "no change" atom for a hurdle target (Mullahy 1986; [`crate::calibrate::hurdle`]). That
//! base quantile function `Qb` is read at levels warped piecewise linearly so that the map's
//! band levels land on the levels the band was made at (for a hurdle target the band edges sit at
//! the conformal PIT levels of the mixture, Czado, Gneiting & Held 2009), and each stretch
//! between two points is rescaled in value to join them:
//!
//! ```text
//! Q(u) = y_k + (y_k+1 - y_k) f,   f = 0.99 (Qb(v) - Qb(v_k)) / (Qb(v_k+1) - Qb(v_k))
//!                                     + 0.01 (u - u_k) / (u_k+1 - u_k)
//! ```
//!
//! with the outer band segments' scale carried into the tails, and everything clipped to the
//! target's bounds. The hundredth of plain level keeps `Q` strictly increasing where the base is
//! flat (its atom, a stretch the two models disagree on), so the level of a threshold's point is
//! exactly the probability of lying below it. At the band levels it gives the written P10, P50
//! and P90 exactly; at each threshold, the written probability; the atom at zero stays an atom.
//! A threshold's point that contradicts the band or an earlier point is left out (`predict_at`
//! clips every probability to what the band allows, but two thresholds of one target whose
//! probabilities come from different methods could still disagree with each other).
//!
//! **Error correlation** ([`correlation`]). Each target's held-out well rows carry their PIT value
//! under the cross-fitted predictive system (randomised at the atom for a hurdle target); their
//! normal scores `Phi^-1(u)` are the errors' Gaussian representation. The experimental variogram
//! (Cressie & Hawkins 1980) pairs rows of the *same step* only and pools the steps bin by bin: the
//! error field of one survey is what a total at that step depends on, and pairing the rows of one
//! well across steps would mix time correlation (a well's error persists from survey to survey)
//! into the spatial lag of zero-distance pairs, pulling the nugget down. The model is fitted by
//! Cressie's (1985) weighted least squares with the library's fallback.

use super::model::TargetMaps;
use crate::calibrate::exceedance::PredictiveSystem;
use crate::calibrate::{CalibratedTarget, OofRow};
use crate::grid::Grid;
use crate::sample::TrainingSet;
use crate::spatial::krige::WellScore;
use crate::spatial::scores::{PIT_CLAMP, normal_score};
use crate::spatial::totals::NodeDistribution;
use crate::spatial::variogram::{
    self, Estimator, ExperimentalVariogram, FitSettings, Lags, Sample, VariogramFit,
};
use crate::spatial::{Lattice, SpatialError};
use ndarray::ArrayView2;
use rayon::prelude::*;
use serde::Serialize;
use std::borrow::Cow;

/// `a + f (b - a)`, exact at both ends (`f = 0` gives `a`, `f = 1` gives `b`).
fn lerp(a: f64, b: f64, f: f64) -> f64 {
    if f <= 0.5 {
        a + f * (b - a)
    } else {
        b - (1.0 - f) * (b - a)
    }
}

/// The levels `Q(t_k)` (with `tau = 1/2`) of every residual of each bin of a conformal predictive
/// system, so that its quantile function is one binary search: the same values as
/// [`PredictiveSystem::quantile`], which recomputes each level inside its search.
pub struct CpsLevels {
    levels: Vec<Vec<f64>>,
    /// Per bin, `BUCKETS + 1` starts: entry `j` is the first residual whose level reaches
    /// `j / BUCKETS`, so a search for level `v` scans one bucket only.
    index: Vec<Vec<u32>>,
}

/// Buckets of the level index (a power of two, so `j / BUCKETS` is exact).
const BUCKETS: usize = 1024;

impl CpsLevels {
    /// The level table of `cps`.
    pub fn new(cps: &PredictiveSystem) -> Self {
        let w = cps.test_weight;
        let levels = cps
            .residuals
            .iter()
            .zip(&cps.cum_weight)
            .map(|(r, cw)| {
                let total = cw.last().copied().unwrap_or(0.0);
                (0..r.len())
                    .map(|k| {
                        let first = r.partition_point(|&a| a < r[k]);
                        let last = r.partition_point(|&a| a <= r[k]);
                        let below = if first == 0 { 0.0 } else { cw[first - 1] };
                        let at = cw[last - 1] - below;
                        (below + 0.5 * (at + w)) / (total + w)
                    })
                    .collect()
            })
            .collect::<Vec<Vec<f64>>>();
        let index = levels
            .iter()
            .map(|l| {
                (0..=BUCKETS)
                    .map(|j| {
                        let at = j as f64 / BUCKETS as f64;
                        l.partition_point(|&q| q < at) as u32
                    })
                    .collect()
            })
            .collect();
        Self { levels, index }
    }

    /// The first residual of bin `b` whose level reaches `v` (`partition_point(q < v)`).
    fn first_reaching(&self, b: usize, v: f64) -> usize {
        let levels = &self.levels[b];
        if !(v > 0.0 && v < 1.0) {
            return levels.partition_point(|&q| q < v);
        }
        let j = ((v * BUCKETS as f64) as usize).min(BUCKETS - 1);
        let (mut k, end) = (self.index[b][j] as usize, self.index[b][j + 1] as usize);
        while k < end && levels[k] < v {
            k += 1;
        }
        k
    }

    /// [`PredictiveSystem::quantile`] of `cps` (the system this table was made from).
    pub fn quantile(
        &self,
        cps: &PredictiveSystem,
        mid: f64,
        scale: f64,
        v: f64,
        bounds: (f64, f64),
    ) -> f64 {
        if !mid.is_finite() || scale.is_nan() || scale <= 0.0 || v.is_nan() {
            return f64::NAN;
        }
        let b = cps.bins.bin(mid).min(cps.residuals.len() - 1);
        self.quantile_in_bin(cps, b, mid, scale, v, bounds)
    }

    /// As [`Self::quantile`] with the Mondrian bin `b` of `mid` already known.
    pub fn quantile_in_bin(
        &self,
        cps: &PredictiveSystem,
        b: usize,
        mid: f64,
        scale: f64,
        v: f64,
        bounds: (f64, f64),
    ) -> f64 {
        if !mid.is_finite() || scale.is_nan() || scale <= 0.0 || v.is_nan() {
            return f64::NAN;
        }
        let k = self.first_reaching(b, v);
        let r = &cps.residuals[b];
        let t = if k == r.len() {
            bounds.1
        } else {
            mid + scale * r[k]
        };
        t.clamp(bounds.0, bounds.1)
    }
}

impl CpsLevels {
    /// The quantile function of bin `b` made continuous: linear in the level between two
    /// consecutive residuals' levels (the system's own quantile, [`Self::quantile_in_bin`], is a
    /// step function). It passes
    /// through the system's quantile at every residual's level and increases strictly between
    /// distinct residuals, so a quantile function rescaled through it has no flat stretch where
    /// a written probability would otherwise fall. Below the first and above the last
    /// residual's level it continues with the bin's mean slope (the system itself puts that
    /// mass at the bounds, the new point's own weight at infinity), and values are not clipped
    /// to the target's bounds: a clip would make it flat. Callers clip the final value.
    pub fn interpolated_in_bin(
        &self,
        cps: &PredictiveSystem,
        b: usize,
        mid: f64,
        scale: f64,
        v: f64,
    ) -> f64 {
        if !mid.is_finite() || scale.is_nan() || scale <= 0.0 || v.is_nan() {
            return f64::NAN;
        }
        let k = self.first_reaching(b, v);
        let r = &cps.residuals[b];
        let levels = &self.levels[b];
        let n = r.len();
        // The bin's mean slope, level to residual, carries the ends.
        let slope = if n > 1 && levels[n - 1] > levels[0] {
            (r[n - 1] - r[0]) / (levels[n - 1] - levels[0])
        } else {
            0.0
        };
        if k == n {
            return mid + scale * (r[n - 1] + slope * (v - levels[n - 1]));
        }
        if k == 0 {
            return mid + scale * (r[0] - slope * (levels[0] - v));
        }
        let (l0, l1) = (levels[k - 1], levels[k]);
        let f = ((v - l0) / (l1 - l0)).clamp(0.0, 1.0);
        mid + scale * lerp(r[k - 1], r[k], f)
    }
}

/// One target's calibrated distribution at every node of one step.
///
/// What it keeps per node is what the maps do not hold already: the Mondrian bin, the hurdle's
/// `p G(0)`, the conditional middle and scale where they are not the map's own, and the base
/// quantile and order of each point of the quantile function (a point's level and value come
/// from the maps and the thresholds).
pub struct CalibratedNodes<'a> {
    cal: &'a CalibratedTarget,
    maps: &'a TargetMaps,
    /// The predictive system's quantile table.
    table: CpsLevels,
    /// Hurdle targets: `p G(0)` per node, the mixture's probability below the atom.
    below: Vec<f64>,
    /// The predictive system's Mondrian bin of each node's conditional middle.
    bin: Indices,
    /// Conditional middle of the predictive system per node.
    cond_mid: Cow<'a, [f64]>,
    /// Its residual scale per node (`None`: 1 at every node).
    cond_scale: Option<Cow<'a, [f64]>>,
    /// Map levels of the lower edge, middle and upper edge.
    u: [f64; 3],
    /// The base distribution's levels of the same three values.
    v: [f64; 3],
    /// Per node, `per` base quantiles by source: the band's lower edge, middle and upper edge
    /// (at `v`), then each threshold's at the warped level of its written probability (`NaN`
    /// for a threshold left out).
    base_at: Vec<f64>,
    /// Per node, the sources (0-2 the band's points, `3 + k` threshold `k`'s) of the points
    /// of the quantile function sorted by level and value, [`NO_POINT`] padding the unused
    /// slots.
    order: Indices,
    /// Points per node: 3 + the target's thresholds.
    per: usize,
}

/// An unused slot of [`CalibratedNodes`]'s point order.
const NO_POINT: u32 = u32::MAX;

/// Small non-negative indices, one byte each when every one is below 255, else four bytes;
/// [`NO_POINT`] reads back as itself either way.
enum Indices {
    Bytes(Vec<u8>),
    Words(Vec<u32>),
}

impl Indices {
    /// Stores `v`, whose entries other than [`NO_POINT`] are at most `max`.
    fn new(v: Vec<u32>, max: u32) -> Self {
        if max < u8::MAX as u32 {
            Self::Bytes(v.into_iter().map(|x| x.min(u8::MAX as u32) as u8).collect())
        } else {
            Self::Words(v)
        }
    }

    #[inline]
    fn get(&self, k: usize) -> u32 {
        match self {
            Self::Bytes(v) if v[k] == u8::MAX => NO_POINT,
            Self::Bytes(v) => v[k] as u32,
            Self::Words(v) => v[k],
        }
    }
}

/// Share of the level (against the base quantile) in the interpolation between two points and
/// in the tails: the base can be flat over a stretch of levels (the hurdle's atom, a clip at a
/// bound), and a little of the level keeps the quantile function strictly increasing between
/// distinct points, so that a point's level is exactly the probability of lying below it.
/// Common practice, no published source.
const LEVEL_SHARE: f64 = 0.01;

/// Value per level of a tail's level share: the band half's `s`, or where that half has no width
/// the overall slope of the points from `first` to `last`, or 1.
fn per_level(s: f64, first: Point, last: Point) -> f64 {
    if s > 0.0 {
        return s;
    }
    let overall = (last.y - first.y) / (last.u - first.u);
    if overall > 0.0 && overall.is_finite() {
        overall
    } else {
        1.0
    }
}

/// A point `(u, y)` the node's quantile function passes through, with the base quantile `b` at
/// the warped level of `u`.
#[derive(Clone, Copy, Debug)]
struct Point {
    u: f64,
    y: f64,
    b: f64,
}

impl<'a> CalibratedNodes<'a> {
    /// The distributions of `cal` at the nodes whose features are `x` (rows in node order) and
    /// whose written maps are `maps`. Nodes with a null map value have no distribution. The
    /// conditional part of the model, where the target needs it, is predicted again from `x`;
    /// [`Self::from_maps`] takes it from the maps instead.
    pub fn new(
        cal: &'a CalibratedTarget,
        maps: &'a TargetMaps,
        x: ArrayView2<f64>,
    ) -> Result<Self, crate::calibrate::CalibrateError> {
        // The continuous middle is the map's; its scale is 1 unless the scores are normalised.
        let (mid, scale) = if cal.needs_conditional() {
            let (mid, scale) = cal.conditional_at(x)?;
            (Cow::Owned(mid), Some(Cow::Owned(scale)))
        } else {
            (Cow::Borrowed(&maps.mid[..]), None)
        };
        Ok(Self::build(cal, maps, mid, scale))
    }

    /// As [`Self::new`] with the conditional part the maps kept
    /// ([`TargetMaps::conditional`]): the same distributions without predicting the nodes
    /// again. `None` when the target needs the conditional part and the maps did not keep it.
    pub fn from_maps(cal: &'a CalibratedTarget, maps: &'a TargetMaps) -> Option<Self> {
        if !cal.needs_conditional() {
            return Some(Self::build(cal, maps, Cow::Borrowed(&maps.mid[..]), None));
        }
        let c = maps.conditional.as_ref()?;
        let n = maps.mid.len();
        if c.mid.len() != n || c.scale.as_ref().is_some_and(|s| s.len() != n) {
            return None;
        }
        let scale = c.scale.as_deref().map(Cow::Borrowed);
        Some(Self::build(cal, maps, Cow::Borrowed(&c.mid[..]), scale))
    }

    fn build(
        cal: &'a CalibratedTarget,
        maps: &'a TargetMaps,
        cond_mid: Cow<'a, [f64]>,
        cond_scale: Option<Cow<'a, [f64]>>,
    ) -> Self {
        let a = (1.0 - cal.level) / 2.0;
        let u = [a, 0.5, 1.0 - a];
        let v = match &cal.hurdle {
            Some(h) => [h.levels.0, h.levels.1, h.levels.2],
            None => u,
        };
        let n = maps.mid.len();
        let scale_at = |i: usize| cond_scale.as_ref().map_or(1.0, |s| s[i]);
        let below = match &maps.p_change {
            Some(p) if cal.hurdle.is_some() => (0..n)
                .into_par_iter()
                .map(|i| {
                    let g = cal
                        .cps
                        .prob_below(cond_mid[i], scale_at(i), 0.0, cal.bounds);
                    p[i].clamp(0.0, 1.0) * g
                })
                .collect(),
            _ => Vec::new(),
        };
        let last = cal.cps.residuals.len().saturating_sub(1);
        let bin = cond_mid
            .iter()
            .map(|&m| cal.cps.bins.bin(m).min(last) as u32)
            .collect();
        let bin = Indices::new(bin, last as u32);
        let per = 3 + cal.thresholds.len().min(maps.exceed.len());
        let mut out = Self {
            cal,
            maps,
            table: CpsLevels::new(&cal.cps),
            below,
            bin,
            cond_mid,
            cond_scale,
            u,
            v,
            base_at: Vec::new(),
            order: Indices::Words(Vec::new()),
            per,
        };
        let mut base_at = vec![f64::NAN; n * per];
        let mut order = vec![NO_POINT; n * per];
        base_at
            .par_chunks_mut(per)
            .zip(order.par_chunks_mut(per))
            .enumerate()
            .for_each(|(i, (b, o))| out.node_points(i, b, o));
        out.base_at = base_at;
        out.order = Indices::new(order, (per - 1) as u32);
        out
    }

    /// Node `i`'s points: the band's, then every threshold's whose written probability is
    /// consistent with the points kept before it (a quantile function is non-decreasing). Writes
    /// each point's base quantile into `base_at` by source and the sources sorted by level and
    /// value into `order`.
    fn node_points(&self, i: usize, base_at: &mut [f64], order: &mut [u32]) {
        let mut pts: Vec<(Point, u32)> = Vec::with_capacity(self.per);
        let band = [self.maps.lo[i], self.maps.mid[i], self.maps.hi[i]];
        for (k, &y) in band.iter().enumerate() {
            base_at[k] = self.base(i, self.v[k]);
            let p = Point {
                u: self.u[k],
                y,
                b: base_at[k],
            };
            pts.push((p, k as u32));
        }
        let (lo_b, hi_b) = self.cal.bounds;
        for (k, th) in self.cal.thresholds.iter().enumerate().take(self.per - 3) {
            let (u, t) = self.threshold_point(k, i);
            if !((0.0..=1.0).contains(&u) && t > lo_b && t < hi_b) {
                continue;
            }
            let fits = pts.iter().all(|(p, _)| {
                !(p.y.is_finite()) || (p.u < u && p.y <= t) || (p.u > u && p.y >= t) || p.u == u
            });
            if fits {
                base_at[3 + k] = self.base(i, self.warp(u));
                let p = Point {
                    u,
                    y: th.value,
                    b: base_at[3 + k],
                };
                pts.push((p, (3 + k) as u32));
            }
        }
        pts.sort_by(|(a, _), (b, _)| a.u.total_cmp(&b.u).then(a.y.total_cmp(&b.y)));
        for (slot, (_, source)) in order.iter_mut().zip(&pts) {
            *slot = *source;
        }
    }

    /// Threshold `k`'s level (its written probability of lying below it) and value at node `i`.
    #[inline]
    fn threshold_point(&self, k: usize, i: usize) -> (f64, f64) {
        let th = &self.cal.thresholds[k];
        let e = self.maps.exceed[k][i];
        (if th.above { 1.0 - e } else { e }, th.value)
    }

    /// The level of node `i`'s point from `source` (0-2 the band's, `3 + k` threshold `k`'s).
    #[inline]
    fn level(&self, i: usize, source: u32) -> f64 {
        match source as usize {
            s @ 0..=2 => self.u[s],
            s => self.threshold_point(s - 3, i).0,
        }
    }

    /// The point of node `i` from `source` (0-2 the band's, `3 + k` threshold `k`'s).
    #[inline]
    fn point(&self, i: usize, source: u32) -> Point {
        let s = source as usize;
        let b = self.base_at[i * self.per + s];
        let (u, y) = match s {
            0 => (self.u[0], self.maps.lo[i]),
            1 => (self.u[1], self.maps.mid[i]),
            2 => (self.u[2], self.maps.hi[i]),
            _ => self.threshold_point(s - 3, i),
        };
        Point { u, y, b }
    }

    /// The model's own quantile function at node `i`: the conditional predictive system, or
    /// for a hurdle target its mixture with the atom ([`crate::calibrate::hurdle::quantile`], with `p G(0)` kept
    /// per node).
    fn base(&self, i: usize, level: f64) -> f64 {
        let mid = self.cond_mid[i];
        let scale = self.cond_scale.as_ref().map_or(1.0, |s| s[i]);
        let b = self.bin.get(i) as usize;
        let g = |v: f64| {
            self.table
                .interpolated_in_bin(&self.cal.cps, b, mid, scale, v)
        };
        let p = match (&self.cal.hurdle, &self.maps.p_change) {
            (Some(_), Some(p)) => p[i],
            _ => return g(level),
        };
        if !(p.is_finite() && level.is_finite()) {
            return f64::NAN;
        }
        let p = p.clamp(0.0, 1.0);
        if p <= 0.0 {
            return 0.0;
        }
        let below = self.below[i];
        if level <= below {
            g((level / p).clamp(0.0, 1.0)).min(0.0)
        } else if level <= below + (1.0 - p) {
            0.0
        } else {
            g(((level - 1.0 + p) / p).clamp(0.0, 1.0)).max(0.0)
        }
    }

    /// The level warp: piecewise linear through `(0, 0)`, `(u_k, v_k)` and `(1, 1)`.
    fn warp(&self, u: f64) -> f64 {
        let xs = [0.0, self.u[0], self.u[1], self.u[2], 1.0];
        let ys = [0.0, self.v[0], self.v[1], self.v[2], 1.0];
        for k in 0..4 {
            if u <= xs[k + 1] {
                let f = ((u - xs[k]) / (xs[k + 1] - xs[k])).clamp(0.0, 1.0);
                return lerp(ys[k], ys[k + 1], f);
            }
        }
        1.0
    }
}

impl NodeDistribution for CalibratedNodes<'_> {
    fn quantile(&self, i: usize, u: f64) -> f64 {
        let (lo, mid, hi) = (self.maps.lo[i], self.maps.mid[i], self.maps.hi[i]);
        if !(lo.is_finite() && mid.is_finite() && hi.is_finite()) {
            return f64::NAN;
        }
        let bounds = self.cal.bounds;
        // A level within rounding of a map level gives the written value (`(1 - 0.8) / 2` is not
        // 0.1).
        if let Some(k) = self.u.iter().position(|k| (u - k).abs() <= 1e-12) {
            return [lo, mid, hi][k].clamp(bounds.0, bounds.1);
        }
        let first = i * self.per;
        // The points are sorted by level: `j` is the first whose level is not below `u`.
        let (mut count, mut j) = (0, 0);
        while count < self.per {
            let source = self.order.get(first + count);
            if source == NO_POINT {
                break;
            }
            if j == count && self.level(i, source) < u {
                j += 1;
            }
            count += 1;
        }
        let pt = |k: usize| self.point(i, self.order.get(first + k));
        let (b_lo, b_mid, b_hi) = {
            let b = &self.base_at[i * self.per..];
            (b[0], b[1], b[2])
        };
        let b = self.base(i, self.warp(u));
        let y = if j == 0 {
            let s = if b_mid > b_lo {
                (mid - lo) / (b_mid - b_lo)
            } else {
                1.0
            };
            let (first, last) = (pt(0), pt(count - 1));
            let s_u = per_level((mid - lo) / (self.u[1] - self.u[0]), first, last);
            let f = first.u - u;
            first.y - (1.0 - LEVEL_SHARE) * s * (first.b - b).max(0.0) - LEVEL_SHARE * s_u * f
        } else if j == count {
            let s = if b_hi > b_mid {
                (hi - mid) / (b_hi - b_mid)
            } else {
                1.0
            };
            let last = pt(j - 1);
            let s_u = per_level((hi - mid) / (self.u[2] - self.u[1]), pt(0), last);
            let f = u - last.u;
            last.y + (1.0 - LEVEL_SHARE) * s * (b - last.b).max(0.0) + LEVEL_SHARE * s_u * f
        } else {
            let (a, c) = (pt(j - 1), pt(j));
            let by_level = (u - a.u) / (c.u - a.u);
            let f = if c.b > a.b {
                let by_base = ((b - a.b) / (c.b - a.b)).clamp(0.0, 1.0);
                (1.0 - LEVEL_SHARE) * by_base + LEVEL_SHARE * by_level
            } else {
                by_level
            };
            lerp(a.y, c.y, f)
        };
        y.clamp(bounds.0, bounds.1)
    }
}

/// One target's error correlation, as `summary.json` gives it.
#[derive(Clone, Debug, Serialize)]
pub struct Correlation {
    /// Target name.
    pub target: String,
    /// Held-out well rows with a normal score (all steps).
    pub rows: usize,
    /// Well pairs in the lags used (same step only).
    pub pairs: usize,
    /// Model kind used.
    pub kind: String,
    /// Nugget of the normal scores' variogram.
    pub nugget: f64,
    /// Total sill.
    pub sill: f64,
    /// Range in metres (practical range for the exponential and Matern models).
    pub range: f64,
    /// True when too little data forced the stated fallback model.
    pub fallback: bool,
    /// Why the fallback was used, or a remark on the fit.
    pub message: Option<String>,
    /// The experimental variogram (pooled over steps).
    pub experimental: ExperimentalVariogram,
    /// The fit with every candidate model.
    pub fit: VariogramFit,
}

/// The held-out normal scores of target `t`'s well rows, with their step: wells in grid-local
/// metres (`x = i dx`, `y = j dy`). The rows of `cal`'s diagnostics follow the training rows where
/// the target was measured.
pub fn well_scores(
    cal: &CalibratedTarget,
    ts: &TrainingSet,
    t: usize,
    grid: &Grid,
) -> Vec<(usize, WellScore)> {
    located_rows(cal, ts, t, grid)
        .filter_map(|(row, r, (fi, fj))| {
            let score = normal_score(row.pit, PIT_CLAMP);
            let ok = score.is_finite() && fi.is_finite() && fj.is_finite();
            ok.then(|| (row.step, well_score(ts, grid, r, (fi, fj), score)))
        })
        .collect()
}

/// The held-out rows of target `t` in `cal`'s diagnostics, each with its training row and
/// fractional grid position `(i, j)` (the diagnostics follow the training rows where the target
/// was measured).
fn located_rows<'c>(
    cal: &'c CalibratedTarget,
    ts: &'c TrainingSet,
    t: usize,
    grid: &'c Grid,
) -> impl Iterator<Item = (&'c OofRow, usize, (f64, f64))> + 'c {
    let rows = super::fit::target_rows(ts, t);
    cal.diagnostics
        .rows
        .iter()
        .zip(rows)
        .map(move |(row, r)| (row, r, grid.fractional_ij(ts.xy[r][0], ts.xy[r][1])))
}

/// Training row `r`'s well at fractional grid position `(fi, fj)`, in grid-local metres.
fn well_score(
    ts: &TrainingSet,
    grid: &Grid,
    r: usize,
    (fi, fj): (f64, f64),
    score: f64,
) -> WellScore {
    WellScore {
        name: ts.well_names[ts.group[r]].clone(),
        x: fi * grid.dx,
        y: fj * grid.dy,
        score,
    }
}

/// The normal scores that make a realization reproduce each well's measured value at its node:
/// for every row of target `t` at step `step`, the level of the measured value under the
/// predictive distribution `dist` of the node nearest the well (the final model's, which has
/// seen the well), turned into a normal score. Where that distribution puts mass on the value
/// (the "no change" atom, or a step of a discrete system) the level is drawn uniformly within
/// the mass (randomised PIT, Czado, Gneiting & Held 2009) from a stream of `seed` keyed on the
/// row, so the draw does not depend on the thread count. Wells off the grid, at a null node or
/// with a non-finite value are left out.
pub fn value_scores(
    cal: &CalibratedTarget,
    ts: &TrainingSet,
    t: usize,
    grid: &Grid,
    step: usize,
    dist: &dyn NodeDistribution,
    seed: u64,
) -> Vec<WellScore> {
    located_rows(cal, ts, t, grid)
        .enumerate()
        .filter(|(_, (row, _, _))| row.step == step)
        .filter_map(|(k, (row, r, (fi, fj)))| {
            let (i, j) = (fi.round(), fj.round());
            let inside = i >= 0.0 && j >= 0.0 && i < grid.nx as f64 && j < grid.ny as f64;
            if !(inside && row.truth.is_finite()) {
                return None;
            }
            let node = j as usize * grid.nx + i as usize;
            let hi = dist.cdf(node, row.truth);
            let lo = dist.cdf_left(node, row.truth);
            if !(hi.is_finite() && lo.is_finite()) {
                return None;
            }
            let bits = crate::spatial::derive_seed(seed, &[t as u64, k as u64]) >> 11;
            let v = (bits as f64 + 0.5) / (1u64 << 53) as f64;
            let u = lo + v * (hi - lo).max(0.0);
            let score = normal_score(u, PIT_CLAMP);
            Some(well_score(ts, grid, r, (fi, fj), score))
        })
        .collect()
}

/// The variogram of target `name`'s held-out normal scores `scores` (with their steps), pairs
/// within a step only, fitted by weighted least squares with the stated fallback.
pub fn correlation(
    name: &str,
    scores: &[(usize, WellScore)],
    lattice: Lattice,
) -> Result<Correlation, SpatialError> {
    let points: Vec<Sample> = scores
        .iter()
        .map(|(_, w)| Sample {
            x: w.x,
            y: w.y,
            value: w.score,
        })
        .collect();
    let groups: Vec<usize> = scores.iter().map(|(s, _)| *s).collect();
    let lags = Lags::half_extent(&points).unwrap_or(Lags {
        width: lattice.diagonal().max(1.0) / 24.0,
        count: 12,
    });
    let experimental =
        variogram::experimental_within(&points, Some(&groups), lags, Estimator::CressieHawkins)?;
    let fit = variogram::fit(&experimental, &FitSettings::default(), lattice.diagonal())?;
    Ok(Correlation {
        target: name.to_string(),
        rows: points.len(),
        pairs: fit.pairs_used,
        kind: fit.model.kind.name().to_string(),
        nugget: fit.model.nugget,
        sill: fit.model.sill,
        range: fit.model.range,
        fallback: fit.fallback,
        message: fit.message.clone(),
        experimental,
        fit,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::conformal::MondrianBins;
    use crate::calibrate::units::Units;

    #[test]
    fn the_level_table_gives_the_systems_quantiles() {
        // Residuals with ties and unequal well weights (wells 0 and 1 have two rows each).
        let y = [0.3, -1.0, 2.0, 0.3, 0.3, -0.2, 1.1, 5.0];
        let mid = [0.0; 8];
        let units = Units::wells(&[0, 0, 1, 1, 2, 3, 4, 5]);
        let cps = PredictiveSystem::fit(&mid, &y, &units, MondrianBins::single());
        let table = CpsLevels::new(&cps);
        let mut levels: Vec<f64> = (0..=1000).map(|k| k as f64 / 1000.0).collect();
        // Levels on and next to the table's own steps and bucket edges.
        for l in &table.levels[0] {
            levels.extend([*l, l.next_down(), l.next_up()]);
        }
        levels.extend((0..=BUCKETS).map(|j| j as f64 / BUCKETS as f64));
        levels.extend([-0.5, 1.5, f64::MIN_POSITIVE, 1.0 - f64::EPSILON]);
        for v in levels {
            for (m, s) in [(0.0, 1.0), (1.5, 0.5), (-3.0, 2.0)] {
                let a = cps.quantile(m, s, v, (-4.0, 6.0));
                let b = table.quantile(&cps, m, s, v, (-4.0, 6.0));
                assert_eq!(a.to_bits(), b.to_bits(), "level {v}, mid {m}, scale {s}");
            }
        }
    }
}
