//! Experimental variograms over scattered points and their weighted least-squares fit.
//!
//! **Estimators.** For the pairs `N(h)` whose distance falls in a lag bin, with differences
//! `d = z_i - z_j`:
//! - Matheron (1962): `gamma(h) = sum d^2 / (2 |N(h)|)`.
//! - Cressie & Hawkins (1980, *Math. Geol.* 12:115), robust to outlying values:
//!   `2 gamma(h) = (mean |d|^(1/2))^4 / (0.457 + 0.494 / |N(h)| + 0.045 / |N(h)|^2)`, the
//!   denominator correcting the bias of the fourth power to the order given in Cressie (1993,
//!   *Statistics for Spatial Data*, eq. 2.4.12).
//!
//! **Lags.** Bins `[k w, (k + 1) w)`, `k = 0..count`; by default twelve bins up to half the largest
//! pair distance, following the advice to use a variogram only to half the extent of the data
//! (Journel & Huijbregts 1978, *Mining Geostatistics*, p. 194).
//!
//! **Fit** (Cressie 1985, *Math. Geol.* 17:563): minimise
//! `sum_k N_k (gamma_hat_k / gamma(h_k; theta) - 1)^2` over the lags with pairs, which is weighted
//! least squares with weights `N_k / gamma(h_k; theta)^2`. With `gamma = s g(h; a, phi)` (total sill
//! `s`, nugget share `phi`, range `a`) the best `s` for given `(a, phi)` has a closed form, so the
//! search is over `(a, phi)`: a grid (61 ranges, log-spaced from half the first lag distance to
//! three times the last, times 21 nugget shares) refined by golden-section steps. Each model kind
//! is fitted and the one with the lowest weighted sum of squares is kept.
//!
//! **Too few pairs.** Below `min_pairs` pairs (default 30) or `min_lags` lags with pairs (default
//! 3) the fit is not attempted; the result carries `fallback = true`, a message, and
//! [`fallback_model`]: exponential, nugget 0, sill 1, practical range half the field diagonal.
//! That choice is conservative for totals: the variance of a sum of node errors is
//! `sum_ij w_i w_j C_ij`, which for non-negative weights grows as correlations grow, and the
//! correlations of monotone transforms of jointly normal errors grow with the normal correlation
//! (Lehmann 1966, *Ann. Math. Stat.* 37:1137), so a long range without nugget gives a wider total
//! than any shorter or noisier model; pure nugget (independent errors) would be the narrowest.

use serde::{Deserialize, Serialize};

use super::SpatialError;
use super::model::{ModelKind, VariogramModel};

/// One scattered observation: location (metres) and value (e.g. a normal score).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Sample {
    /// x in metres.
    pub x: f64,
    /// y in metres.
    pub y: f64,
    /// The observed value.
    pub value: f64,
}

/// Which experimental variogram estimator to use.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Estimator {
    /// Mean of half squared differences (Matheron 1962).
    Matheron,
    /// Robust fourth power of the mean root absolute difference (Cressie & Hawkins 1980).
    CressieHawkins,
}

/// Lag bins `[k width, (k + 1) width)` for `k` in `0..count`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Lags {
    /// Bin width in metres (> 0).
    pub width: f64,
    /// Number of bins (>= 1).
    pub count: usize,
}

impl Lags {
    /// Twelve equal bins up to half the largest distance between two of the points
    /// (Journel & Huijbregts 1978, p. 194). `None` with fewer than two distinct locations.
    pub fn half_extent(points: &[Sample]) -> Option<Lags> {
        let mut max_d: f64 = 0.0;
        for (i, a) in points.iter().enumerate() {
            for b in &points[i + 1..] {
                max_d = max_d.max((a.x - b.x).hypot(a.y - b.y));
            }
        }
        (max_d.is_finite() && max_d > 0.0).then(|| Lags {
            width: max_d / 2.0 / 12.0,
            count: 12,
        })
    }
}

/// One lag bin of an experimental variogram.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Lag {
    /// Lower edge of the bin (metres).
    pub lower: f64,
    /// Upper edge of the bin (metres, excluded).
    pub upper: f64,
    /// Mean distance of the bin's pairs (`NaN` without pairs).
    pub distance: f64,
    /// Number of pairs in the bin.
    pub pairs: usize,
    /// The estimated semivariance (`NaN` without pairs).
    pub gamma: f64,
}

