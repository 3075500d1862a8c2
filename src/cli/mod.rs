//! One module per subcommand. Each has `Args` (clap derive) and `run(Args) -> anyhow::Result<u8>`
//! returning the process exit status.

pub mod check;
pub mod demo;
pub mod predict;
pub mod report;
pub mod run;
pub mod score;
pub mod synth;
