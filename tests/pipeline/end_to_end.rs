//! `run`, `score`, `predict` on a small generated field: files, GDAL readability, pictures,
//! reproducibility, tiles, refusal to write over inputs.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;
use tidemark::pipeline::model::SavedModel;
use tidemark::pipeline::outputs::Formats;
use tidemark::pipeline::predict::{Tile, predict};
use tidemark::pipeline::run::{RunOptions, run};
use tidemark::synth::{SynthSettings, generate, write_project};

/// A generated project and one finished run on it, shared by the tests of this binary.
pub struct Fixture {
    /// Folder holding everything.
    pub root: PathBuf,
    /// The project manifest.
    pub project: PathBuf,
    /// The results folder.
    pub out: PathBuf,
}

/// Small field: quick to run, large enough for the statistics to mean something.
pub fn small_settings(seed: u64) -> SynthSettings {
    SynthSettings {
        seed,
        nx: 64,
        ny: 52,
        spacing: 50.0,
        wells: 44,
        steps: 3,
        ..SynthSettings::default()
    }
}

/// Writes a generated project under `dir` and returns its manifest path. The report's studies
/// are made light so that the suite stays fast.
pub fn make_project(dir: &Path, seed: u64) -> PathBuf {
    if dir.exists() {
        std::fs::remove_dir_all(dir).unwrap();
    }
    let settings = small_settings(seed);
    let field = generate(&settings).expect("generate");
    write_project(&field, &settings, dir).expect("write project");
    let manifest = dir.join("project.toml");
    let text = std::fs::read_to_string(&manifest).unwrap();
    let text = text.replace("[report]\n", "[report]\nlearning_curve_repeats = 2\n");
    assert!(
        text.contains("learning_curve_repeats = 2"),
        "the synthetic manifest has a [report] table"
    );
    std::fs::write(&manifest, text).unwrap();
    manifest
}

/// The shared fixture (built once).
pub fn fixture() -> &'static Fixture {
    static F: OnceLock<Fixture> = OnceLock::new();
    F.get_or_init(|| {
        let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("pipeline-fixture");
        let project = make_project(&root.join("field"), 11);
        let out = root.join("results");
        if out.exists() {
            std::fs::remove_dir_all(&out).unwrap();
        }
        run(&RunOptions::new(&project, &out)).expect("run");
        tidemark::pipeline::score::score_and_report(&out, &root.join("field")).expect("score");
        Fixture { root, project, out }
    })
}

fn tifs_under(dir: &Path) -> Vec<PathBuf> {
    files_under(dir, "tif")
}

fn files_under(dir: &Path, ext: &str) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            out.extend(files_under(&p, ext));
        } else if p.extension().is_some_and(|x| x == ext) {
            out.push(p);
        }
    }
    out.sort();
    out
}

