//! Covariate-shift weights: the logistic density-ratio model against smartcore's logistic
//! regression, the AUC by its definition, and weighted conformal bands under a known shift (the
//! setting of Tibshirani, Barber, Candes & Ramdas 2019, sec. 2).

use ndarray::{Array1, Array2};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use smartcore::linear::logistic_regression::{LogisticRegression, LogisticRegressionParameters};
use tidemark::calibrate::conformal::{
    BandBase, BandCalibration, BandMethod, Units, conformal_quantile,
};
use tidemark::calibrate::shift::{ShiftSettings, auc, estimate, logistic_fit};

#[test]
fn logistic_fit_matches_smartcore() {
    // 300 rows, two features, labels drawn from a logistic model (not separable). With unit
    // weights tidemark maximises sum log-likelihood - ridge/2 |slopes|^2, which is smartcore
    // 0.7's binary objective (linear/logistic_regression.rs, BinaryObjectiveFunction) with
    // alpha = ridge and an unpenalised intercept.
    let mut rng = StdRng::seed_from_u64(11);
    let n = 300;
    let x = Array2::from_shape_fn((n, 2), |_| rng.random::<f64>() * 4.0 - 2.0);
    let y: Vec<i32> = (0..n)
        .map(|i| {
            let z = -0.3 + 1.2 * x[[i, 0]] - 0.7 * x[[i, 1]];
            i32::from(rng.random::<f64>() < 1.0 / (1.0 + (-z).exp()))
        })
        .collect();
    let ridge = 1.0;
    let theirs = LogisticRegression::fit(
        &x,
        &Array1::from(y.clone()),
        LogisticRegressionParameters::default().with_alpha(ridge),
    )
    .unwrap();
    let mut design = Array2::<f64>::ones((n, 3));
    for i in 0..n {
        design[[i, 1]] = x[[i, 0]];
        design[[i, 2]] = x[[i, 1]];
    }
    let label: Vec<f64> = y.iter().map(|&v| f64::from(v)).collect();
    let ours = logistic_fit(&design, &label, &vec![1.0; n], ridge);
    let coef = theirs.coefficients();
    let expected = [theirs.intercept()[[0, 0]], coef[[0, 0]], coef[[0, 1]]];
    for (a, b) in ours.iter().zip(&expected) {
        // smartcore stops L-BFGS at a gradient tolerance; Newton's method converges to machine
        // precision, so agreement is to about 1e-4.
        assert!(
            (a - b).abs() < 1e-3,
            "ours {ours:?}, smartcore {expected:?}"
        );
    }
}

#[test]
fn auc_by_its_definition() {
    // Pairs (pos > neg): 0.35 > 0.1, 0.8 > 0.1, 0.8 > 0.4; 0.35 < 0.4: 3 of 4 (Mann-Whitney U /
    // (n1 n2), Hanley & McNeil 1982).
    assert_eq!(auc(&[0.1, 0.4], &[0.35, 0.8]), 0.75);
    // A tie counts one half: pairs (0.5, 0.5) = 0.5, (0.9, 0.5) = 1 -> 0.75.
    assert_eq!(auc(&[0.5], &[0.5, 0.9]), 0.75);
    assert_eq!(auc(&[1.0, 2.0], &[1.0, 2.0]), 0.5);
}

#[test]
fn equal_ratios_leave_the_band_as_it_was() {
    // Scaling every ratio alike changes nothing: the weights are renormalised to the wells.
    let mut rng = StdRng::seed_from_u64(5);
    let group: Vec<usize> = (0..40).map(|i| i / 2).collect();
    let s: Vec<f64> = (0..40).map(|_| rng.random::<f64>()).collect();
    let plain = Units::wells(&group);
    let shifted = Units::shifted(&group, &vec![3.7; 40], 3.7);
    for (a, b) in plain.weight.iter().zip(&shifted.weight) {
        assert!((a - b).abs() < 1e-12);
    }
    assert!((shifted.test_weight - 1.0).abs() < 1e-12);
    assert!((shifted.effective_wells() - 20.0).abs() < 1e-9);
    assert_eq!(
        conformal_quantile(&s, &plain.weight, 0.1),
        conformal_quantile(&s, &shifted.weight, 0.1)
    );
}

