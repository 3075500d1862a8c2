//! The generated field as a whole: the project it writes, reproducibility, wells, noise, and the
//! `tidemark synth` command.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use tidemark::io::geotiff;
use tidemark::project::{self, Direction};
use tidemark::synth::noise::{self, NoiseSpec};
use tidemark::synth::{self, SynthField, SynthModel, SynthRecord, SynthSettings, WellKind};

fn small(seed: u64) -> SynthSettings {
    SynthSettings {
        seed,
        nx: 26,
        ny: 20,
        wells: 9,
        steps: 2,
        ..SynthSettings::default()
    }
}

/// Every file under `dir`, relative path -> bytes.
fn files(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<PathBuf, Vec<u8>>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                out.insert(
                    p.strip_prefix(root).unwrap().to_path_buf(),
                    std::fs::read(&p).unwrap(),
                );
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, dir, &mut out);
    out
}

fn write(field: &SynthField, s: &SynthSettings) -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    synth::write_project(field, s, dir.path()).unwrap();
    dir
}

#[test]
fn written_project_loads_and_matches_the_field() {
    let s = small(5);
    let field = synth::generate(&s).unwrap();
    let dir = write(&field, &s);
    let report = tidemark::check::check_project(&dir.path().join("project.toml"));
    assert!(report.runnable, "{:?}", report.problems);
    let survey = project::load_survey(&dir.path().join("project.toml")).unwrap();
    let p = &survey.project;
    assert_eq!(p.grid, field.grid);
    let steps: Vec<&str> = p.steps.iter().map(|st| st.name.as_str()).collect();
    assert_eq!(steps, ["m1", "m2"]);
    assert_eq!(p.steps[0].base_date.as_deref(), Some("2016-06-01"));
    assert_eq!(p.steps[0].monitor_date.as_deref(), Some("2017-12-01"));
    assert_eq!(p.steps[1].monitor_date.as_deref(), Some("2019-06-01"));
    assert!((8..=10).contains(&field.attribute_names.len()));
    let mut names = p.attribute_names.clone();
    names.sort();
    let mut expected = field.attribute_names.clone();
    expected.sort();
    assert_eq!(names, expected);
    let targets: Vec<(&str, &str, f64, f64)> = p
        .targets
        .iter()
        .map(|t| (t.name.as_str(), t.unit.as_str(), t.min, t.max))
        .collect();
    assert_eq!(
        targets,
        [
            ("dP", "MPa", -60.0, 60.0),
            ("dSw", "fraction", -1.0, 1.0),
            ("dSg", "fraction", -1.0, 1.0)
        ]
    );
    let th: Vec<(&str, Direction, f64, &str)> = p
        .thresholds
        .iter()
        .map(|t| (t.target.as_str(), t.direction, t.value, t.label.as_str()))
        .collect();
    assert!(th.contains(&("dSw", Direction::Above, 0.10, "swept")));
    assert!(th.contains(&("dP", Direction::Below, -2.0, "depleted")));
    assert!(th.contains(&("dSg", Direction::Above, 0.05, "gas_out")));
    let infill = p.infill.as_ref().unwrap();
    assert_eq!(infill.threshold, "swept");
    assert!(
        infill
            .volume_map
            .as_ref()
            .unwrap()
            .ends_with("static/hcpv.tif")
    );

    // maps as stored (float32) equal the field in memory
    for (si, st) in p.steps.iter().enumerate() {
        let fs = field.step_names.iter().position(|n| *n == st.name).unwrap();
        for (ai, name) in p.attribute_names.iter().enumerate() {
            let fa = field
                .attribute_names
                .iter()
                .position(|n| n == name)
                .unwrap();
            for (a, b) in survey.maps[si][ai].iter().zip(&field.attributes[fs][fa]) {
                assert_eq!(*a, *b as f32 as f64, "{name} {}", st.name);
            }
        }
        for (k, t) in field.target_names.iter().enumerate() {
            let r = geotiff::read(&dir.path().join(format!("truth/{}/{t}.tif", st.name))).unwrap();
            assert_eq!(r.grid, field.grid);
            for (a, b) in r.values.iter().zip(&field.truth[fs][k]) {
                assert_eq!(*a, *b as f32 as f64);
            }
        }
    }
    let hcpv = geotiff::read(&dir.path().join("static/hcpv.tif")).unwrap();
    assert_eq!(hcpv.values.len(), field.hcpv.len());
    assert!(hcpv.values.iter().sum::<f64>() > 0.0);

    // wells CSV: the exact header, one row per observation, values within rounding
    let text = std::fs::read_to_string(dir.path().join("wells.csv")).unwrap();
    assert_eq!(
        text.lines().next().unwrap(),
        "well,x,y,step,kind,dP,dSw,dSg"
    );
    assert_eq!(survey.wells.len(), field.well_rows.len());
    for (rec, row) in survey.wells.iter().zip(&field.well_rows) {
        assert_eq!(rec.well, row.0);
        assert_eq!(rec.step, row.3);
        let synth_kind = field
            .wells
            .iter()
            .find(|w| w.name == rec.well)
            .unwrap()
            .kind;
        assert_eq!(
            rec.kind.map(|k| format!("{k:?}").to_lowercase()),
            Some(synth_kind.as_str().to_string())
        );
        assert!((rec.x - row.1).abs() < 1e-3 && (rec.y - row.2).abs() < 1e-3);
        for (a, b) in rec.targets.iter().zip(&row.4) {
            assert!((a - b).abs() < 1e-6);
        }
    }

    // synth.json records every setting and the seed
    let record = SynthRecord::read(&dir.path().join("synth.json")).unwrap();
    assert_eq!(record.settings, s);
    assert_eq!(record.seed, 5);
    assert_eq!(record.field, "Skerrow Bank");
    assert_eq!(record.wells, field.wells);
    let on_disk = files(dir.path());
    assert_eq!(record.files.len(), on_disk.len());
    for f in &record.files {
        assert!(
            on_disk.contains_key(Path::new(f)),
            "{f} listed but not written"
        );
    }
}

