//! The error every reader and writer returns, the excerpts of offending tokens its messages quote,
//! and the length check of a map against its grid: the pieces the readers and writers share.

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
