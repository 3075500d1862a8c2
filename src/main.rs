//! The `tidemark` program: parses arguments and dispatches to [`tidemark::cli`].

use clap::{Parser, Subcommand};
use std::process::ExitCode;
use tidemark::cli;

/// Uncertainty and end-bias correction for well-calibrated time-lapse seismic predictions.
#[derive(Parser)]
#[command(name = "tidemark", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Load and validate a project without fitting anything.
    Check(cli::check::Args),
    /// Generate a physics-based synthetic time-lapse field with known truth.
    Synth(cli::synth::Args),
    /// Fit, calibrate, map and rank: the main job.
    Run(cli::run::Args),
    /// Run the main job on the bundled demo project.
    Demo(cli::demo::Args),
    /// Score the maps of a run against the truth maps of a synthetic project.
    Score(cli::score::Args),
    /// Apply a saved calibrated model to a project with the same attributes.
    Predict(cli::predict::Args),
    /// Regenerate the HTML review page of a finished run.
    Report(cli::report::Args),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Check(a) => cli::check::run(a),
        Command::Synth(a) => cli::synth::run(a),
        Command::Run(a) => cli::run::run(a),
        Command::Demo(a) => cli::demo::run(a),
        Command::Score(a) => cli::score::run(a),
        Command::Predict(a) => cli::predict::run(a),
        Command::Report(a) => cli::report::run(a),
    };
    match result {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            // Print the chain of causes once each: many library errors already quote their cause.
            let mut text = String::new();
            for cause in e.chain() {
                let c = cause.to_string();
                if !text.contains(&c) {
                    if !text.is_empty() {
                        text.push_str(": ");
                    }
                    text.push_str(&c);
                }
            }
            eprintln!("error: {text}");
            ExitCode::from(2)
        }
    }
}
