//! Regression trees on binned features, stored as flat node arrays.
//!
//! Growing follows CART (Breiman, Friedman, Olshen & Stone 1984): each split maximises the
//! weighted variance reduction, summed over the (standardised) outputs for a multi-output tree.
//! Split search is histogram-based (Ke et al. 2017, LightGBM, NeurIPS): large nodes accumulate
//! per-bin sums of weight and weighted target for every feature, and a child's histogram is the
//! parent's minus its sibling's (histogram subtraction), so only the smaller child is scanned.
//! Smaller nodes sum only the features they try, into a 256-bin histogram of which only the
//! bins holding rows are scanned and cleared (a 256-bit set lists them in order).
//! Missing values (NaN, their own bin) try both sides at every split and the better side is
//! kept (sparsity-aware split finding, Chen & Guestrin 2016, XGBoost, KDD); when a node saw no
//! missing value for the chosen feature, missing values follow the child with more rows.
//!
//! A fitted [`Tree`] is a flat array of its internal [`Node`]s, each holding a raw-valued
//! threshold and two children; a child below the number of internal nodes is another node,
//! one at or above it is a leaf (`child - n_internal` is the leaf id). Leaf ids number the
//! leaves from left to right. [`Tree::apply`] maps a row to its leaf id (0..n_leaves), and
//! leaf values are stored per leaf and output.

use rand::RngExt;
use rand::rngs::StdRng;
use serde::{Deserialize, Serialize};

use super::binning::{BinMapper, MISSING_BIN};

/// Sentinel in the grower's `leaf_of_node` for internal nodes.
const NOT_LEAF: u32 = u32::MAX;

/// Nodes with at least `HIST_ROWS_PER_TRIED * p / n_try` rows (and at least this many) search
/// splits on full histograms of every feature, passed on to children by subtraction; smaller
/// nodes sum only the features they try, touching only the bins that hold rows.
const HIST_MIN_ROWS: usize = 512;

/// See [`HIST_MIN_ROWS`]: a full histogram costs about 256 bins per feature to clear and
/// subtract, worth it only when many rows share the work.
const HIST_ROWS_PER_TRIED: usize = 1024;

/// Bit of [`Node`]'s packed field that sends missing values left; the other bits hold the
/// feature index times two, so that the packed field is the column to read in the two-copy
/// row layout (see [`super::copy_rows_wide`]).
const MISSING_LEFT: u32 = 1;

/// One internal node of a fitted tree. A row goes to `left` when its value of the feature is
/// `<= threshold` and to `right` when it is larger; a missing value (NaN) goes to the side
/// learned at fitting. A child `c` is the internal node `c` when `c < n_internal`, else the
/// leaf `c - n_internal`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(from = "NodeRepr", into = "NodeRepr")]
pub struct Node {
    threshold: f64,
    /// `2 * feature + 1` when missing values go left, `2 * feature` otherwise.
    packed: u32,
    left: u32,
    right: u32,
}

/// The written form of a [`Node`].
#[derive(Serialize, Deserialize)]
struct NodeRepr {
    #[serde(with = "super::persist::exact")]
    threshold: f64,
    feature: u32,
    left: u32,
    right: u32,
    missing_left: bool,
}

impl From<NodeRepr> for Node {
    fn from(r: NodeRepr) -> Node {
        // an out-of-range feature stays out of range (and fails validation) instead of wrapping
        let feature = r.feature.min(u32::MAX >> 1);
        Node {
            threshold: r.threshold,
            packed: (feature << 1) | if r.missing_left { MISSING_LEFT } else { 0 },
            left: r.left,
            right: r.right,
        }
    }
}

impl From<Node> for NodeRepr {
    fn from(n: Node) -> NodeRepr {
        NodeRepr {
            threshold: n.threshold,
            feature: n.feature(),
            left: n.left,
            right: n.right,
            missing_left: n.missing_goes_left(),
        }
    }
}

impl Node {
    /// Split threshold on the raw feature value (`f64::MAX`: every non-missing value goes
    /// left).
    pub fn threshold(&self) -> f64 {
        self.threshold
    }

    /// Feature (column) index tested by the split.
    pub fn feature(&self) -> u32 {
        self.packed >> 1
    }

    /// Child for values `<= threshold` (see [`Node`] for how leaves are numbered).
    pub fn left(&self) -> u32 {
        self.left
    }

    /// Child for values `> threshold`.
    pub fn right(&self) -> u32 {
        self.right
    }

    /// Whether missing values go to the left child.
    pub fn missing_goes_left(&self) -> bool {
        self.packed & MISSING_LEFT != 0
    }

    /// Next child for a raw value `v` (NaN = missing).
    #[inline(always)]
    fn next(&self, v: f64) -> u32 {
        let v = if !v.is_nan() {
            v
        } else if self.missing_goes_left() {
            f64::NEG_INFINITY
        } else {
            f64::INFINITY
        };
        self.next_wide(v)
    }

    /// Next child for the value read from the two-copy layout at column `packed` (NaN
    /// already replaced by the infinity that takes the learned side).
    #[inline(always)]
    fn next_wide(&self, v: f64) -> u32 {
        if v > self.threshold {
            self.right
        } else {
            self.left
        }
    }
}

/// A fitted regression tree: flat node arrays, a leaf id per leaf node, and leaf values.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(from = "TreeRepr", into = "TreeRepr")]
pub struct Tree {
    /// Internal nodes; node 0 is the root (when there is any split).
    nodes: Vec<Node>,
    /// `nodes` padded with copies of the root to a power-of-two length, for the block walk.
    nodes_pow2: Vec<Node>,
    /// One more than the largest column any node reads in the two-copy row layout (0 without
    /// splits): a row of that layout must be at least this wide.
    wide_columns: usize,
    n_outputs: usize,
    /// Leaf values, `n_leaves x n_outputs`, row-major.
    values: Vec<f64>,
}

/// The written form of a [`Tree`].
#[derive(Serialize, Deserialize)]
struct TreeRepr {
    nodes: Vec<Node>,
    n_outputs: usize,
    #[serde(with = "super::persist::exact_vec")]
    values: Vec<f64>,
}

impl From<TreeRepr> for Tree {
    fn from(r: TreeRepr) -> Tree {
        Tree::new(r.nodes, r.n_outputs, r.values)
    }
}

impl From<Tree> for TreeRepr {
    fn from(t: Tree) -> TreeRepr {
        TreeRepr {
            nodes: t.nodes,
            n_outputs: t.n_outputs,
            values: t.values,
        }
    }
}

impl Tree {
    fn new(nodes: Vec<Node>, n_outputs: usize, values: Vec<f64>) -> Tree {
        let mut nodes_pow2 = nodes.clone();
        if let Some(&root) = nodes.first() {
            nodes_pow2.resize(nodes.len().next_power_of_two(), root);
        }
        let wide_columns = nodes
            .iter()
            .map(|n| n.packed as usize + 1)
            .max()
            .unwrap_or(0);
        Tree {
            nodes,
            nodes_pow2,
            wide_columns,
            n_outputs,
            values,
        }
    }

    /// Number of internal nodes (splits).
    pub fn n_nodes(&self) -> usize {
        self.nodes.len()
    }

