//! The share of change among the mapped nodes is not the share at the wells (prior, or label,
//! shift), and the probability of a change is adjusted to it.
//!
//! Wells are drilled where the reservoir changed most, so the share of well rows that changed is
//! higher than the share of nodes that did. A probability of a change calibrated on the wells
//! carries the wells' share as its prior and is too high between them. If the attributes of a
//! changed (or unchanged) location look alike at wells and at nodes and only the shares differ,
//! Bayes' rule gives the probability under the nodes' share `pi` from the one under the wells'
//! share `pi_t`:
//!
//! ```text
//! p' = (pi / pi_t) p / [ (pi / pi_t) p + ((1 - pi) / (1 - pi_t)) (1 - p) ]
//! ```
//!
//! and the nodes' share, which no label reveals, is the maximum-likelihood estimate over the
//! unlabelled nodes found by the EM iteration of Saerens, Latinne & Decaestecker (2002, Neural
//! Computation 14:21, "Adjusting the outputs of a classifier to new a priori probabilities"):
//! adjust every node's `p` with the current `pi`, take their mean as the next `pi`, repeat. The
//! iteration presumes calibrated probabilities (Alexandari, Kundaje & Shrikumar 2020, ICML,
//! "Maximum likelihood with bias-corrected calibration is hard-to-beat at label shift
//! adaptation"); the hurdle's probability is recalibrated by isotonic regression on held-out
//! wells, whose weighted mean equals the wells' weighted share of changed rows, so that share is
//! the training prior. When nothing shifted, the estimate stays at the training prior (a fixed
//! point of the iteration for calibrated probabilities).
//!
//! Guards: the prior is kept in `[PRIOR_CLIP, 1 - PRIOR_CLIP]`; the iteration stops after
//! [`MAX_ITERATIONS`] and says whether it settled; a training prior at 0 or 1 gives no estimate.
//! Equal probabilities are pooled first (an isotonic map takes few distinct values), so the
//! cost does not grow with the node count.

use serde::{Deserialize, Serialize};

/// Most EM iterations.
pub const MAX_ITERATIONS: usize = 1000;
/// The iteration has settled when the prior moves by less than this.
pub const TOLERANCE: f64 = 1e-8;
/// Priors are kept in `[PRIOR_CLIP, 1 - PRIOR_CLIP]`.
pub const PRIOR_CLIP: f64 = 1e-3;

/// Probability `p` under training prior `training`, adjusted to the prior `new` (Bayes' rule with
/// unchanged class-conditional densities; Saerens et al. 2002, eq. 2.4). `NaN` stays `NaN`;
/// `p` of exactly 0 or 1 stays.
pub fn adjust(p: f64, training: f64, new: f64) -> f64 {
    if !p.is_finite() {
        return p;
    }
    let p = p.clamp(0.0, 1.0);
    let a = new / training * p;
    let b = (1.0 - new) / (1.0 - training) * (1.0 - p);
    if a + b > 0.0 { a / (a + b) } else { p }
}

/// What the EM iteration found.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EmEstimate {
    /// The estimated prior of the unlabelled population.
    pub prior: f64,
    /// Iterations run.
    pub iterations: usize,
    /// Whether the prior moved by less than [`TOLERANCE`] before [`MAX_ITERATIONS`].
    pub converged: bool,
}

/// The prior of the population whose calibrated probabilities (under `training`) are `p`, by
/// the EM iteration of Saerens et al. (2002). Non-finite `p` are left out. `None` when no `p` is
/// finite or `training` is not inside `(PRIOR_CLIP, 1 - PRIOR_CLIP)`.
pub fn estimate(p: &[f64], training: f64) -> Option<EmEstimate> {
    if !(training > PRIOR_CLIP && training < 1.0 - PRIOR_CLIP) {
        return None;
    }
    let mut v: Vec<f64> = p
        .iter()
        .filter(|x| x.is_finite())
        .map(|x| x.clamp(0.0, 1.0))
        .collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    // Equal values pooled: (value, count).
    let mut groups: Vec<(f64, f64)> = Vec::new();
    for x in v.iter().copied() {
        match groups.last_mut() {
            Some(g) if g.0 == x => g.1 += 1.0,
            _ => groups.push((x, 1.0)),
        }
    }
    let n = v.len() as f64;
    let mut prior = training;
    for it in 1..=MAX_ITERATIONS {
        let next = (groups
            .iter()
            .map(|&(x, c)| c * adjust(x, training, prior))
            .sum::<f64>()
            / n)
            .clamp(PRIOR_CLIP, 1.0 - PRIOR_CLIP);
        let moved = (next - prior).abs();
        prior = next;
        if moved < TOLERANCE {
            return Some(EmEstimate {
                prior,
                iterations: it,
                converged: true,
            });
        }
    }
    Some(EmEstimate {
        prior,
        iterations: MAX_ITERATIONS,
        converged: false,
    })
}

