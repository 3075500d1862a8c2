//! PNG pictures: maps with a colour bar, cross-plots, line plots and bar charts.
//!
//! Everything is drawn with plotters' bitmap backend into an in-memory RGB buffer and encoded with
//! the `png` crate, so each function returns the PNG file's bytes; the caller writes them atomically
//! or embeds them in the HTML page. Text uses the embedded DejaVu Sans ([`super::font`]).
//!
//! Maps are rasterised directly into the pixel buffer by inverse mapping: every pixel centre of the
//! map frame is turned into world coordinates, then into fractional node coordinates of the (possibly
//! rotated) grid, and takes the value of the node whose cell holds it (cells centred on nodes, the
//! pixel-is-area convention of the GeoTIFF maps). The cost is one small computation per pixel,
//! whatever the grid size, so a 1000 x 1000 grid draws as fast as a 10 x 10 one.
//!
//! Sequential values use viridis, signed changes the ColorBrewer RdBu map centred on zero, and
//! series colours the colour-blind-safe qualitative palette of Okabe & Ito (2008, "Color Universal
//! Design").

use plotters::coord::Shift;
use plotters::prelude::*;

use super::ReportError;
use super::colormap::{ColourScale, Rgb, finite_range, widen};
use super::font::{FAMILY, ensure_registered};

/// Smallest picture side accepted, in pixels.
pub const MIN_SIDE: u32 = 160;
/// Largest picture side accepted, in pixels.
pub const MAX_SIDE: u32 = 8000;

/// Okabe & Ito (2008) qualitative palette, black first dropped: orange, sky blue, bluish green,
/// blue, vermillion, reddish purple, yellow, black.
pub const SERIES_COLOURS: [Rgb; 8] = [
    [0xe6, 0x9f, 0x00],
    [0x00, 0x72, 0xb2],
    [0x00, 0x9e, 0x73],
    [0xd5, 0x5e, 0x00],
    [0x56, 0xb4, 0xe9],
    [0xcc, 0x79, 0xa7],
    [0xf0, 0xe4, 0x42],
    [0x00, 0x00, 0x00],
];

/// Colour of null nodes inside the grid.
pub const NULL_COLOUR: Rgb = [0xd9, 0xd9, 0xd9];
/// Colour of the hatching drawn over nodes outside the area of applicability.
pub const HATCH_COLOUR: Rgb = [0x40, 0x40, 0x40];

fn series_colour(k: usize) -> RGBColor {
    let c = SERIES_COLOURS[k % SERIES_COLOURS.len()];
    RGBColor(c[0], c[1], c[2])
}

/// A chart with two numeric axes, as the cross-plots, line plots and bar charts draw on.
type Chart2d<'a, 'b> = ChartContext<
    'a,
    BitMapBackend<'b>,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

/// The chart of a cross-plot or line plot: title, axes over `x` and `y` with their labels, and a
/// light grey mesh with ticks formatted for each axis's span.
fn xy_chart<'a, 'b: 'a>(
    root: &'a DrawingArea<BitMapBackend<'b>, Shift>,
    title: &str,
    x_label: &str,
    y_label: &str,
    x: std::ops::Range<f64>,
    y: std::ops::Range<f64>,
) -> Result<Chart2d<'a, 'b>, ReportError> {
    let (sx, sy) = (x.end - x.start, y.end - y.start);
    let mut chart = ChartBuilder::on(root)
        .margin(12)
        .caption(title, (FAMILY, 17, FontStyle::Bold))
        .x_label_area_size(44)
        .y_label_area_size(64)
        .build_cartesian_2d(x, y)
        .map_err(draw_err)?;
    chart
        .configure_mesh()
        .light_line_style(WHITE)
        .bold_line_style(RGBColor(0xdd, 0xdd, 0xdd))
        .x_desc(x_label)
        .y_desc(y_label)
        .label_style((FAMILY, 12))
        .axis_desc_style((FAMILY, 13))
        .x_label_formatter(&|v| format_tick(*v, sx))
        .y_label_formatter(&|v| format_tick(*v, sy))
        .draw()
        .map_err(draw_err)?;
    Ok(chart)
}

/// The legend box of a chart's named series, in one corner.
fn series_legend<'a, 'b: 'a>(
    chart: &mut Chart2d<'a, 'b>,
    corner: SeriesLabelPosition,
) -> Result<(), ReportError> {
    chart
        .configure_series_labels()
        .position(corner)
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(0x99, 0x99, 0x99))
        .label_font((FAMILY, 12))
        .draw()
        .map_err(draw_err)
}

fn draw_err<E: std::fmt::Display>(e: E) -> ReportError {
    ReportError::Draw(e.to_string())
}

fn check_size(width: u32, height: u32) -> Result<(), ReportError> {
    if !(MIN_SIDE..=MAX_SIDE).contains(&width) || !(MIN_SIDE..=MAX_SIDE).contains(&height) {
        return Err(ReportError::InvalidInput(format!(
            "picture size {width} x {height} pixels: each side must lie in {MIN_SIDE}..={MAX_SIDE}"
        )));
    }
    Ok(())
}

/// Encodes an 8-bit RGB buffer (row-major, top row first) as PNG bytes: an indexed (palette)
/// PNG, a third of the size of plain RGB (see [`palette`]).
pub fn encode_png(rgb: &[u8], width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    encode_png_with(rgb, width, height, true)
}

/// The palette of an RGB buffer and each pixel's index into it. With at most 256 distinct
/// colours this is exact. With more, the palette holds the 256 most frequent colours (ties by
/// colour value, so the result is reproducible) and every other pixel takes its nearest palette
/// colour in RGB: a popularity quantiser (Heckbert 1982, "Color image quantization for frame
/// buffer display", SIGGRAPH '82). Map cells, the colour bar and flat fills are frequent and keep
/// their exact colours; the colours lost are the anti-aliased fringes of text and symbols.
pub fn palette(rgb: &[u8]) -> (Vec<Rgb>, Vec<u8>) {
    use std::collections::HashMap;
    // Pictures are mostly runs of one colour: count and look up per run, not per pixel.
    let mut counts: HashMap<Rgb, u32> = HashMap::new();
    let mut run: Option<(Rgb, u32)> = None;
    for c in rgb.chunks_exact(3) {
        let c = [c[0], c[1], c[2]];
        match &mut run {
            Some((r, n)) if *r == c => *n += 1,
            _ => {
                if let Some((r, n)) = run {
                    *counts.entry(r).or_insert(0) += n;
                }
                run = Some((c, 1));
            }
        }
    }
    if let Some((r, n)) = run {
        *counts.entry(r).or_insert(0) += n;
    }
    let mut by_count: Vec<(Rgb, u32)> = counts.into_iter().collect();
    by_count.sort_unstable_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    let colours: Vec<Rgb> = by_count.iter().take(256).map(|(c, _)| *c).collect();
    let mut index: HashMap<Rgb, u8> = colours
        .iter()
        .enumerate()
        .map(|(k, c)| (*c, k as u8))
        .collect();
    let nearest = |c: Rgb| -> u8 {
        let d = |p: &Rgb| -> i32 {
            (0..3)
                .map(|k| (i32::from(p[k]) - i32::from(c[k])).pow(2))
                .sum()
        };
        colours
            .iter()
            .enumerate()
            .min_by_key(|(_, p)| d(p))
            .map_or(0, |(k, _)| k as u8)
    };
    let mut pixels = Vec::with_capacity(rgb.len() / 3);
    let mut last: Option<(Rgb, u8)> = None;
    for c in rgb.chunks_exact(3) {
        let c = [c[0], c[1], c[2]];
        let k = match last {
            Some((l, k)) if l == c => k,
            _ => match index.get(&c) {
                Some(&k) => k,
                None => {
                    let k = nearest(c);
                    index.insert(c, k);
                    k
                }
            },
        };
        last = Some((c, k));
        pixels.push(k);
    }
    (colours, pixels)
}

/// Encodes an RGB buffer as PNG, indexed (see [`palette`]) or plain RGB.
pub fn encode_png_with(
    rgb: &[u8],
    width: u32,
    height: u32,
    indexed: bool,
) -> Result<Vec<u8>, ReportError> {
    if rgb.len() != width as usize * height as usize * 3 {
        return Err(ReportError::InvalidInput(format!(
            "RGB buffer holds {} bytes, {width} x {height} pixels need {}",
            rgb.len(),
            width as usize * height as usize * 3
        )));
    }
    let png_err = |e: png::EncodingError| ReportError::Png(e.to_string());
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width, height);
        enc.set_depth(png::BitDepth::Eight);
        // The default level: the best one costs twice the time for 3 % fewer bytes.
        enc.set_compression(png::Compression::Default);
        if indexed {
            let (colours, pixels) = palette(rgb);
            enc.set_color(png::ColorType::Indexed);
            enc.set_palette(colours.iter().flatten().copied().collect::<Vec<u8>>());
            // Palette images compress best unfiltered (PNG specification, section 12.8).
            enc.set_filter(png::FilterType::NoFilter);
            let mut writer = enc.write_header().map_err(png_err)?;
            writer.write_image_data(&pixels).map_err(png_err)?;
        } else {
            enc.set_color(png::ColorType::Rgb);
            enc.set_adaptive_filter(png::AdaptiveFilterType::Adaptive);
            let mut writer = enc.write_header().map_err(png_err)?;
            writer.write_image_data(rgb).map_err(png_err)?;
        }
    }
    Ok(out)
}

