//! XYZ text grids: one `x y value` point per line.
//!
//! Fields are separated by whitespace or commas; `#` starts a comment; blank lines are skipped; the
//! first data line may be a header (its first field is not a number). Each point snaps to the grid
//! node within `snap_tolerance` (a fraction of the spacing along each axis). Nodes the file does not
//! mention are null, and so is a value equal to the grid's null value (or `NaN`). A point that lands
//! on no node, a second point on the same node and a malformed line are errors naming file and line.
//!
//! Writing gives plain `x y value` lines with no header or comment, so that GDAL's "ASCII Gridded
//! XYZ" driver opens an unrotated map as a raster (and the tiles of one map concatenate into the
//! whole map). The rest of the grid description goes to a GDAL PAM sidecar `<file>.aux.xml`
//! beside it (GDAL's persistent auxiliary metadata): the nodata value, the coordinate system (the
//! EPSG code, or a local engineering system in metres) and the grid's size, spacing and rotation.
//! GDAL's XYZ driver reads only north-up grids; the XYZ of a rotated grid is a point list.
//!
//! Reading streams the file through [`text::Guarded`]: a byte-order mark is skipped, CRLF and CR
//! line ends count as one, and a file larger than its grid can need ([`max_bytes`]) or a line over
//! [`MAX_LINE_BYTES`] stops the read with an error.

use super::error::{IoError, check_len, excerpt};
use super::{atomic, text};
use crate::grid::Grid;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;

/// How many off-grid points an error lists.
const OFF_GRID_LISTED: usize = 5;

/// The `x y ` text of every node of a grid, in index order, formatted once and shared by every
/// map written on that grid (the coordinates are most of an XYZ file's formatting work).
pub struct Coordinates {
    nx: usize,
    ny: usize,
    /// Concatenated `x y ` prefixes.
    text: Vec<u8>,
    /// `ends[k]` is the end of node `k`'s prefix in `text` (its start is `ends[k - 1]` or 0).
    ends: Vec<usize>,
}

impl Coordinates {
    /// Formats the coordinates of every node of `grid`.
    pub fn new(grid: &Grid) -> Self {
        let mut buf = ryu::Buffer::new();
        let mut text = Vec::with_capacity(grid.len() * 24);
        let mut ends = Vec::with_capacity(grid.len());
        for j in 0..grid.ny {
            for i in 0..grid.nx {
                let (x, y) = grid.node_xy(i, j);
                text.extend_from_slice(buf.format(x).as_bytes());
                text.push(b' ');
                text.extend_from_slice(buf.format(y).as_bytes());
                text.push(b' ');
                ends.push(text.len());
            }
        }
        Coordinates {
            nx: grid.nx,
            ny: grid.ny,
            text,
            ends,
        }
    }

    /// The `x y ` prefix of node `(i, j)` (row-major node `k = j * nx + i`).
    fn prefix(&self, k: usize) -> &[u8] {
        let start = if k == 0 { 0 } else { self.ends[k - 1] };
        &self.text[start..self.ends[k]]
    }
}

/// The sidecar of an XYZ map: `<file>.aux.xml` in the same folder (GDAL's PAM file name).
pub fn sidecar_path(path: &Path) -> std::path::PathBuf {
    let mut name = path.as_os_str().to_os_string();
    name.push(".aux.xml");
    std::path::PathBuf::from(name)
}

/// Escapes text for XML content.
fn xml_escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            _ => out.push(c),
        }
    }
    out
}

/// The text of the PAM sidecar of a map on `grid`: coordinate system, nodata value, and metadata
/// items describing the grid (and `description`, when given, as item `description`).
pub fn sidecar_text(grid: &Grid, description: Option<&str>) -> String {
    let srs = match grid.epsg {
        Some(code) => format!("EPSG:{code}"),
        None => format!(
            "LOCAL_CS[\"{}\",UNIT[\"metre\",1],AXIS[\"Easting\",EAST],AXIS[\"Northing\",NORTH]]",
            super::geotiff::LOCAL_CRS_NAME
        ),
    };
    let mut items = vec![
        (
            "layout",
            "one 'x y value' line per grid node, nodes (i, j) with j outer and i inner, \
             both increasing"
                .to_string(),
        ),
        ("nodes", format!("{} x {}", grid.nx, grid.ny)),
        ("origin", format!("{} {}", grid.origin_x, grid.origin_y)),
        ("dx", grid.dx.to_string()),
        ("dy", grid.dy.to_string()),
        ("rotation_degrees", grid.rotation.to_string()),
        ("null_value", grid.null_value.to_string()),
    ];
    if let Some(d) = description {
        items.push(("description", d.to_string()));
    }
    let mut t = String::from("<PAMDataset>\n");
    t.push_str(&format!(
        "  <SRS dataAxisToSRSAxisMapping=\"1,2\">{}</SRS>\n  <Metadata>\n",
        xml_escape(&srs)
    ));
    for (k, v) in items {
        t.push_str(&format!("    <MDI key=\"{k}\">{}</MDI>\n", xml_escape(&v)));
    }
    t.push_str(&format!(
        "  </Metadata>\n  <PAMRasterBand band=\"1\">\n    <NoDataValue>{}</NoDataValue>\n  \
         </PAMRasterBand>\n</PAMDataset>\n",
        grid.null_value
    ));
    t
}

