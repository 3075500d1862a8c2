//! A run's warnings reach stderr even with `--quiet`, and each names its target, well and step.

use super::end_to_end::make_project;
use std::path::PathBuf;
use std::process::Command;

/// Wells whose dSg stays measured: fewer than the 9 a finite 80 % band needs
/// (`ceil((n + 1)(1 - a/2)) <= n`), so the calibration of dSg warns.
const DSG_WELLS: usize = 6;

#[test]
fn quiet_runs_print_every_warning_naming_target_well_and_step() {
    let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("pipeline-warnings");
    let project = make_project(&root.join("field"), 23);
    // Keep dSg at a few wells only, and add a row at a point outside the grid.
    let wells_csv = root.join("field/wells.csv");
    let text = std::fs::read_to_string(&wells_csv).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    assert_eq!(header, "well,x,y,step,kind,dP,dSw,dSg");
    let mut kept: Vec<String> = Vec::new();
    let mut out = vec![header.to_string()];
    let mut first_step = String::new();
    for line in lines {
        let mut f: Vec<String> = line.split(',').map(str::to_string).collect();
        if first_step.is_empty() {
            first_step = f[3].clone();
        }
        if !kept.contains(&f[0]) && kept.len() < DSG_WELLS {
            kept.push(f[0].clone());
        }
        if !kept.contains(&f[0]) {
            f[7].clear();
        }
        out.push(f.join(","));
    }
    out.push(format!(
        "ZZ-FAR,-9000000,-9000000,{first_step},,1.0,0.1,0.0"
    ));
    std::fs::write(&wells_csv, out.join("\n") + "\n").unwrap();

    let results = root.join("results");
    let run = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .arg("run")
        .arg(&project)
        .arg("--out")
        .arg(&results)
        .args(["--quiet", "--no-pictures", "--no-xyz"])
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(run.status.success(), "{stderr}");
    assert!(
        run.stdout.is_empty(),
        "quiet prints nothing on stdout: {}",
        String::from_utf8_lossy(&run.stdout)
    );
    // Quiet: no stage lines, no table; only warnings.
    let printed: Vec<&str> = stderr
        .lines()
        .map(|l| {
            l.strip_prefix("warning: ")
                .unwrap_or_else(|| panic!("not a warning line: {l}"))
        })
        .collect();
    let far = printed
        .iter()
        .find(|w| w.contains("ZZ-FAR"))
        .unwrap_or_else(|| panic!("no warning about the far row in {printed:?}"));
    assert!(
        far.starts_with(&format!("extraction, well ZZ-FAR, step {first_step}: ")),
        "{far}"
    );
    assert!(far.contains("outside the grid"), "{far}");
    let dsg = printed
        .iter()
        .find(|w| w.contains(&format!("only {DSG_WELLS} wells")))
        .unwrap_or_else(|| panic!("no too-few-wells warning in {printed:?}"));
    assert!(
        dsg.starts_with("calibration, target dSg, all steps: "),
        "{dsg}"
    );
    // Every warning names where it arose: a target, or a well and a step.
    for w in &printed {
        let named = w.contains(", target ") || (w.contains(", well ") && w.contains(", step "));
        assert!(named, "a warning without its target or step: {w}");
    }
    // run.json holds the same warnings, in the same order.
    let record: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(results.join("run.json")).unwrap()).unwrap();
    let recorded: Vec<&str> = record["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w.as_str().unwrap())
        .collect();
    assert_eq!(recorded, printed);
}
