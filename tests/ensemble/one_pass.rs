//! One walk of the trees for the mean and the quantile-forest distribution together must give
//! exactly what the separate calls give (the map prediction relies on it to halve tree walks).

use super::common::{friedman1, hetero};
use ndarray::Axis;
use tidemark::ensemble::ForestSettings;

#[test]
fn mean_and_distribution_in_one_pass_equal_separate_calls() {
    for (x, y, seed) in [
        {
            let (x, y) = hetero(300, 5);
            (x, y, 1)
        },
        {
            let (x, y) = friedman1(250, 1.0, 8);
            (x, y, 2)
        },
    ] {
        let forest = ForestSettings {
            n_trees: 60,
            seed,
            ..Default::default()
        }
        .fit(x.view(), y.view().insert_axis(Axis(1)), None)
        .unwrap();
        let (xq, _) = friedman1(700, 1.0, 99);
        let xq = xq.slice(ndarray::s![.., ..x.ncols()]).to_owned();
        let levels = [0.1, 0.5, 0.9, 0.03];
        let ths = [f64::NAN, 0.5, 12.0];
        let (mean, q, c) = forest.predict_with_distribution(xq.view(), 0, &levels, &ths);
        let mean_ref = forest.predict(xq.view());
        let (q_ref, c_ref) = forest.predict_distribution(xq.view(), 0, &levels, &ths);
        assert_eq!(mean.len(), xq.nrows());
        for (a, b) in mean.iter().zip(mean_ref.column(0)) {
            assert_eq!(a.to_bits(), b.to_bits());
        }
        assert_eq!(q, q_ref);
        for (a, b) in c.iter().zip(c_ref.iter()) {
            assert!(a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()));
        }
        assert!(c.column(0).iter().all(|v| v.is_nan()));
        // the quantiles are the forest's own: non-decreasing in the level
        for r in 0..xq.nrows() {
            assert!(q[[r, 3]] <= q[[r, 0]] && q[[r, 0]] <= q[[r, 1]] && q[[r, 1]] <= q[[r, 2]]);
        }
    }
}
