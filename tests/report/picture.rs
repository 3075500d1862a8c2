//! Pictures: size, content, and the map rasteriser's pixel placement.

use super::fixture::{decode, field, grey_variance};
use tidemark::report::colormap::{ColourScale, hex};
use tidemark::report::picture::{
    self, HATCH_COLOUR, HATCH_LIGHT, HATCH_SPACING, NULL_COLOUR, hatch_colour, rasterise,
};
use tidemark::report::*;

const YELLOW: [u8; 3] = [0xfd, 0xe7, 0x25]; // viridis top
const PURPLE: [u8; 3] = [0x44, 0x01, 0x54]; // viridis bottom
const WHITE: [u8; 3] = [255, 255, 255];

fn picture<'a>(geometry: MapGeometry, values: &'a [f64]) -> MapPicture<'a> {
    MapPicture {
        geometry,
        values,
        title: "test".to_string(),
        unit: "-".to_string(),
        xy_unit: "m".to_string(),
        scale: ColourScale::Sequential { min: 0.0, max: 1.0 },
        wells: &[],
        outside: None,
        caption: String::new(),
        markers: &[],
        subtitle: String::new(),
        crs: String::new(),
        lines: &[],
    }
}

fn raster(p: &MapPicture, view: &MapView, w: u32, h: u32) -> Vec<[u8; 3]> {
    let mut buf = vec![255u8; (w * h * 3) as usize];
    rasterise(p, view, &mut buf, w, h).unwrap();
    buf.chunks(3).map(|c| [c[0], c[1], c[2]]).collect()
}

#[test]
fn unrotated_grid_value_lands_on_the_expected_pixel() {
    // 5 x 4 nodes, dx = 10, dy = 20, node (0,0) at (1000, 2000); node (3,1) holds 1, others 0
    let g = MapGeometry {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 10.0,
        dy: 20.0,
        nx: 5,
        ny: 4,
        rotation_deg: 0.0,
    };
    let mut v = vec![0.0; 20];
    v[5 + 3] = 1.0;
    let p = picture(g, &v);
    // 100 x 100 pixels showing x 980..1060 (0.8 per pixel), y 1980..2080 (1 per pixel)
    let view = MapView {
        px0: 0,
        px1: 100,
        py0: 0,
        py1: 100,
        xmin: 980.0,
        xmax: 1060.0,
        ymin: 1980.0,
        ymax: 2080.0,
    };
    let img = raster(&p, &view, 100, 100);
    let at = |x: usize, y: usize| img[y * 100 + x];
    // node (3,1) is at (1030, 2020): column (1030-980)/0.8 = 62.5, row 2080-2020 = 60
    assert_eq!(at(62, 60), YELLOW);
    // its cell spans x 1025..1035 -> columns 56.25..68.75, y 2010..2030 -> rows 50..70
    assert_eq!(at(57, 51), YELLOW);
    assert_eq!(at(68, 69), YELLOW);
    assert_eq!(at(55, 60), PURPLE); // node (2,1)
    assert_eq!(at(62, 71), PURPLE); // node (3,0)
    assert_eq!(at(62, 49), PURPLE); // node (3,2)
    // west of the first cell (x < 995, column < 18.75) nothing is painted
    assert_eq!(at(10, 60), WHITE);
    // north of the last row (y > 2070, row < 10)
    assert_eq!(at(62, 5), WHITE);
}

