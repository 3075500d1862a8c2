//! Circulant-embedding fields: covariance reproduced, same statistics as a direct Cholesky
//! simulation, embedding growth and clipping.

use rand::SeedableRng;
use rand::rngs::StdRng;
use rand_distr::{Distribution, StandardNormal};
use statrs::distribution::{ContinuousCDF, FisherSnedecor};
use tidemark::spatial::field::smooth_size;
use tidemark::spatial::{CirculantField, EmbeddingSettings, Lattice, ModelKind, VariogramModel};

use super::{covariance_matrix, reference_cholesky, two_sided_p};

#[test]
fn smooth_sizes_have_only_small_prime_factors() {
    assert_eq!(smooth_size(0), 1);
    assert_eq!(smooth_size(998), 1000);
    assert_eq!(smooth_size(1001), 1024);
    assert_eq!(smooth_size(7), 8);
    assert_eq!(smooth_size(121), 125);
}

#[test]
fn simulated_fields_reproduce_their_variogram() {
    // 200 unconditioned fields (100 simulations, two fields each) on a 64 x 48 lattice with
    // unequal spacing. For each field the Matheron estimate at a fixed offset is unbiased for
    // gamma(h) (E (Z(x+h) - Z(x))^2 = 2 gamma(h) for any stationary field; Matheron 1962,
    // Cressie 1993 section 2.4), so the mean over fields must match the model within its
    // standard error. Five lags per model: 1, 2, 4, 8 and 16 nodes along x, and three models.
    // Level: two-sided 1e-4 per check, 15 checks.
    let lat = Lattice::new(64, 48, 10.0, 15.0);
    let models = [
        VariogramModel {
            kind: ModelKind::Exponential,
            nugget: 0.1,
            sill: 1.0,
            range: 150.0,
        },
        VariogramModel {
            kind: ModelKind::Spherical,
            nugget: 0.0,
            sill: 1.0,
            range: 120.0,
        },
        VariogramModel {
            kind: ModelKind::Matern32,
            nugget: 0.2,
            sill: 1.0,
            range: 100.0,
        },
    ];
    for model in models {
        let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
        assert_eq!(sim.report().negative_eigenvalues, 0, "{:?}", sim.report());
        let lags = [1usize, 2, 4, 8, 16];
        let mut est: Vec<Vec<f64>> = vec![Vec::new(); lags.len()];
        let mut ws = sim.workspace();
        let (mut a, mut b) = (vec![0.0; lat.len()], vec![0.0; lat.len()]);
        for p in 0..100u64 {
            sim.simulate_pair_into(1000 + p, &mut ws, &mut a, &mut b);
            for f in [&a, &b] {
                for (k, &lag) in lags.iter().enumerate() {
                    let mut s = 0.0;
                    let mut n = 0usize;
                    for j in 0..lat.ny {
                        for i in 0..lat.nx - lag {
                            let d = f[j * lat.nx + i + lag] - f[j * lat.nx + i];
                            s += d * d;
                            n += 1;
                        }
                    }
                    est[k].push(s / (2.0 * n as f64));
                }
            }
        }
        for (k, &lag) in lags.iter().enumerate() {
            let v = &est[k];
            let m = v.iter().sum::<f64>() / v.len() as f64;
            let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt();
            let se = sd / (v.len() as f64).sqrt();
            let target = model.gamma(lag as f64 * lat.dx);
            let p = two_sided_p((m - target) / se);
            assert!(
                p > 1e-4,
                "{:?} lag {lag}: mean {m:.4} vs model {target:.4} (se {se:.4}, p {p:.2e})",
                model.kind
            );
        }
    }
}

/// Sample variance.
fn variance(v: &[f64]) -> f64 {
    let m = v.iter().sum::<f64>() / v.len() as f64;
    v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64
}

/// Two-sided p-value of the F test of equal variances (Snedecor & Cochran 1989, section 6.12;
/// statrs 0.19 Fisher-Snedecor distribution).
fn f_test(a: &[f64], b: &[f64]) -> f64 {
    let f = variance(a) / variance(b);
    let d = FisherSnedecor::new((a.len() - 1) as f64, (b.len() - 1) as f64).unwrap();
    let c = d.cdf(f);
    2.0 * c.min(1.0 - c)
}

