//! Reason codes and the ground check on constructed cases worked by hand.

use ndarray::Array2;
use tidemark::applicability::{
    Applicability, GROUND_MARKED, GROUND_UNLIKE, Ground, REASON_BOTH, REASON_INSIDE, REASON_MARKED,
    REASON_NO_DATA, REASON_RANGE, REASON_UNLIKE, matrix, well_spacing,
};

#[test]
fn each_flag_says_why() {
    // One feature, training points 0, 0.1, 10, 10.1, each its own fold (Meyer & Pebesma 2021:
    // DI = nearest distance / mean pairwise distance; threshold = upper whisker of the training
    // DI). Pairwise distances 0.1, 10, 10.1, 9.9, 10, 0.1: mean 6.7. Every training DI is
    // 0.1 / 6.7, so the threshold is 0.1 / 6.7 = 0.0149.
    let names = vec!["a".to_string()];
    let x = matrix(&[vec![0.0], vec![0.1], vec![10.0], vec![10.1]]);
    let aoa = Applicability::fit(&names, x.view(), &[1.0], &[0, 1, 2, 3], &[true]).unwrap();
    assert!((aoa.threshold - 0.1 / 6.7).abs() < 1e-12);
    // 10.05: DI 0.05 / 6.7, inside. 5: DI 4.9 / 6.7 = 0.73, within the range: unlike every well.
    // -0.05: DI 0.05 / 6.7 but below the range. 12: DI 1.9 / 6.7 and above the range: both.
    let q = matrix(&[
        vec![10.05],
        vec![5.0],
        vec![-0.05],
        vec![12.0],
        vec![f64::NAN],
    ]);
    let a = aoa.assess(q.view());
    let codes = aoa.reasons(&a, None);
    assert_eq!(
        codes,
        vec![
            REASON_INSIDE,
            REASON_UNLIKE,
            REASON_RANGE,
            REASON_BOTH,
            REASON_NO_DATA
        ]
    );
    // Without the ground check, inside exactly where the code is 0.
    for (c, inside) in codes.iter().zip(&a.inside) {
        assert_eq!(*c == REASON_INSIDE, *inside);
    }
    // A ground flag turns an inside row into "unlike every well" and leaves the others' reasons.
    let u = GROUND_UNLIKE;
    let codes = aoa.reasons(&a, Some(&[u, 0, u, 0, u]));
    assert_eq!(
        codes,
        vec![
            REASON_UNLIKE,
            REASON_UNLIKE,
            REASON_BOTH,
            REASON_BOTH,
            REASON_NO_DATA
        ]
    );
    // The user's mark adds its bit to whatever the data say (4-7), never to a node without data.
    let m = GROUND_MARKED;
    let codes = aoa.reasons(&a, Some(&[m, m, m, m | u, m]));
    assert_eq!(
        codes,
        vec![
            REASON_MARKED,
            REASON_UNLIKE | REASON_MARKED,
            REASON_RANGE | REASON_MARKED,
            REASON_BOTH | REASON_MARKED,
            REASON_NO_DATA
        ]
    );
    assert_eq!(REASON_MARKED, 4);
}

#[test]
fn ground_check_by_hand() {
    // Four wells 100 m apart on a line: every nearest neighbour is 100 m, so the spacing is 100.
    let wells = [[0.0, 0.0], [100.0, 0.0], [200.0, 0.0], [300.0, 0.0]];
    assert_eq!(well_spacing(&wells), 100.0);
    // Histories (two columns) 0, 1, 2, 3 on both: after standardising (sd s) the wells are
    // sqrt(2)/s apart per unit, the mean pairwise distance is (1+2+3+1+2+1)/6 sqrt(2)/s
    // = (10/6) sqrt(2)/s, so a history k units from its nearest well has h = k / (10/6).
    let h = Array2::from_shape_vec((4, 2), vec![0.0, 0.0, 1.0, 1.0, 2.0, 2.0, 3.0, 3.0]).unwrap();
    let ground = Ground::fit(&wells, h.view(), &[0, 1, 0, 1]).unwrap();
    // Cross-validation: each well's nearest well in the other fold is 100 m (g = 1) and one unit
    // away (h = 0.6): score 1 * 0.6^2 = 0.36 for all four, the threshold.
    for s in &ground.train_score {
        assert!((s - 0.36).abs() < 1e-12, "{s}");
    }
    assert!((ground.threshold - 0.36).abs() < 1e-12);
    // Node 1: 700 m beyond the last well (g = 7), history 10 (7 units from 3: h = 4.2),
    // score 7 * 4.2^2 = 123.48: flagged. Node 2: next to a well with that well's history: 0.
    // Node 3: far (g = 10) but like a well (h = 0): not flagged. Node 4: a missing value.
    let nodes = [[1000.0, 0.0], [100.0, 50.0], [0.0, 1000.0], [0.0, 0.0]];
    let q = Array2::from_shape_vec((4, 2), vec![10.0, 10.0, 1.0, 1.0, 2.0, 2.0, f64::NAN, 0.0])
        .unwrap();
    let a = ground.assess(&nodes, q.view());
    assert!((a.distance[0] - 7.0).abs() < 1e-12);
    assert!((a.dissimilarity[0] - 4.2).abs() < 1e-12);
    assert!((a.score[0] - 123.48).abs() < 1e-9);
    assert!((a.distance[2] - 10.0).abs() < 1e-12 && a.score[2] == 0.0);
    assert!(a.dissimilarity[3].is_nan());
    assert_eq!(a.unlike, vec![true, false, false, false]);
    // Wrong lengths are errors.
    assert!(Ground::fit(&wells[..3], h.view(), &[0, 1, 0]).is_err());
}

#[test]
fn range_tolerance_widens_the_range_by_a_share_of_its_width() {
    // Training values 0, 0.1, 10, 10.1 (width 10.1). With a tolerance of 0.1 the range check
    // starts at -1.01 and 11.11: -0.05 (outside the plain range) is inside it, -2 is not; 12 is
    // beyond both. Threshold as in `each_flag_says_why` (0.1 / 6.7).
    let names = vec!["a".to_string()];
    let x = matrix(&[vec![0.0], vec![0.1], vec![10.0], vec![10.1]]);
    let aoa = Applicability::fit(&names, x.view(), &[1.0], &[0, 1, 2, 3], &[true])
        .unwrap()
        .with_range_margin(0.1);
    let q = matrix(&[vec![-0.05], vec![-2.0], vec![11.0], vec![12.0]]);
    let a = aoa.assess(q.view());
    assert_eq!(a.outside_range, vec![0, 1, 0, 1]);
    // -0.05: DI 0.05 / 6.7, inside. -2: DI 2 / 6.7 above the threshold and beyond the widened
    // range. 11: DI 0.9 / 6.7, unlike but within the widened range. 12: both.
    assert_eq!(
        aoa.reasons(&a, None),
        vec![REASON_INSIDE, REASON_BOTH, REASON_UNLIKE, REASON_BOTH]
    );
    // Negative or undefined tolerances mean the plain range.
    assert_eq!(aoa.clone().with_range_margin(-1.0).range_margin, 0.0);
    assert_eq!(aoa.with_range_margin(f64::NAN).range_margin, 0.0);
}
