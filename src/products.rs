//! Matrix products for `f32` and `f64` through faer's kernels, behind
//! [`Real::product_into`](crate::Real::product_into).
//!
//! faer picks its kernel at run time (AVX2 or AVX-512 where the processor
//! has them) and packs into a buffer it keeps per thread. At the shapes of a
//! training step (128 x 256 by 256 x 256) it ran 1.4 to 2 times as fast on
//! one core as ndarray's matrixmultiply on two, and it allocates nothing
//! once warm; matrixmultiply allocates a packing buffer per product.
//!
//! Operands in neither row- nor column-major contiguous layout (a strided
//! block of a larger matrix) go through ndarray's `general_mat_mul`, whose
//! result is the same up to rounding.

use crate::cores::{ProductSplit, product_split};
use crate::space::Real;
use faer::linalg::matmul::matmul;
use faer::{Accum, MatMut, MatRef, Par};
use ndarray::linalg::general_mat_mul;
use ndarray::{Array2, ArrayView2, ArrayViewMut2};

/// The scalar types faer computes with, as the crate uses them.
pub(crate) trait Kernel: Real + faer::traits::ComplexField {}
impl Kernel for f32 {}
impl Kernel for f64 {}

/// `a b` into a new array, through [`Real::product_into`].
pub(crate) fn product<T: Real>(a: ArrayView2<'_, T>, b: ArrayView2<'_, T>) -> Array2<T> {
    let mut c = Array2::zeros((a.nrows(), b.ncols()));
    T::product_into(T::one(), a, b, T::zero(), c.view_mut());
    c
}

/// `c = alpha a b + beta c`; shapes were checked by the caller (as for
/// `general_mat_mul`, a mismatch panics).
pub(crate) fn product_into<T: Kernel>(
    alpha: T,
    a: ArrayView2<'_, T>,
    b: ArrayView2<'_, T>,
    beta: T,
    c: ArrayViewMut2<'_, T>,
) {
    let (m, k) = a.dim();
    let (k2, n) = b.dim();
    assert!(
        k == k2 && c.dim() == (m, n),
        "matrix product of {m}x{k} by {k2}x{n} into {:?}",
        c.dim()
    );
    if m == 0 || n == 0 {
        return;
    }
    // A column-major output is the row-major output of the transposed
    // product, c' = b' a', so only row-major outputs need handling below.
    if !c.is_standard_layout() && c.t().is_standard_layout() {
        let (a, b, c) = (b.reversed_axes(), a.reversed_axes(), c.reversed_axes());
        return product_into(alpha, a, b, beta, c);
    }
    let mut c = c;
    if c.is_standard_layout()
        && let (Some(fa), Some(fb)) = (as_faer(a), as_faer(b))
    {
        let beta = if beta == T::zero() || beta == T::one() {
            beta
        } else {
            c.mapv_inplace(|v| v * beta);
            T::one()
        };
        let out = c.into_slice().expect("a standard-layout view is one slice");
        rows_product(
            alpha,
            fa,
            fb,
            beta,
            MatMut::from_row_major_slice_mut(out, m, n),
        );
        return;
    }
    general_mat_mul(alpha, &a, &b, beta, &mut c);
}

