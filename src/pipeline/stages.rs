//! Progress and timing of a run's stages: a transient line naming the stage under way and
//! progress bars for the long loops (on stderr, only when it is a terminal and the run is not
//! quiet; they are cleared when done), and the timings that `run.json`, the report and the
//! console's closing table list. Nothing stays on the console while the run works, so that the
//! first lines a run leaves are its warnings, verdicts without skill first.

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

/// Stage reporting: a transient line per stage unless quiet, and a timing record.
pub struct Stages {
    quiet: bool,
    start: Instant,
    /// The transient "stage under way" line (hidden when quiet or not on a terminal).
    line: ProgressBar,
    /// Timings of the stages done so far.
    pub timings: Vec<Timing>,
}

impl Stages {
    /// Starts timing.
    pub fn new(quiet: bool) -> Self {
        let line = if quiet {
            ProgressBar::hidden()
        } else {
            let line = ProgressBar::new_spinner();
            line.set_message("working");
            line
        };
        Self {
            quiet,
            start: Instant::now(),
            line,
            timings: Vec::new(),
        }
    }

    /// Ends a stage: records its time and shows it on the transient line.
    pub fn done(&mut self, stage: &str) {
        let seconds = self.start.elapsed().as_secs_f64();
        self.line
            .set_message(format!("{stage} done in {seconds:.2} s"));
        self.line.tick();
        self.timings.push(Timing {
            stage: stage.to_string(),
            seconds,
        });
        self.start = Instant::now();
    }

    /// Clears the transient line (call once the run has finished).
    pub fn clear(&self) {
        self.line.finish_and_clear();
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

/// The closing table of stage times, one line each (`  stage   seconds s`).
pub fn timing_lines(timings: &[Timing]) -> Vec<String> {
    timings
        .iter()
        .map(|t| format!("  {:<28} {:7.2} s", t.stage, t.seconds))
        .collect()
}
