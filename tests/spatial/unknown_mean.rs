//! Conditioning with an unknown mean: ordinary kriging against a hand-worked case, the engine's
//! decomposition against the ordinary-kriging system, the mean estimate on simulated data with a
//! known shift, exact conditioning at wells and determinism across thread counts.

use std::sync::Arc;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use tidemark::project::Direction;
use tidemark::spatial::normal;
use tidemark::spatial::totals::{
    ErrorField, Layer, Measure, Quantity, TotalsInput, TotalsOutput, TotalsSettings, simulate,
};
use tidemark::spatial::unknown_mean::{MeanRule, ordinary_kriging};
use tidemark::spatial::{
    CirculantField, Conditioning, EmbeddingSettings, LagTable, Lattice, ModelKind, VariogramModel,
    WellScore,
};

use super::{covariance_matrix, reference_solve, well};

/// Two data with unit variance and correlation 0.5, a target with covariances 0.6 and 0.2 to
/// them. Worked by hand from the bordered system `lambda_1 + 0.5 lambda_2 + mu = 0.6`,
/// `0.5 lambda_1 + lambda_2 + mu = 0.2`, `lambda_1 + lambda_2 = 1`: subtracting the first two
/// rows gives `0.5 (lambda_1 - lambda_2) = 0.4`, so `lambda = (0.9, 0.1)`, `mu = 0.6 - 0.9 -
/// 0.05 = -0.35`, and the variance `1 - (0.9 x 0.6 + 0.1 x 0.2) + 0.35 = 0.79`. The same variance
/// through simple kriging plus the mean's estimation variance (Journel & Huijbregts 1978,
/// *Mining Geostatistics*, chapter V): `C^-1 c = (2/3, -2/15)`, `sigma_SK^2 = 1 - 0.4 + 0.4/15 =
/// 0.62667`, `1' C^-1 1 = 4/3`, `(1 - 8/15)^2 / (4/3) = 0.16333`, total 0.79.
#[test]
fn ordinary_kriging_matches_a_hand_worked_two_point_case() {
    let ok = ordinary_kriging(&[1.0, 0.5, 0.5, 1.0], &[0.6, 0.2], 1.0).unwrap();
    assert!((ok.weights[0] - 0.9).abs() < 1e-12, "{:?}", ok.weights);
    assert!((ok.weights[1] - 0.1).abs() < 1e-12, "{:?}", ok.weights);
    assert!((ok.lagrange + 0.35).abs() < 1e-12, "{}", ok.lagrange);
    assert!((ok.variance - 0.79).abs() < 1e-12, "{}", ok.variance);
    let sk_variance = 1.0 - (0.6 * 2.0 / 3.0 - 0.2 * 2.0 / 15.0);
    let free: f64 = 1.0 - (2.0 / 3.0 - 2.0 / 15.0);
    assert!((sk_variance + free * free / (4.0 / 3.0) - 0.79).abs() < 1e-12);
    // independent data (pure nugget): equal weights, variance 1 + 1/n (the error of the mean
    // added to the nugget of the target), a textbook limit
    let ok = ordinary_kriging(&[1.0, 0.0, 0.0, 1.0], &[0.0, 0.0], 1.0).unwrap();
    assert_eq!(ok.weights, vec![0.5, 0.5]);
    assert!((ok.variance - 1.5).abs() < 1e-12);
    // a target on a datum: that datum alone, no error
    let ok = ordinary_kriging(&[1.0, 0.5, 0.5, 1.0], &[1.0, 0.5], 1.0).unwrap();
    assert!((ok.weights[0] - 1.0).abs() < 1e-12 && ok.weights[1].abs() < 1e-12);
    assert!(ok.variance.abs() < 1e-12);
    // bad input is an error, not a panic
    assert!(ordinary_kriging(&[1.0], &[0.5, 0.5], 1.0).is_err());
    assert!(ordinary_kriging(&[1.0, 1.0, 1.0, 1.0], &[0.5, 0.5], 1.0).is_err());
}

