//! Bagged regression forests that remember which training rows fall in each leaf.
//!
//! A forest (Breiman 2001, "Random forests", Machine Learning 45:5-32) averages regression
//! trees grown on bootstrap samples (or subsamples) of the training rows, trying a random
//! subset of the features at every split. Besides the mean it keeps, for every tree, the
//! training rows in each leaf with their in-bag counts. That gives:
//! - out-of-bag (OOB) predictions, from the trees that did not train on a row (Breiman 1996,
//!   "Out-of-bag estimation");
//! - per-tree predictions;
//! - the quantile regression forest (Meinshausen 2006, JMLR 7:983-999): conditional quantiles
//!   and the conditional CDF `P(Y <= t | x)` from the leaf-weighted training targets (see
//!   [`super::quantile`] for the definition of the weighted quantile);
//! - impurity importance (mean decrease in weighted variance, normalised per tree as in
//!   scikit-learn) and permutation importance (Breiman 2001, section 10).
//!
//! Multi-output forests standardise each output (weighted mean 0, standard deviation 1) and
//! choose splits by the summed variance reduction, so that, e.g., dP, dSw and dSg share one
//! forest; leaf values and quantiles are reported in the original units.
//!
//! Parallelism: trees are grown in parallel (rayon) with per-tree seeds derived from the seed
//! and the tree index; predictions run in parallel over chunks of rows, each row's result
//! summed over trees in tree order. Results do not depend on the thread count or row order.

use ndarray::{Array2, ArrayView2};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::binning::BinMapper;
use super::persist::{self, FOREST_FORMAT, FOREST_VERSION, exact_vec};
use super::quantile::QrfKernel;
use super::tree::{Binned, GrowJob, GrowParams, Tree, grow};
use super::{
    EnsembleError, PREDICT_CHUNK, check_training_x, check_weights, copy_rows, copy_rows_wide,
    derive_seed, invalid,
};

const STREAM_TREE: u64 = 1;
const STREAM_PERMUTE: u64 = 2;

/// Settings of a bagged regression forest (checked by [`ForestSettings::check`] before fitting).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ForestSettings {
    /// Number of trees, at least 1. Default 300.
    pub n_trees: usize,
    /// Maximum depth of a tree (splits from root to leaf), at least 1; `None` grows until
    /// leaves are pure or too small. Default `None`.
    pub max_depth: Option<usize>,
    /// Minimum number of distinct training rows in a leaf, at least 1. Default 3.
    pub min_samples_leaf: usize,
    /// Fraction of the features tried at each split, in (0, 1]; the count is
    /// `round(max_features * n_features)`, at least 1. Default 0.5.
    pub max_features: f64,
    /// Draw each tree's rows with replacement (bootstrap) when true, without replacement
    /// (subsampling) when false. Default true.
    pub bootstrap: bool,
    /// Rows drawn per tree as a fraction of the training rows, in (0, 1]. Default 1.0
    /// (with `bootstrap = false` every tree then sees every row and there is no OOB).
    pub sample_fraction: f64,
    /// Maximum number of quantile bins per feature, 2..=255. Default 255.
    pub max_bins: usize,
    /// Seed of every random choice (row draws, features tried). Default 0.
    pub seed: u64,
}

impl Default for ForestSettings {
    fn default() -> Self {
        ForestSettings {
            n_trees: 300,
            max_depth: None,
            min_samples_leaf: 3,
            max_features: 0.5,
            bootstrap: true,
            sample_fraction: 1.0,
            max_bins: 255,
            seed: 0,
        }
    }
}

impl ForestSettings {
    /// Checks every setting's range.
    pub fn check(&self) -> Result<(), EnsembleError> {
        if self.n_trees == 0 {
            return Err(invalid("n_trees", "must be at least 1", self.n_trees));
        }
        if self.max_depth == Some(0) {
            return Err(invalid("max_depth", "must be at least 1 (or None)", 0));
        }
        if self.min_samples_leaf == 0 {
            return Err(invalid("min_samples_leaf", "must be at least 1", 0));
        }
        if !(self.max_features > 0.0 && self.max_features <= 1.0) {
            return Err(invalid(
                "max_features",
                "must be in (0, 1]",
                self.max_features,
            ));
        }
        if !(self.sample_fraction > 0.0 && self.sample_fraction <= 1.0) {
            return Err(invalid(
                "sample_fraction",
                "must be in (0, 1]",
                self.sample_fraction,
            ));
        }
        if !(2..=255).contains(&self.max_bins) {
            return Err(invalid(
                "max_bins",
                "must be between 2 and 255",
                self.max_bins,
            ));
        }
        Ok(())
    }

