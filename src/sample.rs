//! Attribute extraction at wells into a training set, and node feature tables for prediction.
//!
//! One training row per (well, step): the step's attribute maps read at the well's penetration point
//! (bilinear interpolation, or the mean of the non-null nodes within a radius), then the step index as
//! a feature, the measured targets (`NaN` = not measured), the well as the group, the coordinates
//! and the row weight. A row that cannot be used — the point lies outside the grid, the extraction
//! meets a null node, or no target was measured — is left out and reported as a [`SampleWarning`],
//! never dropped silently.

use crate::grid::Grid;
use crate::project::{Extract, Survey};
use ndarray::Array2;
use std::collections::{HashMap, HashSet};
use std::fmt;

/// Name of the step feature, the last feature column.
pub const STEP_FEATURE: &str = "step";

/// Name of attribute `name` smoothed by a Gaussian of `width` metres, e.g. `near_amp~150m`.
pub fn smoothed_name(name: &str, width: f64) -> String {
    format!("{name}~{width}m")
}

/// The attribute a feature name stands for: `name` itself, or the attribute it smooths.
pub fn attribute_of(feature: &str) -> &str {
    feature.split_once('~').map_or(feature, |(a, _)| a)
}

/// Training rows at wells.
#[derive(Clone, Debug, PartialEq)]
pub struct TrainingSet {
    /// Feature names: the attributes in project order, then `"step"`.
    pub feature_names: Vec<String>,
    /// Features, rows x features.
    pub x: Array2<f64>,
    /// Target names in project order.
    pub target_names: Vec<String>,
    /// Targets, rows x targets; `NaN` = not measured.
    pub y: Array2<f64>,
    /// Well index of each row (into `well_names`).
    pub group: Vec<usize>,
    /// Names of the wells with at least one row, in order of first appearance in the CSV.
    pub well_names: Vec<String>,
    /// Step index of each row.
    pub step: Vec<usize>,
    /// Penetration point of each row.
    pub xy: Vec<[f64; 2]>,
    /// Row weights.
    pub weight: Vec<f64>,
    /// The attributes smoothed at each of the project's smoothing widths (`[smoothing]`), read at
    /// the same points: `(width in metres, rows x attributes)`, ascending in width. Empty when
    /// smoothing is off. [`TrainingSet::at_width`] swaps one of them in for the attributes.
    pub smoothed: Vec<(f64, Array2<f64>)>,
}

impl TrainingSet {
    /// Number of rows.
    pub fn n_rows(&self) -> usize {
        self.x.nrows()
    }

    /// Number of wells with at least one row.
    pub fn n_wells(&self) -> usize {
        self.well_names.len()
    }

    /// Rows where target `t` was measured.
    pub fn rows_with_target(&self, t: usize) -> Vec<usize> {
        (0..self.n_rows())
            .filter(|&r| !self.y[[r, t]].is_nan())
            .collect()
    }

    /// The training set a target sees when it smooths its attributes by `width` metres: the same
    /// rows, the plain attributes, then the attributes smoothed by `width` (named
    /// [`smoothed_name`]), then the step; no further widths. The trees pick either at every
    /// split, so a sharp peak stays visible in the plain column while the smoothed one carries
    /// the local average. `width <= 0` gives the plain attributes. `None` when `width` is not one
    /// of [`TrainingSet::smoothed`]'s.
    pub fn at_width(&self, width: f64) -> Option<TrainingSet> {
        let mut out = TrainingSet {
            smoothed: Vec::new(),
            ..self.clone()
        };
        if width > 0.0 {
            let (_, block) = self.smoothed.iter().find(|(w, _)| *w == width)?;
            let na = self.x.ncols().saturating_sub(1);
            out.x = ndarray::concatenate(
                ndarray::Axis(1),
                &[
                    self.x.slice(ndarray::s![.., ..na]),
                    block.view(),
                    self.x.slice(ndarray::s![.., na..]),
                ],
            )
            .ok()?;
            let mut names = self.feature_names[..na].to_vec();
            names.extend(
                self.feature_names[..na]
                    .iter()
                    .map(|n| smoothed_name(n, width)),
            );
            names.extend(self.feature_names[na..].iter().cloned());
            out.feature_names = names;
        }
        Some(out)
    }

