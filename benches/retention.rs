//! What each composition strategy costs on deep run-time chains: time per
//! gradient for chains of 10, 100, 1,000 and 10,000 stages of one-element and
//! 256-wide arrays, keeping everything, recomputing from the input,
//! checkpointing every sqrt(n)-th stage and binomial checkpointing with 8
//! states, registered through the crate's own helper
//! (`retention::bench_retentions`, the `criterion` feature), as a user's
//! benchmark would. The bytes each strategy holds at its peak, and the
//! forward passes it repeats, are printed before each group (they do not
//! vary from run to run); the `retention` example prints them as a table.

use criterion::{Criterion, criterion_group, criterion_main};
use ndarray::ArrayD;
use revdiff::retention::bench_retentions;
use revdiff::{Chain, Retention, Sin, Tanh};

fn deep_chains(c: &mut Criterion) {
    for width in [1usize, 256] {
        for n in [10usize, 100, 1000, 10_000] {
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
            let strategies = [
                Retention::All,
                Retention::InputOnly,
                Retention::EveryKth(every),
                Retention::Binomial { states: 8 },
            ];
            let name = format!("{n} stages of width {width}");
            for &retention in &strategies {
                let mut trial = chain.clone();
                trial.retaining(retention).unwrap();
                let (_, cost) = trial.gradient_and_cost(&x, &dy).unwrap();
                println!(
                    "{name}, {retention}: peak bytes {}, forward passes repeated {}",
                    cost.peak_bytes,
                    cost.advances + cost.recorded
                );
            }
            let mut group = c.benchmark_group(name);
            bench_retentions(&mut group, &chain, &x, &dy, &strategies).unwrap();
            group.finish();
        }
    }
}

criterion_group!(benches, deep_chains);
criterion_main!(benches);
