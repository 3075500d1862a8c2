//! Probe of the area of applicability on generated fields with ground no well samples.
//!
//! For each seed: generate the default synthetic field with the well-free lobe and (unless
//! `--no-gas-cap`) the drained culmination (kept in a cache folder and reused), load it as a
//! project, extract the training rows, weigh the features by permutation importance as the main
//! job does, fit the row check (`Applicability` with the main job's range tolerance, one row per
//! node and step) and the ground check (`Ground`, one history per location), and assess every node
//! of every step. Prints, pooled over steps, for the row check alone, the ground check alone and
//! both (the area the main job writes), per region (`truth/masks/<region>.tif`: lobe, gas_cap):
//! recall (share of the region's nodes flagged) / precision (flagged nodes in the region over
//! those plus flagged nodes outside every region), and the share of nodes within one well spacing
//! of a well that lie inside the area; then the same for other range tolerances and per step.
//! `--diag` adds, per region and for other ground, quantiles of the distance to wells (in
//! spacings), of the history dissimilarity and of the row DI, and per attribute and step the
//! share of nodes outside the wells' range and their mean standardised value.
//!
//! With `--demo FOLDER` (a `tidemark synth` project, e.g. demo-data) it also reports the swept
//! cores next to injectors: nodes within one well spacing of an injector whose true dSw gain
//! exceeds 0.1, the share of them flagged and why (reason codes).
//!
//! Run: `cargo run --release --example applicability_probe -- [SEEDS...] [--wells N]
//! [--no-gas-cap] [--diag] [--cache FOLDER] [--demo FOLDER]` (default seeds 1 to 5, 45 wells,
//! cache target/applicability_probe).
use ndarray::{Array2, Axis};
use std::path::{Path, PathBuf};
use tidemark::applicability::{
    self, Applicability, Ground, REASON_BOTH, REASON_INSIDE, REASON_RANGE, REASON_UNLIKE,
};
use tidemark::calibrate::{FoldMethod, folds};
use tidemark::ensemble::ForestSettings;
use tidemark::io::geotiff;
use tidemark::project::{self, Survey};
use tidemark::sample::{self, TrainingSet};
use tidemark::synth::{SynthModel, SynthRecord, SynthSettings, WellKind, generate, write_project};

/// A loaded project with its training rows.
struct Loaded {
    survey: Survey,
    ts: TrainingSet,
}

fn load(dir: &Path) -> Loaded {
    let survey = project::load_survey(&dir.join("project.toml")).expect("load the project");
    let (ts, _) = sample::at_wells(&survey);
    Loaded { survey, ts }
}

/// Mean permutation importance over the targets, as the main job computes it.
fn importance(l: &Loaded) -> Vec<f64> {
    let ts = &l.ts;
    let p = ts.x.ncols();
    let nt = ts.target_names.len();
    let mut sum = vec![0.0; p];
    for t in 0..nt {
        let rows: Vec<usize> = (0..ts.n_rows())
            .filter(|&r| ts.y[[r, t]].is_finite())
            .collect();
        let x = ts.x.select(Axis(0), &rows);
        let y = ts.y.select(Axis(0), &rows).select(Axis(1), &[t]);
        let w: Vec<f64> = rows.iter().map(|&r| ts.weight[r]).collect();
        let fs = ForestSettings {
            n_trees: l.survey.project.model.trees,
            seed: l.survey.project.model.seed,
            ..ForestSettings::default()
        };
        let forest = fs.fit(x.view(), y.view(), Some(&w)).expect("forest");
        let imp = forest.permutation_importance(x.view(), y.view(), 3, fs.seed ^ 0x5eed);
        let clean: Vec<f64> = imp.iter().map(|v| v.max(0.0)).collect();
        let total: f64 = clean.iter().sum();
        for c in 0..p {
            sum[c] += if total > 0.0 { clean[c] / total } else { 0.0 };
        }
    }
    sum.iter().map(|s| s / nt as f64).collect()
}