    /// Fits a forest to `x` (rows x features, NaN = missing) and `y` (rows x outputs, finite),
    /// with optional non-negative sample `weights`.
    pub fn fit(
        &self,
        x: ArrayView2<f64>,
        y: ArrayView2<f64>,
        weights: Option<&[f64]>,
    ) -> Result<Forest, EnsembleError> {
        self.check()?;
        check_training_x(x)?;
        let (n, p) = x.dim();
        if y.nrows() != n {
            return Err(EnsembleError::ShapeMismatch {
                what: "y rows".into(),
                expected: n,
                got: y.nrows(),
            });
        }
        let k = y.ncols();
        if k == 0 {
            return Err(EnsembleError::EmptyData("y has no output columns".into()));
        }
        for ((row, output), &value) in y.indexed_iter() {
            if !value.is_finite() {
                return Err(EnsembleError::NonFiniteTarget { row, output, value });
            }
        }
        let w = check_weights(weights, n)?;

        // standardise outputs with the sample weights
        let w_sum: f64 = w.iter().sum();
        let mut y_mean = vec![0.0; k];
        let mut y_scale = vec![1.0; k];
        for j in 0..k {
            let col = y.column(j);
            let mean = col.iter().zip(&w).map(|(v, w)| v * w).sum::<f64>() / w_sum;
            let var = col
                .iter()
                .zip(&w)
                .map(|(v, w)| w * (v - mean) * (v - mean))
                .sum::<f64>()
                / w_sum;
            y_mean[j] = mean;
            let sd = var.sqrt();
            y_scale[j] = if sd > 1e-300 && sd.is_finite() {
                sd
            } else {
                1.0
            };
        }
        let y_train: Vec<f64> = y.rows().into_iter().flat_map(|r| r.to_vec()).collect();
        let z: Vec<f64> = (0..n * k)
            .map(|i| (y_train[i] - y_mean[i % k]) / y_scale[i % k])
            .collect();
        let mut x_train = Vec::with_capacity(n * p);
        copy_rows(&x, 0, n, &mut x_train);

        let mapper = BinMapper::fit(x, self.max_bins);
        let codes = mapper.transform(x);
        let draws = ((self.sample_fraction * n as f64).round() as usize).clamp(1, n);
        let data = Binned::new(&codes, n, &mapper);
        let params = GrowParams {
            max_depth: self.max_depth.unwrap_or(usize::MAX),
            min_samples_leaf: self.min_samples_leaf,
            n_try: ((self.max_features * p as f64).round() as usize).clamp(1, p),
        };

        let fits: Vec<TreeFit> = (0..self.n_trees)
            .into_par_iter()
            .map(|t| self.fit_tree(t, &data, &z, &y_train, k, &w, &params, draws))
            .collect();

        // OOB means and importance, reduced in tree order
        let mut oob_sum = vec![0.0; n * k];
        let mut oob_n = vec![0usize; n];
        let mut importance = vec![0.0; p];
        for f in &fits {
            for &(row, leaf) in &f.oob {
                let (row, leaf) = (row as usize, leaf as usize);
                for j in 0..k {
                    oob_sum[row * k + j] += f.tree.leaf_value(leaf, j);
                }
                oob_n[row] += 1;
            }
            let tot: f64 = f.gains.iter().sum();
            if tot > 0.0 {
                for (imp, g) in importance.iter_mut().zip(&f.gains) {
                    *imp += g / tot;
                }
            }
        }
        let oob: Vec<f64> = (0..n * k)
            .map(|i| {
                let c = oob_n[i / k];
                if c == 0 {
                    f64::NAN
                } else {
                    oob_sum[i] / c as f64
                }
            })
            .collect();
        let tot: f64 = importance.iter().sum();
        if tot > 0.0 {
            importance.iter_mut().for_each(|v| *v /= tot);
        }
        let (trees, members) = fits.into_iter().map(|f| (f.tree, f.members)).unzip();
        Ok(Forest {
            settings: self.clone(),
            n_features: p,
            n_outputs: k,
            n_train: n,
            trees,
            members,
            x_train,
            y_train,
            train_weights: w,
            y_mean,
            y_scale,
            oob,
            impurity: importance,
        })
    }

