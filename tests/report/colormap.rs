//! Colour maps against published values.

use tidemark::report::colormap::{Colormap, ColourScale, hex};

#[test]
fn viridis_matches_matplotlib_table() {
    // matplotlib _cm_listed.py, _viridis_data: first entry (0.267004, 0.004874, 0.329415) and
    // last (0.993248, 0.906157, 0.143936), published as #440154 and #fde725.
    assert_eq!(hex(Colormap::Viridis.rgb(0.0)), "#440154");
    assert_eq!(hex(Colormap::Viridis.rgb(1.0)), "#fde725");
    // matplotlib 3.11.2: colormaps["viridis"](x), channels * 255 rounded
    for (x, want) in [
        (0.1, "#482475"),
        (0.25, "#3b528b"),
        (0.5, "#21918c"),
        (0.6, "#22a884"),
        (0.75, "#5ec962"),
        (0.9, "#bddf26"),
    ] {
        assert_eq!(hex(Colormap::Viridis.rgb(x)), want, "viridis({x})");
    }
}

#[test]
fn cividis_matches_matplotlib_table() {
    // matplotlib 3.11.2: colormaps["cividis"](x), channels * 255 rounded
    for (x, want) in [
        (0.0, "#00224e"),
        (0.1, "#083370"),
        (0.25, "#434e6c"),
        (0.5, "#7d7c78"),
        (0.75, "#bcae6c"),
        (1.0, "#fee838"),
    ] {
        assert_eq!(hex(Colormap::Cividis.rgb(x)), want, "cividis({x})");
    }
}

#[test]
fn rdbu_hits_the_colorbrewer_anchors() {
    // ColorBrewer 2.0, RdBu, 11 classes (Brewer, Hatchard & Harrower 2003)
    let anchors = [
        "#67001f", "#b2182b", "#d6604d", "#f4a582", "#fddbc7", "#f7f7f7", "#d1e5f0", "#92c5de",
        "#4393c3", "#2166ac", "#053061",
    ];
    for (k, want) in anchors.iter().enumerate() {
        assert_eq!(
            hex(Colormap::RdBu.rgb(k as f64 / 10.0)),
            *want,
            "anchor {k}"
        );
    }
}

#[test]
fn rdbu_between_anchors_agrees_with_matplotlib() {
    // matplotlib 3.11.2: colormaps["RdBu"](x) (a 256-level interpolation of the same anchors),
    // channels * 255 rounded; its 256-level quantisation allows a few levels of difference.
    for (x, want) in [
        (0.25, [0xe5u8, 0x83, 0x68]),
        (0.75, [0x68, 0xab, 0xd0]),
        (0.9, [0x20, 0x65, 0xab]),
    ] {
        let got = Colormap::RdBu.rgb(x);
        for c in 0..3 {
            let d = (got[c] as i32 - want[c] as i32).abs();
            assert!(
                d <= 4,
                "RdBu({x}) channel {c}: got {got:?}, matplotlib {want:?}"
            );
        }
    }
}

/// CIE L* of an sRGB colour (IEC 61966-2-1 transfer, D65, CIE 1976 lightness).
fn lightness(c: [u8; 3]) -> f64 {
    let lin = |v: u8| {
        let v = v as f64 / 255.0;
        if v <= 0.04045 {
            v / 12.92
        } else {
            ((v + 0.055) / 1.055).powf(2.4)
        }
    };
    let y = 0.2126 * lin(c[0]) + 0.7152 * lin(c[1]) + 0.0722 * lin(c[2]);
    let f = if y > (6.0f64 / 29.0).powi(3) {
        y.cbrt()
    } else {
        y / (3.0 * (6.0f64 / 29.0).powi(2)) + 4.0 / 29.0
    };
    116.0 * f - 16.0
}

#[test]
fn sequential_maps_rise_in_lightness() {
    // viridis and cividis are designed with monotonically increasing lightness
    // (van der Walt & Smith 2015, matplotlib colormap design; Nunez et al. 2018)
    for map in [Colormap::Viridis, Colormap::Cividis] {
        let mut prev = f64::MIN;
        for k in 0..256 {
            let l = lightness(map.rgb((k as f64 + 0.5) / 256.0));
            assert!(l >= prev - 0.3, "{map:?} entry {k}: L* {l} after {prev}");
            prev = prev.max(l);
        }
        let (l0, l1) = (lightness(map.rgb(0.0)), lightness(map.rgb(1.0)));
        assert!(l1 - l0 > 60.0, "{map:?} lightness span {l0}..{l1}");
    }
}

#[test]
fn diverging_scale_is_centred_on_zero() {
    let s = ColourScale::Diverging { limit: 2.0 };
    assert_eq!(hex(s.colour(0.0).unwrap()), "#f7f7f7");
    assert_eq!(hex(s.colour(-2.0).unwrap()), "#67001f");
    assert_eq!(hex(s.colour(2.0).unwrap()), "#053061");
    // beyond the limit: clamped to the ends
    assert_eq!(s.colour(-50.0), s.colour(-2.0));
    // equal magnitudes sit at mirrored positions
    for v in [0.3, 0.9, 1.7] {
        assert!((s.position(v) - 0.5 - (0.5 - s.position(-v))).abs() < 1e-12);
    }
    assert_eq!(s.colour(f64::NAN), None);
    let from = ColourScale::diverging_from(&[-0.2, 0.5, f64::NAN, 0.1]);
    assert_eq!(from, ColourScale::Diverging { limit: 0.5 });
}

#[test]
fn sequential_and_probability_scales() {
    let s = ColourScale::Sequential {
        min: 10.0,
        max: 20.0,
    };
    assert_eq!(hex(s.colour(10.0).unwrap()), "#440154");
    assert_eq!(hex(s.colour(20.0).unwrap()), "#fde725");
    assert_eq!(hex(s.colour(15.0).unwrap()), "#21918c");
    assert_eq!(s.colour(f64::INFINITY), None);
    let p = ColourScale::Probability;
    assert_eq!(p.range(), (0.0, 1.0));
    assert_eq!(hex(p.colour(1.0).unwrap()), "#fde725");
    // a flat field still gets a drawable range
    let flat = ColourScale::sequential_from(&[3.0, 3.0, f64::NAN]);
    assert!(flat.is_valid());
    assert!(!ColourScale::Sequential { min: 1.0, max: 1.0 }.is_valid());
}
