//! Scores of point predictions, bands, predictive distributions and probabilities, on plain slices.
//!
//! Formulas (Gneiting & Raftery 2007, "Strictly proper scoring rules, prediction, and estimation",
//! JASA 102:359; referred to as G&R below):
//!
//! - R2 `= 1 - sum (y - p)^2 / sum (y - mean y)^2`; RMSE; bias `= mean(p - y)` (prediction minus
//!   truth: positive means over-prediction).
//! - Coverage `= mean 1{l <= y <= u}`; mean width `= mean(u - l)`.
//! - Interval score at level `1 - a` (G&R eq. 43): `(u - l) + (2/a)(l - y) 1{y < l} + (2/a)(y - u) 1{y > u}`.
//! - Pinball (quantile) loss (G&R eq. 40, Koenker & Bassett 1978): `rho_tau(y - q)`,
//!   `rho_tau(v) = v (tau - 1{v < 0})`.
//! - CRPS `= integral (F(z) - 1{z >= y})^2 dz` (G&R eq. 20). From a set of quantiles it uses
//!   `CRPS = 2 integral_0^1 rho_tau(y - F^-1(tau)) dtau` (G&R section 4.2; Laio & Tamea 2007,
//!   HESS 11:1267) with the midpoint rule: level `tau_k` stands for the interval between the
//!   midpoints to its neighbours (0 and 1 at the ends). The closed form for a Gaussian `N(mu, s)`
//!   (G&R eq. 21): `s [z (2 Phi(z) - 1) + 2 phi(z) - 1/sqrt(pi)]`, `z = (y - mu)/s`; for an
//!   ensemble (empirical distribution): `E|X - y| - E|X - X'|/2` (G&R eq. 22).
//! - Brier score (Brier 1950): `mean (p - o)^2`, `o` = 1 if the event happened.
//! - PIT histogram (Dawid 1984; Gneiting, Balabdaoui & Raftery 2007): fraction of PIT values per
//!   equal-width bin of [0, 1]; flat when calibrated.
//! - Deciles of the truth use the linear-interpolation quantile (Hyndman & Fan 1996, type 7):
//!   bottom decile rows have `y <= q(0.1)`, top decile rows `y >= q(0.9)`.
//!
//! [`Metrics::compute`] skips rows where the truth, middle or band edges are not finite (null grid
//! nodes) and says how many rows it used.

use serde::{Deserialize, Deserializer, Serialize};
use statrs::distribution::{Continuous, ContinuousCDF, Normal};

/// Errors of metric computation.
#[derive(Debug, thiserror::Error)]
pub enum MetricsError {
    /// Inputs that must have one entry per row differ in length.
    #[error("metrics: `{what}` has {got} entries, expected {expected} (one per row)")]
    Length {
        /// Which input.
        what: String,
        /// Its length.
        got: usize,
        /// Expected length.
        expected: usize,
    },
    /// The level is outside (0, 1), or quantile levels are not increasing inside (0, 1).
    #[error("metrics: {0}")]
    Level(String),
    /// No row has finite truth, middle and band edges.
    #[error("metrics: no row with finite truth, middle and band edges (of {0} rows)")]
    NoRows(usize),
}

/// Serde helpers: `NaN` is written as JSON `null` (serde_json does this) and read back as `NaN`.
pub mod serde_nan {
    use super::*;

    /// Read an `f64` that may be `null` (meaning undefined, `NaN`).
    pub fn f64_or_nan<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }

    /// Read `[(label, value)]` pairs whose values may be `null`.
    pub fn pairs_or_nan<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<(String, f64)>, D::Error> {
        let v = Vec::<(String, Option<f64>)>::deserialize(d)?;
        Ok(v.into_iter()
            .map(|(s, x)| (s, x.unwrap_or(f64::NAN)))
            .collect())
    }

    /// Read a list of `f64` that may contain `null`.
    pub fn vec_or_nan<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
        let v = Vec::<Option<f64>>::deserialize(d)?;
        Ok(v.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
    }
}