    /// Number of leaves.
    pub fn n_leaves(&self) -> usize {
        self.values.len() / self.n_outputs.max(1)
    }

    /// Number of outputs per leaf.
    pub fn n_outputs(&self) -> usize {
        self.n_outputs
    }

    /// The internal nodes (node 0 is the root; empty when the tree is a single leaf).
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    /// Largest number of splits from the root to a leaf.
    pub fn depth(&self) -> usize {
        let n_int = self.nodes.len();
        let mut depth = vec![0usize; n_int];
        let mut max = 0;
        for (i, nd) in self.nodes.iter().enumerate() {
            max = max.max(depth[i] + 1);
            for c in [nd.left, nd.right] {
                if (c as usize) < n_int {
                    depth[c as usize] = depth[i] + 1;
                }
            }
        }
        max
    }

    /// Leaf id (0..n_leaves) reached by one row of raw feature values (NaN = missing).
    ///
    /// # Panics
    /// If `row` is shorter than the number of features the tree was grown on.
    pub fn apply(&self, row: &[f64]) -> usize {
        let n_int = self.nodes.len();
        let mut c = 0usize;
        while c < n_int {
            let nd = &self.nodes[c];
            c = nd.next(row[nd.feature() as usize]) as usize;
        }
        c - n_int
    }

    /// Value of output `output` in leaf `leaf`.
    pub fn leaf_value(&self, leaf: usize, output: usize) -> f64 {
        self.values[leaf * self.n_outputs + output]
    }

    /// All outputs of leaf `leaf`.
    pub fn leaf_values(&self, leaf: usize) -> &[f64] {
        &self.values[leaf * self.n_outputs..(leaf + 1) * self.n_outputs]
    }

    /// Prediction (all outputs) for one row.
    pub fn predict_row(&self, row: &[f64]) -> &[f64] {
        self.leaf_values(self.apply(row))
    }

    /// Leaf ids of a block of rows with `p` features in the two-copy layout of
    /// [`super::copy_rows_wide`] (`2 p` values per row), written to `out`.
    ///
    /// # Panics
    /// If `rows` holds fewer than `out.len()` rows of `2 p` values, or a node reads a feature
    /// at or beyond `p` (fitted and validated trees never do).
    pub(crate) fn apply_rows(&self, rows: &[f64], p: usize, out: &mut [u32]) {
        let width = 2 * p;
        assert!(
            rows.len() >= out.len() * width && self.wide_columns <= width,
            "tree walk: {} values for {} rows of {width}, tree reads {} columns",
            rows.len(),
            out.len(),
            self.wide_columns
        );
        self.walk(rows, width, out);
    }

    /// Walks `out.len()` rows, row `r` starting at `data[offset(r)]`, one level at a time
    /// over blocks of rows: each pass moves every row still at an internal node one step and
    /// keeps only those rows for the next pass. The rows' steps are independent, so their
    /// memory loads overlap, and the pass has no data-dependent branch.
    ///
    /// The caller guarantees that `data` holds `out.len()` rows of `width` values and that no
    /// node reads a column at or beyond `width` ([`Tree::apply_rows`] checks both).
    #[inline(always)]
    fn walk(&self, data: &[f64], width: usize, out: &mut [u32]) {
        // Fixed-size scratch indexed with `& (BLOCK - 1)` needs no bounds checks; the node
        // array is padded to a power of two (`nodes_pow2`) for the same reason.
        const BLOCK: usize = 128;
        const MASK: usize = BLOCK - 1;
        let n_int = self.nodes.len() as u32;
        out.fill(0);
        if n_int == 0 {
            return;
        }
        let node_mask = self.nodes_pow2.len() - 1;
        // re-sliced to `node_mask + 1` so that the compiler sees `i & node_mask` is in bounds
        let nodes = &self.nodes_pow2[..=node_mask];
        let mut cur = [0u32; BLOCK];
        let mut off = [0usize; BLOCK];
        let mut act_in = [0u8; BLOCK];
        let mut act_out = [0u8; BLOCK];
        for (b, block) in out.chunks_mut(BLOCK).enumerate() {
            let r0 = b * BLOCK;
            let mut na = block.len();
            for r in 0..na {
                cur[r & MASK] = 0;
                off[r & MASK] = (r0 + r) * width;
                act_in[r & MASK] = r as u8;
            }
            while na > 0 {
                let mut k = 0;
                for i in 0..na {
                    let r = act_in[i & MASK] as usize;
                    let nd = &nodes[cur[r & MASK] as usize & node_mask];
                    let at = off[r & MASK] + nd.packed as usize;
                    debug_assert!(at < data.len());
                    // SAFETY: `off` is `row * width` for a row below `out.len()` and
                    // `nd.packed < wide_columns <= width` (checked in `apply_rows`), so
                    // `at < out.len() * width <= data.len()`.
                    let v = unsafe { *data.get_unchecked(at) };
                    let next = nd.next_wide(v);
                    cur[r & MASK] = next;
                    act_out[k & MASK] = r as u8;
                    k += usize::from(next < n_int);
                }
                std::mem::swap(&mut act_in, &mut act_out);
                na = k;
            }
            for (r, o) in block.iter_mut().enumerate() {
                *o = cur[r & MASK] - n_int;
            }
        }
    }

    /// Replaces the leaf values (`n_leaves x n_outputs`, row-major).
    pub(crate) fn set_values(&mut self, n_outputs: usize, values: Vec<f64>) {
        debug_assert_eq!(values.len(), (self.nodes.len() + 1) * n_outputs);
        self.n_outputs = n_outputs;
        self.values = values;
    }

    /// Checks internal consistency (used after loading a model from a file): a binary tree
    /// has one more leaf than internal nodes, children come after their parent (so every walk
    /// ends), every node but the root and every leaf is reached exactly once.
    pub(crate) fn validate(&self, n_features: usize) -> Result<(), String> {
        let n_int = self.nodes.len();
        let n_leaves = n_int + 1;
        if self.n_outputs == 0 || self.values.len() != n_leaves * self.n_outputs {
            return Err(format!(
                "tree has {n_int} splits but {} leaf values for {} outputs",
                self.values.len(),
                self.n_outputs
            ));
        }
        let mut seen = vec![false; n_int + n_leaves];
        for (i, nd) in self.nodes.iter().enumerate() {
            if nd.feature() as usize >= n_features || nd.threshold.is_nan() {
                return Err(format!("node {i} is malformed"));
            }
            for c in [nd.left as usize, nd.right as usize] {
                if c <= i || c >= n_int + n_leaves || seen[c] {
                    return Err(format!("node {i} has an invalid child"));
                }
                seen[c] = true;
            }
        }
        Ok(())
    }
}

/// Binned training features shared by every tree of an ensemble.
pub(crate) struct Binned<'a> {
    /// Bin codes, column-major: row `r`, feature `f` at `f * n + r`.
    pub codes: &'a [u8],
    /// Number of training rows.
    pub n: usize,
    /// Number of features.
    pub p: usize,
    /// Non-missing bins per feature.
    pub n_bins: Vec<usize>,
    /// Cut points, to turn a bin split into a raw threshold.
    pub mapper: &'a BinMapper,
}

