//! Bit-sliced circuits against one bool per example: forward and backward
//! passes of a 64-gate circuit (32 layers of an XOR and an OR gate on a pair
//! of wires), as the library's gates on `Bits` (through their reusing
//! passes, into kept buffers; gate by gate, and the whole circuit over
//! `Word`s run word by word) and as a hand-written loop over `bool`s, at
//! 4,096 and 65,536 examples; and the Moebius transform of a 20-input
//! truth table.

#[path = "support/circuits.rs"]
mod circuits;

use circuits::{bits_pass, bools_pass, check_agreement, circuit, examples, word_by_word_circuit};
use criterion::{Criterion, criterion_group, criterion_main};
use revdiff::Workspace;
use revdiff::bits::{Bits, Polynomial};

fn gates(c: &mut Criterion) {
    let model = circuit();
    let by_words = word_by_word_circuit();
    for count in [4096, 65_536] {
        let (input, bools) = examples(count);
        check_agreement(&model, &input, &bools);
        check_agreement(&by_words, &input, &bools);
        let mut group = c.benchmark_group(format!(
            "64-gate circuit, {count} examples, forward and backward"
        ));
        let mut work = Workspace::new();
        let mut change = (Bits::zeros(1, 1), Bits::zeros(1, 1));
        group.bench_function("bit-sliced gates, gate by gate", |bench| {
            bench.iter(|| bits_pass(&model, &input, &mut work, &mut change))
        });
        let mut work = Workspace::new();
        group.bench_function("bit-sliced gates, word by word", |bench| {
            bench.iter(|| bits_pass(&by_words, &input, &mut work, &mut change))
        });
        group.bench_function("one bool per example, by hand", |bench| {
            bench.iter(|| bools_pass(&bools))
        });
        group.finish();
    }

    let mut group = c.benchmark_group("algebraic normal form");
    group.sample_size(10);
    group.bench_function("Moebius transform of a 20-input truth table", |bench| {
        bench.iter(|| {
            Polynomial::from_truth_table(20, |x| (x.wrapping_mul(0x9e37_79b9) >> 11) & 1 == 1)
                .unwrap()
        })
    });
    group.finish();
}

criterion_group!(benches, gates);
criterion_main!(benches);
