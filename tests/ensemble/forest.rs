//! Forests: accuracy against smartcore, quantile-forest quantiles against the true conditional
//! distribution, OOB, per-tree predictions, importance, multi-output, missing values.

use ndarray::{Array1, Array2, Axis, s};
use smartcore::ensemble::random_forest_regressor::{
    RandomForestRegressor, RandomForestRegressorParameters,
};
use statrs::distribution::{ContinuousCDF, Normal};
use tidemark::ensemble::ForestSettings;

use super::common::{friedman1, hetero, hetero_mean, hetero_sd, r2};

fn col(y: &Array1<f64>) -> Array2<f64> {
    y.clone().insert_axis(Axis(1))
}

#[test]
fn friedman1_r2_matches_smartcore() {
    // Friedman #1 (Friedman 1991), 500 training rows, 1000 held-out rows, noise sd 1.
    let (x, y) = friedman1(1500, 1.0, 7);
    let (xt, yt) = (x.slice(s![..500, ..]), y.slice(s![..500]));
    let (xv, yv) = (
        x.slice(s![500.., ..]).to_owned(),
        y.slice(s![500..]).to_owned(),
    );
    let n_trees = 200;

    let forest = ForestSettings {
        n_trees,
        seed: 3,
        ..Default::default()
    }
    .fit(xt, col(&yt.to_owned()).view(), None)
    .unwrap();
    let ours = forest.predict(xv.view()).column(0).to_owned();

    // smartcore 0.7 RandomForestRegressor, same tree count and data, its default settings
    let params = RandomForestRegressorParameters::default()
        .with_n_trees(n_trees)
        .with_seed(3);
    let sc = RandomForestRegressor::fit(&xt.to_owned(), &yt.to_owned(), params).unwrap();
    let theirs: Array1<f64> = sc.predict(&xv).unwrap();

    // R2 computed by smartcore 0.7's metrics::r2 for both models
    let r2_ours = smartcore::metrics::r2(&yv, &ours);
    let r2_theirs = smartcore::metrics::r2(&yv, &theirs);
    assert!((r2_ours - r2(yv.as_slice().unwrap(), ours.as_slice().unwrap())).abs() < 1e-12);
    eprintln!("Friedman #1 held-out R2: tidemark {r2_ours:.4}, smartcore {r2_theirs:.4}");
    // issue requirement: at least smartcore's held-out R2 minus 0.02
    assert!(
        r2_ours >= r2_theirs - 0.02,
        "tidemark R2 {r2_ours:.4} vs smartcore {r2_theirs:.4}"
    );
    // both learn the function (Friedman #1 forests reach R2 ~0.8 at this size;
    // common practice, no published source)
    assert!(r2_ours > 0.7, "R2 {r2_ours}");

    // OOB R2 estimates the held-out R2 (Breiman 1996, out-of-bag estimation); with 200 trees
    // every row is out of bag somewhere
    let oob = forest.oob_predictions().column(0).to_owned();
    assert!(oob.iter().all(|v| v.is_finite()));
    let r2_oob = r2(yt.as_slice().unwrap(), oob.as_slice().unwrap());
    assert!(
        (r2_oob - r2_ours).abs() < 0.1,
        "OOB R2 {r2_oob} vs held-out {r2_ours}"
    );

    // importance: the five informative features outrank the five noise features
    let imp = forest.impurity_importance();
    assert!((imp.iter().sum::<f64>() - 1.0).abs() < 1e-12);
    let min_inf = imp[..5].iter().copied().fold(f64::INFINITY, f64::min);
    let max_noise = imp[5..].iter().copied().fold(0.0, f64::max);
    assert!(min_inf > max_noise, "{imp:?}");
    let perm = forest.permutation_importance(xv.view(), col(&yv).view(), 3, 11);
    let min_inf = perm[..5].iter().copied().fold(f64::INFINITY, f64::min);
    let max_noise = perm[5..].iter().copied().fold(f64::NEG_INFINITY, f64::max);
    assert!(min_inf > max_noise, "{perm:?}");
    // x3 (10 x3, range 10) matters more than x4 (5 x4, range 5)
    assert!(perm[3] > perm[4], "{perm:?}");
}

