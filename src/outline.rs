//! Ground the user marks as unsampled: closed outlines (an undrilled fault block, a culmination
//! seen on the structure map) inside which no well tells what happened, read from polyline CSV
//! files ([`crate::io::polylines`]) named by the manifest's `[area] unsampled`.
//!
//! Some unlike ground leaves no trace in the attributes or in the distance to the wells, so no
//! rule on the data can flag it (DEVELOPERS.md, "Area of applicability", measures such a region
//! that even a classifier trained on its outline misses). What the geologist knows is then the
//! only source: every node inside an outline gets the reason bit
//! [`crate::applicability::REASON_MARKED`] and lies outside the area of applicability, so its
//! maps are hatched, it is never an infill target and a miss there is never silent.
//!
//! A node is inside an outline by the even-odd (crossing-number) rule: a ray from the node
//! crosses the outline's edges an odd number of times (Shimrat 1962, "Algorithm 112: Position of
//! point relative to polygon", Communications of the ACM 5(8), 434), with each edge counted
//! half-open in y so that a ray through a vertex counts it once. Where outlines overlap, a node
//! inside any of them is marked. An outline whose last vertex differs from its first is closed by
//! the edge between them.

use crate::grid::Grid;
use crate::io::IoError;
use crate::io::polylines::{self, Polyline};
use std::path::{Path, PathBuf};

/// One closed outline.
#[derive(Clone, Debug, PartialEq)]
pub struct Outline {
    /// Name from the file's `line` column (empty without one).
    pub name: String,
    /// Vertices in world coordinates, without a repeated closing vertex.
    pub points: Vec<(f64, f64)>,
    /// File it came from.
    pub file: PathBuf,
    /// Line of the file where it starts.
    pub line: u64,
}

/// Reads every outline of the files in `paths`. An outline needs three distinct vertices and a
/// non-zero area; anything else is an error naming the file and the line where it starts.
pub fn read_all(paths: &[PathBuf]) -> Result<Vec<Outline>, IoError> {
    let mut out = Vec::new();
    for path in paths {
        for p in polylines::read(path)? {
            out.push(checked(path, p)?);
        }
    }
    Ok(out)
}

fn checked(path: &Path, p: Polyline) -> Result<Outline, IoError> {
    let mut points = p.points;
    if points.len() > 1 && points.first() == points.last() {
        points.pop();
    }
    let bad = |message: String| IoError::Line {
        path: path.to_path_buf(),
        line: p.line,
        message,
    };
    let label = if p.name.is_empty() {
        "the outline".to_string()
    } else {
        format!("outline '{}'", p.name)
    };
    if let Some((x, y)) = points
        .iter()
        .find(|(x, y)| !x.is_finite() || !y.is_finite())
    {
        return Err(bad(format!(
            "{label} has a vertex that is not finite ({x}, {y})"
        )));
    }
    let mut distinct = points.clone();
    distinct.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    distinct.dedup();
    if distinct.len() < 3 {
        return Err(bad(format!(
            "{label} has {} distinct vertices; a closed outline of unsampled ground needs at \
             least 3",
            distinct.len()
        )));
    }
    if area(&points) == 0.0 {
        return Err(bad(format!(
            "{label} encloses no area (its vertices lie on one line)"
        )));
    }
    Ok(Outline {
        name: p.name,
        points,
        file: path.to_path_buf(),
        line: p.line,
    })
}

/// Area of a closed ring by the shoelace formula (absolute value), with the vertices taken
/// relative to the first so that large map coordinates do not cancel.
pub fn area(points: &[(f64, f64)]) -> f64 {
    let n = points.len();
    let Some(&(x0, y0)) = points.first() else {
        return 0.0;
    };
    let twice: f64 = (0..n)
        .map(|i| {
            let (a, b) = (points[i], points[(i + 1) % n]);
            (a.0 - x0) * (b.1 - y0) - (b.0 - x0) * (a.1 - y0)
        })
        .sum();
    (twice / 2.0).abs()
}

/// Whether `(x, y)` lies inside the closed ring `points` (even-odd rule, see the module
/// documentation). Points exactly on an edge may fall either side.
pub fn contains(points: &[(f64, f64)], x: f64, y: f64) -> bool {
    let n = points.len();
    let mut inside = false;
    let mut j = n.wrapping_sub(1);
    for i in 0..n {
        let (xi, yi) = points[i];
        let (xj, yj) = points[j];
        // The edge counts when it straddles the ray's y, half-open: [min, max).
        if (yi > y) != (yj > y) {
            let x_cross = xi + (y - yi) * (xj - xi) / (yj - yi);
            if x < x_cross {
                inside = !inside;
            }
        }
        j = i;
    }
    inside
}

/// One flag per node of `nodes` (indices into `grid`, in order): true inside any outline.
/// `None` when there are no outlines.
pub fn marked_nodes(
    outlines: &[Outline],
    grid: &Grid,
    nodes: std::ops::Range<usize>,
) -> Option<Vec<bool>> {
    if outlines.is_empty() {
        return None;
    }
    let boxes: Vec<[f64; 4]> = outlines
        .iter()
        .map(|o| {
            o.points.iter().fold(
                [
                    f64::INFINITY,
                    f64::INFINITY,
                    f64::NEG_INFINITY,
                    f64::NEG_INFINITY,
                ],
                |b, &(x, y)| [b[0].min(x), b[1].min(y), b[2].max(x), b[3].max(y)],
            )
        })
        .collect();
    let xy = grid.node_coordinates();
    Some(
        xy[nodes]
            .iter()
            .map(|&(x, y)| {
                outlines.iter().zip(&boxes).any(|(o, b)| {
                    x >= b[0] && x <= b[2] && y >= b[1] && y <= b[3] && contains(&o.points, x, y)
                })
            })
            .collect(),
    )
}

/// Joins the user's marks ([`crate::applicability::GROUND_MARKED`]) to the location flags of the
/// ground check (one per node; `None` when the model has none): the flags every prediction takes.
pub fn join(ground: Option<Vec<u8>>, marked: Option<Vec<bool>>) -> Option<Vec<u8>> {
    use crate::applicability::GROUND_MARKED;
    match (ground, marked) {
        (g, None) => g,
        (None, Some(m)) => Some(
            m.iter()
                .map(|&k| if k { GROUND_MARKED } else { 0 })
                .collect(),
        ),
        (Some(mut g), Some(m)) => {
            for (f, k) in g.iter_mut().zip(m) {
                if k {
                    *f |= GROUND_MARKED;
                }
            }
            Some(g)
        }
    }
}
