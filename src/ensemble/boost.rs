//! Gradient boosting of binned regression trees.
//!
//! Gradient tree boosting (Friedman 2001, "Greedy function approximation: a gradient boosting
//! machine", Ann. Stat. 29(5):1189-1232): start from the loss-optimal constant, then at each
//! round fit a regression tree (variance reduction, see [`super::tree`]) to the negative
//! gradient of the loss and set each leaf to the loss-optimal step for the rows in it
//! (Friedman's TreeBoost):
//! - squared loss: mean residual;
//! - absolute loss: weighted median of the residuals;
//! - Huber loss with fixed `delta`: median plus the mean of the clipped deviations from it
//!   (Friedman 2001, algorithm 4, M-TreeBoost);
//! - quantile (pinball) loss at level `q`: weighted `q`-quantile of the residuals
//!   (as in scikit-learn's `GradientBoostingRegressor(loss="quantile")`).
//!
//! Each step is shrunk by the learning rate; each round grows its tree on a random subsample
//! of the rows drawn without replacement (stochastic gradient boosting, Friedman 2002, CSDA
//! 38(4):367-378). Early stopping holds out a share of the *groups* (wells), so that the
//! held-out loss measures prediction at unseen wells; after it has picked the number of
//! rounds, the booster is refitted on all rows with that many rounds (small well data cannot
//! spare the held-out wells).
//!
//! Several quantile levels are fitted independently and made non-crossing by sorting each
//! row's predictions (rearrangement; Chernozhukov, Fernandez-Val & Galichon 2010,
//! "Quantile and probability curves without crossing", Econometrica 78(3):1093-1125), which
//! never increases the error with respect to the true quantile curve.

use ndarray::{Array2, ArrayView2};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::binning::BinMapper;
use super::persist::{
    self, BOOSTER_FORMAT, BOOSTER_VERSION, QUANTILE_BOOSTERS_FORMAT, QUANTILE_BOOSTERS_VERSION,
};
use super::quantile::weighted_quantile;
use super::tree::{Binned, GrowJob, GrowParams, Tree, grow};
use super::{
    EnsembleError, PREDICT_CHUNK, check_training_x, check_weights, copy_rows_wide, derive_seed,
    invalid,
};

const STREAM_ROUND: u64 = 11;
const STREAM_HOLDOUT: u64 = 12;

/// Loss minimised by gradient boosting.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub enum Loss {
    /// Squared error; predicts the conditional mean.
    Squared,
    /// Absolute error; predicts the conditional median.
    Absolute,
    /// Huber loss: squared within `delta` (in target units, > 0) of the prediction, linear
    /// beyond.
    Huber {
        /// Transition point between the squared and linear parts, > 0.
        delta: f64,
    },
    /// Pinball loss at level `q` in (0, 1); predicts the conditional `q`-quantile.
    Quantile {
        /// Quantile level in (0, 1).
        q: f64,
    },
}

impl Loss {
    fn check(&self) -> Result<(), EnsembleError> {
        match *self {
            Loss::Huber { delta } if !(delta > 0.0 && delta.is_finite()) => {
                Err(invalid("loss.delta", "must be positive and finite", delta))
            }
            Loss::Quantile { q } if !(q > 0.0 && q < 1.0) => {
                Err(invalid("loss.q", "must be in (0, 1)", q))
            }
            _ => Ok(()),
        }
    }

    /// Loss of one residual `r = y - prediction`.
    pub fn value(&self, r: f64) -> f64 {
        match *self {
            Loss::Squared => 0.5 * r * r,
            Loss::Absolute => r.abs(),
            Loss::Huber { delta } => {
                if r.abs() <= delta {
                    0.5 * r * r
                } else {
                    delta * (r.abs() - 0.5 * delta)
                }
            }
            Loss::Quantile { q } => {
                if r >= 0.0 {
                    q * r
                } else {
                    (q - 1.0) * r
                }
            }
        }
    }

    /// Negative gradient of the loss with respect to the prediction, at residual `r`.
    fn negative_gradient(&self, r: f64) -> f64 {
        match *self {
            Loss::Squared => r,
            Loss::Absolute => {
                if r > 0.0 {
                    1.0
                } else if r < 0.0 {
                    -1.0
                } else {
                    0.0
                }
            }
            Loss::Huber { delta } => r.clamp(-delta, delta),
            Loss::Quantile { q } => {
                if r > 0.0 {
                    q
                } else {
                    q - 1.0
                }
            }
        }
    }

