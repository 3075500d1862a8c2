//! `tidemark report RESULTS`: rebuilds the self-contained review page `RESULTS/report.html` from
//! the page input `RESULTS/report-data.json` that `run` saved.

use std::path::PathBuf;

use anyhow::Context;

use crate::report::{DATA_FILE, ReportInput, write_html};

/// Arguments of `tidemark report`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Results folder written by `tidemark run` (holds report-data.json).
    pub results: PathBuf,
    /// Print nothing on success.
    #[arg(long)]
    pub quiet: bool,
}

/// Runs `tidemark report`: reads `RESULTS/report-data.json`, writes `RESULTS/report.html`
/// through a temporary file and a rename. Returns the exit status (0 on success).
pub fn run(args: Args) -> anyhow::Result<u8> {
    if !args.results.is_dir() {
        anyhow::bail!(
            "{}: not a results folder (expected the folder written by `tidemark run`)",
            args.results.display()
        );
    }
    let data = args.results.join(DATA_FILE);
    let input = ReportInput::load(&data)
        .with_context(|| format!("cannot read the page input {}", data.display()))?;
    let page = write_html(&input, &args.results)
        .with_context(|| format!("cannot write the review page in {}", args.results.display()))?;
    if !args.quiet {
        println!("wrote {}", page.display());
    }
    Ok(0)
}