fn mean(v: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = v.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    if n == 0 { f64::NAN } else { s / n as f64 }
}

/// Coefficient of determination `1 - SS_res / SS_tot`; `NaN` when the truth is constant or empty.
pub fn r2(truth: &[f64], pred: &[f64]) -> f64 {
    let m = mean(truth.iter().copied());
    let ss_tot: f64 = truth.iter().map(|y| (y - m).powi(2)).sum();
    let ss_res: f64 = truth.iter().zip(pred).map(|(y, p)| (y - p).powi(2)).sum();
    if ss_tot > 0.0 {
        1.0 - ss_res / ss_tot
    } else {
        f64::NAN
    }
}

/// Root mean squared error.
pub fn rmse(truth: &[f64], pred: &[f64]) -> f64 {
    mean(truth.iter().zip(pred).map(|(y, p)| (y - p).powi(2))).sqrt()
}

/// Mean of `pred - truth` (positive: over-prediction).
pub fn bias(truth: &[f64], pred: &[f64]) -> f64 {
    mean(truth.iter().zip(pred).map(|(y, p)| p - y))
}

/// Least-squares slope of the truth regressed on the prediction: 1 for a calibrated predictor,
/// above 1 when predictions are shrunk towards the mean. `NaN` when predictions are constant.
pub fn slope(truth: &[f64], pred: &[f64]) -> f64 {
    let mp = mean(pred.iter().copied());
    let my = mean(truth.iter().copied());
    let sxy: f64 = truth
        .iter()
        .zip(pred)
        .map(|(y, p)| (p - mp) * (y - my))
        .sum();
    let sxx: f64 = pred.iter().map(|p| (p - mp).powi(2)).sum();
    if sxx > 0.0 { sxy / sxx } else { f64::NAN }
}

/// Fraction of rows with `lo <= truth <= hi`.
pub fn coverage(truth: &[f64], lo: &[f64], hi: &[f64]) -> f64 {
    mean(
        truth
            .iter()
            .zip(lo.iter().zip(hi))
            .map(|(y, (l, u))| f64::from(u8::from(l <= y && y <= u))),
    )
}

/// Mean of `hi - lo`.
pub fn mean_width(lo: &[f64], hi: &[f64]) -> f64 {
    mean(lo.iter().zip(hi).map(|(l, u)| u - l))
}

/// Interval score of one row at miss rate `alpha` (G&R eq. 43).
pub fn interval_score_one(y: f64, l: f64, u: f64, alpha: f64) -> f64 {
    (u - l) + (2.0 / alpha) * (l - y).max(0.0) + (2.0 / alpha) * (y - u).max(0.0)
}

/// Mean interval score at miss rate `alpha` (the band's nominal level is `1 - alpha`).
pub fn interval_score(truth: &[f64], lo: &[f64], hi: &[f64], alpha: f64) -> f64 {
    mean(
        truth
            .iter()
            .zip(lo.iter().zip(hi))
            .map(|(&y, (&l, &u))| interval_score_one(y, l, u, alpha)),
    )
}

/// Pinball loss of one row: `rho_tau(y - q)`.
pub fn pinball_one(y: f64, q: f64, tau: f64) -> f64 {
    let v = y - q;
    v * (tau - if v < 0.0 { 1.0 } else { 0.0 })
}

/// Mean pinball loss of quantile predictions at level `tau`.
pub fn pinball(truth: &[f64], pred: &[f64], tau: f64) -> f64 {
    mean(
        truth
            .iter()
            .zip(pred)
            .map(|(&y, &q)| pinball_one(y, q, tau)),
    )
}

/// Midpoint-rule weights of quantile levels on (0, 1): each level stands for the interval between
/// the midpoints to its neighbours, the first starting at 0 and the last ending at 1.
pub fn level_weights(levels: &[f64]) -> Vec<f64> {
    let n = levels.len();
    (0..n)
        .map(|k| {
            let a = if k == 0 {
                0.0
            } else {
                0.5 * (levels[k - 1] + levels[k])
            };
            let b = if k + 1 == n {
                1.0
            } else {
                0.5 * (levels[k] + levels[k + 1])
            };
            b - a
        })
        .collect()
}

