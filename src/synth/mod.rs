//! The synthetic time-lapse field: a physics-based generator of attribute maps with known truth.
//!
//! `generate` builds an invented field ("Skerrow Bank"): one or two thin stacked sands on a faulted
//! dome ([`reservoir`]), producers and injectors at irregular positions ([`wells`]), the pressure,
//! water and gas changes at every node from the base survey to each monitor ([`dynamics`]), the
//! elastic properties from Batzle & Wang fluids, a stress-sensitive frame and Gassmann ([`fluids`],
//! [`rock`]), angle-stack traces by convolution in two-way time ([`forward`], [`seismic`]) with
//! band-limited, spatially correlated noise at a requested signal-to-noise ratio ([`noise`]), and
//! the monitor-minus-base attributes. The wells report the true changes plus small measurement noise.
//!
//! Two regions are kept free of wells so that a test bed has ground no well resembles: the porous
//! lobe with its own aquifer, and, when `gas_cap` is set, a sealed culmination drained from beyond
//! the survey whose released gas gathers as a cap. [`SynthField::masks`] marks both (written as
//! `truth/masks/<region>.tif`).
//!
//! Every random choice derives from `SynthSettings::seed` through [`sub_seed`], one stream per
//! component and item, so the same seed gives the same field whatever the thread count.

pub mod dynamics;
pub mod fluids;
pub mod forward;
pub mod json;
mod model;
pub mod noise;
pub mod project;
pub mod reservoir;
pub mod rock;
pub mod seismic;
mod settings;
pub mod spectral;
pub mod wells;

use crate::grid::Grid;
use dynamics::NodeState;
use forward::Layer;
pub use model::SynthModel;
pub use project::{SynthRecord, write_project};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use rayon::prelude::*;
pub use settings::{MAX_NODES, SynthError, SynthSettings, sub_seed};
pub use wells::{PlacedWell, SynthWell, WellKind};

/// Names of the attributes written per step, in manifest order.
pub const ATTRIBUTE_NAMES: [&str; 9] = [
    "near_amp",
    "mid_amp",
    "far_amp",
    "full_sna",
    "intercept",
    "gradient",
    "time_shift",
    "time_strain",
    "nrms",
];

/// Names of the targets: pressure change (MPa), water and gas saturation change (fractions).
pub const TARGET_NAMES: [&str; 3] = ["dP", "dSw", "dSg"];

/// Physical bounds `(min, max)` of each target, in [`TARGET_NAMES`] order.
pub const TARGET_BOUNDS: [(f64, f64); 3] = [(-60.0, 60.0), (-1.0, 1.0), (-1.0, 1.0)];

/// A generated field in memory.
#[derive(Clone, Debug)]
pub struct SynthField {
    /// The map grid.
    pub grid: Grid,
    /// Step names m1..mN.
    pub step_names: Vec<String>,
    /// Attribute names ([`ATTRIBUTE_NAMES`]).
    pub attribute_names: Vec<String>,
    /// Attribute maps `\[step\]\[attribute\]`, each nx*ny, index j*nx+i.
    pub attributes: Vec<Vec<Vec<f64>>>,
    /// Target names \["dP", "dSw", "dSg"\].
    pub target_names: Vec<String>,
    /// True changes `\[step\]\[target\]`, each nx*ny.
    pub truth: Vec<Vec<Vec<f64>>>,
    /// The wells.
    pub wells: Vec<SynthWell>,
    /// Well observations: well, x, y, step, measured targets (truth plus measurement noise).
    pub well_rows: Vec<(String, f64, f64, String, Vec<f64>)>,
    /// Hydrocarbon pore volume per node at the base, m3.
    pub hcpv: Vec<f64>,
    /// Masks of the well-free regions (`lobe`, and `gas_cap` when the field has it): name and
    /// values, 1 inside and 0 outside, each nx*ny ([`reservoir::Reservoir::masks`]).
    pub masks: Vec<(String, Vec<f64>)>,
}

/// Noise-free angle-stack traces of every node: `\[stack\]\[node * samples + k\]`.
fn clean_traces(
    model: &SynthModel,
    columns: &[Vec<Layer>],
    angles: &[[f64; 3]],
    times: &[f64],
) -> Vec<Vec<f64>> {
    let f = model.settings.wavelet_hz;
    let method = model.settings.reflectivity;
    let per_node: Vec<Vec<Vec<f64>>> = columns
        .par_iter()
        .map(|col| {
            angles
                .iter()
                .map(|a| seismic::convolve(&forward::stack_spikes(col, a, method), f, times))
                .collect()
        })
        .collect();
    (0..angles.len())
        .map(|st| {
            per_node
                .iter()
                .flat_map(|t| t[st].iter().copied())
                .collect()
        })
        .collect()
}

