//! Skill verdicts through the whole job on a generated field with 12 wells: the verdicts follow
//! their intervals (`none` where one reaches 0, `useful` where both clear the bars), a `useful`
//! map has skill against the truth at every node, the page opens with the verdict table and its
//! figures are those of `summary.json`, pictures without skill say so, `metrics_by_step` names
//! its steps, and a run (quiet or not) prints the `none` verdicts first.

use std::path::PathBuf;
use std::process::Command;
use std::sync::OnceLock;
use tidemark::pipeline::model::SavedModel;
use tidemark::pipeline::run::{RunOptions, run};
use tidemark::report::ReportInput;
use tidemark::report::markup::num;
use tidemark::skill::{NO_SKILL, SkillSettings, Verdict, verdict};
use tidemark::synth::{SynthSettings, generate, write_project};

/// 12 wells, 4 steps, a quiet survey (SNR 40): on this field dP's skill at held-out wells
/// clears the `useful` bars while dSg's CRPS-skill interval lies below 0 (values recorded when
/// the test was written; the assertions below check the rule, not these values).
fn settings() -> SynthSettings {
    SynthSettings {
        seed: 1,
        nx: 64,
        ny: 52,
        spacing: 50.0,
        wells: 12,
        steps: 4,
        snr: 40.0,
        ..SynthSettings::default()
    }
}

struct Fixture {
    root: PathBuf,
    project: PathBuf,
    out: PathBuf,
}

fn fixture() -> &'static Fixture {
    static F: OnceLock<Fixture> = OnceLock::new();
    F.get_or_init(|| {
        let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("pipeline-verdicts");
        if root.exists() {
            std::fs::remove_dir_all(&root).unwrap();
        }
        let s = settings();
        let field = generate(&s).expect("generate");
        let dir = root.join("field");
        write_project(&field, &s, &dir).expect("write project");
        let project = dir.join("project.toml");
        let out = root.join("results");
        run(&RunOptions::new(&project, &out)).expect("run");
        tidemark::pipeline::score::score_and_report(&out, &dir).expect("score");
        Fixture { root, project, out }
    })
}

fn json(path: PathBuf) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(&path).unwrap())
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

fn pair(v: &serde_json::Value) -> [f64; 2] {
    let a = v.as_array().unwrap();
    [0, 1].map(|k| a[k].as_f64().unwrap_or(f64::NAN))
}

/// `(target, step or None, skill object)` for every verdict of the summary, pooled first.
fn verdicts(summary: &serde_json::Value) -> Vec<(String, Option<String>, serde_json::Value)> {
    let mut out = Vec::new();
    for t in summary["targets"].as_array().unwrap() {
        let name = t["name"].as_str().unwrap().to_string();
        out.push((name.clone(), None, t["skill"].clone()));
        for s in t["skill_by_step"].as_array().unwrap() {
            out.push((
                name.clone(),
                Some(s["step"].as_str().unwrap().to_string()),
                s.clone(),
            ));
        }
    }
    out
}

