//! Quantities read off the reverse derivative and the reverse derivative of
//! the reverse derivative: forward derivatives, Hessian-vector products and
//! full Jacobians.

use crate::error::{Error, Result};
use crate::map::{Map, Reverse};
use crate::space::{Euclidean, Real, Space};
use ndarray::Array2;

/// The second reverse derivative `R[R[f]]: ((A, B), A) -> (A, B)`.
///
/// ```
/// use revdiff::{second_reverse, Map, Sin};
/// // R[R[sin]](((x, dy), u)) = (-sin(x) dy u, cos(x) u)
/// let rr = second_reverse::<f64, _>(&Sin);
/// let (dx, ddy) = rr.forward(&((0.5_f64, 2.0), 3.0)).unwrap();
/// assert!((dx + 0.5_f64.sin() * 6.0).abs() < 1e-12);
/// assert!((ddy - 0.5_f64.cos() * 3.0).abs() < 1e-12);
/// ```
pub fn second_reverse<A: Space, F: Reverse<A>>(f: &F) -> <F::Rev as Reverse<(A, F::Output)>>::Rev {
    f.rev().rev()
}

/// The forward (directional) derivative `D[f](x, v)`, the Jacobian of `f` at
/// `x` applied to `v`, recovered exactly from the second reverse derivative:
/// it is the output-change component of `R[R[f]]((x, 0), v)`.
///
/// ```
/// use revdiff::{forward_derivative, Compose, Exp, Sin};
/// let f = Sin.then(Exp);
/// let x = 0.4_f64;
/// let d = forward_derivative(&f, &x, &2.0).unwrap();
/// assert!((d - x.sin().exp() * x.cos() * 2.0).abs() < 1e-12);
/// ```
pub fn forward_derivative<A: Space, F: Reverse<A>>(f: &F, x: &A, v: &A) -> Result<F::Output> {
    // A direction of another shape would pass silently through linear maps.
    x.check_same_shape(v).map_err(|_| {
        Error::shape(
            "forward derivative, its direction against the input",
            x.shape_string(),
            v.shape_string(),
        )
    })?;
    // R[R[f]]((x, 0), v) is the reverse derivative of R[f] at (x, 0) with
    // change v: one backward pass of R[f], cheaper than evaluating R[R[f]].
    // The forward pass that gives the output's shape also serves R[f].
    let rev = f.rev();
    let (y, kept) = f.forward_keeping(x)?;
    let (_, memo) = f.rev_forward_kept(&rev, x, &kept, &y.zero_like())?;
    let (_, dy) = rev.backward_memo(&memo, v)?;
    Ok(dy)
}

/// The Hessian-vector product `H(x) v` of a scalar-valued map, the first
/// component of `R[R[f]]((x, 1), v)`; exact, with no finite differences.
///
/// ```
/// use revdiff::{hessian_vector, Compose, MulPair, Map, Pair, fst, snd};
/// // f(a, b) = a b has Hessian [[0, 1], [1, 0]].
/// let f = MulPair;
/// let hv = hessian_vector(&f, &(2.0_f64, 3.0), &(1.0, 0.0)).unwrap();
/// assert_eq!(hv, (0.0, 1.0));
/// ```
pub fn hessian_vector<A, F, R>(f: &F, x: &A, v: &A) -> Result<A>
where
    A: Space,
    R: Real + Space,
    F: Reverse<A, Output = R>,
{
    // As in `forward_derivative`: a backward pass of R[f] at (x, 1).
    let (hv, _) = f.rev().backward(&(x.clone(), R::one()), v)?;
    Ok(hv)
}

/// The basis vector `e_i` shaped like `like`.
fn basis<R: Real, S: Euclidean<R>>(like: &S, i: usize) -> Result<S> {
    let mut coords = vec![R::zero(); like.dimension()];
    coords[i] = R::one();
    like.rebuild_from_coordinates(&coords)
}

/// The Jacobian of `f` at `x` as an `m x n` matrix (`m` output coordinates,
/// `n` input coordinates, in [`Euclidean`] coordinate order), by one forward
/// pass and `m` backward passes on basis vectors. Needs only [`Map`].
///
/// ```
/// use revdiff::{jacobian_by_backward, MulPair};
/// use ndarray::array;
/// let j = jacobian_by_backward(&MulPair, &(2.0_f64, 3.0)).unwrap();
/// assert_eq!(j, array![[3.0, 2.0]]);
/// ```
pub fn jacobian_by_backward<R, A, F>(f: &F, x: &A) -> Result<Array2<R>>
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let (y, memo) = f.forward_memo(x)?;
    let (m, n) = (y.dimension(), x.dimension());
    let mut j = Array2::zeros((m, n));
    for i in 0..m {
        let row = f.backward_memo(&memo, &basis(&y, i)?)?.coordinates();
        check_len(n, row.len())?;
        j.row_mut(i).assign(&ndarray::ArrayView1::from(&row[..]));
    }
    Ok(j)
}

/// The Jacobian of `f` at `x` as an `m x n` matrix, by `n` forward
/// derivatives on basis vectors, each from the second reverse derivative.
///
/// ```
/// use revdiff::{jacobian_by_forward, MulPair};
/// use ndarray::array;
/// let j = jacobian_by_forward(&MulPair, &(2.0_f64, 3.0)).unwrap();
/// assert_eq!(j, array![[3.0, 2.0]]);
/// ```
pub fn jacobian_by_forward<R, A, F>(f: &F, x: &A) -> Result<Array2<R>>
where
    R: Real,
    A: Euclidean<R>,
    F: Reverse<A>,
    F::Output: Euclidean<R>,
{
    // Columns are backward passes of R[f] at (x, 0), as in
    // `forward_derivative`; one forward pass of R[f] serves them all.
    let rev = f.rev();
    let (y, kept) = f.forward_keeping(x)?;
    let zero = y.zero_like();
    let (m, n) = (zero.dimension(), x.dimension());
    let (_, memo) = f.rev_forward_kept(&rev, x, &kept, &zero)?;
    let mut j = Array2::zeros((m, n));
    for k in 0..n {
        let (_, col) = rev.backward_memo(&memo, &basis(x, k)?)?;
        let col = col.coordinates();
        check_len(m, col.len())?;
        j.column_mut(k).assign(&ndarray::ArrayView1::from(&col[..]));
    }
    Ok(j)
}

/// The Jacobian of `f` at `x`, by backward passes when the output has no
/// more coordinates than the input and by forward derivatives otherwise.
///
/// ```
/// use revdiff::{jacobian, Compose, Sin, Cos};
/// let j = jacobian(&Sin.pair(Cos), &0.0_f64).unwrap();
/// assert_eq!(j.shape(), &[2, 1]);
/// assert_eq!(j[[0, 0]], 1.0);
/// ```
pub fn jacobian<R, A, F>(f: &F, x: &A) -> Result<Array2<R>>
where
    R: Real,
    A: Euclidean<R>,
    F: Reverse<A>,
    F::Output: Euclidean<R>,
{
    let m = f.forward(x)?.dimension();
    if m <= x.dimension() {
        jacobian_by_backward(f, x)
    } else {
        jacobian_by_forward(f, x)
    }
}

fn check_len(expected: usize, found: usize) -> Result<()> {
    if expected == found {
        Ok(())
    } else {
        Err(Error::CoordinateCount {
            operation: "assembling a Jacobian",
            expected,
            found,
        })
    }
}