/// Generates a field in memory.
pub fn generate(settings: &SynthSettings) -> Result<SynthField, SynthError> {
    let model = SynthModel::build(settings)?;
    let s = &model.settings;
    let res = &model.reservoir;
    let n = res.len();
    let dt = s.sample_ms / 1000.0;
    let pad_samples = (s.window_pad_ms / s.sample_ms).round() as usize;
    let pad = pad_samples as f64 * dt;
    let avo_half = ((s.avo_window_ms / s.sample_ms).round() as usize).min(pad_samples);
    let angles = model.stack_angles();
    let centres = model.stack_centres();
    let nst = angles.len();

    // Base survey
    let base_states: Vec<NodeState> = (0..n)
        .into_par_iter()
        .map(|i| model.base_state(i))
        .collect();
    let base_cols: Vec<Vec<Layer>> = (0..n)
        .into_par_iter()
        .map(|i| model.column(i, &base_states[i]))
        .collect();
    let t_res_base: Vec<f64> = base_cols
        .iter()
        .map(|c| forward::interval_time(c))
        .collect();
    let window: Vec<usize> = t_res_base
        .iter()
        .map(|t| ((t + 2.0 * pad) / dt + 1e-9).floor() as usize + 1)
        .collect();
    let samples = window.iter().copied().max().unwrap_or(1);
    let times: Vec<f64> = (0..samples).map(|k| k as f64 * dt - pad).collect();
    let base_clean = clean_traces(&model, &base_cols, &angles, &times);
    let signal_rms: Vec<f64> = base_clean
        .iter()
        .map(|t| noise::window_rms(t, samples, &window))
        .collect();
    let spec = noise::NoiseSpec {
        nx: s.nx,
        ny: s.ny,
        correlation: s.noise_correlation_length / s.spacing,
        samples,
        dt,
        frequency: s.wavelet_hz,
        stack_correlation: s.noise_stack_correlation,
    };
    let observe = |mut clean: Vec<Vec<f64>>, survey: u64| -> Vec<Vec<f64>> {
        let noise = noise::scaled_noise(&spec, s.seed, survey, &signal_rms, s.snr, &window);
        for (c, n) in clean.iter_mut().zip(noise) {
            c.iter_mut().zip(n).for_each(|(c, n)| *c += n);
        }
        clean
    };
    let base_obs = observe(base_clean, 0);
    let (base_sw, base_sg): (Vec<f64>, Vec<f64>) =
        base_states.iter().map(|st| st.mean_saturation()).unzip();

    let ts_field = |step: usize, which: u64| {
        let mut rng = StdRng::seed_from_u64(sub_seed(s.seed, &[8, step as u64, which]));
        let mut f = spectral::gaussian_field(
            s.nx,
            s.ny,
            s.time_shift_noise_correlation / s.spacing,
            &mut rng,
        );
        f.iter_mut().for_each(|v| *v *= s.time_shift_noise_ms);
        f
    };

    let mut attributes = Vec::with_capacity(s.steps);
    let mut truth = Vec::with_capacity(s.steps);
    for (step, &t) in s.monitor_years().iter().enumerate() {
        let states = model.states_at(t);
        let dp: Vec<f64> = states.iter().map(|st| st.dp).collect();
        let (sw, sg): (Vec<f64>, Vec<f64>) = states.iter().map(|st| st.mean_saturation()).unzip();
        let dsw: Vec<f64> = sw.iter().zip(&base_sw).map(|(a, b)| a - b).collect();
        let dsg: Vec<f64> = sg.iter().zip(&base_sg).map(|(a, b)| a - b).collect();

        let cols: Vec<Vec<Layer>> = (0..n)
            .into_par_iter()
            .map(|i| model.column(i, &states[i]))
            .collect();
        let t_res: Vec<f64> = cols.iter().map(|c| forward::interval_time(c)).collect();
        let clean = clean_traces(&model, &cols, &angles, &times);
        let obs = observe(clean, step as u64 + 1);

        // Overburden: stretch above compacting sands (Hatchell & Bourne 2005).
        let compaction: Vec<f64> = (0..n)
            .map(|i| res.net_thickness(i) * s.compaction_coefficient * dp[i])
            .collect();
        let smooth =
            spectral::gaussian_smooth(&compaction, s.nx, s.ny, s.overburden_smoothing / s.spacing);
        let noise_top = ts_field(step, 0);
        let noise_base = ts_field(step, 1);

        let rows: Vec<[f64; 9]> = (0..n)
            .into_par_iter()
            .map(|i| {
                let w = window[i];
                let span = i * samples..i * samples + w;
                let mut out = [0.0; 9];
                for st in 0..nst {
                    out[st] = seismic::rms(&obs[st][span.clone()])
                        - seismic::rms(&base_obs[st][span.clone()]);
                }
                let full = |tr: &Vec<Vec<f64>>| -> Vec<f64> {
                    (0..w)
                        .map(|k| {
                            (0..nst).map(|st| tr[st][i * samples + k]).sum::<f64>() / nst as f64
                        })
                        .collect()
                };
                let (fb, fm) = (full(&base_obs), full(&obs));
                out[3] = seismic::sum_negative(&fm) - seismic::sum_negative(&fb);
                // mean amplitude of each stack in a short window centred on the top horizon
                let top = |tr: &Vec<Vec<f64>>| -> Vec<f64> {
                    (0..nst)
                        .map(|st| {
                            let c = i * samples + pad_samples;
                            tr[st][c - avo_half..=c + avo_half].iter().sum::<f64>()
                                / (2 * avo_half + 1) as f64
                        })
                        .collect()
                };
                let (ab, bb) = seismic::fit_intercept_gradient(&centres, &top(&base_obs));
                let (am, bm) = seismic::fit_intercept_gradient(&centres, &top(&obs));
                out[4] = am - ab;
                out[5] = bm - bb;
                let z = res.sands[0].top[i];
                let eps = -s.overburden_transfer * smooth[i] / z;
                let t_ob = 2.0 * z / s.overburden_velocity;
                let dt_ob = t_ob * seismic::strained_time_change(eps, s.r_factor);
                let shift_top = dt_ob * 1000.0 + noise_top[i];
                let shift_base = (dt_ob + t_res[i] - t_res_base[i]) * 1000.0 + noise_base[i];
                out[6] = shift_base;
                out[7] = (shift_base - shift_top) / ((t_res_base[i] + 2.0 * pad) * 1000.0);
                out[8] = 100.0 * seismic::nrms(&fb, &fm);
                out
            })
            .collect();
        attributes.push(
            (0..ATTRIBUTE_NAMES.len())
                .map(|a| rows.iter().map(|r| r[a]).collect())
                .collect(),
        );
        truth.push(vec![dp, dsw, dsg]);
    }

    // Wells: world coordinates and the measurements at each monitor after their start.
    let well_list: Vec<SynthWell> = model
        .wells
        .iter()
        .map(|w| {
            let (x, y) = model.world(w.x, w.y);
            SynthWell {
                name: w.name.clone(),
                x,
                y,
                kind: w.kind,
                rate: w.rate,
                start: w.start,
            }
        })
        .collect();
    let sd = [s.well_noise_dp, s.well_noise_dsw, s.well_noise_dsg];
    let names = s.step_names();
    let mut well_rows = Vec::new();
    for (step, &t) in s.monitor_years().iter().enumerate() {
        for (wi, (w, world)) in model.wells.iter().zip(&well_list).enumerate() {
            if w.start >= t {
                continue;
            }
            let mut rng = StdRng::seed_from_u64(sub_seed(s.seed, &[9, wi as u64, step as u64]));
            let values = (0..3)
                .map(|k| {
                    let e: f64 = rng.sample(StandardNormal);
                    let v = model.bilinear_local(&truth[step][k], w.x, w.y) + sd[k] * e;
                    v.clamp(TARGET_BOUNDS[k].0, TARGET_BOUNDS[k].1)
                })
                .collect();
            well_rows.push((
                world.name.clone(),
                world.x,
                world.y,
                names[step].clone(),
                values,
            ));
        }
    }
    let hcpv = (0..n).map(|i| res.hcpv(i)).collect();
    Ok(SynthField {
        grid: model.grid.clone(),
        step_names: names,
        attribute_names: ATTRIBUTE_NAMES.iter().map(|a| a.to_string()).collect(),
        attributes,
        target_names: TARGET_NAMES.iter().map(|a| a.to_string()).collect(),
        truth,
        wells: well_list,
        well_rows,
        hcpv,
        masks: res.masks(),
    })
}