/// Both checks fitted on a project, and the per-step reason codes of every node.
struct Checked {
    /// `codes_rows[step][node]`: the row check alone.
    codes_rows: Vec<Vec<u8>>,
    /// `codes_both[step][node]`: rows and ground.
    codes_both: Vec<Vec<u8>>,
    /// Outside the range widened by 5 % / 10 % / 20 % of the range on each side, per step and node.
    range_margin: Vec<[bool; 3]>,
    /// Ground flag per node.
    ground: Vec<bool>,
    /// Distance to the nearest well, in spacings, per node.
    distance: Vec<f64>,
    /// History dissimilarity per node.
    history: Vec<f64>,
    /// Row DI per step and node.
    row_di: Vec<Vec<f64>>,
    /// Standardised well histories (wells x columns) and node histories (nodes x columns).
    well_hist: Array2<f64>,
    node_hist: Array2<f64>,
    spacing: f64,
    n_wells: usize,
    row_threshold: f64,
    ground_threshold: f64,
}

fn check(l: &Loaded) -> Checked {
    let ts = &l.ts;
    let seed = l.survey.project.model.seed;
    let c = &l.survey.project.calibration;
    let method = match c.fold_method {
        project::FoldMethod::Wells => FoldMethod::Wells,
        project::FoldMethod::Blocks => FoldMethod::Blocks,
        project::FoldMethod::OneWell => FoldMethod::OneWell,
    };
    let fold = folds::assign(&ts.group, &ts.xy, method, c.folds, seed);
    let p = ts.x.ncols();
    let imp = importance(l);
    // The row check as the main job fits it: the range check with its tolerance.
    let aoa = Applicability::fit(&ts.feature_names, ts.x.view(), &imp, &fold, &vec![true; p])
        .expect("fit the area of applicability")
        .with_range_margin(applicability::RANGE_MARGIN);
    // one position, history and fold per well (its first row)
    let mut wells_xy: Vec<[f64; 2]> = Vec::new();
    let mut well_fold = Vec::new();
    for g in 0..ts.n_wells() {
        if let Some(r) = (0..ts.n_rows()).find(|&r| ts.group[r] == g) {
            wells_xy.push(ts.xy[r]);
            well_fold.push(fold[r]);
        }
    }
    let grid = &l.survey.project.grid;
    let rows: Vec<Vec<f64>> = wells_xy
        .iter()
        .map(|w| applicability::history_at(&l.survey.maps, grid, w[0], w[1]))
        .collect();
    let q = rows.first().map_or(0, Vec::len);
    let hist = Array2::from_shape_vec((rows.len(), q), rows.concat()).expect("histories");
    let ground = Ground::fit(&wells_xy, hist.view(), &well_fold).expect("fit the ground check");
    let nodes: Vec<[f64; 2]> = grid
        .node_coordinates()
        .iter()
        .map(|&(x, y)| [x, y])
        .collect();
    let g = ground.assess(
        &nodes,
        applicability::node_histories(&l.survey.maps, grid.len()).view(),
    );
    let mut codes_rows = Vec::new();
    let mut codes_both = Vec::new();
    let mut row_di = Vec::new();
    let mut range_margin = Vec::new();
    let node_hist = applicability::node_histories(&l.survey.maps, grid.len());
    for step in 0..l.survey.maps.len() {
        let a = aoa.assess(sample::node_features(&l.survey, step).view());
        row_di.push(a.di.clone());
        let xf = sample::node_features(&l.survey, step);
        for r in 0..xf.nrows() {
            let mut o = [false; 3];
            for (k, m) in [0.05, 0.1, 0.2].iter().enumerate() {
                o[k] = (0..p).any(|c| {
                    // widths beyond the plain range (the run's tolerance is 10 %)
                    let w = m * (aoa.max[c] - aoa.min[c]);
                    let v = xf[[r, c]];
                    v < aoa.min[c] - w || v > aoa.max[c] + w
                });
            }
            range_margin.push(o);
        }
        codes_rows.push(aoa.reasons(&a, None));
        let flags: Vec<u8> = g.unlike.iter().map(|&u| u8::from(u)).collect();
        codes_both.push(aoa.reasons(&a, Some(&flags)));
    }
    Checked {
        codes_rows,
        codes_both,
        ground: g.unlike,
        distance: g.distance,
        history: g.dissimilarity,
        row_di,
        range_margin,
        well_hist: hist,
        node_hist,
        spacing: ground.spacing,
        n_wells: wells_xy.len(),
        row_threshold: aoa.threshold,
        ground_threshold: ground.threshold,
    }
}

