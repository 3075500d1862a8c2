//! Folds that hold out whole wells.
//!
//! Rows of one well (its steps) share the well's rock, completion and seismic footprint, so a
//! random row split lets a model see a held-out row's twin and overstates skill. Every method here
//! keeps all rows of a well in one fold (grouped k-fold, as scikit-learn's `GroupKFold`):
//!
//! - [`FoldMethod::Wells`]: wells dealt in a seeded random order to `k` folds, round robin.
//! - [`FoldMethod::Blocks`]: spatial blocks; wells clustered by location with k-means (Lloyd 1982)
//!   started by k-means++ seeding (Arthur & Vassilvitskii 2007), one fold per cluster, so that
//!   neighbouring wells are held out together (Roberts et al. 2017, Ecography 40:913, on blocking
//!   for structured data).
//! - [`FoldMethod::OneWell`]: leave one well out.
//!
//! The same fold vector drives every out-of-fold quantity of a target.

use rand::seq::SliceRandom;
use rand::{RngExt, SeedableRng, rngs::StdRng};
use serde::{Deserialize, Serialize};

/// How rows are split into folds. Every method keeps all rows of one well in one fold.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FoldMethod {
    /// k folds of whole wells, wells dealt to folds in a seeded random order (default).
    #[default]
    Wells,
    /// k spatial blocks: wells clustered by location (k-means with a seeded k-means++ start).
    Blocks,
    /// Leave one well out: one fold per well (small projects).
    OneWell,
}

/// Which fold holds each row out.
#[derive(Clone, Debug, PartialEq)]
pub struct Folds {
    /// Fold of every row, `0..count`; all rows of a well share one.
    pub of_row: Vec<usize>,
    /// Number of folds.
    pub count: usize,
}

impl Folds {
    /// Rows outside fold `f` (the rows its models and maps are fitted on), in increasing order.
    pub fn train(&self, f: usize) -> Vec<usize> {
        (0..self.of_row.len())
            .filter(|&i| self.of_row[i] != f)
            .collect()
    }

    /// Rows of fold `f` (held out by its models and maps), in increasing order.
    pub fn test(&self, f: usize) -> Vec<usize> {
        (0..self.of_row.len())
            .filter(|&i| self.of_row[i] == f)
            .collect()
    }
}

/// Assign a fold to every row; all rows of one well get the same fold.
///
/// * `group`: well id per row.
/// * `xy`: well location per row (world coordinates); used by [`FoldMethod::Blocks`] only, where a
///   well's location is the mean of its rows' finite coordinates. Wells without any finite
///   coordinate (or rows beyond `xy`'s length) are dealt round robin like [`FoldMethod::Wells`].
/// * `k`: number of folds for `Wells` and `Blocks`, clamped to `1..=wells`; ignored by `OneWell`.
/// * `seed`: the only source of randomness.
///
/// Returns fold ids `0..n_folds` (every id in that range is used). Folds are numbered in order of
/// the smallest well id they hold for `Blocks`, in deal order for `Wells`, and in well-id order for
/// `OneWell`.
pub fn assign(
    group: &[usize],
    xy: &[[f64; 2]],
    method: FoldMethod,
    k: usize,
    seed: u64,
) -> Vec<usize> {
    let wells = distinct_sorted(group);
    let n_wells = wells.len();
    if n_wells == 0 {
        return Vec::new();
    }
    let index_of = |g: usize| wells.binary_search(&g).unwrap_or(0);
    let k = k.clamp(1, n_wells);
    let well_fold: Vec<usize> = match method {
        FoldMethod::OneWell => (0..n_wells).collect(),
        FoldMethod::Wells => deal(n_wells, k, seed),
        FoldMethod::Blocks => {
            let mut sum = vec![[0.0f64; 2]; n_wells];
            let mut count = vec![0usize; n_wells];
            for (row, &g) in group.iter().enumerate() {
                if let Some(p) = xy.get(row)
                    && p[0].is_finite()
                    && p[1].is_finite()
                {
                    let w = index_of(g);
                    sum[w][0] += p[0];
                    sum[w][1] += p[1];
                    count[w] += 1;
                }
            }
            let located: Vec<usize> = (0..n_wells).filter(|&w| count[w] > 0).collect();
            let points: Vec<[f64; 2]> = located
                .iter()
                .map(|&w| [sum[w][0] / count[w] as f64, sum[w][1] / count[w] as f64])
                .collect();
            let mut fold = vec![usize::MAX; n_wells];
            let kk = k.min(points.len().max(1));
            if !points.is_empty() {
                let labels = kmeans(&points, kk, seed);
                for (i, &w) in located.iter().enumerate() {
                    fold[w] = labels[i];
                }
            }
            let unlocated: Vec<usize> = (0..n_wells).filter(|&w| count[w] == 0).collect();
            if !unlocated.is_empty() {
                let dealt = deal(unlocated.len(), k, seed ^ 0x9e37_79b9_7f4a_7c15);
                for (i, &w) in unlocated.iter().enumerate() {
                    fold[w] = dealt[i];
                }
            }
            renumber_by_first_well(&fold)
        }
    };
    group.iter().map(|&g| well_fold[index_of(g)]).collect()
}

