//! The manifest types that define totals.

use serde::Deserialize;
use tidemark::project::Direction;
use tidemark::spatial::totals::{TotalRule, TotalsSection};

#[derive(Deserialize)]
struct Doc {
    totals: TotalsSection,
}

fn parse(text: &str) -> Result<TotalsSection, String> {
    toml::from_str::<Doc>(text)
        .map(|d| d.totals)
        .map_err(|e| e.to_string())
}

const GOOD: &str = r#"
[totals]
realizations = 300
keep_realizations = 2

[[totals.quantities]]
quantity = "depleted_area"
kind = "area"
target = "dP"
threshold = -2.0
direction = "below"
unit = "km2"
scale = 1e-6

[[totals.quantities]]
quantity = "swept_pore_volume"
kind = "sum"
target = "dSw"
steps = ["m2", "m4"]
weight = "hcpv"
unit = "m3"
"#;

#[test]
fn a_totals_section_parses_and_checks() {
    let section = parse(GOOD).unwrap();
    assert_eq!(section.realizations, 300);
    assert_eq!(section.keep_realizations, 2);
    let defs = section.check().unwrap();
    assert_eq!(defs.len(), 2);
    assert_eq!(
        defs[0].rule,
        TotalRule::Area {
            threshold: -2.0,
            direction: Direction::Below
        }
    );
    assert!(defs[0].steps.is_empty());
    assert_eq!(defs[0].scale, 1e-6);
    assert_eq!(
        defs[1].rule,
        TotalRule::Sum {
            weight: "hcpv".into()
        }
    );
    assert_eq!(defs[1].steps, vec!["m2".to_string(), "m4".to_string()]);
    assert_eq!(defs[1].scale, 1.0);
    // defaults
    let empty = parse("[totals]\n").unwrap();
    assert_eq!((empty.realizations, empty.keep_realizations), (200, 0));
    assert!(empty.check().unwrap().is_empty());
}

#[test]
fn mistakes_name_the_manifest_key() {
    let unknown = GOOD.replace("unit = \"m3\"", "unit = \"m3\"\ncolour = \"red\"");
    let e = parse(&unknown).unwrap_err();
    assert!(e.contains("colour"), "{e}");

    let cases = [
        (
            GOOD.replace("threshold = -2.0\n", ""),
            "totals.quantities[0].threshold",
        ),
        (
            GOOD.replace("direction = \"below\"\n", ""),
            "totals.quantities[0].direction",
        ),
        (
            GOOD.replace("weight = \"hcpv\"\n", ""),
            "totals.quantities[1].weight",
        ),
        (
            GOOD.replace(
                "weight = \"hcpv\"\n",
                "weight = \"hcpv\"\nthreshold = 0.1\n",
            ),
            "totals.quantities[1].threshold",
        ),
        (
            GOOD.replace("unit = \"km2\"\n", "unit = \"km2\"\nweight = \"pv\"\n"),
            "totals.quantities[0].weight",
        ),
        (
            GOOD.replace("\"swept_pore_volume\"", "\"depleted_area\""),
            "totals.quantities[1].quantity",
        ),
        (
            GOOD.replace("[\"m2\", \"m4\"]", "[\"m2\", \"m2\"]"),
            "totals.quantities[1].steps[1]",
        ),
        (
            GOOD.replace("scale = 1e-6", "scale = 0.0"),
            "totals.quantities[0].scale",
        ),
        (
            GOOD.replace("realizations = 300", "realizations = 1"),
            "totals.realizations",
        ),
        (
            GOOD.replace("keep_realizations = 2", "keep_realizations = 400"),
            "totals.keep_realizations",
        ),
        (
            GOOD.replace("target = \"dP\"", "target = \" \""),
            "totals.quantities[0].target",
        ),
    ];
    for (text, key) in cases {
        let e = parse(&text).unwrap().check().unwrap_err().to_string();
        assert!(e.contains(key), "expected {key} in: {e}");
    }
}
