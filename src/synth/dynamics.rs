//! Reservoir dynamics between the base survey (t = 0, before production) and each monitor:
//! pressure, water saturation and gas saturation, cumulative from the base.
//!
//! - Pressure: superposition in space and time of the line-source solution of radial diffusion
//!   (Theis 1935; Matthews & Russell 1967, Pressure Buildup and Flow Tests in Wells, ch. 2),
//!   dP(r, t) = +-(q mu / (4 pi k h)) E1(phi mu c_t r^2 / (4 k t)), one term per well from its start.
//!   A sealing fault is a no-flow boundary: each well has an image well mirrored across the fault in
//!   its own compartment, and the other compartment does not feel it (method of images, Matthews &
//!   Russell 1967, ch. 10). Near a well the radius is floored at Peaceman's (1978) equivalent radius
//!   0.2 dx of a grid block.
//! - Water: a front grows around each injector with area V_inj / (h phi dS_avg), dS_avg the mean
//!   saturation gain behind the front (a Buckley-Leverett-like ramp from 1 - Sor at the well to 75 %
//!   of that at the front), with a smooth edge; distances are shortened where the sand flows better,
//!   which makes the fronts irregular. The oil-water contact rises by a fixed rate (aquifer influx),
//!   sweeping the sand to residual oil below the new contact.
//! - Gas: below the bubble point the oil releases gas; the gas saturation grows with the pressure
//!   shortfall, Sg = Sg_max (1 - exp(-(Pb - P)/P_s)) in proportion to the oil present, and
//!   redissolves if the pressure recovers (no hysteresis). The dissolved gas-oil ratio of the
//!   remaining oil falls in proportion to P/Pb (a linear simplification of Standing's correlation).
//! - Compaction: uniaxial, dh/h = C_m dP.
//! - The drained culmination (setting `gas_cap`, off by default): a small culmination sealed from
//!   the rest of its compartment is drained from beyond the survey, so no well in the field sees
//!   its history. Its pressure follows a closed-tank decline, dP_c(t) = -D (1 - exp(-t / tau))
//!   (material balance of a bounded volume produced at a rate proportional to its pressure
//!   excess, the exponential decline of Arps 1945 / Fetkovich 1971). A node of weight w in the
//!   culmination takes (1 - w) times the wells' pressure change plus w dP_c. Once the pressure
//!   falls below the bubble point, the released gas (the same law as everywhere) rises: a share
//!   w of it gathers at the top of the oil leg as a cap at saturation 1 - Sw - Sor, the rest stays
//!   dispersed. Gas is conserved, so the mean saturations (the truth) are the same as without
//!   segregation; only the layering, and with it the seismic response, differs.

use super::reservoir::Reservoir;
use super::rock::Saturation;
use super::settings::SynthSettings;
use super::wells::{PlacedWell, WellKind};

const SECONDS_PER_YEAR: f64 = 365.25 * 86400.0;
const MILLIDARCY: f64 = 9.869233e-16;
const G: f64 = 9.80665;

/// Exponential integral E1(x) = integral from x to infinity of exp(-u)/u du, for x > 0: power
/// series below 1, continued fraction (modified Lentz) above (Press et al., Numerical Recipes,
/// 3rd ed., section 6.3). Returns infinity for x <= 0.
pub fn exp_integral_e1(x: f64) -> f64 {
    const EULER: f64 = 0.577_215_664_901_532_9;
    if x <= 0.0 {
        return f64::INFINITY;
    }
    if x < 1.0 {
        let mut sum = 0.0;
        let mut term = 1.0;
        for k in 1..60 {
            term *= -x / k as f64;
            let add = -term / k as f64;
            sum += add;
            if add.abs() < 1e-17 * sum.abs().max(1e-300) {
                break;
            }
        }
        -EULER - x.ln() + sum
    } else {
        let mut b = x + 1.0;
        let mut c = 1.0 / 1e-300;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..200 {
            let an = -((i * i) as f64);
            b += 2.0;
            d = 1.0 / (an * d + b);
            c = b + an / c;
            let del = c * d;
            h *= del;
            if (del - 1.0).abs() < 1e-16 {
                break;
            }
        }
        h * (-x).exp()
    }
}

