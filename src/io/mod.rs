//! Reading and writing field data: XYZ text grids, GeoTIFF rasters, the wells CSV, polylines to
//! draw over maps, and the atomic writer every output goes through.
//!
//! Every error names the file and, where there is one, the line, record or column at fault, and
//! quotes at most [`EXCERPT_CHARS`] characters of an offending token. In memory a null node is
//! `NaN`; the grid's null value only exists in files.
//!
//! Text readers go through [`text::Guarded`]: a UTF-8 byte-order mark is skipped, CRLF and CR line
//! ends count as one line end, and a file or a line larger than its limit stops the read with an
//! error instead of filling memory. Maps are capped by what their grid can need
//! ([`xyz::max_bytes`], [`geotiff::max_bytes`]).

pub mod atomic;
mod error;
pub mod geotiff;
pub mod polylines;
pub mod text;
pub mod wells;
pub mod xyz;

use error::check_len;
pub use error::{EXCERPT_CHARS, IoError, excerpt, excerpt_long};

use crate::grid::Grid;
use std::path::Path;

/// True when `path` names a GeoTIFF by its extension (`.tif` or `.tiff`, any case).
pub fn is_geotiff(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("tif") || e.eq_ignore_ascii_case("tiff"))
}

/// Reads a map onto `grid`: `.tif`/`.tiff` as GeoTIFF (which must match the grid), anything else as
/// XYZ text (points snapped to nodes within `snap_tolerance` of the spacing). Nulls become `NaN`.
pub fn read_map(path: &Path, grid: &Grid, snap_tolerance: f64) -> Result<Vec<f64>, IoError> {
    if is_geotiff(path) {
        geotiff::read_on_grid(path, grid)
    } else {
        xyz::read_on_grid(path, grid, snap_tolerance)
    }
}

/// Writes a map: `.tif`/`.tiff` as float32 GeoTIFF, anything else as XYZ text with its GDAL
/// sidecar (see [`xyz`]). Atomic. `description` goes to the GeoTIFF's ImageDescription or the
/// sidecar's metadata.
pub fn write_map(
    path: &Path,
    grid: &Grid,
    values: &[f64],
    description: Option<&str>,
) -> Result<(), IoError> {
    write_map_with(path, grid, values, description, None)
}

/// As [`write_map`], with the node coordinates of XYZ text already formatted when given (many
/// maps on one grid share them; see [`xyz::Coordinates`]).
pub fn write_map_with(
    path: &Path,
    grid: &Grid,
    values: &[f64],
    description: Option<&str>,
    coords: Option<&xyz::Coordinates>,
) -> Result<(), IoError> {
    if is_geotiff(path) {
        geotiff::write(path, grid, values, description)
    } else if let Some(c) = coords {
        xyz::write_described(path, grid, values, description, c)
    } else {
        check_len(path, grid, values)?;
        xyz::write_described(
            path,
            grid,
            values,
            description,
            &xyz::Coordinates::new(grid),
        )
    }
}
