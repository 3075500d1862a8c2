//! The static and dynamic model of a field before any seismic: reservoir, wells, initial
//! conditions and the states of every node at a given time.

use super::dynamics::{self, Conditions, Dynamics, NodeState};
use super::fluids;
use super::reservoir::Reservoir;
use super::settings::{SynthError, SynthSettings};
use super::wells::{self, PlacedWell};
use crate::grid::Grid;
use rayon::prelude::*;

/// The static and dynamic model of a field, before any seismic: what the tests of the physics
/// look into.
#[derive(Clone, Debug)]
pub struct SynthModel {
    /// The settings it was built from.
    pub settings: SynthSettings,
    /// The map grid (world coordinates of the nodes).
    pub grid: Grid,
    /// Structure, sands, fault, lobe.
    pub reservoir: Reservoir,
    /// The wells, in local coordinates.
    pub wells: Vec<PlacedWell>,
    /// Initial pressure, temperature, stress, bubble point.
    pub conditions: Conditions,
    /// Flow parameters for pressure diffusion.
    pub dynamics: Dynamics,
}

impl SynthModel {
    /// Builds the reservoir, places the wells and sets the initial conditions.
    pub fn build(settings: &SynthSettings) -> Result<SynthModel, SynthError> {
        settings.validate()?;
        let reservoir = Reservoir::build(settings);
        if let Some(c) = &reservoir.gas_cap {
            let inside: Vec<usize> = (0..reservoir.len())
                .filter(|&i| c.weight[i] >= 0.5)
                .collect();
            let oil = inside
                .iter()
                .filter(|&&i| reservoir.oil_column(0, i) > 0.0)
                .count();
            if inside.is_empty() || 2 * oil < inside.len() {
                return Err(SynthError::Setting {
                    key: "gas_cap_position",
                    value: format!("{:?}", settings.gas_cap_position),
                    reason: format!(
                        "the culmination must lie mostly in the oil leg so that it can release \
                         gas; {oil} of its {} nodes hold oil (move it up the structure or raise \
                         gas_cap_relief)",
                        inside.len()
                    ),
                });
            }
        }
        let wells = wells::place(&reservoir, settings)?;
        // oil density for the oil-leg pressure gradient, at crest conditions
        let t = settings.surface_temperature + settings.temperature_gradient * settings.crest_depth;
        let p = settings.brine_density * 9.80665e-6 * settings.crest_depth + settings.overpressure;
        let oil = fluids::live_oil(settings.api, settings.gas_gravity, settings.gor, t, p);
        let conditions = Conditions::build(&reservoir, settings, oil.rho);
        let dynamics = Dynamics::new(&reservoir, settings);
        Ok(SynthModel {
            settings: settings.clone(),
            grid: settings.grid(),
            reservoir,
            wells,
            conditions,
            dynamics,
        })
    }

    /// State of node `i` at the base survey (before production).
    pub fn base_state(&self, i: usize) -> NodeState {
        let fronts = vec![0.0; self.reservoir.sands.len()];
        dynamics::node_state(
            &self.reservoir,
            &self.conditions,
            &self.settings,
            i,
            0.0,
            0.0,
            &fronts,
        )
    }

    /// States of every node at `t` years: pressure from the wells, fronts, gas.
    pub fn states_at(&self, t: f64) -> Vec<NodeState> {
        let dp = self
            .dynamics
            .pressure_change(&self.reservoir, &self.wells, &self.conditions, t);
        let lobe = dynamics::lobe_sweep(&self.reservoir, &self.settings, t);
        let fronts: Vec<Vec<f64>> = (0..self.reservoir.sands.len())
            .map(|k| {
                let mut f =
                    dynamics::water_fronts(&self.reservoir, &self.wells, &self.settings, k, t);
                f.iter_mut()
                    .zip(&lobe)
                    .for_each(|(f, l)| *f = (*f + l).min(1.0));
                // the culmination is sealed: injected water does not enter it
                if let Some(c) = &self.reservoir.gas_cap {
                    f.iter_mut().zip(&c.weight).for_each(|(f, w)| *f *= 1.0 - w);
                }
                f
            })
            .collect();
        (0..self.reservoir.len())
            .into_par_iter()
            .map(|i| {
                let f: Vec<f64> = fronts.iter().map(|fr| fr[i]).collect();
                dynamics::node_state(
                    &self.reservoir,
                    &self.conditions,
                    &self.settings,
                    i,
                    t,
                    dp[i],
                    &f,
                )
            })
            .collect()
    }

    /// World coordinates of a local point (metres along the grid's x and y axes from node (0, 0)).
    pub fn world(&self, x: f64, y: f64) -> (f64, f64) {
        self.grid.fractional_xy(x / self.grid.dx, y / self.grid.dy)
    }

    /// Bilinear interpolation of a node map at a local point (clamped to the grid).
    pub fn bilinear_local(&self, map: &[f64], x: f64, y: f64) -> f64 {
        let res = &self.reservoir;
        let fi = (x / res.spacing).clamp(0.0, (res.nx - 1) as f64);
        let fj = (y / res.spacing).clamp(0.0, (res.ny - 1) as f64);
        let (i0, j0) = (
            (fi.floor() as usize).min(res.nx - 2),
            (fj.floor() as usize).min(res.ny - 2),
        );
        let (u, v) = (fi - i0 as f64, fj - j0 as f64);
        let at = |i: usize, j: usize| map[j * res.nx + i];
        (1.0 - u) * (1.0 - v) * at(i0, j0)
            + u * (1.0 - v) * at(i0 + 1, j0)
            + (1.0 - u) * v * at(i0, j0 + 1)
            + u * v * at(i0 + 1, j0 + 1)
    }
}