    #[allow(clippy::too_many_arguments)]
    fn fit_tree(
        &self,
        t: usize,
        data: &Binned<'_>,
        z: &[f64],
        y: &[f64],
        k: usize,
        w: &[f64],
        params: &GrowParams,
        draws: usize,
    ) -> TreeFit {
        let n = data.n;
        let mut rng = StdRng::seed_from_u64(derive_seed(self.seed, STREAM_TREE, t as u64));
        let mut counts = vec![0u32; n];
        if self.bootstrap {
            for _ in 0..draws {
                counts[rng.random_range(0..n)] += 1;
            }
        } else if draws == n {
            counts.fill(1);
        } else {
            let mut idx: Vec<u32> = (0..n as u32).collect();
            for i in 0..draws {
                let j = rng.random_range(i..n);
                idx.swap(i, j);
                counts[idx[i] as usize] = 1;
            }
        }
        let mut rows: Vec<u32> = Vec::with_capacity(n);
        rows.extend((0..n as u32).filter(|&r| counts[r as usize] > 0 && w[r as usize] > 0.0));
        if rows.is_empty() {
            // every drawn row has zero weight: fall back to all weighted rows once each
            for r in 0..n {
                counts[r] = u32::from(w[r] > 0.0);
            }
            rows = (0..n as u32).filter(|&r| w[r as usize] > 0.0).collect();
        }
        let rw: Vec<f64> = (0..n).map(|r| w[r] * counts[r] as f64).collect();
        let mut in_tree = vec![false; n];
        for &r in &rows {
            in_tree[r as usize] = true;
        }
        // out-of-bag rows are routed to their leaves while the tree grows
        let mut oob_rows: Vec<u32> = Vec::with_capacity(n - rows.len());
        oob_rows.extend((0..n as u32).filter(|&r| !in_tree[r as usize]));
        let grown = grow(
            GrowJob {
                data,
                targets: z,
                k,
                weight: &rw,
                rows,
                routed: oob_rows,
                params,
            },
            &mut rng,
        );
        let n_leaves = grown.leaf_ranges.len();

        let mut values = vec![0.0; n_leaves * k];
        let mut offsets = Vec::with_capacity(n_leaves + 1);
        let mut m_rows = Vec::with_capacity(grown.rows.len());
        let mut m_counts = Vec::with_capacity(grown.rows.len());
        offsets.push(0u32);
        for (leaf, &(a, b)) in grown.leaf_ranges.iter().enumerate() {
            let mut wsum = 0.0;
            for &r in &grown.rows[a..b] {
                let r = r as usize;
                wsum += rw[r];
                for j in 0..k {
                    values[leaf * k + j] += rw[r] * y[r * k + j];
                }
                m_rows.push(r as u32);
                m_counts.push(counts[r]);
            }
            for j in 0..k {
                values[leaf * k + j] /= wsum;
            }
            offsets.push(m_rows.len() as u32);
        }
        let mut tree = grown.tree;
        tree.set_values(k, values);
        TreeFit {
            tree,
            members: LeafMembers {
                offsets,
                rows: m_rows,
                counts: m_counts,
            },
            gains: grown.gains,
            oob: grown.routed,
        }
    }
}

/// One grown tree with its leaf membership and OOB leaves.
struct TreeFit {
    tree: Tree,
    members: LeafMembers,
    gains: Vec<f64>,
    oob: Vec<(u32, u32)>,
}

/// Training rows in each leaf of one tree (compressed sparse rows): leaf `l` holds
/// `rows[offsets[l]..offsets[l+1]]` with in-bag counts `counts[..]` at the same positions.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct LeafMembers {
    offsets: Vec<u32>,
    rows: Vec<u32>,
    counts: Vec<u32>,
}

impl LeafMembers {
    /// Training rows and their in-bag counts in leaf `leaf`.
    pub fn leaf(&self, leaf: usize) -> (&[u32], &[u32]) {
        let (a, b) = (self.offsets[leaf] as usize, self.offsets[leaf + 1] as usize);
        (&self.rows[a..b], &self.counts[a..b])
    }

    /// Number of leaves.
    pub fn n_leaves(&self) -> usize {
        self.offsets.len().saturating_sub(1)
    }
}

/// A fitted bagged regression forest that knows its leaves (see the module docs).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Forest {
    settings: ForestSettings,
    n_features: usize,
    n_outputs: usize,
    n_train: usize,
    trees: Vec<Tree>,
    members: Vec<LeafMembers>,
    /// Training features, row-major (kept for OOB distributions).
    #[serde(with = "exact_vec")]
    x_train: Vec<f64>,
    /// Training targets in original units, row-major `n_train x n_outputs`.
    #[serde(with = "exact_vec")]
    y_train: Vec<f64>,
    #[serde(with = "exact_vec")]
    train_weights: Vec<f64>,
    #[serde(with = "exact_vec")]
    y_mean: Vec<f64>,
    #[serde(with = "exact_vec")]
    y_scale: Vec<f64>,
    /// OOB mean predictions, row-major, NaN where a row was in every bag.
    #[serde(with = "exact_vec")]
    oob: Vec<f64>,
    #[serde(with = "exact_vec")]
    impurity: Vec<f64>,
}

/// Reusable per-task buffers for prediction.
/// "No per-row hook" for [`Forest::distribution_pass`].
const NO_HOOK: Option<&fn(&[f64])> = None;

struct Scratch {
    rows: Vec<f64>,
    leaves: Vec<u32>,
    acc: Vec<f64>,
}

