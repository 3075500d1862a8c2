//! `tidemark score RESULTS --truth DIR`: scores a run's maps against a synthetic field's truth.

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
}

/// Runs `tidemark score`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let score = crate::pipeline::score::score_and_report(&args.results, &args.truth)
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
        "written {}",
        args.results.join("truth-score.json").display()
    );
    Ok(0)
}
