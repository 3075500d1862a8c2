//! Seismic modelling: angle-dependent P-P reflectivity, the Ricker wavelet, 1-D convolution in
//! two-way time and the time-lapse attributes.
//!
//! - Exact P-P reflection coefficient of a plane wave at a welded elastic interface (Zoeppritz 1919,
//!   in the explicit form of Aki & Richards 1980, Quantitative Seismology, eq. 5.40).
//! - Linearised forms: Aki & Richards (1980) eq. 5.44 and Shuey (1985) with its intercept A and
//!   gradient B, R(theta) ~ A + B sin^2 theta (+ C (tan^2 - sin^2) for the three-term form).
//! - Ricker (1953) wavelet w(t) = (1 - 2 pi^2 f^2 t^2) exp(-pi^2 f^2 t^2).
//! - Time shifts through a strained layer after Hatchell & Bourne (2005), "Rocks under strain", The
//!   Leading Edge 24(12): dv/v = -R eps_zz.
//! - NRMS repeatability metric: 2 RMS(m - b) / (RMS(m) + RMS(b)) (Kragh & Christie 2002).
//!
//! Times are in seconds, velocities in m/s, densities in kg/m3, angles in degrees unless stated.

use super::rock::Elastic;
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;
use std::ops::{Add, Div, Mul, Sub};

/// A minimal complex number for the post-critical branch of the Zoeppritz equations.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Complex {
    /// Real part.
    pub re: f64,
    /// Imaginary part.
    pub im: f64,
}

impl Complex {
    fn real(re: f64) -> Self {
        Complex { re, im: 0.0 }
    }

    /// Modulus |z|.
    pub fn abs(self) -> f64 {
        self.re.hypot(self.im)
    }
}

impl Add for Complex {
    type Output = Complex;
    fn add(self, o: Complex) -> Complex {
        Complex {
            re: self.re + o.re,
            im: self.im + o.im,
        }
    }
}

impl Sub for Complex {
    type Output = Complex;
    fn sub(self, o: Complex) -> Complex {
        Complex {
            re: self.re - o.re,
            im: self.im - o.im,
        }
    }
}

impl Mul for Complex {
    type Output = Complex;
    fn mul(self, o: Complex) -> Complex {
        Complex {
            re: self.re * o.re - self.im * o.im,
            im: self.re * o.im + self.im * o.re,
        }
    }
}

impl Mul<f64> for Complex {
    type Output = Complex;
    fn mul(self, o: f64) -> Complex {
        Complex {
            re: self.re * o,
            im: self.im * o,
        }
    }
}

impl Div for Complex {
    type Output = Complex;
    fn div(self, o: Complex) -> Complex {
        let d = o.re * o.re + o.im * o.im;
        Complex {
            re: (self.re * o.re + self.im * o.im) / d,
            im: (self.im * o.re - self.re * o.im) / d,
        }
    }
}

/// cos(asin(x)) for real x, on the branch that numerical libraries use for asin of a real argument
/// above 1 (asin(x) = pi/2 + i acosh(x), so the cosine is -i sqrt(x^2 - 1)).
fn cos_of_asin(x: f64) -> Complex {
    if x.abs() <= 1.0 {
        Complex::real((1.0 - x * x).sqrt())
    } else {
        Complex {
            re: 0.0,
            im: -(x * x - 1.0).sqrt(),
        }
    }
}

/// Exact P-P reflection coefficient (complex beyond a critical angle) for a P wave incident at
/// `theta1` degrees in medium 1 on medium 2 (Aki & Richards 1980, eq. 5.40).
pub fn zoeppritz_rpp_complex(upper: Elastic, lower: Elastic, theta1: f64) -> Complex {
    let (vp1, vs1, rho1) = (upper.vp, upper.vs, upper.rho);
    let (vp2, vs2, rho2) = (lower.vp, lower.vs, lower.rho);
    let s1 = theta1.to_radians().sin();
    let p = s1 / vp1;
    let ct1 = cos_of_asin(s1);
    let ct2 = cos_of_asin(p * vp2);
    let cf1 = cos_of_asin(p * vs1);
    let cf2 = cos_of_asin(p * vs2);
    let sf1 = (p * vs1).powi(2);
    let sf2 = (p * vs2).powi(2);
    let a = Complex::real(rho2 * (1.0 - 2.0 * sf2) - rho1 * (1.0 - 2.0 * sf1));
    let b = Complex::real(rho2 * (1.0 - 2.0 * sf2) + 2.0 * rho1 * sf1);
    let c = Complex::real(rho1 * (1.0 - 2.0 * sf1) + 2.0 * rho2 * sf2);
    let d = Complex::real(2.0 * (rho2 * vs2 * vs2 - rho1 * vs1 * vs1));
    let e = b * ct1 * (1.0 / vp1) + c * ct2 * (1.0 / vp2);
    let f = b * cf1 * (1.0 / vs1) + c * cf2 * (1.0 / vs2);
    let g = a - d * ct1 * cf2 * (1.0 / (vp1 * vs2));
    let h = a - d * ct2 * cf1 * (1.0 / (vp2 * vs1));
    let pp = p * p;
    let det = e * f + g * h * pp;
    let num = f * (b * ct1 * (1.0 / vp1) - c * ct2 * (1.0 / vp2))
        - h * pp * (a + d * ct1 * cf2 * (1.0 / (vp1 * vs2)));
    num / det
}

