//! Generated well data for the calibration tests: `y = sin(2 pi x) + u_well + e`, with a
//! well effect `u_well ~ N(0, 0.3^2)`, row noise `e ~ N(0, (0.2 + 0.3 x)^2)` and 1 to 4 rows
//! (steps) per well.

use rand::RngExt;
use rand::rngs::StdRng;
use rand_distr::{Distribution, Normal};

/// Rows of generated wells.
pub struct Wells {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub group: Vec<usize>,
}

/// The noiseless signal.
pub fn signal(x: f64) -> f64 {
    (2.0 * std::f64::consts::PI * x).sin()
}

/// Standard deviation of the row noise at `x`.
pub fn noise_sd(x: f64) -> f64 {
    0.2 + 0.3 * x
}

/// A cheap, deliberately imperfect model: the signal shrunk towards zero by 20 %.
pub fn cheap_model(x: f64) -> f64 {
    0.8 * signal(x)
}

/// `n` wells with ids `first_id..first_id + n`.
pub fn wells(rng: &mut StdRng, n: usize, first_id: usize) -> Wells {
    let unit = Normal::new(0.0, 1.0).unwrap();
    let mut out = Wells {
        x: Vec::new(),
        y: Vec::new(),
        group: Vec::new(),
    };
    for w in 0..n {
        let effect = 0.3 * unit.sample(rng);
        let rows = rng.random_range(1..=4usize);
        for _ in 0..rows {
            let x: f64 = rng.random();
            out.x.push(x);
            out.y
                .push(signal(x) + effect + noise_sd(x) * unit.sample(rng));
            out.group.push(first_id + w);
        }
    }
    out
}

/// Mean over wells of the fraction of each well's rows for which `hit` is true.
pub fn per_well_mean(group: &[usize], hit: &[bool]) -> f64 {
    let mut ids: Vec<usize> = group.to_vec();
    ids.sort_unstable();
    ids.dedup();
    let mut total = 0.0;
    for id in &ids {
        let rows: Vec<usize> = (0..group.len()).filter(|&i| group[i] == *id).collect();
        total += rows.iter().filter(|&&i| hit[i]).count() as f64 / rows.len() as f64;
    }
    total / ids.len() as f64
}