/// Formats a tick value: enough decimals for a hundredth of the axis span, trailing zeros dropped.
pub fn format_tick(v: f64, span: f64) -> String {
    if !v.is_finite() {
        return String::new();
    }
    let span = span.abs();
    let decimals = if span > 0.0 && span.is_finite() {
        (-(span / 100.0).log10()).ceil().clamp(0.0, 8.0) as usize
    } else {
        3
    };
    let mut s = format!("{v:.decimals$}");
    if s.contains('.') {
        while s.ends_with('0') {
            s.pop();
        }
        if s.ends_with('.') {
            s.pop();
        }
    }
    // "-0" reads badly
    if s == "-0" { "0".to_string() } else { s }
}

/// Splits `text` into lines no wider than `max_width` pixels in `style`.
fn wrap_text(
    area: &DrawingArea<BitMapBackend, Shift>,
    text: &str,
    style: &TextStyle,
    max_width: u32,
) -> Vec<String> {
    let mut lines = Vec::new();
    for paragraph in text.lines() {
        let mut line = String::new();
        for word in paragraph.split_whitespace() {
            let candidate = if line.is_empty() {
                word.to_string()
            } else {
                format!("{line} {word}")
            };
            let w = area
                .estimate_text_size(&candidate, style)
                .map(|(w, _)| w)
                .unwrap_or(u32::MAX);
            if w > max_width && !line.is_empty() {
                lines.push(std::mem::take(&mut line));
                line = word.to_string();
            } else {
                line = candidate;
            }
        }
        if !line.is_empty() {
            lines.push(line);
        }
    }
    lines
}

// ---------------------------------------------------------------------------------------------
// Maps
// ---------------------------------------------------------------------------------------------

/// Geometry of a regular, possibly rotated grid (DEVELOPERS.md convention): node `(i, j)` lies at
/// `x = x0 + i dx cos r - j dy sin r`, `y = y0 + i dx sin r + j dy cos r`, `r` degrees
/// counter-clockwise from east. Each node stands for the cell of size `dx` by `dy` centred on it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MapGeometry {
    /// x of node (0, 0).
    pub origin_x: f64,
    /// y of node (0, 0).
    pub origin_y: f64,
    /// Node spacing along the grid's x axis (> 0).
    pub dx: f64,
    /// Node spacing along the grid's y axis (> 0).
    pub dy: f64,
    /// Number of nodes along x.
    pub nx: usize,
    /// Number of nodes along y.
    pub ny: usize,
    /// Rotation of the grid's x axis, degrees counter-clockwise from east.
    pub rotation_deg: f64,
}

impl MapGeometry {
    /// World coordinates of node `(i, j)`.
    pub fn node_xy(&self, i: usize, j: usize) -> (f64, f64) {
        let (s, c) = self.rotation_deg.to_radians().sin_cos();
        let (u, v) = (i as f64 * self.dx, j as f64 * self.dy);
        (self.origin_x + u * c - v * s, self.origin_y + u * s + v * c)
    }

    /// Fractional node coordinates `(i, j)` of the world point `(x, y)` (inverse of [`Self::node_xy`]).
    pub fn world_to_node(&self, x: f64, y: f64) -> (f64, f64) {
        let (s, c) = self.rotation_deg.to_radians().sin_cos();
        let (ex, ny) = (x - self.origin_x, y - self.origin_y);
        ((ex * c + ny * s) / self.dx, (-ex * s + ny * c) / self.dy)
    }

    /// The node whose cell holds the world point, if any.
    pub fn node_at(&self, x: f64, y: f64) -> Option<(usize, usize)> {
        let (fi, fj) = self.world_to_node(x, y);
        let (i, j) = ((fi + 0.5).floor(), (fj + 0.5).floor());
        if i >= 0.0 && j >= 0.0 && (i as usize) < self.nx && (j as usize) < self.ny {
            Some((i as usize, j as usize))
        } else {
            None
        }
    }

    /// World bounding box `(xmin, xmax, ymin, ymax)` of all cells (nodes +- half a cell).
    pub fn extent(&self) -> (f64, f64, f64, f64) {
        let (s, c) = self.rotation_deg.to_radians().sin_cos();
        let (mut xmin, mut xmax, mut ymin, mut ymax) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
        for (fi, fj) in [
            (-0.5, -0.5),
            (self.nx as f64 - 0.5, -0.5),
            (-0.5, self.ny as f64 - 0.5),
            (self.nx as f64 - 0.5, self.ny as f64 - 0.5),
        ] {
            let (u, v) = (fi * self.dx, fj * self.dy);
            let (x, y) = (self.origin_x + u * c - v * s, self.origin_y + u * s + v * c);
            xmin = xmin.min(x);
            xmax = xmax.max(x);
            ymin = ymin.min(y);
            ymax = ymax.max(y);
        }
        (xmin, xmax, ymin, ymax)
    }

    fn check(&self) -> Result<(), ReportError> {
        let finite = [
            self.origin_x,
            self.origin_y,
            self.dx,
            self.dy,
            self.rotation_deg,
        ]
        .iter()
        .all(|v| v.is_finite());
        if !finite || self.dx <= 0.0 || self.dy <= 0.0 || self.nx == 0 || self.ny == 0 {
            return Err(ReportError::InvalidInput(format!(
                "map geometry needs finite origin and rotation, dx > 0, dy > 0 and at least one node; \
                 got origin ({}, {}), dx {}, dy {}, {} x {} nodes, rotation {}",
                self.origin_x, self.origin_y, self.dx, self.dy, self.nx, self.ny, self.rotation_deg
            )));
        }
        Ok(())
    }
}

impl From<&crate::grid::Grid> for MapGeometry {
    fn from(g: &crate::grid::Grid) -> Self {
        MapGeometry {
            origin_x: g.origin_x,
            origin_y: g.origin_y,
            dx: g.dx,
            dy: g.dy,
            nx: g.nx,
            ny: g.ny,
            rotation_deg: g.rotation,
        }
    }
}

/// How a well is drawn on a map.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum WellSymbol {
    /// A producer: black disc with a white rim.
    Producer,
    /// An injector: white diamond with a black outline.
    Injector,
    /// An observation well: white square with a black outline.
    Observer,
    /// Kind not given: white disc with a black outline.
    #[default]
    Unknown,
}

impl WellSymbol {
    /// Legend word for the symbol.
    pub fn legend(self) -> &'static str {
        match self {
            WellSymbol::Producer => "producer",
            WellSymbol::Injector => "injector",
            WellSymbol::Observer => "observer",
            WellSymbol::Unknown => "well",
        }
    }
}

/// A well posted on a map.
#[derive(Debug, Clone, PartialEq)]
pub struct MapWell {
    /// World x.
    pub x: f64,
    /// World y.
    pub y: f64,
    /// Name, drawn as its label (empty: no label).
    pub name: String,
    /// How the well is drawn.
    pub symbol: WellSymbol,
}

/// A polyline drawn over a map (a field outline, a fault trace), in world coordinates.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct MapLine {
    /// Vertices in order; a closed outline repeats its first vertex at the end.
    pub points: Vec<(f64, f64)>,
}

/// A map to draw: node values of one grid with its colour scale, annotations and caption.
#[derive(Debug, Clone)]
pub struct MapPicture<'a> {
    /// The grid (node positions and cell size).
    pub geometry: MapGeometry,
    /// Node values, index `j * nx + i`, `j = 0` at the grid's first row; `NaN` for null.
    pub values: &'a [f64],
    /// Title drawn above the map.
    pub title: String,
    /// Second line under the title (e.g. the survey dates); empty for none.
    pub subtitle: String,
    /// Unit of the values, written above the colour bar (e.g. "MPa", "fraction").
    pub unit: String,
    /// Unit of the coordinates, written on the axes and the scale bar (e.g. "m"); empty for none.
    pub xy_unit: String,
    /// The coordinate system, in words (e.g. "EPSG:32631"); empty for none.
    pub crs: String,
    /// How values become colours.
    pub scale: ColourScale,
    /// Wells posted on the map.
    pub wells: &'a [MapWell],
    /// Per-node flag (same indexing as `values`): `true` where the node lies outside the area of
    /// applicability; such nodes are drawn hatched.
    pub outside: Option<&'a [bool]>,
    /// Text drawn under the map; empty for none.
    pub caption: String,
    /// Extra points (e.g. ranked infill targets): `(x, y, label)`, drawn as triangles.
    pub markers: &'a [(f64, f64, String)],
    /// Outlines and fault traces drawn over the map.
    pub lines: &'a [MapLine],
}