/// Runs a GDAL command-line tool and fails with install instructions when it is missing.
fn gdal(program: &str, args: &[&str]) -> std::process::Output {
    let out = Command::new(program)
        .args(args)
        .output()
        .unwrap_or_else(|e| {
            panic!("{program} could not be run ({e}): install Debian's gdal-bin (.ci/deps does)")
        });
    assert!(
        out.status.success(),
        "{program} {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

#[test]
fn every_expected_file_exists_and_gdal_reads_each_map() {
    let f = fixture();
    let o = &f.out;
    for file in [
        "run.json",
        "summary.json",
        "model.json",
        "targets.csv",
        "targets.json",
        "report.html",
        "truth-score.json",
        "maps/metadata.json",
    ] {
        assert!(o.join(file).is_file(), "missing {file}");
    }
    for step in ["m1", "m2", "m3"] {
        for t in ["dP", "dSw", "dSg"] {
            for s in ["p50", "p10", "p90"] {
                for ext in ["tif", "xyz"] {
                    let p = o.join(format!("maps/{step}/{t}_{s}.{ext}"));
                    assert!(p.is_file(), "missing {}", p.display());
                }
            }
        }
        for m in [
            "dSw_exceed_swept",
            "dP_exceed_depleted",
            "dSg_exceed_gas_out",
            "dissimilarity",
            "applicable",
            "outside_range",
        ] {
            assert!(o.join(format!("maps/{step}/{m}.tif")).is_file(), "{m}");
        }
    }
    // Outside check: GDAL (Debian gdal-bin) opens every map and sees the project's grid.
    let grid = tidemark::project::Project::load(&f.project).unwrap().grid;
    let tifs = tifs_under(&o.join("maps"));
    assert!(tifs.len() >= 3 * 15, "only {} maps", tifs.len());
    for tif in tifs {
        let out = Command::new("gdalinfo")
            .arg("-json")
            .arg(&tif)
            .output()
            .expect("gdalinfo is needed (Debian gdal-bin; .ci/deps installs it)");
        assert!(out.status.success(), "gdalinfo failed on {}", tif.display());
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["size"][0].as_u64(), Some(grid.nx as u64));
        assert_eq!(v["size"][1].as_u64(), Some(grid.ny as u64));
    }
    // ... and every XYZ map, through its XYZ driver, with the nodata value of the sidecar.
    let xyzs = files_under(&o.join("maps"), "xyz");
    assert_eq!(
        xyzs.len(),
        tifs_under(&o.join("maps")).len(),
        "one XYZ per GeoTIFF"
    );
    for xyz in xyzs {
        let out = gdal("gdalinfo", &["-json", xyz.to_str().unwrap()]);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["driverShortName"], "XYZ", "{}", xyz.display());
        assert_eq!(v["size"][0].as_u64(), Some(grid.nx as u64));
        assert_eq!(v["size"][1].as_u64(), Some(grid.ny as u64));
        assert_eq!(v["bands"][0]["noDataValue"].as_f64(), Some(grid.null_value));
    }
}

// Tiles of `tidemark predict --tile i/N` are georeferenced GeoTIFFs: GDAL's gdalbuildvrt mosaics
// them into the whole map, node for node equal to a whole-grid run, with no gap and no overlap;
// and their XYZ text, concatenated in tile order, is the whole map too.
#[test]
fn tiles_mosaic_into_the_whole_map_with_gdal() {
    let f = fixture();
    let model = f.out.join("model.json");
    let count = 5; // 52 rows: tiles of 10, 10, 11, 10 and 11 rows
    let root = f.root.join("mosaic");
    if root.exists() {
        std::fs::remove_dir_all(&root).unwrap();
    }
    let mut dirs = Vec::new();
    for i in 1..=count {
        let dir = root.join(format!("tile{i}"));
        let tile = Tile { index: i, count };
        predict(&model, &f.project, &dir, Some(tile), Formats::default()).expect("tile");
        dirs.push(dir);
    }
    let whole_grid = tidemark::project::Project::load(&f.project).unwrap().grid;
    for step in ["m1", "m3"] {
        for name in ["dSw_p50", "dP_p90", "dSg_exceed_gas_out", "applicable"] {
            let rel = format!("maps/{step}/{name}");
            let whole = tidemark::io::geotiff::read(&f.out.join(format!("{rel}.tif"))).unwrap();
            let vrt = root.join(format!("{step}_{name}.vrt"));
            let tif = root.join(format!("{step}_{name}.tif"));
            let mut args = vec!["-q".to_string(), vrt.display().to_string()];
            args.extend(
                dirs.iter()
                    .map(|d| d.join(format!("{rel}.tif")).display().to_string()),
            );
            let args: Vec<&str> = args.iter().map(String::as_str).collect();
            gdal("gdalbuildvrt", &args);
            gdal(
                "gdal_translate",
                &["-q", vrt.to_str().unwrap(), tif.to_str().unwrap()],
            );
            let mosaic = tidemark::io::geotiff::read(&tif).unwrap();
            assert!(
                whole_grid.differences(&mosaic.grid).is_empty(),
                "{rel}: {:?}",
                whole_grid.differences(&mosaic.grid)
            );
            assert_eq!(mosaic.values.len(), whole.values.len());
            for (k, (a, b)) in whole.values.iter().zip(&mosaic.values).enumerate() {
                assert!(
                    a == b || (a.is_nan() && b.is_nan()),
                    "{rel} node {k}: whole {a}, mosaic {b}"
                );
            }
            let text: String = dirs
                .iter()
                .map(|d| std::fs::read_to_string(d.join(format!("{rel}.xyz"))).unwrap())
                .collect();
            let joined =
                tidemark::io::xyz::parse(Path::new("joined.xyz"), &text, &whole_grid, 0.01)
                    .unwrap();
            let want = tidemark::io::xyz::read_on_grid(
                &f.out.join(format!("{rel}.xyz")),
                &whole_grid,
                0.01,
            )
            .unwrap();
            for (k, (a, b)) in want.iter().zip(&joined).enumerate() {
                assert!(
                    a == b || (a.is_nan() && b.is_nan()),
                    "{rel} node {k}: whole {a}, joined tiles {b}"
                );
            }
        }
    }
}