    /// Multiplies every attribute value (every feature column but the step, the last one) by
    /// `1 + eps u`, `u` uniform in `[-1, 1]` drawn in row then column order from `seed`.
    ///
    /// This is the stability experiment of the calibration: a band that moves when the
    /// training attributes move by rounding (`eps = 1e-6`) depends on near-ties, not on the
    /// data. Missing values stay missing.
    pub fn perturb_attributes(&mut self, eps: f64, seed: u64) {
        use rand::{RngExt, SeedableRng};
        let n_attr = self.x.ncols().saturating_sub(1);
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
        for r in 0..self.x.nrows() {
            for c in 0..n_attr {
                let u: f64 = rng.random_range(-1.0..=1.0);
                self.x[[r, c]] *= 1.0 + eps * u;
            }
        }
        // The smoothed copies move with the maps they come from, by draws of their own.
        for (_, block) in &mut self.smoothed {
            block.mapv_inplace(|v| v * (1.0 + eps * rng.random_range(-1.0..=1.0)));
        }
    }
}

/// A well row left out of training, and why.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct SampleWarning {
    /// Well name.
    pub well: String,
    /// Step name.
    pub step: String,
    /// Why the row was left out.
    pub reason: String,
    /// The kind of reason, the same for every row left out for the same cause (the reason
    /// without the row's own numbers), so that many rows can be reported as one.
    #[serde(default)]
    pub kind: String,
}

impl fmt::Display for SampleWarning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "well '{}' step '{}' left out: {}",
            self.well, self.step, self.reason
        )
    }
}

/// Why a point cannot be used: its reason in words and the kind of reason (the same for every
/// point left out for the same cause).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Unusable {
    /// The reason, with the point's numbers.
    pub reason: String,
    /// The kind of reason, without them.
    pub kind: String,
}

/// The kind of reason of a point outside the grid whose x and y, swapped, lie inside.
pub const SWAPPED_XY: &str = "point outside the grid (inside with x and y swapped)";

/// Reads every map of a step at `(x, y)`. `Err` carries the reason the point cannot be used: the
/// point lies outside the hull of the grid nodes (with a hint when swapping x and y would put it
/// inside), or the named attribute meets a null node.
pub fn extract_point(
    grid: &Grid,
    extract: &Extract,
    maps: &[Vec<f64>],
    attribute_names: &[String],
    x: f64,
    y: f64,
) -> Result<Vec<f64>, String> {
    extract_checked(grid, extract, maps, attribute_names, x, y).map_err(|u| u.reason)
}

/// As [`extract_point`], with the kind of reason.
pub fn extract_checked(
    grid: &Grid,
    extract: &Extract,
    maps: &[Vec<f64>],
    attribute_names: &[String],
    x: f64,
    y: f64,
) -> Result<Vec<f64>, Unusable> {
    if !grid.contains(x, y) {
        return Err(if grid.contains(y, x) {
            Unusable {
                reason: format!(
                    "point ({x}, {y}) lies outside the grid, but ({y}, {x}) would lie inside: \
                     are x and y swapped?"
                ),
                kind: SWAPPED_XY.into(),
            }
        } else {
            Unusable {
                reason: format!("point ({x}, {y}) lies outside the grid"),
                kind: "point outside the grid".into(),
            }
        });
    }
    let mut out = Vec::with_capacity(maps.len());
    for (k, map) in maps.iter().enumerate() {
        let name = attribute_names.get(k).map_or("?", String::as_str);
        let v = match *extract {
            Extract::Bilinear => grid.bilinear(map, x, y).ok_or_else(|| Unusable {
                reason: format!("attribute '{name}' has a null node next to ({x}, {y})"),
                kind: format!("attribute '{name}' has a null node next to the point"),
            })?,
            Extract::Mean { radius } => {
                grid.window_mean(map, x, y, radius)
                    .ok_or_else(|| Unusable {
                        reason: format!(
                            "attribute '{name}' has no non-null node within {radius} of ({x}, {y})"
                        ),
                        kind: format!("attribute '{name}' has no non-null node within {radius}"),
                    })?
            }
        };
        out.push(v);
    }
    Ok(out)
}

