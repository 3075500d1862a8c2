//! The review page of a real run: opens in a browser, and its studies equal a direct computation.

use super::end_to_end::fixture;
use tidemark::pipeline::fit::{calibrate_rows, calibration_settings, target_rows};
use tidemark::pipeline::studies::{
    Sensitivity, angle_attributes, curve_rows, curve_sizes, study_settings,
};
use tidemark::project;
use tidemark::sample;

#[test]
fn the_report_of_a_run_renders_in_headless_chromium() {
    let f = fixture();
    let page = f.out.join("report.html");
    let html = std::fs::read_to_string(&page).unwrap();
    let n_images = crate::report::html::check_self_contained(&html);
    // 3 steps x (3 targets x 3 maps + dissimilarity) + infill + error maps + diagnostics plots.
    assert!(n_images >= 30 + 1 + 9, "only {n_images} images");
    // Palette PNGs keep the page small enough to mail: every map picture under 100 kB, the page
    // under 5 MB (the demo's, with 53 maps, is about 4.6 MB).
    let pictures = f.out.join("pictures");
    let mut stack = vec![pictures];
    while let Some(dir) = stack.pop() {
        for e in std::fs::read_dir(&dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let len = std::fs::metadata(&p).unwrap().len();
                assert!(len < 100_000, "{}: {len} bytes", p.display());
            }
        }
    }
    assert!(html.len() < 5_000_000, "page of {} bytes", html.len());
    let name = project::Project::load(&f.project).unwrap().name;
    crate::report::browser::check_page_in_browser(&page, n_images, &name);
    assert!(html.contains("not a reserves estimate"));
}

#[test]
fn learning_curve_and_ablation_equal_a_direct_computation() {
    let f = fixture();
    let studies: Sensitivity =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("studies.json")).unwrap())
            .unwrap();
    let survey = project::load_survey(&f.project).unwrap();
    let p = &survey.project;
    let (ts, _) = sample::at_wells(&survey);
    let seed = p.model.seed;
    let settings = study_settings(&calibration_settings(p, seed));
    let all: Vec<usize> = (0..ts.x.ncols()).collect();
    let n_wells = ts.well_names.len();
    let sizes = curve_sizes(n_wells);
    assert_eq!(
        studies.curve.len(),
        sizes.len() * p.targets.len(),
        "one curve point per target and size"
    );
    // Direct recomputation of two curve points of dSw (the smallest subset, second repeat, and the
    // largest, first repeat).
    let t = 1;
    for (si, r) in [(0, 1), (sizes.len() - 1, 0)] {
        let rows = curve_rows(&ts, t, n_wells, sizes[si], seed, si, r);
        let direct = calibrate_rows(p, &ts, t, &rows, &all, &settings, None, None).unwrap();
        let point = studies
            .curve
            .iter()
            .find(|c| c.target == "dSw" && c.wells == sizes[si])
            .unwrap();
        assert_eq!(
            point.r2[r].to_bits(),
            direct.diagnostics.metrics.r2.to_bits()
        );
        assert_eq!(
            point.coverage[r].to_bits(),
            direct.diagnostics.metrics.coverage.to_bits()
        );
        let wells_in: std::collections::BTreeSet<usize> =
            rows.iter().map(|&k| ts.group[k]).collect();
        assert!(wells_in.len() <= sizes[si]);
    }
    // Ablation of dSw: the same calibration without the angle-dependent attributes.
    let removed = angle_attributes(&survey);
    assert!(removed.contains(&"far_amp".to_string()));
    let keep: Vec<usize> = (0..ts.x.ncols())
        .filter(|&c| !removed.contains(&ts.feature_names[c]))
        .collect();
    let rows = target_rows(&ts, t);
    let without = calibrate_rows(p, &ts, t, &rows, &keep, &settings, None, None).unwrap();
    let with_all = calibrate_rows(p, &ts, t, &rows, &all, &settings, None, None).unwrap();
    let a = studies.ablation.iter().find(|a| a.target == "dSw").unwrap();
    assert_eq!(
        a.r2_without.to_bits(),
        without.diagnostics.metrics.r2.to_bits()
    );
    assert_eq!(
        a.r2_all.to_bits(),
        with_all.diagnostics.metrics.r2.to_bits()
    );
    // The page shows the same numbers (report-data.json is what the page is drawn from).
    let data: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("report-data.json")).unwrap())
            .unwrap();
    let dsw = data["targets"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "dSw")
        .unwrap();
    let r2_without = dsw["ablation"]["without"]["r2"].as_f64().unwrap();
    assert_eq!(r2_without.to_bits(), a.r2_without.to_bits());
    let last = dsw["learning_curve"]["points"]
        .as_array()
        .unwrap()
        .last()
        .unwrap()
        .clone();
    let point = studies
        .curve
        .iter()
        .find(|c| c.target == "dSw" && c.wells == *sizes.last().unwrap())
        .unwrap();
    let mean = point.r2.iter().sum::<f64>() / point.r2.len() as f64;
    assert!((last["r2_mean"].as_f64().unwrap() - mean).abs() < 1e-12);
}
