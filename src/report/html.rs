//! The review page: one self-contained HTML file.
//!
//! [`render_html`] turns a [`ReportInput`] into a single page that travels by e-mail: every picture
//! is a `data:image/png;base64` URI (map files are read from the results folder and checked to be
//! PNG; the diagnostic plots are drawn here from the numbers), the style sheet is inline, there are
//! no scripts and no network references. Sections: 1 summary (opening with the skill verdicts of
//! [`super::verdicts`]; advice where the band misses the extremes) and cautions, 2 maps per target
//! and step (and applicability, infill targets; pictures of a target and step without
//! demonstrated skill say so in their caption), 3 cross-plots before and after the end-bias
//! correction (one series when it was not kept, with the reason), 4 calibration (coverage by
//! decile of the truth, reliability per threshold, PIT histogram, the band away from the wells and
//! the "no change" decision of [`super::spread`]), 5 learning curve, 6 importance by family and
//! the ablation, 7 errors against truth. Anything missing is reported as "not computed" rather
//! than failing.
//!
//! The PIT histogram follows Dawid (1984, JRSS A 147) and Gneiting, Balabdaoui & Raftery (2007,
//! JRSS B 69): a calibrated forecast gives a flat histogram. The reliability diagram plots the
//! observed frequency of the event against the forecast probability (Murphy & Winkler 1977).

use std::fmt::Write as _;
use std::path::{Component, Path, PathBuf};

use base64::Engine;

use super::ReportError;
use super::input::{
    CrossplotData, DecileCoverage, InfillSection, LearningCurve, MapEntry, PAGE_FILE, PictureRef,
    ReportInput, TargetReport, TruthSection,
};
use super::markup::{NOT_COMPUTED, drawn, figure_png, format_sig, unit_suffix};
pub use super::markup::{escape, num, pct};
use super::picture::{
    BarPicture, BarSeries, CrossPlot, Curve, LinePicture, PointSeries, Reference, bars_png,
    crossplot_png, line_png,
};

/// Cautions shown when the input gives none.
pub const DEFAULT_CAUTIONS: [&str; 3] = [
    "Decision support, not a reserves estimate: these maps, bands, probabilities and rankings \
     describe the change seen by time-lapse seismic and calibrated at wells; they are not an \
     estimate of reserves or resources.",
    "A qualified person should review the inputs, the calibration and these results before they \
     inform a drilling decision or any public disclosure.",
    "Reporting and disclosure follow the rules and standards that apply where the field lies.",
];

