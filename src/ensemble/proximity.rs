//! Forest proximity weights of the training rows, read from the same walk of the trees as the
//! quantile-forest distribution.
//!
//! The weights are those of quantile regression forests (Meinshausen 2006, JMLR 7:983-999):
//! `w_i(x) = (1/k) sum_t c_it / C_t(x)` over the training rows `i` that share the leaf of `x` in
//! tree `t`, summing to one. Lu & Hardin (2021, "A unified framework for random forest prediction
//! error estimation", JMLR 22(8)) weight out-of-bag prediction errors by these weights to
//! estimate the conditional distribution of the error at `x`; the calibration module weights
//! held-out-well conformity scores by them in the same way ([`crate::calibrate::conformal`]).
//!
//! [`Forest::predict_with_proximity`] returns the forest's mean, quantiles and CDF values as
//! [`Forest::predict_with_distribution`] does, and hands each row's weights (in training-row
//! order) to a caller's function: the weights are the quantile-forest accumulator before it is
//! cumulated, so they cost one gather of `n_train` values per row and no second tree walk.

use super::forest::Forest;
use super::quantile::QrfKernel;
use ndarray::{Array2, ArrayView2};

impl Forest {
    /// Training row of every position of the quantile-forest kernel's sorted targets
    /// (`u32::MAX` for a position no leaf holds, whose weight is always zero).
    fn kernel_rows(&self, kernel: &QrfKernel) -> Vec<u32> {
        let mut row_of = vec![u32::MAX; kernel.y_sorted.len()];
        let mut idx = 0;
        for t in 0..self.n_trees() {
            let mem = self.leaf_members(t);
            for l in 0..mem.n_leaves() {
                for &r in mem.leaf(l).0 {
                    row_of[kernel.pos[idx] as usize] = r;
                    idx += 1;
                }
            }
        }
        row_of
    }

    /// One walk of the trees per row of `x`: the mean prediction of `output`, its quantiles at
    /// `levels`, `P(Y <= t | x)` at `thresholds` (all equal to
    /// [`Forest::predict_with_distribution`] bit for bit), and `f(w)` per row, where `w` holds
    /// the quantile-forest weights `w_i(x)` of the training rows in fitting order (see the
    /// module docs).
    ///
    /// # Panics
    /// As [`Forest::predict_with_distribution`].
    pub fn predict_with_proximity<T, F>(
        &self,
        x: ArrayView2<f64>,
        output: usize,
        levels: &[f64],
        thresholds: &[f64],
        f: F,
    ) -> (Vec<f64>, Array2<f64>, Array2<f64>, Vec<T>)
    where
        T: Send,
        F: Fn(&[f64]) -> T + Sync,
    {
        self.assert_output(output);
        let row_of = self.kernel_rows(&self.qrf_kernel(output));
        let n = self.n_train();
        let by_training_row = |by_position: &[f64]| -> T {
            let mut w = vec![0.0; n];
            for (&row, &v) in row_of.iter().zip(by_position) {
                if row != u32::MAX {
                    w[row as usize] = v;
                }
            }
            f(&w)
        };
        self.distribution_pass(x, output, levels, thresholds, true, Some(&by_training_row))
    }
}

#[cfg(test)]
mod tests {
    use crate::ensemble::ForestSettings;
    use ndarray::Array2;

    #[test]
    fn weights_and_distribution_match_the_forest() {
        let n = 60;
        let x = Array2::from_shape_fn((n, 2), |(i, j)| ((i * 7 + j * 13) % 17) as f64);
        let y = Array2::from_shape_fn((n, 1), |(i, _)| (i % 11) as f64 + 0.1 * (i % 3) as f64);
        let w: Vec<f64> = (0..n).map(|i| 1.0 + (i % 4) as f64).collect();
        let forest = ForestSettings {
            n_trees: 25,
            seed: 5,
            ..ForestSettings::default()
        }
        .fit(x.view(), y.view(), Some(&w))
        .unwrap();
        let q = Array2::from_shape_fn((9, 2), |(i, j)| (i * 2 + j * 3) as f64 * 0.9);
        let levels = [0.1, 0.5, 0.9];
        let th = [3.0, 8.5];
        let (m, qq, cc, weights) =
            forest.predict_with_proximity(q.view(), 0, &levels, &th, <[f64]>::to_vec);
        let (m0, q0, c0) = forest.predict_with_distribution(q.view(), 0, &levels, &th);
        assert_eq!(m, m0);
        assert_eq!(qq, q0);
        assert_eq!(cc, c0);
        for (r, wr) in weights.iter().enumerate() {
            let direct = forest.quantile_weights(q.row(r).as_slice().unwrap());
            for (a, b) in wr.iter().zip(&direct) {
                assert!((a - b).abs() < 1e-12, "row {r}: {a} vs {b}");
            }
            assert!((wr.iter().sum::<f64>() - 1.0).abs() < 1e-9);
        }
    }
}
