//! Bands that widen away from well-like ground.
//!
//! A conformal band calibrated on held-out wells holds on average over the wells' own ground. Its
//! errors grow with how unlike the training wells a location is: Meyer & Pebesma (2021, Methods in
//! Ecology and Evolution 12:1620) measure that by the dissimilarity index (DI), and Meyer & Pebesma
//! (2022, Nature Communications 13:2208) relate prediction error to it. Here the relation is fitted
//! on the held-out well rows and turned into a band scale:
//!
//! 1. each held-out row's **needed scale** `m = (y - mid) / (hi - mid)` above the middle, or
//!    `(mid - y) / (mid - lo)` below it: the band covers the row iff `m <= 1`;
//! 2. rows are sorted by their DI to the wells of their own training fold and pooled into bins of
//!    about equal well weight (at least [`MIN_WELLS_PER_BIN`] wells each);
//! 3. per bin, the weighted `level` quantile of `m`, relative to that of all rows, is the bin's
//!    scale; a weighted isotonic (non-decreasing) regression of the bin scales on the bins' median DI
//!    (pool-adjacent-violators) makes the profile monotone;
//! 4. the profile is linear between bin medians and flat outside them, so beyond the largest DI
//!    seen at held-out wells it never narrows; a last factor keeps the held-out-well coverage of
//!    the scaled band equal to that of the plain band.
//!
//! The band at a node becomes `mid - k(DI) (mid - lo)`, `mid + k(DI) (hi - mid)`, clipped to the
//! target's bounds. When every row has the same DI the profile is exactly 1.
//!
//! Ground beyond what cross-validation spans gets an explicit rule ([`Beyond`]): where the DI or the
//! distance to the nearest well exceeds the largest the held-out wells had, the band widens
//! linearly towards the envelope of all wells' values, reaching it at twice that largest value. No
//! rule can know a mechanism no well sampled; the applicability flag carries that.

use super::isotonic::pav;
use crate::ensemble::quantile::weighted_quantile;
use serde::{Deserialize, Serialize};

/// Fewest wells in one bin of the profile.
pub const MIN_WELLS_PER_BIN: f64 = 8.0;
/// Most bins of the profile.
pub const MAX_BINS: usize = 8;

/// A monotone band-scale profile against dissimilarity.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Profile {
    /// Knots: dissimilarity (ascending).
    pub di: Vec<f64>,
    /// Scale at each knot (non-decreasing).
    pub scale: Vec<f64>,
    /// Largest DI of a held-out well row.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub di_max: f64,
    /// Held-out-well coverage of the plain band.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub coverage_plain: f64,
    /// Held-out-well coverage of the scaled band (equal to the plain one up to ties).
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub coverage_scaled: f64,
    /// Spearman rank correlation of the needed scale with DI at held-out rows.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub spearman: f64,
}

/// The scale a row's band would need to cover its truth (see the module docs).
pub fn needed_scale(y: f64, mid: f64, lo: f64, hi: f64) -> f64 {
    let (gap, room) = if y >= mid {
        (y - mid, hi - mid)
    } else {
        (mid - y, mid - lo)
    };
    if gap <= 0.0 {
        0.0
    } else if room > 0.0 {
        gap / room
    } else {
        f64::INFINITY
    }
}

impl Profile {
    /// The identity profile.
    pub fn flat() -> Self {
        Self {
            di: vec![0.0],
            scale: vec![1.0],
            di_max: 0.0,
            coverage_plain: f64::NAN,
            coverage_scaled: f64::NAN,
            spearman: f64::NAN,
        }
    }

