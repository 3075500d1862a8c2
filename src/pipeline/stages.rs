//! Progress and timing of a run's stages: one line per finished stage on stderr unless quiet,
//! progress bars for the long loops, and the timings that `run.json` and the report list.

use indicatif::{ProgressBar, ProgressStyle};
use serde::Serialize;
use std::time::Instant;

/// Duration of one stage.
#[derive(Clone, Debug, Serialize)]
pub struct Timing {
    /// Stage name.
    pub stage: String,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// Stage reporting: a message per stage unless quiet, and a timing record.
pub struct Stages {
    quiet: bool,
    start: Instant,
    /// Timings of the stages done so far.
    pub timings: Vec<Timing>,
}

impl Stages {
    /// Starts timing.
    pub fn new(quiet: bool) -> Self {
        Self {
            quiet,
            start: Instant::now(),
            timings: Vec::new(),
        }
    }

    /// Ends a stage.
    pub fn done(&mut self, stage: &str) {
        let seconds = self.start.elapsed().as_secs_f64();
        if !self.quiet {
            eprintln!("  {stage:<28} {seconds:7.2} s");
        }
        self.timings.push(Timing {
            stage: stage.to_string(),
            seconds,
        });
        self.start = Instant::now();
    }

    /// A progress bar (hidden when quiet).
    pub fn bar(&self, len: u64, what: &str) -> ProgressBar {
        if self.quiet {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::new(len);
        if let Ok(style) = ProgressStyle::with_template("  {msg:<28} [{bar:30}] {pos}/{len}") {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_message(what.to_string());
        bar
    }
}
