//! Linear algebra on ndarray matrices and vectors, through ndarray's `dot`.
//!
//! Shapes are checked before any product; a mismatch is an
//! [`Error::ShapeMismatch`](crate::Error::ShapeMismatch) naming both shapes.
//! Nothing is broadcast.

use crate::combinators::{AddPair, Fst, Pair, Snd, Then};
use crate::error::{Error, Result};
use crate::map::{Compose, Linear, Map, Reverse};
use crate::space::{Real, shape_tuple};
use ndarray::{Array1, Array2, ArrayView2, Axis};

/// Matrix-vector product `(W, x) -> W x`, or `W' x` when `transposed`.
///
/// `W` has shape `(m, n)`; `x` has length `n` (`m` when transposed).
/// Reverse derivative: `(dy x', W' dy)` (and `(x dy', W dy)` when transposed),
/// built from [`Outer`] and `MatVec`.
///
/// ```
/// use revdiff::{MatVec, Map};
/// use ndarray::array;
/// let w = array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]];
/// let y = MatVec::plain().forward(&(w.clone(), array![1.0, 1.0])).unwrap();
/// assert_eq!(y, array![3.0, 7.0, 11.0]);
/// assert!(MatVec::plain().forward(&(w, array![1.0, 1.0, 1.0])).is_err());
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MatVec {
    /// Multiply by the transpose of the matrix.
    pub transposed: bool,
}

impl MatVec {
    /// `(W, x) -> W x`.
    pub fn plain() -> Self {
        MatVec { transposed: false }
    }
    /// `(W, x) -> W' x`.
    pub fn transposed() -> Self {
        MatVec { transposed: true }
    }

    fn apply<T: Real>(&self, w: &Array2<T>, x: &Array1<T>) -> Result<Array1<T>> {
        let op = if self.transposed { w.t() } else { w.view() };
        if op.ncols() != x.len() {
            return Err(Error::shape(
                "matrix-vector product (vector length must equal matrix columns)",
                format!("({},)", op.ncols()),
                format!("({},)", x.len()),
            ));
        }
        Ok(op.dot(x))
    }
}

/// Outer product `(a, b) -> a b'`, or `b a'` when `swapped`.
///
/// Reverse derivative: `(D b, D' a)` (`(D' b, D a)` when swapped), built
/// from [`MatVec`].
///
/// ```
/// use revdiff::{Map, Outer};
/// use ndarray::array;
/// let c = Outer::plain().forward(&(array![1.0, 2.0], array![3.0, 4.0, 5.0])).unwrap();
/// assert_eq!(c, array![[3.0, 4.0, 5.0], [6.0, 8.0, 10.0]]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Outer {
    /// Produce `b a'` instead of `a b'`.
    pub swapped: bool,
}

impl Outer {
    /// `(a, b) -> a b'`.
    pub fn plain() -> Self {
        Outer { swapped: false }
    }
    /// `(a, b) -> b a'`.
    pub fn swapped() -> Self {
        Outer { swapped: true }
    }
    fn apply<T: Real>(&self, a: &Array1<T>, b: &Array1<T>) -> Array2<T> {
        let (u, v) = if self.swapped { (b, a) } else { (a, b) };
        u.view()
            .insert_axis(Axis(1))
            .dot(&v.view().insert_axis(Axis(0)))
    }
}

fn oriented<T>(m: &Array2<T>, transpose: bool) -> ArrayView2<'_, T> {
    if transpose { m.t() } else { m.view() }
}

