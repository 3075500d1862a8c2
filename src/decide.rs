//! Risked infill-target ranking.
//!
//! The chance of a favourable outcome at a node (for example the probability of *not* being swept,
//! one minus the calibrated exceedance probability of a water-saturation threshold) is combined with
//! the in-place volume around it. The risked value of a candidate location is the expected
//! favourable volume inside its drainage radius, the usual risked-volume product of a chance of
//! success and a volume (e.g. Rose, "Risk Analysis and Management of Petroleum Exploration
//! Ventures", AAPG Methods in Exploration 12, 2001, for chance-weighted volumes):
//!
//! `risked(c) = sum over nodes k with |x_k - x_c| <= R of chance_k * volume_k`
//!
//! Candidates are taken greedily in decreasing risked value, skipping nodes outside the area of
//! applicability, nodes closer than a minimum spacing to an existing well, and nodes closer than a
//! minimum spacing to a target already taken. Ties are broken by node index so that the list is
//! the same for any thread count.
//!
//! The list is written as `targets.csv` ([`to_csv`], through a CSV writer) with its step,
//! criterion, volume unit and coordinate system ([`TargetsTable`]), and described column by
//! column in the sidecar `targets.json`.

use crate::grid::Grid;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Settings of the ranking (checked by [`InfillSettings::check`]).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct InfillSettings {
    /// Drainage radius in metres, > 0.
    pub drainage_radius: f64,
    /// Minimum distance from an existing well in metres, >= 0.
    pub min_well_spacing: f64,
    /// Minimum distance between two targets in metres, >= 0.
    pub min_target_spacing: f64,
    /// Number of targets to list, >= 1.
    pub count: usize,
}

/// Errors of the ranking.
#[derive(Debug, thiserror::Error)]
pub enum DecideError {
    /// A setting is out of its range.
    #[error("infill setting {key} must be {expected}, got {got}")]
    Setting {
        /// Manifest key.
        key: &'static str,
        /// What is allowed.
        expected: &'static str,
        /// Value given.
        got: f64,
    },
    /// A map does not have one value per grid node.
    #[error("{what} has {got} values, the grid has {expected} nodes")]
    Shape {
        /// Which input.
        what: &'static str,
        /// Grid nodes.
        expected: usize,
        /// Values given.
        got: usize,
    },
}

impl InfillSettings {
    /// Checks every setting.
    pub fn check(&self) -> Result<(), DecideError> {
        if !(self.drainage_radius.is_finite() && self.drainage_radius > 0.0) {
            return Err(DecideError::Setting {
                key: "drainage_radius",
                expected: "a positive number of metres",
                got: self.drainage_radius,
            });
        }
        for (key, v) in [
            ("min_well_spacing", self.min_well_spacing),
            ("min_target_spacing", self.min_target_spacing),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(DecideError::Setting {
                    key,
                    expected: "zero or a positive number of metres",
                    got: v,
                });
            }
        }
        if self.count == 0 {
            return Err(DecideError::Setting {
                key: "count",
                expected: "at least 1",
                got: 0.0,
            });
        }
        Ok(())
    }
}

/// One ranked target.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Target {
    /// Rank, 1 is best.
    pub rank: usize,
    /// World x of the node.
    pub x: f64,
    /// World y of the node.
    pub y: f64,
    /// Chance of a favourable outcome at the node.
    pub chance: f64,
    /// Expected favourable volume inside the drainage radius.
    pub risked_volume: f64,
    /// Name of the nearest existing well (empty when there are none).
    pub nearest_well: String,
    /// Distance to the nearest existing well in metres (infinite when there are none).
    pub nearest_distance: f64,
    /// Whether the node lies inside the area of applicability (always true for a listed target).
    pub inside: bool,
    /// Fraction of the drainage area's nodes inside the area of applicability.
    pub drainage_inside_fraction: f64,
}

/// Inputs of the ranking, one value per grid node.
pub struct RankInputs<'a> {
    /// The grid.
    pub grid: &'a Grid,
    /// Chance of a favourable outcome per node (`NaN` = no prediction).
    pub chance: &'a [f64],
    /// In-place volume per node; `None` counts every node as 1.
    pub volume: Option<&'a [f64]>,
    /// Inside the area of applicability per node.
    pub inside: &'a [bool],
    /// Existing wells: name, x, y.
    pub wells: &'a [(String, f64, f64)],
}

