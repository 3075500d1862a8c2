//! Timing harness for `tidemark check` on a full-size project of XYZ maps: 4 steps x 8 attributes
//! on a 240 x 180 grid, 50 wells (the foundation issue's "done when" project).
//!
//! Run with `cargo run --release --example check_harness [-- FOLDER] [--wells N]`. It writes the
//! project into FOLDER (default: a `tidemark-check-harness` folder in the system temporary
//! folder; with `--wells N`, N wells of one row each instead of 50 wells of four), times the
//! library's `check_project` three times, and also times the `tidemark` binary beside this example
//! (`target/release/tidemark`, built by `cargo build --release`) when it exists.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;
use tidemark::grid::Grid;

const ATTRIBUTES: [&str; 8] = [
    "near_amp",
    "mid_amp",
    "far_amp",
    "intercept",
    "gradient",
    "time_shift",
    "time_strain",
    "nrms",
];
const STEPS: [&str; 4] = ["m1", "m2", "m3", "m4"];
const WELLS: usize = 50;

fn grid() -> Grid {
    Grid {
        origin_x: 12000.0,
        origin_y: 34000.0,
        dx: 25.0,
        dy: 25.0,
        nx: 240,
        ny: 180,
        rotation: 0.0,
        epsg: None,
        null_value: -999.25,
    }
}

/// A smooth attribute field with a null patch in one corner (about 1.5 % of the nodes).
fn attribute_map(g: &Grid, s: usize, a: usize) -> Vec<f64> {
    let mut v = vec![f64::NAN; g.len()];
    for j in 0..g.ny {
        for i in 0..g.nx {
            if i < 30 && j < 20 {
                continue;
            }
            let (u, w) = (i as f64 / g.nx as f64, j as f64 / g.ny as f64);
            let phase = a as f64 * 0.7 + s as f64 * 0.3;
            v[g.index(i, j)] = (1.0 + s as f64) * 0.05 * (6.0 * u + phase).sin() * (4.0 * w).cos()
                + 0.01 * a as f64;
        }
    }
    v
}

