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

/// Encodes an 8-bit RGB buffer (row-major, top row first) as PNG bytes.
pub fn encode_png(rgb: &[u8], width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    if rgb.len() != width as usize * height as usize * 3 {
        return Err(ReportError::InvalidInput(format!(
            "RGB buffer holds {} bytes, {width} x {height} pixels need {}",
            rgb.len(),
            width as usize * height as usize * 3
        )));
    }
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width, height);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        enc.set_adaptive_filter(png::AdaptiveFilterType::Adaptive);
        let mut writer = enc
            .write_header()
            .map_err(|e| ReportError::Png(e.to_string()))?;
        writer
            .write_image_data(rgb)
            .map_err(|e| ReportError::Png(e.to_string()))?;
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

/// A map to draw: node values of one grid with its colour scale, annotations and caption.
#[derive(Debug, Clone)]
pub struct MapPicture<'a> {
    /// The grid (node positions and cell size).
    pub geometry: MapGeometry,
    /// Node values, index `j * nx + i`, `j = 0` at the grid's first row; `NaN` for null.
    pub values: &'a [f64],
    /// Title drawn above the map.
    pub title: String,
    /// Unit of the values, written beside the colour bar (e.g. "MPa", "fraction").
    pub unit: String,
    /// Unit of the coordinates, written on the axes (e.g. "m"); empty for none.
    pub xy_unit: String,
    /// How values become colours.
    pub scale: ColourScale,
    /// Wells posted on the map: `(x, y, name)`.
    pub wells: &'a [(f64, f64, String)],
    /// Per-node flag (same indexing as `values`): `true` where the node lies outside the area of
    /// applicability; such nodes are drawn hatched.
    pub outside: Option<&'a [bool]>,
    /// Text drawn under the map (e.g. the P10/P50/P90 convention).
    pub caption: String,
    /// Extra points (e.g. ranked infill targets): `(x, y, label)`, drawn as triangles.
    pub markers: &'a [(f64, f64, String)],
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

/// Paints the map's cells into an RGB buffer (`width x height`, top row first) inside the view's
/// frame. Pixels whose centre falls in no cell are left untouched; null nodes are painted
/// [`NULL_COLOUR`]; nodes flagged outside are blended with white and hatched.
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
            let mut col = p.scale.colour(p.values[k]).unwrap_or(NULL_COLOUR);
            if p.outside.is_some_and(|o| o[k]) {
                if (px + py).rem_euclid(7) == 0 {
                    col = HATCH_COLOUR;
                } else {
                    col = [
                        ((col[0] as u16 + 255) / 2) as u8,
                        ((col[1] as u16 + 255) / 2) as u8,
                        ((col[2] as u16 + 255) / 2) as u8,
                    ];
                }
            }
            let o = (py as usize * width as usize + px as usize) * 3;
            rgb[o..o + 3].copy_from_slice(&col);
        }
    }
    Ok(())
}