/// Exact P-P reflection coefficient (real part) at incidence angle `theta1` degrees.
pub fn zoeppritz_rpp(upper: Elastic, lower: Elastic, theta1: f64) -> f64 {
    zoeppritz_rpp_complex(upper, lower, theta1).re
}

/// Critical angle (degrees) of a P wave going from velocity `v1` into a faster `v2`; `None` when
/// `v2 <= v1`.
pub fn critical_angle(v1: f64, v2: f64) -> Option<f64> {
    (v2 > v1).then(|| (v1 / v2).asin().to_degrees())
}

/// Contrasts and averages of an interface used by the linearised forms.
struct Contrast {
    dvp: f64,
    dvs: f64,
    drho: f64,
    vp: f64,
    vs: f64,
    rho: f64,
}

fn contrast(upper: Elastic, lower: Elastic) -> Contrast {
    Contrast {
        dvp: lower.vp - upper.vp,
        dvs: lower.vs - upper.vs,
        drho: lower.rho - upper.rho,
        vp: 0.5 * (lower.vp + upper.vp),
        vs: 0.5 * (lower.vs + upper.vs),
        rho: 0.5 * (lower.rho + upper.rho),
    }
}

/// Shuey (1985) intercept A and gradient B of an interface:
/// A = (dVp/Vp + drho/rho)/2, B = dVp/(2Vp) - 2 (Vs/Vp)^2 (drho/rho + 2 dVs/Vs).
pub fn shuey_intercept_gradient(upper: Elastic, lower: Elastic) -> (f64, f64) {
    let c = contrast(upper, lower);
    let a = 0.5 * (c.dvp / c.vp + c.drho / c.rho);
    let k = c.vs / c.vp;
    let b = 0.5 * c.dvp / c.vp - 2.0 * k * k * (c.drho / c.rho + 2.0 * c.dvs / c.vs);
    (a, b)
}

/// Shuey (1985) two-term approximation A + B sin^2 theta.
pub fn shuey2(upper: Elastic, lower: Elastic, theta: f64) -> f64 {
    let (a, b) = shuey_intercept_gradient(upper, lower);
    a + b * theta.to_radians().sin().powi(2)
}

/// Shuey (1985) three-term approximation A + B sin^2 + C (tan^2 - sin^2), C = dVp/(2Vp).
pub fn shuey3(upper: Elastic, lower: Elastic, theta: f64) -> f64 {
    let (a, b) = shuey_intercept_gradient(upper, lower);
    let c = contrast(upper, lower);
    let t = theta.to_radians();
    let s2 = t.sin().powi(2);
    a + b * s2 + 0.5 * c.dvp / c.vp * (t.tan().powi(2) - s2)
}

/// Aki & Richards (1980, eq. 5.44) linearised reflection coefficient at incidence angle `theta1`
/// (degrees) in the upper medium; the velocity term uses the mean of incidence and transmission
/// angles, the ray parameter p = sin(theta1)/Vp1.
pub fn aki_richards(upper: Elastic, lower: Elastic, theta1: f64) -> f64 {
    let c = contrast(upper, lower);
    let t1 = theta1.to_radians();
    let s2t = (lower.vp / upper.vp * t1.sin()).clamp(-1.0, 1.0);
    let mean = 0.5 * (t1 + s2t.asin());
    let pv2 = (c.vs / upper.vp).powi(2) * t1.sin().powi(2); // p^2 Vs^2
    0.5 * (1.0 - 4.0 * pv2) * c.drho / c.rho + 0.5 * c.dvp / (c.vp * mean.cos().powi(2))
        - 4.0 * pv2 * c.dvs / c.vs
}