fn png_size_and_variance(path: &Path) -> (u32, u32, f64) {
    let mut decoder =
        png::Decoder::new(std::io::BufReader::new(std::fs::File::open(path).unwrap()));
    decoder.set_transformations(png::Transformations::EXPAND);
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).unwrap();
    let px = &buf[..info.buffer_size()];
    let n = px.len() as f64;
    let mean = px.iter().map(|&v| f64::from(v)).sum::<f64>() / n;
    let var = px
        .iter()
        .map(|&v| (f64::from(v) - mean).powi(2))
        .sum::<f64>()
        / n;
    (info.width, info.height, var)
}

#[test]
fn pictures_have_the_expected_size_and_are_not_blank() {
    let f = fixture();
    let dir = f.out.join("pictures");
    let mut seen = 0;
    for step in ["m1", "m3"] {
        for name in ["dSw_p50", "dSw_width", "dSw_exceed_swept", "dissimilarity"] {
            let p = dir.join(step).join(format!("{name}.png"));
            let (w, h, var) = png_size_and_variance(&p);
            assert_eq!(
                (w, h),
                tidemark::pipeline::pictures::MAP_SIZE,
                "{}",
                p.display()
            );
            assert!(var > 50.0, "{} looks blank (variance {var})", p.display());
            seen += 1;
        }
    }
    assert_eq!(seen, 8);
}

#[test]
fn infill_targets_respect_spacing_and_applicability() {
    let f = fixture();
    let project = tidemark::project::Project::load(&f.project).unwrap();
    let spec = project
        .infill
        .clone()
        .expect("the synthetic project asks for infill targets");
    let mut rdr = csv::Reader::from_path(f.out.join("targets.csv")).unwrap();
    let header: Vec<String> = rdr.headers().unwrap().iter().map(str::to_string).collect();
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let last = project.steps.last().unwrap().name.clone();
    assert_eq!(
        header[..5],
        [
            "rank",
            "step",
            "x",
            "y",
            &format!("p_not_{}", spec.threshold)
        ]
    );
    let targets: Vec<Vec<String>> = rdr
        .records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect();
    assert!(!targets.is_empty());
    let sidecar: serde_json::Value =
        serde_json::from_slice(&std::fs::read(f.out.join("targets.json")).unwrap()).unwrap();
    assert_eq!(sidecar["step"], last.as_str());
    assert_eq!(sidecar["targets"].as_array().unwrap().len(), targets.len());
    let inside =
        tidemark::io::geotiff::read(&f.out.join(format!("maps/{last}/applicable.tif"))).unwrap();
    let g = &inside.grid;
    let (cx, cy, cd) = (col("x"), col("y"), col("nearest_well_distance"));
    for (a, t) in targets.iter().enumerate() {
        assert_eq!(t[col("step")], last);
        let (x, y): (f64, f64) = (t[cx].parse().unwrap(), t[cy].parse().unwrap());
        let d: f64 = t[cd].parse().unwrap();
        assert!(
            d >= spec.min_well_spacing,
            "target {a} at {d} m from a well"
        );
        let (fi, fj) = g.fractional_ij(x, y);
        let k = g.index(fi.round() as usize, fj.round() as usize);
        assert_eq!(
            inside.values[k], 1.0,
            "target {a} outside the area of applicability"
        );
        for u in &targets[a + 1..] {
            let (ux, uy): (f64, f64) = (u[cx].parse().unwrap(), u[cy].parse().unwrap());
            assert!((x - ux).hypot(y - uy) >= spec.min_target_spacing);
        }
    }
}