    /// Loss-optimal constant for residuals `r` with weights `w` (the leaf step, or the
    /// initial prediction when `r` are the targets).
    fn optimal_constant(&self, r: &[f64], w: &[f64]) -> f64 {
        match *self {
            Loss::Squared => {
                let sw: f64 = w.iter().sum();
                r.iter().zip(w).map(|(r, w)| r * w).sum::<f64>() / sw
            }
            Loss::Absolute => weighted_quantile(r, w, 0.5),
            Loss::Huber { delta } => {
                let med = weighted_quantile(r, w, 0.5);
                let sw: f64 = w.iter().sum();
                let adj: f64 = r
                    .iter()
                    .zip(w)
                    .map(|(r, w)| w * (r - med).clamp(-delta, delta))
                    .sum::<f64>()
                    / sw;
                med + adj
            }
            Loss::Quantile { q } => weighted_quantile(r, w, q),
        }
    }
}

/// Settings of a gradient-boosted tree ensemble (checked by [`BoostSettings::check`]).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BoostSettings {
    /// Loss to minimise. Default [`Loss::Squared`].
    pub loss: Loss,
    /// Maximum number of boosting rounds (trees), at least 1. Default 300.
    pub n_rounds: usize,
    /// Shrinkage of each tree's step, in (0, 1]. Default 0.05.
    pub learning_rate: f64,
    /// Depth of each tree, at least 1. Default 3.
    pub max_depth: usize,
    /// Minimum number of distinct rows in a leaf, at least 1. Default 3.
    pub min_samples_leaf: usize,
    /// Fraction of rows drawn (without replacement) for each round's tree, in (0, 1].
    /// Default 0.8.
    pub subsample: f64,
    /// Maximum number of quantile bins per feature, 2..=255. Default 255.
    pub max_bins: usize,
    /// Stop when the held-out loss has not improved for this many rounds (at least 1);
    /// `None` fits all rounds on all rows. Default `Some(30)`.
    pub early_stopping_rounds: Option<usize>,
    /// Share of the groups (wells; rows when no groups are given) held out for early
    /// stopping, in (0, 1); at least one group is held out and one kept. Default 0.2.
    pub validation_fraction: f64,
    /// Seed of every random choice (subsamples, held-out groups). Default 0.
    pub seed: u64,
}

impl Default for BoostSettings {
    fn default() -> Self {
        BoostSettings {
            loss: Loss::Squared,
            n_rounds: 300,
            learning_rate: 0.05,
            max_depth: 3,
            min_samples_leaf: 3,
            subsample: 0.8,
            max_bins: 255,
            early_stopping_rounds: Some(30),
            validation_fraction: 0.2,
            seed: 0,
        }
    }
}

/// Result of one boosting run.
struct Run {
    init: f64,
    trees: Vec<Tree>,
    best_rounds: usize,
    curve: Vec<f64>,
}

impl BoostSettings {
    /// Checks every setting's range.
    pub fn check(&self) -> Result<(), EnsembleError> {
        self.loss.check()?;
        if self.n_rounds == 0 {
            return Err(invalid("n_rounds", "must be at least 1", 0));
        }
        if !(self.learning_rate > 0.0 && self.learning_rate <= 1.0) {
            return Err(invalid(
                "learning_rate",
                "must be in (0, 1]",
                self.learning_rate,
            ));
        }
        if self.max_depth == 0 {
            return Err(invalid("max_depth", "must be at least 1", 0));
        }
        if self.min_samples_leaf == 0 {
            return Err(invalid("min_samples_leaf", "must be at least 1", 0));
        }
        if !(self.subsample > 0.0 && self.subsample <= 1.0) {
            return Err(invalid("subsample", "must be in (0, 1]", self.subsample));
        }
        if !(2..=255).contains(&self.max_bins) {
            return Err(invalid(
                "max_bins",
                "must be between 2 and 255",
                self.max_bins,
            ));
        }
        if self.early_stopping_rounds == Some(0) {
            return Err(invalid(
                "early_stopping_rounds",
                "must be at least 1 (or None)",
                0,
            ));
        }
        if self.early_stopping_rounds.is_some()
            && !(self.validation_fraction > 0.0 && self.validation_fraction < 1.0)
        {
            return Err(invalid(
                "validation_fraction",
                "must be in (0, 1)",
                self.validation_fraction,
            ));
        }
        Ok(())
    }

