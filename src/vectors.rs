//! Elementwise loops compiled for the widest vector instructions the
//! processor offers, chosen at run time.
//!
//! The crate is built for the baseline of its target (on x86-64, SSE2:
//! four `f32` or two `f64` per instruction), so that it runs on every
//! processor of that target. Its elementwise loops (`tanh` and its slope,
//! the optimisers' updates, the finite checks, the squared errors, the
//! bias's totals) are a large part of a small network's training step; run
//! through [`widest_for`], the same loops run 8 or 16 `f32` per instruction
//! where AVX2 or AVX-512 is present. The instructions differ, the
//! arithmetic does not: each element goes through the same operations in
//! the same order (the compiler fuses no multiply-add the code does not
//! ask for, and the crate asks for none), so the results are the same bit
//! for bit whichever instructions run them (`tests/vector_loops.rs`).

/// Runs `work` compiled for the widest vector instructions of this
/// processor that `pulp` knows (AVX-512, else AVX2 and FMA, on x86-64), or
/// as it is where there are none. `work` must be inlined to profit: keep
/// it a closure over plain loops on slices.
#[inline(always)]
fn widest<R>(work: impl FnOnce() -> R) -> R {
    pulp::Arch::new().dispatch(work)
}

/// Below this many elements, choosing the instructions costs more than the
/// wider ones save.
const WIDE_FROM: usize = 32;

/// `work`, a loop over `len` elements, through [`widest`] from a few
/// vectors' worth of elements, and as it is below (a scalar parameter, a
/// one-element array).
#[inline(always)]
pub(crate) fn widest_for<R>(len: usize, work: impl FnOnce() -> R) -> R {
    if len < WIDE_FROM {
        work()
    } else {
        widest(work)
    }
}
