//! The band away from the wells: a dissimilarity profile and a rule beyond the spanned ground.
//!
//! Fitted on the kept band's held-out rows ([`crate::calibrate::profile`]): the needed band scale
//! against each row's dissimilarity index to the wells of the other folds (Meyer & Pebesma 2021,
//! 2022), made monotone by pool-adjacent-violators, and the largest dissimilarity and distance to
//! the nearest well of another fold that cross-validation saw. At a node the band is scaled by the
//! profile at the node's dissimilarity, then widened towards the envelope of the wells' values
//! where the node lies beyond that ground ([`crate::calibrate::profile::Beyond`]).

use crate::calibrate::profile::{Beyond, Profile, needed_scale};
use crate::calibrate::units::well_unit_weights;
use serde::{Deserialize, Serialize};

/// The fitted spread rule of a target.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Spread {
    /// Band scale against dissimilarity (flat when no dissimilarity was given).
    pub profile: Profile,
    /// Widening beyond the ground cross-validation spans.
    pub beyond: Beyond,
}

/// What the spread stage reads: the kept band's held-out rows and where they lie.
#[derive(Clone, Copy, Debug)]
pub struct SpreadInput<'a> {
    /// Truth (denoised for a target with an atom).
    pub y: &'a [f64],
    /// Out-of-fold middle.
    pub mid: &'a [f64],
    /// Out-of-fold lower edge.
    pub lo: &'a [f64],
    /// Out-of-fold upper edge.
    pub hi: &'a [f64],
    /// Dissimilarity of each row to the other folds' rows, when known.
    pub dissimilarity: Option<&'a [f64]>,
    /// Well location per row.
    pub xy: &'a [[f64; 2]],
    /// Well per row.
    pub group: &'a [usize],
    /// Fold per row.
    pub folds: &'a [usize],
    /// Nominal band level.
    pub level: f64,
}

/// Fit the spread rule.
pub fn fit(input: &SpreadInput) -> Spread {
    let n = input.y.len();
    let w = well_unit_weights(input.group);
    let profile = match input.dissimilarity {
        Some(di) => {
            let m: Vec<f64> = (0..n)
                .map(|i| needed_scale(input.y[i], input.mid[i], input.lo[i], input.hi[i]))
                .collect();
            Profile::fit(&m, di, &w, input.level)
        }
        None => Profile::flat(),
    };
    let di_max = input.dissimilarity.map_or(f64::NAN, |d| {
        d.iter()
            .copied()
            .filter(|v| v.is_finite())
            .fold(0.0, f64::max)
    });
    let mut distance_max: f64 = 0.0;
    for i in 0..n {
        let nearest = (0..n)
            .filter(|&j| input.folds[j] != input.folds[i])
            .map(|j| {
                let (dx, dy) = (
                    input.xy[i][0] - input.xy[j][0],
                    input.xy[i][1] - input.xy[j][1],
                );
                (dx * dx + dy * dy).sqrt()
            })
            .fold(f64::INFINITY, f64::min);
        if nearest.is_finite() {
            distance_max = distance_max.max(nearest);
        }
    }
    let (lo, hi) = input
        .y
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    Spread {
        profile,
        beyond: Beyond {
            di_max,
            distance_max,
            envelope_lo: lo,
            envelope_hi: hi,
        },
    }
}

impl Spread {
    /// The band `(lo, hi)` around `mid` at a node with dissimilarity `di` and distance `dist` to
    /// the nearest well, inside `bounds`.
    pub fn apply(
        &self,
        mid: f64,
        lo: f64,
        hi: f64,
        di: f64,
        dist: f64,
        bounds: (f64, f64),
    ) -> (f64, f64) {
        if mid.is_nan() {
            return (lo, hi);
        }
        let k = self.profile.at(di);
        let (l, h) = (mid - k * (mid - lo), mid + k * (hi - mid));
        let (l, h) = self.beyond.widen(l, h, self.beyond.weight(di, dist));
        (l.clamp(bounds.0, bounds.1), h.clamp(bounds.0, bounds.1))
    }

    /// The factors `(s_lo, s_hi)` by which [`Self::apply`] stretches the band's two sides about
    /// `mid` before clipping: the lower edge becomes `mid - s_lo (mid - lo)`, the upper one
    /// `mid + s_hi (hi - mid)`. Applied to the whole distribution (`Q(u) = mid + s (Q0(u) - mid)`
    /// on each side, so `F(t) = F0(mid + (t - mid) / s)`), they make the exceedance maps the
    /// distribution whose quantiles the widened band gives. A side of zero width cannot be
    /// scaled and keeps the factor 1 (the exceedance maps are then made consistent with the band
    /// by [`crate::calibrate::CalibratedTarget::predict_at`]).
    pub fn factors(&self, mid: f64, lo: f64, hi: f64, di: f64, dist: f64) -> (f64, f64) {
        if mid.is_nan() {
            return (1.0, 1.0);
        }
        let k = self.profile.at(di);
        let (l, h) = (mid - k * (mid - lo), mid + k * (hi - mid));
        let (l, h) = self.beyond.widen(l, h, self.beyond.weight(di, dist));
        let side = |wide: f64, plain: f64| {
            let s = wide / plain;
            if plain > 0.0 && s.is_finite() && s > 0.0 {
                s
            } else {
                1.0
            }
        };
        (side(mid - l, mid - lo), side(h - mid, hi - mid))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_factors_reproduce_the_widened_band() {
        let spread = Spread {
            profile: Profile {
                di: vec![0.2, 0.8],
                scale: vec![0.9, 1.6],
                ..Profile::flat()
            },
            beyond: Beyond {
                di_max: 1.0,
                distance_max: 500.0,
                envelope_lo: -30.0,
                envelope_hi: 10.0,
            },
        };
        let bounds = (-60.0, 60.0);
        for (mid, lo, hi, di, dist) in [
            (-4.0, -9.0, 1.0, 0.1, 100.0),
            (-4.0, -9.0, 1.0, 0.5, 100.0),
            (-4.0, -9.0, 1.0, 1.5, 100.0),
            (2.0, 0.5, 3.0, 0.5, 800.0),
        ] {
            let (l, h) = spread.apply(mid, lo, hi, di, dist, bounds);
            let (s_lo, s_hi) = spread.factors(mid, lo, hi, di, dist);
            assert!((mid - s_lo * (mid - lo) - l).abs() < 1e-12, "{di} {dist}");
            assert!((mid + s_hi * (hi - mid) - h).abs() < 1e-12, "{di} {dist}");
        }
        // a side of zero width cannot be scaled
        assert_eq!(spread.factors(0.0, 0.0, 1.0, 1.5, 100.0).0, 1.0);
    }
}
