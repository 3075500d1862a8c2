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
//! And per area total, the node reliability of its exceedance map against the truth: by
//! predicted probability, by distance to the nearest well observed at the step (in well
//! spacings), by step, and by whether the node's P50 is the "no change" atom.
//!
//! `cargo run --release --example totals_calibration -- [--seeds N] [--first S] [--out DIR]
//! [--no-calibration-draw] [--no-atom TARGET]... [--mean zero|estimated] [--smoothing WIDTHS]
//! [--conditioning measured|held_out|well_nodes] [--observers N]` (defaults: 30 seeds
//! from 1, fields under `target/totals_calibration`; `--no-calibration-draw` sets `[totals]
//! calibration_uncertainty = false` in every manifest, `--no-atom dP` sets `zero_change = false`
//! for that target, `--mean` sets `[totals] mean`, `--conditioning` `[totals] conditioning`,
//! `--smoothing '"auto"'` appends `[smoothing] widths = ...` (TOML value as given),
//! `--observers` adds that many observation wells at random places to the 44 flowing wells).
//!
//! Every case (seed, quantity, step) is also written to `cases.csv` under the output folder:
//! the truth, the realizations' P10 / P90, mean and sd, and the layer's estimated mean normal
//! score of its wells with its standard error (`summary.json` `totals.means`), so that the
//! totals' errors can be set against the wells' per-step errors.

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::time::Instant;
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

/// The generated project's thresholds behind [`AREA_MAPS`]: target index in the field's truth,
/// value, and whether crossing is upwards (`tidemark synth`'s manifest).
const AREA_EVENTS: [(usize, f64, bool); 3] = [(0, -2.0, false), (1, 0.1, true), (2, 0.05, true)];

/// Reliability of an exceedance map at the nodes: per class, the number of nodes, the sum of
/// the predicted probabilities and the number that truly crossed.
#[derive(Default, Clone, Copy)]
struct Cell {
    nodes: f64,
    predicted: f64,
    crossed: f64,
}

impl Cell {
    fn add(&mut self, p: f64, crossed: bool) {
        self.nodes += 1.0;
        self.predicted += p;
        self.crossed += crossed as u8 as f64;
    }
}

/// Classes of the node diagnostics: predicted probability (tenths), distance to the nearest
/// well observed at the step in well spacings (median nearest-neighbour distance between those
/// wells), and step.
const DISTANCE_EDGES: [f64; 5] = [0.25, 0.5, 1.0, 1.5, 2.0];

#[derive(Default)]
struct Diagnosis {
    by_probability: [Cell; 10],
    by_distance: [Cell; 6],
    by_step: BTreeMap<String, Cell>,
    /// `[P50 = 0, P50 != 0]`.
    by_atom: [Cell; 2],
    /// `[no "no change" atom, with the atom]` (the target's hurdle, seen by its change map).
    by_hurdle: [Cell; 2],
    /// Cases and cases with the truth inside the P10-P90, `[without, with]` the atom.
    inside_by_hurdle: [(usize, usize); 2],
}

/// Distance of every node to the nearest well with a row at `step`, in well spacings.
fn spacings(field: &tidemark::synth::SynthField, step: &str) -> Vec<f64> {
    let wells: Vec<(f64, f64)> = field
        .well_rows
        .iter()
        .filter(|r| r.3 == step)
        .map(|r| (r.1, r.2))
        .collect();
    let nearest = |x: f64, y: f64, skip: Option<usize>| -> f64 {
        wells
            .iter()
            .enumerate()
            .filter(|(k, _)| Some(*k) != skip)
            .map(|(_, w)| ((w.0 - x).powi(2) + (w.1 - y).powi(2)).sqrt())
            .fold(f64::INFINITY, f64::min)
    };
    let mut nn: Vec<f64> = (0..wells.len())
        .map(|k| nearest(wells[k].0, wells[k].1, Some(k)))
        .collect();
    nn.sort_by(f64::total_cmp);
    let spacing = nn.get(nn.len() / 2).copied().unwrap_or(f64::NAN);
    field
        .grid
        .node_coordinates()
        .iter()
        .map(|&(x, y)| nearest(x, y, None) / spacing)
        .collect()
}

