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

/// Offsets (di, dj) of the nodes within `radius` of a node.
fn disc_offsets(grid: &Grid, radius: f64) -> Vec<(isize, isize)> {
    let ri = (radius / grid.dx).floor() as isize;
    let rj = (radius / grid.dy).floor() as isize;
    let mut out = Vec::new();
    for dj in -rj..=rj {
        for di in -ri..=ri {
            let (ex, ey) = (di as f64 * grid.dx, dj as f64 * grid.dy);
            if ex * ex + ey * ey <= radius * radius {
                out.push((di, dj));
            }
        }
    }
    out
}

/// Ranks candidate infill locations. Returns at most `settings.count` targets, best first.
pub fn rank_targets(
    inputs: &RankInputs,
    settings: &InfillSettings,
) -> Result<Vec<Target>, DecideError> {
    settings.check()?;
    let grid = inputs.grid;
    let n = grid.nx * grid.ny;
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
    let offsets = disc_offsets(grid, settings.drainage_radius);
    let value = |k: usize| -> f64 {
        let c = inputs.chance[k];
        let v = inputs.volume.map_or(1.0, |m| m[k]);
        if c.is_finite() && v.is_finite() {
            c * v
        } else {
            0.0
        }
    };
    let (nx, ny) = (grid.nx as isize, grid.ny as isize);
    // Risked volume and the inside fraction of the drainage disc, per node.
    let scored: Vec<(f64, f64)> = (0..n)
        .into_par_iter()
        .map(|k| {
            let (i, j) = grid.ij(k);
            let (i, j) = (i as isize, j as isize);
            let (mut sum, mut inside, mut count) = (0.0, 0usize, 0usize);
            for &(di, dj) in &offsets {
                let (a, b) = (i + di, j + dj);
                if a < 0 || b < 0 || a >= nx || b >= ny {
                    continue;
                }
                let m = (b * nx + a) as usize;
                sum += value(m);
                count += 1;
                inside += usize::from(inputs.inside[m]);
            }
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

/// Writes the targets as CSV text (header included).
pub fn to_csv(targets: &[Target]) -> String {
    let mut s = String::from(
        "rank,x,y,chance,risked_volume,nearest_well,nearest_distance,inside_applicability,drainage_inside_fraction\n",
    );
    for t in targets {
        s.push_str(&format!(
            "{},{:.2},{:.2},{:.4},{:.6e},{},{:.1},{},{:.3}\n",
            t.rank,
            t.x,
            t.y,
            t.chance,
            t.risked_volume,
            t.nearest_well,
            t.nearest_distance,
            u8::from(t.inside),
            t.drainage_inside_fraction
        ));
    }
    s
}
