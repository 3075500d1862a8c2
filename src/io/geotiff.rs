//! Single-band GeoTIFF maps (OGC GeoTIFF 1.1 standard, OGC 19-008r4; GDAL's `GDAL_NODATA` tag 42113).
//!
//! Layout written: float32, uncompressed strips, image row 0 is grid row `j = ny - 1` (north up for an
//! unrotated grid), pixel-is-area with each node at its pixel centre. Georeferencing is
//! ModelPixelScale + ModelTiepoint for an unrotated grid and ModelTransformation for a rotated one;
//! the GeoKeyDirectory carries the raster type and the EPSG code when the grid has one, or else a
//! local engineering system in metres (citation [`LOCAL_CRS_NAME`] and the metre as linear unit,
//! which GDAL reports as an engineering CRS); GDAL_NODATA carries the grid's null value;
//! ImageDescription an optional free text.
//!
//! Reading accepts float32/float64 and 8/16/32/64-bit integer samples, any compression the `tiff`
//! crate decodes, strips or tiles, pixel-is-area or pixel-is-point, and top-down or bottom-up rows.
//! It never trusts the header with memory: the file is read up to a size its grid can need, each
//! tag value is capped at [`MAX_TAG_BYTES`], and a file whose header disagrees with the manifest's
//! grid is refused before its pixels are decoded, which then happens within a buffer limit of the
//! grid's size.

use super::atomic;
use super::error::{IoError, check_len};
use crate::grid::Grid;
use std::io::Cursor;
use std::path::Path;
use tiff::decoder::{Decoder, DecodingResult, Limits};
use tiff::encoder::colortype::{ColorType, Gray8, Gray32Float};
use tiff::encoder::{TiffEncoder, TiffValue};
use tiff::tags::Tag;

/// GeoKey ids used here (OGC 19-008r4, section 7).
const GT_MODEL_TYPE: u16 = 1024;
const GT_RASTER_TYPE: u16 = 1025;
const GT_CITATION: u16 = 1026;
const GEO_ASCII_PARAMS_TAG: u16 = 34737;
const GEOGRAPHIC_TYPE: u16 = 2048;
const PROJECTED_CS_TYPE: u16 = 3072;
const PROJ_LINEAR_UNITS: u16 = 3076;
/// EPSG unit code of the metre.
const UNIT_METRE: u16 = 9001;
const RASTER_PIXEL_IS_AREA: u16 = 1;
const RASTER_PIXEL_IS_POINT: u16 = 2;
const MODEL_PROJECTED: u16 = 1;
const MODEL_GEOGRAPHIC: u16 = 2;

/// Name of the coordinate system written to maps whose grid has no EPSG code: a local engineering
/// (Cartesian) system in metres, east and north axes.
pub const LOCAL_CRS_NAME: &str = "Local engineering coordinates (metres, x east, y north)";

/// Null value assumed when a file carries no GDAL_NODATA tag.
pub const DEFAULT_NULL: f64 = -999.25;

/// A decoded single-band raster: its grid (georeferencing, size, EPSG, null value) and its values
/// in map order (`j * nx + i`, `NaN` for nodata).
#[derive(Clone, Debug)]
pub struct Raster {
    /// The grid described by the file's georeferencing.
    pub grid: Grid,
    /// Values in map order, `NaN` for null.
    pub values: Vec<f64>,
    /// The ImageDescription tag, if any.
    pub description: Option<String>,
}

/// True when `epsg` is taken to be a geographic (latitude/longitude) CRS: codes 4000-4999.
// common practice, no published source: EPSG assigns 4001-4999 to geographic 2D CRSs.
fn is_geographic(epsg: u32) -> bool {
    (4000..5000).contains(&epsg)
}

