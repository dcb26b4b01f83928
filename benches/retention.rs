//! What each composition strategy costs on deep run-time chains: time per
//! gradient for chains of 10, 100 and 1,000 stages of one-element and
//! 256-wide arrays, keeping everything, recomputing from the input,
//! checkpointing every sqrt(n)-th stage and binomial checkpointing with 8
//! states. Forward passes repeated and states held are printed by the
//! `retention` example, which measures the same chains.

use criterion::{BenchmarkId, Criterion, criterion_group, criterion_main};
use ndarray::ArrayD;
use revdiff::{Chain, Retention, Sin, Tanh};
use std::hint::black_box;

fn deep_chains(c: &mut Criterion) {
    for width in [1usize, 256] {
        let mut group = c.benchmark_group(format!("retention, stages of width {width}"));
        for n in [10usize, 100, 1000] {
            let mut chain = Chain::<f64>::new(&[width]);
            for k in 0..n {
                if k % 2 == 0 {
                    chain.push_elementwise("tanh", Tanh).unwrap();
                } else {
                    chain.push_elementwise("sin", Sin).unwrap();
                }
            }
            let x = ArrayD::from_elem(vec![width], 0.3);
            let dy = ArrayD::from_elem(vec![width], 1.0);
            let every = (n as f64).sqrt().round() as usize;
            for (name, retention) in [
                ("keep all", Retention::All),
                ("input only", Retention::InputOnly),
                ("every sqrt(n)th", Retention::EveryKth(every)),
                ("binomial, 8 states", Retention::Binomial { states: 8 }),
            ] {
                chain.retaining(retention).unwrap();
                group.bench_with_input(BenchmarkId::new(name, n), &n, |b, _| {
                    b.iter(|| {
                        chain
                            .gradient_and_cost(black_box(&x), black_box(&dy))
                            .unwrap()
                    })
                });
            }
        }
        group.finish();
    }
}

criterion_group!(benches, deep_chains);
criterion_main!(benches);
