//! The band away from the wells, on the page: per target a small chart of the band scale the
//! held-out wells needed against their dissimilarity to the training wells (the monotone profile;
//! Meyer & Pebesma 2021 for the dissimilarity index, Meyer & Pebesma 2022 for error against it),
//! the edge of the ground cross-validation spans, and the rule beyond it (the band widens
//! linearly towards the range of all wells' values, reaching it at twice the edge); and the "no
//! change" decision of the target (an atom at zero, or a continuous change).

use std::fmt::Write as _;

use super::input::{SpreadProfile, TargetReport, ZeroDecision};
use super::markup::{drawn, escape, figure_png, num, pct};
use super::picture::{Curve, LinePicture, Reference, line_png};

/// Points `(x, y)` of one curve.
pub type Points = Vec<(f64, f64)>;

/// The points of the chart: the profile (flat outside its knots) and the weight of the wells'
/// range in the band (0 up to the edge, 1 from twice the edge), over `[0, x_max]`; and `x_max`.
pub fn chart_curves(p: &SpreadProfile) -> (Points, Points, f64) {
    let knots: Vec<(f64, f64)> =
        p.di.iter()
            .zip(&p.scale)
            .filter(|(d, s)| d.is_finite() && s.is_finite())
            .map(|(&d, &s)| (d, s))
            .collect();
    let last_knot = knots.last().map_or(0.0, |k| k.0);
    let edge = p.di_edge.filter(|e| e.is_finite() && *e > 0.0);
    let x_max = match edge {
        Some(e) => (2.2 * e).max(1.05 * last_knot),
        None => (1.2 * last_knot).max(1.0),
    };
    let mut profile = Vec::new();
    if let (Some(first), Some(last)) = (knots.first(), knots.last()) {
        if first.0 > 0.0 {
            profile.push((0.0, first.1));
        }
        profile.extend(knots.iter().copied());
        profile.push((x_max, last.1));
    }
    let weight = match edge {
        Some(e) => vec![(0.0, 0.0), (e, 0.0), (2.0 * e, 1.0), (x_max, 1.0)],
        None => Vec::new(),
    };
    (profile, weight, x_max)
}

/// The spread chart of one target with one sentence on how to read it, and a small table.
pub fn spread_block(h: &mut String, t: &TargetReport, xy_unit: &str) {
    h.push_str("<h4>The band away from the wells</h4>\n");
    let Some(p) = &t.spread else {
        h.push_str("<p class=\"nc\">Spread profile: not computed.</p>\n");
        return;
    };
    let (profile, weight, x_max) = chart_curves(p);
    let top = profile
        .iter()
        .map(|q| q.1)
        .filter(|v| v.is_finite())
        .fold(1.0_f64, f64::max);
    let mut series = vec![Curve {
        name: "band scale (monotone profile)".to_string(),
        points: profile,
        band: None,
        markers: false,
    }];
    let mut references = Vec::new();
    if let Some(e) = p.di_edge.filter(|e| e.is_finite() && *e > 0.0) {
        series.push(Curve {
            name: "pull towards the wells' range (0 to 1)".to_string(),
            points: weight,
            band: None,
            markers: false,
        });
        references.push(Reference::Vertical {
            x: e,
            label: "edge of the ground held-out wells span".to_string(),
        });
    }
    let plot = LinePicture {
        title: format!("{}: band scale against dissimilarity", t.name),
        x_label: "dissimilarity index to the wells (-)".to_string(),
        y_label: "band scale, pull (-)".to_string(),
        series,
        references,
        x_range: Some((0.0, x_max)),
        // Room above the curves for the legend.
        y_range: Some((0.0, 1.6 * top)),
        legend_top_left: true,
    };
    h.push_str("<div class=\"figs\">");
    h.push_str(&figure_png(
        drawn(line_png(&plot, 560, 380)),
        &format!("{} spread profile", t.name),
        "",
    ));
    h.push_str("</div>\n");
    let distance = p
        .distance_edge
        .filter(|d| d.is_finite())
        .map_or_else(String::new, |d| {
            format!(
                " The same pull applies where a node lies farther from the nearest well than {}{} \
                 (the farthest any held-out well was from its training wells), in proportion.",
                super::markup::format_sig(d),
                if xy_unit.is_empty() {
                    String::new()
                } else {
                    format!(" {xy_unit}")
                }
            )
        });
    let range = match p.envelope {
        [Some(lo), Some(hi)] => format!(
            " (from {} to {})",
            super::markup::format_sig(lo),
            super::markup::format_sig(hi)
        ),
        _ => String::new(),
    };
    let _ = writeln!(
        h,
        "<p class=\"note\">How to read it: at a node whose dissimilarity to the wells is x, the \
         band is the band calibrated at held-out wells times the profile's scale at x (1: as \
         calibrated); beyond the \
         edge, the largest dissimilarity any held-out well had, the band is also pulled towards \
         the range of all wells' values{}, fully at twice the edge.{}</p>",
        escape(&range),
        escape(&distance)
    );
    let _ = writeln!(
        h,
        "<table><tr><th>edge of dissimilarity</th><th>edge of distance</th>\
         <th>Spearman, scale needed vs dissimilarity</th><th>coverage at held-out wells, plain</th>\
         <th>scaled</th></tr><tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>\
         </table>",
        num(p.di_edge),
        num(p.distance_edge),
        num(p.spearman),
        pct(p.coverage[0]),
        pct(p.coverage[1])
    );
}

/// The "no change" decision of one target, in one paragraph.
pub fn zero_block(h: &mut String, t: &TargetReport) {
    h.push_str("<h4>\"No change\" at zero</h4>\n");
    let Some(z) = &t.zero_change else {
        h.push_str(
            "<p class=\"note\">Modelled as a continuous change (zero_change = false, or not \
             recorded).</p>\n",
        );
        return;
    };
    let _ = writeln!(
        h,
        "<p class=\"note\">{}</p>",
        escape(&zero_sentence(&t.name, z))
    );
}

/// The decision in words: what was modelled and why.
pub fn zero_sentence(target: &str, z: &ZeroDecision) -> String {
    let what = match (z.enabled, z.applied) {
        (_, true) => {
            "modelled with an atom at zero: the probability of any change times the \
                      change given that it changed"
        }
        (true, false) => {
            "asked for an atom at zero but modelled as a continuous change (too \
                          few wells changed; see the target's warnings)"
        }
        (false, false) => "modelled as a continuous change",
    };
    // The automatic rule's reason gives the share itself; a manifest setting does not.
    let share = match (z.zero_share, z.tolerance) {
        (Some(s), Some(tol)) if z.enabled && !z.reason.contains("of well values") => format!(
            " {:.0} % of well values lie within {} of zero.",
            s * 100.0,
            super::markup::format_sig(tol)
        ),
        _ => String::new(),
    };
    format!("{target} is {what}. Decision: {}.{share}", z.reason)
}