/// Writes a map as XYZ text, atomically: one `x y value` line per node in index order, nulls
/// written as the grid's null value, and the sidecar `<file>.aux.xml` (see [`sidecar_text`]).
/// Coordinates and values use the shortest decimal form that reads back to the same `f64` (Ryu,
/// Adams 2018, PLDI; exponent form such as `1e-7` for very small or large magnitudes).
pub fn write(path: &Path, grid: &Grid, values: &[f64]) -> Result<(), IoError> {
    check_len(path, grid, values)?;
    write_described(path, grid, values, None, &Coordinates::new(grid))
}

/// As [`write()`], with the node coordinates already formatted (see [`Coordinates`]); they must
/// come from a grid of the same size.
pub fn write_with_coordinates(
    path: &Path,
    grid: &Grid,
    values: &[f64],
    coords: &Coordinates,
) -> Result<(), IoError> {
    write_described(path, grid, values, None, coords)
}

/// As [`write_with_coordinates`], with a description of the map (e.g. quantity and unit) kept in
/// the sidecar.
pub fn write_described(
    path: &Path,
    grid: &Grid,
    values: &[f64],
    description: Option<&str>,
    coords: &Coordinates,
) -> Result<(), IoError> {
    check_len(path, grid, values)?;
    if (coords.nx, coords.ny) != (grid.nx, grid.ny) {
        return Err(IoError::format(
            path,
            format!(
                "coordinates formatted for {} x {} nodes, grid has {} x {}; nothing written",
                coords.nx, coords.ny, grid.nx, grid.ny
            ),
        ));
    }
    atomic::write_with(path, |w| {
        let mut buf = ryu::Buffer::new();
        let mut line: Vec<u8> = Vec::with_capacity(64 * grid.nx);
        for j in 0..grid.ny {
            line.clear();
            for i in 0..grid.nx {
                let k = grid.index(i, j);
                let v = values[k];
                let v = if v.is_nan() { grid.null_value } else { v };
                line.extend_from_slice(coords.prefix(k));
                line.extend_from_slice(buf.format(v).as_bytes());
                line.push(b'\n');
            }
            w.write_all(&line)?;
        }
        Ok(())
    })?;
    atomic::write_bytes(
        &sidecar_path(path),
        sidecar_text(grid, description).as_bytes(),
    )
}

/// Splits a data line into fields on whitespace and commas.
fn fields(line: &str) -> impl Iterator<Item = &str> {
    line.split(|c: char| c == ',' || c.is_whitespace())
        .filter(|f| !f.is_empty())
}

/// Longest line an XYZ reader accepts, in bytes (comments included).
pub const MAX_LINE_BYTES: usize = 64 * 1024;

/// The most bytes an XYZ file on `grid` may hold: 256 per node (a point line is under 80 bytes
/// even with full-precision coordinates) plus 1 MiB for comments and a header.
pub fn max_bytes(grid: &Grid) -> u64 {
    (grid.nx as u64)
        .saturating_mul(grid.ny as u64)
        .saturating_mul(256)
        .saturating_add(1 << 20)
}

/// Reads an XYZ text grid onto `grid`, snapping each point to its node. The file is read as a
/// stream through [`text::Guarded`] and may hold at most [`max_bytes`] bytes.
pub fn read_on_grid(path: &Path, grid: &Grid, snap_tolerance: f64) -> Result<Vec<f64>, IoError> {
    let max = max_bytes(grid);
    let why = format!(
        "an XYZ map of {} x {} nodes needs far less",
        grid.nx, grid.ny
    );
    let reader = text::open(path, max, &why, MAX_LINE_BYTES).map_err(|e| read_error(path, e))?;
    parse_reader(path, reader, grid, snap_tolerance)
}

/// The error for a failed read: a [`text::Limit`] names its line; anything else is the OS's.
fn read_error(path: &Path, e: std::io::Error) -> IoError {
    match text::Limit::from_io(&e) {
        Some(text::Limit::Line { line, .. }) => IoError::Line {
            path: path.to_path_buf(),
            line: *line,
            message: e.to_string(),
        },
        Some(limit) => IoError::format(path, limit.to_string()),
        None => IoError::os(path, e),
    }
}

/// Parses XYZ text already in memory; `path` labels errors.
pub fn parse(
    path: &Path,
    text: &str,
    grid: &Grid,
    snap_tolerance: f64,
) -> Result<Vec<f64>, IoError> {
    let reader = text::Guarded::new(
        text.as_bytes(),
        max_bytes(grid).max(text.len() as u64),
        "",
        MAX_LINE_BYTES,
    );
    parse_reader(path, reader, grid, snap_tolerance)
}

