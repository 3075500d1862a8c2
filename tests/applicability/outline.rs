//! Outlines of ground no well samples (`[area] unsampled`): the geometry worked by hand, bad
//! outlines named by file and line, and a generated field whose undrilled culmination (which no
//! rule on the data finds) is marked by the user.

use std::path::{Path, PathBuf};
use tidemark::applicability::{REASON_MARKED, REASON_NO_DATA};
use tidemark::io;
use tidemark::outline::{self, area, contains};
use tidemark::pipeline::run::{self, RunOptions};
use tidemark::pipeline::score::score_with;
use tidemark::synth::{SynthSettings, generate, write_project};

#[test]
fn point_in_outline_by_hand() {
    // An L-shaped (concave) ring: the unit square [0,2] x [0,2] without its top-right quarter.
    let l = [
        (0.0, 0.0),
        (2.0, 0.0),
        (2.0, 1.0),
        (1.0, 1.0),
        (1.0, 2.0),
        (0.0, 2.0),
    ];
    // Shoelace: 4 - 1 = 3, either orientation.
    assert_eq!(area(&l), 3.0);
    let reversed: Vec<(f64, f64)> = l.iter().rev().copied().collect();
    assert_eq!(area(&reversed), 3.0);
    // The same ring at map coordinates of a projected grid (UTM-like eastings and northings).
    let far: Vec<(f64, f64)> = l
        .iter()
        .map(|&(x, y)| (x + 612_000.0, y + 6_810_000.0))
        .collect();
    assert_eq!(area(&far), 3.0);
    for (x, y, inside) in [
        (0.5, 0.5, true),
        (1.5, 0.5, true),
        (0.5, 1.5, true),
        (1.5, 1.5, false), // the missing quarter
        (2.5, 0.5, false),
        (-0.5, 1.0, false),
        // The ray to the right from (0.5, 1.0) passes through the vertex (1, 1) and runs along
        // the edge (1,1)-(2,1): the half-open rule counts the crossing at x = 1 once. The point
        // lies inside.
        (0.5, 1.0, true),
        // The ray from (-1, 2) runs along the top edge y = 2: the half-open rule ignores the
        // horizontal edge and counts neither end of it, so the point stays outside.
        (-1.0, 2.0, false),
    ] {
        assert_eq!(contains(&l, x, y), inside, "({x}, {y})");
        assert_eq!(contains(&reversed, x, y), inside, "reversed, ({x}, {y})");
    }
}

#[test]
fn bad_outlines_name_the_file_and_line() {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("outline-bad");
    std::fs::create_dir_all(&dir).unwrap();
    let cases = [
        (
            "two.csv",
            "x,y,line\n0,0,a\n1,0,a\n0,0,a\n5,5,b\n6,5,b\n5,6,b\n",
            "line 2",
            "outline 'a' has 2 distinct vertices",
        ),
        (
            "flat.csv",
            "# a comment\nx,y\n0,0\n1,1\n2,2\n",
            "line 3",
            "encloses no area",
        ),
        ("text.csv", "x,y\n0,0\n1,zero\n0,1\n", "line 3", ""),
    ];
    for (name, text, line, what) in cases {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        let e = outline::read_all(std::slice::from_ref(&path))
            .expect_err(name)
            .to_string();
        assert!(e.contains(name) && e.contains(line), "{name}: {e}");
        assert!(e.contains(what), "{name}: {e}");
    }
    // A good file with two outlines, one closed and one left open.
    let path = dir.join("good.csv");
    std::fs::write(
        &path,
        "x,y,line\n0,0,a\n1,0,a\n1,1,a\n0,0,a\n5,5,b\n6,5,b\n5,6,b\n",
    )
    .unwrap();
    let got = outline::read_all(&[path]).unwrap();
    assert_eq!(got.len(), 2);
    assert_eq!(got[0].points.len(), 3, "the closing vertex is dropped");
    assert_eq!((got[0].line, got[1].line), (2, 6));
}

/// Writes a 24-gon of radius `r` about `(cx, cy)` as an outline file.
fn write_circle(path: &Path, cx: f64, cy: f64, r: f64) {
    let mut text = String::from("x,y,line\n");
    for k in 0..=24 {
        let a = std::f64::consts::TAU * f64::from(k % 24) / 24.0;
        text.push_str(&format!(
            "{},{},culmination\n",
            cx + r * a.cos(),
            cy + r * a.sin()
        ));
    }
    std::fs::write(path, text).unwrap();
}

