//! `tidemark check` (placeholder until its issue lands).

/// Arguments of `tidemark check`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark check`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark check is not built yet")
}
