//! Facts of the trade, checked on a generated field: how saturation and pressure changes move
//! impedance and the angle-dependent response.

use tidemark::synth::dynamics::{self, NodeState};
use tidemark::synth::forward::{self, Layer};
use tidemark::synth::rock::Saturation;
use tidemark::synth::seismic;
use tidemark::synth::{SynthModel, SynthSettings};

/// A small generated field.
fn model() -> SynthModel {
    let s = SynthSettings {
        nx: 30,
        ny: 24,
        wells: 8,
        steps: 2,
        seed: 21,
        ..SynthSettings::default()
    };
    SynthModel::build(&s).unwrap()
}

/// Nodes whose upper sand is at least 6 m thick and entirely above the oil-water contact.
fn oil_nodes(m: &SynthModel) -> Vec<usize> {
    let r = &m.reservoir;
    (0..r.len())
        .filter(|&i| {
            r.sands[0].thickness[i] >= 6.0 && r.oil_column(0, i) >= r.sands[0].thickness[i]
        })
        .collect()
}

fn oil_sat(sw: f64, sg: f64) -> Saturation {
    Saturation {
        sw,
        so: 1.0 - sw - sg,
        sg,
    }
}

#[test]
fn water_replacing_oil_raises_impedance() {
    // common practice, no published source: water replacing oil raises acoustic impedance
    let m = model();
    let nodes = oil_nodes(&m);
    assert!(nodes.len() > 20);
    for &i in &nodes {
        let swi = m.reservoir.sands[0].swi[i];
        let p0 = m.conditions.p0[i];
        let z = |sw: f64| {
            m.sand_elastic(i, 0, p0, m.settings.gor, oil_sat(sw, 0.0))
                .impedance()
        };
        let mut last = z(swi);
        let top = 1.0 - m.settings.sor;
        for k in 1..=6 {
            let zk = z(swi + (top - swi) * k as f64 / 6.0);
            assert!(zk > last, "node {i}: impedance falls as water rises");
            last = zk;
        }
        assert!(
            last / z(swi) - 1.0 > 0.02,
            "node {i}: full sweep raises impedance by < 2 %"
        );
    }
}

#[test]
fn gas_out_of_solution_lowers_impedance_most_in_the_first_percent() {
    // common practice, no published source: free gas lowers impedance, and the first few percent
    // do most of it (the Wood average is dominated by the softest phase)
    let m = model();
    for &i in &oil_nodes(&m) {
        let swi = m.reservoir.sands[0].swi[i];
        let p = m.conditions.bubble_point - 3.0;
        let rs = dynamics::solution_gor(p, m.conditions.bubble_point, &m.settings);
        let z = |sg: f64| m.sand_elastic(i, 0, p, rs, oil_sat(swi, sg)).impedance();
        let mut last = z(0.0);
        for k in 1..=15 {
            let zk = z(0.01 * k as f64);
            assert!(zk < last, "node {i}: impedance rises with gas");
            last = zk;
        }
        let (z0, z3, z5, z15) = (z(0.0), z(0.03), z(0.05), z(0.15));
        assert!(
            z0 / z15 - 1.0 > 0.01,
            "node {i}: 15 % gas lowers impedance by < 1 %"
        );
        // slope over the first 3 % at least twice the slope from 3 % to 15 %
        assert!((z0 - z3) / 0.03 > 2.0 * (z3 - z15) / 0.12, "node {i}");
        // and the first 5 % do at least half of the drop to 15 %
        assert!(z0 - z5 > 0.5 * (z0 - z15), "node {i}");
    }
}

#[test]
fn pore_pressure_rise_lowers_velocity() {
    // common practice, no published source: a rise in pore pressure (lower effective stress)
    // softens the frame and lowers both velocities; depletion raises them
    let m = model();
    for &i in &oil_nodes(&m) {
        let swi = m.reservoir.sands[0].swi[i];
        let p0 = m.conditions.p0[i];
        let e = |p: f64| m.sand_elastic(i, 0, p, m.settings.gor, oil_sat(swi, 0.0));
        let (base, up, down) = (e(p0), e(p0 + 5.0), e(p0 - 5.0));
        assert!(up.vp < base.vp && up.vs < base.vs, "node {i}");
        assert!(down.vp > base.vp && down.vs > base.vs, "node {i}");
    }
}

/// Thickness-weighted mean relative impedance change of the sands between two states.
fn impedance_change(m: &SynthModel, i: usize, base: &NodeState, mon: &NodeState) -> f64 {
    let z = |st: &NodeState| -> (f64, f64) {
        let col = m.column(i, st);
        let (mut h, mut zz) = (0.0, 0.0);
        for l in col.iter().filter(|l| l.sand) {
            h += l.thickness;
            zz += l.thickness * l.elastic.impedance();
        }
        (h, zz / h)
    };
    z(mon).1 / z(base).1 - 1.0
}

