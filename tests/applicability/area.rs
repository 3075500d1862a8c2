//! The area of applicability as the main job writes it: reason-code maps, the flag that the
//! scores and pictures use, saved models old and new, and the well-free lobe found by the run's
//! flag on generated fields.

use crate::pipeline::end_to_end::fixture;
use std::path::Path;
use std::process::Command;
use tidemark::applicability::{REASON_INSIDE, REASON_NO_DATA};
use tidemark::io::geotiff;
use tidemark::pipeline::fit;
use tidemark::pipeline::model::SavedModel;
use tidemark::pipeline::stages::Stages;
use tidemark::project;
use tidemark::sample;
use tidemark::synth::{SynthModel, SynthSettings, generate, write_project};

#[test]
fn reason_maps_agree_with_the_area_and_say_what_the_codes_mean() {
    let f = fixture();
    let grid = project::Project::load(&f.project).unwrap().grid;
    let run: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("run.json")).unwrap()).unwrap();
    let codes_text = run["area_reason_codes"]
        .as_str()
        .expect("codes in run.json");
    assert!(codes_text.contains("1 unlike every well") && codes_text.contains("3 both"));
    for step in ["m1", "m2", "m3"] {
        let tif = f.out.join(format!("maps/{step}/area_reason.tif"));
        let codes = geotiff::read_on_grid(&tif, &grid).unwrap();
        let inside =
            geotiff::read_on_grid(&f.out.join(format!("maps/{step}/applicable.tif")), &grid)
                .unwrap();
        // GDAL's nodata (255) reads back as NaN; inside exactly where the code is 0.
        for (c, a) in codes.iter().zip(&inside) {
            assert!(c.is_nan() || [0.0, 1.0, 2.0, 3.0].contains(c), "code {c}");
            assert_eq!(c.is_nan(), a.is_nan());
            if !c.is_nan() {
                assert_eq!(*c == f64::from(REASON_INSIDE), *a == 1.0);
            }
        }
        // The XYZ text holds the same codes, no data as the grid's null value.
        let xyz = tidemark::io::read_map(
            &f.out.join(format!("maps/{step}/area_reason.xyz")),
            &grid,
            1e-6,
        )
        .unwrap();
        for (a, b) in codes.iter().zip(&xyz) {
            assert!(a == b || (a.is_nan() && b.is_nan()));
        }
        // Outside check (Debian gdal-bin): an 8-bit map with nodata 255 and the codes described.
        let out = Command::new("gdalinfo")
            .args(["-json", tif.to_str().unwrap()])
            .output()
            .expect("gdalinfo is needed (Debian gdal-bin; .ci/deps installs it)");
        assert!(out.status.success());
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["bands"][0]["type"], "Byte");
        assert_eq!(
            v["bands"][0]["noDataValue"].as_f64(),
            Some(f64::from(REASON_NO_DATA))
        );
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(text.contains("unlike every well"), "codes in the metadata");
        let aux =
            std::fs::read_to_string(f.out.join(format!("maps/{step}/area_reason.xyz.aux.xml")))
                .unwrap();
        assert!(aux.contains("outside the training range"));
    }
}

#[test]
fn saved_models_carry_the_ground_check_and_old_ones_still_load() {
    let f = fixture();
    let path = f.out.join("model.json");
    let model = SavedModel::load(&path).unwrap();
    assert_eq!(model.format, 4);
    assert_eq!(
        model.smoothing.len(),
        model.calibrated.len(),
        "a width per target"
    );
    assert!(model.ground.is_some(), "the ground check is saved");
    assert!(model.applicability.range_margin > 0.0);
    // A model of format 1 has neither: it loads and maps with the row check and the plain range.
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    let o = v.as_object_mut().unwrap();
    o.remove("ground");
    // Nor smoothing widths (format 4).
    o.remove("smoothing");
    o.remove("smoothing_choice");
    o.insert("format".into(), 1.into());
    o["applicability"]
        .as_object_mut()
        .unwrap()
        .remove("range_margin");
    let dir = f.root.join("old-model");
    std::fs::create_dir_all(&dir).unwrap();
    let old = dir.join("model.json");
    std::fs::write(&old, serde_json::to_string(&v).unwrap()).unwrap();
    // Nor does it have residual kriging (format 3): its targets load without it.
    for t in v["calibrated"].as_array_mut().unwrap() {
        let t = t.as_object_mut().unwrap();
        t.remove("kriging");
        t["diagnostics"].as_object_mut().unwrap().remove("kriging");
    }
    std::fs::write(&old, serde_json::to_string(&v).unwrap()).unwrap();
    let back = SavedModel::load(&old).unwrap();
    assert!(back.calibrated.iter().all(|c| c.kriging.is_none()));
    assert!(back.ground.is_none());
    assert_eq!(back.applicability.range_margin, 0.0);
    assert!(
        back.widths().is_empty() && back.width(0) == 0.0,
        "plain attributes"
    );
    let survey = project::load_survey(&f.project).unwrap();
    assert_eq!(
        back.ground_flags(&survey, 0..survey.project.grid.len()),
        Ok(None)
    );
    // A format this build does not know is refused with a message naming the file.
    v["format"] = 99.into();
    std::fs::write(&old, serde_json::to_string(&v).unwrap()).unwrap();
    let e = SavedModel::load(&old).unwrap_err().to_string();
    assert!(
        e.contains("model format 99") && e.contains("model.json"),
        "{e}"
    );
}