/// Draws a map with its colour bar (with units), title, caption, posted wells, markers and a
/// legend, and returns the PNG bytes.
pub fn map_png(p: &MapPicture, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    p.check()?;
    ensure_registered()?;
    let mut buf = vec![255u8; width as usize * height as usize * 3];
    let xy_unit = if p.xy_unit.is_empty() {
        String::new()
    } else {
        format!(" ({})", p.xy_unit)
    };

    // Stage 1: layout, axes, colour bar, caption and legend.
    let view = {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let root = root.margin(8, 8, 8, 8);
        let caption_style: TextStyle = (FAMILY, 13).into_font().into();
        let (w_in, h_in) = root.dim_in_pixel();
        let caption_lines = wrap_text(&root, &p.caption, &caption_style, w_in.saturating_sub(8));
        let line_h = 17;
        let legend_h = 22;
        let bottom_h = (caption_lines.len() as i32 * line_h + legend_h + 6).min(h_in as i32 / 2);
        let (upper, lower) = root.split_vertically(h_in as i32 - bottom_h);
        let body = upper
            .titled(&p.title, (FAMILY, 18, FontStyle::Bold).into_font())
            .map_err(draw_err)?;
        let (bw, _) = body.dim_in_pixel();
        let bar_w = 110.min(bw as i32 / 3);
        let (map_area, bar_area) = body.split_horizontally(bw as i32 - bar_w);

        // provisional chart to learn the frame, then the real one with equal scales
        let (x0, x1, y0, y1) = p.geometry.extent();
        let frame = {
            let chart = ChartBuilder::on(&map_area)
                .margin(6)
                .x_label_area_size(42)
                .y_label_area_size(72)
                .build_cartesian_2d(x0..x1, y0..y1)
                .map_err(draw_err)?;
            chart.plotting_area().get_pixel_range()
        };
        let view = MapView::fit(&p.geometry, frame.0, frame.1);
        let mut chart = ChartBuilder::on(&map_area)
            .margin(6)
            .x_label_area_size(42)
            .y_label_area_size(72)
            .build_cartesian_2d(view.xmin..view.xmax, view.ymin..view.ymax)
            .map_err(draw_err)?;
        let (sx, sy) = (view.xmax - view.xmin, view.ymax - view.ymin);
        chart
            .configure_mesh()
            .disable_mesh()
            .x_labels(6)
            .y_labels(6)
            .x_desc(format!("x{xy_unit}"))
            .y_desc(format!("y{xy_unit}"))
            .label_style((FAMILY, 12))
            .axis_desc_style((FAMILY, 13))
            .x_label_formatter(&|v| format_tick(*v, sx))
            .y_label_formatter(&|v| format_tick(*v, sy))
            .draw()
            .map_err(draw_err)?;

        draw_colour_bar(&bar_area, &p.scale, &p.unit, view.py1 - view.py0)?;

        // caption lines and the legend
        let mut y = 2;
        for line in &caption_lines {
            lower
                .draw(&Text::new(line.clone(), (0, y), caption_style.clone()))
                .map_err(draw_err)?;
            y += line_h;
        }
        draw_map_legend(&lower, y + 2, p)?;
        root.present().map_err(draw_err)?;
        view
    };

    // Stage 2: the cells, straight into the buffer.
    rasterise(p, &view, &mut buf, width, height)?;

    // Stage 3: frame, wells and markers on top.
    {
        let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
        root.draw(&Rectangle::new(
            [(view.px0 - 1, view.py0 - 1), (view.px1, view.py1)],
            BLACK.stroke_width(1),
        ))
        .map_err(draw_err)?;
        let label_style: TextStyle = (FAMILY, 11).into_font().into();
        let inside = |x: f64, y: f64| {
            x >= view.px0 as f64
                && x < view.px1 as f64
                && y >= view.py0 as f64
                && y < view.py1 as f64
        };
        for (x, y, name) in p.wells {
            let (fx, fy) = view.world_to_pixel(*x, *y);
            if !inside(fx, fy) {
                continue;
            }
            let (ix, iy) = (fx.floor() as i32, fy.floor() as i32);
            root.draw(&Circle::new((ix, iy), 4, WHITE.filled()))
                .map_err(draw_err)?;
            root.draw(&Circle::new((ix, iy), 4, BLACK.stroke_width(1)))
                .map_err(draw_err)?;
            if !name.is_empty() {
                root.draw(&Text::new(
                    name.clone(),
                    (ix + 6, iy - 13),
                    label_style.clone(),
                ))
                .map_err(draw_err)?;
            }
        }
        for (x, y, label) in p.markers {
            let (fx, fy) = view.world_to_pixel(*x, *y);
            if !inside(fx, fy) {
                continue;
            }
            let (ix, iy) = (fx.floor() as i32, fy.floor() as i32);
            let tri = vec![(ix, iy - 7), (ix - 6, iy + 5), (ix + 6, iy + 5)];
            root.draw(&Polygon::new(
                tri.clone(),
                RGBColor(0xd5, 0x5e, 0x00).filled(),
            ))
            .map_err(draw_err)?;
            let mut closed = tri;
            closed.push((ix, iy - 7));
            root.draw(&PathElement::new(closed, BLACK.stroke_width(1)))
                .map_err(draw_err)?;
            if !label.is_empty() {
                root.draw(&Text::new(
                    label.clone(),
                    (ix + 7, iy - 2),
                    (FAMILY, 11, FontStyle::Bold).into_font(),
                ))
                .map_err(draw_err)?;
            }
        }
        root.present().map_err(draw_err)?;
    }
    encode_png(&buf, width, height)
}