impl<'a> Binned<'a> {
    /// Wraps binned codes produced by `mapper.transform`.
    pub fn new(codes: &'a [u8], n: usize, mapper: &'a BinMapper) -> Self {
        let p = mapper.n_features();
        Binned {
            codes,
            n,
            p,
            n_bins: (0..p).map(|f| mapper.n_bins(f)).collect(),
            mapper,
        }
    }
}

/// Limits on growing one tree.
#[derive(Clone, Copy, Debug)]
pub(crate) struct GrowParams {
    /// Maximum depth (number of splits from root to leaf); `usize::MAX` for none.
    pub max_depth: usize,
    /// Minimum number of distinct training rows in a leaf.
    pub min_samples_leaf: usize,
    /// Number of non-constant features tried per split (all when `>= p`).
    pub n_try: usize,
}

/// A grown tree with the training rows of each leaf.
pub(crate) struct Grown {
    /// The tree; its leaf values are set by the caller.
    pub tree: Tree,
    /// Training rows used, grouped by leaf (ascending within a leaf).
    pub rows: Vec<u32>,
    /// For each leaf id, its range in `rows`.
    pub leaf_ranges: Vec<(usize, usize)>,
    /// Weighted variance reduction credited to each feature.
    pub gains: Vec<f64>,
    /// The rows passed to [`grow`] as `routed` (rows left out of the fit), each with the leaf
    /// id it falls in, grouped by leaf.
    pub routed: Vec<(u32, u32)>,
}

/// A node waiting to be split or turned into a leaf; its sums (weight, weighted targets,
/// count; stride `k + 2`) are kept per node id in one flat array.
struct Pending {
    node: usize,
    start: usize,
    end: usize,
    /// Range of the node's rows in the routed (left-out) rows.
    routed: (usize, usize),
    /// Sum over the node's rows and outputs of weight times target squared.
    sq: f64,
    depth: usize,
    /// Full histogram (all features) when the node is large.
    hist: Option<Vec<f64>>,
}

/// Best split found so far in a node.
struct Best {
    score: f64,
    feature: usize,
    bin: u8,
    missing_left: bool,
    /// Whether the node has rows with a missing value of `feature`.
    has_missing: bool,
    left: Vec<f64>,
}

/// Grows one tree.
///
/// In `job`, `targets` is `n x k` row-major (standardised outputs for a forest, pseudo-residuals for
/// boosting); `weight[r]` is the effective weight of row `r` (sample weight times in-bag count);
/// `rows` lists the distinct rows to use (all with positive weight). The rows `routed` (for
/// a forest, the out-of-bag rows) take no part in the fit; they are sent down the tree as it
/// grows, by their bin codes, which puts each in the leaf that [`Tree::apply`] would give its
/// raw values (`bin(v) <= b` exactly when `v <= threshold`).
///
/// On x86-64 processors with AVX2 and BMI2 the grower runs a copy of itself compiled for
/// those instructions (about 14 % fewer instructions: wider vectors in the split scoring,
/// shifts and bit scans without extra moves). Both copies do the same floating-point
/// operations in the same order (Rust never fuses or reorders them, and FMA is not enabled),
/// so they grow bit-for-bit the same trees.
pub(crate) fn grow(job: GrowJob<'_>, rng: &mut StdRng) -> Grown {
    #[cfg(target_arch = "x86_64")]
    if std::is_x86_feature_detected!("avx2")
        && std::is_x86_feature_detected!("bmi1")
        && std::is_x86_feature_detected!("bmi2")
        && std::is_x86_feature_detected!("lzcnt")
        && std::is_x86_feature_detected!("popcnt")
    {
        // SAFETY: the processor supports every feature `grow_x86_v3` is compiled for.
        return unsafe { grow_x86_v3(job, rng) };
    }
    grow_any(job, rng)
}

/// What [`grow`] grows a tree from (see there for each part).
pub(crate) struct GrowJob<'a> {
    /// Binned features.
    pub data: &'a Binned<'a>,
    /// `n x k` row-major targets.
    pub targets: &'a [f64],
    /// Outputs per row.
    pub k: usize,
    /// Effective weight per row.
    pub weight: &'a [f64],
    /// Distinct rows to fit on.
    pub rows: Vec<u32>,
    /// Rows sent down the tree without taking part in the fit.
    pub routed: Vec<u32>,
    /// Growing settings.
    pub params: &'a GrowParams,
}

/// [`grow`] compiled for AVX2 and BMI1/2 (the body is [`grow_any`], inlined).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,bmi1,bmi2,lzcnt,popcnt")]
fn grow_x86_v3(job: GrowJob<'_>, rng: &mut StdRng) -> Grown {
    grow_any(job, rng)
}

/// The body of [`grow`], inlined into each compiled copy together with everything it calls
/// on the hot path.
#[inline(always)]
fn grow_any(job: GrowJob<'_>, rng: &mut StdRng) -> Grown {
    let GrowJob {
        data,
        targets,
        k,
        weight,
        rows,
        routed,
        params,
    } = job;
    let stride = k + 2;
    let mut wy = vec![0.0; data.n * k];
    let mut q = vec![0.0; data.n];
    for &r in &rows {
        let r = r as usize;
        for j in 0..k {
            wy[r * k + j] = weight[r] * targets[r * k + j];
            q[r] += wy[r * k + j] * targets[r * k + j];
        }
    }
    let ww = if k == 1 {
        (0..data.n).map(|r| [weight[r], wy[r]]).collect()
    } else {
        Vec::new()
    };
    let mut g = Grower {
        data,
        k,
        stride,
        weight,
        wy,
        q,
        ww,
        fh1: Box::new([[0.0; 3]; 256]),
        pre: Box::new(Prefix1 {
            code: [0; 256],
            w: [0.0; 256],
            s: [0.0; 256],
            c: [0.0; 256],
            score: [0.0; 256],
        }),
        params: *params,
        pool: Vec::new(),
        // the multi-output small-node histogram (the single-output one is `fh1`)
        fh: if k == 1 {
            Vec::new()
        } else {
            vec![0.0; 256 * stride]
        },
        touched: Vec::new(),
        acc: vec![0.0; stride],
        tmp: vec![0.0; stride],
        order: (0..data.p).collect(),
        scratch: Vec::new(),
    };
    g.run(rows, routed, rng)
}

struct Grower<'a> {
    data: &'a Binned<'a>,
    k: usize,
    stride: usize,
    weight: &'a [f64],
    wy: Vec<f64>,
    /// Per row, the sum over outputs of weight times target squared.
    q: Vec<f64>,
    /// Single output: (weight, weight * target) per row.
    ww: Vec<[f64; 2]>,
    /// Single output: one feature's histogram for a small node (zero between uses).
    fh1: Box<[[f64; 3]; 256]>,
    /// Single output: prefix sums over one feature's non-empty bins in a node.
    pre: Box<Prefix1>,
    params: GrowParams,
    pool: Vec<Vec<f64>>,
    /// One feature's histogram for a small node (zero between uses).
    fh: Vec<f64>,
    /// Non-missing bins of `fh` holding rows, ascending.
    touched: Vec<u8>,
    acc: Vec<f64>,
    tmp: Vec<f64>,
    order: Vec<usize>,
    scratch: Vec<u32>,
}