impl MapPicture<'_> {
    fn check(&self) -> Result<(), ReportError> {
        self.geometry.check()?;
        let n = self.geometry.nx * self.geometry.ny;
        if self.values.len() != n {
            return Err(ReportError::InvalidInput(format!(
                "map '{}': {} values given for a {} x {} grid ({n} nodes)",
                self.title,
                self.values.len(),
                self.geometry.nx,
                self.geometry.ny
            )));
        }
        if let Some(o) = self.outside
            && o.len() != n
        {
            return Err(ReportError::InvalidInput(format!(
                "map '{}': {} applicability flags given for {n} nodes",
                self.title,
                o.len()
            )));
        }
        if !self.scale.is_valid() {
            let (lo, hi) = self.scale.range();
            return Err(ReportError::InvalidInput(format!(
                "map '{}': colour scale range [{lo}, {hi}] must be finite and not empty",
                self.title
            )));
        }
        Ok(())
    }
}

/// Where the map frame sits in the picture and which world window it shows. Pixel `(px, py)`
/// covers `[px, px + 1) x [py, py + 1)`; rows grow downwards, so north is up.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MapView {
    /// First pixel column of the frame.
    pub px0: i32,
    /// One past the last pixel column.
    pub px1: i32,
    /// First pixel row of the frame (top).
    pub py0: i32,
    /// One past the last pixel row (bottom).
    pub py1: i32,
    /// World x at the frame's left edge.
    pub xmin: f64,
    /// World x at the frame's right edge.
    pub xmax: f64,
    /// World y at the frame's bottom edge.
    pub ymin: f64,
    /// World y at the frame's top edge.
    pub ymax: f64,
}

impl MapView {
    /// A view of the whole grid in the pixel frame, with equal scales on both axes (the shorter
    /// world side is padded) and a small margin.
    pub fn fit(geometry: &MapGeometry, px: std::ops::Range<i32>, py: std::ops::Range<i32>) -> Self {
        let (xmin, xmax, ymin, ymax) = geometry.extent();
        let (cx, cy) = ((xmin + xmax) / 2.0, (ymin + ymax) / 2.0);
        let (mut wx, mut wy) = ((xmax - xmin) * 1.02, (ymax - ymin) * 1.02);
        let (pw, ph) = (
            (px.end - px.start).max(1) as f64,
            (py.end - py.start).max(1) as f64,
        );
        // world units per pixel must agree on both axes
        if wx / pw > wy / ph {
            wy = wx / pw * ph;
        } else {
            wx = wy / ph * pw;
        }
        MapView {
            px0: px.start,
            px1: px.end,
            py0: py.start,
            py1: py.end,
            xmin: cx - wx / 2.0,
            xmax: cx + wx / 2.0,
            ymin: cy - wy / 2.0,
            ymax: cy + wy / 2.0,
        }
    }

    /// World coordinates of the point at pixel position `(px, py)` (pixel centres are at `+0.5`).
    pub fn pixel_to_world(&self, px: f64, py: f64) -> (f64, f64) {
        let fx = (px - self.px0 as f64) / (self.px1 - self.px0) as f64;
        let fy = (py - self.py0 as f64) / (self.py1 - self.py0) as f64;
        (
            self.xmin + fx * (self.xmax - self.xmin),
            self.ymax - fy * (self.ymax - self.ymin),
        )
    }

    /// Pixel position of the world point `(x, y)` (inverse of [`Self::pixel_to_world`]).
    pub fn world_to_pixel(&self, x: f64, y: f64) -> (f64, f64) {
        (
            self.px0 as f64
                + (x - self.xmin) / (self.xmax - self.xmin) * (self.px1 - self.px0) as f64,
            self.py0 as f64
                + (self.ymax - y) / (self.ymax - self.ymin) * (self.py1 - self.py0) as f64,
        )
    }
}

/// Number of colour classes a map and its colour bar are drawn with. More than the eye tells
/// apart on a continuous ramp, and few enough that a map, its colour bar and the greys of its
/// text fit the 256 colours of an indexed (palette) PNG.
/// An odd number, so that the middle class holds the centre of a diverging scale exactly.
pub const COLOUR_LEVELS: usize = 127;

/// The colour of scale position `t` in `[0, 1]`: `t` falls in one of [`COLOUR_LEVELS`] equal
/// classes, and class `k` takes the colour map's colour at `k / (COLOUR_LEVELS - 1)`, so the
/// first and last classes show the map's end colours and the middle class its centre.
pub fn level_colour(scale: &ColourScale, t: f64) -> Rgb {
    let n = COLOUR_LEVELS as f64;
    let k = (t.clamp(0.0, 1.0) * n).floor().min(n - 1.0);
    scale.colormap().rgb(k / (n - 1.0))
}

/// Spacing in pixels of the hatch lines over nodes outside the area of applicability.
pub const HATCH_SPACING: i32 = 8;
/// Colour of hatch lines over dark cells.
pub const HATCH_LIGHT: Rgb = [0xf2, 0xf2, 0xf2];

/// The hatch colour that stands out against `c`: dark lines on light cells, light lines on dark
/// ones (relative luminance below 0.4; ITU-R BT.709 weights on the sRGB values).
pub fn hatch_colour(c: Rgb) -> Rgb {
    let l =
        (0.2126 * f64::from(c[0]) + 0.7152 * f64::from(c[1]) + 0.0722 * f64::from(c[2])) / 255.0;
    if l < 0.4 { HATCH_LIGHT } else { HATCH_COLOUR }
}

/// Paints the map's cells into an RGB buffer (`width x height`, top row first) inside the view's
/// frame. Pixels whose centre falls in no cell are left untouched; null nodes are painted
/// [`NULL_COLOUR`]; values take the colour of their class ([`level_colour`]); nodes flagged
/// outside keep their colour under thin diagonal hatch lines ([`hatch_colour`]) every
/// [`HATCH_SPACING`] pixels, so the value stays readable.
pub fn rasterise(
    p: &MapPicture,
    view: &MapView,
    rgb: &mut [u8],
    width: u32,
    height: u32,
) -> Result<(), ReportError> {
    p.check()?;
    if rgb.len() != width as usize * height as usize * 3 {
        return Err(ReportError::InvalidInput(format!(
            "RGB buffer holds {} bytes, {width} x {height} pixels need {}",
            rgb.len(),
            width as usize * height as usize * 3
        )));
    }
    let g = &p.geometry;
    let (s, c) = g.rotation_deg.to_radians().sin_cos();
    let px0 = view.px0.max(0);
    let px1 = view.px1.min(width as i32);
    let py0 = view.py0.max(0);
    let py1 = view.py1.min(height as i32);
    for py in py0..py1 {
        for px in px0..px1 {
            let (x, y) = view.pixel_to_world(px as f64 + 0.5, py as f64 + 0.5);
            let (ex, ny) = (x - g.origin_x, y - g.origin_y);
            let fi = (ex * c + ny * s) / g.dx + 0.5;
            let fj = (-ex * s + ny * c) / g.dy + 0.5;
            if !(fi >= 0.0 && fj >= 0.0) {
                continue;
            }
            let (i, j) = (fi as usize, fj as usize);
            if i >= g.nx || j >= g.ny {
                continue;
            }
            let k = j * g.nx + i;
            let v = p.values[k];
            let mut col = if v.is_finite() {
                level_colour(&p.scale, p.scale.position(v))
            } else {
                NULL_COLOUR
            };
            if p.outside.is_some_and(|o| o[k]) && (px - py).rem_euclid(HATCH_SPACING) == 0 {
                col = hatch_colour(col);
            }
            let o = (py as usize * width as usize + px as usize) * 3;
            rgb[o..o + 3].copy_from_slice(&col);
        }
    }
    Ok(())
}

/// Sizes of text and symbols on a map picture, in pixels, in proportion to the picture so that
/// a picture shown across a 1600-pixel slide keeps every text at 14 pixels or more (labels of a
/// 1000-pixel-wide picture are 16 pixels, ticks 17).
#[derive(Debug, Clone, Copy)]
struct MapStyle {
    k: f64,
    title: f64,
    subtitle: f64,
    tick: f64,
    axis: f64,
    legend: f64,
    label: f64,
}

impl MapStyle {
    fn new(width: u32, height: u32) -> Self {
        let k = (f64::from(width) / 1000.0)
            .min(f64::from(height) / 820.0)
            .clamp(0.45, 4.0);
        let f = |v: f64| (v * k).max(9.0).round();
        MapStyle {
            k,
            title: f(28.0),
            subtitle: f(20.0),
            tick: f(17.0),
            axis: f(19.0),
            legend: f(18.0),
            label: f(16.0),
        }
    }

