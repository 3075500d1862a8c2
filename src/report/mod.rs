//! Pictures and the review page.
//!
//! - [`colormap`]: published colour maps (viridis, cividis, ColorBrewer RdBu) and value scales.
//! - [`font`]: the embedded DejaVu Sans typeface, registered with plotters.
//! - [`picture`]: PNG maps (rasterised by inverse mapping, rotated grids included), cross-plots,
//!   line plots and bar charts, returned as PNG bytes.
//! - [`labels`]: point labels placed clear of each other and of the symbols.
//! - [`markup`]: escaping, number formats and embedded figures shared by the page's parts.
//! - [`input`]: [`ReportInput`], the plain serialisable data the page is built from.
//! - [`kriging`]: per target, the variogram of the held-out wells' errors, the band decision and
//!   the middle's measured gain.
//! - [`html`]: [`render_html`], one self-contained HTML page (pictures as data URIs, inline CSS, no
//!   scripts, no network), and [`write_html`] (temporary file + rename).
//!
//! [`ReportError`] and [`write_atomic`], which every file above may use, live here; this file's
//! own code uses none of its children, so no module of the report depends on another in a circle.

pub mod area;
pub mod colormap;
pub mod font;
pub mod html;
pub mod input;
pub mod kinds;
pub mod kriging;
pub mod labels;
pub mod markup;
pub mod picture;
pub mod smoothing;
pub mod spread;
pub mod totals;
pub mod verdicts;

pub use colormap::{Colormap, ColourScale};
pub use html::{render_html, write_html};
pub use input::{DATA_FILE, PAGE_FILE, PictureRef, ReportInput};
pub use picture::{
    BarPicture, BarSeries, CrossPlot, Curve, LinePicture, MapGeometry, MapLine, MapPicture,
    MapView, MapWell, PointSeries, Reference, WellSymbol, bars_png, crossplot_png, line_png,
    map_png,
};

use std::path::{Path, PathBuf};

/// Errors of the report module.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// A picture or page input is inconsistent or out of range.
    #[error("invalid report input: {0}")]
    InvalidInput(String),
    /// plotters failed while drawing.
    #[error("drawing failed: {0}")]
    Draw(String),
    /// PNG encoding or decoding failed.
    #[error("PNG encoding failed: {0}")]
    Png(String),
    /// The embedded font could not be registered.
    #[error("the embedded DejaVu Sans font could not be registered with plotters")]
    Font,
    /// A JSON file could not be read.
    #[error("{path}: line {line}, column {column}: {message}")]
    Json {
        /// The file.
        path: PathBuf,
        /// Line of the error (1-based; 0 when unknown).
        line: usize,
        /// Column of the error (1-based; 0 when unknown).
        column: usize,
        /// What went wrong.
        message: String,
    },
    /// Reading or writing a file failed.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
}

/// Writes `bytes` to `path` through a temporary file in the same folder, then renames it.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), ReportError> {
    use std::io::Write;
    let dir = path
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".to_string());
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let io = |p: &Path| {
        let p = p.to_path_buf();
        move |source| ReportError::Io { path: p, source }
    };
    let result = (|| {
        let mut f = std::fs::File::create(&tmp).map_err(io(&tmp))?;
        f.write_all(bytes).map_err(io(&tmp))?;
        f.sync_all().map_err(io(&tmp))?;
        drop(f);
        std::fs::rename(&tmp, path).map_err(io(path))
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}
