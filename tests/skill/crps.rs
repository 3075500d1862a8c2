//! CRPS of weighted samples and of climatology against hand calculations, the definition
//! integral and the Gaussian closed form.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use statrs::distribution::{Continuous, ContinuousCDF, Normal};
use tidemark::skill::{climatology_crps, crps_sample};

/// Closed form for a Gaussian forecast (Gneiting & Raftery 2007, JASA 102, eq. 21), written out
/// here with statrs 0.19's Normal: s [z (2 Phi(z) - 1) + 2 phi(z) - 1/sqrt(pi)].
fn gaussian_crps(y: f64, mu: f64, s: f64) -> f64 {
    let n = Normal::standard();
    let z = (y - mu) / s;
    s * (z * (2.0 * n.cdf(z) - 1.0) + 2.0 * n.pdf(z) - 1.0 / std::f64::consts::PI.sqrt())
}

/// The definition CRPS = int (F(x) - 1{x >= y})^2 dx (Hersbach 2000, eq. 5) for a weighted step
/// CDF, integrated exactly piece by piece between the sorted jump points.
fn crps_by_integral(y: f64, values: &[f64], weights: &[f64]) -> f64 {
    let total: f64 = weights.iter().sum();
    let mut pts: Vec<(f64, f64)> = values
        .iter()
        .zip(weights)
        .map(|(&v, &w)| (v, w / total))
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut cuts: Vec<f64> = pts.iter().map(|p| p.0).chain([y]).collect();
    cuts.sort_by(f64::total_cmp);
    let mut sum = 0.0;
    for w in cuts.windows(2) {
        let (a, b) = (w[0], w[1]);
        let mid = 0.5 * (a + b);
        let f: f64 = pts.iter().filter(|p| p.0 <= mid).map(|p| p.1).sum();
        let h = if mid >= y { 1.0 } else { 0.0 };
        sum += (f - h).powi(2) * (b - a);
    }
    sum
}

#[test]
fn two_point_distribution_by_hand() {
    // Values {0, 1}, equal weights, y = 0.25: F = 0.5 on [0, 1).
    // int_0^0.25 0.5^2 dx + int_0.25^1 (0.5 - 1)^2 dx = 0.0625 + 0.1875 = 0.25.
    assert!((crps_sample(0.25, &[0.0, 1.0], &[1.0, 1.0]) - 0.25).abs() < 1e-15);
    // Weights 1 : 3 (F = 0.25 on [0, 1)), y = 0.25:
    // 0.25^2 * 0.25 + 0.75^2 * 0.75 = 0.015625 + 0.421875 = 0.4375.
    // Energy form: E|X - y| = 0.25 * 0.25 + 0.75 * 0.75 = 0.625, E|X - X'| = 2 * 0.25 * 0.75 = 0.375.
    assert!((crps_sample(0.25, &[0.0, 1.0], &[1.0, 3.0]) - 0.4375).abs() < 1e-15);
    // A point mass is the absolute error.
    assert!((crps_sample(-2.0, &[3.0], &[5.0]) - 5.0).abs() < 1e-15);
    // No weight left: undefined.
    assert!(crps_sample(0.0, &[1.0, 2.0], &[0.0, 0.0]).is_nan());
}

#[test]
fn weighted_sample_equals_the_definition_integral() {
    let mut rng = StdRng::seed_from_u64(11);
    for case in 0..50 {
        let m = 1 + case % 9;
        let values: Vec<f64> = (0..m).map(|_| rng.random_range(-3.0..3.0)).collect();
        let weights: Vec<f64> = (0..m).map(|_| rng.random_range(0.1..2.0)).collect();
        for y in [-4.0, -0.5, 0.0, 1.3, 5.0] {
            let got = crps_sample(y, &values, &weights);
            let want = crps_by_integral(y, &values, &weights);
            assert!(
                (got - want).abs() < 1e-12,
                "case {case} y {y}: {got} vs {want}"
            );
        }
    }
    // Integer weights act as repeated values (the same distribution).
    let a = crps_sample(0.4, &[1.0, -1.0, 2.0], &[2.0, 1.0, 3.0]);
    let b = crps_sample(0.4, &[1.0, 1.0, -1.0, 2.0, 2.0, 2.0], &[1.0; 6]);
    assert!((a - b).abs() < 1e-15);
}