impl Grower<'_> {
    #[inline(always)]
    fn run(&mut self, mut rows: Vec<u32>, mut routed: Vec<u32>, rng: &mut StdRng) -> Grown {
        let p = self.data.p;
        // while growing, `nodes` holds every node (leaves point to themselves); the fitted
        // tree keeps only the internal ones
        // a tree has at most one leaf per `min_samples_leaf` rows
        let max_leaves = rows.len() / self.params.min_samples_leaf.max(1) + 1;
        let mut nodes: Vec<Node> = Vec::with_capacity(2 * max_leaves);
        nodes.push(leaf_node(0));
        let mut leaf_of_node: Vec<u32> = Vec::with_capacity(2 * max_leaves);
        leaf_of_node.push(NOT_LEAF);
        let mut leaf_ranges: Vec<(usize, usize)> = Vec::with_capacity(max_leaves);
        let mut gains = vec![0.0; p];
        let mut routed_leaves = Vec::with_capacity(routed.len());
        let root_sq = rows.iter().map(|&r| self.q[r as usize]).sum();

        let mut root_sums = vec![0.0; self.stride];
        self.add_rows(&rows, &mut root_sums);
        let root_hist = if self.wants_hist(rows.len(), 0) {
            let mut h = self.take_hist();
            self.build_hist(&rows, &mut h);
            Some(h)
        } else {
            None
        };
        let s = self.stride;
        let mut node_sums = Vec::with_capacity(2 * max_leaves * s);
        node_sums.extend_from_slice(&root_sums);
        let mut sums = vec![0.0; s];
        let mut stack = vec![Pending {
            node: 0,
            start: 0,
            end: rows.len(),
            routed: (0, routed.len()),
            sq: root_sq,
            depth: 0,
            hist: root_hist,
        }];
        let mut best = Best {
            score: 0.0,
            feature: 0,
            bin: 0,
            missing_left: false,
            has_missing: false,
            left: vec![0.0; self.stride],
        };

        while let Some(pend) = stack.pop() {
            let Pending {
                node,
                start,
                end,
                routed: (r_start, r_end),
                sq,
                depth,
                hist,
            } = pend;
            sums.copy_from_slice(&node_sums[node * s..(node + 1) * s]);
            let m = end - start;
            let found = if self.splittable(m, depth) {
                self.find_split(
                    &sums,
                    sq,
                    hist.as_deref(),
                    rows[start..end].as_ref(),
                    rng,
                    &mut best,
                )
            } else {
                None
            };
            let Some(gain) = found else {
                if let Some(h) = hist {
                    self.pool.push(h);
                }
                nodes[node] = leaf_node(node as u32);
                let leaf = leaf_ranges.len() as u32;
                leaf_of_node[node] = leaf;
                leaf_ranges.push((start, end));
                routed_leaves.extend(routed[r_start..r_end].iter().map(|&r| (r, leaf)));
                continue;
            };
            gains[best.feature] += gain;

            // partition rows (stable) by the split
            let f = best.feature;
            let col = &self.data.codes[f * self.data.n..(f + 1) * self.data.n];
            let (bin, miss_left) = (best.bin, best.missing_left);
            let goes_left = |r: u32| {
                let c = col[r as usize];
                if c == MISSING_BIN {
                    miss_left
                } else {
                    c <= bin
                }
            };
            let q = &self.q[..];
            let (mut sq_l, mut sq_r) = (0.0, 0.0);
            let n_left = partition(&mut rows[start..end], &mut self.scratch, |r| {
                let left = goes_left(r);
                // the children's sums in row order, as they would sum them themselves
                let v = q[r as usize];
                sq_l += if left { v } else { 0.0 };
                sq_r += if left { 0.0 } else { v };
                left
            });
            let mid = start + n_left;
            let (m_left, m_right) = (mid - start, end - mid);

            node_sums.extend_from_slice(&best.left);
            node_sums.extend(sums.iter().zip(&best.left).map(|(t, l)| t - l));
            let missing_left = if best.has_missing {
                miss_left
            } else {
                m_left >= m_right
            };
            let (li, ri) = (nodes.len(), nodes.len() + 1);
            nodes[node] = Node {
                threshold: self.data.mapper.threshold(f, bin),
                packed: ((f as u32) << 1) | if missing_left { MISSING_LEFT } else { 0 },
                left: li as u32,
                right: ri as u32,
            };
            nodes.push(leaf_node(li as u32));
            nodes.push(leaf_node(ri as u32));
            leaf_of_node.push(NOT_LEAF);
            leaf_of_node.push(NOT_LEAF);
            let r_mid = r_start
                + partition(&mut routed[r_start..r_end], &mut self.scratch, |r| {
                    let c = col[r as usize];
                    if c == MISSING_BIN {
                        missing_left
                    } else {
                        c <= bin
                    }
                });

            // children's histograms: build the smaller child's, subtract for the larger
            let want_l = self.wants_hist(m_left, depth + 1);
            let want_r = self.wants_hist(m_right, depth + 1);
            let (mut hl, mut hr) = (None, None);
            match hist {
                Some(mut parent) if want_l || want_r => {
                    let left_small = m_left <= m_right;
                    let (s0, s1) = if left_small { (start, mid) } else { (mid, end) };
                    let mut small = self.take_hist();
                    self.build_hist(&rows[s0..s1], &mut small);
                    for (a, b) in parent.iter_mut().zip(&small) {
                        *a -= *b;
                    }
                    let (h_small, h_large) = (small, parent);
                    let (want_small, want_large) = if left_small {
                        (want_l, want_r)
                    } else {
                        (want_r, want_l)
                    };
                    let small_opt = if want_small {
                        Some(h_small)
                    } else {
                        self.pool.push(h_small);
                        None
                    };
                    let large_opt = if want_large {
                        Some(h_large)
                    } else {
                        self.pool.push(h_large);
                        None
                    };
                    if left_small {
                        (hl, hr) = (small_opt, large_opt);
                    } else {
                        (hl, hr) = (large_opt, small_opt);
                    }
                }
                Some(parent) => self.pool.push(parent),
                None => {
                    if want_l {
                        let mut h = self.take_hist();
                        self.build_hist(&rows[start..mid], &mut h);
                        hl = Some(h);
                    }
                    if want_r {
                        let mut h = self.take_hist();
                        self.build_hist(&rows[mid..end], &mut h);
                        hr = Some(h);
                    }
                }
            }
            // right pushed first so the left subtree is grown first
            stack.push(Pending {
                node: ri,
                start: mid,
                end,
                routed: (r_mid, r_end),
                sq: sq_r,
                depth: depth + 1,
                hist: hr,
            });
            stack.push(Pending {
                node: li,
                start,
                end: mid,
                routed: (r_start, r_mid),
                sq: sq_l,
                depth: depth + 1,
                hist: hl,
            });
        }

        Grown {
            tree: compact(&nodes, &leaf_of_node, self.k),
            rows,
            leaf_ranges,
            gains,
            routed: routed_leaves,
        }
    }

    #[inline(always)]
    fn scan_ctx(&mut self) -> ScanCtx<'_> {
        ScanCtx {
            k: self.k,
            min_leaf: self.params.min_samples_leaf as f64,
            acc: &mut self.acc,
            tmp: &mut self.tmp,
        }
    }

    #[inline(always)]
    fn wants_hist(&self, m: usize, depth: usize) -> bool {
        let min_rows = (HIST_ROWS_PER_TRIED * self.data.p
            / self.params.n_try.clamp(1, self.data.p))
        .max(HIST_MIN_ROWS);
        m >= min_rows && self.splittable(m, depth)
    }

    #[inline(always)]
    fn splittable(&self, m: usize, depth: usize) -> bool {
        depth < self.params.max_depth && m >= 2 * self.params.min_samples_leaf
    }

    #[inline(always)]
    fn take_hist(&mut self) -> Vec<f64> {
        let len = self.data.p * 256 * self.stride;
        match self.pool.pop() {
            Some(h) => h,
            None => vec![0.0; len],
        }
    }

    #[inline(always)]
    fn add_rows(&self, rows: &[u32], sums: &mut [f64]) {
        let k = self.k;
        for &r in rows {
            let r = r as usize;
            sums[0] += self.weight[r];
            for j in 0..k {
                sums[1 + j] += self.wy[r * k + j];
            }
            sums[k + 1] += 1.0;
        }
    }

    /// Per-feature, per-bin sums of weight, weighted targets and counts.
    #[inline(always)]
    fn build_hist(&self, rows: &[u32], h: &mut [f64]) {
        h.fill(0.0);
        let (n, k, s) = (self.data.n, self.k, self.stride);
        for f in 0..self.data.p {
            let col = &self.data.codes[f * n..(f + 1) * n];
            let hf = &mut h[f * 256 * s..(f + 1) * 256 * s];
            if k == 1 {
                for &r in rows {
                    let r = r as usize;
                    let b = col[r] as usize * 3;
                    hf[b] += self.weight[r];
                    hf[b + 1] += self.wy[r];
                    hf[b + 2] += 1.0;
                }
            } else {
                for &r in rows {
                    let r = r as usize;
                    let b = col[r] as usize * s;
                    hf[b] += self.weight[r];
                    for j in 0..k {
                        hf[b + 1 + j] += self.wy[r * k + j];
                    }
                    hf[b + k + 1] += 1.0;
                }
            }
        }
    }

    /// Finds the best split of a node; returns its gain (weighted SSE reduction) and fills
    /// `best`, or `None` when no split satisfies the limits or improves the fit.
    /// `sq` is the node's sum of weight times target squared (summed over outputs).
    #[inline(always)]
    fn find_split(
        &mut self,
        sums: &[f64],
        sq: f64,
        hist: Option<&[f64]>,
        rows: &[u32],
        rng: &mut StdRng,
        best: &mut Best,
    ) -> Option<f64> {
        let (k, s, p) = (self.k, self.stride, self.data.p);
        let w_tot = sums[0];
        if w_tot <= 0.0 {
            return None;
        }
        // the sum of squares tells a pure node and scales the gain tolerance
        let parent_score: f64 = (0..k).map(|j| sums[1 + j] * sums[1 + j] / w_tot).sum();
        let tol = 1e-12 * sq.abs().max(f64::MIN_POSITIVE);
        if sq - parent_score <= tol {
            return None;
        }
        best.score = f64::NEG_INFINITY;
        let all = self.params.n_try >= p;
        let mut tried = 0;
        for i in 0..p {
            if !all {
                let j = rng.random_range(i..p);
                self.order.swap(i, j);
            }
            let f = self.order[i];
            let nonconstant = match hist {
                Some(h) => {
                    let hf = &h[f * 256 * s..(f + 1) * 256 * s];
                    let nb = self.data.n_bins[f];
                    let miss_at = MISSING_BIN as usize * s;
                    let miss = &hf[miss_at..miss_at + s];
                    if k == 1 {
                        let miss = [miss[0], miss[1], miss[2]];
                        let pre = &mut *self.pre;
                        let mut acc = [0.0; 3];
                        let mut len = 0;
                        for (b, e) in hf[..3 * nb].chunks_exact(3).enumerate() {
                            if e[2] != 0.0 {
                                pre.push(&mut len, b as u8, &mut acc, [e[0], e[1], e[2]]);
                            }
                        }
                        let min_leaf = self.params.min_samples_leaf as f64;
                        scan1(min_leaf, f, pre, len, miss, sums, best)
                    } else {
                        scan(
                            &mut self.scan_ctx(),
                            f,
                            &IDENTITY[..nb],
                            &hf[..nb * s],
                            miss,
                            sums,
                            best,
                        )
                    }
                }
                None if k == 1 => self.small_split1(f, rows, sums, best),
                None => {
                    self.small_hist(f, rows);
                    let miss_at = MISSING_BIN as usize * s;
                    let mut ctx = ScanCtx {
                        k,
                        min_leaf: self.params.min_samples_leaf as f64,
                        acc: &mut self.acc,
                        tmp: &mut self.tmp,
                    };
                    let (fh, touched) = (&self.fh, &self.touched);
                    let r = scan(
                        &mut ctx,
                        f,
                        touched,
                        fh,
                        &fh[miss_at..miss_at + s],
                        sums,
                        best,
                    );
                    for &b in &self.touched {
                        self.fh[b as usize * s..(b as usize + 1) * s].fill(0.0);
                    }
                    self.fh[miss_at..miss_at + s].fill(0.0);
                    r
                }
            };
            if nonconstant {
                tried += 1;
                if tried >= self.params.n_try {
                    break;
                }
            }
        }
        let gain = best.score - parent_score;
        if best.score.is_finite() && gain > tol {
            Some(gain)
        } else {
            None
        }
    }

    /// Single-output split search on feature `f` for a small node: sums the rows by bin code
    /// into `fh1`, scans the bins that received rows in ascending order (a 256-bit set, so no
    /// sort is needed) and clears them again. Returns whether the feature is non-constant.
    #[inline(always)]
    fn small_split1(&mut self, f: usize, rows: &[u32], total: &[f64], best: &mut Best) -> bool {
        let n = self.data.n;
        let col = &self.data.codes[f * n..(f + 1) * n];
        let fh = &mut *self.fh1;
        let ww = &self.ww[..];
        let mut sets = [[0u64; 4]; 4];
        let mut add = |set: &mut [u64; 4], r: u32| {
            let r = r as usize;
            let b = col[r];
            let [w, wy] = ww[r];
            let e = &mut fh[b as usize];
            e[0] += w;
            e[1] += wy;
            e[2] += 1.0;
            set[(b >> 6) as usize] |= 1u64 << (b & 63);
        };
        // rows in order, four at a time so that each row's set is fixed
        let mut quads = rows.chunks_exact(4);
        for q in quads.by_ref() {
            for (set, &r) in sets.iter_mut().zip(q) {
                add(set, r);
            }
        }
        for &r in quads.remainder() {
            add(&mut sets[0], r);
        }
        let mut bits = union4(&sets);
        let miss = std::mem::take(&mut fh[MISSING_BIN as usize]);
        bits[3] &= !(1u64 << 63);
        // prefix sums over the bins holding rows, ascending, clearing each bin as it is read
        let pre = &mut *self.pre;
        let mut acc = [0.0; 3];
        let mut len = 0;
        for (wi, mut word) in bits.into_iter().enumerate() {
            while word != 0 {
                let b = wi * 64 + word.trailing_zeros() as usize;
                word &= word - 1;
                let e = std::mem::take(&mut fh[b]);
                pre.push(&mut len, b as u8, &mut acc, e);
            }
        }
        let min_leaf = self.params.min_samples_leaf as f64;
        scan1(min_leaf, f, pre, len, miss, total, best)
    }

    /// Sums the node's rows by bin code of feature `f` into `fh` and lists the non-missing
    /// bins that received rows, ascending, in `touched` (a 256-bit set walked in order, so no
    /// sort is needed).
    #[inline(always)]
    fn small_hist(&mut self, f: usize, rows: &[u32]) {
        let (n, k, s) = (self.data.n, self.k, self.stride);
        let col = &self.data.codes[f * n..(f + 1) * n];
        let mut sets = [[0u64; 4]; 4];
        let fh = &mut self.fh[..];
        for (i, &r) in rows.iter().enumerate() {
            let r = r as usize;
            let b = col[r] as usize;
            let h = &mut fh[b * s..(b + 1) * s];
            h[0] += self.weight[r];
            for j in 0..k {
                h[1 + j] += self.wy[r * k + j];
            }
            h[k + 1] += 1.0;
            sets[i & 3][b >> 6] |= 1u64 << (b & 63);
        }
        let mut bits = union4(&sets);
        bits[3] &= !(1u64 << 63); // the missing bin is handled apart
        self.touched.clear();
        for (wi, mut word) in bits.into_iter().enumerate() {
            while word != 0 {
                self.touched
                    .push((wi * 64 + word.trailing_zeros() as usize) as u8);
                word &= word - 1;
            }
        }
    }
}