#[test]
fn rotated_grid_value_lands_on_the_expected_pixel() {
    // rotation 90 degrees: node (i,j) at x = -j dy, y = i dx (DEVELOPERS.md convention)
    let g = MapGeometry {
        origin_x: 0.0,
        origin_y: 0.0,
        dx: 10.0,
        dy: 10.0,
        nx: 4,
        ny: 3,
        rotation_deg: 90.0,
    };
    let mut v = vec![0.0; 12];
    v[4 + 2] = 1.0; // node (2,1) at (-10, 20)
    let p = picture(g, &v);
    let view = MapView {
        px0: 0,
        px1: 60,
        py0: 0,
        py1: 70,
        xmin: -40.0,
        xmax: 20.0,
        ymin: -20.0,
        ymax: 50.0,
    };
    let img = raster(&p, &view, 60, 70);
    let at = |x: usize, y: usize| img[y * 60 + x];
    assert_eq!(at(30, 30), YELLOW); // (-10, 20): column 30, row 30
    assert_eq!(at(30, 40), PURPLE); // node (1,1) at (-10, 10)
    assert_eq!(at(40, 30), PURPLE); // node (2,0) at (0, 20)
    assert_eq!(at(20, 30), PURPLE); // node (2,2) at (-20, 20)
    assert_eq!(at(55, 30), WHITE); // x = 15: east of the j = 0 cells (which end at x = 5)

    // rotation 30 degrees, node (3,2): x = 30 cos 30 - 20 sin 30, y = 30 sin 30 + 20 cos 30
    let g = MapGeometry {
        origin_x: 100.0,
        origin_y: 200.0,
        dx: 10.0,
        dy: 10.0,
        nx: 6,
        ny: 5,
        rotation_deg: 30.0,
    };
    let mut v = vec![0.0; 30];
    v[2 * 6 + 3] = 1.0;
    let p = picture(g, &v);
    let r = 30f64.to_radians();
    let (x, y) = (
        100.0 + 30.0 * r.cos() - 20.0 * r.sin(),
        200.0 + 30.0 * r.sin() + 20.0 * r.cos(),
    );
    assert!((g.node_xy(3, 2).0 - x).abs() < 1e-9 && (g.node_xy(3, 2).1 - y).abs() < 1e-9);
    // 1 world unit per pixel, window 60..160 x 180..280
    let view = MapView {
        px0: 0,
        px1: 100,
        py0: 0,
        py1: 100,
        xmin: 60.0,
        xmax: 160.0,
        ymin: 180.0,
        ymax: 280.0,
    };
    let img = raster(&p, &view, 100, 100);
    let (cx, cy) = ((x - 60.0).floor() as usize, (280.0 - y).floor() as usize);
    assert_eq!(
        img[cy * 100 + cx],
        YELLOW,
        "node (3,2) at ({x}, {y}) -> pixel ({cx}, {cy})"
    );
    // one cell further along the grid's x axis (rotated): node (4,2) is 0
    let (x4, y4) = g.node_xy(4, 2);
    let (cx4, cy4) = ((x4 - 60.0).floor() as usize, (280.0 - y4).floor() as usize);
    assert_eq!(img[cy4 * 100 + cx4], PURPLE);
}

#[test]
fn geometry_round_trips_and_finds_nodes() {
    let g = MapGeometry {
        origin_x: 5.0e5,
        origin_y: 6.7e6,
        dx: 12.5,
        dy: 25.0,
        nx: 40,
        ny: 30,
        rotation_deg: -37.0,
    };
    for (i, j) in [(0, 0), (39, 0), (0, 29), (17, 11)] {
        let (x, y) = g.node_xy(i, j);
        let (fi, fj) = g.world_to_node(x, y);
        assert!((fi - i as f64).abs() < 1e-6 && (fj - j as f64).abs() < 1e-6);
        assert_eq!(g.node_at(x, y), Some((i, j)));
    }
    let (x, y) = g.node_xy(0, 0);
    assert_eq!(g.node_at(x - 100.0 * 0.8, y - 100.0 * 0.6), None);
}

#[test]
fn nulls_and_outside_nodes_are_marked() {
    let g = MapGeometry {
        origin_x: 0.0,
        origin_y: 0.0,
        dx: 10.0,
        dy: 10.0,
        nx: 2,
        ny: 1,
        rotation_deg: 0.0,
    };
    let v = [f64::NAN, 1.0];
    let outside = [false, true];
    let mut p = picture(g, &v);
    p.outside = Some(&outside);
    let view = MapView {
        px0: 0,
        px1: 40,
        py0: 0,
        py1: 20,
        xmin: -5.0,
        xmax: 15.0,
        ymin: -5.0,
        ymax: 5.0,
    };
    let img = raster(&p, &view, 40, 20);
    assert_eq!(img[10 * 40 + 5], NULL_COLOUR);
    // node 1 (outside): yellow blended half-way to white, with hatching pixels
    let cells: Vec<[u8; 3]> = (0..20)
        .flat_map(|y| (21..40).map(move |x| (x, y)))
        .map(|(x, y)| img[y * 40 + x])
        .collect();
    // node 1 (outside): its own colour under thin dark hatch lines, one pixel diagonal in every
    // HATCH_SPACING, so the value stays readable
    let hatch = cells.iter().filter(|c| **c == HATCH_COLOUR).count();
    let kept = cells.iter().filter(|c| **c == YELLOW).count();
    assert_eq!(hatch + kept, cells.len());
    let share = hatch as f64 / cells.len() as f64;
    assert!(
        (share - 1.0 / HATCH_SPACING as f64).abs() < 0.05,
        "hatch share {share}"
    );
    // Over dark cells the lines are light.
    assert_eq!(hatch_colour(PURPLE), HATCH_LIGHT);
    assert_eq!(hatch_colour(YELLOW), HATCH_COLOUR);
}

