//! The circuit of the bit-sliced benchmark: 32 layers of an XOR and an OR
//! gate on a pair of wires (64 gates), as the library's gates on `Bits`
//! (gate by gate, and the whole circuit over `Word`s run word by word) and
//! as a hand-written loop over one `bool` per example.
//!
//! Shared by `benches/bits.rs` and `examples/against_hand_written.rs`
//! through `#[path]`.

#![allow(dead_code)]

use revdiff::bits::{Bits, OrGate, Word, WordByWord, XorGate};
use revdiff::{Compose, Map, Workspace};
use std::hint::black_box;

/// Layers of the circuit; two gates each.
pub const LAYERS: usize = 32;

/// One layer by hand: `(a, b) -> (a + b, a + b + a b)`.
fn layer(a: bool, b: bool) -> (bool, bool) {
    (a ^ b, a | b)
}

/// Forward and backward through the layers for one example, one bool at a
/// time, keeping each layer's input.
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

/// Every example forward and backward by hand (the change is the input
/// itself); the count of ones, so that nothing is optimised away.
pub fn bools_pass(examples: &[(bool, bool)]) -> u32 {
    let mut ones = 0u32;
    for &(x, y) in black_box(examples) {
        let (dx, dy) = by_hand(x, y, x, y);
        ones += u32::from(dx) + u32::from(dy);
    }
    ones
}

macro_rules! circuit {
    ($($k:tt)*) => { XorGate.pair(OrGate) $(.then({ let _ = $k; XorGate.pair(OrGate) }))* };
}

/// The library's circuit: 32 layers, the first and 31 more.
pub fn circuit() -> impl Map<(Bits, Bits), Output = (Bits, Bits)> {
    circuit!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16 17 18 19 20 21 22 23 24 25 26 27 28 29 30 31)
}

/// The same circuit written over words and run at every word position.
pub fn word_by_word_circuit() -> impl Map<(Bits, Bits), Output = (Bits, Bits)> {
    fn over_words() -> impl Map<(Word, Word), Output = (Word, Word)> {
        circuit!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16 17 18 19 20 21 22 23 24 25 26 27 28 29 30 31)
    }
    WordByWord::new(over_words())
}

/// The same examples both ways: bit-sliced wires and one pair of bools each.
pub fn examples(count: usize) -> ((Bits, Bits), Vec<(bool, bool)>) {
    let a = |e: usize| e.is_multiple_of(3);
    let b = |e: usize| e % 5 == 1;
    let bits = (
        Bits::from_fn(1, count, |_, e| a(e)),
        Bits::from_fn(1, count, |_, e| b(e)),
    );
    (bits, (0..count).map(|e| (a(e), b(e))).collect())
}

/// Forward and backward through the library's reusing passes into kept
/// buffers (the change is the input itself).
pub fn bits_pass<M: Map<(Bits, Bits), Output = (Bits, Bits)>>(
    model: &M,
    input: &(Bits, Bits),
    work: &mut Workspace,
    change: &mut (Bits, Bits),
) {
    model.forward_reusing(black_box(input), work).unwrap();
    model.backward_reusing(input, work, input, change).unwrap();
    black_box(&*change);
}

/// Both ways agree on every example: checked, not assumed.
pub fn check_agreement<M: Map<(Bits, Bits), Output = (Bits, Bits)>>(
    model: &M,
    input: &(Bits, Bits),
    bools: &[(bool, bool)],
) {
    let mut work = Workspace::new();
    let mut change = (Bits::zeros(1, 1), Bits::zeros(1, 1));
    bits_pass(model, input, &mut work, &mut change);
    for (e, &(x, y)) in bools.iter().enumerate() {
        let expected = by_hand(x, y, x, y);
        assert_eq!(
            (change.0.get(0, e), change.1.get(0, e)),
            expected,
            "example {e}"
        );
    }
}