/// Stable partition of `rows` by `goes_left` (called once per row, in order); returns the
/// number going left, which end up first. Branch-free: every row is written to both sides
/// and only its side's position advances.
#[inline(always)]
fn partition(
    rows: &mut [u32],
    scratch: &mut Vec<u32>,
    mut goes_left: impl FnMut(u32) -> bool,
) -> usize {
    scratch.clear();
    scratch.resize(rows.len(), 0);
    let (mut n_left, mut n_right) = (0, 0);
    for i in 0..rows.len() {
        let r = rows[i];
        let left = goes_left(r);
        rows[n_left] = r;
        scratch[n_right] = r;
        n_left += usize::from(left);
        n_right += usize::from(!left);
    }
    rows[n_left..].copy_from_slice(&scratch[..n_right]);
    n_left
}

/// Union of four 256-bit sets. Rows mark the bins they fall in round-robin in four sets,
/// so that consecutive rows setting bits in the same word do not wait on each other.
#[inline(always)]
fn union4(sets: &[[u64; 4]; 4]) -> [u64; 4] {
    std::array::from_fn(|w| sets[0][w] | sets[1][w] | sets[2][w] | sets[3][w])
}

/// Scratch and limits for [`scan`].
struct ScanCtx<'a> {
    k: usize,
    min_leaf: f64,
    acc: &'a mut [f64],
    tmp: &'a mut [f64],
}