fn draw_colour_bar(
    area: &DrawingArea<BitMapBackend, Shift>,
    scale: &ColourScale,
    unit: &str,
    frame_h: i32,
) -> Result<(), ReportError> {
    let (lo, hi) = scale.range();
    let (_, ah) = area.dim_in_pixel();
    // centre a bar of about the frame's height
    let pad = ((ah as i32 - frame_h - 42) / 2).max(0);
    let area = area.margin(pad + 6, pad + 42, 6, 6);
    let mut chart = ChartBuilder::on(&area)
        .margin(0)
        .right_y_label_area_size(62)
        .build_cartesian_2d(0.0..1.0, lo..hi)
        .map_err(draw_err)?;
    let steps = 256;
    chart
        .draw_series((0..steps).map(|k| {
            let a = lo + (hi - lo) * k as f64 / steps as f64;
            let b = lo + (hi - lo) * (k + 1) as f64 / steps as f64;
            let c = scale.colormap().rgb((k as f64 + 0.5) / steps as f64);
            Rectangle::new([(0.0, a), (1.0, b)], RGBColor(c[0], c[1], c[2]).filled())
        }))
        .map_err(draw_err)?;
    let span = hi - lo;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_labels(0)
        .y_labels(11)
        .label_style((FAMILY, 12))
        .axis_desc_style((FAMILY, 13))
        .y_desc(unit)
        .y_label_formatter(&|v| format_tick(*v, span))
        .draw()
        .map_err(draw_err)?;
    chart
        .plotting_area()
        .draw(&Rectangle::new(
            [(0.0, lo), (1.0, hi)],
            BLACK.stroke_width(1),
        ))
        .map_err(draw_err)?;
    Ok(())
}

