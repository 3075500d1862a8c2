//! Experimental variograms (hand-worked), the weighted least-squares fit and its fallback.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use tidemark::spatial::variogram::{
    Estimator, ExperimentalVariogram, FitSettings, Lag, Lags, Sample, experimental, fit,
};
use tidemark::spatial::{ModelKind, VariogramModel};

use super::{covariance_matrix, reference_cholesky};

fn line(values: &[f64]) -> Vec<Sample> {
    values
        .iter()
        .enumerate()
        .map(|(k, &v)| Sample {
            x: 10.0 * k as f64,
            y: 0.0,
            value: v,
        })
        .collect()
}

#[test]
fn cressie_hawkins_and_matheron_by_hand() {
    // Four points on a line, 10 m apart, values 0, 1, 5, 4; lag bins [0,10), [10,20), [20,30).
    //
    // Bin [10,20): pairs (0,1), (1,2), (2,3) at 10 m, |d| = 1, 4, 1.
    //   Matheron: (1 + 16 + 1) / (2 x 3) = 3.
    //   Cressie-Hawkins (Cressie & Hawkins 1980; Cressie 1993 eq. 2.4.12):
    //   mean sqrt|d| = (1 + 2 + 1) / 3 = 4/3, its fourth power 256/81 = 3.160493827;
    //   k(3) = 0.457 + 0.494/3 + 0.045/9 = 0.626666667;
    //   gamma = 3.160493827 / (2 x 0.626666667) = 2.521670607.
    // Bin [20,30): pairs (0,2), (1,3) at 20 m, |d| = 5, 3.
    //   Matheron: (25 + 9) / (2 x 2) = 8.5.
    //   Cressie-Hawkins: mean sqrt|d| = (sqrt 5 + sqrt 3) / 2 = 1.984059393, fourth power
    //   = 7.75 + 2 sqrt 15 = 15.495966692; k(2) = 0.457 + 0.247 + 0.01125 = 0.71525;
    //   gamma = 15.495966692 / 1.4305 = 10.832552738.
    // Bin [0,10): no pair. The pair (0,3) at 30 m lies beyond the last bin.
    let pts = line(&[0.0, 1.0, 5.0, 4.0]);
    let lags = Lags {
        width: 10.0,
        count: 3,
    };
    let ch = experimental(&pts, lags, Estimator::CressieHawkins).unwrap();
    let m = experimental(&pts, lags, Estimator::Matheron).unwrap();
    assert_eq!(ch.lags[0].pairs, 0);
    assert!(ch.lags[0].gamma.is_nan() && ch.lags[0].distance.is_nan());
    assert_eq!((ch.lags[1].pairs, ch.lags[2].pairs), (3, 2));
    assert_eq!(ch.pairs(), 5);
    assert!((ch.lags[1].gamma - 2.521670607).abs() < 1e-9);
    assert!((ch.lags[2].gamma - 10.832552738).abs() < 1e-9);
    assert!((m.lags[1].gamma - 3.0).abs() < 1e-12);
    assert!((m.lags[2].gamma - 8.5).abs() < 1e-12);
    assert!((ch.lags[1].distance - 10.0).abs() < 1e-12);
    assert!((ch.lags[2].lower - 20.0).abs() < 1e-12 && (ch.lags[2].upper - 30.0).abs() < 1e-12);
}

#[test]
fn cressie_hawkins_resists_an_outlier() {
    // One gross error among otherwise smooth values: the robust estimator moves less than
    // Matheron's (the reason for it, Cressie & Hawkins 1980, section 1).
    let mut v: Vec<f64> = (0..30).map(|k| (k as f64 * 0.3).sin()).collect();
    let lags = Lags {
        width: 10.0,
        count: 3,
    };
    let clean_ch = experimental(&line(&v), lags, Estimator::CressieHawkins).unwrap();
    let clean_m = experimental(&line(&v), lags, Estimator::Matheron).unwrap();
    v[15] += 20.0;
    let dirty_ch = experimental(&line(&v), lags, Estimator::CressieHawkins).unwrap();
    let dirty_m = experimental(&line(&v), lags, Estimator::Matheron).unwrap();
    let (rc, rm) = (
        dirty_ch.lags[1].gamma / clean_ch.lags[1].gamma,
        dirty_m.lags[1].gamma / clean_m.lags[1].gamma,
    );
    assert!(rc < rm / 3.0, "robust ratio {rc}, classical ratio {rm}");
}

