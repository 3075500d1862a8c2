//! `calibrate_target` end to end on generated wells with a known signal.

use ndarray::Array2;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use tidemark::calibrate::conformal::BandMethod;
use tidemark::calibrate::{
    CalibratedTarget, CalibrationSettings, FoldMethod, LearnerChoice, TargetData, Threshold,
    calibrate_target,
};
use tidemark::ensemble::ForestSettings;

/// Generated training rows: 4 attributes and the step column; `y` depends on the first two
/// attributes, a well effect and noise, clipped to the bounds [-1, 1].
struct Field {
    x: Array2<f64>,
    y: Vec<f64>,
    group: Vec<usize>,
    xy: Vec<[f64; 2]>,
    step: Vec<usize>,
    weight: Vec<f64>,
}

fn truth(a: f64, b: f64) -> f64 {
    0.6 * a + 0.3 * (3.0 * b).sin()
}

fn field(n_wells: usize, noise_sd: f64, seed: u64) -> Field {
    let mut rng = StdRng::seed_from_u64(seed);
    let unit = Normal::new(0.0, 1.0).unwrap();
    let (mut rows, mut y, mut group, mut xy, mut step) = (vec![], vec![], vec![], vec![], vec![]);
    for w in 0..n_wells {
        let loc = [rng.random::<f64>() * 6000.0, rng.random::<f64>() * 4000.0];
        let effect = 0.05 * unit.sample(&mut rng);
        let steps = rng.random_range(1..=4usize);
        for s in 0..steps {
            let a: f64 = rng.random_range(-1.0..1.0);
            let b: f64 = rng.random_range(-1.0..1.0);
            let c: f64 = rng.random();
            let d: f64 = unit.sample(&mut rng);
            rows.push([a, b, c, d, s as f64]);
            let v = truth(a, b) + effect + noise_sd * unit.sample(&mut rng);
            y.push(v.clamp(-1.0, 1.0));
            group.push(100 + w);
            xy.push(loc);
            step.push(s);
        }
    }
    let n = y.len();
    Field {
        x: Array2::from_shape_fn((n, 5), |(i, j)| rows[i][j]),
        y,
        group,
        xy,
        step,
        weight: vec![1.0; n],
    }
}

fn data<'a>(f: &'a Field) -> TargetData<'a> {
    TargetData {
        name: "dSw",
        x: f.x.view(),
        y: &f.y,
        group: &f.group,
        xy: &f.xy,
        step: &f.step,
        weight: &f.weight,
        bounds: (-1.0, 1.0),
        thresholds: vec![
            Threshold {
                label: "swept".into(),
                value: 0.3,
                above: true,
            },
            Threshold {
                label: "low".into(),
                value: -0.3,
                above: false,
            },
        ],
        shift: None,
        zero: Default::default(),
        dissimilarity: None,
    }
}

fn settings() -> CalibrationSettings {
    CalibrationSettings {
        forest: ForestSettings {
            n_trees: 100,
            ..ForestSettings::default()
        },
        ..CalibrationSettings::default()
    }
}

#[test]
fn calibrates_and_predicts_consistently() {
    let f = field(60, 0.1, 1);
    let d = data(&f);
    let cal = calibrate_target(&d, &settings()).unwrap();
    let diag = &cal.diagnostics;
    assert_eq!(diag.n_wells, 60);
    assert_eq!(diag.n_rows, f.y.len());
    assert_eq!(diag.n_folds, 5);
    assert_eq!(diag.rows.len(), f.y.len());
    assert_eq!(diag.learner.scores.len(), 5);
    assert!(!diag.band.too_few_wells);
    assert_eq!(diag.exceedance.len(), 2);
    assert_eq!(diag.metrics.brier.len(), 2);
    assert!(!diag.metrics_by_step.is_empty());
    // Every row's fold holds its whole well.
    for r in &diag.rows {
        for s in &diag.rows {
            if r.group == s.group {
                assert_eq!(r.fold, s.fold);
            }
        }
    }
    // Skill on held-out wells: the signal explains most of the variance.
    assert!(diag.metrics.r2 > 0.6, "out-of-fold R2 {}", diag.metrics.r2);
    // Held-out coverage of the nominal 80 % band on 60 wells; 0.05 either side is about two
    // binomial standard errors for ~150 rows (common practice, no published source).
    let cov = diag.metrics.coverage;
    assert!((0.72..=0.92).contains(&cov), "out-of-fold coverage {cov}");
    // Probabilities beat the base rate out of fold.
    for e in &diag.exceedance {
        let kept = e.brier_conformal.min(e.brier_forest);
        assert!(
            kept < e.brier_base_rate,
            "{}: {kept} vs {}",
            e.label,
            e.brier_base_rate
        );
    }
    // Prediction: ordered, bounded, probabilities in [0, 1]; training rows reproduce shapes.
    let p = cal.predict(f.x.view()).unwrap();
    assert_eq!(p.mid.len(), f.y.len());
    assert_eq!(p.exceed.len(), 2);
    for i in 0..f.y.len() {
        assert!(-1.0 <= p.lo[i] && p.lo[i] <= p.mid[i] && p.mid[i] <= p.hi[i] && p.hi[i] <= 1.0);
        for e in &p.exceed {
            assert!((0.0..=1.0).contains(&e[i]));
        }
    }
    // Higher predicted values have higher chance of crossing 0.3 upwards.
    let (i_lo, i_hi) = (0..f.y.len()).fold((0, 0), |(a, b), i| {
        (
            if p.mid[i] < p.mid[a] { i } else { a },
            if p.mid[i] > p.mid[b] { i } else { b },
        )
    });
    assert!(p.exceed[0][i_hi] > p.exceed[0][i_lo]);
    // Serialised and read back, the model predicts the same numbers.
    let json = serde_json::to_string(&cal).unwrap();
    let back: CalibratedTarget = serde_json::from_str(&json).unwrap();
    // serde_json's default float parser may differ from the written value in the last bit
    // (exact only with its `float_roundtrip` feature), hence the tolerance.
    let q = back.predict(f.x.view()).unwrap();
    let close = |a: &[f64], b: &[f64]| a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-9);
    assert!(close(&q.lo, &p.lo) && close(&q.mid, &p.mid) && close(&q.hi, &p.hi));
    assert!(close(&q.exceed[0], &p.exceed[0]) && close(&q.exceed[1], &p.exceed[1]));
    // Wrong column count is an error, not a panic.
    assert!(cal.predict(f.x.slice(ndarray::s![.., ..4])).is_err());
}

