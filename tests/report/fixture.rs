//! Shared helpers: PNG decoding and a page input built from generated numbers.

use std::path::Path;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use tidemark::report::input::*;
use tidemark::report::*;

/// A decoded RGB(A) picture.
pub struct Decoded {
    pub width: u32,
    pub height: u32,
    /// RGB triplets, row-major, top row first.
    pub rgb: Vec<[u8; 3]>,
}

impl Decoded {
    pub fn at(&self, x: u32, y: u32) -> [u8; 3] {
        self.rgb[(y * self.width + x) as usize]
    }
}

/// Decodes PNG bytes (RGB or RGBA, 8 bit) with the png crate.
pub fn decode(bytes: &[u8]) -> Decoded {
    let mut dec = png::Decoder::new(std::io::Cursor::new(bytes));
    dec.set_transformations(png::Transformations::EXPAND | png::Transformations::STRIP_16);
    let mut reader = dec.read_info().expect("PNG header");
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).expect("PNG data");
    let ch = match info.color_type {
        png::ColorType::Rgb => 3,
        png::ColorType::Rgba => 4,
        png::ColorType::Grayscale => 1,
        png::ColorType::GrayscaleAlpha => 2,
        other => panic!("unexpected PNG colour type {other:?}"),
    };
    let rgb = buf[..info.buffer_size()]
        .chunks(ch)
        .map(|p| {
            if ch >= 3 {
                [p[0], p[1], p[2]]
            } else {
                [p[0], p[0], p[0]]
            }
        })
        .collect();
    Decoded {
        width: info.width,
        height: info.height,
        rgb,
    }
}

/// Variance of the grey level over all pixels.
pub fn grey_variance(d: &Decoded) -> f64 {
    let g: Vec<f64> = d
        .rgb
        .iter()
        .map(|p| (p[0] as f64 + p[1] as f64 + p[2] as f64) / 3.0)
        .collect();
    let m = g.iter().sum::<f64>() / g.len() as f64;
    g.iter().map(|v| (v - m).powi(2)).sum::<f64>() / g.len() as f64
}

/// A small generated field map: `nx x ny` values of a smooth pattern plus noise.
pub fn field(nx: usize, ny: usize, seed: u64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    (0..nx * ny)
        .map(|k| {
            let (i, j) = ((k % nx) as f64, (k / nx) as f64);
            (i / 7.0).sin() * (j / 5.0).cos() * 0.3 + rng.random_range(-0.02..0.02)
        })
        .collect()
}

