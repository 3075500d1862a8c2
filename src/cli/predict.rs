//! `tidemark predict MODEL PROJECT --out DIR [--tile i/N]`: applies a saved model.

use crate::pipeline::outputs::Formats;
use crate::pipeline::predict::{Tile, predict};
use anyhow::Context;
use std::path::PathBuf;

/// Arguments of `tidemark predict`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// model.json written by `tidemark run`.
    pub model: PathBuf,
    /// A project with the same attributes.
    pub project: PathBuf,
    /// Results folder.
    #[arg(long)]
    pub out: PathBuf,
    /// Only tile i of N bands of grid rows (1-based), e.g. 3/8.
    #[arg(long)]
    pub tile: Option<Tile>,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Skip the XYZ text copies of the maps.
    #[arg(long)]
    pub no_xyz: bool,
}

/// Runs `tidemark predict`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    super::run::set_threads(args.threads)?;
    let formats = Formats {
        geotiff: true,
        xyz: !args.no_xyz,
    };
    let rec = predict(&args.model, &args.project, &args.out, args.tile, formats)
        .with_context(|| format!("applying {}", args.model.display()))?;
    for w in &rec.warnings {
        eprintln!("warning: {w}");
    }
    println!(
        "{} files written under {}",
        rec.files.len(),
        args.out.display()
    );
    Ok(0)
}