/// Matrix product of a pair of matrices with optional transposes:
/// `(A, B) -> op(X) op(Y)`, where `(X, Y)` is `(A, B)`, or `(B, A)` when
/// `swapped`, and `op` transposes where asked.
///
/// The flags make the family closed under reverse derivatives: the reverse
/// derivative of every member is a pair of members, so every order exists.
///
/// ```
/// use revdiff::{MatMul, Map};
/// use ndarray::array;
/// let a = array![[1.0, 2.0], [3.0, 4.0]];
/// let b = array![[0.0, 1.0], [1.0, 0.0]];
/// assert_eq!(MatMul::plain().forward(&(a.clone(), b.clone())).unwrap(), a.dot(&b));
/// assert_eq!(MatMul::new(true, false, false).forward(&(a.clone(), b.clone())).unwrap(), a.t().dot(&b));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MatMul {
    /// Transpose the left factor.
    pub transpose_left: bool,
    /// Transpose the right factor.
    pub transpose_right: bool,
    /// Take the pair's second matrix as the left factor.
    pub swapped: bool,
}

impl MatMul {
    /// `(A, B) -> A B`.
    pub fn plain() -> Self {
        MatMul::default()
    }
    /// `(A, B) -> op(X) op(Y)` with the given flags.
    pub fn new(transpose_left: bool, transpose_right: bool, swapped: bool) -> Self {
        MatMul {
            transpose_left,
            transpose_right,
            swapped,
        }
    }

    fn apply<T: Real>(&self, a: &Array2<T>, b: &Array2<T>) -> Result<Array2<T>> {
        let (x, y) = if self.swapped { (b, a) } else { (a, b) };
        let (l, r) = (
            oriented(x, self.transpose_left),
            oriented(y, self.transpose_right),
        );
        if l.ncols() != r.nrows() {
            return Err(Error::shape(
                "matrix product (left columns must equal right rows)",
                format!(
                    "left {} with right ({}, _)",
                    shape_tuple(l.shape()),
                    l.ncols()
                ),
                format!("right {}", shape_tuple(r.shape())),
            ));
        }
        Ok(crate::products::product(l, r))
    }

    /// The member computing the change of the left factor `X` from `(D, Y)`.
    fn grad_left(&self) -> MatMul {
        if self.transpose_left {
            MatMul::new(self.transpose_right, true, true)
        } else {
            MatMul::new(false, !self.transpose_right, false)
        }
    }

    /// The member computing the change of the right factor `Y` from `(D, X)`.
    fn grad_right(&self) -> MatMul {
        if self.transpose_right {
            MatMul::new(true, self.transpose_left, false)
        } else {
            MatMul::new(!self.transpose_left, false, true)
        }
    }

    /// The members computing the changes of `A` from `(D, B)` and of `B` from `(D, A)`.
    fn grads(&self) -> (MatMul, MatMul) {
        if self.swapped {
            (self.grad_right(), self.grad_left())
        } else {
            (self.grad_left(), self.grad_right())
        }
    }
}

/// Matrix transpose `W -> W'`, a linear map.
///
/// ```
/// use revdiff::{Map, MatrixTranspose};
/// use ndarray::array;
/// assert_eq!(MatrixTranspose.forward(&array![[1.0, 2.0]]).unwrap(), array![[1.0], [2.0]]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MatrixTranspose;

/// The affine map `((W, b), x) -> W x + b`, with `W` of shape `(m, n)`, `b`
/// of length `m` and `x` of length `n`; the weights and bias come first so
/// that the map is ready to be a parametrised map.
///
/// Reverse derivative: `((dy x', dy), W' dy)`. The forward and backward
/// passes are direct; the reverse derivative as a map is that of the equal
/// composite [`AffineComposite`].
///
/// ```
/// use revdiff::{Affine, Map};
/// use ndarray::array;
/// let w = array![[1.0, 0.0], [0.0, 2.0]];
/// let b = array![1.0, 1.0];
/// let y = Affine.forward(&((w.clone(), b.clone()), array![3.0, 4.0])).unwrap();
/// assert_eq!(y, array![4.0, 9.0]);
/// let ((dw, db), dx) = Affine.backward(&((w, b), array![3.0, 4.0]), &array![1.0, 0.0]).unwrap();
/// assert_eq!(dw, array![[3.0, 4.0], [0.0, 0.0]]);
/// assert_eq!(db, array![1.0, 0.0]);
/// assert_eq!(dx, array![1.0, 0.0]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Affine;

