//! The report's paragraphs on the area of applicability: how many nodes within one well spacing
//! of an injector (the swept cores) lie outside the area at each step, and why (reason codes of
//! `crate::applicability`: unlike every well, outside the training range, both); and how much
//! ground the project's own outlines mark as unsampled (`[area] unsampled`).
//!
//! The area itself follows Meyer & Pebesma (2021) for the dissimilarity index; the wording here
//! only reports its counts.

use serde::{Deserialize, Serialize};
use std::fmt::Write as _;

/// Nodes within one well spacing of an injector at one step, and how many of them are flagged
/// for each reason.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct InjectorCores {
    /// Step name.
    pub step: String,
    /// Nodes with data within one well spacing of an injector.
    pub nodes: usize,
    /// Of those, flagged as unlike every well only.
    pub unlike: usize,
    /// Flagged as outside the training range only.
    pub range: usize,
    /// Flagged for both reasons.
    pub both: usize,
}

/// Ground inside the project's outlines of unsampled ground.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct MarkedGround {
    /// Each outline as "file (name)" or "file".
    pub outlines: Vec<String>,
    /// Mapped nodes inside any outline.
    pub nodes: usize,
    /// Mapped nodes in all.
    pub mapped: usize,
}

/// The paragraph (HTML, one `<p>`) on the outlines of unsampled ground; empty without outlines.
pub fn marked_note(m: Option<&MarkedGround>) -> String {
    let Some(m) = m.filter(|m| !m.outlines.is_empty()) else {
        return String::new();
    };
    let list: Vec<String> = m.outlines.iter().map(|o| html_escape(o)).collect();
    format!(
        "<p class=\"note\">The project marks ground that no well samples ({}): {} of {} mapped \
         nodes ({:.1} %) lie inside. They are outside the area of applicability whatever their \
         attributes (reason code 4 and above in <code>area_reason</code>), drawn hatched and never \
         ranked as infill targets; their values are what wells elsewhere suggest, not a \
         prediction for that ground.</p>\n",
        list.join("; "),
        m.nodes,
        m.mapped,
        100.0 * m.nodes as f64 / m.mapped.max(1) as f64
    )
}

/// The paragraph (HTML, one `<p>`) that says which swept cores next to injectors are outside
/// the area and why; empty when no step has such a node flagged or no injector is known.
pub fn injector_note(cores: &[InjectorCores]) -> String {
    let flagged: Vec<&InjectorCores> = cores
        .iter()
        .filter(|c| c.unlike + c.range + c.both > 0)
        .collect();
    if flagged.is_empty() {
        return String::new();
    }
    let mut p = String::from(
        "<p class=\"note\">Next to injectors (within one well spacing) some nodes lie outside the \
         area of applicability:",
    );
    for (k, c) in flagged.iter().enumerate() {
        let total = c.unlike + c.range + c.both;
        let _ = write!(
            p,
            "{} step {}: {total} of {} nodes ({:.0} %; {} unlike every well, {} outside the \
             training range, {} both)",
            if k == 0 { "" } else { ";" },
            html_escape(&c.step),
            c.nodes,
            100.0 * total as f64 / c.nodes.max(1) as f64,
            c.unlike,
            c.range,
            c.both
        );
    }
    let unlike: usize = flagged.iter().map(|c| c.unlike + c.both).sum();
    let range: usize = flagged.iter().map(|c| c.range + c.both).sum();
    p.push_str(". ");
    if unlike >= range {
        p.push_str(
            "Most are unlike every well: the swept rock there has attribute values farther from \
             every well observation than the wells are from each other in cross-validation, \
             because the wells sample the flood front mostly at its edges, not its most swept \
             core. ",
        );
    } else {
        p.push_str(
            "Most lie outside the training range: the sweep there changes some attribute beyond \
             anything measured at a well. ",
        );
    }
    p.push_str(
        "The maps keep their values there but draw them hatched; read them as extrapolation.</p>\n",
    );
    p
}

fn html_escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn note_counts_and_reasons() {
        let none = [InjectorCores {
            step: "m1".into(),
            nodes: 53,
            ..InjectorCores::default()
        }];
        assert_eq!(injector_note(&none), "");
        let cores = [
            none[0].clone(),
            InjectorCores {
                step: "m4".into(),
                nodes: 200,
                unlike: 10,
                range: 4,
                both: 6,
            },
        ];
        let p = injector_note(&cores);
        assert!(
            p.contains("step m4: 20 of 200 nodes (10 %; 10 unlike every well"),
            "{p}"
        );
        assert!(!p.contains("step m1"));
        assert!(p.contains("Most are unlike every well"));
    }
}