/// The affine map from raster space `(u, v)` (pixel corners, pixel-is-area) to world `(x, y)`:
/// `x = g[0] + u g[1] + v g[2]`, `y = g[3] + u g[4] + v g[5]` (GDAL's geotransform order).
fn geotransform(grid: &Grid) -> [f64; 6] {
    let r = grid.rotation.to_radians();
    let (c, s) = (r.cos(), r.sin());
    let (dx, dy, ny) = (grid.dx, grid.dy, grid.ny as f64);
    // Pixel (col, row) centre is raster (col + 0.5, row + 0.5) and holds node (col, ny - 1 - row).
    [
        grid.origin_x - 0.5 * dx * c - (ny - 0.5) * dy * s,
        dx * c,
        dy * s,
        grid.origin_y - 0.5 * dx * s + (ny - 0.5) * dy * c,
        dx * s,
        -dy * c,
    ]
}

/// Encodes a map as a float32 GeoTIFF in memory. `values` must have one value per node; `NaN` is
/// written as the grid's null value.
pub fn encode(grid: &Grid, values: &[f64], description: Option<&str>) -> Result<Vec<u8>, IoError> {
    let label = Path::new("<GeoTIFF in memory>");
    check_len(label, grid, values)?;
    let null = grid.null_value as f32;
    let data = raster_rows(grid, values, |v| if v.is_nan() { null } else { v as f32 });
    encode_samples::<Gray32Float>(grid, &data, &format!("{}", grid.null_value), description)
}

/// Encodes a map of byte codes (one per node) as an 8-bit unsigned GeoTIFF in memory, with
/// `nodata` as its GDAL_NODATA value.
pub fn encode_u8(
    grid: &Grid,
    codes: &[u8],
    nodata: u8,
    description: Option<&str>,
) -> Result<Vec<u8>, IoError> {
    let label = Path::new("<GeoTIFF in memory>");
    if codes.len() != grid.len() {
        return Err(IoError::format(
            label,
            format!("{} codes for a grid of {} nodes", codes.len(), grid.len()),
        ));
    }
    let data = raster_rows(grid, codes, |v| v);
    encode_samples::<Gray8>(grid, &data, &nodata.to_string(), description)
}

/// Writes a map of byte codes as an 8-bit unsigned GeoTIFF, atomically (see [`encode_u8`]).
pub fn write_u8(
    path: &Path,
    grid: &Grid,
    codes: &[u8],
    nodata: u8,
    description: Option<&str>,
) -> Result<(), IoError> {
    let bytes = encode_u8(grid, codes, nodata, description).map_err(|e| match e {
        IoError::Format { message, .. } => IoError::format(path, message),
        other => other,
    })?;
    atomic::write_bytes(path, &bytes)
}

/// Node values in raster order (image row 0 is `j = ny - 1`), each through `f`.
fn raster_rows<T: Copy, S>(grid: &Grid, values: &[T], f: impl Fn(T) -> S) -> Vec<S> {
    let (nx, ny) = (grid.nx, grid.ny);
    let mut data = Vec::with_capacity(nx * ny);
    for row in 0..ny {
        let j = ny - 1 - row;
        data.extend(values[j * nx..(j + 1) * nx].iter().map(|&v| f(v)));
    }
    data
}

