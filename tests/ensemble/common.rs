//! Shared synthetic data for the ensemble tests.

#[path = "../../benches/support/friedman.rs"]
mod friedman;
pub use friedman::{friedman1, r2};

use ndarray::{Array1, Array2};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// Mean of the heteroscedastic test model.
pub fn hetero_mean(x0: f64) -> f64 {
    4.0 * x0
}

/// Standard deviation of the heteroscedastic test model.
pub fn hetero_sd(x0: f64) -> f64 {
    0.5 + x0
}

/// `y = 4 x0 + (0.5 + x0) N(0, 1)`, with `x0` and a noise feature `x1` uniform on [0, 1].
pub fn hetero(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, 2), |_| rng.random::<f64>());
    let y = Array1::from_shape_fn(n, |i| {
        let e: f64 = StandardNormal.sample(&mut rng);
        hetero_mean(x[[i, 0]]) + hetero_sd(x[[i, 0]]) * e
    });
    (x, y)
}

/// A random permutation of `0..n`.
pub fn permutation(n: usize, seed: u64) -> Vec<usize> {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut p: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = rng.random_range(0..=i);
        p.swap(i, j);
    }
    p
}