#[test]
fn quantile_forest_matches_normal_quantiles() {
    // y = 4 x0 + (0.5 + x0) N(0,1) with a noise feature x1; true conditional quantiles from
    // statrs 0.19's Normal inverse CDF. Four independent training sets of 3000 rows, leaves of
    // at least 40 rows; the forest estimates are averaged over the four replicates.
    let levels = [0.1, 0.5, 0.9];
    let points = [0.25, 0.5, 0.75];
    let reps = 4;
    let mut est_q = [[0.0; 3]; 3];
    let mut est_p = [[0.0; 3]; 3];
    let mut n_eff = 0.0;
    for rep in 0..reps {
        let (x, y) = hetero(3000, 100 + rep);
        let forest = ForestSettings {
            n_trees: 300,
            min_samples_leaf: 40,
            max_features: 1.0,
            seed: rep,
            ..Default::default()
        }
        .fit(x.view(), col(&y).view(), None)
        .unwrap();
        for (i, &x0) in points.iter().enumerate() {
            // 40 query rows at this x0 with the noise feature spread over [0, 1]
            let q =
                Array2::from_shape_fn(
                    (40, 2),
                    |(r, j)| {
                        if j == 0 { x0 } else { (r as f64 + 0.5) / 40.0 }
                    },
                );
            let truth = Normal::new(hetero_mean(x0), hetero_sd(x0)).unwrap();
            let thresholds: Vec<f64> = levels.iter().map(|&l| truth.inverse_cdf(l)).collect();
            let (pq, pc) = forest.predict_distribution(q.view(), 0, &levels, &thresholds);
            for r in 0..q.nrows() {
                assert!(pq[[r, 0]] <= pq[[r, 1]] && pq[[r, 1]] <= pq[[r, 2]]);
            }
            for l in 0..3 {
                est_q[i][l] += pq.column(l).mean().unwrap() / reps as f64;
                est_p[i][l] += pc.column(l).mean().unwrap() / reps as f64;
            }
            let w = forest.quantile_weights(q.row(20).as_slice().unwrap());
            assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12);
            n_eff += 1.0 / w.iter().map(|v| v * v).sum::<f64>() / (reps * 3) as f64;
        }
    }
    // Tolerance. The weights put the prediction on n_eff ~ 200 training rows (asserted
    // below), so the sampling error of one replicate's q-quantile is
    // sqrt(q (1 - q) / n_eff) / phi(z_q) sd = 0.12 sd at q = 0.1, 0.09 sd at the median
    // (asymptotic variance of a sample quantile); splits chosen on the same noisy targets
    // (a non-honest forest, Wager & Athey 2018, JASA 113) about double that spread in
    // practice. Averaging 4 replicates halves it again to ~0.1 sd, so 0.25 sd allows about
    // 2.5 standard errors. The CDF at the true quantile is a weighted proportion with
    // sd ~ sqrt(0.09 / 200) = 0.02 per replicate; 0.05 allows the same margin.
    assert!(n_eff > 150.0, "effective sample size {n_eff}");
    for (i, &x0) in points.iter().enumerate() {
        let truth = Normal::new(hetero_mean(x0), hetero_sd(x0)).unwrap();
        for (l, &level) in levels.iter().enumerate() {
            let true_q = truth.inverse_cdf(level);
            let est = est_q[i][l];
            assert!(
                (est - true_q).abs() < 0.25 * hetero_sd(x0),
                "x0 {x0}, level {level}: forest {est:.3}, true {true_q:.3}"
            );
            let p = est_p[i][l];
            assert!(
                (p - level).abs() < 0.05,
                "x0 {x0}: P(Y <= q_{level}) = {p:.3}"
            );
        }
    }
}

