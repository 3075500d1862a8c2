//! The smoothing of a target's attribute maps on the page: the width kept and how every
//! candidate scored at held-out wells (the one-standard-error rule of Breiman, Friedman, Olshen
//! & Stone 1984; the choice itself is `pipeline::scale`).

use std::fmt::Write as _;

use super::input::TargetReport;
use super::markup::{escape, num};

/// One paragraph (and, when smoothing was on, a table of the candidates) for one target.
pub fn smoothing_block(h: &mut String, t: &TargetReport) {
    h.push_str("<h4>Smoothing of the attribute maps</h4>\n");
    if t.smoothing.as_ref().is_some_and(|s| !s.offered) {
        h.push_str(
            "<p class=\"note\">Not offered: <code>[smoothing] targets</code> in the manifest \
             leaves this target out, so its trees read each node's own attribute values.</p>\n",
        );
        return;
    }
    let Some(s) = t.smoothing.as_ref().filter(|s| !s.candidates.is_empty()) else {
        h.push_str(
            "<p class=\"note\">Off: the trees read each node's own attribute values \
             (<code>[smoothing]</code> in the manifest turns it on).</p>\n",
        );
        return;
    };
    let kept = if s.width > 0.0 {
        format!(
            "{} reads every attribute both as mapped and smoothed by a Gaussian of {} m",
            escape(&t.name),
            num(Some(s.width))
        )
    } else {
        format!(
            "{} reads the attributes as mapped (no width beat them by more than one standard \
             error)",
            escape(&t.name)
        )
    };
    let _ = writeln!(
        h,
        "<p class=\"note\">{kept}. Each width was scored by a quantile forest on {} held-out \
         wells (mean pinball loss at the band's levels and the median); the smallest width \
         within one standard error of the best is kept. Smoothing sharpens smooth changes and \
         can flatten the largest ones: read the deciles' coverage above with it.</p>",
        s.wells
    );
    h.push_str(
        "<table><tr><th>width (m)</th><th>held-out loss</th><th>excess over the best</th>\
         <th>its standard error</th><th></th></tr>\n",
    );
    for c in &s.candidates {
        let mark = if c[0] == s.width { "kept" } else { "" };
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{mark}</td></tr>",
            if c[0] > 0.0 {
                num(Some(c[0]))
            } else {
                "none".into()
            },
            num(Some(c[1])),
            num(Some(c[2])),
            num(Some(c[3]))
        );
    }
    h.push_str("</table>\n");
}
