//! The review page's input, assembled from what a run produced: the summary and model, the map
//! pictures, the infill ranking, the sensitivity studies and the run's settings, timings and
//! warnings. The result is [`ReportInput`], plain data that [`crate::report`] renders.
//!
//! No number of the run is computed here: coverage by decile of the truth regroups the
//! calibration's out-of-fold rows, and the learning curve and importance are summarised for
//! display.

use super::model::{SavedModel, convention_text};
use super::stages::Timing;
use super::studies::{Infill, Sensitivity, Summary, TargetSummary};
use crate::calibrate::shift::ShiftSummary;
use crate::calibrate::stages::kriging::KrigingDiagnostics;
use crate::calibrate::stages::spread::Spread;
use crate::calibrate::{OofRow, TargetDiagnostics};
use crate::metrics::quantile_sorted;
use crate::project::Project;
use crate::report::input as ri;
use crate::report::{PictureRef, ReportInput};
use crate::skill::Skill;

/// Everything [`build_report`] needs.
pub struct ReportParts<'a> {
    /// The run's summary.
    pub summary: &'a Summary,
    /// The model.
    pub model: &'a SavedModel,
    /// Map picture entries.
    pub maps: Vec<ri::MapEntry>,
    /// Infill section, if ranked.
    pub infill: Option<ri::InfillSection>,
    /// Sensitivity studies.
    pub studies: &'a Sensitivity,
    /// Run information.
    pub run: ri::RunInfo,
}

/// Assembles the review page's input.
pub fn build_report(p: ReportParts) -> ReportInput {
    let model = p.model;
    let targets = p
        .summary
        .targets
        .iter()
        .map(|t| target_report(t, p.studies))
        .collect();
    ReportInput {
        project: p.summary.project.clone(),
        run: p.run,
        convention: convention_text(model.convention, model.level),
        cautions: p.summary.cautions.clone(),
        xy_unit: "m".into(),
        steps: model.step_names.clone(),
        targets,
        maps: p.maps,
        infill: p.infill,
        truth: None,
        skill_rule: crate::skill::rule_text(&super::studies::skill_settings()),
        band_labels: {
            let (lo, hi) = model.band_labels();
            [lo.to_uppercase(), hi.to_uppercase()]
        },
        injector_cores: Vec::new(),
        marked_ground: None,
        totals: None,
    }
}

/// The infill section of the page: the ranked targets and their picture.
pub fn infill_section(
    project: &Project,
    infill: &Infill,
    picture: PictureRef,
) -> ri::InfillSection {
    ri::InfillSection {
        criterion: infill.criterion.clone(),
        volume_unit: project
            .infill
            .as_ref()
            .map_or_else(|| "nodes".into(), |s| s.risked_volume_unit()),
        picture: Some(picture),
        rows: infill
            .targets
            .iter()
            .map(|t| ri::InfillRow {
                rank: t.rank,
                x: t.x,
                y: t.y,
                chance: Some(t.chance),
                risked_volume: Some(t.risked_volume),
                nearest_well: t.nearest_well.clone(),
                distance: t.nearest_distance.is_finite().then_some(t.nearest_distance),
                inside: t.inside,
                drainage_inside_fraction: Some(t.drainage_inside_fraction),
            })
            .collect(),
    }
}

/// The run section of the page: version, time, seed, settings, stage timings and the warnings
/// that belong to no single target (target warnings are shown beside their target).
pub fn run_info(
    project: &Project,
    model: &SavedModel,
    seed: u64,
    timings: &[Timing],
    warnings: Vec<String>,
) -> ri::RunInfo {
    ri::RunInfo {
        tidemark_version: env!("CARGO_PKG_VERSION").into(),
        created: utc_now(),
        seed: Some(seed),
        project_file: project.manifest_path.display().to_string(),
        settings: settings_table(project, model.wells_vs_nodes.as_ref()),
        timings: timings
            .iter()
            .map(|t| ri::Timing {
                stage: t.stage.clone(),
                seconds: Some(t.seconds),
            })
            .collect(),
        warnings,
    }
}

/// The current time, UTC, as `YYYY-MM-DD HH:MM:SS UTC` (civil-from-days, Hinnant's algorithm).
pub fn utc_now() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02}:{:02} UTC",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

