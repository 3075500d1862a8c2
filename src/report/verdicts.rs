//! What the wells can back, said where a reader looks first.
//!
//! - [`verdict_block`]: the table that opens the page: per target, steps pooled and each step by
//!   name, the leave-wells-out R2 and CRPS skill against climatology with their intervals from
//!   resampling whole wells (a cluster percentile bootstrap: Davison & Hinkley 1997, section 3.8;
//!   Efron & Tibshirani 1993, section 13.3) and the verdict of [`crate::skill`] in plain words.
//! - [`picture_caption`]: every picture of a target and step without demonstrated skill says so
//!   in its caption ([`crate::skill::NO_SKILL`]); a target without skill pooled over steps marks
//!   all of its pictures.
//! - [`extreme_notes`]: where the band covers the top or bottom decile of the truth at held-out
//!   wells less often than [`EXTREME_COVERAGE_FLOOR`], the practical reading: point predictions
//!   regress to the mean (the P50 understates the highest changes and overstates the lowest), so
//!   extremes are found with the exceedance map or the band's far edge.

use std::fmt::Write as _;

use super::input::{MapEntry, ReportInput, SkillVerdict, TargetReport};
use super::markup::{escape, num, pct};
use crate::skill::NO_SKILL;

/// Held-out-well coverage of the top or bottom decile of the truth below which the page gives
/// advice at the extremes (nominal 0.8 at the default level).
// common practice, no published source
pub const EXTREME_COVERAGE_FLOOR: f64 = 0.70;

/// The verdicts of `target`: pooled, then per step.
fn verdicts_of(t: &TargetReport) -> impl Iterator<Item = &SkillVerdict> {
    t.skill.iter().chain(&t.skill_by_step)
}

/// Whether the maps of `target` at `step` lack demonstrated skill: the target's pooled verdict
/// or that step's is `none`.
pub fn no_skill(input: &ReportInput, target: &str, step: &str) -> bool {
    input
        .targets
        .iter()
        .filter(|t| t.name == target)
        .flat_map(verdicts_of)
        .any(|v| v.verdict == "none" && v.step.as_deref().is_none_or(|s| s == step))
}

/// The caption a map picture gets on the page: its own, preceded by the no-skill sentence when
/// its target and step lack demonstrated skill (and the caption does not say it already).
pub fn picture_caption(input: &ReportInput, e: &MapEntry) -> String {
    let lacking = e
        .target
        .as_deref()
        .is_some_and(|t| no_skill(input, t, &e.step));
    if !lacking || e.caption.contains(NO_SKILL) {
        return e.caption.clone();
    }
    let head = format!("Caution: {NO_SKILL}.");
    if e.caption.is_empty() {
        head
    } else {
        format!("{head} {}", e.caption)
    }
}

fn interval(iv: [Option<f64>; 2]) -> String {
    format!("{} to {}", num(iv[0]), num(iv[1]))
}

/// The verdict table (it opens the page) with the rule beneath it.
pub fn verdict_block(h: &mut String, input: &ReportInput) {
    h.push_str("<h3>What the wells can back</h3>\n");
    let any = input
        .targets
        .iter()
        .any(|t| verdicts_of(t).next().is_some());
    if !any {
        h.push_str("<p class=\"nc\">Skill verdicts: not computed.</p>\n");
        return;
    }
    let level = input
        .targets
        .iter()
        .flat_map(verdicts_of)
        .find_map(|v| v.level)
        .map_or_else(
            || "interval".to_string(),
            |l| format!("{:.0}&nbsp;% interval", l * 100.0),
        );
    let _ = writeln!(
        h,
        "<table id=\"verdicts\"><tr><th class=\"l\">target</th><th class=\"l\">step</th>\
         <th>R&sup2; (-)</th><th>R&sup2; {level}</th><th>CRPS skill (-)</th>\
         <th>CRPS skill {level}</th><th class=\"l\">verdict</th><th class=\"l\">what it means</th>\
         </tr>"
    );
    for t in &input.targets {
        for v in verdicts_of(t) {
            let none = v.verdict == "none";
            let _ = writeln!(
                h,
                "<tr{}><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td>\
                 <td>{}</td><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td></tr>",
                if none { " class=\"warn\"" } else { "" },
                escape(&t.name),
                v.step
                    .as_deref()
                    .map_or_else(|| "all steps".to_string(), escape),
                num(v.r2),
                interval(v.r2_interval),
                num(v.crps_skill),
                interval(v.crps_skill_interval),
                if none {
                    format!("<b>{}</b>", escape(&v.verdict))
                } else {
                    escape(&v.verdict)
                },
                escape(&v.meaning),
            );
        }
    }
    h.push_str("</table>\n");
    if !input.skill_rule.is_empty() {
        let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(&input.skill_rule));
    }
}

/// Advice where held-out-well coverage of the top or bottom decile of the truth falls below
/// [`EXTREME_COVERAGE_FLOOR`], one sentence each (plain text, not yet escaped).
pub fn extreme_notes(t: &TargetReport, band_labels: &[String; 2]) -> Vec<String> {
    let s = &t.summary;
    let edge = |k: usize, words: &str| {
        if band_labels[k].is_empty() {
            format!("the band's {words} edge")
        } else {
            format!("the band's {words} edge ({})", band_labels[k])
        }
    };
    let nominal = s.nominal_coverage.map_or_else(String::new, |n| {
        format!(" against {:.0} % nominal", n * 100.0)
    });
    let low = |c: Option<f64>| c.filter(|c| c.is_finite() && *c < EXTREME_COVERAGE_FLOOR);
    let mut out = Vec::new();
    if let Some(c) = low(s.coverage_top_decile) {
        out.push(format!(
            "{}: the top decile of the truth is covered {:.0} % of the time at held-out \
             wells{nominal}. The P50 understates the largest changes; to find them use the \
             exceedance map of a high threshold or {}.",
            t.name,
            c * 100.0,
            edge(1, "upper")
        ));
    }
    if let Some(c) = low(s.coverage_bottom_decile) {
        out.push(format!(
            "{}: the bottom decile of the truth is covered {:.0} % of the time at held-out \
             wells{nominal}. The P50 overstates the lowest values (it pulls them towards the \
             middle); to find them use the exceedance map of a low threshold or {}.",
            t.name,
            c * 100.0,
            edge(0, "lower")
        ));
    }
    out
}

/// A decile coverage cell of the summary table, marked when it is below the floor.
pub fn decile_cell(v: Option<f64>) -> String {
    match v {
        Some(c) if c.is_finite() && c < EXTREME_COVERAGE_FLOOR => {
            format!("<span class=\"warn\">{}&nbsp;*</span>", pct(Some(c)))
        }
        _ => pct(v),
    }
}
