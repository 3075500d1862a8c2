//! Field totals on a real small run: node distributions against the written maps, realizations
//! against the node distributions and the exceedance maps, conditioning at the wells, thread
//! determinism, the truth totals of `score`, and manifest errors.

use super::end_to_end::fixture;
use std::sync::OnceLock;
use tidemark::pipeline::model::{SavedModel, StepMaps};
use tidemark::pipeline::nodes::{CalibratedNodes, well_scores};
use tidemark::pipeline::totals::{self, Computed, TotalsOptions, csv_text};
use tidemark::project::{Direction, Survey, load_survey};
use tidemark::sample::{self, TrainingSet};
use tidemark::spatial::normal;
use tidemark::spatial::totals::{NodeDistribution, TotalRule};

struct Loaded {
    survey: Survey,
    ts: TrainingSet,
    model: SavedModel,
    kept: Vec<StepMaps>,
}

/// The fixture's survey, training set, model and every step's maps (as the run predicted them).
fn loaded() -> &'static Loaded {
    static L: OnceLock<Loaded> = OnceLock::new();
    L.get_or_init(|| {
        let f = fixture();
        let survey = load_survey(&f.project).expect("survey");
        let (ts, _) = sample::at_wells(&survey);
        let model = SavedModel::load(&f.out.join("model.json")).expect("model");
        let xy = survey.project.grid.node_coordinates();
        let ground = model
            .ground_flags(&survey, 0..survey.project.grid.len())
            .expect("ground check");
        let kept = (0..survey.project.steps.len())
            .map(|s| {
                let x = model.node_features(&survey, s);
                model
                    .predict(x.view(), &xy, ground.as_deref())
                    .expect("predict")
            })
            .collect();
        Loaded {
            survey,
            ts,
            model,
            kept,
        }
    })
}

fn compute(l: &Loaded, realizations: usize, keep: usize, condition: bool) -> Computed {
    compute_on(&l.survey, l, realizations, keep, condition)
}

/// [`compute`] on `survey` (the fixture's with a changed `[totals]` section).
fn compute_on(
    survey: &Survey,
    l: &Loaded,
    realizations: usize,
    keep: usize,
    condition: bool,
) -> Computed {
    totals::compute(
        survey,
        &l.ts,
        &l.model,
        &l.kept,
        survey.project.model.seed,
        TotalsOptions {
            keep: Some(keep),
            realizations: Some(realizations),
            condition,
        },
    )
    .expect("totals")
    .expect("the generated project has totals")
}

#[test]
fn node_distributions_give_the_written_maps_exactly() {
    let l = loaded();
    let mut checked = 0;
    for (s, maps) in l.kept.iter().enumerate() {
        for (t, cal) in l.model.calibrated.iter().enumerate() {
            let x = sample::node_features_at(&l.survey, s, l.model.width(t));
            let tm = &maps.targets[t];
            let d = CalibratedNodes::new(cal, tm, x.view()).expect("nodes");
            for i in 0..tm.mid.len() {
                let q = [d.quantile(i, 0.1), d.quantile(i, 0.5), d.quantile(i, 0.9)];
                if tm.mid[i].is_nan() {
                    assert!(
                        q.iter().all(|v| v.is_nan()),
                        "node {i}: no data, no distribution"
                    );
                    continue;
                }
                assert_eq!(q[0].to_bits(), tm.lo[i].to_bits(), "P10 at node {i}");
                assert_eq!(q[1].to_bits(), tm.mid[i].to_bits(), "P50 at node {i}");
                assert_eq!(q[2].to_bits(), tm.hi[i].to_bits(), "P90 at node {i}");
                // Monotone between and beyond the knots.
                let mut prev = f64::NEG_INFINITY;
                for k in 1..40 {
                    let v = d.quantile(i, k as f64 / 40.0);
                    assert!(v >= prev, "node {i}: quantile function decreases");
                    prev = v;
                }
                checked += 1;
            }
        }
    }
    assert!(checked > 10_000, "{checked} nodes checked");
}

