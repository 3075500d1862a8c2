//! The band: candidates, the choice among them, and the kept band's final calibration.
//!
//! **Candidates** ([`candidates`]). Every band method of [`crate::calibrate::conformal`] is tried
//! on the corrected out-of-fold prediction: held-out residuals, the cross-validation residual
//! band that Barber, Candes, Ramdas & Tibshirani (2021, Ann. Stat. 49:486) set beside CV+;
//! residuals normalised by the forest's spread (Lei et al. 2018, JASA 113:1094, sec. 5.2); and
//! conformalised quantile regression (Romano, Patterson & Candes 2019, NeurIPS). Each is tried
//! with 1..`max_bins` Mondrian bins of the predicted value (Vovk, Gammerman & Shafer 2005) and
//! localised by the forest's proximity weights at several localities (Lu & Hardin 2021, JMLR
//! 22(8), for the forest-weighted error distribution; Tibshirani, Barber, Candes & Ramdas 2019,
//! NeurIPS, for the weighted conformal quantile). Every candidate is cross-fitted on the folds,
//! so each held-out row has the edges a band calibrated without its fold gives it.
//!
//! **Choice** ([`choose`]). The candidate with the lowest out-of-fold mean interval score
//! (Gneiting & Raftery 2007, JASA 102:359, sec. 6.2), a proper score for the central interval, is
//! kept. Under a covariate shift each row weighs its shift weight in that mean, which estimates
//! the score at the mapped nodes (Tibshirani et al. 2019).
//!
//! **Band** ([`finish`]). The kept candidate is calibrated once more on all out-of-fold rows for
//! the grid nodes; its cross-fitted edges stay the out-of-fold band of the diagnostics. When the
//! wells are too few for a finite band, the edges are the physical bounds and the diagnostics
//! say so.

use crate::calibrate::conformal::{
    BandBase, BandCalibration, BandMethod, BinInfo, cross_fitted_band, cross_fitted_local_band,
    finite_band_possible, min_wells_for_band,
};
use crate::calibrate::shift::ShiftDiagnostics;
use crate::calibrate::units::{Units, count_wells, well_unit_weights};
use crate::metrics::{coverage, interval_score_one, mean_width, serde_nan};
use serde::{Deserialize, Serialize};

/// Out-of-fold result of one band candidate (method and number of Mondrian bins).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandCandidate {
    /// Scores used.
    pub method: BandMethod,
    /// Mondrian bins asked for (merged down when wells are too few).
    pub max_bins: usize,
    /// Share of forest-proximity weights in the localised band (0: global quantiles per bin;
    /// see [`crate::calibrate::conformal::Localisation`]).
    #[serde(default)]
    pub locality: f64,
    /// Out-of-fold mean interval score (lower is better); under a covariate shift, each row
    /// weighted by its calibration weight, the estimate of the score at the mapped nodes.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub interval_score: f64,
    /// Out-of-fold coverage.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub coverage: f64,
    /// Out-of-fold mean width.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mean_width: f64,
}

/// How the band was made.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BandDiagnostics {
    /// The method kept.
    pub method: BandMethod,
    /// Mondrian bins asked for by the kept candidate.
    pub max_bins: usize,
    /// Locality of the kept candidate (0: global quantiles per Mondrian bin).
    #[serde(default)]
    pub locality: f64,
    /// Smallest scale of normalised scores (a tenth of the median forest spread).
    pub scale_floor: f64,
    /// Every candidate, with its out-of-fold scores.
    pub candidates: Vec<BandCandidate>,
    /// Mondrian bins of the final band, with their wells and quantiles.
    pub bins: Vec<BinInfo>,
    /// True when the wells cannot back a finite band: the band is the physical bounds.
    pub too_few_wells: bool,
    /// Fewest wells a finite band at this level needs.
    pub min_wells_needed: usize,
    /// Plain statement for the user when `too_few_wells`.
    pub message: Option<String>,
    /// Out-of-fold rows whose cross-fitted band fell back to a bound (their calibration folds
    /// held too few wells).
    pub oof_rows_at_bounds: usize,
    /// The covariate shift's effect, when the band was calibrated for the mapped nodes.
    #[serde(default)]
    pub shift: Option<ShiftDiagnostics>,
}

/// Localities of the localised band candidates (share of forest-proximity weights).
const LOCALITIES: &[f64] = &[0.25, 0.5, 0.75, 1.0];

/// What the band stages read: out-of-fold rows and the band's settings.
#[derive(Clone, Copy, Debug)]
pub struct BandInput<'a> {
    /// Truth per row.
    pub y: &'a [f64],
    /// Corrected out-of-fold prediction per row (the band's middle).
    pub mid: &'a [f64],
    /// Out-of-fold forest quantiles at `(1-level)/2`, 0.5, `(1+level)/2`.
    pub quantiles: &'a [Vec<f64>; 3],
    /// Out-of-fold quantile-forest weights of each row over its fold models' training rows.
    pub proximity: &'a [Vec<f64>],
    /// Fold of every row.
    pub folds: &'a [usize],
    /// The rows as calibration units.
    pub units: &'a Units,
    /// Whether `units` carry covariate-shift ratios (candidates then compete on the
    /// ratio-weighted interval score).
    pub shifted: bool,
    /// Nominal level of the band.
    pub level: f64,
    /// Physical bounds of the target.
    pub bounds: (f64, f64),
    /// Smallest scale of normalised scores ([`scale_floor`]).
    pub scale_floor: f64,
    /// Most Mondrian bins a candidate asks for.
    pub max_bins: usize,
    /// Fewest wells per Mondrian bin.
    pub min_wells_per_bin: usize,
}