impl Forest {
    /// Number of outputs (target columns).
    pub fn n_outputs(&self) -> usize {
        self.n_outputs
    }

    /// Number of features the forest was trained on.
    pub fn n_features(&self) -> usize {
        self.n_features
    }

    /// Number of trees.
    pub fn n_trees(&self) -> usize {
        self.trees.len()
    }

    /// Number of training rows.
    pub fn n_train(&self) -> usize {
        self.n_train
    }

    /// The settings the forest was fitted with.
    pub fn settings(&self) -> &ForestSettings {
        &self.settings
    }

    /// The fitted trees.
    pub fn trees(&self) -> &[Tree] {
        &self.trees
    }

    /// Leaf membership of tree `t`.
    pub fn leaf_members(&self, t: usize) -> &LeafMembers {
        &self.members[t]
    }

    /// Weighted mean and standard deviation used to standardise each output.
    pub fn output_scaling(&self) -> (&[f64], &[f64]) {
        (&self.y_mean, &self.y_scale)
    }

    /// Checks that `x` has the forest's number of feature columns.
    pub fn check_x(&self, x: ArrayView2<f64>) -> Result<(), EnsembleError> {
        if x.ncols() != self.n_features {
            return Err(EnsembleError::ShapeMismatch {
                what: "x columns".into(),
                expected: self.n_features,
                got: x.ncols(),
            });
        }
        Ok(())
    }

    fn assert_x(&self, x: &ArrayView2<f64>) {
        assert!(
            x.ncols() == self.n_features,
            "forest expects {} feature columns, got {}",
            self.n_features,
            x.ncols()
        );
    }

    pub(crate) fn assert_output(&self, output: usize) {
        assert!(
            output < self.n_outputs,
            "output {output} out of range (forest has {} outputs)",
            self.n_outputs
        );
    }

    /// Runs `f(start, m, leaves, acc, out)` on every chunk of rows in parallel (rows
    /// `start..start + m`, leaf ids of every tree at `leaves[t * m + r]`, scratch `acc` of
    /// length `acc_len`), and concatenates the outputs in row order.
    pub(crate) fn map_chunks<T, F>(&self, x: ArrayView2<f64>, acc_len: usize, f: F) -> Vec<T>
    where
        T: Send,
        F: Fn(usize, usize, &[u32], &mut [f64], &mut Vec<T>) + Sync,
    {
        let n = x.nrows();
        let p = self.n_features;
        let n_chunks = n.div_ceil(PREDICT_CHUNK);
        let parts: Vec<Vec<T>> = (0..n_chunks)
            .into_par_iter()
            .map_init(
                || Scratch {
                    rows: Vec::new(),
                    leaves: Vec::new(),
                    acc: vec![0.0; acc_len],
                },
                |s, c| {
                    let start = c * PREDICT_CHUNK;
                    let end = (start + PREDICT_CHUNK).min(n);
                    let m = end - start;
                    copy_rows_wide(&x, start, end, &mut s.rows);
                    s.leaves.resize(self.trees.len() * m, 0);
                    for (t, tree) in self.trees.iter().enumerate() {
                        tree.apply_rows(&s.rows, p, &mut s.leaves[t * m..(t + 1) * m]);
                    }
                    let mut out = Vec::new();
                    f(start, m, &s.leaves, &mut s.acc, &mut out);
                    out
                },
            )
            .collect();
        parts.into_iter().flatten().collect()
    }

    /// Mean prediction, rows x outputs, in original units.
    ///
    /// # Panics
    /// If `x` does not have [`Forest::n_features`] columns (see [`Forest::check_x`]).
    pub fn predict(&self, x: ArrayView2<f64>) -> Array2<f64> {
        self.assert_x(&x);
        let k = self.n_outputs;
        let n_t = self.trees.len();
        let inv = 1.0 / n_t as f64;
        let flat = self.map_chunks(x, 0, |_, m, leaves, _, out| {
            out.resize(m * k, 0.0);
            for (t, tree) in self.trees.iter().enumerate() {
                for r in 0..m {
                    let v = tree.leaf_values(leaves[t * m + r] as usize);
                    for j in 0..k {
                        out[r * k + j] += v[j];
                    }
                }
            }
            out.iter_mut().for_each(|v| *v *= inv);
        });
        Array2::from_shape_vec((x.nrows(), k), flat).expect("shape")
    }

    /// Leaf id of every row in every tree, rows x trees.
    pub fn apply(&self, x: ArrayView2<f64>) -> Array2<u32> {
        self.assert_x(&x);
        let n_t = self.trees.len();
        let flat = self.map_chunks(x, 0, |_, m, leaves, _, out| {
            out.resize(m * n_t, 0);
            for t in 0..n_t {
                for r in 0..m {
                    out[r * n_t + t] = leaves[t * m + r];
                }
            }
        });
        Array2::from_shape_vec((x.nrows(), n_t), flat).expect("shape")
    }