/// Builds the training set at the wells, with a warning for every row left out.
pub fn at_wells(survey: &Survey) -> (TrainingSet, Vec<SampleWarning>) {
    let p = &survey.project;
    let na = p.attribute_names.len();
    let nt = p.targets.len();
    let file = p
        .wells
        .file
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let mut warnings = Vec::new();
    let mut feats: Vec<f64> = Vec::new();
    let mut targs: Vec<f64> = Vec::new();
    let mut well_names: Vec<String> = Vec::new();
    // Well name -> index into `well_names` (a hash map keeps grouping linear in the rows).
    let mut well_index: HashMap<&str, usize> = HashMap::new();
    let (mut group, mut step, mut xy, mut weight) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for rec in &survey.wells {
        let warn = |u: Unusable| SampleWarning {
            well: rec.well.clone(),
            step: rec.step.clone(),
            reason: format!("{} ({file} line {})", u.reason, rec.line),
            kind: u.kind,
        };
        let plain = |reason: &str| Unusable {
            reason: reason.to_string(),
            kind: reason.to_string(),
        };
        let Some(s) = p.step_index(&rec.step) else {
            warnings.push(warn(plain("step not in the manifest")));
            continue;
        };
        if rec.targets.iter().all(|v| v.is_nan()) {
            warnings.push(warn(plain("no target value measured")));
            continue;
        }
        let Some(maps) = survey.maps.get(s).filter(|m| m.len() == na) else {
            warnings.push(warn(plain(&format!(
                "the survey does not hold {na} maps for this step"
            ))));
            continue;
        };
        match extract_checked(&p.grid, &p.extract, maps, &p.attribute_names, rec.x, rec.y) {
            Err(u) => warnings.push(warn(u)),
            Ok(values) => {
                let g = *well_index.entry(rec.well.as_str()).or_insert_with(|| {
                    well_names.push(rec.well.clone());
                    well_names.len() - 1
                });
                feats.extend(values);
                feats.push(s as f64);
                targs.extend((0..nt).map(|t| rec.targets.get(t).copied().unwrap_or(f64::NAN)));
                group.push(g);
                step.push(s);
                xy.push([rec.x, rec.y]);
                weight.push(rec.weight);
            }
        }
    }
    let rows = group.len();
    let mut feature_names = p.attribute_names.clone();
    feature_names.push(STEP_FEATURE.to_string());
    let x =
        Array2::from_shape_vec((rows, na + 1), feats).expect("each kept row has na + 1 features");
    let y = Array2::from_shape_vec((rows, nt), targs).expect("each kept row has nt targets");
    let smoothed = smoothed_at(survey, &step, &xy);
    let set = TrainingSet {
        feature_names,
        x,
        target_names: p.targets.iter().map(|t| t.name.clone()).collect(),
        y,
        group,
        well_names,
        step,
        xy,
        weight,
        smoothed,
    };
    (set, warnings)
}

/// The attributes of each row smoothed at every width of the project's `[smoothing]`, centred on
/// the row's point ([`crate::smooth::at_point`], the same sums the node maps get). A point whose
/// plain extraction succeeded always has a non-null node in reach, so every value is finite.
fn smoothed_at(survey: &Survey, step: &[usize], xy: &[[f64; 2]]) -> Vec<(f64, Array2<f64>)> {
    use rayon::prelude::*;
    let p = &survey.project;
    let na = p.attribute_names.len();
    p.smoothing
        .iter()
        .map(|&width| {
            let values: Vec<f64> = step
                .par_iter()
                .zip(xy)
                .flat_map_iter(|(&s, &[x, y])| {
                    (0..na).map(move |a| {
                        crate::smooth::at_point(&p.grid, &survey.maps[s][a], x, y, width)
                            .unwrap_or(f64::NAN)
                    })
                })
                .collect();
            let block = Array2::from_shape_vec((step.len(), na), values)
                .expect("each row has one value per attribute");
            (width, block)
        })
        .collect()
}

/// Distinct (well, x, y) positions of the survey's well records, in file order (linear time: a
/// well that keeps its position across steps is listed once).
pub fn well_positions(survey: &Survey) -> Vec<(String, f64, f64)> {
    let mut seen: HashSet<(&str, u64, u64)> = HashSet::new();
    let mut out = Vec::new();
    for r in &survey.wells {
        // Positions compare as in `==` on the numbers (-0 and 0 alike; NaN never occurs).
        let key = (
            r.well.as_str(),
            (r.x + 0.0).to_bits(),
            (r.y + 0.0).to_bits(),
        );
        if seen.insert(key) {
            out.push((r.well.clone(), r.x, r.y));
        }
    }
    out
}