/// An experimental variogram: the estimator and one entry per lag bin.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ExperimentalVariogram {
    /// Estimator used.
    pub estimator: Estimator,
    /// The bins, nearest first.
    pub lags: Vec<Lag>,
}

impl ExperimentalVariogram {
    /// Total number of pairs in all bins.
    pub fn pairs(&self) -> usize {
        self.lags.iter().map(|l| l.pairs).sum()
    }
}

/// The Cressie-Hawkins bias-corrected fourth power: `gamma = (mean sqrt|d|)^4 / (2 k(N))` with
/// `k(N) = 0.457 + 0.494 / N + 0.045 / N^2`, from the sum of `sqrt|d|` over `n` pairs.
pub fn cressie_hawkins(sum_root_abs: f64, n: usize) -> f64 {
    let n = n as f64;
    let m = sum_root_abs / n;
    m.powi(4) / (2.0 * (0.457 + 0.494 / n + 0.045 / (n * n)))
}

/// The experimental variogram of `points` over `lags` with `estimator`. Pairs farther apart than
/// the last bin are left out. Errors name a point with a non-finite coordinate or value, or bad
/// lag settings.
pub fn experimental(
    points: &[Sample],
    lags: Lags,
    estimator: Estimator,
) -> Result<ExperimentalVariogram, SpatialError> {
    experimental_within(points, None, lags, estimator)
}

/// As [`experimental`], pairing only points of the same group when `groups` is given (one entry
/// per point): the variogram of several data sets (e.g. one per survey step) pooled bin by bin,
/// each pair counted once and no pair across groups. Errors also when `groups` has the wrong
/// length.
pub fn experimental_within(
    points: &[Sample],
    groups: Option<&[usize]>,
    lags: Lags,
    estimator: Estimator,
) -> Result<ExperimentalVariogram, SpatialError> {
    if let Some(g) = groups
        && g.len() != points.len()
    {
        return Err(SpatialError::Input {
            what: "variogram groups".into(),
            problem: format!("{} groups for {} points", g.len(), points.len()),
        });
    }
    if !(lags.width.is_finite() && lags.width > 0.0) {
        return Err(SpatialError::Setting {
            key: "lags.width".into(),
            expected: "a finite number > 0".into(),
            got: lags.width.to_string(),
        });
    }
    if lags.count == 0 {
        return Err(SpatialError::Setting {
            key: "lags.count".into(),
            expected: ">= 1".into(),
            got: "0".into(),
        });
    }
    for (k, p) in points.iter().enumerate() {
        if !(p.x.is_finite() && p.y.is_finite() && p.value.is_finite()) {
            return Err(SpatialError::Input {
                what: format!("variogram point {k}"),
                problem: format!(
                    "coordinates and value must be finite, got x {}, y {}, value {}",
                    p.x, p.y, p.value
                ),
            });
        }
    }
    let mut n = vec![0usize; lags.count];
    let mut sum_h = vec![0.0; lags.count];
    let mut sum_stat = vec![0.0; lags.count];
    for (i, a) in points.iter().enumerate() {
        for (j, b) in points.iter().enumerate().skip(i + 1) {
            if groups.is_some_and(|g| g[i] != g[j]) {
                continue;
            }
            let h = (a.x - b.x).hypot(a.y - b.y);
            let k = (h / lags.width).floor();
            if k >= lags.count as f64 {
                continue;
            }
            let k = k as usize;
            let d = a.value - b.value;
            n[k] += 1;
            sum_h[k] += h;
            sum_stat[k] += match estimator {
                Estimator::Matheron => d * d,
                Estimator::CressieHawkins => d.abs().sqrt(),
            };
        }
    }
    let lags = (0..lags.count)
        .map(|k| {
            let pairs = n[k];
            let (distance, gamma) = if pairs == 0 {
                (f64::NAN, f64::NAN)
            } else {
                let g = match estimator {
                    Estimator::Matheron => sum_stat[k] / (2.0 * pairs as f64),
                    Estimator::CressieHawkins => cressie_hawkins(sum_stat[k], pairs),
                };
                (sum_h[k] / pairs as f64, g)
            };
            Lag {
                lower: k as f64 * lags.width,
                upper: (k + 1) as f64 * lags.width,
                distance,
                pairs,
                gamma,
            }
        })
        .collect();
    Ok(ExperimentalVariogram { estimator, lags })
}