    /// A length of `v` pixels at the reference size.
    fn px(&self, v: f64) -> i32 {
        (v * self.k).round().max(1.0) as i32
    }
}

/// One entry of a map's legend.
#[derive(Debug, Clone, PartialEq)]
enum LegendKey {
    Well(WellSymbol),
    Target,
    Line,
    Null,
    Hatched,
    Note,
}

/// The legend entries of a map: symbols present, then notes.
fn legend_entries(p: &MapPicture, prefix: &str) -> Vec<(LegendKey, String)> {
    let mut out = Vec::new();
    for s in [
        WellSymbol::Producer,
        WellSymbol::Injector,
        WellSymbol::Observer,
        WellSymbol::Unknown,
    ] {
        if p.wells.iter().any(|w| w.symbol == s) {
            out.push((LegendKey::Well(s), s.legend().to_string()));
        }
    }
    if !p.markers.is_empty() {
        out.push((LegendKey::Target, "ranked target".to_string()));
    }
    if !p.lines.is_empty() {
        out.push((LegendKey::Line, "outline / fault".to_string()));
    }
    if p.values.iter().any(|v| !v.is_finite()) {
        out.push((LegendKey::Null, "no data".to_string()));
    }
    if p.outside.is_some_and(|o| o.iter().any(|&b| b)) {
        out.push((
            LegendKey::Hatched,
            "outside the area of applicability".to_string(),
        ));
    }
    if !prefix.is_empty() {
        out.push((LegendKey::Note, format!("labels leave out \"{prefix}\"")));
    }
    out
}

/// A round length for a scale bar about `target` long: 1, 2 or 5 times a power of ten.
pub fn nice_length(target: f64) -> f64 {
    if !(target.is_finite() && target > 0.0) {
        return 1.0;
    }
    let (f, e) = nice_parts(target);
    scaled(f, e)
}

/// `target` as a round mantissa (1, 2 or 5) and a power of ten at or below it.
fn nice_parts(target: f64) -> (f64, i32) {
    let e = target.log10().floor() as i32;
    let m = target / 10f64.powi(e);
    let f = if m >= 5.0 {
        5.0
    } else if m >= 2.0 {
        2.0
    } else {
        1.0
    };
    (f, e)
}

/// `k` times ten to the `e`, computed so that decimal values come out as written (dividing by an
/// exact power of ten rather than multiplying by an inexact one).
fn scaled(k: f64, e: i32) -> f64 {
    if e < 0 {
        k / 10f64.powi(-e)
    } else {
        k * 10f64.powi(e)
    }
}

/// The text of a scale-bar length: kilometres from 1 km up when the unit is metres.
pub fn length_text(len: f64, unit: &str) -> String {
    if unit == "m" && len >= 1000.0 {
        format!("{} km", format_tick(len / 1000.0, len / 1000.0))
    } else if unit.is_empty() {
        format_tick(len, len)
    } else {
        format!("{} {unit}", format_tick(len, len))
    }
}

/// Round tick values between `lo` and `hi`, about `n` of them (1, 2 or 5 times a power of ten
/// apart).
pub fn nice_ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite() && hi > lo) || n == 0 {
        return Vec::new();
    }
    let (f, e) = nice_parts((hi - lo) / n as f64);
    let step = scaled(f, e);
    let first = (lo / step - 1e-9).ceil() as i64;
    let last = (hi / step + 1e-9).floor() as i64;
    (first..=last)
        .map(|k| scaled(k as f64 * f, e) + 0.0)
        .collect()
}

fn rgb(c: Rgb) -> RGBColor {
    RGBColor(c[0], c[1], c[2])
}

/// Draws a well symbol of half-size `r` centred on `(x, y)`.
fn draw_well_symbol(
    area: &DrawingArea<BitMapBackend, Shift>,
    (x, y): (i32, i32),
    symbol: WellSymbol,
    r: i32,
) -> Result<(), ReportError> {
    match symbol {
        WellSymbol::Producer => {
            area.draw(&Circle::new((x, y), r + 1, WHITE.filled()))
                .map_err(draw_err)?;
            area.draw(&Circle::new((x, y), r, BLACK.filled()))
                .map_err(draw_err)?;
        }
        WellSymbol::Injector => {
            let d = r + 2;
            let pts = vec![(x, y - d), (x + d, y), (x, y + d), (x - d, y)];
            area.draw(&Polygon::new(pts.clone(), WHITE.filled()))
                .map_err(draw_err)?;
            let mut closed = pts;
            closed.push((x, y - d));
            area.draw(&PathElement::new(closed, BLACK.stroke_width(2)))
                .map_err(draw_err)?;
        }
        WellSymbol::Observer => {
            area.draw(&Rectangle::new(
                [(x - r, y - r), (x + r, y + r)],
                WHITE.filled(),
            ))
            .map_err(draw_err)?;
            area.draw(&Rectangle::new(
                [(x - r, y - r), (x + r, y + r)],
                BLACK.stroke_width(2),
            ))
            .map_err(draw_err)?;
        }
        WellSymbol::Unknown => {
            area.draw(&Circle::new((x, y), r, WHITE.filled()))
                .map_err(draw_err)?;
            area.draw(&Circle::new((x, y), r, BLACK.stroke_width(2)))
                .map_err(draw_err)?;
        }
    }
    Ok(())
}

/// Colour of the ranked-target triangles (Okabe & Ito vermillion).
const TARGET_COLOUR: RGBColor = RGBColor(0xd5, 0x5e, 0x00);

fn draw_target_symbol(
    area: &DrawingArea<BitMapBackend, Shift>,
    (x, y): (i32, i32),
    r: i32,
) -> Result<(), ReportError> {
    let tri = vec![(x, y - r - 2), (x - r - 1, y + r), (x + r + 1, y + r)];
    area.draw(&Polygon::new(tri.clone(), TARGET_COLOUR.filled()))
        .map_err(draw_err)?;
    let mut closed = tri;
    closed.push((x, y - r - 2));
    area.draw(&PathElement::new(closed, BLACK.stroke_width(1)))
        .map_err(draw_err)
}

fn draw_hatch_key(
    area: &DrawingArea<BitMapBackend, Shift>,
    (x, y): (i32, i32),
    s: i32,
) -> Result<(), ReportError> {
    let mid: Rgb = [0xf4, 0xf4, 0xf4];
    area.draw(&Rectangle::new([(x, y), (x + s, y + s)], rgb(mid).filled()))
        .map_err(draw_err)?;
    let step = (s / 3).max(3);
    let line = rgb(hatch_colour(mid)).stroke_width(1);
    // lines along which px - py is constant, as on the map
    let mut d = 0;
    while d < s {
        for seg in [
            vec![(x + d, y), (x + s, y + s - d)],
            vec![(x, y + d), (x + s - d, y + s)],
        ] {
            area.draw(&PathElement::new(seg, line)).map_err(draw_err)?;
        }
        d += step;
    }
    area.draw(&Rectangle::new(
        [(x, y), (x + s, y + s)],
        BLACK.stroke_width(1),
    ))
    .map_err(draw_err)
}

/// Lays the legend entries out in rows no wider than `max_w`; returns, per row, the entries'
/// x offsets.
fn legend_rows(
    area: &DrawingArea<BitMapBackend, Shift>,
    entries: &[(LegendKey, String)],
    style: &TextStyle,
    key: i32,
    max_w: i32,
) -> Vec<Vec<(usize, i32)>> {
    let mut rows: Vec<Vec<(usize, i32)>> = vec![Vec::new()];
    let mut x = 0;
    for (k, (_, text)) in entries.iter().enumerate() {
        let tw = area
            .estimate_text_size(text, style)
            .map(|(w, _)| w as i32)
            .unwrap_or(text.len() as i32 * 8);
        let w = key + key / 2 + tw;
        if x > 0 && x + w > max_w {
            rows.push(Vec::new());
            x = 0;
        }
        if let Some(r) = rows.last_mut() {
            r.push((k, x));
        }
        x += w + key + key / 2;
    }
    rows.retain(|r| !r.is_empty());
    rows
}

fn text_size(
    area: &DrawingArea<BitMapBackend, Shift>,
    text: &str,
    style: &TextStyle,
) -> (i32, i32) {
    area.estimate_text_size(text, style)
        .map(|(w, h)| (w as i32, h as i32))
        .unwrap_or((text.len() as i32 * 8, 14))
}

