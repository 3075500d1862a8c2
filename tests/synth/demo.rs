//! The bundled demo project (`demo-data/`): regenerated from its recorded settings, it must match
//! what is committed, and it must look like a field.

use std::path::{Path, PathBuf};
use tidemark::io::geotiff;
use tidemark::synth::{self, SynthRecord, WellKind};

fn demo_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data")
}

/// Relative paths of every file under `dir`.
fn tree(dir: &Path) -> Vec<String> {
    fn walk(root: &Path, dir: &Path, out: &mut Vec<String>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                let rel = p.strip_prefix(root).unwrap();
                let parts: Vec<String> = rel
                    .components()
                    .map(|c| c.as_os_str().to_string_lossy().into_owned())
                    .collect();
                out.push(parts.join("/"));
            }
        }
    }
    let mut out = Vec::new();
    walk(dir, dir, &mut out);
    out.sort();
    out
}

#[test]
fn demo_regenerates_from_its_recorded_seed() {
    let demo = demo_dir();
    let record = SynthRecord::read(&demo.join("synth.json")).unwrap();
    assert_eq!(record.field, "Skerrow Bank");
    let field = synth::generate(&record.settings).unwrap();
    let tmp = tempfile::tempdir().unwrap();
    synth::write_project(&field, &record.settings, tmp.path()).unwrap();

    // the same files (the demo folder may hold a README besides the generator's outputs)
    let mut committed: Vec<String> = tree(&demo)
        .into_iter()
        .filter(|f| f != "README.md")
        .collect();
    committed.sort();
    assert_eq!(committed, tree(tmp.path()));
    let mut listed = record.files.clone();
    listed.sort();
    assert_eq!(listed, committed);

    // every map equal within float32 storage and tolerance for platform maths libraries
    for f in committed.iter().filter(|f| f.ends_with(".tif")) {
        let a = geotiff::read(&demo.join(f)).unwrap();
        let b = geotiff::read(&tmp.path().join(f)).unwrap();
        assert_eq!(a.grid, b.grid, "{f}");
        let scale = (a.values.iter().map(|v| v * v).sum::<f64>() / a.values.len() as f64).sqrt();
        for (k, (x, y)) in a.values.iter().zip(&b.values).enumerate() {
            let tol = 1e-5 * (scale + x.abs()) + 1e-12;
            assert!((x - y).abs() <= tol, "{f} node {k}: {x} vs {y}");
        }
    }
    // the wells CSV equal within its printed precision; the manifest identical
    let read = |p: &Path| std::fs::read_to_string(p).unwrap();
    let (wa, wb) = (
        read(&demo.join("wells.csv")),
        read(&tmp.path().join("wells.csv")),
    );
    assert_eq!(wa.lines().count(), wb.lines().count());
    for (la, lb) in wa.lines().zip(wb.lines()) {
        let (ca, cb): (Vec<&str>, Vec<&str>) = (la.split(',').collect(), lb.split(',').collect());
        assert_eq!(ca.len(), cb.len());
        for (x, y) in ca.iter().zip(&cb) {
            match (x.parse::<f64>(), y.parse::<f64>()) {
                (Ok(x), Ok(y)) => assert!((x - y).abs() <= 2e-5 * (1.0 + x.abs()), "{la} / {lb}"),
                _ => assert_eq!(x, y),
            }
        }
    }
    assert_eq!(
        read(&demo.join("project.toml")),
        read(&tmp.path().join("project.toml"))
    );
}

