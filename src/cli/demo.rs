//! `tidemark demo` (placeholder until its issue lands).

/// Arguments of `tidemark demo`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Runs `tidemark demo`.
pub fn run(_args: Args) -> anyhow::Result<u8> {
    anyhow::bail!("tidemark demo is not built yet")
}