/// Draws a map: title and subtitle, the cells (hatched outside the area of applicability), axes in
/// world coordinates, a colour bar with its unit, outlines, wells (producers, injectors and
/// observers each with their own symbol) and markers with labels placed clear of each other, a
/// scale bar, a north arrow, a legend, the coordinate system and the caption. Returns the PNG
/// bytes (see [`encode_png`]).
pub fn map_png(p: &MapPicture, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    p.check()?;
    ensure_registered()?;
    let st = MapStyle::new(width, height);
    let mut buf = vec![255u8; width as usize * height as usize * 3];
    let xy_unit = if p.xy_unit.is_empty() {
        String::new()
    } else {
        format!(" ({})", p.xy_unit)
    };
    let names: Vec<&str> = p
        .wells
        .iter()
        .map(|w| w.name.as_str())
        .filter(|n| !n.is_empty())
        .collect();
    let prefix = super::labels::common_prefix(&names);
    let entries = legend_entries(p, &prefix);
    let legend_style: TextStyle = (FAMILY, st.legend).into_font().into();
    let key = st.px(18.0);
    let margin = st.px(12.0);

    // Stage 1: layout, title, axes.
    struct Layout {
        view: MapView,
        bar: (i32, i32, i32, i32),
        legend_top: i32,
        rows: Vec<Vec<(usize, i32)>>,
        bottom_lines: Vec<String>,
        line_h: i32,
    }
    let layout = {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let (w, h) = (width as i32, height as i32);
        let inner_w = w - 2 * margin;
        let line_h = (st.legend * 1.35).round() as i32;
        let rows = legend_rows(&root, &entries, &legend_style, key, inner_w);
        let mut bottom = Vec::new();
        let mut crs_line = String::new();
        if !p.crs.is_empty() {
            crs_line = format!("Coordinates: {}", p.crs);
        }
        if p.geometry.rotation_deg != 0.0 {
            if !crs_line.is_empty() {
                crs_line.push_str("; ");
            }
            crs_line.push_str(&format!(
                "grid rotated {} degrees counter-clockwise from east",
                format_tick(p.geometry.rotation_deg, 1.0)
            ));
        }
        if !crs_line.is_empty() {
            bottom.extend(wrap_text(&root, &crs_line, &legend_style, inner_w as u32));
        }
        if !p.caption.is_empty() {
            bottom.extend(wrap_text(&root, &p.caption, &legend_style, inner_w as u32));
        }
        let bottom_h = (rows.len() as i32 * (key + st.px(8.0)) + bottom.len() as i32 * line_h)
            .min(h / 3)
            + st.px(8.0);
        // title and subtitle, centred
        let title_style: TextStyle = (FAMILY, st.title, FontStyle::Bold).into_font().into();
        let sub_style: TextStyle =
            TextStyle::from((FAMILY, st.subtitle).into_font()).color(&RGBColor(0x44, 0x44, 0x44));
        let mut y = margin;
        for (text, style) in [(&p.title, &title_style), (&p.subtitle, &sub_style)] {
            for line in wrap_text(&root, text, style, inner_w as u32) {
                let (tw, th) = text_size(&root, &line, style);
                root.draw(&Text::new(line.clone(), ((w - tw) / 2, y), style.clone()))
                    .map_err(draw_err)?;
                y += (th as f64 * 1.25).round() as i32;
            }
        }
        y += st.px(4.0);
        let body_h = (h - y - bottom_h).max(40);
        let body = root.clone().shrink((0, y), (width, body_h as u32));
        let bar_w = st.px(150.0).min(w / 3);
        let (map_area, _) = body.split_horizontally(w - bar_w);
        let x_area = st.px(52.0);
        let y_area = st.px(100.0);
        let (x0, x1, y0, y1) = p.geometry.extent();
        let frame = {
            let chart = ChartBuilder::on(&map_area)
                .margin(st.px(8.0))
                .x_label_area_size(x_area)
                .y_label_area_size(y_area)
                .build_cartesian_2d(x0..x1, y0..y1)
                .map_err(draw_err)?;
            chart.plotting_area().get_pixel_range()
        };
        let view = MapView::fit(&p.geometry, frame.0, frame.1);
        let mut chart = ChartBuilder::on(&map_area)
            .margin(st.px(8.0))
            .x_label_area_size(x_area)
            .y_label_area_size(y_area)
            .build_cartesian_2d(view.xmin..view.xmax, view.ymin..view.ymax)
            .map_err(draw_err)?;
        let (sx, sy) = (view.xmax - view.xmin, view.ymax - view.ymin);
        chart
            .configure_mesh()
            .disable_mesh()
            .x_labels(5)
            .y_labels(5)
            .x_desc(format!("x{xy_unit}"))
            .y_desc(format!("y{xy_unit}"))
            .label_style((FAMILY, st.tick))
            .axis_desc_style((FAMILY, st.axis))
            .x_label_formatter(&|v| format_tick(*v, sx))
            .y_label_formatter(&|v| format_tick(*v, sy))
            .draw()
            .map_err(draw_err)?;
        // colour bar column: unit above, bar beside the frame's height
        let bx = w - bar_w + st.px(10.0);
        let unit_h = (st.legend * 1.6).round() as i32;
        let bar = (bx, view.py0 + unit_h, bx + st.px(30.0), view.py1);
        root.present().map_err(draw_err)?;
        Layout {
            view,
            bar,
            legend_top: h - bottom_h + st.px(4.0),
            rows,
            bottom_lines: bottom,
            line_h,
        }
    };
    let view = layout.view;

    // Stage 2: the cells and the colour bar, straight into the buffer.
    rasterise(p, &view, &mut buf, width, height)?;
    {
        let (bx0, by0, bx1, by1) = layout.bar;
        let (bx0, bx1) = (bx0.max(0), bx1.min(width as i32));
        for py in by0.max(0)..by1.min(height as i32) {
            let t = 1.0 - (f64::from(py - by0) + 0.5) / f64::from((by1 - by0).max(1));
            let col = level_colour(&p.scale, t);
            for px in bx0..bx1 {
                let o = (py as usize * width as usize + px as usize) * 3;
                buf[o..o + 3].copy_from_slice(&col);
            }
        }
    }

    // Stage 3: colour-bar ticks, frame overlays, legend and bottom lines.
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        let tick_style: TextStyle = (FAMILY, st.tick).into_font().into();
        let (bx0, by0, bx1, by1) = layout.bar;
        root.draw(&Rectangle::new(
            [(bx0, by0), (bx1, by1)],
            BLACK.stroke_width(1),
        ))
        .map_err(draw_err)?;
        let unit_style: TextStyle = (FAMILY, st.legend).into_font().into();
        root.draw(&Text::new(
            p.unit.clone(),
            (bx0, by0 - (st.legend * 1.4).round() as i32),
            unit_style,
        ))
        .map_err(draw_err)?;
        let (lo, hi) = p.scale.range();
        for v in nice_ticks(lo, hi, 6) {
            let t = (v - lo) / (hi - lo);
            let y = by1 - (t * f64::from(by1 - by0)).round() as i32;
            root.draw(&PathElement::new(
                vec![(bx1, y), (bx1 + st.px(6.0), y)],
                BLACK.stroke_width(1),
            ))
            .map_err(draw_err)?;
            let text = format_tick(v, hi - lo);
            let (_, th) = text_size(&root, &text, &tick_style);
            root.draw(&Text::new(
                text,
                (bx1 + st.px(9.0), y - th / 2),
                tick_style.clone(),
            ))
            .map_err(draw_err)?;
        }

        // everything inside the frame is clipped to it
        let fw = (view.px1 - view.px0).max(1);
        let fh = (view.py1 - view.py0).max(1);
        let frame = root
            .clone()
            .shrink((view.px0, view.py0), (fw as u32, fh as u32));
        let to_frame = |x: f64, y: f64| {
            let (fx, fy) = view.world_to_pixel(x, y);
            (fx - f64::from(view.px0), fy - f64::from(view.py0))
        };
        let in_frame = |(fx, fy): (f64, f64)| {
            fx >= 0.0 && fy >= 0.0 && fx < f64::from(fw) && fy < f64::from(fh)
        };
        for line in p.lines {
            let pts: Vec<(i32, i32)> = line
                .points
                .iter()
                .filter(|(x, y)| x.is_finite() && y.is_finite())
                .map(|&(x, y)| {
                    let (fx, fy) = to_frame(x, y);
                    (fx.round() as i32, fy.round() as i32)
                })
                .collect();
            if pts.len() >= 2 {
                frame
                    .draw(&PathElement::new(
                        pts.clone(),
                        WHITE.stroke_width(st.px(5.0) as u32),
                    ))
                    .map_err(draw_err)?;
                frame
                    .draw(&PathElement::new(
                        pts,
                        BLACK.stroke_width(st.px(2.5) as u32),
                    ))
                    .map_err(draw_err)?;
            }
        }

        // scale bar (bottom left) and north arrow (top right), on white boxes
        let pad = st.px(8.0);
        let world_per_px = (view.xmax - view.xmin) / f64::from(fw);
        let len = nice_length(0.22 * f64::from(fw) * world_per_px);
        let bar_px = (len / world_per_px).round() as i32;
        let len_text = length_text(len, &p.xy_unit);
        let (ltw, lth) = text_size(&root, &len_text, &tick_style);
        let sb_h = st.px(8.0);
        let sb_box = (
            pad,
            fh - pad - (sb_h + lth + 3 * pad),
            pad + bar_px.max(ltw) + 2 * pad + ltw / 2,
            fh - pad,
        );
        let arrow_h = st.px(46.0);
        let na_w = st.px(34.0);
        let na_box = (fw - pad - na_w, pad, fw - pad, pad + arrow_h + lth + pad);
        for (x0, y0, x1, y1) in [sb_box, na_box] {
            frame
                .draw(&Rectangle::new([(x0, y0), (x1, y1)], WHITE.filled()))
                .map_err(draw_err)?;
            frame
                .draw(&Rectangle::new(
                    [(x0, y0), (x1, y1)],
                    RGBColor(0x66, 0x66, 0x66).stroke_width(1),
                ))
                .map_err(draw_err)?;
        }
        {
            let (x0, _, _, y1) = sb_box;
            let (bx, by) = (x0 + pad, y1 - pad - sb_h);
            let half = bar_px / 2;
            frame
                .draw(&Rectangle::new(
                    [(bx, by), (bx + half, by + sb_h)],
                    BLACK.filled(),
                ))
                .map_err(draw_err)?;
            frame
                .draw(&Rectangle::new(
                    [(bx, by), (bx + bar_px, by + sb_h)],
                    BLACK.stroke_width(1),
                ))
                .map_err(draw_err)?;
            let zero_w = text_size(&root, "0", &tick_style).0;
            frame
                .draw(&Text::new(
                    "0",
                    (bx - zero_w / 2, by - lth - 2),
                    tick_style.clone(),
                ))
                .map_err(draw_err)?;
            frame
                .draw(&Text::new(
                    len_text.clone(),
                    (bx + bar_px - ltw / 2, by - lth - 2),
                    tick_style.clone(),
                ))
                .map_err(draw_err)?;
        }
        {
            let (x0, y0, x1, _) = na_box;
            let cx = (x0 + x1) / 2;
            let (nw, _) = text_size(&root, "N", &tick_style);
            let bold: TextStyle = (FAMILY, st.tick, FontStyle::Bold).into_font().into();
            frame
                .draw(&Text::new("N", (cx - nw / 2, y0 + pad / 2), bold))
                .map_err(draw_err)?;
            let top = y0 + pad / 2 + lth + 2;
            let bottom = top + arrow_h - pad;
            let half = na_w / 2 - pad / 2;
            let left = vec![(cx, top), (cx - half, bottom), (cx, bottom - half / 2)];
            let right = vec![(cx, top), (cx + half, bottom), (cx, bottom - half / 2)];
            frame
                .draw(&Polygon::new(left, BLACK.filled()))
                .map_err(draw_err)?;
            frame
                .draw(&Polygon::new(right.clone(), WHITE.filled()))
                .map_err(draw_err)?;
            let mut outline = right;
            outline.push((cx - half, bottom));
            outline.push((cx, top));
            frame
                .draw(&PathElement::new(outline, BLACK.stroke_width(1)))
                .map_err(draw_err)?;
        }

        // symbols, then their labels placed clear of each other
        let r = st.px(6.0);
        let label_style: TextStyle = (FAMILY, st.label).into_font().into();
        let target_style: TextStyle = (FAMILY, st.label, FontStyle::Bold).into_font().into();
        let mut requests = Vec::new();
        let mut texts: Vec<(String, bool)> = Vec::new();
        let mut points = Vec::new();
        for (x, y, label) in p.markers {
            let q = to_frame(*x, *y);
            if !in_frame(q) {
                continue;
            }
            points.push((q, None));
            if !label.is_empty() {
                let (tw, th) = text_size(&root, label, &target_style);
                requests.push(super::labels::LabelRequest {
                    x: q.0,
                    y: q.1,
                    symbol: f64::from(r + 2),
                    w: f64::from(tw + 4),
                    h: f64::from(th + 2),
                });
                texts.push((label.clone(), true));
            }
        }
        for w in p.wells {
            let q = to_frame(w.x, w.y);
            if !in_frame(q) {
                continue;
            }
            points.push((q, Some(w.symbol)));
            let name = w.name.strip_prefix(prefix.as_str()).unwrap_or(&w.name);
            if !name.is_empty() {
                let (tw, th) = text_size(&root, name, &label_style);
                requests.push(super::labels::LabelRequest {
                    x: q.0,
                    y: q.1,
                    symbol: f64::from(r + 2),
                    w: f64::from(tw + 4),
                    h: f64::from(th + 2),
                });
                texts.push((name.to_string(), false));
            }
        }
        let rect = |(x0, y0, x1, y1): (i32, i32, i32, i32)| super::labels::Rect {
            x0: f64::from(x0),
            y0: f64::from(y0),
            x1: f64::from(x1),
            y1: f64::from(y1),
        };
        let placed = super::labels::place(
            &requests,
            &[rect(sb_box), rect(na_box)],
            super::labels::Rect::at(0.0, 0.0, f64::from(fw), f64::from(fh)),
            f64::from(st.px(3.0)),
        );
        for ((fx, fy), symbol) in &points {
            let c = (fx.floor() as i32, fy.floor() as i32);
            match symbol {
                Some(s) => draw_well_symbol(&frame, c, *s, r)?,
                None => draw_target_symbol(&frame, c, r + 1)?,
            }
        }
        let mut omitted = 0;
        for ((q, place), (text, bold)) in requests.iter().zip(&placed).zip(&texts) {
            let Some(pl) = place else {
                omitted += 1;
                continue;
            };
            let b = pl.rect;
            if pl.leader {
                let cx = (b.x0 + b.x1) / 2.0;
                let cy = (b.y0 + b.y1) / 2.0;
                frame
                    .draw(&PathElement::new(
                        vec![
                            (q.x.round() as i32, q.y.round() as i32),
                            (cx.round() as i32, cy.round() as i32),
                        ],
                        BLACK.stroke_width(1),
                    ))
                    .map_err(draw_err)?;
            }
            let (x0, y0) = (b.x0.round() as i32, b.y0.round() as i32);
            let (x1, y1) = (b.x1.round() as i32, b.y1.round() as i32);
            frame
                .draw(&Rectangle::new([(x0, y0), (x1, y1)], WHITE.filled()))
                .map_err(draw_err)?;
            let style = if *bold { &target_style } else { &label_style };
            frame
                .draw(&Text::new(text.clone(), (x0 + 2, y0 + 1), style.clone()))
                .map_err(draw_err)?;
        }
        root.draw(&Rectangle::new(
            [(view.px0 - 1, view.py0 - 1), (view.px1, view.py1)],
            BLACK.stroke_width(1),
        ))
        .map_err(draw_err)?;

        // legend rows, then the coordinate system and the caption
        let mut y = layout.legend_top;
        for row in &layout.rows {
            for &(k, x0) in row {
                let (keyk, text) = &entries[k];
                let x = margin + x0;
                let c = (x + key / 2, y + key / 2);
                match keyk {
                    LegendKey::Well(s) => draw_well_symbol(&root, c, *s, r)?,
                    LegendKey::Target => draw_target_symbol(&root, c, r + 1)?,
                    LegendKey::Line => {
                        root.draw(&PathElement::new(
                            vec![(x, y + key / 2), (x + key, y + key / 2)],
                            BLACK.stroke_width(st.px(2.5) as u32),
                        ))
                        .map_err(draw_err)?;
                    }
                    LegendKey::Null => {
                        root.draw(&Rectangle::new(
                            [(x, y), (x + key, y + key)],
                            rgb(NULL_COLOUR).filled(),
                        ))
                        .map_err(draw_err)?;
                    }
                    LegendKey::Hatched => draw_hatch_key(&root, (x, y), key)?,
                    LegendKey::Note => {}
                }
                let tx = if *keyk == LegendKey::Note {
                    x
                } else {
                    x + key + key / 2
                };
                let (_, th) = text_size(&root, text, &legend_style);
                root.draw(&Text::new(
                    text.clone(),
                    (tx, y + key / 2 - th / 2),
                    legend_style.clone(),
                ))
                .map_err(draw_err)?;
            }
            y += key + st.px(8.0);
        }
        let mut lines = layout.bottom_lines.clone();
        if omitted > 0 {
            lines.push(format!(
                "{omitted} label{} left out for lack of room.",
                if omitted == 1 { "" } else { "s" }
            ));
        }
        for line in lines {
            if y + layout.line_h > height as i32 {
                break;
            }
            root.draw(&Text::new(line, (margin, y), legend_style.clone()))
                .map_err(draw_err)?;
            y += layout.line_h;
        }
        root.present().map_err(draw_err)?;
    }
    encode_png(&buf, width, height)
}

