//! Normal scores, the randomised PIT and the normal functions.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use statrs::distribution::{ContinuousCDF, Normal};
use tidemark::spatial::normal;
use tidemark::spatial::scores::{PIT_CLAMP, PitInput, normal_score, randomized_pits};

/// Kolmogorov-Smirnov distance of `u` from the uniform distribution on [0, 1].
fn ks_uniform(u: &[f64]) -> f64 {
    let mut s = u.to_vec();
    s.sort_by(f64::total_cmp);
    let n = s.len() as f64;
    s.iter()
        .enumerate()
        .map(|(k, &v)| ((k as f64 + 1.0) / n - v).max(v - k as f64 / n))
        .fold(0.0, f64::max)
}

#[test]
fn normal_functions_match_statrs() {
    // statrs 0.19 Normal(0, 1) cdf / inverse_cdf as the reference (its erfc is good to about
    // 1e-10 relative in the lower tail; libm's, used by tidemark, to an ulp)
    let n = Normal::new(0.0, 1.0).unwrap();
    for k in -80..=80 {
        let z = k as f64 * 0.1;
        let (a, b) = (normal::cdf(z), n.cdf(z));
        assert!((a - b).abs() <= 1e-10 * b, "cdf at {z}: {a} vs {b}");
    }
    // Phi(-3.090232306167813) = 0.001 to 16 digits (Phi^-1(0.001) by Wichura's AS241 in
    // Python 3.11 statistics.NormalDist, accurate to about 1e-16)
    assert!((normal::cdf(-3.090232306167813) / 0.001 - 1.0).abs() < 1e-14);
    for k in 1..1000 {
        let u = k as f64 / 1000.0;
        let q = normal::quantile(u);
        assert!(
            (q - n.inverse_cdf(u)).abs() <= 1e-12 * (1.0 + q.abs()),
            "quantile at {u}"
        );
        assert!(
            (normal::cdf(q) / u - 1.0).abs() <= 1e-14,
            "round trip at {u}: {}",
            normal::cdf(q)
        );
    }
    assert_eq!(normal::quantile(0.0), f64::NEG_INFINITY);
    assert_eq!(normal::quantile(1.0), f64::INFINITY);
    assert!(normal::quantile(f64::NAN).is_nan());
    let l = normal::level(40.0);
    assert!(l < 1.0 && l > 0.999);
    assert!(normal::level(-40.0) > 0.0);
}

#[test]
fn normal_scores_are_clamped_and_finite() {
    // statrs 0.19: Phi^-1(0.001) = -3.090232306167813
    let lo = Normal::new(0.0, 1.0).unwrap().inverse_cdf(PIT_CLAMP);
    assert!((normal_score(0.0, PIT_CLAMP) - lo).abs() < 1e-12);
    assert!((normal_score(1.0, PIT_CLAMP) + lo).abs() < 1e-12);
    assert!((normal_score(0.5, PIT_CLAMP)).abs() < 1e-15);
    assert!(normal_score(f64::NAN, PIT_CLAMP).is_nan());
}

#[test]
fn randomized_pit_is_uniform_for_a_distribution_with_an_atom() {
    // Czado, Gneiting & Held (2009), Biometrics 65:1254: the randomised PIT of a calibrated
    // forecast with atoms is U(0, 1); the plain PIT F(y) is not. Forecast = observation law: an
    // atom of 0.3 at zero and an exponential(1) part, F(y) = 0.3 + 0.7 (1 - exp(-y)) for y >= 0.
    let mut rng = StdRng::seed_from_u64(5);
    let n = 4000;
    let inputs: Vec<PitInput> = (0..n)
        .map(|_| {
            if rng.random::<f64>() < 0.3 {
                PitInput {
                    left: 0.0,
                    right: 0.3,
                }
            } else {
                let y = -(1.0 - rng.random::<f64>()).ln();
                let f = 0.3 + 0.7 * (1.0 - (-y).exp());
                PitInput { left: f, right: f }
            }
        })
        .collect();
    let pits = randomized_pits(&inputs, 9).unwrap();
    // Kolmogorov-Smirnov critical value at level 0.001: sqrt(-ln(0.0005) / 2) / sqrt(n) (the
    // asymptotic Kolmogorov distribution, Smirnov 1948)
    let critical = (-(0.0005f64).ln() / 2.0).sqrt() / (n as f64).sqrt();
    let d = ks_uniform(&pits);
    assert!(
        d < critical,
        "randomised PIT: KS distance {d} >= {critical}"
    );
    let plain: Vec<f64> = inputs.iter().map(|p| p.right).collect();
    let d_plain = ks_uniform(&plain);
    assert!(
        d_plain > 5.0 * critical,
        "the plain PIT should be far from uniform, KS distance {d_plain}"
    );
    // each value depends only on its own index: a prefix gives the same draws
    let prefix = randomized_pits(&inputs[..100], 9).unwrap();
    assert_eq!(prefix[..], pits[..100]);
}

#[test]
fn randomized_pit_rejects_bad_probabilities() {
    let bad = [
        PitInput {
            left: 0.0,
            right: 0.5,
        },
        PitInput {
            left: 0.6,
            right: 0.5,
        },
    ];
    let e = randomized_pits(&bad, 1).unwrap_err().to_string();
    assert!(e.contains("observation 1"), "{e}");
}