/// Recall, precision and near-well inside share of a flag rule `flag(step, node)`, pooled over
/// steps, for each region: recall is the share of the region's nodes flagged; precision the share
/// of flagged nodes that lie in the region among those in the region or outside every region (a
/// flag in the other region counts neither for nor against); `all` pools the regions.
fn rates(
    c: &Checked,
    regions: &[(String, Vec<bool>)],
    steps: usize,
    flag: &dyn Fn(usize, usize) -> bool,
) -> String {
    let n = c.distance.len();
    let in_any = |i: usize| regions.iter().any(|r| r.1[i]);
    let (mut fp, mut near, mut near_in) = (0usize, 0usize, 0usize);
    let mut tp = vec![0usize; regions.len()];
    let mut size = vec![0usize; regions.len()];
    for s in 0..steps {
        for i in 0..n {
            let f = flag(s, i);
            for (k, r) in regions.iter().enumerate() {
                if r.1[i] {
                    size[k] += 1;
                    tp[k] += usize::from(f);
                }
            }
            if !in_any(i) {
                fp += usize::from(f);
            }
            if c.distance[i] <= 1.0 {
                near += 1;
                near_in += usize::from(!f);
            }
        }
    }
    let mut out = String::new();
    for (k, r) in regions.iter().enumerate() {
        out.push_str(&format!(
            "{} {:.2}/{:.2}  ",
            r.0,
            tp[k] as f64 / size[k].max(1) as f64,
            tp[k] as f64 / (tp[k] + fp).max(1) as f64
        ));
    }
    let (ta, sa): (usize, usize) = (tp.iter().sum(), size.iter().sum());
    out.push_str(&format!(
        "all {:.2}/{:.2}  near-well inside {:.3}",
        ta as f64 / sa.max(1) as f64,
        ta as f64 / (ta + fp).max(1) as f64,
        near_in as f64 / near.max(1) as f64
    ));
    out
}