#[test]
fn marked_culmination_is_flagged_and_never_silently_missed() {
    let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("outline-field");
    if root.exists() {
        std::fs::remove_dir_all(&root).unwrap();
    }
    let dir = root.join("field");
    let settings = SynthSettings {
        seed: 3,
        nx: 60,
        ny: 48,
        wells: 30,
        steps: 2,
        gas_cap: true,
        ..SynthSettings::default()
    };
    let synth = generate(&settings).expect("generate");
    write_project(&synth, &settings, &dir).expect("write the field");
    let manifest = dir.join("project.toml");
    let survey = run::load(&manifest).expect("load");
    let grid = survey.project.grid.clone();
    let xy = grid.node_coordinates();
    let cap = io::read_map(&dir.join("truth/masks/gas_cap.tif"), &grid, 0.25).expect("mask");
    let cap_nodes: Vec<usize> = (0..cap.len()).filter(|&k| cap[k] > 0.5).collect();
    assert!(cap_nodes.len() > 20, "the field has a culmination");
    // A circle about the culmination's nodes, reaching half a node beyond the farthest.
    let n = cap_nodes.len() as f64;
    let cx = cap_nodes.iter().map(|&k| xy[k].0).sum::<f64>() / n;
    let cy = cap_nodes.iter().map(|&k| xy[k].1).sum::<f64>() / n;
    let far = cap_nodes
        .iter()
        .map(|&k| (xy[k].0 - cx).hypot(xy[k].1 - cy))
        .fold(0.0, f64::max);
    let r = far / (std::f64::consts::PI / 24.0).cos() + 0.5 * grid.dx;
    write_circle(&dir.join("static/culmination.csv"), cx, cy, r);
    let text = std::fs::read_to_string(&manifest).unwrap();
    std::fs::write(
        &manifest,
        format!("{text}\n[area]\nunsampled = [\"static/culmination.csv\"]\n"),
    )
    .unwrap();

    let run_to = |out: &Path| {
        let opts = RunOptions::maps_only(&manifest, out);
        run::run(&opts).expect("run");
    };
    let marked = root.join("marked");
    run_to(&marked);
    let inner = r * (std::f64::consts::PI / 24.0).cos();
    for step in ["m1", "m2"] {
        let path = marked.join(format!("maps/{step}/area_reason.tif"));
        let codes = io::geotiff::read(&path).expect("reason codes").values;
        for (k, &c) in codes.iter().enumerate() {
            if c.is_nan() || c as u8 == REASON_NO_DATA {
                continue;
            }
            let d = (xy[k].0 - cx).hypot(xy[k].1 - cy);
            let bit = c as u8 & REASON_MARKED != 0;
            // Inside the inscribed circle surely marked, beyond the outline surely not; the
            // sliver between the 24-gon and its circle is left alone.
            if d < inner - 1e-6 {
                assert!(
                    bit,
                    "{step}: node {k} at {d:.1} m of the centre lacks the mark"
                );
            } else if d > r + 1e-6 {
                assert!(!bit, "{step}: node {k} at {d:.1} m carries the mark");
            }
        }
    }
    // `tidemark predict` with the saved model on the same project marks the same nodes.
    let predicted = root.join("predicted");
    tidemark::pipeline::predict::predict(
        &marked.join("model.json"),
        &manifest,
        &predicted,
        None,
        tidemark::pipeline::outputs::Formats {
            geotiff: true,
            xyz: false,
        },
    )
    .expect("predict");
    for step in ["m1", "m2"] {
        let rel = format!("maps/{step}/area_reason.tif");
        let a = io::geotiff::read(&marked.join(&rel)).unwrap().values;
        let b = io::geotiff::read(&predicted.join(&rel)).unwrap().values;
        assert!(
            a.iter()
                .zip(&b)
                .all(|(x, y)| x == y || (x.is_nan() && y.is_nan())),
            "{step}: predict's reasons differ from the run's"
        );
    }
    let (score, _) = score_with(&marked, &dir, Some(&manifest)).expect("score");
    for t in &score.targets {
        let cap = t
            .pooled_figures
            .iter()
            .find(|s| s.name == "gas_cap")
            .expect("the culmination's figures");
        let silent = cap.calibrated.as_ref().expect("nodes").silent_misses;
        assert_eq!(
            silent, 0.0,
            "{}: a marked node is never a silent miss",
            t.target
        );
    }

    // The mark flags; it changes no band: without it the P10/P50/P90 maps are the same.
    std::fs::write(&manifest, &text).unwrap();
    let plain = root.join("plain");
    run_to(&plain);
    for name in ["m2/dP_p50", "m2/dSw_p10", "m2/dSg_p90"] {
        let a = io::geotiff::read(&marked.join(format!("maps/{name}.tif"))).unwrap();
        let b = io::geotiff::read(&plain.join(format!("maps/{name}.tif"))).unwrap();
        let same = a
            .values
            .iter()
            .zip(&b.values)
            .all(|(x, y)| x == y || (x.is_nan() && y.is_nan()));
        assert!(same, "{name} differs with the outline");
    }
}