    /// Prediction of every tree for output `output`, rows x trees, in original units.
    ///
    /// # Panics
    /// If `x` has the wrong number of columns or `output` is out of range.
    pub fn per_tree_predictions(&self, x: ArrayView2<f64>, output: usize) -> Array2<f64> {
        self.assert_x(&x);
        self.assert_output(output);
        let n_t = self.trees.len();
        let flat = self.map_chunks(x, 0, |_, m, leaves, _, out| {
            out.resize(m * n_t, 0.0);
            for (t, tree) in self.trees.iter().enumerate() {
                for r in 0..m {
                    out[r * n_t + t] = tree.leaf_value(leaves[t * m + r] as usize, output);
                }
            }
        });
        Array2::from_shape_vec((x.nrows(), n_t), flat).expect("shape")
    }

    /// Builds the quantile-forest kernel of one output.
    pub(crate) fn qrf_kernel(&self, output: usize) -> QrfKernel {
        let n = self.n_train;
        let k = self.n_outputs;
        let mut order: Vec<u32> = (0..n as u32).collect();
        order.sort_by(|&a, &b| {
            self.y_train[a as usize * k + output].total_cmp(&self.y_train[b as usize * k + output])
        });
        let mut rank = vec![0u32; n];
        for (pos, &r) in order.iter().enumerate() {
            rank[r as usize] = pos as u32;
        }
        let y_sorted = order
            .iter()
            .map(|&r| self.y_train[r as usize * k + output])
            .collect();
        let n_t = self.trees.len() as f64;
        let mut tree_leaf_offset = Vec::with_capacity(self.trees.len());
        let mut leaf_ptr = vec![0u32];
        let mut pos = Vec::new();
        let mut weight = Vec::new();
        let mut g = 0;
        for mem in &self.members {
            tree_leaf_offset.push(g);
            for l in 0..mem.n_leaves() {
                let (rows, counts) = mem.leaf(l);
                let start = weight.len();
                let mut tot = 0.0;
                for (&r, &c) in rows.iter().zip(counts) {
                    let w = self.train_weights[r as usize] * c as f64;
                    tot += w;
                    pos.push(rank[r as usize]);
                    weight.push(w);
                }
                let scale = if tot > 0.0 { 1.0 / (tot * n_t) } else { 0.0 };
                weight[start..].iter_mut().for_each(|w| *w *= scale);
                leaf_ptr.push(weight.len() as u32);
            }
            g += mem.n_leaves();
        }
        QrfKernel {
            y_sorted,
            tree_leaf_offset,
            leaf_ptr,
            pos,
            weight,
        }
    }

    /// Quantile regression forest (Meinshausen 2006) for output `output`: conditional
    /// quantiles at `levels` (rows x levels) and `P(Y <= t | x)` at `thresholds`
    /// (rows x thresholds), in one pass over the trees per row. Levels need not be sorted;
    /// quantiles are non-decreasing in the level. A NaN threshold gives NaN.
    ///
    /// # Panics
    /// If `x` has the wrong number of columns, `output` is out of range or a level is outside
    /// [0, 1].
    pub fn predict_distribution(
        &self,
        x: ArrayView2<f64>,
        output: usize,
        levels: &[f64],
        thresholds: &[f64],
    ) -> (Array2<f64>, Array2<f64>) {
        let (_, q, c, _) = self.distribution_pass(x, output, levels, thresholds, false, NO_HOOK);
        (q, c)
    }

    /// The mean prediction of output `output` together with [`Forest::predict_distribution`],
    /// from one walk of the trees per row: `(mean, quantiles, cdf)`. The mean equals column
    /// `output` of [`Forest::predict`] bit for bit (leaf values summed in tree order).
    ///
    /// # Panics
    /// As [`Forest::predict_distribution`].
    pub fn predict_with_distribution(
        &self,
        x: ArrayView2<f64>,
        output: usize,
        levels: &[f64],
        thresholds: &[f64],
    ) -> (Vec<f64>, Array2<f64>, Array2<f64>) {
        let (m, q, c, _) = self.distribution_pass(x, output, levels, thresholds, true, NO_HOOK);
        (m, q, c)
    }