/// The node distributions built from the conditional part the maps kept (what a run does) are
/// those built by predicting the nodes again, bit for bit, and keeping it leaves the maps as
/// they were.
#[test]
fn node_distributions_from_kept_maps_equal_the_recomputed_ones() {
    let l = loaded();
    let xy = l.survey.project.grid.node_coordinates();
    let ground = l
        .model
        .ground_flags(&l.survey, 0..l.survey.project.grid.len())
        .expect("ground check");
    let all: Vec<usize> = (0..l.model.calibrated.len()).collect();
    let mut kept_parts = 0;
    for (s, plain) in l.kept.iter().enumerate() {
        let x = l.model.node_features(&l.survey, s);
        let maps = l
            .model
            .predict_keeping(x.view(), &xy, ground.as_deref(), &all)
            .expect("predict");
        for (t, cal) in l.model.calibrated.iter().enumerate() {
            let (tm, before) = (&maps.targets[t], &plain.targets[t]);
            for (a, b) in [
                (&tm.lo, &before.lo),
                (&tm.mid, &before.mid),
                (&tm.hi, &before.hi),
            ] {
                assert!(a.iter().zip(b).all(|(p, q)| p.to_bits() == q.to_bits()));
            }
            assert!(before.conditional.is_none());
            assert_eq!(tm.conditional.is_some(), cal.needs_conditional());
            kept_parts += usize::from(tm.conditional.is_some());
            let from_maps = CalibratedNodes::from_maps(cal, tm).expect("kept part");
            let own = l.model.target_table(x.view(), t);
            let recomputed = CalibratedNodes::new(cal, tm, own.view()).expect("nodes");
            // A target without its kept part has no distribution from the maps alone.
            if cal.needs_conditional() {
                assert!(CalibratedNodes::from_maps(cal, before).is_none());
            }
            let levels = [
                1e-6, 0.01, 0.05, 0.1, 0.2, 0.37, 0.5, 0.63, 0.8, 0.9, 0.97, 0.999,
            ];
            for i in (0..tm.mid.len()).step_by(7) {
                for &u in &levels {
                    let (a, b) = (from_maps.quantile(i, u), recomputed.quantile(i, u));
                    assert_eq!(a.to_bits(), b.to_bits(), "target {t} node {i} level {u}");
                }
                let y = tm.mid[i];
                if y.is_finite() {
                    assert_eq!(
                        from_maps.cdf(i, y).to_bits(),
                        recomputed.cdf(i, y).to_bits()
                    );
                }
            }
        }
    }
    // The fixture's hurdle targets (dSw, dSg) keep it at every step.
    assert!(kept_parts >= 2 * l.kept.len(), "{kept_parts} kept parts");
}

/// Share of `values` below `y` and at or below it.
fn shares(values: &[f64], y: f64) -> (f64, f64) {
    let n = values.len() as f64;
    let below = values.iter().filter(|&&v| v < y).count() as f64 / n;
    let at = values.iter().filter(|&&v| v <= y).count() as f64 / n;
    (below, at)
}