/// Bin codes 0..=255, the entry ids of a dense histogram.
static IDENTITY: [u8; 256] = {
    let mut a = [0u8; 256];
    let mut i = 0;
    while i < 256 {
        a[i] = i as u8;
        i += 1;
    }
    a
};

/// Scans the non-missing bins `bins` (ascending codes) of feature `f`, whose sums sit in
/// `hist` at `code * (k + 2)`, trying a split after every non-empty bin with the missing
/// rows (`miss`) on either side, and records improvements in `best`. Returns whether the
/// feature is non-constant in the node (rows in two or more bins, counting the missing bin).
#[inline(always)]
fn scan(
    ctx: &mut ScanCtx<'_>,
    f: usize,
    bins: &[u8],
    hist: &[f64],
    miss: &[f64],
    total: &[f64],
    best: &mut Best,
) -> bool {
    let k = ctx.k;
    let s = k + 2;
    let min_leaf = ctx.min_leaf;
    let c_tot = total[k + 1];
    let c_miss = miss[k + 1];
    let mut nonempty = usize::from(c_miss > 0.0);
    ctx.acc.fill(0.0);
    for &b in bins {
        let entry = &hist[b as usize * s..(b as usize + 1) * s];
        if entry[k + 1] == 0.0 {
            continue;
        }
        nonempty += 1;
        for (a, v) in ctx.acc.iter_mut().zip(entry) {
            *a += v;
        }
        let c_left = ctx.acc[k + 1];
        if c_tot - c_left < min_leaf {
            // no later split leaves enough rows on the right; rows left over mean more bins
            return nonempty >= 2 || c_tot - c_left > 0.5;
        }
        // missing values to the right
        if c_left >= min_leaf {
            let sc = split_score(ctx.acc, total, k);
            if sc > best.score {
                best.score = sc;
                best.feature = f;
                best.bin = b;
                best.missing_left = false;
                best.has_missing = c_miss > 0.0;
                best.left.copy_from_slice(ctx.acc);
            }
        }
        // missing values to the left
        if c_miss > 0.0 && c_left + c_miss >= min_leaf && c_tot - c_left - c_miss >= min_leaf {
            for ((t, a), m) in ctx.tmp.iter_mut().zip(ctx.acc.iter()).zip(miss) {
                *t = a + m;
            }
            let sc = split_score(ctx.tmp, total, k);
            if sc > best.score {
                best.score = sc;
                best.feature = f;
                best.bin = b;
                best.missing_left = true;
                best.has_missing = true;
                best.left.copy_from_slice(ctx.tmp);
            }
        }
    }
    nonempty >= 2
}

/// Prefix sums of one feature's non-empty bins in a node (single output): entry `i` holds the
/// bin code and the sums of weight, weighted target and count over that bin and every
/// non-empty bin below it; `score` is scratch for [`scan1`].
struct Prefix1 {
    code: [u8; 256],
    w: [f64; 256],
    s: [f64; 256],
    c: [f64; 256],
    score: [f64; 256],
}

impl Prefix1 {
    /// Appends bin `code` with sums `e`, accumulating into `acc`; `len` is the entry count.
    #[inline(always)]
    fn push(&mut self, len: &mut usize, code: u8, acc: &mut [f64; 3], e: [f64; 3]) {
        acc[0] += e[0];
        acc[1] += e[1];
        acc[2] += e[2];
        let i = *len & 255;
        self.code[i] = code;
        self.w[i] = acc[0];
        self.s[i] = acc[1];
        self.c[i] = acc[2];
        *len += 1;
    }