#[test]
fn palette_png_keeps_frequent_colours_exactly() {
    // 300 colours: 200 frequent ones (a ramp of 50 pixels each) and 100 that occur once.
    let mut rgb = Vec::new();
    for k in 0..200u32 {
        for _ in 0..50 {
            rgb.extend([k as u8, (255 - k) as u8, 40]);
        }
    }
    for k in 0..100u32 {
        rgb.extend([k as u8, 7, (k * 2) as u8]);
    }
    let (w, h) = (100u32, (rgb.len() / 300) as u32);
    let d = decode(&picture::encode_png(&rgb, w, h).unwrap());
    let back: Vec<u8> = d.rgb.iter().flatten().copied().collect();
    assert_eq!(
        &back[..200 * 50 * 3],
        &rgb[..200 * 50 * 3],
        "frequent colours exact"
    );
    // The rare ones take the nearest palette colour: close, not exact.
    for (a, b) in back[200 * 50 * 3..]
        .chunks(3)
        .zip(rgb[200 * 50 * 3..].chunks(3))
    {
        let d2: i32 = (0..3)
            .map(|k| (i32::from(a[k]) - i32::from(b[k])).pow(2))
            .sum();
        assert!(d2 < 3 * 120 * 120, "{a:?} vs {b:?}");
    }
    // At most 256 colours: the image comes back exactly.
    let small: Vec<u8> = (0..256u32 * 4)
        .flat_map(|k| [(k % 256) as u8, 3, 9])
        .collect();
    let d = decode(&picture::encode_png(&small, 64, 16).unwrap());
    let back: Vec<u8> = d.rgb.iter().flatten().copied().collect();
    assert_eq!(back, small);
}

#[test]
fn scale_bar_lengths_and_ticks_are_round() {
    assert_eq!(picture::nice_length(1320.0), 1000.0);
    assert_eq!(picture::nice_length(2600.0), 2000.0);
    assert_eq!(picture::nice_length(0.07), 0.05);
    assert_eq!(picture::length_text(2000.0, "m"), "2 km");
    assert_eq!(picture::length_text(500.0, "m"), "500 m");
    assert_eq!(
        picture::nice_ticks(-0.62, 0.62, 6),
        vec![-0.6, -0.4, -0.2, 0.0, 0.2, 0.4, 0.6]
    );
    assert_eq!(
        picture::nice_ticks(0.0, 1.0, 5),
        vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
    );
}

#[test]
fn map_picture_has_size_content_and_colours() {
    let (nx, ny) = (80, 50);
    let v = field(nx, ny, 3);
    let wells = vec![
        MapWell {
            x: 500.0,
            y: 400.0,
            name: "SB-1".to_string(),
            symbol: WellSymbol::Producer,
        },
        MapWell {
            x: 520.0,
            y: 410.0,
            name: "SB-2".to_string(),
            symbol: WellSymbol::Injector,
        },
    ];
    let markers = vec![(900.0, 700.0, "1".to_string())];
    let g = MapGeometry {
        origin_x: 0.0,
        origin_y: 0.0,
        dx: 25.0,
        dy: 25.0,
        nx,
        ny,
        rotation_deg: 15.0,
    };
    let mut p = picture(g, &v);
    p.scale = ColourScale::diverging_from(&v);
    p.wells = &wells;
    p.markers = &markers;
    p.title = "dSw P50".to_string();
    p.caption = "P10 is the low value.".to_string();
    let png = map_png(&p, 700, 500).unwrap();
    let d = decode(&png);
    assert_eq!((d.width, d.height), (700, 500));
    assert!(grey_variance(&d) > 100.0);
    // title text is drawn with the embedded font: dark pixels in the top band
    let dark_top = (0..30)
        .flat_map(|y| (0..700).map(move |x| (x, y)))
        .filter(|&(x, y)| d.at(x, y)[0] < 80)
        .count();
    assert!(dark_top > 30, "title not drawn ({dark_top} dark pixels)");

    // a field at the scale's minimum is drawn in viridis' first colour over much of the picture
    let flat = vec![0.0; nx * ny];
    let q = picture(
        MapGeometry {
            rotation_deg: 0.0,
            ..g
        },
        &flat,
    );
    let d = decode(&map_png(&q, 600, 450).unwrap());
    let purple = d.rgb.iter().filter(|c| hex(**c) == "#440154").count();
    assert!(
        purple as f64 > 0.2 * (600.0 * 450.0),
        "only {purple} viridis-minimum pixels"
    );
}

