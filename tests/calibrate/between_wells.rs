//! The uncertainty between the wells, judged at every node of a small generated field with both
//! kinds of unlike ground (the well-free lobe and the undrilled, expanding gas cap), where the
//! truth is known.
//!
//! Two things are asserted:
//! - **stability**: every training attribute multiplied by `1 + 1e-6 u` (`u` uniform in
//!   `[-1, 1]`) moves the band's coverage at the nodes by at most 0.01, each target and node set;
//! - **the figures, in the safe direction**: the band is not over-confident where it matters
//!   (nodes that changed, the top and bottom deciles of the truth), the "no change" atom keeps
//!   the P50 of saturation targets near zero where nothing changed, and no unlike region is
//!   silently missed more than the bound below.
//!
//! The two-sided goals (coverage 0.80 +- 0.05 at nodes that changed; silent misses <= 0.10 in
//! each region; interval score 5 % better than the uncalibrated quantile forest) are measured on
//! larger fields and several seeds by `examples/calib_bench.rs`; the figures reached are in
//! DEVELOPERS.md. Bounds here sit on the safe side of what that bench measured, so that a change
//! that makes bands over-confident fails, and a change that only makes them wider does not.

use std::path::{Path, PathBuf};
use std::sync::OnceLock;
use tidemark::pipeline::fit;
use tidemark::pipeline::outputs::{Formats, Writer, write_step_maps};
use tidemark::pipeline::run::{self, RunOptions};
use tidemark::pipeline::score::{BandFigures, SetFigures, TruthScore, score_with};
use tidemark::pipeline::stages::Stages;
use tidemark::sample;
use tidemark::synth::{SynthSettings, generate, write_project};

/// The generated field, its plain run's scores (results in `dir/../results`) and the perturbed
/// run's; shared with `pipeline::smoothing`, which runs the same field with smoothing on.
pub(crate) struct Field {
    pub(crate) manifest: PathBuf,
    pub(crate) dir: PathBuf,
    pub(crate) plain: TruthScore,
    perturbed: TruthScore,
}

/// A 90 x 72 field, 40 wells, 3 steps, with the lobe and the gas cap; run, scored, then fitted
/// again on perturbed attributes and scored again.
pub(crate) fn field() -> &'static Field {
    static F: OnceLock<Field> = OnceLock::new();
    F.get_or_init(|| {
        let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("between-wells");
        let dir = root.join("field");
        for d in [&dir, &root.join("results"), &root.join("perturbed")] {
            if d.exists() {
                std::fs::remove_dir_all(d).unwrap();
            }
        }
        let settings = SynthSettings {
            seed: 5,
            nx: 90,
            ny: 72,
            wells: 40,
            steps: 3,
            gas_cap: true,
            ..SynthSettings::default()
        };
        let synth = generate(&settings).expect("generate");
        write_project(&synth, &settings, &dir).expect("write the field");
        let manifest = dir.join("project.toml");
        let results = root.join("results");
        let opts = RunOptions::maps_only(&manifest, &results);
        run::run(&opts).expect("run");
        let (plain, _) = score_with(&results, &dir, Some(&manifest)).expect("score");
        let perturbed = perturbed_run(&manifest, &dir, &root.join("perturbed"), 1e-6);
        Field {
            manifest,
            dir,
            plain,
            perturbed,
        }
    })
}

/// Fits on the training attributes perturbed by a relative `eps`, maps the unperturbed nodes and
/// scores them.
fn perturbed_run(manifest: &Path, field: &Path, out: &Path, eps: f64) -> TruthScore {
    let survey = run::load(manifest).expect("load");
    let project = &survey.project;
    let (mut ts, _) = sample::at_wells(&survey);
    ts.perturb_attributes(eps, 0x9e37_79b9);
    let (model, _) = fit::fit_model(&survey, &ts, project.model.seed, &mut Stages::new(true))
        .expect("fit on perturbed attributes");
    let formats = Formats {
        geotiff: true,
        xyz: false,
    };
    let mut w = Writer::new(out, &project.input_paths(), formats).expect("writer");
    let node_xy = project.grid.node_coordinates();
    let ground = model
        .ground_flags(&survey, 0..project.grid.len())
        .expect("ground check");
    for (s, step) in project.steps.iter().enumerate() {
        let x = model.node_features(&survey, s);
        let maps = model
            .predict(x.view(), &node_xy, ground.as_deref())
            .expect("predict");
        write_step_maps(&mut w, &model, &project.grid, &step.name, &maps).expect("write maps");
    }
    model.save(&w.root.join("model.json")).expect("save");
    score_with(out, field, Some(manifest)).expect("score").0
}

/// The pooled figures of `set` (kind or region name) for `target`.
fn set<'a>(score: &'a TruthScore, target: &str, set: &str) -> &'a SetFigures {
    score
        .targets
        .iter()
        .find(|t| t.target == target)
        .unwrap_or_else(|| panic!("no target {target}"))
        .pooled_figures
        .iter()
        .find(|s| s.name == set)
        .unwrap_or_else(|| panic!("{target}: no node set {set}"))
}

fn calibrated<'a>(score: &'a TruthScore, target: &str, name: &str) -> &'a BandFigures {
    set(score, target, name)
        .calibrated
        .as_ref()
        .unwrap_or_else(|| panic!("{target} {name}: no calibrated figures"))
}