    /// Fits a booster to `x` (rows x features, NaN = missing) and `y` (finite), with optional
    /// non-negative sample `weights` and `groups` (e.g. the well of each row) for early
    /// stopping. With fewer than two groups (or two rows) early stopping is skipped and all
    /// rounds are fitted.
    pub fn fit(
        &self,
        x: ArrayView2<f64>,
        y: &[f64],
        weights: Option<&[f64]>,
        groups: Option<&[usize]>,
    ) -> Result<Booster, EnsembleError> {
        self.check()?;
        check_training_x(x)?;
        let n = x.nrows();
        if y.len() != n {
            return Err(EnsembleError::ShapeMismatch {
                what: "y".into(),
                expected: n,
                got: y.len(),
            });
        }
        if let Some(row) = y.iter().position(|v| !v.is_finite()) {
            return Err(EnsembleError::NonFiniteTarget {
                row,
                output: 0,
                value: y[row],
            });
        }
        let w = check_weights(weights, n)?;
        if let Some(g) = groups
            && g.len() != n
        {
            return Err(EnsembleError::ShapeMismatch {
                what: "groups".into(),
                expected: n,
                got: g.len(),
            });
        }
        let all: Vec<usize> = (0..n).collect();
        let mut curve = Vec::new();
        let mut early_stopped = false;
        let rounds = match self.early_stopping_rounds {
            Some(patience) => match self.holdout(n, &w, groups) {
                Some((train, valid)) => {
                    let run = self.run(x, y, &w, &train, Some(&valid), self.n_rounds, patience);
                    curve = run.curve;
                    early_stopped = run.best_rounds < self.n_rounds;
                    run.best_rounds
                }
                None => self.n_rounds,
            },
            None => self.n_rounds,
        };
        let run = self.run(x, y, &w, &all, None, rounds, usize::MAX);
        Ok(Booster {
            settings: self.clone(),
            n_features: x.ncols(),
            init: run.init,
            trees: run.trees,
            early_stopped,
            validation_curve: curve,
        })
    }

    /// Splits rows into training and held-out rows by groups; `None` when there are fewer
    /// than two groups or one side would have no weight.
    fn holdout(
        &self,
        n: usize,
        w: &[f64],
        groups: Option<&[usize]>,
    ) -> Option<(Vec<usize>, Vec<usize>)> {
        let ids: Vec<usize> = match groups {
            Some(g) => g.to_vec(),
            None => (0..n).collect(),
        };
        let mut distinct = ids.clone();
        distinct.sort_unstable();
        distinct.dedup();
        let g = distinct.len();
        if g < 2 {
            return None;
        }
        let mut rng = StdRng::seed_from_u64(derive_seed(self.seed, STREAM_HOLDOUT, 0));
        for i in (1..g).rev() {
            let j = rng.random_range(0..=i);
            distinct.swap(i, j);
        }
        let n_val = ((self.validation_fraction * g as f64).round() as usize).clamp(1, g - 1);
        let mut held = distinct[..n_val].to_vec();
        held.sort_unstable();
        let (mut train, mut valid) = (Vec::new(), Vec::new());
        for (r, id) in ids.iter().enumerate() {
            if held.binary_search(id).is_ok() {
                valid.push(r);
            } else {
                train.push(r);
            }
        }
        let wsum = |rows: &[usize]| rows.iter().map(|&r| w[r]).sum::<f64>();
        (wsum(&train) > 0.0 && wsum(&valid) > 0.0).then_some((train, valid))
    }

