//! `tidemark predict` (placeholder until its issue lands).

/// Arguments of `tidemark predict`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark predict`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark predict is not built yet")
}