fn draw_map_legend(
    area: &DrawingArea<BitMapBackend, Shift>,
    y: i32,
    p: &MapPicture,
) -> Result<(), ReportError> {
    let style: TextStyle = (FAMILY, 12).into_font().into();
    let mut x = 0;
    let cy = y + 8;
    let step = |x: &mut i32, text: &str| -> Result<(), ReportError> {
        let w = area
            .estimate_text_size(text, &style)
            .map(|(w, _)| w as i32)
            .map_err(draw_err)?;
        area.draw(&Text::new(
            text.to_string(),
            (*x + 16, cy - 7),
            style.clone(),
        ))
        .map_err(draw_err)?;
        *x += 16 + w + 18;
        Ok(())
    };
    if !p.wells.is_empty() {
        area.draw(&Circle::new((x + 6, cy), 4, WHITE.filled()))
            .map_err(draw_err)?;
        area.draw(&Circle::new((x + 6, cy), 4, BLACK.stroke_width(1)))
            .map_err(draw_err)?;
        step(&mut x, "well")?;
    }
    if !p.markers.is_empty() {
        area.draw(&Polygon::new(
            vec![(x + 6, cy - 7), (x, cy + 5), (x + 12, cy + 5)],
            RGBColor(0xd5, 0x5e, 0x00).filled(),
        ))
        .map_err(draw_err)?;
        step(&mut x, "ranked target")?;
    }
    if p.values.iter().any(|v| !v.is_finite()) {
        let n = NULL_COLOUR;
        area.draw(&Rectangle::new(
            [(x, cy - 6), (x + 12, cy + 6)],
            RGBColor(n[0], n[1], n[2]).filled(),
        ))
        .map_err(draw_err)?;
        step(&mut x, "null")?;
    }
    if p.outside.is_some_and(|o| o.iter().any(|&b| b)) {
        area.draw(&Rectangle::new(
            [(x, cy - 6), (x + 12, cy + 6)],
            RGBColor(0xee, 0xee, 0xee).filled(),
        ))
        .map_err(draw_err)?;
        for k in (0..24).step_by(7) {
            let a = (x + k.min(12), cy - 6 + (k - 12).max(0));
            let b = (x + (k - 12).max(0), cy - 6 + k.min(12));
            area.draw(&PathElement::new(
                vec![a, b],
                RGBColor(HATCH_COLOUR[0], HATCH_COLOUR[1], HATCH_COLOUR[2]).stroke_width(1),
            ))
            .map_err(draw_err)?;
        }
        step(&mut x, "outside area of applicability (hatched)")?;
    }
    Ok(())
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
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .caption(&p.title, (FAMILY, 17, FontStyle::Bold))
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(lo..hi, lo..hi)
            .map_err(draw_err)?;
        let span = hi - lo;
        chart
            .configure_mesh()
            .light_line_style(WHITE)
            .bold_line_style(RGBColor(0xdd, 0xdd, 0xdd))
            .x_desc(&p.x_label)
            .y_desc(&p.y_label)
            .label_style((FAMILY, 12))
            .axis_desc_style((FAMILY, 13))
            .x_label_formatter(&|v| format_tick(*v, span))
            .y_label_formatter(&|v| format_tick(*v, span))
            .draw()
            .map_err(draw_err)?;
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
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(0x99, 0x99, 0x99))
            .label_font((FAMILY, 12))
            .draw()
            .map_err(draw_err)?;
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
}

/// Draws a line plot (learning curve, reliability diagram, coverage by decile) and returns the PNG
/// bytes.
pub fn line_png(p: &LinePicture, width: u32, height: u32) -> Result<Vec<u8>, ReportError> {
    check_size(width, height)?;
    ensure_registered()?;
    let xs: Vec<f64> = p
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
        if let Reference::Horizontal { y, .. } = r {
            ys.push(*y);
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
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .caption(&p.title, (FAMILY, 17, FontStyle::Bold))
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(draw_err)?;
        let (sx, sy) = (x1 - x0, y1 - y0);
        chart
            .configure_mesh()
            .light_line_style(WHITE)
            .bold_line_style(RGBColor(0xdd, 0xdd, 0xdd))
            .x_desc(&p.x_label)
            .y_desc(&p.y_label)
            .label_style((FAMILY, 12))
            .axis_desc_style((FAMILY, 13))
            .x_label_formatter(&|v| format_tick(*v, sx))
            .y_label_formatter(&|v| format_tick(*v, sy))
            .draw()
            .map_err(draw_err)?;
        let grey = RGBColor(0x55, 0x55, 0x55);
        for r in &p.references {
            let (pts, label) = match r {
                Reference::Diagonal { label } => {
                    let a = x0.max(y0);
                    let b = x1.min(y1);
                    (vec![(a, a), (b, b)], label)
                }
                Reference::Horizontal { y, label } => (vec![(x0, *y), (x1, *y)], label),
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
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::LowerRight)
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(0x99, 0x99, 0x99))
            .label_font((FAMILY, 12))
            .draw()
            .map_err(draw_err)?;
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

type Chart2d<'a, 'b> = ChartContext<
    'a,
    BitMapBackend<'b>,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

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
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(0x99, 0x99, 0x99))
            .label_font((FAMILY, 12))
            .draw()
            .map_err(draw_err)?;
    }
    Ok(())
}
