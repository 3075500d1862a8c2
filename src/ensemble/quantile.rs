//! Weighted quantiles and the quantile-regression-forest kernel.
//!
//! Definition used throughout (the inverse of the weighted step CDF): with values `v_i`,
//! non-negative weights `w_i` and `F(v) = sum_{v_i <= v} w_i / sum_i w_i`,
//!
//! `Q(q) = min { v_i : w_i > 0 and F(v_i) >= q - 1e-10 }`.
//!
//! With unit weights this is definition 1 of Hyndman & Fan (1996, "Sample quantiles in
//! statistical packages", The American Statistician 50(4)), the inverse of the empirical CDF;
//! with whole-number weights it equals that quantile of the list with each value repeated by
//! its weight. The slack of 1e-10 only absorbs round-off in sums of many fractional weights
//! (e.g. a forest's 1/k-scaled leaf weights). `Q(0)` is the smallest value with positive
//! weight and `Q(1)` the largest.
//!
//! Quantile regression forests (Meinshausen 2006, JMLR 7:983-999) estimate
//! `F(y | x) = sum_i w_i(x) 1{Y_i <= y}` with `w_i(x) = (1/k) sum_t c_it / C_t(x)` over the
//! training rows `i` sharing the leaf of `x` in tree `t` (`c_it` is row `i`'s in-bag count times
//! its sample weight, `C_t(x)` the leaf's total). The prediction kernel pre-sorts the training
//! targets once, keeps each leaf's rows as positions in that order, accumulates the weights of a
//! prediction row into a dense array and reads every requested level and threshold from one
//! cumulative scan.

/// Relative slack on the level, absorbing round-off in summed weights.
pub const LEVEL_SLACK: f64 = 1e-10;

/// Weighted quantile at level `q` (clamped to [0, 1]), by the definition in the module docs.
///
/// Pairs whose value is NaN or whose weight is not a positive finite number are ignored.
/// Returns NaN when the slices differ in length or nothing remains.
pub fn weighted_quantile(values: &[f64], weights: &[f64], q: f64) -> f64 {
    weighted_quantiles(values, weights, &[q])[0]
}

/// Weighted quantiles at several levels in one pass (one sort, one cumulative scan); the
/// result follows the order of `levels`. Same definition and conventions as
/// [`weighted_quantile`]; a NaN level gives NaN.
pub fn weighted_quantiles(values: &[f64], weights: &[f64], levels: &[f64]) -> Vec<f64> {
    if values.len() != weights.len() {
        return vec![f64::NAN; levels.len()];
    }
    let mut pairs: Vec<(f64, f64)> = values
        .iter()
        .zip(weights)
        .filter(|(v, w)| !v.is_nan() && w.is_finite() && **w > 0.0)
        .map(|(v, w)| (*v, *w))
        .collect();
    if pairs.is_empty() {
        return vec![f64::NAN; levels.len()];
    }
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut cum = Vec::with_capacity(pairs.len());
    let mut c = 0.0;
    for (_, w) in &pairs {
        c += w;
        cum.push(c);
    }
    levels
        .iter()
        .map(|&q| {
            if q.is_nan() {
                f64::NAN
            } else {
                pairs[quantile_position(&cum, q)].0
            }
        })
        .collect()
}

/// Position of level `q` in a non-decreasing cumulative weight array whose last entry is the
/// total: the first position whose cumulative weight reaches `(q - slack) * total` and is
/// positive.
#[inline]
pub(crate) fn quantile_position(cum: &[f64], q: f64) -> usize {
    let total = cum[cum.len() - 1];
    let q = q.clamp(0.0, 1.0);
    let target = ((q - LEVEL_SLACK) * total).max(f64::MIN_POSITIVE);
    cum.partition_point(|&c| c < target).min(cum.len() - 1)
}

