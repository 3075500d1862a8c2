//! Weighted quantiles: exact equivalence with repeated lists, monotonicity in the level.

use proptest::prelude::*;
use tidemark::ensemble::{weighted_quantile, weighted_quantiles};

/// Type-1 sample quantile (Hyndman & Fan 1996, definition 1: the inverse of the empirical
/// CDF) of a sorted list at the rational level `a / b`, by exact integer arithmetic: the
/// `k`-th smallest value with `k` the smallest integer >= 1 such that `k / len >= a / b`.
fn type1_quantile(sorted: &[f64], a: usize, b: usize) -> f64 {
    let len = sorted.len();
    let k = (1..=len).find(|&k| k * b >= a * len).unwrap_or(len);
    sorted[k - 1]
}

proptest! {
    // quantile-forest (zillow) test pattern: a weighted quantile with whole-number weights equals
    // the plain quantile of the list with each value repeated by its weight.
    #[test]
    fn whole_number_weights_equal_repeated_list(
        pairs in prop::collection::vec((-20i32..20, 0u32..5), 1..40),
        b in 1usize..50,
        a_frac in 0.0f64..=1.0,
    ) {
        prop_assume!(pairs.iter().any(|(_, w)| *w > 0));
        let a = ((a_frac * b as f64).round() as usize).min(b);
        let values: Vec<f64> = pairs.iter().map(|(v, _)| *v as f64 * 0.5).collect();
        let weights: Vec<f64> = pairs.iter().map(|(_, w)| *w as f64).collect();
        let mut repeated: Vec<f64> = Vec::new();
        for (v, w) in values.iter().zip(&weights) {
            for _ in 0..(*w as usize) {
                repeated.push(*v);
            }
        }
        repeated.sort_by(f64::total_cmp);
        let q = a as f64 / b as f64;
        let got = weighted_quantile(&values, &weights, q);
        prop_assert_eq!(got, type1_quantile(&repeated, a, b), "level {}/{}", a, b);
        // unit weights on the repeated list agree too
        let ones = vec![1.0; repeated.len()];
        prop_assert_eq!(weighted_quantile(&repeated, &ones, q), got);
    }

    // quantile-forest test pattern: quantiles are non-decreasing in the level.
    #[test]
    fn quantiles_non_decreasing_in_level(
        pairs in prop::collection::vec((-1e3f64..1e3, 0.0f64..3.0), 1..60),
        mut levels in prop::collection::vec(0.0f64..=1.0, 1..12),
    ) {
        prop_assume!(pairs.iter().any(|(_, w)| *w > 0.0));
        levels.sort_by(f64::total_cmp);
        let values: Vec<f64> = pairs.iter().map(|p| p.0).collect();
        let weights: Vec<f64> = pairs.iter().map(|p| p.1).collect();
        let q = weighted_quantiles(&values, &weights, &levels);
        for w in q.windows(2) {
            prop_assert!(w[0] <= w[1], "{:?} at levels {:?}", q, levels);
        }
        // one pass equals one call per level
        for (l, v) in levels.iter().zip(&q) {
            prop_assert_eq!(*v, weighted_quantile(&values, &weights, *l));
        }
        // quantiles are values that carry weight; Q(0) is the smallest such, Q(1) the largest
        let carried: Vec<f64> = pairs.iter().filter(|p| p.1 > 0.0).map(|p| p.0).collect();
        let lo = carried.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = carried.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        prop_assert_eq!(weighted_quantile(&values, &weights, 0.0), lo);
        prop_assert_eq!(weighted_quantile(&values, &weights, 1.0), hi);
        prop_assert!(q.iter().all(|v| carried.contains(v)));
    }
}

#[test]
fn median_of_worked_example() {
    // values 1..=4 with weights 1,1,1,1: F(2) = 0.5, so the type-1 median is 2
    // (Hyndman & Fan 1996, definition 1).
    assert_eq!(
        weighted_quantile(&[4.0, 3.0, 2.0, 1.0], &[1.0; 4], 0.5),
        2.0
    );
    // weight 3 on the value 4 moves the median there: F(3) = 3/6 = 0.5 still gives 3
    assert_eq!(
        weighted_quantile(&[4.0, 3.0, 2.0, 1.0], &[3.0, 1.0, 1.0, 1.0], 0.5),
        3.0
    );
    assert_eq!(
        weighted_quantile(&[4.0, 3.0, 2.0, 1.0], &[3.0, 1.0, 1.0, 1.0], 0.51),
        4.0
    );
}
