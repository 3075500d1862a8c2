//! `tidemark run` (placeholder until its issue lands).

/// Arguments of `tidemark run`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark run`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark run is not built yet")
}
