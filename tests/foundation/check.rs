//! `tidemark check` on a valid project: the summary, the JSON form and the exit status.

use super::fixtures::*;
use std::process::Command;
use tidemark::check::{Severity, check_project};

#[test]
fn tiny_project_passes_with_a_correct_summary() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let before = list_files(dir.path());
    let report = check_project(&manifest);
    assert!(report.runnable, "{report}");
    assert!(report.problems.is_empty(), "{:?}", report.problems);
    assert_eq!(list_files(dir.path()), before, "check writes nothing");
    assert_eq!(report.project.as_deref(), Some("Skerrow Bank tiny"));
    let g = report.grid.as_ref().unwrap();
    assert_eq!((g.nx, g.ny), (6, 5));
    assert_eq!(report.steps.len(), 2);
    for (s, step) in report.steps.iter().enumerate() {
        assert_eq!(step.name, TINY_STEPS[s]);
        assert_eq!(step.well_rows, TINY_WELLS);
        assert_eq!(step.usable_rows, TINY_WELLS);
        for (a, attr) in step.attributes.iter().enumerate() {
            assert_eq!(attr.name, TINY_ATTRIBUTES[a]);
            // The maps are linear in (i, j): their extremes lie at opposite corners.
            let corners = [
                tiny_value(s, a, 0.0, 0.0),
                tiny_value(s, a, 5.0, 4.0),
                tiny_value(s, a, 0.0, 4.0),
                tiny_value(s, a, 5.0, 0.0),
            ];
            let lo = corners.iter().cloned().fold(f64::INFINITY, f64::min);
            let hi = corners.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
            assert!((attr.min.unwrap() - lo).abs() < 1e-6, "{attr:?}");
            assert!((attr.max.unwrap() - hi).abs() < 1e-6, "{attr:?}");
            assert_eq!(attr.null_fraction, Some(0.0));
        }
    }
    let w = report.wells.as_ref().unwrap();
    assert_eq!(
        (w.rows, w.wells, w.usable_rows, w.usable_wells),
        (16, 8, 16, 8)
    );
    assert_eq!(report.targets[0].name, "dSw");
    assert_eq!(report.targets[0].count, 16);
    assert_eq!(report.targets[1].count, 15, "one dP cell is empty");
    let dsw: Vec<f64> = (0..TINY_WELLS)
        .flat_map(|w| (0..2).map(move |s| tiny_dsw(w, s)))
        .collect();
    let lo = dsw.iter().cloned().fold(f64::INFINITY, f64::min);
    assert!((report.targets[0].min.unwrap() - lo).abs() < 1e-12);
    let text = report.to_string();
    assert!(text.contains("grid: 6 x 5 nodes"), "{text}");
    assert!(
        text.contains("step m2 (2019-06-01 -> 2023-06-01): 8 well row(s), 8 usable"),
        "{text}"
    );
    assert!(text.contains("OK: the project can be run"), "{text}");
}

#[test]
fn null_fraction_and_warnings_are_reported() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    // Null three of the 30 nodes of m2/time_shift (XYZ line k + 1 holds node k - 1): nodes (0, 0),
    // (0, 4) and (5, 4). Only well W0's m2 point (fi 0.6, fj 0.4: cell (0, 0)) touches one of them.
    let path = dir.path().join("maps/m2/time_shift.xyz");
    let text = std::fs::read_to_string(&path).unwrap();
    let lines: Vec<String> = text
        .lines()
        .enumerate()
        .map(|(k, l)| {
            if [0, 24, 29].contains(&k) {
                let f: Vec<&str> = l.split_whitespace().collect();
                format!("{} {} -999.25", f[0], f[1])
            } else {
                l.to_string()
            }
        })
        .collect();
    std::fs::write(&path, lines.join("\n")).unwrap();
    let report = check_project(&manifest);
    assert!(report.runnable, "{report}");
    let attr = &report.steps[1].attributes[1];
    assert!(
        (attr.null_fraction.unwrap() - 0.1).abs() < 1e-12,
        "{attr:?}"
    );
    assert_eq!(report.steps[1].usable_rows, TINY_WELLS - 1);
    let warnings: Vec<&str> = report
        .problems
        .iter()
        .filter(|p| p.severity == Severity::Warning)
        .map(|p| p.message.as_str())
        .collect();
    assert_eq!(warnings.len(), 1, "{warnings:?}");
    assert!(
        warnings[0].contains("well 'W0' step 'm2'"),
        "{}",
        warnings[0]
    );
    assert!(warnings[0].contains("wells.csv line 3"), "{}", warnings[0]);
}

