//! The cross-fitted isotonic end-bias correction reduces the bias at the ends of the truth.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use tidemark::calibrate::FoldMethod;
use tidemark::calibrate::folds::assign;
use tidemark::calibrate::isotonic::{IsotonicSettings, cross_fit};
use tidemark::metrics::{end_bias, slope};

#[test]
fn isotonic_correction_removes_shrinkage_at_the_ends() {
    // Truth y = 3 x + noise over 60 wells of 1-4 rows; the predictor is the conditional mean
    // shrunk 40 % towards the middle, as tree ensembles do at the ends of the training range.
    let mut rng = StdRng::seed_from_u64(21);
    let noise = Normal::new(0.0, 0.2).unwrap();
    let (mut y, mut pred, mut group, mut xy) = (vec![], vec![], vec![], vec![]);
    for w in 0..60 {
        let rows = rng.random_range(1..=4usize);
        let loc = [rng.random::<f64>() * 5000.0, rng.random::<f64>() * 5000.0];
        for _ in 0..rows {
            let x: f64 = rng.random();
            y.push(3.0 * x + noise.sample(&mut rng));
            pred.push(1.5 + 0.6 * (3.0 * x - 1.5) + 0.05 * noise.sample(&mut rng));
            group.push(w);
            xy.push(loc);
        }
    }
    let folds = assign(&group, &xy, FoldMethod::Wells, 5, 3);
    let corrected = cross_fit(
        &folds,
        &pred,
        &y,
        &vec![1.0; y.len()],
        &IsotonicSettings::default(),
    )
    .unwrap();
    let (bottom0, top0) = end_bias(&y, &pred);
    let (bottom1, top1) = end_bias(&y, &corrected);
    // Shrinkage shows as over-prediction at the bottom and under-prediction at the top.
    assert!(bottom0 > 0.3 && top0 < -0.3, "before: {bottom0} {top0}");
    // The figure for the field test: top-decile bias reduced by at least 30 %.
    assert!(
        top1.abs() <= 0.7 * top0.abs(),
        "top decile bias {top0} -> {top1}"
    );
    assert!(
        bottom1.abs() <= 0.7 * bottom0.abs(),
        "bottom decile bias {bottom0} -> {bottom1}"
    );
    // Slope of truth on prediction: 1/0.6 before, near 1 after.
    let (s0, s1) = (slope(&y, &pred), slope(&y, &corrected));
    assert!(s0 > 1.5 && (s1 - 1.0).abs() < 0.1, "slope {s0} -> {s1}");
}