const STYLE: &str = r#"
:root { --ink: #1d2327; --muted: #5b6770; --rule: #d5dade; --band: #f4f6f7; --accent: #0072b2; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
  font: 15px/1.45 "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; }
header { padding: 22px 32px 14px; border-bottom: 3px solid var(--accent); }
header h1 { margin: 0 0 4px; font-size: 26px; }
header p { margin: 0; color: var(--muted); }
nav { padding: 10px 32px; background: var(--band); border-bottom: 1px solid var(--rule); }
nav a { color: var(--accent); text-decoration: none; margin-right: 18px; white-space: nowrap; }
main { padding: 8px 32px 32px; max-width: 1400px; }
section { margin-top: 26px; }
h2 { font-size: 21px; border-bottom: 1px solid var(--rule); padding-bottom: 4px; }
h3 { font-size: 18px; margin: 22px 0 8px; }
h4 { font-size: 15px; margin: 16px 0 6px; color: var(--muted); }
.cautions { border-left: 5px solid #d55e00; background: #fff6ef; padding: 8px 16px; margin: 12px 0; }
.cautions h3 { margin-top: 6px; }
.convention { background: var(--band); padding: 8px 12px; }
.warn { color: #8a3b00; }
.nc { color: var(--muted); font-style: italic; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 13.5px; }
th, td { border: 1px solid var(--rule); padding: 4px 8px; text-align: right; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.l, th.l { text-align: left; }
.figs { display: flex; flex-wrap: wrap; gap: 14px; align-items: flex-start; }
figure { margin: 0; border: 1px solid var(--rule); padding: 6px; background: #fff; max-width: 100%; }
figure img { display: block; max-width: 100%; height: auto; }
figcaption { font-size: 13px; color: var(--muted); padding-top: 4px; max-width: 900px; }
.note { font-size: 13.5px; color: var(--muted); max-width: 900px; }
footer { margin-top: 30px; padding: 12px 32px; border-top: 1px solid var(--rule); color: var(--muted);
  font-size: 12.5px; }
@media print {
  nav { display: none; }
  body { font-size: 11pt; }
  main { padding: 0 12px; }
  section { break-before: page; }
  section#summary { break-before: auto; }
  figure, table { break-inside: avoid; }
}
"#;

/// Reads a picture reference into PNG bytes.
fn load_picture(p: &PictureRef, results_dir: &Path) -> Result<Vec<u8>, String> {
    match p {
        PictureRef::PngBase64(b) => base64::engine::general_purpose::STANDARD
            .decode(b.trim())
            .map_err(|e| format!("bad base64: {e}")),
        PictureRef::File(rel) => {
            let rp = Path::new(rel);
            if rp.as_os_str().is_empty()
                || rp
                    .components()
                    .any(|c| !matches!(c, Component::Normal(_) | Component::CurDir))
            {
                return Err(format!("'{rel}' is not a path inside the results folder"));
            }
            let path = results_dir.join(rp);
            std::fs::read(&path).map_err(|e| format!("{}: {e}", path.display()))
        }
    }
}

/// Builds the page. Pictures given as files are read from `results_dir`; plots of the
/// diagnostics are drawn from the numbers. Missing pieces are reported on the page, not as errors;
/// the error cases are those that make drawing impossible altogether (the embedded font).
pub fn render_html(input: &ReportInput, results_dir: &Path) -> Result<String, ReportError> {
    super::font::ensure_registered()?;
    let mut h = String::with_capacity(1 << 20);
    let title = if input.project.is_empty() {
        "tidemark results".to_string()
    } else {
        input.project.clone()
    };
    let _ = writeln!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{} - time-lapse calibration review</title>\n\
         <link rel=\"icon\" href=\"data:,\">\n<style>{STYLE}</style>\n</head>\n<body>",
        escape(&title)
    );
    let mut sub = vec!["Time-lapse seismic calibration review".to_string()];
    if !input.run.tidemark_version.is_empty() {
        sub.push(format!("tidemark {}", escape(&input.run.tidemark_version)));
    }
    if !input.run.created.is_empty() {
        sub.push(escape(&input.run.created));
    }
    let _ = writeln!(
        h,
        "<header><h1>{}</h1><p>{}</p></header>",
        escape(&title),
        sub.join(" &middot; ")
    );
    h.push_str(
        "<nav><a href=\"#summary\">1 Summary</a><a href=\"#maps\">2 Maps</a>\
         <a href=\"#crossplots\">3 Cross-plots</a><a href=\"#calibration\">4 Calibration</a>\
         <a href=\"#learning\">5 Learning curve</a><a href=\"#importance\">6 Importance</a>\
         <a href=\"#truth\">7 Against truth</a></nav>\n<main>\n",
    );
    summary_section(&mut h, input);
    maps_section(&mut h, input, results_dir);
    crossplot_section(&mut h, input);
    calibration_section(&mut h, input);
    learning_section(&mut h, input);
    importance_section(&mut h, input);
    truth_section(&mut h, input, results_dir);
    super::totals::section(&mut h, input.totals.as_ref());
    h.push_str(
        "</main>\n<footer>Written by tidemark. This page is self-contained: pictures are embedded, \
         it runs no scripts and loads nothing from the network. Text in the pictures is set in \
         DejaVu Sans.</footer>\n</body>\n</html>\n",
    );
    Ok(h)
}

fn summary_section(h: &mut String, input: &ReportInput) {
    h.push_str("<section id=\"summary\"><h2>1. Summary</h2>\n");
    super::verdicts::verdict_block(h, input);
    h.push_str("<div class=\"cautions\"><h3>Cautions</h3><ul>");
    let cautions: Vec<String> = if input.cautions.is_empty() {
        DEFAULT_CAUTIONS.iter().map(|s| s.to_string()).collect()
    } else {
        input.cautions.clone()
    };
    for c in &cautions {
        let _ = write!(h, "<li>{}</li>", escape(c));
    }
    h.push_str("</ul></div>\n");
    if input.convention.is_empty() {
        h.push_str("<p class=\"convention\">P10/P50/P90 convention: not stated.</p>\n");
    } else {
        let _ = writeln!(
            h,
            "<p class=\"convention\">{}</p>",
            escape(&input.convention)
        );
    }
    if input.targets.is_empty() {
        h.push_str("<p class=\"nc\">No targets: nothing was calibrated.</p>\n");
    } else {
        h.push_str(
            "<p class=\"note\">Skill and coverage come from wells held out of training \
             (leave-wells-out); RMSE, bias and mean band width are in the target's unit. Coverage is the fraction of held-out truths inside the band; the \
             bottom and top deciles are the lowest and highest tenth of the truths, where \
             regression to the mean shows first.</p>\n<table><tr><th class=\"l\">target</th><th class=\"l\">unit</th>\
             <th>wells</th><th>rows</th><th class=\"l\">learner</th><th class=\"l\">end correction</th>\
             <th>R&sup2; (-)</th><th>RMSE</th><th>bias</th><th>coverage</th><th>nominal</th>\
             <th>bottom decile</th><th>top decile</th><th>mean width</th></tr>\n",
        );
        for t in &input.targets {
            let s = &t.summary;
            let _ = writeln!(
                h,
                "<tr><td class=\"l\"><b>{}</b>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td>\
                 <td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td>\
                 <td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                escape(&t.name),
                if t.description.is_empty() {
                    String::new()
                } else {
                    format!("<br><small>{}</small>", escape(&t.description))
                },
                if t.unit.is_empty() {
                    "-".to_string()
                } else {
                    escape(&t.unit)
                },
                s.wells.map_or(NOT_COMPUTED.to_string(), |v| v.to_string()),
                s.rows.map_or(NOT_COMPUTED.to_string(), |v| v.to_string()),
                s.learner
                    .as_deref()
                    .map_or(NOT_COMPUTED.to_string(), escape),
                match s.end_correction_kept {
                    Some(true) => "kept".to_string(),
                    Some(false) => "not kept".to_string(),
                    None => NOT_COMPUTED.to_string(),
                },
                num(s.r2),
                num(s.rmse),
                num(s.bias),
                pct(s.coverage),
                pct(s.nominal_coverage),
                super::verdicts::decile_cell(s.coverage_bottom_decile),
                super::verdicts::decile_cell(s.coverage_top_decile),
                num(s.mean_width),
            );
        }
        h.push_str("</table>\n");
        for t in &input.targets {
            for note in super::verdicts::extreme_notes(t, &input.band_labels) {
                let _ = writeln!(h, "<p class=\"warn\">* {}</p>", escape(&note));
            }
        }
        for t in &input.targets {
            for w in &t.summary.warnings {
                let _ = writeln!(
                    h,
                    "<p class=\"warn\">Warning ({}): {}</p>",
                    escape(&t.name),
                    escape(w)
                );
            }
        }
    }
    for w in &input.run.warnings {
        let _ = writeln!(h, "<p class=\"warn\">Warning: {}</p>", escape(w));
    }
    // run details
    let r = &input.run;
    h.push_str("<h3>Run</h3><table>");
    let mut row = |k: &str, v: String| {
        let _ = write!(
            h,
            "<tr><th class=\"l\">{}</th><td class=\"l\">{v}</td></tr>",
            escape(k)
        );
    };
    row(
        "project file",
        if r.project_file.is_empty() {
            NOT_COMPUTED.to_string()
        } else {
            escape(&r.project_file)
        },
    );
    row(
        "seed",
        r.seed.map_or(NOT_COMPUTED.to_string(), |s| s.to_string()),
    );
    row(
        "steps",
        if input.steps.is_empty() {
            NOT_COMPUTED.to_string()
        } else {
            escape(&input.steps.join(", "))
        },
    );
    for kv in &r.settings {
        row(&kv.key, escape(&kv.value));
    }
    h.push_str("</table>\n");
    if !r.timings.is_empty() {
        h.push_str("<table><tr><th class=\"l\">stage</th><th>time (s)</th></tr>");
        for t in &r.timings {
            let _ = write!(
                h,
                "<tr><td class=\"l\">{}</td><td>{}</td></tr>",
                escape(&t.stage),
                num(t.seconds)
            );
        }
        h.push_str("</table>\n");
    }
    h.push_str("</section>\n");
}

/// Names in first-seen order: the declared ones, then any others found.
fn ordered(declared: &[String], found: impl Iterator<Item = String>) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for n in declared.iter().cloned().chain(found) {
        if !out.contains(&n) {
            out.push(n);
        }
    }
    out
}

fn map_figures(h: &mut String, input: &ReportInput, entries: &[&MapEntry], results_dir: &Path) {
    h.push_str("<div class=\"figs\">");
    for e in entries {
        let alt = match &e.target {
            Some(t) => format!("{t} {} - {}", e.kind, e.step),
            None => format!("{} - {}", e.kind, e.step),
        };
        h.push_str(&figure_png(
            load_picture(&e.picture, results_dir),
            &alt,
            &super::verdicts::picture_caption(input, e),
        ));
    }
    h.push_str("</div>\n");
}

fn maps_section(h: &mut String, input: &ReportInput, results_dir: &Path) {
    h.push_str("<section id=\"maps\"><h2>2. Maps</h2>\n");
    if input.maps.is_empty() {
        h.push_str("<p class=\"nc\">Maps: not computed.</p>\n");
    } else {
        let steps = ordered(&input.steps, input.maps.iter().map(|m| m.step.clone()));
        let declared: Vec<String> = input.targets.iter().map(|t| t.name.clone()).collect();
        let targets = ordered(
            &declared,
            input.maps.iter().filter_map(|m| m.target.clone()),
        );
        for t in &targets {
            let unit = input
                .targets
                .iter()
                .find(|x| &x.name == t)
                .map(|x| x.unit.clone())
                .unwrap_or_default();
            let _ = writeln!(h, "<h3>{}{}</h3>", escape(t), unit_suffix(&unit));
            if !input.convention.is_empty() {
                let _ = writeln!(
                    h,
                    "<p class=\"convention\">{}</p>",
                    escape(&input.convention)
                );
            }
            for s in &steps {
                let entries: Vec<&MapEntry> = input
                    .maps
                    .iter()
                    .filter(|m| m.target.as_deref() == Some(t) && &m.step == s)
                    .collect();
                let _ = writeln!(h, "<h4>step {}</h4>", escape(s));
                if entries.is_empty() {
                    h.push_str("<p class=\"nc\">No maps for this step: not computed.</p>\n");
                } else {
                    map_figures(h, input, &entries, results_dir);
                }
            }
        }
        let step_wide: Vec<&MapEntry> = input.maps.iter().filter(|m| m.target.is_none()).collect();
        h.push_str("<h3>Dissimilarity to the wells and area of applicability</h3>\n");
        if step_wide.is_empty() {
            h.push_str("<p class=\"nc\">Applicability maps: not computed.</p>\n");
        } else {
            h.push_str(
                "<p class=\"note\">Dissimilarity index of the attributes to the training wells \
                 (Meyer &amp; Pebesma 2021); predictions beyond the threshold are kept but drawn \
                 hatched on the maps above.</p>\n",
            );
            for s in &steps {
                let entries: Vec<&MapEntry> =
                    step_wide.iter().copied().filter(|m| &m.step == s).collect();
                if !entries.is_empty() {
                    let _ = writeln!(h, "<h4>step {}</h4>", escape(s));
                    map_figures(h, input, &entries, results_dir);
                }
            }
        }
    }
    h.push_str(&super::area::injector_note(&input.injector_cores));
    h.push_str(&super::area::marked_note(input.marked_ground.as_ref()));
    infill_block(h, input.infill.as_ref(), &input.xy_unit, results_dir);
    h.push_str("</section>\n");
}

fn infill_block(h: &mut String, infill: Option<&InfillSection>, xy_unit: &str, dir: &Path) {
    h.push_str("<h3>Risked infill targets</h3>\n");
    let Some(inf) = infill else {
        h.push_str("<p class=\"nc\">Infill ranking: not computed.</p>\n");
        return;
    };
    if !inf.criterion.is_empty() {
        let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(&inf.criterion));
    }
    if let Some(p) = &inf.picture {
        h.push_str("<div class=\"figs\">");
        h.push_str(&figure_png(load_picture(p, dir), "infill targets", ""));
        h.push_str("</div>\n");
    }
    if inf.rows.is_empty() {
        h.push_str("<p class=\"nc\">No location passed the spacing and applicability rules.</p>\n");
        return;
    }
    let xu = unit_suffix(xy_unit);
    let _ = writeln!(
        h,
        "<table><tr><th>rank</th><th>x{xu}</th><th>y{xu}</th><th>chance</th><th>risked volume{}</th>\
         <th class=\"l\">nearest well</th><th>distance{xu}</th><th class=\"l\">target point inside \
         applicability</th><th>drainage area inside applicability</th></tr>",
        unit_suffix(&inf.volume_unit)
    );
    for r in &inf.rows {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{:.1}</td><td>{:.1}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td>\
             <td>{}</td><td class=\"l\">{}</td><td>{}</td></tr>",
            r.rank,
            r.x,
            r.y,
            pct(r.chance),
            num(r.risked_volume),
            escape(&r.nearest_well),
            num(r.distance),
            if r.inside { "yes" } else { "no" },
            pct(r.drainage_inside_fraction)
        );
    }
    h.push_str("</table>\n");
}

/// Simple fit statistics of predictions against truth: n, RMSE, bias, OLS slope.
fn fit_stats(truth: &[f64], pred: &[f64]) -> (usize, Option<f64>, Option<f64>, Option<f64>) {
    let pairs: Vec<(f64, f64)> = truth
        .iter()
        .zip(pred)
        .filter(|(t, p)| t.is_finite() && p.is_finite())
        .map(|(t, p)| (*t, *p))
        .collect();
    let n = pairs.len();
    if n == 0 {
        return (0, None, None, None);
    }
    let nf = n as f64;
    let bias = pairs.iter().map(|(t, p)| p - t).sum::<f64>() / nf;
    let rmse = (pairs.iter().map(|(t, p)| (p - t).powi(2)).sum::<f64>() / nf).sqrt();
    let mt = pairs.iter().map(|q| q.0).sum::<f64>() / nf;
    let mp = pairs.iter().map(|q| q.1).sum::<f64>() / nf;
    let sxx: f64 = pairs.iter().map(|q| (q.0 - mt).powi(2)).sum();
    let sxy: f64 = pairs.iter().map(|q| (q.0 - mt) * (q.1 - mp)).sum();
    let slope = if sxx > 0.0 { Some(sxy / sxx) } else { None };
    (n, Some(rmse), Some(bias), slope)
}

fn crossplot_block(h: &mut String, t: &TargetReport, c: &CrossplotData) {
    if c.truth.len() != c.raw.len()
        || (!c.corrected.is_empty() && c.corrected.len() != c.truth.len())
    {
        let _ = writeln!(
            h,
            "<p class=\"nc\">Cross-plot not drawn: {} truths, {} raw and {} corrected predictions \
             do not pair up.</p>",
            c.truth.len(),
            c.raw.len(),
            c.corrected.len()
        );
        return;
    }
    // When the correction was not kept the corrected values are the raw ones: one series, and
    // a sentence saying why.
    let not_kept = t.summary.end_correction_kept == Some(false);
    let show_corrected = !c.corrected.is_empty() && !not_kept;
    let series = crossplot_series(t, c);
    let u = if t.unit.is_empty() {
        String::new()
    } else {
        format!(" ({})", t.unit)
    };
    let plot = CrossPlot {
        title: format!("{}: truth against prediction at wells", t.name),
        x_label: format!("truth{u}"),
        y_label: format!("prediction{u}"),
        series,
        one_to_one: true,
    };
    h.push_str("<div class=\"figs\">");
    h.push_str(&figure_png(
        drawn(crossplot_png(&plot, 620, 560)),
        &format!("{} cross-plot", t.name),
        "Each point is one well and step, predicted by a model that did not see that well. \
         The black line is 1:1.",
    ));
    h.push_str("</div>\n");
    if not_kept {
        let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(&not_kept_sentence(t)));
    }
    let uu = unit_suffix(&t.unit);
    let _ = writeln!(
        h,
        "<table><tr><th class=\"l\">prediction</th><th>points</th><th>RMSE{uu}</th><th>bias{uu}</th>\
         <th>slope on truth (-)</th></tr>"
    );
    let mut rows = vec![("raw", &c.raw)];
    if show_corrected {
        rows.push(("after end-bias correction", &c.corrected));
    }
    for (name, p) in rows {
        let (n, rmse, bias, slope) = fit_stats(&c.truth, p);
        let _ = writeln!(
            h,
            "<tr><td class=\"l\">{name}</td><td>{n}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            num(rmse),
            num(bias),
            num(slope)
        );
    }
    h.push_str(
        "</table><p class=\"note\">A slope below 1 is the regression to the mean: high changes \
         predicted too low and low ones too high.</p>\n",
    );
}

