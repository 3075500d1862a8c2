//! `tidemark score RESULTS --truth DIR`: scores a run's maps against a synthetic field's truth.

use crate::pipeline::score::{BandFigures, SetFigures};
use anyhow::Context;
use std::path::PathBuf;

/// Arguments of `tidemark score`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Results folder of `tidemark run`.
    pub results: PathBuf,
    /// The synthetic project folder (holding truth/) or the truth folder itself.
    #[arg(long)]
    pub truth: PathBuf,
    /// The project whose maps feed the uncalibrated quantile forest shown beside the calibrated
    /// band [default: project.toml in or beside the truth folder, else the run's manifest].
    #[arg(long, value_name = "PROJECT.toml")]
    pub project: Option<PathBuf>,
}

fn num(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => "-".to_string(),
    }
}

fn row(f: &SetFigures) -> String {
    let c = |g: fn(&BandFigures) -> f64| f.calibrated.as_ref().map(g);
    let r = |g: fn(&BandFigures) -> f64| f.forest.as_ref().map(g);
    format!(
        "  {:<14} {:>7} {:>6} {:>6} {:>8} {:>8} {:>8} {:>8} {:>6} {:>9} {:>9} {:>7} {:>7}",
        f.name,
        f.nodes,
        num(c(|b| b.coverage), 3),
        num(r(|b| b.coverage), 3),
        num(c(|b| b.mean_width), 4),
        num(c(|b| b.interval_score), 4),
        num(r(|b| b.interval_score), 4),
        num(c(|b| b.pinball_mean), 4),
        num(c(|b| b.silent_misses), 3),
        num(c(|b| b.mean_p50), 4),
        num(c(|b| b.mean_p50_unchanged), 4),
        num(f.interval_score_gain_pct, 1),
        num(f.pinball_gain_pct, 1),
    )
}

/// Runs `tidemark score`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let score = crate::pipeline::score::score_and_report_with(
        &args.results,
        &args.truth,
        args.project.as_deref(),
    )
    .with_context(|| format!("scoring {}", args.results.display()))?;
    println!(
        "{:<8} {:>8} {:>8} {:>10} {:>10} {:>10}",
        "target", "R2", "cover", "cov.inside", "cov.away", "width"
    );
    for t in &score.targets {
        let get = |m: &Option<crate::metrics::Metrics>, f: fn(&crate::metrics::Metrics) -> f64| {
            m.as_ref().map_or(f64::NAN, f)
        };
        let p = &t.pooled;
        println!(
            "{:<8} {:>8.3} {:>8.3} {:>10.3} {:>10.3} {:>10.4}",
            t.target,
            get(&p.all, |m| m.r2),
            get(&p.all, |m| m.coverage),
            get(&p.inside, |m| m.coverage),
            get(&p.away_from_wells, |m| m.coverage),
            get(&p.all, |m| m.mean_width),
        );
    }
    println!(
        "\nband figures, all steps pooled (cal = calibrated maps, qrf = the uncalibrated quantile \
         forest at the same levels; gains in % of the forest's score, positive = calibration helps)"
    );
    for t in &score.targets {
        println!("{}", t.target);
        println!(
            "  {:<14} {:>7} {:>6} {:>6} {:>8} {:>8} {:>8} {:>8} {:>6} {:>9} {:>9} {:>7} {:>7}",
            "nodes",
            "n",
            "cover",
            "qrf",
            "width",
            "IS",
            "IS.qrf",
            "pinball",
            "silent",
            "meanP50",
            "P50.unch",
            "IS.gain",
            "pb.gain"
        );
        for f in &t.pooled_figures {
            println!("{}", row(f));
        }
    }
    if let Some(note) = &score.forest_note {
        eprintln!("warning: {note}");
    }
    println!(
        "written {}",
        args.results.join("truth-score.json").display()
    );
    Ok(0)
}
