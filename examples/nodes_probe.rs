//! Times the field totals' node distributions of one step of a project with a saved model: built
//! from the conditional part the prediction kept, against predicting the nodes again.
//!
//! ```text
//! cargo run --release --example nodes_probe -- MODEL.json PROJECT.toml [STEP]
//! ```
//!
//! Prints per target the CPU seconds of the process for each way (from `/proc/self/stat`),
//! whether the two give the same quantiles at a sample of nodes and levels, and the time of one
//! quantile call; for a hurdle target also the CPU seconds of its change-probability forest at
//! every node.

use std::path::Path;
use tidemark::pipeline::model::SavedModel;
use tidemark::pipeline::nodes::CalibratedNodes;
use tidemark::spatial::totals::NodeDistribution;

#[path = "support/cpu.rs"]
mod cpu;
use cpu::cpu_seconds;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 2 {
        eprintln!("usage: nodes_probe MODEL.json PROJECT.toml [STEP]");
        std::process::exit(2);
    }
    let model = SavedModel::load(Path::new(&args[0])).expect("model");
    let survey = tidemark::project::load_survey(Path::new(&args[1])).expect("project");
    let step: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(0);
    let grid = &survey.project.grid;
    let xy = grid.node_coordinates();
    let ground = model
        .ground_flags(&survey, 0..grid.len())
        .expect("ground check");
    let x = model.node_features(&survey, step);
    let all: Vec<usize> = (0..model.calibrated.len()).collect();
    let c0 = cpu_seconds();
    let maps = model
        .predict_keeping(x.view(), &xy, ground.as_deref(), &all)
        .expect("predict");
    println!("predict step {step}: {:.1} s CPU", cpu_seconds() - c0);
    for (cal, tm) in model.calibrated.iter().zip(&maps.targets) {
        // The change-probability forest alone, as the nodes' share of change walks it once
        // before the maps walk it again.
        let c0 = cpu_seconds();
        if cal.change_probability(x.view()).expect("columns").is_some() {
            println!(
                "{}: change probability at every node {:.2} s CPU",
                cal.name,
                cpu_seconds() - c0
            );
        }
        let c0 = cpu_seconds();
        let kept = CalibratedNodes::from_maps(cal, tm).expect("kept part");
        let c1 = cpu_seconds();
        let again = CalibratedNodes::new(cal, tm, x.view()).expect("nodes");
        let c2 = cpu_seconds();
        let same = (0..tm.mid.len()).step_by(97).all(|i| {
            [0.03, 0.1, 0.3, 0.5, 0.7, 0.9, 0.97]
                .iter()
                .all(|&u| kept.quantile(i, u).to_bits() == again.quantile(i, u).to_bits())
        });
        // Quantile calls in node order at levels spread over (0, 1), as the realizations make.
        let levels: Vec<f64> = (0..20).map(|k| (k as f64 + 0.37) / 20.0).collect();
        let t = std::time::Instant::now();
        let mut sum = 0.0;
        for &u in &levels {
            for i in 0..tm.mid.len() {
                let q = kept.quantile(i, u);
                if q.is_finite() {
                    sum += q;
                }
            }
        }
        let ns = t.elapsed().as_secs_f64() * 1e9 / (levels.len() * tm.mid.len()) as f64;
        println!(
            "{}: {ns:.1} ns per quantile call (checksum {sum:.6e})",
            cal.name
        );
        println!(
            "{}: from the kept part {:.2} s CPU, predicting again {:.2} s CPU (conditional part needed: {}); same quantiles: {same}",
            cal.name,
            c1 - c0,
            c2 - c1,
            cal.needs_conditional()
        );
    }
}