/// At every node, the engine's `SK(z) + m_hat (1 - sum lambda_SK)` is the ordinary-kriging
/// estimate, and `sigma_SK^2 + (1 - sum lambda_SK)^2 se^2` the ordinary-kriging variance (the
/// simple-kriging variance from smartcore 0.7's Cholesky solver).
#[test]
fn the_engine_decomposition_is_ordinary_kriging() {
    let lat = Lattice::new(30, 24, 40.0, 40.0);
    let model = VariogramModel {
        kind: ModelKind::Exponential,
        nugget: 0.15,
        sill: 1.0,
        range: 500.0,
    };
    let mut rng = StdRng::seed_from_u64(17);
    let wells: Vec<WellScore> = (0..9)
        .map(|k| {
            let i = rng.random_range(0..lat.nx) as f64;
            let j = rng.random_range(0..lat.ny) as f64;
            well(
                &format!("W{k}"),
                i * lat.dx,
                j * lat.dy,
                0.7 + rng.random::<f64>() - 0.5,
            )
        })
        .collect();
    let table = Arc::new(LagTable::new(lat, &model).unwrap());
    let cond = Conditioning::new("layer", table, &wells).unwrap();
    let data: Vec<((usize, usize), f64)> = cond.data().collect();
    let pts: Vec<(f64, f64)> = data
        .iter()
        .map(|((i, j), _)| (*i as f64 * lat.dx, *j as f64 * lat.dy))
        .collect();
    let c = covariance_matrix(&model, &pts);
    let n = pts.len();
    let flat: Vec<f64> = c.iter().copied().collect();
    let est = cond.mean_estimate().unwrap();
    // GLS mean and its variance from smartcore's solve of C a = 1
    let a = reference_solve(&c, &vec![1.0; n]);
    let s: f64 = a.iter().sum();
    let m: f64 = a.iter().zip(&data).map(|(a, d)| a * d.1).sum::<f64>() / s;
    assert!((est.mean - m).abs() < 1e-8, "{} vs {m}", est.mean);
    assert!((est.se - (1.0 / s).sqrt()).abs() < 1e-8);
    let sk = cond.kriged_mean().unwrap();
    let free = cond.free_share();
    for node in [0, 37, 200, 411, lat.len() - 1] {
        let (i, j) = (node % lat.nx, node / lat.nx);
        let c0: Vec<f64> = pts
            .iter()
            .map(|p| model.covariance((p.0 - i as f64 * lat.dx).hypot(p.1 - j as f64 * lat.dy)))
            .collect();
        let ok = ordinary_kriging(&flat, &c0, 1.0).unwrap();
        let ok_estimate: f64 = ok.weights.iter().zip(&data).map(|(w, d)| w * d.1).sum();
        let engine = sk[node] + est.mean * free[node];
        assert!(
            (ok_estimate - engine).abs() < 1e-6,
            "node {node}: OK {ok_estimate}, engine {engine}"
        );
        let lambda = reference_solve(&c, &c0);
        let sk_var = 1.0 - lambda.iter().zip(&c0).map(|(l, c)| l * c).sum::<f64>();
        let engine_var = sk_var + free[node].powi(2) * est.se.powi(2);
        assert!(
            (ok.variance - engine_var).abs() < 1e-6,
            "node {node}: OK variance {}, engine {engine_var}",
            ok.variance
        );
    }
}

/// Independent scores (pure nugget): the estimate is their plain mean with standard error
/// `1 / sqrt(n)`.
#[test]
fn the_mean_of_independent_scores_is_their_plain_mean() {
    let lat = Lattice::new(20, 20, 10.0, 10.0);
    let model = VariogramModel {
        kind: ModelKind::Spherical,
        nugget: 1.0,
        sill: 1.0,
        range: 50.0,
    };
    let scores = [0.3, -1.2, 2.0, 0.9, 0.4];
    let wells: Vec<WellScore> = scores
        .iter()
        .enumerate()
        .map(|(k, &s)| well(&format!("W{k}"), 30.0 * k as f64, 15.0 * k as f64, s))
        .collect();
    let cond = Conditioning::new(
        "layer",
        Arc::new(LagTable::new(lat, &model).unwrap()),
        &wells,
    )
    .unwrap();
    let est = cond.mean_estimate().unwrap();
    assert!((est.mean - 0.48).abs() < 1e-8, "{}", est.mean);
    assert!((est.plain_mean - 0.48).abs() < 1e-12);
    assert!((est.se - 1.0 / 5f64.sqrt()).abs() < 1e-8, "{}", est.se);
    assert_eq!(est.wells, 5);
}

