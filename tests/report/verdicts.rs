//! What the page says about the wells' backing, on constructed inputs: the verdict table and the
//! no-skill captions, advice at the extremes, the single-series cross-plot when the end-bias
//! correction was not kept, and the spread chart.

use tidemark::report::html::{crossplot_series, not_kept_sentence};
use tidemark::report::input::*;
use tidemark::report::render_html;
use tidemark::report::spread::chart_curves;
use tidemark::report::verdicts::{EXTREME_COVERAGE_FLOOR, extreme_notes, picture_caption};
use tidemark::skill::NO_SKILL;

fn verdict(step: Option<&str>, v: &str) -> SkillVerdict {
    SkillVerdict {
        step: step.map(str::to_string),
        r2: Some(0.3),
        r2_interval: [Some(-0.1), Some(0.6)],
        crps_skill: Some(0.2),
        crps_skill_interval: [Some(0.05), Some(0.4)],
        level: Some(0.9),
        verdict: v.to_string(),
        meaning: format!("meaning of {v}"),
    }
}

fn entry(target: &str, step: &str, caption: &str) -> MapEntry {
    MapEntry {
        step: step.to_string(),
        target: Some(target.to_string()),
        kind: "P50".to_string(),
        picture: PictureRef::PngBase64(String::new()),
        caption: caption.to_string(),
    }
}

fn input() -> ReportInput {
    ReportInput {
        steps: vec!["m1".into(), "m2".into()],
        targets: vec![
            TargetReport {
                name: "dP".into(),
                skill: Some(verdict(None, "weak")),
                skill_by_step: vec![verdict(Some("m1"), "none"), verdict(Some("m2"), "useful")],
                ..Default::default()
            },
            TargetReport {
                name: "dSg".into(),
                skill: Some(verdict(None, "none")),
                skill_by_step: vec![verdict(Some("m1"), "weak"), verdict(Some("m2"), "weak")],
                ..Default::default()
            },
        ],
        ..Default::default()
    }
}

#[test]
fn a_none_verdict_marks_the_pictures_of_its_target_and_step() {
    let i = input();
    // dP: only step m1 lacks skill; dSg lacks it pooled, so both steps.
    for (t, s, marked) in [
        ("dP", "m1", true),
        ("dP", "m2", false),
        ("dSg", "m1", true),
        ("dSg", "m2", true),
    ] {
        let c = picture_caption(&i, &entry(t, s, "own words"));
        assert_eq!(c.contains(NO_SKILL), marked, "{t} {s}: {c}");
        assert!(
            c.ends_with("own words"),
            "the picture's own caption stays: {c}"
        );
    }
    // A caption that already says it is not repeated; a step-wide map is never marked.
    let said = format!("Caution: {NO_SKILL}.");
    assert_eq!(picture_caption(&i, &entry("dSg", "m1", &said)), said);
    let mut wide = entry("dSg", "m1", "");
    wide.target = None;
    assert_eq!(picture_caption(&i, &wide), "");
}

#[test]
fn the_verdict_table_opens_the_page_with_every_step_by_name() {
    let dir = tempfile::tempdir().unwrap();
    let html = render_html(&input(), dir.path()).unwrap();
    let main = &html[html.find("<main>").unwrap()..];
    assert!(main[main.find("<table").unwrap()..].starts_with("<table id=\"verdicts\">"));
    let table = &main[..main.find("</table>").unwrap()];
    // 2 targets x (pooled + 2 steps) rows, `none` rows marked.
    assert_eq!(table.matches("<tr").count(), 1 + 6);
    assert_eq!(table.matches("<tr class=\"warn\">").count(), 2);
    assert!(table.contains("<td class=\"l\">all steps</td>"));
    assert!(table.contains("<td class=\"l\">m2</td>"));
    assert!(table.contains("<td>-0.100 to 0.600</td>"));
    assert!(table.contains("meaning of useful"));
}

#[test]
fn extremes_get_advice_below_the_floor_only() {
    let mut t = TargetReport {
        name: "dSw".into(),
        summary: TargetSummary {
            nominal_coverage: Some(0.8),
            coverage_top_decile: Some(0.47),
            coverage_bottom_decile: Some(EXTREME_COVERAGE_FLOOR),
            ..Default::default()
        },
        ..Default::default()
    };
    let labels = ["P10".to_string(), "P90".to_string()];
    let notes = extreme_notes(&t, &labels);
    assert_eq!(notes.len(), 1, "{notes:?}");
    assert!(notes[0].contains("top decile"));
    assert!(notes[0].contains("covered 47 %"));
    assert!(notes[0].contains("exceedance map"));
    assert!(notes[0].contains("upper edge (P90)"));
    assert!(notes[0].contains("P50 understates"));
    t.summary.coverage_bottom_decile = Some(0.5);
    t.summary.coverage_top_decile = None;
    let notes = extreme_notes(&t, &labels);
    assert_eq!(notes.len(), 1);
    assert!(notes[0].contains("lower edge (P10)") && notes[0].contains("overstates"));
    // On the page: beside the summary table's figure (marked) and under the decile plot.
    let dir = tempfile::tempdir().unwrap();
    let page = render_html(
        &ReportInput {
            targets: vec![t],
            band_labels: labels,
            ..Default::default()
        },
        dir.path(),
    )
    .unwrap();
    assert!(page.contains("<span class=\"warn\">50.0&nbsp;%&nbsp;*</span>"));
    assert!(page.contains("<p class=\"warn\">* dSw: the bottom decile"));
}

