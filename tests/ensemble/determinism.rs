//! Same seed, same numbers: any thread count, any row order of prediction.

use ndarray::{Array2, Axis, ShapeBuilder};
use tidemark::ensemble::{BoostSettings, Forest, ForestSettings, Loss, fit_quantile_boosters};

use super::common::{friedman1, permutation};
use crate::threads::in_pool;

fn multi_target(n: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    let (mut x, y) = friedman1(n, 1.0, seed);
    // some missing values so the NaN paths are exercised too
    for i in (0..n).step_by(7) {
        x[[i, 2]] = f64::NAN;
    }
    let y2 = Array2::from_shape_fn((n, 2), |(i, j)| if j == 0 { y[i] } else { y[i].sin() });
    (x, y2)
}

#[test]
fn same_seed_same_model_with_1_and_2_threads() {
    let (x, y) = multi_target(300, 1);
    let (xq, _) = multi_target(500, 2);
    let settings = ForestSettings {
        n_trees: 60,
        sample_fraction: 0.7,
        seed: 17,
        ..Default::default()
    };
    let y0 = y.column(0).to_vec();
    let run = |threads| {
        in_pool(threads, || {
            let f = settings.fit(x.view(), y.view(), None).unwrap();
            let json = f.to_json().unwrap();
            let mean = f.predict(xq.view());
            let dist = f.predict_distribution(xq.view(), 1, &[0.1, 0.5, 0.9], &[0.0]);
            let perm = f.permutation_importance(x.view(), y.view(), 2, 5);
            let booster = BoostSettings {
                loss: Loss::Huber { delta: 1.0 },
                n_rounds: 50,
                seed: 3,
                ..Default::default()
            }
            .fit(x.view(), &y0, None, None)
            .unwrap();
            let qb = fit_quantile_boosters(
                &BoostSettings {
                    n_rounds: 40,
                    ..Default::default()
                },
                &[0.2, 0.8],
                x.view(),
                &y0,
                None,
                Some(&(0..300).map(|i| i % 10).collect::<Vec<_>>()),
            )
            .unwrap();
            (
                json,
                mean,
                dist,
                perm,
                booster.to_json().unwrap(),
                booster.predict(xq.view()),
                qb.predict(xq.view()),
            )
        })
    };
    let one = run(1);
    let two = run(2);
    assert!(
        one.0 == two.0,
        "forest JSON differs between 1 and 2 threads"
    );
    assert_eq!(one.1, two.1);
    assert_eq!(one.2, two.2);
    assert_eq!(one.3, two.3);
    assert!(
        one.4 == two.4,
        "booster JSON differs between 1 and 2 threads"
    );
    assert_eq!(one.5, two.5);
    assert_eq!(one.6, two.6);
}

#[test]
fn shuffling_prediction_rows_permutes_outputs() {
    let (x, y) = multi_target(200, 3);
    let forest: Forest = ForestSettings {
        n_trees: 50,
        seed: 4,
        ..Default::default()
    }
    .fit(x.view(), y.view(), None)
    .unwrap();
    let booster = BoostSettings {
        n_rounds: 30,
        ..Default::default()
    }
    .fit(x.view(), &y.column(0).to_vec(), None, None)
    .unwrap();
    let (xq, _) = multi_target(1000, 5);
    let perm = permutation(1000, 6);
    let xp = xq.select(Axis(0), &perm);
    let thresholds: Vec<f64> = (0..1000).map(|i| 5.0 + (i % 20) as f64).collect();
    let tp: Vec<f64> = perm.iter().map(|&i| thresholds[i]).collect();

    let a = forest.predict(xq.view());
    let b = forest.predict(xp.view());
    let (qa, ca) = forest.predict_distribution(xq.view(), 0, &[0.05, 0.5, 0.95], &[10.0, 15.0]);
    let (qb, cb) = forest.predict_distribution(xp.view(), 0, &[0.05, 0.5, 0.95], &[10.0, 15.0]);
    let ta = forest.per_tree_predictions(xq.view(), 1);
    let tb = forest.per_tree_predictions(xp.view(), 1);
    let da = forest.cdf_at(xq.view(), 0, &thresholds);
    let db = forest.cdf_at(xp.view(), 0, &tp);
    let ba = booster.predict(xq.view());
    let bb = booster.predict(xp.view());
    for (r, &src) in perm.iter().enumerate() {
        assert_eq!(b.row(r), a.row(src));
        assert_eq!(qb.row(r), qa.row(src));
        assert_eq!(cb.row(r), ca.row(src));
        assert_eq!(tb.row(r), ta.row(src));
        assert_eq!(db[r], da[src]);
        assert_eq!(bb[r], ba[src]);
    }
    // a column-major (Fortran-order) copy of the rows predicts the same numbers
    let mut xf = Array2::zeros(xq.raw_dim().f());
    xf.assign(&xq);
    assert_eq!(forest.predict(xf.view()), a);
}
