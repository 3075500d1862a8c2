//! Survey noise: band-limited in time, spatially correlated, scaled to a requested signal-to-noise
//! ratio.
//!
//! Each survey gets its own noise (non-repeatability between surveys). A noise trace is a white
//! series of random "events" at every time sample convolved with the survey wavelet, so its
//! spectrum is the wavelet's; the event amplitudes at one time sample form a Gaussian random field
//! over the grid, so the noise is correlated from trace to trace. Angle stacks share part of their
//! noise (correlation coefficient `stack_correlation`), as stacks of one acquisition do. The raw
//! noise is then scaled so that its RMS over the analysis windows is the signal RMS divided by the
//! SNR.

use super::seismic::ricker;
use super::settings::sub_seed;
use super::spectral::gaussian_field;
use rand::SeedableRng;
use rand::rngs::StdRng;
use rayon::prelude::*;

/// How one survey's noise is made.
#[derive(Clone, Copy, Debug)]
pub struct NoiseSpec {
    /// Nodes along x.
    pub nx: usize,
    /// Nodes along y.
    pub ny: usize,
    /// Correlation length of the noise across the grid, nodes.
    pub correlation: f64,
    /// Samples per trace.
    pub samples: usize,
    /// Sample interval, s.
    pub dt: f64,
    /// Wavelet peak frequency, Hz.
    pub frequency: f64,
    /// Correlation of the noise between angle stacks, in [0, 1].
    pub stack_correlation: f64,
}

/// Unscaled noise traces for `stacks` angle stacks of one survey: `[stack][node * samples + k]`.
/// `seed` and `survey` pick the random stream; the result does not depend on the thread count.
pub fn survey_noise(spec: &NoiseSpec, stacks: usize, seed: u64, survey: u64) -> Vec<Vec<f64>> {
    let n = spec.nx * spec.ny;
    let k = spec.samples;
    let half = (super::seismic::ricker_half_length(spec.frequency) / spec.dt).ceil() as usize;
    // event m sits at sample index m - half, so events cover [-half, k + half)
    let events = k + 2 * half;
    let wavelet: Vec<f64> = (0..=2 * half)
        .map(|l| ricker(spec.frequency, (l as f64 - half as f64) * spec.dt))
        .collect();
    let common_w = spec.stack_correlation.clamp(0.0, 1.0).sqrt();
    let own_w = (1.0 - spec.stack_correlation.clamp(0.0, 1.0)).sqrt();
    let field = |group: u64, m: usize| {
        let mut rng = StdRng::seed_from_u64(sub_seed(seed, &[7, survey, group, m as u64]));
        gaussian_field(spec.nx, spec.ny, spec.correlation, &mut rng)
    };
    let mut out = vec![vec![0.0; n * k]; stacks];
    // process events in blocks so that the fields are generated in parallel
    let block = 16;
    for start in (0..events).step_by(block) {
        let end = (start + block).min(events);
        let fields: Vec<(Vec<f64>, Vec<Vec<f64>>)> = (start..end)
            .into_par_iter()
            .map(|m| {
                let common = field(0, m);
                let own = (0..stacks).map(|s| field(1 + s as u64, m)).collect();
                (common, own)
            })
            .collect();
        for (st, trace) in out.iter_mut().enumerate() {
            trace.par_chunks_mut(k).enumerate().for_each(|(node, tr)| {
                for (off, (common, own)) in fields.iter().enumerate() {
                    let m = start + off;
                    let a = common_w * common[node] + own_w * own[st][node];
                    // sample index of the event is m - half; it reaches samples within half
                    let centre = m as isize - half as isize;
                    let lo = (centre - half as isize).max(0) as usize;
                    let hi = ((centre + half as isize + 1).max(0) as usize).min(k);
                    for (s, v) in tr.iter_mut().enumerate().take(hi).skip(lo) {
                        let l = (s as isize - centre + half as isize) as usize;
                        *v += a * wavelet[l];
                    }
                }
            });
        }
    }
    out
}

/// Noise for one survey scaled to a signal-to-noise ratio: for each stack, the raw noise of
/// [`survey_noise`] multiplied so that its RMS over the analysis windows (the first `window[i]`
/// samples of node `i`) equals `signal_rms[stack] / snr`.
pub fn scaled_noise(
    spec: &NoiseSpec,
    seed: u64,
    survey: u64,
    signal_rms: &[f64],
    snr: f64,
    window: &[usize],
) -> Vec<Vec<f64>> {
    let mut raw = survey_noise(spec, signal_rms.len(), seed, survey);
    for (trace, s) in raw.iter_mut().zip(signal_rms) {
        let r = window_rms(trace, spec.samples, window);
        let scale = if r > 0.0 { s / snr / r } else { 0.0 };
        trace.iter_mut().for_each(|v| *v *= scale);
    }
    raw
}

/// RMS over every node's analysis window: the first `window[i]` of the `samples` samples of node
/// `i` in a `[node * samples + k]` array.
pub fn window_rms(traces: &[f64], samples: usize, window: &[usize]) -> f64 {
    let (mut s, mut c) = (0.0, 0.0);
    for (i, w) in window.iter().enumerate() {
        for v in &traces[i * samples..i * samples + w] {
            s += v * v;
            c += 1.0;
        }
    }
    if c > 0.0 { (s / c).sqrt() } else { 0.0 }
}