/// Noise-free intercept and gradient of the top-reservoir event, fitted to the angle-stack traces
/// at the top horizon as the generator does.
fn top_intercept_gradient(m: &SynthModel, col: &[Layer]) -> (f64, f64, Vec<f64>) {
    let angles = m.stack_angles();
    let centres = m.stack_centres();
    let amps: Vec<f64> = angles
        .iter()
        .map(|a| {
            let spikes = forward::stack_spikes(col, a, m.settings.reflectivity);
            seismic::convolve(&spikes, m.settings.wavelet_hz, &[0.0])[0]
        })
        .collect();
    let (a, b) = seismic::fit_intercept_gradient(&centres, &amps);
    (a, b, amps)
}

#[test]
fn injection_and_depletion_are_told_apart_only_by_angle() {
    // common practice, no published source: pressure up with some water in (injection) and
    // pressure down with gas out of solution (depletion) can both lower impedance by a few
    // percent; the zero-offset response cannot tell them apart, the gradient can (the frame
    // softens under injection and stiffens under depletion, and shear sees only the frame)
    let m = model();
    let (res, cond, s) = (&m.reservoir, &m.conditions, &m.settings);
    // the thickest upper sand among nodes whose sands are all in the oil leg
    let i = *oil_nodes(&m)
        .iter()
        .filter(|&&i| {
            (0..res.sands.len()).all(|k| res.oil_column(k, i) >= res.sands[k].thickness[i])
        })
        .max_by(|a, b| res.sands[0].thickness[**a].total_cmp(&res.sands[0].thickness[**b]))
        .unwrap();
    let nsand = res.sands.len();
    let base = m.base_state(i);
    // depletion by 8 MPa: below the bubble point, so the model releases gas
    let dep = dynamics::node_state(res, cond, s, i, 0.0, -8.0, &vec![0.0; nsand]);
    assert!(dep.mean_saturation().1 > 0.02, "no gas released");
    let base_col = m.column(i, &base);
    let (a0, b0, _) = top_intercept_gradient(&m, &base_col);
    let (ad, bd, _) = top_intercept_gradient(&m, &m.column(i, &dep));
    // injection: a little water (a 10 % front) and the pressure rise that gives the same
    // zero-offset change as the depletion case, found by bisection
    let inj_at = |dp: f64| dynamics::node_state(res, cond, s, i, 0.0, dp, &vec![0.1; nsand]);
    let da = |dp: f64| top_intercept_gradient(&m, &m.column(i, &inj_at(dp))).0 - a0;
    let target = ad - a0;
    let (mut lo, mut hi) = (0.0, 15.0);
    assert!(
        (da(lo) - target) * (da(hi) - target) < 0.0,
        "no matching injection case"
    );
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if (da(mid) - target) * (da(lo) - target) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let inj = inj_at(0.5 * (lo + hi));
    assert!(inj.dp > 1.0 && inj.mean_saturation().0 > base.mean_saturation().0);
    let (ai, bi, _) = top_intercept_gradient(&m, &m.column(i, &inj));

    // both lower impedance by a few percent
    let dz_inj = impedance_change(&m, i, &base, &inj);
    let dz_dep = impedance_change(&m, i, &base, &dep);
    for dz in [dz_inj, dz_dep] {
        assert!((-0.08..=-0.005).contains(&dz), "impedance change {dz}");
    }
    // the same zero-offset change ...
    assert!((ai - ad).abs() < 1e-9 * (ad - a0).abs().max(1e-12));
    assert!((ad - a0).abs() > 1e-3);
    // ... but gradient changes of opposite sign, each well clear of zero
    let (dbi, dbd) = (bi - b0, bd - b0);
    assert!(
        dbi * dbd < 0.0,
        "gradient changes {dbi} and {dbd} share a sign"
    );
    assert!(
        dbi.abs().min(dbd.abs()) > 0.2 * (ad - a0).abs(),
        "{dbi} {dbd}"
    );
}

#[test]
fn sands_come_in_and_out_of_tuning() {
    // The upper sand's two-way thickness spans the tuning separation of the wavelet (for a Ricker
    // wavelet of peak frequency f, sqrt(1.5)/(pi f): 15.59 ms at 25 Hz, reference table W1/W2), so
    // the sands tune in parts of the field and resolve in others.
    let m = SynthModel::build(&SynthSettings::default()).unwrap();
    let f = m.settings.wavelet_hz;
    let tuning = 1.5f64.sqrt() / (std::f64::consts::PI * f);
    let times: Vec<f64> = (0..m.reservoir.len())
        .filter(|&i| m.reservoir.sands[0].thickness[i] > 0.0)
        .map(|i| {
            let col = m.column(i, &m.base_state(i));
            // the upper sand's parts follow the cap shale until the first shale below them
            col[1..]
                .iter()
                .take_while(|l| l.sand)
                .map(|l| seismic::two_way_time(l.thickness, l.elastic.vp))
                .sum::<f64>()
        })
        .collect();
    let below = times.iter().filter(|t| **t < tuning).count() as f64 / times.len() as f64;
    assert!(
        (0.2..0.8).contains(&below),
        "{below} of the upper sand is thinner than tuning"
    );
    assert!(times.iter().any(|t| *t > 1.5 * tuning));
    assert!(times.iter().any(|t| *t < 0.5 * tuning));
}
