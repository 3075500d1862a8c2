//! Learner choice: forest, booster, or a blend `w forest + (1-w) booster` with `w` in
//! {1, 0.75, 0.5, 0.25, 0}, whichever has the lowest out-of-fold weighted mean squared error.
//! Squared error is a consistent scoring function for the mean (Gneiting 2011, "Making and
//! evaluating point forecasts", JASA 106:746), so the comparison rewards the candidate whose
//! prediction is closest to the conditional mean on wells it never saw.

use super::oof::OofPredictions;
use super::wmse;
use crate::calibrate::input::LearnerChoice;
use crate::metrics::serde_nan;
use serde::{Deserialize, Serialize};

/// Out-of-fold score of one learner candidate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LearnerScore {
    /// Weight of the forest in the blend (1 = forest only, 0 = booster only).
    pub forest_weight: f64,
    /// Out-of-fold weighted mean squared error.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse: f64,
}

/// The learner choice and the scores that made it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LearnerDiagnostics {
    /// The setting.
    pub setting: LearnerChoice,
    /// `"forest"`, `"boost"` or `"blend"`.
    pub chosen: String,
    /// Forest weight of the chosen candidate.
    pub forest_weight: f64,
    /// Every candidate tried.
    pub scores: Vec<LearnerScore>,
}

/// The kept learner and its out-of-fold prediction.
#[derive(Clone, Debug, PartialEq)]
pub struct ChosenLearner {
    /// Forest weight of the kept blend (1 = forest only, 0 = booster only).
    pub forest_weight: f64,
    /// Its out-of-fold prediction per row (not yet clipped to the bounds).
    pub raw: Vec<f64>,
    /// The scores that made the choice.
    pub diagnostics: LearnerDiagnostics,
}

/// Stage 3: score every blend the `setting` allows on the out-of-fold rows (truth `y`, row
/// weights `weight`) and keep the lowest weighted mean squared error; on a tie the candidate with
/// more forest weight wins, and a score that is not a number loses to any that is.
pub fn choose(
    oof: &OofPredictions,
    y: &[f64],
    weight: &[f64],
    setting: LearnerChoice,
) -> ChosenLearner {
    let n = y.len();
    let forest = &oof.forest_mean;
    let boost = |i: usize| oof.boost.as_ref().map_or(f64::NAN, |b| b[i]);
    let candidates: Vec<f64> = match setting {
        LearnerChoice::Forest => vec![1.0],
        LearnerChoice::Boost => vec![0.0],
        LearnerChoice::Auto => vec![1.0, 0.75, 0.5, 0.25, 0.0],
    };
    let blend = |w: f64| -> Vec<f64> {
        (0..n)
            .map(|i| {
                if w >= 1.0 {
                    forest[i]
                } else if w <= 0.0 {
                    boost(i)
                } else {
                    w * forest[i] + (1.0 - w) * boost(i)
                }
            })
            .collect()
    };
    let scores: Vec<LearnerScore> = candidates
        .iter()
        .map(|&w| LearnerScore {
            forest_weight: w,
            mse: wmse(y, &blend(w), weight),
        })
        .collect();
    let best = scores
        .iter()
        .fold(None::<&LearnerScore>, |acc, s| match acc {
            Some(a) if a.mse <= s.mse || s.mse.is_nan() => Some(a),
            _ => Some(s),
        })
        .map_or(1.0, |s| s.forest_weight);
    let chosen = if best >= 1.0 {
        "forest"
    } else if best <= 0.0 {
        "boost"
    } else {
        "blend"
    };
    ChosenLearner {
        forest_weight: best,
        raw: blend(best),
        diagnostics: LearnerDiagnostics {
            setting,
            chosen: chosen.to_string(),
            forest_weight: best,
            scores,
        },
    }
}
