//! The well-free regions of the generated field: the lobe with its own aquifer and the optional
//! drained culmination with its gas cap. Their masks mark them, no well stands in them, the
//! culmination follows its own law, and the same seed gives the same field.

use std::path::Path;
use tidemark::io::geotiff;
use tidemark::synth::dynamics;
use tidemark::synth::{self, SynthField, SynthModel, SynthSettings};

const YEAR_STEPS: usize = 3;

fn with_cap(seed: u64) -> SynthSettings {
    SynthSettings {
        seed,
        nx: 72,
        ny: 60,
        wells: 24,
        observers: 4,
        steps: YEAR_STEPS,
        gas_cap: true,
        ..SynthSettings::default()
    }
}

/// Centre (local m) and radius (m) of a region from its settings, as the settings define them:
/// fractions of the grid's width and height, and of its shorter side.
fn disc(s: &SynthSettings, position: [f64; 2], radius: f64) -> ((f64, f64), f64) {
    let w = (s.nx - 1) as f64 * s.spacing;
    let h = (s.ny - 1) as f64 * s.spacing;
    ((position[0] * w, position[1] * h), radius * w.min(h))
}

fn mask<'a>(field: &'a SynthField, name: &str) -> &'a [f64] {
    &field
        .masks
        .iter()
        .find(|(n, _)| n == name)
        .unwrap_or_else(|| panic!("no mask `{name}`"))
        .1
}

#[test]
fn masks_mark_the_regions_and_no_well_stands_in_them() {
    let s = with_cap(5);
    let field = synth::generate(&s).unwrap();
    let names: Vec<&str> = field.masks.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, ["lobe", "gas_cap"]);
    let (ox, oy) = (field.grid.origin_x, field.grid.origin_y);
    for (name, position, radius) in [
        ("lobe", s.lobe_position, s.lobe_radius),
        ("gas_cap", s.gas_cap_position, s.gas_cap_radius),
    ] {
        let ((cx, cy), r) = disc(&s, position, radius);
        let m = mask(&field, name);
        assert_eq!(m.len(), s.nx * s.ny);
        assert!(m.iter().all(|v| *v == 0.0 || *v == 1.0), "{name}: 0 or 1");
        // The mask is the disc: every node clearly inside is 1, every node clearly outside 0
        // (half a spacing either side of the rim is left to the smooth edge).
        let mut inside = 0usize;
        for (k, v) in m.iter().enumerate() {
            let (x, y) = ((k % s.nx) as f64 * s.spacing, (k / s.nx) as f64 * s.spacing);
            let d = (x - cx).hypot(y - cy);
            if d < r - 0.5 * s.spacing {
                assert_eq!(*v, 1.0, "{name}: node {k} at {d:.0} m of a {r:.0} m disc");
            }
            if d > r + 0.5 * s.spacing {
                assert_eq!(*v, 0.0, "{name}: node {k} at {d:.0} m of a {r:.0} m disc");
            }
            inside += usize::from(*v == 1.0);
        }
        // its area is the disc's, pi r^2, within 10 %
        let area = inside as f64 * s.spacing * s.spacing;
        let disc_area = std::f64::consts::PI * r * r;
        assert!(
            (area / disc_area - 1.0).abs() < 0.10,
            "{name}: {area:.0} m2 masked for a {disc_area:.0} m2 disc"
        );
        // No well (observers included) stands in the region or its margin, and no well
        // observation samples a masked node.
        let far = m
            .iter()
            .enumerate()
            .filter(|(_, v)| **v == 1.0)
            .map(|(k, _)| {
                ((k % s.nx) as f64 * s.spacing - cx).hypot((k / s.nx) as f64 * s.spacing - cy)
            })
            .fold(0.0, f64::max);
        assert_eq!(field.wells.len(), s.wells + s.observers);
        // Wells keep out of the disc enlarged by the margin factor, judged at their nearest node
        // (half a diagonal away at most).
        let keep_out =
            synth::reservoir::WELL_FREE_MARGIN * r - 0.5 * std::f64::consts::SQRT_2 * s.spacing;
        assert!(keep_out > far, "{name}: the margin reaches beyond the mask");
        for w in &field.wells {
            let d = (w.x - ox - cx).hypot(w.y - oy - cy);
            assert!(
                d >= keep_out,
                "{name}: well {} at {d:.0} m from the centre; wells keep {keep_out:.0} m off, \
                 the mask reaches {far:.0} m",
                w.name
            );
        }
        for (well, x, y, _, _) in &field.well_rows {
            let (i, j) = (
                ((x - ox) / s.spacing).round() as usize,
                ((y - oy) / s.spacing).round() as usize,
            );
            assert_eq!(m[j * s.nx + i], 0.0, "{name}: {well} samples a masked node");
        }
    }
    // the two regions are apart
    assert!(
        mask(&field, "lobe")
            .iter()
            .zip(mask(&field, "gas_cap"))
            .all(|(a, b)| a * b == 0.0)
    );
}

