//! The stages of calibrating one target, in the order [`super::calibrate_target`] runs them.
//!
//! Each stage is a function with its own inputs (plain slices and a few small structs, never one
//! context that every stage reads), its own output and its own diagnostics type, which lands in
//! [`super::TargetDiagnostics`]. Stages that warn push plain sentences onto the target's warning
//! list, in stage order.
//!
//! | stage | function | input -> output |
//! |---|---|---|
//! | folds | [`oof::split`] | wells, locations -> [`Folds`](crate::calibrate::folds::Folds) (whole wells per fold) |
//! | out-of-fold predictions | [`oof::predict`] | rows, folds -> [`oof::OofPredictions`] |
//! | learner choice | [`learner::choose`] | out-of-fold forest and booster -> [`learner::ChosenLearner`] |
//! | end-bias correction | [`correction::fit`] | learner's out-of-fold prediction -> [`correction::Correction`] |
//! | band candidates | [`band::candidates`] | corrected prediction, quantiles -> [`band::OofBand`] list |
//! | band choice | [`band::choose`] | candidate list -> index of the kept one |
//! | band | [`band::finish`] | kept candidate -> [`band::Band`] (final calibration, out-of-fold edges) |
//! | exceedance | [`exceedance::calibrate`] | corrected prediction, band scale, forest CDF -> [`exceedance::Exceedance`] |
//! | metrics | [`metrics::score`] | out-of-fold middle, band, probabilities -> [`metrics::OofScores`] |
//! | final models | [`models::fit_final`] | all rows -> [`models::FinalModels`] |
//! | residual kriging | [`kriging::fit`] | held-out errors at well locations -> [`kriging::Kriged`] (corrected middle, band scale; before the spread) |
//!
//! Every out-of-fold quantity after the predictions is cross-fitted on the same folds: the value
//! of a held-out row comes from a map fitted on the other folds' out-of-fold rows, and the final
//! map is fitted on all of them.
//!
//! **Adding a stage.** Write it as a module here with its input, output and diagnostics types,
//! call it from [`super::calibrate_target`] where its inputs exist, and add its diagnostics to
//! [`super::TargetDiagnostics`] (with `#[serde(default)]`, so older `summary.json` and
//! `model.json` files still load). A stage that reshapes the band (for example widening it with
//! the dissimilarity to the training wells) goes between [`band::finish`] and
//! [`exceedance::calibrate`] and takes the kept [`band::Band`]'s out-of-fold edges; another band
//! choice rule replaces [`band::choose`]; verdicts on the out-of-fold scores go in
//! [`metrics::score`].

pub mod band;
pub mod correction;
pub mod exceedance;
pub mod hurdle;
pub mod kriging;
pub mod learner;
pub mod metrics;
pub mod models;
pub mod oof;
pub mod spread;

/// Seed stream of the fold assignment.
const STREAM_FOLDS: u64 = 1;
/// Seed stream of the forests.
const STREAM_FOREST: u64 = 2;
/// Seed stream of the boosters.
const STREAM_BOOST: u64 = 3;

/// SplitMix64 finaliser (Steele, Lea & Flood 2014) to derive independent seeds.
fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// The seed of item `index` of random stream `stream` under the user's `seed`.
fn derive_seed(seed: u64, stream: u64, index: u64) -> u64 {
    mix(seed ^ mix(stream.wrapping_mul(0x1_0000_0001).wrapping_add(index)))
}

/// Weighted mean squared error.
fn wmse(y: &[f64], p: &[f64], w: &[f64]) -> f64 {
    let (mut s, mut sw) = (0.0, 0.0);
    for i in 0..y.len() {
        s += w[i] * (y[i] - p[i]).powi(2);
        sw += w[i];
    }
    if sw > 0.0 { s / sw } else { f64::NAN }
}