/// Leaf weights of a forest for one output, arranged for fast prediction.
pub(crate) struct QrfKernel {
    /// Training targets of the output, ascending.
    pub y_sorted: Vec<f64>,
    /// For each tree, the offset of its first leaf in `leaf_ptr`.
    pub tree_leaf_offset: Vec<usize>,
    /// CSR over all leaves of all trees: members of global leaf `g` at `leaf_ptr[g]..leaf_ptr[g+1]`.
    pub leaf_ptr: Vec<u32>,
    /// Position of each member in `y_sorted`.
    pub pos: Vec<u32>,
    /// Weight of each member: its in-bag weight / (leaf total * number of trees).
    pub weight: Vec<f64>,
}

impl QrfKernel {
    /// Rows per accumulation block for `n_train` training rows: the block's accumulators
    /// (`rows x n_train` floats) stay in the fast cache while each tree's leaves are added.
    pub fn block_rows(n_train: usize) -> usize {
        (8192 / n_train.max(1)).clamp(1, 64)
    }

    /// Adds, for rows `r0..r0 + nb` of a chunk of `m` rows whose leaf ids are stored
    /// tree-major (`leaves[t * m + r]`), each tree's leaf weights into the row's accumulator
    /// `acc[(r - r0) * n .. (r - r0 + 1) * n]`. Trees are the outer loop, so a tree's leaves
    /// are read once per block rather than once per row; every accumulator still receives
    /// its trees in tree order.
    pub fn accumulate_block(
        &self,
        leaves: &[u32],
        m: usize,
        r0: usize,
        nb: usize,
        acc: &mut [f64],
    ) {
        let n = self.y_sorted.len();
        for (t, &off) in self.tree_leaf_offset.iter().enumerate() {
            let row_leaves = &leaves[t * m + r0..t * m + r0 + nb];
            for (a_row, &leaf) in acc.chunks_exact_mut(n).zip(row_leaves) {
                let g = off + leaf as usize;
                let (a, b) = (self.leaf_ptr[g] as usize, self.leaf_ptr[g + 1] as usize);
                for (&p, &w) in self.pos[a..b].iter().zip(&self.weight[a..b]) {
                    a_row[p as usize] += w;
                }
            }
        }
    }

    /// Turns accumulated weights into cumulative weights in place; returns the total.
    #[inline]
    pub fn cumulate(acc: &mut [f64]) -> f64 {
        let mut c = 0.0;
        for a in acc.iter_mut() {
            c += *a;
            *a = c;
        }
        c
    }

    /// Quantile at level `q` from cumulative weights.
    #[inline]
    pub fn quantile(&self, cum: &[f64], q: f64) -> f64 {
        self.y_sorted[quantile_position(cum, q)]
    }

    /// Number of training targets `<= t` (a threshold's position in the sorted targets).
    #[inline]
    pub fn threshold_position(&self, t: f64) -> usize {
        self.y_sorted.partition_point(|&y| y <= t)
    }

    /// `P(Y <= t)` from cumulative weights, with `t`'s position from [`Self::threshold_position`].
    #[inline]
    pub fn cdf(cum: &[f64], position: usize) -> f64 {
        let total = cum[cum.len() - 1];
        if position == 0 || total <= 0.0 {
            0.0
        } else {
            (cum[position - 1] / total).clamp(0.0, 1.0)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_worked_example() {
        // values 1,2,3 with weights 1,2,1: F = 0.25, 0.75, 1
        let v = [3.0, 1.0, 2.0];
        let w = [1.0, 1.0, 2.0];
        let q = weighted_quantiles(&v, &w, &[0.0, 0.25, 0.26, 0.75, 0.76, 1.0]);
        assert_eq!(q, vec![1.0, 1.0, 2.0, 2.0, 3.0, 3.0]);
        assert!(weighted_quantile(&[], &[], 0.5).is_nan());
        assert!(weighted_quantile(&[1.0], &[0.0], 0.5).is_nan());
        // zero-weight values are never returned
        assert_eq!(weighted_quantile(&[0.0, 5.0], &[0.0, 1.0], 0.0), 5.0);
    }
}
