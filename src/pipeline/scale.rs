//! How much each target smooths its attribute maps: the width chosen by whole-well
//! cross-validation.
//!
//! Every width of `[smoothing] widths` and "none" are scored the same way: a quantile forest
//! (the run's forest settings, at most [`MAX_TREES`] trees) is fitted on the rows of all folds but
//! one and predicts the held-out wells' rows; the score is the mean pinball loss of its quantiles
//! at the band's two levels and the median (the three-quantile approximation of the CRPS,
//! Gneiting & Raftery 2007, "Strictly proper scoring rules, prediction, and estimation", JASA
//! 102:359-378), averaged per well and then over wells, so that a well counts once whatever its
//! number of steps. The folds are the run's (whole wells held out).
//!
//! The width kept is the smallest one whose score is within one standard error of the best
//! score: the one-standard-error rule of Breiman, Friedman, Olshen & Stone (1984, "Classification
//! and Regression Trees", section 3.4.3), here with the standard error of the per-well
//! differences to the best candidate (the candidates are scored on the same wells, so their
//! difference is what varies). Less smoothing wins a near-tie: a width has to earn its place by
//! more than the wells' scatter, and a choice on the edge of a tie does not swing the maps.
//!
//! Wells stand at the centres of drawdown cones and water fronts, where smoothing flattens the
//! peak the well sits on; so the held-out wells are the harder test for a width, and a width
//! they accept is not too wide for the ground between them (DEVELOPERS.md gives the
//! measurements on generated fields).

use super::PipelineError;
use crate::calibrate::CalibrationSettings;
use crate::ensemble::ForestSettings;
use crate::sample::TrainingSet;
use ndarray::{Array2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Trees of each cross-validation forest (fewer if the run's forest has fewer).
pub const MAX_TREES: usize = 100;

/// One candidate width and its cross-validated score.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WidthScore {
    /// Gaussian width in metres; 0 = the plain attributes.
    pub width: f64,
    /// Mean over wells of the held-out rows' mean pinball loss (three levels), target units.
    pub loss: f64,
    /// Mean per-well difference to the best candidate (0 for the best).
    pub excess: f64,
    /// Standard error of that difference over the wells (0 for the best).
    pub se: f64,
}

/// The width a target smooths its attributes by, and how every candidate scored.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct WidthChoice {
    /// The width kept, metres (0 = none).
    pub width: f64,
    /// Every candidate, "none" first, then ascending width.
    pub candidates: Vec<WidthScore>,
    /// Wells scored.
    pub wells: usize,
    /// False when `[smoothing] targets` leaves this target out (absent in models written
    /// before the key existed: true).
    #[serde(default = "offered")]
    pub offered: bool,
}

fn offered() -> bool {
    true
}

impl WidthChoice {
    /// No smoothing, nothing scored (smoothing off, or too few wells to score).
    pub fn none() -> WidthChoice {
        WidthChoice {
            width: 0.0,
            candidates: Vec::new(),
            wells: 0,
            offered: true,
        }
    }

    /// No smoothing because the manifest does not offer it to the target.
    pub fn not_offered() -> WidthChoice {
        WidthChoice {
            offered: false,
            ..WidthChoice::none()
        }
    }
}