/// The same matrix as a faer view, when it is contiguous in row- or
/// column-major order (faer's safe constructors need one slice).
fn as_faer<T>(v: ArrayView2<'_, T>) -> Option<MatRef<'_, T>> {
    let (rows, cols) = v.dim();
    if v.is_standard_layout() {
        return v
            .to_slice()
            .map(|s| MatRef::from_row_major_slice(s, rows, cols));
    }
    let t = v.reversed_axes();
    if t.is_standard_layout() {
        return t
            .to_slice()
            .map(|s| MatRef::from_column_major_slice(s, rows, cols));
    }
    None
}

/// `c = alpha a b + beta c` on faer views, beta 0 or 1; large products
/// split their output rows (and `a`'s) in halves, one per core, from the
/// size [`crate::cores`] gives for the calling thread.
fn rows_product<T: Kernel>(
    alpha: T,
    a: MatRef<'_, T>,
    b: MatRef<'_, T>,
    beta: T,
    c: MatMut<'_, T>,
) {
    let (m, k, n) = (a.nrows(), a.ncols(), b.ncols());
    rows_product_as(product_split(m, m * k * n), alpha, a, b, beta, c);
}

/// [`rows_product`] as `split` says.
fn rows_product_as<T: Kernel>(
    split: ProductSplit,
    alpha: T,
    a: MatRef<'_, T>,
    b: MatRef<'_, T>,
    beta: T,
    c: MatMut<'_, T>,
) {
    #[cfg(not(feature = "threads"))]
    let _ = split;
    #[cfg(feature = "threads")]
    if split != ProductSplit::Whole {
        let half = a.nrows() / 2;
        let (a_top, a_bottom) = a.split_at_row(half);
        let (c_top, c_bottom) = c.split_at_row_mut(half);
        // Beside a standing core, two whole halves, watched for lateness;
        // elsewhere halves that may split again.
        let whole = |a, c| rows_product_as(ProductSplit::Whole, alpha, a, b, beta, c);
        let again = |a, c| rows_product(alpha, a, b, beta, c);
        if split == ProductSplit::HalvesOnce {
            crate::cores::beside(|| whole(a_top, c_top), || whole(a_bottom, c_bottom));
        } else {
            rayon::join(|| again(a_top, c_top), || again(a_bottom, c_bottom));
        }
        return;
    }
    // faer replaces the output or adds to it (beta 0 or 1; other betas
    // were applied to the output before).
    let accum = if beta == T::zero() {
        Accum::Replace
    } else {
        Accum::Add
    };
    let large = a.nrows().max(a.ncols()).max(b.ncols()) > SMALL_KERNEL_UP_TO;
    matmul(c, accum, a, b, alpha, Par::Seq);
    if large {
        clear_vector_state();
    }
}

/// faer's products with every dimension up to this run through its small
/// kernels, which leave the vector registers clean (see
/// [`clear_vector_state`]).
const SMALL_KERNEL_UP_TO: usize = 16;

/// faer's kernels for larger products (assembly for AVX-512) return with
/// the upper halves of the vector registers still in use. Until something
/// clears them, every SSE instruction the thread runs afterwards pays a
/// transition penalty, and so does every thread it starts (they inherit the
/// state). That includes the crate's elementwise maps and the C library's
/// `sin`: a static chain of 8 `sin` stages ran at 1,500-1,900 ns per pass
/// pair after one 128 x 256 x 256 product, against 120-140 before it.
/// faer's small-product kernels are compiled code that clears the registers
/// on return, so one 8 x 8 product after each larger one restores full
/// speed (measured: back to 140 ns); it costs about as much as a few
/// hundred multiply-adds, on products of thousands or more.
fn clear_vector_state() {
    let a = [0.0_f32; 64];
    let mut c = [0.0_f32; 64];
    let a = MatRef::from_row_major_slice(&a, 8, 8);
    matmul(
        MatMut::from_row_major_slice_mut(&mut c, 8, 8),
        Accum::Replace,
        a,
        a,
        1.0,
        Par::Seq,
    );
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, Axis, ShapeBuilder, Slice};
    use proptest::prelude::*;

    /// `alpha a b + beta c` by the definition, in f64, with the bound on
    /// rounding of a k-term sum: (k + 2) eps (|alpha| |a| |b| + |beta c|).
    fn by_definition(
        alpha: f64,
        a: &Array2<f64>,
        b: &Array2<f64>,
        beta: f64,
        c: &Array2<f64>,
        eps: f64,
    ) -> (Array2<f64>, Array2<f64>) {
        let (m, k) = a.dim();
        let n = b.ncols();
        let mut value = Array2::zeros((m, n));
        let mut bound = Array2::zeros((m, n));
        for i in 0..m {
            for j in 0..n {
                let (mut sum, mut size) = (0.0, 0.0);
                for l in 0..k {
                    sum += a[[i, l]] * b[[l, j]];
                    size += (a[[i, l]] * b[[l, j]]).abs();
                }
                value[[i, j]] = alpha * sum + beta * c[[i, j]];
                bound[[i, j]] =
                    (k as f64 + 2.0) * eps * (alpha.abs() * size + (beta * c[[i, j]]).abs());
            }
        }
        (value, bound)
    }

    /// An m x n matrix with the given values, in row-major (`false`) or
    /// column-major (`true`) memory order.
    fn laid_out(values: &[f64], m: usize, n: usize, column_major: bool) -> Array2<f64> {
        let mut a = Array2::zeros((m, n).set_f(column_major));
        for ((i, j), v) in a.indexed_iter_mut() {
            *v = values[(i * n + j) % values.len()];
        }
        a
    }

    fn check<T: Kernel>(
        alpha: f64,
        a: &Array2<f64>,
        b: &Array2<f64>,
        beta: f64,
        c: &Array2<f64>,
    ) -> std::result::Result<(), TestCaseError> {
        let convert = |v: f64| T::from(v).expect("a finite f64 converts");
        let back = |v: T| v.to_f64().expect("a float converts to f64");
        let eps = back(T::epsilon());
        // Values exactly representable in T, so only the product rounds.
        let (a, b, c) = (
            a.mapv(|v| back(convert(v))),
            b.mapv(|v| back(convert(v))),
            c.mapv(|v| back(convert(v))),
        );
        let (expected, bound) = by_definition(alpha, &a, &b, beta, &c, eps);
        // Keep each operand's memory order in the converted copies.
        let keep = |x: &Array2<f64>| {
            let mut out = Array2::<T>::zeros(x.dim().set_f(!x.is_standard_layout()));
            out.zip_mut_with(x, |o, &v| *o = convert(v));
            out
        };
        let (ta, tb, mut tc) = (keep(&a), keep(&b), keep(&c));
        product_into(
            convert(alpha),
            ta.view(),
            tb.view(),
            convert(beta),
            tc.view_mut(),
        );
        for ((i, j), &v) in tc.indexed_iter() {
            let miss = (back(v) - expected[[i, j]]).abs();
            prop_assert!(
                miss <= bound[[i, j]],
                "entry ({i}, {j}): {} against {}, off by {miss:e} > {:e}",
                back(v),
                expected[[i, j]],
                bound[[i, j]]
            );
        }
        Ok(())
    }

    proptest! {
        /// Every memory order of every operand, both scalar types, and the
        /// betas faer takes directly (0, 1) and one it does not.
        #[test]
        fn equals_the_definition_in_every_layout(
            (m, k, n) in (0usize..9, 0usize..9, 0usize..9),
            orders in proptest::array::uniform3(any::<bool>()),
            values in proptest::collection::vec(-4.0f64..4.0, 1..40),
            alpha in prop_oneof![Just(1.0), Just(-0.5), -3.0f64..3.0],
            beta in prop_oneof![Just(0.0), Just(1.0), -3.0f64..3.0],
        ) {
            let a = laid_out(&values, m, k, orders[0]);
            let b = laid_out(&values[values.len() / 2..], k, n, orders[1]);
            let c = laid_out(&values[values.len() / 3..], m, n, orders[2]);
            check::<f64>(alpha, &a, &b, beta, &c)?;
            check::<f32>(alpha, &a, &b, beta, &c)?;
        }
    }

    /// Strided operands and outputs (every other row or column of a larger
    /// matrix) go through the fallback, with the same results.
    #[test]
    fn strided_views_fall_back_to_the_same_product() {
        // (`s!` allows unsafe code inside, which the crate forbids.)
        let step = |from, to, by| Slice::new(from, to, by);
        let values: Vec<f64> = (0..97).map(|i| (i as f64 * 0.37).sin()).collect();
        let big_a = laid_out(&values, 10, 14, false);
        let big_b = laid_out(&values[5..], 14, 12, true);
        let a = big_a.slice_each_axis(|d| {
            if d.axis == Axis(0) {
                step(0, None, 2)
            } else {
                step(0, Some(7), 1)
            }
        });
        let b = big_b.slice_each_axis(|d| {
            if d.axis == Axis(0) {
                step(0, Some(7), 1)
            } else {
                step(0, None, 3)
            }
        });
        let start = laid_out(&values[11..], 5, 8, false);
        let mut big_c = start.clone();
        let every_other = |d: ndarray::AxisDescription| {
            if d.axis == Axis(1) {
                step(0, None, 2)
            } else {
                step(0, None, 1)
            }
        };
        let c0 = start.slice_each_axis(every_other).to_owned();
        let (expected, bound) =
            by_definition(0.75, &a.to_owned(), &b.to_owned(), -1.5, &c0, f64::EPSILON);
        product_into(0.75, a, b, -1.5, big_c.slice_each_axis_mut(every_other));
        for ((i, j), &v) in big_c.slice_each_axis(every_other).indexed_iter() {
            assert!(
                (v - expected[[i, j]]).abs() <= bound[[i, j]],
                "entry ({i}, {j})"
            );
        }
        // The columns between were left alone.
        for ((i, j), &v) in big_c.indexed_iter() {
            if j % 2 == 1 {
                assert_eq!(
                    v,
                    start[[i, j]],
                    "entry ({i}, {j}) outside the view changed"
                );
            }
        }
    }

    /// A product large enough to split its rows over the cores gives the
    /// product of the definition (and, without the feature, runs whole).
    #[test]
    fn split_products_equal_the_definition() {
        let (m, k, n) = (256, 256, 257);
        assert!(m * k * n >= 1 << 24);
        let values: Vec<f64> = (0..1009).map(|i| (i as f64 * 0.113).cos()).collect();
        let a = laid_out(&values, m, k, false);
        let b = laid_out(&values[7..], k, n, true);
        let c = laid_out(&values[3..], m, n, false);
        check::<f64>(1.0, &a, &b, 1.0, &c).unwrap();
        check::<f32>(-2.0, &a, &b, 0.0, &c).unwrap();
    }
}
