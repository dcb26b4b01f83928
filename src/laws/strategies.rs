//! Ready proptest strategies for the inputs of common shapes.
//!
//! Each constructor checks its settings and returns a typed error for an
//! empty input or a bad range, rather than panicking later inside proptest.
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
//! let inputs = (matrices(3, 4, -2.0, 2.0)?, vectors(4, -2.0, 2.0)?);
//! Checker::new().reverse(&MatVec::plain(), inputs).assert_clean();
//! // Positive inputs spread over six orders of magnitude.
//! Checker::new().reverse(&revdiff::Ln, log_uniform(1e-6, 1.0)?).assert_clean();
//! // The same in single precision: the checker's scalar follows the input.
//! Checker::<f32>::new().reverse(&revdiff::Tanh, vectors(5, -3.0_f32, 3.0)?).assert_clean();
//! # Ok::<(), revdiff::Error>(())
//! ```

use super::case::{SHRINK_EACH_UP_TO, seeded_uniform};
use crate::error::{Error, Result};
use crate::space::Real;
use ndarray::{Array1, Array2};
use proptest::prelude::*;

fn wide<T: Real>(x: T) -> f64 {
    x.to_f64().unwrap_or(f64::NAN)
}

fn narrow<T: Real>(x: f64) -> T {
    T::from(x).unwrap_or_else(T::nan)
}

/// `lo..hi` as a valid range of finite numbers with `lo < hi` (and `lo >=
/// least`, for ranges that must stay positive), else
/// [`Error::InvalidSetting`] naming the range.
fn checked_range(name: &'static str, lo: f64, hi: f64, least: Option<f64>) -> Result<(f64, f64)> {
    let reason = if !(lo.is_finite() && hi.is_finite()) {
        Some("the bounds of a range must be finite")
    } else if lo >= hi {
        Some("a range needs its lower bound below its upper bound")
    } else if least.is_some_and(|least| lo <= least) {
        Some("this range must lie above 0")
    } else {
        None
    };
    match reason {
        None => Ok((lo, hi)),
        Some(reason) => Err(Error::InvalidSetting {
            name,
            value: format!("{lo}..{hi}"),
            reason,
        }),
    }
}

/// A length of at least 1, else [`Error::InvalidSetting`]: a law checked
/// on an empty input checks nothing.
fn checked_length(name: &'static str, n: usize) -> Result<usize> {
    if n == 0 {
        Err(Error::InvalidSetting {
            name,
            value: "0".to_string(),
            reason: "an input needs at least one coordinate for a law check to check anything",
        })
    } else {
        Ok(n)
    }
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

/// Vectors of length `len` with entries uniform in `[lo, hi)`. A zero
/// length, or a range that is empty, reversed or not finite, is an
/// [`Error::InvalidSetting`].
pub fn vectors<T: Real>(
    len: usize,
    lo: T,
    hi: T,
) -> Result<impl Strategy<Value = Array1<T>> + Clone> {
    let len = checked_length("vector length", len)?;
    let (lo, hi) = checked_range("vector entries", wide(lo), wide(hi), None)?;
    Ok(entries(len, lo, hi).prop_map(|v| v.into_iter().map(narrow).collect()))
}

/// `rows x cols` matrices with entries uniform in `[lo, hi)`. Zero rows or
/// columns, or a range that is empty, reversed or not finite, is an
/// [`Error::InvalidSetting`].
pub fn matrices<T: Real>(
    rows: usize,
    cols: usize,
    lo: T,
    hi: T,
) -> Result<impl Strategy<Value = Array2<T>> + Clone> {
    let rows = checked_length("matrix rows", rows)?;
    let cols = checked_length("matrix columns", cols)?;
    let (lo, hi) = checked_range("matrix entries", wide(lo), wide(hi), None)?;
    Ok(entries(rows * cols, lo, hi).prop_map(move |v| {
        let v: Vec<T> = v.into_iter().map(narrow).collect();
        Array2::from_shape_vec((rows, cols), v).expect("the length is rows * cols")
    }))
}

/// Reals with `gap <= |x| < bound`, either sign: for maps with a kink or a
/// jump at 0. Needs `0 < gap < bound`, both finite, else
/// [`Error::InvalidSetting`].
pub fn nonzero<T: Real>(gap: T, bound: T) -> Result<impl Strategy<Value = T> + Clone> {
    let (gap, bound) = checked_range("nonzero gap..bound", wide(gap), wide(bound), Some(0.0))?;
    Ok(prop_oneof![-bound..-gap, gap..bound].prop_map(narrow))
}

/// Positive reals whose logarithm is uniform in `[ln lo, ln hi)`: every
/// order of magnitude between `lo` and `hi` is drawn equally often. Needs
/// `0 < lo < hi`, both finite, else [`Error::InvalidSetting`].
///
/// ```
/// use revdiff::laws::strategies::log_uniform;
/// assert!(log_uniform(1e-6, 1.0).is_ok());
/// // A reversed range is refused at once, not when drawing.
/// assert!(log_uniform(2.0, -2.0).is_err());
/// ```
pub fn log_uniform<T: Real>(lo: T, hi: T) -> Result<impl Strategy<Value = T> + Clone> {
    let (lo, hi) = checked_range("log-uniform range", wide(lo), wide(hi), Some(0.0))?;
    Ok((lo.ln()..hi.ln()).prop_map(|v| narrow(v.exp())))
}

/// Vectors of length `len` with entries log-uniform in `[lo, hi)`. Needs
/// `len > 0` and `0 < lo < hi`, both finite, else [`Error::InvalidSetting`].
pub fn positive_vectors<T: Real>(
    len: usize,
    lo: T,
    hi: T,
) -> Result<impl Strategy<Value = Array1<T>> + Clone> {
    let len = checked_length("vector length", len)?;
    let (lo, hi) = checked_range("log-uniform range", wide(lo), wide(hi), Some(0.0))?;
    Ok(entries(len, lo.ln(), hi.ln())
        .prop_map(|v| v.into_iter().map(|e| narrow(e.exp())).collect()))
}