#[test]
fn normal_sample_approaches_the_gaussian_closed_form() {
    // Quantile "samples" x_k = Phi^-1((k - 0.5)/m) from statrs 0.19: the empirical CRPS converges
    // to the closed form of N(0, 1) as m grows.
    let n = Normal::standard();
    for y in [0.0, 0.7, -2.2] {
        let exact = gaussian_crps(y, 0.0, 1.0);
        let mut last = f64::INFINITY;
        for m in [10usize, 100, 1000, 10_000] {
            let v: Vec<f64> = (1..=m)
                .map(|k| n.inverse_cdf((k as f64 - 0.5) / m as f64))
                .collect();
            let err = (crps_sample(y, &v, &vec![1.0; m]) - exact).abs();
            assert!(
                err < last,
                "y {y}, m {m}: error {err} did not shrink from {last}"
            );
            last = err;
        }
        assert!(last < 1e-4, "y {y}: error {last} at m = 10,000");
    }
    // A random sample of 20,000 draws: within 0.01 of the closed form (sd of the estimate about
    // 0.004 here).
    let mut rng = StdRng::seed_from_u64(3);
    let v: Vec<f64> = (0..20_000).map(|_| rng.sample(StandardNormal)).collect();
    let got = crps_sample(0.7, &v, &vec![1.0; v.len()]);
    assert!((got - gaussian_crps(0.7, 0.0, 1.0)).abs() < 0.01, "{got}");
}

#[test]
fn climatology_uses_all_other_wells() {
    // Wells A (rows 1, 2), B (4), C (7), unit weights.
    // Row of B: others {1, 2, 7}. E|X - 4| = (3 + 2 + 3)/3 = 8/3; E|X - X'| = 2 (1 + 6 + 5)/9 = 8/3;
    // CRPS = 8/3 - 4/3 = 4/3.
    // Rows of A at y = 1: others {4, 7}: E|X - 1| = 4.5, E|X - X'| = 2 * 3/4 = 1.5 -> 3.75;
    // at y = 2: E|X - 2| = 3.5 -> 2.75.
    // Row of C: others {1, 2, 4}: E|X - 7| = (6 + 5 + 3)/3 = 14/3, E|X - X'| = 2 (1 + 3 + 2)/9 = 4/3
    // -> 14/3 - 2/3 = 4.
    let truth = [1.0, 2.0, 4.0, 7.0];
    let well = [0, 0, 1, 2];
    let c = climatology_crps(&truth, &well, &[1.0; 4], None).unwrap();
    for (got, want) in c.iter().zip([3.75, 2.75, 4.0 / 3.0, 4.0]) {
        assert!((got - want).abs() < 1e-12, "{got} vs {want}");
    }
    // Strata: with A's second row and B in stratum 1, B's reference is A's row 2 alone.
    let c = climatology_crps(&truth, &well, &[1.0; 4], Some(&[0, 1, 1, 0])).unwrap();
    assert!((c[2] - 2.0).abs() < 1e-12);
    // A's row 2 in stratum 1 has B (value 4) as reference: |2 - 4| = 2.
    assert!((c[1] - 2.0).abs() < 1e-12);
    // One well alone in its stratum: undefined.
    let c = climatology_crps(&truth, &well, &[1.0; 4], Some(&[0, 0, 1, 2])).unwrap();
    assert!(c[2].is_nan() && c[3].is_nan());
    // Bad input is an error, not a panic.
    assert!(climatology_crps(&truth, &well[..3], &[1.0; 4], None).is_err());
    assert!(climatology_crps(&truth, &well, &[1.0, -1.0, 1.0, 1.0], None).is_err());
}