/// Why the cross-plot of a target whose end-bias correction was not kept draws one series, in
/// one sentence, from the correction's diagnostics.
pub fn not_kept_sentence(t: &TargetReport) -> String {
    let why = t
        .summary
        .end_correction_reason
        .trim()
        .trim_start_matches("not kept")
        .trim_start_matches([':', ' '])
        .trim_end_matches('.');
    if why.is_empty() {
        format!(
            "The end-bias correction was not kept for {}, so the maps use the uncorrected \
             prediction and one series is drawn.",
            t.name
        )
    } else {
        format!(
            "The end-bias correction was not kept for {}, so the maps use the uncorrected \
             prediction and one series is drawn: {why}.",
            t.name
        )
    }
}

/// The series of a target's cross-plot: the out-of-fold P50, and the corrected one only when
/// the correction was kept (otherwise the two are the same points).
pub fn crossplot_series(t: &TargetReport, c: &CrossplotData) -> Vec<PointSeries> {
    let pair =
        |p: &[f64]| -> Vec<(f64, f64)> { c.truth.iter().copied().zip(p.iter().copied()).collect() };
    let not_kept = t.summary.end_correction_kept == Some(false);
    let mut series = vec![PointSeries {
        name: if not_kept {
            "out-of-fold P50 (no end-bias correction)".to_string()
        } else {
            "out-of-fold P50, raw".to_string()
        },
        points: pair(&c.raw),
    }];
    if !c.corrected.is_empty() && !not_kept {
        series.push(PointSeries {
            name: "after end-bias correction".to_string(),
            points: pair(&c.corrected),
        });
    }
    series
}

