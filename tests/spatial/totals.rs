//! The totals engine: node-wise consistency with the predictive distributions, the naive rules,
//! determinism across thread counts and realization counts, input errors.

use statrs::distribution::{ContinuousCDF, Normal};
use tidemark::project::{Convention, Direction};
use tidemark::spatial::normal;
use tidemark::spatial::totals::{
    ErrorField, Layer, Measure, NodeDistribution, Quantity, TotalsInput, TotalsOutput,
    TotalsSettings, simulate,
};
use tidemark::spatial::{Lattice, ModelKind, VariogramModel, WellScore};

use super::two_sided_p;

/// A point mass `p0` at zero mixed with a lognormal part (median `m`, log-sd `s`): the "no
/// change" hurdle shape, with its exact distribution function.
struct Hurdle {
    p0: Vec<f64>,
    m: Vec<f64>,
    s: f64,
}

impl Hurdle {
    fn new(n: usize) -> Self {
        Hurdle {
            p0: (0..n)
                .map(|i| 0.2 + 0.4 * ((i * 7) % 11) as f64 / 10.0)
                .collect(),
            m: (0..n)
                .map(|i| 0.1 + 0.2 * ((i * 3) % 13) as f64 / 12.0)
                .collect(),
            s: 0.5,
        }
    }
    /// Mean: (1 - p0) m exp(s^2 / 2) (lognormal mean, Johnson, Kotz & Balakrishnan 1994, eq. 14.8a).
    fn mean(&self, i: usize) -> f64 {
        (1.0 - self.p0[i]) * self.m[i] * (0.5 * self.s * self.s).exp()
    }
}

impl NodeDistribution for Hurdle {
    fn quantile(&self, i: usize, u: f64) -> f64 {
        let p0 = self.p0[i];
        if u <= p0 {
            0.0
        } else {
            self.m[i] * (self.s * normal::quantile((u - p0) / (1.0 - p0))).exp()
        }
    }
    fn cdf(&self, i: usize, y: f64) -> f64 {
        if y < 0.0 {
            0.0
        } else if y == 0.0 {
            self.p0[i]
        } else {
            self.p0[i] + (1.0 - self.p0[i]) * normal::cdf((y / self.m[i]).ln() / self.s)
        }
    }
    fn cdf_left(&self, i: usize, y: f64) -> f64 {
        if y <= 0.0 { 0.0 } else { self.cdf(i, y) }
    }
}

const NX: usize = 30;
const NY: usize = 20;

/// Normal node means for the second layer (null where `i % 37 == 5`).
fn normal_mean(i: usize) -> f64 {
    -1.0 + 1.5 * ((i % NX) as f64 / NX as f64) + 0.5 * ((i / NX) as f64 / NY as f64)
}

fn is_null(i: usize) -> bool {
    i % 37 == 5
}

/// A closure quantile function (the engine bisects it for thresholds).
fn normal_nodes(i: usize, u: f64) -> f64 {
    if is_null(i) {
        f64::NAN
    } else {
        normal_mean(i) + 0.8 * normal::quantile(u)
    }
}

