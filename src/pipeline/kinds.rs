//! The calibration wells by kind (producer, injector, observer, from the wells file's optional
//! `kind` column): how the band did at held-out wells of each kind.
//!
//! Producers and injectors stand at the sources of change, where the truth is most extreme; an
//! observation well stands wherever it was drilled. The out-of-fold band's coverage and interval
//! score (Gneiting & Raftery 2007, eq. 43) at each kind tell a user where the band was tested:
//! figures at observation wells are the nearest thing to a test between the wells. Each well
//! weighs one, as in the conformal quantiles (a well's rows share its weight).

use crate::calibrate::OofRow;
use crate::io::wells::WellKind;
use crate::project::Survey;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Out-of-fold band figures at the held-out wells of one kind.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct KindFigures {
    /// `producer`, `injector`, `observer`, or `unstated` (no kind in the wells file).
    pub kind: String,
    /// Wells of this kind with at least one scored row.
    pub wells: usize,
    /// Their scored rows.
    pub rows: usize,
    /// Share of truths inside the band, each well weighing one.
    pub coverage: f64,
    /// Mean band width, each well weighing one.
    pub mean_width: f64,
    /// Mean interval score at the band's level, each well weighing one.
    pub interval_score: f64,
}

/// The kind of each named well: the first record of that well with a kind, `None` if none has.
pub fn well_kinds(survey: &Survey, names: &[String]) -> Vec<Option<WellKind>> {
    let mut kinds: HashMap<&str, WellKind> = HashMap::new();
    for rec in &survey.wells {
        if let Some(k) = rec.kind {
            kinds.entry(rec.well.as_str()).or_insert(k);
        }
    }
    names
        .iter()
        .map(|n| kinds.get(n.as_str()).copied())
        .collect()
}

fn kind_name(k: Option<WellKind>) -> &'static str {
    match k {
        Some(WellKind::Producer) => "producer",
        Some(WellKind::Injector) => "injector",
        Some(WellKind::Observer) => "observer",
        None => "unstated",
    }
}

/// Figures per kind from a target's out-of-fold rows (`rows[i].group` indexes `kinds`), at band
/// level `level`. Empty when no well has a kind (one group would repeat the overall figures).
/// Rows with a missing truth or band edge are left out. Kinds in the order producer, injector,
/// observer, unstated; kinds without a scored row are left out.
pub fn by_kind(rows: &[OofRow], kinds: &[Option<WellKind>], level: f64) -> Vec<KindFigures> {
    if kinds.iter().all(Option::is_none) {
        return Vec::new();
    }
    let alpha = 1.0 - level;
    let scored: Vec<&OofRow> = rows
        .iter()
        .filter(|r| r.truth.is_finite() && r.lo.is_finite() && r.hi.is_finite())
        .filter(|r| r.group < kinds.len())
        .collect();
    let mut per_well: HashMap<usize, usize> = HashMap::new();
    for r in &scored {
        *per_well.entry(r.group).or_insert(0) += 1;
    }
    let order = [
        Some(WellKind::Producer),
        Some(WellKind::Injector),
        Some(WellKind::Observer),
        None,
    ];
    order
        .iter()
        .filter_map(|&kind| {
            let mine: Vec<&&OofRow> = scored.iter().filter(|r| kinds[r.group] == kind).collect();
            if mine.is_empty() {
                return None;
            }
            let (mut w, mut cov, mut width, mut score) = (0.0, 0.0, 0.0, 0.0);
            for r in &mine {
                let wi = 1.0 / per_well[&r.group] as f64;
                let miss_lo = (r.lo - r.truth).max(0.0);
                let miss_hi = (r.truth - r.hi).max(0.0);
                w += wi;
                cov += wi * f64::from(u8::from(miss_lo == 0.0 && miss_hi == 0.0));
                width += wi * (r.hi - r.lo);
                score += wi * ((r.hi - r.lo) + 2.0 / alpha * (miss_lo + miss_hi));
            }
            let wells = mine
                .iter()
                .map(|r| r.group)
                .collect::<std::collections::BTreeSet<_>>()
                .len();
            Some(KindFigures {
                kind: kind_name(kind).to_string(),
                wells,
                rows: mine.len(),
                coverage: cov / w,
                mean_width: width / w,
                interval_score: score / w,
            })
        })
        .collect()
}
