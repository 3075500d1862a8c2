//! Regression kriging of the held-out wells' errors, on the page (Odeh, McBratney &
//! Chittleborough 1995; Hengl, Heuvelink & Rossiter 2007): per target the variogram fitted to the
//! wells' standardised held-out errors (Cressie & Hawkins 1980 estimator, Cressie 1985 fit), then
//! one sentence on the band scaled by the kriging variance (kept when its out-of-fold interval
//! score, Gneiting & Raftery 2007, is no worse than the band's without it) and one on the
//! middle's measured gain in squared error, which is reported and not applied.

use std::fmt::Write as _;

use super::input::{KrigingSummary, TargetReport};
use super::markup::{escape, num, unit_suffix};

/// The kriging stage of one target: a table of the variogram and two sentences.
pub fn kriging_block(h: &mut String, t: &TargetReport, xy_unit: &str) {
    h.push_str("<h4>Kriging the held-out wells' errors</h4>\n");
    let Some(k) = &t.kriging else {
        h.push_str("<p class=\"nc\">Residual kriging: not computed.</p>\n");
        return;
    };
    if k.model.is_empty() {
        let _ = writeln!(
            h,
            "<p class=\"note\">No variogram: {}.</p>",
            escape(&k.decision)
        );
        return;
    }
    let _ = writeln!(
        h,
        "<table class=\"kriging\"><tr><th>variogram model</th><th>nugget</th><th>sill</th>\
         <th>range{}</th><th>pairs</th></tr><tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td>\
         <td>{}</td></tr></table>",
        unit_suffix(xy_unit),
        escape(&model_text(k)),
        num(k.nugget),
        num(k.sill),
        num(k.range),
        k.pairs.map_or_else(
            || super::markup::NOT_COMPUTED.to_string(),
            |p| p.to_string()
        )
    );
    let _ = writeln!(
        h,
        "<p class=\"note\">Nugget and sill are those of the errors divided by each step's root \
         mean square error (so their mean square is 1).</p>"
    );
    let _ = writeln!(
        h,
        "<p class=\"note kriging-band\">{}</p>",
        escape(&band_sentence(&t.name, k))
    );
    let _ = writeln!(
        h,
        "<p class=\"note kriging-middle\">{}</p>",
        escape(&middle_sentence(k))
    );
}

/// The model's name as `summary.json` spells it, marked when the fit fell back.
fn model_text(k: &KrigingSummary) -> String {
    if k.fallback {
        format!("{} (fallback: nothing kriged)", k.model)
    } else {
        k.model.clone()
    }
}

/// Whether the band follows the kriging variance, and why: its out-of-fold interval score
/// against the band's without it (lower is better).
pub fn band_sentence(target: &str, k: &KrigingSummary) -> String {
    let (Some(scaled), Some(without)) = (k.is_scaled, k.is_without) else {
        return format!(
            "{target}'s band is not scaled by the kriging variance (not tried: {}).",
            k.decision
        );
    };
    let (scaled, without) = (num(Some(scaled)), num(Some(without)));
    match (k.band_kept, k.measured_only) {
        (true, false) => format!(
            "{target}'s band is scaled by the kriging variance (narrower near wells): kept, \
             because its interval score at held-out wells, {scaled}, is no worse than {without} \
             without it (lower is better)."
        ),
        (true, true) => format!(
            "{target}'s band scaled by the kriging variance would pass its test (interval score \
             at held-out wells {scaled} against {without} without it, lower is better), but the \
             maps do not use it: for a target with a \"no change\" atom the stage is measured \
             only."
        ),
        (false, _) => format!(
            "{target}'s band is not scaled by the kriging variance: not kept, because its \
             interval score at held-out wells, {scaled}, is worse than {without} without it \
             (lower is better)."
        ),
    }
}

/// The middle's gain in one sentence: what adding the kriged errors to the P50 did to the
/// held-out wells' mean squared error, and that it is measured, not applied.
pub fn middle_sentence(k: &KrigingSummary) -> String {
    let Some(gain) = k.mse_gain_pct else {
        return "Adding the kriged errors to the P50: gain not computed.".to_string();
    };
    let se = k
        .mse_gain_se_pct
        .map_or_else(String::new, |s| format!(" (one standard error {s:.1} %)"));
    let moved = if gain >= 0.0 { "lower" } else { "raise" };
    if k.middle_applied {
        format!(
            "Adding the kriged errors to the P50 {moved}s the held-out wells' mean squared error \
             by {:.1} %{se}; the P50 maps include it.",
            gain.abs()
        )
    } else {
        format!(
            "Adding the kriged errors to the P50 would {moved} the held-out wells' mean squared \
             error by {:.1} %{se}; this is measured, not applied to the P50 maps.",
            gain.abs()
        )
    }
}
