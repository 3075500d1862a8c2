//! Weighted and localised conformal quantiles against their definitions.
//!
//! Source of the definition: Tibshirani, Barber, Candes & Ramdas (2019), "Conformal prediction
//! under covariate shift", NeurIPS, eq. (7): the `1 - a` quantile of
//! `sum_i p_i delta(s_i) + p_test delta(+inf)`, `p_i = w_i / (sum_j w_j + w_test)`. With equal
//! weights it must be the split-conformal `ceil((n+1)(1-a))`-th smallest score (Lei, G'Sell,
//! Rinaldo, Tibshirani & Wasserman 2018, JASA 113:1094).

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use tidemark::calibrate::conformal::{
    BandBase, BandCalibration, BandMethod, Localisation, Units, conformal_quantile,
    weighted_conformal_quantile,
};

/// Units of one-row wells with weights `u` and a new point weighing one.
fn units(u: &[f64]) -> Units {
    Units {
        group: (0..u.len()).collect(),
        weight: u.to_vec(),
        test_weight: 1.0,
    }
}

/// The `k`-th smallest (1-based) of `s`, or `None` when `k > n`.
fn kth(s: &[f64], k: usize) -> Option<f64> {
    let mut v = s.to_vec();
    v.sort_by(f64::total_cmp);
    (k <= v.len()).then(|| v[k - 1])
}

#[test]
fn equal_weights_reduce_to_the_split_conformal_rank() {
    let mut rng = StdRng::seed_from_u64(7);
    for n in [5usize, 9, 20, 37, 100] {
        let s: Vec<f64> = (0..n).map(|_| rng.random::<f64>() * 10.0 - 3.0).collect();
        for alpha in [0.05, 0.1, 0.2, 0.5] {
            let k = ((n as f64 + 1.0) * (1.0 - alpha)).ceil() as usize;
            let want = kth(&s, k);
            // Any common weight c, the test point weighing c too, is the unweighted rule.
            for c in [1.0, 0.37, 4.0] {
                let w = vec![c; n];
                assert_eq!(
                    weighted_conformal_quantile(&s, &w, c, alpha),
                    want,
                    "n {n}, a {alpha}, c {c}"
                );
            }
            assert_eq!(conformal_quantile(&s, &vec![1.0; n], alpha), want);
        }
    }
}

#[test]
fn hand_worked_weighted_example() {
    // Scores 1, 2, 3, 4 with weights 1, 2, 1, 1 and a test weight of 1: total 6, the
    // cumulative weights 1, 3, 4, 5 of 6 (the last sixth at +inf).
    let s = [3.0, 1.0, 4.0, 2.0];
    let w = [1.0, 1.0, 1.0, 2.0];
    // a = 0.2: reach 0.8 * 6 = 4.8 -> the score 4 (cumulative 5).
    assert_eq!(weighted_conformal_quantile(&s, &w, 1.0, 0.2), Some(4.0));
    // a = 0.4: reach 3.6 -> 3 (cumulative 4); a = 0.5: reach 3 -> 2 (cumulative 3).
    assert_eq!(weighted_conformal_quantile(&s, &w, 1.0, 0.4), Some(3.0));
    assert_eq!(weighted_conformal_quantile(&s, &w, 1.0, 0.5), Some(2.0));
    // Test weight 2: total 7; a = 0.2 needs 5.6 > 5, only +inf reaches it; a = 0.3 needs 4.9.
    assert_eq!(weighted_conformal_quantile(&s, &w, 2.0, 0.2), None);
    assert_eq!(weighted_conformal_quantile(&s, &w, 2.0, 0.3), Some(4.0));
    // A zero weight takes a score out: 1, 2, 3 weigh 1, 2, 1 (total 5 with the test point);
    // a = 0.4 needs 3, reached at 2.
    assert_eq!(
        weighted_conformal_quantile(&s, &[1.0, 1.0, 0.0, 2.0], 1.0, 0.4),
        Some(2.0)
    );
}

#[test]
fn localisation_with_proximity_equal_to_the_well_weights_is_the_global_band() {
    // Three rows per well for 12 wells: u_i = 1/3, N = 12. Weights w_i(x) = u_i / N make
    // v_i = (1 - l) u_i + l N w_i = u_i whatever the locality l: the global rule.
    let mut rng = StdRng::seed_from_u64(3);
    let s_lo: Vec<f64> = (0..36).map(|_| rng.random::<f64>()).collect();
    let s_hi: Vec<f64> = (0..36).map(|_| rng.random::<f64>() * 2.0).collect();
    let u = vec![1.0 / 3.0; 36];
    let prox: Vec<f64> = u.iter().map(|v| v / 12.0).collect();
    for l in [0.25, 0.5, 1.0] {
        let loc = Localisation::new(l, &s_lo, &s_hi, &units(&u));
        assert_eq!(
            loc.quantiles(&prox, 0.1),
            (
                conformal_quantile(&s_lo, &u, 0.1),
                conformal_quantile(&s_hi, &u, 0.1)
            )
        );
    }
}

#[test]
fn full_locality_weights_only_the_rows_the_forest_points_to() {
    // 10 wells of one row, scores 1..10; the forest puts all its weight on rows 0 and 1 (scores
    // 1 and 2) equally: v = (5, 5, 0, ...), total 10, test weight 1. a = 0.1 needs 0.9 * 11 =
    // 9.9: the cumulative weights are 5 and 10, so the quantile is 2.
    let s: Vec<f64> = (1..=10).map(f64::from).collect();
    let u = vec![1.0; 10];
    let mut prox = vec![0.0; 10];
    prox[0] = 0.5;
    prox[1] = 0.5;
    let loc = Localisation::new(1.0, &s, &s, &units(&u));
    assert_eq!(loc.quantiles(&prox, 0.1), (Some(2.0), Some(2.0)));
    // Half locality: v = 0.5 + 5 * [0.5, 0.5, 0, ...] = (3, 3, 0.5 x 8); 9.9 is reached at the
    // eighth score (3 + 3 + 6 x 0.5 = 9 at score 8, 9.5 at 9, 10 at 10).
    let loc = Localisation::new(0.5, &s, &s, &units(&u));
    assert_eq!(loc.quantiles(&prox, 0.1), (Some(10.0), Some(10.0)));
    // a = 0.2 needs 0.8 * 11 = 8.8: reached at score 8 (cumulative 9).
    assert_eq!(loc.quantiles(&prox, 0.2), (Some(8.0), Some(8.0)));
}

#[test]
fn localised_band_is_ordered_and_bounded() {
    let n = 30;
    let base: Vec<BandBase> = (0..n).map(|i| BandBase::centred(i as f64 * 0.1)).collect();
    let y: Vec<f64> = (0..n)
        .map(|i| i as f64 * 0.1 + ((i * 7) % 5) as f64 * 0.05 - 0.1)
        .collect();
    let group: Vec<usize> = (0..n).collect();
    let cal = BandCalibration::fit_local(
        BandMethod::CvResidual,
        &base,
        &y,
        &Units::wells(&group),
        0.8,
        0.5,
    );
    assert!(cal.local.is_some());
    let prox = vec![1.0 / n as f64; n];
    for mid in [-1.0, 0.0, 1.5, 9.0] {
        let (lo, m, hi) = cal.apply_local(BandBase::centred(mid), (0.0, 2.0), &prox);
        assert!(
            0.0 <= lo && lo <= m && m <= hi && hi <= 2.0,
            "{lo} {m} {hi}"
        );
    }
}
