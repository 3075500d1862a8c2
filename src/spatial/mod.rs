//! Spatially correlated prediction errors and field totals.
//!
//! Per-node predictive distributions say nothing about how the errors of neighbouring nodes move
//! together, yet a total over many nodes (an area, a pore volume) depends on exactly that. This
//! module estimates the spatial correlation of the errors from the wells, simulates Gaussian error
//! fields with that correlation, conditions them to the wells, maps them through each node's
//! predictive distribution and adds up totals, realization by realization.
//!
//! - [`scores`]: normal scores of probability-integral-transform (PIT) values, with the randomised
//!   PIT for distributions with an atom (Czado, Gneiting & Held 2009, *Biometrics* 65:1254).
//! - [`model`]: nugget + exponential, spherical or Matern (smoothness 3/2) variogram models.
//! - [`variogram`]: experimental variograms (Matheron 1962; the robust estimator of Cressie &
//!   Hawkins 1980, *Math. Geol.* 12:115) and the weighted least-squares fit of Cressie (1985,
//!   *Math. Geol.* 17:563), with a stated fallback when there are too few pairs.
//! - [`field`]: stationary Gaussian random fields on the grid by circulant embedding (Wood & Chan
//!   1994, *J. Comput. Graph. Stat.* 3:409; Dietrich & Newsam 1997, *SIAM J. Sci. Comput.* 18:1088).
//! - [`krige`]: conditioning by simple kriging (Journel 1974, *Geophysics* 39:85; Journel &
//!   Huijbregts 1978, *Mining Geostatistics*, section VII.C).
//! - [`totals`]: the realization engine, the totals and the two naive rules beside them, and the
//!   manifest types that define totals.
//! - [`unknown_mean`]: conditioning with an unknown mean per step (ordinary kriging, Journel &
//!   Huijbregts 1978; Chiles & Delfiner 2012), the field-wide error shared by every node.
//! - [`normal`]: the standard normal distribution function and its inverse.
//! - [`bootstrap`]: the calibration's uncertainty shared by all nodes, drawn per realization by a
//!   Bayesian bootstrap over the wells (Rubin 1981, *Ann. Stat.* 9:130).
//!
//! Coordinates here are grid-local metres (`x = i dx`, `y = j dy`); the grid's rotation does not
//! change a distance, so it plays no part. Maps are `Vec<f64>` indexed `j * nx + i` as everywhere
//! in tidemark.

pub mod bootstrap;
pub mod field;
pub mod krige;
pub mod model;
pub mod normal;
pub mod scores;
pub mod totals;
pub mod unknown_mean;
pub mod variogram;

use serde::{Deserialize, Serialize};

pub use field::{CirculantField, EmbeddingReport, EmbeddingSettings};
pub use krige::{Conditioning, LagTable, WellScore};
pub use model::{ModelKind, VariogramModel};
pub use totals::{NodeDistribution, TotalsInput, TotalsOutput, TotalsSettings};
pub use variogram::{Estimator, ExperimentalVariogram, FitSettings, VariogramFit};

/// Why a spatial computation cannot run. Messages name the item (well, quantity, manifest key)
/// at fault.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SpatialError {
    /// A setting or manifest value is outside its valid range.
    #[error("`{key}` must be {expected}, got {got}")]
    Setting {
        /// Setting or manifest key.
        key: String,
        /// The valid range, in words.
        expected: String,
        /// The value given.
        got: String,
    },
    /// An input value is unusable (not finite, wrong length, unknown reference).
    #[error("{what}: {problem}")]
    Input {
        /// The item at fault (a well, a quantity, a layer).
        what: String,
        /// What is wrong with it.
        problem: String,
    },
    /// The covariance matrix of the wells could not be factorised even with the largest
    /// regularisation tried.
    #[error(
        "the covariance matrix of the wells of {layer} is not positive definite (tried a diagonal regularisation up to {jitter})"
    )]
    NotPositiveDefinite {
        /// The layer whose wells were being used.
        layer: String,
        /// The largest diagonal term added.
        jitter: f64,
    },
}

/// A regular lattice of nodes in grid-local metres: node `(i, j)` at `(i dx, j dy)`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Lattice {
    /// Nodes along x.
    pub nx: usize,
    /// Nodes along y.
    pub ny: usize,
    /// Spacing along x (metres, > 0).
    pub dx: f64,
    /// Spacing along y (metres, > 0).
    pub dy: f64,
}

impl Lattice {
    /// A lattice with the given shape and spacing.
    pub fn new(nx: usize, ny: usize, dx: f64, dy: f64) -> Self {
        Lattice { nx, ny, dx, dy }
    }

    /// The lattice of a map grid (its rotation and origin do not matter here).
    pub fn of_grid(grid: &crate::grid::Grid) -> Self {
        Lattice::new(grid.nx, grid.ny, grid.dx, grid.dy)
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.nx * self.ny
    }

    /// True when the lattice has no node.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Area of one node's cell (`dx dy`).
    pub fn cell_area(&self) -> f64 {
        self.dx * self.dy
    }

    /// Length of the diagonal of the lattice's extent, `sqrt(((nx-1) dx)^2 + ((ny-1) dy)^2)`.
    pub fn diagonal(&self) -> f64 {
        let w = self.nx.saturating_sub(1) as f64 * self.dx;
        let h = self.ny.saturating_sub(1) as f64 * self.dy;
        w.hypot(h)
    }

    /// Checks shape and spacing.
    pub fn check(&self) -> Result<(), SpatialError> {
        for (key, v) in [("dx", self.dx), ("dy", self.dy)] {
            if !(v.is_finite() && v > 0.0) {
                return Err(SpatialError::Setting {
                    key: format!("lattice.{key}"),
                    expected: "a finite number > 0".into(),
                    got: v.to_string(),
                });
            }
        }
        for (key, v) in [("nx", self.nx), ("ny", self.ny)] {
            if v == 0 {
                return Err(SpatialError::Setting {
                    key: format!("lattice.{key}"),
                    expected: ">= 1".into(),
                    got: v.to_string(),
                });
            }
        }
        Ok(())
    }
}

/// Mixes a seed with a path of tags into an independent seed (SplitMix64 finaliser, Steele, Lea &
/// Flood 2014, OOPSLA), so that every field, pair of realizations and layer has its own stream.
pub fn derive_seed(seed: u64, tags: &[u64]) -> u64 {
    fn mix(mut z: u64) -> u64 {
        z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    tags.iter()
        .fold(mix(seed ^ 0x5EED_F1E1_D000_0000), |h, t| mix(h ^ mix(*t)))
}
