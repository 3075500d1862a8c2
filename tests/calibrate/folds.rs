//! Folds hold out whole wells; grouped out-of-fold predictions.

use tidemark::calibrate::FoldMethod;
use tidemark::calibrate::folds::{assign, n_folds};

/// Out-of-fold predictions of a mean-only model.
fn oof_mean(y: &[f64], folds: &[usize]) -> Vec<f64> {
    (0..y.len())
        .map(|i| {
            let train: Vec<f64> = (0..y.len())
                .filter(|&j| folds[j] != folds[i])
                .map(|j| y[j])
                .collect();
            train.iter().sum::<f64>() / train.len() as f64
        })
        .collect()
}

#[test]
fn mapie_group_example() {
    // MAPIE's group test (reference-checks): a mean-only model with 3 group folds on
    // y = [0, 10, 20, 0, 10, 20], groups [1, 2, 3, 1, 2, 3] gives [15, 10, 5, 15, 10, 5].
    let y = [0.0, 10.0, 20.0, 0.0, 10.0, 20.0];
    let group = [1, 2, 3, 1, 2, 3];
    let xy = [[0.0, 0.0]; 6];
    for method in [FoldMethod::Wells, FoldMethod::OneWell, FoldMethod::Blocks] {
        let folds = assign(&group, &xy, method, 3, 7);
        assert_eq!(n_folds(&folds), 3, "{method:?}");
        assert_eq!(
            oof_mean(&y, &folds),
            vec![15.0, 10.0, 5.0, 15.0, 10.0, 5.0],
            "{method:?}"
        );
    }
}

#[test]
fn every_fold_is_used_and_k_is_clamped() {
    let group: Vec<usize> = (0..7).flat_map(|w| [w, w]).collect();
    let xy: Vec<[f64; 2]> = group.iter().map(|&w| [w as f64 * 100.0, 0.0]).collect();
    for method in [FoldMethod::Wells, FoldMethod::Blocks] {
        let f = assign(&group, &xy, method, 10, 1);
        assert_eq!(
            n_folds(&f),
            7,
            "{method:?}: k clamps to the number of wells"
        );
        let f = assign(&group, &xy, method, 3, 1);
        assert_eq!(n_folds(&f), 3);
        for k in 0..3 {
            assert!(f.contains(&k));
        }
    }
    assert!(assign(&[], &[], FoldMethod::Wells, 5, 1).is_empty());
}