fn exact_variogram(model: &VariogramModel, n: usize) -> ExperimentalVariogram {
    let width = 100.0;
    ExperimentalVariogram {
        estimator: Estimator::Matheron,
        lags: (0..n)
            .map(|k| {
                let h = (k as f64 + 0.5) * width;
                Lag {
                    lower: k as f64 * width,
                    upper: (k + 1) as f64 * width,
                    distance: h,
                    pairs: 100,
                    gamma: model.gamma(h),
                }
            })
            .collect(),
    }
}

#[test]
fn fit_recovers_noise_free_models_and_their_kind() {
    // Weighted least squares (Cressie 1985) on exact model values: the weighted SSE of the true
    // model is 0, so the fit must return it (up to the search's resolution) and prefer its kind.
    for kind in ModelKind::ALL {
        let truth = VariogramModel {
            kind,
            nugget: 0.2,
            sill: 1.1,
            range: 700.0,
        };
        let ev = exact_variogram(&truth, 12);
        let f = fit(&ev, &FitSettings::default(), 5000.0).unwrap();
        assert!(!f.fallback);
        assert_eq!(
            f.model.kind, kind,
            "kind picked for {kind:?}: {:?}",
            f.candidates
        );
        assert!(
            (f.model.range / truth.range - 1.0).abs() < 0.01,
            "{kind:?} range {}",
            f.model.range
        );
        assert!(
            (f.model.sill / truth.sill - 1.0).abs() < 0.01,
            "{kind:?} sill {}",
            f.model.sill
        );
        assert!(
            (f.model.nugget - truth.nugget).abs() < 0.01,
            "{kind:?} nugget {}",
            f.model.nugget
        );
        assert!(f.weighted_sse < 1e-3);
        assert_eq!(f.pairs_used, 1200);
        assert_eq!(f.lags_used, 12);
    }
}

#[test]
fn fit_recovers_range_and_sill_from_simulated_data() {
    // 1000 scattered points in a 10 km square, values drawn from a known model by a direct
    // Cholesky factor (smartcore 0.7); 12 independent data sets on the same points.
    let truth = VariogramModel {
        kind: ModelKind::Exponential,
        nugget: 0.2,
        sill: 1.0,
        range: 1200.0,
    };
    let mut rng = StdRng::seed_from_u64(21);
    let pts: Vec<(f64, f64)> = (0..1000)
        .map(|_| (rng.random::<f64>() * 10000.0, rng.random::<f64>() * 10000.0))
        .collect();
    let l = reference_cholesky(&covariance_matrix(&truth, &pts));
    let settings = FitSettings {
        kinds: vec![ModelKind::Exponential],
        ..FitSettings::default()
    };
    let mut ranges = Vec::new();
    let mut sills = Vec::new();
    let mut nuggets = Vec::new();
    for _ in 0..12 {
        let e: Vec<f64> = (0..pts.len()).map(|_| rng.sample(StandardNormal)).collect();
        let samples: Vec<Sample> = pts
            .iter()
            .enumerate()
            .map(|(i, &(x, y))| Sample {
                x,
                y,
                value: (0..=i).map(|k| l[[i, k]] * e[k]).sum(),
            })
            .collect();
        // bins as wide as the mean nearest-neighbour distance of a Poisson pattern,
        // 0.5 / sqrt(density) = 158 m (Clark & Evans 1954, Ecology 35:445), to 2.5 ranges
        let lags = Lags {
            width: 150.0,
            count: 20,
        };
        let ev = experimental(&samples, lags, Estimator::CressieHawkins).unwrap();
        let f = fit(&ev, &settings, 10000.0 * 2f64.sqrt()).unwrap();
        assert!(!f.fallback);
        ranges.push(f.model.range);
        sills.push(f.model.sill);
        nuggets.push(f.model.nugget);
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        0.5 * (v[5] + v[6])
    };
    let (r, s, n) = (
        median(&mut ranges),
        median(&mut sills),
        median(&mut nuggets),
    );
    // Tolerances: one realization in a domain eight ranges wide still leaves a single fit's range
    // uncertain by tens of percent (the sample variogram's own variance, Cressie 1993 section
    // 2.4; here single fits spread from 830 to 1900 m); the median of 12 fits must lie within
    // 20 % (range), 10 % (sill) and 0.1 (nugget) of the truth.
    // common practice, no published source
    assert!(
        (r / truth.range - 1.0).abs() < 0.2,
        "median range {r} ({ranges:?})"
    );
    assert!(
        (s / truth.sill - 1.0).abs() < 0.1,
        "median sill {s} ({sills:?})"
    );
    assert!(
        (n - truth.nugget).abs() < 0.1,
        "median nugget {n} ({nuggets:?})"
    );
}