#[test]
fn unconditioned_realizations_follow_the_node_bands_and_exceedance_maps() {
    let l = loaded();
    let r = 200;
    let c = compute(l, r, r, false);
    let n = l.survey.project.grid.len();
    let nl = c.layers.len();
    // kept maps are ordered by realization, then layer
    assert_eq!(c.output.kept.len(), r * nl);
    for (li, (step, target)) in c.layers.iter().enumerate() {
        let (s, t) = layer_of(l, step, target);
        let tm = &l.kept[s].targets[t];
        let (mut nodes, mut misses) = (0, 0);
        for i in 0..n {
            if tm.mid[i].is_nan() {
                continue;
            }
            let v: Vec<f64> = (0..r)
                .map(|k| c.output.kept[k * nl + li].values[i])
                .collect();
            for (u, y) in [(0.1, tm.lo[i]), (0.5, tm.mid[i]), (0.9, tm.hi[i])] {
                // Binomial Monte Carlo error of a share over r draws; 3.3 sd is a two-sided 0.1 %.
                let sd = (u * (1.0 - u) / r as f64).sqrt();
                let (below, at) = shares(&v, y);
                if below - 3.3 * sd > u || at + 3.3 * sd < u {
                    misses += 1;
                }
                nodes += 1;
            }
        }
        let rate = misses as f64 / nodes as f64;
        // 0.1 % expected by chance; allow for the nodes' dependence (they share one field).
        assert!(
            rate < 0.01,
            "{step} {target}: {misses} of {nodes} node quantiles off"
        );
    }
    // The crossing frequency against the exceedance map of the same threshold.
    for q in &c.output.quantities {
        let Some(freq) = &q.mean_indicator else {
            continue;
        };
        let rec = c
            .record
            .quantities
            .iter()
            .find(|x| x.quantity == q.name && x.step == q.step);
        let rec = rec.unwrap();
        let TotalRule::Area {
            threshold,
            direction,
        } = rec.rule
        else {
            unreachable!()
        };
        let s = l.survey.project.step_index(&q.step).unwrap();
        let t = l
            .model
            .targets
            .iter()
            .position(|x| x.name == rec.target)
            .unwrap();
        let th = l
            .model
            .thresholds_of(t)
            .iter()
            .position(|th| th.value == threshold && th.direction == direction)
            .expect("the generated totals use the manifest's thresholds");
        let exceed = &l.kept[s].targets[t].exceed[th];
        let (mut sum_f, mut sum_e, mut k) = (0.0, 0.0, 0.0);
        let (mut nodes, mut misses) = (0, 0);
        for i in 0..n {
            if exceed[i].is_finite() && freq[i].is_finite() {
                sum_f += freq[i];
                sum_e += exceed[i];
                k += 1.0;
                // Binomial Monte Carlo error of one node's crossing share over r draws; 3.3 sd is
                // a two-sided 0.1 % (half a draw added so that p near 0 or 1 is not judged on
                // a zero sd).
                let p = exceed[i];
                let sd = (p * (1.0 - p) / r as f64).sqrt() + 0.5 / r as f64;
                misses += ((freq[i] - p).abs() > 3.3 * sd) as usize;
                nodes += 1;
            }
        }
        let (mean_f, mean_e) = (sum_f / k, sum_e / k);
        // Monte Carlo error of the mean crossing frequency: the realizations' area fraction
        // varies as a whole (the nodes share one field), so its standard error is the sd of the
        // realizations' totals over sqrt(r), in area fraction.
        let totals = &q.totals;
        let m = totals.iter().sum::<f64>() / totals.len() as f64;
        let var = totals.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (totals.len() - 1) as f64;
        let cell = l.survey.project.grid.dx * l.survey.project.grid.dy * rec.scale;
        let se = var.sqrt() / (r as f64).sqrt() / (cell * k);
        eprintln!(
            "{} {}: mean crossing frequency {mean_f:.4}, mean exceedance {mean_e:.4} (se {se:.4}); {misses} of {nodes} nodes beyond 3.3 sd",
            q.name, q.step
        );
        // One distribution per node (pipeline::nodes): the exceedance map is the node
        // distribution's crossing probability, so the realizations cross as often as the map
        // says, within Monte Carlo error, on average and node by node.
        assert!(
            (mean_f - mean_e).abs() < 3.3 * se + 1e-9,
            "{} {}: {mean_f} vs {mean_e}, se {se}",
            q.name,
            q.step
        );
        let rate = misses as f64 / nodes as f64;
        assert!(
            rate < 0.01,
            "{} {}: {misses} of {nodes} nodes off",
            q.name,
            q.step
        );
    }
}

