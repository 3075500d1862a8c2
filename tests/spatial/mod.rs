//! Integration tests: spatial (normal scores, variograms and their fit, circulant-embedding
//! fields, conditioning by kriging, field totals and their manifest types).

mod bootstrap;
mod field;
mod krige;
mod scores;
mod spec;
mod totals;
mod unknown_mean;
mod variogram;

use ndarray::Array2;
use smartcore::linalg::traits::cholesky::CholeskyDecomposable;
use tidemark::spatial::{VariogramModel, WellScore};

/// The covariance matrix of `model` between `points` (metres).
pub fn covariance_matrix(model: &VariogramModel, points: &[(f64, f64)]) -> Array2<f64> {
    let n = points.len();
    Array2::from_shape_fn((n, n), |(a, b)| {
        let (pa, pb) = (points[a], points[b]);
        model.covariance((pa.0 - pb.0).hypot(pa.1 - pb.1))
    })
}

/// Lower Cholesky factor by smartcore 0.7 (an implementation independent of tidemark's).
pub fn reference_cholesky(c: &Array2<f64>) -> Array2<f64> {
    c.cholesky().expect("positive definite").L()
}

/// Solves `C x = b` by smartcore 0.7's Cholesky solver.
pub fn reference_solve(c: &Array2<f64>, b: &[f64]) -> Vec<f64> {
    let rhs = Array2::from_shape_vec((b.len(), 1), b.to_vec()).expect("column");
    c.clone()
        .cholesky_solve_mut(rhs)
        .expect("positive definite")
        .column(0)
        .to_vec()
}

/// Two-sided p-value of a standard normal z-score (statrs 0.19).
pub fn two_sided_p(z: f64) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    let n = Normal::new(0.0, 1.0).expect("standard normal");
    2.0 * n.cdf(-z.abs())
}

/// A well score at `(x, y)` metres.
pub fn well(name: &str, x: f64, y: f64, score: f64) -> WellScore {
    WellScore {
        name: name.into(),
        x,
        y,
        score,
    }
}