#[test]
fn forest_views_agree_with_each_other() {
    let (x, y) = friedman1(300, 1.0, 2);
    let forest = ForestSettings {
        n_trees: 40,
        seed: 9,
        ..Default::default()
    }
    .fit(x.view(), col(&y).view(), None)
    .unwrap();
    let (xq, _) = friedman1(257, 1.0, 3);
    let mean = forest.predict(xq.view());
    let per_tree = forest.per_tree_predictions(xq.view(), 0);
    assert_eq!(per_tree.dim(), (257, 40));
    // mean of the trees = forest prediction (definition of bagging, Breiman 1996)
    for r in 0..257 {
        let m = per_tree.row(r).mean().unwrap();
        assert!((m - mean[[r, 0]]).abs() < 1e-9 * (1.0 + m.abs()));
    }
    // per-tree leaf values follow from apply + leaf values; leaf membership counts sum to the
    // bootstrap draws (n rows with replacement)
    let leaves = forest.apply(xq.view());
    for t in 0..forest.n_trees() {
        let tree = &forest.trees()[t];
        assert_eq!(
            tree.apply(xq.row(5).as_slice().unwrap()),
            leaves[[5, t]] as usize
        );
        assert_eq!(
            tree.leaf_value(leaves[[5, t]] as usize, 0),
            per_tree[[5, t]]
        );
        let mem = forest.leaf_members(t);
        let drawn: u32 = (0..mem.n_leaves())
            .map(|l| mem.leaf(l).1.iter().sum::<u32>())
            .sum();
        assert_eq!(drawn, 300);
        // min_samples_leaf = 3 distinct rows per leaf
        assert!((0..mem.n_leaves()).all(|l| mem.leaf(l).0.len() >= 3));
    }
    // the quantile forest's distribution: median in the data range, CDF from cdf_at equals the
    // one from predict_distribution, and P(Y <= max y) = 1
    let ymax = y.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (q, c) = forest.predict_distribution(xq.view(), 0, &[0.0, 0.5, 1.0], &[10.0, ymax]);
    let t10 = vec![10.0; 257];
    let c10 = forest.cdf_at(xq.view(), 0, &t10);
    for r in 0..257 {
        assert_eq!(c[[r, 0]], c10[r]);
        assert!((c[[r, 1]] - 1.0).abs() < 1e-12);
        assert!(q[[r, 0]] <= q[[r, 1]] && q[[r, 1]] <= q[[r, 2]]);
    }
    // OOB distribution: finite for rows out of bag somewhere
    let (oq, oc) = forest.oob_distribution(0, &[0.5], &[10.0]);
    assert_eq!(oq.dim(), (300, 1));
    assert!(oq.iter().all(|v| v.is_finite()) && oc.iter().all(|v| (0.0..=1.0).contains(v)));
}

#[test]
fn oob_is_nan_exactly_for_rows_in_every_bag() {
    let (x, y) = friedman1(60, 1.0, 4);
    let forest = ForestSettings {
        n_trees: 1,
        seed: 1,
        ..Default::default()
    }
    .fit(x.view(), col(&y).view(), None)
    .unwrap();
    let mem = forest.leaf_members(0);
    let mut in_bag = [false; 60];
    for l in 0..mem.n_leaves() {
        for &r in mem.leaf(l).0 {
            in_bag[r as usize] = true;
        }
    }
    let oob = forest.oob_predictions();
    let tree = &forest.trees()[0];
    for r in 0..60 {
        if in_bag[r] {
            assert!(oob[[r, 0]].is_nan());
        } else {
            let leaf = tree.apply(x.row(r).as_slice().unwrap());
            assert_eq!(oob[[r, 0]], tree.leaf_value(leaf, 0));
        }
    }
    // a bootstrap sample leaves out about (1 - 1/n)^n = 37 % of rows (Breiman 1996)
    let n_out = in_bag.iter().filter(|b| !**b).count();
    assert!((10..=35).contains(&n_out), "{n_out}");
}