/// Under both rules that use the measured values (`well_nodes`, the default, and `measured`,
/// by kriging) every realization gives a lone well's measured value at its node, wherever that
/// value lies inside the node's predictive distribution.
#[test]
fn realizations_give_the_measured_value_at_every_well_node() {
    use tidemark::spatial::totals::WellConditioning;
    let l = loaded();
    let c = compute(l, 20, 20, true);
    assert_eq!(c.record.conditioning, "well_nodes");
    measured_values_at_well_nodes(l, &c);
    let mut survey = l.survey.clone();
    survey.project.totals.as_mut().expect("totals").conditioning = WellConditioning::Measured;
    let c = compute_on(&survey, l, 20, 20, true);
    assert_eq!(c.record.conditioning, "measured");
    measured_values_at_well_nodes(l, &c);
}

/// Under the default rule the wells set their own nodes and nothing else: every other node of
/// every kept realization is the unconditioned realization's value, bit for bit.
#[test]
fn well_nodes_move_only_the_well_nodes() {
    let l = loaded();
    let pinned = compute(l, 20, 20, true);
    let free = compute(l, 20, 20, false);
    let grid = &l.survey.project.grid;
    let wells: std::collections::HashSet<usize> =
        l.ts.xy
            .iter()
            .map(|&[x, y]| {
                let (fi, fj) = grid.fractional_ij(x, y);
                fj.round() as usize * grid.nx + fi.round() as usize
            })
            .collect();
    let (mut same, mut moved) = (0usize, 0usize);
    for (a, b) in pinned.output.kept.iter().zip(&free.output.kept) {
        for (i, (va, vb)) in a.values.iter().zip(&b.values).enumerate() {
            if wells.contains(&i) {
                moved += (va.to_bits() != vb.to_bits()) as usize;
            } else {
                assert_eq!(va.to_bits(), vb.to_bits(), "node {i} moved");
                same += 1;
            }
        }
    }
    assert!(
        same > 10_000 && moved > 100,
        "{same} kept, {moved} well nodes moved"
    );
}

/// The step and target indices of the layer named `(step, target)`.
fn layer_of(l: &Loaded, step: &str, target: &str) -> (usize, usize) {
    let s = l.survey.project.step_index(step).unwrap();
    let t = l
        .model
        .targets
        .iter()
        .position(|x| x.name == target)
        .unwrap();
    (s, t)
}

/// Whether node `node` of layer `li` is within `tol` of `want` in every kept realization of `c`.
fn in_every_realization(c: &Computed, li: usize, node: usize, want: f64, tol: f64) -> bool {
    let nl = c.layers.len();
    let kept = c.output.kept.len() / nl;
    kept > 0 && (0..kept).all(|k| (c.output.kept[k * nl + li].values[node] - want).abs() <= tol)
}

