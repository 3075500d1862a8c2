//! Performance harness for the main job: a generated 1000 x 1000 grid, 4 steps, 9 attributes,
//! 3 targets, 55 wells, run end to end through `tidemark::pipeline::run`.
//!
//! The synthetic generator holds seismic traces in memory and stops at 500,000 nodes, so the
//! harness generates a 500 x 500 field at 50 m and resamples every map bilinearly onto a
//! 1000 x 1000 grid at 25 m (same origin, same wells; in-place volumes divided by four).
//!
//! Run: `cargo run --release --example run_harness [-- FOLDER [--no-xyz] [--no-pictures]]`.
//! Prints the stage timings, the total wall time and the peak resident memory (VmHWM).

use std::path::{Path, PathBuf};
use std::time::Instant;
use tidemark::grid::Grid;
use tidemark::io;
use tidemark::pipeline::outputs::Formats;
use tidemark::pipeline::run::{RunOptions, run};
use tidemark::synth::{SynthSettings, generate, write_project};

fn peak_memory_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|kb| kb.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Bilinear resampling of a coarse map onto a fine grid with the same origin and rotation
/// (positions beyond the last coarse node are clamped to the edge).
fn resample(coarse: &Grid, values: &[f64], fine: &Grid) -> Vec<f64> {
    let mut out = vec![f64::NAN; fine.len()];
    let (sx, sy) = (fine.dx / coarse.dx, fine.dy / coarse.dy);
    for j in 0..fine.ny {
        for i in 0..fine.nx {
            let fi = (i as f64 * sx).min((coarse.nx - 1) as f64);
            let fj = (j as f64 * sy).min((coarse.ny - 1) as f64);
            let (i0, j0) = (fi.floor() as usize, fj.floor() as usize);
            let (i1, j1) = ((i0 + 1).min(coarse.nx - 1), (j0 + 1).min(coarse.ny - 1));
            let (u, v) = (fi - i0 as f64, fj - j0 as f64);
            let at = |a: usize, b: usize| values[b * coarse.nx + a];
            out[j * fine.nx + i] = (1.0 - u) * (1.0 - v) * at(i0, j0)
                + u * (1.0 - v) * at(i1, j0)
                + (1.0 - u) * v * at(i0, j1)
                + u * v * at(i1, j1);
        }
    }
    out
}

fn upsample_project(coarse_dir: &Path, fine_dir: &Path) -> PathBuf {
    let project = tidemark::project::Project::load(&coarse_dir.join("project.toml")).unwrap();
    let coarse = project.grid.clone();
    let fine = Grid {
        dx: coarse.dx / 2.0,
        dy: coarse.dy / 2.0,
        nx: coarse.nx * 2,
        ny: coarse.ny * 2,
        ..coarse.clone()
    };
    std::fs::create_dir_all(fine_dir).unwrap();
    let mut maps: Vec<PathBuf> = project
        .steps
        .iter()
        .flat_map(|s| s.attributes.iter().map(|(_, p)| p.clone()))
        .collect();
    if let Some(v) = project.infill.as_ref().and_then(|i| i.volume_map.clone()) {
        maps.push(v);
    }
    for path in maps {
        let rel = path.strip_prefix(coarse_dir).unwrap();
        let values = io::geotiff::read_on_grid(&path, &coarse).unwrap();
        let mut up = resample(&coarse, &values, &fine);
        if rel.starts_with("static") {
            up.iter_mut().for_each(|v| *v /= 4.0);
        }
        let target = fine_dir.join(rel);
        std::fs::create_dir_all(target.parent().unwrap()).unwrap();
        io::geotiff::write(&target, &fine, &up, None).unwrap();
    }
    std::fs::copy(coarse_dir.join("wells.csv"), fine_dir.join("wells.csv")).unwrap();
    let text = std::fs::read_to_string(coarse_dir.join("project.toml")).unwrap();
    let text = text
        .replace(
            &format!("dx = {:?}", coarse.dx),
            &format!("dx = {:?}", fine.dx),
        )
        .replace(
            &format!("dy = {:?}", coarse.dy),
            &format!("dy = {:?}", fine.dy),
        )
        .replace(&format!("nx = {}", coarse.nx), &format!("nx = {}", fine.nx))
        .replace(&format!("ny = {}", coarse.ny), &format!("ny = {}", fine.ny));
    let manifest = fine_dir.join("project.toml");
    std::fs::write(&manifest, text).unwrap();
    manifest
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let root = args
        .iter()
        .find(|a| !a.starts_with("--"))
        .map(PathBuf::from)
        .unwrap_or_else(|| std::env::temp_dir().join("tidemark-run-harness"));
    let xyz = !args.iter().any(|a| a == "--no-xyz");
    let pictures = !args.iter().any(|a| a == "--no-pictures");
    let fine_dir = root.join("field-1000");
    let manifest = fine_dir.join("project.toml");
    if !manifest.is_file() {
        let t = Instant::now();
        let settings = SynthSettings {
            seed: 5,
            nx: 500,
            ny: 500,
            spacing: 50.0,
            wells: 55,
            steps: 4,
            ..SynthSettings::default()
        };
        let field = generate(&settings).expect("generate");
        let coarse_dir = root.join("field-500");
        if coarse_dir.exists() {
            std::fs::remove_dir_all(&coarse_dir).unwrap();
        }
        write_project(&field, &settings, &coarse_dir).expect("write");
        drop(field);
        upsample_project(&coarse_dir, &fine_dir);
        eprintln!(
            "generated the 1000 x 1000 project in {:.1} s (not part of the run)",
            t.elapsed().as_secs_f64()
        );
    }
    let out = root.join("results");
    if out.exists() {
        std::fs::remove_dir_all(&out).unwrap();
    }
    let before = peak_memory_mb();
    let t = Instant::now();
    let mut opts = RunOptions::new(&manifest, &out);
    opts.quiet = false;
    opts.formats = Formats { geotiff: true, xyz };
    opts.pictures = pictures;
    opts.report = pictures;
    run(&opts).expect("run");
    let secs = t.elapsed().as_secs_f64();
    println!(
        "run: 1000 x 1000 nodes, 4 steps, xyz {xyz}, pictures and report {pictures}: {secs:.1} s wall, \
         peak resident memory {:.0} MB (before the run {before:.0} MB), {} threads",
        peak_memory_mb(),
        rayon::current_num_threads()
    );
}
