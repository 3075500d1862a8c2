//! The standard normal distribution function `Phi` and its inverse, through the complementary
//! error function: `Phi(z) = erfc(-z / sqrt 2) / 2` and `Phi^-1(u) = -sqrt 2 erfc^-1(2u)`
//! (Abramowitz & Stegun 1964, 26.2.29). `erfc` is libm's (the fdlibm algorithm, error below one
//! ulp, also in the tails); `erfc^-1` is statrs' (rational approximations after the Boost math
//! library).

use statrs::function::erf::erfc_inv;

/// Smallest level handed to a quantile function: levels are kept inside the open interval (0, 1).
pub const LEVEL_MIN: f64 = f64::MIN_POSITIVE;
/// Largest level handed to a quantile function (the largest double below 1).
pub const LEVEL_MAX: f64 = 1.0 - f64::EPSILON / 2.0;

/// `Phi(z)`, the standard normal distribution function. `Phi(-inf) = 0`, `Phi(inf) = 1`.
pub fn cdf(z: f64) -> f64 {
    0.5 * libm::erfc(-z * std::f64::consts::FRAC_1_SQRT_2)
}

/// `Phi^-1(u)`, the standard normal quantile. `u <= 0` gives `-inf`, `u >= 1` gives `+inf`, `NaN`
/// stays `NaN`.
pub fn quantile(u: f64) -> f64 {
    if u.is_nan() {
        f64::NAN
    } else if u <= 0.0 {
        f64::NEG_INFINITY
    } else if u >= 1.0 {
        f64::INFINITY
    } else {
        -std::f64::consts::SQRT_2 * erfc_inv(2.0 * u)
    }
}

/// `Phi(z)` kept inside `[LEVEL_MIN, LEVEL_MAX]`, for handing to a quantile function.
pub fn level(z: f64) -> f64 {
    cdf(z).clamp(LEVEL_MIN, LEVEL_MAX)
}