// ---------------------------------------------------------------------------------------------
// Cross-plots
// ---------------------------------------------------------------------------------------------

/// One set of points in a cross-plot.
#[derive(Debug, Clone, PartialEq)]
pub struct PointSeries {
    /// Legend name.
    pub name: String,
    /// Points `(x, y)`; pairs with a non-finite member are skipped.
    pub points: Vec<(f64, f64)>,
}

/// A cross-plot of several point series on equal axes, optionally with the 1:1 line.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossPlot {
    /// Title.
    pub title: String,
    /// x axis label with unit.
    pub x_label: String,
    /// y axis label with unit.
    pub y_label: String,
    /// Point series, drawn in order.
    pub series: Vec<PointSeries>,
    /// Draw the 1:1 line.
    pub one_to_one: bool,
}

/// Draws a cross-plot (e.g. truth against prediction before and after correction) and returns
/// the PNG bytes. Both axes share one range so that the 1:1 line is the diagonal.
pub fn crossplot_png(p: &CrossPlot, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    ensure_registered()?;
    let all: Vec<f64> = p
        .series
        .iter()
        .flat_map(|s| s.points.iter())
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .flat_map(|&(x, y)| [x, y])
        .collect();
    let (lo, hi) = finite_range(&all).unwrap_or((0.0, 1.0));
    let (lo, hi) = widen(lo, hi);
    let pad = (hi - lo) * 0.05;
    let (lo, hi) = (lo - pad, hi + pad);
    let mut buf = vec![255u8; width as usize * height as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let mut chart = xy_chart(&root, &p.title, &p.x_label, &p.y_label, lo..hi, lo..hi)?;
        if p.one_to_one {
            chart
                .draw_series(LineSeries::new([(lo, lo), (hi, hi)], BLACK.stroke_width(1)))
                .map_err(draw_err)?
                .label("1:1")
                .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLACK));
        }
        for (k, s) in p.series.iter().enumerate() {
            let colour = series_colour(k);
            chart
                .draw_series(
                    s.points
                        .iter()
                        .filter(|(x, y)| x.is_finite() && y.is_finite())
                        .map(|&(x, y)| Circle::new((x, y), 3, colour.mix(0.75).filled())),
                )
                .map_err(draw_err)?
                .label(&s.name)
                .legend(move |(x, y)| Circle::new((x + 9, y), 4, colour.filled()));
        }
        series_legend(&mut chart, SeriesLabelPosition::UpperLeft)?;
        root.present().map_err(draw_err)?;
    }
    encode_png(&buf, width, height)
}

