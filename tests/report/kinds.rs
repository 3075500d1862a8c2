//! The band at held-out wells by kind, on the page (`report::kinds`).

use tidemark::report::input::*;
use tidemark::report::render_html;

fn kind(kind: &str, wells: usize, coverage: f64) -> KindRow {
    KindRow {
        kind: kind.into(),
        wells,
        rows: 4 * wells,
        coverage,
        mean_width: 2.5,
        interval_score: 3.25,
    }
}

fn page(by_kind: Vec<KindRow>) -> String {
    let dir = tempfile::tempdir().unwrap();
    let input = ReportInput {
        targets: vec![TargetReport {
            name: "dP".into(),
            unit: "MPa".into(),
            summary: TargetSummary {
                by_kind,
                ..Default::default()
            },
            ..Default::default()
        }],
        ..Default::default()
    };
    render_html(&input, dir.path()).unwrap()
}

#[test]
fn a_table_per_target_with_what_the_kinds_mean() {
    let html = page(vec![kind("producer", 30, 0.75), kind("injector", 15, 0.6)]);
    assert!(html.contains("Band at held-out wells by kind"));
    assert!(html.contains("<td>producer</td><td>30</td><td>120</td><td>75.0&nbsp;%</td>"));
    assert!(html.contains("<td>injector</td><td>15</td><td>60</td><td>60.0&nbsp;%</td>"));
    assert!(html.contains("interval score (MPa)"));
    assert!(html.contains("No observation well"));
    let with_observers = page(vec![kind("producer", 30, 0.75), kind("observer", 6, 0.9)]);
    assert!(with_observers.contains("<td>observer</td><td>6</td>"));
    assert!(with_observers.contains("the observation wells are the nearest test"));
    assert!(!with_observers.contains("No observation well"));
}

#[test]
fn no_kinds_no_table() {
    assert!(!page(vec![]).contains("Band at held-out wells by kind"));
}