/// Initial conditions at every node (at the top of the upper sand).
#[derive(Clone, Debug)]
pub struct Conditions {
    /// Initial pore pressure, MPa.
    pub p0: Vec<f64>,
    /// Temperature, C.
    pub temperature: Vec<f64>,
    /// Vertical (overburden) stress, MPa.
    pub sv: Vec<f64>,
    /// Bubble-point pressure of the oil, MPa (one oil across the field).
    pub bubble_point: f64,
}

impl Conditions {
    /// Hydrostatic brine pressure below the contact and an oil gradient above it; the bubble point
    /// lies `bubble_point_margin` below the lowest initial pressure of the oil leg.
    pub fn build(res: &Reservoir, s: &SynthSettings, oil_density: f64) -> Conditions {
        let n = res.len();
        let brine_grad = s.brine_density * G * 1e-6; // MPa/m
        let oil_grad = oil_density * G * 1e-6;
        let mut p0 = vec![0.0; n];
        let mut temperature = vec![0.0; n];
        let mut sv = vec![0.0; n];
        let mut p_min_oil = f64::INFINITY;
        for i in 0..n {
            let z = res.sands[0].top[i];
            let owc = res.owc[res.compartment[i]];
            let p_owc = 0.101325 + s.overpressure + brine_grad * owc;
            p0[i] = if z < owc {
                p_owc - oil_grad * (owc - z)
            } else {
                p_owc + brine_grad * (z - owc)
            };
            if z < owc {
                p_min_oil = p_min_oil.min(p0[i]);
            }
            temperature[i] = s.surface_temperature + s.temperature_gradient * z;
            sv[i] = s.overburden_density * G * 1e-6 * z;
        }
        if !p_min_oil.is_finite() {
            p_min_oil = p0.iter().cloned().fold(f64::INFINITY, f64::min);
        }
        Conditions {
            p0,
            temperature,
            sv,
            bubble_point: p_min_oil - s.bubble_point_margin,
        }
    }
}

/// Saturation state of one part of a sand at a node.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SubLayer {
    /// Thickness (after compaction), m.
    pub thickness: f64,
    /// Saturations.
    pub sat: Saturation,
}

/// The state of a node at one time.
#[derive(Clone, Debug, PartialEq)]
pub struct NodeState {
    /// Pore pressure, MPa.
    pub p: f64,
    /// Pressure change from the base, MPa.
    pub dp: f64,
    /// Dissolved gas-oil ratio of the oil, L/L.
    pub rs: f64,
    /// Parts of each sand, top to bottom (oil leg, aquifer-swept, water leg; empty parts left out).
    pub sands: Vec<Vec<SubLayer>>,
}

impl NodeState {
    /// Thickness-weighted mean water and gas saturation over all sands.
    pub fn mean_saturation(&self) -> (f64, f64) {
        let (mut h, mut sw, mut sg) = (0.0, 0.0, 0.0);
        for sub in self.sands.iter().flatten() {
            h += sub.thickness;
            sw += sub.thickness * sub.sat.sw;
            sg += sub.thickness * sub.sat.sg;
        }
        if h > 0.0 {
            (sw / h, sg / h)
        } else {
            (0.0, 0.0)
        }
    }
}

/// Flow parameters of one compartment for the line-source solution.
#[derive(Clone, Copy, Debug)]
struct Compartment {
    /// q mu / (4 pi k h) per m3/s of rate, MPa.
    amplitude: f64,
    /// phi mu c_t / (4 k), s/m2.
    diffusion: f64,
}

/// The dynamic model of a field.
#[derive(Clone, Debug)]
pub struct Dynamics {
    comps: [Compartment; 2],
    r_min: f64,
    /// Long-time pressure drop (MPa) and decline time constant (years) of the drained
    /// culmination, when the field has one.
    cap_decline: Option<(f64, f64)>,
}

impl Dynamics {
    /// Hydraulic diffusivity k / (phi mu c_t) of compartment `c`, m2/s.
    pub fn diffusivity(&self, c: usize) -> f64 {
        1.0 / (4.0 * self.comps[c].diffusion)
    }
}

