//! Forward modelling of one node: from the reservoir state to elastic layers, angle-stack
//! reflectivity and noise-free traces aligned on the top of the reservoir.
//!
//! The column at a node is cap shale / sand parts / interbed shale / sand parts / base shale. Shale
//! velocities follow a compaction trend; shear velocity and density come from the Castagna et al.
//! (1985) mudrock line and Gardner et al. (1974). Sand parts get their elastic properties from
//! Batzle & Wang fluids at the node's pressure and temperature, the MacBeth dry frame at the
//! effective stress and Gassmann ([`super::rock`]). A constant ray parameter fixed by each stack's
//! angles in the cap shale gives the incidence angle at every interface; each stack averages the
//! reflectivity of three angles spread over its range. Traces are aligned on the top of the
//! reservoir (the overburden time shift removed, as in a warped monitor), so that amplitude windows
//! compare like with like.

use super::dynamics::NodeState;
use super::fluids::{self, FluidProps};
use super::model::SynthModel;
use super::rock::{self, Elastic, Saturation};
use super::seismic::{self, Spike};

/// A layer of the 1-D column.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Layer {
    /// Thickness, m (ignored for the first layer, a half-space above).
    pub thickness: f64,
    /// Elastic properties.
    pub elastic: Elastic,
    /// True for reservoir sand, false for shale.
    pub sand: bool,
}

/// Fluid phases at one node and time.
#[derive(Clone, Copy, Debug)]
pub struct NodeFluids {
    /// Brine.
    pub brine: FluidProps,
    /// Live oil.
    pub oil: FluidProps,
    /// Free gas.
    pub gas: FluidProps,
}

impl SynthModel {
    /// Fluid phases at node `i` at pore pressure `p` (MPa) with dissolved gas-oil ratio `rs`.
    pub fn fluids(&self, i: usize, p: f64, rs: f64) -> NodeFluids {
        let s = &self.settings;
        let t = self.conditions.temperature[i];
        NodeFluids {
            brine: fluids::brine(t, p, s.salinity),
            oil: fluids::live_oil(s.api, s.gas_gravity, rs, t, p),
            gas: fluids::gas(s.gas_gravity, t, p),
        }
    }

    /// Elastic properties of sand `k` at node `i` at pore pressure `p` (MPa) with saturations
    /// `sat` and dissolved gas-oil ratio `rs` (L/L).
    pub fn sand_elastic(&self, i: usize, k: usize, p: f64, rs: f64, sat: Saturation) -> Elastic {
        let f = self.fluids(i, p, rs);
        self.sand_elastic_with(i, k, p, sat, &f)
    }

    fn sand_elastic_with(
        &self,
        i: usize,
        k: usize,
        p: f64,
        sat: Saturation,
        f: &NodeFluids,
    ) -> Elastic {
        let s = &self.settings;
        let sd = &self.reservoir.sands[k];
        let phi = sd.porosity[i];
        let mineral = rock::quartz_clay(sd.vclay[i]);
        let peff = self.conditions.sv[i] - p;
        let (kdry, mudry) = s.frame.dry_moduli(phi, peff);
        let (kfl, rhofl) = rock::mix_fluids(sat, f.brine, f.oil, f.gas, s.mixing, s.brie_exponent);
        rock::saturated(mineral, phi, kdry, mudry, kfl, rhofl)
    }

    /// Shale above the reservoir (0), between sands (1) and below (2) at node `i`.
    pub fn shale(&self, i: usize, which: usize) -> Elastic {
        let vp = self.reservoir.shale_vp[i] + [0.0, 60.0, 150.0][which.min(2)];
        Elastic {
            vp,
            vs: rock::mudrock_vs(vp),
            rho: rock::gardner_density(vp),
        }
    }

    /// The elastic column at node `i` in state `state`, cap shale first.
    pub fn column(&self, i: usize, state: &NodeState) -> Vec<Layer> {
        let f = self.fluids(i, state.p, state.rs);
        let mut layers = vec![Layer {
            thickness: 0.0,
            elastic: self.shale(i, 0),
            sand: false,
        }];
        let nsand = state.sands.len();
        for (k, parts) in state.sands.iter().enumerate() {
            for part in parts {
                layers.push(Layer {
                    thickness: part.thickness,
                    elastic: self.sand_elastic_with(i, k, state.p, part.sat, &f),
                    sand: true,
                });
            }
            if k + 1 < nsand {
                layers.push(Layer {
                    thickness: self.reservoir.interbed[k][i],
                    elastic: self.shale(i, 1),
                    sand: false,
                });
            }
        }
        layers.push(Layer {
            thickness: 0.0,
            elastic: self.shale(i, 2),
            sand: false,
        });
        layers
    }

    /// Angles (degrees, in the cap shale) averaged into each stack: three per stack, at 1/6, 1/2
    /// and 5/6 of its range.
    pub fn stack_angles(&self) -> Vec<[f64; 3]> {
        self.settings
            .angle_stacks
            .iter()
            .map(|[a, b]| {
                let w = b - a;
                [a + w / 6.0, a + w / 2.0, a + 5.0 * w / 6.0]
            })
            .collect()
    }

    /// Mean angle of each stack, degrees.
    pub fn stack_centres(&self) -> Vec<f64> {
        self.settings
            .angle_stacks
            .iter()
            .map(|[a, b]| 0.5 * (a + b))
            .collect()
    }
}

/// Two-way time (s) from the top of the first sand layer to the bottom of the column's last
/// non-half-space layer (the reservoir interval, interbeds included).
pub fn interval_time(layers: &[Layer]) -> f64 {
    layers[1..layers.len() - 1]
        .iter()
        .map(|l| seismic::two_way_time(l.thickness, l.elastic.vp))
        .sum()
}

/// Reflectivity series of a column for one stack: spikes at every interface (time 0 at the first),
/// reflection coefficient averaged over `angles` (degrees in the first layer) with a constant ray
/// parameter.
pub fn stack_spikes(
    layers: &[Layer],
    angles: &[f64],
    method: seismic::ReflectivityMethod,
) -> Vec<Spike> {
    let vp0 = layers[0].elastic.vp;
    let rays: Vec<f64> = angles.iter().map(|a| a.to_radians().sin() / vp0).collect();
    let mut spikes = Vec::with_capacity(layers.len() - 1);
    let mut time = 0.0;
    for j in 0..layers.len() - 1 {
        if j > 0 {
            time += seismic::two_way_time(layers[j].thickness, layers[j].elastic.vp);
        }
        let (up, low) = (layers[j].elastic, layers[j + 1].elastic);
        if up == low {
            continue;
        }
        let r = rays
            .iter()
            .map(|p| {
                let s = (p * up.vp).min(0.9999);
                seismic::rpp(method, up, low, s.asin().to_degrees())
            })
            .sum::<f64>()
            / rays.len() as f64;
        spikes.push(Spike { time, r });
    }
    spikes
}
