//! Polylines to draw over maps (a field outline, fault traces): a CSV file of `x, y` vertices
//! (RFC 4180 comma-separated values) with a header line and `#` comment lines.
//!
//! Columns `x` and `y` are required; an optional column `line` names the polyline a vertex belongs
//! to, and consecutive rows with the same name form one polyline (so a file can hold several).
//! Without it the whole file is one polyline. A closed outline repeats its first vertex at the end.
//! Every error names the file and the line (the header is line 1).

use super::error::IoError;
use std::path::Path;

/// One polyline: its name (empty without a `line` column) and its vertices in order.
#[derive(Clone, Debug, PartialEq)]
pub struct Polyline {
    /// Name from the `line` column.
    pub name: String,
    /// Vertices `(x, y)` in world coordinates.
    pub points: Vec<(f64, f64)>,
    /// Line of the file where the polyline starts.
    pub line: u64,
}

/// Reads a polyline CSV file.
pub fn read(path: &Path) -> Result<Vec<Polyline>, IoError> {
    let bytes = std::fs::read(path).map_err(|e| IoError::os(path, e))?;
    parse(path, &bytes)
}

/// Parses polyline CSV bytes already in memory; `path` labels errors.
pub fn parse(path: &Path, bytes: &[u8]) -> Result<Vec<Polyline>, IoError> {
    // Line numbers from byte offsets: the CSV reader's own count skips comment lines, and after
    // a CRLF its record offsets point at the line feed before the record.
    let line_at = |byte: u64| -> u64 {
        let mut end = (byte as usize).min(bytes.len());
        while end < bytes.len() && matches!(bytes[end], b'\r' | b'\n') {
            end += 1;
        }
        1 + bytes[..end].iter().filter(|&&b| b == b'\n').count() as u64
    };
    // The header is the first line that is neither blank nor a comment.
    let header_line = bytes
        .split(|&b| b == b'\n')
        .position(|l| {
            let l = l.trim_ascii();
            !l.is_empty() && l[0] != b'#'
        })
        .map_or(1, |k| k as u64 + 1);
    let csv_err = |e: csv::Error| IoError::Line {
        path: path.to_path_buf(),
        line: e.position().map_or(1, |p| line_at(p.byte())),
        message: match e.kind() {
            csv::ErrorKind::UnequalLengths {
                expected_len, len, ..
            } => format!("expected {expected_len} fields like the header, found {len}"),
            csv::ErrorKind::Utf8 { .. } => "not UTF-8 text".to_string(),
            _ => e.to_string(),
        },
    };
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(bytes);
    let header = rdr.headers().map_err(csv_err)?.clone();
    let find = |name: &str| header.iter().position(|h| h.eq_ignore_ascii_case(name));
    let missing = |name: &str| IoError::Cell {
        path: path.to_path_buf(),
        line: header_line,
        column: name.to_string(),
        message: format!(
            "missing column (the header has: {})",
            header.iter().collect::<Vec<_>>().join(", ")
        ),
    };
    let cx = find("x").ok_or_else(|| missing("x"))?;
    let cy = find("y").ok_or_else(|| missing("y"))?;
    let cl = find("line");
    let mut out: Vec<Polyline> = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(csv_err)?;
        let line = rec.position().map_or(0, |p| line_at(p.byte()));
        let number = |k: usize, col: &str| -> Result<f64, IoError> {
            let s = rec.get(k).unwrap_or("");
            match s.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(IoError::Cell {
                    path: path.to_path_buf(),
                    line,
                    column: col.to_string(),
                    message: format!("'{s}' is not a finite number"),
                }),
            }
        };
        let x = number(cx, "x")?;
        let y = number(cy, "y")?;
        let name = cl.and_then(|k| rec.get(k)).unwrap_or("").to_string();
        match out.last_mut() {
            Some(p) if p.name == name => p.points.push((x, y)),
            _ => out.push(Polyline {
                name,
                points: vec![(x, y)],
                line,
            }),
        }
    }
    if out.is_empty() {
        return Err(IoError::format(path, "no vertices after the header"));
    }
    if let Some(p) = out.iter().find(|p| p.points.len() < 2) {
        return Err(IoError::Line {
            path: path.to_path_buf(),
            line: p.line,
            message: format!(
                "polyline '{}' has a single vertex; a polyline needs at least two",
                p.name
            ),
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_or_several_polylines() {
        let one = parse(Path::new("o.csv"), b"x,y\n0,0\n10,0\n10,10\n0,0\n").unwrap();
        assert_eq!(one.len(), 1);
        assert_eq!(
            one[0].points,
            [(0.0, 0.0), (10.0, 0.0), (10.0, 10.0), (0.0, 0.0)]
        );
        let text = b"# faults\r\nline,X,Y\r\nF1,0,0\r\nF1,5,5\r\nF2,1,0\r\nF2,1,9\r\nF2,2,12\r\n";
        let two = parse(Path::new("f.csv"), text).unwrap();
        let names: Vec<&str> = two.iter().map(|p| p.name.as_str()).collect();
        assert_eq!(names, ["F1", "F2"]);
        assert_eq!(two[1].points.len(), 3);
        assert_eq!((two[0].line, two[1].line), (3, 5), "CRLF line numbers");
        let e = parse(Path::new("f.csv"), b"# c\r\nline,x,y\r\nA,0,0\r\nA,1,z\r\n").unwrap_err();
        assert!(
            e.to_string().starts_with("f.csv, line 4, column 'y'"),
            "{e}"
        );
        let e = parse(Path::new("f.csv"), b"# c\r\neast,north\r\n1,2\r\n").unwrap_err();
        assert!(
            e.to_string().starts_with("f.csv, line 2, column 'x'"),
            "{e}"
        );
    }

    #[test]
    fn errors_name_file_line_and_column() {
        let e = parse(Path::new("f.csv"), b"x,y\n0,0\n1,north\n").unwrap_err();
        assert_eq!(
            e.to_string(),
            "f.csv, line 3, column 'y': 'north' is not a finite number"
        );
        let e = parse(Path::new("f.csv"), b"east,north\n0,0\n").unwrap_err();
        assert!(
            e.to_string()
                .starts_with("f.csv, line 1, column 'x': missing column"),
            "{e}"
        );
        let e = parse(Path::new("f.csv"), b"line,x,y\nA,0,0\nA,1,1\nB,4,4\n").unwrap_err();
        assert!(e.to_string().starts_with("f.csv, line 4:"), "{e}");
    }
}
