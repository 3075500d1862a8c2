//! Gradient boosting: quantile-loss calibration, losses, early stopping on held-out groups.

use ndarray::{Array1, Array2, s};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Exp};
use tidemark::ensemble::{BoostSettings, Loss, fit_quantile_boosters};

use super::common::{friedman1, r2};

/// `y = 3 x0 + sin(6 x1) + (0.5 + x0) * noise` with skewed (exponential) noise, as in
/// scikit-learn's quantile-loss test for its histogram booster.
fn skewed(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let exp = Exp::new(1.0).unwrap();
    let x = Array2::from_shape_fn((n, 2), |_| rng.random::<f64>());
    let y = Array1::from_shape_fn(n, |i| {
        let e: f64 = exp.sample(&mut rng);
        3.0 * x[[i, 0]] + (6.0 * x[[i, 1]]).sin() + (0.5 + x[[i, 0]]) * e
    });
    (x, y)
}

#[test]
fn quantile_loss_hits_its_level_on_held_out_rows() {
    // scikit-learn (test_gradient_boosting.py, test_quantile_asymmetric_error) checks that
    // the share of y below a quantile-loss booster's prediction is q on 10,000 samples; here on
    // 10,000 held-out rows with q +- 0.02 (binomial sd at n = 10,000 is at most 0.005).
    let (x, y) = skewed(20_000, 1);
    let (xt, yt) = (x.slice(s![..10_000, ..]), y.slice(s![..10_000]).to_vec());
    let (xv, yv) = (x.slice(s![10_000.., ..]), y.slice(s![10_000..]).to_vec());
    let settings = BoostSettings {
        n_rounds: 200,
        learning_rate: 0.1,
        seed: 4,
        ..Default::default()
    };
    let levels = [0.1, 0.5, 0.9];
    let qb = fit_quantile_boosters(&settings, &levels, xt, &yt, None, None).unwrap();
    let pred = qb.predict(xv);
    for (l, &q) in levels.iter().enumerate() {
        let below = yv
            .iter()
            .zip(pred.column(l))
            .filter(|(y, p)| *y < *p)
            .count();
        let frac = below as f64 / yv.len() as f64;
        assert!(
            (frac - q).abs() <= 0.02,
            "level {q}: fraction below {frac:.4}"
        );
    }
    // rearranged quantiles never cross (Chernozhukov, Fernandez-Val & Galichon 2010)
    for r in 0..pred.nrows() {
        assert!(pred[[r, 0]] <= pred[[r, 1]] && pred[[r, 1]] <= pred[[r, 2]]);
    }
    // the raw median booster alone gives the same column when it did not cross
    let raw = qb.predict_raw(xv);
    let same = (0..pred.nrows())
        .filter(|&r| raw[[r, 1]] == pred[[r, 1]])
        .count();
    assert!(same > pred.nrows() * 9 / 10);
}

#[test]
fn every_loss_fits_friedman1() {
    // all four losses learn Friedman #1 (Friedman 1991); boosted depth-3 trees reach R2 > 0.8
    // on 1000 rows (common practice, no published source)
    let (x, y) = friedman1(2000, 1.0, 5);
    let (xt, yt) = (x.slice(s![..1000, ..]), y.slice(s![..1000]).to_vec());
    let (xv, yv) = (x.slice(s![1000.., ..]), y.slice(s![1000..]).to_vec());
    for loss in [
        Loss::Squared,
        Loss::Absolute,
        Loss::Huber { delta: 1.0 },
        Loss::Quantile { q: 0.5 },
    ] {
        let b = BoostSettings {
            loss,
            learning_rate: 0.1,
            seed: 1,
            ..Default::default()
        }
        .fit(xt, &yt, None, None)
        .unwrap();
        let score = r2(&yv, &b.predict(xv));
        assert!(
            score > 0.8,
            "{loss:?}: R2 {score:.3}, rounds {}",
            b.n_rounds_used()
        );
    }
}

#[test]
fn early_stopping_holds_out_groups_and_stops() {
    // pure noise: the held-out loss cannot improve for long, so boosting stops early
    let mut rng = StdRng::seed_from_u64(3);
    let n = 300;
    let x = Array2::from_shape_fn((n, 4), |_| rng.random::<f64>());
    let y: Vec<f64> = (0..n).map(|_| rng.random::<f64>()).collect();
    let groups: Vec<usize> = (0..n).map(|i| i / 30).collect(); // 10 wells of 30 rows
    let settings = BoostSettings {
        n_rounds: 300,
        learning_rate: 0.3,
        early_stopping_rounds: Some(10),
        ..Default::default()
    };
    let b = settings.fit(x.view(), &y, None, Some(&groups)).unwrap();
    assert!(b.early_stopped());
    assert!(b.n_rounds_used() < 100, "{}", b.n_rounds_used());
    // the curve stops `patience` rounds after its best round
    let curve = b.validation_curve();
    // entry 0 is the initial constant; the kept round count is the first minimum
    let best =
        curve.iter().enumerate().fold(
            (0, f64::INFINITY),
            |acc, (i, &v)| if v < acc.1 { (i, v) } else { acc },
        );
    assert_eq!(b.n_rounds_used(), best.0);
    assert_eq!(curve.len(), best.0 + 10 + 1);
    // a single group cannot be split: all rounds are fitted
    let one = vec![0usize; n];
    let b1 = BoostSettings {
        n_rounds: 20,
        ..settings
    }
    .fit(x.view(), &y, None, Some(&one))
    .unwrap();
    assert_eq!(b1.n_rounds_used(), 20);
    assert!(!b1.early_stopped());
}

#[test]
fn constant_target_predicts_the_constant() {
    let x = Array2::from_shape_fn((50, 2), |(i, j)| (i * (j + 1)) as f64);
    let y = vec![2.5; 50];
    for loss in [
        Loss::Squared,
        Loss::Absolute,
        Loss::Huber { delta: 0.1 },
        Loss::Quantile { q: 0.9 },
    ] {
        let b = BoostSettings {
            loss,
            early_stopping_rounds: None,
            n_rounds: 10,
            ..Default::default()
        }
        .fit(x.view(), &y, None, None)
        .unwrap();
        assert!(b.predict(x.view()).iter().all(|v| (v - 2.5).abs() < 1e-12));
    }
}