fn print_diagnosis(name: &str, d: &Diagnosis) {
    let row = |label: String, c: &Cell| {
        if c.nodes > 0.0 {
            println!(
                "  {:<14} {:>9.0} {:>9.3} {:>9.3} {:>9.0} {:>9.0} {:>8.3}",
                label,
                c.nodes,
                c.predicted / c.nodes,
                c.crossed / c.nodes,
                c.predicted,
                c.crossed,
                c.crossed / c.predicted.max(1e-9)
            );
        }
    };
    println!("{name}: node reliability of the exceedance map (all seeds and steps)");
    println!(
        "  {:<14} {:>9} {:>9} {:>9} {:>9} {:>9} {:>8}",
        "class", "nodes", "mean p", "crossed", "expected", "crossed", "ratio"
    );
    for (k, c) in d.by_probability.iter().enumerate() {
        row(
            format!("p {:.1}-{:.1}", k as f64 / 10.0, (k + 1) as f64 / 10.0),
            c,
        );
    }
    for (k, c) in d.by_distance.iter().enumerate() {
        let lo = if k == 0 { 0.0 } else { DISTANCE_EDGES[k - 1] };
        let label = match DISTANCE_EDGES.get(k) {
            Some(hi) => format!("dist {lo:.2}-{hi:.2}"),
            None => format!("dist > {lo:.2}"),
        };
        row(label, c);
    }
    for (step, c) in &d.by_step {
        row(format!("step {step}"), c);
    }
    row("P50 = 0".to_string(), &d.by_atom[0]);
    row("P50 != 0".to_string(), &d.by_atom[1]);
    row("no atom".to_string(), &d.by_hurdle[0]);
    row("with atom".to_string(), &d.by_hurdle[1]);
    for (k, label) in ["no atom", "with atom"].iter().enumerate() {
        let (cases, inside) = d.inside_by_hurdle[k];
        if cases > 0 {
            println!(
                "  inside P10-P90, fields {label}: {inside} of {cases} ({:.2})",
                inside as f64 / cases as f64
            );
        }
    }
}