    /// Boosts on rows `train`, tracking the loss on `valid` when given; stops after
    /// `patience` rounds without improvement and keeps the best number of rounds.
    #[allow(clippy::too_many_arguments)]
    fn run(
        &self,
        x: ArrayView2<f64>,
        y: &[f64],
        w: &[f64],
        train: &[usize],
        valid: Option<&[usize]>,
        n_rounds: usize,
        patience: usize,
    ) -> Run {
        let p = x.ncols();
        let nt = train.len();
        let xt = x.select(ndarray::Axis(0), train);
        let yt: Vec<f64> = train.iter().map(|&r| y[r]).collect();
        let wt: Vec<f64> = train.iter().map(|&r| w[r]).collect();
        let mut xt_rows = Vec::with_capacity(2 * nt * p);
        copy_rows_wide(&xt.view(), 0, nt, &mut xt_rows);
        let mapper = BinMapper::fit(xt.view(), self.max_bins);
        let codes = mapper.transform(xt.view());
        let data = Binned::new(&codes, nt, &mapper);
        let params = GrowParams {
            max_depth: self.max_depth,
            min_samples_leaf: self.min_samples_leaf,
            n_try: p,
        };
        let loss = self.loss;
        let positive: Vec<f64> = wt.to_vec();
        let init = loss.optimal_constant(&yt, &positive);
        let mut f = vec![init; nt];

        let (xv_rows, yv, wv, mut fv) = match valid {
            Some(v) => {
                let xv = x.select(ndarray::Axis(0), v);
                let mut buf = Vec::with_capacity(2 * v.len() * p);
                copy_rows_wide(&xv.view(), 0, v.len(), &mut buf);
                let yv: Vec<f64> = v.iter().map(|&r| y[r]).collect();
                let wv: Vec<f64> = v.iter().map(|&r| w[r]).collect();
                (buf, yv, wv, vec![init; v.len()])
            }
            None => (Vec::new(), Vec::new(), Vec::new(), Vec::new()),
        };
        let wv_sum: f64 = wv.iter().sum();
        let valid_loss = |fv: &[f64]| {
            yv.iter()
                .zip(fv)
                .zip(&wv)
                .map(|((y, f), w)| w * loss.value(y - f))
                .sum::<f64>()
                / wv_sum
        };

        let n_sub = if self.subsample >= 1.0 {
            nt
        } else {
            ((self.subsample * nt as f64).round() as usize).clamp(1, nt)
        };
        let mut trees = Vec::new();
        let mut curve = Vec::new();
        let mut best = (f64::INFINITY, 0usize);
        if valid.is_some() {
            best.0 = valid_loss(&fv);
            curve.push(best.0);
        }
        let mut grad = vec![0.0; nt];
        let mut rw = vec![0.0; nt];
        let mut idx: Vec<u32> = (0..nt as u32).collect();
        let mut leaves = vec![0u32; nt.max(fv.len())];
        let (mut res, mut res_w) = (Vec::new(), Vec::new());
        for m in 0..n_rounds {
            let mut rng = StdRng::seed_from_u64(derive_seed(self.seed, STREAM_ROUND, m as u64));
            rw.fill(0.0);
            if n_sub == nt {
                rw.copy_from_slice(&wt);
            } else {
                for (i, v) in idx.iter_mut().enumerate() {
                    *v = i as u32;
                }
                for i in 0..n_sub {
                    let j = rng.random_range(i..nt);
                    idx.swap(i, j);
                    rw[idx[i] as usize] = wt[idx[i] as usize];
                }
            }
            let rows: Vec<u32> = (0..nt as u32).filter(|&r| rw[r as usize] > 0.0).collect();
            if rows.is_empty() {
                continue;
            }
            for i in 0..nt {
                grad[i] = loss.negative_gradient(yt[i] - f[i]);
            }
            let grown = grow(
                GrowJob {
                    data: &data,
                    targets: &grad,
                    k: 1,
                    weight: &rw,
                    rows,
                    routed: Vec::new(),
                    params: &params,
                },
                &mut rng,
            );
            let mut values = Vec::with_capacity(grown.leaf_ranges.len());
            for &(a, b) in &grown.leaf_ranges {
                res.clear();
                res_w.clear();
                for &r in &grown.rows[a..b] {
                    let r = r as usize;
                    res.push(yt[r] - f[r]);
                    res_w.push(rw[r]);
                }
                let step = loss.optimal_constant(&res, &res_w);
                values.push(if step.is_finite() {
                    self.learning_rate * step
                } else {
                    0.0
                });
            }
            let mut tree = grown.tree;
            tree.set_values(1, values);
            tree.apply_rows(&xt_rows, p, &mut leaves[..nt]);
            for i in 0..nt {
                f[i] += tree.leaf_value(leaves[i] as usize, 0);
            }
            trees.push(tree);
            if valid.is_some() {
                let tree = trees.last().expect("pushed");
                let nv = fv.len();
                tree.apply_rows(&xv_rows, p, &mut leaves[..nv]);
                for i in 0..nv {
                    fv[i] += tree.leaf_value(leaves[i] as usize, 0);
                }
                let l = valid_loss(&fv);
                curve.push(l);
                if l < best.0 - 1e-12 * best.0.abs() {
                    best = (l, trees.len());
                } else if trees.len() - best.1 >= patience {
                    break;
                }
            }
        }
        let best_rounds = if valid.is_some() { best.1 } else { trees.len() };
        trees.truncate(best_rounds);
        Run {
            init,
            trees,
            best_rounds,
            curve,
        }
    }
}

