//! Covariate-shift weights: how typical of the mapped grid nodes each well row is.
//!
//! Wells are drilled where the reservoir is produced or injected, so their attributes (and
//! their changes) are not a random sample of the grid's. Conformal bands calibrated on the wells'
//! scores are then calibrated for the wells' population, not for the nodes they are mapped to.
//! Tibshirani, Barber, Candes & Ramdas (2019, "Conformal prediction under covariate shift",
//! NeurIPS) keep the conformal construction valid when the attributes' distribution shifts and
//! the change given the attributes does not: weigh each calibration score by the likelihood
//! ratio `w(x) = p_node(x) / p_well(x)` of its attributes, and give the new point the mass
//! `w(x_new)` at `+inf` ([`super::conformal::weighted_conformal_quantile`]).
//!
//! **Estimating the ratio.** The ratio is read from a probabilistic classifier of "node" against
//! "well" rows: with both classes weighted to equal total weight, the classifier's probability
//! `pi(x)` of "node" gives `w(x) = pi(x) / (1 - pi(x))` (Bickel, Brueckner & Scheffer 2009,
//! "Discriminative learning under covariate shift", JMLR 10:2137). The classifier is the
//! logistic model of Qin (1998, "Inferences for case-control and semiparametric two-sample
//! density ratio models", Biometrika 85:619), under which `log w(x)` is linear in the
//! attributes: smooth, with one coefficient per attribute, so that a few dozen wells can carry it
//! (a forest's probabilities are 0 or 1 in most leaves when one class outnumbers the other
//! twenty to one). Attributes are standardised, missing values sit at the mean, and the fit is
//! Newton's method (iteratively reweighted least squares) with a small ridge penalty on the
//! slopes (le Cessie & van Houwelingen 1992, Applied Statistics 41:191) so that it converges
//! even when the classes separate. Ratios are clipped to `[1/c, c]` ([`ShiftSettings::max_ratio`]),
//! the usual guard against a few rows taking all the weight.
//!
//! **One weight for the new node.** The exact rule needs `w(x)` at every node, one more forest
//! walk per node. The band uses the mean ratio over the sampled nodes instead, the expected
//! weight of a new node; the rule is exact when every node has that ratio and otherwise an
//! approximation, which the calibration reports beside the coverage at held-out wells.
//!
//! **How strong the shift is.** The area under the ROC curve of the classifier (0.5: wells look
//! like any node; computed in sample, which a model of one coefficient per attribute fitted on
//! thousands of rows barely flatters) and Kish's effective number of wells `(sum v)^2 / sum v^2`
//! of the well weights `v` (Kish 1965, "Survey Sampling", sec. 11.7) go into the diagnostics.

use ndarray::{Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

use super::error::CalibrateError;
use super::units::{Units, count_wells};

/// Kish's effective sample size, defined in [`super::units`] and kept here under its old path.
pub use super::units::effective_size;

/// Settings of the covariate-shift estimate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShiftSettings {
    /// Ridge penalty on the standardised slopes of the logistic model, `>= 0`, in units of the
    /// total weight (each class weighs one half). Default 0.01.
    pub ridge: f64,
    /// Largest ratio `c` (and smallest `1/c`) a row can get, > 1. Default 20.
    pub max_ratio: f64,
}

impl Default for ShiftSettings {
    fn default() -> Self {
        Self {
            ridge: 0.01,
            max_ratio: 20.0,
        }
    }
}

impl ShiftSettings {
    /// Checks every setting's range.
    pub fn check(&self) -> Result<(), CalibrateError> {
        if !(self.ridge >= 0.0 && self.ridge.is_finite()) {
            return Err(CalibrateError::Setting {
                key: "shift.ridge",
                expected: "a finite number >= 0",
                got: self.ridge.to_string(),
            });
        }
        if !(self.max_ratio > 1.0 && self.max_ratio.is_finite()) {
            return Err(CalibrateError::Setting {
                key: "shift.max_ratio",
                expected: "a finite number > 1",
                got: self.max_ratio.to_string(),
            });
        }
        Ok(())
    }
}

/// The estimated shift from the wells to the nodes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CovariateShift {
    /// Ratio `p_node / p_well` at every well row (in the order given).
    pub well_ratio: Vec<f64>,
    /// Mean ratio over the sampled nodes: the weight of a new node.
    pub node_mean_ratio: f64,
    /// Nodes in the sample.
    pub node_rows: usize,
    /// Area under the ROC curve of "node" against "well" (0.5: no shift visible; in-sample).
    pub auc: f64,
    /// Logistic coefficients: intercept, then one slope per standardised attribute.
    pub coefficients: Vec<f64>,
    /// Share of well rows and nodes whose ratio was clipped at `1/c` or `c`.
    pub clipped_share: f64,
}

