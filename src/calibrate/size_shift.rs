//! The size of a change at the nodes is not the size at the wells (target shift of the
//! conditional part of a hurdle target), and the conditional distribution is reweighted to it.
//!
//! Wells stand where the change is largest, so among the changed rows the large changes are
//! over-represented at wells. With the change `y` cut into bins `b` (the wells' changed-row
//! quantiles), the conditional distribution `G` of a node can be adjusted to the nodes' bin
//! shares `pi_b` from the wells' shares `pi_t,b`, if the attributes of a location given its bin
//! look alike at wells and at nodes (target shift for regression, Zhang, Schoelkopf, Muandet &
//! Wang 2013, ICML, "Domain adaptation under target and conditional shift"; with the target
//! discretised, the label shift of Saerens, Latinne & Decaestecker 2002):
//!
//! ```text
//! dG'(y) = r_b(y) dG(y) / sum_b r_b G(bin b),   r_b = pi_b / pi_t,b
//! ```
//!
//! and the nodes' shares are estimated by the EM iteration of Saerens et al. (2002) over the
//! nodes' bin masses `G_i(bin b)`, each node weighing its probability of a change (the
//! conditional part concerns the changed nodes only). Guards (EM amplifies miscalibration):
//! the ratios are kept in `[1 / MAX_RATIO, MAX_RATIO]`, the iteration stops after
//! [`MAX_ITERATIONS`] and says whether it settled, and all steps are pooled.

use super::hurdle::Conditional;
use serde::{Deserialize, Serialize};

/// Most EM iterations.
pub const MAX_ITERATIONS: usize = 1000;
/// The iteration has settled when no bin share moves by more than this.
pub const TOLERANCE: f64 = 1e-8;
/// Largest ratio of a bin's node share to its wells' share (and smallest, its inverse).
pub const MAX_RATIO: f64 = 4.0;

/// Masses of `g` in the bins cut by the ascending interior `edges`: bin 0 is `(-inf, e_0]`,
/// bin `k` is `(e_(k-1), e_k]`, the last `(e_last, inf)`. Negative differences (a CDF that is not
/// monotone by rounding) count as 0.
pub fn bin_masses<G: Conditional>(g: &G, edges: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(edges.len() + 1);
    let mut prev = 0.0;
    for &e in edges {
        let c = g.cdf(e).clamp(0.0, 1.0);
        out.push((c - prev).max(0.0));
        prev = prev.max(c);
    }
    out.push((1.0 - prev).max(0.0));
    out
}

/// `g` reweighted bin by bin: `dG' = r_b dG / Z` ([`bin_masses`] for the bins).
pub struct Reweighted<'a, G: Conditional> {
    g: &'a G,
    edges: &'a [f64],
    ratio: &'a [f64],
    /// `G` at each edge (running maximum).
    at_edge: Vec<f64>,
    /// Reweighted mass below each bin, normalised (length bins + 1, ends at 1).
    cum: Vec<f64>,
    /// Normaliser `Z`.
    z: f64,
}

impl<'a, G: Conditional> Reweighted<'a, G> {
    /// `g` with bin ratios `ratio` (one per bin, `edges.len() + 1`). When the reweighted mass is
    /// not positive, the ratios are ignored (the result is `g`).
    pub fn new(g: &'a G, edges: &'a [f64], ratio: &'a [f64]) -> Self {
        let mut at_edge = Vec::with_capacity(edges.len());
        let mut prev: f64 = 0.0;
        for &e in edges {
            prev = prev.max(g.cdf(e).clamp(0.0, 1.0));
            at_edge.push(prev);
        }
        let masses = bin_masses(g, edges);
        let mut cum = vec![0.0];
        let mut c = 0.0;
        for (m, r) in masses.iter().zip(ratio) {
            c += m * r;
            cum.push(c);
        }
        let z = c;
        Self {
            g,
            edges,
            ratio,
            at_edge,
            cum,
            z,
        }
    }

    fn valid(&self) -> bool {
        self.z.is_finite() && self.z > 0.0 && self.ratio.len() == self.edges.len() + 1
    }

    /// `G` at the lower edge of bin `b` (0 for the first).
    fn lower(&self, b: usize) -> f64 {
        if b == 0 { 0.0 } else { self.at_edge[b - 1] }
    }
}

