//! What a law check costs: one 100-dimensional map checked over 256 drawn
//! cases per law, with every law at orders 1 and 2 (a map with a reverse
//! map), with the first-order laws only, and with the derivative law alone.

use criterion::{Criterion, criterion_group, criterion_main};
use revdiff::laws::strategies::vectors;
use revdiff::laws::{Checker, Law};
use revdiff::{Compose, Sin, Tanh};
use std::hint::black_box;

fn law_checks(c: &mut Criterion) {
    let map = Tanh.then(Sin);
    let checker = Checker::new().cases(256).unwrap();
    let mut group = c.benchmark_group("laws of a 100-dim map, 256 cases");
    group.sample_size(10);
    group.bench_function("every law, orders 1 and 2", |b| {
        b.iter(|| black_box(checker.reverse(&map, vectors(100, -2.0, 2.0).unwrap())).is_clean())
    });
    group.bench_function("first-order laws", |b| {
        b.iter(|| black_box(checker.map(&map, vectors(100, -2.0, 2.0).unwrap())).is_clean())
    });
    group.bench_function("derivative law alone", |b| {
        b.iter(|| {
            black_box(checker.reverse_law(
                Law::Derivative,
                1,
                &map,
                vectors(100, -2.0, 2.0).unwrap(),
            ))
            .is_clean()
        })
    });
    group.finish();
}

criterion_group!(benches, law_checks);
criterion_main!(benches);
