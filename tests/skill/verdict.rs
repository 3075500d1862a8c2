//! Verdicts on constructed cases: a target of pure noise, a strong linear target, the bounds of
//! the rule, one step of each in one table, and the JSON form.

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use statrs::distribution::{Continuous, ContinuousCDF, Normal};
use tidemark::skill::{
    Skill, SkillInput, SkillSettings, StepSkill, Verdict, assess, assess_by_step, climatology_crps,
    verdict,
};

/// Gaussian CRPS closed form (Gneiting & Raftery 2007, eq. 21) with statrs 0.19.
fn gaussian_crps(y: f64, mu: f64, s: f64) -> f64 {
    let n = Normal::standard();
    let z = (y - mu) / s;
    s * (z * (2.0 * n.cdf(z) - 1.0) + 2.0 * n.pdf(z) - 1.0 / std::f64::consts::PI.sqrt())
}

/// Rows of `wells` wells with `per_well` rows each: truth, a prediction and a Gaussian predictive
/// spread, from `make(rng) -> (truth, prediction, spread)`.
struct Case {
    truth: Vec<f64>,
    prediction: Vec<f64>,
    crps_model: Vec<f64>,
    crps_clim: Vec<f64>,
    well: Vec<usize>,
    step: Vec<usize>,
    weight: Vec<f64>,
}

impl Case {
    fn new(
        wells: usize,
        per_well: usize,
        seed: u64,
        make: &dyn Fn(&mut StdRng, usize) -> (f64, f64, f64),
    ) -> Case {
        let mut rng = StdRng::seed_from_u64(seed);
        let (mut truth, mut prediction, mut crps_model, mut well, mut step) =
            (vec![], vec![], vec![], vec![], vec![]);
        for w in 0..wells {
            for s in 0..per_well {
                let (y, p, sd) = make(&mut rng, s);
                truth.push(y);
                prediction.push(p);
                crps_model.push(gaussian_crps(y, p, sd));
                well.push(w);
                step.push(s);
            }
        }
        let weight = vec![1.0; truth.len()];
        let crps_clim = climatology_crps(&truth, &well, &weight, Some(&step)).unwrap();
        Case {
            truth,
            prediction,
            crps_model,
            crps_clim,
            well,
            step,
            weight,
        }
    }

    fn input(&self) -> SkillInput<'_> {
        SkillInput {
            truth: &self.truth,
            prediction: &self.prediction,
            crps_model: &self.crps_model,
            crps_climatology: &self.crps_clim,
            well: &self.well,
            weight: &self.weight,
        }
    }
}

/// A target with no signal: truth and prediction independent standard normals (the prediction
/// shrunk by half, as a model would), the predictive spread that of the truth.
fn noise(rng: &mut StdRng, _: usize) -> (f64, f64, f64) {
    let y: f64 = rng.sample(StandardNormal);
    let p: f64 = 0.5 * rng.sample::<f64, _>(StandardNormal);
    (y, p, 1.0)
}

/// A strong linear target: truth = 2 x + 0.3 e, predicted as 2 x with spread 0.3.
fn linear(rng: &mut StdRng, _: usize) -> (f64, f64, f64) {
    let x: f64 = rng.sample(StandardNormal);
    let e: f64 = rng.sample(StandardNormal);
    (2.0 * x + 0.3 * e, 2.0 * x, 0.3)
}

#[test]
fn pure_noise_gives_none_and_a_strong_linear_target_gives_useful() {
    for seed in 0..10 {
        // 12 wells, 4 rows each (a small field, as in the held-out cases).
        let s = assess(
            &Case::new(12, 4, seed, &noise).input(),
            &SkillSettings::default(),
        )
        .unwrap();
        assert_eq!(s.verdict, Verdict::None, "noise, seed {seed}: {s:?}");
        assert!(s.r2_interval[0] <= 0.0 || s.crps_skill_interval[0] <= 0.0);
        let s = assess(
            &Case::new(12, 4, seed, &linear).input(),
            &SkillSettings::default(),
        )
        .unwrap();
        assert_eq!(s.verdict, Verdict::Useful, "linear, seed {seed}: {s:?}");
        // Expected R2 = 4 / (4 + 0.09) = 0.978; the interval holds it.
        assert!(
            s.r2_interval[0] < 0.978 && 0.978 < s.r2_interval[1] + 0.01,
            "{s:?}"
        );
    }
}

#[test]
fn rule_bounds() {
    let s = SkillSettings::default();
    // common practice, no published source: the `useful` bar R2 >= 0.5; the CRPS bar is
    // 1 - sqrt(1 - 0.5), the skill of a calibrated Gaussian forecast at R2 = 0.5.
    assert!((s.useful_crps_skill - (1.0 - 0.5f64.sqrt())).abs() < 1e-15);
    assert_eq!(verdict([0.0, 0.9], [0.5, 0.9], &s), Verdict::None);
    assert_eq!(verdict([0.6, 0.9], [0.0, 0.9], &s), Verdict::None);
    assert_eq!(verdict([f64::NAN, 0.9], [0.5, 0.9], &s), Verdict::None);
    assert_eq!(verdict([0.01, 0.9], [0.01, 0.9], &s), Verdict::Weak);
    assert_eq!(verdict([0.49, 0.9], [0.5, 0.9], &s), Verdict::Weak);
    assert_eq!(verdict([0.5, 0.9], [0.29, 0.9], &s), Verdict::Weak);
    assert_eq!(verdict([0.5, 0.9], [0.3, 0.9], &s), Verdict::Useful);
}

#[test]
fn steps_are_judged_apart_and_named() {
    // Step 0 is noise, step 1 linear: pooled R2 hides the difference, the steps do not.
    let both = |rng: &mut StdRng, s: usize| {
        if s == 0 {
            noise(rng, s)
        } else {
            linear(rng, s)
        }
    };
    let case = Case::new(12, 2, 5, &both);
    let names = vec!["m1".to_string(), "m2".to_string()];
    let by_step =
        assess_by_step(&case.input(), &case.step, &names, &SkillSettings::default()).unwrap();
    assert_eq!(by_step.len(), 2);
    assert_eq!(by_step[0].step, "m1");
    assert_eq!(by_step[0].skill.verdict, Verdict::None);
    assert_eq!(by_step[1].step, "m2");
    assert_eq!(by_step[1].skill.verdict, Verdict::Useful);
    // A step index beyond the names is an error.
    assert!(
        assess_by_step(
            &case.input(),
            &case.step,
            &names[..1],
            &SkillSettings::default()
        )
        .is_err()
    );
}

#[test]
fn json_form() {
    let s = StepSkill {
        step: "m1".into(),
        skill: Skill {
            r2: 0.25,
            crps_skill: f64::NAN,
            r2_interval: [-0.1, 0.5],
            crps_skill_interval: [f64::NAN, f64::NAN],
            verdict: Verdict::None,
        },
    };
    let text = serde_json::to_string(&s).unwrap();
    assert_eq!(
        text,
        r#"{"step":"m1","r2":0.25,"crps_skill":null,"r2_interval":[-0.1,0.5],"crps_skill_interval":[null,null],"verdict":"none"}"#
    );
    let back: StepSkill = serde_json::from_str(&text).unwrap();
    assert_eq!(back.step, "m1");
    assert_eq!(back.skill.r2_interval, [-0.1, 0.5]);
    assert!(back.skill.crps_skill.is_nan() && back.skill.crps_skill_interval[1].is_nan());
    assert_eq!(Verdict::Useful.as_str(), "useful");
}
