//! PIT values of the predictive distributions on held-out wells are uniform (Kolmogorov-Smirnov
//! test from statrs 0.19, `ks_onesample`, against statrs' Uniform(0, 1)).
//!
//! Each PIT value comes from its own calibration draw (fresh calibration wells, then one row of a
//! fresh well), so the values are independent and their marginal law is the one the methods
//! promise: uniform for a conformal predictive system with random tie-breaking (Vovk, Shen,
//! Manokhin & Xie 2019, Machine Learning 108:445), and close to uniform after Kuleshov, Fenner &
//! Ermon (2018) recalibration.

use super::generated::{cheap_model, noise_sd, wells};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use statrs::distribution::{ContinuousCDF, Normal, Uniform};
use statrs::stats_tests::NaNPolicy;
use statrs::stats_tests::ks_test::{KSOneSampleAlternativeMethod, ks_onesample};
use tidemark::calibrate::conformal::{MondrianBins, Units};
use tidemark::calibrate::exceedance::{PitRecalibration, PredictiveSystem};
use tidemark::calibrate::well_unit_weights;

const DRAWS: usize = 400;
const CAL_WELLS: usize = 50;

fn ks_pvalue(v: Vec<f64>) -> f64 {
    let u = Uniform::new(0.0, 1.0).unwrap();
    ks_onesample(
        v,
        &u,
        KSOneSampleAlternativeMethod::TwoSidedAsymptotic,
        NaNPolicy::Error,
    )
    .unwrap()
    .1
}

#[test]
fn conformal_predictive_system_pit_is_uniform() {
    let mut pits = Vec::with_capacity(DRAWS);
    for d in 0..DRAWS {
        let mut rng = StdRng::seed_from_u64(5_000 + d as u64);
        let cal = wells(&mut rng, CAL_WELLS, 0);
        let mid: Vec<f64> = cal.x.iter().map(|&x| cheap_model(x)).collect();
        let cps = PredictiveSystem::fit(
            &mid,
            &cal.y,
            &Units::wells(&cal.group),
            MondrianBins::single(),
        );
        let test = wells(&mut rng, 1, CAL_WELLS);
        let tau: f64 = rng.random();
        pits.push(cps.cdf(cheap_model(test.x[0]), test.y[0], tau));
    }
    let p = ks_pvalue(pits);
    assert!(p > 0.01, "KS p-value {p:.3e}");
}

#[test]
fn recalibrated_cdf_pit_is_uniform() {
    // An over-confident model CDF: Gaussian around the cheap model with half the row noise and no
    // well effect. Its raw PIT values are far from uniform; recalibrated ones are not.
    let std = Normal::standard();
    let model_cdf = |x: f64, y: f64| std.cdf((y - cheap_model(x)) / (0.5 * noise_sd(x)));
    let mut raw = Vec::with_capacity(DRAWS);
    let mut recal = Vec::with_capacity(DRAWS);
    for d in 0..DRAWS {
        let mut rng = StdRng::seed_from_u64(9_000 + d as u64);
        let cal = wells(&mut rng, CAL_WELLS, 0);
        let pit: Vec<f64> = cal
            .x
            .iter()
            .zip(&cal.y)
            .map(|(&x, &y)| model_cdf(x, y))
            .collect();
        let r = PitRecalibration::fit(&pit, &well_unit_weights(&cal.group)).unwrap();
        let test = wells(&mut rng, 1, CAL_WELLS);
        let p = model_cdf(test.x[0], test.y[0]);
        raw.push(p);
        recal.push(r.apply(p));
    }
    let p_raw = ks_pvalue(raw);
    assert!(
        p_raw < 1e-6,
        "the raw CDF should fail: KS p-value {p_raw:.3e}"
    );
    let p = ks_pvalue(recal);
    assert!(p > 0.01, "KS p-value after recalibration {p:.3e}");
}
