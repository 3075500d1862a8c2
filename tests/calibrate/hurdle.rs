//! The "no change" hurdle mixture against closed forms, its randomised PIT, and the dissimilarity
//! profile of the band.
//!
//! Closed forms: a point mass `1 - p` at zero plus `p N(mu, sigma)`. Its CDF is
//! `F(y) = (1 - p) 1{y >= 0} + p Phi((y - mu) / sigma)`, and its quantiles solve `F(y) = u` on each
//! side of the atom with statrs 0.19's `Normal::inverse_cdf`.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use statrs::distribution::{ContinuousCDF, Normal, Uniform};
use statrs::stats_tests::NaNPolicy;
use statrs::stats_tests::ks_test::{KSOneSampleAlternativeMethod, ks_onesample};
use tidemark::calibrate::hurdle::{self, Conditional, Steps};
use tidemark::calibrate::profile::{Beyond, Profile, needed_scale};

struct Gauss(Normal);

impl Conditional for Gauss {
    fn cdf(&self, y: f64) -> f64 {
        self.0.cdf(y)
    }
    fn quantile(&self, v: f64) -> f64 {
        self.0.inverse_cdf(v)
    }
}

/// The quantile of the mixture solved independently: bisection of `F(y) >= u` on a wide bracket.
fn bisect_quantile(p: f64, g: &Normal, u: f64) -> f64 {
    let f = |y: f64| (if y >= 0.0 { 1.0 - p } else { 0.0 }) + p * g.cdf(y);
    if f(0.0) >= u && (1.0 - p) > 0.0 && p * g.cdf(-1e-15) < u {
        return 0.0;
    }
    let (mut lo, mut hi) = (-100.0_f64, 100.0_f64);
    for _ in 0..200 {
        let m = 0.5 * (lo + hi);
        if f(m) >= u {
            hi = m;
        } else {
            lo = m;
        }
    }
    hi
}

#[test]
fn mixture_quantiles_and_exceedance_match_the_closed_form() {
    for &(p, mu, sigma) in &[
        (0.7, 0.2, 0.1),
        (0.3, 0.2, 0.1),
        (0.9, -0.5, 1.0),
        (0.55, 0.05, 0.2),
    ] {
        let n = Normal::new(mu, sigma).unwrap();
        let g = Gauss(n);
        for &u in &[0.1, 0.5, 0.9] {
            let q = hurdle::quantile(p, &g, u);
            let want = bisect_quantile(p, &n, u);
            assert!(
                (q - want).abs() < 1e-6,
                "p {p} mu {mu} sigma {sigma} u {u}: {q} vs {want}"
            );
            // Above the atom the closed form is mu + sigma Phi^-1((u - 1 + p) / p).
            if q > 0.0 {
                let closed = n.inverse_cdf((u - 1.0 + p) / p);
                assert!((q - closed).abs() < 1e-9);
            }
        }
        for &t in &[-0.3, 0.0, 0.05, 0.25] {
            let above = hurdle::crossing(p, &g, t, true);
            let want = 1.0 - ((if t >= 0.0 { 1.0 - p } else { 0.0 }) + p * n.cdf(t));
            assert!((above - want).abs() < 1e-12, "t {t}");
            let below = hurdle::crossing(p, &g, t, false);
            let want = (if t > 0.0 { 1.0 - p } else { 0.0 }) + p * n.cdf(t);
            assert!((below - want).abs() < 1e-12, "t {t}");
        }
    }
}

#[test]
fn median_is_exactly_zero_when_the_atom_holds_more_than_half() {
    let g = Gauss(Normal::new(0.3, 0.1).unwrap());
    for &p in &[0.1, 0.3, 0.49] {
        assert_eq!(hurdle::quantile(p, &g, 0.5), 0.0, "p {p}");
    }
    assert!(hurdle::quantile(0.51, &g, 0.5) > 0.0);
    // A band with an edge at exactly zero: P10 at the atom, P90 in the changed part.
    assert_eq!(hurdle::quantile(0.6, &g, 0.1), 0.0);
    assert!(hurdle::quantile(0.6, &g, 0.9) > 0.3);
}

