//! The band at held-out wells by well kind, on the page ([`crate::pipeline::kinds`]): one
//! table per target (coverage, mean width and interval score, Gneiting & Raftery 2007, each well
//! weighing one) and one sentence on what the kinds mean for the band between wells.

use std::fmt::Write as _;

use super::input::TargetReport;
use super::markup::{escape, num, pct, unit_suffix};

/// The table of one target, or nothing when the wells file gives no kind.
pub fn kinds_block(h: &mut String, t: &TargetReport) {
    let k = &t.summary.by_kind;
    if k.is_empty() {
        return;
    }
    let u = unit_suffix(&t.unit);
    h.push_str("<h4>Band at held-out wells by kind</h4>\n");
    let _ = writeln!(
        h,
        "<table><tr><th>kind</th><th>wells</th><th>rows</th><th>coverage</th>\
         <th>mean width{u}</th><th>interval score{u}</th></tr>"
    );
    for f in k {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&f.kind),
            f.wells,
            f.rows,
            pct(Some(f.coverage)),
            num(Some(f.mean_width)),
            num(Some(f.interval_score))
        );
    }
    h.push_str("</table>\n");
    let observers = k.iter().any(|f| f.kind == "observer");
    let sentence = if observers {
        "Producers and injectors stand where the reservoir changed most; the observation wells \
         are the nearest test of the band between wells (with few of them, a rough one)."
    } else {
        "No observation well: the band has been tested only where wells produce or inject, \
         where the change is largest, so it is likely wider than needed between wells."
    };
    let _ = writeln!(h, "<p class=\"note\">{sentence}</p>");
}