impl Dynamics {
    /// Flow parameters from the static model: per compartment, the mean net thickness and porosity.
    pub fn new(res: &Reservoir, s: &SynthSettings) -> Dynamics {
        let mu = s.viscosity_cp * 1e-3;
        let k = s.permeability_md * MILLIDARCY;
        let ct = s.total_compressibility * 1e-6;
        let mut comps = [Compartment {
            amplitude: 0.0,
            diffusion: 0.0,
        }; 2];
        for (c, comp) in comps.iter_mut().enumerate() {
            let (mut h, mut ph, mut count) = (0.0, 0.0, 0.0);
            for i in (0..res.len()).filter(|&i| res.compartment[i] == c) {
                let hi = res.net_thickness(i);
                h += hi;
                ph += res
                    .sands
                    .iter()
                    .map(|sd| sd.thickness[i] * sd.porosity[i])
                    .sum::<f64>();
                count += 1.0;
            }
            let h_mean = if count > 0.0 {
                (h / count).max(1.0)
            } else {
                1.0
            };
            let phi = if h > 0.0 { ph / h } else { s.porosity };
            comp.amplitude = mu / (4.0 * std::f64::consts::PI * k * h_mean) * 1e-6;
            comp.diffusion = phi * mu * ct / (4.0 * k);
        }
        Dynamics {
            comps,
            r_min: 0.2 * res.spacing,
            cap_decline: res
                .gas_cap
                .as_ref()
                .map(|_| (s.gas_cap_depletion, s.gas_cap_decline_years)),
        }
    }

    /// Pressure change (MPa) of the drained culmination at `t` years, `-D (1 - exp(-t / tau))`;
    /// 0 when the field has no culmination.
    pub fn cap_pressure(&self, t: f64) -> f64 {
        match self.cap_decline {
            Some((d, tau)) if t > 0.0 => -d * (1.0 - (-t / tau).exp()),
            _ => 0.0,
        }
    }

    /// Pressure change (MPa) at local point (x, y) in compartment `c` at `t` years, unclamped.
    pub fn pressure_at(
        &self,
        res: &Reservoir,
        wells: &[PlacedWell],
        x: f64,
        y: f64,
        c: usize,
        t: f64,
    ) -> f64 {
        let comp = self.comps[c];
        let mut dp = 0.0;
        for w in wells.iter().filter(|w| w.compartment == c && t > w.start) {
            let dt = (t - w.start) * SECONDS_PER_YEAR;
            let q = w.rate / 86400.0;
            let sign = match w.kind {
                WellKind::Producer => -1.0,
                WellKind::Injector => 1.0,
                WellKind::Observer => continue,
            };
            let mut add = |wx: f64, wy: f64| {
                let r = (x - wx).hypot(y - wy).max(self.r_min);
                dp += sign * q * comp.amplitude * exp_integral_e1(comp.diffusion * r * r / dt);
            };
            add(w.x, w.y);
            if let Some(f) = res.fault {
                let (ix, iy) = f.mirror(w.x, w.y);
                add(ix, iy);
            }
        }
        dp
    }

    /// Pressure change (MPa) at every node at `t` years, clamped so that the pore pressure stays
    /// between 15 % of its initial value and 2 MPa below the vertical stress.
    pub fn pressure_change(
        &self,
        res: &Reservoir,
        wells: &[PlacedWell],
        cond: &Conditions,
        t: f64,
    ) -> Vec<f64> {
        let cap = self.cap_pressure(t);
        (0..res.len())
            .map(|i| {
                let (x, y) = res.node_local(i);
                let mut dp = self.pressure_at(res, wells, x, y, res.compartment[i], t);
                if let Some(c) = &res.gas_cap {
                    let w = c.weight[i];
                    dp = (1.0 - w) * dp + w * cap;
                }
                let p0 = cond.p0[i];
                (p0 + dp).clamp(0.15 * p0, cond.sv[i] - 2.0) - p0
            })
            .collect()
    }
}

