//! `tidemark demo [--out DIR]`: the whole job on the bundled demo project, scored against its
//! known truth.

use crate::pipeline::outputs::Formats;
use crate::pipeline::run::{RunOptions, run as run_pipeline};
use anyhow::Context;
use std::path::PathBuf;

/// Arguments of `tidemark demo`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Results folder.
    #[arg(long, default_value = "tidemark-demo")]
    pub out: PathBuf,
    /// The demo project (default: demo-data/project.toml of this source tree, else ./demo-data).
    #[arg(long)]
    pub project: Option<PathBuf>,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress output or tables (warnings are still printed).
    #[arg(long)]
    pub quiet: bool,
    /// Write the first N realization maps of the field totals under `realizations/`.
    #[arg(long, value_name = "N")]
    pub keep_realizations: Option<usize>,
}

/// Where the bundled demo project lives.
pub fn demo_project() -> PathBuf {
    let built_in = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-data/project.toml");
    if built_in.is_file() {
        built_in
    } else {
        PathBuf::from("demo-data/project.toml")
    }
}

/// Runs `tidemark demo`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    super::run::set_threads(args.threads)?;
    super::run::check_keep(args.keep_realizations)?;
    let project = args.project.clone().unwrap_or_else(demo_project);
    anyhow::ensure!(
        project.is_file(),
        "{}: demo project not found (run from the source tree, or pass --project)",
        project.display()
    );
    let t0 = std::time::Instant::now();
    let mut opts = RunOptions::new(&project, &args.out);
    opts.quiet = args.quiet;
    opts.formats = Formats::default();
    opts.keep_realizations = args.keep_realizations;
    let outcome = run_pipeline(&opts).context("running the demo")?;
    super::run::print_closing(&outcome, args.quiet);
    let truth = project.parent().map(|p| p.join("truth"));
    if let Some(truth) = truth.filter(|t| t.is_dir()) {
        crate::pipeline::score::score_and_report(&outcome.out, &truth)
            .context("scoring the demo against its truth")?;
    }
    let secs = t0.elapsed().as_secs_f64();
    println!("demo finished in {secs:.1} s");
    println!("  report:   {}", outcome.out.join("report.html").display());
    println!("  maps:     {}", outcome.out.join("maps").display());
    println!("  pictures: {}", outcome.out.join("pictures").display());
    println!("  targets:  {}", outcome.out.join("targets.csv").display());
    println!("  scores:   {}", outcome.out.join("summary.json").display());
    println!("Results are decision support, not a reserves estimate; see the report's cautions.");
    Ok(0)
}
