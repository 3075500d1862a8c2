//! Rock physics: mineral mixing, the dry frame and its stress sensitivity, fluid mixing and Gassmann
//! fluid substitution.
//!
//! - Voigt-Reuss-Hill averages (Hill 1952) and Hashin-Shtrikman bounds (Hashin & Shtrikman 1963, in
//!   the general form of Berryman 1995) for the mineral mix.
//! - Fluid mixing: Wood (1955), the Reuss average of the phases (uniform saturation), and Brie et al.
//!   (1995) for a patchier liquid-gas mix.
//! - Gassmann (1951) fluid substitution, moduli in GPa.
//! - Dry frame: the stress law of MacBeth (2004), "A classification for the pressure-sensitivity
//!   properties of a sandstone rock frame", Geophysics 69(2), M = M_inf / (1 + E exp(-P/P_M)),
//!   E = S/(1-S); Hertz-Mindlin contact theory (Mindlin 1949) and the soft-sand model of Dvorkin &
//!   Nur (1996) are provided as alternatives and for checks.
//! - Shale trends: Gardner et al. (1974) density and the Castagna et al. (1985) mudrock line.
//!
//! Units: moduli GPa, densities kg/m3, velocities m/s, pressures MPa.

use super::fluids::FluidProps;
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Velocities and density of one rock (or layer).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Elastic {
    /// P-wave velocity, m/s.
    pub vp: f64,
    /// S-wave velocity, m/s.
    pub vs: f64,
    /// Density, kg/m3.
    pub rho: f64,
}

impl Elastic {
    /// Velocities from bulk and shear moduli (GPa) and density (kg/m3).
    pub fn from_moduli(k: f64, mu: f64, rho: f64) -> Self {
        Elastic {
            vp: ((k + 4.0 / 3.0 * mu) * 1e9 / rho).sqrt(),
            vs: (mu * 1e9 / rho).sqrt(),
            rho,
        }
    }

    /// Bulk modulus, GPa.
    pub fn k(&self) -> f64 {
        self.rho * (self.vp * self.vp - 4.0 / 3.0 * self.vs * self.vs) * 1e-9
    }

    /// Shear modulus, GPa.
    pub fn mu(&self) -> f64 {
        self.rho * self.vs * self.vs * 1e-9
    }

    /// Acoustic (P) impedance, kg/(m2 s).
    pub fn impedance(&self) -> f64 {
        self.rho * self.vp
    }
}

/// Voigt average (upper bound) of moduli `m` with volume fractions `f`.
pub fn voigt(f: &[f64], m: &[f64]) -> f64 {
    f.iter().zip(m).map(|(f, m)| f * m).sum()
}

/// Reuss average (lower bound) of moduli `m` with volume fractions `f`.
pub fn reuss(f: &[f64], m: &[f64]) -> f64 {
    1.0 / f.iter().zip(m).map(|(f, m)| f / m).sum::<f64>()
}

/// Voigt-Reuss-Hill average: the mean of the Voigt and Reuss averages.
pub fn hill(f: &[f64], m: &[f64]) -> f64 {
    0.5 * (voigt(f, m) + reuss(f, m))
}

/// Hashin-Shtrikman bounds `(k_lower, k_upper, mu_lower, mu_upper)` of a mix of minerals with
/// volume fractions `f`, bulk moduli `k` and shear moduli `mu` (general form, Berryman 1995).
pub fn hashin_shtrikman(f: &[f64], k: &[f64], mu: &[f64]) -> (f64, f64, f64, f64) {
    let lambda = |z: f64| {
        1.0 / f
            .iter()
            .zip(k)
            .map(|(f, k)| f / (k + 4.0 / 3.0 * z))
            .sum::<f64>()
            - 4.0 / 3.0 * z
    };
    let gamma = |z: f64| 1.0 / f.iter().zip(mu).map(|(f, m)| f / (m + z)).sum::<f64>() - z;
    let zeta = |k: f64, m: f64| m / 6.0 * (9.0 * k + 8.0 * m) / (k + 2.0 * m);
    let kmax = k.iter().cloned().fold(f64::MIN, f64::max);
    let kmin = k.iter().cloned().fold(f64::MAX, f64::min);
    let mmax = mu.iter().cloned().fold(f64::MIN, f64::max);
    let mmin = mu.iter().cloned().fold(f64::MAX, f64::min);
    (
        lambda(mmin),
        lambda(mmax),
        gamma(zeta(kmin, mmin)),
        gamma(zeta(kmax, mmax)),
    )
}

/// Wood's (1955) bulk modulus of a fluid mix: the Reuss average of the phase moduli weighted by
/// saturation.
pub fn wood(saturations: &[f64], moduli: &[f64]) -> f64 {
    reuss(saturations, moduli)
}

/// Brie et al. (1995) bulk modulus of a liquid-gas mix: (K_liquid - K_gas)(1 - S_gas)^e + K_gas.
pub fn brie(k_liquid: f64, k_gas: f64, s_gas: f64, exponent: f64) -> f64 {
    (k_liquid - k_gas) * (1.0 - s_gas).powf(exponent) + k_gas
}