/// On fields simulated with a known shift, the estimate is unbiased and its spread across fields
/// matches its stated standard error.
#[test]
fn the_mean_estimate_recovers_a_known_shift() {
    let lat = Lattice::new(64, 52, 50.0, 50.0);
    let model = VariogramModel {
        kind: ModelKind::Exponential,
        nugget: 0.2,
        sill: 0.8,
        range: 900.0,
    };
    let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let table = Arc::new(LagTable::new(lat, &model).unwrap());
    let mut rng = StdRng::seed_from_u64(99);
    let nodes: Vec<(usize, usize)> = (0..40)
        .map(|_| (rng.random_range(0..lat.nx), rng.random_range(0..lat.ny)))
        .collect();
    let shift = 0.6;
    let (mut z_sum, mut z2_sum, mut count) = (0.0, 0.0, 0.0);
    let mut se = f64::NAN;
    for p in 0..60u64 {
        let (a, b) = sim.simulate_pair(p);
        for f in [a, b] {
            let wells: Vec<WellScore> = nodes
                .iter()
                .enumerate()
                .map(|(k, &(i, j))| {
                    well(
                        &format!("W{k}"),
                        i as f64 * lat.dx,
                        j as f64 * lat.dy,
                        f[j * lat.nx + i] + shift,
                    )
                })
                .collect();
            let est = Conditioning::new("layer", table.clone(), &wells)
                .unwrap()
                .mean_estimate()
                .unwrap();
            let z = (est.mean - shift) / est.se;
            z_sum += z;
            z2_sum += z * z;
            count += 1.0;
            se = est.se;
        }
    }
    // 120 estimates: the mean standardised error within 4 standard errors of 0 (the two fields
    // of a pair are independent), the mean square within 4 sd of 1 (chi-square, variance 2/120)
    let mean_z = z_sum / count;
    let ms = z2_sum / count;
    assert!(mean_z.abs() < 4.0 / count.sqrt(), "mean z {mean_z}");
    assert!(
        (ms - 1.0).abs() < 4.0 * (2.0 / count).sqrt(),
        "mean square {ms}"
    );
    // correlated wells carry less than independent ones: se above 1 / sqrt(40)
    assert!(se > 1.0 / 40f64.sqrt(), "se {se}");
}

const NX: usize = 40;
const NY: usize = 30;

fn standard_nodes(_: usize, u: f64) -> f64 {
    normal::quantile(u)
}

fn shifted_wells() -> Vec<WellScore> {
    [
        (100.0, 200.0, 1.3),
        (800.0, 300.0, 0.9),
        (1500.0, 900.0, 1.1),
        (400.0, 1200.0, 0.6),
        (1800.0, 150.0, 1.4),
        (1100.0, 1300.0, 0.8),
    ]
    .iter()
    .enumerate()
    .map(|(k, &(x, y, s))| well(&format!("W{k}"), x, y, s))
    .collect()
}

fn engine_input<'a>(
    dist: &'a dyn tidemark::spatial::NodeDistribution,
    wells: Vec<WellScore>,
) -> TotalsInput<'a> {
    TotalsInput {
        lattice: Lattice::new(NX, NY, 50.0, 50.0),
        fields: vec![ErrorField {
            name: "dSw".into(),
            model: VariogramModel {
                kind: ModelKind::Exponential,
                nugget: 0.1,
                sill: 0.9,
                range: 400.0,
            },
        }],
        layers: vec![Layer {
            name: "dSw m1".into(),
            field: 0,
            calibration: wells.clone(),
            pins: Vec::new(),
            wells,
            distribution: dist,
        }],
        quantities: vec![Quantity {
            name: "swept_area".into(),
            step: "m1".into(),
            unit: "m2".into(),
            layer: 0,
            measure: Measure::Area {
                threshold: 0.5,
                direction: Direction::Above,
            },
            scale: 1.0,
        }],
    }
}

