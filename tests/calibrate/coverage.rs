//! Coverage validity of the conformal band on held-out wells, the pattern of MAPIE's
//! `test_coverage_validity`: many random calibration draws at several sizes; the mean coverage is
//! not below `1 - a` and not above `1 - a + 1/(n + 1)` by one-sided t-tests at a
//! Bonferroni-corrected level (split conformal bounds, Lei et al. 2018, JASA 113:1094).

use super::generated::{cheap_model, noise_sd, per_well_mean, wells};
use rand::SeedableRng;
use rand::rngs::StdRng;
use statrs::stats_tests::ttest_onesample::ttest_onesample;
use statrs::stats_tests::{Alternative, NaNPolicy};
use tidemark::calibrate::conformal::{BandBase, BandCalibration, BandMethod, Units};

const LEVEL: f64 = 0.8;
const REPEATS: usize = 100;
const TEST_WELLS: usize = 200;
const SIZES: [usize; 3] = [20, 50, 100];

/// Base edges of one row for a method: the cheap model's value; for CQR a deliberately
/// too-narrow Gaussian band around it (the scores must widen it); for normalised scores a scale
/// that grows with `x` as the noise does.
fn base(method: BandMethod, x: f64) -> BandBase {
    let mid = cheap_model(x);
    match method {
        BandMethod::CvResidual => BandBase::centred(mid),
        BandMethod::Cqr => {
            // 10 % and 90 % of N(mid, (0.5 sd)^2): z = 1.2815515655 (statrs Normal inverse CDF).
            let h = 1.2815515655 * 0.5 * noise_sd(x);
            BandBase {
                mid,
                lo: mid - h,
                hi: mid + h,
                scale: 1.0,
            }
        }
        BandMethod::Normalized => BandBase {
            scale: noise_sd(x),
            ..BandBase::centred(mid)
        },
    }
}

/// Coverage of one calibration draw, measured on fresh wells (mean over wells of the fraction of
/// the well's rows): `[two-sided, y >= lo, y <= hi]`.
fn one_draw(method: BandMethod, n: usize, max_bins: usize, seed: u64) -> [f64; 3] {
    let mut rng = StdRng::seed_from_u64(seed);
    let cal = wells(&mut rng, n, 0);
    let bases: Vec<BandBase> = cal.x.iter().map(|&x| base(method, x)).collect();
    let band = BandCalibration::fit(
        method,
        &bases,
        &cal.y,
        &Units::wells(&cal.group),
        LEVEL,
        max_bins,
        1,
    );
    assert!(!band.too_few_wells());
    let test = wells(&mut rng, TEST_WELLS, n);
    let edges: Vec<(f64, f64)> = test
        .x
        .iter()
        .map(|&x| {
            let (lo, _, hi) = band.apply(base(method, x), (-100.0, 100.0));
            (lo, hi)
        })
        .collect();
    let frac = |f: &dyn Fn(f64, (f64, f64)) -> bool| {
        let hit: Vec<bool> = test.y.iter().zip(&edges).map(|(&y, &e)| f(y, e)).collect();
        per_well_mean(&test.group, &hit)
    };
    [
        frac(&|y, (lo, hi)| lo <= y && y <= hi),
        frac(&|y, (lo, _)| lo <= y),
        frac(&|y, (_, hi)| y <= hi),
    ]
}

/// One-sided t-tests (statrs `ttest_onesample`) that the mean of `v` is not below `low` and not
/// above `high`; both p-values must exceed `level`.
fn assert_mean_between(v: &[f64], low: f64, high: f64, level: f64, what: &str) {
    let mean = v.iter().sum::<f64>() / v.len() as f64;
    let (_, p_low) = ttest_onesample(v.to_vec(), low, Alternative::Less, NaNPolicy::Error).unwrap();
    let (_, p_up) =
        ttest_onesample(v.to_vec(), high, Alternative::Greater, NaNPolicy::Error).unwrap();
    assert!(
        p_low > level,
        "{what}: mean coverage {mean:.4} below {low:.4} (p {p_low:.2e})"
    );
    assert!(
        p_up > level,
        "{what}: mean coverage {mean:.4} above {high:.4} (p {p_up:.2e})"
    );
}

#[test]
fn coverage_validity_mapie_pattern() {
    // Each edge is one split-conformal quantile at a/2, so its one-sided coverage lies in
    // [1 - a/2, 1 - a/2 + 1/(n+1)] (Lei et al. 2018; for well-pooled scores the upper end holds up
    // to the weight of one row). The two-sided band misses on either side, so its coverage lies
    // in [1 - a, 1 - a + 2/(n+1)]: the single-score figure 1 - a + 1/(n+1) does not apply to a
    // band whose two edges are calibrated separately.
    let alpha = 1.0 - LEVEL;
    let methods = [
        BandMethod::CvResidual,
        BandMethod::Cqr,
        BandMethod::Normalized,
    ];
    // Three quantities, two one-sided tests each, per (method, size); family-wise level 0.05.
    let bonferroni = 0.05 / (3 * 2 * methods.len() * SIZES.len()) as f64;
    for method in methods {
        for (s, &n) in SIZES.iter().enumerate() {
            let draws: Vec<[f64; 3]> = (0..REPEATS)
                .map(|r| one_draw(method, n, 1, 1000 * s as u64 + r as u64))
                .collect();
            let column = |c: usize| draws.iter().map(|d| d[c]).collect::<Vec<f64>>();
            let slack = 1.0 / (n as f64 + 1.0);
            let what = |q: &str| format!("{method:?}, n = {n} wells, {q}");
            assert_mean_between(
                &column(0),
                1.0 - alpha,
                1.0 - alpha + 2.0 * slack,
                bonferroni,
                &what("band"),
            );
            for (c, edge) in [(1, "lower edge"), (2, "upper edge")] {
                assert_mean_between(
                    &column(c),
                    1.0 - alpha / 2.0,
                    1.0 - alpha / 2.0 + slack,
                    bonferroni,
                    &what(edge),
                );
            }
        }
    }
}

#[test]
fn mondrian_bins_keep_coverage() {
    // Three Mondrian bins of the predicted value, each calibrated on its own: the marginal
    // coverage is still at least 1 - a (Vovk, Gammerman & Shafer 2005, Mondrian validity).
    let alpha = 1.0 - LEVEL;
    let cov: Vec<f64> = (0..REPEATS)
        .map(|r| one_draw(BandMethod::CvResidual, 100, 3, 77_000 + r as u64)[0])
        .collect();
    let mean = cov.iter().sum::<f64>() / cov.len() as f64;
    let (_, p_low) =
        ttest_onesample(cov, 1.0 - alpha, Alternative::Less, NaNPolicy::Error).unwrap();
    assert!(p_low > 0.01, "mean coverage {mean:.4} (p {p_low:.2e})");
}
