//! The field totals section of the review page: a table of every total with its P10/P50/P90 and
//! the two naive rules' ranges, a histogram of the realizations of each quantity (at the last
//! step computed) with the P10/P50/P90, the naive ranges and, once scored, the true total marked,
//! and each target's variogram of held-out normal scores (experimental points, Cressie & Hawkins
//! 1980, and the fitted model, Cressie 1985).
//!
//! The data ([`TotalsReport`]) is plain numbers and strings, saved with the rest of the page input.

use std::fmt::Write as _;

use base64::Engine as _;
use serde::{Deserialize, Serialize};

use super::ReportError;
use super::markup::escape;
use super::picture::{Curve, LinePicture, Reference, line_png};

/// Number lists with `NaN` as JSON `null` (as the rest of the page input stores them).
mod nan_as_null {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    /// Non-finite values as `null`.
    pub fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
        let o: Vec<Option<f64>> = v.iter().map(|x| x.is_finite().then_some(*x)).collect();
        o.serialize(s)
    }

    /// `null` as `NaN`.
    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        let o: Vec<Option<f64>> = Vec::deserialize(d)?;
        Ok(o.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
    }
}

/// The totals of a run, for the page.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TotalsReport {
    /// Label convention, in words.
    pub convention: String,
    /// Realizations drawn.
    pub realizations: usize,
    /// One entry per quantity and step.
    pub quantities: Vec<TotalEntry>,
    /// One entry per target used.
    pub variograms: Vec<VariogramEntry>,
    /// The calibration draw per layer (empty when it was off).
    pub calibration_draw: Vec<DrawEntry>,
    /// What the realizations reproduce at the well nodes (`measured`, `held_out`; empty when
    /// not recorded).
    pub conditioning: String,
}

/// The words on what the realizations are conditioned to.
fn conditioning_words(rule: &str) -> &'static str {
    match rule {
        "measured" => {
            "conditioned to give every well's measured value at its node, with the error \
             correlation of the wells' held-out errors"
        }
        "held_out" => "conditioned to the wells' held-out errors",
        "well_nodes" => {
            "with every well's measured value at its own node and the error correlation of the \
             wells' held-out errors between the nodes"
        }
        _ => "conditioned to the wells",
    }
}

/// One layer's calibration draw: the realizations' shared shift of the held-out wells' mean
/// normal score (a Bayesian bootstrap over the wells).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct DrawEntry {
    /// Target and step.
    pub layer: String,
    /// Wells reweighted.
    pub wells: usize,
    /// Standard deviation of the shift, in normal scores.
    pub shift_sd: f64,
}

/// The sentence on the calibration draw.
fn draw_sentence(draws: &[DrawEntry]) -> String {
    if draws.is_empty() {
        return "The calibration was not drawn per realization (<code>[totals] \
                calibration_uncertainty = false</code>): the range leaves out that every node \
                shares the same calibration wells."
            .to_string();
    }
    let (lo, hi) = draws.iter().fold((f64::INFINITY, 0.0f64), |(a, b), d| {
        (a.min(d.shift_sd), b.max(d.shift_sd))
    });
    format!(
        "Each realization also redraws the calibration (a Bayesian bootstrap over the held-out \
         wells of their mean normal score, shared by every node the wells leave free; shift sd \
         {} to {} normal scores over {} target-steps), so the range carries the uncertainty all \
         nodes share because they were calibrated on the same wells.",
        fmt(lo),
        fmt(hi),
        draws.len()
    )
}

/// One total at one step.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct TotalEntry {
    /// Quantity name.
    pub quantity: String,
    /// Step name.
    pub step: String,
    /// Unit.
    pub unit: String,
    /// P10, P50, P90 of the realizations (run's convention).
    pub band: [f64; 3],
    /// Every node at its P10 / P50 / P90 at once.
    pub node_bands: [f64; 3],
    /// Nodes drawn independently (P10, P50, P90), when computed.
    pub independent: Option<[f64; 3]>,
    /// Every realization's total.
    #[serde(with = "nan_as_null")]
    pub totals: Vec<f64>,
    /// The total of the truth maps, once scored.
    pub truth: Option<f64>,
}

/// One target's variogram of held-out normal scores.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct VariogramEntry {
    /// Target name.
    pub target: String,
    /// Model kind.
    pub kind: String,
    /// Nugget.
    pub nugget: f64,
    /// Total sill.
    pub sill: f64,
    /// Range (metres).
    pub range: f64,
    /// Well pairs used.
    pub pairs: usize,
    /// True when the stated fallback replaced a fit.
    pub fallback: bool,
    /// Why, or a remark on the fit.
    pub message: Option<String>,
    /// Experimental points: mean pair distance of each lag with pairs.
    #[serde(with = "nan_as_null")]
    pub distance: Vec<f64>,
    /// Experimental semivariance of each such lag.
    #[serde(with = "nan_as_null")]
    pub gamma: Vec<f64>,
    /// The model's semivariance at `curve_distance`.
    #[serde(with = "nan_as_null")]
    pub curve_gamma: Vec<f64>,
    /// Distances of the model curve.
    #[serde(with = "nan_as_null")]
    pub curve_distance: Vec<f64>,
}

