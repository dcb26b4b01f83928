//! What each way of composing costs: one forward-and-backward pass of the same
//! eight-stage elementwise model on 1,000-element arrays, built statically,
//! as a run-time chain (of array stages, and of per-element stages) and as
//! nested boxed maps, through the memo passes and through the reusing ones; the fast backward pass
//! against the reverse derivative evaluated as a map; and Hessian-vector
//! products against backward passes of static scalar chains.

#[path = "support/chains.rs"]
mod chains;

use chains::{double, sine_chains};
use criterion::{Criterion, criterion_group, criterion_main};
use ndarray::{Array1, ArrayD};
use revdiff::{Boxed, Chain, Compose, Map, Reverse, Sigmoid, Sin, Softplus, Tanh, Workspace};
use std::hint::black_box;

fn compositions(c: &mut Criterion) {
    let n = 1000;
    let x: Array1<f64> = Array1::linspace(-2.0, 2.0, n);
    let dy: Array1<f64> = Array1::ones(n);
    let (xd, dyd): (ArrayD<f64>, ArrayD<f64>) = (x.clone().into_dyn(), dy.clone().into_dyn());

    let model = Tanh
        .then(Sin)
        .then(Softplus)
        .then(Sigmoid)
        .then(Tanh)
        .then(Sin)
        .then(Softplus)
        .then(Sigmoid);

    let mut chain = Chain::<f64>::new(&[n]);
    for _ in 0..2 {
        chain.push_elementwise("tanh", Tanh).unwrap();
        chain.push_elementwise("sin", Sin).unwrap();
        chain.push_elementwise("softplus", Softplus).unwrap();
        chain.push_elementwise("sigmoid", Sigmoid).unwrap();
    }

    let mut per_element = Chain::<f64>::new(&[n]);
    for _ in 0..2 {
        per_element.push_per_element("tanh", Tanh).unwrap();
        per_element.push_per_element("sin", Sin).unwrap();
        per_element.push_per_element("softplus", Softplus).unwrap();
        per_element.push_per_element("sigmoid", Sigmoid).unwrap();
    }

    let mut boxed: Boxed<Array1<f64>, Array1<f64>> = Boxed::new(Tanh).unwrap();
    for i in 0..7 {
        boxed = match i % 4 {
            0 => Boxed::new(boxed.then(Sin)).unwrap(),
            1 => Boxed::new(boxed.then(Softplus)).unwrap(),
            2 => Boxed::new(boxed.then(Sigmoid)).unwrap(),
            _ => Boxed::new(boxed.then(Tanh)).unwrap(),
        };
    }

    let mut group = c.benchmark_group("eight elementwise stages, 1000 elements");
    group.bench_function("static backward", |b| {
        b.iter(|| model.backward(black_box(&x), black_box(&dy)).unwrap())
    });
    group.bench_function("run-time chain backward", |b| {
        b.iter(|| chain.backward(black_box(&xd), black_box(&dyd)).unwrap())
    });
    group.bench_function("run-time chain of per-element stages backward", |b| {
        b.iter(|| {
            per_element
                .backward(black_box(&xd), black_box(&dyd))
                .unwrap()
        })
    });
    group.bench_function("static, reusing passes", |b| {
        let (mut work, mut dx) = (Workspace::new(), x.clone());
        b.iter(|| {
            model.forward_reusing(black_box(&x), &mut work).unwrap();
            model.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
        })
    });
    for (name, chain) in [
        ("run-time chain, reusing passes", &chain),
        (
            "run-time chain of per-element stages, reusing passes",
            &per_element,
        ),
    ] {
        group.bench_function(name, |b| {
            let (mut work, mut dx) = (Workspace::new(), xd.clone());
            b.iter(|| {
                chain.forward_reusing(black_box(&xd), &mut work).unwrap();
                chain
                    .backward_reusing(&xd, &mut work, &dyd, &mut dx)
                    .unwrap();
            })
        });
    }
    group.bench_function("nested boxed backward", |b| {
        b.iter(|| boxed.backward(black_box(&x), black_box(&dy)).unwrap())
    });
    let rev = Reverse::<Array1<f64>>::rev(&model);
    let input = (x.clone(), dy.clone());
    group.bench_function("reverse derivative as a map", |b| {
        b.iter(|| rev.forward(black_box(&input)).unwrap())
    });
    group.bench_function("forward only", |b| {
        b.iter(|| model.forward(black_box(&x)).unwrap())
    });
    group.finish();
}

/// Eight sine stages on one `f64`, composed three ways: statically, as a
/// boxed map nested eight deep (which sweeps its stages; timed by its
/// one-shot and by its reusing passes), and as a run-time chain of
/// per-element stages over one-element arrays.
fn scalar_chains(c: &mut Criterion) {
    let fixed = double(double(double(Sin)));
    let mut nested: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
    for _ in 1..8 {
        nested = Boxed::new(nested.then(Sin)).unwrap();
    }
    let mut chain = Chain::<f64>::new(&[1]);
    for _ in 0..8 {
        chain.push_per_element("sin", Sin).unwrap();
    }
    let (x, xd) = (0.7_f64, ArrayD::from_elem(vec![1], 0.7));
    let mut group = c.benchmark_group("eight sine stages on one number");
    group.bench_function("static backward", |b| {
        b.iter(|| fixed.backward(black_box(&x), &1.0).unwrap())
    });
    group.bench_function("nested boxed backward", |b| {
        b.iter(|| nested.backward(black_box(&x), &1.0).unwrap())
    });
    group.bench_function("nested boxed, reusing passes", |b| {
        let (mut work, mut dx) = (Workspace::new(), 0.0);
        b.iter(|| {
            nested.forward_reusing(black_box(&x), &mut work).unwrap();
            nested
                .backward_reusing(&x, &mut work, &1.0, &mut dx)
                .unwrap();
        })
    });
    group.bench_function("run-time chain backward", |b| {
        b.iter(|| chain.backward(black_box(&xd), &xd).unwrap())
    });
    group.finish();
}

fn backward_and_hessian<F: revdiff::Reverse<f64, Output = f64>>(
    group: &mut criterion::BenchmarkGroup<'_, criterion::measurement::WallTime>,
    n: usize,
    f: &F,
) {
    let x = 0.7_f64;
    group.bench_function(format!("backward, n = {n}"), |b| {
        b.iter(|| f.backward(black_box(&x), &1.0).unwrap())
    });
    group.bench_function(format!("Hessian-vector product, n = {n}"), |b| {
        b.iter(|| revdiff::hessian_vector(f, black_box(&x), &1.0).unwrap())
    });
}

/// A Hessian-vector product against one backward pass of the same static
/// chain of scalar stages, at 10, 100 and 1,000 stages: the ratio should be
/// small and flat in depth (the comparison example prints it).
fn second_order(c: &mut Criterion) {
    let (s10, s100, s1000) = sine_chains();
    let mut group = c.benchmark_group("second order, static scalar chains");
    backward_and_hessian(&mut group, 10, &s10);
    backward_and_hessian(&mut group, 100, &s100);
    backward_and_hessian(&mut group, 1000, &s1000);
    group.finish();
}

criterion_group!(benches, compositions, scalar_chains, second_order);
criterion_main!(benches);
