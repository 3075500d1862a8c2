//! Probe of the area of applicability on generated fields with the well-free lobe.
//!
//! For each seed: generate the default synthetic field (kept in a cache folder and reused), load it
//! as a project, extract the training rows, weigh the features by permutation importance as the
//! main job does, fit the area of applicability (`Applicability`, one row per node and step) and
//! the ground check (`Ground`, one history per location), and assess every node of every step.
//! Prints, per seed and pooled over steps, for the row check alone, the ground check alone and
//! both: recall (share of lobe nodes flagged), precision (share of flagged nodes inside the lobe)
//! and the share of nodes within one well spacing of a well that lie inside the area. The lobe is
//! the synthetic model's lobe weight >= 0.5 (the same as `truth/masks/lobe.tif` where a project
//! has it).
//!
//! With `--demo FOLDER` (a `tidemark synth` project, e.g. demo-data) it also reports the swept
//! cores next to injectors: nodes within one well spacing of an injector whose true dSw gain
//! exceeds 0.1, the share of them flagged and why (reason codes).
//!
//! Run: `cargo run --release --example applicability_probe -- [SEEDS...] [--wells N]
//! [--cache FOLDER] [--demo FOLDER]` (default seeds 1 2 3, 45 wells, cache
//! target/applicability_probe).
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
    /// Ground flag per node.
    ground: Vec<bool>,
    /// Distance to the nearest well, in spacings, per node.
    distance: Vec<f64>,
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
    let aoa = Applicability::fit(&ts.feature_names, ts.x.view(), &imp, &fold, &vec![true; p])
        .expect("fit the area of applicability");
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
    for step in 0..l.survey.maps.len() {
        let a = aoa.assess(sample::node_features(&l.survey, step).view());
        codes_rows.push(aoa.reasons(&a, None));
        codes_both.push(aoa.reasons(&a, Some(&g.unlike)));
    }
    Checked {
        codes_rows,
        codes_both,
        ground: g.unlike,
        distance: g.distance,
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

fn seed_report(seed: u64, wells: usize, cache: &Path, gas_cap: bool) {
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
    for s in 0..steps {
        println!(
            "    step {s} (rows + ground) {}",
            rates(&c, &regions, 1, &|_, i| c.codes_both[s][i] != REASON_INSIDE)
        );
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
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--cache" => cache = PathBuf::from(args.next().expect("--cache FOLDER")),
            "--demo" => demo = Some(PathBuf::from(args.next().expect("--demo FOLDER"))),
            "--no-gas-cap" => gas_cap = false,
            "--wells" => wells = args.next().and_then(|v| v.parse().ok()).expect("--wells N"),
            s => seeds.push(s.parse().expect("a seed, --wells N, --cache or --demo")),
        }
    }
    if seeds.is_empty() && demo.is_none() {
        seeds = vec![1, 2, 3, 4, 5];
    }
    for seed in seeds {
        seed_report(seed, wells, &cache, gas_cap);
    }
    if let Some(d) = demo {
        demo_report(&d);
    }
}