#[test]
fn the_culmination_is_drained_on_its_own_schedule_and_releases_gas() {
    let s = with_cap(6);
    let m = SynthModel::build(&s).unwrap();
    let field = synth::generate(&s).unwrap();
    let cap = m.reservoir.gas_cap.as_ref().unwrap();
    // A closed tank produced at a rate proportional to its pressure excess over the drained
    // level obeys d(dP)/dt = -(dP + D) / tau with dP(0) = 0 (material balance with exponential
    // decline, Fetkovich 1971): checked by central differences, and the limits 0 and -D.
    let (d, tau) = (s.gas_cap_depletion, s.gas_cap_decline_years);
    let p = |t: f64| m.dynamics.cap_pressure(t);
    for t in [0.4, 1.5, 4.0] {
        let h = 1e-5;
        let slope = (p(t + h) - p(t - h)) / (2.0 * h);
        let rhs = -(p(t) + d) / tau;
        assert!(
            (slope - rhs).abs() < 1e-6 * rhs.abs(),
            "t = {t}: {slope} vs {rhs}"
        );
    }
    assert_eq!(p(0.0), 0.0);
    assert!((p(200.0 * tau) + d).abs() < 1e-9);

    let centre = m.reservoir.nearest(cap.centre.0, cap.centre.1);
    let inside: Vec<usize> = (0..m.reservoir.len())
        .filter(|&i| mask(&field, "gas_cap")[i] == 1.0)
        .collect();
    let years = s.monitor_years();
    for (step, &t) in years.iter().enumerate() {
        // at the centre (weight 0.9998) the pressure is the culmination's own
        let dp = field.truth[step][0][centre];
        assert!(
            (dp - p(t)).abs() < 0.02,
            "step {step}: centre dP {dp} vs the culmination's {}",
            p(t)
        );
    }
    // By the last monitor the culmination lies below the bubble point: every masked node with oil
    // has lost pressure and gained gas.
    let last = years.len() - 1;
    let oil: Vec<usize> = inside
        .iter()
        .copied()
        .filter(|&i| m.reservoir.oil_column(0, i) > 0.0)
        .collect();
    assert!(2 * oil.len() >= inside.len());
    for &i in &oil {
        assert!(field.truth[last][0][i] < 0.0, "node {i}: dP");
        assert!(field.truth[last][2][i] > 0.0, "node {i}: dSg");
    }
    // the cap expands: its mean gas saturation grows from monitor to monitor
    let mean_sg = |step: usize| oil.iter().map(|&i| field.truth[step][2][i]).sum::<f64>();
    for step in 1..years.len() {
        assert!(mean_sg(step) > mean_sg(step - 1), "step {step}");
    }
}

#[test]
fn segregated_gas_is_conserved_and_forms_a_cap() {
    let s = with_cap(6);
    let m = SynthModel::build(&s).unwrap();
    let cap = m.reservoir.gas_cap.as_ref().unwrap();
    let centre = m.reservoir.nearest(cap.centre.0, cap.centre.1);
    // the same node without segregation: the reservoir with the culmination's weight removed
    let mut plain = m.reservoir.clone();
    plain.gas_cap = None;
    let t = 4.0;
    let dp = m.dynamics.cap_pressure(t);
    let fronts = vec![0.0; m.reservoir.sands.len()];
    let with = dynamics::node_state(&m.reservoir, &m.conditions, &s, centre, t, dp, &fronts);
    let without = dynamics::node_state(&plain, &m.conditions, &s, centre, t, dp, &fronts);
    let (sw_a, sg_a) = with.mean_saturation();
    let (sw_b, sg_b) = without.mean_saturation();
    assert!(sg_b > 0.01, "gas is released at {dp} MPa");
    // the truth is the thickness-weighted mean saturation: unchanged by where the gas sits
    assert!((sg_a - sg_b).abs() < 1e-12 && (sw_a - sw_b).abs() < 1e-12);
    // the oil leg of the upper sand now starts with a gas cap at 1 - Sw - Sor
    let top = &with.sands[0][0];
    let swi = m.reservoir.sands[0].swi[centre];
    assert!((top.sat.sw - swi).abs() < 1e-12);
    assert!((top.sat.sg - (1.0 - swi - s.sor)).abs() < 1e-12);
    assert!(top.thickness > 0.0 && top.thickness < with.sands[0][1].thickness);
    let total =
        |st: &dynamics::NodeState| -> f64 { st.sands.iter().flatten().map(|p| p.thickness).sum() };
    assert!((total(&with) - total(&without)).abs() < 1e-9);
    // and the seismic sees the difference: the far stack's reflectivity changes
    let angles = m.stack_angles();
    let spikes = |st: &dynamics::NodeState| {
        tidemark::synth::forward::stack_spikes(&m.column(centre, st), &angles[2], s.reflectivity)
    };
    assert_ne!(spikes(&with), spikes(&without));
}

