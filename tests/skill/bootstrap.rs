//! The well bootstrap against an exact enumeration of every resample of three wells.

use tidemark::metrics::r2;
use tidemark::skill::{SkillInput, SkillSettings, assess, percentile_interval, weighted_r2};

/// Rows of three wells: (truth, prediction, model CRPS, climatology CRPS).
const ROWS: [(usize, f64, f64, f64, f64); 6] = [
    (0, 1.0, 2.0, 0.5, 1.0),
    (0, 3.0, 3.0, 0.2, 0.9),
    (1, 5.0, 4.0, 0.6, 0.7),
    (1, 7.0, 7.0, 0.1, 0.8),
    (2, 9.0, 10.0, 0.7, 1.1),
    (2, 11.0, 10.0, 0.9, 1.2),
];

/// Truth, prediction, model CRPS, climatology CRPS, well and weight columns.
type Columns = (Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>, Vec<usize>, Vec<f64>);

/// Scores of the rows of the wells listed (with repeats), computed by expanding the rows.
fn scores_of(wells: &[usize]) -> (f64, f64) {
    let rows: Vec<_> = wells
        .iter()
        .flat_map(|&w| ROWS.iter().filter(move |r| r.0 == w))
        .collect();
    let y: Vec<f64> = rows.iter().map(|r| r.1).collect();
    let p: Vec<f64> = rows.iter().map(|r| r.2).collect();
    let cm: f64 = rows.iter().map(|r| r.3).sum();
    let cc: f64 = rows.iter().map(|r| r.4).sum();
    (r2(&y, &p), 1.0 - cm / cc)
}

/// Inverse of the step CDF of equally likely atoms (Hyndman & Fan type 1).
fn quantile_of_atoms(atoms: &[f64], q: f64) -> f64 {
    let mut v = atoms.to_vec();
    v.sort_by(f64::total_cmp);
    let k = ((q * v.len() as f64).ceil() as usize).clamp(1, v.len());
    v[k - 1]
}

fn input_of<'a>(cols: &'a Columns) -> SkillInput<'a> {
    SkillInput {
        truth: &cols.0,
        prediction: &cols.1,
        crps_model: &cols.2,
        crps_climatology: &cols.3,
        well: &cols.4,
        weight: &cols.5,
    }
}

fn columns() -> Columns {
    (
        ROWS.iter().map(|r| r.1).collect(),
        ROWS.iter().map(|r| r.2).collect(),
        ROWS.iter().map(|r| r.3).collect(),
        ROWS.iter().map(|r| r.4).collect(),
        ROWS.iter().map(|r| r.0).collect(),
        vec![1.0; ROWS.len()],
    )
}

#[test]
fn bootstrap_interval_matches_every_resample_of_three_wells() {
    // By hand: truth 1, 3, 5, 7, 9, 11 (mean 6, SS_tot 25 + 9 + 1 + 1 + 9 + 25 = 70), residuals
    // -1, 0, 1, 0, -1, 1 (SS_res 4): R2 = 1 - 4/70 = 0.942857...
    // Resample {A, A, A}: truth 1, 3 three times (mean 2, SS_tot 6), residuals -1, 0 (SS_res 3):
    // R2 = 0.5. Resample {C, C, C}: truth 9, 11 (SS_tot 6), residuals -1, 1 (SS_res 6): R2 = 0.
    assert!((scores_of(&[0, 1, 2]).0 - (1.0 - 4.0 / 70.0)).abs() < 1e-12);
    assert!((scores_of(&[0, 0, 0]).0 - 0.5).abs() < 1e-12);
    assert!(scores_of(&[2, 2, 2]).0.abs() < 1e-12);

    // The exact bootstrap distribution: the 27 equally likely ordered draws of three wells
    // (Efron & Tibshirani 1993, sec. 6.2 for the ideal bootstrap; Davison & Hinkley 1997, sec. 3.8
    // for drawing whole clusters).
    let mut atoms_r2 = Vec::new();
    let mut atoms_crps = Vec::new();
    for a in 0..3 {
        for b in 0..3 {
            for c in 0..3 {
                let (r, s) = scores_of(&[a, b, c]);
                atoms_r2.push(r);
                atoms_crps.push(s);
            }
        }
    }
    // The atoms' cumulative probabilities are multiples of 1/27, at least 0.013 away from 0.05
    // and 0.95, so 19,999 resamples (sd of an empirical CDF value about 0.0015) land on the same
    // atoms as the exact percentile interval.
    let exact_r2 = [
        quantile_of_atoms(&atoms_r2, 0.05),
        quantile_of_atoms(&atoms_r2, 0.95),
    ];
    let exact_crps = [
        quantile_of_atoms(&atoms_crps, 0.05),
        quantile_of_atoms(&atoms_crps, 0.95),
    ];
    let cols = columns();
    let settings = SkillSettings {
        resamples: 19_999,
        seed: 2024,
        ..SkillSettings::default()
    };
    let s = assess(&input_of(&cols), &settings).unwrap();
    assert!((s.r2 - (1.0 - 4.0 / 70.0)).abs() < 1e-12);
    assert!((s.crps_skill - scores_of(&[0, 1, 2]).1).abs() < 1e-12);
    for k in 0..2 {
        assert!(
            (s.r2_interval[k] - exact_r2[k]).abs() < 1e-12,
            "R2 interval {:?} vs exact {exact_r2:?}",
            s.r2_interval
        );
        assert!(
            (s.crps_skill_interval[k] - exact_crps[k]).abs() < 1e-12,
            "CRPS-skill interval {:?} vs exact {exact_crps:?}",
            s.crps_skill_interval
        );
    }
    // The lower R2 end is the second-lowest atom: {C, C, C} (R2 = 0) has probability 1/27 < 0.05.
    let mut sorted = atoms_r2.clone();
    sorted.sort_by(f64::total_cmp);
    assert!(s.r2_interval[0] > 0.0 && s.r2_interval[0] == sorted[1]);
}

