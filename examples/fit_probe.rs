//! Times forest fitting on Friedman #1 (development probe for tree growing).
//!
//! `cargo run --release --example fit_probe -- ROWS [defaults|matched|sub50|leaf5|smartcore] [REPEATS]` fits a
//! 300-tree forest on ROWS rows of Friedman #1 (the data of `benches/ensemble.rs`) REPEATS
//! times (default 5) and prints, per fit, the wall time and the process CPU time (user +
//! system, all threads, from `/proc/self/task/*/schedstat`), then their medians, the held-out R2 on 5,000
//! fresh rows and a fingerprint of the fitted model (its held-out predictions and OOB
//! predictions, bit for bit), so that a change to growing can be checked to give the same
//! trees. `matched` uses smartcore 0.7's default settings (3 of 10 features per split, leaves
//! of one row), as the bench's `tidemark_matched`; `sub50` draws half the rows without
//! replacement per tree and `leaf5` keeps at least five rows per leaf (other settings at the
//! defaults); `smartcore` times smartcore 0.7's `RandomForestRegressor` at its defaults. Compare CPU medians, not wall times, when
//! the machine is shared; `RAYON_NUM_THREADS=1` measures one core.

use std::time::Instant;

use ndarray::{Array1, Array2, Axis};
use tidemark::ensemble::ForestSettings;

#[path = "../benches/support/friedman.rs"]
mod friedman;
use friedman::{friedman1, r2};

/// CPU seconds used so far by the live threads of this process (the first field of each
/// thread's `/proc/self/task/*/schedstat`, nanoseconds on the CPU); rayon's pool threads live
/// as long as the process, so differences between two calls count every thread's work.
fn cpu_seconds() -> f64 {
    let mut ns = 0u64;
    for task in std::fs::read_dir("/proc/self/task").expect("/proc/self/task") {
        let path = task.expect("task entry").path().join("schedstat");
        if let Ok(s) = std::fs::read_to_string(path) {
            ns += s
                .split_whitespace()
                .next()
                .and_then(|v| v.parse::<u64>().ok())
                .unwrap_or(0);
        }
    }
    ns as f64 * 1e-9
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        (v[m - 1] + v[m]) / 2.0
    }
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let n: usize = args.first().map_or(2000, |a| a.parse().expect("ROWS"));
    let mode = args.get(1).map_or("defaults", String::as_str);
    let reps: usize = args.get(2).map_or(5, |a| a.parse().expect("REPEATS"));
    let (x, y) = friedman1(n, 1.0, 1);
    let (xv, yv) = friedman1(5000, 1.0, 99);
    let p = x.ncols();
    let base = ForestSettings {
        n_trees: 300,
        seed: 1,
        ..Default::default()
    };
    let settings = match mode {
        "matched" => ForestSettings {
            max_features: (p as f64).sqrt().floor() / p as f64,
            min_samples_leaf: 1,
            ..base
        },
        // subsampling half the rows without replacement instead of the bootstrap
        "sub50" => ForestSettings {
            bootstrap: false,
            sample_fraction: 0.5,
            ..base
        },
        // larger leaves
        "leaf5" => ForestSettings {
            min_samples_leaf: 5,
            ..base
        },
        _ => base,
    };
    if mode == "smartcore" {
        smartcore_times(&x, &y, &xv, &yv, reps);
        return;
    }
    let (mut walls, mut cpus) = (Vec::new(), Vec::new());
    let mut forest = None;
    for _ in 0..reps {
        let (t, c) = (Instant::now(), cpu_seconds());
        let f = settings
            .fit(x.view(), y.view().insert_axis(Axis(1)), None)
            .expect("fit");
        let (wall, cpu) = (t.elapsed().as_secs_f64(), cpu_seconds() - c);
        println!("fit: wall {wall:.3} s, cpu {cpu:.4} s");
        walls.push(wall);
        cpus.push(cpu);
        forest = Some(f);
    }
    let forest = forest.expect("at least one repeat");
    let pred = forest.predict(xv.view()).column(0).to_vec();
    // FNV-1a over the bits of the held-out and OOB predictions
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for v in pred.iter().chain(forest.oob_predictions().iter()) {
        for b in v.to_bits().to_le_bytes() {
            h = (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01b3);
        }
    }
    println!(
        "rows {n} {}: min cpu {:.4} s, median wall {:.4} s, median cpu {:.4} s, R2 {:.4}, \
         fingerprint {h:016x}",
        mode,
        cpus.iter().copied().fold(f64::INFINITY, f64::min),
        median(&mut walls),
        median(&mut cpus),
        r2(yv.as_slice().expect("contiguous"), &pred),
    );
}

/// The same timings for smartcore 0.7's `RandomForestRegressor` at its defaults (300 trees).
fn smartcore_times(
    x: &Array2<f64>,
    y: &Array1<f64>,
    xv: &Array2<f64>,
    yv: &Array1<f64>,
    reps: usize,
) {
    use smartcore::ensemble::random_forest_regressor::{
        RandomForestRegressor, RandomForestRegressorParameters,
    };
    let (mut walls, mut cpus) = (Vec::new(), Vec::new());
    let mut model = None;
    for _ in 0..reps {
        let params = RandomForestRegressorParameters::default()
            .with_n_trees(300)
            .with_seed(1);
        let (t, c) = (Instant::now(), cpu_seconds());
        let m: RandomForestRegressor<f64, f64, Array2<f64>, Array1<f64>> =
            RandomForestRegressor::fit(x, y, params).expect("fit");
        let (wall, cpu) = (t.elapsed().as_secs_f64(), cpu_seconds() - c);
        println!("fit: wall {wall:.3} s, cpu {cpu:.3} s");
        walls.push(wall);
        cpus.push(cpu);
        model = Some(m);
    }
    let pred: Array1<f64> = model.expect("a repeat").predict(xv).expect("predict");
    println!(
        "rows {} smartcore: median wall {:.4} s, median cpu {:.4} s, R2 {:.4}",
        x.nrows(),
        median(&mut walls),
        median(&mut cpus),
        r2(
            yv.as_slice().expect("contiguous"),
            pred.as_slice().expect("contiguous")
        ),
    );
}
