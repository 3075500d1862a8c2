//! The wells CSV (RFC 4180 comma-separated values), long form: one row per (well, step) with the
//! reservoir penetration point `x, y` of that step, the measured changes (one column per target,
//! empty cell = not measured), an optional weight and an optional `kind` (producer, injector or
//! observer; only used to draw the well).
//!
//! Every error names the file, the line (the header is line 1) and, for a cell, the column, and
//! quotes at most [`super::EXCERPT_CHARS`] characters of a bad cell. The file is read through
//! [`text::Guarded`]: a byte-order mark is skipped, CRLF and CR line ends count as one line end (so
//! line numbers are right whatever wrote the file), and the file may hold at most
//! [`MAX_FILE_BYTES`] bytes, a line at most [`MAX_LINE_BYTES`]. Line numbers are counted from the
//! text itself (blank and `#` comment lines included), not taken from the CSV parser.

use super::error::{IoError, excerpt};
use super::text;
use std::collections::HashMap;
use std::io::Read;
use std::path::Path;

/// Largest wells CSV read, in bytes (512 MiB: some seven million rows).
pub const MAX_FILE_BYTES: u64 = 512 << 20;
/// Longest line of the wells CSV, in bytes.
pub const MAX_LINE_BYTES: usize = 1 << 20;
/// Why [`MAX_FILE_BYTES`], for the message.
const WHY: &str = "the limit for a wells file";

/// One row of the wells CSV.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct WellRecord {
    /// Well name.
    pub well: String,
    /// World x of the penetration point for this step.
    pub x: f64,
    /// World y of the penetration point for this step.
    pub y: f64,
    /// Step name (one of the manifest's steps).
    pub step: String,
    /// One value per target in manifest order; `NaN` for an empty cell (not measured).
    pub targets: Vec<f64>,
    /// Row weight (> 0), 1 when the file has no weight column.
    pub weight: f64,
    /// What the well does, from the optional `kind` column; `None` when absent or empty.
    #[serde(default)]
    pub kind: Option<WellKind>,
    /// 1-based line number of the row in the file.
    pub line: u64,
}

/// Name of the optional column that says what a well does.
pub const KIND_COLUMN: &str = "kind";

/// What a well does (the optional `kind` column: `producer`, `injector` or `observer`, any case;
/// `observation` is taken as `observer`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WellKind {
    /// Produces reservoir fluids.
    Producer,
    /// Injects (water or gas).
    Injector,
    /// Observes only.
    Observer,
}

impl WellKind {
    /// Reads a `kind` cell; `None` for a word that is none of the kinds.
    pub fn parse(text: &str) -> Option<WellKind> {
        match text.trim().to_ascii_lowercase().as_str() {
            "producer" => Some(WellKind::Producer),
            "injector" => Some(WellKind::Injector),
            "observer" | "observation" => Some(WellKind::Observer),
            _ => None,
        }
    }
}

/// A target column and its physical bounds.
#[derive(Clone, Debug, PartialEq)]
pub struct TargetColumn {
    /// Column name in the CSV.
    pub column: String,
    /// Smallest physically possible value.
    pub min: f64,
    /// Largest physically possible value.
    pub max: f64,
}

/// Which columns of the CSV hold what.
#[derive(Clone, Debug, PartialEq)]
pub struct WellColumns {
    /// Column of well names.
    pub well: String,
    /// Column of x coordinates.
    pub x: String,
    /// Column of y coordinates.
    pub y: String,
    /// Column of step names.
    pub step: String,
    /// Column of row weights.
    pub weight: String,
    /// When true the weight column must exist; when false a missing one means weight 1.
    pub weight_required: bool,
    /// Target columns in manifest order.
    pub targets: Vec<TargetColumn>,
}

/// Reads the wells CSV. `steps` are the manifest's step names; a row naming any other step is an
/// error. Values outside a target's bounds, a non-numeric cell, a missing column, a repeated
/// (well, step) pair and a file with no rows are errors too.
pub fn read(
    path: &Path,
    columns: &WellColumns,
    steps: &[String],
) -> Result<Vec<WellRecord>, IoError> {
    let (records, mut errors) = read_all(path, columns, steps)?;
    if errors.is_empty() {
        Ok(records)
    } else {
        Err(errors.swap_remove(0))
    }
}