fn input<'a>(
    hurdle: &'a Hurdle,
    closure: &'a dyn NodeDistribution,
    weights: &'a [f64],
    wells: Vec<WellScore>,
) -> TotalsInput<'a> {
    let lattice = Lattice::new(NX, NY, 50.0, 50.0);
    TotalsInput {
        lattice,
        fields: vec![
            ErrorField {
                name: "dSw".into(),
                model: VariogramModel {
                    kind: ModelKind::Exponential,
                    nugget: 0.1,
                    sill: 1.0,
                    range: 400.0,
                },
            },
            ErrorField {
                name: "dP".into(),
                model: VariogramModel {
                    kind: ModelKind::Spherical,
                    nugget: 0.0,
                    sill: 1.3,
                    range: 600.0,
                },
            },
        ],
        layers: vec![
            Layer {
                name: "dSw m1".into(),
                field: 0,
                calibration: wells.clone(),
                pins: Vec::new(),
                wells,
                distribution: hurdle,
            },
            Layer {
                name: "dP m1".into(),
                field: 1,
                wells: Vec::new(),
                calibration: Vec::new(),
                pins: Vec::new(),
                distribution: closure,
            },
        ],
        quantities: vec![
            Quantity {
                name: "swept_area".into(),
                step: "m1".into(),
                unit: "m2".into(),
                layer: 0,
                measure: Measure::Area {
                    threshold: 0.15,
                    direction: Direction::Above,
                },
                scale: 1.0,
            },
            Quantity {
                name: "swept_volume".into(),
                step: "m1".into(),
                unit: "m3".into(),
                layer: 0,
                measure: Measure::Sum { weights },
                scale: 1.0,
            },
            Quantity {
                name: "depleted_area".into(),
                step: "m1".into(),
                unit: "km2".into(),
                layer: 1,
                measure: Measure::Area {
                    threshold: -0.5,
                    direction: Direction::Below,
                },
                scale: 1e-6,
            },
        ],
    }
}

/// `|count - R p| <= 5 sqrt(R p (1 - p)) + 1`: a binomial count within five standard deviations
/// (plus one for discreteness). With a few thousand checks per test the family-wise error rate
/// stays below 0.3 % by Bonferroni's inequality, whatever the dependence between nodes.
fn binomial_ok(count: f64, r: f64, p: f64) -> bool {
    (count - r * p).abs() <= 5.0 * (r * p * (1.0 - p)).sqrt() + 1.0
}

#[test]
fn realizations_honour_every_node_distribution() {
    let n = NX * NY;
    let hurdle = Hurdle::new(n);
    let weights = vec![1.0; n];
    let inp = input(&hurdle, &normal_nodes, &weights, Vec::new());
    let r = 400;
    let settings = TotalsSettings {
        realizations: r,
        seed: 2024,
        keep_maps: r,
        ..TotalsSettings::default()
    };
    let out = simulate(&inp, &settings).unwrap();
    let rf = r as f64;
    let std = Normal::new(0.0, 1.0).unwrap();

    // 1. mean crossing indicator vs 1 - F(t) ("above") and F(t-) ("below"), node by node
    let swept = out.quantities[0].mean_indicator.as_ref().unwrap();
    let depleted = out.quantities[2].mean_indicator.as_ref().unwrap();
    assert!(out.quantities[1].mean_indicator.is_none());
    for i in 0..n {
        let p = 1.0 - hurdle.cdf(i, 0.15);
        assert!(
            binomial_ok(swept[i] * rf, rf, p),
            "node {i}: {} vs {p}",
            swept[i]
        );
        if is_null(i) {
            assert!(depleted[i].is_nan());
        } else {
            // statrs 0.19 Normal as the reference distribution function
            let p = Normal::new(normal_mean(i), 0.8).unwrap().cdf(-0.5);
            assert!(
                binomial_ok(depleted[i] * rf, rf, p),
                "node {i}: {} vs {p}",
                depleted[i]
            );
        }
    }

    // 2. node-wise quantiles of the realizations vs the node's P10 / P50 / P90
    assert_eq!(out.kept.len(), 2 * r);
    for layer in 0..2 {
        let maps: Vec<&Vec<f64>> = out
            .kept
            .iter()
            .filter(|k| k.layer == layer)
            .map(|k| &k.values)
            .collect();
        assert_eq!(maps.len(), r);
        for i in 0..n {
            if layer == 1 && is_null(i) {
                assert!(maps.iter().all(|m| m[i].is_nan()));
                continue;
            }
            for q in [0.1, 0.5, 0.9] {
                let level = if layer == 0 {
                    hurdle.quantile(i, q)
                } else {
                    normal_mean(i) + 0.8 * std.inverse_cdf(q)
                };
                let below = maps.iter().filter(|m| m[i] < level).count() as f64;
                let at_most = maps.iter().filter(|m| m[i] <= level).count() as f64;
                let tol = 5.0 * (rf * q * (1.0 - q)).sqrt() + 1.0;
                assert!(
                    below <= rf * q + tol && at_most >= rf * q - tol,
                    "layer {layer} node {i} level {q}: {below} below, {at_most} at most"
                );
            }
        }
    }

    // 3. the mean of a sum total is the sum of node means, correlated or not
    let expected: f64 = (0..n).map(|i| hurdle.mean(i)).sum();
    let q = &out.quantities[1];
    let pz = two_sided_p((q.summary.mean - expected) / (q.summary.sd / rf.sqrt()));
    assert!(pz > 1e-3, "mean {} vs {expected}", q.summary.mean);
    let ind = q.independent.unwrap();
    let pz = two_sided_p((ind.mean - expected) / (ind.sd / rf.sqrt()));
    assert!(pz > 1e-3, "independent mean {} vs {expected}", ind.mean);

    // 4. positive correlation widens a total between the two naive rules (Lehmann 1966)
    for q in &out.quantities {
        let ind = q.independent.unwrap();
        let width = q.summary.p90 - q.summary.p10;
        assert!(
            ind.p90 - ind.p10 < width,
            "{}: independent band not narrower",
            q.name
        );
        assert!(
            width < q.comonotone.p90 - q.comonotone.p10,
            "{}: comonotone band not wider",
            q.name
        );
        assert!(q.summary.p10 <= q.summary.p50 && q.summary.p50 <= q.summary.p90);
    }
    assert_eq!(
        out.layers[1].active_nodes,
        (0..n).filter(|&i| !is_null(i)).count()
    );
    assert_eq!(
        out.fields[1].model.sill, 1.0,
        "fields are simulated at unit variance"
    );
}