/// Half-widths of the drainage disc, one per row offset `dj` in `-rj..=rj`: node `(i + di, j + dj)`
/// lies within `radius` of node `(i, j)` when `|di| <= half[dj + rj]` (grid distances, as
/// `(di dx)^2 + (dj dy)^2 <= radius^2`). Offsets beyond the grid's extent are dropped: they can
/// never hold a node.
fn disc_rows(grid: &Grid, radius: f64) -> (isize, Vec<isize>) {
    let cap_i = grid.nx.saturating_sub(1) as f64;
    let cap_j = grid.ny.saturating_sub(1) as f64;
    let rj = (radius / grid.dy).floor().min(cap_j) as isize;
    let r2 = radius * radius;
    let half = (-rj..=rj)
        .map(|dj| {
            let ey = dj as f64 * grid.dy;
            let mut w = ((r2 - ey * ey).max(0.0).sqrt() / grid.dx)
                .floor()
                .min(cap_i) as isize;
            // Guard the square root's rounding at the disc's edge.
            while w > 0 && (w as f64 * grid.dx).powi(2) + ey * ey > r2 {
                w -= 1;
            }
            while w < cap_i as isize && ((w + 1) as f64 * grid.dx).powi(2) + ey * ey <= r2 {
                w += 1;
            }
            w
        })
        .collect();
    (rj, half)
}

/// Ranks candidate infill locations. Returns at most `settings.count` targets, best first.
///
/// The drainage sums use running sums along each grid row, so the cost is one addition per node
/// and row of the disc (not per node of it): `O(nodes x disc rows)`.
pub fn rank_targets(
    inputs: &RankInputs,
    settings: &InfillSettings,
) -> Result<Vec<Target>, DecideError> {
    settings.check()?;
    let grid = inputs.grid;
    let n = grid.nx.checked_mul(grid.ny).ok_or(DecideError::Shape {
        what: "grid",
        expected: usize::MAX,
        got: 0,
    })?;
    for (what, got) in [
        ("chance map", inputs.chance.len()),
        ("applicability mask", inputs.inside.len()),
        ("volume map", inputs.volume.map_or(n, <[f64]>::len)),
    ] {
        if got != n {
            return Err(DecideError::Shape {
                what,
                expected: n,
                got,
            });
        }
    }
    let (rj, half) = disc_rows(grid, settings.drainage_radius);
    let value = |k: usize| -> f64 {
        let c = inputs.chance[k];
        let v = inputs.volume.map_or(1.0, |m| m[k]);
        if c.is_finite() && v.is_finite() {
            c * v
        } else {
            0.0
        }
    };
    let nx = grid.nx;
    // Running sums along each row: `sums[j * (nx + 1) + i]` is the sum over nodes 0..i of row j.
    let mut sums = vec![0.0; (nx + 1) * grid.ny];
    let mut insides = vec![0u32; (nx + 1) * grid.ny];
    // Nodes with a non-zero value, so that a disc without any sums to exactly zero.
    let mut nonzero = vec![0u32; (nx + 1) * grid.ny];
    for j in 0..grid.ny {
        let base = j * (nx + 1);
        for i in 0..nx {
            let k = j * nx + i;
            let v = value(k);
            sums[base + i + 1] = sums[base + i] + v;
            insides[base + i + 1] = insides[base + i] + u32::from(inputs.inside[k]);
            nonzero[base + i + 1] = nonzero[base + i] + u32::from(v != 0.0);
        }
    }
    let (nxi, nyi) = (nx as isize, grid.ny as isize);
    // Risked volume and the inside fraction of the drainage disc, per node.
    let scored: Vec<(f64, f64)> = (0..n)
        .into_par_iter()
        .map(|k| {
            let (i, j) = grid.ij(k);
            let (i, j) = (i as isize, j as isize);
            let (mut sum, mut inside, mut count, mut any) = (0.0, 0u64, 0u64, false);
            for (r, &w) in half.iter().enumerate() {
                let b = j + r as isize - rj;
                if b < 0 || b >= nyi {
                    continue;
                }
                let (lo, hi) = ((i - w).max(0), (i + w).min(nxi - 1));
                let base = b as usize * (nx + 1);
                let (lo, hi) = (base + lo as usize, base + hi as usize + 1);
                sum += sums[hi] - sums[lo];
                inside += u64::from(insides[hi] - insides[lo]);
                any |= nonzero[hi] != nonzero[lo];
                count += (hi - lo) as u64;
            }
            let sum = if any { sum } else { 0.0 };
            (sum, inside as f64 / count.max(1) as f64)
        })
        .collect();
    let nearest = |x: f64, y: f64| -> (String, f64) {
        inputs
            .wells
            .iter()
            .map(|(name, wx, wy)| (name, (wx - x).hypot(wy - y)))
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .map_or((String::new(), f64::INFINITY), |(n, d)| (n.clone(), d))
    };
    let mut order: Vec<usize> = (0..n)
        .filter(|&k| inputs.inside[k] && inputs.chance[k].is_finite() && scored[k].0 > 0.0)
        .collect();
    order.sort_by(|&a, &b| scored[b].0.total_cmp(&scored[a].0).then(a.cmp(&b)));
    let mut taken: Vec<Target> = Vec::new();
    for k in order {
        if taken.len() == settings.count {
            break;
        }
        let (i, j) = grid.ij(k);
        let (x, y) = grid.node_xy(i, j);
        let (well, dist) = nearest(x, y);
        if dist < settings.min_well_spacing {
            continue;
        }
        if taken
            .iter()
            .any(|t| (t.x - x).hypot(t.y - y) < settings.min_target_spacing)
        {
            continue;
        }
        taken.push(Target {
            rank: taken.len() + 1,
            x,
            y,
            chance: inputs.chance[k],
            risked_volume: scored[k].0,
            nearest_well: well,
            nearest_distance: dist,
            inside: true,
            drainage_inside_fraction: scored[k].1,
        });
    }
    Ok(taken)
}

