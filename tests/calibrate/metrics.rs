//! Metrics against closed forms, hand calculations and smartcore 0.7.

use statrs::distribution::{ContinuousCDF, Normal};
use tidemark::metrics::*;

#[test]
fn gaussian_crps_closed_form() {
    // G&R (2007) eq. 21 at z = 0: CRPS = 2 phi(0) - 1/sqrt(pi) = 0.797884561 - 0.564189584.
    assert!((crps_gaussian(0.0, 0.0, 1.0) - 0.233_694_977).abs() < 1e-8);
    // Scale equivariance: CRPS(N(mu, s), y) = s CRPS(N(0, 1), (y - mu)/s).
    assert!((crps_gaussian(3.0, 1.0, 2.0) - 2.0 * crps_gaussian(1.0, 0.0, 1.0)).abs() < 1e-12);
    // Against the definition integral (F(z) - 1{z >= y})^2 dz with statrs' Normal CDF.
    for &(y, mu, s) in &[(0.3, 0.0, 1.0), (-2.0, 0.5, 0.7), (4.0, 1.0, 1.5)] {
        let n = Normal::new(mu, s).unwrap();
        // Midpoint rule on each side of the jump at y: F^2 below, (1 - F)^2 above.
        let mid_rule = |a: f64, b: f64, f: &dyn Fn(f64) -> f64| {
            let steps = 100_000;
            let h = (b - a) / steps as f64;
            (0..steps)
                .map(|k| f(a + (k as f64 + 0.5) * h) * h)
                .sum::<f64>()
        };
        let integral = mid_rule(mu - 12.0 * s, y, &|z| n.cdf(z).powi(2))
            + mid_rule(y, mu + 12.0 * s, &|z| (1.0 - n.cdf(z)).powi(2));
        let c = crps_gaussian(y, mu, s);
        assert!((c - integral).abs() < 1e-8, "{c} vs {integral}");
    }
}

#[test]
fn crps_from_dense_quantiles_approaches_the_closed_form() {
    // CRPS = 2 integral rho_tau(y - F^-1(tau)) dtau (G&R 2007 sec. 4.2; Laio & Tamea 2007);
    // quantiles from statrs' Normal inverse CDF at 999 levels.
    let levels: Vec<f64> = (1..1000).map(|k| k as f64 / 1000.0).collect();
    for &(y, mu, s) in &[(0.0, 0.0, 1.0), (1.7, 0.2, 0.8), (-3.0, 0.0, 1.0)] {
        let n = Normal::new(mu, s).unwrap();
        let q: Vec<f64> = levels.iter().map(|&t| n.inverse_cdf(t)).collect();
        let approx = crps_from_quantiles(y, &levels, &q);
        let exact = crps_gaussian(y, mu, s);
        assert!(
            ((approx - exact) / exact).abs() < 2e-3,
            "{approx} vs {exact}"
        );
    }
    // An empirical distribution of m equally likely members: its quantiles at the levels
    // (k - 1/2)/m are the sorted members; the CRPS from those quantiles is the exact ensemble
    // CRPS E|X - y| - E|X - X'|/2 (G&R eq. 22).
    let members = [-1.0, 0.2, 0.5, 2.0];
    let m = members.len() as f64;
    let lv: Vec<f64> = (0..4).map(|k| (k as f64 + 0.5) / m).collect();
    for y in [-2.0, 0.3, 0.5, 3.0] {
        let a = crps_from_quantiles(y, &lv, &members);
        let b = crps_ensemble(y, &members);
        assert!((a - b).abs() < 1e-12, "{a} vs {b}");
    }
}

#[test]
fn interval_score_pinball_and_brier_by_hand() {
    // Interval score at a = 0.2 (G&R eq. 43): width 2, penalty 2/a = 10 per unit outside.
    assert_eq!(interval_score_one(2.0, 1.0, 3.0, 0.2), 2.0);
    assert!((interval_score_one(5.0, 1.0, 3.0, 0.2) - 22.0).abs() < 1e-12);
    assert!((interval_score_one(0.0, 1.0, 3.0, 0.2) - 12.0).abs() < 1e-12);
    assert!((interval_score(&[2.0, 5.0, 0.0], &[1.0; 3], &[3.0; 3], 0.2) - 12.0).abs() < 1e-12);
    // Pinball: rho_0.1(2 - 1) = 0.1, rho_0.1(0 - 1) = 0.9.
    assert!((pinball_one(2.0, 1.0, 0.1) - 0.1).abs() < 1e-12);
    assert!((pinball_one(0.0, 1.0, 0.1) - 0.9).abs() < 1e-12);
    // Brier: ((0.9-1)^2 + (0.2-0)^2 + (0.5-1)^2) / 3 = 0.3 / 3.
    assert!((brier(&[0.9, 0.2, 0.5], &[true, false, true]) - 0.1).abs() < 1e-12);
    assert_eq!(pit_histogram(&[0.05, 0.15, 0.95, 1.0], 2), vec![0.5, 0.5]);
    assert_eq!(
        pit_histogram(&[0.05, 0.15, 0.95, 1.0], 4),
        vec![0.5, 0.0, 0.0, 0.5]
    );
    let rel = reliability(&[0.05, 0.1, 0.95, 0.9], &[false, true, true, true], 2);
    assert_eq!(rel[0].n, 2);
    assert!((rel[0].observed - 0.5).abs() < 1e-12 && (rel[1].mean_prob - 0.925).abs() < 1e-12);
}