#[test]
fn same_seed_same_answer_and_every_fold_method_runs() {
    let f = field(30, 0.15, 2);
    let d = data(&f);
    let s = CalibrationSettings {
        learner: LearnerChoice::Forest,
        ..settings()
    };
    let a = calibrate_target(&d, &s).unwrap();
    let b = calibrate_target(&d, &s).unwrap();
    // Compared as JSON: undefined values are NaN, which is never equal to itself.
    assert_eq!(
        serde_json::to_string(&a.diagnostics).unwrap(),
        serde_json::to_string(&b.diagnostics).unwrap()
    );
    assert_eq!(
        a.predict(f.x.view()).unwrap(),
        b.predict(f.x.view()).unwrap()
    );
    assert_eq!(a.diagnostics.learner.chosen, "forest");
    assert!(a.booster.is_none());
    for (method, folds) in [(FoldMethod::Blocks, 4), (FoldMethod::OneWell, 30)] {
        let c = calibrate_target(
            &d,
            &CalibrationSettings {
                fold_method: method,
                folds: 4,
                ..s.clone()
            },
        )
        .unwrap();
        assert_eq!(c.diagnostics.n_folds, folds, "{method:?}");
    }
}

#[test]
fn end_correction_reduces_top_decile_bias() {
    // A strong signal with little noise: the forest's leaves average towards the middle at the
    // ends of the range; the cross-fitted isotonic map must remove at least 30 % of the
    // top-decile bias (the figure for the field test).
    let f = field(80, 0.03, 3);
    let d = data(&f);
    let s = CalibrationSettings {
        learner: LearnerChoice::Forest,
        forest: ForestSettings {
            n_trees: 100,
            min_samples_leaf: 8,
            ..ForestSettings::default()
        },
        ..settings()
    };
    let cal = calibrate_target(&d, &s).unwrap();
    let e = &cal.diagnostics.end_correction;
    assert!(e.kept, "{}", e.reason);
    assert_eq!(e.scores.len(), 5);
    assert!(e.strength > 0.0 && e.mse_after < e.mse_before);
    assert!(
        e.bias_top_before < 0.0 && e.bias_bottom_before > 0.0,
        "{e:?}"
    );
    assert!(
        e.bias_top_after.abs() <= 0.7 * e.bias_top_before.abs(),
        "top-decile bias {} -> {}",
        e.bias_top_before,
        e.bias_top_after
    );
    assert!(e.slope_before > 1.0 && (e.slope_after - 1.0).abs() < (e.slope_before - 1.0).abs());
    assert!(cal.correction.is_some());
}

#[test]
fn too_few_wells_widen_to_the_bounds() {
    // Six wells cannot back a finite 80 % band: ceil(7 * 0.9) = 7 > 6 (Lei et al. 2018).
    let f = field(6, 0.1, 4);
    let d = data(&f);
    let cal = calibrate_target(&d, &settings()).unwrap();
    let band = &cal.diagnostics.band;
    assert!(band.too_few_wells);
    assert_eq!(band.min_wells_needed, 9);
    assert!(band.message.as_ref().unwrap().contains("only 6 wells"));
    assert!(
        cal.diagnostics
            .warnings
            .iter()
            .any(|w| w.contains("only 6 wells"))
    );
    let p = cal.predict(f.x.view()).unwrap();
    assert!(p.lo.iter().all(|&v| v == -1.0) && p.hi.iter().all(|&v| v == 1.0));
    assert!(p.mid.iter().all(|v| v.abs() < 1.0));
}

