//! Timing and memory harness for the field-totals engine (`tidemark::spatial::totals`).
//!
//! A 500 x 500 grid (25 m spacing), 3 targets x 4 steps, 60 wells per layer, 5 totals per step
//! (20 in all: depleted area, swept area, swept pore volume, gas area, gas-out volume). Node
//! distributions are synthetic: dP normal, dSw and dSg a point mass at zero mixed with a lognormal
//! part (the "no change" hurdle shape), every parameter varying smoothly over the grid.
//!
//! Run with `cargo run --release --example totals_probe [-- REALIZATIONS...]
//! [--calibration-draw] [--kriged] [--mean-estimated]` (default: 50 then 200; the wells set
//! their own nodes only, as the run's default `[totals] conditioning = "well_nodes"`; the first
//! flag turns on the per-realization calibration draw, the wells' scores standing for the
//! held-out ones; `--kriged` conditions the fields to the wells by kriging instead
//! (`conditioning = "measured"`); `--mean-estimated`, with `--kriged`, conditions with an
//! unknown mean per layer, `[totals] mean = "estimated"`). For each count it prints the wall seconds, the CPU seconds of the process and the peak
//! resident memory during that run (VmHWM from `/proc/self/status`, reset before each run through
//! `/proc/self/clear_refs`), so one can see that memory does not grow with the count.

use std::time::Instant;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use tidemark::project::{Convention, Direction};
use tidemark::spatial::normal;
use tidemark::spatial::totals::{
    ErrorField, Layer, Measure, NodeDistribution, Quantity, TotalsInput, TotalsSettings, simulate,
};
use tidemark::spatial::{Lattice, ModelKind, VariogramModel, WellScore};

const NX: usize = 500;
const NY: usize = 500;
const D: f64 = 25.0;
const STEPS: [&str; 4] = ["m1", "m2", "m3", "m4"];
const WELLS: usize = 60;

/// Peak resident memory of the process, kB (VmHWM).
fn peak_kb() -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse().ok())
        })
        .unwrap_or(0)
}

#[path = "support/cpu.rs"]
mod cpu;
use cpu::cpu_seconds;

/// Normal node distributions (dP).
struct NormalNodes {
    mean: Vec<f64>,
    sd: Vec<f64>,
}

impl NodeDistribution for NormalNodes {
    fn quantile(&self, node: usize, u: f64) -> f64 {
        self.mean[node] + self.sd[node] * normal::quantile(u)
    }
    fn cdf(&self, node: usize, y: f64) -> f64 {
        normal::cdf((y - self.mean[node]) / self.sd[node])
    }
    fn cdf_left(&self, node: usize, y: f64) -> f64 {
        self.cdf(node, y)
    }
}

/// A point mass at zero (probability `p0`) mixed with a lognormal part (median `m`, log-sd `s`).
struct HurdleNodes {
    p0: Vec<f64>,
    m: Vec<f64>,
    s: Vec<f64>,
}

impl NodeDistribution for HurdleNodes {
    fn quantile(&self, node: usize, u: f64) -> f64 {
        let p0 = self.p0[node];
        if u <= p0 {
            0.0
        } else {
            self.m[node] * (self.s[node] * normal::quantile((u - p0) / (1.0 - p0))).exp()
        }
    }
    fn cdf(&self, node: usize, y: f64) -> f64 {
        if y < 0.0 {
            0.0
        } else if y == 0.0 {
            self.p0[node]
        } else {
            let p0 = self.p0[node];
            p0 + (1.0 - p0) * normal::cdf((y / self.m[node]).ln() / self.s[node])
        }
    }
    fn cdf_left(&self, node: usize, y: f64) -> f64 {
        if y <= 0.0 { 0.0 } else { self.cdf(node, y) }
    }
}