impl<G: Conditional> Conditional for Reweighted<'_, G> {
    fn cdf(&self, y: f64) -> f64 {
        if !self.valid() {
            return self.g.cdf(y);
        }
        // Bin of y: the number of edges strictly below it.
        let b = self.edges.partition_point(|&e| e < y);
        let inside = (self.g.cdf(y).clamp(0.0, 1.0) - self.lower(b)).max(0.0);
        ((self.cum[b] + self.ratio[b] * inside) / self.z).clamp(0.0, 1.0)
    }

    fn quantile(&self, v: f64) -> f64 {
        if !self.valid() {
            return self.g.quantile(v);
        }
        let target = v.clamp(0.0, 1.0) * self.z;
        // First bin whose cumulative reweighted mass reaches the target and has mass.
        let nb = self.ratio.len();
        let mut b = nb - 1;
        for k in 0..nb {
            if self.cum[k + 1] >= target && self.cum[k + 1] > self.cum[k] {
                b = k;
                break;
            }
        }
        let within = ((target - self.cum[b]) / self.ratio[b]).max(0.0);
        let level = (self.lower(b) + within).clamp(0.0, 1.0);
        let y = self.g.quantile(level);
        let lo = if b == 0 {
            f64::NEG_INFINITY
        } else {
            self.edges[b - 1]
        };
        let hi = if b == nb - 1 {
            f64::INFINITY
        } else {
            self.edges[b]
        };
        y.clamp(lo, hi)
    }
}

/// What the multi-class EM iteration found.
#[derive(Clone, Debug, PartialEq)]
pub struct BinEstimate {
    /// Estimated bin shares of the unlabelled population (sum 1).
    pub shares: Vec<f64>,
    /// Iterations run.
    pub iterations: usize,
    /// Whether the shares settled before [`MAX_ITERATIONS`].
    pub converged: bool,
}

/// Ratios `pi / pi_t` kept in `[1 / max_ratio, max_ratio]`, and the shares they give.
fn bounded(shares: &[f64], training: &[f64], max_ratio: f64) -> Vec<f64> {
    let r: Vec<f64> = shares
        .iter()
        .zip(training)
        .map(|(s, t)| (s / t).clamp(1.0 / max_ratio, max_ratio))
        .collect();
    let total: f64 = r.iter().zip(training).map(|(r, t)| r * t).sum();
    r.iter().zip(training).map(|(r, t)| r * t / total).collect()
}

/// The bin shares of a population whose calibrated bin posteriors (under the `training` shares)
/// are `masses[i]`, each row weighing `weight[i]`, by the EM iteration of Saerens et al. (2002)
/// with the ratio bound `max_ratio`. Rows with a non-finite mass or weight are left out. `None`
/// when the training shares are not all positive or nothing is left.
pub fn estimate(
    masses: &[Vec<f64>],
    weight: &[f64],
    training: &[f64],
    max_ratio: f64,
) -> Option<BinEstimate> {
    let k = training.len();
    if k < 2 || training.iter().any(|t| !(t.is_finite() && *t > 0.0)) {
        return None;
    }
    let rows: Vec<(&Vec<f64>, f64)> = masses
        .iter()
        .zip(weight)
        .filter(|(m, w)| {
            m.len() == k
                && w.is_finite()
                && **w > 0.0
                && m.iter().all(|x| x.is_finite())
                && m.iter().sum::<f64>() > 0.0
        })
        .map(|(m, &w)| (m, w))
        .collect();
    let total: f64 = rows.iter().map(|r| r.1).sum();
    if rows.is_empty() || total <= 0.0 {
        return None;
    }
    let mut shares = training.to_vec();
    for it in 1..=MAX_ITERATIONS {
        let ratio: Vec<f64> = shares.iter().zip(training).map(|(s, t)| s / t).collect();
        let mut next = vec![0.0; k];
        for (m, w) in &rows {
            let z: f64 = m.iter().zip(&ratio).map(|(m, r)| m * r).sum();
            if z > 0.0 {
                for b in 0..k {
                    next[b] += w * m[b] * ratio[b] / z;
                }
            }
        }
        let sum: f64 = next.iter().sum();
        let next = bounded(
            &next.iter().map(|x| x / sum).collect::<Vec<_>>(),
            training,
            max_ratio,
        );
        let moved = next
            .iter()
            .zip(&shares)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        shares = next;
        if moved < TOLERANCE {
            return Some(BinEstimate {
                shares,
                iterations: it,
                converged: true,
            });
        }
    }
    Some(BinEstimate {
        shares,
        iterations: MAX_ITERATIONS,
        converged: false,
    })
}