fn fmt(v: f64) -> String {
    if v.is_finite() {
        let a = v.abs();
        if a != 0.0 && !(1e-3..1e6).contains(&a) {
            format!("{v:.3e}")
        } else {
            format!("{v:.3}")
        }
    } else {
        "n/a".into()
    }
}

/// A vertical line at `x` from 0 to `h`, for a curve with breaks (a `NaN` point ends a run).
fn vertical(x: f64, h: f64) -> [(f64, f64); 3] {
    [(x, 0.0), (x, h), (f64::NAN, f64::NAN)]
}

/// The histogram of one quantity's realizations with its bands and the truth marked.
pub fn histogram_png(e: &TotalEntry, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    let vals: Vec<f64> = e.totals.iter().copied().filter(|v| v.is_finite()).collect();
    let lo = vals.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = vals.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let bins = 20usize;
    let width_bin = if hi > lo {
        (hi - lo) / bins as f64
    } else {
        1.0
    };
    let mut counts = vec![0usize; bins];
    for v in &vals {
        let k = (((v - lo) / width_bin) as usize).min(bins - 1);
        counts[k] += 1;
    }
    let peak = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
    let mut outline = vec![(lo, 0.0)];
    for (k, &c) in counts.iter().enumerate() {
        let x0 = lo + k as f64 * width_bin;
        outline.push((x0, c as f64));
        outline.push((x0 + width_bin, c as f64));
    }
    outline.push((lo + bins as f64 * width_bin, 0.0));
    let mut series = vec![Curve {
        name: format!("{} realizations", vals.len()),
        points: outline,
        band: None,
        markers: false,
    }];
    let marks: Vec<(f64, f64)> = e.band.iter().flat_map(|&x| vertical(x, peak)).collect();
    series.push(Curve {
        name: "P10 / P50 / P90".into(),
        points: marks,
        band: None,
        markers: false,
    });
    let range = |name: &str, b: [f64; 3], y: f64| Curve {
        name: name.into(),
        points: vec![(b[0].min(b[2]), y), (b[1], y), (b[0].max(b[2]), y)],
        band: None,
        markers: true,
    };
    series.push(range(
        "sum of node P10 / P50 / P90",
        e.node_bands,
        1.08 * peak,
    ));
    if let Some(b) = e.independent {
        series.push(range("independent nodes", b, 1.16 * peak));
    }
    if let Some(t) = e.truth {
        series.push(Curve {
            name: "truth".into(),
            points: vertical(t, 1.2 * peak).to_vec(),
            band: None,
            markers: false,
        });
    }
    line_png(
        &LinePicture {
            title: format!("{} at {}", e.quantity, e.step),
            x_label: format!("total ({})", e.unit),
            y_label: "realizations per bin".into(),
            series,
            references: Vec::new(),
            legend_top_left: false,
            x_range: None,
            y_range: Some((0.0, 1.3 * peak)),
        },
        width,
        height,
    )
}

/// The experimental variogram and its model for one target.
pub fn variogram_png(v: &VariogramEntry, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    let points: Vec<(f64, f64)> = v
        .distance
        .iter()
        .zip(&v.gamma)
        .map(|(&d, &g)| (d, g))
        .collect();
    let curve: Vec<(f64, f64)> = v
        .curve_distance
        .iter()
        .zip(&v.curve_gamma)
        .map(|(&d, &g)| (d, g))
        .collect();
    let model = if v.fallback {
        format!("fallback {} model", v.kind)
    } else {
        format!("fitted {} model", v.kind)
    };
    line_png(
        &LinePicture {
            title: format!("{}: variogram of held-out normal scores", v.target),
            x_label: "distance (m)".into(),
            y_label: "semivariance (-)".into(),
            series: vec![
                Curve {
                    name: format!("Cressie-Hawkins, {} pairs", v.pairs),
                    points,
                    band: None,
                    markers: true,
                },
                Curve {
                    name: model,
                    points: curve,
                    band: None,
                    markers: false,
                },
            ],
            references: vec![Reference::Horizontal {
                y: 1.0,
                label: "variance of standard scores".into(),
            }],
            x_range: None,
            y_range: None,
            legend_top_left: false,
        },
        width,
        height,
    )
}

fn figure(png: Result<Vec<u8>, ReportError>, alt: &str) -> String {
    match png {
        Ok(bytes) => format!(
            "<figure><img src=\"data:image/png;base64,{}\" alt=\"{}\"></figure>",
            base64::engine::general_purpose::STANDARD.encode(bytes),
            escape(alt)
        ),
        Err(e) => format!(
            "<figure><p class=\"nc\">{}: picture not available ({}).</p></figure>",
            escape(alt),
            escape(&e.to_string())
        ),
    }
}