/// How the pore-fluid phases are mixed into one effective fluid.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Mixing {
    /// Wood (Reuss) average of all phases: uniform saturation.
    Wood,
    /// Wood for brine and oil, then Brie et al. (1995) with the gas.
    Brie,
}

/// Saturations (fractions of pore volume, summing to 1) of brine, oil and gas.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Saturation {
    /// Water (brine) saturation.
    pub sw: f64,
    /// Oil saturation.
    pub so: f64,
    /// Gas saturation.
    pub sg: f64,
}

/// Effective bulk modulus (GPa) and density (kg/m3) of a brine-oil-gas mix.
pub fn mix_fluids(
    s: Saturation,
    brine: FluidProps,
    oil: FluidProps,
    gas: FluidProps,
    mixing: Mixing,
    brie_exponent: f64,
) -> (f64, f64) {
    let rho = s.sw * brine.rho + s.so * oil.rho + s.sg * gas.rho;
    let k = match mixing {
        Mixing::Wood => wood(&[s.sw, s.so, s.sg], &[brine.k, oil.k, gas.k]),
        Mixing::Brie => {
            let liquid = s.sw + s.so;
            let k_liquid = if liquid > 0.0 {
                wood(&[s.sw / liquid, s.so / liquid], &[brine.k, oil.k])
            } else {
                brine.k
            };
            brie(k_liquid, gas.k, s.sg, brie_exponent)
        }
    };
    (k, rho)
}

/// Gassmann (1951): saturated bulk modulus from the dry-frame modulus `kdry`, mineral modulus `k0`,
/// fluid modulus `kfl` and porosity `phi` (GPa). The shear modulus is unchanged by the fluid.
pub fn gassmann_ksat(kdry: f64, k0: f64, kfl: f64, phi: f64) -> f64 {
    let b = 1.0 - kdry / k0;
    kdry + b * b / (phi / kfl + (1.0 - phi) / k0 - kdry / (k0 * k0))
}

/// Inverse Gassmann: dry-frame bulk modulus from a saturated modulus `ksat` with fluid `kfl`.
pub fn gassmann_kdry(ksat: f64, k0: f64, kfl: f64, phi: f64) -> f64 {
    let a = phi * k0 / kfl;
    (ksat * (a + 1.0 - phi) - k0) / (a + ksat / k0 - 1.0 - phi)
}

/// Gassmann fluid substitution of a rock `rock` (porosity `phi`, mineral modulus `k0`) from fluid 1
/// (modulus GPa, density kg/m3) to fluid 2. Density changes by phi (rho2 - rho1).
pub fn fluid_substitute(
    rock: Elastic,
    phi: f64,
    k0: f64,
    fluid1: (f64, f64),
    fluid2: (f64, f64),
) -> Elastic {
    let kdry = gassmann_kdry(rock.k(), k0, fluid1.0, phi);
    let k2 = gassmann_ksat(kdry, k0, fluid2.0, phi);
    let rho2 = rock.rho + phi * (fluid2.1 - fluid1.1);
    Elastic::from_moduli(k2, rock.mu(), rho2)
}

/// Poisson's ratio from bulk and shear moduli.
pub fn poisson(k: f64, mu: f64) -> f64 {
    (3.0 * k - 2.0 * mu) / (2.0 * (3.0 * k + mu))
}

/// Hertz-Mindlin moduli `(k, mu)` (GPa) of a random pack of identical spheres of mineral moduli
/// `k0`, `mu0` at porosity `phic`, coordination number `n`, effective pressure `p` (MPa) and
/// fraction `f` of grain contacts without slip (Mindlin 1949; Mavko et al., The Rock Physics
/// Handbook, 2009, section 5.5).
pub fn hertz_mindlin(k0: f64, mu0: f64, phic: f64, n: f64, p: f64, f: f64) -> (f64, f64) {
    let p = p / 1000.0; // MPa -> GPa
    let nu = poisson(k0, mu0);
    let c = n * n * (1.0 - phic).powi(2) * mu0 * mu0 * p / (PI * PI * (1.0 - nu).powi(2));
    let k = (c / 18.0).cbrt();
    let mu = (2.0 + 3.0 * f - nu * (1.0 + 3.0 * f)) / (5.0 * (2.0 - nu)) * (1.5 * c).cbrt();
    (k, mu)
}

/// Soft-sand (friable sand) dry moduli (Dvorkin & Nur 1996): the modified Hashin-Shtrikman lower
/// bound between the Hertz-Mindlin pack at `phic` and the mineral at zero porosity.
pub fn soft_sand(k0: f64, mu0: f64, phi: f64, phic: f64, n: f64, p: f64, f: f64) -> (f64, f64) {
    let (khm, muhm) = hertz_mindlin(k0, mu0, phic, n, p, f);
    let a = phi / phic;
    let k = 1.0 / (a / (khm + 4.0 / 3.0 * muhm) + (1.0 - a) / (k0 + 4.0 / 3.0 * muhm))
        - 4.0 / 3.0 * muhm;
    let xi = muhm / 6.0 * (9.0 * khm + 8.0 * muhm) / (khm + 2.0 * muhm);
    let mu = 1.0 / (a / (muhm + xi) + (1.0 - a) / (mu0 + xi)) - xi;
    (k, mu)
}

