//! The probability of a change adjusted to the nodes' share of change (prior shift; Saerens,
//! Latinne & Decaestecker 2002), against closed forms and on a small generated field.
//!
//! Closed form: two classes with normal attribute densities, `x | changed ~ N(2, 1)` and
//! `x | unchanged ~ N(0, 1)` (statrs 0.19's `Normal::pdf`). Under prior `pi` the Bayes posterior
//! is `pi f1(x) / (pi f1(x) + (1 - pi) f0(x))`, calibrated by construction. A population drawn
//! with another prior has the same class densities (a pure prior shift), so the EM estimate must
//! find its prior, and Bayes' rule under that prior must give the adjusted posterior.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use statrs::distribution::{Continuous, Normal};
use std::path::PathBuf;
use tidemark::calibrate::prior::{PriorShift, adjust, estimate};
use tidemark::io::geotiff;
use tidemark::pipeline::fit;
use tidemark::pipeline::run;
use tidemark::pipeline::stages::Stages;
use tidemark::sample;
use tidemark::synth::{SynthSettings, generate, write_project};

const MU_CHANGED: f64 = 2.0;

fn posterior(x: f64, prior: f64) -> f64 {
    let f1 = Normal::new(MU_CHANGED, 1.0).unwrap().pdf(x);
    let f0 = Normal::new(0.0, 1.0).unwrap().pdf(x);
    prior * f1 / (prior * f1 + (1.0 - prior) * f0)
}