/// `((W, b), x) -> W x + b` written with combinators.
pub type AffineComposite =
    Then<Pair<Then<Pair<Then<Fst, Fst>, Snd>, MatVec>, Then<Fst, Snd>>, AddPair>;

/// The affine map as a composite of catalogue pieces; equal to [`Affine`].
pub fn affine_composite() -> AffineComposite {
    Fst.then(Fst)
        .pair(Snd)
        .then(MatVec::plain())
        .pair(Fst.then(Snd))
        .then(AddPair)
}

impl Compose for MatVec {}
impl Compose for Outer {}
impl Compose for MatMul {}
impl Compose for MatrixTranspose {}
impl Compose for Affine {}

impl<T: Real> Map<(Array2<T>, Array1<T>)> for MatVec {
    type Output = Array1<T>;
    type Memo = (Array2<T>, Array1<T>);
    fn forward(&self, (w, x): &(Array2<T>, Array1<T>)) -> Result<Array1<T>> {
        self.apply(w, x)
    }
    fn forward_memo(&self, input: &(Array2<T>, Array1<T>)) -> Result<(Array1<T>, Self::Memo)> {
        Ok((self.forward(input)?, input.clone()))
    }
    fn backward_memo(&self, (w, x): &Self::Memo, dy: &Array1<T>) -> Result<(Array2<T>, Array1<T>)> {
        let dx = MatVec {
            transposed: !self.transposed,
        }
        .apply(w, dy)
        .map_err(|e| e.in_output_change("matrix-vector product"))?;
        let dw = Outer {
            swapped: self.transposed,
        }
        .apply(dy, x);
        Ok((dw, dx))
    }
}

/// `((W, x), dy) -> (outer(dy, x), W' dy)`, with flags following the map's.
pub type MatVecRev =
    Pair<Then<Pair<Snd, Then<Fst, Snd>>, Outer>, Then<Pair<Then<Fst, Fst>, Snd>, MatVec>>;

impl<T: Real> Reverse<(Array2<T>, Array1<T>)> for MatVec {
    type Rev = MatVecRev;
    fn rev(&self) -> MatVecRev {
        let dw = Snd.pair(Fst.then(Snd)).then(Outer {
            swapped: self.transposed,
        });
        let dx = Fst.then(Fst).pair(Snd).then(MatVec {
            transposed: !self.transposed,
        });
        dw.pair(dx)
    }
}

impl<T: Real> Map<(Array1<T>, Array1<T>)> for Outer {
    type Output = Array2<T>;
    type Memo = (Array1<T>, Array1<T>);
    fn forward(&self, (a, b): &(Array1<T>, Array1<T>)) -> Result<Array2<T>> {
        Ok(self.apply(a, b))
    }
    fn forward_memo(&self, input: &(Array1<T>, Array1<T>)) -> Result<(Array2<T>, Self::Memo)> {
        Ok((self.forward(input)?, input.clone()))
    }
    fn backward_memo(&self, (a, b): &Self::Memo, d: &Array2<T>) -> Result<(Array1<T>, Array1<T>)> {
        let da = MatVec {
            transposed: self.swapped,
        }
        .apply(d, b)
        .map_err(|e| e.in_output_change("outer product"))?;
        let db = MatVec {
            transposed: !self.swapped,
        }
        .apply(d, a)
        .map_err(|e| e.in_output_change("outer product"))?;
        Ok((da, db))
    }
}

/// `((a, b), D) -> (D b, D' a)`, with flags following the map's.
pub type OuterRev =
    Pair<Then<Pair<Snd, Then<Fst, Snd>>, MatVec>, Then<Pair<Snd, Then<Fst, Fst>>, MatVec>>;