#[test]
fn same_seed_gives_identical_files_and_different_seeds_differ() {
    let s = small(11);
    let a = write(&synth::generate(&s).unwrap(), &s);
    let b = write(&synth::generate(&s).unwrap(), &s);
    let (fa, fb) = (files(a.path()), files(b.path()));
    assert_eq!(fa.keys().collect::<Vec<_>>(), fb.keys().collect::<Vec<_>>());
    for (k, v) in &fa {
        assert!(
            fb[k] == *v,
            "{} differs between two runs with one seed",
            k.display()
        );
    }
    let other = synth::generate(&small(12)).unwrap();
    let first = synth::generate(&s).unwrap();
    for step in 0..2 {
        for t in 0..3 {
            assert_ne!(first.truth[step][t], other.truth[step][t]);
        }
        assert_ne!(first.attributes[step][0], other.attributes[step][0]);
    }
    assert_ne!(first.wells, other.wells);
}

#[test]
fn thread_count_does_not_change_the_field() {
    let s = small(3);
    let run = |threads: usize| crate::threads::in_pool(threads, || synth::generate(&s).unwrap());
    let (one, three) = (run(1), run(3));
    assert_eq!(one.attributes, three.attributes);
    assert_eq!(one.truth, three.truth);
    assert_eq!(one.well_rows, three.well_rows);
}

#[test]
fn field_values_are_physical() {
    let s = small(8);
    let m = SynthModel::build(&s).unwrap();
    let field = synth::generate(&s).unwrap();
    let res = &m.reservoir;
    for step in 0..s.steps {
        let (dp, dsw, dsg) = (
            &field.truth[step][0],
            &field.truth[step][1],
            &field.truth[step][2],
        );
        for i in 0..res.len() {
            assert!(dp[i].abs() < 60.0 && dsw[i].abs() <= 1.0 && dsg[i].abs() <= 1.0);
            assert!(dsg[i] >= 0.0 && dsw[i] >= -1e-12);
            let oil = (0..res.sands.len()).any(|k| res.oil_column(k, i) > 0.0);
            if !oil {
                // no oil, nothing to replace or release
                assert_eq!(dsw[i], 0.0);
                assert_eq!(dsg[i], 0.0);
                assert_eq!(field.hcpv[i], 0.0);
            }
        }
        for a in &field.attributes[step] {
            assert!(a.iter().all(|v| v.is_finite()));
        }
        // nrms is a percentage with a realistic floor from the survey noise
        let mut nrms = field.attributes[step][8].clone();
        nrms.sort_by(f64::total_cmp);
        let median = nrms[nrms.len() / 2];
        assert!((5.0..60.0).contains(&median), "median NRMS {median} %");
    }
    // the pressure falls somewhere and rises somewhere
    let dp = field.truth.iter().flat_map(|t| t[0].iter());
    assert!(dp.clone().any(|v| *v < -1.0));
    assert!(dp.clone().any(|v| *v > 1.0));
}