/// The bins of a hurdle target's change given a change, and the wells' shares in them.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SizeBins {
    /// Interior bin edges, ascending (quantiles of the wells' changed values).
    pub edges: Vec<f64>,
    /// Weighted mean of the held-out conditional distribution's mass per bin over the changed
    /// rows: the training shares the EM iteration starts from.
    pub training: Vec<f64>,
    /// Weighted share of changed rows per bin (for the record; equal to `training` for a
    /// perfectly calibrated conditional part).
    pub observed: Vec<f64>,
}

/// The target shift applied to a hurdle target's conditional distribution at the nodes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SizeShift {
    /// The bins and the wells' shares.
    pub bins: SizeBins,
    /// The nodes' shares estimated by EM over every mapped node of every step.
    pub estimated: Vec<f64>,
    /// Ratio per bin (`estimated / training`).
    pub ratio: Vec<f64>,
    /// EM iterations.
    pub iterations: usize,
    /// Whether EM settled.
    pub converged: bool,
    /// Node-steps the estimate was made on.
    pub nodes: usize,
}

impl SizeShift {
    /// Estimate from each node's bin masses and weight (its probability of a change).
    pub fn fit(bins: &SizeBins, masses: &[Vec<f64>], weight: &[f64]) -> Option<Self> {
        let e = estimate(masses, weight, &bins.training, MAX_RATIO)?;
        let ratio = e
            .shares
            .iter()
            .zip(&bins.training)
            .map(|(s, t)| s / t)
            .collect();
        Some(Self {
            bins: bins.clone(),
            estimated: e.shares,
            ratio,
            iterations: e.iterations,
            converged: e.converged,
            nodes: masses.len(),
        })
    }

    /// `g` reweighted to the nodes' shares.
    pub fn apply<'a, G: Conditional>(&'a self, g: &'a G) -> Reweighted<'a, G> {
        Reweighted::new(g, &self.bins.edges, &self.ratio)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::hurdle::Steps;

    #[test]
    fn unit_ratios_change_nothing() {
        let g = Steps::new(&[1.0, 2.0, 3.0, 4.0, 5.0], &[1.0; 5]).unwrap();
        let edges = [2.5, 4.0];
        let r = [1.0, 1.0, 1.0];
        let w = Reweighted::new(&g, &edges, &r);
        for y in [0.0, 1.0, 2.2, 3.0, 4.0, 4.5, 6.0] {
            assert!((w.cdf(y) - g.cdf(y)).abs() < 1e-12, "{y}");
        }
        for v in [0.1, 0.2, 0.39, 0.41, 0.6, 0.8, 0.99] {
            assert_eq!(w.quantile(v), g.quantile(v), "{v}");
        }
    }

    #[test]
    fn reweighting_by_hand() {
        // Masses 0.4 / 0.4 / 0.2 in bins (-inf, 2.5], (2.5, 4], (4, inf); ratios 2, 1, 0.5:
        // 0.8 / 0.4 / 0.1 over Z = 1.3.
        let g = Steps::new(&[1.0, 2.0, 3.0, 4.0, 5.0], &[1.0; 5]).unwrap();
        let edges = [2.5, 4.0];
        let r = [2.0, 1.0, 0.5];
        let w = Reweighted::new(&g, &edges, &r);
        assert!((w.cdf(1.0) - 0.4 / 1.3).abs() < 1e-12);
        assert!((w.cdf(2.5) - 0.8 / 1.3).abs() < 1e-12);
        assert!((w.cdf(3.0) - 1.0 / 1.3).abs() < 1e-12);
        assert!((w.cdf(4.0) - 1.2 / 1.3).abs() < 1e-12);
        assert!((w.cdf(5.0) - 1.0).abs() < 1e-12);
        assert_eq!(w.quantile(0.5), 2.0);
        assert_eq!(w.quantile(0.7), 3.0);
        assert_eq!(w.quantile(0.95), 5.0);
    }
}