/// Number of folds in a fold vector (largest id + 1; 0 when empty).
pub fn n_folds(folds: &[usize]) -> usize {
    folds.iter().max().map_or(0, |m| m + 1)
}

fn distinct_sorted(group: &[usize]) -> Vec<usize> {
    let mut ids = group.to_vec();
    ids.sort_unstable();
    ids.dedup();
    ids
}

/// Shuffle `0..n` with the seed and deal round robin into `k` folds.
fn deal(n: usize, k: usize, seed: u64) -> Vec<usize> {
    let mut order: Vec<usize> = (0..n).collect();
    let mut rng = StdRng::seed_from_u64(seed);
    order.shuffle(&mut rng);
    let mut fold = vec![0; n];
    for (pos, &w) in order.iter().enumerate() {
        fold[w] = pos % k;
    }
    fold
}

/// Renumber labels so that they run `0..m` in order of the first (smallest-index) member.
fn renumber_by_first_well(labels: &[usize]) -> Vec<usize> {
    let mut map = std::collections::HashMap::new();
    labels
        .iter()
        .map(|&l| {
            let next = map.len();
            *map.entry(l).or_insert(next)
        })
        .collect()
}

fn dist2(a: [f64; 2], b: [f64; 2]) -> f64 {
    (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)
}