/// Checks that every lone well node of every kept realization of `c` holds the measured value.
fn measured_values_at_well_nodes(l: &Loaded, c: &Computed) {
    let grid = &l.survey.project.grid;
    let (mut checked, mut equal, mut outside) = (0, 0, 0);
    for (li, (step, target)) in c.layers.iter().enumerate() {
        let (s, t) = layer_of(l, step, target);
        let rows = tidemark::pipeline::fit::target_rows(&l.ts, t);
        let x = sample::node_features_at(&l.survey, s, l.model.width(t));
        let tm = &l.kept[s].targets[t];
        let d = CalibratedNodes::new(&l.model.calibrated[t], tm, x.view()).unwrap();
        let node_of = |r: usize| {
            let (fi, fj) = grid.fractional_ij(l.ts.xy[r][0], l.ts.xy[r][1]);
            fj.round() as usize * grid.nx + fi.round() as usize
        };
        let here: Vec<(usize, f64)> = l.model.calibrated[t]
            .diagnostics
            .rows
            .iter()
            .zip(&rows)
            .filter(|(row, _)| row.step == s)
            .map(|(row, &r)| (node_of(r), row.truth))
            .collect();
        for &(node, measured) in &here {
            let alone = here.iter().filter(|(n, _)| *n == node).count() == 1;
            let range = tm.hi[node] - tm.lo[node];
            if !alone || tm.mid[node].is_nan() || range <= 0.0 {
                continue;
            }
            // a value beyond the levels the scores are clamped to cannot be reproduced
            if d.cdf(node, measured) <= 1e-3 || d.cdf_left(node, measured) >= 1.0 - 1e-3 {
                outside += 1;
                continue;
            }
            checked += 1;
            equal += in_every_realization(c, li, node, measured, 1e-6 * range) as usize;
        }
    }
    assert!(checked > 50, "{checked} wells checked ({outside} outside)");
    // As for held-out scores below: a level a hair off a step of the predictive system may flip.
    assert!(
        equal as f64 >= 0.97 * checked as f64,
        "{equal} of {checked} well nodes give the measured value in every realization"
    );
}

/// `[totals] conditioning = "held_out"`: at a lone well node every realization gives the node's
/// value at the level of the well's held-out normal score.
#[test]
fn held_out_conditioning_reproduces_the_scores() {
    use tidemark::spatial::totals::WellConditioning;
    let l = loaded();
    let r = 20;
    let mut survey = l.survey.clone();
    survey.project.totals.as_mut().expect("totals").conditioning = WellConditioning::HeldOut;
    let c = compute_on(&survey, l, r, r, true);
    assert_eq!(c.record.conditioning, "held_out");
    held_out_scores_at_well_nodes(l, &c);
}

/// Checks that at every lone well node every kept realization of `c` gives the node's value at
/// the level of the well's held-out normal score (conditioning by kriging to those scores).
fn held_out_scores_at_well_nodes(l: &Loaded, c: &Computed) {
    let grid = &l.survey.project.grid;
    let (mut checked, mut equal) = (0, 0);
    for (li, (step, target)) in c.layers.iter().enumerate() {
        let (s, t) = layer_of(l, step, target);
        let scores: Vec<_> = well_scores(&l.model.calibrated[t], &l.ts, t, grid)
            .into_iter()
            .filter(|(st, _)| *st == s)
            .map(|(_, w)| w)
            .collect();
        let x = sample::node_features_at(&l.survey, s, l.model.width(t));
        let tm = &l.kept[s].targets[t];
        let d = CalibratedNodes::new(&l.model.calibrated[t], tm, x.view()).unwrap();
        for w in &scores {
            let (i, j) = (
                (w.x / grid.dx).round() as usize,
                (w.y / grid.dy).round() as usize,
            );
            let node = j * grid.nx + i;
            // Wells that share a node are merged into their mean: check lone wells only.
            let alone = scores.iter().filter(|o| {
                (
                    (o.x / grid.dx).round() as usize,
                    (o.y / grid.dy).round() as usize,
                ) == (i, j)
            });
            if alone.count() != 1 || tm.mid[node].is_nan() {
                continue;
            }
            let want = d.quantile(node, normal::level(w.score));
            let range = tm.hi[node] - tm.lo[node];
            checked += 1;
            equal += in_every_realization(c, li, node, want, 1e-6 * range.max(1e-12)) as usize;
        }
    }
    assert!(checked > 50, "{checked} wells checked");
    // The kriging keeps a 1e-10 diagonal term, so a score may land a hair off a step of the
    // node's predictive system; every other well node must hold its value exactly.
    assert!(
        equal as f64 >= 0.97 * checked as f64,
        "{equal} of {checked} well nodes reproduce the well in every realization"
    );
}