fn smooth(i: usize, j: usize, a: f64, b: f64) -> f64 {
    let (x, y) = (i as f64 / NX as f64, j as f64 / NY as f64);
    0.5 + 0.5 * ((a * x + 0.3).sin() * (b * y + 0.7).cos())
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let draw = args.iter().any(|a| a == "--calibration-draw");
    let estimated = args.iter().any(|a| a == "--mean-estimated");
    let kriged = args.iter().any(|a| a == "--kriged");
    let counts: Vec<usize> = args
        .iter()
        .filter(|a| !a.starts_with("--"))
        .map(|a| a.parse().expect("realization counts are whole numbers"))
        .collect();
    let counts = if counts.is_empty() {
        vec![50, 200]
    } else {
        counts
    };
    let lattice = Lattice::new(NX, NY, D, D);
    let n = lattice.len();
    let t0 = Instant::now();
    let mut dp = Vec::new();
    let mut dsw = Vec::new();
    let mut dsg = Vec::new();
    for (s, _) in STEPS.iter().enumerate() {
        let k = 1.0 + s as f64;
        let (mut mean, mut sd) = (vec![0.0; n], vec![0.0; n]);
        let (mut p0w, mut mw, mut sw) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let (mut p0g, mut mg, mut sg) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        for j in 0..NY {
            for i in 0..NX {
                let v = j * NX + i;
                let a = smooth(i, j, 5.0, 4.0);
                let b = smooth(i, j, 3.0, 6.0);
                mean[v] = -k * 1.2 * a;
                sd[v] = 0.6 + 0.4 * b;
                p0w[v] = (0.9 - 0.18 * k * a).clamp(0.05, 0.95);
                mw[v] = 0.05 + 0.1 * b;
                sw[v] = 0.5;
                p0g[v] = (0.95 - 0.1 * k * b).clamp(0.05, 0.95);
                mg[v] = 0.02 + 0.03 * a;
                sg[v] = 0.6;
            }
        }
        dp.push(NormalNodes { mean, sd });
        dsw.push(HurdleNodes {
            p0: p0w,
            m: mw,
            s: sw,
        });
        dsg.push(HurdleNodes {
            p0: p0g,
            m: mg,
            s: sg,
        });
    }
    let hcpv: Vec<f64> = (0..n)
        .map(|v| 2000.0 + 1500.0 * smooth(v % NX, v / NX, 2.0, 3.0))
        .collect();
    let pv: Vec<f64> = hcpv.iter().map(|h| h * 1.3).collect();
    let mut rng = StdRng::seed_from_u64(7);
    let well_xy: Vec<(f64, f64)> = (0..WELLS)
        .map(|_| {
            (
                rng.random::<f64>() * (NX - 1) as f64 * D,
                rng.random::<f64>() * (NY - 1) as f64 * D,
            )
        })
        .collect();
    let fields = vec![
        ErrorField {
            name: "dP".into(),
            model: VariogramModel {
                kind: ModelKind::Exponential,
                nugget: 0.2,
                sill: 1.0,
                range: 3000.0,
            },
        },
        ErrorField {
            name: "dSw".into(),
            model: VariogramModel {
                kind: ModelKind::Spherical,
                nugget: 0.3,
                sill: 1.0,
                range: 2000.0,
            },
        },
        ErrorField {
            name: "dSg".into(),
            model: VariogramModel {
                kind: ModelKind::Matern32,
                nugget: 0.1,
                sill: 1.0,
                range: 1500.0,
            },
        },
    ];
    let mut layers: Vec<Layer<'_>> = Vec::new();
    let mut quantities: Vec<Quantity<'_>> = Vec::new();
    for (s, step) in STEPS.iter().enumerate() {
        let dists: [(&str, usize, &dyn NodeDistribution); 3] =
            [("dP", 0, &dp[s]), ("dSw", 1, &dsw[s]), ("dSg", 2, &dsg[s])];
        for (target, field, dist) in dists {
            let wells: Vec<WellScore> = well_xy
                .iter()
                .enumerate()
                .map(|(w, &(x, y))| WellScore {
                    name: format!("W{w}"),
                    x,
                    y,
                    score: rng.sample(StandardNormal),
                })
                .collect();
            layers.push(Layer {
                name: format!("{target} {step}"),
                field,
                calibration: wells.clone(),
                pins: if kriged { Vec::new() } else { wells.clone() },
                wells: if kriged { wells } else { Vec::new() },
                distribution: dist,
            });
        }
        let base = layers.len() - 3;
        let q = |name: &str, layer: usize, unit: &str, measure, scale| Quantity {
            name: name.to_string(),
            step: step.to_string(),
            unit: unit.to_string(),
            layer,
            measure,
            scale,
        };
        quantities.push(q(
            "depleted_area",
            base,
            "km2",
            Measure::Area {
                threshold: -2.0,
                direction: Direction::Below,
            },
            1e-6,
        ));
        quantities.push(q(
            "swept_area",
            base + 1,
            "km2",
            Measure::Area {
                threshold: 0.1,
                direction: Direction::Above,
            },
            1e-6,
        ));
        quantities.push(q(
            "swept_pore_volume",
            base + 1,
            "1e6 m3",
            Measure::Sum { weights: &hcpv },
            1e-6,
        ));
        quantities.push(q(
            "gas_area",
            base + 2,
            "km2",
            Measure::Area {
                threshold: 0.02,
                direction: Direction::Above,
            },
            1e-6,
        ));
        quantities.push(q(
            "gas_out_volume",
            base + 2,
            "1e6 m3",
            Measure::Sum { weights: &pv },
            1e-6,
        ));
    }
    let input = TotalsInput {
        lattice,
        fields,
        layers,
        quantities,
    };
    println!(
        "setup: {:.2} s, peak RSS {} MB, {} threads",
        t0.elapsed().as_secs_f64(),
        peak_kb() / 1024,
        rayon::current_num_threads()
    );
    for &count in &counts {
        // reset the peak resident memory counter (Linux >= 4.0); ignored where not allowed
        let _ = std::fs::write("/proc/self/clear_refs", "5");
        let settings = TotalsSettings {
            realizations: count,
            seed: 11,
            calibration_draw: draw,
            mean: if estimated {
                tidemark::spatial::unknown_mean::MeanRule::Estimated
            } else {
                tidemark::spatial::unknown_mean::MeanRule::Zero
            },
            ..TotalsSettings::default()
        };
        let (t, c) = (Instant::now(), cpu_seconds());
        let out = simulate(&input, &settings).expect("the probe's input is valid");
        let wall = t.elapsed().as_secs_f64();
        println!(
            "{count} realizations: {wall:.2} s wall, {:.2} s CPU, peak RSS {} MB",
            cpu_seconds() - c,
            peak_kb() / 1024
        );
        if count == *counts.last().expect("at least one count") {
            for f in &out.fields {
                let e = f.embedding.as_ref().expect("every field is used");
                println!(
                    "  field {}: torus {} x {} (grown {}), covariance error bound {:.1e}",
                    f.name, e.mx, e.my, e.grown, e.covariance_error_bound
                );
            }
            let label = match out.convention {
                Convention::Percentile => "percentile",
                Convention::Exceedance => "exceedance",
            };
            println!(
                "  totals at m4 ({label} convention): P10 / P50 / P90 | comonotone | independent"
            );
            for q in out.quantities.iter().filter(|q| q.step == "m4") {
                let i = q.independent.expect("independent rule on");
                println!(
                    "  {:18} {:>9.3} {:>9.3} {:>9.3} | {:>9.3} {:>9.3} | {:>9.3} {:>9.3} {}",
                    q.name,
                    q.summary.p10,
                    q.summary.p50,
                    q.summary.p90,
                    q.comonotone.p10,
                    q.comonotone.p90,
                    i.p10,
                    i.p90,
                    q.unit
                );
            }
        }
    }
}