#[test]
fn large_grid_draws() {
    // a 1000 x 1000 grid rasterises per pixel, not per node
    let (nx, ny) = (1000, 1000);
    let v: Vec<f64> = (0..nx * ny)
        .map(|k| ((k % nx) as f64 / 97.0).sin())
        .collect();
    let g = MapGeometry {
        origin_x: 0.0,
        origin_y: 0.0,
        dx: 12.5,
        dy: 12.5,
        nx,
        ny,
        rotation_deg: 10.0,
    };
    let mut p = picture(g, &v);
    p.scale = ColourScale::diverging_from(&v);
    let d = decode(&map_png(&p, 800, 640).unwrap());
    assert_eq!((d.width, d.height), (800, 640));
    assert!(grey_variance(&d) > 100.0);
}

#[test]
fn bad_map_input_is_an_error_not_a_panic() {
    let g = MapGeometry {
        origin_x: 0.0,
        origin_y: 0.0,
        dx: 10.0,
        dy: 10.0,
        nx: 3,
        ny: 3,
        rotation_deg: 0.0,
    };
    let v = vec![0.0; 8];
    let e = map_png(&picture(g, &v), 400, 300).unwrap_err().to_string();
    assert!(e.contains("8 values") && e.contains("3 x 3"), "{e}");
    let v = vec![0.0; 9];
    assert!(map_png(&picture(g, &v), 10, 300).is_err());
    let bad = MapGeometry { dx: 0.0, ..g };
    assert!(map_png(&picture(bad, &v), 400, 300).is_err());
    let mut p = picture(g, &v);
    p.scale = ColourScale::Sequential { min: 2.0, max: 2.0 };
    assert!(map_png(&p, 400, 300).is_err());
    let flags = [true; 4];
    let mut p = picture(g, &v);
    p.outside = Some(&flags);
    assert!(map_png(&p, 400, 300).is_err());
}