#[test]
fn wells_are_irregular_and_avoid_the_lobe() {
    for seed in [7, 8, 9] {
        // the default (demo-sized) field; building the model places the wells, no seismic needed
        let s = SynthSettings {
            seed,
            ..SynthSettings::default()
        };
        let m = SynthModel::build(&s).unwrap();
        let res = &m.reservoir;
        assert_eq!(m.wells.len(), s.wells);
        let producers = m
            .wells
            .iter()
            .filter(|w| w.kind == WellKind::Producer)
            .count();
        assert!(producers >= s.wells / 2 && producers < s.wells);
        let t_end = s.steps as f64 * s.monitor_interval_years;
        for (a, w) in m.wells.iter().enumerate() {
            // off the nodes, not in the lobe, apart from one another
            let (fi, fj) = (w.x / res.spacing, w.y / res.spacing);
            assert!((fi - fi.round()).abs() > 1e-6 || (fj - fj.round()).abs() > 1e-6);
            assert!(
                !res.no_well[res.nearest(w.x, w.y)],
                "{} in the lobe",
                w.name
            );
            for b in &m.wells[a + 1..] {
                assert!((w.x - b.x).hypot(w.y - b.y) > 0.5 * res.spacing);
            }
            let range = match w.kind {
                WellKind::Producer => s.producer_rate,
                WellKind::Injector => s.injector_rate,
                WellKind::Observer => [0.0, 0.0],
            };
            assert!(w.rate >= range[0] && w.rate <= range[1]);
            assert!(w.start >= 0.0 && w.start < t_end);
            assert_eq!(w.compartment, res.compartment_at(w.x, w.y));
        }
        // both compartments are developed
        assert!(m.wells.iter().any(|w| w.compartment == 0));
        assert!(m.wells.iter().any(|w| w.compartment == 1));
        // the lobe is unlike the well locations: its core holds more pore thickness (h phi) on
        // average than any well location
        let pore = |i: usize| {
            res.sands
                .iter()
                .map(|sd| sd.thickness[i] * sd.porosity[i])
                .sum::<f64>()
        };
        let well_max = m
            .wells
            .iter()
            .map(|w| pore(res.nearest(w.x, w.y)))
            .fold(f64::MIN, f64::max);
        let core: Vec<f64> = (0..res.len())
            .filter(|&i| res.lobe[i] > 0.9)
            .map(pore)
            .collect();
        assert!(core.len() > 100);
        let core_mean = core.iter().sum::<f64>() / core.len() as f64;
        assert!(
            core_mean > well_max,
            "seed {seed}: lobe core {core_mean} m vs wells up to {well_max} m"
        );
    }
}