#[test]
fn point_scores_match_smartcore() {
    // smartcore 0.7 metrics::r2, mean_squared_error, mean_absolute_error.
    let y = vec![3.0, -0.5, 2.0, 7.0, 4.2, 1.1];
    let p = vec![2.5, 0.0, 2.0, 8.0, 3.9, 1.6];
    assert!((r2(&y, &p) - smartcore::metrics::r2(&y, &p)).abs() < 1e-12);
    assert!((rmse(&y, &p) - smartcore::metrics::mean_squared_error(&y, &p).sqrt()).abs() < 1e-12);
    // Pinball at 0.5 is half the absolute error.
    assert!(
        (pinball(&y, &p, 0.5) - 0.5 * smartcore::metrics::mean_absolute_error(&y, &p)).abs()
            < 1e-12
    );
    // scikit-learn's r2_score documentation example: y = [3, -0.5, 2, 7], p = [2.5, 0, 2, 8]
    // -> 0.948...; here by hand: SS_res = 1.5, SS_tot = 29.1875, R2 = 0.948608137.
    assert!((r2(&y[..4], &p[..4]) - 0.948_608_137).abs() < 1e-9);
    assert!((bias(&y, &p) - (-0.5 + 0.5 + 0.0 + 1.0 - 0.3 + 0.5) / 6.0).abs() < 1e-12);
    // Truth = 2 x prediction: slope of truth on prediction is 2.
    assert!((slope(&[2.0, 4.0, 6.0], &[1.0, 2.0, 3.0]) - 2.0).abs() < 1e-12);
}

#[test]
fn metrics_compute_by_hand() {
    // Ten rows, truth 1..10; the band misses the bottom row and the top two.
    let truth: Vec<f64> = (1..=10).map(f64::from).chain([f64::NAN]).collect();
    let mid: Vec<f64> = truth.iter().map(|t| t + 0.5).collect();
    let lo: Vec<f64> = truth.iter().map(|t| t - 1.0).collect();
    let mut hi: Vec<f64> = truth.iter().map(|t| t + 1.0).collect();
    let mut lo2 = lo.clone();
    lo2[0] = 1.5; // misses row 0 by 0.5
    hi[8] = 8.0; // misses row 8 by 1
    hi[9] = 9.0; // misses row 9 by 1
    let prob = vec![0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 0.5];
    let m = Metrics::compute(&MetricsInput {
        truth: &truth,
        mid: &mid,
        lo: &lo2,
        hi: &hi,
        level: 0.8,
        quantiles: None,
        exceed: vec![ExceedInput {
            label: "high",
            value: 5.5,
            above: true,
            prob: &prob,
        }],
        n_wells: 4,
    })
    .unwrap();
    assert_eq!((m.n_rows, m.n_skipped, m.n_wells), (10, 1, 4));
    assert!((m.coverage - 0.7).abs() < 1e-12);
    assert!((m.bias - 0.5).abs() < 1e-12 && (m.rmse - 0.5).abs() < 1e-12);
    // Deciles of 1..10 (type 7): q10 = 1.9, q90 = 9.1 -> bottom {1}, top {10}.
    assert_eq!(
        (m.coverage_bottom_decile, m.coverage_top_decile),
        (0.0, 0.0)
    );
    assert!((m.bias_top_decile - 0.5).abs() < 1e-12);
    // Widths: 2 on seven rows, 0.5 on row 0 (2 - 1.5), 0 on rows 8 and 9 (8 - 8, 9 - 9).
    let widths = 7.0 * 2.0 + 0.5;
    assert!((m.mean_width - widths / 10.0).abs() < 1e-12);
    // Interval score: widths + 10 * (0.5 + 1 + 1) over 10 rows.
    assert!((m.interval_score - (widths + 25.0) / 10.0).abs() < 1e-12);
    assert_eq!(m.brier, vec![("high".to_string(), 0.0)]);
    // Bad input is an error, not a panic.
    assert!(
        Metrics::compute(&MetricsInput {
            truth: &truth,
            mid: &mid[..3],
            lo: &lo,
            hi: &hi,
            level: 0.8,
            quantiles: None,
            exceed: vec![],
            n_wells: 0,
        })
        .is_err()
    );
}