    /// Shared body of the distribution predictions: per row, the mean of `output` (when
    /// `with_mean`; else the returned mean is empty), the quantiles at `levels`, the CDF at
    /// `thresholds` and, when `hook` is given, `hook(acc)` where `acc` holds the row's
    /// quantile-forest weights by position in the kernel's sorted targets (before they are
    /// cumulated).
    pub(crate) fn distribution_pass<T, F>(
        &self,
        x: ArrayView2<f64>,
        output: usize,
        levels: &[f64],
        thresholds: &[f64],
        with_mean: bool,
        hook: Option<&F>,
    ) -> (Vec<f64>, Array2<f64>, Array2<f64>, Vec<T>)
    where
        T: Send,
        F: Fn(&[f64]) -> T + Sync,
    {
        self.assert_x(&x);
        self.assert_output(output);
        assert!(
            levels.iter().all(|q| (0.0..=1.0).contains(q)),
            "quantile levels must be in [0, 1], got {levels:?}"
        );
        let kernel = self.qrf_kernel(output);
        let t_pos: Vec<Option<usize>> = thresholds
            .iter()
            .map(|&t| (!t.is_nan()).then(|| kernel.threshold_position(t)))
            .collect();
        let (nl, nt) = (levels.len(), thresholds.len());
        let lead = usize::from(with_mean);
        let w = lead + nl + nt;
        let n = self.n_train;
        let inv = 1.0 / self.trees.len() as f64;
        let block = QrfKernel::block_rows(n);
        // one (records, hook results) pair per chunk of rows, in row order
        let chunks = self.map_chunks(x, block * n, |_, m, leaves, acc, out| {
            let mut flat = vec![0.0; m * w];
            let mut extra = Vec::with_capacity(if hook.is_some() { m } else { 0 });
            if with_mean {
                for (t, tree) in self.trees.iter().enumerate() {
                    for r in 0..m {
                        flat[r * w] += tree.leaf_value(leaves[t * m + r] as usize, output);
                    }
                }
                for r in 0..m {
                    flat[r * w] *= inv;
                }
            }
            for r0 in (0..m).step_by(block) {
                let nb = block.min(m - r0);
                let acc = &mut acc[..nb * n];
                acc.fill(0.0);
                kernel.accumulate_block(leaves, m, r0, nb, acc);
                for (i, cum) in acc.chunks_exact_mut(n).enumerate() {
                    if let Some(h) = hook {
                        extra.push(h(cum));
                    }
                    QrfKernel::cumulate(cum);
                    let rec = &mut flat[(r0 + i) * w + lead..(r0 + i + 1) * w];
                    for (slot, &q) in rec.iter_mut().zip(levels) {
                        *slot = kernel.quantile(cum, q);
                    }
                    for (slot, tp) in rec[nl..].iter_mut().zip(&t_pos) {
                        *slot = tp.map_or(f64::NAN, |p| QrfKernel::cdf(cum, p));
                    }
                }
            }
            out.push((flat, extra));
        });
        let rows = x.nrows();
        let mut flat = Vec::with_capacity(rows * w);
        let mut extra = Vec::new();
        for (f, e) in chunks {
            flat.extend(f);
            extra.extend(e);
        }
        let mean = if with_mean {
            (0..rows).map(|r| flat[r * w]).collect()
        } else {
            Vec::new()
        };
        let q = Array2::from_shape_fn((rows, nl), |(r, l)| flat[r * w + lead + l]);
        let c = Array2::from_shape_fn((rows, nt), |(r, t)| flat[r * w + lead + nl + t]);
        (mean, q, c, extra)
    }

    /// `P(Y <= t_i | x_i)` for output `output`, one threshold per row (NaN threshold: NaN).
    ///
    /// # Panics
    /// If `x` has the wrong number of columns, `output` is out of range or `t.len()` differs
    /// from the number of rows.
    pub fn cdf_at(&self, x: ArrayView2<f64>, output: usize, t: &[f64]) -> Vec<f64> {
        self.assert_x(&x);
        self.assert_output(output);
        assert_eq!(t.len(), x.nrows(), "one threshold per row is needed");
        let kernel = self.qrf_kernel(output);
        let n = self.n_train;
        let block = QrfKernel::block_rows(n);
        self.map_chunks(x, block * n, |start, m, leaves, acc, out| {
            out.reserve(m);
            for r0 in (0..m).step_by(block) {
                let nb = block.min(m - r0);
                let acc = &mut acc[..nb * n];
                acc.fill(0.0);
                kernel.accumulate_block(leaves, m, r0, nb, acc);
                for (i, cum) in acc.chunks_exact_mut(n).enumerate() {
                    let tr = t[start + r0 + i];
                    if tr.is_nan() {
                        out.push(f64::NAN);
                    } else {
                        QrfKernel::cumulate(cum);
                        out.push(QrfKernel::cdf(cum, kernel.threshold_position(tr)));
                    }
                }
            }
        })
    }