#[test]
fn same_seed_same_maps_and_tiles_put_together_equal_the_whole() {
    let f = fixture();
    // A second run of the same project and seed, maps only, on one thread.
    let again = f.root.join("again");
    if again.exists() {
        std::fs::remove_dir_all(&again).unwrap();
    }
    let mut opts = RunOptions::new(&f.project, &again);
    opts.pictures = false;
    opts.report = false;
    opts.formats = Formats {
        geotiff: true,
        xyz: false,
    };
    crate::threads::in_pool(1, || run(&opts)).expect("second run");
    for tif in tifs_under(&f.out.join("maps")) {
        let rel = tif.strip_prefix(&f.out).unwrap();
        let a = std::fs::read(&tif).unwrap();
        let b = std::fs::read(again.join(rel)).unwrap();
        assert!(a == b, "{} differs between runs", rel.display());
    }
    // Three tiles of the saved model, put together, equal the whole run.
    let model = f.out.join("model.json");
    let project = tidemark::project::Project::load(&f.project).unwrap();
    let ny = project.grid.ny;
    let formats = Formats {
        geotiff: true,
        xyz: false,
    };
    let mut tiles = Vec::new();
    for i in 1..=3 {
        let dir = f.root.join(format!("tile{i}"));
        if dir.exists() {
            std::fs::remove_dir_all(&dir).unwrap();
        }
        let tile = Tile { index: i, count: 3 };
        predict(&model, &f.project, &dir, Some(tile), formats).expect("tile");
        tiles.push((tile, dir));
    }
    for name in ["dSw_p50", "dP_p10", "dSg_exceed_gas_out", "dissimilarity"] {
        let whole =
            tidemark::io::geotiff::read(&f.out.join(format!("maps/m2/{name}.tif"))).unwrap();
        let mut stitched: Vec<f64> = Vec::new();
        for (tile, dir) in &tiles {
            let part =
                tidemark::io::geotiff::read(&dir.join(format!("maps/m2/{name}.tif"))).unwrap();
            assert_eq!(part.grid, tile.grid(&whole.grid), "tile geometry");
            stitched.extend(part.values);
        }
        assert_eq!(stitched.len(), ny * project.grid.nx);
        for (k, (a, b)) in whole.values.iter().zip(&stitched).enumerate() {
            assert!(
                a == b || (a.is_nan() && b.is_nan()),
                "{name} node {k}: whole {a}, tiles {b}"
            );
        }
    }
}

#[test]
fn refuses_an_output_folder_that_holds_the_inputs() {
    let f = fixture();
    let field = f.project.parent().unwrap();
    let e = run(&RunOptions::new(&f.project, field))
        .err()
        .expect("must refuse");
    assert!(e.to_string().contains("holds the input"), "{e}");
    let e = run(&RunOptions::new(&f.project, f.root.clone()))
        .err()
        .expect("a parent of the inputs must be refused too");
    assert!(e.to_string().contains("holds the input"), "{e}");
}

