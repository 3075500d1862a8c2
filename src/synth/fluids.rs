//! Pore-fluid properties after Batzle & Wang (1992), "Seismic properties of pore fluids",
//! Geophysics 57(11), 1396-1408: brine (eqs. 27-29), gas (eqs. 9-11), dead oil (eqs. 18-20) and live
//! oil with dissolved gas (eqs. 21-24).
//!
//! Units at the interface: temperature in degrees Celsius, pressure in MPa, salinity as a weight
//! fraction (0.06 = 60 000 ppm), densities in kg/m3, velocities in m/s, bulk moduli in GPa. The paper's
//! own formulas work in g/cm3; the `*_gcc` helpers keep that unit so that they can be checked against
//! published values digit for digit.

/// Gas constant used by Batzle & Wang eq. 10, J/(mol K).
const GAS_CONSTANT: f64 = 8.31441;

/// Density, P-wave velocity and bulk modulus of one fluid phase.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FluidProps {
    /// Density, kg/m3.
    pub rho: f64,
    /// P-wave velocity, m/s.
    pub vp: f64,
    /// Adiabatic bulk modulus, GPa.
    pub k: f64,
}

impl FluidProps {
    /// Builds the properties from density (kg/m3) and velocity (m/s); K = rho V^2.
    pub fn from_rho_v(rho: f64, vp: f64) -> Self {
        FluidProps {
            rho,
            vp,
            k: rho * vp * vp * 1e-9,
        }
    }
}

/// Density of pure water, g/cm3 (Batzle & Wang 1992, eq. 27a).
pub fn water_density_gcc(t: f64, p: f64) -> f64 {
    1.0 + 1e-6
        * (-80.0 * t - 3.3 * t * t + 0.00175 * t.powi(3) + 489.0 * p - 2.0 * t * p
            + 0.016 * t * t * p
            - 1.3e-5 * t.powi(3) * p
            - 0.333 * p * p
            - 0.002 * t * p * p)
}

/// Density of brine, g/cm3 (Batzle & Wang 1992, eq. 27b); `s` is the NaCl weight fraction.
pub fn brine_density_gcc(t: f64, p: f64, s: f64) -> f64 {
    water_density_gcc(t, p)
        + s * (0.668
            + 0.44 * s
            + 1e-6
                * (300.0 * p - 2400.0 * p * s
                    + t * (80.0 + 3.0 * t - 3300.0 * s - 13.0 * p + 47.0 * p * s)))
}

/// Coefficients w_ij of the pure-water velocity polynomial (Batzle & Wang 1992, Table 1);
/// row i multiplies T^i, column j multiplies P^j.
const WATER_W: [[f64; 4]; 5] = [
    [1402.85, 1.524, 3.437e-3, -1.197e-5],
    [4.871, -0.0111, 1.739e-4, -1.628e-6],
    [-0.04783, 2.747e-4, -2.135e-6, 1.237e-8],
    [1.487e-4, -6.503e-7, -1.455e-8, 1.327e-10],
    [-2.197e-7, 7.987e-10, 5.230e-11, -4.614e-13],
];

/// Velocity of pure water, m/s (Batzle & Wang 1992, eq. 28).
pub fn water_velocity(t: f64, p: f64) -> f64 {
    let mut v = 0.0;
    let mut ti = 1.0;
    for row in &WATER_W {
        let mut pj = 1.0;
        for w in row {
            v += w * ti * pj;
            pj *= p;
        }
        ti *= t;
    }
    v
}

/// Velocity of brine, m/s (Batzle & Wang 1992, eq. 29).
///
/// Two versions of the last term circulate, -820 S^2 and -1820 S^2. This uses -820: the paper's own
/// Fig. 14 (brine bulk modulus against salinity) is matched within 0.3 % by the -820 form (S = 0.15
/// and 0.30 at 50 C, 0.1 MPa: 3.14 and 4.13 GPa; at 100 C, 50 MPa: 3.39 and 4.26 GPa), while the
/// -1820 form falls 2-9 % below the figure.
pub fn brine_velocity(t: f64, p: f64, s: f64) -> f64 {
    water_velocity(t, p)
        + s * (1170.0 - 9.6 * t + 0.055 * t * t - 8.5e-5 * t.powi(3) + 2.6 * p
            - 0.0029 * t * p
            - 0.0476 * p * p)
        + s.powf(1.5) * (780.0 - 10.0 * p + 0.16 * p * p)
        - 820.0 * s * s
}

/// Brine at temperature `t` (C), pressure `p` (MPa) and salinity `s` (weight fraction).
pub fn brine(t: f64, p: f64, s: f64) -> FluidProps {
    FluidProps::from_rho_v(brine_density_gcc(t, p, s) * 1000.0, brine_velocity(t, p, s))
}

/// Pseudo-reduced pressure and temperature of a natural gas (Batzle & Wang 1992, eq. 9).
pub fn gas_pseudo_reduced(gravity: f64, t: f64, p: f64) -> (f64, f64) {
    let ppr = p / (4.892 - 0.4048 * gravity);
    let tpr = (t + 273.15) / (94.72 + 170.75 * gravity);
    (ppr, tpr)
}

