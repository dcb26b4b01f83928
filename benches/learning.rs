//! What fitting costs: the two Jacobian routes for residual maps of each
//! shape (which is why `residual_map` picks by shape), one training epoch of
//! a small two-stage model, and a Levenberg-Marquardt fit.

use criterion::{Criterion, criterion_group, criterion_main};
use ndarray::{Array1, Array2};
use revdiff::{
    Adam, Affine, Compose, Examples, LeastSquares, MatVec, MeanSquaredError, Parametrised,
    Residuals, Reverse, SubPair, Tanh, Training, constant, id, jacobian_by_backward,
    jacobian_by_forward, residual_map,
};
use std::hint::black_box;

/// p -> tanh(A p) - b with A of shape m x n, entries from a fixed formula.
fn residuals(m: usize, n: usize) -> impl Reverse<Array1<f64>, Output = Array1<f64>> {
    let a = Array2::from_shape_fn((m, n), |(i, j)| ((i * 7 + j * 3) % 11) as f64 / 11.0 - 0.5);
    let b = Array1::from_shape_fn(m, |i| (i as f64).sin() * 0.3);
    constant(a)
        .pair(id())
        .then(MatVec::plain())
        .then(Tanh)
        .pair(constant(b))
        .then(SubPair)
}

fn jacobian_routes(c: &mut Criterion) {
    let mut group = c.benchmark_group("Jacobian of p -> tanh(A p) - b");
    for (m, n) in [(4, 64), (64, 4)] {
        let r = residuals(m, n);
        let p = Array1::from_shape_fn(n, |j| (j as f64 * 0.37).cos() * 0.2);
        group.bench_function(
            format!("{m} residuals, {n} parameters: {m} backward passes"),
            |b| b.iter(|| black_box(jacobian_by_backward(&r, &p).unwrap())),
        );
        group.bench_function(
            format!("{m} residuals, {n} parameters: {n} forward passes"),
            |b| b.iter(|| black_box(jacobian_by_forward(&r, &p).unwrap())),
        );
    }
    group.finish();
}

fn training_epoch(c: &mut Criterion) {
    let rows = 256;
    let x = Array2::from_shape_fn((rows, 16), |(i, j)| {
        ((i * 5 + j * 13) % 17) as f64 / 17.0 - 0.5
    });
    let y = Array2::from_shape_fn((rows, 1), |(i, _)| x.row(i).sum().tanh());
    let data = Examples::new(x, y).unwrap();
    let model = Affine.then(Tanh).then_parametrised(Affine);
    let start = (
        (Array2::from_elem((8, 16), 0.05), Array1::zeros(8)),
        (Array2::from_elem((1, 8), 0.1), Array1::zeros(1)),
    );
    let training = Training::new(1, 32).unwrap();
    c.bench_function(
        "one epoch: 256 rows, 16 -> 8 -> 1, batches of 32, Adam",
        |b| {
            b.iter(|| {
                let mut adam = Adam::new(0.01).unwrap();
                black_box(
                    training
                        .run(
                            &model,
                            &MeanSquaredError,
                            &mut adam,
                            start.clone(),
                            &data,
                            |_| {},
                        )
                        .unwrap(),
                )
            })
        },
    );
}

fn least_squares(c: &mut Criterion) {
    let r = residual_map(residuals(40, 3));
    let start = Array1::zeros(3);
    assert!(r.residuals(&start).is_ok());
    c.bench_function("Levenberg-Marquardt: 40 residuals, 3 parameters", |b| {
        b.iter(|| {
            black_box(
                LeastSquares::levenberg_marquardt()
                    .fit(&r, start.clone())
                    .unwrap(),
            )
        })
    });
}

criterion_group!(benches, jacobian_routes, training_epoch, least_squares);
criterion_main!(benches);
