//! Warnings of a run. Each names the stage it arose in and, where it has them, the target, the well
//! and the step, so that a reader of `run.json` or of the console knows what it is about without the
//! report. Warnings are never silenced: `--quiet` hides progress and tables only.

use crate::sample::SampleWarning;
use std::fmt;

/// The steps a warning concerns.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Steps {
    /// One step, by name.
    One(String),
    /// Every step: the calibration pools the steps (the step index is a feature).
    All,
}

/// One warning of a run.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RunWarning {
    /// Stage of the run (`extraction`, `calibration`).
    pub stage: &'static str,
    /// Target concerned, if one.
    pub target: Option<String>,
    /// Well concerned, if one.
    pub well: Option<String>,
    /// Step or steps concerned, if any.
    pub steps: Option<Steps>,
    /// What happened.
    pub message: String,
}

impl RunWarning {
    /// A training row left out at extraction (it concerns every target of that well and step).
    pub fn extraction(w: &SampleWarning) -> Self {
        Self {
            stage: "extraction",
            target: None,
            well: Some(w.well.clone()),
            steps: Some(Steps::One(w.step.clone())),
            message: format!("row left out: {}", w.reason),
        }
    }

    /// A warning of one target's calibration (on the rows of every step).
    pub fn calibration(target: &str, message: &str) -> Self {
        Self {
            stage: "calibration",
            target: Some(target.to_string()),
            well: None,
            steps: Some(Steps::All),
            message: message.to_string(),
        }
    }
}

impl RunWarning {
    /// No demonstrated skill of a target at one step (or all steps pooled), from the verdicts.
    pub fn no_skill(target: &str, step: Option<&str>) -> Self {
        Self {
            stage: "skill",
            target: Some(target.to_string()),
            well: None,
            steps: Some(step.map_or(Steps::All, |s| Steps::One(s.to_string()))),
            message: NO_SKILL.to_string(),
        }
    }
}

/// What a `none` skill verdict means for the maps.
pub const NO_SKILL: &str = crate::skill::NO_SKILL;

impl fmt::Display for RunWarning {
    /// `stage, target T, well W, step S: message` (the parts it has).
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.stage)?;
        if let Some(t) = &self.target {
            write!(f, ", target {t}")?;
        }
        if let Some(w) = &self.well {
            write!(f, ", well {w}")?;
        }
        match &self.steps {
            Some(Steps::One(s)) => write!(f, ", step {s}")?,
            Some(Steps::All) => write!(f, ", all steps")?,
            None => {}
        }
        write!(f, ": {}", self.message)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_warning_names_its_target_well_and_step() {
        let w = SampleWarning {
            well: "P7".into(),
            step: "m2".into(),
            reason: "point (1, 2) lies outside the grid (wells.csv line 9)".into(),
            kind: "outside the grid".into(),
        };
        assert_eq!(
            RunWarning::extraction(&w).to_string(),
            "extraction, well P7, step m2: row left out: point (1, 2) lies outside the grid \
             (wells.csv line 9)"
        );
        assert_eq!(
            RunWarning::calibration("dSw", "end-bias correction not kept").to_string(),
            "calibration, target dSw, all steps: end-bias correction not kept"
        );
    }
}
