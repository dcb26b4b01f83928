//! Static chains of scalar sine stages, 10, 100 and 1,000 long, built by
//! doubling so that their types nest only about log n deep. Shared by
//! `benches/composition.rs` and `examples/against_hand_written.rs` through
//! `#[path]`.

#![allow(dead_code)]

use revdiff::{Compose, Reverse, Sin, Then};

/// `f` then `f`: chains of 2^k stages with a type of depth k.
pub fn double<F: Compose + Clone>(f: F) -> Then<F, F> {
    f.clone().then(f)
}

/// Chains of 10, 100 and 1,000 sine stages.
pub fn sine_chains() -> (
    impl Reverse<f64, Output = f64>,
    impl Reverse<f64, Output = f64>,
    impl Reverse<f64, Output = f64>,
) {
    let s8 = double(double(double(Sin)));
    let s32 = double(double(s8));
    let s64 = double(s32);
    let s128 = double(s64);
    let s256 = double(s128);
    let s10 = s8.then(Sin).then(Sin);
    let s100 = s64.then(s32).then(double(double(Sin)));
    let s1000 = double(s256)
        .then(s256)
        .then(s128)
        .then(s64)
        .then(s32)
        .then(s8);
    (s10, s100, s1000)
}
