//! Metrics of the out-of-fold rows, overall and per step: the scores of the middle, the band and
//! the probabilities on wells the models never saw ([`crate::metrics`]: coverage and the interval
//! score of Gneiting & Raftery 2007, JASA 102:359; the Brier score, Brier 1950; the histogram of
//! PIT values, flat when the predictive distribution is calibrated, Dawid 1984, JRSS A 147:278;
//! Gneiting, Balabdaoui & Raftery 2007, JRSS B 69:243).

use crate::calibrate::error::CalibrateError;
use crate::calibrate::input::Threshold;
use crate::calibrate::units::{count_wells, pick};
use crate::metrics::{ExceedInput, Metrics, MetricsInput, pit_histogram};
use serde::{Deserialize, Serialize};

/// Metrics of the out-of-fold rows of one step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepMetrics {
    /// Step index.
    pub step: usize,
    /// Its metrics.
    pub metrics: Metrics,
}

/// What the metrics stage reads: the out-of-fold rows as the earlier stages left them.
#[derive(Clone, Copy, Debug)]
pub struct ScoreInput<'a> {
    /// Truth per row.
    pub y: &'a [f64],
    /// Corrected out-of-fold prediction per row.
    pub mid: &'a [f64],
    /// Out-of-fold lower band edge per row.
    pub lo: &'a [f64],
    /// Out-of-fold upper band edge per row.
    pub hi: &'a [f64],
    /// Nominal level of the band.
    pub level: f64,
    /// Out-of-fold probability per threshold (outer), per row (inner).
    pub prob: &'a [Vec<f64>],
    /// Decision thresholds, in the order of `prob`.
    pub thresholds: &'a [Threshold],
    /// Out-of-fold PIT value of the predictive system per row.
    pub pit: &'a [f64],
    /// Out-of-fold PIT value of the recalibrated forest CDF per row.
    pub pit_forest: &'a [f64],
    /// Well id per row.
    pub group: &'a [usize],
    /// Step index per row.
    pub step: &'a [usize],
}

/// The out-of-fold scores.
#[derive(Clone, Debug, PartialEq)]
pub struct OofScores {
    /// Over all rows.
    pub overall: Metrics,
    /// Per step, in increasing step order.
    pub by_step: Vec<StepMetrics>,
    /// Histogram (10 bins) of the predictive system's PIT values.
    pub pit_histogram: Vec<f64>,
    /// Histogram (10 bins) of the recalibrated forest's PIT values.
    pub pit_histogram_forest: Vec<f64>,
}

/// Stage 9: score the out-of-fold rows, all together and step by step.
pub fn score(input: &ScoreInput) -> Result<OofScores, CalibrateError> {
    let n = input.y.len();
    let all: Vec<usize> = (0..n).collect();
    let overall = metrics_of(input, &all)?;
    let mut steps: Vec<usize> = input.step.to_vec();
    steps.sort_unstable();
    steps.dedup();
    let by_step = steps
        .iter()
        .map(|&s| {
            let rows: Vec<usize> = (0..n).filter(|&i| input.step[i] == s).collect();
            metrics_of(input, &rows).map(|metrics| StepMetrics { step: s, metrics })
        })
        .collect::<Result<Vec<_>, _>>()?;
    Ok(OofScores {
        overall,
        by_step,
        pit_histogram: pit_histogram(input.pit, 10),
        pit_histogram_forest: pit_histogram(input.pit_forest, 10),
    })
}

/// Metrics of the out-of-fold rows `rows`.
fn metrics_of(input: &ScoreInput, rows: &[usize]) -> Result<Metrics, CalibrateError> {
    let truth = pick(input.y, rows);
    let mid = pick(input.mid, rows);
    let lo = pick(input.lo, rows);
    let hi = pick(input.hi, rows);
    let probs: Vec<Vec<f64>> = input.prob.iter().map(|p| pick(p, rows)).collect();
    let exceed = input
        .thresholds
        .iter()
        .zip(&probs)
        .map(|(th, p)| ExceedInput {
            label: &th.label,
            value: th.value,
            above: th.above,
            prob: p,
        })
        .collect();
    Metrics::compute(&MetricsInput {
        truth: &truth,
        mid: &mid,
        lo: &lo,
        hi: &hi,
        level: input.level,
        quantiles: None,
        exceed,
        n_wells: count_wells(&pick(input.group, rows)),
    })
    .map_err(CalibrateError::from)
}