fn seed_report(seed: u64, wells: usize, cache: &Path, gas_cap: bool, show_diag: bool) {
    let settings = SynthSettings {
        seed,
        wells,
        gas_cap,
        ..SynthSettings::default()
    };
    let dir = cache.join(format!(
        "seed-{seed}-wells-{wells}{}",
        if gas_cap { "-gas-cap" } else { "" }
    ));
    if !dir.join("project.toml").exists() {
        let f = generate(&settings).expect("generate the field");
        write_project(&f, &settings, &dir).expect("write the field");
    }
    let l = load(&dir);
    let model = SynthModel::build(&settings).expect("synthetic model");
    // The regions as `truth/masks/<region>.tif` holds them (weight >= 0.5).
    let regions: Vec<(String, Vec<bool>)> = model
        .reservoir
        .masks()
        .into_iter()
        .map(|(name, m)| (name, m.iter().map(|&v| v == 1.0).collect()))
        .collect();
    let c = check(&l);
    let steps = l.survey.maps.len();
    println!(
        "seed {seed}: {} wells, spacing {:.0} m, row threshold {:.3}, ground threshold {:.3}; \
         recall/precision per region",
        c.n_wells, c.spacing, c.row_threshold, c.ground_threshold
    );
    println!(
        "  rows (DI + range)   {}",
        rates(&c, &regions, steps, &|s, i| c.codes_rows[s][i]
            != REASON_INSIDE)
    );
    println!(
        "  ground              {}",
        rates(&c, &regions, steps, &|_, i| c.ground[i])
    );
    println!(
        "  rows + ground       {}",
        rates(&c, &regions, steps, &|s, i| c.codes_both[s][i]
            != REASON_INSIDE)
    );
    println!(
        "  ground + DI only    {}",
        rates(&c, &regions, steps, &|s, i| c.ground[i]
            || c.codes_rows[s][i] & 1 == 1)
    );
    println!(
        "  ground + range only {}",
        rates(&c, &regions, steps, &|s, i| c.ground[i]
            || c.codes_rows[s][i] & 2 == 2)
    );
    let nn = c.distance.len();
    for (k, m) in ["5%", "10%", "20%"].iter().enumerate() {
        println!(
            "  ground+DI+range{m:3} {}",
            rates(&c, &regions, steps, &|s, i| c.ground[i]
                || c.codes_rows[s][i] & 1 == 1
                || c.range_margin[s * nn + i][k])
        );
    }
    if show_diag {
        diag(&c, &regions, &l.survey.project.attribute_names);
    }
    for s in 0..steps {
        println!(
            "    step {s} (rows + ground) {}",
            rates(&c, &regions, 1, &|_, i| c.codes_both[s][i] != REASON_INSIDE)
        );
    }
}

fn quant(mut v: Vec<f64>) -> String {
    v.retain(|x| x.is_finite());
    v.sort_by(f64::total_cmp);
    if v.is_empty() {
        return "-".into();
    }
    let q = |p: f64| v[((v.len() - 1) as f64 * p).round() as usize];
    format!("{:.2}/{:.2}/{:.2}", q(0.1), q(0.5), q(0.9))
}