#[test]
fn twelve_wells_none_where_the_interval_reaches_zero_useful_where_clearly_not() {
    let f = fixture();
    let summary = json(f.out.join("summary.json"));
    let truth = json(f.out.join("truth-score.json"));
    let rule = SkillSettings::default();
    let mut seen = Vec::new();
    for (target, step, s) in verdicts(&summary) {
        let (r2, crps) = (pair(&s["r2_interval"]), pair(&s["crps_skill_interval"]));
        let v = s["verdict"].as_str().unwrap();
        assert_eq!(v, verdict(r2, crps, &rule).as_str(), "{target} {step:?}");
        // The rule in words (src/skill.rs): `none` exactly where an interval reaches 0.
        let reaches_zero = !(r2[0] > 0.0 && crps[0] > 0.0);
        assert_eq!(
            v == "none",
            reaches_zero,
            "{target} {step:?}: {r2:?} {crps:?}"
        );
        if v == "useful" {
            // Safe direction: a map called useful carries skill against the truth at every node
            // (R2 of the P50 over all nodes above 0).
            let t = truth["targets"]
                .as_array()
                .unwrap()
                .iter()
                .find(|t| t["target"] == target.as_str())
                .unwrap();
            let scores = match &step {
                None => &t["pooled"],
                Some(s) => &t["steps"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .find(|x| x["step"] == s.as_str())
                    .unwrap()["scores"],
            };
            let node_r2 = scores["all"]["r2"].as_f64().unwrap();
            assert!(
                node_r2 > 0.0,
                "{target} {step:?}: useful, node R2 {node_r2}"
            );
        }
        seen.push((target, step, v.to_string()));
    }
    eprintln!("verdicts: {seen:?}");
    let pooled = |t: &str| {
        seen.iter()
            .find(|(n, s, _)| n == t && s.is_none())
            .map(|x| x.2.clone())
            .unwrap()
    };
    // This field has both kinds: a target whose interval reaches 0 and one clearly above.
    assert_eq!(pooled("dSg"), "none");
    assert_eq!(pooled("dP"), "useful");
}

/// Cells of the `<table id="verdicts">`, row by row (tags stripped).
fn verdict_rows(html: &str) -> Vec<Vec<String>> {
    let start = html.find("<table id=\"verdicts\">").expect("verdict table");
    let end = start + html[start..].find("</table>").unwrap();
    let table = &html[start..end];
    table
        .split("<tr")
        .skip(2) // the part before the first row, and the header
        .map(|row| {
            row.split("<td")
                .skip(1)
                .map(|cell| {
                    let body = &cell[cell.find('>').unwrap() + 1..];
                    let body = &body[..body.find("</td>").unwrap()];
                    body.replace("<b>", "").replace("</b>", "")
                })
                .collect()
        })
        .collect()
}

#[test]
fn the_page_opens_with_the_verdict_table_and_its_figures_equal_the_summary() {
    let f = fixture();
    let html = std::fs::read_to_string(f.out.join("report.html")).unwrap();
    let main = &html[html.find("<main>").unwrap()..];
    // Nothing before the verdict table but the section's headings.
    let first_table = main.find("<table").unwrap();
    assert!(main[first_table..].starts_with("<table id=\"verdicts\">"));
    for tag in ["<p", "<div", "<figure", "<ul"] {
        assert!(
            !main[..first_table].contains(tag),
            "{tag} before the verdict table"
        );
    }
    let summary = json(f.out.join("summary.json"));
    let expected = verdicts(&summary);
    let rows = verdict_rows(&html);
    assert_eq!(
        rows.len(),
        expected.len(),
        "one row per target and per step"
    );
    let fmt = |v: &serde_json::Value| num(v.as_f64());
    for ((target, step, s), row) in expected.iter().zip(&rows) {
        assert_eq!(row[0], *target);
        assert_eq!(row[1], step.clone().unwrap_or_else(|| "all steps".into()));
        assert_eq!(row[2], fmt(&s["r2"]), "{target} {step:?} R2");
        let iv = |k: &str| {
            format!(
                "{} to {}",
                fmt(&s[k].as_array().unwrap()[0]),
                fmt(&s[k].as_array().unwrap()[1])
            )
        };
        assert_eq!(row[3], iv("r2_interval"), "{target} {step:?}");
        assert_eq!(
            row[4],
            fmt(&s["crps_skill"]),
            "{target} {step:?} CRPS skill"
        );
        assert_eq!(row[5], iv("crps_skill_interval"), "{target} {step:?}");
        assert_eq!(row[6], s["verdict"].as_str().unwrap());
        if row[6] == "none" {
            assert!(row[7].starts_with("no demonstrated skill"), "{}", row[7]);
        }
    }
    // The rule is stated under the table.
    assert!(html.contains("none: the interval of R2 or of CRPS skill reaches 0 or below"));
}

#[test]
fn pictures_of_a_target_and_step_without_skill_say_so() {
    let f = fixture();
    let summary = json(f.out.join("summary.json"));
    let lacking = |t: &str, s: &str| {
        verdicts(&summary).iter().any(|(n, step, v)| {
            n == t && v["verdict"] == "none" && step.as_deref().is_none_or(|x| x == s)
        })
    };
    let input = ReportInput::load(&f.out.join("report-data.json")).unwrap();
    let html = std::fs::read_to_string(f.out.join("report.html")).unwrap();
    let mut marked = 0;
    let maps = input
        .maps
        .iter()
        .chain(input.truth.iter().flat_map(|t| &t.error_maps));
    for e in maps {
        let Some(t) = &e.target else {
            assert!(!e.caption.contains(NO_SKILL), "step-wide map {}", e.kind);
            continue;
        };
        let alt = format!("{t} {} - {}", e.kind, e.step);
        let at = html
            .find(&format!("alt=\"{alt}\">"))
            .unwrap_or_else(|| panic!("no figure {alt}"));
        let figure = &html[at..at + html[at..].find("</figure>").unwrap()];
        let says = figure.contains(&NO_SKILL.replace('\'', "&#39;"));
        assert_eq!(says, lacking(t, &e.step), "{alt}: {figure}");
        // The map pictures of the run carry the sentence in the PNG too (the same caption).
        if e.kind == "P50" && lacking(t, &e.step) {
            assert!(e.caption.contains(NO_SKILL), "{alt}");
        }
        marked += usize::from(says);
    }
    // dSg lacks skill pooled over steps: every one of its pictures is marked.
    assert!(marked >= 4 * 3, "only {marked} marked pictures");
}

#[test]
fn metrics_by_step_names_its_steps() {
    let f = fixture();
    let summary = json(f.out.join("summary.json"));
    let model = SavedModel::load(&f.out.join("model.json")).unwrap();
    for (t, cal) in summary["targets"]
        .as_array()
        .unwrap()
        .iter()
        .zip(&model.calibrated)
    {
        let by_step = t["diagnostics"]["metrics_by_step"].as_array().unwrap();
        assert_eq!(by_step.len(), cal.diagnostics.metrics_by_step.len());
        for (entry, sm) in by_step.iter().zip(&cal.diagnostics.metrics_by_step) {
            assert_eq!(entry["step"], model.step_names[sm.step].as_str());
            assert_eq!(entry["step_index"], sm.step);
            let r2 = entry["metrics"]["r2"].as_f64().unwrap();
            assert_eq!(r2.to_bits(), sm.metrics.r2.to_bits(), "figures unchanged");
        }
    }
}

/// Runs the fixture's project with `--quiet` or without, and checks that the `none` verdicts are
/// the first lines the run leaves on the console (progress is transient and hidden off a terminal).
fn none_verdicts_come_first(quiet: bool) {
    let f = fixture();
    let out = f.root.join(if quiet { "quiet" } else { "talkative" });
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_tidemark"));
    cmd.arg("run")
        .arg(&f.project)
        .arg("--out")
        .arg(&out)
        .args(["--no-pictures", "--no-xyz"]);
    if quiet {
        cmd.arg("--quiet");
    }
    let run = cmd.output().unwrap();
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(run.status.success(), "exit status stays 0: {stderr}");
    let summary = json(out.join("summary.json"));
    let nones = verdicts(&summary)
        .iter()
        .filter(|(_, _, s)| s["verdict"] == Verdict::None.as_str())
        .count();
    assert!(nones > 0);
    let lines: Vec<&str> = stderr.lines().collect();
    assert!(lines.len() >= nones, "{stderr}");
    for l in &lines[..nones] {
        assert!(l.starts_with("warning: skill, target "), "{l}");
        assert!(l.ends_with(NO_SKILL), "{l}");
    }
    assert!(
        lines[..nones]
            .contains(&format!("warning: skill, target dSg, all steps: {NO_SKILL}").as_str())
    );
    assert!(!lines[nones..].iter().any(|l| l.contains(NO_SKILL)));
    if !quiet {
        // The validation table and the stage times follow the warnings.
        assert!(
            lines[nones..]
                .iter()
                .any(|l| l.contains("leave-wells-out validation")),
            "{stderr}"
        );
        let stdout = String::from_utf8_lossy(&run.stdout);
        assert!(stdout.starts_with("results in "), "{stdout}");
    }
}

#[test]
fn a_quiet_run_prints_the_none_verdicts_first() {
    none_verdicts_come_first(true);
}

#[test]
fn a_run_without_quiet_also_prints_the_none_verdicts_first() {
    none_verdicts_come_first(false);
}

#[test]
fn nothing_on_the_page_contradicts_the_figures_beneath() {
    let f = fixture();
    let input = ReportInput::load(&f.out.join("report-data.json")).unwrap();
    let close = |a: Option<f64>, b: Option<f64>, what: &str| match (a, b) {
        (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-9 * (1.0 + b.abs()), "{what}: {a} {b}"),
        _ => assert_eq!(a.is_some(), b.is_some(), "{what}: {a:?} {b:?}"),
    };
    for t in &input.targets {
        let s = &t.summary;
        // The verdict's R2 is the summary table's R2 (both from the out-of-fold rows).
        close(
            t.skill.as_ref().and_then(|v| v.r2),
            s.r2,
            &format!("{} R2", t.name),
        );
        // The decile table's outer rows are the summary's decile coverage.
        let d = t.coverage_by_decile.as_ref().unwrap();
        close(
            d.rows[0].coverage,
            s.coverage_bottom_decile,
            &format!("{} bottom decile", t.name),
        );
        close(
            d.rows[9].coverage,
            s.coverage_top_decile,
            &format!("{} top decile", t.name),
        );
        let rows: usize = d.rows.iter().map(|r| r.count).sum();
        assert_eq!(Some(rows), s.rows, "{}: every row in one decile", t.name);
    }
}
