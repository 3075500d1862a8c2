//! Conditioning by simple kriging: well values reproduced, wells merged or left out, and the
//! conditional distribution at a node.

use std::sync::Arc;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use tidemark::spatial::{
    CirculantField, Conditioning, EmbeddingSettings, LagTable, Lattice, ModelKind, VariogramModel,
    WellScore,
};

use super::{covariance_matrix, reference_solve, two_sided_p, well};

#[test]
fn conditioned_fields_equal_the_well_values_at_well_nodes() {
    let lat = Lattice::new(40, 30, 25.0, 25.0);
    let mut rng = StdRng::seed_from_u64(3);
    let wells: Vec<WellScore> = (0..12)
        .map(|k| {
            well(
                &format!("W{k}"),
                rng.random::<f64>() * 39.0 * 25.0,
                rng.random::<f64>() * 29.0 * 25.0,
                rng.random::<f64>() * 4.0 - 2.0,
            )
        })
        .collect();
    for nugget in [0.0, 0.3] {
        let model = VariogramModel {
            kind: ModelKind::Exponential,
            nugget,
            sill: 1.0,
            range: 300.0,
        };
        let table = Arc::new(LagTable::new(lat, &model).unwrap());
        let cond = Conditioning::new("test layer", table, &wells).unwrap();
        assert!(cond.report().outside.is_empty());
        let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
        for p in 0..5 {
            let (mut a, mut b) = sim.simulate_pair(p);
            cond.apply(&mut a);
            cond.apply(&mut b);
            for ((i, j), score) in cond.data() {
                for f in [&a, &b] {
                    let v = f[j * lat.nx + i];
                    assert!(
                        (v - score).abs() < 1e-6,
                        "nugget {nugget}: node ({i}, {j}) has {v}, well score {score}"
                    );
                }
            }
        }
        // the nodes are the wells' nearest nodes, with their own scores
        let data: Vec<_> = cond.data().collect();
        assert_eq!(data.len(), wells.len());
        for (w, ((i, j), s)) in wells.iter().zip(&data) {
            assert_eq!(
                (*i, *j),
                ((w.x / 25.0).round() as usize, (w.y / 25.0).round() as usize)
            );
            assert_eq!(*s, w.score);
        }
    }
}

#[test]
fn wells_sharing_a_node_are_merged_and_wells_off_the_grid_listed() {
    let lat = Lattice::new(10, 10, 10.0, 10.0);
    let model = VariogramModel {
        kind: ModelKind::Spherical,
        nugget: 0.0,
        sill: 1.0,
        range: 40.0,
    };
    let table = Arc::new(LagTable::new(lat, &model).unwrap());
    let wells = vec![
        well("A", 31.0, 42.0, 1.0),
        well("B", 29.0, 38.0, 2.0),
        well("C", 250.0, 10.0, 0.0),
        well("D", 5.0, 90.0, -1.0),
    ];
    let cond = Conditioning::new("dSw m2", table.clone(), &wells).unwrap();
    let r = cond.report();
    assert_eq!(r.nodes_used, 2);
    assert_eq!(r.merged, vec!["A+B".to_string()]);
    assert_eq!(r.outside, vec!["C".to_string()]);
    let data: Vec<_> = cond.data().collect();
    assert_eq!(data, vec![((3, 4), 1.5), ((1, 9), -1.0)]);

    let bad = vec![well("E", f64::NAN, 1.0, 0.0)];
    let e = Conditioning::new("dSw m2", table, &bad)
        .unwrap_err()
        .to_string();
    assert!(e.contains("well E of dSw m2"), "{e}");
}