#[test]
fn randomised_pit_of_the_mixture_is_uniform() {
    // Outcomes drawn from the mixture itself (p = 0.4 of a change ~ N(0.2, 0.05)): the plain PIT
    // piles 60 % of values at F(0); the randomised PIT (Czado, Gneiting & Held 2009) is uniform
    // (Kolmogorov-Smirnov, statrs 0.19 ks_onesample against Uniform(0, 1)).
    let n = Normal::new(0.2, 0.05).unwrap();
    let g = Gauss(n);
    let p = 0.4;
    let mut rng = StdRng::seed_from_u64(11);
    let mut pits = Vec::new();
    for _ in 0..2000 {
        let y = if rng.random::<f64>() < p {
            n.inverse_cdf(rng.random::<f64>().clamp(1e-12, 1.0 - 1e-12))
        } else {
            0.0
        };
        pits.push(hurdle::randomised_pit(p, &g, y, rng.random()));
    }
    let u = Uniform::new(0.0, 1.0).unwrap();
    let (_, pv) = ks_onesample(
        pits.clone(),
        &u,
        KSOneSampleAlternativeMethod::TwoSidedAsymptotic,
        NaNPolicy::Error,
    )
    .unwrap();
    assert!(pv > 0.01, "KS p-value {pv}");
    // The same outcomes under a mixture with the wrong atom (p = 0.8) are not uniform.
    let mut rng = StdRng::seed_from_u64(11);
    let mut wrong = Vec::new();
    for _ in 0..2000 {
        let y = if rng.random::<f64>() < p {
            n.inverse_cdf(rng.random::<f64>().clamp(1e-12, 1.0 - 1e-12))
        } else {
            0.0
        };
        wrong.push(hurdle::randomised_pit(0.8, &g, y, rng.random()));
    }
    let (_, pw) = ks_onesample(
        wrong,
        &u,
        KSOneSampleAlternativeMethod::TwoSidedAsymptotic,
        NaNPolicy::Error,
    )
    .unwrap();
    assert!(pw < 1e-6, "KS p-value {pw}");
}

#[test]
fn empirical_conditional_is_a_step_quantile() {
    let s = Steps::new(&[0.3, 0.1, 0.2, 0.4], &[1.0, 1.0, 1.0, 1.0]).unwrap();
    // With p = 1 the mixture is the empirical distribution: type-1 quantiles (Hyndman & Fan 1996).
    assert_eq!(hurdle::quantile(1.0, &s, 0.25), 0.1);
    assert_eq!(hurdle::quantile(1.0, &s, 0.26), 0.2);
    assert_eq!(hurdle::quantile(1.0, &s, 0.9), 0.4);
}

/// Held-out rows whose error sd grows with dissimilarity: plain band mid +- 1.2816 (the N(0,1)
/// 80 % band), truth ~ N(0, s(d)^2).
fn rows(sd: impl Fn(f64) -> f64, n: usize, seed: u64) -> (Vec<f64>, Vec<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let z = Normal::standard();
    let mut m = Vec::new();
    let mut d = Vec::new();
    for _ in 0..n {
        let di: f64 = rng.random::<f64>() * 2.0;
        let y = sd(di) * z.inverse_cdf(rng.random::<f64>().clamp(1e-12, 1.0 - 1e-12));
        m.push(needed_scale(y, 0.0, -1.2816, 1.2816));
        d.push(di);
    }
    (m, d)
}

#[test]
fn profile_is_monotone_and_tracks_growing_errors() {
    let (m, d) = rows(|d| 0.5 + d, 400, 3);
    let w = vec![1.0; m.len()];
    let p = Profile::fit(&m, &d, &w, 0.8);
    assert!(p.scale.windows(2).all(|s| s[0] <= s[1]), "{:?}", p.scale);
    // Errors triple across the range (0.5 -> 2.5 sd): the scale rises by well over half.
    assert!(p.at(1.9) > 1.5 * p.at(0.1), "{:?}", p.scale);
    // Held-out coverage is kept.
    assert!((p.coverage_scaled - p.coverage_plain).abs() < 0.02);
    assert!(p.spearman > 0.3);
}

#[test]
fn profile_is_flat_when_dissimilarity_is_the_same_everywhere() {
    let (m, _) = rows(|_| 1.0, 200, 4);
    let d = vec![0.7; m.len()];
    let p = Profile::fit(&m, &d, &vec![1.0; m.len()], 0.8);
    for &x in &[0.0, 0.7, 5.0] {
        assert_eq!(p.at(x), 1.0);
    }
}

#[test]
fn profile_never_narrows_beyond_the_largest_dissimilarity() {
    // Errors shrink with dissimilarity: the isotonic fit flattens, and beyond the data it holds.
    let (m, d) = rows(|d| 2.0 - 0.8 * d, 400, 5);
    let p = Profile::fit(&m, &d, &vec![1.0; m.len()], 0.8);
    let edge = p.at(p.di_max);
    for &x in &[p.di_max * 1.01, p.di_max * 2.0, 1e9] {
        assert!(p.at(x) >= edge);
    }
    assert!(p.scale.windows(2).all(|s| s[0] <= s[1]));
}

#[test]
fn beyond_the_spanned_ground_the_band_widens_to_the_envelope() {
    let b = Beyond {
        di_max: 0.5,
        distance_max: 1000.0,
        envelope_lo: -1.0,
        envelope_hi: 2.0,
    };
    assert_eq!(b.weight(0.4, 900.0), 0.0);
    assert!((b.weight(0.75, 0.0) - 0.5).abs() < 1e-12);
    assert_eq!(b.weight(0.1, 2500.0), 1.0);
    assert_eq!(b.widen(0.0, 1.0, 0.0), (0.0, 1.0));
    assert_eq!(b.widen(0.0, 1.0, 1.0), (-1.0, 2.0));
    assert_eq!(b.widen(0.0, 1.0, 0.5), (-0.5, 1.5));
    // Never narrows a band already wider than the envelope.
    assert_eq!(b.widen(-3.0, 3.0, 1.0), (-3.0, 3.0));
}
