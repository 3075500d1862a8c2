//! Fingerprints of `calibrate_target` and `CalibratedTarget::predict` on generated wells, one per
//! path through the calibration: default settings, a covariate shift, spatial blocks with the
//! booster and more Mondrian bins, leave one well out with the forest and no end correction, a
//! 90 % band, noise that grows with the first attribute, and too few wells for a finite band.
//!
//! ```text
//! cargo run --release --example calibrate_fingerprint [-- OUT_FOLDER]
//! ```
//!
//! Prints, per case, what the calibration chose and a SHA-256 of the calibrated target's JSON
//! (models, maps and diagnostics) followed by the bits of its predictions at new rows. A change
//! that should not move any number (a refactoring) must leave every line as it was; with
//! OUT_FOLDER, each case's JSON is written there for a diff when it does not.

use ndarray::Array2;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use sha2::{Digest, Sha256};
use tidemark::calibrate::shift::RowShift;
use tidemark::calibrate::{
    CalibrationSettings, FoldMethod, LearnerChoice, TargetData, Threshold, calibrate_target,
};
use tidemark::ensemble::{BoostSettings, ForestSettings};

/// Generated rows: 4 attributes and the step column; the change depends on the first two
/// attributes, a well effect and noise (growing with the first attribute when `spread`),
/// clipped to [-1, 1].
struct Field {
    x: Array2<f64>,
    y: Vec<f64>,
    group: Vec<usize>,
    xy: Vec<[f64; 2]>,
    step: Vec<usize>,
    weight: Vec<f64>,
}

fn field(n_wells: usize, spread: bool, seed: u64) -> Field {
    let mut rng = StdRng::seed_from_u64(seed);
    let unit = Normal::new(0.0, 1.0).expect("valid normal");
    let (mut rows, mut y, mut group, mut xy, mut step) = (vec![], vec![], vec![], vec![], vec![]);
    for w in 0..n_wells {
        let loc = [rng.random::<f64>() * 6000.0, rng.random::<f64>() * 4000.0];
        let effect = 0.05 * unit.sample(&mut rng);
        for s in 0..rng.random_range(1..=4usize) {
            let (a, b): (f64, f64) = (rng.random_range(-1.0..1.0), rng.random_range(-1.0..1.0));
            let (c, d): (f64, f64) = (rng.random(), unit.sample(&mut rng));
            rows.push([a, b, c, d, s as f64]);
            let sd = if spread {
                0.02 + 0.3 * (a + 1.0).powi(2)
            } else {
                0.1
            };
            let v = 0.6 * a + 0.3 * (3.0 * b).sin() + effect + sd * unit.sample(&mut rng);
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
        weight: (0..n).map(|i| 0.5 + (i % 3) as f64 * 0.25).collect(),
    }
}

fn thresholds() -> Vec<Threshold> {
    vec![
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
    ]
}

fn small(settings: CalibrationSettings) -> CalibrationSettings {
    CalibrationSettings {
        forest: ForestSettings {
            n_trees: 60,
            ..ForestSettings::default()
        },
        boost: BoostSettings {
            n_rounds: 60,
            ..BoostSettings::default()
        },
        ..settings
    }
}

fn main() {
    let out = std::env::args().nth(1).map(std::path::PathBuf::from);
    let big = field(40, false, 7);
    let wide = field(80, true, 10);
    let few = field(7, false, 8);
    let ratio: Vec<f64> = (0..big.y.len())
        .map(|i| (0.8 * big.x[[i, 0]]).exp())
        .collect();
    let new_rows = field(30, false, 9).x;
    let default = CalibrationSettings::default();
    let cases: Vec<(&str, &Field, Option<RowShift>, CalibrationSettings)> = vec![
        ("default", &big, None, small(default.clone())),
        (
            "shift",
            &big,
            Some(RowShift {
                ratio: &ratio,
                test_ratio: 1.3,
            }),
            small(default.clone()),
        ),
        (
            "blocks-boost-bins",
            &big,
            None,
            small(CalibrationSettings {
                fold_method: FoldMethod::Blocks,
                learner: LearnerChoice::Boost,
                max_bins: 3,
                min_wells_per_bin: 3,
                ..default.clone()
            }),
        ),
        (
            "one-well-forest-plain",
            &big,
            None,
            small(CalibrationSettings {
                fold_method: FoldMethod::OneWell,
                learner: LearnerChoice::Forest,
                end_correction: false,
                ..default.clone()
            }),
        ),
        (
            "level-0.9",
            &big,
            None,
            small(CalibrationSettings {
                level: 0.9,
                seed: 5,
                ..default.clone()
            }),
        ),
        ("spread", &wide, None, small(default.clone())),
        (
            "spread-forest",
            &wide,
            None,
            small(CalibrationSettings {
                learner: LearnerChoice::Forest,
                max_bins: 2,
                seed: 3,
                ..default.clone()
            }),
        ),
        ("too-few-wells", &few, None, small(default.clone())),
    ];
    for (name, f, shift, settings) in cases {
        let data = TargetData {
            name: "dSw",
            x: f.x.view(),
            y: &f.y,
            group: &f.group,
            xy: &f.xy,
            step: &f.step,
            weight: &f.weight,
            bounds: (-1.0, 1.0),
            thresholds: thresholds(),
            shift,
            zero: Default::default(),
            dissimilarity: None,
        };
        let cal = calibrate_target(&data, &settings).expect("calibrates");
        let json = serde_json::to_string(&cal).expect("serialises");
        let p = cal.predict(new_rows.view()).expect("predicts");
        let mut h = Sha256::new();
        h.update(json.as_bytes());
        for v in
            p.lo.iter()
                .chain(&p.mid)
                .chain(&p.hi)
                .chain(p.exceed.iter().flatten())
        {
            h.update(v.to_bits().to_le_bytes());
        }
        let d = &cal.diagnostics;
        println!(
            "{name:24} learner {} band {:?} bins {} locality {} warnings {}  {:x}",
            d.learner.chosen,
            d.band.method,
            d.band.max_bins,
            d.band.locality,
            d.warnings.len(),
            h.finalize()
        );
        if let Some(dir) = &out {
            std::fs::create_dir_all(dir).expect("creates the folder");
            tidemark::io::atomic::write_bytes(&dir.join(format!("{name}.json")), json.as_bytes())
                .expect("writes");
        }
    }
}
