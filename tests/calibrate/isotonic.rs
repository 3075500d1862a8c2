//! Pool-adjacent-violators against published values.

use tidemark::calibrate::isotonic::{IsotonicMap, IsotonicSettings};

fn close(a: &[f64], b: &[f64], tol: f64) {
    assert_eq!(a.len(), b.len(), "{a:?} vs {b:?}");
    for (x, y) in a.iter().zip(b) {
        assert!((x - y).abs() < tol, "{a:?} vs {b:?}");
    }
}

#[test]
fn ties_secondary_matches_r_isotone_gpava() {
    // R isotone::gpava(x, y, ties = "secondary") values, as used by scikit-learn's isotonic tests
    // (test_isotonic_regression_ties_secondary_): 22.22222 (x9), 24.25 (x2).
    let x = [
        8.0, 8.0, 8.0, 10.0, 10.0, 10.0, 12.0, 12.0, 12.0, 14.0, 14.0,
    ];
    let y = [
        21.0, 23.5, 23.0, 24.0, 21.0, 25.0, 21.5, 22.0, 19.0, 23.5, 25.0,
    ];
    let m = IsotonicMap::fit(&x, &y, None, &IsotonicSettings::default()).unwrap();
    let mut want = vec![22.22222; 9];
    want.extend([24.25, 24.25]);
    close(&m.predict_many(&x), &want, 1e-5);
    // Shuffling the input rows does not change the fit (scikit-learn's shuffle check).
    let order = [5, 2, 10, 0, 7, 3, 9, 1, 8, 4, 6];
    let xs: Vec<f64> = order.iter().map(|&i| x[i]).collect();
    let ys: Vec<f64> = order.iter().map(|&i| y[i]).collect();
    let m2 = IsotonicMap::fit(&xs, &ys, None, &IsotonicSettings::default()).unwrap();
    assert_eq!(m, m2);
}

#[test]
fn weighted_fit_matches_r_isotone_gpava() {
    // R isotone::gpava values with weights 1..7, as in scikit-learn's test_isotonic_sample_weight:
    // x = 1..7, y = [1, 41, 51, 1, 2, 5, 24] -> [1, 13.95 (x5), 24].
    let x: Vec<f64> = (1..=7).map(f64::from).collect();
    let y = [1.0, 41.0, 51.0, 1.0, 2.0, 5.0, 24.0];
    let w: Vec<f64> = (1..=7).map(f64::from).collect();
    let m = IsotonicMap::fit(&x, &y, Some(&w), &IsotonicSettings::default()).unwrap();
    close(
        &m.predict_many(&x),
        &[1.0, 13.95, 13.95, 13.95, 13.95, 13.95, 24.0],
        1e-12,
    );
}

#[test]
fn bounds_clip_the_fit() {
    // scikit-learn test_isotonic_min_max_boundaries: y = 0..5 with y_min = 2, y_max = 4
    // -> [2, 2, 2, 3, 4, 4].
    let x: Vec<f64> = (0..6).map(f64::from).collect();
    let s = IsotonicSettings {
        increasing: true,
        y_min: Some(2.0),
        y_max: Some(4.0),
        ..IsotonicSettings::default()
    };
    let m = IsotonicMap::fit(&x, &x, None, &s).unwrap();
    close(&m.predict_many(&x), &[2.0, 2.0, 2.0, 3.0, 4.0, 4.0], 1e-12);
}

#[test]
fn interpolates_between_blocks_and_clips_at_the_ends() {
    // Linear interpolation between fitted values and constant outside the data, as
    // scikit-learn's IsotonicRegression(out_of_bounds="clip").
    let m = IsotonicMap::fit(
        &[0.0, 1.0, 2.0, 3.0],
        &[0.0, 2.0, 1.0, 3.0],
        None,
        &IsotonicSettings::default(),
    )
    .unwrap();
    close(
        &m.predict_many(&[0.0, 1.0, 2.0, 3.0]),
        &[0.0, 1.5, 1.5, 3.0],
        1e-12,
    );
    close(
        &m.predict_many(&[-1.0, 0.5, 2.5, 9.0]),
        &[0.0, 0.75, 2.25, 3.0],
        1e-12,
    );
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        // The fit is monotone, and the weighted mean of the fitted values equals that of y
        // (PAV preserves block means; Best & Chakravarti 1990).
        #[test]
        fn monotone_and_mean_preserving(pts in proptest::collection::vec((0u8..20, -50.0f64..50.0, 0.1f64..5.0), 1..60)) {
            let x: Vec<f64> = pts.iter().map(|p| f64::from(p.0)).collect();
            let y: Vec<f64> = pts.iter().map(|p| p.1).collect();
            let w: Vec<f64> = pts.iter().map(|p| p.2).collect();
            let m = IsotonicMap::fit(&x, &y, Some(&w), &IsotonicSettings::default()).unwrap();
            let f = m.predict_many(&x);
            for i in 0..x.len() {
                for j in 0..x.len() {
                    if x[i] <= x[j] {
                        prop_assert!(f[i] <= f[j] + 1e-9);
                    }
                }
            }
            let sw: f64 = w.iter().sum();
            let my: f64 = y.iter().zip(&w).map(|(a, b)| a * b).sum::<f64>() / sw;
            let mf: f64 = f.iter().zip(&w).map(|(a, b)| a * b).sum::<f64>() / sw;
            prop_assert!((my - mf).abs() < 1e-8 * (1.0 + my.abs()));
        }
    }
}
