//! The library's training step and gradient against the same math written
//! by hand in ndarray (`support/hand_written.rs`), side by side in one
//! criterion group each, so that their ratio is read off one run.
//! `examples/against_hand_written.rs` prints the same comparison as a table.

#[path = "support/hand_written.rs"]
mod hand_written;

use criterion::{Criterion, criterion_group, criterion_main};
use hand_written::{
    BATCH, LibraryGradient, Network, Params, WIDTHS, data, library_model, library_training, start,
};
use revdiff::Examples;
use std::hint::black_box;

fn training_step(c: &mut Criterion) {
    let model = library_model();
    let (x, t) = data::<f64>(WIDTHS, BATCH);
    let examples = Examples::new(x.clone(), t.clone()).unwrap();
    let p0: Params<f64> = start(WIDTHS);

    let mut group = c.benchmark_group("one training step, 256-256-256-10, batch 128, f64");
    group.bench_function("library", |b| {
        b.iter(|| black_box(library_training(&model, BATCH, 1, &p0, &examples, 1e-3)))
    });
    let mut net = Network::new(&p0, BATCH);
    group.bench_function("hand-written", |b| {
        b.iter(|| {
            black_box(net.gradient(&x, &t));
            net.adam(1e-3);
        })
    });
    group.finish();

    let mut group = c.benchmark_group("one gradient, 256-256-256-10, batch 128, f64");
    let input = (p0.clone(), x.clone());
    let mut buffers = LibraryGradient::new(&p0);
    group.bench_function("library", |b| {
        b.iter(|| black_box(buffers.run(&model, &input, &t)))
    });
    let mut net = Network::new(&p0, BATCH);
    group.bench_function("hand-written", |b| {
        b.iter(|| black_box(net.gradient(&x, &t)))
    });
    group.finish();
}

criterion_group!(benches, training_step);
criterion_main!(benches);