/// Feature table of every node of one step: one row per node in index order, the attributes in
/// project order then the step index (same columns as [`TrainingSet::x`]). Null nodes hold `NaN`.
///
/// # Panics
/// If `step` is not a step of the survey.
pub fn node_features(survey: &Survey, step: usize) -> Array2<f64> {
    let maps = &survey.maps[step];
    let n = survey.project.grid.len();
    let na = maps.len();
    let mut x = Array2::from_elem((n, na + 1), f64::NAN);
    for (a, map) in maps.iter().enumerate() {
        for (r, &v) in map.iter().enumerate().take(n) {
            x[[r, a]] = v;
        }
    }
    x.column_mut(na).fill(step as f64);
    x
}

/// The node feature table of a target that smooths by `width` metres (the columns of
/// [`TrainingSet::at_width`]): the plain attributes, every attribute map of the step smoothed
/// ([`crate::smooth::smooth_map`]), then the step index. `width <= 0` is [`node_features`].
///
/// # Panics
/// If `step` is not a step of the survey.
pub fn node_features_at(survey: &Survey, step: usize, width: f64) -> Array2<f64> {
    let plain = node_features(survey, step);
    if width <= 0.0 {
        return plain;
    }
    let na = plain.ncols() - 1;
    ndarray::concatenate(
        ndarray::Axis(1),
        &[
            plain.slice(ndarray::s![.., ..na]),
            smoothed_attributes(survey, step, width).view(),
            plain.slice(ndarray::s![.., na..]),
        ],
    )
    .expect("both tables have one row per node")
}

/// Every attribute map of a step smoothed by a Gaussian of `width` metres
/// ([`crate::smooth::smooth_map`]): one row per node, one column per attribute.
///
/// # Panics
/// If `step` is not a step of the survey.
pub fn smoothed_attributes(survey: &Survey, step: usize, width: f64) -> Array2<f64> {
    let maps = &survey.maps[step];
    let grid = &survey.project.grid;
    let n = grid.len();
    let mut x = Array2::from_elem((n, maps.len()), f64::NAN);
    for (a, map) in maps.iter().enumerate() {
        let smooth = crate::smooth::smooth_map(grid, map, width);
        for (r, s) in smooth.into_iter().enumerate().take(n) {
            x[[r, a]] = s;
        }
    }
    x
}

/// A seeded random sample of at most `max_rows` (node, step) pairs of the survey's grid, as
/// feature rows like [`node_features`]'s. Only nodes where at least one attribute is not null
/// count (the mapped population); every step is sampled alike. The pairs are drawn without
/// replacement and kept in (step, node) order, so the table depends on the seed alone.
pub fn node_sample(survey: &Survey, max_rows: usize, seed: u64) -> Array2<f64> {
    use rand::seq::index::sample;
    use rand::{SeedableRng, rngs::StdRng};
    let n = survey.project.grid.len();
    // Pair (step s, node) is kept as s * n + node.
    let mut pairs: Vec<usize> = Vec::new();
    for (s, maps) in survey.maps.iter().enumerate() {
        for node in 0..n {
            if maps
                .iter()
                .any(|m| m.get(node).is_some_and(|v| !v.is_nan()))
            {
                pairs.push(s * n + node);
            }
        }
    }
    let take = max_rows.min(pairs.len());
    let mut picked: Vec<usize> = sample(&mut StdRng::seed_from_u64(seed), pairs.len(), take)
        .into_iter()
        .collect();
    picked.sort_unstable();
    let na = survey.maps.first().map_or(0, |m| m.len());
    let mut x = Array2::from_elem((take, na + 1), f64::NAN);
    for (r, &k) in picked.iter().enumerate() {
        let (s, node) = (pairs[k] / n, pairs[k] % n);
        for (a, map) in survey.maps[s].iter().enumerate() {
            x[[r, a]] = map.get(node).copied().unwrap_or(f64::NAN);
        }
        x[[r, na]] = s as f64;
    }
    x
}
