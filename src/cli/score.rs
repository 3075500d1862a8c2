//! `tidemark score` (placeholder until its issue lands).

/// Arguments of `tidemark score`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark score`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark score is not built yet")
}
