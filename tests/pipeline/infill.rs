//! Risked infill ranking on hand-built maps.

use tidemark::decide::{InfillSettings, RankInputs, rank_targets};
use tidemark::grid::Grid;

fn grid(nx: usize, ny: usize) -> Grid {
    Grid {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 10.0,
        dy: 10.0,
        nx,
        ny,
        rotation: 0.0,
        epsg: None,
        null_value: -999.25,
    }
}

#[test]
fn risked_volume_is_the_chance_weighted_volume_in_the_disc() {
    // 5 x 5 grid, radius 10 m: the disc of the centre node holds itself and its 4 neighbours.
    let g = grid(5, 5);
    let chance: Vec<f64> = (0..25).map(|k| if k == 12 { 0.5 } else { 1.0 }).collect();
    let volume: Vec<f64> = (0..25).map(|k| k as f64).collect();
    let inside = vec![true; 25];
    let t = rank_targets(
        &RankInputs {
            grid: &g,
            chance: &chance,
            volume: Some(&volume),
            inside: &inside,
            wells: &[],
        },
        &InfillSettings {
            drainage_radius: 10.0,
            min_well_spacing: 0.0,
            min_target_spacing: 0.0,
            count: 25,
        },
    )
    .unwrap();
    let centre = t.iter().find(|c| c.x == 1020.0 && c.y == 2020.0).unwrap();
    // By hand: 0.5 * 12 + 7 + 11 + 13 + 17 = 54.
    assert!((centre.risked_volume - 54.0).abs() < 1e-12);
    // Ranked in decreasing risked volume.
    assert!(
        t.windows(2)
            .all(|w| w[0].risked_volume >= w[1].risked_volume)
    );
}

#[test]
fn spacing_and_applicability_are_respected() {
    let g = grid(40, 40);
    let chance: Vec<f64> = (0..1600)
        .map(|k| {
            let (i, j) = ((k % 40) as f64, (k / 40) as f64);
            (-((i - 20.0).powi(2) + (j - 20.0).powi(2)) / 200.0).exp()
        })
        .collect();
    // Left half outside the area of applicability.
    let inside: Vec<bool> = (0..1600).map(|k| k % 40 >= 20).collect();
    let wells = vec![("W1".to_string(), 1000.0 + 250.0, 2000.0 + 200.0)];
    let s = InfillSettings {
        drainage_radius: 30.0,
        min_well_spacing: 60.0,
        min_target_spacing: 80.0,
        count: 6,
    };
    let t = rank_targets(
        &RankInputs {
            grid: &g,
            chance: &chance,
            volume: None,
            inside: &inside,
            wells: &wells,
        },
        &s,
    )
    .unwrap();
    assert_eq!(t.len(), 6);
    for (a, ta) in t.iter().enumerate() {
        assert!(
            ta.x >= 1000.0 + 200.0,
            "target outside the applicability area"
        );
        assert!(ta.nearest_distance >= 60.0);
        assert_eq!(ta.nearest_well, "W1");
        for tb in &t[a + 1..] {
            assert!((ta.x - tb.x).hypot(ta.y - tb.y) >= 80.0);
        }
    }
}

#[test]
fn bad_settings_are_named() {
    let g = grid(3, 3);
    let e = rank_targets(
        &RankInputs {
            grid: &g,
            chance: &[0.5; 9],
            volume: None,
            inside: &[true; 9],
            wells: &[],
        },
        &InfillSettings {
            drainage_radius: -1.0,
            min_well_spacing: 0.0,
            min_target_spacing: 0.0,
            count: 1,
        },
    )
    .unwrap_err();
    assert!(e.to_string().contains("drainage_radius"), "{e}");
}
