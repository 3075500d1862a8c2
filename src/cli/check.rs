//! `tidemark check PROJECT.toml [--json]`: load and validate a project without fitting anything.
//!
//! Prints the grid, the steps with each attribute's range and null fraction, the wells per step,
//! each target's range and count, and every problem found. Exit status 0 only when the project can
//! be run, 1 when it cannot.

use std::io::Write;
use std::path::PathBuf;

pub use crate::check::{CheckReport, check_project};

/// Arguments of `tidemark check`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The project manifest (project.toml).
    pub manifest: PathBuf,
    /// Print the report as JSON (for machines) instead of text.
    #[arg(long)]
    pub json: bool,
}

/// Runs `tidemark check`; returns 0 when the project can be run, 1 when it cannot.
pub fn run(args: Args) -> anyhow::Result<u8> {
    use anyhow::Context;
    let report = check_project(&args.manifest);
    let mut out = std::io::stdout().lock();
    if args.json {
        serde_json::to_writer_pretty(&mut out, &report).context("writing the JSON report")?;
        writeln!(out)?;
    } else {
        writeln!(out, "{report}")?;
    }
    Ok(if report.runnable { 0 } else { 1 })
}