#[test]
fn smoothing_targets_without_widths_are_a_warning_not_an_error() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let text = std::fs::read_to_string(&manifest).unwrap();
    let warned = |extra: &str| -> Vec<String> {
        std::fs::write(&manifest, format!("{text}\n[smoothing]\n{extra}\n")).unwrap();
        let report = check_project(&manifest);
        assert!(report.runnable, "{report}");
        report
            .problems
            .iter()
            .filter(|p| p.severity == Severity::Warning && p.message.contains("smoothing"))
            .map(|p| p.message.clone())
            .collect()
    };
    let off = warned("targets = [\"dSw\"]");
    assert_eq!(off.len(), 1, "{off:?}");
    assert!(off[0].contains("smoothing.targets") && off[0].contains("widths are off"));
    assert!(warned("targets = [\"dSw\"]\nwidths = \"auto\"").is_empty());
}

#[test]
fn binary_prints_json_and_exits_zero() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let out = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .args(["check", manifest.to_str().unwrap(), "--json"])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(json["runnable"], true);
    assert_eq!(json["grid"]["nx"], 6);
    assert_eq!(json["steps"][0]["attributes"][1]["name"], "time_shift");
    assert_eq!(json["targets"][1]["count"], 15);
    // The text form too.
    let out = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .args(["check", manifest.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&out.stdout).contains("wells:"));
}

#[test]
fn outputs_may_not_overwrite_inputs() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let project = tidemark::project::Project::load(&manifest).unwrap();
    let inputs = project.input_paths();
    assert_eq!(inputs.len(), 1 + 4 + 1, "manifest, 4 maps, wells");
    let sneaky = dir.path().join("maps/../maps/m1/near_amp.tif");
    let err = tidemark::io::atomic::ensure_not_input(&sneaky, &inputs).unwrap_err();
    assert!(
        err.to_string().contains("refusing to write over an input"),
        "{err}"
    );
    assert!(
        tidemark::io::atomic::ensure_not_input(&dir.path().join("out/p50.tif"), &inputs).is_ok()
    );
}

/// Replaces 1-based line `n` of `dir/wells.csv` by `f(line)`.
fn edit_well_line(dir: &std::path::Path, n: usize, f: impl Fn(&str) -> String) {
    let path = dir.join("wells.csv");
    let text = std::fs::read_to_string(&path).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    lines[n - 1] = f(&lines[n - 1]);
    std::fs::write(&path, lines.join("\n") + "\n").unwrap();
}

#[test]
fn repeated_problems_become_one_line_with_a_count() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    // Every map a GeoTIFF with another EPSG code: four files, one problem.
    let g = tidemark::grid::Grid {
        epsg: Some(32632),
        ..tiny_grid()
    };
    for (s, step) in TINY_STEPS.iter().enumerate() {
        for (a, attr) in TINY_ATTRIBUTES.iter().enumerate() {
            let rel = format!("maps/{step}/{attr}.tif");
            tidemark::io::geotiff::write(&dir.path().join(&rel), &g, &tiny_map(s, a), None)
                .unwrap();
        }
    }
    let text = std::fs::read_to_string(&manifest)
        .unwrap()
        .replace("time_shift.xyz", "time_shift.tif");
    std::fs::write(&manifest, text).unwrap();
    // Five rows naming a step the manifest lacks: one problem.
    for n in 2..=6 {
        edit_well_line(dir.path(), n, |l| {
            l.replace(",m1,", ",m9,").replace(",m2,", ",m9,")
        });
    }
    let report = check_project(&manifest);
    let errors: Vec<&tidemark::check::Problem> = report
        .problems
        .iter()
        .filter(|p| p.severity == Severity::Error)
        .collect();
    assert_eq!(errors.len(), 2, "{report}");
    assert!(
        errors[0]
            .message
            .contains("EPSG:32632, expected EPSG:32631 (4 files: "),
        "{report}"
    );
    assert!(errors[0].message.ends_with(" and 1 more)"), "{report}");
    assert_eq!(errors[0].count, 4);
    assert!(
        errors[1]
            .message
            .contains("wells.csv, column 'step': step 'm9' is not in the manifest"),
        "{report}"
    );
    assert!(
        errors[1].message.contains("(5 lines: 2, 3, 4 and 2 more)"),
        "{report}"
    );
}