#[test]
fn bad_input_is_a_clear_error() {
    let f = field(12, 0.1, 5);
    let mut y = f.y.clone();
    y[3] = f64::NAN;
    let d = TargetData { y: &y, ..data(&f) };
    let e = calibrate_target(&d, &settings()).unwrap_err().to_string();
    assert!(e.contains("dSw") && e.contains("row 3"), "{e}");
    let short = &f.group[..5];
    let d = TargetData {
        group: short,
        ..data(&f)
    };
    let e = calibrate_target(&d, &settings()).unwrap_err().to_string();
    assert!(e.contains("group"), "{e}");
    let one_well = vec![7usize; f.y.len()];
    let d = TargetData {
        group: &one_well,
        ..data(&f)
    };
    assert!(calibrate_target(&d, &settings()).is_err());
    let bad = CalibrationSettings {
        level: 1.2,
        ..settings()
    };
    let e = calibrate_target(&data(&f), &bad).unwrap_err().to_string();
    assert!(e.contains("level"), "{e}");
    // Every band candidate (3 methods x (1..=3 bins + 4 localities)) was scored and the best
    // one kept.
    let cal = calibrate_target(&data(&f), &settings()).unwrap();
    let b = &cal.diagnostics.band;
    assert_eq!(b.candidates.len(), 21);
    assert_eq!(b.candidates.iter().filter(|c| c.locality > 0.0).count(), 12);
    let best = b
        .candidates
        .iter()
        .map(|c| c.interval_score)
        .fold(f64::INFINITY, f64::min);
    let kept = b
        .candidates
        .iter()
        .find(|c| c.method == b.method && c.max_bins == b.max_bins && c.locality == b.locality)
        .unwrap();
    assert_eq!(kept.interval_score, best);
    for m in [
        BandMethod::CvResidual,
        BandMethod::Normalized,
        BandMethod::Cqr,
    ] {
        assert!(b.candidates.iter().any(|c| c.method == m));
    }
}

#[test]
fn out_of_fold_pit_is_uniform() {
    // PIT values of the cross-fitted conformal predictive system and of the recalibrated forest
    // CDF on held-out wells, Kolmogorov-Smirnov against Uniform(0, 1) (statrs 0.19 ks_onesample).
    // Values share calibration folds, so they are not independent; the test is a check of gross
    // miscalibration, not an exact level.
    use statrs::distribution::Uniform;
    use statrs::stats_tests::NaNPolicy;
    use statrs::stats_tests::ks_test::{KSOneSampleAlternativeMethod, ks_onesample};
    let f = field(100, 0.1, 21);
    let cal = calibrate_target(&data(&f), &settings()).unwrap();
    let u = Uniform::new(0.0, 1.0).unwrap();
    for pit in [
        cal.diagnostics
            .rows
            .iter()
            .map(|r| r.pit)
            .collect::<Vec<f64>>(),
        cal.diagnostics.rows.iter().map(|r| r.pit_forest).collect(),
    ] {
        let (d, p) = ks_onesample(
            pit,
            &u,
            KSOneSampleAlternativeMethod::TwoSidedAsymptotic,
            NaNPolicy::Error,
        )
        .unwrap();
        assert!(p > 0.01, "KS D {d:.3}, p {p:.3}");
    }
    let h = &cal.diagnostics.pit_histogram;
    assert_eq!(h.len(), 10);
    assert!((h.iter().sum::<f64>() - 1.0).abs() < 1e-12);
}

#[test]
fn ten_wells_give_a_final_band_but_no_held_out_one() {
    // Ten wells back a finite 80 % band (ceil(11 * 0.9) = 10 <= 10), but each of five folds
    // calibrates on eight wells, too few: held-out bands are the bounds and the user is told.
    let f = field(10, 0.1, 3);
    let cal = calibrate_target(&data(&f), &settings()).unwrap();
    let b = &cal.diagnostics.band;
    assert!(!b.too_few_wells);
    assert_eq!(b.oof_rows_at_bounds, f.y.len());
    assert_eq!(cal.diagnostics.metrics.coverage, 1.0);
    assert!(
        cal.diagnostics
            .warnings
            .iter()
            .any(|w| w.contains("too few wells"))
    );
    let p = cal.predict(f.x.view()).unwrap();
    assert!(p.lo.iter().zip(&p.hi).all(|(l, h)| h - l < 2.0));
}

#[test]
fn same_numbers_with_one_or_two_threads() {
    let f = field(25, 0.1, 8);
    let run = |threads: usize| {
        crate::threads::in_pool(threads, || {
            let cal = calibrate_target(&data(&f), &settings()).unwrap();
            let p = cal.predict(f.x.view()).unwrap();
            (serde_json::to_string(&cal.diagnostics).unwrap(), p)
        })
    };
    let (d1, p1) = run(1);
    let (d2, p2) = run(2);
    assert_eq!(d1, d2);
    assert_eq!(p1, p2);
}
