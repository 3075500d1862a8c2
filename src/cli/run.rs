//! `tidemark run PROJECT.toml --out DIR`: the main job.

use crate::pipeline::outputs::Formats;
use crate::pipeline::run::{RunOptions, run as run_pipeline};
use anyhow::Context;
use std::path::PathBuf;

/// Arguments of `tidemark run`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The project manifest (project.toml).
    pub project: PathBuf,
    /// Results folder; created if missing; must not hold any input.
    #[arg(long)]
    pub out: PathBuf,
    /// Seed for every random choice (overrides `seed` in the manifest's model table).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress bars, stage messages or tables (warnings are still printed).
    #[arg(long)]
    pub quiet: bool,
    /// Skip the XYZ text copies of the maps (GeoTIFF only).
    #[arg(long)]
    pub no_xyz: bool,
    /// Skip PNG pictures and the report.
    #[arg(long)]
    pub no_pictures: bool,
    /// Skip the HTML report and its sensitivity studies.
    #[arg(long)]
    pub no_report: bool,
    /// Write the first N realization maps of the field totals as GeoTIFF under
    /// `realizations/` (overrides `keep_realizations` in the manifest's totals table).
    #[arg(long, value_name = "N")]
    pub keep_realizations: Option<usize>,
}

/// Checks a `--keep-realizations` value against the manifest limit.
pub fn check_keep(keep: Option<usize>) -> anyhow::Result<()> {
    let max = crate::project::totals::MAX_KEPT_REALIZATIONS;
    if let Some(n) = keep {
        anyhow::ensure!(
            n <= max,
            "--keep-realizations must be at most {max}, got {n}"
        );
    }
    Ok(())
}

/// Sets the size of rayon's global pool (once per process).
pub fn set_threads(threads: Option<usize>) -> anyhow::Result<()> {
    if let Some(n) = threads {
        anyhow::ensure!(n >= 1, "--threads must be at least 1, got {n}");
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global()
            .context("setting the thread count")?;
    }
    Ok(())
}

/// Runs `tidemark run`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    set_threads(args.threads)?;
    check_keep(args.keep_realizations)?;
    let opts = RunOptions {
        project: args.project.clone(),
        out: args.out.clone(),
        seed: args.seed,
        quiet: args.quiet,
        formats: Formats {
            geotiff: true,
            xyz: !args.no_xyz,
        },
        pictures: !args.no_pictures,
        report: !args.no_pictures && !args.no_report,
        keep_realizations: args.keep_realizations,
    };
    let outcome =
        run_pipeline(&opts).with_context(|| format!("running {}", args.project.display()))?;
    print_closing(&outcome, args.quiet);
    if !args.quiet {
        println!("results in {}", outcome.out.display());
    }
    Ok(0)
}

/// What a run leaves on the console, in this order: its warnings (targets and steps without
/// demonstrated skill first; never silenced), then unless `quiet` the leave-wells-out table and
/// the stage times. Progress while the run works is transient, so the warnings are the first
/// lines.
pub fn print_closing(outcome: &crate::pipeline::run::RunOutcome, quiet: bool) {
    print_warnings(&outcome.record.warnings);
    if !quiet {
        crate::pipeline::studies::print_table(&outcome.summary);
        for line in crate::pipeline::stages::timing_lines(&outcome.record.timings) {
            eprintln!("{line}");
        }
    }
}

/// Prints a run's warnings on stderr, one `warning: ...` line each.
pub fn print_warnings(warnings: &[String]) {
    for w in warnings {
        eprintln!("warning: {w}");
    }
}
