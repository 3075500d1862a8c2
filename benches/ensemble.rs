//! Ensemble benchmarks (placeholder until the engine issue lands).
use criterion::{Criterion, criterion_group, criterion_main};
fn placeholder(_c: &mut Criterion) {}
criterion_group!(benches, placeholder);
criterion_main!(benches);