    /// Quantile-forest weights of the training rows for one query row (Meinshausen 2006):
    /// `w_i(x) = (1/k) sum_t c_it / C_t(x)`, in training-row order, summing to 1. The
    /// effective number of training rows behind a prediction is `1 / sum_i w_i^2`.
    ///
    /// # Panics
    /// If `row` is shorter than [`Forest::n_features`].
    pub fn quantile_weights(&self, row: &[f64]) -> Vec<f64> {
        assert!(row.len() >= self.n_features, "row has too few features");
        let mut w = vec![0.0; self.n_train];
        let n_t = self.trees.len() as f64;
        for (tree, mem) in self.trees.iter().zip(&self.members) {
            let (rows, counts) = mem.leaf(tree.apply(row));
            let c: Vec<f64> = rows
                .iter()
                .zip(counts)
                .map(|(&r, &c)| self.train_weights[r as usize] * c as f64)
                .collect();
            let tot: f64 = c.iter().sum();
            if tot > 0.0 {
                for (&r, ci) in rows.iter().zip(&c) {
                    w[r as usize] += ci / (tot * n_t);
                }
            }
        }
        w
    }

    /// Out-of-bag mean predictions, rows x outputs (training rows in fitting order); NaN where
    /// a row was in every tree's sample.
    pub fn oob_predictions(&self) -> Array2<f64> {
        Array2::from_shape_vec((self.n_train, self.n_outputs), self.oob.clone()).expect("shape")
    }

    /// Out-of-bag quantile forest for output `output`: for each training row, quantiles at
    /// `levels` and `P(Y <= t)` at `thresholds` from the trees that did not train on it.
    /// Rows in every tree's sample get NaN.
    ///
    /// # Panics
    /// If `output` is out of range or a level is outside [0, 1].
    pub fn oob_distribution(
        &self,
        output: usize,
        levels: &[f64],
        thresholds: &[f64],
    ) -> (Array2<f64>, Array2<f64>) {
        self.assert_output(output);
        assert!(
            levels.iter().all(|q| (0.0..=1.0).contains(q)),
            "quantile levels must be in [0, 1], got {levels:?}"
        );
        let kernel = self.qrf_kernel(output);
        let (n, p) = (self.n_train, self.n_features);
        let (nl, nt) = (levels.len(), thresholds.len());
        // in-tree flags per tree
        let in_tree: Vec<Vec<bool>> = self
            .members
            .iter()
            .map(|mem| {
                let mut v = vec![false; n];
                mem.rows.iter().for_each(|&r| v[r as usize] = true);
                v
            })
            .collect();
        let t_pos: Vec<Option<usize>> = thresholds
            .iter()
            .map(|&t| (!t.is_nan()).then(|| kernel.threshold_position(t)))
            .collect();
        let flat: Vec<f64> = (0..n)
            .into_par_iter()
            .map_init(
                || vec![0.0; n],
                |acc, r| {
                    let row = &self.x_train[r * p..(r + 1) * p];
                    acc.fill(0.0);
                    let mut used = 0usize;
                    let mut tot = 0.0;
                    for (t, tree) in self.trees.iter().enumerate() {
                        if in_tree[t][r] {
                            continue;
                        }
                        used += 1;
                        let g = kernel.tree_leaf_offset[t] + tree.apply(row);
                        let (a, b) = (kernel.leaf_ptr[g] as usize, kernel.leaf_ptr[g + 1] as usize);
                        for (&ps, &w) in kernel.pos[a..b].iter().zip(&kernel.weight[a..b]) {
                            acc[ps as usize] += w;
                            tot += w;
                        }
                    }
                    let mut out = Vec::with_capacity(nl + nt);
                    if used == 0 || tot <= 0.0 {
                        out.resize(nl + nt, f64::NAN);
                        return out;
                    }
                    QrfKernel::cumulate(acc);
                    out.extend(levels.iter().map(|&q| kernel.quantile(acc, q)));
                    out.extend(
                        t_pos
                            .iter()
                            .map(|tp| tp.map_or(f64::NAN, |ps| QrfKernel::cdf(acc, ps))),
                    );
                    out
                },
            )
            .flatten()
            .collect();
        split_columns(&flat, n, nl, nt)
    }

    /// Impurity importance per feature: the weighted variance reduction (of the standardised
    /// outputs) credited to each feature, normalised per tree, averaged over trees and scaled
    /// to sum to 1 (all zeros if no tree split).
    pub fn impurity_importance(&self) -> Vec<f64> {
        self.impurity.clone()
    }

