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
