//! The band at held-out wells by well kind (`pipeline::kinds`).

use tidemark::calibrate::OofRow;
use tidemark::io::wells::WellKind::{Injector, Observer, Producer};
use tidemark::pipeline::kinds::by_kind;

fn row(group: usize, truth: f64, lo: f64, hi: f64) -> OofRow {
    OofRow {
        truth,
        raw: truth,
        corrected: truth,
        lo,
        hi,
        pit: 0.5,
        pit_forest: 0.5,
        scale: 1.0,
        fold: group,
        group,
        step: 0,
    }
}

/// Worked by hand with the interval score of Gneiting & Raftery (2007, JASA 102:359, eq. 43):
/// `(u - l) + 2/a (l - x)+ + 2/a (x - u)+`, here at level 0.8 (`2/a = 10`), each well weighing
/// one and its rows sharing that weight.
#[test]
fn figures_per_kind_match_a_hand_worked_example() {
    let rows = vec![
        // well 0, producer: inside (score 2), then above by 1 (score 2 + 10 = 12)
        row(0, 1.0, 0.0, 2.0),
        row(0, 3.0, 0.0, 2.0),
        // well 1, producer: inside, width 4
        row(1, 0.0, -2.0, 2.0),
        // well 2, injector: below by 1 (score 1 + 10 = 11)
        row(2, -1.0, 0.0, 1.0),
        // well 3, no kind: inside, width 1
        row(3, 0.5, 0.0, 1.0),
        // well 4, observer: a missing truth is left out
        row(4, f64::NAN, 0.0, 1.0),
        row(4, 0.2, 0.0, 0.5),
    ];
    let kinds = [
        Some(Producer),
        Some(Producer),
        Some(Injector),
        None,
        Some(Observer),
    ];
    let f = by_kind(&rows, &kinds, 0.8);
    let names: Vec<&str> = f.iter().map(|k| k.kind.as_str()).collect();
    assert_eq!(names, ["producer", "injector", "observer", "unstated"]);
    let close = |a: f64, b: f64| (a - b).abs() < 1e-12;
    // producers: well 0 (coverage 1/2, width 2, score 7) and well 1 (1, 4, 4)
    assert_eq!((f[0].wells, f[0].rows), (2, 3));
    assert!(close(f[0].coverage, 0.75));
    assert!(close(f[0].mean_width, 3.0));
    assert!(close(f[0].interval_score, 5.5));
    assert_eq!((f[1].wells, f[1].rows), (1, 1));
    assert!(close(f[1].coverage, 0.0));
    assert!(close(f[1].interval_score, 11.0));
    assert_eq!((f[2].wells, f[2].rows), (1, 1));
    assert!(close(f[2].coverage, 1.0));
    assert!(close(f[2].mean_width, 0.5));
    assert!(close(f[3].interval_score, 1.0));
}

#[test]
fn no_kinds_in_the_wells_file_gives_no_breakdown() {
    let rows = vec![row(0, 1.0, 0.0, 2.0), row(1, 3.0, 0.0, 2.0)];
    assert!(by_kind(&rows, &[None, None], 0.8).is_empty());
}

/// The generated fixture's wells are producers and injectors, each measuring every target: every
/// target reports both kinds, and their wells add up to the wells of the training set.
#[test]
fn the_run_reports_the_band_by_kind() {
    let f = super::end_to_end::fixture();
    let s: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.out.join("summary.json")).unwrap())
            .unwrap();
    let wells = s["wells"].as_u64().unwrap();
    for t in s["targets"].as_array().unwrap() {
        let k = t["by_kind"].as_array().unwrap();
        let names: Vec<&str> = k.iter().map(|e| e["kind"].as_str().unwrap()).collect();
        assert_eq!(names, ["producer", "injector"], "{}", t["name"]);
        let total: u64 = k.iter().map(|e| e["wells"].as_u64().unwrap()).sum();
        assert_eq!(total, wells, "{}", t["name"]);
        for e in k {
            let c = e["coverage"].as_f64().unwrap();
            assert!((0.0..=1.0).contains(&c));
            assert!(e["interval_score"].as_f64().unwrap() >= e["mean_width"].as_f64().unwrap());
        }
    }
}