impl<T: Real> Reverse<(Array1<T>, Array1<T>)> for Outer {
    type Rev = OuterRev;
    fn rev(&self) -> OuterRev {
        let da = Snd.pair(Fst.then(Snd)).then(MatVec {
            transposed: self.swapped,
        });
        let db = Snd.pair(Fst.then(Fst)).then(MatVec {
            transposed: !self.swapped,
        });
        da.pair(db)
    }
}

impl<T: Real> Map<(Array2<T>, Array2<T>)> for MatMul {
    type Output = Array2<T>;
    type Memo = (Array2<T>, Array2<T>);
    fn forward(&self, (a, b): &(Array2<T>, Array2<T>)) -> Result<Array2<T>> {
        self.apply(a, b)
    }
    fn forward_memo(&self, input: &(Array2<T>, Array2<T>)) -> Result<(Array2<T>, Self::Memo)> {
        Ok((self.forward(input)?, input.clone()))
    }
    fn backward_memo(&self, (a, b): &Self::Memo, d: &Array2<T>) -> Result<(Array2<T>, Array2<T>)> {
        let (ga, gb) = self.grads();
        let wrong_change = |e: Error| e.in_output_change("matrix product");
        Ok((
            ga.apply(d, b).map_err(wrong_change)?,
            gb.apply(d, a).map_err(wrong_change)?,
        ))
    }
}

/// `((A, B), D) -> (m1(D, B), m2(D, A))` for two members `m1`, `m2` of the family.
pub type MatMulRev =
    Pair<Then<Pair<Snd, Then<Fst, Snd>>, MatMul>, Then<Pair<Snd, Then<Fst, Fst>>, MatMul>>;

impl<T: Real> Reverse<(Array2<T>, Array2<T>)> for MatMul {
    type Rev = MatMulRev;
    fn rev(&self) -> MatMulRev {
        let (ga, gb) = self.grads();
        Snd.pair(Fst.then(Snd))
            .then(ga)
            .pair(Snd.pair(Fst.then(Fst)).then(gb))
    }
}

impl<T: Real> Map<Array2<T>> for MatrixTranspose {
    type Output = Array2<T>;
    type Memo = ();
    fn forward_memo(&self, w: &Array2<T>) -> Result<(Array2<T>, ())> {
        Ok((w.t().as_standard_layout().into_owned(), ()))
    }
    fn backward_memo(&self, _: &(), dy: &Array2<T>) -> Result<Array2<T>> {
        Ok(dy.t().as_standard_layout().into_owned())
    }
}

impl<T: Real> Reverse<Array2<T>> for MatrixTranspose {
    type Rev = Then<Snd, MatrixTranspose>;
    fn rev(&self) -> Self::Rev {
        Snd.then(MatrixTranspose)
    }
}

impl<T: Real> Linear<Array2<T>> for MatrixTranspose {}

type AffineInput<T> = ((Array2<T>, Array1<T>), Array1<T>);

impl<T: Real> Map<AffineInput<T>> for Affine {
    type Output = Array1<T>;
    type Memo = (Array2<T>, Array1<T>);
    fn forward(&self, ((w, b), x): &AffineInput<T>) -> Result<Array1<T>> {
        let wx = MatVec::plain().apply(w, x)?;
        if wx.len() != b.len() {
            return Err(Error::shape(
                "affine map (bias length must equal weight rows)",
                format!("({},)", wx.len()),
                format!("({},)", b.len()),
            ));
        }
        Ok(wx + b)
    }
    fn forward_memo(&self, input: &AffineInput<T>) -> Result<(Array1<T>, Self::Memo)> {
        let y = self.forward(input)?;
        let ((w, _), x) = input;
        Ok((y, (w.clone(), x.clone())))
    }
    fn backward_memo(&self, (w, x): &Self::Memo, dy: &Array1<T>) -> Result<AffineInput<T>> {
        let dx = MatVec::transposed()
            .apply(w, dy)
            .map_err(|e| e.in_output_change("affine map"))?;
        let dw = Outer::plain().apply(dy, x);
        Ok(((dw, dy.clone()), dx))
    }
}