/// Fraction (0..1) of the maximum water-saturation gain behind the injector fronts in sand `k` at
/// every node, `t` years after the base.
pub fn water_fronts(
    res: &Reservoir,
    wells: &[PlacedWell],
    s: &SynthSettings,
    k: usize,
    t: f64,
) -> Vec<f64> {
    /// Mean of the ramp (1 - u/4) over a disc: 1 - (1/4)(2/3).
    const MEAN_GAIN: f64 = 1.0 - 0.25 * 2.0 / 3.0;
    const EDGE: f64 = 0.08;
    let mut out = vec![0.0; res.len()];
    // mean pore thickness (h phi, m) of each sand per compartment
    let mut mean_pore = [vec![0.0; res.sands.len()], vec![0.0; res.sands.len()]];
    let mut count = [0.0f64; 2];
    for i in 0..res.len() {
        let c = res.compartment[i];
        count[c] += 1.0;
        for (m, sd) in mean_pore[c].iter_mut().zip(&res.sands) {
            *m += sd.thickness[i] * sd.porosity[i];
        }
    }
    for c in 0..2 {
        mean_pore[c]
            .iter_mut()
            .for_each(|m| *m /= count[c].max(1.0));
    }
    for w in wells
        .iter()
        .filter(|w| w.kind == WellKind::Injector && t > w.start)
    {
        let iw = res.nearest(w.x, w.y);
        let sd = &res.sands[k];
        let total: f64 = mean_pore[w.compartment].iter().sum();
        if total <= 0.0 || sd.thickness[iw] < 0.5 {
            continue;
        }
        // the water spreads through the sands in proportion to their mean pore thickness around
        // the compartment (not the thickness at the well, which may be a thin edge)
        let volume = w.rate * (t - w.start) * 365.25 * mean_pore[w.compartment][k] / total;
        let gain = (1.0 - s.sor - sd.swi[iw]).max(0.05);
        let area = volume / (mean_pore[w.compartment][k] * gain * MEAN_GAIN);
        let r_front = (area / std::f64::consts::PI).sqrt();
        for (i, o) in out.iter_mut().enumerate() {
            if res.compartment[i] != w.compartment {
                continue;
            }
            let (x, y) = res.node_local(i);
            let d = (x - w.x).hypot(y - w.y) / sd.flow[i];
            let u = d / r_front;
            if u > 2.0 {
                continue;
            }
            let ramp = 1.0 - 0.25 * u.min(1.0);
            let edge = 1.0 / (1.0 + ((u - 1.0) / EDGE).exp());
            *o += ramp * edge;
        }
    }
    out.iter_mut().for_each(|v| *v = v.min(1.0));
    out
}

/// Fraction (0..1) of the maximum water-saturation gain swept by the lobe's own aquifer at every
/// node, `t` years after the base: a front enters the lobe from its far side (away from the crest)
/// and advances at `lobe_aquifer_rate` m/year, with a smooth edge; outside the lobe it is 0.
pub fn lobe_sweep(res: &Reservoir, s: &SynthSettings, t: f64) -> Vec<f64> {
    let (lx, ly) = res.lobe_centre;
    let (cx, cy) = res.crest;
    let len = (lx - cx).hypot(ly - cy);
    let (ux, uy) = if len > 0.0 {
        ((lx - cx) / len, (ly - cy) / len)
    } else {
        (-1.0, 0.0)
    };
    // the front starts at the far edge of the lobe and moves towards the crest
    let (ex, ey) = (
        lx + 1.2 * res.lobe_radius * ux,
        ly + 1.2 * res.lobe_radius * uy,
    );
    if s.lobe_aquifer_rate <= 0.0 || t <= 0.0 {
        return vec![0.0; res.len()];
    }
    let travel = s.lobe_aquifer_rate * t;
    let edge = (0.1 * res.lobe_radius).max(res.spacing);
    (0..res.len())
        .map(|i| {
            if res.lobe[i] < 1e-3 {
                return 0.0;
            }
            let (x, y) = res.node_local(i);
            let d = (ex - x) * ux + (ey - y) * uy;
            res.lobe[i] / (1.0 + ((d - travel) / edge).exp())
        })
        .collect()
}

