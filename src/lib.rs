//! tidemark: an uncertainty and end-bias correction engine for well-calibrated predictions of
//! reservoir changes (pressure, water and gas saturation) from time-lapse seismic attribute maps.
//!
//! Where things live (see DEVELOPERS.md for the data flow):
//! - [`grid`]: grid geometry (origin, spacing, rotation), node <-> coordinates, bilinear sampling.
//! - [`io`]: readers and atomic writers for XYZ text grids, GeoTIFF and the wells CSV.
//! - [`project`]: the `project.toml` manifest, raw settings checked into a [`project::Project`].
//! - [`sample`]: attribute extraction at wells into a [`sample::TrainingSet`], node feature tables.
//! - [`ensemble`]: binned regression trees, bagged (quantile) forests and gradient boosting.
//! - [`calibrate`]: leave-wells-out folds, isotonic end-bias correction, conformal bands, exceedance.
//! - [`metrics`]: R2, RMSE, coverage, interval score, pinball loss, CRPS, Brier score, PIT.
//! - [`applicability`]: dissimilarity index and area of applicability, training-range checks,
//!   ground the wells do not sample, reason codes.
//! - [`skill`]: skill at held-out wells against climatology, well-bootstrap intervals, verdicts.
//! - [`decide`]: risked infill-target ranking.
//! - [`synth`]: the physics-based synthetic time-lapse field generator.
//! - [`spatial`]: error variograms from the wells, correlated realizations and field totals.
//! - [`report`]: PNG pictures and the self-contained HTML review page.
//! - [`pipeline`]: the main job, end to end (`run`, `predict`, `score`).
//! - [`cli`]: one module per subcommand; `main.rs` only dispatches.

pub mod applicability;
pub mod calibrate;
pub mod check;
pub mod cli;
pub mod decide;
pub mod ensemble;
pub mod grid;
pub mod io;
pub mod metrics;
pub mod outline;
pub mod pipeline;
pub mod project;
pub mod report;
pub mod sample;
pub mod skill;
pub mod smooth;
pub mod spatial;
pub mod synth;