/// Encodes raster-ordered samples of colour type `C` with the georeferencing of `grid`.
fn encode_samples<C: ColorType>(
    grid: &Grid,
    data: &[C::Inner],
    nodata: &str,
    description: Option<&str>,
) -> Result<Vec<u8>, IoError>
where
    [C::Inner]: TiffValue,
{
    let label = Path::new("<GeoTIFF in memory>");
    let (nx, ny) = (grid.nx, grid.ny);
    let width = u32::try_from(nx).map_err(|_| IoError::format(label, "grid too wide"))?;
    let height = u32::try_from(ny).map_err(|_| IoError::format(label, "grid too tall"))?;
    let tiff_err = |e: tiff::TiffError| IoError::format(label, format!("TIFF encoding: {e}"));
    let mut buf = Cursor::new(Vec::new());
    {
        let mut enc = TiffEncoder::new(&mut buf).map_err(tiff_err)?;
        let mut image = enc.new_image::<C>(width, height).map_err(tiff_err)?;
        let d = image.encoder();
        let g = geotransform(grid);
        if grid.rotation == 0.0 {
            d.write_tag(Tag::ModelPixelScaleTag, &[grid.dx, grid.dy, 0.0][..])
                .map_err(tiff_err)?;
            d.write_tag(Tag::ModelTiepointTag, &[0.0, 0.0, 0.0, g[0], g[3], 0.0][..])
                .map_err(tiff_err)?;
        } else {
            let m = [
                g[1], g[2], 0.0, g[0], g[4], g[5], 0.0, g[3], 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0,
                1.0,
            ];
            d.write_tag(Tag::ModelTransformationTag, &m[..])
                .map_err(tiff_err)?;
        }
        let mut keys: Vec<[u16; 4]> = Vec::new();
        match grid.epsg {
            Some(code) => {
                let code16 = u16::try_from(code).map_err(|_| {
                    IoError::format(label, format!("EPSG code {code} does not fit a GeoKey"))
                })?;
                let geographic = is_geographic(code);
                let model = if geographic {
                    MODEL_GEOGRAPHIC
                } else {
                    MODEL_PROJECTED
                };
                keys.push([GT_MODEL_TYPE, 0, 1, model]);
                keys.push([GT_RASTER_TYPE, 0, 1, RASTER_PIXEL_IS_AREA]);
                let key = if geographic {
                    GEOGRAPHIC_TYPE
                } else {
                    PROJECTED_CS_TYPE
                };
                keys.push([key, 0, 1, code16]);
            }
            None => {
                // A local engineering system: raster type, the name as citation (kept in
                // GeoAsciiParams) and the metre as linear unit, with no model type, which GDAL
                // reads as a local (engineering) CRS.
                keys.push([GT_RASTER_TYPE, 0, 1, RASTER_PIXEL_IS_AREA]);
                keys.push([
                    GT_CITATION,
                    GEO_ASCII_PARAMS_TAG,
                    LOCAL_CRS_NAME.len() as u16 + 1,
                    0,
                ]);
                keys.push([PROJ_LINEAR_UNITS, 0, 1, UNIT_METRE]);
            }
        }
        let mut dir: Vec<u16> = vec![1, 1, 0, keys.len() as u16];
        dir.extend(keys.iter().flatten());
        d.write_tag(Tag::GeoKeyDirectoryTag, &dir[..])
            .map_err(tiff_err)?;
        if grid.epsg.is_none() {
            // GeoTIFF ASCII parameters end each string with '|' (OGC 19-008r4, 7.1.5).
            d.write_tag(
                Tag::GeoAsciiParamsTag,
                format!("{LOCAL_CRS_NAME}|").as_str(),
            )
            .map_err(tiff_err)?;
        }
        d.write_tag(Tag::GdalNodata, nodata).map_err(tiff_err)?;
        if let Some(text) = description {
            d.write_tag(Tag::ImageDescription, text).map_err(tiff_err)?;
        }
        // write_data (not write_strip): it sets up the uncompressed writer the tags announce.
        image.write_data(data).map_err(tiff_err)?;
    }
    Ok(buf.into_inner())
}

/// Writes a map as a float32 GeoTIFF, atomically (see [`encode`]).
pub fn write(
    path: &Path,
    grid: &Grid,
    values: &[f64],
    description: Option<&str>,
) -> Result<(), IoError> {
    check_len(path, grid, values)?;
    let bytes = encode(grid, values, description).map_err(|e| match e {
        IoError::Format { message, .. } => IoError::format(path, message),
        other => other,
    })?;
    atomic::write_bytes(path, &bytes)
}

/// Largest tag value read (georeferencing, GeoKeys, nodata and description are far smaller).
pub const MAX_TAG_BYTES: usize = 1 << 20;

/// Pixels of a GeoTIFF read without a grid to compare it with (as many as a manifest's grid may
/// have nodes).
pub const MAX_PIXELS: u64 = crate::project::limits::MAX_GRID_NODES;

/// The most bytes a GeoTIFF of `nx x ny` pixels may hold: 8 bytes per pixel (float64, the largest
/// sample read) twice over, for tile padding and poor compression, plus 16 MiB for tags.
pub fn max_bytes_for(nx: u64, ny: u64) -> u64 {
    nx.saturating_mul(ny)
        .saturating_mul(16)
        .saturating_add(16 << 20)
}

