//! Calibration rows as exchangeable units.
//!
//! Rows of one well (its steps) are not exchangeable with each other; wells are. Every
//! out-of-fold quantity therefore weighs each row `1/(rows of its well)`, so that each well counts
//! once: the "pooled CDF" construction for two-layer hierarchical data (Dunn, Wasserman & Ramdas,
//! "Distribution-free prediction sets for two-layer hierarchical models", JASA 2023). Under a
//! covariate shift each row's weight is further multiplied by the ratio of the nodes' to the wells'
//! attribute density (Tibshirani, Barber, Candes & Ramdas 2019, "Conformal prediction under
//! covariate shift", NeurIPS), and Kish's effective sample size (Kish 1965, "Survey Sampling",
//! sec. 11.7) says how many wells the weights leave.
//!
//! [`Units`] carries the well of each row, the row weights and the new point's weight to the
//! conformal band ([`super::conformal`]), the Mondrian bins and the predictive system
//! ([`super::exceedance`]).

/// The calibration rows as exchangeable units: the well of each row, each row's weight and the
/// weight of the new point's mass at `+inf`.
///
/// Without a covariate shift ([`Units::wells`]) every well weighs one, shared among its rows, and
/// the new point weighs one well. Under a covariate shift ([`Units::shifted`]; Tibshirani et al.
/// 2019, see [`super::shift`]) row `i` weighs `u_i r_i` and the new point `r_new`, where `r` is the
/// ratio of the nodes' to the wells' attribute density; the weights are scaled so that they sum
/// to the number of wells, which leaves every weighted quantile unchanged.
#[derive(Clone, Debug, PartialEq)]
pub struct Units {
    /// Well id per row.
    pub group: Vec<usize>,
    /// Weight per row, finite and `>= 0`.
    pub weight: Vec<f64>,
    /// Weight of the new point.
    pub test_weight: f64,
}

impl Units {
    /// Wells as units: row weight `1/(rows of its well)`, new point one well.
    pub fn wells(group: &[usize]) -> Self {
        Self {
            group: group.to_vec(),
            weight: well_unit_weights(group),
            test_weight: 1.0,
        }
    }

    /// Wells weighted by their rows' covariate-shift ratios `ratio` (one per row), the new
    /// point by `test_ratio`. Ratios that are not finite and positive count as one.
    pub fn shifted(group: &[usize], ratio: &[f64], test_ratio: f64) -> Self {
        let ok = |r: f64| if r.is_finite() && r > 0.0 { r } else { 1.0 };
        let unit = well_unit_weights(group);
        let raw: Vec<f64> = unit.iter().zip(ratio).map(|(u, &r)| u * ok(r)).collect();
        let total: f64 = raw.iter().sum();
        let scale = if total > 0.0 {
            unit.iter().sum::<f64>() / total
        } else {
            1.0
        };
        Self {
            group: group.to_vec(),
            weight: raw.iter().map(|v| v * scale).collect(),
            test_weight: ok(test_ratio) * scale,
        }
    }

    /// The units of rows `idx` (weights kept as they are: a common scale does not move a
    /// weighted quantile).
    pub fn pick(&self, idx: &[usize]) -> Self {
        Self {
            group: pick(&self.group, idx),
            weight: pick(&self.weight, idx),
            test_weight: self.test_weight,
        }
    }

    /// Kish's effective number of wells `(sum W_g)^2 / sum W_g^2` over the wells' total weights
    /// `W_g` (equals the number of wells without a shift).
    pub fn effective_wells(&self) -> f64 {
        let mut per: std::collections::BTreeMap<usize, f64> = Default::default();
        for (g, w) in self.group.iter().zip(&self.weight) {
            *per.entry(*g).or_insert(0.0) += w;
        }
        let v: Vec<f64> = per.into_values().collect();
        effective_size(&v)
    }
}

/// Number of distinct well ids in `group`.
pub fn count_wells(group: &[usize]) -> usize {
    let mut ids = group.to_vec();
    ids.sort_unstable();
    ids.dedup();
    ids.len()
}

/// Per-row weights that give every well a total weight of one: `1 / (rows of that well)`.
///
/// Wells, not rows, are the exchangeable units of held-out validation; pooling each well's
/// empirical distribution of scores with equal weight is the "pooled CDF" construction for
/// two-layer hierarchical data (Dunn, Wasserman & Ramdas, "Distribution-free prediction sets for
/// two-layer hierarchical models", JASA 2023).
pub fn well_unit_weights(group: &[usize]) -> Vec<f64> {
    let mut counts = std::collections::HashMap::<usize, usize>::new();
    for &g in group {
        *counts.entry(g).or_insert(0) += 1;
    }
    group.iter().map(|g| 1.0 / counts[g] as f64).collect()
}

/// Kish's effective sample size `(sum v)^2 / sum v^2` of weights `v` (Kish 1965, sec. 11.7).
pub fn effective_size(v: &[f64]) -> f64 {
    let s: f64 = v.iter().sum();
    let s2: f64 = v.iter().map(|x| x * x).sum();
    if s2 > 0.0 { s * s / s2 } else { 0.0 }
}

/// Elements of `v` at `idx`.
pub(crate) fn pick<T: Copy>(v: &[T], idx: &[usize]) -> Vec<T> {
    idx.iter().map(|&i| v[i]).collect()
}