fn crossplot_section(h: &mut String, input: &ReportInput) {
    h.push_str("<section id=\"crossplots\"><h2>3. Cross-plots at wells</h2>\n");
    if input.targets.is_empty() {
        h.push_str("<p class=\"nc\">Cross-plots: not computed.</p>\n");
    }
    for t in &input.targets {
        let _ = writeln!(h, "<h3>{}</h3>", escape(&t.name));
        match &t.crossplot {
            Some(c) if !c.truth.is_empty() => crossplot_block(h, t, c),
            _ => h.push_str("<p class=\"nc\">Cross-plot: not computed.</p>\n"),
        }
    }
    h.push_str("</section>\n");
}

fn decile_block(h: &mut String, t: &TargetReport, d: &DecileCoverage) {
    let nominal = d.nominal.or(t.summary.nominal_coverage);
    let mut refs = Vec::new();
    if let Some(n) = nominal.filter(|n| n.is_finite()) {
        refs.push(Reference::Horizontal {
            y: n,
            label: format!("nominal {:.0} %", n * 100.0),
        });
    }
    let plot = LinePicture {
        title: format!("{}: band coverage by decile of the truth", t.name),
        x_label: "decile of the truth (1 = lowest)".to_string(),
        y_label: "coverage (fraction)".to_string(),
        series: vec![Curve {
            name: "coverage".to_string(),
            points: d
                .rows
                .iter()
                .map(|r| (r.decile as f64, r.coverage.unwrap_or(f64::NAN)))
                .collect(),
            band: None,
            markers: true,
        }],
        references: refs,
        x_range: Some((0.5, 10.5)),
        y_range: Some((0.0, 1.05)),
        legend_top_left: false,
    };
    h.push_str("<div class=\"figs\">");
    h.push_str(&figure_png(
        drawn(line_png(&plot, 620, 420)),
        &format!("{} coverage by decile", t.name),
        "",
    ));
    h.push_str("</div>\n");
    let u = unit_suffix(&t.unit);
    let _ = writeln!(
        h,
        "<table><tr><th>decile</th><th>truth from{u}</th><th>truth to{u}</th><th>rows</th>\
         <th>coverage</th><th>mean width{u}</th></tr>"
    );
    for r in &d.rows {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            r.decile,
            num(r.truth_low),
            num(r.truth_high),
            r.count,
            pct(r.coverage),
            num(r.mean_width)
        );
    }
    h.push_str("</table>\n");
}

