//! Two small manifest enumerations used beyond the project: the P10/P50/P90 label convention and
//! the side of a threshold that counts as crossing it.

use serde::{Deserialize, Serialize};

/// Which percentile label names the low end of a band.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Convention {
    /// P10 is the low value (the 10th percentile). The default.
    Percentile,
    /// P90 is the low value (90 % chance of exceeding it).
    Exceedance,
}

/// Which side of a threshold counts as crossing it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Direction {
    /// Crossed when the value is above the threshold.
    Above,
    /// Crossed when the value is below the threshold.
    Below,
}