/// Chooses target `t`'s smoothing width among none and `ts.smoothed`'s widths on the rows `rows`
/// (where the target was measured) with the fold of every training-set row `folds`. Without
/// widths, or with fewer than two folds among the rows, no smoothing.
pub fn choose(
    ts: &TrainingSet,
    t: usize,
    rows: &[usize],
    folds: &[usize],
    settings: &CalibrationSettings,
) -> Result<WidthChoice, PipelineError> {
    let fold_ids: std::collections::BTreeSet<usize> = rows.iter().map(|&r| folds[r]).collect();
    if ts.smoothed.is_empty() || fold_ids.len() < 2 {
        return Ok(WidthChoice::none());
    }
    let lo = (1.0 - settings.level) / 2.0;
    let levels = [lo, 0.5, 1.0 - lo];
    let forest = ForestSettings {
        n_trees: settings.forest.n_trees.min(MAX_TREES),
        seed: settings.seed ^ 0x5ca1_e5ee_d000_0001,
        ..settings.forest.clone()
    };
    let mut widths = vec![0.0];
    widths.extend(ts.smoothed.iter().map(|(w, _)| *w));
    let y: Vec<f64> = rows.iter().map(|&r| ts.y[[r, t]]).collect();
    let weight: Vec<f64> = rows.iter().map(|&r| ts.weight[r]).collect();
    let fold: Vec<usize> = rows.iter().map(|&r| folds[r]).collect();
    let losses: Vec<Vec<f64>> = widths
        .par_iter()
        .map(|&w| {
            let set = ts
                .at_width(w)
                .expect("every width of ts.smoothed has a set");
            let x = set.x.select(Axis(0), rows);
            row_losses(&x, &y, &weight, &fold, &fold_ids, &forest, &levels)
        })
        .collect::<Result<_, _>>()?;
    // Per-well means (wells in order of first row), weighted by the row weights.
    let mut well_of: Vec<usize> = Vec::with_capacity(rows.len());
    let mut seen: Vec<usize> = Vec::new();
    for &r in rows {
        let g = ts.group[r];
        let k = seen.iter().position(|&v| v == g).unwrap_or_else(|| {
            seen.push(g);
            seen.len() - 1
        });
        well_of.push(k);
    }
    let per_well: Vec<Vec<f64>> = losses
        .iter()
        .map(|l| {
            let mut sum = vec![0.0; seen.len()];
            let mut wsum = vec![0.0; seen.len()];
            for ((&k, &v), &w) in well_of.iter().zip(l).zip(&weight) {
                sum[k] += w * v;
                wsum[k] += w;
            }
            sum.iter()
                .zip(&wsum)
                .map(|(s, w)| if *w > 0.0 { s / w } else { 0.0 })
                .collect()
        })
        .collect();
    Ok(one_se_choice(&widths, &per_well))
}

/// The one-standard-error rule on per-well losses (`per_well[candidate][well]`, candidates in
/// the order of `widths`, simplest first).
pub fn one_se_choice(widths: &[f64], per_well: &[Vec<f64>]) -> WidthChoice {
    let n = per_well.first().map_or(0, Vec::len);
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len().max(1) as f64;
    let loss: Vec<f64> = per_well.iter().map(|v| mean(v)).collect();
    let best = (0..loss.len())
        .min_by(|&a, &b| loss[a].total_cmp(&loss[b]))
        .unwrap_or(0);
    let candidates: Vec<WidthScore> = widths
        .iter()
        .zip(per_well)
        .zip(&loss)
        .map(|((&width, v), &l)| {
            let d: Vec<f64> = v.iter().zip(&per_well[best]).map(|(a, b)| a - b).collect();
            let m = mean(&d);
            let var = if n > 1 {
                d.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1) as f64
            } else {
                0.0
            };
            WidthScore {
                width,
                loss: l,
                excess: m,
                se: (var / n.max(1) as f64).sqrt(),
            }
        })
        .collect();
    let kept = candidates
        .iter()
        .position(|c| c.excess <= c.se)
        .unwrap_or(best);
    WidthChoice {
        width: widths.get(kept).copied().unwrap_or(0.0),
        candidates,
        wells: n,
        offered: true,
    }
}

/// Held-out mean pinball loss of every row: per fold, a forest on the other folds' rows predicts
/// the fold's rows at `levels`.
fn row_losses(
    x: &Array2<f64>,
    y: &[f64],
    weight: &[f64],
    fold: &[usize],
    fold_ids: &std::collections::BTreeSet<usize>,
    forest: &ForestSettings,
    levels: &[f64],
) -> Result<Vec<f64>, PipelineError> {
    let mut out = vec![f64::NAN; y.len()];
    for &f in fold_ids {
        let train: Vec<usize> = (0..y.len()).filter(|&r| fold[r] != f).collect();
        let test: Vec<usize> = (0..y.len()).filter(|&r| fold[r] == f).collect();
        let xt = x.select(Axis(0), &train);
        let yt = Array2::from_shape_fn((train.len(), 1), |(k, _)| y[train[k]]);
        let wt: Vec<f64> = train.iter().map(|&r| weight[r]).collect();
        let model = ForestSettings {
            seed: forest.seed ^ (f as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15),
            ..forest.clone()
        }
        .fit(xt.view(), yt.view(), Some(&wt))?;
        let (q, _) = model.predict_distribution(x.select(Axis(0), &test).view(), 0, levels, &[]);
        for (k, &r) in test.iter().enumerate() {
            let loss: f64 = levels
                .iter()
                .enumerate()
                .map(|(j, &a)| pinball(y[r], q[[k, j]], a))
                .sum();
            out[r] = loss / levels.len() as f64;
        }
    }
    Ok(out)
}

/// Pinball loss of quantile `q` at level `a` for the outcome `y`.
fn pinball(y: f64, q: f64, a: f64) -> f64 {
    if y >= q {
        a * (y - q)
    } else {
        (1.0 - a) * (q - y)
    }
}