/// What a fit may use and when it must give up.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitSettings {
    /// Model kinds to try (the lowest weighted sum of squares wins).
    pub kinds: Vec<ModelKind>,
    /// Fewest pairs (over the lags with pairs) needed to fit; below it the fallback is used.
    pub min_pairs: usize,
    /// Fewest lags with at least one pair needed to fit; below it the fallback is used.
    pub min_lags: usize,
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            kinds: ModelKind::ALL.to_vec(),
            min_pairs: 30,
            min_lags: 3,
        }
    }
}

/// One model kind's best fit.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Candidate {
    /// The fitted model.
    pub model: VariogramModel,
    /// Its weighted sum of squares `sum N_k (gamma_hat_k / gamma_k - 1)^2`.
    pub weighted_sse: f64,
}

/// The outcome of a variogram fit (what goes into a run's summary).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct VariogramFit {
    /// The model to use (the best candidate, or the fallback).
    pub model: VariogramModel,
    /// Weighted sum of squares of `model` (`NaN` for the fallback).
    pub weighted_sse: f64,
    /// Pairs in the lags used.
    pub pairs_used: usize,
    /// Lags with at least one pair.
    pub lags_used: usize,
    /// Every kind tried, in the order of the settings.
    pub candidates: Vec<Candidate>,
    /// True when the fallback model is used instead of a fit.
    pub fallback: bool,
    /// Why the fallback was used, or a remark on the fit (e.g. range at the search limit).
    pub message: Option<String>,
}

/// The conservative model used when there is too little to fit: exponential, no nugget, sill 1,
/// practical range half of `diagonal` (the field's diagonal, metres). See the module docs.
pub fn fallback_model(diagonal: f64) -> VariogramModel {
    VariogramModel {
        kind: ModelKind::Exponential,
        nugget: 0.0,
        sill: 1.0,
        range: (diagonal / 2.0).max(f64::MIN_POSITIVE),
    }
}

/// A lag used by a fit: at least one pair, mean distance > 0.
struct FitLag {
    h: f64,
    n: f64,
    gamma: f64,
}

/// Best total sill and weighted SSE for range `a`, nugget share `phi`.
fn objective(kind: ModelKind, lags: &[FitLag], a: f64, phi: f64) -> Option<(f64, f64)> {
    // gamma_k = s g_k; with t = 1/s the objective sum N (t r_k - 1)^2, r_k = gamma_hat_k / g_k,
    // is quadratic in t with minimum at t = sum N r / sum N r^2.
    let mut snr = 0.0;
    let mut snr2 = 0.0;
    let mut r = Vec::with_capacity(lags.len());
    for l in lags {
        let g = phi + (1.0 - phi) * (1.0 - kind.correlation(l.h, a));
        if g <= 0.0 {
            return None;
        }
        let rk = l.gamma / g;
        snr += l.n * rk;
        snr2 += l.n * rk * rk;
        r.push(rk);
    }
    if snr2 <= 0.0 || snr <= 0.0 {
        return None;
    }
    let t = snr / snr2;
    let sse = lags
        .iter()
        .zip(&r)
        .map(|(l, rk)| l.n * (t * rk - 1.0).powi(2))
        .sum();
    Some((1.0 / t, sse))
}

/// Golden-section search of `f` on `[lo, hi]` (40 steps); returns the best point seen.
fn golden(lo: f64, hi: f64, mut f: impl FnMut(f64) -> f64) -> f64 {
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (lo, hi);
    let mut c = b - g * (b - a);
    let mut d = a + g * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..40 {
        if fc <= fd {
            b = d;
            d = c;
            fd = fc;
            c = b - g * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + g * (b - a);
            fd = f(d);
        }
    }
    if fc <= fd { c } else { d }
}