#[test]
fn too_few_pairs_fall_back_to_a_long_range_model_with_a_message() {
    // 6 wells: 15 pairs < 30, so no fit is attempted
    let pts: Vec<Sample> = (0..6)
        .map(|k| Sample {
            x: 100.0 * k as f64,
            y: 50.0 * (k % 2) as f64,
            value: k as f64 * 0.1,
        })
        .collect();
    let ev = experimental(
        &pts,
        Lags::half_extent(&pts).unwrap(),
        Estimator::CressieHawkins,
    )
    .unwrap();
    let f = fit(&ev, &FitSettings::default(), 4000.0).unwrap();
    assert!(f.fallback);
    assert_eq!(f.model.kind, ModelKind::Exponential);
    assert_eq!(
        (f.model.nugget, f.model.sill, f.model.range),
        (0.0, 1.0, 2000.0)
    );
    let msg = f.message.unwrap();
    assert!(msg.contains("too few well pairs"), "{msg}");
    assert!(f.candidates.is_empty() && f.weighted_sse.is_nan());

    // constant scores: nothing to fit either
    let flat: Vec<Sample> = (0..40)
        .map(|k| Sample {
            x: 37.0 * k as f64,
            y: 11.0 * (k % 7) as f64,
            value: 0.5,
        })
        .collect();
    let ev = experimental(
        &flat,
        Lags::half_extent(&flat).unwrap(),
        Estimator::Matheron,
    )
    .unwrap();
    let f = fit(&ev, &FitSettings::default(), 4000.0).unwrap();
    assert!(f.fallback && f.message.unwrap().contains("do not vary"));
}

#[test]
fn bad_variogram_input_names_the_point() {
    let mut pts = line(&[0.0, 1.0, 2.0]);
    pts[2].value = f64::NAN;
    let e = experimental(
        &pts,
        Lags {
            width: 10.0,
            count: 2,
        },
        Estimator::Matheron,
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("variogram point 2"), "{e}");
    let e = experimental(
        &line(&[0.0, 1.0]),
        Lags {
            width: 0.0,
            count: 2,
        },
        Estimator::Matheron,
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("lags.width"), "{e}");
}

#[test]
fn grouped_pairs_stay_within_their_group() {
    use tidemark::spatial::variogram::experimental_within;
    // Hand-worked: group 0 has values 0 and 2 one metre apart, group 1 has 5 and 4 at the same
    // places. Within groups: two pairs at 1 m with differences 2 and 1, so Matheron's estimate
    // is (4 + 1) / (2 x 2) = 1.25; across groups four more pairs would enter.
    let pts = [
        (0.0, 0.0, 0.0),
        (1.0, 0.0, 2.0),
        (0.0, 0.0, 5.0),
        (1.0, 0.0, 4.0),
    ]
    .map(|(x, y, value)| Sample { x, y, value });
    let lags = Lags {
        width: 1.5,
        count: 1,
    };
    let within = experimental_within(&pts, Some(&[0, 0, 1, 1]), lags, Estimator::Matheron).unwrap();
    assert_eq!(within.lags[0].pairs, 2);
    assert!((within.lags[0].gamma - 1.25).abs() < 1e-12);
    let all = experimental_within(&pts, None, lags, Estimator::Matheron).unwrap();
    assert_eq!(all.lags[0].pairs, 6);
    assert_eq!(all, experimental(&pts, lags, Estimator::Matheron).unwrap());
    assert!(experimental_within(&pts, Some(&[0, 0, 1]), lags, Estimator::Matheron).is_err());
}