    /// Permutation importance (Breiman 2001): for each feature, the mean over `repeats`
    /// random permutations of that column of the increase in mean squared error, summed over
    /// outputs each divided by its training variance (standardised outputs). Elements of `y`
    /// that are NaN are skipped. Permutations are seeded from `seed`, the feature and the
    /// repeat, so the result does not depend on the thread count.
    ///
    /// # Panics
    /// If `x` has the wrong number of columns or `y` the wrong shape.
    pub fn permutation_importance(
        &self,
        x: ArrayView2<f64>,
        y: ArrayView2<f64>,
        repeats: usize,
        seed: u64,
    ) -> Vec<f64> {
        self.assert_x(&x);
        assert_eq!(
            y.dim(),
            (x.nrows(), self.n_outputs),
            "y must be rows x outputs"
        );
        let repeats = repeats.max(1);
        let base = self.scaled_mse(y, &self.predict(x));
        let n = x.nrows();
        let p = self.n_features;
        let rises: Vec<f64> = (0..p * repeats)
            .into_par_iter()
            .map(|task| {
                let f = task / repeats;
                let mut rng = StdRng::seed_from_u64(derive_seed(seed, STREAM_PERMUTE, task as u64));
                let mut perm: Vec<usize> = (0..n).collect();
                for i in (1..n).rev() {
                    let j = rng.random_range(0..=i);
                    perm.swap(i, j);
                }
                let mut xp = x.to_owned();
                for (r, &src) in perm.iter().enumerate() {
                    xp[[r, f]] = x[[src, f]];
                }
                self.scaled_mse(y, &self.predict(xp.view())) - base
            })
            .collect();
        (0..p)
            .map(|f| rises[f * repeats..(f + 1) * repeats].iter().sum::<f64>() / repeats as f64)
            .collect()
    }

    /// Sum over outputs of the mean squared error divided by the output's training variance.
    fn scaled_mse(&self, y: ArrayView2<f64>, pred: &Array2<f64>) -> f64 {
        let mut total = 0.0;
        for j in 0..self.n_outputs {
            let (mut s, mut c) = (0.0, 0usize);
            for (a, b) in y.column(j).iter().zip(pred.column(j)) {
                if !a.is_nan() {
                    s += (a - b) * (a - b);
                    c += 1;
                }
            }
            if c > 0 {
                total += s / c as f64 / (self.y_scale[j] * self.y_scale[j]);
            }
        }
        total
    }

    /// Saves the forest as JSON with a format name and version.
    pub fn to_json(&self) -> Result<String, EnsembleError> {
        persist::to_json(FOREST_FORMAT, FOREST_VERSION, self)
    }

    /// Loads a forest saved by [`Forest::to_json`]; a different format version gives
    /// [`EnsembleError::FormatVersion`], an inconsistent model [`EnsembleError::CorruptModel`].
    pub fn from_json(s: &str) -> Result<Forest, EnsembleError> {
        persist::from_json_checked(s, FOREST_FORMAT, FOREST_VERSION, Forest::validate)
    }

    fn validate(&self) -> Result<(), String> {
        self.settings.check().map_err(|e| e.to_string())?;
        let (n, p, k) = (self.n_train, self.n_features, self.n_outputs);
        if self.trees.is_empty() || self.trees.len() != self.members.len() {
            return Err("tree and leaf-membership counts differ".into());
        }
        if n == 0 || p == 0 || k == 0 {
            return Err("empty forest dimensions".into());
        }
        let lens = [
            (self.x_train.len(), n * p, "x_train"),
            (self.y_train.len(), n * k, "y_train"),
            (self.train_weights.len(), n, "train_weights"),
            (self.y_mean.len(), k, "y_mean"),
            (self.y_scale.len(), k, "y_scale"),
            (self.oob.len(), n * k, "oob"),
            (self.impurity.len(), p, "impurity"),
        ];
        for (got, want, what) in lens {
            if got != want {
                return Err(format!("{what} has {got} entries, expected {want}"));
            }
        }
        for (t, (tree, mem)) in self.trees.iter().zip(&self.members).enumerate() {
            tree.validate(p).map_err(|e| format!("tree {t}: {e}"))?;
            if tree.n_outputs() != k || mem.n_leaves() != tree.n_leaves() {
                return Err(format!("tree {t}: leaf membership does not match the tree"));
            }
            let ok = mem.offsets.first() == Some(&0)
                && mem.offsets.windows(2).all(|w| w[0] <= w[1])
                && *mem.offsets.last().unwrap_or(&0) as usize == mem.rows.len()
                && mem.rows.len() == mem.counts.len()
                && mem.rows.iter().all(|&r| (r as usize) < n);
            if !ok {
                return Err(format!("tree {t}: malformed leaf membership"));
            }
        }
        Ok(())
    }
}

/// Splits row-major `[levels..., thresholds...]` records into two arrays.
fn split_columns(flat: &[f64], n: usize, nl: usize, nt: usize) -> (Array2<f64>, Array2<f64>) {
    let w = nl + nt;
    let q = Array2::from_shape_fn((n, nl), |(r, l)| flat[r * w + l]);
    let c = Array2::from_shape_fn((n, nt), |(r, t)| flat[r * w + nl + t]);
    (q, c)
}