#[test]
fn plots_have_size_and_content() {
    let cp = CrossPlot {
        title: "dSw at wells".to_string(),
        x_label: "truth (fraction)".to_string(),
        y_label: "prediction (fraction)".to_string(),
        series: vec![
            PointSeries {
                name: "raw".to_string(),
                points: (0..50)
                    .map(|k| (k as f64 / 50.0, 0.2 + k as f64 / 100.0))
                    .collect(),
            },
            PointSeries {
                name: "corrected".to_string(),
                points: vec![(0.1, 0.12), (f64::NAN, 0.3), (0.5, 0.48)],
            },
        ],
        one_to_one: true,
    };
    let d = decode(&crossplot_png(&cp, 520, 480).unwrap());
    assert_eq!((d.width, d.height), (520, 480));
    assert!(grey_variance(&d) > 50.0);
    // the raw series' orange (Okabe-Ito #e69f00, drawn at 75 % over white) is present
    assert!(
        d.rgb
            .iter()
            .any(|c| c[0] > 220 && c[1] > 150 && c[1] < 200 && c[2] < 90)
    );

    let lp = LinePicture {
        title: "Reliability".to_string(),
        x_label: "forecast probability".to_string(),
        y_label: "observed frequency".to_string(),
        series: vec![Curve {
            name: "wells".to_string(),
            points: vec![(0.1, 0.05), (0.5, f64::NAN), (0.6, 0.55), (0.9, 0.93)],
            band: Some(vec![(0.1, 0.0, 0.1), (0.9, 0.8, 1.0)]),
            markers: true,
        }],
        references: vec![
            Reference::Diagonal {
                label: "perfect".to_string(),
            },
            Reference::Horizontal {
                y: 0.8,
                label: "nominal".to_string(),
            },
        ],
        x_range: Some((0.0, 1.0)),
        y_range: Some((0.0, 1.0)),
        legend_top_left: false,
    };
    let d = decode(&line_png(&lp, 500, 400).unwrap());
    assert_eq!((d.width, d.height), (500, 400));
    assert!(grey_variance(&d) > 50.0);

    let bp = BarPicture {
        title: "Importance".to_string(),
        value_label: "increase in RMSE (MPa)".to_string(),
        category_label: String::new(),
        categories: vec![
            "near_amp".to_string(),
            "avo_gradient".to_string(),
            "time_shift".to_string(),
        ],
        series: vec![
            BarSeries {
                name: "amplitudes".to_string(),
                values: vec![0.3, f64::NAN, f64::NAN],
                errors: Some(vec![0.02, 0.0, 0.0]),
            },
            BarSeries {
                name: "AVO".to_string(),
                values: vec![f64::NAN, 0.2, f64::NAN],
                errors: None,
            },
            BarSeries {
                name: "timing".to_string(),
                values: vec![f64::NAN, f64::NAN, -0.05],
                errors: None,
            },
        ],
        reference: None,
        horizontal: true,
    };
    let d = decode(&bars_png(&bp, 600, 300).unwrap());
    assert_eq!((d.width, d.height), (600, 300));
    assert!(grey_variance(&d) > 50.0);
    let vertical = BarPicture {
        horizontal: false,
        reference: Some((0.1, "level".to_string())),
        ..bp.clone()
    };
    let d = decode(&bars_png(&vertical, 600, 300).unwrap());
    assert!(grey_variance(&d) > 50.0);

    // inconsistent lengths are an error
    let mut broken = bp;
    broken.series[0].values.pop();
    assert!(bars_png(&broken, 600, 300).is_err());
}

#[test]
fn empty_plots_still_draw() {
    let cp = CrossPlot {
        title: "nothing".to_string(),
        x_label: "x".to_string(),
        y_label: "y".to_string(),
        series: vec![],
        one_to_one: true,
    };
    assert_eq!(decode(&crossplot_png(&cp, 300, 300).unwrap()).width, 300);
    let lp = LinePicture {
        title: "nothing".to_string(),
        x_label: "x".to_string(),
        y_label: "y".to_string(),
        series: vec![],
        references: vec![],
        x_range: None,
        y_range: None,
        legend_top_left: false,
    };
    assert_eq!(decode(&line_png(&lp, 300, 200).unwrap()).height, 200);
    let bp = BarPicture {
        title: "nothing".to_string(),
        value_label: "v".to_string(),
        category_label: String::new(),
        categories: vec![],
        series: vec![],
        reference: None,
        horizontal: true,
    };
    assert_eq!(decode(&bars_png(&bp, 300, 200).unwrap()).height, 200);
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(48))]
    /// Whatever the rotation and spacing, the pixel under a node's centre shows that node.
    #[test]
    fn node_centre_pixel_shows_the_node(
        rotation in -180.0f64..180.0,
        dx in 5.0f64..50.0,
        ratio in 0.5f64..2.0,
        nx in 1usize..25,
        ny in 1usize..25,
        fi in 0.0f64..1.0,
        fj in 0.0f64..1.0,
    ) {
        let g = MapGeometry { origin_x: 4.2e5, origin_y: 6.1e6, dx, dy: dx * ratio, nx, ny, rotation_deg: rotation };
        let (i, j) = (((nx as f64 * fi) as usize).min(nx - 1), ((ny as f64 * fj) as usize).min(ny - 1));
        let mut v = vec![0.0; nx * ny];
        v[j * nx + i] = 1.0;
        let p = picture(g, &v);
        let view = MapView::fit(&g, 0..400, 0..400);
        let img = raster(&p, &view, 400, 400);
        let (x, y) = g.node_xy(i, j);
        let (px, py) = view.world_to_pixel(x, y);
        let (cx, cy) = (px.floor() as usize, py.floor() as usize);
        proptest::prop_assert_eq!(img[cy * 400 + cx], YELLOW);
        // and the view keeps equal scales on both axes
        let sx = (view.xmax - view.xmin) / 400.0;
        let sy = (view.ymax - view.ymin) / 400.0;
        proptest::prop_assert!((sx - sy).abs() <= 1e-9 * sx);
    }
}

