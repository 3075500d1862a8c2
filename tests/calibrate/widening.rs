//! The exceedance maps follow the widened band on the recalibrated-forest path (a continuous
//! target whose probabilities come from the forest's CDF recalibrated on held-out PIT values,
//! Kuleshov, Fenner & Ermon 2018). Beyond the dissimilarity cross-validation saw, the spread rule
//! stretches each side of the band about the middle by a factor `s`; the probability of a
//! threshold `t` must then be that of the stretched distribution, `F(t) = F0(mid + (t - mid) / s)`
//! with `F0` the recalibrated forest CDF, made consistent with the written band.
//!
//! The safe direction: widening makes no crossing more certain than the narrower distribution
//! said. A crossing probability moves monotonically, as `s` grows, from `F0`'s value at `t`
//! towards `F0`'s value at the middle, and never past it: a threshold beyond the middle in the
//! event's direction becomes more likely, one on the other side less likely.

use ndarray::Array2;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use tidemark::calibrate::exceedance::ExceedMethod;
use tidemark::calibrate::input::Space;
use tidemark::calibrate::predict::NodeContext;
use tidemark::calibrate::{CalibrationSettings, TargetData, Threshold, calibrate_target};
use tidemark::ensemble::ForestSettings;

fn truth(a: f64, b: f64) -> f64 {
    2.0 * a + (3.0 * b).sin()
}

/// `P(Y <= t)` (or `P(Y < t)` when `strict`) clipped to what a distribution with quantiles
/// `band[k] = (u_k, y_k)` allows: `F(t) >= u_k` once `t` reaches `y_k`, `F(t) <= u_k` before.
fn clip_to_band(p: f64, t: f64, strict: bool, band: &[(f64, f64); 3]) -> f64 {
    let (mut lo, mut hi) = (0.0f64, 1.0f64);
    for &(u, y) in band {
        if (strict && t > y) || (!strict && t >= y) {
            lo = lo.max(u);
        } else {
            hi = hi.min(u);
        }
    }
    if lo > hi { p } else { p.clamp(lo, hi) }
}

