//! The HTML page: self-contained, escaped, graceful when pieces are missing.

use base64::Engine;
use tidemark::report::input::*;
use tidemark::report::*;

use super::fixture::{decode, sample_input};

/// Every `src="..."` value of an `<img>`.
pub fn img_sources(html: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut rest = html;
    while let Some(k) = rest.find("<img") {
        rest = &rest[k..];
        let s = rest.find("src=\"").expect("img without src") + 5;
        let e = rest[s..].find('"').unwrap();
        out.push(rest[s..s + e].to_string());
        rest = &rest[s + e..];
    }
    out
}

/// Checks the page's self-containment rules and returns the number of pictures.
pub fn check_self_contained(html: &str) -> usize {
    let lower = html.to_ascii_lowercase();
    assert!(!lower.contains("<script"), "page has a script");
    assert!(
        !lower.contains("http://") && !lower.contains("https://"),
        "page references the network"
    );
    assert!(
        !lower.contains("<link rel=\"stylesheet\""),
        "page links a style sheet"
    );
    let srcs = img_sources(html);
    for s in &srcs {
        let b64 = s
            .strip_prefix("data:image/png;base64,")
            .unwrap_or_else(|| panic!("image is not a PNG data URI: {}", &s[..s.len().min(60)]));
        let bytes = base64::engine::general_purpose::STANDARD
            .decode(b64)
            .expect("base64");
        let d = decode(&bytes);
        assert!(d.width > 0 && d.height > 0);
    }
    srcs.len()
}

#[test]
fn full_page_is_self_contained_and_complete() {
    let dir = tempfile::tempdir().unwrap();
    let input = sample_input(dir.path());
    let html = render_html(&input, dir.path()).unwrap();
    let n = check_self_contained(&html);
    // 2 targets x 2 steps x 3 maps + 2 applicability + 1 error map = 15 maps;
    // per target: cross-plot, coverage by decile, 1 reliability, PIT, learning curve,
    // importance by attribute and by family, ablation = 8 plots
    assert_eq!(n, 15 + 2 * 8, "pictures on the page");
    for id in [
        "summary",
        "maps",
        "crossplots",
        "calibration",
        "learning",
        "importance",
        "truth",
    ] {
        assert!(
            html.contains(&format!("<section id=\"{id}\">")),
            "section {id}"
        );
    }
    // the project name is escaped
    assert!(html.contains("Skerrow Bank &lt;demo&gt; &amp; co"));
    assert!(!html.contains("<demo>"));
    // cautions fall back to the defaults; convention is stated; units in table headers
    assert!(html.contains("not a reserves estimate"));
    assert!(html.contains("P10 is the low value"));
    assert!(html.contains("RMSE (m3)") || html.contains("risked volume (m3)"));
    assert!(html.contains("(MPa)"));
    // a missing number reads "not computed" (top-decile coverage is None)
    assert!(html.contains("not computed"));
    assert!(html.contains("only 3 wells in the top decile"));
}

#[test]
fn crossplot_table_is_computed_from_the_data() {
    let dir = tempfile::tempdir().unwrap();
    let mut input = ReportInput {
        project: "t".to_string(),
        ..Default::default()
    };
    // prediction = 0.5 truth + 0.1 exactly: slope 0.5; bias = mean(0.1 - 0.5 t)
    let truth: Vec<f64> = (0..11).map(|k| k as f64 / 10.0).collect();
    let raw: Vec<f64> = truth.iter().map(|t| 0.5 * t + 0.1).collect();
    input.targets.push(TargetReport {
        name: "dSw".to_string(),
        unit: "fraction".to_string(),
        crossplot: Some(CrossplotData {
            truth: truth.clone(),
            raw,
            corrected: truth,
        }),
        ..Default::default()
    });
    let html = render_html(&input, dir.path()).unwrap();
    // bias = 0.1 - 0.5 * mean(truth) = 0.1 - 0.25 = -0.15; slope 0.5; corrected: rmse 0, slope 1
    assert!(html.contains("<td class=\"l\">raw</td><td>11</td>"));
    assert!(
        html.contains("<td>-0.150</td><td>0.500</td>"),
        "raw fit row"
    );
    assert!(
        html.contains("<td>0</td><td>0</td><td>1.00</td>"),
        "corrected fit row"
    );
}