/// Gas saturation released from an oil at its initial saturation when the pressure is `p` and the
/// bubble point `pb` (MPa).
pub fn released_gas(p: f64, pb: f64, s: &SynthSettings) -> f64 {
    if p >= pb {
        0.0
    } else {
        s.gas_max * (1.0 - (-(pb - p) / s.gas_pressure_scale).exp())
    }
}

/// Dissolved gas-oil ratio (L/L) at pressure `p`: the initial ratio above the bubble point,
/// falling in proportion to p/pb below it.
pub fn solution_gor(p: f64, pb: f64, s: &SynthSettings) -> f64 {
    if p >= pb {
        s.gor
    } else {
        s.gor * (p / pb).max(0.0)
    }
}

/// State of node `i` at `t` years given its pressure change `dp` (MPa) and the swept fraction of
/// each sand `fronts[k]` at that node.
pub fn node_state(
    res: &Reservoir,
    cond: &Conditions,
    s: &SynthSettings,
    i: usize,
    t: f64,
    dp: f64,
    fronts: &[f64],
) -> NodeState {
    let p = cond.p0[i] + dp;
    let pb = cond.bubble_point;
    let gas = released_gas(p, pb, s);
    let owc = res.owc[res.compartment[i]];
    let owc_t = owc - s.aquifer_rise * t;
    let squeeze = (1.0 + s.compaction_coefficient * dp).max(0.5);
    // share of the released gas that rises into a cap (only in the drained culmination)
    let segregated = res.gas_cap.as_ref().map_or(0.0, |c| c.weight[i]);
    let sands = res
        .sands
        .iter()
        .enumerate()
        .map(|(k, sd)| {
            let (top, h) = (sd.top[i], sd.thickness[i]);
            let swi = sd.swi[i];
            let h_oil = (owc_t - top).clamp(0.0, h);
            let h_swept = (owc - top).clamp(0.0, h) - h_oil;
            let h_water = h - h_oil - h_swept;
            let with_gas = |sw: f64| {
                let so = 1.0 - sw;
                let sg = gas * so / (1.0 - swi);
                Saturation {
                    sw,
                    so: so - sg,
                    sg,
                }
            };
            let mut parts = Vec::with_capacity(3);
            if h_oil > 1e-6 {
                let sw = swi + (1.0 - s.sor - swi).max(0.0) * fronts[k];
                let dispersed = with_gas(sw);
                let cap_sg = 1.0 - sw - s.sor;
                if segregated > 0.0 && dispersed.sg > 0.0 && cap_sg > dispersed.sg {
                    // gas volume per unit area, h_oil sg, split between a cap at cap_sg and the
                    // oil below it
                    let h_cap = segregated * h_oil * dispersed.sg / cap_sg;
                    let h_rest = h_oil - h_cap;
                    let sg_rest = (1.0 - segregated) * h_oil * dispersed.sg / h_rest;
                    parts.push(SubLayer {
                        thickness: h_cap * squeeze,
                        sat: Saturation {
                            sw,
                            so: s.sor,
                            sg: cap_sg,
                        },
                    });
                    parts.push(SubLayer {
                        thickness: h_rest * squeeze,
                        sat: Saturation {
                            sw,
                            so: 1.0 - sw - sg_rest,
                            sg: sg_rest,
                        },
                    });
                } else {
                    parts.push(SubLayer {
                        thickness: h_oil * squeeze,
                        sat: dispersed,
                    });
                }
            }
            if h_swept > 1e-6 {
                parts.push(SubLayer {
                    thickness: h_swept * squeeze,
                    sat: with_gas(1.0 - s.sor),
                });
            }
            if h_water > 1e-6 {
                parts.push(SubLayer {
                    thickness: h_water * squeeze,
                    sat: Saturation {
                        sw: 1.0,
                        so: 0.0,
                        sg: 0.0,
                    },
                });
            }
            parts
        })
        .collect();
    NodeState {
        p,
        dp,
        rs: solution_gor(p, pb, s),
        sands,
    }
}
