/// Grid nodes (`grid.nx * grid.ny`): 50 million, 400 MB per map in memory.
pub const MAX_GRID_NODES: u64 = 50_000_000;
/// Map values held at once (`steps * attributes * nodes`): 250 million, 2 GB in memory.
pub const MAX_MAP_VALUES: u64 = 250_000_000;
/// Bytes of a step, attribute, target or threshold name (they become file names, which
/// most file systems cap at 255 bytes).
pub const MAX_NAME_BYTES: usize = 64;
/// Trees of the forest (`model.trees`).
pub const MAX_TREES: i64 = 10_000;
/// Boosting rounds (`model.boost_rounds`).
pub const MAX_BOOST_ROUNDS: i64 = 10_000;
/// Folds (`calibration.folds`).
pub const MAX_FOLDS: i64 = 1_000;
/// Mondrian bins (`calibration.max_bins`).
pub const MAX_BINS: i64 = 100;
/// Repeats per learning-curve point (`report.learning_curve_repeats`).
pub const MAX_REPEATS: i64 = 100;
/// Targets listed by the infill ranking (`infill.count`).
pub const MAX_INFILL_COUNT: i64 = 10_000;
/// The drainage radius in node spacings along either grid axis (`infill.drainage_radius`).
pub const MAX_DRAINAGE_NODES: f64 = 1_000.0;
/// The extraction radius in node spacings along either grid axis (`extract.radius`).
pub const MAX_EXTRACT_NODES: f64 = 100.0;
/// A smoothing width in node spacings along either grid axis (`smoothing.widths`).
pub const MAX_SMOOTHING_NODES: f64 = 50.0;
/// Widths listed in `smoothing.widths`.
pub const MAX_SMOOTHING_WIDTHS: usize = 8;
/// Bytes of the manifest itself.
pub const MAX_MANIFEST_BYTES: u64 = 16 << 20;
/// Plain counts without a limit of their own (`min_samples_leaf`, `min_wells_per_bin`, the
/// depth limits).
pub const MAX_COUNT: i64 = 1_000_000_000;