#[test]
fn empty_input_says_not_computed_everywhere() {
    let dir = tempfile::tempdir().unwrap();
    let html = render_html(&ReportInput::default(), dir.path()).unwrap();
    assert_eq!(check_self_contained(&html), 0);
    for id in [
        "summary",
        "maps",
        "crossplots",
        "calibration",
        "learning",
        "importance",
        "truth",
    ] {
        let start = html.find(&format!("<section id=\"{id}\">")).unwrap();
        let end = start + html[start..].find("</section>").unwrap();
        let section = &html[start..end];
        assert!(
            section.to_lowercase().contains("not computed") || section.contains("Cautions"),
            "section {id}: {section}"
        );
    }
}

#[test]
fn broken_pictures_become_notes() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("not_a_png.png"), b"hello").unwrap();
    let outside = dir.path().parent().unwrap().join("secret.png");
    let entry = |picture: PictureRef| MapEntry {
        step: "s1".to_string(),
        target: Some("dP".to_string()),
        kind: "P50".to_string(),
        picture,
        caption: String::new(),
    };
    let input = ReportInput {
        maps: vec![
            entry(PictureRef::File("maps/missing.png".to_string())),
            entry(PictureRef::File("not_a_png.png".to_string())),
            entry(PictureRef::File("../secret.png".to_string())),
            entry(PictureRef::File(outside.display().to_string())),
            entry(PictureRef::PngBase64("***".to_string())),
        ],
        ..Default::default()
    };
    let html = render_html(&input, dir.path()).unwrap();
    assert_eq!(check_self_contained(&html), 0);
    assert_eq!(html.matches("picture not available").count(), 5);
    assert!(html.contains("not a readable PNG"));
    assert!(html.contains("is not a path inside the results folder"));
}

#[test]
fn page_input_round_trips_through_json_with_nan() {
    let dir = tempfile::tempdir().unwrap();
    let mut input = sample_input(dir.path());
    input.targets[0].crossplot.as_mut().unwrap().raw[3] = f64::NAN;
    let path = input.save(dir.path()).unwrap();
    assert_eq!(path, dir.path().join(DATA_FILE));
    let back = ReportInput::load(&path).unwrap();
    assert!(back.targets[0].crossplot.as_ref().unwrap().raw[3].is_nan());
    // equal apart from the NaN (numbers to the last bit or so: serde_json's default float parser)
    let a = serde_json::to_value(&input).unwrap();
    let b = serde_json::to_value(&back).unwrap();
    same_json(&a, &b, "$");
    // no temporary file left behind
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(names.iter().all(|n| !n.contains(".tmp")), "{names:?}");
}

#[test]
fn bad_json_names_file_and_line() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join(DATA_FILE);
    std::fs::write(&path, "{\n  \"project\": \"x\",\n  \"targets\": 7\n}\n").unwrap();
    let e = ReportInput::load(&path).unwrap_err().to_string();
    assert!(e.contains(DATA_FILE) && e.contains("line 3"), "{e}");
}

#[test]
fn report_subcommand_writes_the_page() {
    let dir = tempfile::tempdir().unwrap();
    let input = sample_input(dir.path());
    input.save(dir.path()).unwrap();
    let code = tidemark::cli::report::run(tidemark::cli::report::Args {
        results: dir.path().to_path_buf(),
        quiet: true,
    })
    .unwrap();
    assert_eq!(code, 0);
    let html = std::fs::read_to_string(dir.path().join(PAGE_FILE)).unwrap();
    assert!(check_self_contained(&html) > 0);
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(names.iter().all(|n| !n.contains(".tmp")), "{names:?}");

    // a folder without report-data.json: a clear error naming the file
    let empty = tempfile::tempdir().unwrap();
    let e = tidemark::cli::report::run(tidemark::cli::report::Args {
        results: empty.path().to_path_buf(),
        quiet: true,
    })
    .unwrap_err();
    assert!(format!("{e:#}").contains(DATA_FILE), "{e:#}");
}