#[test]
fn beyond_the_spanned_dissimilarity_the_exceedance_is_the_stretched_recalibrated_forest_cdf() {
    let mut rng = StdRng::seed_from_u64(8);
    // 60 wells x 3 steps; features (a, b, step).
    let (mut rows, mut y, mut group, mut xy, mut step) = (vec![], vec![], vec![], vec![], vec![]);
    for w in 0..60usize {
        let p = [rng.random::<f64>() * 5000.0, rng.random::<f64>() * 5000.0];
        for s in 0..3usize {
            let (a, b): (f64, f64) = (rng.random_range(-1.0..1.0), rng.random_range(-1.0..1.0));
            rows.push([a, b, s as f64]);
            let noise: f64 = rng.random_range(-0.4..0.4);
            y.push(truth(a, b) + noise);
            group.push(w);
            xy.push(p);
            step.push(s);
        }
    }
    let n = y.len();
    let x = Array2::from_shape_fn((n, 3), |(i, j)| rows[i][j]);
    // The dissimilarity space: the two attributes as they are (both span [-1, 1]).
    let points: Vec<f64> = rows.iter().flat_map(|r| [r[0], r[1]]).collect();
    let mut sum = 0.0;
    for i in 0..n {
        for j in i + 1..n {
            sum += (rows[i][0] - rows[j][0]).hypot(rows[i][1] - rows[j][1]);
        }
    }
    let mean_distance = sum / (n * (n - 1) / 2) as f64;
    let weight = vec![1.0; n];
    let thresholds = vec![
        Threshold {
            label: "up".into(),
            value: 1.2,
            above: true,
        },
        Threshold {
            label: "down".into(),
            value: -0.8,
            above: false,
        },
    ];
    let data = TargetData {
        name: "dP",
        x: x.view(),
        y: &y,
        group: &group,
        xy: &xy,
        step: &step,
        weight: &weight,
        bounds: (-50.0, 50.0),
        thresholds: thresholds.clone(),
        shift: None,
        zero: Default::default(),
        dissimilarity: Some(Space {
            points: &points,
            dim: 2,
            mean_distance,
        }),
    };
    let settings = CalibrationSettings {
        forest: ForestSettings {
            n_trees: 100,
            ..ForestSettings::default()
        },
        ..CalibrationSettings::default()
    };
    let mut cal = calibrate_target(&data, &settings).expect("calibrates");
    assert!(cal.hurdle.is_none(), "a continuous target");
    // Every threshold on the recalibrated-forest path, whichever the out-of-fold choice was.
    cal.exceed_methods = vec![ExceedMethod::ForestRecalibrated; thresholds.len()];
    let spread = cal.spread.clone().expect("a spread rule");
    let edge = spread.beyond.di_max;
    assert!(
        edge.is_finite() && edge > 0.0,
        "edge of dissimilarity {edge}"
    );

    // Nodes: 40 attribute pairs inside the training range, step 0, at a well (distance 0), so
    // that only the dissimilarity moves them beyond the spanned ground.
    let m = 40;
    let xn = Array2::from_shape_fn((m, 3), |(_, j)| match j {
        2 => 0.0,
        _ => rng.random_range(-0.8..0.8),
    });
    let plain = cal.predict(xn.view()).unwrap();
    let dist = vec![0.0; m];
    let a = (1.0 - cal.level) / 2.0;
    // Dissimilarity from the edge to 2.4 times it: the pull towards the wells' range grows from
    // 0 to 1 (reached at twice the edge), so the stretch grows.
    let levels: Vec<f64> = (0..=14).map(|k| edge * (1.0 + 0.1 * k as f64)).collect();
    let mut runs = Vec::new();
    let (mut compared, mut stretched) = (0usize, 0usize);
    for &di in &levels {
        let dis = vec![di; m];
        let out = cal
            .predict_at(xn.view(), Some(NodeContext::new(&dis, &dist)))
            .unwrap();
        // The stretch of each side, measured on the written bands (no bound is reached).
        let s: Vec<(f64, f64)> = (0..m)
            .map(|i| {
                assert_eq!(out.mid[i], plain.mid[i], "the middle does not move");
                let mid = plain.mid[i];
                (
                    (mid - out.lo[i]) / (mid - plain.lo[i]),
                    (out.hi[i] - mid) / (plain.hi[i] - mid),
                )
            })
            .collect();
        for (k, th) in thresholds.iter().enumerate() {
            let t0: Vec<f64> = (0..m)
                .map(|i| {
                    let mid = plain.mid[i];
                    let side = if th.value < mid { s[i].0 } else { s[i].1 };
                    mid + (th.value - mid) / side
                })
                .collect();
            let f = cal.forest.cdf_at(xn.view(), 0, &t0);
            for i in 0..m {
                let side = if th.value < plain.mid[i] {
                    s[i].0
                } else {
                    s[i].1
                };
                if (side - 1.0).abs() < 1e-12 {
                    continue;
                }
                stretched += 1;
                let below = cal.recalibration.apply(f[i]).clamp(0.0, 1.0);
                let band = [(a, out.lo[i]), (0.5, out.mid[i]), (1.0 - a, out.hi[i])];
                let below = clip_to_band(below, th.value, !th.above, &band);
                let expected = if th.above { 1.0 - below } else { below };
                let got = out.exceed[k][i];
                assert!(
                    (got - expected).abs() < 1e-12,
                    "{} row {i} DI {di}: {got} against {expected} (s = {side})",
                    th.label
                );
                compared += 1;
            }
        }
        runs.push((s, out));
    }
    assert!(
        stretched >= levels.len() * m,
        "most rows stretched on the threshold's side: {stretched} of {}",
        2 * levels.len() * m
    );
    assert_eq!(compared, stretched);

    // Monotone in s, towards the middle's crossing probability and never past it.
    let f_mid = {
        let f = cal.forest.cdf_at(xn.view(), 0, &plain.mid);
        f.iter()
            .map(|&v| cal.recalibration.apply(v).clamp(0.0, 1.0))
            .collect::<Vec<f64>>()
    };
    let f_t = |t: f64| {
        let f = cal.forest.cdf_at(xn.view(), 0, &vec![t; m]);
        f.iter()
            .map(|&v| cal.recalibration.apply(v).clamp(0.0, 1.0))
            .collect::<Vec<f64>>()
    };
    let mut moved = 0usize;
    for (k, th) in thresholds.iter().enumerate() {
        let f_th = f_t(th.value);
        for i in 0..m {
            let mid = plain.mid[i];
            let lower_side = th.value < mid;
            let side = |r: &(Vec<(f64, f64)>, _)| if lower_side { r.0[i].0 } else { r.0[i].1 };
            // The stretch grows with the dissimilarity.
            for w in runs.windows(2) {
                assert!(
                    side(&w[1]) >= side(&w[0]) - 1e-12,
                    "row {i}: stretch shrank"
                );
            }
            // P(Y <= t) moves from F0(t) towards F0(mid): up when t lies below the middle, down
            // when above; the unclipped values stay between the two.
            let toward_mid = if lower_side { 1.0 } else { -1.0 };
            let below: Vec<f64> = runs
                .iter()
                .map(|(_, o)| {
                    let e = o.exceed[k][i];
                    if th.above { 1.0 - e } else { e }
                })
                .collect();
            for w in below.windows(2) {
                assert!(
                    toward_mid * (w[1] - w[0]) >= -1e-12,
                    "{} row {i}: P(Y <= t) moved away from the middle's: {below:?}",
                    th.label
                );
            }
            let (first, last) = (below[0], below[below.len() - 1]);
            if (last - first).abs() > 1e-9 {
                moved += 1;
            }
            // Before the band's clip, the stretched CDF lies between F0(t) and F0(mid).
            let (lo_b, hi_b) = if lower_side {
                (f_th[i], f_mid[i])
            } else {
                (f_mid[i], f_th[i])
            };
            let last_s = side(runs.last().unwrap());
            let t0 = mid + (th.value - mid) / last_s;
            let f0 = cal
                .recalibration
                .apply(
                    cal.forest
                        .cdf_at(xn.row(i).insert_axis(ndarray::Axis(0)), 0, &[t0])[0],
                )
                .clamp(0.0, 1.0);
            assert!(
                f0 >= lo_b - 1e-12 && f0 <= hi_b + 1e-12,
                "{} row {i}: {f0} outside [{lo_b}, {hi_b}]",
                th.label
            );
        }
    }
    assert!(
        moved >= m / 2,
        "the widening moved the probability of only {moved} rows and thresholds"
    );
}