/// Bit patterns of every number in an output, for exact comparison (NaN included).
fn fingerprint(out: &TotalsOutput) -> Vec<u64> {
    let mut v = Vec::new();
    for q in &out.quantities {
        v.extend(q.totals.iter().map(|x| x.to_bits()));
        v.extend(q.independent_totals.iter().map(|x| x.to_bits()));
        if let Some(m) = &q.mean_indicator {
            v.extend(m.iter().map(|x| x.to_bits()));
        }
    }
    for k in &out.kept {
        v.push(k.layer as u64);
        v.push(k.realization as u64);
        v.extend(k.values.iter().map(|x| x.to_bits()));
    }
    v
}

fn wells() -> Vec<WellScore> {
    [
        (120.0, 300.0, 1.1),
        (900.0, 450.0, -0.7),
        (1300.0, 120.0, 0.2),
    ]
    .iter()
    .enumerate()
    .map(|(k, &(x, y, s))| WellScore {
        name: format!("W{k}"),
        x,
        y,
        score: s,
    })
    .collect()
}

#[test]
fn same_numbers_for_any_thread_count_and_chunk() {
    let n = NX * NY;
    let hurdle = Hurdle::new(n);
    let weights: Vec<f64> = (0..n).map(|i| 1.0 + (i % 5) as f64).collect();
    let inp = input(&hurdle, &normal_nodes, &weights, wells());
    let run = |threads: usize, chunk: usize| {
        crate::threads::in_pool(threads, || {
            simulate(
                &inp,
                &TotalsSettings {
                    realizations: 11,
                    seed: 5,
                    keep_maps: 3,
                    chunk,
                    ..TotalsSettings::default()
                },
            )
            .unwrap()
        })
    };
    let one = run(1, 16);
    let three = run(3, 2);
    assert_eq!(fingerprint(&one), fingerprint(&three));
    assert_eq!(one.kept.len(), 6);
    // a different seed gives different numbers
    let other = simulate(
        &inp,
        &TotalsSettings {
            realizations: 11,
            seed: 6,
            keep_maps: 3,
            ..TotalsSettings::default()
        },
    )
    .unwrap();
    assert_ne!(fingerprint(&one), fingerprint(&other));
}