#[test]
fn same_seed_same_interval_and_weights_act_as_repeats() {
    let cols = columns();
    let settings = SkillSettings::default();
    let a = assess(&input_of(&cols), &settings).unwrap();
    let b = assess(&input_of(&cols), &settings).unwrap();
    assert_eq!(a, b);
    let other = assess(
        &input_of(&cols),
        &SkillSettings {
            seed: 1,
            ..settings.clone()
        },
    )
    .unwrap();
    assert_eq!(a.r2, other.r2);

    // Whole-number weights give the R2 of the rows repeated that many times (the test pattern of
    // weighted quantiles in Meinshausen 2006, applied to R2).
    let y = [1.0, 4.0, 2.0, 8.0];
    let p = [1.5, 3.0, 2.5, 6.0];
    let w = [2.0, 1.0, 3.0, 1.0];
    let (yy, pp): (Vec<f64>, Vec<f64>) = y
        .iter()
        .zip(&p)
        .zip(&w)
        .flat_map(|((&y, &p), &w)| std::iter::repeat_n((y, p), w as usize))
        .unzip();
    assert!((weighted_r2(&y, &p, &w) - r2(&yy, &pp)).abs() < 1e-12);
}

#[test]
fn percentile_interval_order_statistics() {
    // 999 replicates 1..=999 at level 0.9: k = floor(1000 * 0.05) = 50 -> the 50th and 950th.
    let v: Vec<f64> = (1..=999).rev().map(f64::from).collect();
    assert_eq!(percentile_interval(&v, 0.9), [50.0, 950.0]);
    // Mostly undefined replicates give no interval.
    let mut u = vec![f64::NAN; 10];
    u[0] = 1.0;
    assert!(percentile_interval(&u, 0.9)[0].is_nan());
}

#[test]
fn bad_input_is_an_error_and_one_well_is_undefined() {
    let cols = columns();
    let mut short = input_of(&cols);
    short.weight = &cols.5[..3];
    assert!(assess(&short, &SkillSettings::default()).is_err());
    let bad = SkillSettings {
        level: 1.5,
        ..SkillSettings::default()
    };
    assert!(assess(&input_of(&cols), &bad).is_err());
    let neg = vec![1.0, -1.0, 1.0, 1.0, 1.0, 1.0];
    let mut w = input_of(&cols);
    w.weight = &neg;
    assert!(assess(&w, &SkillSettings::default()).is_err());
    // Rows of one well only: undefined scores, verdict none.
    let one = vec![0usize; 6];
    let mut single = input_of(&cols);
    single.well = &one;
    let s = assess(&single, &SkillSettings::default()).unwrap();
    assert!(s.r2.is_nan() && s.r2_interval[0].is_nan());
    assert_eq!(s.verdict, tidemark::skill::Verdict::None);
}