/// Which band a candidate is.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BandSpec {
    /// Scores used.
    pub method: BandMethod,
    /// Mondrian bins asked for (1 for localised candidates).
    pub max_bins: usize,
    /// Share of forest-proximity weights (0: global quantiles per bin).
    pub locality: f64,
}

/// One candidate's out-of-fold band: the cross-fitted edges of every row and their score.
#[derive(Clone, Debug, PartialEq)]
pub struct OofBand {
    /// Which band.
    pub spec: BandSpec,
    /// Base of every row's band (its `mid` is the corrected prediction).
    pub base: Vec<BandBase>,
    /// Cross-fitted lower edge per row.
    pub lo: Vec<f64>,
    /// Cross-fitted upper edge per row.
    pub hi: Vec<f64>,
    /// Rows whose cross-fitted band fell back to a bound (too few wells in their calibration
    /// folds).
    pub at_bounds: Vec<bool>,
    /// Out-of-fold mean interval score (shift-weighted under a covariate shift).
    pub score: f64,
}

impl OofBand {
    /// The candidate's line in the diagnostics.
    pub fn summary(&self, y: &[f64]) -> BandCandidate {
        BandCandidate {
            method: self.spec.method,
            max_bins: self.spec.max_bins,
            locality: self.spec.locality,
            interval_score: self.score,
            coverage: coverage(y, &self.lo, &self.hi),
            mean_width: mean_width(&self.lo, &self.hi),
        }
    }
}

/// Floor of the normalised-score scale: a tenth of the median positive spread (half the
/// distance between the outer `quantiles`), or a millionth of the bounds' range when no spread is
/// positive (common practice, no published source).
pub fn scale_floor(quantiles: &[Vec<f64>; 3], bounds: (f64, f64)) -> f64 {
    let mut s: Vec<f64> = spread(quantiles)
        .into_iter()
        .filter(|v| v.is_finite() && *v > 0.0)
        .collect();
    let fallback = 1e-6 * (bounds.1 - bounds.0);
    if s.is_empty() {
        return fallback;
    }
    s.sort_by(|a, b| a.total_cmp(b));
    (0.1 * s[s.len() / 2]).max(fallback)
}

/// Half the distance between the outer quantiles, per row.
fn spread(quantiles: &[Vec<f64>; 3]) -> Vec<f64> {
    (0..quantiles[0].len())
        .map(|i| 0.5 * (quantiles[2][i] - quantiles[0][i]))
        .collect()
}

/// The base of every row's band under `method`: centred on the corrected prediction (with the
/// floored forest spread as scale for normalised scores), or the forest's outer quantiles
/// shifted with its median onto the corrected prediction for quantile regression.
fn bases(method: BandMethod, input: &BandInput) -> Vec<BandBase> {
    let q = input.quantiles;
    let spread = spread(q);
    (0..input.mid.len())
        .map(|i| {
            let mid = input.mid[i];
            match method {
                BandMethod::CvResidual => BandBase::centred(mid),
                BandMethod::Normalized => BandBase {
                    scale: spread[i].max(input.scale_floor),
                    ..BandBase::centred(mid)
                },
                BandMethod::Cqr => {
                    let shift = mid - q[1][i];
                    BandBase {
                        mid,
                        lo: q[0][i] + shift,
                        hi: q[2][i] + shift,
                        scale: 1.0,
                    }
                }
            }
        })
        .collect()
}

/// Stage 5: every band candidate, cross-fitted on the folds, with its out-of-fold score. For each
/// method in turn: 1..`max_bins` Mondrian bins, then each locality.
pub fn candidates(input: &BandInput) -> Vec<OofBand> {
    let (y, n) = (input.y, input.y.len());
    let alpha = 1.0 - input.level;
    let score_weight: Vec<f64> = if input.shifted {
        input.units.weight.clone()
    } else {
        vec![1.0; n]
    };
    let score = |lo: &[f64], hi: &[f64]| -> f64 {
        let (mut s, mut w) = (0.0, 0.0);
        for i in 0..n {
            s += score_weight[i] * interval_score_one(y[i], lo[i], hi[i], alpha);
            w += score_weight[i];
        }
        s / w
    };
    let mut list = Vec::new();
    for method in [
        BandMethod::CvResidual,
        BandMethod::Normalized,
        BandMethod::Cqr,
    ] {
        let base = bases(method, input);
        for max_bins in 1..=input.max_bins {
            let (lo, hi, at_bounds) = cross_fitted_band(
                method,
                input.folds,
                &base,
                y,
                input.units,
                input.level,
                max_bins,
                input.min_wells_per_bin,
                input.bounds,
            );
            list.push(OofBand {
                spec: BandSpec {
                    method,
                    max_bins,
                    locality: 0.0,
                },
                base: base.clone(),
                score: score(&lo, &hi),
                lo,
                hi,
                at_bounds,
            });
        }
        for &locality in LOCALITIES {
            let (lo, hi, at_bounds) = cross_fitted_local_band(
                method,
                input.folds,
                &base,
                y,
                input.units,
                input.level,
                locality,
                input.proximity,
                input.bounds,
            );
            list.push(OofBand {
                spec: BandSpec {
                    method,
                    max_bins: 1,
                    locality,
                },
                base: base.clone(),
                score: score(&lo, &hi),
                lo,
                hi,
                at_bounds,
            });
        }
    }
    list
}