/// `n` draws with prior `prior`: (attribute, changed). Normal draws by Box-Muller.
fn population(n: usize, prior: f64, seed: u64) -> Vec<(f64, bool)> {
    let mut rng = StdRng::seed_from_u64(seed);
    (0..n)
        .map(|_| {
            let changed = rng.random::<f64>() < prior;
            let u1: f64 = 1.0 - rng.random::<f64>();
            let u2: f64 = rng.random();
            let z = (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos();
            (z + if changed { MU_CHANGED } else { 0.0 }, changed)
        })
        .collect()
}

#[test]
fn the_adjustment_is_bayes_rule_under_the_new_prior() {
    // Closed form: the posterior under the new prior, computed directly from the densities.
    for &(train, new) in &[(0.6, 0.25), (0.3, 0.8), (0.5, 0.5), (0.9, 0.05)] {
        for k in 0..=40 {
            let x = -3.0 + 0.2 * k as f64;
            let got = adjust(posterior(x, train), train, new);
            let want = posterior(x, new);
            assert!(
                (got - want).abs() < 1e-12,
                "train {train} new {new} x {x}: {got} vs {want}"
            );
        }
    }
}

#[test]
fn em_recovers_a_known_shift_and_keeps_the_prior_without_one() {
    // The posteriors are calibrated under the training prior 0.6. With 20,000 draws the
    // sample share has sd sqrt(pi (1 - pi) / n) <= 0.0035, and the maximum-likelihood estimate
    // with classes two sds apart about twice that; the tolerance 0.02 is about three of those.
    let training = 0.6;
    for &(prior, seed) in &[(0.25, 1_u64), (0.45, 2), (0.8, 3), (0.6, 4), (0.6, 5)] {
        let pop = population(20_000, prior, seed);
        let p: Vec<f64> = pop.iter().map(|&(x, _)| posterior(x, training)).collect();
        let share = pop.iter().filter(|d| d.1).count() as f64 / pop.len() as f64;
        let e = estimate(&p, training).expect("an estimate");
        eprintln!(
            "prior {prior}: sample share {share:.4}, EM {:.4} in {} iterations",
            e.prior, e.iterations
        );
        assert!(e.converged, "{e:?}");
        assert!((e.prior - prior).abs() < 0.02, "prior {prior}: {e:?}");
        // The adjusted posteriors are calibrated for the new population: their mean is the
        // estimate (EM's fixed point) and near the sample share.
        let mean = p.iter().map(|&v| adjust(v, training, e.prior)).sum::<f64>() / p.len() as f64;
        assert!((mean - e.prior).abs() < 1e-6, "{mean} vs {}", e.prior);
        // Brier score of the adjusted posteriors no worse than of the unadjusted ones.
        let brier = |f: &dyn Fn(f64) -> f64| {
            pop.iter()
                .zip(&p)
                .map(|(d, &v)| (f(v) - f64::from(u8::from(d.1))).powi(2))
                .sum::<f64>()
                / p.len() as f64
        };
        let before = brier(&|v| v);
        let after = brier(&|v| adjust(v, training, e.prior));
        assert!(after <= before + 1e-4, "Brier {before} -> {after}");
    }
}

#[test]
fn the_shift_reports_each_steps_share_before_and_after() {
    let training = 0.6;
    let a: Vec<f64> = population(5000, 0.3, 7)
        .iter()
        .map(|&(x, _)| posterior(x, training))
        .collect();
    let mut b: Vec<f64> = population(5000, 0.3, 8)
        .iter()
        .map(|&(x, _)| posterior(x, training))
        .collect();
    b.push(f64::NAN);
    let steps = vec![("m1".to_string(), a.clone()), ("m2".to_string(), b)];
    let s = PriorShift::fit(training, &steps).unwrap();
    assert_eq!(s.nodes, 10_000);
    assert_eq!(s.by_step.len(), 2);
    assert_eq!(s.by_step[1].nodes, 5000);
    let before = a.iter().sum::<f64>() / a.len() as f64;
    assert!((s.by_step[0].before - before).abs() < 1e-12);
    assert!(s.by_step[0].after < s.by_step[0].before);
    assert!((s.estimated - 0.3).abs() < 0.03, "{s:?}");
    // The steps' adjusted means average to the estimate (EM's fixed point).
    let mean_after = 0.5 * (s.by_step[0].after + s.by_step[1].after);
    assert!((mean_after - s.estimated).abs() < 1e-6);
}

/// A population with more change than the wells (true prior 0.8 under a training prior of 0.6):
/// EM finds it (the closed form above), and the applied share is held at the wells' share; a
/// population with less change is left to EM.
#[test]
fn the_applied_share_is_never_above_the_wells_share() {
    let training = 0.6;
    let probs = |prior: f64, seed: u64| -> Vec<f64> {
        population(20_000, prior, seed)
            .iter()
            .map(|&(x, _)| posterior(x, training))
            .collect()
    };
    let up = PriorShift::fit(training, &[("m1".to_string(), probs(0.8, 11))]).unwrap();
    let em = up.em.expect("EM's estimate is kept");
    assert!((em - 0.8).abs() < 0.02, "{up:?}");
    assert!(up.held_at_wells);
    assert_eq!(up.estimated, training);
    // held at the wells' share, the adjustment leaves every probability as it was
    assert!((up.apply(0.37) - 0.37).abs() < 1e-15);
    assert!((up.by_step[0].after - up.by_step[0].before).abs() < 1e-12);
    let down = PriorShift::fit(training, &[("m1".to_string(), probs(0.3, 12))]).unwrap();
    assert!(!down.held_at_wells);
    assert_eq!(Some(down.estimated), down.em);
    assert!((down.estimated - 0.3).abs() < 0.02, "{down:?}");
}

/// Mean P50 of `target` over nodes whose truth is exactly zero, over every step.
fn mean_p50_unchanged(
    survey: &tidemark::project::Survey,
    model: &tidemark::pipeline::model::SavedModel,
    dir: &std::path::Path,
    target: &str,
) -> (f64, f64) {
    let t = model.targets.iter().position(|s| s.name == target).unwrap();
    let grid = &survey.project.grid;
    let node_xy = grid.node_coordinates();
    let ground = model.ground_flags(survey, 0..grid.len()).unwrap();
    let (mut sum, mut n, mut p_sum, mut p_n) = (0.0, 0usize, 0.0, 0usize);
    for (s, step) in survey.project.steps.iter().enumerate() {
        let x = model.node_features(survey, s);
        let maps = model
            .predict(x.view(), &node_xy, ground.as_deref())
            .unwrap();
        let truth = geotiff::read_on_grid(
            &dir.join("truth")
                .join(&step.name)
                .join(format!("{target}.tif")),
            grid,
        )
        .unwrap();
        let m = &maps.targets[t];
        for (k, &y) in truth.iter().enumerate() {
            if y == 0.0 && m.mid[k].is_finite() {
                sum += m.mid[k];
                n += 1;
            }
        }
        for v in m
            .p_change
            .as_ref()
            .unwrap()
            .iter()
            .filter(|v| v.is_finite())
        {
            p_sum += v;
            p_n += 1;
        }
    }
    assert!(n > 500, "{n} unchanged nodes");
    (sum / n as f64, p_sum / p_n as f64)
}

#[test]
fn on_a_generated_field_the_shift_does_not_raise_the_p50_where_nothing_changed() {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("prior-shift-field");
    if dir.exists() {
        std::fs::remove_dir_all(&dir).unwrap();
    }
    let settings = SynthSettings {
        seed: 11,
        nx: 64,
        ny: 52,
        spacing: 50.0,
        wells: 44,
        steps: 3,
        ..SynthSettings::default()
    };
    let synth = generate(&settings).expect("generate");
    write_project(&synth, &settings, &dir).expect("write the field");
    let survey = run::load(&dir.join("project.toml")).unwrap();
    let (ts, _) = sample::at_wells(&survey);
    let (model, _) = fit::fit_model(&survey, &ts, 7, &mut Stages::new(true)).unwrap();
    let t = model.targets.iter().position(|s| s.name == "dSw").unwrap();
    let shift = model.calibrated[t]
        .hurdle
        .as_ref()
        .expect("dSw has the atom")
        .prior
        .clone()
        .expect("the nodes' share was estimated");
    eprintln!("{shift:?}");
    assert!(shift.converged);
    assert_eq!(shift.by_step.len(), 3);
    let reported = model.calibrated[t].diagnostics.hurdle.as_ref().unwrap();
    assert_eq!(reported.prior.as_ref(), Some(&shift));
    let mut plain = model.clone();
    for c in &mut plain.calibrated {
        c.set_prior(None);
    }
    let (after, p_after) = mean_p50_unchanged(&survey, &model, &dir, "dSw");
    let (before, p_before) = mean_p50_unchanged(&survey, &plain, &dir, "dSw");
    eprintln!(
        "dSw: mean P50 at unchanged nodes {before:.4} -> {after:.4}; mean probability of a \
         change {p_before:.4} -> {p_after:.4}"
    );
    // The wells' share is the one the plain maps carry.
    assert!(
        (shift
            .by_step
            .iter()
            .map(|s| s.before * s.nodes as f64)
            .sum::<f64>()
            / shift.nodes as f64
            - p_before)
            .abs()
            < 1e-9
    );
    assert!(after <= before + 1e-12, "{before} -> {after}");
}
