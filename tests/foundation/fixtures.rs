//! Shared fixtures: a tiny valid project on disk, usable by every test area
//! (`crate::foundation::fixtures::tiny_project`).

use std::path::{Path, PathBuf};
use tidemark::grid::Grid;

/// Grid of the tiny project: 6 x 5 nodes, 10 m spacing, node (0,0) at (1000, 2000), unrotated,
/// EPSG 32631.
pub(crate) fn tiny_grid() -> Grid {
    Grid {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 10.0,
        dy: 10.0,
        nx: 6,
        ny: 5,
        rotation: 0.0,
        epsg: Some(32631),
        null_value: -999.25,
    }
}

/// Attribute names of the tiny project, in manifest order.
pub(crate) const TINY_ATTRIBUTES: [&str; 2] = ["near_amp", "time_shift"];
/// Step names of the tiny project.
pub(crate) const TINY_STEPS: [&str; 2] = ["m1", "m2"];
/// Number of wells in the tiny project.
pub(crate) const TINY_WELLS: usize = 8;

/// Value of attribute `a` of step `s` at node `(i, j)` in the tiny project: linear in `i` and `j`,
/// so bilinear interpolation reproduces it exactly anywhere inside the grid.
pub(crate) fn tiny_value(s: usize, a: usize, i: f64, j: f64) -> f64 {
    match a {
        0 => 0.1 * i + 0.01 * j + s as f64,
        _ => -0.5 * i + 0.2 * j + 2.0 * s as f64,
    }
}

/// The map of attribute `a` of step `s` in the tiny project.
pub(crate) fn tiny_map(s: usize, a: usize) -> Vec<f64> {
    let g = tiny_grid();
    let mut v = vec![0.0; g.len()];
    for j in 0..g.ny {
        for i in 0..g.nx {
            v[g.index(i, j)] = tiny_value(s, a, i as f64, j as f64);
        }
    }
    v
}

/// Fractional node position `(fi, fj)` of tiny-project well `w` (inside the grid, off the nodes).
pub(crate) fn tiny_well_ij(w: usize, s: usize) -> (f64, f64) {
    let fi = 0.5 + (w % 4) as f64 * 1.2 + 0.1 * s as f64;
    let fj = 0.4 + (w / 4) as f64 * 2.5;
    (fi, fj)
}

/// `dSw` of tiny-project well `w` in step `s`.
pub(crate) fn tiny_dsw(w: usize, s: usize) -> f64 {
    0.05 * w as f64 - 0.1 + 0.1 * s as f64
}

/// `dP` (MPa) of tiny-project well `w` in step `s`; not measured (empty cell) for well 0 in step m2.
pub(crate) fn tiny_dp(w: usize, s: usize) -> Option<f64> {
    (!(w == 0 && s == 1)).then(|| -1.0 - 0.5 * w as f64 - s as f64)
}

/// Writes a small valid project into `dir` and returns the manifest path.
///
/// Layout: `project.toml`, `wells.csv` (8 wells x 2 steps, targets dSw and dP, with a `weight`
/// column), `maps/<step>/near_amp.tif` (GeoTIFF) and `maps/<step>/time_shift.xyz` (XYZ text), on
/// [`tiny_grid`]; thresholds `swept` (dSw above 0.1) and `depleted` (dP below -2); calibration with
/// 4 folds. Values follow [`tiny_value`], [`tiny_dsw`] and [`tiny_dp`].
pub(crate) fn tiny_project(dir: &Path) -> PathBuf {
    let g = tiny_grid();
    for (s, step) in TINY_STEPS.iter().enumerate() {
        let folder = dir.join("maps").join(step);
        std::fs::create_dir_all(&folder).expect("create map folder");
        tidemark::io::geotiff::write(&folder.join("near_amp.tif"), &g, &tiny_map(s, 0), None)
            .expect("write GeoTIFF");
        tidemark::io::xyz::write(&folder.join("time_shift.xyz"), &g, &tiny_map(s, 1))
            .expect("write XYZ");
    }
    let mut csv = String::from("well,x,y,step,dSw,dP,weight\n");
    for w in 0..TINY_WELLS {
        for (s, step) in TINY_STEPS.iter().enumerate() {
            let (fi, fj) = tiny_well_ij(w, s);
            let (x, y) = g.fractional_xy(fi, fj);
            let dp = tiny_dp(w, s).map_or(String::new(), |v| v.to_string());
            csv.push_str(&format!("W{w},{x},{y},{step},{},{dp},1\n", tiny_dsw(w, s)));
        }
    }
    std::fs::write(dir.join("wells.csv"), csv).expect("write wells.csv");
    let manifest = dir.join("project.toml");
    std::fs::write(&manifest, TINY_MANIFEST).expect("write project.toml");
    manifest
}

/// The tiny project's manifest.
pub(crate) const TINY_MANIFEST: &str = r#"[project]
name = "Skerrow Bank tiny"

[grid]
origin_x = 1000.0
origin_y = 2000.0
dx = 10.0
dy = 10.0
nx = 6
ny = 5
epsg = 32631

[[step]]
name = "m1"
base_date = "2019-06-01"
monitor_date = "2021-06-01"
[step.attributes]
near_amp = "maps/m1/near_amp.tif"
time_shift = "maps/m1/time_shift.xyz"

[[step]]
name = "m2"
base_date = "2019-06-01"
monitor_date = "2023-06-01"
[step.attributes]
near_amp = "maps/m2/near_amp.tif"
time_shift = "maps/m2/time_shift.xyz"

[wells]
file = "wells.csv"

[[target]]
name = "dSw"
unit = "fraction"
min = -1.0
max = 1.0

[[target]]
name = "dP"
unit = "MPa"
min = -50.0
max = 50.0

[[threshold]]
target = "dSw"
direction = "above"
value = 0.1
label = "swept"

[[threshold]]
target = "dP"
direction = "below"
value = -2.0
label = "depleted"

[calibration]
folds = 4
min_wells_per_bin = 3
"#;

/// Every file under `dir`, relative, sorted (to show that nothing was left behind).
pub(crate) fn list_files(dir: &Path) -> Vec<PathBuf> {
    fn walk(base: &Path, dir: &Path, out: &mut Vec<PathBuf>) {
        if let Ok(rd) = std::fs::read_dir(dir) {
            for e in rd.flatten() {
                let p = e.path();
                if p.is_dir() {
                    walk(base, &p, out);
                } else {
                    out.push(p.strip_prefix(base).unwrap_or(&p).to_path_buf());
                }
            }
        }
    }
    let mut out = Vec::new();
    walk(dir, dir, &mut out);
    out.sort();
    out
}
