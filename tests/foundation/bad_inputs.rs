//! A table of bad inputs: each gives a problem naming the file and the line or manifest key, never a
//! panic, and leaves no file behind. Checked through the library and, for some, the built binary.

use super::fixtures::*;
use std::path::Path;
use std::process::Command;
use tidemark::check::{Severity, check_project};
use tidemark::io::{geotiff, xyz};

/// Replaces `from` by `to` in `dir/rel` (which must contain it).
fn edit(dir: &Path, rel: &str, from: &str, to: &str) {
    let path = dir.join(rel);
    let text = std::fs::read_to_string(&path).unwrap();
    assert!(text.contains(from), "{rel} lacks {from:?}");
    std::fs::write(&path, text.replacen(from, to, 1)).unwrap();
}

/// Fields of 1-based line `n` of a text file (split on whitespace and commas).
fn line_fields(dir: &Path, rel: &str, n: usize) -> Vec<String> {
    let text = std::fs::read_to_string(dir.join(rel)).unwrap();
    text.lines()
        .nth(n - 1)
        .unwrap()
        .split([',', ' '])
        .map(str::to_string)
        .collect()
}

/// Replaces 1-based line `n` of a text file.
fn set_line(dir: &Path, rel: &str, n: usize, line: &str) {
    let path = dir.join(rel);
    let text = std::fs::read_to_string(&path).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    lines[n - 1] = line.to_string();
    std::fs::write(&path, lines.join("\n") + "\n").unwrap();
}

/// Appends `text` to `dir/rel`.
fn append(dir: &Path, rel: &str, text: &str) {
    let path = dir.join(rel);
    let mut t = std::fs::read_to_string(&path).unwrap();
    t.push_str(text);
    std::fs::write(&path, t).unwrap();
}

/// Sets the value count (or, for a one-value SHORT/LONG entry, the value) of IFD entries of a
/// little-endian classic TIFF written by tidemark: `(tag, n)` pairs. Sizes and counts are the
/// header fields a hostile file would inflate.
fn patch_tiff(dir: &Path, rel: &str, patches: &[(u16, u32)]) {
    let path = dir.join(rel);
    let mut b = std::fs::read(&path).unwrap();
    assert_eq!(&b[..4], b"II*\0", "little-endian classic TIFF");
    let ifd = u32::from_le_bytes(b[4..8].try_into().unwrap()) as usize;
    let n = u16::from_le_bytes(b[ifd..ifd + 2].try_into().unwrap()) as usize;
    for &(tag, value) in patches {
        let at = (0..n)
            .map(|k| ifd + 2 + 12 * k)
            .find(|&e| u16::from_le_bytes(b[e..e + 2].try_into().unwrap()) == tag)
            .unwrap_or_else(|| panic!("tag {tag} not in {rel}"));
        let typ = u16::from_le_bytes(b[at + 2..at + 4].try_into().unwrap());
        let count = u32::from_le_bytes(b[at + 4..at + 8].try_into().unwrap());
        if count == 1 && typ == 3 {
            // A SHORT value sits in the entry itself; make it a LONG to hold 100000.
            b[at + 2..at + 4].copy_from_slice(&4u16.to_le_bytes());
            b[at + 8..at + 12].copy_from_slice(&value.to_le_bytes());
        } else if count == 1 && typ == 4 {
            b[at + 8..at + 12].copy_from_slice(&value.to_le_bytes());
        } else {
            b[at + 4..at + 8].copy_from_slice(&value.to_le_bytes());
        }
    }
    std::fs::write(&path, b).unwrap();
}

const TS: &str = "maps/m1/time_shift.xyz";
const NA: &str = "maps/m2/near_amp.tif";
const W: &str = "wells.csv";
const P: &str = "project.toml";

struct Case {
    name: &'static str,
    mutate: fn(&Path),
    /// Every one of these must appear in one problem message.
    expect: &'static [&'static str],
    /// A warning that leaves the project runnable (rows left out), not an error.
    warning_only: bool,
}