/// One draw of the known-shift experiment: wells at `x ~ N(0, 1)`, nodes at `x ~ N(1, 1)`,
/// `y = x + e`, `e ~ N(0, (0.2 + 0.5 |x|)^2)`, predictor `x` (the true mean), residual band.
/// Returns the coverage at the nodes of the unweighted band, of the band weighted by the true
/// ratio `exp(x - 1/2)`, and of the band weighted by the estimated ratio.
fn known_shift_draw(seed: u64) -> (f64, f64, f64) {
    let mut rng = StdRng::seed_from_u64(seed);
    let unit = Normal::new(0.0, 1.0).unwrap();
    let sd = |x: f64| 0.2 + 0.5 * x.abs();
    let n_cal = 400;
    let n_node = 2000;
    let xw: Vec<f64> = (0..n_cal).map(|_| unit.sample(&mut rng)).collect();
    let yw: Vec<f64> = xw
        .iter()
        .map(|&x| x + sd(x) * unit.sample(&mut rng))
        .collect();
    let xn: Vec<f64> = (0..n_node).map(|_| 1.0 + unit.sample(&mut rng)).collect();
    let yn: Vec<f64> = xn
        .iter()
        .map(|&x| x + sd(x) * unit.sample(&mut rng))
        .collect();
    let group: Vec<usize> = (0..n_cal).collect();
    let base: Vec<BandBase> = xw.iter().map(|&x| BandBase::centred(x)).collect();
    let coverage = |units: &Units| -> f64 {
        let band = BandCalibration::fit(BandMethod::CvResidual, &base, &yw, units, 0.8, 1, 1);
        let inside = xn
            .iter()
            .zip(&yn)
            .filter(|&(&x, &y)| {
                let (lo, _, hi) = band.apply(BandBase::centred(x), (-1e9, 1e9));
                lo <= y && y <= hi
            })
            .count();
        inside as f64 / n_node as f64
    };
    // N(1,1) over N(0,1): exp(x - 1/2); the new node's weight is its mean over the nodes.
    let true_ratio: Vec<f64> = xw.iter().map(|&x| (x - 0.5).exp()).collect();
    let node_mean = xn.iter().map(|&x| (x - 0.5).exp()).sum::<f64>() / n_node as f64;
    let est = estimate(
        Array2::from_shape_vec((n_cal, 1), xw.clone())
            .unwrap()
            .view(),
        &group,
        Array2::from_shape_vec((n_node, 1), xn.clone())
            .unwrap()
            .view(),
        &ShiftSettings::default(),
    )
    .unwrap();
    (
        coverage(&Units::wells(&group)),
        coverage(&Units::shifted(&group, &true_ratio, node_mean)),
        coverage(&Units::shifted(
            &group,
            &est.well_ratio,
            est.node_mean_ratio,
        )),
    )
}

#[test]
fn weighted_bands_cover_the_shifted_population() {
    // The noise grows with |x| and the nodes sit at larger x than the wells, so a band calibrated
    // on the wells is too narrow at the nodes. Weighting the wells' scores by the density ratio
    // restores the nominal 80 % there (Tibshirani et al. 2019, Theorem 2 and their sec. 2
    // experiment). Over 20 draws the mean coverage has a standard error of about 0.01; the
    // estimated ratio (logistic, here the correct model since log ratio = x - 1/2) is held to
    // the same band.
    let draws: Vec<(f64, f64, f64)> = (0..20).map(|s| known_shift_draw(100 + s)).collect();
    let mean = |f: fn(&(f64, f64, f64)) -> f64| draws.iter().map(f).sum::<f64>() / 20.0;
    let (plain, exact, estimated) = (mean(|d| d.0), mean(|d| d.1), mean(|d| d.2));
    eprintln!(
        "coverage at nodes: unweighted {plain:.3}, true ratio {exact:.3}, estimated {estimated:.3}"
    );
    assert!(
        plain < 0.76,
        "unweighted band should under-cover here: {plain:.3}"
    );
    assert!((exact - 0.80).abs() < 0.03, "true-ratio band: {exact:.3}");
    assert!(
        (estimated - 0.80).abs() < 0.03,
        "estimated-ratio band: {estimated:.3}"
    );
}