/// k-means (Lloyd) with k-means++ seeding; returns a label in `0..k` for each point, every label
/// used (an emptied cluster takes the point farthest from its centre).
fn kmeans(points: &[[f64; 2]], k: usize, seed: u64) -> Vec<usize> {
    let n = points.len();
    let k = k.clamp(1, n);
    let mut rng = StdRng::seed_from_u64(seed);
    // k-means++ (Arthur & Vassilvitskii 2007): first centre uniform, then proportional to D^2.
    let mut centres = vec![points[rng.random_range(0..n)]];
    let mut d2: Vec<f64> = points.iter().map(|&p| dist2(p, centres[0])).collect();
    while centres.len() < k {
        let total: f64 = d2.iter().sum();
        let pick = if total > 0.0 {
            let mut r = rng.random::<f64>() * total;
            let mut chosen = n - 1;
            for (i, &d) in d2.iter().enumerate() {
                if r < d {
                    chosen = i;
                    break;
                }
                r -= d;
            }
            chosen
        } else {
            // All remaining points coincide with centres: take any not yet chosen position.
            rng.random_range(0..n)
        };
        centres.push(points[pick]);
        for (i, &p) in points.iter().enumerate() {
            d2[i] = d2[i].min(dist2(p, points[pick]));
        }
    }
    let mut labels = vec![0usize; n];
    for _ in 0..100 {
        let mut changed = false;
        for (i, &p) in points.iter().enumerate() {
            let mut best = 0;
            let mut best_d = f64::INFINITY;
            for (c, &centre) in centres.iter().enumerate() {
                let d = dist2(p, centre);
                if d < best_d {
                    best_d = d;
                    best = c;
                }
            }
            if labels[i] != best {
                labels[i] = best;
                changed = true;
            }
        }
        // Empty clusters take the point farthest from its own centre (never the last of a cluster).
        for c in 0..k {
            if !labels.contains(&c) {
                let mut sizes = vec![0usize; k];
                for &l in &labels {
                    sizes[l] += 1;
                }
                let far = (0..n).filter(|&i| sizes[labels[i]] > 1).max_by(|&a, &b| {
                    dist2(points[a], centres[labels[a]])
                        .total_cmp(&dist2(points[b], centres[labels[b]]))
                        .then(b.cmp(&a))
                });
                if let Some(i) = far {
                    labels[i] = c;
                    changed = true;
                }
            }
        }
        let mut sum = vec![[0.0f64; 2]; k];
        let mut count = vec![0usize; k];
        for (i, &p) in points.iter().enumerate() {
            sum[labels[i]][0] += p[0];
            sum[labels[i]][1] += p[1];
            count[labels[i]] += 1;
        }
        for c in 0..k {
            if count[c] > 0 {
                centres[c] = [sum[c][0] / count[c] as f64, sum[c][1] / count[c] as f64];
            }
        }
        if !changed {
            break;
        }
    }
    labels
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wells_stay_together_and_folds_are_balanced() {
        let group: Vec<usize> = (0..40).flat_map(|w| [w * 3 + 7; 3]).collect();
        let xy = vec![[0.0, 0.0]; group.len()];
        for method in [FoldMethod::Wells, FoldMethod::Blocks, FoldMethod::OneWell] {
            let f = assign(&group, &xy, method, 5, 11);
            for r in 0..group.len() {
                for s in 0..group.len() {
                    if group[r] == group[s] {
                        assert_eq!(f[r], f[s]);
                    }
                }
            }
        }
        let f = assign(&group, &xy, FoldMethod::Wells, 5, 11);
        assert_eq!(n_folds(&f), 5);
        for k in 0..5 {
            assert_eq!(f.iter().filter(|&&x| x == k).count(), 24);
        }
        assert_eq!(n_folds(&assign(&group, &xy, FoldMethod::OneWell, 5, 1)), 40);
    }

    #[test]
    fn blocks_separate_distant_clusters() {
        // Three tight clusters of wells far apart: each block must be one cluster.
        let centres = [[0.0, 0.0], [10_000.0, 0.0], [0.0, 10_000.0]];
        let mut group = Vec::new();
        let mut xy = Vec::new();
        for w in 0..30 {
            let c = centres[w % 3];
            for _ in 0..2 {
                group.push(w);
                xy.push([c[0] + (w as f64) * 3.0, c[1] - (w as f64) * 2.0]);
            }
        }
        let f = assign(&group, &xy, FoldMethod::Blocks, 3, 5);
        assert_eq!(n_folds(&f), 3);
        for r in 0..group.len() {
            for s in 0..group.len() {
                assert_eq!(f[r] == f[s], group[r] % 3 == group[s] % 3);
            }
        }
    }

    #[test]
    fn same_seed_same_folds() {
        let group: Vec<usize> = (0..50).collect();
        let xy: Vec<[f64; 2]> = (0..50)
            .map(|i| [(i * 37 % 11) as f64, (i * 13 % 7) as f64])
            .collect();
        for method in [FoldMethod::Wells, FoldMethod::Blocks] {
            assert_eq!(
                assign(&group, &xy, method, 4, 3),
                assign(&group, &xy, method, 4, 3)
            );
        }
        assert_ne!(
            assign(&group, &xy, FoldMethod::Wells, 4, 3),
            assign(&group, &xy, FoldMethod::Wells, 4, 4)
        );
    }
}
