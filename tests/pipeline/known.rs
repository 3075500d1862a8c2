//! The probabilities of a change that fitting computes at every node (for the nodes' share of
//! change) are handed to the maps instead of walking the change forest again: the maps must be
//! exactly those of a prediction that walks it.

use super::end_to_end::make_project;
use std::path::PathBuf;
use tidemark::pipeline::stages::Stages;
use tidemark::pipeline::{fit, run};
use tidemark::sample;

/// Equal lengths and every value bit for bit (NaN where the other is NaN).
fn same(u: &[f64], v: &[f64]) -> bool {
    u.len() == v.len()
        && u.iter()
            .zip(v)
            .all(|(x, y)| x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()))
}

#[test]
fn known_change_probabilities_give_the_same_maps() {
    let root = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("known-change");
    let manifest = make_project(&root.join("field"), 4);
    let survey = run::load(&manifest).expect("load");
    let p = &survey.project;
    let (ts, _) = sample::at_wells(&survey);
    let (model, _, known) =
        fit::fit_model_keeping(&survey, &ts, p.model.seed, &mut Stages::new(true)).expect("fit");
    // The generated field puts dSw and dSg under a "no change" atom: both carry probabilities.
    let hurdles = model
        .calibrated
        .iter()
        .filter(|c| c.hurdle.is_some())
        .count();
    assert!(hurdles >= 1, "the field has a hurdle target");
    assert_eq!(known.len(), p.steps.len());
    let xy = p.grid.node_coordinates();
    let (ground, _) = model.location_flags(&survey, 0..p.grid.len());
    for (s, step_known) in known.iter().enumerate() {
        assert_eq!(
            step_known.iter().filter(|k| k.is_some()).count(),
            hurdles,
            "step {s}: one set of probabilities per hurdle target"
        );
        let x = model.node_features(&survey, s);
        let walked = model
            .predict_keeping(x.view(), &xy, ground.as_deref(), &[])
            .expect("predict");
        let given = model
            .predict_known(x.view(), &xy, ground.as_deref(), &[], step_known)
            .expect("predict with known probabilities");
        for (t, (a, b)) in walked.targets.iter().zip(&given.targets).enumerate() {
            assert!(same(&a.lo, &b.lo), "step {s} target {t}: lower edge");
            assert!(same(&a.mid, &b.mid), "step {s} target {t}: P50");
            assert!(same(&a.hi, &b.hi), "step {s} target {t}: upper edge");
            for (e, f) in a.exceed.iter().zip(&b.exceed) {
                assert!(same(e, f), "step {s} target {t}: exceedance");
            }
            match (&a.p_change, &b.p_change) {
                (Some(e), Some(f)) => assert!(same(e, f), "step {s} target {t}: p_change"),
                (None, None) => {}
                _ => panic!("step {s} target {t}: p_change present in one only"),
            }
        }
    }
    // The given probabilities are what the maps use: probabilities of 0 everywhere (the right
    // length) put every P50 of a hurdle target at exactly 0.
    let zeros: Vec<Option<Vec<f64>>> = known[0]
        .iter()
        .map(|k| k.as_ref().map(|v| vec![0.0; v.len()]))
        .collect();
    let x0 = model.node_features(&survey, 0);
    let forced = model
        .predict_known(x0.view(), &xy, ground.as_deref(), &[], &zeros)
        .expect("predict");
    for (t, m) in forced.targets.iter().enumerate() {
        if zeros[t].is_some() {
            assert!(m.mid.iter().filter(|v| v.is_finite()).all(|&v| v == 0.0));
            assert!(
                m.p_change
                    .as_ref()
                    .expect("p_change")
                    .iter()
                    .any(|v| v.is_finite())
            );
        }
    }
    // Probabilities of the wrong length are ignored, not misapplied.
    let x = model.node_features(&survey, 0);
    let wrong: Vec<Option<Vec<f64>>> = known[0]
        .iter()
        .map(|k| k.as_ref().map(|v| v[..v.len() / 2].to_vec()))
        .collect();
    let walked = model
        .predict_keeping(x.view(), &xy, ground.as_deref(), &[])
        .expect("predict");
    let given = model
        .predict_known(x.view(), &xy, ground.as_deref(), &[], &wrong)
        .expect("predict");
    for (a, b) in walked.targets.iter().zip(&given.targets) {
        assert!(same(&a.mid, &b.mid));
    }
}
