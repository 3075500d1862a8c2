//! `tidemark synth`: generate the synthetic Skerrow Bank field as a complete project with known
//! truth (see [`crate::synth`]).

use crate::synth::{self, SynthRecord, SynthSettings, WellKind};
use anyhow::{Context, bail};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Arguments of `tidemark synth`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Folder to write the project into (created if missing; must be empty unless --force).
    #[arg(long)]
    pub out: PathBuf,
    /// Start from the settings in this JSON file (a synth.json or a bare settings object); the
    /// options below override it.
    #[arg(long, value_name = "FILE")]
    pub from: Option<PathBuf>,
    /// Seed of every random choice [default 7].
    #[arg(long)]
    pub seed: Option<u64>,
    /// Grid nodes along x [default 120].
    #[arg(long)]
    pub nx: Option<usize>,
    /// Grid nodes along y [default 100].
    #[arg(long)]
    pub ny: Option<usize>,
    /// Node spacing in metres [default 50].
    #[arg(long)]
    pub spacing: Option<f64>,
    /// Grid rotation, degrees counter-clockwise from east [default 0].
    #[arg(long, allow_hyphen_values = true)]
    pub rotation: Option<f64>,
    /// Number of wells [default 45].
    #[arg(long)]
    pub wells: Option<usize>,
    /// Observation wells besides the producers and injectors, placed uniformly [default 0].
    #[arg(long)]
    pub observers: Option<usize>,
    /// Number of monitor surveys (steps m1..mN) [default 4].
    #[arg(long)]
    pub steps: Option<usize>,
    /// Years between monitor surveys [default 1.5].
    #[arg(long)]
    pub interval: Option<f64>,
    /// Signal-to-noise ratio of the seismic amplitudes [default 12].
    #[arg(long)]
    pub snr: Option<f64>,
    /// Number of stacked sands, 1 or 2 [default 2].
    #[arg(long)]
    pub sands: Option<usize>,
    /// Leave out the sealing fault (one pressure compartment).
    #[arg(long)]
    pub no_fault: bool,
    /// Add a second well-free region: a sealed culmination drained from beyond the survey, where
    /// gas comes out of solution and gathers as a cap (masked as truth/masks/gas_cap.tif).
    #[arg(long)]
    pub gas_cap: bool,
    /// Write into a non-empty folder. Only files an earlier run of `tidemark synth` wrote there
    /// are replaced; any other file in the way stops the run.
    #[arg(long)]
    pub force: bool,
}

/// Reads settings from a synth.json (its `settings`) or from a bare settings object.
fn read_settings(path: &Path) -> anyhow::Result<SynthSettings> {
    let text =
        std::fs::read_to_string(path).with_context(|| format!("reading {}", path.display()))?;
    if let Ok(record) = SynthRecord::from_json(&text) {
        return Ok(record.settings);
    }
    SynthSettings::from_json(&text).map_err(|e| {
        anyhow::anyhow!(
            "{}: neither a synth.json nor a settings object: {e}",
            path.display()
        )
    })
}

/// Runs `tidemark synth`.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let mut s = match &args.from {
        Some(p) => read_settings(p)?,
        None => SynthSettings::default(),
    };
    if let Some(v) = args.seed {
        s.seed = v;
    }
    if let Some(v) = args.nx {
        s.nx = v;
    }
    if let Some(v) = args.ny {
        s.ny = v;
    }
    if let Some(v) = args.spacing {
        s.spacing = v;
    }
    if let Some(v) = args.rotation {
        s.rotation = v;
    }
    if let Some(v) = args.wells {
        s.wells = v;
    }
    if let Some(v) = args.observers {
        s.observers = v;
    }
    if let Some(v) = args.steps {
        s.steps = v;
    }
    if let Some(v) = args.interval {
        s.monitor_interval_years = v;
    }
    if let Some(v) = args.snr {
        s.snr = v;
    }
    if let Some(v) = args.sands {
        s.sands = v;
    }
    if args.no_fault {
        s.fault = false;
    }
    if args.gas_cap {
        s.gas_cap = true;
    }
    s.validate()?;

    let out = &args.out;
    if out.exists() {
        if !out.is_dir() {
            bail!("{}: exists and is not a folder", out.display());
        }
        let non_empty = std::fs::read_dir(out)
            .with_context(|| format!("reading {}", out.display()))?
            .next()
            .is_some();
        if non_empty && !args.force {
            bail!(
                "{}: folder is not empty; choose another --out or pass --force to replace an \
                 earlier synth output there",
                out.display()
            );
        }
    }

    let start = Instant::now();
    let field = synth::generate(&s)?;
    synth::write_project(&field, &s, out)?;
    let count = |kind: WellKind| field.wells.iter().filter(|w| w.kind == kind).count();
    println!(
        "wrote {} (synthetic, seed {}) to {}: {} x {} nodes at {} m, {} steps, {} wells \
         ({} producers, {} injectors, {} observers), {} well observations, {} attributes per \
         step, well-free regions masked: {}, in {:.1} s",
        synth::project::FIELD_NAME,
        s.seed,
        out.display(),
        s.nx,
        s.ny,
        s.spacing,
        s.steps,
        field.wells.len(),
        count(WellKind::Producer),
        count(WellKind::Injector),
        count(WellKind::Observer),
        field.well_rows.len(),
        field.attribute_names.len(),
        if field.masks.is_empty() {
            "none".to_string()
        } else {
            field
                .masks
                .iter()
                .map(|(n, _)| n.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        },
        start.elapsed().as_secs_f64()
    );
    Ok(0)
}