/// The most bytes a GeoTIFF on `grid` may hold (see [`max_bytes_for`]).
pub fn max_bytes(grid: &Grid) -> u64 {
    max_bytes_for(grid.nx as u64, grid.ny as u64)
}

/// Reads at most `max` bytes of `path`.
fn read_file(path: &Path, max: u64, why: &str) -> Result<Vec<u8>, IoError> {
    super::text::read_capped(path, max, why).map_err(|e| match super::text::Limit::from_io(&e) {
        Some(limit) => IoError::format(path, limit.to_string()),
        None => IoError::os(path, e),
    })
}

/// Reads a single-band GeoTIFF with its georeferencing (at most [`MAX_PIXELS`] pixels).
pub fn read(path: &Path) -> Result<Raster, IoError> {
    let max = max_bytes_for(MAX_PIXELS, 1);
    let bytes = read_file(path, max, "the limit for a GeoTIFF map")?;
    decode(path, &bytes)
}

/// Decodes GeoTIFF bytes (at most [`MAX_PIXELS`] pixels); `path` only labels errors.
pub fn decode(path: &Path, bytes: &[u8]) -> Result<Raster, IoError> {
    decode_checked(path, bytes, None)
}

/// Decodes GeoTIFF bytes that must lie on `grid`; `path` only labels errors. The header and tags
/// are read first (each tag value at most [`MAX_TAG_BYTES`]) and compared with `grid`: a file
/// whose size or georeferencing differs is refused before any pixel is decoded, and pixels are
/// decoded with a buffer limit of the grid's size.
pub fn decode_on_grid(path: &Path, bytes: &[u8], grid: &Grid) -> Result<Vec<f64>, IoError> {
    decode_checked(path, bytes, Some(grid)).map(|r| r.values)
}

/// Limits for reading tags: no value larger than [`MAX_TAG_BYTES`].
fn tag_limits() -> Limits {
    let mut l = Limits::default();
    l.decoding_buffer_size = MAX_TAG_BYTES;
    l.ifd_value_size = MAX_TAG_BYTES;
    l.intermediate_buffer_size = MAX_TAG_BYTES;
    l
}

/// Limits for decoding the pixels of a `nx x ny` image: 8 bytes per pixel at most.
fn pixel_limits(nx: usize, ny: usize) -> Limits {
    let bytes = nx.saturating_mul(ny).saturating_mul(8).saturating_add(1024);
    let mut l = Limits::default();
    l.decoding_buffer_size = bytes;
    l.ifd_value_size = MAX_TAG_BYTES;
    l.intermediate_buffer_size = bytes.max(MAX_TAG_BYTES);
    l
}