/// What a list of targets is about, written beside it: the CSV's `step`, `criterion`,
/// `volume_unit` and `crs` columns and the sidecar description ([`TargetsTable::sidecar`]).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct TargetsTable {
    /// Step ranked on.
    pub step: String,
    /// Label of the threshold whose non-crossing is the favourable outcome; names the chance
    /// column `p_not_<label>`.
    pub threshold_label: String,
    /// The favourable outcome in words, e.g. "dSw not above 0.1 (not swept)".
    pub criterion: String,
    /// Unit of the risked volume (the volume map's unit, or "nodes" without a volume map).
    pub volume_unit: String,
    /// Coordinate system of x and y, e.g. "EPSG:32631" or "local coordinates (no EPSG code)".
    pub crs: String,
}

/// The coordinate system of a grid's x and y in words: `EPSG:<code>`, or local coordinates.
pub fn crs_label(grid: &Grid) -> String {
    grid.epsg.map_or_else(
        || "local coordinates (no EPSG code)".to_string(),
        |c| format!("EPSG:{c}"),
    )
}

impl TargetsTable {
    /// Name of the chance column: `p_not_<threshold label>`.
    pub fn chance_column(&self) -> String {
        format!("p_not_{}", self.threshold_label)
    }

    /// The CSV header, in column order.
    pub fn columns(&self) -> Vec<String> {
        [
            "rank",
            "step",
            "x",
            "y",
            &self.chance_column(),
            "risked_volume",
            "volume_unit",
            "nearest_well",
            "nearest_well_distance",
            "inside_applicability",
            "drainage_inside_fraction",
            "criterion",
            "crs",
        ]
        .iter()
        .map(|c| c.to_string())
        .collect()
    }

    /// The sidecar description (`targets.json`): what each column holds, the step, criterion,
    /// units and coordinate system, and the targets themselves.
    pub fn sidecar(&self, targets: &[Target]) -> serde_json::Value {
        let chance = self.chance_column();
        let described = [
            ("rank", "1 is the best target".to_string()),
            ("step", "step the ranking used".to_string()),
            ("x", format!("world x of the node ({})", self.crs)),
            ("y", format!("world y of the node ({})", self.crs)),
            (
                chance.as_str(),
                format!(
                    "probability at the node that {}, at step {}",
                    self.criterion, self.step
                ),
            ),
            (
                "risked_volume",
                format!(
                    "sum over the nodes within the drainage radius of {chance} x volume ({})",
                    self.volume_unit
                ),
            ),
            ("volume_unit", "unit of risked_volume".to_string()),
            (
                "nearest_well",
                "name of the nearest existing well".to_string(),
            ),
            (
                "nearest_well_distance",
                "distance to that well, world units (empty without wells)".to_string(),
            ),
            (
                "inside_applicability",
                "1 when the node lies inside the area of applicability".to_string(),
            ),
            (
                "drainage_inside_fraction",
                "fraction of the drainage disc's nodes inside the area of applicability"
                    .to_string(),
            ),
            (
                "criterion",
                "the favourable outcome the chance is about".to_string(),
            ),
            ("crs", "coordinate system of x and y".to_string()),
        ];
        let columns: serde_json::Map<String, serde_json::Value> = described
            .into_iter()
            .map(|(k, v)| (k.to_string(), serde_json::Value::String(v)))
            .collect();
        serde_json::json!({
            "step": self.step,
            "criterion": self.criterion,
            "volume_unit": self.volume_unit,
            "crs": self.crs,
            "columns": columns,
            "column_order": self.columns(),
            "targets": targets,
        })
    }
}