#[test]
fn estimate_rejects_mismatched_inputs() {
    let w = Array2::<f64>::zeros((4, 2));
    let n = Array2::<f64>::zeros((5, 3));
    let e = estimate(w.view(), &[0, 0, 1, 1], n.view(), &ShiftSettings::default()).unwrap_err();
    assert!(e.to_string().contains("node columns"), "{e}");
    let bad = ShiftSettings {
        max_ratio: 1.0,
        ..ShiftSettings::default()
    };
    let n = Array2::<f64>::zeros((5, 2));
    let e = estimate(w.view(), &[0, 0, 1, 1], n.view(), &bad).unwrap_err();
    assert!(e.to_string().contains("max_ratio"), "{e}");
    let none = Array2::<f64>::zeros((0, 2));
    let e = estimate(
        w.view(),
        &[0, 0, 1, 1],
        none.view(),
        &ShiftSettings::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("no mapped node"), "{e}");
}

#[test]
fn shifted_units_by_hand() {
    // Wells 0 (two rows), 1, 2; ratios 1, 3, 2, 2; new node 4. Unit weights 0.5, 0.5, 1, 1; times
    // the ratios 0.5, 1.5, 2, 2 (sum 6); scaled to the 3 wells by 1/2: 0.25, 0.75, 1, 1 and the
    // new node 2. Each well then weighs 1 in total: 3 effective wells.
    let u = Units::shifted(&[0, 0, 1, 2], &[1.0, 3.0, 2.0, 2.0], 4.0);
    assert_eq!(u.weight, vec![0.25, 0.75, 1.0, 1.0]);
    assert_eq!(u.test_weight, 2.0);
    assert!((u.effective_wells() - 3.0).abs() < 1e-12);
    // A ratio that is not finite and positive counts as one.
    let v = Units::shifted(&[0, 1], &[f64::NAN, -2.0], 0.0);
    assert_eq!(v.weight, vec![1.0, 1.0]);
    assert_eq!(v.test_weight, 1.0);
}

#[test]
fn the_new_points_weight_sets_the_finite_sample_price() {
    // Scores 1, 2, 3 of weight 1 each; a = 0.2 needs (1 - a)(3 + w) of cumulative weight
    // (Tibshirani et al. 2019, eq. 7). w = 0.5: 2.8, reached at the third score. w = 2: 4 > 3,
    // only the point mass at +inf gets there.
    use tidemark::calibrate::conformal::weighted_conformal_quantile;
    let s = [1.0, 2.0, 3.0];
    let w = [1.0; 3];
    assert_eq!(weighted_conformal_quantile(&s, &w, 0.5, 0.2), Some(3.0));
    assert_eq!(weighted_conformal_quantile(&s, &w, 2.0, 0.2), None);
    // The predictive system takes the same weight: Q(t) = (W{a < t} + tau (W{a = t} + w)) /
    // (W + w). Residuals 1, 2, 3 at mid 0, w = 2: Q(2.5) = (2 + 0.5 * 2) / 5 = 0.6.
    use tidemark::calibrate::conformal::MondrianBins;
    use tidemark::calibrate::exceedance::PredictiveSystem;
    let units = Units {
        group: vec![0, 1, 2],
        weight: vec![1.0; 3],
        test_weight: 2.0,
    };
    let cps = PredictiveSystem::fit(&[0.0; 3], &s, &units, MondrianBins::single());
    assert!((cps.cdf(0.0, 2.5, 0.5) - 0.6).abs() < 1e-12);
}