/// The settings shown on the review page, with how typical of the nodes the wells are.
fn settings_table(project: &Project, wells_vs_nodes: Option<&ShiftSummary>) -> Vec<ri::KeyValue> {
    let kv = |k: &str, v: String| ri::KeyValue {
        key: k.into(),
        value: v,
    };
    let m = &project.model;
    let c = &project.calibration;
    vec![
        kv("learner", format!("{:?}", m.learner).to_lowercase()),
        kv(
            "forest",
            format!(
                "{} trees, min leaf {}, max features {}",
                m.trees, m.min_samples_leaf, m.max_features
            ),
        ),
        kv(
            "booster",
            format!(
                "{} rounds, learning rate {}, depth {}",
                m.boost_rounds, m.learning_rate, m.boost_max_depth
            ),
        ),
        kv("band level", format!("{}", c.level)),
        kv("folds", format!("{:?}, k = {}", c.fold_method, c.folds)),
        kv("end correction", format!("{}", c.end_correction)),
        kv(
            "smoothing widths",
            if project.smoothing.is_empty() {
                "off".to_string()
            } else {
                let w: Vec<String> = project.smoothing.iter().map(|w| format!("{w} m")).collect();
                let who = if project.smoothing_targets.is_empty() {
                    "every target".to_string()
                } else {
                    project.smoothing_targets.join(", ")
                };
                format!(
                    "{} (offered to {who}; each keeps none or one)",
                    w.join(", ")
                )
            },
        ),
        kv(
            "Mondrian bins",
            format!(
                "at most {}, at least {} wells each",
                c.max_bins, c.min_wells_per_bin
            ),
        ),
        kv(
            "wells against nodes",
            wells_vs_nodes.map_or_else(
                || "not estimated".to_string(),
                |s| {
                    format!(
                        "AUC {:.2} (0.5: wells look like any node), {:.1} effective wells of {}; \
                         bands {} by the nodes' density ratio",
                        s.auc,
                        s.effective_wells,
                        s.wells,
                        if s.applied {
                            "weighted"
                        } else {
                            "not weighted"
                        }
                    )
                },
            ),
        ),
    ]
}

/// Attribute family for grouped importance: amplitudes, AVO intercept/gradient, timing,
/// repeatability (NRMS, which measures how alike the two surveys are, not an amplitude), time
/// step.
pub fn family(attribute: &str) -> &'static str {
    let l = attribute.to_lowercase();
    if l == "step" {
        "time step"
    } else if l.contains("nrms") {
        "repeatability (NRMS)"
    } else if l.contains("intercept") || l.contains("gradient") {
        "AVO intercept/gradient"
    } else if l.contains("shift") || l.contains("strain") || l.contains("time") {
        "timing"
    } else {
        "amplitudes"
    }
}