#[test]
fn demo_is_small_runnable_and_field_like() {
    let demo = demo_dir();
    let bytes: u64 = tree(&demo)
        .iter()
        .map(|f| std::fs::metadata(demo.join(f)).unwrap().len())
        .sum();
    assert!(bytes <= 5 * 1024 * 1024, "demo-data holds {bytes} bytes");
    let report = tidemark::check::check_project(&demo.join("project.toml"));
    assert!(report.runnable, "{:?}", report.problems);

    let record = SynthRecord::read(&demo.join("synth.json")).unwrap();
    let s = &record.settings;
    assert!((40..=50).contains(&record.wells.len()));
    assert!(s.nx * s.ny >= 10_000 && s.steps >= 3);
    let injectors = record
        .wells
        .iter()
        .filter(|w| w.kind == WellKind::Injector)
        .count();
    assert!(injectors >= 5 && injectors < record.wells.len() / 2);

    // the wells see every decision class at the last step, but not everywhere
    let survey = tidemark::project::load_survey(&demo.join("project.toml")).unwrap();
    let last = survey.project.steps.last().unwrap().name.clone();
    let rows: Vec<&Vec<f64>> = survey
        .wells
        .iter()
        .filter(|r| r.step == last)
        .map(|r| &r.targets)
        .collect();
    let share = |f: &dyn Fn(&Vec<f64>) -> bool| {
        rows.iter().filter(|t| f(t)).count() as f64 / rows.len() as f64
    };
    for (label, s) in [
        ("depleted", share(&|t| t[0] < -2.0)),
        ("swept", share(&|t| t[1] > 0.10)),
        ("gas_out", share(&|t| t[2] > 0.05)),
    ] {
        assert!(s > 0.05 && s < 0.95, "{label} at {s} of the wells");
    }
    // NRMS of a realistic survey pair: a floor of some percent, a median in the tens
    let nrms = survey
        .project
        .attribute_names
        .iter()
        .position(|a| a == "nrms")
        .unwrap();
    let mut v = survey.maps[0][nrms].clone();
    v.sort_by(f64::total_cmp);
    let (p10, p50) = (v[v.len() / 10], v[v.len() / 2]);
    assert!(
        (3.0..15.0).contains(&p10) && (8.0..40.0).contains(&p50),
        "{p10} {p50}"
    );
}

#[test]
fn demo_lobe_is_unlike_the_wells() {
    // The well-free lobe (thick, porous, on a drape high, swept by its own aquifer) must lie away
    // from the wells in attribute space, so that an applicability check has something to find:
    // at the last step most lobe nodes are farther from the nearest well observation, in
    // standardised attributes, than nine in ten of the other nodes.
    let demo = demo_dir();
    let record = SynthRecord::read(&demo.join("synth.json")).unwrap();
    let model = tidemark::synth::SynthModel::build(&record.settings).unwrap();
    let survey = tidemark::project::load_survey(&demo.join("project.toml")).unwrap();
    let grid = &survey.project.grid;
    let step = survey.project.steps.len() - 1;
    let maps = &survey.maps[step];
    let stats: Vec<(f64, f64)> = maps
        .iter()
        .map(|v| {
            let n = v.len() as f64;
            let mean = v.iter().sum::<f64>() / n;
            let sd = (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n).sqrt();
            (mean, sd)
        })
        .collect();
    let feature = |i: usize| -> Vec<f64> {
        maps.iter()
            .zip(&stats)
            .map(|(m, (mean, sd))| (m[i] - mean) / sd)
            .collect()
    };
    let name = &survey.project.steps[step].name;
    let wells: Vec<Vec<f64>> = survey
        .wells
        .iter()
        .filter(|r| &r.step == name)
        .map(|r| {
            let (i, j) = grid.nearest_node(r.x, r.y).unwrap();
            feature(grid.index(i, j))
        })
        .collect();
    let nearest = |i: usize| {
        let x = feature(i);
        wells
            .iter()
            .map(|w| w.iter().zip(&x).map(|(a, b)| (a - b).powi(2)).sum::<f64>())
            .fold(f64::MAX, f64::min)
            .sqrt()
    };
    let lobe = &model.reservoir.lobe;
    let mut other: Vec<f64> = (0..lobe.len())
        .filter(|&i| lobe[i] < 0.1)
        .map(nearest)
        .collect();
    other.sort_by(f64::total_cmp);
    let p90 = other[other.len() * 9 / 10];
    let core: Vec<f64> = (0..lobe.len())
        .filter(|&i| lobe[i] > 0.9)
        .map(nearest)
        .collect();
    let beyond = core.iter().filter(|d| **d > p90).count() as f64 / core.len() as f64;
    assert!(
        beyond > 0.5,
        "only {beyond} of the lobe lies beyond the 90th percentile"
    );
}
