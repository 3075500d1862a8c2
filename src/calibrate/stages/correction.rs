//! End-bias correction: held-out predictions shrink towards the mean at the low and high ends
//! (regression to the mean), which a monotone map of prediction to truth undoes.
//!
//! The map `iso` is a centred isotonic regression of truth on the out-of-fold prediction
//! (pool-adjacent-violators, Best & Chakravarti 1990, Math. Programming 47:425; ties per
//! de Leeuw 1977; see [`crate::calibrate::isotonic`]), cross-fitted so that no row's correction
//! saw that row. It is applied at a strength `s` in {1/4, 1/2, 3/4, 1} as
//! `raw + s (iso(raw) - raw)`; the strength with the lowest out-of-fold weighted squared error
//! (Gneiting 2011, JASA 106:746) is kept, and only if it beats the uncorrected predictor. The
//! final map is fitted on all out-of-fold pairs.

use super::wmse;
use crate::calibrate::error::CalibrateError;
use crate::calibrate::isotonic::{IsotonicMap, IsotonicSettings, cross_fit};
use crate::metrics::{end_bias, serde_nan, slope};
use serde::{Deserialize, Serialize};

/// Out-of-fold score of one strength of the end-bias correction.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CorrectionScore {
    /// Strength `s` in `raw + s (iso(raw) - raw)`; 0 is the uncorrected predictor.
    pub strength: f64,
    /// Out-of-fold weighted mean squared error.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse: f64,
}

/// What the end-bias correction did. "After" values describe the cross-fitted correction at the
/// kept strength, or at full strength when it was not kept (what it would have done).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EndCorrectionDiagnostics {
    /// The setting.
    pub enabled: bool,
    /// Whether the corrected predictor is used.
    pub kept: bool,
    /// Kept strength (0 when not kept).
    pub strength: f64,
    /// Why, in words.
    pub reason: String,
    /// Out-of-fold MSE of every strength tried.
    pub scores: Vec<CorrectionScore>,
    /// Out-of-fold weighted MSE before the correction.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_before: f64,
    /// Out-of-fold weighted MSE after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub mse_after: f64,
    /// Slope of truth on prediction before (1 = no shrinkage).
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub slope_before: f64,
    /// Slope after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub slope_after: f64,
    /// Mean bias (prediction - truth) in the bottom decile of the truth, before.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_bottom_before: f64,
    /// Same in the top decile, before.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_top_before: f64,
    /// Bottom-decile bias after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_bottom_after: f64,
    /// Top-decile bias after.
    #[serde(deserialize_with = "serde_nan::f64_or_nan")]
    pub bias_top_after: f64,
    /// Knots of the final isotonic map (0 when not kept).
    pub knots: usize,
}

/// The corrected out-of-fold prediction and the final correction.
#[derive(Clone, Debug, PartialEq)]
pub struct Correction {
    /// Cross-fitted corrected prediction per row, the middle of the band (the learner's
    /// prediction clipped to the bounds when the correction is not kept).
    pub mid: Vec<f64>,
    /// Final map, fitted on all out-of-fold pairs (`None` when not kept).
    pub map: Option<IsotonicMap>,
    /// Kept strength `s` in `raw + s (map(raw) - raw)` (0 when not kept).
    pub strength: f64,
    /// What the correction did.
    pub diagnostics: EndCorrectionDiagnostics,
}

/// Stage 4: correct the learner's out-of-fold prediction `raw` (truth `y`, row weights `weight`,
/// rows' folds `folds`) within the physical `bounds`. With `enabled` false the correction is
/// still measured but never kept; when it is enabled and not kept, a warning says why.
pub fn fit(
    raw: &[f64],
    y: &[f64],
    weight: &[f64],
    folds: &[usize],
    bounds: (f64, f64),
    enabled: bool,
    warnings: &mut Vec<String>,
) -> Result<Correction, CalibrateError> {
    let iso_settings = IsotonicSettings {
        increasing: true,
        y_min: Some(bounds.0),
        y_max: Some(bounds.1),
        centred: true,
    };
    let raw_clipped: Vec<f64> = raw.iter().map(|v| v.clamp(bounds.0, bounds.1)).collect();
    let corrected_cf = cross_fit(folds, raw, y, weight, &iso_settings)?;
    let mse_before = wmse(y, &raw_clipped, weight);
    // Strength of the correction: raw + strength (iso(raw) - raw), chosen by out-of-fold MSE;
    // strength 0 keeps the uncorrected predictor.
    let with_strength = |lambda: f64| -> Vec<f64> {
        raw_clipped
            .iter()
            .zip(&corrected_cf)
            .map(|(r, c)| r + lambda * (c - r))
            .collect()
    };
    let strength_scores: Vec<CorrectionScore> = [0.0, 0.25, 0.5, 0.75, 1.0]
        .iter()
        .map(|&lambda| CorrectionScore {
            strength: lambda,
            mse: wmse(y, &with_strength(lambda), weight),
        })
        .collect();
    let best_strength = strength_scores
        .iter()
        .filter(|c| c.strength > 0.0 && c.mse < mse_before)
        .fold(None::<&CorrectionScore>, |acc, c| match acc {
            Some(a) if a.mse <= c.mse => Some(a),
            _ => Some(c),
        })
        .map_or(0.0, |c| c.strength);
    let kept = enabled && best_strength > 0.0;
    let strength = if kept { best_strength } else { 0.0 };
    let after = with_strength(if kept { strength } else { 1.0 });
    let mse_after = wmse(y, &after, weight);
    let reason = if !enabled {
        "end correction disabled in the settings".to_string()
    } else if kept {
        format!(
            "kept at strength {strength}: out-of-fold mean squared error {mse_before:.6} -> \
             {mse_after:.6}"
        )
    } else {
        format!(
            "not kept: at every strength the correction would raise the out-of-fold mean \
             squared error ({mse_before:.6}; at full strength {mse_after:.6})"
        )
    };
    if enabled && !kept {
        warnings.push(format!("end-bias correction {reason}"));
    }
    let map = if kept {
        Some(IsotonicMap::fit(raw, y, Some(weight), &iso_settings)?)
    } else {
        None
    };
    let (bb0, bt0) = end_bias(y, &raw_clipped);
    let (bb1, bt1) = end_bias(y, &after);
    let diagnostics = EndCorrectionDiagnostics {
        enabled,
        kept,
        strength,
        reason,
        scores: strength_scores,
        mse_before,
        mse_after,
        slope_before: slope(y, &raw_clipped),
        slope_after: slope(y, &after),
        bias_bottom_before: bb0,
        bias_top_before: bt0,
        bias_bottom_after: bb1,
        bias_top_after: bt1,
        knots: map.as_ref().map_or(0, |m| m.x.len()),
    };
    Ok(Correction {
        mid: if kept { after } else { raw_clipped },
        map,
        strength,
        diagnostics,
    })
}