fn decode_checked(path: &Path, bytes: &[u8], expect: Option<&Grid>) -> Result<Raster, IoError> {
    let bad = |m: String| IoError::format(path, m);
    let tiff_err = |what: &str, e: tiff::TiffError| match e {
        tiff::TiffError::LimitsExceeded => bad(format!(
            "{what}: declares more data than this map can hold (tag values are limited to \
             {MAX_TAG_BYTES} bytes, pixels to 8 bytes per grid node)"
        )),
        e => bad(format!("{what}: {e}")),
    };
    let mut dec = Decoder::new(Cursor::new(bytes))
        .map_err(|e| tiff_err("not a readable TIFF", e))?
        .with_limits(tag_limits());
    let (width, height) = dec
        .dimensions()
        .map_err(|e| tiff_err("reading image size", e))?;
    let pixels = u64::from(width) * u64::from(height);
    // With a grid to match, a header of another size is refused below, with every difference,
    // before any pixel is decoded; without one, the size is capped here.
    if expect.is_none() && pixels > MAX_PIXELS {
        return Err(bad(format!(
            "image of {width} x {height} pixels is larger than the limit of {MAX_PIXELS} pixels"
        )));
    }
    let color = dec
        .colortype()
        .map_err(|e| tiff_err("reading sample layout", e))?;
    if !matches!(color, tiff::ColorType::Gray(_)) {
        return Err(bad(format!(
            "expected a single band, found sample layout {color:?}"
        )));
    }
    let (nx, ny) = (width as usize, height as usize);
    let find_f64s =
        |dec: &mut Decoder<Cursor<&[u8]>>, tag: Tag| -> Result<Option<Vec<f64>>, IoError> {
            match dec.find_tag(tag) {
                Ok(Some(v)) => v
                    .into_f64_vec()
                    .map(Some)
                    .map_err(|e| tiff_err(&format!("tag {tag:?}"), e)),
                Ok(None) => Ok(None),
                Err(e) => Err(tiff_err(&format!("tag {tag:?}"), e)),
            }
        };
    let scale = find_f64s(&mut dec, Tag::ModelPixelScaleTag)?;
    let tiepoint = find_f64s(&mut dec, Tag::ModelTiepointTag)?;
    let transform = find_f64s(&mut dec, Tag::ModelTransformationTag)?;
    let keys = match dec.find_tag(Tag::GeoKeyDirectoryTag) {
        Ok(Some(v)) => v
            .into_u16_vec()
            .map_err(|e| tiff_err("GeoKeyDirectory", e))?,
        Ok(None) => Vec::new(),
        Err(e) => return Err(tiff_err("GeoKeyDirectory", e)),
    };
    let ascii = |dec: &mut Decoder<Cursor<&[u8]>>, tag: Tag| -> Option<String> {
        dec.find_tag(tag)
            .ok()
            .flatten()
            .and_then(|v| v.into_string().ok())
            .map(|s| {
                s.trim_matches(|c: char| c == '\0' || c.is_whitespace())
                    .to_string()
            })
    };
    let nodata_text = ascii(&mut dec, Tag::GdalNodata);
    let description = ascii(&mut dec, Tag::ImageDescription).filter(|s| !s.is_empty());

    let geokey = |id: u16| -> Option<u16> {
        if keys.len() < 4 {
            return None;
        }
        let n = keys[3] as usize;
        keys[4..]
            .chunks_exact(4)
            .take(n)
            .find(|k| k[0] == id && k[1] == 0)
            .map(|k| k[3])
    };
    let offset = match geokey(GT_RASTER_TYPE) {
        Some(RASTER_PIXEL_IS_POINT) => 0.0,
        _ => 0.5,
    };
    let epsg = geokey(PROJECTED_CS_TYPE)
        .or_else(|| geokey(GEOGRAPHIC_TYPE))
        .filter(|&c| c != 0 && c != 32767)
        .map(u32::from);

    let g: [f64; 6] = if let Some(m) = transform {
        if m.len() < 16 {
            return Err(bad(format!(
                "ModelTransformation has {} values, expected 16",
                m.len()
            )));
        }
        [m[3], m[0], m[1], m[7], m[4], m[5]]
    } else {
        let (Some(s), Some(t)) = (scale, tiepoint) else {
            return Err(bad(
                "no georeferencing: needs ModelPixelScale + ModelTiepoint or ModelTransformation"
                    .into(),
            ));
        };
        if s.len() < 2 || t.len() < 6 {
            return Err(bad("ModelPixelScale or ModelTiepoint too short".into()));
        }
        if t.len() > 6 {
            return Err(bad(
                "several tie points (a warped raster) are not supported".into(),
            ));
        }
        [
            t[3] - t[0] * s[0],
            s[0],
            0.0,
            t[4] + t[1] * s[1],
            0.0,
            -s[1],
        ]
    };
    if g.iter().any(|v| !v.is_finite()) {
        return Err(bad("georeferencing contains non-finite numbers".into()));
    }
    let centre = |c: f64, r: f64| {
        let (u, v) = (c + offset, r + offset);
        (g[0] + u * g[1] + v * g[2], g[3] + u * g[4] + v * g[5])
    };
    let dx = g[1].hypot(g[4]);
    let row_len = g[2].hypot(g[5]);
    if dx == 0.0 || row_len == 0.0 {
        return Err(bad("georeferencing has a zero pixel size".into()));
    }
    let rot = g[4].atan2(g[1]);
    let (cr, sr) = (rot.cos(), rot.sin());
    // Row step projected on the grid's x axis (must vanish) and on its y axis (sign = row order).
    let along = g[2] * cr + g[5] * sr;
    let across = -g[2] * sr + g[5] * cr;
    if along.abs() > 1e-9 * row_len {
        return Err(bad(
            "skewed (non-orthogonal) georeferencing is not supported".into(),
        ));
    }
    let top_down = across < 0.0;
    let dy = across.abs();
    let (origin_x, origin_y) = if top_down {
        centre(0.0, ny as f64 - 1.0)
    } else {
        centre(0.0, 0.0)
    };
    let null_value = match nodata_text.as_deref() {
        Some(t) if !t.is_empty() => t
            .parse::<f64>()
            .map_err(|_| bad(format!("GDAL_NODATA '{t}' is not a number")))?,
        _ => DEFAULT_NULL,
    };
    // Round away the last-bit noise of atan2 (1e-9 degrees is far below any survey's precision).
    let rotation = (rot.to_degrees() * 1e9).round() / 1e9 + 0.0;
    let grid = Grid {
        origin_x,
        origin_y,
        dx,
        dy,
        nx,
        ny,
        rotation,
        epsg,
        null_value,
    };

    if let Some(g) = expect {
        let differences = g.differences(&grid);
        if !differences.is_empty() {
            return Err(IoError::GridMismatch {
                path: path.to_path_buf(),
                differences,
            });
        }
    }
    let mut dec = dec.with_limits(pixel_limits(nx, ny));
    let image = dec
        .read_image()
        .map_err(|e| tiff_err("decoding the image data", e))?;
    let n32 = null_value as f32;
    let nullify = |x: f64| if x == null_value { f64::NAN } else { x };
    let raw: Vec<f64> = match image {
        DecodingResult::F32(v) => v
            .into_iter()
            .map(|x| if x == n32 { f64::NAN } else { f64::from(x) })
            .collect(),
        DecodingResult::F64(v) => v.into_iter().map(nullify).collect(),
        DecodingResult::F16(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::U8(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::U16(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::U32(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::U64(v) => v.into_iter().map(|x| nullify(x as f64)).collect(),
        DecodingResult::I8(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::I16(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::I32(v) => v.into_iter().map(|x| nullify(f64::from(x))).collect(),
        DecodingResult::I64(v) => v.into_iter().map(|x| nullify(x as f64)).collect(),
    };
    if raw.len() != nx * ny {
        return Err(bad(format!(
            "image holds {} samples, expected {} x {} = {}",
            raw.len(),
            nx,
            ny,
            nx * ny
        )));
    }
    let mut values = vec![f64::NAN; nx * ny];
    for row in 0..ny {
        let j = if top_down { ny - 1 - row } else { row };
        values[j * nx..(j + 1) * nx].copy_from_slice(&raw[row * nx..(row + 1) * nx]);
    }
    Ok(Raster {
        grid,
        values,
        description,
    })
}

/// Reads a GeoTIFF that must lie on `grid`; the error lists how the file's grid differs. The
/// file may hold at most [`max_bytes`] bytes, and its pixels are decoded only once its header
/// matches the grid (see [`decode_on_grid`]).
pub fn read_on_grid(path: &Path, grid: &Grid) -> Result<Vec<f64>, IoError> {
    let why = format!(
        "a GeoTIFF map of {} x {} nodes needs far less",
        grid.nx, grid.ny
    );
    let bytes = read_file(path, max_bytes(grid), &why)?;
    decode_on_grid(path, &bytes, grid)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn geotransform_unrotated() {
        let g = Grid {
            origin_x: 100.0,
            origin_y: 200.0,
            dx: 10.0,
            dy: 5.0,
            nx: 3,
            ny: 4,
            rotation: 0.0,
            epsg: None,
            null_value: -1.0,
        };
        // Upper-left corner: half a pixel west of node (0, ny-1) and half a pixel north of it.
        let t = geotransform(&g);
        assert_eq!(t, [95.0, 10.0, 0.0, 200.0 + 3.0 * 5.0 + 2.5, 0.0, -5.0]);
    }
}