/// Which reflection-coefficient formula the generator uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ReflectivityMethod {
    /// Exact Zoeppritz (real part).
    Zoeppritz,
    /// Aki & Richards linearisation.
    AkiRichards,
    /// Shuey three-term approximation.
    Shuey,
}

/// Reflection coefficient by `method` at incidence angle `theta1` (degrees) in the upper medium.
pub fn rpp(method: ReflectivityMethod, upper: Elastic, lower: Elastic, theta1: f64) -> f64 {
    match method {
        ReflectivityMethod::Zoeppritz => zoeppritz_rpp(upper, lower, theta1),
        ReflectivityMethod::AkiRichards => aki_richards(upper, lower, theta1),
        ReflectivityMethod::Shuey => shuey3(upper, lower, theta1),
    }
}

/// Ricker wavelet of peak frequency `f` (Hz) at time `t` (s).
pub fn ricker(f: f64, t: f64) -> f64 {
    let a = (PI * f * t).powi(2);
    (1.0 - 2.0 * a) * (-a).exp()
}

/// Half-length (s) beyond which a Ricker wavelet of peak frequency `f` is below 1e-6 of its peak.
pub fn ricker_half_length(f: f64) -> f64 {
    // (1 - 2a) exp(-a) < 1e-6 for a = (pi f t)^2 > 17
    17f64.sqrt() / (PI * f)
}

/// A reflector in two-way time: time (s) and reflection coefficient.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Spike {
    /// Two-way time, s.
    pub time: f64,
    /// Reflection coefficient.
    pub r: f64,
}

/// 1-D convolutional trace: the reflectivity series (spikes at exact, not rounded, two-way times)
/// convolved with a Ricker wavelet of peak frequency `f`, sampled at `times` (s).
pub fn convolve(spikes: &[Spike], f: f64, times: &[f64]) -> Vec<f64> {
    let half = ricker_half_length(f);
    times
        .iter()
        .map(|&t| {
            spikes
                .iter()
                .filter(|s| (t - s.time).abs() < half)
                .map(|s| s.r * ricker(f, t - s.time))
                .sum()
        })
        .collect()
}

/// Two-way vertical travel time (s) through a layer of thickness `h` (m) at velocity `v` (m/s).
pub fn two_way_time(h: f64, v: f64) -> f64 {
    2.0 * h / v
}

/// Relative two-way-time change dt/t of a layer under vertical strain `eps_zz` with velocity change
/// dv/v = -r eps_zz (Hatchell & Bourne 2005), exact form (1 + eps)/(1 - r eps) - 1.
pub fn strained_time_change(eps_zz: f64, r: f64) -> f64 {
    (1.0 + eps_zz) / (1.0 - r * eps_zz) - 1.0
}

/// Root-mean-square of a slice (0 for an empty slice).
pub fn rms(x: &[f64]) -> f64 {
    if x.is_empty() {
        return 0.0;
    }
    (x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64).sqrt()
}

/// Sum of the negative samples of a slice.
pub fn sum_negative(x: &[f64]) -> f64 {
    x.iter().filter(|v| **v < 0.0).sum()
}

/// NRMS difference of two traces, 2 RMS(m - b) / (RMS(m) + RMS(b)), as a fraction (0 when both
/// traces are zero).
pub fn nrms(base: &[f64], monitor: &[f64]) -> f64 {
    let diff: Vec<f64> = base.iter().zip(monitor).map(|(b, m)| m - b).collect();
    let denom = rms(base) + rms(monitor);
    if denom > 0.0 {
        2.0 * rms(&diff) / denom
    } else {
        0.0
    }
}

/// Least-squares intercept and gradient `(A, B)` of amplitudes `amps` observed at angles
/// `angles_deg`, model a = A + B sin^2 theta.
pub fn fit_intercept_gradient(angles_deg: &[f64], amps: &[f64]) -> (f64, f64) {
    let n = angles_deg.len() as f64;
    let xs: Vec<f64> = angles_deg
        .iter()
        .map(|a| a.to_radians().sin().powi(2))
        .collect();
    let mx = xs.iter().sum::<f64>() / n;
    let my = amps.iter().sum::<f64>() / n;
    let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
    let sxy: f64 = xs.iter().zip(amps).map(|(x, y)| (x - mx) * (y - my)).sum();
    let b = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    (my - b * mx, b)
}