/// CRPS of one row from predictive quantiles `q` at increasing `levels`:
/// `2 sum_k w_k rho_{tau_k}(y - q_k)` with [`level_weights`]. Converges to the exact CRPS as the
/// levels fill (0, 1); with few levels it is a coarse, still proper-in-the-quantiles, summary.
pub fn crps_from_quantiles(y: f64, levels: &[f64], q: &[f64]) -> f64 {
    let w = level_weights(levels);
    2.0 * levels
        .iter()
        .zip(q)
        .zip(&w)
        .map(|((&tau, &qk), &wk)| wk * pinball_one(y, qk, tau))
        .sum::<f64>()
}

/// CRPS of a Gaussian predictive distribution `N(mu, sigma^2)` at `y` (G&R eq. 21).
pub fn crps_gaussian(y: f64, mu: f64, sigma: f64) -> f64 {
    let z = (y - mu) / sigma;
    let n = Normal::standard();
    sigma * (z * (2.0 * n.cdf(z) - 1.0) + 2.0 * n.pdf(z) - 1.0 / std::f64::consts::PI.sqrt())
}

/// CRPS of the empirical distribution of `members` at `y`: `E|X - y| - E|X - X'|/2` (G&R eq. 22),
/// computed in O(m log m).
pub fn crps_ensemble(y: f64, members: &[f64]) -> f64 {
    let m = members.len();
    if m == 0 {
        return f64::NAN;
    }
    let mut s = members.to_vec();
    s.sort_by(|a, b| a.total_cmp(b));
    let e1 = s.iter().map(|x| (x - y).abs()).sum::<f64>() / m as f64;
    // sum_{i,j} |x_i - x_j| = 2 sum_i (2i - m + 1) x_(i) for sorted x (0-based i).
    let pair: f64 = s
        .iter()
        .enumerate()
        .map(|(i, x)| (2.0 * i as f64 - m as f64 + 1.0) * x)
        .sum::<f64>()
        * 2.0;
    e1 - pair / (2.0 * (m * m) as f64)
}

/// Brier score: mean of `(p - o)^2` over rows with a finite probability.
pub fn brier(prob: &[f64], outcome: &[bool]) -> f64 {
    mean(
        prob.iter()
            .zip(outcome)
            .filter(|(p, _)| p.is_finite())
            .map(|(p, &o)| (p - f64::from(u8::from(o))).powi(2)),
    )
}

/// Fractions of PIT values in `bins` equal-width bins of [0, 1] (1 goes to the last bin; values
/// outside [0, 1] or not finite are ignored). Sums to 1 unless no value counts.
pub fn pit_histogram(pit: &[f64], bins: usize) -> Vec<f64> {
    let bins = bins.max(1);
    let mut h = vec![0.0; bins];
    let mut n = 0usize;
    for &p in pit {
        if p.is_finite() && (0.0..=1.0).contains(&p) {
            let b = ((p * bins as f64) as usize).min(bins - 1);
            h[b] += 1.0;
            n += 1;
        }
    }
    if n > 0 {
        for v in &mut h {
            *v /= n as f64;
        }
    }
    h
}

/// One bin of a reliability table.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ReliabilityBin {
    /// Lower edge of the predicted-probability bin.
    pub p_lo: f64,
    /// Upper edge.
    pub p_hi: f64,
    /// Rows whose predicted probability falls in the bin.
    pub n: usize,
    /// Mean predicted probability in the bin (`null` when empty).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mean_prob: f64,
    /// Observed frequency of the event in the bin (`null` when empty).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub observed: f64,
}