fn write_project(dir: &Path, many: Option<usize>) -> PathBuf {
    let g = grid();
    let mut manifest = String::from(
        "[project]\nname = \"Skerrow Bank check harness\"\n\n[grid]\norigin_x = 12000.0\n\
         origin_y = 34000.0\ndx = 25.0\ndy = 25.0\nnx = 240\nny = 180\n\n",
    );
    for (s, step) in STEPS.iter().enumerate() {
        let _ = write!(
            manifest,
            "[[step]]\nname = \"{step}\"\nbase_date = \"2018-06-01\"\nmonitor_date = \"{}-06-01\"\n[step.attributes]\n",
            2019 + 2 * s
        );
        for (a, attr) in ATTRIBUTES.iter().enumerate() {
            let rel = format!("maps/{step}/{attr}.xyz");
            tidemark::io::xyz::write(&dir.join(&rel), &g, &attribute_map(&g, s, a))
                .expect("write map");
            let _ = writeln!(manifest, "{attr} = \"{rel}\"");
        }
        manifest.push('\n');
    }
    manifest.push_str(
        "[wells]\nfile = \"wells.csv\"\n\n\
         [[target]]\nname = \"dSw\"\nunit = \"fraction\"\nmin = -1.0\nmax = 1.0\n\n\
         [[target]]\nname = \"dP\"\nunit = \"MPa\"\nmin = -50.0\nmax = 50.0\n\n\
         [[target]]\nname = \"dSg\"\nunit = \"fraction\"\nmin = -1.0\nmax = 1.0\n\n\
         [[threshold]]\ntarget = \"dSw\"\ndirection = \"above\"\nvalue = 0.10\nlabel = \"swept\"\n\n\
         [[threshold]]\ntarget = \"dP\"\ndirection = \"below\"\nvalue = -2.0\nlabel = \"depleted\"\n\n\
         [[threshold]]\ntarget = \"dSg\"\ndirection = \"above\"\nvalue = 0.05\nlabel = \"gas_out\"\n",
    );
    let mut rng = StdRng::seed_from_u64(7);
    let mut csv = String::from("well,x,y,step,dSw,dP,dSg\n");
    if let Some(n) = many {
        // One row per well, the steps in turn: the size that tests well grouping.
        for w in 0..n {
            let (fi, fj) = (rng.random_range(35.0..235.0), rng.random_range(25.0..175.0));
            let (x, y) = g.fractional_xy(fi, fj);
            let s = w % STEPS.len();
            let dsw = 0.1 * s as f64 + rng.random_range(-0.05..0.2);
            let dp = -1.0 - s as f64 + rng.random_range(-2.0..2.0);
            let dsg = rng.random_range(0.0..0.1);
            let _ = writeln!(
                csv,
                "W{w:07},{x:.2},{y:.2},{},{dsw:.4},{dp:.3},{dsg:.4}",
                STEPS[s]
            );
        }
    }
    for w in 0..if many.is_some() { 0 } else { WELLS } {
        let fi = rng.random_range(35.0..235.0);
        let fj = rng.random_range(25.0..175.0);
        for (s, step) in STEPS.iter().enumerate() {
            let (x, y) = g.fractional_xy(fi + 0.1 * s as f64, fj);
            let dsw = (0.1 * s as f64 + rng.random_range(-0.05..0.2)).clamp(-1.0, 1.0);
            let dp = -1.0 - s as f64 + rng.random_range(-2.0..2.0);
            let dsg = if w % 3 == 0 {
                String::new()
            } else {
                format!("{:.4}", rng.random_range(0.0..0.1))
            };
            let _ = writeln!(csv, "W{w:02},{x:.2},{y:.2},{step},{dsw:.4},{dp:.3},{dsg}");
        }
    }
    std::fs::write(dir.join("wells.csv"), csv).expect("write wells.csv");
    let path = dir.join("project.toml");
    std::fs::write(&path, manifest).expect("write project.toml");
    path
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let many = args
        .iter()
        .position(|a| a == "--wells")
        .and_then(|k| args.get(k + 1))
        .map(|n| n.parse::<usize>().expect("--wells takes a number"));
    let dir = args
        .iter()
        .enumerate()
        .find(|(k, a)| !a.starts_with("--") && (*k == 0 || args[k - 1] != "--wells"))
        .map(|(_, a)| PathBuf::from(a))
        .unwrap_or_else(|| std::env::temp_dir().join("tidemark-check-harness"));
    std::fs::create_dir_all(&dir).expect("create the project folder");
    let t = Instant::now();
    let manifest = write_project(&dir, many);
    println!(
        "wrote {} ({} steps x {} XYZ maps on 240 x 180, {} wells) in {:.2} s",
        manifest.display(),
        STEPS.len(),
        ATTRIBUTES.len(),
        many.unwrap_or(WELLS),
        t.elapsed().as_secs_f64()
    );
    let mut times = Vec::new();
    let mut report = None;
    for _ in 0..3 {
        let t = Instant::now();
        report = Some(tidemark::check::check_project(&manifest));
        times.push(t.elapsed().as_secs_f64());
    }
    let report = report.expect("ran");
    println!("{report}\n");
    println!(
        "check_project (library, {} threads): {}",
        rayon::current_num_threads(),
        times
            .iter()
            .map(|t| format!("{t:.3} s"))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let exe = std::env::current_exe().ok().and_then(|p| {
        let bin = p.parent()?.parent()?.join("tidemark");
        bin.exists().then_some(bin)
    });
    match exe {
        Some(bin) => {
            let t = Instant::now();
            let out = std::process::Command::new(&bin)
                .arg("check")
                .arg(&manifest)
                .output()
                .expect("run tidemark");
            println!(
                "{} check: exit {:?} in {:.3} s (wall clock, process included)",
                bin.display(),
                out.status.code(),
                t.elapsed().as_secs_f64()
            );
        }
        None => {
            println!("(no tidemark binary beside this example; `cargo build --release` to time it)")
        }
    }
    if !report.runnable {
        std::process::exit(1);
    }
}