/// Diagnostics: per group of nodes, quantiles of distance, history DI and row DI, and per
/// history column the share outside the wells' range.
fn diag(c: &Checked, regions: &[(String, Vec<bool>)], names: &[String]) {
    let n = c.distance.len();
    let in_any = |i: usize| regions.iter().any(|r| r.1[i]);
    let mut groups: Vec<(String, Vec<usize>)> = regions
        .iter()
        .map(|r| (r.0.clone(), (0..n).filter(|&i| r.1[i]).collect()))
        .collect();
    groups.push((
        "other g>1.5".into(),
        (0..n)
            .filter(|&i| !in_any(i) && c.distance[i] > 1.5)
            .collect(),
    ));
    groups.push((
        "other g<=1".into(),
        (0..n)
            .filter(|&i| !in_any(i) && c.distance[i] <= 1.0)
            .collect(),
    ));
    let q = c.well_hist.ncols();
    let lo: Vec<f64> = (0..q)
        .map(|k| {
            c.well_hist
                .column(k)
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    let hi: Vec<f64> = (0..q)
        .map(|k| {
            c.well_hist
                .column(k)
                .iter()
                .copied()
                .fold(f64::NEG_INFINITY, f64::max)
        })
        .collect();
    let mean: Vec<f64> = (0..q)
        .map(|k| c.well_hist.column(k).mean().unwrap())
        .collect();
    let sd: Vec<f64> = (0..q).map(|k| c.well_hist.column(k).std(1.0)).collect();
    for (name, idx) in &groups {
        let g: Vec<f64> = idx.iter().map(|&i| c.distance[i]).collect();
        let h: Vec<f64> = idx.iter().map(|&i| c.history[i]).collect();
        let r: Vec<f64> = idx
            .iter()
            .map(|&i| {
                c.row_di
                    .iter()
                    .map(|d| d[i])
                    .fold(f64::NEG_INFINITY, f64::max)
            })
            .collect();
        println!(
            "  {name:12} n {:5}  g {}  h {}  max row DI {}",
            idx.len(),
            quant(g),
            quant(h),
            quant(r)
        );
        let mut line = String::from("     out/meanz:");
        for k in 0..q {
            let out = idx
                .iter()
                .filter(|&&i| {
                    let v = c.node_hist[[i, k]];
                    v < lo[k] || v > hi[k]
                })
                .count() as f64
                / idx.len().max(1) as f64;
            let mz = idx
                .iter()
                .map(|&i| (c.node_hist[[i, k]] - mean[k]) / sd[k])
                .sum::<f64>()
                / idx.len().max(1) as f64;
            line.push_str(&format!(
                " {}:{:.2}/{:+.1}",
                names[k % names.len()],
                out,
                mz
            ));
            if k % names.len() == names.len() - 1 {
                println!("{line}");
                line = String::from("               ");
            }
        }
    }
}

fn demo_report(dir: &Path) {
    let l = load(dir);
    let record = SynthRecord::read(&dir.join("synth.json")).expect("synth.json");
    let c = check(&l);
    let grid = &l.survey.project.grid;
    let nodes = grid.node_coordinates();
    let injectors: Vec<(f64, f64)> = record
        .wells
        .iter()
        .filter(|w| w.kind == WellKind::Injector)
        .map(|w| (w.x, w.y))
        .collect();
    let near_injector: Vec<bool> = nodes
        .iter()
        .map(|&(x, y)| {
            injectors
                .iter()
                .any(|w| ((w.0 - x).powi(2) + (w.1 - y).powi(2)).sqrt() <= c.spacing)
        })
        .collect();
    println!(
        "demo {}: {} wells, spacing {:.0} m; swept cores next to injectors (dSw gain > 0.1 within one spacing):",
        dir.display(),
        c.n_wells,
        c.spacing
    );
    for (s, step) in l.survey.project.steps.iter().enumerate() {
        let dsw = geotiff::read_on_grid(&dir.join(format!("truth/{}/dSw.tif", step.name)), grid)
            .expect("truth dSw");
        let core: Vec<usize> = (0..grid.len())
            .filter(|&i| near_injector[i] && dsw[i] > 0.1)
            .collect();
        let count = |codes: &[u8], code: u8| core.iter().filter(|&&i| codes[i] == code).count();
        let show = |codes: &[u8]| {
            format!(
                "flagged {:.3} (unlike {}, range {}, both {})",
                (core.len() - count(codes, REASON_INSIDE)) as f64 / core.len().max(1) as f64,
                count(codes, REASON_UNLIKE),
                count(codes, REASON_RANGE),
                count(codes, REASON_BOTH)
            )
        };
        println!(
            "  {}: {} nodes; rows: {}; rows + ground: {}",
            step.name,
            core.len(),
            show(&c.codes_rows[s]),
            show(&c.codes_both[s])
        );
    }
}

fn main() {
    let mut seeds: Vec<u64> = Vec::new();
    let mut wells = SynthSettings::default().wells;
    let mut cache = PathBuf::from("target/applicability_probe");
    let mut demo: Option<PathBuf> = None;
    let mut gas_cap = true;
    let mut show_diag = false;
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--cache" => cache = PathBuf::from(args.next().expect("--cache FOLDER")),
            "--demo" => demo = Some(PathBuf::from(args.next().expect("--demo FOLDER"))),
            "--no-gas-cap" => gas_cap = false,
            "--diag" => show_diag = true,
            "--wells" => wells = args.next().and_then(|v| v.parse().ok()).expect("--wells N"),
            s => seeds.push(s.parse().expect("a seed, --wells N, --cache or --demo")),
        }
    }
    if seeds.is_empty() && demo.is_none() {
        seeds = vec![1, 2, 3, 4, 5];
    }
    for seed in seeds {
        seed_report(seed, wells, &cache, gas_cap, show_diag);
    }
    if let Some(d) = demo {
        demo_report(&d);
    }
}
