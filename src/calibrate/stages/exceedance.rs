//! Exceedance: the probability of crossing each decision threshold, calibrated on held-out
//! wells.
//!
//! Two predictive distributions are cross-fitted on the folds ([`crate::calibrate::exceedance`]):
//! a Mondrian conformal predictive system on the corrected prediction's residuals, scaled and
//! binned like the kept band (Vovk, Shen, Manokhin & Xie 2019, Machine Learning 108:445), and the
//! forest's conditional CDF recalibrated by an isotonic map of its PIT values (Kuleshov, Fenner &
//! Ermon 2018, ICML). Per threshold the one with the lower out-of-fold Brier score (Brier 1950;
//! a proper score, Gneiting & Raftery 2007) is kept. The final system and map are fitted on all
//! out-of-fold rows.

use crate::calibrate::conformal::MondrianBins;
use crate::calibrate::error::CalibrateError;
use crate::calibrate::exceedance::{
    ExceedMethod, PitRecalibration, PredictiveSystem, bounded_cdf, crossing_probability,
};
use crate::calibrate::folds::Folds;
use crate::calibrate::input::Threshold;
use crate::calibrate::units::{Units, pick};
use crate::metrics::{ReliabilityBin, brier, reliability, serde_nan};
use serde::{Deserialize, Serialize};

/// How one threshold's probabilities are made and how reliable they were out of fold.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ExceedanceDiagnostics {
    /// Threshold label.
    pub label: String,
    /// Threshold value.
    pub value: f64,
    /// Direction.
    pub above: bool,
    /// Method kept (lower Brier score).
    pub method: ExceedMethod,
    /// Out-of-fold Brier score of the conformal predictive system.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_conformal: f64,
    /// Out-of-fold Brier score of the recalibrated forest CDF.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_forest: f64,
    /// Out-of-fold Brier score of always predicting the base rate (climatology), for reference.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub brier_base_rate: f64,
    /// Fraction of out-of-fold rows where the event happened.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub base_rate: f64,
    /// Reliability table of the kept method (10 bins).
    pub reliability: Vec<ReliabilityBin>,
}

/// What the exceedance stage reads: out-of-fold rows, the kept band's scale and bins, the
/// forest's out-of-fold CDF values and the thresholds.
#[derive(Clone, Copy, Debug)]
pub struct ProbabilityInput<'a> {
    /// Truth per row.
    pub y: &'a [f64],
    /// Corrected out-of-fold prediction per row.
    pub mid: &'a [f64],
    /// Residual scale per row (the kept band's; 1 unless its scores are normalised).
    pub scale: &'a [f64],
    /// Mondrian bins the kept band asked for (the predictive system uses as many).
    pub bins: usize,
    /// Fewest wells per Mondrian bin.
    pub min_wells_per_bin: usize,
    /// Out-of-fold forest CDF at each row's truth.
    pub pit_raw: &'a [f64],
    /// Out-of-fold forest CDF per threshold, per row.
    pub cdf_at_thresholds: &'a [Vec<f64>],
    /// Decision thresholds.
    pub thresholds: &'a [Threshold],
    /// Folds of the rows.
    pub folds: &'a Folds,
    /// The rows as calibration units.
    pub units: &'a Units,
    /// Physical bounds of the target.
    pub bounds: (f64, f64),
}

/// The calibrated probabilities: out-of-fold values and the final maps.
#[derive(Clone, Debug, PartialEq)]
pub struct Exceedance {
    /// Kept method per threshold.
    pub methods: Vec<ExceedMethod>,
    /// Cross-fitted probability of the kept method per threshold (outer), per row (inner).
    pub prob: Vec<Vec<f64>>,
    /// Cross-fitted PIT value of the predictive system per row (`tau = 1/2`).
    pub pit: Vec<f64>,
    /// Cross-fitted PIT value of the recalibrated forest CDF per row.
    pub pit_forest: Vec<f64>,
    /// Final predictive system, on all out-of-fold rows.
    pub cps: PredictiveSystem,
    /// Final recalibration of the forest CDF, on all out-of-fold rows.
    pub recalibration: PitRecalibration,
    /// One entry per threshold.
    pub diagnostics: Vec<ExceedanceDiagnostics>,
}

