//! The shape of the code: no import circles between the library's modules, and size limits on the
//! folders that hold the method and the pipeline.

mod cycles;
mod lexer;
mod modules;
mod sizes;

use std::collections::BTreeSet;
use std::path::Path;

/// Folders whose files must stay under [`MAX_FILE_LINES`] lines and whose functions under
/// [`MAX_FN_LINES`] lines.
const SIZE_CHECKED_FOLDERS: &[&str] = &["src/calibrate/", "src/pipeline/"];

/// Longest function allowed in [`SIZE_CHECKED_FOLDERS`], in lines (see [`sizes`] for the count).
const MAX_FN_LINES: usize = 150;

/// Longest file allowed in [`SIZE_CHECKED_FOLDERS`], in lines.
const MAX_FILE_LINES: usize = 900;

/// Circles known to exist, each to be removed by moving the shared items down into a file of
/// their own. Each must still be found exactly (so its entry goes once the circle is gone, or is
/// corrected when its members change), and no other circle may appear. None is left: the error
/// type and map length check of io live in `io/error.rs`, the manifest limits in
/// `project/limits.rs`, and the generator's settings and model in `synth/settings.rs` and
/// `synth/model.rs`, below the modules that call them.
const KNOWN_CIRCLES: &[&[&str]] = &[];

fn crate_root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn the_library_has_no_import_circles() {
    let files = modules::read_sources(crate_root());
    assert!(files.len() > 50, "only {} source files found", files.len());
    let g = modules::graph(&files);
    let plain: cycles::Graph = g
        .edges
        .iter()
        .map(|(from, to)| (from.clone(), to.keys().cloned().collect()))
        .collect();
    let found = cycles::circles(&plain);
    let known: BTreeSet<Vec<String>> = KNOWN_CIRCLES
        .iter()
        .map(|c| {
            let mut v: Vec<String> = c.iter().map(|s| s.to_string()).collect();
            v.sort();
            v
        })
        .collect();
    let mut problems = Vec::new();
    for comp in &found {
        if known.contains(comp) {
            continue;
        }
        let circle = cycles::circle_through(&plain, comp);
        let mut text = format!("import circle among {}:", comp.join(", "));
        for pair in circle.windows(2) {
            let ev = &g.edges[&pair[0]][&pair[1]];
            text.push_str(&format!(
                "\n    {}:{} uses {} ({})",
                pair[0], ev.line, pair[1], ev.path
            ));
        }
        problems.push(text);
    }
    for k in &known {
        if !found.contains(k) {
            problems.push(format!(
                "the known circle among {} is gone: remove it from KNOWN_CIRCLES",
                k.join(", ")
            ));
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

#[test]
fn pipeline_modules_only_call_down() {
    // The layering the pipeline's docs describe: run on top, then the report's assembly, then the
    // studies and the pictures, then fitting one target, then the shared pieces. A file may use
    // files of its own layer or below (circles inside a layer are the test above's business).
    let files = modules::read_sources(crate_root());
    let g = modules::graph(&files);
    let layers: &[&[&str]] = &[
        &["run.rs"],
        &["assemble.rs"],
        &[
            "studies.rs",
            "pictures.rs",
            "score.rs",
            "predict.rs",
            "totals.rs",
        ],
        &["fit.rs", "nodes.rs"],
        &[
            "stages.rs",
            "warnings.rs",
            "outputs.rs",
            "model.rs",
            "scale.rs",
            "kinds.rs",
            "mod.rs",
        ],
    ];
    let layer_of = |rel: &str| {
        let name = rel.strip_prefix("src/pipeline/")?;
        layers.iter().position(|l| l.contains(&name))
    };
    let mut seen = BTreeSet::new();
    let mut upward = Vec::new();
    for f in files.iter().filter(|f| f.rel.starts_with("src/pipeline/")) {
        let Some(from) = layer_of(&f.rel) else {
            upward.push(format!("{} is in no layer of this test", f.rel));
            continue;
        };
        seen.insert(f.rel.clone());
        for (to, ev) in g.edges.get(&f.rel).into_iter().flatten() {
            if layer_of(to).is_some_and(|l| l < from) {
                upward.push(format!("{}:{} uses {to} ({})", f.rel, ev.line, ev.path));
            }
        }
    }
    assert!(seen.len() >= 8, "pipeline files found: {seen:?}");
    assert!(upward.is_empty(), "{}", upward.join("\n"));
}

#[test]
fn method_and_pipeline_files_and_functions_stay_small() {
    let files = modules::read_sources(crate_root());
    let mut problems = Vec::new();
    let mut checked = 0;
    let mut longest = (0, String::new());
    for f in &files {
        if !SIZE_CHECKED_FOLDERS.iter().any(|d| f.rel.starts_with(d)) {
            continue;
        }
        checked += 1;
        let n = f.text.lines().count();
        if n > MAX_FILE_LINES {
            problems.push(format!("{}: {n} lines (at most {MAX_FILE_LINES})", f.rel));
        }
        for span in sizes::functions(&f.text) {
            if span.lines() > longest.0 {
                longest = (
                    span.lines(),
                    format!("{}:{} {}", f.rel, span.start, span.name),
                );
            }
            if span.lines() > MAX_FN_LINES {
                problems.push(format!(
                    "{}:{} fn {}: {} lines (at most {MAX_FN_LINES})",
                    f.rel,
                    span.start,
                    span.name,
                    span.lines()
                ));
            }
        }
    }
    eprintln!(
        "longest function checked: {} lines, {}",
        longest.0, longest.1
    );
    assert!(checked > 0, "no file under {SIZE_CHECKED_FOLDERS:?}");
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}