#[test]
fn totals_do_not_depend_on_the_thread_count() {
    let l = loaded();
    let text = |threads: usize| {
        crate::threads::in_pool(threads, || {
            csv_text(&compute(l, 40, 0, true).record).unwrap()
        })
    };
    let one = text(1);
    assert_eq!(one, text(3));
    assert!(String::from_utf8(one).unwrap().lines().count() > 5);
}

#[test]
fn score_adds_up_the_truth_over_the_predicted_nodes() {
    let f = fixture();
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("truth-score.json")).unwrap())
            .unwrap();
    let totals = v["totals"].as_array().expect("totals in truth-score.json");
    let csv = std::fs::read_to_string(f.out.join("totals.csv")).unwrap();
    assert_eq!(totals.len(), csv.lines().count() - 1);
    // Recount one area total by hand from the truth GeoTIFF and the P50 map.
    let grid = &loaded().survey.project.grid;
    let entry = totals
        .iter()
        .find(|t| t["quantity"] == "depleted_area")
        .expect("depleted area");
    let step = entry["step"].as_str().unwrap();
    let read = |p: std::path::PathBuf| tidemark::io::geotiff::read(&p).unwrap().values;
    let truth = read(f.root.join("field/truth").join(step).join("dP.tif"));
    let mid = read(f.out.join("maps").join(step).join("dP_p50.tif"));
    let count = truth
        .iter()
        .zip(&mid)
        .filter(|(t, m)| m.is_finite() && t.is_finite() && **t < -2.0)
        .count();
    let want = count as f64 * grid.dx * grid.dy * 1e-6;
    let got = entry["truth"].as_f64().unwrap();
    assert!((got - want).abs() < 1e-9 * want.max(1.0), "{got} vs {want}");
    let (p10, p90) = (
        entry["p10"].as_f64().unwrap(),
        entry["p90"].as_f64().unwrap(),
    );
    assert_eq!(entry["inside"].as_bool().unwrap(), got >= p10 && got <= p90);
    assert!(entry["sum_of_node_bands"]["inside"].is_boolean());
    let _ = Direction::Below;
}

#[test]
fn manifest_errors_name_the_totals_key() {
    let f = fixture();
    let text = std::fs::read_to_string(&f.project).unwrap();
    let cases = [
        (
            "target = \"dP\"\nthreshold = -2.0",
            "target = \"dQ\"\nthreshold = -2.0",
            "totals.quantities[0].target",
        ),
        (
            "weight = \"hcpv\"",
            "weight = \"pv\"",
            "totals.quantities[3].weight",
        ),
        (
            "threshold = -2.0\ndirection",
            "threshold = -99.0\ndirection",
            "totals.quantities[0].threshold",
        ),
        (
            "realizations = 200",
            "realizations = 1",
            "totals.realizations",
        ),
        (
            "realizations = 200",
            "realizations = 200\nmean = \"estimated\"",
            "totals.mean",
        ),
        (
            "quantity = \"swept_area\"",
            "quantity = \"swept_area\"\nsteps = [\"m9\"]",
            "totals.quantities[1].steps[0]",
        ),
        (
            "quantity = \"swept_area\"",
            "quantity = \"depleted_area\"",
            "totals.quantities[1].quantity",
        ),
        (
            "hcpv = \"static/hcpv.tif\"",
            "hcpv = \"\"",
            "totals.maps.hcpv",
        ),
    ];
    for (from, to, key) in cases {
        assert!(text.contains(from), "the generated manifest has {from:?}");
        let bad = text.replacen(from, to, 1);
        let err = tidemark::project::Project::from_toml_str(&f.project, &bad)
            .expect_err(key)
            .to_string();
        assert!(err.contains(key), "{key}: {err}");
    }
    let good = tidemark::project::Project::from_toml_str(&f.project, &text).unwrap();
    let t = good.totals.expect("totals section");
    assert_eq!(t.quantities.len(), 5);
    assert!(
        t.maps["hcpv"].ends_with("hcpv.tif") && std::path::Path::new(&t.maps["hcpv"]).is_absolute()
    );
}