/// Reliability table (Murphy & Winkler 1977): predicted probabilities in `bins` equal-width bins,
/// with the mean prediction and the observed event frequency per bin.
pub fn reliability(prob: &[f64], outcome: &[bool], bins: usize) -> Vec<ReliabilityBin> {
    let bins = bins.max(1);
    let mut sum_p = vec![0.0; bins];
    let mut sum_o = vec![0.0; bins];
    let mut n = vec![0usize; bins];
    for (&p, &o) in prob.iter().zip(outcome) {
        if p.is_finite() {
            let b = ((p.clamp(0.0, 1.0) * bins as f64) as usize).min(bins - 1);
            sum_p[b] += p;
            sum_o[b] += f64::from(u8::from(o));
            n[b] += 1;
        }
    }
    (0..bins)
        .map(|b| ReliabilityBin {
            p_lo: b as f64 / bins as f64,
            p_hi: (b + 1) as f64 / bins as f64,
            n: n[b],
            mean_prob: if n[b] > 0 {
                sum_p[b] / n[b] as f64
            } else {
                f64::NAN
            },
            observed: if n[b] > 0 {
                sum_o[b] / n[b] as f64
            } else {
                f64::NAN
            },
        })
        .collect()
}

/// Quantile of sorted values by linear interpolation (Hyndman & Fan 1996 type 7, R's default).
pub fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    let n = sorted.len();
    if n == 0 {
        return f64::NAN;
    }
    let h = (n - 1) as f64 * q.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// The 10th and 90th percentiles of the truth (type 7).
pub fn decile_cuts(truth: &[f64]) -> (f64, f64) {
    let mut s: Vec<f64> = truth.iter().copied().filter(|v| v.is_finite()).collect();
    s.sort_by(|a, b| a.total_cmp(b));
    (quantile_sorted(&s, 0.1), quantile_sorted(&s, 0.9))
}

/// Band coverage among rows in the bottom and top deciles of the truth.
pub fn decile_coverage(truth: &[f64], lo: &[f64], hi: &[f64]) -> (f64, f64) {
    let (q10, q90) = decile_cuts(truth);
    let cov = |keep: &dyn Fn(f64) -> bool| {
        mean(
            truth
                .iter()
                .zip(lo.iter().zip(hi))
                .filter(|(y, _)| keep(**y))
                .map(|(y, (l, u))| f64::from(u8::from(l <= y && y <= u))),
        )
    };
    (cov(&|y| y <= q10), cov(&|y| y >= q90))
}

/// Mean bias (`pred - truth`) among rows in the bottom and top deciles of the truth. Shrinkage
/// towards the mean shows as positive bottom and negative top bias.
pub fn end_bias(truth: &[f64], pred: &[f64]) -> (f64, f64) {
    let (q10, q90) = decile_cuts(truth);
    let b = |keep: &dyn Fn(f64) -> bool| {
        mean(
            truth
                .iter()
                .zip(pred)
                .filter(|(y, _)| keep(**y))
                .map(|(y, p)| p - y),
        )
    };
    (b(&|y| y <= q10), b(&|y| y >= q90))
}

/// Probabilities of one threshold, to be scored by the Brier score.
#[derive(Clone, Copy, Debug)]
pub struct ExceedInput<'a> {
    /// Threshold label (names the score).
    pub label: &'a str,
    /// Threshold value.
    pub value: f64,
    /// `true`: the event is `truth > value`; `false`: `truth < value`.
    pub above: bool,
    /// Predicted probability of the event per row (`NaN` rows are skipped).
    pub prob: &'a [f64],
}

/// Predictive quantiles for the CRPS: `values[k][row]` at `levels[k]`.
#[derive(Clone, Debug)]
pub struct QuantileSet<'a> {
    /// Increasing levels in (0, 1).
    pub levels: &'a [f64],
    /// One slice per level, one value per row.
    pub values: Vec<&'a [f64]>,
}