#[test]
fn same_statistics_as_a_direct_cholesky_simulation() {
    // A 9 x 7 lattice: fields by circulant embedding and by the Cholesky factor of the full
    // covariance matrix (smartcore 0.7), 3000 of each. Linear functionals: the block mean, a
    // contrast between two corners, and a single node. Their variances must agree between the
    // methods (F test) and with the exact value w' C w.
    let lat = Lattice::new(9, 7, 20.0, 20.0);
    let model = VariogramModel {
        kind: ModelKind::Spherical,
        nugget: 0.15,
        sill: 1.0,
        range: 90.0,
    };
    let pts: Vec<(f64, f64)> = (0..lat.len())
        .map(|v| ((v % lat.nx) as f64 * lat.dx, (v / lat.nx) as f64 * lat.dy))
        .collect();
    let c = covariance_matrix(&model, &pts);
    let l = reference_cholesky(&c);
    let n = lat.len();
    let mut weights: Vec<Vec<f64>> = vec![vec![1.0 / n as f64; n], vec![0.0; n], vec![0.0; n]];
    weights[1][0] = 1.0;
    weights[1][n - 1] = -1.0;
    weights[2][lat.nx * 3 + 4] = 1.0;
    let functional = |w: &[f64], z: &[f64]| w.iter().zip(z).map(|(a, b)| a * b).sum::<f64>();

    let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let mut fft: Vec<Vec<f64>> = vec![Vec::new(); weights.len()];
    for p in 0..1500u64 {
        let (a, b) = sim.simulate_pair(p);
        for (k, w) in weights.iter().enumerate() {
            fft[k].push(functional(w, &a));
            fft[k].push(functional(w, &b));
        }
    }
    let mut rng = StdRng::seed_from_u64(77);
    let mut direct: Vec<Vec<f64>> = vec![Vec::new(); weights.len()];
    for _ in 0..3000 {
        let e: Vec<f64> = (0..n).map(|_| StandardNormal.sample(&mut rng)).collect();
        let z: Vec<f64> = (0..n)
            .map(|i| (0..=i).map(|k| l[[i, k]] * e[k]).sum())
            .collect();
        for (k, w) in weights.iter().enumerate() {
            direct[k].push(functional(w, &z));
        }
    }
    for (k, w) in weights.iter().enumerate() {
        let p = f_test(&fft[k], &direct[k]);
        assert!(p > 1e-3, "functional {k}: F test p = {p:.2e}");
        let exact: f64 = (0..n)
            .flat_map(|a| (0..n).map(move |b| (a, b)))
            .map(|(a, b)| w[a] * c[[a, b]] * w[b])
            .sum();
        // large-sample standard error of a normal sample variance: sigma^2 sqrt(2 / (n - 1))
        let se = exact * (2.0 / (fft[k].len() - 1) as f64).sqrt();
        let pz = two_sided_p((variance(&fft[k]) - exact) / se);
        assert!(
            pz > 1e-3,
            "functional {k}: variance {} vs exact {exact}",
            variance(&fft[k])
        );
        let mean = fft[k].iter().sum::<f64>() / fft[k].len() as f64;
        let pm = two_sided_p(mean / (exact / fft[k].len() as f64).sqrt());
        assert!(pm > 1e-3, "functional {k}: mean {mean}");
    }
}

#[test]
fn embedding_grows_for_a_smooth_long_range_model_and_clips_with_a_bound() {
    // A Matern 3/2 model whose range exceeds the lattice: the smallest torus has negative
    // eigenvalues (Dietrich & Newsam 1997 discuss this case), a larger one does not.
    let lat = Lattice::new(40, 30, 10.0, 10.0);
    let model = VariogramModel {
        kind: ModelKind::Matern32,
        nugget: 0.0,
        sill: 1.0,
        range: 600.0,
    };
    let grown = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let r = grown.report();
    assert!(r.grown >= 1, "{r:?}");
    assert_eq!(r.negative_eigenvalues, 0);
    assert!(r.message.is_none());
    assert!(r.mx > smooth_size(78) && r.my > smooth_size(58));

    // not allowed to grow: negative eigenvalues are clipped and the error bound reported
    let small = EmbeddingSettings {
        max_points: smooth_size(78) * smooth_size(58),
    };
    let clipped = CirculantField::new(lat, model, small).unwrap();
    let r = clipped.report();
    assert_eq!(r.grown, 0);
    assert!(r.negative_eigenvalues > 0);
    assert!(
        r.covariance_error_bound > 0.0 && r.covariance_error_bound < 0.5,
        "{r:?}"
    );
    assert!(r.message.as_deref().unwrap().contains("set to zero"));
}

#[test]
fn fields_depend_only_on_their_seed() {
    let lat = Lattice::new(30, 20, 5.0, 5.0);
    let model = VariogramModel {
        kind: ModelKind::Exponential,
        nugget: 0.0,
        sill: 1.0,
        range: 50.0,
    };
    let sim = CirculantField::new(lat, model, EmbeddingSettings::default()).unwrap();
    let (a1, b1) = sim.simulate_pair(42);
    // a workspace that served a bigger simulator first gives the same fields
    let big = CirculantField::new(
        Lattice::new(50, 50, 5.0, 5.0),
        model,
        EmbeddingSettings::default(),
    )
    .unwrap();
    let mut ws = big.workspace();
    let (mut ba, mut bb) = (vec![0.0; 2500], vec![0.0; 2500]);
    big.simulate_pair_into(1, &mut ws, &mut ba, &mut bb);
    let (mut a2, mut b2) = (vec![0.0; lat.len()], vec![0.0; lat.len()]);
    sim.simulate_pair_into(42, &mut ws, &mut a2, &mut b2);
    assert_eq!(a1, a2);
    assert_eq!(b1, b2);
    let (a3, _) = sim.simulate_pair(43);
    assert_ne!(a1, a3);
}