/// Gas density (g/cm3) and adiabatic bulk modulus (GPa) (Batzle & Wang 1992, eqs. 10-11);
/// `gravity` is the gas specific gravity relative to air.
pub fn gas_density_modulus(gravity: f64, t: f64, p: f64) -> (f64, f64) {
    let (ppr, tpr) = gas_pseudo_reduced(gravity, t, p);
    let a = 0.03 + 0.00527 * (3.5 - tpr).powi(3);
    let b = 0.642 * tpr - 0.007 * tpr.powi(4) - 0.52;
    let c = 0.109 * (3.85 - tpr).powi(2);
    let d = (0.45 + 8.0 * (0.56 - 1.0 / tpr).powi(2)) * ppr.powf(1.2) / tpr;
    let e = c * (-d).exp();
    let z = a * ppr + b + e;
    let rho = 28.8 * gravity * p / (z * GAS_CONSTANT * (t + 273.15));
    // dZ/dPpr at constant temperature; d is proportional to Ppr^1.2.
    let dz = if ppr > 0.0 {
        a - 1.2 * c * d * (-d).exp() / ppr
    } else {
        a
    };
    let gamma0 =
        0.85 + 5.6 / (ppr + 2.0) + 27.1 / (ppr + 3.5).powi(2) - 8.7 * (-0.65 * (ppr + 1.0)).exp();
    let k_mpa = p * gamma0 / (1.0 - ppr / z * dz);
    (rho, k_mpa / 1000.0)
}

/// Natural gas of specific gravity `gravity` at `t` (C) and `p` (MPa).
pub fn gas(gravity: f64, t: f64, p: f64) -> FluidProps {
    let (rho, k) = gas_density_modulus(gravity, t, p);
    let rho = rho * 1000.0;
    FluidProps {
        rho,
        vp: (k * 1e9 / rho).sqrt(),
        k,
    }
}

/// Density at 15.6 C and atmospheric pressure of an oil of the given API gravity, g/cm3.
pub fn api_to_density_gcc(api: f64) -> f64 {
    141.5 / (api + 131.5)
}

/// Pressure- and temperature-corrected density of an oil of reference density `rho0` (g/cm3)
/// (Batzle & Wang 1992, eqs. 18-19).
fn oil_density_pt_gcc(rho0: f64, t: f64, p: f64) -> f64 {
    let rho_p = rho0 + (0.00277 * p - 1.71e-7 * p.powi(3)) * (rho0 - 1.15).powi(2) + 3.49e-4 * p;
    rho_p / (0.972 + 3.81e-4 * (t + 17.78).powf(1.175))
}

/// Velocity of an oil of (pseudo-)density `rho` (g/cm3) (Batzle & Wang 1992, eq. 20).
fn oil_velocity(rho: f64, t: f64, p: f64) -> f64 {
    2096.0 * (rho / (2.6 - rho)).sqrt() - 3.7 * t
        + 4.64 * p
        + 0.0115 * (4.12 * (1.08 / rho - 1.0).sqrt() - 1.0) * t * p
}

/// Dead oil (no dissolved gas) of API gravity `api` at `t` (C) and `p` (MPa).
pub fn dead_oil(api: f64, t: f64, p: f64) -> FluidProps {
    let rho0 = api_to_density_gcc(api);
    FluidProps::from_rho_v(
        oil_density_pt_gcc(rho0, t, p) * 1000.0,
        oil_velocity(rho0, t, p),
    )
}

/// Formation volume factor of a live oil (Batzle & Wang 1992, eq. 23, after Standing);
/// `rs` is the dissolved gas-oil ratio in litres of gas per litre of oil.
pub fn oil_formation_volume_factor(api: f64, gas_gravity: f64, rs: f64, t: f64) -> f64 {
    let rho0 = api_to_density_gcc(api);
    0.972 + 0.00038 * (2.4 * rs * (gas_gravity / rho0).sqrt() + t + 17.8).powf(1.175)
}

/// Live oil with `rs` litres of gas per litre dissolved (Batzle & Wang 1992, eqs. 21-24).
///
/// The density is the saturated density rho_G of eq. 24; the velocity uses the pseudo-density
/// rho' = rho0 / ((1 + 0.001 Rg) B0) in eq. 20, as the paper prescribes.
pub fn live_oil(api: f64, gas_gravity: f64, rs: f64, t: f64, p: f64) -> FluidProps {
    let rho0 = api_to_density_gcc(api);
    let b0 = oil_formation_volume_factor(api, gas_gravity, rs, t);
    let rho_g = (rho0 + 0.0012 * gas_gravity * rs) / b0;
    let rho_pseudo = rho0 / ((1.0 + 0.001 * rs) * b0);
    FluidProps::from_rho_v(rho_g * 1000.0, oil_velocity(rho_pseudo, t, p))
}