/// Everything [`Metrics::compute`] needs.
#[derive(Clone, Debug)]
pub struct MetricsInput<'a> {
    /// The truth per row.
    pub truth: &'a [f64],
    /// The middle prediction (P50) per row.
    pub mid: &'a [f64],
    /// Lower band edge: the `(1 - level)/2` quantile.
    pub lo: &'a [f64],
    /// Upper band edge: the `(1 + level)/2` quantile.
    pub hi: &'a [f64],
    /// Nominal band level in (0, 1), e.g. 0.8 for P10-P90.
    pub level: f64,
    /// Quantiles for the CRPS; `None` uses `lo`, `mid`, `hi` at `(1-level)/2`, 0.5, `(1+level)/2`.
    pub quantiles: Option<QuantileSet<'a>>,
    /// Threshold probabilities for Brier scores.
    pub exceed: Vec<ExceedInput<'a>>,
    /// Number of wells behind the rows (0 for grid nodes); reported as given.
    pub n_wells: usize,
}

/// Scores of one target (out-of-fold at wells, or at grid nodes against a known truth).
/// Undefined values (e.g. R2 of a constant truth) are `NaN`, written as `null` in JSON.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Metrics {
    /// Coefficient of determination of `mid`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub r2: f64,
    /// Root mean squared error of `mid`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub rmse: f64,
    /// Mean of `mid - truth`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias: f64,
    /// Least-squares slope of truth on `mid` (1 = no shrinkage).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub slope: f64,
    /// Fraction of rows inside `[lo, hi]`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage: f64,
    /// Coverage among rows in the bottom decile of the truth.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage_bottom_decile: f64,
    /// Coverage among rows in the top decile of the truth.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage_top_decile: f64,
    /// Mean bias of `mid` in the bottom decile of the truth.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_bottom_decile: f64,
    /// Mean bias of `mid` in the top decile of the truth.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_top_decile: f64,
    /// Mean band width `hi - lo`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mean_width: f64,
    /// Mean interval score at miss rate `1 - level`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub interval_score: f64,
    /// Pinball loss of `lo` at `tau = (1 - level)/2` (0.1 at the default level).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub pinball_10: f64,
    /// Pinball loss of `mid` at `tau = 0.5`.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub pinball_50: f64,
    /// Pinball loss of `hi` at `tau = (1 + level)/2` (0.9 at the default level).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub pinball_90: f64,
    /// Mean CRPS from the quantiles (see [`crps_from_quantiles`]).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub crps: f64,
    /// Brier score per threshold label.
    #[serde(deserialize_with = "serde_nan::pairs_or_nan")]
    pub brier: Vec<(String, f64)>,
    /// Rows scored (finite truth, middle and edges).
    pub n_rows: usize,
    /// Rows skipped for a non-finite value.
    pub n_skipped: usize,
    /// Wells behind the rows (0 at grid nodes).
    pub n_wells: usize,
}