#[test]
fn a_correction_not_kept_draws_one_series_and_says_why() {
    let truth = vec![0.0, 0.1, 0.2, 0.3];
    let raw = vec![0.05, 0.1, 0.15, 0.2];
    let c = CrossplotData {
        truth,
        raw: raw.clone(),
        corrected: raw,
    };
    let reason = "not kept: at every strength the correction would raise the out-of-fold mean \
                  squared error (0.004843; at full strength 0.005793)";
    let mut t = TargetReport {
        name: "dSw".into(),
        crossplot: Some(c.clone()),
        summary: TargetSummary {
            end_correction_kept: Some(false),
            end_correction_reason: reason.into(),
            ..Default::default()
        },
        ..Default::default()
    };
    assert_eq!(crossplot_series(&t, &c).len(), 1);
    let sentence = not_kept_sentence(&t);
    assert_eq!(
        sentence,
        "The end-bias correction was not kept for dSw, so the maps use the uncorrected \
         prediction and one series is drawn: at every strength the correction would raise the \
         out-of-fold mean squared error (0.004843; at full strength 0.005793)."
    );
    let dir = tempfile::tempdir().unwrap();
    let page = |t: &TargetReport| {
        render_html(
            &ReportInput {
                targets: vec![t.clone()],
                ..Default::default()
            },
            dir.path(),
        )
        .unwrap()
    };
    let html = page(&t);
    assert!(html.contains("one series is drawn: at every strength"));
    assert!(!html.contains("<td class=\"l\">after end-bias correction</td>"));
    t.summary.end_correction_kept = Some(true);
    assert_eq!(crossplot_series(&t, &c).len(), 2);
    let html = page(&t);
    assert!(!html.contains("one series is drawn"));
    assert!(html.contains("<td class=\"l\">after end-bias correction</td>"));
}

#[test]
fn the_spread_chart_draws_the_profile_and_the_rule_beyond_the_edge() {
    let p = SpreadProfile {
        di: vec![0.1, 0.2, 0.3],
        scale: vec![0.8, 1.0, 1.3],
        di_edge: Some(0.4),
        distance_edge: Some(700.0),
        envelope: [Some(-6.5), Some(7.3)],
        spearman: Some(0.2),
        coverage: [Some(0.8), Some(0.8)],
    };
    let (profile, pull, x_max) = chart_curves(&p);
    assert!(
        (x_max - 0.88).abs() < 1e-12,
        "to 2.2 times the edge: {x_max}"
    );
    // Flat outside the knots, never narrowing: non-decreasing over the whole axis.
    assert_eq!(profile.first(), Some(&(0.0, 0.8)));
    assert_eq!(profile.last(), Some(&(x_max, 1.3)));
    assert!(
        profile
            .windows(2)
            .all(|w| w[1].0 >= w[0].0 && w[1].1 >= w[0].1)
    );
    // The pull towards the wells' range: 0 up to the edge, 1 from twice the edge.
    assert_eq!(pull, vec![(0.0, 0.0), (0.4, 0.0), (0.8, 1.0), (x_max, 1.0)]);
    let dir = tempfile::tempdir().unwrap();
    let with = |spread: Option<SpreadProfile>, zero: Option<ZeroDecision>| {
        render_html(
            &ReportInput {
                xy_unit: "m".into(),
                targets: vec![TargetReport {
                    name: "dP".into(),
                    spread,
                    zero_change: zero,
                    ..Default::default()
                }],
                ..Default::default()
            },
            dir.path(),
        )
        .unwrap()
    };
    let html = with(
        Some(p),
        Some(ZeroDecision {
            enabled: true,
            applied: true,
            reason: "zero_change = true in the manifest".into(),
            tolerance: Some(0.02),
            zero_share: Some(0.4),
        }),
    );
    assert!(html.contains("alt=\"dP spread profile\""));
    assert!(html.contains("How to read it"));
    assert!(html.contains("farther from the nearest well than 700 m"));
    assert!(html.contains("(from -6.50 to 7.30)"));
    assert!(html.contains("dP is modelled with an atom at zero"));
    assert!(html.contains("40 % of well values lie within 0.0200 of zero"));
    let html = with(None, None);
    assert!(html.contains("Spread profile: not computed."));
}