/// Recall and precision of the run's area (every step pooled) in each region, and the share of
/// nodes within one well spacing of a well that stay inside.
fn run_area(settings: &SynthSettings, dir: &Path) -> (Vec<(String, f64, f64)>, f64) {
    if dir.exists() {
        std::fs::remove_dir_all(dir).unwrap();
    }
    let field = generate(settings).unwrap();
    write_project(&field, settings, dir).unwrap();
    let survey = project::load_survey(&dir.join("project.toml")).unwrap();
    let (ts, _) = sample::at_wells(&survey);
    let seed = survey.project.model.seed;
    let (model, _) = fit::fit_model(&survey, &ts, seed, &mut Stages::new(true)).unwrap();
    let grid = &survey.project.grid;
    let ground = model.ground_flags(&survey, 0..grid.len()).unwrap();
    let xy = grid.node_coordinates();
    let spacing = model.ground.as_ref().unwrap().spacing;
    let wells: Vec<(f64, f64)> = model.wells.iter().map(|w| (w.1, w.2)).collect();
    let near: Vec<bool> = xy
        .iter()
        .map(|&(x, y)| {
            wells
                .iter()
                .any(|w| ((w.0 - x).powi(2) + (w.1 - y).powi(2)).sqrt() <= spacing)
        })
        .collect();
    let masks: Vec<(String, Vec<bool>)> = SynthModel::build(settings)
        .unwrap()
        .reservoir
        .masks()
        .into_iter()
        .map(|(n, m)| (n, m.iter().map(|&v| v == 1.0).collect()))
        .collect();
    let mut flagged: Vec<bool> = Vec::new();
    for s in 0..survey.project.steps.len() {
        let x = model.node_features(&survey, s);
        let maps = model.predict(x.view(), &xy, ground.as_deref()).unwrap();
        flagged.extend(maps.applicability.inside.iter().map(|i| !i));
    }
    let n = grid.len();
    let in_any = |k: usize| masks.iter().any(|m| m.1[k % n]);
    let false_flags = (0..flagged.len())
        .filter(|&k| flagged[k] && !in_any(k))
        .count();
    let rates = masks
        .iter()
        .map(|(name, m)| {
            let size = (0..flagged.len()).filter(|&k| m[k % n]).count();
            let hit = (0..flagged.len())
                .filter(|&k| m[k % n] && flagged[k])
                .count();
            (
                name.clone(),
                hit as f64 / size as f64,
                hit as f64 / (hit + false_flags).max(1) as f64,
            )
        })
        .collect();
    let near_total = (0..flagged.len()).filter(|&k| near[k % n]).count();
    let near_inside = (0..flagged.len())
        .filter(|&k| near[k % n] && !flagged[k])
        .count();
    (rates, near_inside as f64 / near_total as f64)
}

#[test]
fn the_run_flags_the_well_free_lobe() {
    let root = std::path::PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("area-lobe");
    // Default field, seed 1 (120 x 100 nodes, 45 wells, 4 steps). Measured with
    // examples/applicability_probe --no-gas-cap 1: lobe recall 0.76, precision 0.65, near-well
    // inside 0.989 (the row check, the widened range check and the ground check together).
    let settings = SynthSettings {
        seed: 1,
        ..SynthSettings::default()
    };
    let (rates, near) = run_area(&settings, &root.join("seed-1"));
    let (_, recall, precision) = &rates[0];
    assert!(*recall >= 0.65, "lobe recall {recall}");
    assert!(*precision >= 0.55, "lobe precision {precision}");
    assert!(near >= 0.95, "near-well inside {near}");
    // With the drained culmination too (seed 4): the probe measured lobe 0.93 / 0.58 and
    // near-well inside 0.978; the culmination itself is not found (recall 0.04, see DEVELOPERS.md).
    let settings = SynthSettings {
        seed: 4,
        gas_cap: true,
        ..SynthSettings::default()
    };
    let (rates, near) = run_area(&settings, &root.join("seed-4-gas-cap"));
    assert_eq!(rates.len(), 2, "lobe and gas cap masks");
    let (_, recall, precision) = &rates[0];
    assert!(*recall >= 0.8, "lobe recall {recall}");
    assert!(*precision >= 0.5, "lobe precision {precision}");
    assert!(near >= 0.95, "near-well inside {near}");
}