fn run(
    inp: &TotalsInput<'_>,
    rule: MeanRule,
    r: usize,
    keep: usize,
    threads: usize,
) -> TotalsOutput {
    crate::threads::in_pool(threads, || {
        simulate(
            inp,
            &TotalsSettings {
                realizations: r,
                seed: 23,
                keep_maps: keep,
                calibration_draw: true,
                mean: rule,
                ..TotalsSettings::default()
            },
        )
        .unwrap()
    })
}

fn bits(out: &TotalsOutput) -> Vec<u64> {
    let mut v: Vec<u64> = out.quantities[0]
        .totals
        .iter()
        .map(|x| x.to_bits())
        .collect();
    for k in &out.kept {
        v.extend(k.values.iter().map(|x| x.to_bits()));
    }
    v
}

/// With the mean estimated: the realizations still equal the wells' scores at their nodes, far
/// from the wells they centre on the estimated mean (not on zero), the numbers do not depend on
/// the thread count, and without wells nothing changes.
#[test]
fn an_estimated_mean_keeps_the_wells_and_shifts_the_field_between_them() {
    let inp = engine_input(&standard_nodes, shifted_wells());
    let r = 300;
    let out = run(&inp, MeanRule::Estimated, r, r, 2);
    assert_eq!(bits(&out), bits(&run(&inp, MeanRule::Estimated, r, r, 1)));
    let report = &out.layers[0];
    assert!(report.mean_applied);
    let est = report.mean.unwrap();
    assert!(est.mean > 0.6 && est.mean < 1.4, "{est:?}");
    let lat = inp.lattice;
    for w in shifted_wells() {
        let node = (w.y / lat.dy).round() as usize * NX + (w.x / lat.dx).round() as usize;
        for k in &out.kept {
            assert!(
                (k.values[node] - w.score).abs() < 1e-5,
                "{}: {} vs {}",
                w.name,
                k.values[node],
                w.score
            );
        }
    }
    // a node over 700 m (1.75 practical ranges) from every well: its mean over the
    // realizations is the estimate, within 4 Monte Carlo standard errors of the realizations'
    // own spread (the field's pairs are independent)
    let far = 29 * NX + 39;
    let values: Vec<f64> = out.kept.iter().map(|k| k.values[far]).collect();
    let mean = values.iter().sum::<f64>() / r as f64;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (r - 1) as f64).sqrt();
    assert!(
        (mean - est.mean).abs() < 4.0 * sd / (r as f64).sqrt(),
        "far node mean {mean}, estimate {}",
        est.mean
    );
    // its variance: 1 (the field far from the wells) + se^2 (the mean's error), within 4 sd of
    // a sample variance of 300 (2 / (r - 1) relative variance)
    let expected = 1.0 + est.se * est.se;
    assert!(
        (sd * sd / expected - 1.0).abs() < 4.0 * (2.0 / (r - 1) as f64).sqrt(),
        "far node variance {}, expected {expected}",
        sd * sd
    );
    // under the known-zero mean the same node centres on zero and the area is smaller
    let zero = run(&inp, MeanRule::Zero, r, 0, 2);
    assert!(!zero.layers[0].mean_applied);
    assert_eq!(zero.layers[0].mean, report.mean);
    assert!(out.quantities[0].summary.mean > zero.quantities[0].summary.mean);
    // without wells there is nothing to estimate: identical numbers under both rules
    let mut bare = engine_input(&standard_nodes, shifted_wells());
    bare.layers[0].wells.clear();
    bare.layers[0].calibration.clear();
    assert_eq!(
        bits(&run(&bare, MeanRule::Estimated, 20, 2, 2)),
        bits(&run(&bare, MeanRule::Zero, 20, 2, 2))
    );
}