fn main() {
    let mut seeds = 30u64;
    let mut first = 1u64;
    let mut draw = true;
    let mut no_atom: Vec<String> = Vec::new();
    let mut mean_rule: Option<String> = None;
    let mut conditioning: Option<String> = None;
    let mut observers = 0usize;
    let mut smoothing: Option<String> = None;
    let mut in_sample: BTreeMap<String, (usize, usize)> = BTreeMap::new();
    let mut cases = String::from(
        "seed,quantity,step,truth,p10,p90,mean,sd,wells_mean,wells_se,wells_plain_mean,wells\n",
    );
    let mut out = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/totals_calibration");
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--seeds" => seeds = args.next().and_then(|v| v.parse().ok()).expect("--seeds N"),
            "--first" => first = args.next().and_then(|v| v.parse().ok()).expect("--first S"),
            "--out" => out = PathBuf::from(args.next().expect("--out DIR")),
            "--no-calibration-draw" => draw = false,
            "--observers" => {
                observers = args
                    .next()
                    .and_then(|v| v.parse().ok())
                    .expect("--observers N")
            }
            "--smoothing" => smoothing = Some(args.next().expect("--smoothing WIDTHS")),
            "--no-atom" => no_atom.push(args.next().expect("--no-atom TARGET")),
            "--mean" => mean_rule = Some(args.next().expect("--mean zero|estimated")),
            "--conditioning" => {
                conditioning = Some(
                    args.next()
                        .expect("--conditioning measured|held_out|well_nodes"),
                )
            }
            other => panic!("unknown argument {other}"),
        }
    }
    let mut tallies: BTreeMap<String, Tally> = BTreeMap::new();
    let mut fallbacks: BTreeMap<String, usize> = BTreeMap::new();
    let mut diagnoses: BTreeMap<String, Diagnosis> = BTreeMap::new();
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
            observers,
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
        for target in &no_atom {
            let text = std::fs::read_to_string(&manifest).expect("manifest");
            let key = format!("name = \"{target}\"\n");
            assert!(text.contains(&key), "no target {target}");
            let text = text.replacen(&key, &format!("{key}zero_change = false\n"), 1);
            std::fs::write(&manifest, text).expect("manifest");
        }
        if let Some(rule) = &conditioning {
            let text = std::fs::read_to_string(&manifest).expect("manifest");
            let text = text.replacen(
                "[totals]\n",
                &format!("[totals]\nconditioning = \"{rule}\"\n"),
                1,
            );
            std::fs::write(&manifest, text).expect("manifest");
        }
        if let Some(rule) = &mean_rule {
            let text = std::fs::read_to_string(&manifest).expect("manifest");
            let text = text.replacen("[totals]\n", &format!("[totals]\nmean = \"{rule}\"\n"), 1);
            std::fs::write(&manifest, text).expect("manifest");
        }
        if let Some(w) = &smoothing {
            let mut text = std::fs::read_to_string(&manifest).expect("manifest");
            text.push_str(&format!("\n[smoothing]\nwidths = {w}\n"));
            std::fs::write(&manifest, text).expect("manifest");
        }
        if !draw {
            let text = std::fs::read_to_string(&manifest).expect("manifest");
            let text = text.replacen(
                "[totals]\n",
                "[totals]\ncalibration_uncertainty = false\n",
                1,
            );
            std::fs::write(&manifest, text).expect("manifest");
        }
        let opts = RunOptions::maps_only(&manifest, &results);
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
        let record: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(results.join("totals.json")).expect("totals.json"),
        )
        .expect("totals JSON");
        let target_of: BTreeMap<String, String> = record["quantities"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|q| {
                (
                    q["quantity"].as_str().unwrap_or("?").to_string(),
                    q["target"].as_str().unwrap_or("?").to_string(),
                )
            })
            .collect();
        let layer_means: BTreeMap<String, &serde_json::Value> = summary["totals"]["means"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|m| (m["layer"].as_str().unwrap_or("?").to_string(), m))
            .collect();
        for t in &score.totals {
            let target = target_of.get(&t.quantity).cloned().unwrap_or_default();
            let m = layer_means.get(&format!("{target} {}", t.step));
            let (mean, sd) = sds
                .get(&(t.quantity.clone(), t.step.clone()))
                .copied()
                .unwrap_or((f64::NAN, f64::NAN));
            let field = |k: &str| m.and_then(|m| m[k].as_f64()).unwrap_or(f64::NAN);
            cases.push_str(&format!(
                "{seed},{},{},{},{},{},{},{},{},{},{},{}\n",
                t.quantity,
                t.step,
                t.truth,
                t.p10,
                t.p90,
                mean,
                sd,
                field("mean"),
                field("se"),
                field("plain_mean"),
                field("wells"),
            ));
        }
        // the final model at the wells it was fitted on: the measured value inside the written
        // P10-P90 at the well's node (held-out wells are inside about 80 % of the time)
        for step in &field.step_names {
            for (k, target) in field.target_names.iter().enumerate() {
                let read = |suffix: &str| {
                    tidemark::io::geotiff::read(
                        &results
                            .join("maps")
                            .join(step)
                            .join(format!("{target}_{suffix}.tif")),
                    )
                };
                let (Ok(lo), Ok(hi)) = (read("p10"), read("p90")) else {
                    continue;
                };
                let e = in_sample.entry(target.clone()).or_default();
                for (_, x, y, st, values) in &field.well_rows {
                    let v = values.get(k).copied().unwrap_or(f64::NAN);
                    if st != step || !v.is_finite() {
                        continue;
                    }
                    let (fi, fj) = lo.grid.fractional_ij(*x, *y);
                    let (i, j) = (fi.round(), fj.round());
                    if i < 0.0 || j < 0.0 || i >= lo.grid.nx as f64 || j >= lo.grid.ny as f64 {
                        continue;
                    }
                    let n = j as usize * lo.grid.nx + i as usize;
                    let (a, b) = (
                        lo.values[n].min(hi.values[n]),
                        lo.values[n].max(hi.values[n]),
                    );
                    if a.is_finite() && b.is_finite() {
                        e.0 += 1;
                        e.1 += (v >= a && v <= b) as usize;
                    }
                }
            }
        }
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
                let k = AREA_MAPS
                    .iter()
                    .position(|(q, _)| *q == t.quantity)
                    .unwrap();
                let (target, value, above) = AREA_EVENTS[k];
                let s = field.step_names.iter().position(|n| *n == t.step).unwrap();
                let truth = &field.truth[s][target];
                let dist = spacings(&field, &t.step);
                let target_name = &field.target_names[target];
                let p50 = tidemark::io::geotiff::read(
                    &results
                        .join("maps")
                        .join(&t.step)
                        .join(format!("{target_name}_p50.tif")),
                )
                .expect("P50 map")
                .values;
                let hurdle = results
                    .join("maps")
                    .join(&t.step)
                    .join(format!("{target_name}_p_change.tif"))
                    .exists() as usize;
                let d = diagnoses.entry(t.quantity.clone()).or_default();
                d.inside_by_hurdle[hurdle].0 += 1;
                d.inside_by_hurdle[hurdle].1 += t.inside as usize;
                for (i, &pi) in p.values.iter().enumerate() {
                    if !(pi.is_finite() && truth[i].is_finite()) {
                        continue;
                    }
                    let crossed = if above {
                        truth[i] > value
                    } else {
                        truth[i] < value
                    };
                    d.by_probability[((pi * 10.0) as usize).min(9)].add(pi, crossed);
                    let c = DISTANCE_EDGES.partition_point(|&e| e <= dist[i]);
                    d.by_distance[c].add(pi, crossed);
                    d.by_step
                        .entry(t.step.clone())
                        .or_default()
                        .add(pi, crossed);
                    d.by_atom[(p50[i] != 0.0) as usize].add(pi, crossed);
                    d.by_hurdle[hurdle].add(pi, crossed);
                }
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
    for (q, d) in &diagnoses {
        print_diagnosis(q, d);
    }
    std::fs::write(out.join("cases.csv"), cases).expect("cases.csv");
    for (target, (n, inside)) in &in_sample {
        println!(
            "{target}: measured value inside the written P10-P90 at the well's own node: {inside} of {n} well rows ({:.2})",
            *inside as f64 / (*n).max(1) as f64
        );
    }
    for (target, n) in &fallbacks {
        println!("variogram fallback for {target}: {n} of {seeds} seeds");
    }
}