/// Stage 8: cross-fit both predictive distributions, keep per threshold the one with the lower
/// out-of-fold Brier score, and fit the final system and map on all out-of-fold rows.
pub fn calibrate(input: &ProbabilityInput) -> Result<Exceedance, CalibrateError> {
    let (y, mid, scale, bounds) = (input.y, input.mid, input.scale, input.bounds);
    let n = y.len();
    let nt = input.thresholds.len();
    let min_wells = input.min_wells_per_bin as f64;
    let mut p_cps = vec![vec![f64::NAN; n]; nt];
    let mut p_rec = vec![vec![f64::NAN; n]; nt];
    let mut pit = vec![f64::NAN; n];
    let mut pit_forest = vec![f64::NAN; n];
    for f in 0..input.folds.count {
        let train = input.folds.train(f);
        let tr_mid = pick(mid, &train);
        let tr_units = input.units.pick(&train);
        let bins = MondrianBins::build(&tr_mid, &tr_units, input.bins, min_wells);
        let cps = PredictiveSystem::fit_scaled(
            &tr_mid,
            &pick(scale, &train),
            &pick(y, &train),
            &tr_units,
            bins,
        );
        let rec = PitRecalibration::fit(&pick(input.pit_raw, &train), &tr_units.weight).ok();
        for i in input.folds.test(f) {
            pit[i] = cps.cdf_scaled(mid[i], scale[i], y[i], 0.5);
            if let Some(r) = &rec {
                pit_forest[i] = r.apply(input.pit_raw[i]);
            }
            for (t, th) in input.thresholds.iter().enumerate() {
                p_cps[t][i] = crossing_probability(
                    cps.prob_below(mid[i], scale[i], th.value, bounds),
                    th.above,
                );
                if let Some(r) = &rec {
                    p_rec[t][i] = crossing_probability(
                        bounded_cdf(r.apply(input.cdf_at_thresholds[t][i]), th.value, bounds),
                        th.above,
                    );
                }
            }
        }
    }
    let mut methods = Vec::new();
    let mut diagnostics = Vec::new();
    let mut prob = Vec::new();
    for (t, th) in input.thresholds.iter().enumerate() {
        let outcome: Vec<bool> = y
            .iter()
            .map(|&v| if th.above { v > th.value } else { v < th.value })
            .collect();
        let b_cps = brier(&p_cps[t], &outcome);
        let b_rec = brier(&p_rec[t], &outcome);
        let method = if b_rec < b_cps {
            ExceedMethod::ForestRecalibrated
        } else {
            ExceedMethod::Conformal
        };
        let p = match method {
            ExceedMethod::Conformal => p_cps[t].clone(),
            ExceedMethod::ForestRecalibrated => p_rec[t].clone(),
        };
        let rate = outcome.iter().filter(|&&o| o).count() as f64 / n as f64;
        methods.push(method);
        diagnostics.push(ExceedanceDiagnostics {
            label: th.label.clone(),
            value: th.value,
            above: th.above,
            method,
            brier_conformal: b_cps,
            brier_forest: b_rec,
            brier_base_rate: brier(&vec![rate; n], &outcome),
            base_rate: rate,
            reliability: reliability(&p, &outcome, 10),
        });
        prob.push(p);
    }
    let bins = MondrianBins::build(mid, input.units, input.bins, min_wells);
    let cps = PredictiveSystem::fit_scaled(mid, scale, y, input.units, bins);
    let recalibration = PitRecalibration::fit(input.pit_raw, &input.units.weight)?;
    Ok(Exceedance {
        methods,
        prob,
        pit,
        pit_forest,
        cps,
        recalibration,
        diagnostics,
    })
}

/// Diagnostics of threshold `th` for probabilities `p` of a hurdle target's mixture (conformal
/// predictive system of the changed rows, mixed with the atom and recalibrated on its PIT values)
/// against the denoised truth `y`; the forest column is not computed (NaN).
pub fn mixture_diagnostics(th: &Threshold, p: &[f64], y: &[f64]) -> ExceedanceDiagnostics {
    let outcome: Vec<bool> = y
        .iter()
        .map(|&v| if th.above { v > th.value } else { v < th.value })
        .collect();
    let n = outcome.len().max(1);
    let rate = outcome.iter().filter(|&&o| o).count() as f64 / n as f64;
    ExceedanceDiagnostics {
        label: th.label.clone(),
        value: th.value,
        above: th.above,
        method: ExceedMethod::Conformal,
        brier_conformal: brier(p, &outcome),
        brier_forest: f64::NAN,
        brier_base_rate: brier(&vec![rate; outcome.len()], &outcome),
        base_rate: rate,
        reliability: reliability(p, &outcome, 10),
    }
}
