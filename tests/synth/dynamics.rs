//! Reservoir dynamics: the line-source pressure solution, the sealing fault, water fronts, gas.

use tidemark::synth::dynamics::{self, released_gas, solution_gor};
use tidemark::synth::{PlacedWell, SynthModel, SynthSettings, WellKind};

const YEAR: f64 = 365.25 * 86400.0;

fn small(fault: bool) -> SynthSettings {
    SynthSettings {
        nx: 40,
        ny: 40,
        wells: 4,
        steps: 1,
        fault,
        ..SynthSettings::default()
    }
}

fn one_well(m: &SynthModel, kind: WellKind, x: f64, y: f64, start: f64) -> Vec<PlacedWell> {
    vec![PlacedWell {
        name: "W".into(),
        kind,
        rate: 500.0,
        start,
        x,
        y,
        compartment: m.reservoir.compartment_at(x, y),
    }]
}

#[test]
fn line_source_solves_the_diffusion_equation() {
    // Theis (1935) / Matthews & Russell (1967): the line source satisfies dp/dt = eta laplacian(p)
    // with eta = k / (phi mu c_t); checked by central differences away from the well
    let m = SynthModel::build(&small(false)).unwrap();
    let w = one_well(&m, WellKind::Producer, 1000.0, 1000.0, 0.0);
    let eta = m.dynamics.diffusivity(0);
    let p = |x: f64, y: f64, t: f64| m.dynamics.pressure_at(&m.reservoir, &w, x, y, 0, t);
    let (x, y, t) = (1300.0, 1250.0, 0.3);
    let (h, dt) = (2.0, 1e-4);
    let dpdt = (p(x, y, t + dt) - p(x, y, t - dt)) / (2.0 * dt * YEAR);
    let lap = (p(x + h, y, t) + p(x - h, y, t) + p(x, y + h, t) + p(x, y - h, t)
        - 4.0 * p(x, y, t))
        / (h * h);
    assert!(dpdt.abs() > 0.0);
    let rel = (dpdt - eta * lap).abs() / dpdt.abs();
    assert!(
        rel < 1e-3,
        "dp/dt {dpdt:e} vs eta lap {:e} ({rel:e})",
        eta * lap
    );
    // producers lower the pressure, injectors raise it by the same amount
    assert!(p(x, y, t) < 0.0);
    let wi = one_well(&m, WellKind::Injector, 1000.0, 1000.0, 0.0);
    let pi = m.dynamics.pressure_at(&m.reservoir, &wi, x, y, 0, t);
    assert!((pi + p(x, y, t)).abs() < 1e-12);
    // nothing happens before the well starts
    let late = one_well(&m, WellKind::Producer, 1000.0, 1000.0, 0.5);
    assert_eq!(
        m.dynamics.pressure_at(&m.reservoir, &late, x, y, 0, 0.4),
        0.0
    );
}

#[test]
fn line_source_similarity() {
    // the line-source solution depends on r^2 / t only: p(2r, 4t) = p(r, t)
    let m = SynthModel::build(&small(false)).unwrap();
    let w = one_well(&m, WellKind::Producer, 1000.0, 1000.0, 0.0);
    let p = |r: f64, t: f64| {
        m.dynamics
            .pressure_at(&m.reservoir, &w, 1000.0 + r, 1000.0, 0, t)
    };
    let (a, b) = (p(150.0, 0.2), p(300.0, 0.8));
    assert!((a - b).abs() < 1e-12 * a.abs(), "{a} vs {b}");
}

