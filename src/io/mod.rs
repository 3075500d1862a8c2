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
pub mod geotiff;
pub mod polylines;
pub mod text;
pub mod wells;
pub mod xyz;

use crate::grid::Grid;
use std::path::{Path, PathBuf};

/// An error reading or writing a file. Every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum IoError {
    /// The operating system refused to open, read, write or rename the file.
    #[error("{}: {source}", path.display())]
    Os {
        /// The file.
        path: PathBuf,
        /// What the operating system said.
        source: std::io::Error,
    },
    /// A line (or CSV record) of a text file is malformed.
    #[error("{}, line {line}: {message}", path.display())]
    Line {
        /// The file.
        path: PathBuf,
        /// 1-based line number.
        line: u64,
        /// What is wrong.
        message: String,
    },
    /// A cell of the wells CSV is malformed or missing.
    #[error("{}, line {line}, column '{column}': {message}", path.display())]
    Cell {
        /// The file.
        path: PathBuf,
        /// 1-based line number (the header is line 1).
        line: u64,
        /// Column name.
        column: String,
        /// What is wrong.
        message: String,
    },
    /// XYZ points that do not fall on a grid node within the snapping tolerance.
    #[error(
        "{}: {count} point(s) lie off the grid nodes (tolerance {tolerance} of the spacing), first at {}",
        path.display(),
        first.join("; ")
    )]
    OffGrid {
        /// The file.
        path: PathBuf,
        /// How many points are off the grid.
        count: usize,
        /// The snapping tolerance, as a fraction of the spacing.
        tolerance: f64,
        /// The first few, as "line N (x, y)".
        first: Vec<String>,
    },
    /// A raster whose georeferencing or size disagrees with the manifest grid.
    #[error("{}: grid differs from the manifest grid: {}", path.display(), differences.join("; "))]
    GridMismatch {
        /// The file.
        path: PathBuf,
        /// One phrase per difference.
        differences: Vec<String>,
    },
    /// A file that cannot be decoded or whose content is unusable as a whole.
    #[error("{}: {message}", path.display())]
    Format {
        /// The file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// An output path that is one of the project's inputs.
    #[error("{}: refusing to write over an input file", path.display())]
    WouldOverwriteInput {
        /// The output path asked for.
        path: PathBuf,
    },
}

impl IoError {
    /// The file the error is about.
    pub fn path(&self) -> &Path {
        match self {
            IoError::Os { path, .. }
            | IoError::Line { path, .. }
            | IoError::Cell { path, .. }
            | IoError::OffGrid { path, .. }
            | IoError::GridMismatch { path, .. }
            | IoError::Format { path, .. }
            | IoError::WouldOverwriteInput { path } => path,
        }
    }

    pub(crate) fn os(path: &Path, source: std::io::Error) -> Self {
        IoError::Os {
            path: path.to_path_buf(),
            source,
        }
    }

    pub(crate) fn format(path: &Path, message: impl Into<String>) -> Self {
        IoError::Format {
            path: path.to_path_buf(),
            message: message.into(),
        }
    }
}

/// The longest piece of an offending token quoted in a message, in characters.
pub const EXCERPT_CHARS: usize = 80;

/// `text` as quoted in a message: whole when it has at most [`EXCERPT_CHARS`] characters, else
/// its first [`EXCERPT_CHARS`] characters followed by `...` and its length in bytes.
pub fn excerpt(text: &str) -> String {
    match text.char_indices().nth(EXCERPT_CHARS) {
        None => text.to_string(),
        Some((end, _)) => format!("{}... ({} bytes)", &text[..end], text.len()),
    }
}

/// A message from another library, cut to a few excerpts' length (it may quote a whole token).
pub fn excerpt_long(text: &str) -> String {
    match text.char_indices().nth(4 * EXCERPT_CHARS) {
        None => text.to_string(),
        Some((end, _)) => format!("{}... ({} bytes)", &text[..end], text.len()),
    }
}

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

/// Checks that a map vector has one value per node.
pub(crate) fn check_len(path: &Path, grid: &Grid, values: &[f64]) -> Result<(), IoError> {
    if values.len() != grid.len() {
        return Err(IoError::format(
            path,
            format!(
                "map has {} values but the grid has {} x {} = {} nodes; nothing written",
                values.len(),
                grid.nx,
                grid.ny,
                grid.len()
            ),
        ));
    }
    Ok(())
}