#[test]
fn tick_labels_are_short_and_exact() {
    use tidemark::report::picture::format_tick;
    assert_eq!(format_tick(0.30000000000000004, 1.0), "0.3");
    assert_eq!(format_tick(2500.0, 3000.0), "2500");
    assert_eq!(format_tick(-0.0, 1.0), "0");
    assert_eq!(format_tick(0.125, 0.5), "0.125");
    assert_eq!(format_tick(6.1e6, 2000.0), "6100000");
}

#[test]
fn geometry_from_grid_keeps_node_positions() {
    let grid = tidemark::grid::Grid {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 12.5,
        dy: 25.0,
        nx: 7,
        ny: 5,
        rotation: 33.0,
        epsg: None,
        null_value: -999.25,
    };
    let g = MapGeometry::from(&grid);
    let r = 33f64.to_radians();
    // DEVELOPERS.md: x = x0 + i dx cos r - j dy sin r, y = y0 + i dx sin r + j dy cos r
    let (x, y) = g.node_xy(6, 4);
    assert!((x - (1000.0 + 6.0 * 12.5 * r.cos() - 4.0 * 25.0 * r.sin())).abs() < 1e-9);
    assert!((y - (2000.0 + 6.0 * 12.5 * r.sin() + 4.0 * 25.0 * r.cos())).abs() < 1e-9);
}

// Outlines and fault traces are drawn over the cells: a line across a flat map adds a band of
// black pixels about as long as the map is wide. The picture (rotated grid, every well symbol,
// a ranked target, an outline) is kept in the target folder for a look.
#[test]
fn outlines_are_drawn_over_a_rotated_map() {
    let (nx, ny) = (60, 40);
    let g = MapGeometry {
        origin_x: 20000.0,
        origin_y: 40000.0,
        dx: 50.0,
        dy: 50.0,
        nx,
        ny,
        rotation_deg: 30.0,
    };
    let v = field(nx, ny, 5);
    let (x0, x1, y0, y1) = g.extent();
    let ym = (y0 + y1) / 2.0;
    let lines = [MapLine {
        points: vec![(x0 - 100.0, ym), (x1 + 100.0, ym)],
    }];
    let (cx, cy) = g.node_xy(30, 20);
    let symbols = [
        WellSymbol::Producer,
        WellSymbol::Injector,
        WellSymbol::Observer,
        WellSymbol::Unknown,
    ];
    let wells: Vec<MapWell> = (0..8)
        .map(|k| MapWell {
            x: cx + 40.0 * k as f64,
            y: cy - 300.0 + 25.0 * k as f64,
            name: format!("SKB-W{k}"),
            symbol: symbols[k % 4],
        })
        .collect();
    let markers = vec![(cx - 400.0, cy + 200.0, "#1".to_string())];
    let outside: Vec<bool> = (0..nx * ny).map(|k| k % nx < 12).collect();
    let mut p = picture(g, &v);
    p.scale = ColourScale::diverging_from(&v);
    p.title = "dSw P50 (most likely change)".to_string();
    p.subtitle = "step m2: monitor 2019-06-01 minus base 2016-06-01".to_string();
    p.crs = "local engineering coordinates in metres".to_string();
    p.wells = &wells;
    p.markers = &markers;
    p.outside = Some(&outside);
    let black = |png: &[u8]| decode(png).rgb.iter().filter(|c| **c == [0, 0, 0]).count();
    let without = black(&map_png(&p, 1000, 840).unwrap());
    p.lines = &lines;
    let png = map_png(&p, 1000, 840).unwrap();
    let with = black(&png);
    assert!(
        with > without + 2 * 400,
        "outline adds only {} black pixels",
        with - without
    );
    let keep = std::path::Path::new(env!("CARGO_TARGET_TMPDIR")).join("map-overlays.png");
    std::fs::write(keep, &png).unwrap();
}