#[test]
fn the_first_realizations_do_not_depend_on_how_many_are_drawn() {
    let n = NX * NY;
    let hurdle = Hurdle::new(n);
    let weights = vec![2.0; n];
    let inp = input(&hurdle, &normal_nodes, &weights, wells());
    let run = |r: usize| {
        simulate(
            &inp,
            &TotalsSettings {
                realizations: r,
                seed: 9,
                ..TotalsSettings::default()
            },
        )
        .unwrap()
    };
    let (short, long) = (run(7), run(12));
    for (a, b) in short.quantities.iter().zip(&long.quantities) {
        assert_eq!(a.totals[..], b.totals[..7], "{}", a.name);
        assert_eq!(
            a.independent_totals[..],
            b.independent_totals[..7],
            "{}",
            a.name
        );
    }
    assert_eq!(long.layers[0].conditioning.nodes_used, 3);
}

#[test]
fn comonotone_rule_and_conventions_by_hand() {
    // Six nodes (3 x 2, cells of 10 m x 10 m = 100 m2), node i ~ N(i, 1), weights 1 + i.
    // statrs 0.19: Phi^-1(0.1) = -1.2815515655446004.
    // Sum at level u: sum (1 + i)(i + z_u) = 70 + 21 z_u -> 43.087417 / 70 / 96.912583.
    // Area above 2.5 at level u: nodes with i + z_u > 2.5 -> u = 0.1: i in {4, 5} (200 m2);
    // u = 0.5: {3, 4, 5} (300 m2); u = 0.9: {2, ..., 5} (400 m2).
    let z = Normal::new(0.0, 1.0).unwrap().inverse_cdf(0.1);
    let dist = |i: usize, u: f64| i as f64 + normal::quantile(u);
    let weights: Vec<f64> = (0..6).map(|i| 1.0 + i as f64).collect();
    let mk = |convention| {
        let inp = TotalsInput {
            lattice: Lattice::new(3, 2, 10.0, 10.0),
            fields: vec![ErrorField {
                name: "x".into(),
                model: VariogramModel {
                    kind: ModelKind::Exponential,
                    nugget: 0.0,
                    sill: 1.0,
                    range: 30.0,
                },
            }],
            layers: vec![Layer {
                name: "x m1".into(),
                field: 0,
                wells: Vec::new(),
                calibration: Vec::new(),
                pins: Vec::new(),
                distribution: &dist,
            }],
            quantities: vec![
                Quantity {
                    name: "sum".into(),
                    step: "m1".into(),
                    unit: "u".into(),
                    layer: 0,
                    measure: Measure::Sum { weights: &weights },
                    scale: 1.0,
                },
                Quantity {
                    name: "area".into(),
                    step: "m1".into(),
                    unit: "ha".into(),
                    layer: 0,
                    measure: Measure::Area {
                        threshold: 2.5,
                        direction: Direction::Above,
                    },
                    scale: 1e-4,
                },
            ],
        };
        simulate(
            &inp,
            &TotalsSettings {
                realizations: 50,
                convention,
                ..TotalsSettings::default()
            },
        )
        .unwrap()
    };
    let pct = mk(Convention::Percentile);
    let c = pct.quantities[0].comonotone;
    assert!((c.p10 - (70.0 + 21.0 * z)).abs() < 1e-9 && (c.p10 - 43.087417).abs() < 1e-6);
    assert!((c.p50 - 70.0).abs() < 1e-9);
    assert!((c.p90 - (70.0 - 21.0 * z)).abs() < 1e-9);
    let a = pct.quantities[1].comonotone;
    for (got, want) in [(a.p10, 0.02), (a.p50, 0.03), (a.p90, 0.04)] {
        assert!((got - want).abs() < 1e-15, "{got} vs {want}");
    }
    // every area total is a whole number of cells
    for t in &pct.quantities[1].totals {
        let cells = t / 1e-2;
        assert!((cells - cells.round()).abs() < 1e-9 && (0.0..=6.0).contains(&cells.round()));
    }
    let exc = mk(Convention::Exceedance);
    let e = exc.quantities[0].comonotone;
    assert_eq!((e.p10, e.p50, e.p90), (c.p90, c.p50, c.p10));
    let (sp, se) = (pct.quantities[0].summary, exc.quantities[0].summary);
    assert_eq!((se.p10, se.p50, se.p90), (sp.p90, sp.p50, sp.p10));
    assert_eq!((se.mean, se.sd), (sp.mean, sp.sd));
}

