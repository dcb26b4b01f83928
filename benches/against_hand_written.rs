//! The library's training step and gradient against the same math written
//! by hand in ndarray (`support/hand_written.rs`), side by side in one
//! criterion group each, so that their ratio is read off one run.
//! `examples/against_hand_written.rs` prints the same comparison as a table.

#[path = "support/hand_written.rs"]
mod hand_written;

use criterion::{Criterion, criterion_group, criterion_main};
use hand_written::{BATCH, Network, Params, data, library_model, start};
use ndarray::Array2;
use revdiff::{Adam, Examples, Map, MeanSquaredError, Training};
use std::hint::black_box;

fn training_step(c: &mut Criterion) {
    let model = library_model();
    let (x, t) = data::<f64>(BATCH);
    let examples = Examples::new(x.clone(), t.clone()).unwrap();
    let p0: Params<f64> = start();
    let training = Training::new(1, BATCH).unwrap();

    let mut group = c.benchmark_group("one training step, 256-256-256-10, batch 128, f64");
    group.bench_function("library", |b| {
        b.iter(|| {
            let mut adam = Adam::new(1e-3).unwrap();
            black_box(
                training
                    .run(
                        &model,
                        &MeanSquaredError,
                        &mut adam,
                        p0.clone(),
                        &examples,
                        |_| {},
                    )
                    .unwrap(),
            )
        })
    });
    let mut net = Network::new(&p0);
    group.bench_function("hand-written", |b| {
        b.iter(|| {
            black_box(net.gradient(&x, &t));
            net.adam(1e-3);
        })
    });
    group.finish();

    let mut group = c.benchmark_group("one gradient, 256-256-256-10, batch 128, f64");
    let input = (p0.clone(), x.clone());
    group.bench_function("library", |b| {
        b.iter(|| {
            let (y, memo) =
                Map::<(Params<f64>, Array2<f64>)>::forward_memo(&model, &input).unwrap();
            let (_, lm) = MeanSquaredError.forward_memo(&(y, t.clone())).unwrap();
            let (dy, _) = MeanSquaredError.backward_memo(&lm, &1.0).unwrap();
            black_box(Map::<(Params<f64>, Array2<f64>)>::backward_memo(&model, &memo, &dy).unwrap())
        })
    });
    let mut net = Network::new(&p0);
    group.bench_function("hand-written", |b| {
        b.iter(|| black_box(net.gradient(&x, &t)))
    });
    group.finish();
}

criterion_group!(benches, training_step);
criterion_main!(benches);