/// Parses wells CSV bytes already in memory; `path` labels errors. Returns the first error.
pub fn parse(
    path: &Path,
    bytes: &[u8],
    columns: &WellColumns,
    steps: &[String],
) -> Result<Vec<WellRecord>, IoError> {
    let (records, mut errors) = parse_all(path, bytes, columns, steps)?;
    if errors.is_empty() {
        Ok(records)
    } else {
        Err(errors.swap_remove(0))
    }
}

/// Reads the wells CSV, keeping going after a bad row: the good rows and every row error, in file
/// order. `Err` only for a problem with the file as a whole (unreadable, header, no rows).
pub fn read_all(
    path: &Path,
    columns: &WellColumns,
    steps: &[String],
) -> Result<(Vec<WellRecord>, Vec<IoError>), IoError> {
    let reader = text::open(path, MAX_FILE_BYTES, WHY, MAX_LINE_BYTES).map_err(|e| {
        match text::Limit::from_io(&e) {
            Some(limit) => IoError::format(path, limit.to_string()),
            None => IoError::os(path, e),
        }
    })?;
    parse_reader(path, reader, columns, steps)
}

/// Parses wells CSV bytes, keeping going after a bad row (see [`read_all`]).
pub fn parse_all(
    path: &Path,
    bytes: &[u8],
    columns: &WellColumns,
    steps: &[String],
) -> Result<(Vec<WellRecord>, Vec<IoError>), IoError> {
    let reader = text::Guarded::new(
        bytes,
        MAX_FILE_BYTES.max(bytes.len() as u64),
        WHY,
        MAX_LINE_BYTES,
    );
    parse_reader(path, reader, columns, steps)
}

/// Line numbers of CSV records from their byte offsets in the (normalised) text. The CSV parser's
/// own line count misses blank and comment lines just before a record, so lines are counted here:
/// from a record's starting offset, blank and `#` lines are skipped, then the line is the number
/// of line ends before it plus one. Offsets come in file order, so the count moves forward only.
struct Lines<'a> {
    text: &'a [u8],
    /// Offset up to which line ends are counted.
    at: usize,
    /// 1-based line at `at`.
    line: u64,
}

impl Lines<'_> {
    fn of(&mut self, start: u64) -> u64 {
        let start = usize::try_from(start)
            .unwrap_or(usize::MAX)
            .min(self.text.len());
        if start >= self.at {
            self.line += memchr_count(&self.text[self.at..start]);
            self.at = start;
        } else {
            // Never expected; count afresh rather than trust a stale cursor.
            self.line = 1 + memchr_count(&self.text[..start]);
            self.at = start;
        }
        // Skip blank and comment lines: the record starts on the first other line.
        let (mut k, mut line) = (self.at, self.line);
        while k < self.text.len() && (self.text[k] == b'\n' || self.text[k] == b'#') {
            match self.text[k..].iter().position(|&b| b == b'\n') {
                Some(end) => {
                    k += end + 1;
                    line += 1;
                }
                None => break,
            }
        }
        line
    }
}

/// Line ends in `bytes`.
fn memchr_count(bytes: &[u8]) -> u64 {
    bytes.iter().filter(|&&b| b == b'\n').count() as u64
}

