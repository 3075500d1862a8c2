//! Isotropic variogram models: a nugget plus one structure (exponential, spherical or Matern with
//! smoothness 3/2).
//!
//! With total sill `s`, nugget `c0` and structure correlation `rho`:
//! `gamma(h) = c0 + (s - c0)(1 - rho(h))` for `h > 0`, `gamma(0) = 0`; covariance
//! `C(h) = s - gamma(h)`, so `C(0) = s` and `C(h) = (s - c0) rho(h)` for `h > 0`.
//!
//! - exponential: `rho = exp(-h / b)`; the reported range is the practical range `a`, where `rho`
//!   falls to 0.05, `a = ln(20) b` (about `3 b`; Journel & Huijbregts 1978, section III.B).
//! - spherical: `rho = 1 - 1.5 (h/a) + 0.5 (h/a)^3` for `h < a`, 0 beyond; `a` is the range
//!   (Matheron 1963; Journel & Huijbregts 1978). Valid in up to three dimensions.
//! - Matern, smoothness 3/2: `rho = (1 + t) exp(-t)`, `t = sqrt(3) h / l` (Stein 1999,
//!   *Interpolation of Spatial Data*, section 2.7; Rasmussen & Williams 2006, eq. 4.17); the
//!   reported range is again the practical range, where `rho = 0.05` (`t = 4.7439`).

use serde::{Deserialize, Serialize};

use super::SpatialError;

/// `ln 20`: the exponential's practical range over its scale (`exp(-ln 20) = 0.05`).
pub const EXPONENTIAL_PRACTICAL: f64 = 2.995_732_273_553_991;
/// The `t` at which `(1 + t) exp(-t) = 0.05` (Matern 3/2's practical range is `t l / sqrt 3`).
pub const MATERN32_PRACTICAL: f64 = 4.743_864_518_390_578;

/// The shape of the structured part of a variogram.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ModelKind {
    /// Exponential; range = practical range (correlation 0.05).
    Exponential,
    /// Spherical; range = the distance where the correlation reaches 0.
    Spherical,
    /// Matern with smoothness 3/2; range = practical range (correlation 0.05).
    Matern32,
}

impl ModelKind {
    /// Every model kind, in the order they are tried by a fit.
    pub const ALL: [ModelKind; 3] = [
        ModelKind::Exponential,
        ModelKind::Spherical,
        ModelKind::Matern32,
    ];

    /// Correlation of the structure at distance `h >= 0` for range `range > 0` (1 at `h = 0`).
    pub fn correlation(self, h: f64, range: f64) -> f64 {
        let h = h.abs();
        match self {
            ModelKind::Exponential => (-EXPONENTIAL_PRACTICAL * h / range).exp(),
            ModelKind::Spherical => {
                let r = h / range;
                if r >= 1.0 {
                    0.0
                } else {
                    1.0 - r * (1.5 - 0.5 * r * r)
                }
            }
            ModelKind::Matern32 => {
                let t = MATERN32_PRACTICAL * h / range;
                (1.0 + t) * (-t).exp()
            }
        }
    }

    /// Lower-case name, as in serialised output.
    pub fn name(self) -> &'static str {
        match self {
            ModelKind::Exponential => "exponential",
            ModelKind::Spherical => "spherical",
            ModelKind::Matern32 => "matern32",
        }
    }
}

/// A fitted or chosen variogram model: nugget, total sill and range.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct VariogramModel {
    /// Shape of the structure.
    pub kind: ModelKind,
    /// Nugget `c0 >= 0` (the jump at the origin).
    pub nugget: f64,
    /// Total sill `s >= c0`, `s > 0` (nugget plus partial sill).
    pub sill: f64,
    /// Range in metres (practical range for exponential and Matern), `> 0`.
    pub range: f64,
}

impl VariogramModel {
    /// Checks `0 <= nugget <= sill`, `sill > 0`, `range > 0`, all finite. `what` names the
    /// model in the error.
    pub fn check(&self, what: &str) -> Result<(), SpatialError> {
        let ok = self.nugget.is_finite()
            && self.sill.is_finite()
            && self.range.is_finite()
            && self.nugget >= 0.0
            && self.sill > 0.0
            && self.nugget <= self.sill
            && self.range > 0.0;
        if ok {
            Ok(())
        } else {
            Err(SpatialError::Input {
                what: what.to_string(),
                problem: format!(
                    "a variogram model needs 0 <= nugget <= sill, sill > 0 and range > 0 (all finite), got nugget {}, sill {}, range {}",
                    self.nugget, self.sill, self.range
                ),
            })
        }
    }

    /// The semivariogram at distance `h` (0 at `h = 0`).
    pub fn gamma(&self, h: f64) -> f64 {
        if h == 0.0 {
            0.0
        } else {
            self.sill - self.covariance(h)
        }
    }

    /// The covariance at distance `h` (`sill` at `h = 0`).
    pub fn covariance(&self, h: f64) -> f64 {
        if h == 0.0 {
            self.sill
        } else {
            (self.sill - self.nugget) * self.kind.correlation(h, self.range)
        }
    }

    /// The same model rescaled to total sill 1 (nugget share and range kept): the covariance of
    /// standard normal scores.
    pub fn unit_variance(&self) -> VariogramModel {
        VariogramModel {
            kind: self.kind,
            nugget: self.nugget / self.sill,
            sill: 1.0,
            range: self.range,
        }
    }
}