#[test]
fn the_field_has_both_unlike_regions_and_unchanged_nodes() {
    let f = field();
    let names: Vec<&str> = f.plain.regions.iter().map(|r| r.name.as_str()).collect();
    assert_eq!(names, ["gas_cap", "lobe"], "{:?}", f.dir);
    for r in &f.plain.regions {
        assert!(r.nodes > 100, "{}: {} nodes", r.name, r.nodes);
    }
    for t in ["dSw", "dSg"] {
        assert!(set(&f.plain, t, "unchanged").nodes > 1000, "{t}");
    }
    assert!(f.manifest.exists());
}

#[test]
fn a_relative_1e6_perturbation_of_the_attributes_moves_node_coverage_by_at_most_0_01() {
    let f = field();
    let mut moved = Vec::new();
    for t in ["dP", "dSw", "dSg"] {
        for name in ["all", "changed", "gas_cap", "lobe"] {
            let a = calibrated(&f.plain, t, name);
            let b = calibrated(&f.perturbed, t, name);
            let d = (a.coverage - b.coverage).abs();
            let dw = (a.mean_width - b.mean_width).abs() / a.mean_width.max(1e-12);
            eprintln!(
                "{t} {name}: coverage moved {d:.4}, mean width {:.3} %",
                100.0 * dw
            );
            if d > 0.01 {
                moved.push(format!(
                    "{t} {name}: coverage {:.4} -> {:.4}",
                    a.coverage, b.coverage
                ));
            }
        }
    }
    assert!(moved.is_empty(), "{moved:#?}");
}

#[test]
fn bands_are_not_over_confident_where_the_change_matters() {
    let f = field();
    let mut misses = Vec::new();
    for t in ["dP", "dSw", "dSg"] {
        // Goal 0.80 +- 0.05 at nodes that changed; the safe side is "not below 0.75".
        let c = calibrated(&f.plain, t, "changed").coverage;
        eprintln!("{t}: coverage at changed nodes {c:.3}");
        misses.extend((c < 0.75).then(|| format!("{t}: changed-node coverage {c:.3} < 0.75")));
        // Goal >= 0.75 in the bottom and top deciles of the truth. Not reached everywhere:
        // on this field dP's top decile is covered 0.730 (the largest depletion is
        // under-predicted, and the end-bias correction is not kept), so the bound is 0.70 and
        // the shortfall is reported in DEVELOPERS.md, not hidden.
        for d in ["bottom_decile", "top_decile"] {
            let c = calibrated(&f.plain, t, d).coverage;
            eprintln!("{t}: {d} coverage {c:.3}");
            misses.extend((c < 0.70).then(|| format!("{t}: {d} coverage {c:.3} < 0.70")));
        }
    }
    assert!(misses.is_empty(), "{misses:#?}");
}

#[test]
fn unlike_regions_are_not_silently_missed_more_than_measured() {
    // Silent misses (truth outside the band at a node not flagged as outside the area of
    // applicability), share of the region's nodes. The goal is <= 0.10; calib_bench measured
    // 0.11-0.20 in the lobe and 0.11-0.54 in the gas cap on 120 x 100 fields (seeds 1-3), so the
    // bound here is 0.25 in the lobe and 0.45 in the gas cap; a method change that raises them
    // past that fails. The gas-cap bound was 0.40 until the range check gained its tolerance
    // (`applicability::RANGE_MARGIN`), a deliberate trade documented there: dSw 0.317 -> 0.409
    // and dSg 0.339 -> 0.385 here, for a lobe flag precision of 0.65 instead of 0.49.
    let f = field();
    let mut misses = Vec::new();
    for t in ["dP", "dSw", "dSg"] {
        for (region, bound) in [("lobe", 0.25), ("gas_cap", 0.45)] {
            let s = calibrated(&f.plain, t, region).silent_misses;
            eprintln!("{t} {region}: silent misses {s:.3}");
            misses.extend((s > bound).then(|| format!("{t} {region}: {s:.3} > {bound}")));
        }
    }
    assert!(misses.is_empty(), "{misses:#?}");
}

#[test]
fn the_no_change_atom_keeps_the_p50_near_zero_where_nothing_changed() {
    // Goal +-0.01 for saturation targets. With the nodes' share of change (prior shift of the
    // change probability) the bench's mean over seeds 1-5 is 0.009 for dSw (two seeds of five
    // above 0.01: 0.017, 0.013) and 0.006 for dSg; this field measured 0.016 and 0.0002.
    // Asserted: the calibrated P50 there is no farther from 0 than the uncalibrated forest's
    // median, and within 0.03 (0.05 before the prior shift).
    let f = field();
    for t in ["dSw", "dSg"] {
        let s = set(&f.plain, t, "unchanged");
        let ours = s.calibrated.as_ref().unwrap().mean_p50_unchanged;
        let forest = s.forest.as_ref().unwrap().mean_p50_unchanged;
        eprintln!("{t}: mean P50 at unchanged nodes {ours:.4} (forest {forest:.4})");
        assert!(
            ours.abs() <= forest.abs() + 1e-9,
            "{t}: {ours} vs forest {forest}"
        );
        assert!(ours.abs() <= 0.03, "{t}: {ours}");
    }
}