#[test]
fn sealing_fault_is_a_no_flow_boundary() {
    // method of images (Matthews & Russell 1967, ch. 10): the image well makes the pressure
    // symmetric about the fault, so no flow crosses it; the other compartment feels nothing
    let m = SynthModel::build(&small(true)).unwrap();
    let f = m.reservoir.fault.unwrap();
    let (fx, fy) = f.point;
    let (wx, wy) = (fx - 400.0 * f.normal.0, fy - 400.0 * f.normal.1 + 100.0);
    let w = one_well(&m, WellKind::Producer, wx, wy, 0.0);
    assert_eq!(w[0].compartment, 0);
    for along in [-300.0, 0.0, 250.0] {
        let (px, py) = (fx - along * f.normal.1, fy + along * f.normal.0);
        let d = 20.0;
        let inside = m.dynamics.pressure_at(
            &m.reservoir,
            &w,
            px - d * f.normal.0,
            py - d * f.normal.1,
            0,
            1.0,
        );
        let mirror = m.dynamics.pressure_at(
            &m.reservoir,
            &w,
            px + d * f.normal.0,
            py + d * f.normal.1,
            0,
            1.0,
        );
        assert!(inside < 0.0);
        assert!((inside - mirror).abs() < 1e-12 * inside.abs());
    }
    let dp = m
        .dynamics
        .pressure_change(&m.reservoir, &w, &m.conditions, 1.0);
    for (i, v) in dp.iter().enumerate() {
        if m.reservoir.compartment[i] == 1 {
            assert_eq!(*v, 0.0);
        }
    }
    assert!(dp.iter().any(|v| *v < -0.5));
}

#[test]
fn water_front_holds_the_injected_volume() {
    // volume balance: with homogeneous sand and circular fronts the swept pore volume times the
    // saturation gain equals the injected volume (up to the grid discretisation)
    let s = SynthSettings {
        nx: 50,
        ny: 50,
        wells: 2,
        sands: 1,
        fault: false,
        sand_thickness_sd: 0.0,
        porosity_sd: 0.0,
        vclay_sd: 0.0,
        lobe_thickness: 0.0,
        lobe_porosity: 0.0,
        front_heterogeneity: 0.0,
        ..SynthSettings::default()
    };
    let m = SynthModel::build(&s).unwrap();
    let res = &m.reservoir;
    let w = one_well(&m, WellKind::Injector, 1225.0, 1225.0, 0.0);
    let t = 2.0;
    let front = dynamics::water_fronts(res, &w, &s, 0, t);
    let sd = &res.sands[0];
    let (h, phi, swi) = (sd.thickness[0], sd.porosity[0], sd.swi[0]);
    let area = res.spacing * res.spacing;
    let swept: f64 = front.iter().sum::<f64>() * area * h * phi * (1.0 - s.sor - swi);
    let injected = w[0].rate * t * 365.25;
    assert!(
        (swept / injected - 1.0).abs() < 0.03,
        "swept {swept:.0} m3 vs injected {injected:.0} m3"
    );
    // the front is strongest at the well and absent far away
    let at_well = front[res.nearest(1225.0, 1225.0)];
    assert!(at_well > 0.9);
    assert_eq!(front[0], 0.0);
}

#[test]
fn gas_comes_out_below_the_bubble_point_only() {
    let s = SynthSettings::default();
    let pb = 20.0;
    assert_eq!(released_gas(pb + 0.1, pb, &s), 0.0);
    assert_eq!(released_gas(pb, pb, &s), 0.0);
    let mut last = 0.0;
    for k in 1..40 {
        let g = released_gas(pb - 0.5 * k as f64, pb, &s);
        assert!(g > last && g < s.gas_max);
        last = g;
    }
    assert_eq!(solution_gor(pb + 1.0, pb, &s), s.gor);
    assert!(solution_gor(pb - 5.0, pb, &s) < s.gor);
}

#[test]
fn node_state_partitions_the_sand() {
    // oil leg, aquifer-swept zone and water leg add up to the sand thickness, and the saturations
    // of every part sum to one
    let m = SynthModel::build(&small(true)).unwrap();
    let res = &m.reservoir;
    let s = &m.settings;
    for i in (0..res.len()).step_by(7) {
        let st = dynamics::node_state(res, &m.conditions, s, i, 6.0, -8.0, &[0.5, 0.5]);
        for (k, parts) in st.sands.iter().enumerate() {
            let h: f64 = parts.iter().map(|p| p.thickness).sum();
            let expected = res.sands[k].thickness[i] * (1.0 + s.compaction_coefficient * -8.0);
            assert!((h - expected).abs() < 1e-9);
            for p in parts {
                let sum = p.sat.sw + p.sat.so + p.sat.sg;
                assert!((sum - 1.0).abs() < 1e-12);
                assert!(p.sat.so >= -1e-12 && p.sat.sg >= 0.0 && p.sat.sw <= 1.0);
            }
        }
    }
}
