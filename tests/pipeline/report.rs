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

/// Text of the first element after `from` that opens with `open` (up to `close`), tags kept.
fn element_after<'a>(html: &'a str, from: usize, open: &str, close: &str) -> &'a str {
    let start = from
        + html[from..]
            .find(open)
            .unwrap_or_else(|| panic!("no {open} after byte {from}"));
    let end = start + html[start..].find(close).unwrap();
    &html[start + open.len()..end]
}

/// Cells of the second row of a table (the first holds the headings).
fn value_cells(table: &str) -> Vec<String> {
    let row = table.split("<tr>").nth(2).expect("a row of values");
    row.split("<td>")
        .skip(1)
        .map(|c| c[..c.find("</td>").unwrap()].to_string())
        .collect()
}

#[test]
fn the_kriging_stage_on_the_page_prints_the_figures_of_the_summary() {
    use tidemark::report::markup::{escape, num};
    let f = fixture();
    let html = std::fs::read_to_string(f.out.join("report.html")).unwrap();
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("summary.json")).unwrap())
            .unwrap();
    let calibration = html
        .find("<section id=\"calibration\">")
        .expect("calibration section");
    let targets = summary["targets"].as_array().unwrap();
    assert!(!targets.is_empty());
    for t in targets {
        let name = t["name"].as_str().unwrap();
        let d = &t["diagnostics"];
        let k = &d["kriging"];
        let measured_only = !d["hurdle"].is_null();
        let heading = calibration
            + html[calibration..]
                .find(&format!("<h3>{}</h3>", escape(name)))
                .unwrap_or_else(|| panic!("{name}: no heading in the calibration section"));
        // The block belongs to this target: no other target's heading before it.
        let block = heading + html[heading..].find("Kriging the held-out wells").unwrap();
        assert!(
            !html[heading + 4..block].contains("<h3>"),
            "{name}: kriging block under another target"
        );
        // The variogram: model, nugget, sill, range and pairs as in summary.json.
        let v = &k["variogram"];
        let model = &v["model"];
        let cells = value_cells(element_after(
            &html,
            block,
            "<table class=\"kriging\">",
            "</table>",
        ));
        let pairs: u64 = v["lags"]
            .as_array()
            .unwrap()
            .iter()
            .map(|l| l[1].as_u64().unwrap())
            .sum();
        assert_eq!(cells[0], model["kind"].as_str().unwrap(), "{name} model");
        assert_eq!(cells[1], num(model["nugget"].as_f64()), "{name} nugget");
        assert_eq!(cells[2], num(model["sill"].as_f64()), "{name} sill");
        assert_eq!(cells[3], num(model["range"].as_f64()), "{name} range");
        assert_eq!(cells[4], pairs.to_string(), "{name} pairs");
        assert!(pairs > 0, "{name}: a fitted variogram has pairs");
        // The band: kept or not, with both interval scores.
        let band = element_after(&html, block, "<p class=\"note kriging-band\">", "</p>");
        let (scaled, without) = (num(k["is_scaled"].as_f64()), num(k["is_shifted"].as_f64()));
        assert!(
            band.contains(&format!("{scaled}, is")) || band.contains(&format!("{scaled} against")),
            "{name}: scaled band's interval score {scaled} in {band}"
        );
        assert!(
            band.contains(&format!("{without} without it")),
            "{name}: {band}"
        );
        let kept = k["band_kept"].as_bool().unwrap();
        match (kept, measured_only) {
            (true, false) => assert!(band.contains(": kept, because"), "{name}: {band}"),
            (true, true) => assert!(band.contains("would pass its test"), "{name}: {band}"),
            (false, _) => assert!(band.contains("not kept, because"), "{name}: {band}"),
        }
        // The sentence's comparison agrees with the numbers.
        let (a, b) = (
            k["is_scaled"].as_f64().unwrap(),
            k["is_shifted"].as_f64().unwrap(),
        );
        assert_eq!(kept, a <= b, "{name}: kept exactly when no worse");
        // The middle's measured gain, in %, with its direction.
        let middle = element_after(&html, block, "<p class=\"note kriging-middle\">", "</p>");
        let gain = k["mse_gain_pct"].as_f64().unwrap();
        let se = k["mse_gain_se_pct"].as_f64().unwrap();
        let verb = if gain >= 0.0 { "lower" } else { "raise" };
        let figures = format!(
            "the held-out wells&#39; mean squared error by {:.1} % (one standard error {se:.1} %)",
            gain.abs()
        );
        if k["shift_kept"].as_bool().unwrap() && !measured_only {
            assert!(
                middle.contains(&format!("{verb}s {figures}")),
                "{name}: {middle}"
            );
            assert!(
                middle.contains("the P50 maps include it"),
                "{name}: {middle}"
            );
        } else {
            assert!(
                middle.contains(&format!("would {verb} {figures}")),
                "{name}: {middle}"
            );
            assert!(middle.contains("measured, not applied"), "{name}: {middle}");
        }
    }
}
