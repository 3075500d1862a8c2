//! Versioned JSON persistence: round trips predict identically; a version mismatch is a clear
//! error.

use ndarray::Array2;
use tidemark::ensemble::{
    BoostSettings, Booster, EnsembleError, Forest, ForestSettings, QuantileBoosters,
    fit_quantile_boosters,
};

use super::common::friedman1;

#[test]
fn forest_round_trip_predicts_identically() {
    let (mut x, y) = friedman1(150, 1.0, 1);
    x[[3, 4]] = f64::NAN;
    let y2 = Array2::from_shape_fn((150, 2), |(i, j)| y[i] * (j + 1) as f64);
    let forest = ForestSettings {
        n_trees: 20,
        seed: 8,
        ..Default::default()
    }
    .fit(x.view(), y2.view(), None)
    .unwrap();
    let json = forest.to_json().unwrap();
    let back = Forest::from_json(&json).unwrap();
    assert!(back.to_json().unwrap() == json, "re-saved JSON differs");
    let (xq, _) = friedman1(100, 1.0, 2);
    assert_eq!(back.predict(xq.view()), forest.predict(xq.view()));
    assert_eq!(
        back.predict_distribution(xq.view(), 1, &[0.1, 0.9], &[12.0]),
        forest.predict_distribution(xq.view(), 1, &[0.1, 0.9], &[12.0])
    );
    // NaN survives as null (OOB rows in every bag, missing training features)
    let oob_a = forest.oob_predictions();
    let oob_b = back.oob_predictions();
    for (a, b) in oob_a.iter().zip(oob_b.iter()) {
        assert!(a == b || (a.is_nan() && b.is_nan()));
    }
    assert_eq!(back.impurity_importance(), forest.impurity_importance());
}

#[test]
fn version_mismatch_is_a_clear_error() {
    let (x, y) = friedman1(40, 1.0, 3);
    let forest = ForestSettings {
        n_trees: 2,
        ..Default::default()
    }
    .fit(x.view(), y.insert_axis(ndarray::Axis(1)).view(), None)
    .unwrap();
    let json = forest.to_json().unwrap();
    assert!(json.starts_with(r#"{"format":"tidemark-forest","version":1,"#));
    let future = json.replacen(r#""version":1"#, r#""version":2"#, 1);
    let err = Forest::from_json(&future).unwrap_err();
    assert!(matches!(
        err,
        EnsembleError::FormatVersion {
            found_version: 2,
            ..
        }
    ));
    assert_eq!(
        err.to_string(),
        "model file format mismatch: found tidemark-forest version 2, this build reads tidemark-forest version 1"
    );
    // a booster file is not a forest
    let b = BoostSettings {
        n_rounds: 3,
        ..Default::default()
    }
    .fit(x.view(), &vec![1.0; 40], None, None)
    .unwrap();
    let err = Forest::from_json(&b.to_json().unwrap()).unwrap_err();
    assert!(
        err.to_string().contains("found tidemark-booster version 1"),
        "{err}"
    );
    // garbage and hand-broken models are errors, not panics
    assert!(matches!(
        Forest::from_json("not json"),
        Err(EnsembleError::Json(_))
    ));
    let broken = json.replacen(r#""left":1"#, r#""left":99999"#, 1);
    assert!(matches!(
        Forest::from_json(&broken),
        Err(EnsembleError::CorruptModel(_))
    ));
}

#[test]
fn boosters_round_trip() {
    let (x, y) = friedman1(200, 1.0, 4);
    let y = y.to_vec();
    let b = BoostSettings {
        n_rounds: 30,
        ..Default::default()
    }
    .fit(x.view(), &y, None, None)
    .unwrap();
    let back = Booster::from_json(&b.to_json().unwrap()).unwrap();
    assert_eq!(back.predict(x.view()), b.predict(x.view()));
    assert_eq!(back.n_rounds_used(), b.n_rounds_used());
    let qb = fit_quantile_boosters(
        &BoostSettings {
            n_rounds: 20,
            ..Default::default()
        },
        &[0.25, 0.75],
        x.view(),
        &y,
        None,
        None,
    )
    .unwrap();
    let back = QuantileBoosters::from_json(&qb.to_json().unwrap()).unwrap();
    assert_eq!(back.predict(x.view()), qb.predict(x.view()));
    let wrong = qb
        .to_json()
        .unwrap()
        .replacen(r#""version":1"#, r#""version":7"#, 1);
    assert!(matches!(
        QuantileBoosters::from_json(&wrong),
        Err(EnsembleError::FormatVersion {
            found_version: 7,
            ..
        })
    ));
}