#[test]
fn swapped_coordinates_get_a_hint() {
    let dir = tempfile::tempdir().unwrap();
    // A square grid around the diagonal, so that (y, x) of a well lies inside when (x, y) does.
    let manifest = tiny_project(dir.path());
    edit_well_line(dir.path(), 1, |l| l.replace("well,x,y,", "well,y,x,"));
    // With the columns swapped every point lies outside the tiny grid (x 1000-1050,
    // y 2000-2040), and swapped back it lies inside.
    let report = check_project(&manifest);
    assert!(!report.runnable);
    let text = report.to_string();
    assert!(
        text.contains("16 well row(s) outside the grid would lie inside it with x and y swapped"),
        "{text}"
    );
    // The sixteen rows left out are one grouped warning.
    assert!(
        text.contains("well rows left out of training: point outside the grid (inside with x and y swapped) (16 rows: well 'W0' step 'm1'"),
        "{text}"
    );
}

#[test]
fn a_value_far_from_the_other_wells_is_flagged_with_its_line() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    // Well W3 step m2 is line 2 + 2 * 3 + 1 = 9; its dSw 0.15 becomes 0.9, as if percent had
    // been meant (0.9 % = 0.009) among fractions. By hand (Iglewicz & Hoaglin 1993 modified
    // z-score): the m2 values 0, 0.05, 0.1, 0.9, 0.2, 0.25, 0.3, 0.35 have median 0.225 and
    // median absolute deviation 0.125, so z = 0.6745 * 0.675 / 0.125 = 3.64 > 3.5, and the next
    // value lies 0.225 from the median, 3 times closer.
    edit_well_line(dir.path(), 9, |l| {
        let mut f: Vec<&str> = l.split(',').collect();
        assert_eq!((f[0], f[3]), ("W3", "m2"));
        assert!((f[4].parse::<f64>().unwrap() - 0.15).abs() < 1e-12);
        f[4] = "0.9";
        f.join(",")
    });
    let report = check_project(&manifest);
    assert!(report.runnable, "a warning only: {report}");
    let flagged: Vec<&str> = report
        .problems
        .iter()
        .filter(|p| p.message.contains("far outside the other wells' values"))
        .map(|p| p.message.as_str())
        .collect();
    assert_eq!(flagged.len(), 1, "{report}");
    assert!(
        flagged[0].contains("wells.csv, line 9, column 'dSw': 0.9 at well 'W3' step 'm2'"),
        "{}",
        flagged[0]
    );
    assert!(flagged[0].contains("modified z-score 4"), "{}", flagged[0]);
}

#[test]
fn modified_z_scores_match_the_formula_by_hand() {
    // Iglewicz & Hoaglin (1993): M = 0.6745 (x - median) / MAD. For 1, 2, 3, 4, 100: median 3,
    // absolute deviations 2, 1, 0, 1, 97, MAD 1, so M = 0.6745 * (-2, -1, 0, 1, 97).
    let z = tidemark::check::modified_z(&[1.0, 2.0, 3.0, 4.0, 100.0]).unwrap();
    let by_hand = [-1.349, -0.6745, 0.0, 0.6745, 65.4265];
    for (a, b) in z.iter().zip(by_hand) {
        assert!((a - b).abs() < 1e-12, "{z:?}");
    }
    assert_eq!(
        tidemark::check::lone_outliers(&[1.0, 2.0, 3.0, 4.0, 100.0]),
        vec![4]
    );
    // A tail of large values is not one value standing alone.
    assert!(tidemark::check::lone_outliers(&[1.0, 2.0, 3.0, 4.0, 90.0, 100.0]).is_empty());
    // Fewer than five values, or no spread: nothing is judged.
    assert!(tidemark::check::lone_outliers(&[1.0, 2.0, 3.0, 100.0]).is_empty());
    assert!(tidemark::check::modified_z(&[2.0, 2.0, 2.0, 5.0]).is_none());
}

#[test]
fn a_manifest_error_says_what_was_not_checked() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    // A syntax error, and a broken map that therefore goes unchecked.
    let text = std::fs::read_to_string(&manifest)
        .unwrap()
        .replace("nx = 6", "nx = = 6");
    std::fs::write(&manifest, text).unwrap();
    std::fs::remove_file(dir.path().join("maps/m1/near_amp.tif")).unwrap();
    let report = check_project(&manifest);
    assert_eq!(report.problems.len(), 1, "{report}");
    let m = &report.problems[0].message;
    assert!(m.contains("project.toml, line 9"), "{m}");
    assert!(m.contains("nothing else was checked"), "{m}");
}