#[test]
fn run_json_records_provenance_and_cautions() {
    let f = fixture();
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("run.json")).unwrap()).unwrap();
    assert_eq!(v["version"], env!("CARGO_PKG_VERSION"));
    assert!(v["inputs"].as_array().unwrap().len() >= 3 * 8 + 2);
    for h in v["inputs"].as_array().unwrap() {
        assert_eq!(h["sha256"].as_str().unwrap().len(), 64);
    }
    let cautions = v["cautions"].to_string();
    assert!(cautions.contains("not a reserves estimate"));
    // Every well of the generated fixture is a producer or an injector: run.json, summary.json
    // and the report say what that means for the bands between wells.
    let flowing = tidemark::pipeline::FLOWING_WELLS_CAUTION;
    let says_so = |doc: &serde_json::Value| {
        doc["cautions"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c == flowing)
    };
    assert!(says_so(&v));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("summary.json")).unwrap())
            .unwrap();
    assert!(says_so(&summary));
    let html = std::fs::read_to_string(f.out.join("report.html")).unwrap();
    assert!(html.contains("they stand at the sources of change"));
    assert!(v["timings"].as_array().unwrap().len() >= 4);
    assert!(
        v["convention"]
            .as_str()
            .unwrap()
            .contains("P10 is the low value")
    );
}

#[test]
fn summary_says_how_typical_of_the_nodes_the_wells_are() {
    let f = fixture();
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("summary.json")).unwrap())
            .unwrap();
    let s = &v["wells_vs_nodes"];
    let auc = s["auc"].as_f64().unwrap();
    let eff = s["effective_wells"].as_f64().unwrap();
    let wells = s["wells"].as_u64().unwrap() as f64;
    eprintln!("wells vs nodes: {s}");
    // The generated field's wells sit at injectors and producers, so the classifier separates
    // them from the nodes better than chance; Kish's effective size never exceeds the count.
    assert!(auc > 0.5 && auc <= 1.0, "auc {auc}");
    assert!(
        eff > 1.0 && eff <= wells + 1e-9,
        "effective wells {eff} of {wells}"
    );
    assert_eq!(s["applied"], false, "the default calibrates for the wells");
    assert!(s["node_rows"].as_u64().unwrap() > 0);
}

#[test]
fn summary_gives_skill_verdicts_per_target_and_named_step() {
    let f = fixture();
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("summary.json")).unwrap())
            .unwrap();
    let run: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("run.json")).unwrap()).unwrap();
    let model = SavedModel::load(&f.out.join("model.json")).unwrap();
    for t in v["targets"].as_array().unwrap() {
        let name = t["name"].as_str().unwrap();
        let skill = &t["skill"];
        let verdict = skill["verdict"].as_str().unwrap();
        assert!(
            ["none", "weak", "useful"].contains(&verdict),
            "{name}: {verdict}"
        );
        // The interval brackets the estimate (percentile bootstrap over wells).
        let r2 = skill["r2"].as_f64().unwrap();
        let iv = skill["r2_interval"].as_array().unwrap();
        assert!(iv[0].as_f64().unwrap() <= r2 + 1e-12 && r2 <= iv[1].as_f64().unwrap() + 1e-12);
        let steps: Vec<&str> = t["skill_by_step"]
            .as_array()
            .unwrap()
            .iter()
            .map(|s| s["step"].as_str().unwrap())
            .collect();
        assert_eq!(
            steps,
            model
                .step_names
                .iter()
                .map(String::as_str)
                .collect::<Vec<_>>()
        );
        // A `none` verdict is a warning of run.json naming the target.
        let warned = run["warnings"].as_array().unwrap().iter().any(|w| {
            let w = w.as_str().unwrap();
            w.starts_with("skill") && w.contains(&format!("target {name}"))
        });
        let any_none = verdict == "none"
            || t["skill_by_step"]
                .as_array()
                .unwrap()
                .iter()
                .any(|s| s["verdict"] == "none");
        assert_eq!(warned, any_none, "{name}");
    }
}

#[test]
fn the_binary_refuses_a_bad_tile_and_names_it() {
    let f = fixture();
    let out = Command::new(env!("CARGO_BIN_EXE_tidemark"))
        .args(["predict"])
        .arg(f.out.join("model.json"))
        .arg(&f.project)
        .args(["--out"])
        .arg(f.root.join("bad-tile"))
        .args(["--tile", "4/3"])
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("--tile expects i/N"), "{err}");
}