const fn err(name: &'static str, mutate: fn(&Path), expect: &'static [&'static str]) -> Case {
    Case {
        name,
        mutate,
        expect,
        warning_only: false,
    }
}

fn cases() -> Vec<Case> {
    vec![
        err(
            "malformed XYZ value",
            |d| {
                let f = line_fields(d, TS, 5);
                set_line(d, TS, 5, &format!("{} {} abc", f[0], f[1]));
            },
            &[
                "time_shift.xyz, line 5",
                "value 'abc' is not a finite number",
            ],
        ),
        err(
            "XYZ line with two fields",
            |d| {
                let f = line_fields(d, TS, 7);
                set_line(d, TS, 7, &format!("{} {}", f[0], f[1]));
            },
            &[
                "time_shift.xyz, line 7",
                "expected 3 fields (x y value), found 2",
            ],
        ),
        err(
            "off-grid XYZ point",
            |d| {
                let f = line_fields(d, TS, 4);
                let x: f64 = f[0].parse().unwrap();
                set_line(d, TS, 4, &format!("{} {} {}", x + 3.0, f[1], f[2]));
            },
            &[
                "time_shift.xyz",
                "1 point(s) lie off the grid nodes",
                "line 4 (",
            ],
        ),
        err(
            "duplicate XYZ node",
            |d| {
                let f = line_fields(d, TS, 5);
                set_line(d, TS, 6, &format!("{} {} 1.0", f[0], f[1]));
            },
            &["time_shift.xyz, line 6", "already given on line 5"],
        ),
        err(
            "entirely null map",
            |d| {
                let g = tiny_grid();
                xyz::write(&d.join(TS), &g, &vec![f64::NAN; g.len()]).unwrap();
            },
            &["time_shift.xyz", "every node is null", "step 'm1'"],
        ),
        err(
            "missing map file",
            |d| std::fs::remove_file(d.join(TS)).unwrap(),
            &["time_shift.xyz"],
        ),
        err(
            "GeoTIFF of another size",
            |d| {
                let mut g = tiny_grid();
                g.nx = 7;
                geotiff::write(&d.join(NA), &g, &vec![0.0; g.len()], None).unwrap();
            },
            &["near_amp.tif", "size 7 x 5 nodes, expected 6 x 5"],
        ),
        err(
            "GeoTIFF with a shifted origin",
            |d| {
                let mut g = tiny_grid();
                g.origin_x += 5.0;
                geotiff::write(&d.join(NA), &g, &vec![0.0; g.len()], None).unwrap();
            },
            &[
                "near_amp.tif",
                "origin (node 0,0) at (1005, 2000), expected (1000, 2000)",
            ],
        ),
        err(
            "GeoTIFF with another EPSG code",
            |d| {
                let mut g = tiny_grid();
                g.epsg = Some(32632);
                geotiff::write(&d.join(NA), &g, &vec![0.0; g.len()], None).unwrap();
            },
            &["near_amp.tif", "EPSG:32632, expected EPSG:32631"],
        ),
        err(
            "unreadable GeoTIFF",
            |d| std::fs::write(d.join(NA), b"II*\0garbage").unwrap(),
            &["near_amp.tif", "not a readable TIFF"],
        ),
        err(
            "attribute missing in one step",
            |d| {
                edit(d, P, "time_shift = \"maps/m2/time_shift.xyz\"\n", "");
            },
            &["project.toml", "step 'm2' has no attribute 'time_shift'"],
        ),
        err(
            "extra attribute in one step",
            |d| {
                edit(
                    d,
                    P,
                    "time_shift = \"maps/m2/time_shift.xyz\"\n",
                    "time_shift = \"maps/m2/time_shift.xyz\"\nfar_amp = \"maps/m2/far.xyz\"\n",
                );
            },
            &["project.toml", "step 'm2' has attribute 'far_amp'"],
        ),
        err(
            "unknown manifest key",
            |d| edit(d, P, "epsg = 32631", "epsg = 32631\ncolour = \"red\""),
            &["project.toml, line 12", "unknown field `colour`"],
        ),
        err(
            "outline of unsampled ground with two vertices",
            |d| {
                append(d, P, "\n[area]\nunsampled = [\"block.csv\"]\n");
                std::fs::write(
                    d.join("block.csv"),
                    "x,y,line\n0,0,north block\n50,0,north block\n0,0,north block\n",
                )
                .unwrap();
            },
            &[
                "block.csv, line 2",
                "outline 'north block' has 2 distinct vertices",
            ],
        ),
        err(
            "outline file missing",
            |d| append(d, P, "\n[area]\nunsampled = [\"nowhere.csv\"]\n"),
            &["nowhere.csv"],
        ),
        err(
            "unknown key in [area]",
            |d| append(d, P, "\n[area]\noutlines = [\"block.csv\"]\n"),
            &["project.toml, line", "unknown field `outlines`"],
        ),
        err(
            "TOML syntax error",
            |d| edit(d, P, "nx = 6", "nx = = 6"),
            &["project.toml, line 9"],
        ),
        err(
            "wrong value type",
            |d| edit(d, P, "nx = 6", "nx = \"six\""),
            &["project.toml, line 9", "invalid type"],
        ),
        err(
            "missing required key",
            |d| edit(d, P, "dy = 10.0\n", ""),
            &["project.toml", "missing field `dy`"],
        ),
        err(
            "negative spacing",
            |d| edit(d, P, "dx = 10.0", "dx = -10.0"),
            &[
                "project.toml",
                "grid.dx must be a finite number > 0, got -10",
            ],
        ),
        err(
            "too few nodes",
            |d| edit(d, P, "nx = 6", "nx = 1"),
            &["project.toml", "grid.nx must be >= 2, got 1"],
        ),
        err(
            "target bounds reversed",
            |d| edit(d, P, "min = -1.0\nmax = 1.0", "min = 1.0\nmax = -1.0"),
            &["project.toml", "target 'dSw': min (1) must be < max (-1)"],
        ),
        err(
            "duplicate step name",
            |d| edit(d, P, "name = \"m2\"", "name = \"m1\""),
            &["project.toml", "step.name = 'm1' is used twice"],
        ),
        err(
            "bad step name",
            |d| edit(d, P, "name = \"m1\"", "name = \"m 1\""),
            &["project.toml", "step[0].name = 'm 1'"],
        ),
        err(
            "threshold on an unknown target",
            |d| {
                edit(
                    d,
                    P,
                    "target = \"dSw\"\ndirection = \"above\"",
                    "target = \"dSq\"\ndirection = \"above\"",
                );
            },
            &[
                "project.toml",
                "threshold 'swept'.target = 'dSq' names no target",
            ],
        ),
        err(
            "threshold outside the target bounds",
            |d| edit(d, P, "value = -2.0", "value = -80.0"),
            &[
                "project.toml",
                "threshold 'depleted': value -80 lies outside",
            ],
        ),
        err(
            "mean extraction without a radius",
            |d| {
                let mut t = std::fs::read_to_string(d.join(P)).unwrap();
                t.push_str("\n[extract]\nmethod = \"mean\"\n");
                std::fs::write(d.join(P), t).unwrap();
            },
            &["project.toml", "extract.radius: required"],
        ),
        err(
            "wells CSV missing a column",
            |d| edit(d, W, "dSw,dP", "dSx,dP"),
            &["wells.csv, line 1, column 'dSw'", "missing column"],
        ),
        err(
            "wells CSV non-numeric value",
            |d| {
                let mut f = line_fields(d, W, 3);
                f[1] = "12a".into();
                set_line(d, W, 3, &f.join(","));
            },
            &[
                "wells.csv, line 3, column 'x'",
                "'12a' is not a finite number",
            ],
        ),
        err(
            "wells CSV unknown step",
            |d| {
                let mut f = line_fields(d, W, 4);
                f[3] = "m9".into();
                set_line(d, W, 4, &f.join(","));
            },
            &[
                "wells.csv, line 4, column 'step'",
                "step 'm9' is not in the manifest",
            ],
        ),
        err(
            "wells CSV value outside physical bounds",
            |d| {
                let mut f = line_fields(d, W, 2);
                f[4] = "1.5".into();
                set_line(d, W, 2, &f.join(","));
            },
            &[
                "wells.csv, line 2, column 'dSw'",
                "outside the physical bounds [-1, 1]",
            ],
        ),
        err(
            "wells CSV repeated well and step",
            |d| {
                let f = line_fields(d, W, 2);
                set_line(d, W, 6, &f.join(","));
            },
            &[
                "wells.csv, line 6",
                "well 'W0' step 'm1' already given on line 2",
            ],
        ),
        err(
            "wells CSV ragged row",
            |d| {
                let f = line_fields(d, W, 3);
                set_line(d, W, 3, &f[..5].join(","));
            },
            &[
                "wells.csv, line 3",
                "expected 7 fields like the header, found 5",
            ],
        ),
        err(
            "empty wells file",
            |d| std::fs::write(d.join(W), "").unwrap(),
            &["wells.csv", "empty file"],
        ),
        err(
            "wells file with only a header",
            |d| std::fs::write(d.join(W), "well,x,y,step,dSw,dP,weight\n").unwrap(),
            &["wells.csv", "no well rows"],
        ),
        err(
            "too few wells for the folds",
            |d| edit(d, P, "folds = 4", "folds = 9"),
            &[
                "target 'dSw' is measured at 8 usable well(s)",
                "needs at least 9",
            ],
        ),
        // Sizes that drive memory or time: refused in the manifest, naming the key and limit.
        err(
            "grid of 4e9 x 5 nodes",
            |d| edit(d, P, "nx = 6", "nx = 4000000000"),
            &[
                "project.toml",
                "grid.nx * grid.ny",
                "at most 50000000 nodes",
            ],
        ),
        err(
            "grid of i64::MAX x 5 nodes",
            |d| edit(d, P, "nx = 6", "nx = 9223372036854775807"),
            &[
                "project.toml",
                "grid.nx * grid.ny",
                "at most 50000000 nodes",
            ],
        ),
        err(
            "grid whose node count wraps to zero",
            |d| {
                edit(d, P, "nx = 6", "nx = 4294967296");
                edit(d, P, "ny = 5", "ny = 4294967296");
            },
            &[
                "project.toml",
                "4294967296 * 4294967296 = 18446744073709551616",
                "at most 50000000 nodes",
            ],
        ),
        err(
            "i64::MAX trees",
            |d| append(d, P, "\n[model]\ntrees = 9223372036854775807\n"),
            &["project.toml", "model.trees", "at most 10000"],
        ),
        err(
            "a billion trees",
            |d| append(d, P, "\n[model]\ntrees = 1000000000\n"),
            &["project.toml", "model.trees = 1000000000", "at most 10000"],
        ),
        err(
            "i64::MAX boosting rounds",
            |d| append(d, P, "\n[model]\nboost_rounds = 9223372036854775807\n"),
            &["project.toml", "model.boost_rounds", "at most 10000"],
        ),
        err(
            "i64::MAX Mondrian bins",
            |d| {
                edit(
                    d,
                    P,
                    "folds = 4",
                    "folds = 4\nmax_bins = 9223372036854775807",
                )
            },
            &["project.toml", "calibration.max_bins", "at most 100"],
        ),
        err(
            "i64::MAX folds",
            |d| edit(d, P, "folds = 4", "folds = 9223372036854775807"),
            &["project.toml", "calibration.folds", "at most 1000"],
        ),
        err(
            "drainage radius of 1e308",
            |d| {
                append(
                    d,
                    P,
                    "\n[infill]\nthreshold = \"swept\"\ndrainage_radius = 1e308\n",
                )
            },
            &[
                "project.toml",
                "infill.drainage_radius = 1e308",
                "at most 1000 node spacings",
            ],
        ),
        err(
            "learning-curve repeats over the limit",
            |d| append(d, P, "\n[report]\nlearning_curve_repeats = 1000000\n"),
            &[
                "project.toml",
                "report.learning_curve_repeats",
                "at most 100",
            ],
        ),
        err(
            "step name of 300 characters",
            |d| {
                edit(
                    d,
                    P,
                    "name = \"m2\"",
                    &format!("name = \"{}\"", "m".repeat(300)),
                )
            },
            &["project.toml", "is 300 bytes long", "at most 64 bytes"],
        ),
        // GeoTIFF headers are not trusted with memory.
        err(
            "GeoTIFF declaring 2^30 tie-point values",
            |d| patch_tiff(d, NA, &[(33922, 1 << 30)]),
            &["near_amp.tif", "ModelTiepointTag", "declares more data"],
        ),
        err(
            "GeoTIFF declaring 100000 x 100000 pixels",
            |d| patch_tiff(d, NA, &[(256, 100_000), (257, 100_000), (278, 100_000)]),
            &["near_amp.tif", "size 100000 x 100000 nodes, expected 6 x 5"],
        ),
        err(
            "XYZ token of 60 kB",
            |d| {
                let f = line_fields(d, TS, 5);
                set_line(
                    d,
                    TS,
                    5,
                    &format!("{} {} {}", f[0], f[1], "9".repeat(60_000) + "x"),
                );
            },
            &[
                "time_shift.xyz, line 5",
                "value '99999",
                "... (60001 bytes)",
            ],
        ),
        err(
            "XYZ line of 100 kB",
            |d| {
                let f = line_fields(d, TS, 5);
                set_line(
                    d,
                    TS,
                    5,
                    &format!("{} {} 1 # {}", f[0], f[1], "z".repeat(100_000)),
                );
            },
            &["time_shift.xyz, line 5", "longer than 65536 bytes"],
        ),
        err(
            "XYZ map far larger than its grid needs",
            |d| append(d, TS, &"# padding\n".repeat(200_000)),
            &["time_shift.xyz", "more than", "needs far less"],
        ),
        err(
            "wells CSV cell of 1 MB",
            |d| {
                let mut f = line_fields(d, W, 3);
                f[1] = "7".repeat(500_000) + "?";
                set_line(d, W, 3, &f.join(","));
            },
            &["wells.csv, line 3, column 'x'", "... (500001 bytes)"],
        ),
        err(
            "map that is a device of endless zeros",
            |d| edit(d, P, "maps/m1/time_shift.xyz", "/dev/zero"),
            &["/dev/zero", "line 1 is longer than 65536 bytes"],
        ),
        err(
            "map that is a folder",
            |d| edit(d, P, "maps/m1/time_shift.xyz", "maps"),
            &["maps", "is a folder"],
        ),
        err(
            "no usable well row",
            |d| {
                let text = std::fs::read_to_string(d.join(W)).unwrap();
                let mut lines = text.lines();
                let mut out = format!("{}\n", lines.next().unwrap());
                for l in lines {
                    let mut f: Vec<&str> = l.split(',').collect();
                    f[1] = "9000";
                    out.push_str(&f.join(","));
                    out.push('\n');
                }
                std::fs::write(d.join(W), out).unwrap();
            },
            &["wells.csv", "no well row is usable for training"],
        ),
        err(
            "three wells for four folds",
            |d| {
                let text = std::fs::read_to_string(d.join(W)).unwrap();
                let keep: Vec<&str> = text
                    .lines()
                    .filter(|l| {
                        ["well", "W0,", "W1,", "W2,"]
                            .iter()
                            .any(|p| l.starts_with(p))
                    })
                    .collect();
                std::fs::write(d.join(W), keep.join("\n") + "\n").unwrap();
            },
            &[
                "target 'dSw' is measured at 3 usable well(s)",
                "needs at least 4",
            ],
        ),
        Case {
            name: "well outside the grid",
            mutate: |d| {
                let mut f = line_fields(d, W, 4);
                f[1] = "500".into();
                set_line(d, W, 4, &f.join(","));
            },
            expect: &[
                "well 'W1' step 'm1'",
                "outside the grid",
                "wells.csv line 4",
            ],
            warning_only: true,
        },
    ]
}

#[test]
fn bad_inputs_table() {
    let cases = cases();
    assert!(cases.len() >= 50);
    for case in &cases {
        let dir = tempfile::tempdir().unwrap();
        let manifest = tiny_project(dir.path());
        (case.mutate)(dir.path());
        let before = list_files(dir.path());
        let report = std::panic::catch_unwind(|| check_project(&manifest))
            .unwrap_or_else(|_| panic!("case '{}': check panicked", case.name));
        assert_eq!(
            report.runnable, case.warning_only,
            "case '{}': runnable = {}\n{report}",
            case.name, report.runnable
        );
        let severity = if case.warning_only {
            Severity::Warning
        } else {
            Severity::Error
        };
        let hit = report
            .problems
            .iter()
            .any(|p| p.severity == severity && case.expect.iter().all(|e| p.message.contains(e)));
        assert!(
            hit,
            "case '{}': no {severity:?} containing {:?}\n{report}",
            case.name, case.expect
        );
        // No message echoes a huge token (each quotes at most 80 characters of one).
        for p in &report.problems {
            assert!(
                p.message.len() < 1000,
                "case '{}': a message of {} bytes",
                case.name,
                p.message.len()
            );
        }
        assert_eq!(
            list_files(dir.path()),
            before,
            "case '{}': files changed",
            case.name
        );
    }
}

#[test]
fn bad_inputs_through_the_binary() {
    let wanted = [
        "malformed XYZ value",
        "unknown manifest key",
        "negative spacing",
        "unreadable GeoTIFF",
        "wells CSV missing a column",
        "wells CSV unknown step",
        "outline of unsampled ground with two vertices",
    ];
    for case in cases().iter().filter(|c| wanted.contains(&c.name)) {
        let dir = tempfile::tempdir().unwrap();
        let manifest = tiny_project(dir.path());
        (case.mutate)(dir.path());
        let before = list_files(dir.path());
        for json in [false, true] {
            let mut cmd = Command::new(env!("CARGO_BIN_EXE_tidemark"));
            cmd.args(["check", manifest.to_str().unwrap()]);
            if json {
                cmd.arg("--json");
            }
            let out = cmd.output().unwrap();
            let stdout = String::from_utf8_lossy(&out.stdout);
            let stderr = String::from_utf8_lossy(&out.stderr);
            assert_eq!(
                out.status.code(),
                Some(1),
                "case '{}': {stdout}{stderr}",
                case.name
            );
            assert!(
                !stderr.contains("panicked"),
                "case '{}': {stderr}",
                case.name
            );
            if json {
                let v: serde_json::Value = serde_json::from_str(&stdout).expect("JSON report");
                assert_eq!(v["runnable"], false);
                let msgs = v["problems"].to_string();
                assert!(msgs.contains("\"severity\":\"error\""), "{msgs}");
            } else {
                for e in case.expect {
                    assert!(
                        stdout.contains(e),
                        "case '{}': missing {e:?} in\n{stdout}",
                        case.name
                    );
                }
                assert!(stdout.contains("NOT RUNNABLE"), "{stdout}");
            }
        }
        assert_eq!(
            list_files(dir.path()),
            before,
            "case '{}': files changed",
            case.name
        );
    }
}

#[test]
fn missing_manifest_is_reported_not_panicked() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nothing.toml");
    let report = check_project(&path);
    assert!(!report.runnable);
    assert!(
        report.problems[0].message.contains("nothing.toml"),
        "{report}"
    );
    let out = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .args(["check", path.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
}

#[test]
fn every_bad_wells_row_is_listed() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    for (n, col, bad) in [(3, 1, "x?"), (5, 3, "m0"), (9, 4, "-7")] {
        let mut f = line_fields(dir.path(), W, n);
        f[col] = bad.into();
        set_line(dir.path(), W, n, &f.join(","));
    }
    let report = check_project(&manifest);
    assert!(!report.runnable);
    let errors: Vec<&str> = report
        .problems
        .iter()
        .filter(|p| p.severity == Severity::Error)
        .map(|p| p.message.as_str())
        .collect();
    assert_eq!(errors.len(), 3, "{errors:?}");
    assert!(errors[0].contains("wells.csv, line 3, column 'x'"));
    assert!(errors[1].contains("wells.csv, line 5, column 'step'"));
    assert!(errors[2].contains("wells.csv, line 9, column 'dSw'"));
    // The good rows are still summarised.
    assert_eq!(report.wells.as_ref().unwrap().rows, 13);
}