/// Mean probability of a change at the mapped nodes of one step, before and after the
/// adjustment (the share of change the maps imply there).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepShare {
    /// Step name.
    pub step: String,
    /// Mapped nodes of the step.
    pub nodes: usize,
    /// Mean probability under the training prior.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub before: f64,
    /// Mean adjusted probability.
    #[serde(deserialize_with = "crate::metrics::serde_nan::f64_or_nan")]
    pub after: f64,
}

/// The prior shift applied to a hurdle target's probability of a change at the nodes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PriorShift {
    /// Training prior: the wells' weighted share of changed rows (all steps).
    pub training: f64,
    /// The nodes' prior applied: EM's estimate, at most the training prior ([`PriorShift::fit`]).
    pub estimated: f64,
    /// EM's own estimate over the mapped nodes of every step (equal to `estimated` unless it
    /// exceeded the training prior; absent in models saved before the bound).
    #[serde(default)]
    pub em: Option<f64>,
    /// Whether EM's estimate exceeded the training prior and was held at it.
    #[serde(default)]
    pub held_at_wells: bool,
    /// EM iterations.
    pub iterations: usize,
    /// Whether EM settled within [`MAX_ITERATIONS`].
    pub converged: bool,
    /// Node-steps the estimate was made on.
    pub nodes: usize,
    /// Per step, the mean probability before and after.
    pub by_step: Vec<StepShare>,
}

impl PriorShift {
    /// `p` adjusted from the training prior to the estimated one.
    pub fn apply(&self, p: f64) -> f64 {
        adjust(p, self.training, self.estimated)
    }

    /// Estimates the nodes' prior from the calibrated probabilities of each step's nodes
    /// (`steps`: step name and probabilities, `NaN` where a node is not mapped) under the
    /// `training` prior, pooled over the steps. `None` when no estimate can be made.
    ///
    /// The estimate is held at the training prior when EM puts it above: wells are drilled where
    /// the reservoir changed most, so the nodes' share of change is not larger than the wells'.
    /// An estimate above it comes from probabilities that are not calibrated at the nodes
    /// (ground where the pressure rose ahead of a flood front can look swept), which EM
    /// amplifies. On generated fields EM went above the wells' share for 9 of 78 hurdle targets,
    /// each time with the nodes' true share below the wells' (DEVELOPERS.md, "The nodes' share
    /// of change").
    pub fn fit(training: f64, steps: &[(String, Vec<f64>)]) -> Option<Self> {
        let all: Vec<f64> = steps
            .iter()
            .flat_map(|(_, p)| p.iter().copied().filter(|v| v.is_finite()))
            .collect();
        let em = estimate(&all, training)?;
        let held_at_wells = em.prior > training;
        let mut shift = Self {
            training,
            estimated: em.prior.min(training),
            em: Some(em.prior),
            held_at_wells,
            iterations: em.iterations,
            converged: em.converged,
            nodes: all.len(),
            by_step: Vec::new(),
        };
        shift.by_step = steps
            .iter()
            .map(|(name, p)| {
                let v: Vec<f64> = p.iter().copied().filter(|x| x.is_finite()).collect();
                let mean = |f: &dyn Fn(f64) -> f64| {
                    v.iter().map(|&x| f(x.clamp(0.0, 1.0))).sum::<f64>() / v.len() as f64
                };
                StepShare {
                    step: name.clone(),
                    nodes: v.len(),
                    before: mean(&|x| x),
                    after: mean(&|x| shift.apply(x)),
                }
            })
            .collect();
        Some(shift)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn adjusting_to_the_same_prior_changes_nothing() {
        for p in [0.0, 0.1, 0.37, 0.5, 0.93, 1.0] {
            assert!((adjust(p, 0.4, 0.4) - p).abs() < 1e-15);
        }
        assert!(adjust(f64::NAN, 0.4, 0.2).is_nan());
    }

    #[test]
    fn a_training_prior_at_the_ends_gives_no_estimate() {
        assert!(estimate(&[0.2, 0.3], 0.0).is_none());
        assert!(estimate(&[0.2, 0.3], 1.0).is_none());
        assert!(estimate(&[f64::NAN], 0.5).is_none());
    }

    #[test]
    fn certain_probabilities_give_their_share() {
        // With p in {0, 1} the adjusted values do not move, so the prior is their mean.
        let p = [1.0, 0.0, 0.0, 0.0];
        let e = estimate(&p, 0.7).unwrap();
        assert!((e.prior - 0.25).abs() < 1e-9, "{e:?}");
        assert!(e.converged);
    }
}