#[test]
fn noise_is_scaled_band_limited_and_spatially_correlated() {
    let (nx, ny, samples) = (40, 30, 40);
    let spec = NoiseSpec {
        nx,
        ny,
        correlation: 3.0,
        samples,
        dt: 0.002,
        frequency: 25.0,
        stack_correlation: 0.5,
    };
    let window = vec![samples; nx * ny];
    let signal_rms = [0.05, 0.04, 0.03];
    let snr = 12.0;
    let n0 = noise::scaled_noise(&spec, 9, 0, &signal_rms, snr, &window);
    let n1 = noise::scaled_noise(&spec, 9, 1, &signal_rms, snr, &window);
    for (st, s) in signal_rms.iter().enumerate() {
        let r = noise::window_rms(&n0[st], samples, &window);
        assert!((r - s / snr).abs() < 1e-12 * s, "RMS {r} for signal {s}");
    }
    let corr = |a: &[f64], b: &[f64]| {
        let (sa, sb): (f64, f64) = (a.iter().map(|v| v * v).sum(), b.iter().map(|v| v * v).sum());
        a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>() / (sa * sb).sqrt()
    };
    // surveys are independent; stacks share part of their noise (coefficient 0.5)
    assert!(corr(&n0[0], &n1[0]).abs() < 0.1);
    let c01 = corr(&n0[0], &n0[1]);
    assert!((0.35..0.65).contains(&c01), "stack correlation {c01}");
    // band-limited: neighbouring samples (2 ms) of 25 Hz noise are strongly correlated, samples
    // 20 ms apart (half a period) are anti-correlated
    let lag = |l: usize| {
        let (mut s, mut n) = (0.0, 0.0);
        for node in 0..nx * ny {
            let tr = &n0[0][node * samples..(node + 1) * samples];
            for k in 0..samples - l {
                s += tr[k] * tr[k + l];
                n += tr[k] * tr[k];
            }
        }
        s / n
    };
    assert!(lag(1) > 0.8, "lag 2 ms {}", lag(1));
    assert!(lag(10) < -0.1, "lag 20 ms {}", lag(10));
    // spatially correlated: neighbouring traces share much of their noise (covariance
    // exp(-(r/L)^2) with L = 3 nodes gives 0.89 at one node)
    let (mut s, mut n) = (0.0, 0.0);
    for j in 0..ny {
        for i in 0..nx - 1 {
            for k in 0..samples {
                let a = n0[0][(j * nx + i) * samples + k];
                let b = n0[0][(j * nx + i + 1) * samples + k];
                s += a * b;
                n += a * a;
            }
        }
    }
    assert!(s / n > 0.6, "neighbour correlation {}", s / n);

    // NRMS of repeated identical signal plus independent noise at SNR 12:
    // sqrt(2) / sqrt(snr^2 + 1) = 0.117 (Kragh & Christie 2002 definition)
    let signal: Vec<f64> = (0..samples)
        .map(|k| tidemark::synth::seismic::ricker(25.0, (k as f64 - 20.0) * 0.002))
        .collect();
    let srms = tidemark::synth::seismic::rms(&signal);
    let b = noise::scaled_noise(&spec, 4, 0, &[srms], snr, &window);
    let m = noise::scaled_noise(&spec, 4, 1, &[srms], snr, &window);
    let mut values: Vec<f64> = (0..nx * ny)
        .map(|node| {
            let r = node * samples..(node + 1) * samples;
            let bt: Vec<f64> = signal
                .iter()
                .zip(&b[0][r.clone()])
                .map(|(s, n)| s + n)
                .collect();
            let mt: Vec<f64> = signal.iter().zip(&m[0][r]).map(|(s, n)| s + n).collect();
            tidemark::synth::seismic::nrms(&bt, &mt)
        })
        .collect();
    values.sort_by(f64::total_cmp);
    let median = values[values.len() / 2];
    let expected = 2f64.sqrt() / (snr * snr + 1.0).sqrt();
    assert!(
        (median / expected - 1.0).abs() < 0.15,
        "median NRMS {median} vs {expected}"
    );
}