// ---------------------------------------------------------------------------------------------
// Line plots
// ---------------------------------------------------------------------------------------------

/// One line in a line plot.
#[derive(Debug, Clone, PartialEq)]
pub struct Curve {
    /// Legend name.
    pub name: String,
    /// Points `(x, y)` in drawing order; a non-finite point breaks the line.
    pub points: Vec<(f64, f64)>,
    /// Optional shaded band `(x, low, high)` drawn under the line (e.g. min-max over repeats).
    pub band: Option<Vec<(f64, f64, f64)>>,
    /// Draw a marker at each point.
    pub markers: bool,
}

/// A reference line drawn dashed in grey.
#[derive(Debug, Clone, PartialEq)]
pub enum Reference {
    /// The diagonal y = x (e.g. perfect reliability).
    Diagonal {
        /// Legend name.
        label: String,
    },
    /// A horizontal line at `y` (e.g. the nominal coverage).
    Horizontal {
        /// Height of the line.
        y: f64,
        /// Legend name.
        label: String,
    },
    /// A vertical line at `x` (e.g. the edge of the ground cross-validation spans).
    Vertical {
        /// Position of the line.
        x: f64,
        /// Legend name.
        label: String,
    },
}

/// A plot of lines against a shared x axis.
#[derive(Debug, Clone, PartialEq)]
pub struct LinePicture {
    /// Title.
    pub title: String,
    /// x axis label with unit.
    pub x_label: String,
    /// y axis label with unit.
    pub y_label: String,
    /// Lines, drawn in order.
    pub series: Vec<Curve>,
    /// Reference lines.
    pub references: Vec<Reference>,
    /// Fixed x range; `None` spans the data.
    pub x_range: Option<(f64, f64)>,
    /// Fixed y range; `None` spans the data and the reference lines.
    pub y_range: Option<(f64, f64)>,
    /// Put the legend in the upper left corner instead of the lower right.
    pub legend_top_left: bool,
}

/// Draws a line plot (learning curve, reliability diagram, coverage by decile) and returns the PNG
/// bytes.
pub fn line_png(p: &LinePicture, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    ensure_registered()?;
    let mut xs: Vec<f64> = p
        .series
        .iter()
        .flat_map(|s| s.points.iter().map(|q| q.0))
        .collect();
    let mut ys: Vec<f64> = p
        .series
        .iter()
        .flat_map(|s| s.points.iter().map(|q| q.1))
        .collect();
    for s in &p.series {
        if let Some(b) = &s.band {
            ys.extend(b.iter().flat_map(|q| [q.1, q.2]));
        }
    }
    for r in &p.references {
        match r {
            Reference::Horizontal { y, .. } => ys.push(*y),
            Reference::Vertical { x, .. } => xs.push(*x),
            Reference::Diagonal { .. } => {}
        }
    }
    let (x0, x1) = p
        .x_range
        .filter(|(a, b)| a.is_finite() && b.is_finite() && b > a)
        .unwrap_or_else(|| {
            let (a, b) = finite_range(&xs).unwrap_or((0.0, 1.0));
            widen(a, b)
        });
    let (y0, y1) = p
        .y_range
        .filter(|(a, b)| a.is_finite() && b.is_finite() && b > a)
        .unwrap_or_else(|| {
            let (a, b) = finite_range(&ys).unwrap_or((0.0, 1.0));
            let (a, b) = widen(a, b);
            let pad = (b - a) * 0.05;
            (a - pad, b + pad)
        });
    let mut buf = vec![255u8; width as usize * height as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let mut chart = xy_chart(&root, &p.title, &p.x_label, &p.y_label, x0..x1, y0..y1)?;
        let grey = RGBColor(0x55, 0x55, 0x55);
        for r in &p.references {
            let (pts, label) = match r {
                Reference::Diagonal { label } => {
                    let a = x0.max(y0);
                    let b = x1.min(y1);
                    (vec![(a, a), (b, b)], label)
                }
                Reference::Horizontal { y, label } => (vec![(x0, *y), (x1, *y)], label),
                Reference::Vertical { x, label } => (vec![(*x, y0), (*x, y1)], label),
            };
            chart
                .draw_series(DashedLineSeries::new(pts, 6, 4, grey.stroke_width(1)))
                .map_err(draw_err)?
                .label(label)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey));
        }
        for (k, s) in p.series.iter().enumerate() {
            let colour = series_colour(k);
            if let Some(band) = &s.band {
                let ok: Vec<_> = band
                    .iter()
                    .filter(|q| q.0.is_finite() && q.1.is_finite() && q.2.is_finite())
                    .collect();
                if ok.len() >= 2 {
                    let mut poly: Vec<(f64, f64)> = ok.iter().map(|q| (q.0, q.2)).collect();
                    poly.extend(ok.iter().rev().map(|q| (q.0, q.1)));
                    chart
                        .draw_series(std::iter::once(Polygon::new(
                            poly,
                            colour.mix(0.2).filled(),
                        )))
                        .map_err(draw_err)?;
                }
            }
            // split at non-finite points
            let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
            for &(x, y) in &s.points {
                if x.is_finite() && y.is_finite() {
                    if let Some(r) = runs.last_mut() {
                        r.push((x, y));
                    }
                } else if !runs.last().is_some_and(|r| r.is_empty()) {
                    runs.push(Vec::new());
                }
            }
            let mut first = true;
            for run in runs.into_iter().filter(|r| !r.is_empty()) {
                let ann = chart
                    .draw_series(LineSeries::new(run.clone(), colour.stroke_width(2)))
                    .map_err(draw_err)?;
                if first {
                    ann.label(&s.name).legend(move |(x, y)| {
                        PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2))
                    });
                    first = false;
                }
                if s.markers {
                    chart
                        .draw_series(run.iter().map(|&q| Circle::new(q, 3, colour.filled())))
                        .map_err(draw_err)?;
                }
            }
        }
        let corner = if p.legend_top_left {
            SeriesLabelPosition::UpperLeft
        } else {
            SeriesLabelPosition::LowerRight
        };
        series_legend(&mut chart, corner)?;
        root.present().map_err(draw_err)?;
    }
    encode_png(&buf, width, height)
}

// ---------------------------------------------------------------------------------------------
// Bar charts
// ---------------------------------------------------------------------------------------------

/// One series of bars, one value per category.
#[derive(Debug, Clone, PartialEq)]
pub struct BarSeries {
    /// Legend name.
    pub name: String,
    /// One value per category; `NaN` draws no bar (the category's other series share the slot).
    pub values: Vec<f64>,
    /// Optional error half-widths, one per category (drawn as whiskers).
    pub errors: Option<Vec<f64>>,
}

