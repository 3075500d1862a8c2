//! What a run writes and how: `run` refuses what `check` refuses before writing anything, a
//! results folder is locked while a run writes it, an interrupted or refused run never leaves a
//! `run.json` that does not describe every file beside it, and `targets.csv` is quoted CSV.

use super::fixtures::*;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Command;
use tidemark::check::check_project;
use tidemark::decide::{Target, TargetsTable, to_csv};
use tidemark::pipeline::outputs::{Formats, LOCK_FILE, RUNNING_FILE, Writer};
use tidemark::pipeline::run::{RunOptions, run};

/// Files under `dir` (relative, as `/`-separated strings), the lock file left out.
fn files(dir: &Path) -> BTreeSet<String> {
    list_files(dir)
        .into_iter()
        .map(|p| p.to_string_lossy().replace('\\', "/"))
        .filter(|p| p != LOCK_FILE)
        .collect()
}

/// Checks the promise of a results folder: when it holds `run.json`, that record lists every
/// other file in it and no `RUNNING` marker or temporary file remains.
fn assert_consistent(out: &Path, what: &str) {
    let present = files(out);
    let Ok(text) = std::fs::read_to_string(out.join("run.json")) else {
        return;
    };
    let record: serde_json::Value = serde_json::from_str(&text)
        .unwrap_or_else(|e| panic!("{what}: run.json is not whole JSON: {e}"));
    let listed: BTreeSet<String> = record["files"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_str().unwrap().to_string())
        .chain(["run.json".to_string()])
        .collect();
    assert_eq!(present, listed, "{what}: run.json against the folder");
}

fn fast_run(manifest: &Path, out: &Path) -> RunOptions {
    let mut opts = RunOptions::new(manifest, out);
    opts.pictures = false;
    opts.report = false;
    opts
}

#[test]
fn run_refuses_what_check_refuses_before_writing() {
    type Mutate = fn(&Path);
    let cases: [(&str, Mutate, &str); 3] = [
        (
            "all-null map",
            |d| {
                let g = tiny_grid();
                tidemark::io::xyz::write(
                    &d.join("maps/m2/time_shift.xyz"),
                    &g,
                    &vec![f64::NAN; g.len()],
                )
                .unwrap();
            },
            "every node is null (step 'm2', attribute 'time_shift')",
        ),
        (
            "folds above the wells",
            |d| {
                let p = d.join("project.toml");
                let t = std::fs::read_to_string(&p).unwrap();
                std::fs::write(&p, t.replace("folds = 4", "folds = 12")).unwrap();
            },
            "target 'dSw' is measured at 8 usable well(s)",
        ),
        (
            "no usable well row",
            |d| {
                let p = d.join("wells.csv");
                let t = std::fs::read_to_string(&p).unwrap();
                let moved: Vec<String> = t
                    .lines()
                    .enumerate()
                    .map(|(k, l)| {
                        if k == 0 {
                            return l.to_string();
                        }
                        let mut f: Vec<&str> = l.split(',').collect();
                        f[1] = "-5000";
                        f.join(",")
                    })
                    .collect();
                std::fs::write(&p, moved.join("\n") + "\n").unwrap();
            },
            "wells.csv: no well row is usable for training",
        ),
    ];
    for (name, mutate, expect) in cases {
        let dir = tempfile::tempdir().unwrap();
        let manifest = tiny_project(dir.path());
        mutate(dir.path());
        let report = check_project(&manifest);
        assert!(!report.runnable, "{name}: {report}");
        assert!(
            report.problems.iter().any(|p| p.message.contains(expect)),
            "{name}: {report}"
        );
        let out = dir.path().join("results");
        let e = match run(&fast_run(&manifest, &out)) {
            Ok(_) => panic!("{name}: run went ahead"),
            Err(e) => e.to_string(),
        };
        assert!(e.contains(expect), "{name}: {e}");
        assert!(e.contains("cannot be run"), "{name}: {e}");
        assert!(!out.exists(), "{name}: run wrote before refusing");
    }
}

