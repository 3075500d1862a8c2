//! Extraction at wells into a training set, and node feature tables.

use super::fixtures::*;
use tidemark::project::{Extract, load_survey};
use tidemark::sample::{at_wells, node_features, node_sample};

#[test]
fn training_set_from_the_tiny_project() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let survey = load_survey(&manifest).unwrap();
    let (set, warnings) = at_wells(&survey);
    assert!(warnings.is_empty(), "{warnings:?}");
    assert_eq!(set.feature_names, vec!["near_amp", "time_shift", "step"]);
    assert_eq!(set.target_names, vec!["dSw", "dP"]);
    assert_eq!(set.n_rows(), TINY_WELLS * 2);
    assert_eq!(set.n_wells(), TINY_WELLS);
    for r in 0..set.n_rows() {
        let (w, s) = (r / 2, r % 2);
        assert_eq!(set.group[r], w);
        assert_eq!(set.well_names[w], format!("W{w}"));
        assert_eq!(set.step[r], s);
        let (fi, fj) = tiny_well_ij(w, s);
        // The maps are linear in (i, j), so bilinear interpolation reproduces them exactly; the
        // GeoTIFF map went through float32 (relative precision 6e-8).
        for a in 0..2 {
            let want = tiny_value(s, a, fi, fj);
            assert!((set.x[[r, a]] - want).abs() < 1e-6, "row {r} attr {a}");
        }
        assert_eq!(set.x[[r, 2]], s as f64);
        assert!((set.y[[r, 0]] - tiny_dsw(w, s)).abs() < 1e-12);
        match tiny_dp(w, s) {
            Some(v) => assert!((set.y[[r, 1]] - v).abs() < 1e-12),
            None => assert!(set.y[[r, 1]].is_nan(), "empty cell = not measured"),
        }
        assert_eq!(set.weight[r], 1.0);
        let (x, y) = survey.project.grid.fractional_xy(fi, fj);
        assert!((set.xy[r][0] - x).abs() < 1e-9 && (set.xy[r][1] - y).abs() < 1e-9);
    }
    assert_eq!(set.rows_with_target(1).len(), TINY_WELLS * 2 - 1);
}

#[test]
fn wells_outside_or_on_nulls_are_listed_and_left_out() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = tiny_project(dir.path());
    let mut survey = load_survey(&manifest).unwrap();
    // W1 in m1 moves outside the grid; the node next to W3 in m2 becomes null in time_shift.
    survey.wells[2].x = 900.0;
    let (fi, fj) = tiny_well_ij(3, 1);
    let g = survey.project.grid.clone();
    survey.maps[1][1][g.index(fi.ceil() as usize, fj.floor() as usize)] = f64::NAN;
    let (set, warnings) = at_wells(&survey);
    assert_eq!(set.n_rows(), TINY_WELLS * 2 - 2);
    assert_eq!(warnings.len(), 2, "{warnings:?}");
    assert_eq!(
        (warnings[0].well.as_str(), warnings[0].step.as_str()),
        ("W1", "m1")
    );
    assert!(warnings[0].reason.contains("outside the grid"));
    assert!(
        warnings[0].reason.contains("wells.csv line 4"),
        "{}",
        warnings[0]
    );
    assert_eq!(
        (warnings[1].well.as_str(), warnings[1].step.as_str()),
        ("W3", "m2")
    );
    assert!(
        warnings[1].to_string().contains("time_shift"),
        "{}",
        warnings[1]
    );
    // The mean extraction skips the null node instead.
    survey.project.extract = Extract::Mean { radius: 15.0 };
    let (set, warnings) = at_wells(&survey);
    assert_eq!(set.n_rows(), TINY_WELLS * 2 - 1);
    assert_eq!(warnings.len(), 1);
}

#[test]
fn node_features_columns() {
    let dir = tempfile::tempdir().unwrap();
    let survey = load_survey(&tiny_project(dir.path())).unwrap();
    let x = node_features(&survey, 1);
    let g = &survey.project.grid;
    assert_eq!(x.dim(), (g.len(), 3));
    let (i, j) = (4, 3);
    let r = g.index(i, j);
    assert!((x[[r, 0]] - tiny_value(1, 0, 4.0, 3.0)).abs() < 1e-6);
    assert!((x[[r, 1]] - tiny_value(1, 1, 4.0, 3.0)).abs() < 1e-12);
    assert_eq!(x[[r, 2]], 1.0);
}

#[test]
fn node_sample_rows_are_node_feature_rows() {
    let dir = tempfile::tempdir().unwrap();
    let survey = load_survey(&tiny_project(dir.path())).unwrap();
    let full: Vec<_> = (0..survey.maps.len())
        .map(|s| node_features(&survey, s))
        .collect();
    let mapped = |x: &ndarray::Array2<f64>, r: usize| x.row(r).iter().take(2).any(|v| !v.is_nan());
    let n_mapped: usize = full
        .iter()
        .map(|x| (0..x.nrows()).filter(|&r| mapped(x, r)).count())
        .sum();
    let s = node_sample(&survey, 25, 3);
    assert_eq!(s.nrows(), 25);
    // Every sampled row is a mapped node's feature row of its step, and no row repeats.
    let mut seen = Vec::new();
    for r in 0..s.nrows() {
        let step = s[[r, 2]] as usize;
        let x = &full[step];
        let found = (0..x.nrows()).find(|&k| {
            mapped(x, k)
                && (0..3)
                    .all(|c| x[[k, c]] == s[[r, c]] || (x[[k, c]].is_nan() && s[[r, c]].is_nan()))
        });
        let k = found.unwrap_or_else(|| panic!("sample row {r} is no node of step {step}"));
        assert!(!seen.contains(&(step, k)), "row {r} repeats");
        seen.push((step, k));
    }
    // Same seed, same sample; asking for more than there is returns every mapped node once.
    assert_eq!(node_sample(&survey, 25, 3), s);
    assert_eq!(node_sample(&survey, usize::MAX, 3).nrows(), n_mapped);
}