fn fit_kind(kind: ModelKind, lags: &[FitLag]) -> Option<Candidate> {
    const NA: usize = 61;
    const NP: usize = 21;
    let h_min = lags.iter().map(|l| l.h).fold(f64::INFINITY, f64::min);
    let h_max = lags.iter().map(|l| l.h).fold(0.0, f64::max);
    let (la_lo, la_hi) = ((0.5 * h_min).ln(), (3.0 * h_max).ln());
    let la_at = |k: usize| la_lo + (la_hi - la_lo) * k as f64 / (NA - 1) as f64;
    let phi_at = |k: usize| k as f64 / (NP - 1) as f64;
    let eval = |la: f64, phi: f64| {
        objective(kind, lags, la.exp(), phi)
            .map(|(_, s)| s)
            .unwrap_or(f64::INFINITY)
    };
    let mut best = (f64::INFINITY, 0usize, 0usize);
    for ka in 0..NA {
        for kp in 0..NP {
            let s = eval(la_at(ka), phi_at(kp));
            if s < best.0 {
                best = (s, ka, kp);
            }
        }
    }
    if !best.0.is_finite() {
        return None;
    }
    let (mut la, mut phi) = (la_at(best.1), phi_at(best.2));
    let step_a = (la_hi - la_lo) / (NA - 1) as f64;
    let step_p = 1.0 / (NP - 1) as f64;
    let mut s_best = best.0;
    for _ in 0..4 {
        let la_new = golden((la - step_a).max(la_lo), (la + step_a).min(la_hi), |x| {
            eval(x, phi)
        });
        let s = eval(la_new, phi);
        if s <= s_best {
            la = la_new;
            s_best = s;
        }
        let phi_new = golden((phi - step_p).max(0.0), (phi + step_p).min(1.0), |p| {
            eval(la, p)
        });
        let s = eval(la, phi_new);
        if s <= s_best {
            phi = phi_new;
            s_best = s;
        }
    }
    let (sill, sse) = objective(kind, lags, la.exp(), phi)?;
    Some(Candidate {
        model: VariogramModel {
            kind,
            nugget: phi * sill,
            sill,
            range: la.exp(),
        },
        weighted_sse: sse,
    })
}

/// Fits the model kinds of `settings` to `experimental` by Cressie's weighted least squares and
/// keeps the best; falls back to [`fallback_model`]`(diagonal)` when there are too few pairs or
/// lags, or nothing varies. See the module docs for the rule and its justification.
pub fn fit(
    experimental: &ExperimentalVariogram,
    settings: &FitSettings,
    diagonal: f64,
) -> Result<VariogramFit, SpatialError> {
    if settings.kinds.is_empty() {
        return Err(SpatialError::Setting {
            key: "variogram.kinds".into(),
            expected: "at least one model kind".into(),
            got: "none".into(),
        });
    }
    if !(diagonal.is_finite() && diagonal > 0.0) {
        return Err(SpatialError::Setting {
            key: "variogram diagonal".into(),
            expected: "a finite number > 0".into(),
            got: diagonal.to_string(),
        });
    }
    let lags: Vec<FitLag> = experimental
        .lags
        .iter()
        .filter(|l| l.pairs > 0 && l.gamma.is_finite() && l.distance > 0.0)
        .map(|l| FitLag {
            h: l.distance,
            n: l.pairs as f64,
            gamma: l.gamma,
        })
        .collect();
    let pairs_used: usize = lags.iter().map(|l| l.n as usize).sum();
    let lags_used = lags.len();
    let fallback = |message: String| VariogramFit {
        model: fallback_model(diagonal),
        weighted_sse: f64::NAN,
        pairs_used,
        lags_used,
        candidates: Vec::new(),
        fallback: true,
        message: Some(message),
    };
    let rule = format!(
        "exponential, nugget 0, sill 1, practical range half the field diagonal ({:.1} m), which gives totals at least as wide as any shorter or noisier correlation",
        diagonal / 2.0
    );
    if pairs_used < settings.min_pairs || lags_used < settings.min_lags {
        return Ok(fallback(format!(
            "too few well pairs to fit a variogram ({pairs_used} pairs in {lags_used} lags; a fit needs at least {} pairs in at least {} lags): using {rule}",
            settings.min_pairs, settings.min_lags
        )));
    }
    if lags.iter().all(|l| l.gamma <= 0.0) {
        return Ok(fallback(format!(
            "the well scores do not vary within the lag range: using {rule}"
        )));
    }
    let candidates: Vec<Candidate> = settings
        .kinds
        .iter()
        .filter_map(|&k| fit_kind(k, &lags))
        .collect();
    let Some(best) = candidates
        .iter()
        .copied()
        .min_by(|a, b| a.weighted_sse.total_cmp(&b.weighted_sse))
    else {
        return Ok(fallback(format!(
            "no model could be fitted to the experimental variogram: using {rule}"
        )));
    };
    let h_max = lags.iter().map(|l| l.h).fold(0.0, f64::max);
    let message = (best.model.range >= 3.0 * h_max * (1.0 - 1e-9)).then(|| {
        format!(
            "the fitted range reached the search limit ({:.1} m, three times the farthest lag): the variogram does not level off within the lags",
            best.model.range
        )
    });
    Ok(VariogramFit {
        model: best.model,
        weighted_sse: best.weighted_sse,
        pairs_used,
        lags_used,
        candidates,
        fallback: false,
        message,
    })
}