impl Metrics {
    /// Compute every score from `input`. Errors on length mismatches, a level outside (0, 1),
    /// quantile levels not increasing inside (0, 1), or no usable row.
    pub fn compute(input: &MetricsInput) -> Result<Metrics, MetricsError> {
        let n = input.truth.len();
        let check = |what: &str, got: usize| {
            if got == n {
                Ok(())
            } else {
                Err(MetricsError::Length {
                    what: what.to_string(),
                    got,
                    expected: n,
                })
            }
        };
        check("mid", input.mid.len())?;
        check("lo", input.lo.len())?;
        check("hi", input.hi.len())?;
        for e in &input.exceed {
            check(&format!("probability of `{}`", e.label), e.prob.len())?;
        }
        if !(input.level > 0.0 && input.level < 1.0) {
            return Err(MetricsError::Level(format!(
                "level must be in (0, 1), got {}",
                input.level
            )));
        }
        if let Some(qs) = &input.quantiles {
            if qs.values.len() != qs.levels.len() {
                return Err(MetricsError::Length {
                    what: "quantile values (levels)".to_string(),
                    got: qs.values.len(),
                    expected: qs.levels.len(),
                });
            }
            for (k, v) in qs.values.iter().enumerate() {
                check(
                    &format!("quantile values at level {}", qs.levels[k]),
                    v.len(),
                )?;
            }
            let ok = qs.levels.iter().all(|&t| t > 0.0 && t < 1.0)
                && qs.levels.windows(2).all(|w| w[0] < w[1])
                && !qs.levels.is_empty();
            if !ok {
                return Err(MetricsError::Level(format!(
                    "quantile levels must increase strictly inside (0, 1), got {:?}",
                    qs.levels
                )));
            }
        }
        let keep: Vec<usize> = (0..n)
            .filter(|&i| {
                input.truth[i].is_finite()
                    && input.mid[i].is_finite()
                    && input.lo[i].is_finite()
                    && input.hi[i].is_finite()
                    && input
                        .quantiles
                        .as_ref()
                        .is_none_or(|q| q.values.iter().all(|v| v[i].is_finite()))
            })
            .collect();
        if keep.is_empty() {
            return Err(MetricsError::NoRows(n));
        }
        let sel = |v: &[f64]| keep.iter().map(|&i| v[i]).collect::<Vec<f64>>();
        let (y, mid, lo, hi) = (
            sel(input.truth),
            sel(input.mid),
            sel(input.lo),
            sel(input.hi),
        );
        let alpha = 1.0 - input.level;
        let (cov_b, cov_t) = decile_coverage(&y, &lo, &hi);
        let (bias_b, bias_t) = end_bias(&y, &mid);
        let crps = match &input.quantiles {
            Some(qs) => {
                let vals: Vec<Vec<f64>> = qs.values.iter().map(|v| sel(v)).collect();
                mean((0..y.len()).map(|i| {
                    let q: Vec<f64> = vals.iter().map(|v| v[i]).collect();
                    crps_from_quantiles(y[i], qs.levels, &q)
                }))
            }
            None => {
                let levels = [alpha / 2.0, 0.5, 1.0 - alpha / 2.0];
                mean(
                    (0..y.len())
                        .map(|i| crps_from_quantiles(y[i], &levels, &[lo[i], mid[i], hi[i]])),
                )
            }
        };
        let brier_scores = input
            .exceed
            .iter()
            .map(|e| {
                let p = sel(e.prob);
                let o: Vec<bool> = y
                    .iter()
                    .map(|&t| if e.above { t > e.value } else { t < e.value })
                    .collect();
                (e.label.to_string(), brier(&p, &o))
            })
            .collect();
        Ok(Metrics {
            r2: r2(&y, &mid),
            rmse: rmse(&y, &mid),
            bias: bias(&y, &mid),
            slope: slope(&y, &mid),
            coverage: coverage(&y, &lo, &hi),
            coverage_bottom_decile: cov_b,
            coverage_top_decile: cov_t,
            bias_bottom_decile: bias_b,
            bias_top_decile: bias_t,
            mean_width: mean_width(&lo, &hi),
            interval_score: interval_score(&y, &lo, &hi, alpha),
            pinball_10: pinball(&y, &lo, alpha / 2.0),
            pinball_50: pinball(&y, &mid, 0.5),
            pinball_90: pinball(&y, &hi, 1.0 - alpha / 2.0),
            crps,
            brier: brier_scores,
            n_rows: keep.len(),
            n_skipped: n - keep.len(),
            n_wells: input.n_wells,
        })
    }
}