#[test]
fn a_locked_folder_refuses_a_second_writer_until_the_first_finishes() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let mut first = Writer::new(&out, &[], Formats::default()).unwrap();
    first.bytes("a.txt", b"a").unwrap();
    let e = match Writer::new(&out, &[], Formats::default()) {
        Ok(_) => panic!("two writers in one folder"),
        Err(e) => e.to_string(),
    };
    assert!(
        e.contains("another tidemark run is writing into this folder"),
        "{e}"
    );
    assert!(
        e.contains(&format!("process {}", std::process::id())),
        "{e}"
    );
    // The refused writer removed nothing and wrote nothing.
    assert_eq!(
        files(&out),
        ["a.txt", RUNNING_FILE]
            .iter()
            .map(|s| s.to_string())
            .collect()
    );
    // The binary is refused too, without touching the folder.
    let project = dir.path().join("project");
    std::fs::create_dir_all(&project).unwrap();
    let manifest = tiny_project(&project);
    let o = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .args(["run", manifest.to_str().unwrap(), "--quiet", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_ne!(o.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains("another tidemark run"), "{stderr}");
    assert_eq!(files(&out).len(), 2);
    first
        .finish(&serde_json::json!({"files": ["a.txt"]}))
        .unwrap();
    assert_consistent(&out, "after finish");
    assert!(!out.join(RUNNING_FILE).exists());
    assert!(
        !out.join(LOCK_FILE).exists(),
        "the lock file goes at finish"
    );
    let again = Writer::new(&out, &[], Formats::default()).unwrap();
    drop(again);
}

#[test]
fn a_new_writer_clears_what_an_earlier_run_leaves_and_keeps_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    std::fs::create_dir_all(out.join("maps/m1")).unwrap();
    // An earlier complete run wrote old.txt and maps/m1/a.tif; a killed one left a temporary
    // file; the user keeps notes.txt; a forged record names a file outside the folder.
    for f in [
        "old.txt",
        "maps/m1/a.tif",
        "maps/m1/.a.tif.tmp-999-3",
        "notes.txt",
    ] {
        std::fs::write(out.join(f), b"x").unwrap();
    }
    std::fs::write(dir.path().join("outside.txt"), b"keep").unwrap();
    std::fs::write(
        out.join("run.json"),
        r#"{"files": ["old.txt", "maps/m1/a.tif", "../outside.txt", "/etc/hostname"]}"#,
    )
    .unwrap();
    let mut w = Writer::new(&out, &[], Formats::default()).unwrap();
    // The old record and the temporary file are gone before anything new is written.
    let now = files(&out);
    assert!(!now.contains("run.json"), "{now:?}");
    assert!(!now.contains("maps/m1/.a.tif.tmp-999-3"), "{now:?}");
    assert!(now.contains(RUNNING_FILE));
    w.bytes("maps/m1/a.tif", b"new").unwrap();
    let record = serde_json::json!({ "files": w.written.clone() });
    // A run killed here leaves the marker, which names both runs' files.
    let marker = std::fs::read_to_string(out.join(RUNNING_FILE)).unwrap();
    assert!(marker.lines().any(|l| l == "old.txt"), "{marker}");
    assert!(marker.lines().any(|l| l == "maps/m1/a.tif"), "{marker}");
    w.finish(&record).unwrap();
    assert_eq!(
        files(&out),
        ["maps/m1/a.tif", "notes.txt", "run.json"]
            .iter()
            .map(|s| s.to_string())
            .collect(),
        "old.txt (earlier run, not rewritten) is removed; notes.txt is the user's"
    );
    assert_eq!(
        std::fs::read(dir.path().join("outside.txt")).unwrap(),
        b"keep"
    );
}

#[test]
fn killed_runs_never_leave_a_run_json_that_does_not_describe_the_folder() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let out: PathBuf = dir.path().join("results");
    let bin = env!("CARGO_BIN_EXE_tidemark");
    let start = || {
        Command::new(bin)
            .args([
                "run",
                manifest.to_str().unwrap(),
                "--quiet",
                "--no-pictures",
            ])
            .arg("--out")
            .arg(&out)
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap()
    };
    // A complete run, then reruns killed at several points, each followed by the check.
    let status = start().wait().unwrap();
    assert!(status.success());
    assert_consistent(&out, "complete run");
    for ms in [5u64, 40, 150, 400] {
        let mut child = start();
        std::thread::sleep(std::time::Duration::from_millis(ms));
        let _ = child.kill();
        let _ = child.wait();
        assert_consistent(&out, &format!("killed after {ms} ms"));
    }
    // A rerun after the kills cleans up: no marker, no temporary file, a complete record.
    assert!(start().wait().unwrap().success());
    assert!(out.join("run.json").is_file());
    assert!(!out.join(RUNNING_FILE).exists());
    assert!(
        !files(&out).iter().any(|f| f.contains(".tmp-")),
        "{:?}",
        files(&out)
    );
    assert_consistent(&out, "rerun after kills");
}

#[test]
fn targets_csv_quotes_names_and_says_what_it_holds() {
    let target = |rank: usize, well: &str| Target {
        rank,
        x: 1000.0 + rank as f64,
        y: 2000.0,
        chance: 0.75,
        risked_volume: 1234.5,
        nearest_well: well.to_string(),
        nearest_distance: 512.25,
        inside: true,
        drainage_inside_fraction: 0.5,
    };
    let targets = vec![
        target(1, "SKB,P14"),
        target(2, "line\nbreak"),
        target(3, "say \"hi\""),
    ];
    let table = TargetsTable {
        step: "m4".into(),
        threshold_label: "swept".into(),
        criterion: "dSw not above 0.1 (not swept)".into(),
        volume_unit: "m3".into(),
        crs: "EPSG:32631".into(),
    };
    let text = to_csv(&targets, &table);
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = rdr.headers().unwrap().iter().map(str::to_string).collect();
    assert_eq!(header.len(), 13);
    assert_eq!(
        header[..7],
        [
            "rank",
            "step",
            "x",
            "y",
            "p_not_swept",
            "risked_volume",
            "volume_unit"
        ]
    );
    let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    assert_eq!(rows.len(), 3);
    for (row, t) in rows.iter().zip(&targets) {
        assert_eq!(row.len(), 13, "{row:?}");
        assert_eq!(&row[7], t.nearest_well);
        assert_eq!(&row[1], "m4");
        assert_eq!(&row[6], "m3");
        assert_eq!(&row[11], "dSw not above 0.1 (not swept)");
        assert_eq!(&row[12], "EPSG:32631");
    }
    let sidecar = table.sidecar(&targets);
    assert_eq!(sidecar["crs"], "EPSG:32631");
    assert!(
        sidecar["columns"]["p_not_swept"]
            .as_str()
            .unwrap()
            .contains("dSw not above 0.1")
    );
}