/// A fitted gradient-boosted tree ensemble.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Booster {
    settings: BoostSettings,
    n_features: usize,
    #[serde(with = "super::persist::exact")]
    init: f64,
    /// Trees with learning-rate-scaled leaf values.
    trees: Vec<Tree>,
    early_stopped: bool,
    #[serde(with = "super::persist::exact_vec")]
    validation_curve: Vec<f64>,
}

impl Booster {
    /// The fitted trees, in boosting order.
    pub fn trees(&self) -> &[Tree] {
        &self.trees
    }

    /// Predictions for every row of `x` (rows x features, NaN = missing).
    ///
    /// # Panics
    /// If `x` does not have the training number of columns (see [`Booster::check_x`]).
    pub fn predict(&self, x: ArrayView2<f64>) -> Vec<f64> {
        assert!(
            x.ncols() == self.n_features,
            "booster expects {} feature columns, got {}",
            self.n_features,
            x.ncols()
        );
        let n = x.nrows();
        let p = self.n_features;
        let parts: Vec<Vec<f64>> = (0..n.div_ceil(PREDICT_CHUNK))
            .into_par_iter()
            .map_init(
                || (Vec::new(), Vec::new()),
                |(rows, leaves): &mut (Vec<f64>, Vec<u32>), c| {
                    let start = c * PREDICT_CHUNK;
                    let end = (start + PREDICT_CHUNK).min(n);
                    let m = end - start;
                    copy_rows_wide(&x, start, end, rows);
                    leaves.resize(m, 0);
                    let mut out = vec![self.init; m];
                    for tree in &self.trees {
                        tree.apply_rows(rows, p, leaves);
                        for (o, &l) in out.iter_mut().zip(leaves.iter()) {
                            *o += tree.leaf_value(l as usize, 0);
                        }
                    }
                    out
                },
            )
            .collect();
        parts.into_iter().flatten().collect()
    }

    /// Checks that `x` has the training number of feature columns.
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

    /// Number of trees in the final model (the early-stopping choice when it applied).
    pub fn n_rounds_used(&self) -> usize {
        self.trees.len()
    }

    /// Whether early stopping kept fewer than `n_rounds` trees.
    pub fn early_stopped(&self) -> bool {
        self.early_stopped
    }

    /// Held-out loss of the early-stopping run: entry 0 for the initial constant, entry `m`
    /// after `m` trees (empty when early stopping did not run). The final model keeps the
    /// number of trees with the lowest loss (possibly 0: the constant alone).
    pub fn validation_curve(&self) -> &[f64] {
        &self.validation_curve
    }

    /// The settings the booster was fitted with.
    pub fn settings(&self) -> &BoostSettings {
        &self.settings
    }

    /// Number of features the booster was trained on.
    pub fn n_features(&self) -> usize {
        self.n_features
    }

    /// Saves the booster as JSON with a format name and version.
    pub fn to_json(&self) -> Result<String, EnsembleError> {
        persist::to_json(BOOSTER_FORMAT, BOOSTER_VERSION, self)
    }

    /// Loads a booster saved by [`Booster::to_json`].
    pub fn from_json(s: &str) -> Result<Booster, EnsembleError> {
        persist::from_json_checked(s, BOOSTER_FORMAT, BOOSTER_VERSION, Booster::validate)
    }

