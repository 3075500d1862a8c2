//! The first two stages: folds of whole wells, and what the models fitted without a fold say
//! about its rows.
//!
//! **Folds** ([`split`]): one fold vector from [`crate::calibrate::folds::assign`] (grouped
//! k-fold, spatial blocks or leave one well out; Roberts et al. 2017, Ecography 40:913, on
//! blocking for structured data) drives every out-of-fold quantity of the target.
//!
//! **Out-of-fold predictions** ([`predict`]): for each fold, a forest and (unless the learner is
//! fixed to the forest) a booster fitted on the other folds' wells ([`super::models`]) predict
//! the held-out rows: the forest's mean, its conditional quantiles at `(1-level)/2`, 0.5 and
//! `(1+level)/2` and its conditional CDF at each threshold (quantile regression forest,
//! Meinshausen 2006, JMLR 7:983), the CDF at the row's own truth (the probability integral
//! transform, Dawid 1984, JRSS A 147:278), the quantile-forest weights of the row over the fold's
//! training rows (for localised bands; Lu & Hardin 2021, JMLR 22(8)), and the booster's
//! prediction. The folds are fitted in parallel; each fold's seeds come from its index.

use super::models::fit_models;
use super::{STREAM_FOLDS, derive_seed};
use crate::calibrate::error::CalibrateError;
use crate::calibrate::folds::{self, FoldMethod, Folds};
use crate::calibrate::input::{CalibrationSettings, LearnerChoice, TargetData};
use crate::calibrate::units::{count_wells, pick};
use ndarray::Axis;
use rayon::prelude::*;

/// Stage 1: deal the wells `group` (located at `xy`, one entry per row) to folds as the settings
/// ask, seeded from the settings' seed. Warns when fewer folds than requested could be formed.
pub fn split(
    group: &[usize],
    xy: &[[f64; 2]],
    settings: &CalibrationSettings,
    warnings: &mut Vec<String>,
) -> Folds {
    let of_row = folds::assign(
        group,
        xy,
        settings.fold_method,
        settings.folds,
        derive_seed(settings.seed, STREAM_FOLDS, 0),
    );
    let count = folds::n_folds(&of_row);
    if settings.fold_method != FoldMethod::OneWell && count < settings.folds {
        warnings.push(format!(
            "{} folds requested but only {count} could be formed from {} wells",
            settings.folds,
            count_wells(group)
        ));
    }
    Folds { of_row, count }
}

/// The out-of-fold columns: what the models of the fold that held each row's well out predicted
/// for that row. Every column has one entry per row.
#[derive(Clone, Debug, PartialEq)]
pub struct OofPredictions {
    /// Levels of [`Self::quantiles`]: `(1-level)/2`, 0.5, `(1+level)/2`.
    pub levels: [f64; 3],
    /// Forest mean.
    pub forest_mean: Vec<f64>,
    /// Booster prediction (`None` when the learner is fixed to the forest).
    pub boost: Option<Vec<f64>>,
    /// Forest conditional quantiles at [`Self::levels`].
    pub quantiles: [Vec<f64>; 3],
    /// Forest conditional CDF `P(Y <= t)` per threshold `t` (outer), per row (inner).
    pub cdf_at_thresholds: Vec<Vec<f64>>,
    /// Forest conditional CDF at the row's truth (its PIT value before any recalibration).
    pub pit_raw: Vec<f64>,
    /// Quantile-forest weights of the row over its fold models' training rows (increasing row
    /// order, i.e. [`Folds::train`] of its fold).
    pub proximity: Vec<Vec<f64>>,
}

/// What one fold's models say about its held-out rows.
struct FoldOutput {
    rows: Vec<usize>,
    forest_mean: Vec<f64>,
    boost: Vec<f64>,
    q: [Vec<f64>; 3],
    cdf_thresholds: Vec<Vec<f64>>,
    pit_raw: Vec<f64>,
    /// Quantile-forest weights of each held-out row over the fold's training rows.
    prox: Vec<Vec<f64>>,
}

/// Stage 2: fit the fold models and collect their predictions of the held-out rows. The booster
/// is fitted unless the settings fix the learner to the forest.
pub fn predict(
    data: &TargetData,
    settings: &CalibrationSettings,
    folds: &Folds,
) -> Result<OofPredictions, CalibrateError> {
    let n = data.y.len();
    let alpha = 1.0 - settings.level;
    let levels = [alpha / 2.0, 0.5, 1.0 - alpha / 2.0];
    let t_values: Vec<f64> = data.thresholds.iter().map(|t| t.value).collect();
    let use_boost = settings.learner != LearnerChoice::Forest;
    let outputs: Vec<FoldOutput> = (0..folds.count)
        .into_par_iter()
        .map(|f| fit_fold(data, settings, folds, f, use_boost, &levels, &t_values))
        .collect::<Result<Vec<_>, CalibrateError>>()?;
    let mut forest_mean = vec![f64::NAN; n];
    let mut boost = vec![f64::NAN; n];
    let mut quantiles = [vec![f64::NAN; n], vec![f64::NAN; n], vec![f64::NAN; n]];
    let mut cdf_at_thresholds = vec![vec![f64::NAN; n]; t_values.len()];
    let mut pit_raw = vec![f64::NAN; n];
    let mut proximity: Vec<Vec<f64>> = vec![Vec::new(); n];
    for o in &outputs {
        for (j, &i) in o.rows.iter().enumerate() {
            forest_mean[i] = o.forest_mean[j];
            boost[i] = o.boost[j];
            for (col, q) in quantiles.iter_mut().zip(&o.q) {
                col[i] = q[j];
            }
            for (col, c) in cdf_at_thresholds.iter_mut().zip(&o.cdf_thresholds) {
                col[i] = c[j];
            }
            pit_raw[i] = o.pit_raw[j];
            proximity[i] = o.prox[j].clone();
        }
    }
    Ok(OofPredictions {
        levels,
        forest_mean,
        boost: use_boost.then_some(boost),
        quantiles,
        cdf_at_thresholds,
        pit_raw,
        proximity,
    })
}

fn fit_fold(
    data: &TargetData,
    settings: &CalibrationSettings,
    folds: &Folds,
    f: usize,
    use_boost: bool,
    q_levels: &[f64; 3],
    t_values: &[f64],
) -> Result<FoldOutput, CalibrateError> {
    let train = folds.train(f);
    let test = folds.test(f);
    let (forest, booster) = fit_models(data, settings, &train, use_boost, f as u64)?;
    let xt = data.x.select(Axis(0), &test);
    let (mean, q, cdf) = forest.predict_with_distribution(xt.view(), 0, q_levels, t_values);
    let pit_raw = forest.cdf_at(xt.view(), 0, &pick(data.y, &test));
    let prox = xt
        .rows()
        .into_iter()
        .map(|r| forest.quantile_weights(&r.to_vec()))
        .collect();
    let boost = booster.map_or_else(|| vec![f64::NAN; test.len()], |b| b.predict(xt.view()));
    Ok(FoldOutput {
        forest_mean: mean,
        boost,
        q: [
            q.column(0).to_vec(),
            q.column(1).to_vec(),
            q.column(2).to_vec(),
        ],
        cdf_thresholds: (0..t_values.len())
            .map(|t| cdf.column(t).to_vec())
            .collect(),
        pit_raw,
        prox,
        rows: test,
    })
}