fn calibration_section(h: &mut String, input: &ReportInput) {
    h.push_str("<section id=\"calibration\"><h2>4. Calibration</h2>\n");
    if input.targets.is_empty() {
        h.push_str("<p class=\"nc\">Calibration diagnostics: not computed.</p>\n");
    }
    for t in &input.targets {
        let _ = writeln!(
            h,
            "<h3>{}</h3>\n<h4>Band coverage by decile of the truth</h4>",
            escape(&t.name)
        );
        match &t.coverage_by_decile {
            Some(d) if !d.rows.is_empty() => decile_block(h, t, d),
            _ => h.push_str("<p class=\"nc\">Coverage by decile: not computed.</p>\n"),
        }
        for note in super::verdicts::extreme_notes(t, &input.band_labels) {
            let _ = writeln!(h, "<p class=\"warn\">{}</p>", escape(&note));
        }
        super::kinds::kinds_block(h, t);

        h.push_str("<h4>Reliability of the exceedance probabilities</h4>\n");
        if t.reliability.is_empty() {
            h.push_str("<p class=\"nc\">Reliability: not computed (no thresholds).</p>\n");
        }
        for r in &t.reliability {
            let pts: Vec<(f64, f64)> = r
                .bins
                .iter()
                .filter(|b| b.count > 0)
                .map(|b| {
                    (
                        b.mean_forecast.unwrap_or(f64::NAN),
                        b.observed_frequency.unwrap_or(f64::NAN),
                    )
                })
                .collect();
            let plot = LinePicture {
                title: format!("Reliability: {}", r.label),
                x_label: "forecast probability".to_string(),
                y_label: "observed frequency".to_string(),
                series: vec![Curve {
                    name: "held-out wells".to_string(),
                    points: pts,
                    band: None,
                    markers: true,
                }],
                references: vec![Reference::Diagonal {
                    label: "perfect reliability".to_string(),
                }],
                x_range: Some((0.0, 1.0)),
                y_range: Some((0.0, 1.0)),
                legend_top_left: false,
            };
            let cap = match r.brier {
                Some(b) if b.is_finite() => format!("Brier score {}", format_sig(b)),
                _ => String::new(),
            };
            h.push_str("<div class=\"figs\">");
            h.push_str(&figure_png(
                drawn(line_png(&plot, 520, 440)),
                &format!("reliability {}", r.label),
                &cap,
            ));
            h.push_str(
                "<table><tr><th>forecast from</th><th>to</th><th>mean forecast</th>\
                        <th>observed</th><th>rows</th></tr>\n",
            );
            for b in &r.bins {
                let _ = writeln!(
                    h,
                    "<tr><td>{:.2}</td><td>{:.2}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    b.forecast_low,
                    b.forecast_high,
                    num(b.mean_forecast),
                    num(b.observed_frequency),
                    b.count
                );
            }
            h.push_str("</table></div>\n");
        }

        h.push_str("<h4>PIT histogram</h4>\n");
        match &t.pit {
            Some(p) if p.counts.iter().sum::<usize>() > 0 => {
                let n = p.counts.len();
                let total: usize = p.counts.iter().sum();
                let width = 1.0 / n as f64;
                let plot = BarPicture {
                    title: format!("{}: PIT histogram ({total} held-out values)", t.name),
                    value_label: "density".to_string(),
                    category_label: "PIT bin (centre)".to_string(),
                    categories: (0..n)
                        .map(|k| super::picture::format_tick((k as f64 + 0.5) * width, 1.0))
                        .collect(),
                    series: vec![BarSeries {
                        name: "PIT".to_string(),
                        values: p
                            .counts
                            .iter()
                            .map(|&c| c as f64 / (total as f64 * width))
                            .collect(),
                        errors: None,
                    }],
                    reference: Some((1.0, "uniform".to_string())),
                    horizontal: false,
                };
                h.push_str("<div class=\"figs\">");
                h.push_str(&figure_png(
                    drawn(bars_png(&plot, 620, 400)),
                    &format!("{} PIT histogram", t.name),
                    "Flat when the predictive distribution is calibrated; a U shape means bands \
                     too narrow, a hump bands too wide, a slope a bias.",
                ));
                h.push_str("</div>\n");
            }
            _ => h.push_str("<p class=\"nc\">PIT histogram: not computed.</p>\n"),
        }
        super::kriging::kriging_block(h, t, &input.xy_unit);
        super::spread::spread_block(h, t, &input.xy_unit);
        super::spread::zero_block(h, t);
        super::smoothing::smoothing_block(h, t);
    }
    h.push_str("</section>\n");
}