    /// Fit from held-out rows: needed scales `m`, dissimilarities `di`, unit weights `w` (each
    /// well weighs one), the band `level`.
    pub fn fit(m: &[f64], di: &[f64], w: &[f64], level: f64) -> Self {
        let mut rows: Vec<(f64, f64, f64)> = (0..m.len())
            .filter(|&i| !m[i].is_nan() && di[i].is_finite() && w[i] > 0.0)
            .map(|i| (di[i], m[i], w[i]))
            .collect();
        if rows.len() < 2 {
            return Self::flat();
        }
        rows.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
        let total: f64 = rows.iter().map(|r| r.2).sum();
        let coverage = |scale: &dyn Fn(f64) -> f64| -> f64 {
            rows.iter()
                .filter(|r| r.1 <= scale(r.0))
                .map(|r| r.2)
                .sum::<f64>()
                / total
        };
        let coverage_plain = coverage(&|_| 1.0);
        let di_max = rows.last().map_or(0.0, |r| r.0);
        let spearman = spearman(
            &rows.iter().map(|r| r.0).collect::<Vec<_>>(),
            &rows.iter().map(|r| r.1).collect::<Vec<_>>(),
        );
        let flat = Self {
            di_max,
            coverage_plain,
            coverage_scaled: coverage_plain,
            spearman,
            ..Self::flat()
        };
        if rows[0].0 == di_max {
            return flat;
        }
        // Bins of about equal weight; a bin never splits a run of equal DI.
        let wells = total;
        let n_bins = ((wells / MIN_WELLS_PER_BIN).floor() as usize).clamp(1, MAX_BINS);
        if n_bins < 2 {
            return flat;
        }
        let mut bins: Vec<std::ops::Range<usize>> = Vec::new();
        let mut start = 0;
        let mut acc = 0.0;
        for i in 0..rows.len() {
            acc += rows[i].2;
            let tie_next = i + 1 < rows.len() && rows[i + 1].0 == rows[i].0;
            if acc >= total * (bins.len() + 1) as f64 / n_bins as f64 && !tie_next {
                bins.push(start..i + 1);
                start = i + 1;
            }
        }
        if start < rows.len() {
            bins.push(start..rows.len());
        }
        let all_m: Vec<f64> = rows.iter().map(|r| r.1.min(1e12)).collect();
        let all_w: Vec<f64> = rows.iter().map(|r| r.2).collect();
        let q_all = weighted_quantile(&all_m, &all_w, level);
        if !(q_all > 0.0 && q_all.is_finite()) || bins.len() < 2 {
            return flat;
        }
        let mut centre = Vec::new();
        let mut ratio = Vec::new();
        let mut weight = Vec::new();
        for b in &bins {
            let bm = &all_m[b.clone()];
            let bw = &all_w[b.clone()];
            let bd: Vec<f64> = rows[b.clone()].iter().map(|r| r.0).collect();
            centre.push(weighted_quantile(&bd, bw, 0.5));
            ratio.push(weighted_quantile(bm, bw, level) / q_all);
            weight.push(bw.iter().sum::<f64>());
        }
        let scale = pav(&ratio, &weight);
        let mut p = Self {
            di: centre,
            scale,
            ..flat
        };
        // Keep the held-out-well coverage of the plain band: find the smallest common factor c
        // (bisection on a monotone coverage) with coverage(c k) >= coverage_plain.
        let (mut lo, mut hi) = (1e-3_f64, 1e3_f64);
        for _ in 0..100 {
            let mid = (lo * hi).sqrt();
            if coverage(&|d| mid * p.at(d)) >= coverage_plain {
                hi = mid;
            } else {
                lo = mid;
            }
        }
        for s in &mut p.scale {
            *s *= hi;
        }
        p.coverage_scaled = coverage(&|d| p.at(d));
        p
    }

    /// Scale at dissimilarity `d`: linear between knots, flat outside them (a NaN `d` gives 1).
    pub fn at(&self, d: f64) -> f64 {
        if d.is_nan() || self.di.is_empty() {
            return 1.0;
        }
        let k = self.di.partition_point(|&x| x <= d);
        if k == 0 {
            return self.scale[0];
        }
        if k == self.di.len() {
            return self.scale[k - 1];
        }
        let (x0, x1) = (self.di[k - 1], self.di[k]);
        let (y0, y1) = (self.scale[k - 1], self.scale[k]);
        if x1 > x0 {
            y0 + (y1 - y0) * (d - x0) / (x1 - x0)
        } else {
            y1
        }
    }
}

/// The widening rule beyond the ground cross-validation spans.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Beyond {
    /// Largest DI of a held-out well row to its training fold.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub di_max: f64,
    /// Largest distance (map units) from a held-out well to the nearest well of its training folds.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub distance_max: f64,
    /// Lowest value measured at any well (after denoising).
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub envelope_lo: f64,
    /// Highest value measured at any well.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub envelope_hi: f64,
}

impl Beyond {
    /// Weight in `[0, 1]` of the envelope at a node with dissimilarity `di` and distance `dist` to
    /// the nearest well: 0 within the spanned ground, rising linearly to 1 at twice its edge.
    pub fn weight(&self, di: f64, dist: f64) -> f64 {
        let over = |v: f64, edge: f64| -> f64 {
            if v.is_finite() && edge > 0.0 {
                (v / edge - 1.0).clamp(0.0, 1.0)
            } else {
                0.0
            }
        };
        over(di, self.di_max).max(over(dist, self.distance_max))
    }

    /// Widen `(lo, hi)` towards the envelope by weight `t`.
    pub fn widen(&self, lo: f64, hi: f64, t: f64) -> (f64, f64) {
        if t <= 0.0 {
            return (lo, hi);
        }
        (
            lo - t * (lo - self.envelope_lo).max(0.0),
            hi + t * (self.envelope_hi - hi).max(0.0),
        )
    }
}

/// Spearman rank correlation (average ranks for ties).
pub fn spearman(a: &[f64], b: &[f64]) -> f64 {
    let ra = ranks(a);
    let rb = ranks(b);
    let n = ra.len() as f64;
    if n < 2.0 {
        return f64::NAN;
    }
    let ma = ra.iter().sum::<f64>() / n;
    let mb = rb.iter().sum::<f64>() / n;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for i in 0..ra.len() {
        sab += (ra[i] - ma) * (rb[i] - mb);
        saa += (ra[i] - ma).powi(2);
        sbb += (rb[i] - mb).powi(2);
    }
    sab / (saa * sbb).sqrt()
}

fn ranks(v: &[f64]) -> Vec<f64> {
    let mut idx: Vec<usize> = (0..v.len()).collect();
    idx.sort_by(|&i, &j| v[i].total_cmp(&v[j]));
    let mut r = vec![0.0; v.len()];
    let mut i = 0;
    while i < idx.len() {
        let mut j = i;
        while j + 1 < idx.len() && v[idx[j + 1]] == v[idx[i]] {
            j += 1;
        }
        let avg = (i + j) as f64 / 2.0 + 1.0;
        for &k in &idx[i..=j] {
            r[k] = avg;
        }
        i = j + 1;
    }
    r
}
