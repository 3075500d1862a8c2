//! `tidemark synth` (placeholder until its issue lands).

/// Arguments of `tidemark synth`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark synth`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark synth is not built yet")
}