fn learning_block(h: &mut String, t: &TargetReport, lc: &LearningCurve) {
    let x = |p: &super::input::LearningPoint| p.wells as f64;
    let f = |v: Option<f64>| v.unwrap_or(f64::NAN);
    let mut refs = Vec::new();
    if let Some(n) = t.summary.nominal_coverage.filter(|n| n.is_finite()) {
        refs.push(Reference::Horizontal {
            y: n,
            label: format!("nominal coverage {:.0} %", n * 100.0),
        });
    }
    let plot = LinePicture {
        title: format!("{}: learning curve", t.name),
        x_label: "training wells".to_string(),
        y_label: "R2, coverage (fraction)".to_string(),
        series: vec![
            Curve {
                name: "R2 (mean; band min-max)".to_string(),
                points: lc.points.iter().map(|p| (x(p), f(p.r2_mean))).collect(),
                band: Some(
                    lc.points
                        .iter()
                        .map(|p| (x(p), f(p.r2_min), f(p.r2_max)))
                        .collect(),
                ),
                markers: true,
            },
            Curve {
                name: "coverage (mean)".to_string(),
                points: lc
                    .points
                    .iter()
                    .map(|p| (x(p), f(p.coverage_mean)))
                    .collect(),
                band: None,
                markers: true,
            },
        ],
        references: refs,
        x_range: None,
        y_range: None,
        legend_top_left: false,
    };
    h.push_str("<div class=\"figs\">");
    h.push_str(&figure_png(
        drawn(line_png(&plot, 640, 440)),
        &format!("{} learning curve", t.name),
        &format!(
            "Leave-wells-out skill of models trained on random subsets of the wells, {} repeats \
             per size.",
            lc.repeats
        ),
    ));
    let how = if lc.note.is_empty() {
        "The curve's models are fitted with the study settings of the run".to_string()
    } else {
        format!("Settings of the curve: {}", lc.note)
    };
    let _ = writeln!(
        h,
        "<p class=\"note\">{}. They are lighter than the main model's, so the curve's R&sup2; at \
         the full well count need not equal the summary's: read the curve for its shape, the \
         summary for the skill of the maps.</p>",
        escape(&how)
    );
    h.push_str(
        "</div>\n<table><tr><th>training wells</th><th>R&sup2; mean</th><th>R&sup2; min</th>\
                <th>R&sup2; max</th><th>coverage mean</th></tr>\n",
    );
    for p in &lc.points {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            p.wells,
            num(p.r2_mean),
            num(p.r2_min),
            num(p.r2_max),
            pct(p.coverage_mean)
        );
    }
    h.push_str("</table>\n");
}

fn learning_section(h: &mut String, input: &ReportInput) {
    h.push_str("<section id=\"learning\"><h2>5. Learning curve</h2>\n");
    h.push_str(
        "<p class=\"note\">Would fewer wells have told the same story? A curve that still rises at \
         the full well count says more wells would help.</p>\n",
    );
    if input.targets.is_empty() {
        h.push_str("<p class=\"nc\">Learning curve: not computed.</p>\n");
    }
    for t in &input.targets {
        let _ = writeln!(h, "<h3>{}</h3>", escape(&t.name));
        match &t.learning_curve {
            Some(lc) if !lc.points.is_empty() => learning_block(h, t, lc),
            _ => h.push_str("<p class=\"nc\">Learning curve: not computed.</p>\n"),
        }
    }
    h.push_str("</section>\n");
}