/// Estimates the ratio `p_node(x) / p_well(x)` at every well row of `well_x` (rows of well
/// `group[i]`) from a sample of node rows `node_x` (same columns). Errors on a shape mismatch,
/// bad settings, or no node or well rows.
pub fn estimate(
    well_x: ArrayView2<f64>,
    group: &[usize],
    node_x: ArrayView2<f64>,
    settings: &ShiftSettings,
) -> Result<CovariateShift, CalibrateError> {
    settings.check()?;
    let (nw, nn) = (well_x.nrows(), node_x.nrows());
    if group.len() != nw {
        return Err(CalibrateError::Length {
            target: "covariate shift".into(),
            what: "group",
            got: group.len(),
            expected: nw,
        });
    }
    if node_x.ncols() != well_x.ncols() {
        return Err(CalibrateError::Length {
            target: "covariate shift".into(),
            what: "node columns",
            got: node_x.ncols(),
            expected: well_x.ncols(),
        });
    }
    if nn == 0 {
        return Err(CalibrateError::Shift(
            "no mapped node (every attribute is null at every node)".into(),
        ));
    }
    if nw == 0 {
        return Err(CalibrateError::Shift("no well rows".into()));
    }
    // Standardised design with an intercept column; missing values at the mean (0).
    let p = well_x.ncols();
    let all = ndarray::concatenate(Axis(0), &[well_x, node_x]).expect("same columns");
    let mut design = Array2::<f64>::zeros((nw + nn, p + 1));
    design.column_mut(0).fill(1.0);
    for c in 0..p {
        let col = all.column(c);
        let finite: Vec<f64> = col.iter().copied().filter(|v| v.is_finite()).collect();
        let m = finite.iter().sum::<f64>() / finite.len().max(1) as f64;
        let var =
            finite.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / finite.len().max(1) as f64;
        let sd = if var > 0.0 { var.sqrt() } else { 1.0 };
        for (r, &v) in col.iter().enumerate() {
            design[[r, c + 1]] = if v.is_finite() { (v - m) / sd } else { 0.0 };
        }
    }
    let label: Vec<f64> = (0..nw + nn).map(|i| f64::from(i >= nw)).collect();
    // Both classes weigh one half in total (balanced), so pi/(1-pi) is the density ratio.
    let weight: Vec<f64> = (0..nw + nn)
        .map(|i| {
            if i < nw {
                0.5 / nw as f64
            } else {
                0.5 / nn as f64
            }
        })
        .collect();
    let beta = logistic_fit(&design, &label, &weight, settings.ridge);
    let pi: Vec<f64> = design
        .rows()
        .into_iter()
        .map(|r| sigmoid(r.iter().zip(&beta).map(|(a, b)| a * b).sum()))
        .collect();
    let c = settings.max_ratio;
    let (p_lo, p_hi) = (1.0 / (1.0 + c), c / (1.0 + c));
    let mut clipped = 0usize;
    let ratio: Vec<f64> = pi
        .iter()
        .map(|&p| {
            if p <= p_lo || p >= p_hi {
                clipped += 1;
            }
            let p = p.clamp(p_lo, p_hi);
            p / (1.0 - p)
        })
        .collect();
    let node_mean_ratio = ratio[nw..].iter().sum::<f64>() / nn as f64;
    Ok(CovariateShift {
        well_ratio: ratio[..nw].to_vec(),
        node_mean_ratio,
        node_rows: nn,
        auc: auc(&pi[..nw], &pi[nw..]),
        coefficients: beta,
        clipped_share: clipped as f64 / (nw + nn) as f64,
    })
}

fn sigmoid(z: f64) -> f64 {
    1.0 / (1.0 + (-z).exp())
}

/// Weighted logistic regression by Newton's method: maximises
/// `sum_i w_i [y_i log pi_i + (1 - y_i) log(1 - pi_i)] - ridge/2 sum_{j>0} beta_j^2` with
/// `pi_i = sigmoid(x_i . beta)`; column 0 of `x` is the (unpenalised) intercept. Stops when the
/// largest step is below `1e-10` or after 100 steps.
pub fn logistic_fit(x: &Array2<f64>, y: &[f64], w: &[f64], ridge: f64) -> Vec<f64> {
    let (n, k) = x.dim();
    let mut beta = vec![0.0; k];
    for _ in 0..100 {
        // Gradient g and negative Hessian h of the penalised log-likelihood.
        let mut g = vec![0.0; k];
        let mut h = vec![0.0; k * k];
        for i in 0..n {
            let row = x.row(i);
            let z: f64 = row.iter().zip(&beta).map(|(a, b)| a * b).sum();
            let pi = sigmoid(z);
            let r = w[i] * (y[i] - pi);
            let v = w[i] * pi * (1.0 - pi);
            for a in 0..k {
                g[a] += r * row[a];
                for b in 0..=a {
                    h[a * k + b] += v * row[a] * row[b];
                }
            }
        }
        for a in 1..k {
            g[a] -= ridge * beta[a];
            h[a * k + a] += ridge;
        }
        // A tiny floor on the diagonal keeps the Cholesky factor defined.
        for a in 0..k {
            h[a * k + a] += 1e-12;
        }
        let step = cholesky_solve(&mut h, k, &g);
        let largest = step.iter().fold(0.0f64, |m, s| m.max(s.abs()));
        for (b, s) in beta.iter_mut().zip(&step) {
            *b += s;
        }
        if !largest.is_finite() || largest < 1e-10 {
            break;
        }
    }
    beta
}

