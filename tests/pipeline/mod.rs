//! End-to-end tests of the main job on small generated fields.

pub(crate) mod end_to_end;
mod infill;
mod kinds;
mod known;
mod report;
mod smoothing;
mod totals;
mod truth;
mod verdicts;
mod warnings;