/// A plain-text table of metrics, one line per labelled row (e.g. per target and step), with the
/// columns n wells, n rows, R2, RMSE, bias, coverage (all, bottom and top decile), mean width,
/// interval score, CRPS and each Brier score. Undefined values print as `-`.
pub fn format_table(rows: &[(String, &Metrics)]) -> String {
    let fmt = |v: f64| {
        if v.is_finite() {
            format!("{v:.4}")
        } else {
            "-".to_string()
        }
    };
    let mut header: Vec<String> = [
        "",
        "wells",
        "rows",
        "R2",
        "RMSE",
        "bias",
        "cover",
        "cov_b10",
        "cov_t10",
        "width",
        "int_score",
        "CRPS",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let labels: Vec<String> = rows
        .first()
        .map(|(_, m)| m.brier.iter().map(|(l, _)| format!("brier_{l}")).collect())
        .unwrap_or_default();
    header.extend(labels);
    let mut lines: Vec<Vec<String>> = vec![header];
    for (label, m) in rows {
        let mut line = vec![
            label.clone(),
            m.n_wells.to_string(),
            m.n_rows.to_string(),
            fmt(m.r2),
            fmt(m.rmse),
            fmt(m.bias),
            fmt(m.coverage),
            fmt(m.coverage_bottom_decile),
            fmt(m.coverage_top_decile),
            fmt(m.mean_width),
            fmt(m.interval_score),
            fmt(m.crps),
        ];
        line.extend(m.brier.iter().map(|(_, b)| fmt(*b)));
        lines.push(line);
    }
    let ncol = lines.iter().map(Vec::len).max().unwrap_or(0);
    let width: Vec<usize> = (0..ncol)
        .map(|c| {
            lines
                .iter()
                .filter_map(|l| l.get(c))
                .map(String::len)
                .max()
                .unwrap_or(0)
        })
        .collect();
    let mut out = String::new();
    for l in &lines {
        let cells: Vec<String> = l
            .iter()
            .enumerate()
            .map(|(c, v)| {
                if c == 0 {
                    format!("{v:<w$}", w = width[c])
                } else {
                    format!("{v:>w$}", w = width[c])
                }
            })
            .collect();
        out.push_str(cells.join("  ").trim_end());
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ensemble_crps_matches_pairwise_definition() {
        // G&R eq. 22 by brute force over all pairs.
        let xs: [f64; 5] = [0.3, -1.2, 2.5, 0.3, 1.1];
        let y: f64 = 0.7;
        let m = xs.len() as f64;
        let e1: f64 = xs.iter().map(|x| (x - y).abs()).sum::<f64>() / m;
        let e2: f64 = xs
            .iter()
            .flat_map(|a| xs.iter().map(move |b| (a - b).abs()))
            .sum::<f64>()
            / (m * m);
        assert!((crps_ensemble(y, &xs) - (e1 - e2 / 2.0)).abs() < 1e-12);
    }

    #[test]
    fn level_weights_sum_to_one() {
        let w = level_weights(&[0.1, 0.5, 0.9]);
        assert_eq!(w.len(), 3);
        assert!(
            (w[0] - 0.3).abs() < 1e-12 && (w[1] - 0.4).abs() < 1e-12 && (w[2] - 0.3).abs() < 1e-12
        );
    }

    #[test]
    fn table_lists_every_row_and_brier_column() {
        let truth = [1.0, 2.0, 3.0, 4.0];
        let m = Metrics::compute(&MetricsInput {
            truth: &truth,
            mid: &truth,
            lo: &[0.0; 4],
            hi: &[5.0; 4],
            level: 0.8,
            quantiles: None,
            exceed: vec![ExceedInput {
                label: "hi",
                value: 2.5,
                above: true,
                prob: &[0.0, 0.0, 1.0, 1.0],
            }],
            n_wells: 2,
        })
        .unwrap();
        let t = format_table(&[("dSw all".to_string(), &m), ("dSw m1".to_string(), &m)]);
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(lines.len(), 3);
        assert!(lines[0].contains("brier_hi") && lines[0].contains("R2"));
        assert!(lines[1].starts_with("dSw all") && lines[1].contains("1.0000"));
    }

    #[test]
    fn nan_round_trips_through_json() {
        let r = ReliabilityBin {
            p_lo: 0.0,
            p_hi: 0.1,
            n: 0,
            mean_prob: f64::NAN,
            observed: f64::NAN,
        };
        let s = serde_json::to_string(&r).unwrap();
        assert!(s.contains("null"));
        let back: ReliabilityBin = serde_json::from_str(&s).unwrap();
        assert!(back.mean_prob.is_nan());
    }
}