    /// Scores the split after every entry with `add` (the missing rows, or zeros) joining
    /// the left side: `S_L^2 / W_L + S_R^2 / W_R`, or minus infinity where a side has too
    /// few rows or no weight. Returns the largest score and the first entry reaching it.
    /// Branch-free over the entries, so the loop runs at the division throughput.
    #[inline(always)]
    fn best_split(
        &mut self,
        len: usize,
        add: [f64; 3],
        min_leaf: f64,
        total: &[f64],
    ) -> (usize, f64) {
        let (w_tot, s_tot, c_tot) = (total[0], total[1], total[2]);
        let len = len.min(256);
        let score = &mut self.score[..len];
        let (w, s, c) = (&self.w[..len], &self.s[..len], &self.c[..len]);
        for i in 0..len {
            let (wl, sl, cl) = (w[i] + add[0], s[i] + add[1], c[i] + add[2]);
            let (wr, sr) = (w_tot - wl, s_tot - sl);
            // S_L^2 / W_L + S_R^2 / W_R with one division
            let v = (sl * sl * wr + sr * sr * wl) / (wl * wr);
            // `&` rather than `&&`, so that no branch splits the loop
            let ok = (cl >= min_leaf) & (c_tot - cl >= min_leaf) & (wl > 0.0) & (wr > 0.0);
            score[i] = if ok { v } else { f64::NEG_INFINITY };
        }
        first_max(score)
    }
}

/// The largest of `v` (no NaN) and the first index holding it; `(0, -inf)` when empty.
#[inline(always)]
fn first_max(v: &[f64]) -> (usize, f64) {
    let mut m = [f64::NEG_INFINITY; 4];
    let mut chunks = v.chunks_exact(4);
    for ch in chunks.by_ref() {
        for j in 0..4 {
            m[j] = if ch[j] > m[j] { ch[j] } else { m[j] };
        }
    }
    let mut mx = m[0].max(m[1]).max(m[2].max(m[3]));
    for &x in chunks.remainder() {
        mx = if x > mx { x } else { mx };
    }
    (v.iter().position(|&x| x == mx).unwrap_or(0), mx)
}

/// [`scan`] for a single output: `pre` holds the prefix sums of the `len` non-empty
/// non-missing bins of feature `f`; a split is tried after every bin with the missing rows
/// (`miss`) on either side, and an improvement is recorded in `best` (the first candidate
/// in bin order, missing rows right before left, reaching the largest score). Returns
/// whether the feature is non-constant in the node (rows in two or more bins, counting the
/// missing bin).
#[inline(always)]
fn scan1(
    min_leaf: f64,
    f: usize,
    pre: &mut Prefix1,
    len: usize,
    miss: [f64; 3],
    total: &[f64],
    best: &mut Best,
) -> bool {
    let c_miss = miss[2];
    if len + usize::from(c_miss > 0.0) < 2 {
        return false;
    }
    let (i_r, sc_r) = pre.best_split(len, [0.0; 3], min_leaf, total);
    let (i, sc, missing_left) = if c_miss > 0.0 {
        let (i_l, sc_l) = pre.best_split(len, miss, min_leaf, total);
        if sc_l > sc_r || (sc_l == sc_r && i_l < i_r) {
            (i_l, sc_l, true)
        } else {
            (i_r, sc_r, false)
        }
    } else {
        (i_r, sc_r, false)
    };
    if sc > best.score {
        let add = if missing_left { miss } else { [0.0; 3] };
        best.score = sc;
        best.feature = f;
        best.bin = pre.code[i];
        best.missing_left = missing_left;
        best.has_missing = c_miss > 0.0;
        best.left
            .copy_from_slice(&[pre.w[i] + add[0], pre.s[i] + add[1], pre.c[i] + add[2]]);
    }
    true
}

/// Sum over outputs of `S_L^2 / W_L + S_R^2 / W_R` (the split's between-child sum of squares
/// plus a constant): larger is a larger variance reduction.
#[inline(always)]
fn split_score(left: &[f64], total: &[f64], k: usize) -> f64 {
    let wl = left[0];
    let wr = total[0] - wl;
    if wl <= 0.0 || wr <= 0.0 {
        return f64::NEG_INFINITY;
    }
    let mut sc = 0.0;
    for j in 1..=k {
        let sl = left[j];
        let sr = total[j] - sl;
        sc += sl * sl / wl + sr * sr / wr;
    }
    sc
}

fn leaf_node(i: u32) -> Node {
    Node {
        threshold: f64::INFINITY,
        packed: MISSING_LEFT,
        left: i,
        right: i,
    }
}