fn opt(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// One target's part of the page.
fn target_report(t: &TargetSummary, studies: &Sensitivity) -> ri::TargetReport {
    let d = &t.diagnostics;
    let m = &d.metrics;
    let n_rows = d.rows.len();
    ri::TargetReport {
        name: t.name.clone(),
        description: format!("change in {} ({})", t.name, t.unit),
        unit: t.unit.clone(),
        summary: ri::TargetSummary {
            wells: Some(d.n_wells),
            rows: Some(d.n_rows),
            learner: Some(d.learner.chosen.clone()),
            end_correction_kept: Some(d.end_correction.kept),
            end_correction_reason: d.end_correction.reason.clone(),
            r2: opt(m.r2),
            rmse: opt(m.rmse),
            bias: opt(m.bias),
            nominal_coverage: Some(d.level),
            coverage: opt(m.coverage),
            coverage_bottom_decile: opt(m.coverage_bottom_decile),
            coverage_top_decile: opt(m.coverage_top_decile),
            mean_width: opt(m.mean_width),
            warnings: d.warnings.clone(),
            by_kind: t
                .by_kind
                .iter()
                .map(|k| ri::KindRow {
                    kind: k.kind.clone(),
                    wells: k.wells,
                    rows: k.rows,
                    coverage: k.coverage,
                    mean_width: k.mean_width,
                    interval_score: k.interval_score,
                })
                .collect(),
        },
        crossplot: Some(ri::CrossplotData {
            truth: d.rows.iter().map(|r| r.truth).collect(),
            raw: d.rows.iter().map(|r| r.raw).collect(),
            corrected: d.rows.iter().map(|r| r.corrected).collect(),
        }),
        coverage_by_decile: Some(decile_coverage(d)),
        reliability: reliability(d),
        pit: Some(ri::PitHistogram {
            counts: d
                .pit_histogram
                .iter()
                .map(|f| (f * n_rows as f64).round() as usize)
                .collect(),
        }),
        learning_curve: learning_curve(&t.name, studies),
        importance: Some(importance(t)),
        ablation: ablation(&t.name, studies),
        skill: t.skill.as_ref().map(|s| skill_verdict(None, s)),
        skill_by_step: t
            .skill_by_step
            .iter()
            .map(|s| skill_verdict(Some(&s.step), &s.skill))
            .collect(),
        spread: d.spread.as_ref().map(spread_profile),
        zero_change: d.zero.as_ref().map(|z| ri::ZeroDecision {
            enabled: z.enabled,
            applied: d.hurdle.is_some(),
            reason: z.reason.clone(),
            tolerance: opt(z.tolerance),
            zero_share: opt(z.zero_share),
        }),
        kriging: d
            .kriging
            .as_ref()
            .map(|k| kriging_summary(k, d.hurdle.is_some())),
        smoothing: Some(ri::SmoothingChoice {
            width: t.smoothing.width,
            wells: t.smoothing.wells,
            candidates: t
                .smoothing
                .candidates
                .iter()
                .map(|c| [c.width, c.loss, c.excess, c.se])
                .collect(),
            offered: t.smoothing.offered,
        }),
    }
}

/// The residual-kriging stage as the page shows it. The band without the kriging scale is the
/// band after the (possibly) corrected middle, the one the scaled band was tested against.
fn kriging_summary(k: &KrigingDiagnostics, measured_only: bool) -> ri::KrigingSummary {
    let v = k.variogram.as_ref();
    ri::KrigingSummary {
        model: v.map_or_else(String::new, |v| v.model.kind.name().to_string()),
        nugget: v.and_then(|v| opt(v.model.nugget)),
        sill: v.and_then(|v| opt(v.model.sill)),
        range: v.and_then(|v| opt(v.model.range)),
        pairs: v.map(|v| v.lags.iter().map(|l| l.1).sum()),
        fallback: v.is_some_and(|v| v.fallback),
        applied: k.applied,
        measured_only,
        band_kept: k.band_kept,
        is_scaled: opt(k.is_scaled),
        is_without: opt(k.is_shifted),
        mse_gain_pct: opt(k.mse_gain_pct),
        mse_gain_se_pct: opt(k.mse_gain_se_pct),
        middle_applied: k.shift_kept && !measured_only,
        decision: k.decision.clone(),
    }
}

/// A skill and its verdict as the page shows them, with the meaning of the verdict.
fn skill_verdict(step: Option<&str>, s: &Skill) -> ri::SkillVerdict {
    let settings = super::studies::skill_settings();
    ri::SkillVerdict {
        step: step.map(str::to_string),
        r2: opt(s.r2),
        r2_interval: s.r2_interval.map(opt),
        crps_skill: opt(s.crps_skill),
        crps_skill_interval: s.crps_skill_interval.map(opt),
        level: Some(settings.level),
        verdict: s.verdict.as_str().to_string(),
        meaning: s.verdict.meaning(&settings),
    }
}

/// The spread profile and the rule beyond the spanned ground, as the page shows them.
fn spread_profile(s: &Spread) -> ri::SpreadProfile {
    let (p, b) = (&s.profile, &s.beyond);
    ri::SpreadProfile {
        di: p.di.clone(),
        scale: p.scale.clone(),
        di_edge: opt(b.di_max).or(opt(p.di_max)),
        distance_edge: opt(b.distance_max),
        envelope: [opt(b.envelope_lo), opt(b.envelope_hi)],
        spearman: opt(p.spearman),
        coverage: [opt(p.coverage_plain), opt(p.coverage_scaled)],
    }
}

/// Band coverage by decile of the truth at the wells (out-of-fold rows). The deciles follow the
/// summary's metrics (`docs/summary-schema.md`): the bottom one holds every row with truth at or
/// below the 10th percentile, the top one every row at or above the 90th, so an atom of equal
/// values at a cut falls wholly in the outer decile and the table's first and last rows give the
/// summary's decile coverage; deciles 2-9 hold `q((k-1)/10) < truth <= q(k/10)` (below the 90th
/// percentile for the 9th).
fn decile_coverage(d: &TargetDiagnostics) -> ri::DecileCoverage {
    let mut truth: Vec<f64> = d.rows.iter().map(|r| r.truth).collect();
    truth.sort_by(f64::total_cmp);
    let cuts: Vec<f64> = (0..=10)
        .map(|k| quantile_sorted(&truth, k as f64 / 10.0))
        .collect();
    let decile_of = |y: f64| -> usize {
        if y <= cuts[1] {
            0
        } else if y >= cuts[9] {
            9
        } else {
            (1..9).find(|&k| y <= cuts[k + 1]).unwrap_or(8)
        }
    };
    let rows = (0..10)
        .map(|k| {
            let (a, b) = (cuts[k], cuts[k + 1]);
            let inn: Vec<&OofRow> = d
                .rows
                .iter()
                .filter(|r| r.truth.is_finite() && decile_of(r.truth) == k)
                .collect();
            let n = inn.len();
            let cov = inn
                .iter()
                .filter(|r| r.truth >= r.lo && r.truth <= r.hi)
                .count() as f64
                / n.max(1) as f64;
            let width = inn.iter().map(|r| r.hi - r.lo).sum::<f64>() / n.max(1) as f64;
            ri::DecileRow {
                decile: k + 1,
                truth_low: opt(a),
                truth_high: opt(b),
                count: n,
                coverage: (n > 0).then_some(cov),
                mean_width: (n > 0).then_some(width),
            }
        })
        .collect();
    ri::DecileCoverage {
        nominal: Some(d.level),
        rows,
    }
}

/// Reliability of each threshold's probability map, from the out-of-fold rows.
fn reliability(d: &TargetDiagnostics) -> Vec<ri::ReliabilityTable> {
    d.exceedance
        .iter()
        .map(|e| ri::ReliabilityTable {
            label: e.label.clone(),
            threshold: Some(e.value),
            brier: opt(match e.method {
                crate::calibrate::exceedance::ExceedMethod::Conformal => e.brier_conformal,
                _ => e.brier_forest,
            }),
            bins: e
                .reliability
                .iter()
                .map(|b| ri::ReliabilityBin {
                    forecast_low: b.p_lo,
                    forecast_high: b.p_hi,
                    mean_forecast: opt(b.mean_prob),
                    observed_frequency: opt(b.observed),
                    count: b.n,
                })
                .collect(),
        })
        .collect()
}

/// The learning curve of one target (`None` without one).
fn learning_curve(target: &str, studies: &Sensitivity) -> Option<ri::LearningCurve> {
    let points: Vec<ri::LearningPoint> = studies
        .curve
        .iter()
        .filter(|c| c.target == target && !c.r2.is_empty())
        .map(|c| {
            let n = c.r2.len() as f64;
            ri::LearningPoint {
                wells: c.wells,
                r2_mean: opt(c.r2.iter().sum::<f64>() / n),
                r2_min: opt(c.r2.iter().copied().fold(f64::INFINITY, f64::min)),
                r2_max: opt(c.r2.iter().copied().fold(f64::NEG_INFINITY, f64::max)),
                coverage_mean: opt(c.coverage.iter().sum::<f64>() / n),
            }
        })
        .collect();
    (!points.is_empty()).then(|| ri::LearningCurve {
        repeats: studies.curve.iter().map(|c| c.r2.len()).max().unwrap_or(0),
        note: studies.note.clone(),
        points,
    })
}

/// Importance of one target by attribute and by attribute family.
fn importance(t: &TargetSummary) -> ri::Importance {
    let by_attribute: Vec<ri::AttributeImportance> = t
        .importance
        .iter()
        .map(|fi| ri::AttributeImportance {
            attribute: fi.feature.clone(),
            family: family(&fi.feature).into(),
            value: opt(fi.share),
            spread: None,
        })
        .collect();
    let mut by_family: Vec<ri::FamilyImportance> = Vec::new();
    for a in &by_attribute {
        match by_family.iter_mut().find(|f| f.family == a.family) {
            Some(f) => f.value = Some(f.value.unwrap_or(0.0) + a.value.unwrap_or(0.0)),
            None => by_family.push(ri::FamilyImportance {
                family: a.family.clone(),
                value: a.value,
            }),
        }
    }
    ri::Importance {
        measure: "permutation importance (increase in out-of-bag error when an attribute is \
                  shuffled), share of the total"
            .into(),
        unit: "share".into(),
        by_attribute,
        by_family,
        family_note: String::new(),
    }
}

/// The ablation of one target (`None` when not run).
fn ablation(target: &str, studies: &Sensitivity) -> Option<ri::Ablation> {
    studies
        .ablation
        .iter()
        .find(|a| a.target == target)
        .map(|a| ri::Ablation {
            description: format!(
                "leave-wells-out skill with every attribute and without the angle-dependent \
                 ones ({})",
                studies.note
            ),
            removed: a.removed.clone(),
            with_all: ri::Skill {
                r2: opt(a.r2_all),
                coverage: opt(a.coverage_all),
                ..ri::Skill::default()
            },
            without: ri::Skill {
                r2: opt(a.r2_without),
                coverage: opt(a.coverage_without),
                ..ri::Skill::default()
            },
        })
}
