//! Settings and data are checked before fitting, with typed errors that say what was expected
//! and what was given.

use ndarray::Array2;
use tidemark::ensemble::{
    BoostSettings, EnsembleError, ForestSettings, Loss, fit_quantile_boosters,
};

fn data(n: usize) -> (Array2<f64>, Array2<f64>) {
    let x = Array2::from_shape_fn((n, 3), |(i, j)| (i * (j + 2)) as f64);
    let y = Array2::from_shape_fn((n, 1), |(i, _)| i as f64);
    (x, y)
}

#[test]
fn forest_settings_are_checked() {
    let (x, y) = data(20);
    let fit = |s: ForestSettings| s.fit(x.view(), y.view(), None).unwrap_err();
    let e = fit(ForestSettings {
        min_samples_leaf: 0,
        ..Default::default()
    });
    assert_eq!(e.to_string(), "min_samples_leaf must be at least 1, got 0");
    let e = fit(ForestSettings {
        max_features: 0.0,
        ..Default::default()
    });
    assert!(matches!(
        e,
        EnsembleError::InvalidSetting {
            name: "max_features",
            ..
        }
    ));
    assert_eq!(e.to_string(), "max_features must be in (0, 1], got 0");
    let e = fit(ForestSettings {
        n_trees: 0,
        ..Default::default()
    });
    assert_eq!(e.to_string(), "n_trees must be at least 1, got 0");
    let e = fit(ForestSettings {
        max_bins: 256,
        ..Default::default()
    });
    assert_eq!(e.to_string(), "max_bins must be between 2 and 255, got 256");
    let e = fit(ForestSettings {
        sample_fraction: 1.5,
        ..Default::default()
    });
    assert!(matches!(
        e,
        EnsembleError::InvalidSetting {
            name: "sample_fraction",
            ..
        }
    ));
    assert!(ForestSettings::default().check().is_ok());
}

#[test]
fn bad_training_data_is_rejected() {
    let s = ForestSettings {
        n_trees: 2,
        ..Default::default()
    };
    let (x, mut y) = data(10);
    let empty = Array2::<f64>::zeros((0, 3));
    assert!(matches!(
        s.fit(empty.view(), Array2::zeros((0, 1)).view(), None),
        Err(EnsembleError::EmptyData(_))
    ));
    let e = s
        .fit(x.view(), Array2::zeros((9, 1)).view(), None)
        .unwrap_err();
    assert_eq!(e.to_string(), "shape mismatch: y rows has 9, expected 10");
    y[[4, 0]] = f64::NAN;
    let e = s.fit(x.view(), y.view(), None).unwrap_err();
    assert!(
        matches!(
            e,
            EnsembleError::NonFiniteTarget {
                row: 4,
                output: 0,
                ..
            }
        ),
        "{e}"
    );
    let (mut x2, y2) = data(10);
    x2[[2, 1]] = f64::INFINITY;
    assert!(matches!(
        s.fit(x2.view(), y2.view(), None),
        Err(EnsembleError::InfiniteFeature { row: 2, feature: 1 })
    ));
    let mut w = vec![1.0; 10];
    w[3] = -1.0;
    let e = s.fit(x.view(), y2.view(), Some(&w)).unwrap_err();
    assert_eq!(
        e.to_string(),
        "invalid sample weights: weight at row 3 is -1, weights must be finite and non-negative"
    );
    assert!(matches!(
        s.fit(x.view(), y2.view(), Some(&[1.0; 3])),
        Err(EnsembleError::ShapeMismatch {
            expected: 10,
            got: 3,
            ..
        })
    ));
    assert!(matches!(
        s.fit(x.view(), y2.view(), Some(&[0.0; 10])),
        Err(EnsembleError::InvalidWeights(_))
    ));
}

#[test]
fn boost_settings_are_checked() {
    let (x, y) = data(30);
    let y = y.column(0).to_vec();
    let fit = |s: BoostSettings| s.fit(x.view(), &y, None, None).unwrap_err();
    let e = fit(BoostSettings {
        loss: Loss::Quantile { q: 1.5 },
        ..Default::default()
    });
    assert_eq!(e.to_string(), "loss.q must be in (0, 1), got 1.5");
    let e = fit(BoostSettings {
        loss: Loss::Huber { delta: 0.0 },
        ..Default::default()
    });
    assert!(matches!(
        e,
        EnsembleError::InvalidSetting {
            name: "loss.delta",
            ..
        }
    ));
    let e = fit(BoostSettings {
        learning_rate: 0.0,
        ..Default::default()
    });
    assert_eq!(e.to_string(), "learning_rate must be in (0, 1], got 0");
    let e = fit(BoostSettings {
        early_stopping_rounds: Some(0),
        ..Default::default()
    });
    assert!(matches!(
        e,
        EnsembleError::InvalidSetting {
            name: "early_stopping_rounds",
            ..
        }
    ));
    let e = fit(BoostSettings {
        validation_fraction: 1.0,
        ..Default::default()
    });
    assert!(matches!(
        e,
        EnsembleError::InvalidSetting {
            name: "validation_fraction",
            ..
        }
    ));
    let e = BoostSettings::default()
        .fit(x.view(), &y, None, Some(&[0, 1]))
        .unwrap_err();
    assert_eq!(e.to_string(), "shape mismatch: groups has 2, expected 30");
    let e = fit_quantile_boosters(
        &BoostSettings::default(),
        &[0.9, 0.1],
        x.view(),
        &y,
        None,
        None,
    )
    .unwrap_err();
    assert!(
        e.to_string()
            .starts_with("levels must be strictly increasing and in (0, 1)"),
        "{e}"
    );
}