impl<T: Real> Reverse<AffineInput<T>> for Affine {
    type Rev = AffineReverse;
    fn rev(&self) -> AffineReverse {
        AffineReverse
    }
}

/// The reverse derivative of [`Affine`] on one vector as a map,
/// `(((W, b), x), dy) -> ((dy x', dy), W' dy)`, with direct passes: its
/// backward pass, the second derivative, sends a change `((gW, gb), gx)` to
/// `(((dy gx', 0), gW' dy), gW x + gb + W gx)` with three matrix-vector
/// products and an outer product. It equals the reverse map of the
/// composite [`AffineComposite`], through which it is differentiated again;
/// that composite's projections would copy `W` and fill zeros of its size
/// at every step.
///
/// ```
/// use revdiff::{Affine, AffineReverse, Map};
/// use ndarray::array;
/// let input = ((array![[1.0, 2.0], [3.0, 4.0]], array![0.5, 0.5]), array![1.0, -1.0]);
/// let rev = AffineReverse; // what `Affine.rev()` gives
/// let dy = array![1.0, 0.0];
/// assert_eq!(rev.forward(&(input.clone(), dy.clone()))?, Affine.backward(&input, &dy)?);
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct AffineReverse;

impl Compose for AffineReverse {}

impl<T: Real> Map<(AffineInput<T>, Array1<T>)> for AffineReverse {
    type Output = AffineInput<T>;
    /// `W`, `x` and `dy`.
    type Memo = (Array2<T>, Array1<T>, Array1<T>);
    fn forward_memo(
        &self,
        (input, dy): &(AffineInput<T>, Array1<T>),
    ) -> Result<(AffineInput<T>, Self::Memo)> {
        // The forward pass checks W, b and x against each other.
        let (y, (w, x)) = Affine.forward_memo(input)?;
        if dy.len() != y.len() {
            return Err(Error::OutputChangeShape {
                map: "affine map",
                expected: shape_tuple(y.shape()),
                found: shape_tuple(dy.shape()),
            });
        }
        let change = Affine.backward_memo(&(w, x), dy)?;
        let ((w, _), x) = input;
        Ok((change, (w.clone(), x.clone(), dy.clone())))
    }
    fn backward_memo(
        &self,
        (w, x, dy): &Self::Memo,
        ((gw, gb), gx): &AffineInput<T>,
    ) -> Result<(AffineInput<T>, Array1<T>)> {
        if gw.dim() != w.dim() || gb.len() != w.nrows() || gx.len() != w.ncols() {
            return Err(Error::OutputChangeShape {
                map: "reverse derivative of the affine map",
                expected: format!(
                    "(({}, ({},)), ({},))",
                    shape_tuple(w.shape()),
                    w.nrows(),
                    w.ncols()
                ),
                found: format!(
                    "(({}, {}), {})",
                    shape_tuple(gw.shape()),
                    shape_tuple(gb.shape()),
                    shape_tuple(gx.shape())
                ),
            });
        }
        let d_w = Outer::plain().apply(dy, gx);
        let d_x = MatVec::transposed().apply(gw, dy)?;
        let mut d_dy = MatVec::plain().apply(gw, x)?;
        d_dy.zip_mut_with(gb, |d, g| *d = *d + *g);
        d_dy.zip_mut_with(&MatVec::plain().apply(w, gx)?, |d, g| *d = *d + *g);
        Ok((((d_w, Array1::zeros(gb.len())), d_x), d_dy))
    }
}

impl<T: Real> Reverse<(AffineInput<T>, Array1<T>)> for AffineReverse {
    type Rev = <<AffineComposite as Reverse<AffineInput<T>>>::Rev as Reverse<(
        AffineInput<T>,
        Array1<T>,
    )>>::Rev;
    fn rev(&self) -> Self::Rev {
        Reverse::<(AffineInput<T>, Array1<T>)>::rev(&Reverse::<AffineInput<T>>::rev(
            &affine_composite(),
        ))
    }
}