#[test]
fn conditioned_realizations_have_the_simple_kriging_distribution() {
    // At a node x0 the conditioned realizations must have mean k' C^-1 z_w and variance
    // C(0) - k' C^-1 k (simple kriging estimate and variance; Journel 1974, Journel & Huijbregts
    // 1978 section VII.C). The reference solves the kriging system with smartcore 0.7 on the
    // wells' coordinates, independently of tidemark's lag table and Cholesky factor.
    let lat = Lattice::new(24, 18, 10.0, 10.0);
    let model = VariogramModel {
        kind: ModelKind::Spherical,
        nugget: 0.1,
        sill: 1.0,
        range: 90.0,
    };
    let wells = vec![
        well("P1", 50.0, 50.0, 1.2),
        well("P2", 90.0, 60.0, -0.4),
        well("P3", 70.0, 110.0, 0.8),
        well("P4", 160.0, 80.0, -1.5),
        well("P5", 120.0, 30.0, 0.3),
        well("P6", 200.0, 150.0, 2.0),
    ];
    let table = Arc::new(LagTable::new(lat, &model).unwrap());
    let cond = Conditioning::new("dP m1", table, &wells).unwrap();
    let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let pts: Vec<(f64, f64)> = wells.iter().map(|w| (w.x, w.y)).collect();
    let c = covariance_matrix(&model, &pts);
    let z: Vec<f64> = wells.iter().map(|w| w.score).collect();
    let targets = [(7usize, 6usize), (11, 4), (3, 14)];
    let mut samples: Vec<Vec<f64>> = vec![Vec::new(); targets.len()];
    for p in 0..1500 {
        let (mut a, mut b) = sim.simulate_pair(10_000 + p);
        cond.apply(&mut a);
        cond.apply(&mut b);
        for (k, &(i, j)) in targets.iter().enumerate() {
            samples[k].push(a[j * lat.nx + i]);
            samples[k].push(b[j * lat.nx + i]);
        }
    }
    for (k, &(i, j)) in targets.iter().enumerate() {
        let x0 = (i as f64 * lat.dx, j as f64 * lat.dy);
        let kv: Vec<f64> = pts
            .iter()
            .map(|p| model.covariance((p.0 - x0.0).hypot(p.1 - x0.1)))
            .collect();
        let lambda = reference_solve(&c, &kv);
        let mean: f64 = lambda.iter().zip(&z).map(|(l, z)| l * z).sum();
        let var = model.sill - lambda.iter().zip(&kv).map(|(l, k)| l * k).sum::<f64>();
        let s = &samples[k];
        let n = s.len() as f64;
        let m = s.iter().sum::<f64>() / n;
        let v = s.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0);
        let pm = two_sided_p((m - mean) / (var / n).sqrt());
        let pv = two_sided_p((v - var) / (var * (2.0 / (n - 1.0)).sqrt()));
        assert!(
            pm > 1e-3,
            "node ({i}, {j}): mean {m} vs kriging {mean} (p {pm:.1e})"
        );
        assert!(
            pv > 1e-3,
            "node ({i}, {j}): variance {v} vs kriging {var} (p {pv:.1e})"
        );
    }
}

#[test]
fn conditioning_is_the_kriging_residual_plus_the_kriged_data() {
    // z_c = z_u + k' C^-1 (z_w - z_u(w)) = [z_u - k' C^-1 z_u(w)] + k' C^-1 z_w (linearity)
    let lat = Lattice::new(30, 25, 20.0, 20.0);
    let model = VariogramModel {
        kind: ModelKind::Matern32,
        nugget: 0.05,
        sill: 1.0,
        range: 200.0,
    };
    let table = Arc::new(LagTable::new(lat, &model).unwrap());
    let step1 = vec![well("A", 100.0, 100.0, 1.0), well("B", 400.0, 300.0, -0.5)];
    let step2 = vec![well("A", 100.0, 100.0, -0.2), well("B", 400.0, 300.0, 0.9)];
    let c1 = Conditioning::new("m1", table.clone(), &step1).unwrap();
    let c2 = Conditioning::new("m2", table.clone(), &step2).unwrap();
    assert!(c1.same_nodes(&c2));
    let other = Arc::new(LagTable::new(lat, &model).unwrap());
    assert!(!c1.same_nodes(&Conditioning::new("m1", other, &step1).unwrap()));
    let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let (z, _) = sim.simulate_pair(8);
    let mut res = z.clone();
    c1.residual(&mut res);
    for c in [&c1, &c2] {
        let mut direct = z.clone();
        c.apply(&mut direct);
        let mean = c.kriged_mean().unwrap();
        for ((d, r), m) in direct.iter().zip(&res).zip(mean) {
            assert!((d - (r + m)).abs() < 1e-12);
        }
        for ((i, j), s) in c.data() {
            assert!(res[j * lat.nx + i].abs() < 1e-8);
            assert!((mean[j * lat.nx + i] - s).abs() < 1e-8);
        }
    }
    let none = Conditioning::new("m3", table, &[]).unwrap();
    assert!(none.kriged_mean().is_none());
}
