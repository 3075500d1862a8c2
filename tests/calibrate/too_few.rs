//! Too few wells: no finite band is printed that the data cannot back.

use tidemark::calibrate::conformal::{
    BandBase, BandCalibration, BandMethod, Units, min_wells_for_band,
};

fn calibrate(n_wells: usize, level: f64) -> BandCalibration {
    // Two rows per well.
    let group: Vec<usize> = (0..n_wells).flat_map(|w| [w, w]).collect();
    let y: Vec<f64> = (0..group.len()).map(|i| (i as f64 * 0.37).sin()).collect();
    let base: Vec<BandBase> = (0..y.len())
        .map(|i| BandBase::centred(0.01 * i as f64))
        .collect();
    BandCalibration::fit(
        BandMethod::CvResidual,
        &base,
        &y,
        &Units::wells(&group),
        level,
        3,
        10,
    )
}

#[test]
fn eight_wells_cannot_back_an_80_percent_band() {
    // Split conformal (Lei et al. 2018): a finite 80 % band from a 10 %/90 % split needs
    // ceil((n+1) 0.9) <= n, i.e. n >= 9 (reference-checks, "Statistics and calibration").
    assert_eq!(min_wells_for_band(0.8), 9);
    let few = calibrate(8, 0.8);
    assert!(few.too_few_wells());
    let b = BandBase::centred(0.1);
    assert_eq!(few.apply(b, (-1.0, 1.0)), (-1.0, 0.1, 1.0));

    let enough = calibrate(9, 0.8);
    assert!(!enough.too_few_wells());
    let (lo, _, hi) = enough.apply(b, (-5.0, 5.0));
    assert!(lo > -5.0 && hi < 5.0);
    // With 9 wells the quantile is the largest score on each side: the band spans the data.
    let top = (0..18)
        .map(|i| (i as f64 * 0.37).sin() - 0.01 * i as f64)
        .fold(f64::MIN, f64::max);
    assert!((hi - (0.1 + top)).abs() < 1e-12);
}

#[test]
fn bins_merge_rather_than_go_infinite() {
    // 30 wells asked for 3 bins of at least 10 wells: finite everywhere. 12 wells: merged into
    // one finite bin instead of three infinite ones.
    let c = calibrate(30, 0.8);
    assert_eq!(c.bins.len(), 3);
    assert!(!c.too_few_wells());
    let c = calibrate(12, 0.8);
    assert_eq!(c.bins.len(), 1);
    assert!(!c.too_few_wells());
    // A 90 % band needs 19 wells per bin.
    let c = calibrate(18, 0.9);
    assert!(c.too_few_wells());
}
