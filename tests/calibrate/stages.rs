//! The contracts of single calibration stages, on inputs small enough to check by hand.

use tidemark::calibrate::conformal::{BandBase, BandMethod};
use tidemark::calibrate::stages::band::{self, BandSpec, OofBand};
use tidemark::calibrate::stages::oof::{self, OofPredictions};
use tidemark::calibrate::stages::{correction, learner};
use tidemark::calibrate::{CalibrationSettings, LearnerChoice};

fn oof_columns(forest: Vec<f64>, boost: Option<Vec<f64>>) -> OofPredictions {
    let n = forest.len();
    OofPredictions {
        levels: [0.1, 0.5, 0.9],
        forest_mean: forest,
        boost,
        quantiles: [vec![0.0; n], vec![0.0; n], vec![0.0; n]],
        cdf_at_thresholds: Vec::new(),
        pit_raw: vec![0.5; n],
        proximity: vec![Vec::new(); n],
    }
}

#[test]
fn learner_choice_keeps_the_lowest_squared_error() {
    let y = [1.0, 2.0, 3.0, 4.0];
    let w = [1.0; 4];
    let plus = |d: f64| y.iter().map(|v| v + d).collect::<Vec<f64>>();
    // Forest exact, booster one off: the forest alone.
    let c = learner::choose(
        &oof_columns(plus(0.0), Some(plus(1.0))),
        &y,
        &w,
        LearnerChoice::Auto,
    );
    assert_eq!(c.forest_weight, 1.0);
    assert_eq!(c.diagnostics.chosen, "forest");
    assert_eq!(c.raw, y);
    // Errors of opposite sign cancel in the even blend: MSE 1, 0.25, 0, 0.25, 1.
    let c = learner::choose(
        &oof_columns(plus(1.0), Some(plus(-1.0))),
        &y,
        &w,
        LearnerChoice::Auto,
    );
    assert_eq!(c.forest_weight, 0.5);
    assert_eq!(c.diagnostics.chosen, "blend");
    let mse: Vec<f64> = c.diagnostics.scores.iter().map(|s| s.mse).collect();
    assert_eq!(mse, vec![1.0, 0.25, 0.0, 0.25, 1.0]);
    // Equal scores: the candidate with more forest weight.
    let c = learner::choose(
        &oof_columns(plus(1.0), Some(plus(1.0))),
        &y,
        &w,
        LearnerChoice::Auto,
    );
    assert_eq!(c.forest_weight, 1.0);
    // A fixed learner is the only candidate.
    let c = learner::choose(&oof_columns(plus(1.0), None), &y, &w, LearnerChoice::Forest);
    assert_eq!(c.diagnostics.scores.len(), 1);
    assert_eq!(c.forest_weight, 1.0);
}

fn candidate(score: f64) -> OofBand {
    OofBand {
        spec: BandSpec {
            method: BandMethod::CvResidual,
            max_bins: 1,
            locality: 0.0,
        },
        base: vec![BandBase::centred(0.0)],
        lo: vec![-1.0],
        hi: vec![1.0],
        at_bounds: vec![false],
        score,
    }
}

#[test]
fn band_choice_keeps_the_first_strictly_lowest_score() {
    let list = |s: &[f64]| s.iter().map(|&v| candidate(v)).collect::<Vec<_>>();
    assert_eq!(band::choose(&list(&[2.0, 1.0, 1.0, 3.0])), 1);
    assert_eq!(band::choose(&list(&[2.0, f64::NAN, 1.5])), 2);
    assert_eq!(band::choose(&list(&[0.5])), 0);
}

#[test]
fn end_correction_is_kept_only_when_it_lowers_the_error() {
    // Truth 0..1 over 40 wells of one row; the prediction shrinks it by half towards 0.5, which
    // a monotone map undoes.
    let y: Vec<f64> = (0..40).map(|i| f64::from(i) / 39.0).collect();
    let shrunk: Vec<f64> = y.iter().map(|v| 0.5 + 0.5 * (v - 0.5)).collect();
    let folds: Vec<usize> = (0..40).map(|i| i % 4).collect();
    let w = vec![1.0; 40];
    let mut warnings = Vec::new();
    let c = correction::fit(&shrunk, &y, &w, &folds, (0.0, 1.0), true, &mut warnings).unwrap();
    assert!(c.diagnostics.kept && c.strength > 0.0 && c.map.is_some());
    assert!(c.diagnostics.mse_after < c.diagnostics.mse_before);
    assert!(warnings.is_empty(), "{warnings:?}");
    // Switched off: measured, not kept, the middle is the clipped prediction, no warning.
    let c = correction::fit(&shrunk, &y, &w, &folds, (0.0, 1.0), false, &mut warnings).unwrap();
    assert!(!c.diagnostics.kept && c.map.is_none() && c.strength == 0.0);
    assert_eq!(c.mid, shrunk);
    assert!(warnings.is_empty(), "{warnings:?}");
    // An exact prediction cannot be improved (its error is already zero): dropped, with a warning.
    let c = correction::fit(&y, &y, &w, &folds, (0.0, 1.0), true, &mut warnings).unwrap();
    assert!(!c.diagnostics.kept);
    assert_eq!(warnings.len(), 1);
    assert!(
        warnings[0].starts_with("end-bias correction not kept"),
        "{}",
        warnings[0]
    );
}

#[test]
fn folds_hold_whole_wells_and_say_when_fewer_were_formed() {
    // Three wells of two rows each cannot make the five folds asked for.
    let group = [7, 7, 8, 8, 9, 9];
    let xy = [[0.0, 0.0]; 6];
    let mut warnings = Vec::new();
    let folds = oof::split(&group, &xy, &CalibrationSettings::default(), &mut warnings);
    assert_eq!(folds.count, 3);
    assert_eq!(
        warnings,
        vec!["5 folds requested but only 3 could be formed from 3 wells".to_string()]
    );
    for f in 0..folds.count {
        let (train, test) = (folds.train(f), folds.test(f));
        assert_eq!(train.len() + test.len(), group.len());
        assert!(test.iter().all(|&i| group[i] == group[test[0]]));
        assert!(train.iter().all(|&i| group[i] != group[test[0]]));
    }
}