/// MacBeth (2004) stress law: modulus at effective pressure `p` (MPa) given the high-pressure limit
/// `m_inf`, stress sensitivity `s` (0 <= s < 1) and characteristic pressure `p_m` (MPa).
/// M(0) = m_inf (1 - s); M -> m_inf as p grows.
pub fn macbeth(m_inf: f64, s: f64, p_m: f64, p: f64) -> f64 {
    let e = s / (1.0 - s);
    m_inf / (1.0 + e * (-p / p_m).exp())
}

/// Parameters of the stress-sensitive dry frame used by the generator.
///
/// The MacBeth (2004) law gives the pressure dependence; the high-pressure moduli scale with porosity
/// by the critical-porosity factor (1 - phi/phic) of Nur et al. (1998), normalised to 1 at `phi_ref`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct FrameParams {
    /// High-pressure dry bulk modulus at `phi_ref`, GPa.
    pub k_inf: f64,
    /// High-pressure dry shear modulus at `phi_ref`, GPa.
    pub mu_inf: f64,
    /// Characteristic pressure of the bulk modulus, MPa.
    pub p_k: f64,
    /// Characteristic pressure of the shear modulus, MPa.
    pub p_mu: f64,
    /// Stress sensitivity of the bulk modulus, in [0, 1).
    pub s_k: f64,
    /// Stress sensitivity of the shear modulus, in [0, 1).
    pub s_mu: f64,
    /// Porosity at which `k_inf` and `mu_inf` apply.
    pub phi_ref: f64,
    /// Critical porosity (the frame loses its stiffness there).
    pub phi_c: f64,
}

impl Default for FrameParams {
    /// MacBeth (2004) parameters as used by digirock's `dryframe_stress` example (K_inf 9.15, mu_inf
    /// 7.75 GPa, P_K 7.12, P_mu 6.78 MPa, S_K 0.65, S_mu 0.67) for a 25 % porosity sand; critical
    /// porosity 0.40.
    fn default() -> Self {
        FrameParams {
            k_inf: 9.15,
            mu_inf: 7.75,
            p_k: 7.12,
            p_mu: 6.78,
            s_k: 0.65,
            s_mu: 0.67,
            phi_ref: 0.25,
            phi_c: 0.40,
        }
    }
}

impl FrameParams {
    /// Dry-frame `(k, mu)` (GPa) at porosity `phi` and effective (differential) pressure `p` (MPa).
    pub fn dry_moduli(&self, phi: f64, p: f64) -> (f64, f64) {
        let scale = ((1.0 - phi / self.phi_c) / (1.0 - self.phi_ref / self.phi_c)).max(0.02);
        let p = p.max(0.0);
        (
            macbeth(self.k_inf * scale, self.s_k, self.p_k, p),
            macbeth(self.mu_inf * scale, self.s_mu, self.p_mu, p),
        )
    }
}

/// Mineral moduli and density of a quartz-clay mix (Voigt-Reuss-Hill; density by volume).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Mineral {
    /// Bulk modulus, GPa.
    pub k: f64,
    /// Shear modulus, GPa.
    pub mu: f64,
    /// Density, kg/m3.
    pub rho: f64,
}

/// Quartz (K 36.6, mu 45 GPa, 2650 kg/m3) and clay (K 21, mu 7 GPa, 2580 kg/m3) mixed by
/// Voigt-Reuss-Hill with clay volume fraction `vclay` (moduli from Mavko et al. 2009, Table 7.1).
pub fn quartz_clay(vclay: f64) -> Mineral {
    let f = [1.0 - vclay, vclay];
    Mineral {
        k: hill(&f, &[36.6, 21.0]),
        mu: hill(&f, &[45.0, 7.0]),
        rho: voigt(&f, &[2650.0, 2580.0]),
    }
}

/// Velocities and density of a sand of porosity `phi` with dry frame `(kdry, mudry)` filled with a
/// fluid of modulus `kfl` (GPa) and density `rho_fl` (kg/m3), by Gassmann.
pub fn saturated(
    mineral: Mineral,
    phi: f64,
    kdry: f64,
    mudry: f64,
    kfl: f64,
    rho_fl: f64,
) -> Elastic {
    let k = gassmann_ksat(kdry, mineral.k, kfl, phi);
    let rho = (1.0 - phi) * mineral.rho + phi * rho_fl;
    Elastic::from_moduli(k, mudry, rho)
}

/// Gardner et al. (1974) density (kg/m3) from P velocity (m/s): rho = 0.31 V^0.25 g/cm3.
pub fn gardner_density(vp: f64) -> f64 {
    310.0 * vp.powf(0.25)
}

/// Castagna et al. (1985) mudrock line: Vs = (Vp - 1360) / 1.16 (m/s).
pub fn mudrock_vs(vp: f64) -> f64 {
    (vp - 1360.0) / 1.16
}
