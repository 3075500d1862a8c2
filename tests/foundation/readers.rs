//! Every text reader counts lines alike whatever wrote the file (LF, CRLF as spreadsheets write,
//! or a lone CR), skips a UTF-8 byte-order mark, and quotes at most 80 characters of a bad
//! token. GeoTIFF is binary and has no lines; its header limits are in `bad_inputs.rs`.

use super::fixtures::*;
use std::path::Path;
use tidemark::io::wells::{self, TargetColumn, WellColumns};
use tidemark::io::{self, xyz};
use tidemark::project::Project;

/// `text` with every LF line end replaced by `end`.
fn with_line_ends(text: &str, end: &str) -> String {
    text.replace('\n', end)
}

fn columns() -> WellColumns {
    WellColumns {
        well: "well".into(),
        x: "x".into(),
        y: "y".into(),
        step: "step".into(),
        weight: "weight".into(),
        weight_required: false,
        targets: vec![TargetColumn {
            column: "dSw".into(),
            min: -1.0,
            max: 1.0,
        }],
    }
}

#[test]
fn xyz_line_numbers_are_the_same_for_lf_crlf_and_cr() {
    let g = tiny_grid();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("m.xyz");
    xyz::write(&path, &g, &tiny_map(0, 1)).unwrap();
    let lf = std::fs::read_to_string(&path).unwrap();
    // A bad value on line 5 (the header comment is line 1).
    let mut lines: Vec<String> = lf.lines().map(str::to_string).collect();
    let good = lines.clone();
    let f: Vec<&str> = good[4].split(' ').collect();
    lines[4] = format!("{} {} oops", f[0], f[1]);
    let bad = lines.join("\n") + "\n";
    for end in ["\n", "\r\n", "\r"] {
        // The good file reads to the same values with every line end.
        let v = xyz::parse(Path::new("m.xyz"), &with_line_ends(&lf, end), &g, 0.01).unwrap();
        assert_eq!(v, tiny_map(0, 1), "line end {end:?}");
        std::fs::write(&path, with_line_ends(&bad, end)).unwrap();
        let e = xyz::read_on_grid(&path, &g, 0.01).unwrap_err().to_string();
        assert!(e.contains("m.xyz, line 5"), "line end {end:?}: {e}");
        assert!(e.contains("value 'oops'"), "{e}");
    }
}

#[test]
fn xyz_byte_order_mark_keeps_node_zero() {
    // Before, a mark in front of the first data line made it look like a header, so node (0,0)
    // was silently dropped.
    let g = tiny_grid();
    let mut text = String::from("\u{feff}");
    for j in 0..g.ny {
        for i in 0..g.nx {
            let (x, y) = g.node_xy(i, j);
            text.push_str(&format!("{x} {y} {}\r\n", 10 * j + i));
        }
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bom.xyz");
    std::fs::write(&path, &text).unwrap();
    let v = xyz::read_on_grid(&path, &g, 0.01).unwrap();
    assert_eq!(v[0], 0.0, "node (0,0) is read");
    assert_eq!(v[g.index(5, 4)], 45.0);
}

#[test]
fn wells_line_numbers_are_the_same_for_lf_crlf_and_cr() {
    let steps = vec!["m1".to_string()];
    // Line 1 header, line 2 a comment, line 3 good, line 4 bad, line 5 good.
    let lf = "well,x,y,step,dSw\n# a comment\nA,1,2,m1,0.1\nB,1,2,m1,zz\nC,1,2,m1,0.2\n";
    for end in ["\n", "\r\n", "\r"] {
        let text = with_line_ends(lf, end);
        let (records, errors) =
            wells::parse_all(Path::new("w.csv"), text.as_bytes(), &columns(), &steps).unwrap();
        assert_eq!(
            records.iter().map(|r| r.line).collect::<Vec<_>>(),
            vec![3, 5],
            "line end {end:?}"
        );
        assert_eq!(errors.len(), 1);
        let e = errors[0].to_string();
        assert!(e.starts_with("w.csv, line 4, column 'dSw'"), "{end:?}: {e}");
        // With a byte-order mark the first column is still found.
        let with_bom = format!("\u{feff}{text}");
        let (records, _) =
            wells::parse_all(Path::new("w.csv"), with_bom.as_bytes(), &columns(), &steps).unwrap();
        assert_eq!(records[0].well, "A");
    }
}

#[test]
fn wells_file_read_from_disk_with_crlf_names_the_right_line() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let path = dir.path().join("wells.csv");
    let text = std::fs::read_to_string(&path).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    lines[6] = lines[6].replacen(",m", ",q", 1);
    std::fs::write(&path, lines.join("\r\n") + "\r\n").unwrap();
    let report = tidemark::check::check_project(&manifest);
    assert!(
        report
            .problems
            .iter()
            .any(|p| p.message.contains("wells.csv, line 7, column 'step'")),
        "{report}"
    );
}

#[test]
fn manifest_line_numbers_are_the_same_for_lf_and_crlf_and_a_mark_is_skipped() {
    let text = TINY_MANIFEST.replace("epsg = 32631", "epsg = 32631\ncolour = 1");
    for end in ["\n", "\r\n"] {
        for bom in ["", "\u{feff}"] {
            let t = format!("{bom}{}", with_line_ends(&text, end));
            let e = Project::from_toml_str(Path::new("p.toml"), &t)
                .unwrap_err()
                .to_string();
            assert!(e.contains("p.toml, line 12"), "{end:?} {bom:?}: {e}");
            let good = format!("{bom}{}", with_line_ends(TINY_MANIFEST, end));
            assert!(Project::from_toml_str(Path::new("p.toml"), &good).is_ok());
        }
    }
}

#[test]
fn excerpts_quote_at_most_80_characters() {
    assert_eq!(io::excerpt("short"), "short");
    let long = "é".repeat(100);
    let e = io::excerpt(&long);
    assert!(e.starts_with(&"é".repeat(80)), "{e}");
    assert!(e.ends_with("... (200 bytes)"), "{e}");
    assert_eq!(io::excerpt(&"a".repeat(80)), "a".repeat(80));
}
