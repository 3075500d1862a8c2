//! Friedman #1 and R2, shared by the ensemble bench, the `fit_probe` example and the ensemble
//! tests (each includes this file with `#[path]`, so it stays out of the library).

use ndarray::{Array1, Array2};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// Friedman #1 (Friedman 1991, "Multivariate adaptive regression splines", Ann. Stat. 19(1)):
/// ten features uniform on [0, 1], of which five matter,
/// `y = 10 sin(pi x0 x1) + 20 (x2 - 0.5)^2 + 10 x3 + 5 x4 + N(0, noise^2)`.
pub fn friedman1(n: usize, noise: f64, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, 10), |_| rng.random::<f64>());
    let y = Array1::from_shape_fn(n, |i| {
        let r = x.row(i);
        let e: f64 = StandardNormal.sample(&mut rng);
        10.0 * (std::f64::consts::PI * r[0] * r[1]).sin()
            + 20.0 * (r[2] - 0.5).powi(2)
            + 10.0 * r[3]
            + 5.0 * r[4]
            + noise * e
    });
    (x, y)
}

/// Coefficient of determination `1 - SSE / SST` of `pred` against `y`.
pub fn r2(y: &[f64], pred: &[f64]) -> f64 {
    let mean = y.iter().sum::<f64>() / y.len() as f64;
    let sst: f64 = y.iter().map(|v| (v - mean).powi(2)).sum();
    let sse: f64 = y.iter().zip(pred).map(|(a, b)| (a - b).powi(2)).sum();
    1.0 - sse / sst
}