/// Parses a wells CSV from any reader, keeping going after a bad row (see [`read_all`]); wrap
/// the reader in [`text::Guarded`] for the byte-order mark, line ends and limits.
pub fn parse_reader<R: Read>(
    path: &Path,
    mut reader: R,
    columns: &WellColumns,
    steps: &[String],
) -> Result<(Vec<WellRecord>, Vec<IoError>), IoError> {
    let mut text = Vec::new();
    if let Err(io) = reader.read_to_end(&mut text) {
        return Err(match text::Limit::from_io(&io) {
            Some(text::Limit::Line { line, .. }) => IoError::Line {
                path: path.to_path_buf(),
                line: *line,
                message: io.to_string(),
            },
            Some(limit) => IoError::format(path, limit.to_string()),
            None => IoError::os(path, io),
        });
    }
    let lines = std::cell::RefCell::new(Lines {
        text: &text,
        at: 0,
        line: 1,
    });
    let line_of = |p: Option<&csv::Position>| p.map_or(1, |p| lines.borrow_mut().of(p.byte()));
    let csv_err = |e: csv::Error| {
        let line = line_of(e.position());
        let message = match e.kind() {
            csv::ErrorKind::UnequalLengths {
                expected_len, len, ..
            } => format!("expected {expected_len} fields like the header, found {len}"),
            csv::ErrorKind::Utf8 { .. } => "not UTF-8 text".to_string(),
            _ => e.to_string(),
        };
        IoError::Line {
            path: path.to_path_buf(),
            line,
            message,
        }
    };
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .comment(Some(b'#'))
        .from_reader(text.as_slice());
    let header = rdr.headers().map_err(csv_err)?.clone();
    if header.is_empty() || header.iter().all(|h| h.is_empty()) {
        return Err(IoError::format(path, "empty file: no header line"));
    }
    let header_line = line_of(header.position()).max(1);
    let mut index: HashMap<&str, usize> = HashMap::new();
    for (k, name) in header.iter().enumerate() {
        if index.insert(name, k).is_some() {
            return Err(IoError::Cell {
                path: path.to_path_buf(),
                line: header_line,
                column: excerpt(name),
                message: "column name appears twice in the header".into(),
            });
        }
    }
    let have: Vec<String> = header.iter().map(excerpt).collect();
    let find = |name: &str| -> Result<usize, IoError> {
        index.get(name).copied().ok_or_else(|| IoError::Cell {
            path: path.to_path_buf(),
            line: header_line,
            column: excerpt(name),
            message: format!("missing column (the header has: {})", have.join(", ")),
        })
    };
    let c_well = find(&columns.well)?;
    let c_x = find(&columns.x)?;
    let c_y = find(&columns.y)?;
    let c_step = find(&columns.step)?;
    let c_weight = if columns.weight_required {
        Some(find(&columns.weight)?)
    } else {
        index.get(columns.weight.as_str()).copied()
    };
    let c_kind = index.get(KIND_COLUMN).copied();
    let c_targets = columns
        .targets
        .iter()
        .map(|t| find(&t.column))
        .collect::<Result<Vec<_>, _>>()?;

    let mut out = Vec::new();
    let mut pairs: HashMap<(String, String), u64> = HashMap::new();
    let mut errors = Vec::new();
    let mut row = |rec: Result<csv::StringRecord, csv::Error>| -> Result<WellRecord, IoError> {
        let rec = rec.map_err(csv_err)?;
        let line = line_of(rec.position());
        let cell_err = |col: &str, message: String| IoError::Cell {
            path: path.to_path_buf(),
            line,
            column: col.to_string(),
            message,
        };
        let get = |k: usize| rec.get(k).unwrap_or("");
        let number = |k: usize, col: &str| -> Result<f64, IoError> {
            let s = get(k);
            if s.is_empty() {
                return Err(cell_err(col, "empty, a number is required".into()));
            }
            match s.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                _ => Err(cell_err(
                    col,
                    format!("'{}' is not a finite number", excerpt(s)),
                )),
            }
        };
        let well = get(c_well).to_string();
        if well.is_empty() {
            return Err(cell_err(&columns.well, "empty well name".into()));
        }
        let x = number(c_x, &columns.x)?;
        let y = number(c_y, &columns.y)?;
        let step = get(c_step).to_string();
        if !steps.contains(&step) {
            return Err(cell_err(
                &columns.step,
                format!(
                    "step '{}' is not in the manifest (steps: {})",
                    excerpt(&step),
                    steps.join(", ")
                ),
            ));
        }
        let weight = match c_weight {
            Some(k) => {
                let w = number(k, &columns.weight)?;
                if w <= 0.0 {
                    return Err(cell_err(
                        &columns.weight,
                        format!("weight must be > 0, got {w}"),
                    ));
                }
                w
            }
            None => 1.0,
        };
        let kind = match c_kind.map(get).filter(|s| !s.is_empty()) {
            Some(s) => Some(WellKind::parse(s).ok_or_else(|| {
                cell_err(
                    KIND_COLUMN,
                    format!("'{s}' is not a well kind (producer, injector or observer)"),
                )
            })?),
            None => None,
        };
        let mut targets = Vec::with_capacity(c_targets.len());
        for (t, &k) in columns.targets.iter().zip(&c_targets) {
            let s = get(k);
            if s.is_empty() {
                targets.push(f64::NAN);
                continue;
            }
            let v = match s.parse::<f64>() {
                Ok(v) if v.is_finite() => v,
                _ => {
                    return Err(cell_err(
                        &t.column,
                        format!(
                            "'{}' is not a finite number (leave the cell empty if not measured)",
                            excerpt(s)
                        ),
                    ));
                }
            };
            if v < t.min || v > t.max {
                return Err(cell_err(
                    &t.column,
                    format!(
                        "{v} lies outside the physical bounds [{}, {}] declared for this target",
                        t.min, t.max
                    ),
                ));
            }
            targets.push(v);
        }
        if let Some(first) = pairs.insert((well.clone(), step.clone()), line) {
            return Err(IoError::Line {
                path: path.to_path_buf(),
                line,
                message: format!(
                    "well '{}' step '{step}' already given on line {first}",
                    excerpt(&well)
                ),
            });
        }
        Ok(WellRecord {
            well,
            x,
            y,
            step,
            targets,
            weight,
            kind,
            line,
        })
    };
    for rec in rdr.records() {
        match row(rec) {
            Ok(r) => out.push(r),
            Err(e) => errors.push(e),
        }
    }
    if out.is_empty() && errors.is_empty() {
        return Err(IoError::format(path, "no well rows after the header"));
    }
    Ok((out, errors))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cols() -> WellColumns {
        WellColumns {
            well: "well".into(),
            x: "x".into(),
            y: "y".into(),
            step: "step".into(),
            weight: "weight".into(),
            weight_required: false,
            targets: vec![TargetColumn {
                column: "dSw".into(),
                min: -1.0,
                max: 1.0,
            }],
        }
    }

    #[test]
    fn reads_rows_with_empty_cells() {
        let text = b"well,x,y,step,dSw\nA,1,2,m1,0.2\nA,1.5,2,m2,\n";
        let steps = vec!["m1".to_string(), "m2".to_string()];
        let r = parse(Path::new("w.csv"), text, &cols(), &steps).unwrap();
        assert_eq!(r.len(), 2);
        assert_eq!(r[0].line, 2);
        assert_eq!(r[1].line, 3);
        assert!(r[1].targets[0].is_nan());
        assert_eq!(r[0].weight, 1.0);
    }

    #[test]
    fn optional_kind_column() {
        let text = b"well,x,y,step,kind,dSw\nA,1,2,m1,Producer,0.2\nB,1,2,m1,,0.1\nC,3,4,m1,observation,\n";
        let steps = vec!["m1".to_string()];
        let r = parse(Path::new("w.csv"), text, &cols(), &steps).unwrap();
        let kinds: Vec<Option<WellKind>> = r.iter().map(|w| w.kind).collect();
        assert_eq!(
            kinds,
            [Some(WellKind::Producer), None, Some(WellKind::Observer)]
        );
        let bad = b"well,x,y,step,kind,dSw\nA,1,2,m1,producer,0.2\nB,1,2,m1,pump,0.1\n";
        let e = parse(Path::new("w.csv"), bad, &cols(), &steps).unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.starts_with("w.csv, line 3, column 'kind'") && msg.contains("'pump'"),
            "{msg}"
        );
    }

    #[test]
    fn ragged_row_names_line() {
        let text = b"well,x,y,step,dSw\nA,1,2,m1,0.2\nB,1,2\n";
        let steps = vec!["m1".to_string()];
        let e = parse(Path::new("w.csv"), text, &cols(), &steps).unwrap_err();
        assert!(e.to_string().starts_with("w.csv, line 3"), "{e}");
    }
}