fn same_json(a: &serde_json::Value, b: &serde_json::Value, at: &str) {
    use serde_json::Value;
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => {
            let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
            assert!(
                (x - y).abs() <= 1e-14 * x.abs().max(y.abs()),
                "{at}: {x} vs {y}"
            );
        }
        (Value::Array(x), Value::Array(y)) => {
            assert_eq!(x.len(), y.len(), "{at}: lengths");
            for (k, (p, q)) in x.iter().zip(y).enumerate() {
                same_json(p, q, &format!("{at}[{k}]"));
            }
        }
        (Value::Object(x), Value::Object(y)) => {
            assert_eq!(x.len(), y.len(), "{at}: keys");
            for (k, p) in x {
                same_json(
                    p,
                    y.get(k).unwrap_or_else(|| panic!("{at}.{k} missing")),
                    &format!("{at}.{k}"),
                );
            }
        }
        _ => assert!(a == b, "{at}: {a} vs {b}"),
    }
}

#[test]
fn text_is_escaped_and_numbers_formatted() {
    use tidemark::report::html::{escape, num, pct};
    assert_eq!(
        escape("<a href=\"x\">'&'</a>"),
        "&lt;a href=&quot;x&quot;&gt;&#39;&amp;&#39;&lt;/a&gt;"
    );
    assert_eq!(num(Some(0.123456)), "0.123");
    assert_eq!(num(Some(1234.4)), "1234");
    assert_eq!(num(Some(-0.000123)), "-0.000123");
    assert!(num(None).contains("not computed"));
    assert!(num(Some(f64::NAN)).contains("not computed"));
    assert_eq!(pct(Some(0.8)), "80.0&nbsp;%");
}

#[test]
fn the_kriging_sentences_follow_the_decision() {
    use tidemark::report::kriging::{band_sentence, middle_sentence};
    let kept = KrigingSummary {
        model: "exponential".into(),
        nugget: Some(0.2),
        sill: Some(1.0),
        range: Some(900.0),
        pairs: Some(120),
        applied: true,
        band_kept: true,
        is_scaled: Some(4.1),
        is_without: Some(4.3),
        mse_gain_pct: Some(12.34),
        mse_gain_se_pct: Some(5.0),
        middle_applied: true,
        ..Default::default()
    };
    let band = band_sentence("dP", &kept);
    assert!(band.contains(": kept, because"), "{band}");
    assert!(
        band.contains("4.10, is no worse than 4.30 without it"),
        "{band}"
    );
    let middle = middle_sentence(&kept);
    assert!(
        middle.contains("lowers the held-out wells' mean squared error by 12.3 % (one standard error 5.0 %); the P50 maps include it"),
        "{middle}"
    );
    // A fit that fell back tries no band and says why.
    let fell_back = KrigingSummary {
        model: "exponential".into(),
        fallback: true,
        decision: "the variogram could not be fitted".into(),
        ..Default::default()
    };
    let band = band_sentence("dP", &fell_back);
    assert!(
        band.contains("not tried: the variogram could not be fitted"),
        "{band}"
    );
    // On the page: the table marks the fallback, and a target without the stage says so.
    let dir = tempfile::tempdir().unwrap();
    let page = render_html(
        &ReportInput {
            xy_unit: "m".into(),
            targets: vec![
                TargetReport {
                    name: "dP".into(),
                    kriging: Some(fell_back),
                    ..Default::default()
                },
                TargetReport {
                    name: "dSw".into(),
                    ..Default::default()
                },
            ],
            ..Default::default()
        },
        dir.path(),
    )
    .unwrap();
    assert!(page.contains("<td>exponential (fallback: nothing kriged)</td>"));
    assert!(page.contains("<th>range (m)</th>"));
    assert!(page.contains("Residual kriging: not computed."));
}
