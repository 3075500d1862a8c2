//! Quantile binning of features for histogram-based tree growing.
//!
//! Each feature's non-missing training values are cut into at most 255 bins at quantiles of the
//! training values (the scheme of LightGBM, Ke et al. 2017, NeurIPS, and scikit-learn's
//! `HistGradientBoostingRegressor`): when a feature has no more distinct values than bins, every
//! distinct value gets its own bin and the cut points are midpoints between neighbours, so
//! splits are exact. Missing values (NaN) go to their own bin, code [`MISSING_BIN`]; at every
//! split the tree learns which side they take.
//!
//! Cut points are kept as raw feature values, so fitted trees compare raw values against
//! thresholds and prediction never bins: `bin(v) <= b` exactly when `v <= edges[b]`.

use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// Bin code reserved for missing values (NaN).
pub const MISSING_BIN: u8 = 255;

/// Largest number of non-missing bins per feature.
pub const MAX_BINS: usize = 255;

/// Cut points of every feature, learned from training data.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct BinMapper {
    /// For each feature, strictly increasing cut points; bin `b` holds values in
    /// `(edges[b-1], edges[b]]`, the last bin everything above the last edge.
    edges: Vec<Vec<f64>>,
}

impl BinMapper {
    /// Learns cut points from the columns of `x` (rows x features), at most `max_bins`
    /// (2..=255) bins per feature. NaN values are ignored here and binned as missing.
    pub fn fit(x: ArrayView2<f64>, max_bins: usize) -> BinMapper {
        let max_bins = max_bins.clamp(2, MAX_BINS);
        let edges = x
            .columns()
            .into_iter()
            .map(|col| {
                let mut v: Vec<f64> = col.iter().copied().filter(|v| !v.is_nan()).collect();
                v.sort_by(f64::total_cmp);
                feature_edges(&v, max_bins)
            })
            .collect();
        BinMapper { edges }
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.edges.len()
    }

    /// Number of non-missing bins of feature `f` (one more than its cut points).
    pub fn n_bins(&self, f: usize) -> usize {
        self.edges[f].len() + 1
    }

    /// Cut points of feature `f`.
    pub fn edges(&self, f: usize) -> &[f64] {
        &self.edges[f]
    }

    /// Bin code of value `v` of feature `f`: [`MISSING_BIN`] for NaN.
    pub fn bin_value(&self, f: usize, v: f64) -> u8 {
        if v.is_nan() {
            MISSING_BIN
        } else {
            self.edges[f].partition_point(|&e| e < v) as u8
        }
    }

    /// The raw threshold equivalent to "bin <= b" for feature `f`: the upper cut point of bin
    /// `b`, or `f64::MAX` when `b` is the last bin (all non-missing values go left).
    pub fn threshold(&self, f: usize, b: u8) -> f64 {
        self.edges[f].get(b as usize).copied().unwrap_or(f64::MAX)
    }

    /// Bins every value of `x`, column-major: code of row `r`, feature `f` at `f * n + r`.
    pub fn transform(&self, x: ArrayView2<f64>) -> Vec<u8> {
        let n = x.nrows();
        let mut out = vec![0u8; n * self.edges.len()];
        for (f, col) in x.columns().into_iter().enumerate() {
            for (r, &v) in col.iter().enumerate() {
                out[f * n + r] = self.bin_value(f, v);
            }
        }
        out
    }
}

/// Cut points for one feature from its sorted non-missing values.
fn feature_edges(sorted: &[f64], max_bins: usize) -> Vec<f64> {
    let n = sorted.len();
    if n == 0 {
        return Vec::new();
    }
    let mut distinct: Vec<f64> = Vec::new();
    for &v in sorted {
        if distinct.last() != Some(&v) {
            distinct.push(v);
        }
    }
    let mut edges = Vec::new();
    if distinct.len() <= max_bins {
        for w in distinct.windows(2) {
            edges.push(midpoint(w[0], w[1]));
        }
        return edges;
    }
    // Cut at the i/max_bins quantiles of all values, midway between the order statistics
    // around each cut; cuts inside a run of equal values fall on the value itself.
    let last = sorted[n - 1];
    for i in 1..max_bins {
        let k = (i * n) / max_bins;
        if k == 0 {
            continue;
        }
        let e = midpoint(sorted[k - 1], sorted[k]);
        if e >= last {
            break;
        }
        if edges.last().is_none_or(|&prev| e > prev) {
            edges.push(e);
        }
    }
    edges
}

/// Midpoint of `a <= b` without overflow; equals `a` when `a == b`.
fn midpoint(a: f64, b: f64) -> f64 {
    let m = a + (b - a) / 2.0;
    if m.is_finite() { m } else { a / 2.0 + b / 2.0 }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn few_distinct_values_get_own_bins() {
        let x = Array2::from_shape_vec((6, 1), vec![3.0, 1.0, 2.0, f64::NAN, 1.0, 3.0]).unwrap();
        let m = BinMapper::fit(x.view(), 255);
        assert_eq!(m.edges(0), &[1.5, 2.5]);
        assert_eq!(m.transform(x.view()), vec![2, 0, 1, MISSING_BIN, 0, 2]);
        // bin(v) <= b  <=>  v <= threshold(b)
        for v in [0.0, 1.0, 1.5, 2.0, 2.6, 3.0, 9.0] {
            for b in 0..3u8 {
                assert_eq!(m.bin_value(0, v) <= b, v <= m.threshold(0, b));
            }
        }
    }

    #[test]
    fn many_values_capped_and_balanced() {
        let n = 10_000;
        let x = Array2::from_shape_fn((n, 1), |(i, _)| ((i * 7919) % n) as f64);
        let m = BinMapper::fit(x.view(), 100);
        assert_eq!(m.n_bins(0), 100);
        let codes = m.transform(x.view());
        let mut counts = [0usize; 256];
        for c in codes {
            counts[c as usize] += 1;
        }
        // equal-frequency bins: 100 rows each
        assert!(
            counts[..100].iter().all(|&c| c == 100),
            "{:?}",
            &counts[..100]
        );
    }
}
