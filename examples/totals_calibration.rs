//! Calibration of the field totals on generated fields: for each seed, `synth` a small field,
//! `run` it (no pictures or report) and `score` it against its truth; then, per quantity, the share
//! of (seed, step) cases whose true total falls inside the run's P10-P90, for the correlated
//! realizations and for the two naive rules (every node at its P10/P90 at once; independent
//! nodes). The goal is 80 % +- 10 % for the realizations.
//!
//! Also printed per quantity, to tell a bias from a wrong width: the mean standardised error
//! `(truth - mean) / sd` of the realizations and the share of cases with the truth below P10 and
//! above P90; and per target how often the variogram fell back to its stated default.
//!
//! `cargo run --release --example totals_calibration -- [--seeds N] [--first S] [--out DIR]`
//! (defaults: 30 seeds from 1, fields under `target/totals_calibration`).

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::time::Instant;
use tidemark::pipeline::outputs::Formats;
use tidemark::pipeline::run::{self, RunOptions};
use tidemark::pipeline::score::score_with;
use tidemark::synth::{SynthSettings, generate, write_project};

#[derive(Default)]
struct Tally {
    cases: usize,
    inside: usize,
    below: usize,
    above: usize,
    comonotone: usize,
    independent: usize,
    z_sum: f64,
    /// Area totals: sums over cases of the exceedance maps' expected area, the realizations'
    /// mean and the truth.
    expected: f64,
    mean: f64,
    truth: f64,
}

/// The exceedance map behind each default area total of a generated project.
const AREA_MAPS: [(&str, &str); 3] = [
    ("depleted_area", "dP_exceed_depleted"),
    ("swept_area", "dSw_exceed_swept"),
    ("gas_out_area", "dSg_exceed_gas_out"),
];

fn main() {
    let mut seeds = 30u64;
    let mut first = 1u64;
    let mut out = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/totals_calibration");
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--seeds" => seeds = args.next().and_then(|v| v.parse().ok()).expect("--seeds N"),
            "--first" => first = args.next().and_then(|v| v.parse().ok()).expect("--first S"),
            "--out" => out = PathBuf::from(args.next().expect("--out DIR")),
            other => panic!("unknown argument {other}"),
        }
    }
    let mut tallies: BTreeMap<String, Tally> = BTreeMap::new();
    let mut fallbacks: BTreeMap<String, usize> = BTreeMap::new();
    let t_all = Instant::now();
    for seed in first..first + seeds {
        let t0 = Instant::now();
        let settings = SynthSettings {
            seed,
            nx: 64,
            ny: 52,
            spacing: 50.0,
            wells: 44,
            steps: 3,
            ..SynthSettings::default()
        };
        let field_dir = out.join(format!("seed{seed}/field"));
        let results = out.join(format!("seed{seed}/results"));
        for d in [&field_dir, &results] {
            if d.exists() {
                std::fs::remove_dir_all(d).expect("clear an earlier run");
            }
        }
        let field = generate(&settings).unwrap_or_else(|e| panic!("seed {seed}: {e}"));
        write_project(&field, &settings, &field_dir).expect("write the field");
        let manifest = field_dir.join("project.toml");
        let opts = RunOptions {
            formats: Formats {
                geotiff: true,
                xyz: false,
            },
            pictures: false,
            report: false,
            ..RunOptions::new(&manifest, &results)
        };
        run::run(&opts).unwrap_or_else(|e| panic!("seed {seed}: run: {e}"));
        let (score, _) = score_with(&results, &field_dir, Some(&manifest))
            .unwrap_or_else(|e| panic!("seed {seed}: score: {e}"));
        let summary: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(results.join("summary.json")).expect("summary"),
        )
        .expect("summary JSON");
        for v in summary["totals"]["variograms"]
            .as_array()
            .into_iter()
            .flatten()
        {
            let name = v["target"].as_str().unwrap_or("?").to_string();
            *fallbacks.entry(name).or_default() +=
                v["fallback"].as_bool().unwrap_or(false) as usize;
        }
        let sds: BTreeMap<(String, String), (f64, f64)> = summary["totals"]["quantities"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|q| {
                (
                    (
                        q["quantity"].as_str().unwrap().to_string(),
                        q["step"].as_str().unwrap().to_string(),
                    ),
                    (q["mean"].as_f64().unwrap(), q["sd"].as_f64().unwrap()),
                )
            })
            .collect();
        for t in &score.totals {
            let e = tallies.entry(t.quantity.clone()).or_default();
            let (lo, hi) = (t.p10.min(t.p90), t.p10.max(t.p90));
            e.cases += 1;
            e.inside += t.inside as usize;
            e.below += (t.truth < lo) as usize;
            e.above += (t.truth > hi) as usize;
            e.comonotone += t.sum_of_node_bands.inside as usize;
            e.independent += t.independent.as_ref().is_some_and(|i| i.inside) as usize;
            let Some(&(mean, sd)) = sds.get(&(t.quantity.clone(), t.step.clone())) else {
                continue;
            };
            if sd > 0.0 {
                e.z_sum += (t.truth - mean) / sd;
            }
            if let Some((_, map)) = AREA_MAPS.iter().find(|(q, _)| *q == t.quantity) {
                let path = results
                    .join("maps")
                    .join(&t.step)
                    .join(format!("{map}.tif"));
                let p = tidemark::io::geotiff::read(&path).expect("exceedance map");
                let cell = p.grid.dx * p.grid.dy * 1e-6;
                let expected: f64 = p.values.iter().filter(|v| v.is_finite()).sum::<f64>() * cell;
                e.expected += expected;
                e.mean += mean;
                e.truth += t.truth;
            }
        }
        eprintln!("seed {seed}: {:.1} s", t0.elapsed().as_secs_f64());
    }
    println!(
        "{seeds} seeds ({first}..{}), 64 x 52 nodes, 3 steps, 44 wells; {:.0} s",
        first + seeds - 1,
        t_all.elapsed().as_secs_f64()
    );
    println!(
        "{:<20} {:>5} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9}",
        "quantity", "cases", "inside", "below", "above", "mean z", "node P10/90", "independent"
    );
    for (q, t) in &tallies {
        let n = t.cases as f64;
        println!(
            "{:<20} {:>5} {:>9.2} {:>9.2} {:>9.2} {:>9.2} {:>9.2} {:>9.2}",
            q,
            t.cases,
            t.inside as f64 / n,
            t.below as f64 / n,
            t.above as f64 / n,
            t.z_sum / n,
            t.comonotone as f64 / n,
            t.independent as f64 / n
        );
    }
    println!(
        "area totals, means over cases (km2): exceedance maps' expected area, realizations' mean, truth"
    );
    for (q, t) in &tallies {
        if t.expected != 0.0 {
            let n = t.cases as f64;
            println!(
                "{:<20} {:>9.2} {:>9.2} {:>9.2}",
                q,
                t.expected / n,
                t.mean / n,
                t.truth / n
            );
        }
    }
    for (target, n) in &fallbacks {
        println!("variogram fallback for {target}: {n} of {seeds} seeds");
    }
}