#[test]
fn multi_output_standardises_and_shares_trees() {
    // An affine copy of an output standardises to the same values (up to sign), so a
    // two-output forest is as accurate as the one-output forest, and because both outputs
    // share every leaf their leaf means keep the affine relation exactly.
    let (x, y) = friedman1(400, 1.0, 8);
    let y2 = Array2::from_shape_fn(
        (400, 2),
        |(i, j)| {
            if j == 0 { y[i] } else { -3.0 * y[i] + 7.0 }
        },
    );
    let settings = ForestSettings {
        n_trees: 60,
        seed: 2,
        ..Default::default()
    };
    let single = settings.fit(x.view(), col(&y).view(), None).unwrap();
    let multi = settings.fit(x.view(), y2.view(), None).unwrap();
    assert_eq!(multi.n_outputs(), 2);
    let (scale_mean, scale_sd) = multi.output_scaling();
    assert!((scale_mean[1] - (-3.0 * scale_mean[0] + 7.0)).abs() < 1e-9);
    assert!((scale_sd[1] - 3.0 * scale_sd[0]).abs() < 1e-9);
    let (xq, yq) = friedman1(500, 1.0, 9);
    let ps = single.predict(xq.view());
    let pm = multi.predict(xq.view());
    for r in 0..500 {
        assert!((pm[[r, 1]] - (-3.0 * pm[[r, 0]] + 7.0)).abs() < 1e-9);
    }
    let r2_single = r2(yq.as_slice().unwrap(), ps.column(0).to_vec().as_slice());
    let r2_multi = r2(yq.as_slice().unwrap(), pm.column(0).to_vec().as_slice());
    assert!(
        (r2_single - r2_multi).abs() < 0.02,
        "{r2_single} vs {r2_multi}"
    );
    // quantiles of the second output mirror the first: Q_2(q) = -3 Q_1(1 - q) + 7 holds up to
    // the step-function convention at ties, so compare the medians loosely
    let (q0, _) = multi.predict_distribution(xq.view(), 0, &[0.5], &[]);
    let (q1, _) = multi.predict_distribution(xq.view(), 1, &[0.5], &[]);
    let spread = 3.0 * scale_sd[0];
    for r in 0..500 {
        assert!((q1[[r, 0]] - (-3.0 * q0[[r, 0]] + 7.0)).abs() < spread);
    }
}

#[test]
fn missing_values_follow_their_learned_side() {
    // rows whose x0 is missing have high y: predictions for NaN must be high
    let n = 400;
    let x = Array2::from_shape_fn((n, 2), |(i, j)| {
        if j == 1 {
            ((i * 37) % 100) as f64
        } else if i % 4 == 0 {
            f64::NAN
        } else {
            (i % 50) as f64
        }
    });
    let y = Array1::from_shape_fn(n, |i| {
        if i % 4 == 0 {
            10.0
        } else {
            (i % 50) as f64 / 50.0
        }
    });
    let forest = ForestSettings {
        n_trees: 50,
        max_features: 1.0,
        ..Default::default()
    }
    .fit(x.view(), col(&y).view(), None)
    .unwrap();
    let q = Array2::from_shape_vec((2, 2), vec![f64::NAN, 20.0, 25.0, 20.0]).unwrap();
    let p = forest.predict(q.view());
    assert!(p[[0, 0]] > 9.0, "{p}");
    assert!(p[[1, 0]] < 1.0, "{p}");
}

#[test]
fn sample_weights_act_like_repeated_rows_in_the_leaf_values() {
    // bootstrap = false, sample_fraction = 1: every tree sees every row, so a single-leaf
    // forest (max_depth 1 cannot split a constant feature) predicts the weighted mean
    let x = Array2::from_elem((4, 1), 1.0);
    let y = Array2::from_shape_vec((4, 1), vec![1.0, 2.0, 3.0, 10.0]).unwrap();
    let forest = ForestSettings {
        n_trees: 3,
        bootstrap: false,
        ..Default::default()
    }
    .fit(x.view(), y.view(), Some(&[1.0, 1.0, 2.0, 0.0]))
    .unwrap();
    let p = forest.predict(x.slice(s![..1, ..]));
    assert!((p[[0, 0]] - 9.0 / 4.0).abs() < 1e-12);
    // weighted median of 1, 2, 3, 3 (Hyndman & Fan definition 1) is 2; zero-weight 10 never shows
    let (q, c) = forest.predict_distribution(x.slice(s![..1, ..]), 0, &[0.5, 1.0], &[2.5]);
    assert_eq!(q.row(0).to_vec(), vec![2.0, 3.0]);
    assert!((c[[0, 0]] - 0.5).abs() < 1e-12);
    // every tree trained on every weighted row: their OOB is NaN; the zero-weight row took
    // part in no tree, so its OOB prediction is the full forest's
    let oob = forest.oob_predictions();
    assert!(oob.slice(s![..3, 0]).iter().all(|v| v.is_nan()));
    assert!((oob[[3, 0]] - 9.0 / 4.0).abs() < 1e-12);
}
