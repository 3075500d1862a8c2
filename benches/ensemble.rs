//! Ensemble engine benchmarks (criterion), sizes swept.
//!
//! - `forest_fit`: 300 trees on 200 / 2,000 / 20,000 rows of Friedman #1 (Friedman 1991; ten
//!   features, five informative), tidemark (all threads and one thread) against smartcore
//!   0.7's `RandomForestRegressor` (single-threaded), each with its default settings, and
//!   tidemark at smartcore's defaults (`tidemark_matched`: features tried per split
//!   `floor(sqrt(p)) = 3` of 10 and one row per leaf, smartcore 0.7
//!   `BaseForest::fit` / `RandomForestRegressorParameters::default`), so that the ratio
//!   compares equal work per split. The held-out R2 of every model on 5,000 fresh rows is
//!   printed once per size.
//! - `forest_predict_quantiles`: a 300-tree quantile forest trained on 200 rows predicts
//!   three quantiles (P10, P50, P90) and one exceedance probability for 100k and 1M rows.
//! - `forest_predict_mean`: point prediction of 10k rows by both engines (smartcore's
//!   prediction is too slow for the map sizes above).
//!
//! Run with `cargo bench --bench ensemble`; sample sizes are kept small (10 flat samples) so
//! the suite finishes in a few minutes.

use std::hint::black_box;
use std::time::Duration;

use criterion::{BenchmarkId, Criterion, SamplingMode, criterion_group, criterion_main};
use ndarray::{Array1, Array2, Axis};
use smartcore::ensemble::random_forest_regressor::{
    RandomForestRegressor, RandomForestRegressorParameters,
};
use tidemark::ensemble::{Forest, ForestSettings};

#[path = "support/friedman.rs"]
mod friedman;
use friedman::{friedman1, r2};

const N_TREES: usize = 300;

fn ours(x: &Array2<f64>, y: &Array1<f64>) -> Forest {
    ForestSettings {
        n_trees: N_TREES,
        seed: 1,
        ..Default::default()
    }
    .fit(x.view(), y.view().insert_axis(Axis(1)), None)
    .expect("fit")
}

/// tidemark at smartcore 0.7's default forest settings: `m = floor(sqrt(p))` features tried
/// per split (3 of Friedman #1's 10) and `min_samples_leaf = 1`, no depth limit.
fn ours_matched(x: &Array2<f64>, y: &Array1<f64>) -> Forest {
    let p = x.ncols();
    let m = (p as f64).sqrt().floor();
    ForestSettings {
        n_trees: N_TREES,
        seed: 1,
        max_features: m / p as f64,
        min_samples_leaf: 1,
        ..Default::default()
    }
    .fit(x.view(), y.view().insert_axis(Axis(1)), None)
    .expect("fit")
}

type SmartForest = RandomForestRegressor<f64, f64, Array2<f64>, Array1<f64>>;

fn theirs(x: &Array2<f64>, y: &Array1<f64>) -> SmartForest {
    let params = RandomForestRegressorParameters::default()
        .with_n_trees(N_TREES)
        .with_seed(1);
    RandomForestRegressor::fit(x, y, params).expect("fit")
}

fn one_thread() -> rayon::ThreadPool {
    rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("pool")
}

fn forest_fit(c: &mut Criterion) {
    let (xv, yv) = friedman1(5000, 1.0, 99);
    let mut group = c.benchmark_group("forest_fit");
    group
        .sample_size(10)
        .sampling_mode(SamplingMode::Flat)
        .warm_up_time(Duration::from_millis(100))
        .measurement_time(Duration::from_secs(1));
    let pool = one_thread();
    for n in [200usize, 2_000, 20_000] {
        let (x, y) = friedman1(n, 1.0, 1);
        let yv = yv.as_slice().expect("contiguous");
        let a = ours(&x, &y).predict(xv.view()).column(0).to_vec();
        let am = ours_matched(&x, &y).predict(xv.view()).column(0).to_vec();
        let b: Array1<f64> = theirs(&x, &y).predict(&xv).expect("predict");
        eprintln!(
            "forest_fit n={n}: held-out R2 tidemark {:.4} (defaults), {:.4} (matched to \
             smartcore), smartcore {:.4}",
            r2(yv, &a),
            r2(yv, &am),
            r2(yv, b.as_slice().expect("contiguous")),
        );
        group.bench_with_input(BenchmarkId::new("tidemark", n), &n, |bch, _| {
            bch.iter(|| black_box(ours(&x, &y)))
        });
        group.bench_with_input(BenchmarkId::new("tidemark_1_thread", n), &n, |bch, _| {
            bch.iter(|| pool.install(|| black_box(ours(&x, &y))))
        });
        group.bench_with_input(BenchmarkId::new("tidemark_matched", n), &n, |bch, _| {
            bch.iter(|| black_box(ours_matched(&x, &y)))
        });
        group.bench_with_input(BenchmarkId::new("smartcore", n), &n, |bch, _| {
            bch.iter(|| black_box(theirs(&x, &y)))
        });
    }
    group.finish();
}

fn forest_predict_quantiles(c: &mut Criterion) {
    let (x, y) = friedman1(200, 1.0, 1);
    let forest = ours(&x, &y);
    let mut group = c.benchmark_group("forest_predict_quantiles");
    group
        .sample_size(10)
        .sampling_mode(SamplingMode::Flat)
        .warm_up_time(Duration::from_millis(100))
        .measurement_time(Duration::from_secs(1));
    for n in [100_000usize, 1_000_000] {
        let (xq, _) = friedman1(n, 1.0, 5);
        group.bench_with_input(BenchmarkId::new("p10_p50_p90_exceed", n), &n, |bch, _| {
            bch.iter(|| {
                black_box(forest.predict_distribution(xq.view(), 0, &[0.1, 0.5, 0.9], &[15.0]))
            })
        });
    }
    group.finish();
}

fn forest_predict_mean(c: &mut Criterion) {
    let (x, y) = friedman1(200, 1.0, 1);
    let forest = ours(&x, &y);
    let smart = theirs(&x, &y);
    let (xq, _) = friedman1(10_000, 1.0, 5);
    let mut group = c.benchmark_group("forest_predict_mean");
    group
        .sample_size(10)
        .sampling_mode(SamplingMode::Flat)
        .warm_up_time(Duration::from_millis(100))
        .measurement_time(Duration::from_secs(1));
    group.bench_function(BenchmarkId::new("tidemark", 10_000), |bch| {
        bch.iter(|| black_box(forest.predict(xq.view())))
    });
    group.bench_function(BenchmarkId::new("smartcore", 10_000), |bch| {
        bch.iter(|| black_box(smart.predict(&xq).expect("predict")))
    });
    group.finish();
}

criterion_group!(
    benches,
    forest_fit,
    forest_predict_quantiles,
    forest_predict_mean
);
criterion_main!(benches);