/// Writes the targets as CSV (header included) through a CSV writer, so a well name holding a
/// comma, a quote or a line end stays one field.
pub fn to_csv(targets: &[Target], table: &TargetsTable) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let rows = std::iter::once(table.columns()).chain(targets.iter().map(|t| {
        vec![
            t.rank.to_string(),
            table.step.clone(),
            format!("{:.2}", t.x),
            format!("{:.2}", t.y),
            format!("{:.4}", t.chance),
            format!("{:.6e}", t.risked_volume),
            table.volume_unit.clone(),
            t.nearest_well.clone(),
            if t.nearest_distance.is_finite() {
                format!("{:.1}", t.nearest_distance)
            } else {
                String::new()
            },
            u8::from(t.inside).to_string(),
            format!("{:.3}", t.drainage_inside_fraction),
            table.criterion.clone(),
            table.crs.clone(),
        ]
    }));
    for row in rows {
        // Writing to memory cannot fail.
        let _ = w.write_record(&row);
    }
    let bytes = w.into_inner().unwrap_or_default();
    String::from_utf8(bytes).unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The drainage sums by running row sums equal the plain sum over the disc's nodes.
    #[test]
    fn running_sums_match_the_plain_disc_sum() {
        let grid = Grid {
            origin_x: 0.0,
            origin_y: 0.0,
            dx: 7.0,
            dy: 11.0,
            nx: 23,
            ny: 17,
            rotation: 0.0,
            epsg: None,
            null_value: -999.25,
        };
        let n = grid.len();
        let chance: Vec<f64> = (0..n)
            .map(|k| {
                if k % 13 == 0 {
                    f64::NAN
                } else {
                    (k % 7) as f64 / 7.0
                }
            })
            .collect();
        let volume: Vec<f64> = (0..n).map(|k| 1.0 + (k % 5) as f64).collect();
        let inside: Vec<bool> = (0..n).map(|k| k % 3 != 0).collect();
        for radius in [5.0, 11.0, 30.0, 77.0, 1e4] {
            let t = rank_targets(
                &RankInputs {
                    grid: &grid,
                    chance: &chance,
                    volume: Some(&volume),
                    inside: &inside,
                    wells: &[],
                },
                &InfillSettings {
                    drainage_radius: radius,
                    min_well_spacing: 0.0,
                    min_target_spacing: 0.0,
                    count: 50,
                },
            )
            .unwrap();
            assert!(!t.is_empty());
            for target in &t {
                let (fi, fj) = grid.fractional_ij(target.x, target.y);
                let (i, j) = (fi.round() as usize, fj.round() as usize);
                let (mut sum, mut ins, mut cnt) = (0.0, 0, 0);
                for b in 0..grid.ny {
                    for a in 0..grid.nx {
                        let ex = (a as f64 - i as f64) * grid.dx;
                        let ey = (b as f64 - j as f64) * grid.dy;
                        if ex * ex + ey * ey <= radius * radius {
                            let k = grid.index(a, b);
                            if chance[k].is_finite() {
                                sum += chance[k] * volume[k];
                            }
                            ins += usize::from(inside[k]);
                            cnt += 1;
                        }
                    }
                }
                assert!(
                    (target.risked_volume - sum).abs() <= 1e-9 * sum.max(1.0),
                    "radius {radius}: {} against {sum}",
                    target.risked_volume
                );
                assert_eq!(target.drainage_inside_fraction, ins as f64 / cnt as f64);
            }
        }
    }
}