fn importance_section(h: &mut String, input: &ReportInput) {
    h.push_str("<section id=\"importance\"><h2>6. Attribute importance and ablation</h2>\n");
    if input.targets.is_empty() {
        h.push_str("<p class=\"nc\">Importance: not computed.</p>\n");
    }
    for t in &input.targets {
        let _ = writeln!(h, "<h3>{}</h3>", escape(&t.name));
        match &t.importance {
            Some(imp) if !imp.by_attribute.is_empty() || !imp.by_family.is_empty() => {
                let measure = if imp.measure.is_empty() {
                    "permutation importance".to_string()
                } else {
                    imp.measure.clone()
                };
                // The axis carries a short label; the measure is spelt out in the note above.
                let value_label = if imp.unit.is_empty() {
                    "importance".to_string()
                } else {
                    format!("importance ({})", imp.unit)
                };
                let spreads = imp.by_attribute.iter().any(|a| a.spread.is_some());
                let _ = writeln!(h, "<p class=\"note\">{}.</p>", escape(&measure));
                h.push_str("<div class=\"figs\">");
                if !imp.by_attribute.is_empty() {
                    let families = ordered(&[], imp.by_attribute.iter().map(|a| a.family.clone()));
                    let cats: Vec<String> = imp
                        .by_attribute
                        .iter()
                        .map(|a| a.attribute.clone())
                        .collect();
                    let series = families
                        .iter()
                        .map(|fam| BarSeries {
                            name: if fam.is_empty() {
                                "other".to_string()
                            } else {
                                fam.clone()
                            },
                            values: imp
                                .by_attribute
                                .iter()
                                .map(|a| {
                                    if &a.family == fam {
                                        a.value.unwrap_or(f64::NAN)
                                    } else {
                                        f64::NAN
                                    }
                                })
                                .collect(),
                            errors: spreads.then(|| {
                                imp.by_attribute
                                    .iter()
                                    .map(|a| a.spread.unwrap_or(0.0))
                                    .collect()
                            }),
                        })
                        .collect();
                    let plot = BarPicture {
                        title: format!("{}: importance by attribute", t.name),
                        value_label: value_label.clone(),
                        category_label: String::new(),
                        categories: cats,
                        series,
                        reference: None,
                        horizontal: true,
                    };
                    let height = (110 + 30 * imp.by_attribute.len() as u32).clamp(240, 1600);
                    h.push_str(&figure_png(
                        drawn(bars_png(&plot, 640, height)),
                        &format!("{} importance by attribute", t.name),
                        if spreads {
                            "Bars coloured by family; whiskers show the spread over repeats."
                        } else {
                            "Bars coloured by family. Computed once, so no spread is shown."
                        },
                    ));
                }
                if !imp.by_family.is_empty() {
                    let plot = BarPicture {
                        title: format!("{}: importance by family", t.name),
                        value_label: value_label.clone(),
                        category_label: String::new(),
                        categories: imp.by_family.iter().map(|f| f.family.clone()).collect(),
                        series: vec![BarSeries {
                            name: "family".to_string(),
                            values: imp
                                .by_family
                                .iter()
                                .map(|f| f.value.unwrap_or(f64::NAN))
                                .collect(),
                            errors: None,
                        }],
                        reference: None,
                        horizontal: true,
                    };
                    let height = (110 + 34 * imp.by_family.len() as u32).clamp(220, 1200);
                    h.push_str(&figure_png(
                        drawn(bars_png(&plot, 560, height)),
                        &format!("{} importance by family", t.name),
                        &if imp.family_note.is_empty() {
                            "Each family's value is the sum of its attributes' values (the \
                             attributes were permuted one at a time)."
                                .to_string()
                        } else {
                            imp.family_note.clone()
                        },
                    ));
                }
                h.push_str("</div>\n");
                let u = unit_suffix(&imp.unit);
                let spread_head = if spreads {
                    format!("<th>spread{u}</th>")
                } else {
                    String::new()
                };
                let _ = writeln!(
                    h,
                    "<table><tr><th class=\"l\">attribute</th><th class=\"l\">family</th>\
                     <th>importance{u}</th>{spread_head}</tr>"
                );
                for a in &imp.by_attribute {
                    let spread = if spreads {
                        format!("<td>{}</td>", num(a.spread))
                    } else {
                        String::new()
                    };
                    let _ = writeln!(
                        h,
                        "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td>{spread}</tr>",
                        escape(&a.attribute),
                        escape(&a.family),
                        num(a.value),
                    );
                }
                for f in &imp.by_family {
                    let _ = writeln!(
                        h,
                        "<tr><td class=\"l\"><i>all of family</i></td><td class=\"l\">{}</td>\
                         <td>{}</td>{}</tr>",
                        escape(&f.family),
                        num(f.value),
                        if spreads { "<td></td>" } else { "" }
                    );
                }
                h.push_str("</table>\n");
            }
            _ => h.push_str("<p class=\"nc\">Importance: not computed.</p>\n"),
        }
        h.push_str("<h4>Ablation</h4>\n");
        match &t.ablation {
            Some(a) => {
                if !a.description.is_empty() {
                    let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(&a.description));
                }
                if !a.removed.is_empty() {
                    let _ = writeln!(
                        h,
                        "<p class=\"note\">Removed: {}.</p>",
                        escape(&a.removed.join(", "))
                    );
                }
                let f = |v: Option<f64>| v.unwrap_or(f64::NAN);
                let plot = BarPicture {
                    title: format!("{}: skill with and without", t.name),
                    value_label: "R2 and coverage (fraction)".to_string(),
                    category_label: String::new(),
                    categories: vec!["R2".to_string(), "coverage".to_string()],
                    series: vec![
                        BarSeries {
                            name: "all attributes".to_string(),
                            values: vec![f(a.with_all.r2), f(a.with_all.coverage)],
                            errors: None,
                        },
                        BarSeries {
                            name: "without removed".to_string(),
                            values: vec![f(a.without.r2), f(a.without.coverage)],
                            errors: None,
                        },
                    ],
                    reference: None,
                    horizontal: false,
                };
                h.push_str("<div class=\"figs\">");
                h.push_str(&figure_png(
                    drawn(bars_png(&plot, 520, 380)),
                    &format!("{} ablation", t.name),
                    "",
                ));
                // Only the figures the study computed get a column.
                let u = unit_suffix(&t.unit);
                let both = [&a.with_all, &a.without];
                type Cell = fn(&super::input::Skill) -> String;
                let columns: Vec<(String, Cell)> = [
                    (
                        "R&sup2; (-)".to_string(),
                        (|s: &super::input::Skill| num(s.r2)) as Cell,
                        both.iter().any(|s| s.r2.is_some()),
                    ),
                    (
                        format!("RMSE{u}"),
                        |s| num(s.rmse),
                        both.iter().any(|s| s.rmse.is_some()),
                    ),
                    (
                        "coverage".to_string(),
                        |s| pct(s.coverage),
                        both.iter().any(|s| s.coverage.is_some()),
                    ),
                    (
                        format!("mean width{u}"),
                        |s| num(s.mean_width),
                        both.iter().any(|s| s.mean_width.is_some()),
                    ),
                ]
                .into_iter()
                .filter(|c| c.2)
                .map(|(head, cell, _)| (head, cell))
                .collect();
                h.push_str("<table><tr><th class=\"l\">attributes</th>");
                for (head, _) in &columns {
                    let _ = write!(h, "<th>{head}</th>");
                }
                h.push_str("</tr>\n");
                for (name, s) in [("all", &a.with_all), ("without removed", &a.without)] {
                    let _ = write!(h, "<tr><td class=\"l\">{name}</td>");
                    for (_, cell) in &columns {
                        let _ = write!(h, "<td>{}</td>", cell(s));
                    }
                    h.push_str("</tr>\n");
                }
                h.push_str("</table></div>\n");
            }
            None => h.push_str("<p class=\"nc\">Ablation: not computed.</p>\n"),
        }
    }
    h.push_str("</section>\n");
}