#[test]
fn settings_errors_name_the_setting() {
    for (s, key) in [
        (
            SynthSettings {
                sands: 3,
                ..small(1)
            },
            "sands",
        ),
        (
            SynthSettings {
                base_date: "2016-13-01".into(),
                ..small(1)
            },
            "base_date",
        ),
        (
            SynthSettings {
                snr: 0.0,
                ..small(1)
            },
            "snr",
        ),
        (SynthSettings { nx: 3, ..small(1) }, "nx"),
        (
            SynthSettings {
                producer_rate: [500.0, 100.0],
                ..small(1)
            },
            "producer_rate",
        ),
    ] {
        let e = synth::generate(&s).unwrap_err().to_string();
        assert!(e.contains(key), "error '{e}' does not name {key}");
    }
    // unknown keys in a settings file are refused
    let e = SynthSettings::from_json(r#"{"seed": 3, "nx": 30, "snrr": 4}"#).unwrap_err();
    assert!(e.contains("snrr"), "{e}");
    // a partial settings file takes the defaults for the rest
    let s = SynthSettings::from_json(r#"{"seed": 3, "nx": 30}"#).unwrap();
    assert_eq!((s.seed, s.nx, s.ny), (3, 30, SynthSettings::default().ny));
}

#[test]
fn never_replaces_files_it_did_not_write() {
    let s = small(2);
    let field = synth::generate(&s).unwrap();
    // a folder holding someone else's map where the generator would write
    let dir = tempfile::tempdir().unwrap();
    let foreign = dir.path().join("maps/m1/near_amp.tif");
    std::fs::create_dir_all(foreign.parent().unwrap()).unwrap();
    std::fs::write(&foreign, b"not ours").unwrap();
    let e = synth::write_project(&field, &s, dir.path()).unwrap_err();
    assert!(e.to_string().contains("near_amp.tif"), "{e}");
    assert_eq!(std::fs::read(&foreign).unwrap(), b"not ours");
    assert!(!dir.path().join("project.toml").exists());

    // unrelated files are left alone
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("notes.txt"), b"keep me").unwrap();
    synth::write_project(&field, &s, dir.path()).unwrap();
    assert_eq!(
        std::fs::read(dir.path().join("notes.txt")).unwrap(),
        b"keep me"
    );

    // an earlier output is replaced, and files it no longer produces are removed
    let fewer = SynthSettings {
        steps: 1,
        ..s.clone()
    };
    synth::write_project(&synth::generate(&fewer).unwrap(), &fewer, dir.path()).unwrap();
    assert!(!dir.path().join("maps/m2").exists());
    assert!(!dir.path().join("truth/m2/dP.tif").exists());
    assert!(dir.path().join("maps/m1/near_amp.tif").exists());
    assert_eq!(
        std::fs::read(dir.path().join("notes.txt")).unwrap(),
        b"keep me"
    );
    let survey = project::load_survey(&dir.path().join("project.toml")).unwrap();
    assert_eq!(survey.project.steps.len(), 1);
}

#[test]
fn synth_command_writes_a_project_and_refuses_a_non_empty_folder() {
    use tidemark::cli::synth::{Args, run};
    let args = |out: &Path, force: bool| Args {
        out: out.to_path_buf(),
        from: None,
        seed: Some(17),
        nx: Some(24),
        ny: Some(20),
        spacing: Some(60.0),
        rotation: Some(-15.0),
        wells: Some(8),
        observers: None,
        steps: Some(2),
        interval: None,
        snr: Some(8.0),
        sands: Some(1),
        no_fault: true,
        gas_cap: false,
        force,
    };
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("skerrow");
    assert_eq!(run(args(&out, false)).unwrap(), 0);
    let survey = project::load_survey(&out.join("project.toml")).unwrap();
    assert_eq!(survey.project.grid.rotation, -15.0);
    assert_eq!(survey.project.grid.dx, 60.0);
    let record = SynthRecord::read(&out.join("synth.json")).unwrap();
    assert_eq!(
        (
            record.seed,
            record.settings.sands,
            record.settings.fault,
            record.settings.snr
        ),
        (17, 1, false, 8.0)
    );
    // the folder is not empty now
    let e = run(args(&out, false)).unwrap_err().to_string();
    assert!(e.contains("not empty"), "{e}");
    // --force replaces the earlier output
    assert_eq!(run(args(&out, true)).unwrap(), 0);
    // --from a synth.json regenerates the same project
    let again = dir.path().join("again");
    let from = Args {
        from: Some(out.join("synth.json")),
        seed: None,
        nx: None,
        ny: None,
        spacing: None,
        rotation: None,
        wells: None,
        steps: None,
        snr: None,
        sands: None,
        no_fault: false,
        ..args(&again, false)
    };
    assert_eq!(run(from).unwrap(), 0);
    assert_eq!(files(&out), files(&again));
}

#[test]
fn observation_wells_watch_without_changing_the_field() {
    // Observers are placed after the flowing wells and carry no flow, so the same seed gives the
    // same flowing wells, the same truth and the same seismic with or without them.
    let plain = synth::generate(&small(21)).unwrap();
    let s = SynthSettings {
        observers: 4,
        ..small(21)
    };
    let watched = synth::generate(&s).unwrap();
    assert_eq!(plain.truth, watched.truth);
    assert_eq!(plain.attributes, watched.attributes);
    let observers: Vec<_> = watched
        .wells
        .iter()
        .filter(|w| w.kind == WellKind::Observer)
        .collect();
    assert_eq!(observers.len(), 4);
    assert_eq!(watched.wells.len(), plain.wells.len() + 4);
    for w in &plain.wells {
        assert!(
            watched
                .wells
                .iter()
                .any(|v| v.name == w.name && v.x == w.x && v.y == w.y && v.kind == w.kind),
            "{} moved",
            w.name
        );
    }
    for o in &observers {
        assert_eq!(o.rate, 0.0);
        assert!(o.name.starts_with("SKB-O"), "{}", o.name);
        // Measured at every monitor, from the base survey on.
        let rows = watched.well_rows.iter().filter(|r| r.0 == o.name).count();
        assert_eq!(rows, s.steps, "{}", o.name);
    }
}