/// Solves `A s = g` for symmetric positive definite `A` (`k x k`, lower triangle used, row
/// major), overwriting `A` with its Cholesky factor.
fn cholesky_solve(a: &mut [f64], k: usize, g: &[f64]) -> Vec<f64> {
    for j in 0..k {
        let mut d = a[j * k + j];
        for m in 0..j {
            d -= a[j * k + m] * a[j * k + m];
        }
        let d = d.max(1e-300).sqrt();
        a[j * k + j] = d;
        for i in j + 1..k {
            let mut v = a[i * k + j];
            for m in 0..j {
                v -= a[i * k + m] * a[j * k + m];
            }
            a[i * k + j] = v / d;
        }
    }
    // Forward then back substitution.
    let mut z = vec![0.0; k];
    for i in 0..k {
        let mut v = g[i];
        for m in 0..i {
            v -= a[i * k + m] * z[m];
        }
        z[i] = v / a[i * k + i];
    }
    let mut s = vec![0.0; k];
    for i in (0..k).rev() {
        let mut v = z[i];
        for m in i + 1..k {
            v -= a[m * k + i] * s[m];
        }
        s[i] = v / a[i * k + i];
    }
    s
}
/// Area under the ROC curve of scores `pos` (should be high) against `neg`: the probability that
/// a random `pos` exceeds a random `neg`, ties counting one half (Mann-Whitney U / (n1 n2);
/// Hanley & McNeil 1982, Radiology 143:29).
pub fn auc(neg: &[f64], pos: &[f64]) -> f64 {
    let mut all: Vec<(f64, bool)> = neg
        .iter()
        .map(|&v| (v, false))
        .chain(pos.iter().map(|&v| (v, true)))
        .filter(|p| p.0.is_finite())
        .collect();
    all.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (mut rank_sum, mut n_pos, mut n_neg) = (0.0, 0.0, 0.0);
    let mut i = 0;
    while i < all.len() {
        let mut j = i;
        while j < all.len() && all[j].0 == all[i].0 {
            j += 1;
        }
        // Mid-rank of the tie group (ranks from 1).
        let mid = (i + 1 + j) as f64 / 2.0;
        for p in &all[i..j] {
            if p.1 {
                rank_sum += mid;
                n_pos += 1.0;
            } else {
                n_neg += 1.0;
            }
        }
        i = j;
    }
    if n_pos == 0.0 || n_neg == 0.0 {
        return f64::NAN;
    }
    (rank_sum - n_pos * (n_pos + 1.0) / 2.0) / (n_pos * n_neg)
}

/// Covariate-shift ratios of one target's calibration rows, as [`TargetData`] takes them.
///
/// [`TargetData`]: super::input::TargetData
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowShift<'a> {
    /// Ratio `p_node / p_well` at every row.
    pub ratio: &'a [f64],
    /// Ratio of a new node (the mean over the sampled nodes).
    pub test_ratio: f64,
}

/// What the shift did to a target's band, for the diagnostics.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShiftDiagnostics {
    /// Kish's effective number of wells under the shifted weights (the number of wells without).
    pub effective_wells: f64,
    /// Weight of a new node relative to a well of average weight (1: no shift).
    pub test_weight: f64,
    /// Out-of-fold coverage of the kept band at held-out wells, each well weighing one.
    pub coverage_wells: f64,
    /// The same coverage with each held-out row weighted by its ratio: the estimate of the
    /// coverage at the mapped nodes (Tibshirani et al. 2019's importance weighting).
    pub coverage_nodes: f64,
}

/// How representative the wells are of the mapped nodes, for `model.json` and `summary.json`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShiftSummary {
    /// Area under the ROC curve of the node-against-well classifier (0.5: the wells' attributes
    /// look like any node's; 1: they never do).
    pub auc: f64,
    /// Kish's effective number of wells under the ratio weights (of `wells`).
    pub effective_wells: f64,
    /// Wells in the training set.
    pub wells: usize,
    /// Mean ratio over the sampled nodes, relative to the wells' mean ratio (1: no shift).
    pub node_weight: f64,
    /// Nodes sampled.
    pub node_rows: usize,
    /// Share of rows whose ratio was clipped.
    pub clipped_share: f64,
    /// Whether the bands were calibrated with these weights (manifest
    /// `[calibration] covariate_shift`).
    pub applied: bool,
}

impl CovariateShift {
    /// The summary of this shift for wells `group` (one per well row, as given to [`estimate`]).
    pub fn summary(&self, group: &[usize], applied: bool) -> ShiftSummary {
        let units = Units::shifted(group, &self.well_ratio, self.node_mean_ratio);
        ShiftSummary {
            auc: self.auc,
            effective_wells: units.effective_wells(),
            wells: count_wells(group),
            node_weight: units.test_weight,
            node_rows: self.node_rows,
            clipped_share: self.clipped_share,
            applied,
        }
    }
}
