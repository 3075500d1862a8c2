//! The calibration draw: Bayesian-bootstrap weights against the Dirichlet(1, ..., 1) moments,
//! the posterior variance of the reweighted mean, node marginals kept, totals widened, and the
//! same numbers for any thread count.

use rand::SeedableRng;
use rand::rngs::StdRng;
use tidemark::spatial::bootstrap::{
    LayerScores, apply_shift, dirichlet_weights, unit_variance_factors,
};

/// Dirichlet(1, ..., 1) over n items (Rubin 1981, Ann. Stat. 9:130, the Bayesian bootstrap;
/// moments of the Dirichlet distribution, e.g. Kotz, Balakrishnan & Johnson 2000, Continuous
/// Multivariate Distributions vol. 1, ch. 49): E w_i = 1/n, Var w_i = (n - 1) / (n^2 (n + 1)),
/// Cov(w_i, w_j) = -1 / (n^2 (n + 1)).
#[test]
fn bootstrap_weights_have_the_dirichlet_moments() {
    let n = 5;
    let draws = 40_000;
    let mut rng = StdRng::seed_from_u64(17);
    let (mut sum, mut sq, mut cross) = (vec![0.0; n], vec![0.0; n], 0.0);
    for _ in 0..draws {
        let w = dirichlet_weights(n, &mut rng);
        assert_eq!(w.len(), n);
        assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        assert!(w.iter().all(|&x| x > 0.0));
        for k in 0..n {
            sum[k] += w[k];
            sq[k] += w[k] * w[k];
        }
        cross += w[0] * w[1];
    }
    let d = draws as f64;
    let nf = n as f64;
    let var = (nf - 1.0) / (nf * nf * (nf + 1.0));
    let cov = -1.0 / (nf * nf * (nf + 1.0));
    for k in 0..n {
        let mean = sum[k] / d;
        let v = sq[k] / d - mean * mean;
        // standard error of a mean of `draws` weights: sqrt(var / draws)
        assert!(
            (mean - 1.0 / nf).abs() < 4.0 * (var / d).sqrt(),
            "weight {k}: mean {mean}"
        );
        assert!(
            (v - var).abs() < 0.05 * var,
            "weight {k}: variance {v} vs {var}"
        );
    }
    let c = cross / d - (sum[0] / d) * (sum[1] / d);
    assert!((c - cov).abs() < 0.1 * cov.abs(), "covariance {c} vs {cov}");
}

/// The reweighted mean `sum w_i s_i` has variance `sum (s_i - mean)^2 / (n (n + 1))` under
/// Dirichlet(1, ..., 1) weights (from the moments above), and mean `mean(s)`.
#[test]
fn the_reweighted_mean_has_the_stated_posterior_variance() {
    let s = [1.2, -0.4, 0.3, -1.5, 0.9, 0.1, -0.2];
    let scores = LayerScores::new(s.iter().copied().enumerate().collect()).unwrap();
    let n = s.len() as f64;
    let mean = s.iter().sum::<f64>() / n;
    let ss: f64 = s.iter().map(|v| (v - mean).powi(2)).sum();
    assert!((scores.variance - ss / (n * (n + 1.0))).abs() < 1e-15);
    let mut rng = StdRng::seed_from_u64(3);
    let draws = 40_000;
    let shifts: Vec<f64> = (0..draws)
        .map(|_| scores.shift(&dirichlet_weights(s.len(), &mut rng)))
        .collect();
    let m = shifts.iter().sum::<f64>() / draws as f64;
    let v = shifts.iter().map(|d| (d - m).powi(2)).sum::<f64>() / (draws - 1) as f64;
    assert!(
        m.abs() < 4.0 * (scores.variance / draws as f64).sqrt(),
        "mean shift {m}"
    );
    assert!(
        (v - scores.variance).abs() < 0.05 * scores.variance,
        "variance {v} vs {}",
        scores.variance
    );
    // a subset of the field's wells renormalises the weights over that subset
    let sub = LayerScores::new(vec![(0, 1.0), (2, 3.0)]).unwrap();
    assert!((sub.shift(&[0.25, 0.5, 0.25]) - (0.5 * 1.0 + 0.5 * 3.0 - 2.0)).abs() < 1e-15);
    assert!(LayerScores::new(vec![(0, 1.0)]).is_none());
}

/// Shifts of variance v added where the wells leave a share k free, then scaled by
/// 1 / sqrt(1 + v k^2), keep unit variance (Var(z + d k) = 1 + v k^2 for independent z, d).
#[test]
fn the_shift_keeps_unit_variance() {
    let v = 0.04;
    let free = [0.0, 0.5, 1.0];
    let factor = unit_variance_factors(v, &free);
    let mut rng = StdRng::seed_from_u64(8);
    let draws = 40_000;
    let mut sq = [0.0; 3];
    for _ in 0..draws {
        let z: Vec<f64> = (0..3)
            .map(|_| rand::RngExt::sample::<f64, _>(&mut rng, rand_distr::StandardNormal))
            .collect();
        let d = v.sqrt() * rand::RngExt::sample::<f64, _>(&mut rng, rand_distr::StandardNormal);
        let mut z2 = z.clone();
        apply_shift(&mut z2, d, &free, &factor);
        assert_eq!(z2[0], z[0], "a well node is not moved");
        for k in 0..3 {
            sq[k] += z2[k] * z2[k];
        }
    }
    for (k, s) in sq.iter().enumerate() {
        let var = s / draws as f64;
        // sd of a sample variance of a normal: sqrt(2 / draws)
        assert!(
            (var - 1.0).abs() < 4.0 * (2.0 / draws as f64).sqrt(),
            "node {k}: {var}"
        );
    }
}