/// Appends the totals section to the page (says "not computed" without totals).
pub fn section(h: &mut String, totals: Option<&TotalsReport>) {
    h.push_str("<section id=\"totals\"><h2>Field totals</h2>\n");
    let Some(t) = totals.filter(|t| !t.quantities.is_empty()) else {
        h.push_str(
            "<p class=\"nc\">Not computed: the manifest has no <code>[totals]</code> table.</p>\n\
             </section>\n",
        );
        return;
    };
    let _ = writeln!(
        h,
        "<p class=\"note\">{} spatially correlated realizations of every node's calibrated \
         distribution, {}. Beside them, the two naive \
         rules: every node at its own P10 / P50 / P90 at once (far too wide when errors are not \
         perfectly correlated) and nodes drawn independently (far too narrow when they are \
         correlated). {} Decision support, not a reserves estimate: on generated fields the \
         true total fell inside P10-P90 in 48 % to 90 % of cases depending on the quantity \
         (swept area least often), because node probabilities calibrated at the wells are \
         biased between them; read the range as the \
         spread the node bands imply and have it reviewed before it informs any reserves \
         figure. {}</p>",
        t.realizations,
        conditioning_words(&t.conditioning),
        escape(&t.convention),
        draw_sentence(&t.calibration_draw)
    );
    h.push_str(
        "<table><tr><th class=\"l\">quantity</th><th class=\"l\">step</th><th>P10</th>\
         <th>P50</th><th>P90</th><th>node bands P10-P90</th><th>independent P10-P90</th>\
         <th>truth</th></tr>\n",
    );
    for q in &t.quantities {
        let ind = q.independent.map_or("n/a".to_string(), |b| {
            format!("{} - {}", fmt(b[0]), fmt(b[2]))
        });
        let _ = writeln!(
            h,
            "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td>\
             <td>{} - {}</td><td>{ind}</td><td>{}</td></tr>",
            escape(&format!("{} ({})", q.quantity, q.unit)),
            escape(&q.step),
            fmt(q.band[0]),
            fmt(q.band[1]),
            fmt(q.band[2]),
            fmt(q.node_bands[0]),
            fmt(q.node_bands[2]),
            q.truth.map_or("not scored".to_string(), fmt)
        );
    }
    h.push_str("</table>\n");
    // One histogram per quantity, at the last step it was computed for.
    let mut names: Vec<&str> = Vec::new();
    for q in &t.quantities {
        if !names.contains(&q.quantity.as_str()) {
            names.push(&q.quantity);
        }
    }
    for name in names {
        if let Some(q) = t.quantities.iter().rev().find(|q| q.quantity == name) {
            h.push_str(&figure(histogram_png(q, 900, 420), &q.quantity));
        }
    }
    h.push_str("<h3>Error correlation from the wells</h3>\n");
    for v in &t.variograms {
        let _ = writeln!(
            h,
            "<p>{}: {} model, nugget {}, sill {}, range {} m, {} pairs{}.</p>",
            escape(&v.target),
            escape(&v.kind),
            fmt(v.nugget),
            fmt(v.sill),
            fmt(v.range),
            v.pairs,
            v.message
                .as_ref()
                .map_or(String::new(), |m| format!("; {}", escape(m)))
        );
        h.push_str(&figure(variogram_png(v, 900, 420), &v.target));
    }
    h.push_str("</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entry() -> TotalEntry {
        TotalEntry {
            quantity: "swept <area>".into(),
            step: "m4".into(),
            unit: "km2".into(),
            band: [1.0, 2.0, 3.0],
            node_bands: [0.2, 2.1, 6.0],
            independent: Some([1.9, 2.0, 2.1]),
            totals: (0..200).map(|k| 1.0 + 2.0 * k as f64 / 199.0).collect(),
            truth: Some(2.5),
        }
    }

    #[test]
    fn the_histogram_is_a_png_of_the_asked_size() {
        let png = histogram_png(&entry(), 640, 320).unwrap();
        let decoder = png::Decoder::new(std::io::Cursor::new(png));
        let reader = decoder.read_info().unwrap();
        assert_eq!((reader.info().width, reader.info().height), (640, 320));
    }

    #[test]
    fn the_section_lists_every_total_and_says_when_there_is_none() {
        let mut h = String::new();
        section(&mut h, None);
        assert!(h.contains("Not computed"));
        let report = TotalsReport {
            convention: "Percentile convention.".into(),
            realizations: 200,
            quantities: vec![entry()],
            variograms: Vec::new(),
            conditioning: "well_nodes".into(),
            calibration_draw: vec![DrawEntry {
                layer: "dSw m1".into(),
                wells: 40,
                shift_sd: 0.15,
            }],
        };
        let mut h = String::new();
        section(&mut h, Some(&report));
        assert!(h.contains("swept &lt;area&gt; (km2)"), "{h}");
        assert!(h.contains("<td>2.500</td>"), "the truth is shown");
        assert!(h.contains("redraws the calibration"), "{h}");
        assert!(
            h.contains("every well's measured value at its own node"),
            "{h}"
        );
        assert_eq!(h.matches("data:image/png;base64,").count(), 1);
        let json = serde_json::to_string(&report).unwrap();
        assert_eq!(serde_json::from_str::<TotalsReport>(&json).unwrap(), report);
    }
}