#[test]
fn kept_realizations_are_written_listed_and_change_no_total() {
    let f = fixture();
    let out = f.root.join("results-kept");
    if out.exists() {
        std::fs::remove_dir_all(&out).unwrap();
    }
    let opts = tidemark::pipeline::run::RunOptions {
        pictures: false,
        report: false,
        keep_realizations: Some(2),
        ..tidemark::pipeline::run::RunOptions::new(&f.project, &out)
    };
    let outcome = tidemark::pipeline::run::run(&opts).expect("run");
    let files = &outcome.record.files;
    for step in &loaded().model.step_names {
        for target in ["dP", "dSw", "dSg"] {
            for r in ["r001", "r002"] {
                let rel = format!("realizations/{step}/{target}_{r}.tif");
                assert!(files.contains(&rel), "{rel} listed in run.json");
                let map = tidemark::io::geotiff::read(&out.join(&rel)).expect("GeoTIFF");
                assert!(map.values.iter().any(|v| v.is_finite()));
            }
            let third = format!("realizations/{step}/{target}_r003.tif");
            assert!(!out.join(third).exists());
        }
    }
    for name in ["totals.csv", "totals.json"] {
        assert!(files.contains(&name.to_string()), "{name} listed");
    }
    let a = std::fs::read(out.join("totals.csv")).unwrap();
    let b = std::fs::read(f.out.join("totals.csv")).unwrap();
    assert_eq!(a, b, "keeping maps changes no total");
}

/// `[totals] mean = "estimated"` on the run (conditioned to the held-out scores, whose mean is
/// the one estimated): every conditioned layer reports its estimate as applied (the same
/// estimate the default rule reports unapplied), the wells are still reproduced, and the
/// numbers do not depend on the thread count.
#[test]
fn an_estimated_mean_is_reported_applied_and_thread_independent() {
    use tidemark::spatial::totals::WellConditioning;
    use tidemark::spatial::unknown_mean::MeanRule;
    let l = loaded();
    let mut held_out = l.survey.clone();
    held_out
        .project
        .totals
        .as_mut()
        .expect("totals")
        .conditioning = WellConditioning::HeldOut;
    let mut survey = held_out.clone();
    survey.project.totals.as_mut().expect("totals").mean = MeanRule::Estimated;
    let run = |threads: usize, keep: usize| {
        crate::threads::in_pool(threads, || {
            totals::compute(
                &survey,
                &l.ts,
                &l.model,
                &l.kept,
                survey.project.model.seed,
                TotalsOptions {
                    keep: Some(keep),
                    realizations: Some(20),
                    condition: true,
                },
            )
            .expect("totals")
            .expect("the generated project has totals")
        })
    };
    let est = run(2, 20);
    let zero = compute_on(&held_out, l, 20, 0, true);
    assert!(!est.record.means.is_empty());
    assert_eq!(est.record.means.len(), zero.record.means.len());
    for (e, z) in est.record.means.iter().zip(&zero.record.means) {
        assert_eq!(e.layer, z.layer);
        assert!(e.applied && e.rule == "estimated", "{e:?}");
        assert!(!z.applied && z.rule == "zero", "{z:?}");
        assert_eq!(e.mean.to_bits(), z.mean.to_bits());
        assert!(e.se > 0.0 && e.se < 1.0 && e.wells > 5, "{e:?}");
    }
    // the calibration draw gives way to the estimated mean
    assert!(est.record.calibration_draw.is_empty());
    assert_ne!(
        csv_text(&est.record).unwrap(),
        csv_text(&zero.record).unwrap()
    );
    assert_eq!(
        csv_text(&est.record).unwrap(),
        csv_text(&run(1, 0).record).unwrap()
    );
    // conditioning stays exact: at a lone well node every realization gives the node's value at
    // the well's score
    held_out_scores_at_well_nodes(l, &est);
}