/// A bar chart over named categories, with optional grouped series and a reference level.
#[derive(Debug, Clone, PartialEq)]
pub struct BarPicture {
    /// Title.
    pub title: String,
    /// Label of the value axis, with unit.
    pub value_label: String,
    /// Label of the category axis (may be empty).
    pub category_label: String,
    /// Category names, in drawing order (top to bottom when horizontal).
    pub categories: Vec<String>,
    /// Series; within a category the series with a value share the slot side by side.
    pub series: Vec<BarSeries>,
    /// A reference level drawn dashed (e.g. the uniform density of a PIT histogram).
    pub reference: Option<(f64, String)>,
    /// Bars grow to the right with category names on the left (suits long names).
    pub horizontal: bool,
}

/// Draws a bar chart (importance by attribute or family, ablation, PIT histogram) and returns the
/// PNG bytes.
pub fn bars_png(p: &BarPicture, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    ensure_registered()?;
    let nc = p.categories.len();
    for s in &p.series {
        if s.values.len() != nc || s.errors.as_ref().is_some_and(|e| e.len() != nc) {
            return Err(ReportError::InvalidInput(format!(
                "bar chart '{}': series '{}' has {} values for {nc} categories",
                p.title,
                s.name,
                s.values.len()
            )));
        }
    }
    let mut vals: Vec<f64> = vec![0.0];
    for s in &p.series {
        for (c, v) in s.values.iter().enumerate() {
            let e = s.errors.as_ref().map_or(0.0, |e| e[c]);
            let e = if e.is_finite() { e.abs() } else { 0.0 };
            vals.extend([v - e, v + e]);
        }
    }
    if let Some((r, _)) = &p.reference {
        vals.push(*r);
    }
    let (v0, v1) = finite_range(&vals).unwrap_or((0.0, 1.0));
    let (v0, v1) = widen(v0, v1);
    let legend = p.series.len() > 1 || p.reference.is_some();
    let pad = (v1 - v0) * 0.06;
    // room on the far side for the legend box
    let far = if legend {
        (v1 - v0) * if p.horizontal { 0.6 } else { 0.35 }
    } else {
        pad
    };
    let (v0, v1) = (if v0 < 0.0 { v0 - pad } else { 0.0 }, v1 + far);
    let c_range = -0.5..(nc.max(1) as f64 - 0.5);
    let longest = p
        .categories
        .iter()
        .map(|c| c.chars().count())
        .max()
        .unwrap_or(0);
    let mut buf = vec![255u8; width as usize * height as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let cat_area = if p.horizontal {
            (longest as u32 * 7 + 16).clamp(40, width / 2)
                + if p.category_label.is_empty() { 0 } else { 22 }
        } else {
            40
        };
        let builder_base = |b: &mut ChartBuilder<'_, '_, BitMapBackend>| {
            b.margin(12)
                .caption(&p.title, (FAMILY, 17, FontStyle::Bold));
        };
        let mut builder = ChartBuilder::on(&root);
        builder_base(&mut builder);
        let span = v1 - v0;
        let fill = |k: usize| series_colour(k).filled();
        // (category position, value) -> chart point
        if p.horizontal {
            let mut chart = builder
                .x_label_area_size(44)
                .y_label_area_size(cat_area)
                .build_cartesian_2d(v0..v1, c_range.clone())
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .disable_y_mesh()
                .y_labels(0)
                .y_desc(&p.category_label)
                .light_line_style(WHITE)
                .bold_line_style(RGBColor(0xdd, 0xdd, 0xdd))
                .x_desc(&p.value_label)
                .label_style((FAMILY, 12))
                .axis_desc_style((FAMILY, 13))
                .x_label_formatter(&|v| format_tick(*v, span))
                .draw()
                .map_err(draw_err)?;
            let to_pt = |pos: f64, v: f64| (v, (nc as f64 - 1.0) - pos);
            draw_bars(&mut chart, p, fill, to_pt)?;
            if let Some((r, label)) = &p.reference {
                chart
                    .draw_series(DashedLineSeries::new(
                        [(*r, c_range.start), (*r, c_range.end)],
                        6,
                        4,
                        BLACK.stroke_width(1),
                    ))
                    .map_err(draw_err)?
                    .label(label)
                    .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLACK));
            }
            let style: TextStyle = TextStyle::from((FAMILY, 12).into_font()).pos(
                plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Right,
                    plotters::style::text_anchor::VPos::Center,
                ),
            );
            for (c, name) in p.categories.iter().enumerate() {
                let (px, py) = chart
                    .plotting_area()
                    .map_coordinate(&(v0, (nc as f64 - 1.0) - c as f64));
                root.draw(&Text::new(name.clone(), (px - 6, py), style.clone()))
                    .map_err(draw_err)?;
            }
            finish_legend(&mut chart, p)?;
        } else {
            let mut chart = builder
                .x_label_area_size(44)
                .y_label_area_size(64)
                .build_cartesian_2d(c_range.clone(), v0..v1)
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .disable_x_mesh()
                .x_labels(0)
                .x_desc(&p.category_label)
                .light_line_style(WHITE)
                .bold_line_style(RGBColor(0xdd, 0xdd, 0xdd))
                .y_desc(&p.value_label)
                .label_style((FAMILY, 12))
                .axis_desc_style((FAMILY, 13))
                .y_label_formatter(&|v| format_tick(*v, span))
                .draw()
                .map_err(draw_err)?;
            let to_pt = |pos: f64, v: f64| (pos, v);
            draw_bars(&mut chart, p, fill, to_pt)?;
            if let Some((r, label)) = &p.reference {
                chart
                    .draw_series(DashedLineSeries::new(
                        [(c_range.start, *r), (c_range.end, *r)],
                        6,
                        4,
                        BLACK.stroke_width(1),
                    ))
                    .map_err(draw_err)?
                    .label(label)
                    .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLACK));
            }
            let style: TextStyle = TextStyle::from((FAMILY, 12).into_font()).pos(
                plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Center,
                    plotters::style::text_anchor::VPos::Top,
                ),
            );
            for (c, name) in p.categories.iter().enumerate() {
                let (px, py) = chart.plotting_area().map_coordinate(&(c as f64, v0));
                root.draw(&Text::new(name.clone(), (px, py + 6), style.clone()))
                    .map_err(draw_err)?;
            }
            finish_legend(&mut chart, p)?;
        }
        root.present().map_err(draw_err)?;
    }
    encode_png(&buf, width, height)
}

fn draw_bars<'a, 'b: 'a>(
    chart: &mut Chart2d<'a, 'b>,
    p: &BarPicture,
    fill: impl Fn(usize) -> ShapeStyle,
    to_pt: impl Fn(f64, f64) -> (f64, f64),
) -> Result<(), ReportError> {
    let nc = p.categories.len();
    let mut labelled = vec![false; p.series.len()];
    for c in 0..nc {
        let present: Vec<usize> = (0..p.series.len())
            .filter(|&s| p.series[s].values[c].is_finite())
            .collect();
        let slot = 0.8 / present.len().max(1) as f64;
        for (k, &s) in present.iter().enumerate() {
            let v = p.series[s].values[c];
            let a = c as f64 - 0.4 + k as f64 * slot + slot * 0.06;
            let b = a + slot * 0.88;
            let ann = chart
                .draw_series(std::iter::once(Rectangle::new(
                    [to_pt(a, 0.0), to_pt(b, v)],
                    fill(s),
                )))
                .map_err(draw_err)?;
            if !labelled[s] && p.series.len() > 1 {
                let style = fill(s);
                ann.label(&p.series[s].name)
                    .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 12, y + 5)], style));
                labelled[s] = true;
            }
            if let Some(e) = p.series[s].errors.as_ref().map(|e| e[c])
                && e.is_finite()
                && e > 0.0
            {
                let m = (a + b) / 2.0;
                let q = (b - a) / 4.0;
                let lines = [
                    vec![to_pt(m, v - e), to_pt(m, v + e)],
                    vec![to_pt(m - q, v - e), to_pt(m + q, v - e)],
                    vec![to_pt(m - q, v + e), to_pt(m + q, v + e)],
                ];
                chart
                    .draw_series(
                        lines
                            .into_iter()
                            .map(|l| PathElement::new(l, BLACK.stroke_width(1))),
                    )
                    .map_err(draw_err)?;
            }
        }
    }
    Ok(())
}

fn finish_legend<'a, 'b: 'a>(
    chart: &mut Chart2d<'a, 'b>,
    p: &BarPicture,
) -> Result<(), ReportError> {
    if p.series.len() > 1 || p.reference.is_some() {
        series_legend(chart, SeriesLabelPosition::UpperRight)?;
    }
    Ok(())
}