#[test]
fn bad_input_names_the_item() {
    let n = NX * NY;
    let hurdle = Hurdle::new(n);
    let short = vec![1.0; n - 1];
    let inp = input(&hurdle, &normal_nodes, &short, Vec::new());
    let e = simulate(&inp, &TotalsSettings::default())
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("total swept_volume at m1") && e.contains("weight map"),
        "{e}"
    );

    let weights = vec![1.0; n];
    let mut inp = input(&hurdle, &normal_nodes, &weights, Vec::new());
    inp.layers[1].field = 7;
    let e = simulate(&inp, &TotalsSettings::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("layer dP m1"), "{e}");

    let inp = input(&hurdle, &normal_nodes, &weights, Vec::new());
    let e = simulate(
        &inp,
        &TotalsSettings {
            realizations: 1,
            ..TotalsSettings::default()
        },
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("totals.realizations"), "{e}");

    let mut inp = input(&hurdle, &normal_nodes, &weights, Vec::new());
    inp.fields[0].model.range = -1.0;
    let e = simulate(&inp, &TotalsSettings::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("error field dSw"), "{e}");

    let bad_well = vec![WellScore {
        name: "X9".into(),
        x: 10.0,
        y: 10.0,
        score: f64::INFINITY,
    }];
    let inp = input(&hurdle, &normal_nodes, &weights, bad_well);
    let e = simulate(&inp, &TotalsSettings::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("well X9 of dSw m1"), "{e}");
}

/// The calibration draw (spatial::bootstrap) moves no node's distribution: without conditioning
/// the crossing frequencies still follow the node distributions, while a shift shared by every
/// node widens an area total. Same numbers for any thread count.
#[test]
fn the_calibration_draw_keeps_node_distributions_and_widens_totals() {
    let n = NX * NY;
    let hurdle = Hurdle::new(n);
    let weights = vec![1.0; n];
    let mut inp = input(&hurdle, &normal_nodes, &weights, wells());
    // the wells' scores drive the draw only (no conditioning), so every node keeps its marginal
    inp.layers[0].wells.clear();
    let r = 400;
    let run = |draw: bool, threads: usize| {
        crate::threads::in_pool(threads, || {
            simulate(
                &inp,
                &TotalsSettings {
                    realizations: r,
                    seed: 31,
                    calibration_draw: draw,
                    ..TotalsSettings::default()
                },
            )
            .unwrap()
        })
    };
    let (plain, drawn) = (run(false, 2), run(true, 2));
    assert_eq!(fingerprint(&drawn), fingerprint(&run(true, 1)));
    let rf = r as f64;
    let swept = drawn.quantities[0].mean_indicator.as_ref().unwrap();
    for (i, &f) in swept.iter().enumerate() {
        let p = 1.0 - hurdle.cdf(i, 0.15);
        assert!(binomial_ok(f * rf, rf, p), "node {i}: {f} vs {p}");
    }
    // the layer without calibration scores is untouched
    assert_eq!(plain.quantities[2].totals, drawn.quantities[2].totals);
    let (a, b) = (
        plain.quantities[0].summary.sd,
        drawn.quantities[0].summary.sd,
    );
    assert!(b > a, "swept area sd {b} with the draw, {a} without");
}
