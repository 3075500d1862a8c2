//! Fitting the learners: the fold models of the out-of-fold stage and the final models.
//!
//! The forest is a bagged regression forest that keeps its leaves' training rows, which makes it
//! a quantile regression forest (Breiman 2001, Machine Learning 45:5; Meinshausen 2006, JMLR
//! 7:983); the booster is gradient-boosted trees (Friedman 2001, Ann. Stat. 29:1189) with early
//! stopping on held-out wells. Fit `i` of a target draws its seeds from item `i` of the forest and
//! booster streams: folds `0..k` for the fold models, `k` for the final models, so that no result
//! depends on which thread fitted what.

use super::{STREAM_BOOST, STREAM_FOREST, derive_seed};
use crate::calibrate::error::CalibrateError;
use crate::calibrate::folds::Folds;
use crate::calibrate::input::{CalibrationSettings, TargetData};
use crate::calibrate::units::pick;
use crate::ensemble::{BoostSettings, Booster, Forest, ForestSettings};
use ndarray::{Array2, Axis};

/// The models fitted on all rows, which predict the grid nodes.
pub struct FinalModels {
    /// Forest fitted on all rows.
    pub forest: Forest,
    /// Booster fitted on all rows, when the kept learner gives it some weight.
    pub booster: Option<Booster>,
}

/// Final models: the forest, and the booster when `with_boost` (the kept blend gives it some
/// weight), fitted on all rows with the seeds that follow the `folds`' fold models.
pub fn fit_final(
    data: &TargetData,
    settings: &CalibrationSettings,
    with_boost: bool,
    folds: &Folds,
) -> Result<FinalModels, CalibrateError> {
    let all: Vec<usize> = (0..data.y.len()).collect();
    let (forest, booster) = fit_models(data, settings, &all, with_boost, folds.count as u64)?;
    Ok(FinalModels { forest, booster })
}

/// Fit the forest (and the booster when asked) on `rows`; `index` numbers the fit for seeds.
pub(super) fn fit_models(
    data: &TargetData,
    settings: &CalibrationSettings,
    rows: &[usize],
    with_boost: bool,
    index: u64,
) -> Result<(Forest, Option<Booster>), CalibrateError> {
    let x = data.x.select(Axis(0), rows);
    let y = pick(data.y, rows);
    let w = pick(data.weight, rows);
    let g = pick(data.group, rows);
    let fs = ForestSettings {
        seed: derive_seed(settings.seed, STREAM_FOREST, index),
        ..settings.forest.clone()
    };
    let y2 = Array2::from_shape_fn((y.len(), 1), |(i, _)| y[i]);
    let forest = fs.fit(x.view(), y2.view(), Some(&w))?;
    let booster = if with_boost {
        let bs = BoostSettings {
            seed: derive_seed(settings.seed, STREAM_BOOST, index),
            ..settings.boost.clone()
        };
        Some(bs.fit(x.view(), &y, Some(&w), Some(&g))?)
    } else {
        None
    };
    Ok((forest, booster))
}
