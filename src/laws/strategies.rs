//! Ready proptest strategies for the inputs of common shapes.
//!
//! Each is an ordinary strategy: combine them with proptest's tuples,
//! `prop_map` and `prop_oneof!` for inputs of other shapes. Each is generic
//! over the element type ([`f64`] or [`f32`], chosen by the bounds you pass:
//! `vectors(3, -1.0_f32, 1.0)` draws `f32` vectors). Values are drawn in
//! `f64` and rounded to the element type.
//!
//! ```
//! use revdiff::laws::strategies::{log_uniform, matrices, vectors};
//! use revdiff::laws::Checker;
//! use revdiff::{Compose, MatVec};
//!
//! // (matrix, vector) inputs for a matrix-vector product.
//! let inputs = (matrices(3, 4, -2.0, 2.0), vectors(4, -2.0, 2.0));
//! Checker::new().reverse(&MatVec::plain(), inputs).assert_clean();
//! // Positive inputs spread over six orders of magnitude.
//! Checker::new().reverse(&revdiff::Ln, log_uniform(1e-6, 1.0)).assert_clean();
//! // The same in single precision: the checker's scalar follows the input.
//! Checker::<f32>::new().reverse(&revdiff::Tanh, vectors(5, -3.0_f32, 3.0)).assert_clean();
//! ```

use super::case::{SHRINK_EACH_UP_TO, seeded_uniform};
use crate::space::Real;
use ndarray::{Array1, Array2};
use proptest::prelude::*;

fn wide<T: Real>(x: T) -> f64 {
    x.to_f64().unwrap_or(f64::NAN)
}

fn narrow<T: Real>(x: f64) -> T {
    T::from(x).unwrap_or_else(T::nan)
}

/// `n` entries uniform in `[lo, hi)`: shrinking entry by entry up to 32
/// entries, from a drawn seed above (per-entry shrinking of large arrays
/// costs far more than it tells).
fn entries(n: usize, lo: f64, hi: f64) -> BoxedStrategy<Vec<f64>> {
    if n <= SHRINK_EACH_UP_TO {
        proptest::collection::vec(lo..hi, n).boxed()
    } else {
        any::<u64>()
            .prop_map(move |seed| seeded_uniform(seed, n, lo, hi))
            .boxed()
    }
}

/// Vectors of length `len` with entries uniform in `[lo, hi)`.
pub fn vectors<T: Real>(len: usize, lo: T, hi: T) -> impl Strategy<Value = Array1<T>> + Clone {
    entries(len, wide(lo), wide(hi)).prop_map(|v| v.into_iter().map(narrow).collect())
}

/// `rows x cols` matrices with entries uniform in `[lo, hi)`.
pub fn matrices<T: Real>(
    rows: usize,
    cols: usize,
    lo: T,
    hi: T,
) -> impl Strategy<Value = Array2<T>> + Clone {
    entries(rows * cols, wide(lo), wide(hi)).prop_map(move |v| {
        let v: Vec<T> = v.into_iter().map(narrow).collect();
        Array2::from_shape_vec((rows, cols), v).expect("the length is rows * cols")
    })
}

/// Reals with `gap <= |x| < bound`, either sign: for maps with a kink or a
/// jump at 0.
pub fn nonzero<T: Real>(gap: T, bound: T) -> impl Strategy<Value = T> + Clone {
    let (gap, bound) = (wide(gap), wide(bound));
    prop_oneof![-bound..-gap, gap..bound].prop_map(narrow)
}

/// Positive reals whose logarithm is uniform in `[ln lo, ln hi)`: every
/// order of magnitude between `lo` and `hi` is drawn equally often.
pub fn log_uniform<T: Real>(lo: T, hi: T) -> impl Strategy<Value = T> + Clone {
    (wide(lo).ln()..wide(hi).ln()).prop_map(|v| narrow(v.exp()))
}

/// Vectors of length `len` with entries log-uniform in `[lo, hi)`.
pub fn positive_vectors<T: Real>(
    len: usize,
    lo: T,
    hi: T,
) -> impl Strategy<Value = Array1<T>> + Clone {
    entries(len, wide(lo).ln(), wide(hi).ln())
        .prop_map(|v| v.into_iter().map(|e| narrow(e.exp())).collect())
}