#[test]
fn the_culmination_is_off_by_default_and_its_settings_then_change_nothing() {
    let base = SynthSettings {
        nx: 30,
        ny: 24,
        wells: 8,
        steps: 1,
        ..SynthSettings::default()
    };
    assert!(!base.gas_cap);
    let a = synth::generate(&base).unwrap();
    let names: Vec<&str> = a.masks.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, ["lobe"]);
    let moved = SynthSettings {
        gas_cap_position: [0.6, 0.3],
        gas_cap_radius: 0.2,
        gas_cap_relief: 60.0,
        gas_cap_depletion: 20.0,
        gas_cap_decline_years: 1.0,
        ..base.clone()
    };
    let b = synth::generate(&moved).unwrap();
    assert_eq!(a.truth, b.truth);
    assert_eq!(a.attributes, b.attributes);
    assert_eq!(a.well_rows, b.well_rows);
    // without a lobe there is no lobe mask
    let none = synth::generate(&SynthSettings {
        lobe_radius: 0.0,
        ..base
    })
    .unwrap();
    assert!(none.masks.is_empty());
}

#[test]
fn same_seed_gives_the_same_field_with_the_culmination_whatever_the_threads() {
    let s = with_cap(9);
    let run = |threads: usize| crate::threads::in_pool(threads, || synth::generate(&s).unwrap());
    let (one, two) = (run(1), run(2));
    assert_eq!(one.masks, two.masks);
    assert_eq!(one.truth, two.truth);
    assert_eq!(one.attributes, two.attributes);
    assert_eq!(one.well_rows, two.well_rows);
    let other = synth::generate(&with_cap(10)).unwrap();
    assert_ne!(one.well_rows, other.well_rows);
}

#[test]
fn masks_are_written_beside_the_truth_and_gdal_reads_them() {
    let s = SynthSettings {
        nx: 48,
        ny: 40,
        wells: 12,
        steps: 1,
        gas_cap: true,
        ..SynthSettings::default()
    };
    let field = synth::generate(&s).unwrap();
    let dir = tempfile::tempdir().unwrap();
    synth::write_project(&field, &s, dir.path()).unwrap();
    let record = synth::SynthRecord::read(&dir.path().join("synth.json")).unwrap();
    for (name, values) in &field.masks {
        let rel = format!("truth/masks/{name}.tif");
        assert!(record.files.contains(&rel), "{rel} listed");
        let path = dir.path().join(&rel);
        let r = geotiff::read(&path).unwrap();
        assert_eq!(r.grid, field.grid);
        assert_eq!(&r.values, values);
        gdal_sees_a_mask(
            &path,
            values.iter().filter(|v| **v == 1.0).count(),
            s.nx * s.ny,
        );
    }
    assert!(record.settings.gas_cap);
}

/// Debian's gdal-bin reads the mask: its mean (gdalinfo -stats) is the share of nodes inside.
fn gdal_sees_a_mask(path: &Path, inside: usize, nodes: usize) {
    let out = std::process::Command::new("gdalinfo")
        .arg("-stats")
        .arg(path)
        .output()
        .expect("gdalinfo (Debian gdal-bin) must be installed; .ci/deps installs it");
    assert!(
        out.status.success(),
        "gdalinfo failed on {}",
        path.display()
    );
    let text = String::from_utf8_lossy(&out.stdout);
    let mean: f64 = text
        .lines()
        .find_map(|l| l.trim().strip_prefix("STATISTICS_MEAN="))
        .expect("gdalinfo reports a mean")
        .parse()
        .unwrap();
    let share = inside as f64 / nodes as f64;
    assert!(
        (mean - share).abs() < 1e-6,
        "{}: GDAL mean {mean} vs {share}",
        path.display()
    );
    // GDAL writes an .aux.xml beside the file with -stats; remove it
    let _ = std::fs::remove_file(path.with_extension("tif.aux.xml"));
}

#[test]
fn culmination_settings_are_checked() {
    let overlapping = SynthSettings {
        gas_cap: true,
        gas_cap_position: [0.2, 0.7],
        ..SynthSettings::default()
    };
    let e = overlapping.validate().unwrap_err().to_string();
    assert!(e.contains("gas_cap_position"), "{e}");
    let bad_radius = SynthSettings {
        gas_cap_radius: 0.0,
        ..SynthSettings::default()
    };
    let e = bad_radius.validate().unwrap_err().to_string();
    assert!(e.contains("gas_cap_radius"), "{e}");
    // a culmination in the water leg cannot release gas: the generator says so
    let wet = SynthSettings {
        nx: 40,
        ny: 34,
        wells: 8,
        steps: 1,
        gas_cap: true,
        gas_cap_position: [0.97, 0.05],
        gas_cap_radius: 0.05,
        gas_cap_relief: 0.0,
        ..SynthSettings::default()
    };
    let e = synth::generate(&wet).unwrap_err().to_string();
    assert!(
        e.contains("gas_cap_position") && e.contains("oil leg"),
        "{e}"
    );
}