fn truth_section(h: &mut String, input: &ReportInput, results_dir: &Path) {
    h.push_str("<section id=\"truth\"><h2>7. Against the truth</h2>\n");
    match &input.truth {
        None => h.push_str(
            "<p class=\"nc\">Not computed: the results were not scored against truth maps \
             (only possible for a synthetic project, with <code>tidemark score</code>).</p>\n",
        ),
        Some(tr) => truth_block(h, tr, input, results_dir),
    }
    h.push_str("</section>\n");
}

fn truth_block(h: &mut String, tr: &TruthSection, input: &ReportInput, results_dir: &Path) {
    if tr.scores.is_empty() {
        h.push_str("<p class=\"nc\">Scores against truth: not computed.</p>\n");
    } else {
        h.push_str(
            "<p class=\"note\">Every node of every map compared with the true change.</p>\n\
             <table><tr><th class=\"l\">target</th><th class=\"l\">step</th><th>nodes</th>\
             <th>R&sup2; (-)</th><th>RMSE</th><th>bias</th><th>coverage</th><th>mean width</th></tr>\n",
        );
        for s in &tr.scores {
            let u = unit_suffix(&s.unit);
            let _ = writeln!(
                h,
                "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td>\
                 <td>{}{u}</td><td>{}{u}</td><td>{}</td><td>{}{u}</td></tr>",
                escape(&s.target),
                s.step.as_deref().map_or("all".to_string(), escape),
                s.nodes.map_or(NOT_COMPUTED.to_string(), |n| n.to_string()),
                num(s.r2),
                num(s.rmse),
                num(s.bias),
                pct(s.coverage),
                num(s.mean_width)
            );
        }
        h.push_str("</table>\n");
    }
    if tr.error_maps.is_empty() {
        h.push_str("<p class=\"nc\">Error maps: not computed.</p>\n");
        return;
    }
    let steps = ordered(&input.steps, tr.error_maps.iter().map(|m| m.step.clone()));
    let declared: Vec<String> = input.targets.iter().map(|t| t.name.clone()).collect();
    let targets = ordered(
        &declared,
        tr.error_maps
            .iter()
            .map(|m| m.target.clone().unwrap_or_default()),
    );
    for t in &targets {
        let entries: Vec<&MapEntry> = steps
            .iter()
            .flat_map(|s| {
                tr.error_maps
                    .iter()
                    .filter(move |m| m.target.clone().unwrap_or_default() == *t && &m.step == s)
            })
            .collect();
        if entries.is_empty() {
            continue;
        }
        let _ = writeln!(
            h,
            "<h3>{}: prediction minus truth</h3>",
            if t.is_empty() {
                "maps".to_string()
            } else {
                escape(t)
            }
        );
        map_figures(h, input, &entries, results_dir);
    }
}

/// Renders the page and writes it to `results_dir/report.html` (temporary file, then rename).
/// Returns the page's path.
pub fn write_html(input: &ReportInput, results_dir: &Path) -> Result<PathBuf, ReportError> {
    let page = render_html(input, results_dir)?;
    let path = results_dir.join(PAGE_FILE);
    super::write_atomic(&path, page.as_bytes())?;
    Ok(path)
}
