//! Checking the manifest's `[totals]` section against the rest of the project: every total names a
//! known target and known steps, area thresholds lie within the target's bounds, every `sum`
//! total's weight is one of `[totals.maps]`, and the realization counts stay within limits. Map
//! paths are resolved against the manifest's folder. Errors name the manifest key.

use crate::spatial::SpatialError;
use crate::spatial::totals::{TotalRule, TotalsSection};
use std::path::Path;

/// Most realizations a run may ask for (`totals.realizations`): the totals of every realization
/// are kept (one number per quantity and realization), so this bounds memory and time.
pub const MAX_REALIZATIONS: usize = 100_000;
/// Most realization maps a run may write (`totals.keep_realizations`, `--keep-realizations`).
pub const MAX_KEPT_REALIZATIONS: usize = 1_000;

/// A problem with the `[totals]` section: the manifest key at fault and what is wrong.
#[derive(Clone, Debug, PartialEq)]
pub struct TotalsError {
    /// Manifest key, e.g. `totals.quantities[2].weight`.
    pub key: String,
    /// What is wrong.
    pub message: String,
}

/// A target as the totals see it: name and physical bounds.
#[derive(Clone, Copy, Debug)]
pub struct TargetBounds<'a> {
    /// Target name.
    pub name: &'a str,
    /// Lower bound.
    pub min: f64,
    /// Upper bound.
    pub max: f64,
}

fn inconsistent(key: impl Into<String>, message: impl Into<String>) -> TotalsError {
    TotalsError {
        key: key.into(),
        message: message.into(),
    }
}

fn unknown(key: String, name: &str, what: &str, known: &[&str]) -> TotalsError {
    let known = if known.is_empty() {
        "none".to_string()
    } else {
        known.join(", ")
    };
    inconsistent(key, format!("unknown {what} '{name}' (known: {known})"))
}

/// A library error of the section as an error naming the key.
fn from_spatial(e: SpatialError) -> TotalsError {
    match e {
        SpatialError::Setting { key, expected, got } => {
            inconsistent(key, format!("expected {expected}, got {got}"))
        }
        other => inconsistent("totals", other.to_string()),
    }
}

/// Checks `section` against the project's targets and step names and resolves its map paths
/// against `root`. Returns the section with absolute map paths.
pub fn check(
    mut section: TotalsSection,
    root: &Path,
    targets: &[TargetBounds<'_>],
    step_names: &[&str],
) -> Result<TotalsSection, TotalsError> {
    if section.realizations > MAX_REALIZATIONS {
        return Err(inconsistent(
            "totals.realizations",
            format!(
                "{} is above the limit: at most {MAX_REALIZATIONS}",
                section.realizations
            ),
        ));
    }
    if section.keep_realizations > MAX_KEPT_REALIZATIONS {
        return Err(inconsistent(
            "totals.keep_realizations",
            format!(
                "{} is above the limit: at most {MAX_KEPT_REALIZATIONS}",
                section.keep_realizations
            ),
        ));
    }
    let definitions = section.check().map_err(from_spatial)?;
    for (name, path) in section.maps.iter_mut() {
        let valid = !name.is_empty()
            && name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
        if !valid {
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
    let target_names: Vec<&str> = targets.iter().map(|t| t.name).collect();
    for (k, d) in definitions.iter().enumerate() {
        let key = format!("totals.quantities[{k}]");
        let Some(target) = targets.iter().find(|t| t.name == d.target) else {
            return Err(unknown(
                format!("{key}.target"),
                &d.target,
                "target",
                &target_names,
            ));
        };
        for (i, s) in d.steps.iter().enumerate() {
            if !step_names.contains(&s.as_str()) {
                return Err(unknown(format!("{key}.steps[{i}]"), s, "step", step_names));
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
                    return Err(unknown(
                        format!("{key}.weight"),
                        weight,
                        "map of [totals.maps]",
                        &known,
                    ));
                }
            }
        }
    }
    Ok(section)
}
