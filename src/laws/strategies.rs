//! Ready proptest strategies for the inputs of common shapes.
//!
//! Each is an ordinary strategy: combine them with proptest's tuples,
//! `prop_map` and `prop_oneof!` for inputs of other shapes.
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
//! ```

use super::case::{SHRINK_EACH_UP_TO, seeded_uniform};
use ndarray::{Array1, Array2};
use proptest::prelude::*;

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
pub fn vectors(len: usize, lo: f64, hi: f64) -> impl Strategy<Value = Array1<f64>> + Clone {
    entries(len, lo, hi).prop_map(Array1::from)
}

/// `rows x cols` matrices with entries uniform in `[lo, hi)`.
pub fn matrices(
    rows: usize,
    cols: usize,
    lo: f64,
    hi: f64,
) -> impl Strategy<Value = Array2<f64>> + Clone {
    entries(rows * cols, lo, hi).prop_map(move |v| {
        Array2::from_shape_vec((rows, cols), v).expect("the length is rows * cols")
    })
}

/// Reals with `gap <= |x| < bound`, either sign: for maps with a kink or a
/// jump at 0.
pub fn nonzero(gap: f64, bound: f64) -> impl Strategy<Value = f64> + Clone {
    prop_oneof![-bound..-gap, gap..bound]
}

/// Positive reals whose logarithm is uniform in `[ln lo, ln hi)`: every
/// order of magnitude between `lo` and `hi` is drawn equally often.
pub fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> + Clone {
    (lo.ln()..hi.ln()).prop_map(f64::exp)
}

/// Vectors of length `len` with entries log-uniform in `[lo, hi)`.
pub fn positive_vectors(
    len: usize,
    lo: f64,
    hi: f64,
) -> impl Strategy<Value = Array1<f64>> + Clone {
    entries(len, lo.ln(), hi.ln()).prop_map(|v| Array1::from(v).mapv(f64::exp))
}
