//! Bit-sliced circuits against one bool per example: forward and backward
//! passes of a 64-gate circuit (32 layers of an XOR and an OR gate on a pair
//! of wires) over 4,096 examples, as the library's gates on `Bits` and as a
//! hand-written loop over `bool`s; and the Moebius transform of a 20-input
//! truth table.

use criterion::{Criterion, criterion_group, criterion_main};
use revdiff::bits::{Bits, OrGate, Polynomial, XorGate};
use revdiff::{Compose, Map};
use std::hint::black_box;

const EXAMPLES: usize = 4096;
const LAYERS: usize = 32;

/// One layer by hand: `(a, b) -> (a + b, a + b + a b)`.
fn layer(a: bool, b: bool) -> (bool, bool) {
    (a ^ b, a | b)
}

/// Forward and backward through the 32 layers for one example, one bool at
/// a time, keeping each layer's input.
fn by_hand(a: bool, b: bool, da: bool, db: bool) -> (bool, bool) {
    let mut kept = [(false, false); LAYERS];
    let (mut x, mut y) = (a, b);
    for k in kept.iter_mut() {
        *k = (x, y);
        (x, y) = layer(x, y);
    }
    let (mut dx, mut dy) = (da, db);
    for &(x, y) in kept.iter().rev() {
        // XOR passes dz1 to both; OR passes (1 + y) dz2 and (1 + x) dz2.
        (dx, dy) = (dx ^ (!y & dy), dx ^ (!x & dy));
    }
    (dx, dy)
}

macro_rules! circuit {
    ($($k:tt)*) => { XorGate.pair(OrGate) $(.then({ let _ = $k; XorGate.pair(OrGate) }))* };
}

fn circuits(c: &mut Criterion) {
    // 32 layers: the first and 31 more.
    let model = circuit!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16 17 18 19 20 21 22 23 24 25 26 27 28 29 30 31);
    let a = Bits::from_fn(1, EXAMPLES, |_, e| e % 3 == 0);
    let b = Bits::from_fn(1, EXAMPLES, |_, e| e % 5 == 1);
    let change = (a.clone(), b.clone());
    let input = (a, b);
    let bools: Vec<(bool, bool)> = (0..EXAMPLES).map(|e| (e % 3 == 0, e % 5 == 1)).collect();

    let mut group = c.benchmark_group("64-gate circuit, 4096 examples, forward and backward");
    group.bench_function("bit-sliced gates", |bench| {
        bench.iter(|| {
            model
                .backward(black_box(&input), black_box(&change))
                .unwrap()
        })
    });
    group.bench_function("one bool per example, by hand", |bench| {
        bench.iter(|| {
            let mut acc = 0u32;
            for &(x, y) in black_box(&bools) {
                let (dx, dy) = by_hand(x, y, x, y);
                acc += u32::from(dx) + u32::from(dy);
            }
            acc
        })
    });
    group.finish();

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

criterion_group!(benches, circuits);
criterion_main!(benches);
