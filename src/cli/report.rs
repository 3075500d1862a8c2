//! `tidemark report` (placeholder until its issue lands).

/// Arguments of `tidemark report`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark report`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark report is not built yet")
}