/// Keeps the internal nodes of a grown tree (in growing order, so children still come after
/// their parents) and points their leaf children at `n_internal + leaf id`.
fn compact(nodes: &[Node], leaf_of_node: &[u32], k: usize) -> Tree {
    let mut new_index = vec![0u32; nodes.len()];
    let mut n_int = 0u32;
    for (i, &l) in leaf_of_node.iter().enumerate() {
        if l == NOT_LEAF {
            new_index[i] = n_int;
            n_int += 1;
        }
    }
    let map = |c: u32| match leaf_of_node[c as usize] {
        NOT_LEAF => new_index[c as usize],
        leaf => n_int + leaf,
    };
    let internal = nodes
        .iter()
        .zip(leaf_of_node)
        .filter(|(_, l)| **l == NOT_LEAF)
        .map(|(nd, _)| Node {
            left: map(nd.left),
            right: map(nd.right),
            ..*nd
        })
        .collect();
    Tree::new(internal, k, Vec::new())
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::SeedableRng;

    fn grow_simple(x: &Array2<f64>, y: &[f64], min_leaf: usize) -> Grown {
        let mapper = BinMapper::fit(x.view(), 255);
        let codes = mapper.transform(x.view());
        let data = Binned::new(&codes, x.nrows(), &mapper);
        let w = vec![1.0; x.nrows()];
        let rows: Vec<u32> = (0..x.nrows() as u32).collect();
        let params = GrowParams {
            max_depth: usize::MAX,
            min_samples_leaf: min_leaf,
            n_try: x.ncols(),
        };
        let mut rng = StdRng::seed_from_u64(1);
        grow(
            GrowJob {
                data: &data,
                targets: y,
                k: 1,
                weight: &w,
                rows,
                routed: Vec::new(),
                params: &params,
            },
            &mut rng,
        )
    }

    #[test]
    fn step_function_is_split_exactly() {
        let x = Array2::from_shape_fn((10, 1), |(i, _)| i as f64);
        let y: Vec<f64> = (0..10).map(|i| if i < 4 { 1.0 } else { 5.0 }).collect();
        let g = grow_simple(&x, &y, 1);
        assert_eq!(g.leaf_ranges.len(), 2);
        assert_eq!(g.tree.nodes()[0].threshold(), 3.5);
        assert_eq!(g.tree.apply(&[3.0]), g.tree.apply(&[0.0]));
        assert_ne!(g.tree.apply(&[4.0]), g.tree.apply(&[3.0]));
    }

    #[test]
    fn missing_values_learn_their_side() {
        // rows with NaN behave like the high group, so they must go right
        let xs = [0.0, 1.0, 2.0, 3.0, 10.0, 11.0, 12.0, f64::NAN, f64::NAN];
        let y = [0.0, 0.0, 0.0, 0.0, 9.0, 9.0, 9.0, 9.0, 9.0];
        let x = Array2::from_shape_vec((9, 1), xs.to_vec()).unwrap();
        let g = grow_simple(&x, &y, 1);
        assert_eq!(g.leaf_ranges.len(), 2);
        assert_eq!(g.tree.apply(&[f64::NAN]), g.tree.apply(&[11.0]));
    }

    #[test]
    fn block_walk_agrees_with_single_row_walk() {
        // missing values in both features, so splits learn both missing directions
        let n = 600;
        let x = Array2::from_shape_fn((n, 2), |(i, j)| {
            if (i + 3 * j) % 7 == 0 {
                f64::NAN
            } else {
                ((i * (13 + 17 * j)) % 97) as f64
            }
        });
        let y: Vec<f64> = (0..n)
            .map(|i| {
                let a = if x[[i, 0]].is_nan() { 200.0 } else { x[[i, 0]] };
                let b = if x[[i, 1]].is_nan() { -50.0 } else { x[[i, 1]] };
                a - b
            })
            .collect();
        let g = grow_simple(&x, &y, 2);
        let t = &g.tree;
        let ml = t.nodes().iter().filter(|nd| nd.missing_goes_left()).count();
        assert!(ml > 0 && ml < t.n_nodes());
        // query rows: training values, thresholds exactly, NaN and infinities
        let mut q: Vec<[f64; 2]> = (0..n).map(|i| [x[[i, 0]], x[[i, 1]]]).collect();
        for nd in t.nodes() {
            q.push([nd.threshold(), f64::NAN]);
            q.push([f64::NAN, nd.threshold()]);
        }
        q.push([f64::INFINITY, f64::NEG_INFINITY]);
        q.push([f64::NEG_INFINITY, f64::INFINITY]);
        let mut wide = Vec::new();
        for r in &q {
            for &v in r {
                super::super::push_wide(&mut wide, v);
            }
        }
        let mut out = vec![0u32; q.len()];
        t.apply_rows(&wide, 2, &mut out);
        for (r, &leaf) in q.iter().zip(&out) {
            assert_eq!(t.apply(r), leaf as usize, "row {r:?}");
        }
    }

    #[test]
    fn routed_rows_reach_the_leaf_of_their_raw_values() {
        // half the rows fit the tree, the other half (with missing values) are routed by bin
        // code; each must land where walking its raw values lands
        let n = 3000;
        let x = Array2::from_shape_fn((n, 3), |(i, j)| {
            if (i * 7 + j) % 11 == 0 {
                f64::NAN
            } else {
                ((i * (31 + 17 * j)) % 211) as f64 / 7.0
            }
        });
        let y: Vec<f64> = (0..n)
            .map(|i| x[[i, 0]].min(20.0) * 2.0 - x[[i, 1]].max(3.0) + (i % 5) as f64)
            .map(|v| if v.is_nan() { 1.0 } else { v })
            .collect();
        let mapper = BinMapper::fit(x.view(), 255);
        let codes = mapper.transform(x.view());
        let data = Binned::new(&codes, n, &mapper);
        let w = vec![1.0; n];
        let rows: Vec<u32> = (0..n as u32).filter(|r| r % 2 == 0).collect();
        let routed: Vec<u32> = (0..n as u32).filter(|r| r % 2 == 1).collect();
        let params = GrowParams {
            max_depth: usize::MAX,
            min_samples_leaf: 3,
            n_try: 2,
        };
        let mut rng = StdRng::seed_from_u64(7);
        let g = grow(
            GrowJob {
                data: &data,
                targets: &y,
                k: 1,
                weight: &w,
                rows,
                routed,
                params: &params,
            },
            &mut rng,
        );
        assert!(g.leaf_ranges.len() > 50);
        assert_eq!(g.routed.len(), n / 2);
        let mut seen = vec![false; n];
        for &(r, leaf) in &g.routed {
            let r = r as usize;
            assert!(r % 2 == 1 && !seen[r]);
            seen[r] = true;
            let row = [x[[r, 0]], x[[r, 1]], x[[r, 2]]];
            assert_eq!(g.tree.apply(&row), leaf as usize, "row {r}");
        }
    }

    #[test]
    fn compiled_copies_grow_the_same_tree() {
        // `grow` (the AVX2 copy where the processor has it) and the portable body must give
        // bit-identical trees: single and multi-output, missing values, large and small nodes
        let n = 5000;
        let x = Array2::from_shape_fn((n, 4), |(i, j)| {
            if (i * 3 + j) % 13 == 0 {
                f64::NAN
            } else {
                (((i * (37 + 11 * j)) % 1009) as f64).sqrt()
            }
        });
        let mapper = BinMapper::fit(x.view(), 255);
        let codes = mapper.transform(x.view());
        let data = Binned::new(&codes, n, &mapper);
        let w: Vec<f64> = (0..n).map(|i| 1.0 + (i % 3) as f64).collect();
        for k in [1usize, 2] {
            let y: Vec<f64> = (0..n * k)
                .map(|i| ((i * 7919) % 613) as f64 / 61.0 + x[[i / k, 0]].min(9.0))
                .map(|v| if v.is_nan() { 0.5 } else { v })
                .collect();
            let rows: Vec<u32> = (0..n as u32).filter(|r| r % 5 != 0).collect();
            let routed: Vec<u32> = (0..n as u32).filter(|r| r % 5 == 0).collect();
            let params = GrowParams {
                max_depth: usize::MAX,
                min_samples_leaf: 2,
                n_try: 3,
            };
            let run = |portable: bool| {
                let mut rng = StdRng::seed_from_u64(11);
                let job = GrowJob {
                    data: &data,
                    targets: &y,
                    k,
                    weight: &w,
                    rows: rows.clone(),
                    routed: routed.clone(),
                    params: &params,
                };
                if portable {
                    grow_any(job, &mut rng)
                } else {
                    grow(job, &mut rng)
                }
            };
            let (a, b) = (run(false), run(true));
            assert!(a.leaf_ranges.len() > 100);
            assert_eq!(a.tree.nodes(), b.tree.nodes());
            assert_eq!(a.rows, b.rows);
            assert_eq!(a.leaf_ranges, b.leaf_ranges);
            assert_eq!(a.routed, b.routed);
            let bits = |g: &[f64]| g.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&a.gains), bits(&b.gains));
        }
    }

    #[test]
    fn histogram_and_sorted_paths_agree() {
        // a large node (histogram path) must pick the same first split as the exact scan
        let n = 2000;
        let x = Array2::from_shape_fn((n, 3), |(i, j)| ((i * (7 + 13 * j)) % 101) as f64);
        let y: Vec<f64> = (0..n)
            .map(|i| (x[[i, 1]] - 50.0).abs() + 0.1 * x[[i, 0]])
            .collect();
        let g = grow_simple(&x, &y, 5);
        // exact best threshold on feature 1 by brute force
        let mut best = (f64::NEG_INFINITY, 0.0);
        for t in 0..100 {
            let t = t as f64 + 0.5;
            let (mut sl, mut nl, mut sr, mut nr) = (0.0, 0.0, 0.0, 0.0);
            for i in 0..n {
                if x[[i, 1]] <= t {
                    sl += y[i];
                    nl += 1.0;
                } else {
                    sr += y[i];
                    nr += 1.0;
                }
            }
            if nl >= 5.0 && nr >= 5.0 {
                let sc = sl * sl / nl + sr * sr / nr;
                if sc > best.0 {
                    best = (sc, t);
                }
            }
        }
        let root = g.tree.nodes()[0];
        assert_eq!(root.feature(), 1);
        assert_eq!(root.threshold(), best.1);
        let total: usize = g.leaf_ranges.iter().map(|(a, b)| b - a).sum();
        assert_eq!(total, n);
    }
}