/// Stage 6: the index of the kept candidate: the first one, unless a later one has a strictly
/// lower out-of-fold score (so the first of equals wins, and a score that is not a number never
/// displaces another). Another choice rule replaces this function.
pub fn choose(candidates: &[OofBand]) -> usize {
    (0..candidates.len()).fold(0, |b, c| {
        if candidates[c].score < candidates[b].score {
            c
        } else {
            b
        }
    })
}

/// The kept band.
#[derive(Clone, Debug, PartialEq)]
pub struct Band {
    /// The kept candidate with its cross-fitted out-of-fold edges.
    pub oof: OofBand,
    /// Its final calibration on all out-of-fold rows, applied at the grid nodes.
    pub calibration: BandCalibration,
    /// How the band was made.
    pub diagnostics: BandDiagnostics,
}

impl Band {
    /// Scale of every row's residuals: the band's scale for normalised scores, else 1 (the
    /// exceedance stage's predictive system uses it).
    pub fn residual_scale(&self) -> Vec<f64> {
        self.oof
            .base
            .iter()
            .map(|b| {
                if self.oof.spec.method == BandMethod::Normalized {
                    b.scale
                } else {
                    1.0
                }
            })
            .collect()
    }
}

/// Stage 7: calibrate candidate `chosen` of `candidates` on all out-of-fold rows and describe the
/// band (target `name` for the messages). Warns when the wells are too few for a finite band, or
/// when some held-out rows' bands fell back to the bounds.
pub fn finish(
    mut candidates: Vec<OofBand>,
    chosen: usize,
    input: &BandInput,
    name: &str,
    warnings: &mut Vec<String>,
) -> Band {
    let (y, level, bounds, units) = (input.y, input.level, input.bounds, input.units);
    let summaries: Vec<BandCandidate> = candidates.iter().map(|c| c.summary(y)).collect();
    let oof = candidates.swap_remove(chosen);
    drop(candidates);
    let spec = oof.spec;
    let calibration = if spec.locality > 0.0 {
        BandCalibration::fit_local(spec.method, &oof.base, y, units, level, spec.locality)
    } else {
        BandCalibration::fit(
            spec.method,
            &oof.base,
            y,
            units,
            level,
            spec.max_bins,
            input.min_wells_per_bin,
        )
    };
    let n = y.len();
    let n_wells = count_wells(&units.group);
    let need = min_wells_for_band(level);
    let too_few = calibration.too_few_wells() || !finite_band_possible(n_wells as f64, level);
    let message = too_few.then(|| {
        format!(
            "only {n_wells} wells for `{name}`: a finite {:.0} % band needs at least {need} \
             (ceil((n+1)(1-a/2)) <= n); the band is widened to the physical bounds [{}, {}]",
            100.0 * level,
            bounds.0,
            bounds.1
        )
    });
    if let Some(m) = &message {
        warnings.push(m.clone());
    }
    let at_bounds = oof.at_bounds.iter().filter(|&&b| b).count();
    if at_bounds > 0 && !too_few {
        warnings.push(format!(
            "{at_bounds} of {n} out-of-fold rows had too few wells in their calibration folds; \
             their held-out bands are the physical bounds"
        ));
    }
    let shift = input.shifted.then(|| {
        let covered = |w: &[f64]| -> f64 {
            let (mut c, mut t) = (0.0, 0.0);
            for i in 0..n {
                t += w[i];
                if oof.lo[i] <= y[i] && y[i] <= oof.hi[i] {
                    c += w[i];
                }
            }
            c / t
        };
        ShiftDiagnostics {
            effective_wells: units.effective_wells(),
            test_weight: units.test_weight,
            coverage_wells: covered(&well_unit_weights(&units.group)),
            coverage_nodes: covered(&units.weight),
        }
    });
    let diagnostics = BandDiagnostics {
        method: spec.method,
        max_bins: spec.max_bins,
        locality: spec.locality,
        scale_floor: input.scale_floor,
        candidates: summaries,
        bins: calibration.bin_info.clone(),
        too_few_wells: too_few,
        min_wells_needed: need,
        message,
        oof_rows_at_bounds: at_bounds,
        shift,
    };
    Band {
        oof,
        calibration,
        diagnostics,
    }
}