/// A complete page input from generated numbers; map pictures are written as PNG files under
/// `dir/maps/` (files) or embedded (base64), both kinds used.
pub fn sample_input(dir: &Path) -> ReportInput {
    let mut rng = StdRng::seed_from_u64(42);
    let (nx, ny) = (60, 40);
    let geometry = MapGeometry {
        origin_x: 1000.0,
        origin_y: 5000.0,
        dx: 25.0,
        dy: 25.0,
        nx,
        ny,
        rotation_deg: 20.0,
    };
    let wells: Vec<MapWell> = (0..6)
        .map(|k| {
            let (x, y) = geometry.node_xy(8 + 8 * k, 5 + 5 * k);
            MapWell {
                x,
                y,
                name: format!("SB-{}", k + 1),
                symbol: if k % 2 == 0 {
                    WellSymbol::Producer
                } else {
                    WellSymbol::Injector
                },
            }
        })
        .collect();
    let outside: Vec<bool> = (0..nx * ny).map(|k| k % nx > 50).collect();
    let steps = vec!["2024".to_string(), "2026".to_string()];
    let mut maps = Vec::new();
    let targets_meta = [
        ("dSw", "fraction", "change in water saturation"),
        ("dP", "MPa", "change in pore pressure"),
    ];
    for (t, (name, unit, _)) in targets_meta.iter().enumerate() {
        for (s, step) in steps.iter().enumerate() {
            let p50 = field(nx, ny, (10 * t + s) as u64);
            let width: Vec<f64> = p50.iter().map(|v| 0.05 + v.abs() * 0.3).collect();
            let prob: Vec<f64> = p50
                .iter()
                .map(|v| (v * 3.0 + 0.5).clamp(0.0, 1.0))
                .collect();
            let pics = [
                ("P50", p50.clone(), ColourScale::diverging_from(&p50), *unit),
                (
                    "band width P90 - P10",
                    width.clone(),
                    ColourScale::sequential_from(&width),
                    *unit,
                ),
                (
                    "P(exceed 0.1)",
                    prob,
                    ColourScale::Probability,
                    "probability",
                ),
            ];
            for (kind, values, scale, u) in pics {
                let pic = MapPicture {
                    geometry,
                    values: &values,
                    title: format!("{name} {kind}, step {step}"),
                    unit: u.to_string(),
                    xy_unit: "m".to_string(),
                    scale,
                    wells: &wells,
                    outside: Some(&outside),
                    caption: "P10 is the low value (percentile convention).".to_string(),
                    markers: &[],
                    subtitle: format!("step {step}"),
                    crs: "EPSG:32625".to_string(),
                    lines: &[],
                };
                let png = map_png(&pic, 560, 420).expect("map picture");
                let picture = if kind == "P50" {
                    let rel = format!("maps/{step}/{name}_p50.png");
                    let path = dir.join(&rel);
                    std::fs::create_dir_all(path.parent().unwrap()).unwrap();
                    std::fs::write(&path, &png).unwrap();
                    PictureRef::File(rel)
                } else {
                    PictureRef::from_png(&png)
                };
                maps.push(MapEntry {
                    step: step.clone(),
                    target: Some(name.to_string()),
                    kind: kind.to_string(),
                    picture,
                    caption: String::new(),
                });
            }
        }
    }
    for step in &steps {
        let di: Vec<f64> = (0..nx * ny).map(|k| (k % nx) as f64 / nx as f64).collect();
        let pic = MapPicture {
            geometry,
            values: &di,
            title: format!("Dissimilarity index, step {step}"),
            unit: "-".to_string(),
            xy_unit: "m".to_string(),
            scale: ColourScale::sequential_from(&di),
            wells: &wells,
            outside: Some(&outside),
            caption: String::new(),
            markers: &[],
            subtitle: String::new(),
            crs: "EPSG:32625".to_string(),
            lines: &[],
        };
        maps.push(MapEntry {
            step: step.clone(),
            target: None,
            kind: "dissimilarity".to_string(),
            picture: PictureRef::from_png(&map_png(&pic, 560, 420).unwrap()),
            caption: String::new(),
        });
    }
    let targets = targets_meta
        .iter()
        .map(|(name, unit, desc)| {
            let n = 120;
            let truth: Vec<f64> = (0..n).map(|_| rng.random_range(-0.3..0.5)).collect();
            let raw: Vec<f64> = truth
                .iter()
                .map(|t| 0.1 + 0.6 * t + rng.random_range(-0.05..0.05))
                .collect();
            let corrected: Vec<f64> = truth
                .iter()
                .map(|t| t + rng.random_range(-0.06..0.06))
                .collect();
            TargetReport {
                name: name.to_string(),
                description: desc.to_string(),
                unit: unit.to_string(),
                summary: TargetSummary {
                    wells: Some(24),
                    rows: Some(n),
                    learner: Some("forest".to_string()),
                    end_correction_kept: Some(true),
                    r2: Some(0.81),
                    rmse: Some(0.052),
                    bias: Some(-0.003),
                    nominal_coverage: Some(0.8),
                    coverage: Some(0.79),
                    coverage_bottom_decile: Some(0.66),
                    coverage_top_decile: None,
                    mean_width: Some(0.13),
                    warnings: vec!["only 3 wells in the top decile".to_string()],
                    ..Default::default()
                },
                crossplot: Some(CrossplotData {
                    truth,
                    raw,
                    corrected,
                }),
                coverage_by_decile: Some(DecileCoverage {
                    nominal: Some(0.8),
                    rows: (1..=10)
                        .map(|d| DecileRow {
                            decile: d,
                            truth_low: Some(-0.3 + 0.08 * (d - 1) as f64),
                            truth_high: Some(-0.3 + 0.08 * d as f64),
                            count: 12,
                            coverage: Some(0.7 + 0.02 * (d % 4) as f64),
                            mean_width: Some(0.12),
                        })
                        .collect(),
                }),
                reliability: vec![ReliabilityTable {
                    label: format!("{name} > 0.1"),
                    threshold: Some(0.1),
                    brier: Some(0.12),
                    bins: (0..5)
                        .map(|b| ReliabilityBin {
                            forecast_low: b as f64 * 0.2,
                            forecast_high: (b + 1) as f64 * 0.2,
                            mean_forecast: Some(b as f64 * 0.2 + 0.1),
                            observed_frequency: Some(b as f64 * 0.2 + 0.08),
                            count: 20 + b,
                        })
                        .collect(),
                }],
                pit: Some(PitHistogram {
                    counts: vec![14, 11, 12, 13, 10, 12, 11, 12, 13, 12],
                }),
                learning_curve: Some(LearningCurve {
                    repeats: 5,
                    note: "the forest alone with 100 trees".to_string(),
                    points: [6usize, 10, 14, 18, 24]
                        .iter()
                        .map(|&w| LearningPoint {
                            wells: w,
                            r2_mean: Some(1.0 - 2.0 / w as f64),
                            r2_min: Some(0.9 - 2.5 / w as f64),
                            r2_max: Some(1.0 - 1.5 / w as f64),
                            coverage_mean: Some(0.8 - 0.3 / w as f64),
                        })
                        .collect(),
                }),
                importance: Some(Importance {
                    measure: "increase in RMSE when permuted".to_string(),
                    unit: unit.to_string(),
                    by_attribute: [
                        ("near_amp", "amplitudes"),
                        ("far_amp", "amplitudes"),
                        ("avo_intercept", "AVO intercept/gradient"),
                        ("avo_gradient", "AVO intercept/gradient"),
                        ("time_shift", "timing"),
                    ]
                    .iter()
                    .enumerate()
                    .map(|(k, (a, f))| AttributeImportance {
                        attribute: a.to_string(),
                        family: f.to_string(),
                        value: Some(0.05 / (k + 1) as f64),
                        spread: Some(0.004),
                    })
                    .collect(),
                    by_family: vec![
                        FamilyImportance {
                            family: "amplitudes".to_string(),
                            value: Some(0.07),
                        },
                        FamilyImportance {
                            family: "AVO intercept/gradient".to_string(),
                            value: Some(0.03),
                        },
                        FamilyImportance {
                            family: "timing".to_string(),
                            value: Some(0.01),
                        },
                    ],
                    family_note: String::new(),
                }),
                ablation: Some(Ablation {
                    description: "Skill without the angle-dependent attributes.".to_string(),
                    removed: vec!["far_amp".to_string(), "avo_gradient".to_string()],
                    with_all: Skill {
                        r2: Some(0.81),
                        rmse: Some(0.05),
                        coverage: Some(0.79),
                        mean_width: Some(0.13),
                    },
                    without: Skill {
                        r2: Some(0.66),
                        rmse: Some(0.07),
                        coverage: Some(0.78),
                        mean_width: Some(0.18),
                    },
                }),
                ..Default::default()
            }
        })
        .collect();
    let err = field(nx, ny, 99);
    let err_png = map_png(
        &MapPicture {
            geometry,
            values: &err,
            title: "dSw P50 minus truth, step 2026".to_string(),
            unit: "fraction".to_string(),
            xy_unit: "m".to_string(),
            scale: ColourScale::diverging_from(&err),
            wells: &wells,
            outside: None,
            caption: String::new(),
            markers: &[],
            subtitle: String::new(),
            crs: "EPSG:32625".to_string(),
            lines: &[],
        },
        560,
        420,
    )
    .unwrap();
    ReportInput {
        project: "Skerrow Bank <demo> & co".to_string(),
        run: RunInfo {
            tidemark_version: "0.1.0".to_string(),
            created: "2026-01-01T00:00:00Z".to_string(),
            seed: Some(7),
            project_file: "project.toml".to_string(),
            settings: vec![KeyValue { key: "folds".to_string(), value: "5".to_string() }],
            timings: vec![Timing { stage: "fit".to_string(), seconds: Some(1.5) }],
            warnings: vec![],
        },
        convention: "Percentile convention: P10 is the low value, P90 the high value.".to_string(),
        cautions: vec![],
        xy_unit: "m".to_string(),
        steps,
        targets,
        maps,
        infill: Some(InfillSection {
            criterion: "Chance of not being swept (dSw below 0.2) times hydrocarbon pore volume within 300 m.".to_string(),
            volume_unit: "m3".to_string(),
            picture: None,
            rows: vec![InfillRow {
                rank: 1,
                x: 1500.0,
                y: 5600.0,
                chance: Some(0.7),
                risked_volume: Some(1.2e5),
                nearest_well: "SB-2".to_string(),
                distance: Some(410.0),
                inside: true,
                drainage_inside_fraction: Some(0.85),
            }],
        }),
        totals: None,
        truth: Some(TruthSection {
            scores: vec![TruthScore {
                target: "dSw".to_string(),
                step: None,
                unit: "fraction".to_string(),
                nodes: Some(nx * ny * 2),
                r2: Some(0.77),
                rmse: Some(0.06),
                bias: Some(0.001),
                coverage: Some(0.81),
                mean_width: Some(0.14),
            }],
            error_maps: vec![MapEntry {
                step: "2026".to_string(),
                target: Some("dSw".to_string()),
                kind: "P50 minus truth".to_string(),
                picture: PictureRef::from_png(&err_png),
                caption: String::new(),
            }],
        }),
        injector_cores: Vec::new(),
        ..Default::default()
    }
}