/// Parses XYZ bytes from any reader (wrap it in [`text::Guarded`] for the byte-order mark, line
/// ends and limits); `path` labels errors.
pub fn parse_reader<R: Read>(
    path: &Path,
    reader: R,
    grid: &Grid,
    snap_tolerance: f64,
) -> Result<Vec<f64>, IoError> {
    let line_err = |line: u64, message: String| IoError::Line {
        path: path.to_path_buf(),
        line,
        message,
    };
    let n_nodes = grid.nx.checked_mul(grid.ny).ok_or_else(|| {
        IoError::format(
            path,
            format!("a grid of {} x {} nodes is too large", grid.nx, grid.ny),
        )
    })?;
    let mut values = vec![f64::NAN; n_nodes];
    // Line that set each node (0 = none yet).
    let mut seen = vec![0u64; n_nodes];
    let mut header_allowed = true;
    let mut points = 0usize;
    let mut off_count = 0usize;
    let mut off_first: Vec<String> = Vec::new();
    let (nxm, nym) = (grid.nx as f64 - 1.0, grid.ny as f64 - 1.0);
    let null = grid.null_value;
    let null_tol = 1e-9 * null.abs().max(1.0);
    let mut reader = BufReader::new(reader);
    let mut buf: Vec<u8> = Vec::new();
    let mut line = 0u64;
    loop {
        buf.clear();
        let got = reader
            .read_until(b'\n', &mut buf)
            .map_err(|e| read_error(path, e))?;
        if got == 0 {
            break;
        }
        line += 1;
        let raw = std::str::from_utf8(&buf).map_err(|_| line_err(line, "not UTF-8 text".into()))?;
        let data = match raw.find('#') {
            Some(k) => &raw[..k],
            None => raw,
        };
        let mut it = fields(data);
        let Some(f0) = it.next() else { continue };
        let first = f0.parse::<f64>();
        if first.is_err() && header_allowed {
            header_allowed = false;
            continue;
        }
        header_allowed = false;
        let (f1, f2) = (it.next(), it.next());
        let extra = it.count();
        let (Some(f1), Some(f2)) = (f1, f2) else {
            return Err(line_err(
                line,
                format!(
                    "expected 3 fields (x y value), found {}",
                    1 + usize::from(f1.is_some())
                ),
            ));
        };
        if extra > 0 {
            return Err(line_err(
                line,
                format!("expected 3 fields (x y value), found {}", 3 + extra),
            ));
        }
        let num = |s: &str, what: &str| -> Result<f64, IoError> {
            match s.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                Ok(v) if v.is_nan() && what == "value" => Ok(v),
                _ => Err(line_err(
                    line,
                    format!("{what} '{}' is not a finite number", excerpt(s)),
                )),
            }
        };
        let x = match first {
            Ok(v) if v.is_finite() => v,
            _ => {
                return Err(line_err(
                    line,
                    format!("x '{}' is not a finite number", excerpt(f0)),
                ));
            }
        };
        let y = num(f1, "y")?;
        let v = num(f2, "value")?;
        points += 1;
        let (fi, fj) = grid.fractional_ij(x, y);
        let (ri, rj) = (fi.round(), fj.round());
        let on_node = (fi - ri).abs() <= snap_tolerance
            && (fj - rj).abs() <= snap_tolerance
            && ri >= 0.0
            && rj >= 0.0
            && ri <= nxm
            && rj <= nym;
        if !on_node {
            off_count += 1;
            if off_first.len() < OFF_GRID_LISTED {
                off_first.push(format!("line {line} ({x}, {y})"));
            }
            continue;
        }
        let k = grid.index(ri as usize, rj as usize);
        if seen[k] != 0 {
            return Err(line_err(
                line,
                format!(
                    "point ({x}, {y}) falls on node (i={}, j={}) already given on line {}",
                    ri as usize, rj as usize, seen[k]
                ),
            ));
        }
        seen[k] = line;
        values[k] = if v.is_nan() || (v - null).abs() <= null_tol {
            f64::NAN
        } else {
            v
        };
    }
    if off_count > 0 {
        return Err(IoError::OffGrid {
            path: path.to_path_buf(),
            count: off_count,
            tolerance: snap_tolerance,
            first: off_first,
        });
    }
    if points == 0 {
        return Err(IoError::format(path, "no data points"));
    }
    Ok(values)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid() -> Grid {
        Grid {
            origin_x: 0.0,
            origin_y: 0.0,
            dx: 10.0,
            dy: 10.0,
            nx: 3,
            ny: 2,
            rotation: 0.0,
            epsg: None,
            null_value: -999.25,
        }
    }

    #[test]
    fn header_comments_commas_nulls() {
        let text = "# exported\nX,Y,Z\n0,0,1 # first\n\n10 0 -999.25\n20.05, 10.0, 3\n";
        let v = parse(Path::new("m.xyz"), text, &grid(), 0.01).unwrap();
        assert_eq!(v[0], 1.0);
        assert!(v[1].is_nan());
        assert!(v[2].is_nan(), "absent node is null");
        assert_eq!(v[grid().index(2, 1)], 3.0);
    }

    #[test]
    fn second_header_is_an_error() {
        let err = parse(Path::new("m.xyz"), "x y z\n0 0 1\nfoo 0 1\n", &grid(), 0.01).unwrap_err();
        assert!(err.to_string().contains("m.xyz, line 3"), "{err}");
    }
}