    fn validate(&self) -> Result<(), String> {
        self.settings.check().map_err(|e| e.to_string())?;
        if !self.init.is_finite() || self.n_features == 0 {
            return Err("booster has no features or a non-finite initial value".into());
        }
        for (t, tree) in self.trees.iter().enumerate() {
            tree.validate(self.n_features)
                .map_err(|e| format!("tree {t}: {e}"))?;
            if tree.n_outputs() != 1 {
                return Err(format!("tree {t} has {} outputs", tree.n_outputs()));
            }
        }
        Ok(())
    }
}

/// Boosters for several quantile levels, made non-crossing at prediction.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct QuantileBoosters {
    #[serde(with = "super::persist::exact_vec")]
    levels: Vec<f64>,
    boosters: Vec<Booster>,
}

/// Fits one quantile-loss booster per level (strictly increasing, in (0, 1)), in parallel.
/// `settings.loss` is replaced by [`Loss::Quantile`] at each level; every level uses the same
/// seed, hence the same held-out groups and subsamples.
pub fn fit_quantile_boosters(
    settings: &BoostSettings,
    levels: &[f64],
    x: ArrayView2<f64>,
    y: &[f64],
    weights: Option<&[f64]>,
    groups: Option<&[usize]>,
) -> Result<QuantileBoosters, EnsembleError> {
    if levels.is_empty() {
        return Err(invalid("levels", "must not be empty", "[]"));
    }
    if !levels.iter().all(|q| *q > 0.0 && *q < 1.0) || !levels.windows(2).all(|w| w[0] < w[1]) {
        return Err(invalid(
            "levels",
            "must be strictly increasing and in (0, 1)",
            format!("{levels:?}"),
        ));
    }
    let boosters: Result<Vec<Booster>, EnsembleError> = levels
        .par_iter()
        .map(|&q| {
            let s = BoostSettings {
                loss: Loss::Quantile { q },
                ..settings.clone()
            };
            s.fit(x, y, weights, groups)
        })
        .collect();
    Ok(QuantileBoosters {
        levels: levels.to_vec(),
        boosters: boosters?,
    })
}

impl QuantileBoosters {
    /// Predicted quantiles, rows x levels, sorted along each row so they never cross
    /// (rearrangement, Chernozhukov, Fernandez-Val & Galichon 2010).
    pub fn predict(&self, x: ArrayView2<f64>) -> Array2<f64> {
        let cols: Vec<Vec<f64>> = self.boosters.iter().map(|b| b.predict(x)).collect();
        let n = x.nrows();
        let nl = self.levels.len();
        let mut out = Array2::from_shape_fn((n, nl), |(r, l)| cols[l][r]);
        for mut row in out.rows_mut() {
            let mut v = row.to_vec();
            v.sort_by(f64::total_cmp);
            row.assign(&ndarray::ArrayView1::from(&v));
        }
        out
    }

    /// Predictions before rearrangement, rows x levels (may cross).
    pub fn predict_raw(&self, x: ArrayView2<f64>) -> Array2<f64> {
        let cols: Vec<Vec<f64>> = self.boosters.iter().map(|b| b.predict(x)).collect();
        Array2::from_shape_fn((x.nrows(), self.levels.len()), |(r, l)| cols[l][r])
    }

    /// The quantile levels, ascending.
    pub fn levels(&self) -> &[f64] {
        &self.levels
    }

    /// The booster of each level.
    pub fn boosters(&self) -> &[Booster] {
        &self.boosters
    }

    /// Saves the boosters as JSON with a format name and version.
    pub fn to_json(&self) -> Result<String, EnsembleError> {
        persist::to_json(QUANTILE_BOOSTERS_FORMAT, QUANTILE_BOOSTERS_VERSION, self)
    }

    /// Loads boosters saved by [`QuantileBoosters::to_json`].
    pub fn from_json(s: &str) -> Result<QuantileBoosters, EnsembleError> {
        persist::from_json_checked(
            s,
            QUANTILE_BOOSTERS_FORMAT,
            QUANTILE_BOOSTERS_VERSION,
            |q: &QuantileBoosters| {
                if q.levels.len() != q.boosters.len() || q.levels.is_empty() {
                    return Err("levels and boosters differ in number".into());
                }
                q.boosters.iter().try_for_each(Booster::validate)
            },
        )
    }
}
