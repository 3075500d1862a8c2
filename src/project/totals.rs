//! Checking the manifest's `[totals]` section against the rest of the project: every total names a
//! known target and known steps, area thresholds lie within the target's bounds, every `sum`
//! total's weight is one of `[totals.maps]`, and the realization counts stay within limits. Map
//! paths are resolved against the manifest's folder. Errors name the manifest key.

use super::{ManifestError, StepSpec, TargetSpec};
use crate::spatial::SpatialError;
use crate::spatial::totals::{TotalRule, TotalsSection};
use std::path::Path;

/// Most realizations a run may ask for (`totals.realizations`): the totals of every realization
/// are kept (one number per quantity and realization), so this bounds memory and time.
pub const MAX_REALIZATIONS: usize = 100_000;
/// Most realization maps a run may write (`totals.keep_realizations`, `--keep-realizations`).
pub const MAX_KEPT_REALIZATIONS: usize = 1_000;

fn inconsistent(key: impl Into<String>, message: impl Into<String>) -> ManifestError {
    ManifestError::Inconsistent {
        key: key.into(),
        message: message.into(),
    }
}

/// A library error of the section as a manifest error naming the key.
fn from_spatial(e: SpatialError) -> ManifestError {
    match e {
        SpatialError::Setting { key, expected, got } => {
            inconsistent(key, format!("expected {expected}, got {got}"))
        }
        other => inconsistent("totals", other.to_string()),
    }
}

/// Checks `section` against the project's targets and steps and resolves its map paths against
/// `root`. Returns the section with absolute map paths.
pub fn check(
    mut section: TotalsSection,
    root: &Path,
    targets: &[TargetSpec],
    steps: &[StepSpec],
) -> Result<TotalsSection, ManifestError> {
    if section.realizations > MAX_REALIZATIONS {
        return Err(ManifestError::Limit {
            key: "totals.realizations".into(),
            limit: format!("at most {MAX_REALIZATIONS}"),
            value: section.realizations.to_string(),
        });
    }
    if section.keep_realizations > MAX_KEPT_REALIZATIONS {
        return Err(ManifestError::Limit {
            key: "totals.keep_realizations".into(),
            limit: format!("at most {MAX_KEPT_REALIZATIONS}"),
            value: section.keep_realizations.to_string(),
        });
    }
    let definitions = section.check().map_err(from_spatial)?;
    for (name, path) in section.maps.iter_mut() {
        if !super::is_valid_name(name) {
            return Err(inconsistent(
                format!("totals.maps.{name}"),
                "a map name is letters, digits, '_' and '-'",
            ));
        }
        if path.trim().is_empty() {
            return Err(inconsistent(
                format!("totals.maps.{name}"),
                "empty file path",
            ));
        }
        *path = root.join(path.as_str()).display().to_string();
    }
    let target_names: Vec<&str> = targets.iter().map(|t| t.name.as_str()).collect();
    let step_names: Vec<&str> = steps.iter().map(|s| s.name.as_str()).collect();
    for (k, d) in definitions.iter().enumerate() {
        let key = format!("totals.quantities[{k}]");
        let Some(target) = targets.iter().find(|t| t.name == d.target) else {
            return Err(ManifestError::Unknown {
                key: format!("{key}.target"),
                name: d.target.clone(),
                what: "target",
                known: target_names.join(", "),
            });
        };
        for (i, s) in d.steps.iter().enumerate() {
            if !step_names.contains(&s.as_str()) {
                return Err(ManifestError::Unknown {
                    key: format!("{key}.steps[{i}]"),
                    name: s.clone(),
                    what: "step",
                    known: step_names.join(", "),
                });
            }
        }
        match &d.rule {
            TotalRule::Area { threshold, .. } => {
                if *threshold < target.min || *threshold > target.max {
                    return Err(inconsistent(
                        format!("{key}.threshold"),
                        format!(
                            "{threshold} lies outside target '{}' bounds [{}, {}]",
                            target.name, target.min, target.max
                        ),
                    ));
                }
            }
            TotalRule::Sum { weight } => {
                if !section.maps.contains_key(weight) {
                    let known: Vec<&str> = section.maps.keys().map(String::as_str).collect();
                    return Err(ManifestError::Unknown {
                        key: format!("{key}.weight"),
                        name: weight.clone(),
                        what: "map of [totals.maps]",
                        known: if known.is_empty() {
                            "none".into()
                        } else {
                            known.join(", ")
                        },
                    });
                }
            }
        }
    }
    Ok(section)
}
