//! Spaces: the values that maps act on.
//!
//! A [`Space`] has a zero shaped like any of its values and an addition; that
//! is all the algebra of reverse derivatives needs, and it holds over the
//! reals and over the two-element field alike. The real-number parts live in
//! separate traits: [`Scalable`] for multiplication by a scalar, [`Euclidean`]
//! for inner products and coordinates (what checkers, Jacobians and finite
//! differences need), and [`Pointwise`] for values whose elements can be
//! mapped one by one (what the elementwise primitives need).
//!
//! Implemented for `f32`, `f64`, fixed-size arrays `[T; N]`, owned ndarray
//! arrays of any dimension, `()` (the terminal space: one value, no
//! coordinates) and tuples of two, three and four spaces.
//!
//! Arrays of different shapes are never broadcast: adding them returns
//! [`Error::ShapeMismatch`] naming both shapes.
//!
//! ```
//! use revdiff::{Euclidean, Space};
//! use ndarray::array;
//!
//! let a = (array![1.0, 2.0], 3.0_f64);
//! let b = (array![0.5, 0.5], -1.0);
//! assert_eq!(a.try_add(&b).unwrap(), (array![1.5, 2.5], 2.0));
//! assert_eq!(a.inner(&b).unwrap(), 1.5 - 3.0);
//! assert_eq!(a.zero_like(), (array![0.0, 0.0], 0.0));
//! assert!(array![1.0, 2.0].try_add(&array![1.0]).is_err());
//! ```

use crate::error::{Error, Result};
use ndarray::{Array, ArrayView2, ArrayViewMut2, Dimension, ScalarOperand, Zip};
use num_traits::Float;
use std::fmt::{Debug, Display, LowerExp};

/// The real scalar types the crate computes with: `f32` and `f64`.
///
/// A shorthand for the bounds that real elements need: a num-traits
/// [`Float`] that is also a one-dimensional space.
pub trait Real:
    Float
    + ScalarOperand
    + Debug
    + Display
    + LowerExp
    + Send
    + Sync
    + 'static
    + Euclidean<Self>
    + Pointwise<Elem = Self>
{
    /// The hyperbolic tangent as the crate's maps compute it ([`Tanh`],
    /// [`SechSquared`]). For `f32` and `f64` it is branch-free, so loops
    /// over arrays vectorise (over a 128 x 256 batch, about 7 times
    /// faster than the C library's `tanh` for `f32`, 1.5 times for `f64`),
    /// and within 4 units in the last place
    /// (ulps) of the correctly rounded value for `f32`, and of the C
    /// library's for `f64` (tested over sweeps of every binade). The
    /// default is [`Float::tanh`].
    ///
    /// [`Tanh`]: crate::Tanh
    /// [`SechSquared`]: crate::SechSquared
    ///
    /// ```
    /// use revdiff::Real;
    /// let t = Real::vector_tanh(0.5_f64);
    /// assert!((t - 0.5_f64.tanh()).abs() <= 4.0 * f64::EPSILON);
    /// ```
    #[inline]
    fn vector_tanh(self) -> Self {
        Float::tanh(self)
    }

    /// The matrix product `c = alpha a b + beta c`, as the crate's batched
    /// maps compute it ([`Affine`] on a batch, [`Layers`]).
    ///
    /// For `f32` and `f64` it runs faer's kernels, chosen at run time for
    /// the processor, with no allocation once warm: at the shapes of a
    /// 256-wide training step, 1.4 to 2 times as fast as ndarray's
    /// `general_mat_mul`. With the `threads` feature, products of 2^24
    /// multiply-adds or more split their rows over the cores (and rayon
    /// then allocates now and then, about once in 20 products). Operands
    /// that are not contiguous in row- or column-major order fall back to
    /// `general_mat_mul`. The default is `general_mat_mul`.
    ///
    /// A fused layer of your own can call it for its products.
    ///
    /// # Panics
    ///
    /// If the shapes disagree (`a` is m x k, `b` k x n, `c` m x n), as
    /// `general_mat_mul` does: check them where your map checks its input.
    ///
    /// [`Affine`]: crate::Affine
    /// [`Layers`]: crate::learning::Layers
    ///
    /// ```
    /// use revdiff::Real;
    /// use revdiff::ndarray::{array, Array2};
    /// let a = array![[1.0_f64, 2.0], [3.0, 4.0]];
    /// let b = array![[5.0, 6.0], [7.0, 8.0]];
    /// let mut c = Array2::<f64>::ones((2, 2));
    /// // c = a b' + 2 c, with b' read in place (column-major).
    /// f64::product_into(1.0, a.view(), b.t(), 2.0, c.view_mut());
    /// assert_eq!(c, array![[19.0, 25.0], [41.0, 55.0]]);
    /// ```
    fn product_into(
        alpha: Self,
        a: ArrayView2<'_, Self>,
        b: ArrayView2<'_, Self>,
        beta: Self,
        c: ArrayViewMut2<'_, Self>,
    ) {
        let mut c = c;
        ndarray::linalg::general_mat_mul(alpha, &a, &b, beta, &mut c);
    }
}

/// `f32` and `f64`: the vectorised `tanh` of their width, and faer's
/// products.
macro_rules! machine_real {
    ($t:ty, $tanh:path) => {
        impl Real for $t {
            #[inline]
            fn vector_tanh(self) -> Self {
                $tanh(self)
            }
            fn product_into(
                alpha: Self,
                a: ArrayView2<'_, Self>,
                b: ArrayView2<'_, Self>,
                beta: Self,
                c: ArrayViewMut2<'_, Self>,
            ) {
                crate::products::product_into(alpha, a, b, beta, c);
            }
        }
    };
}
machine_real!(f32, crate::primitives::elementary::tanh_f32);
machine_real!(f64, crate::primitives::elementary::tanh_f64);

/// A commutative monoid of values, with a zero shaped like any given value.
///
/// This is the only structure a map's input and output need. It asks for no
/// scalar field, so spaces over bits fit as well as spaces over the reals.
///
/// # Example
///
/// A user space of polynomials with a fixed number of coefficients:
///
/// ```
/// use revdiff::{Error, Result, Space};
///
/// #[derive(Clone, Debug, PartialEq)]
/// struct Coefficients(Vec<f64>);
///
/// impl Space for Coefficients {
///     type Shape = usize;
///     fn shape(&self) -> usize {
///         self.0.len()
///     }
///     fn zero_of(len: &usize) -> Self {
///         Coefficients(vec![0.0; *len])
///     }
///     fn try_add(&self, other: &Self) -> Result<Self> {
///         if self.0.len() != other.0.len() {
///             return Err(Error::shape("adding coefficients", self.shape_string(), other.shape_string()));
///         }
///         Ok(Coefficients(self.0.iter().zip(&other.0).map(|(a, b)| a + b).collect()))
///     }
///     fn shape_string(&self) -> String {
///         format!("({},)", self.0.len())
///     }
/// }
///
/// let p = Coefficients(vec![1.0, 2.0]);
/// assert_eq!(p.try_add(&p).unwrap(), Coefficients(vec![2.0, 4.0]));
/// assert!(p.try_add(&Coefficients(vec![1.0])).is_err());
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` is not a space that maps act on",
    label = "not a `revdiff::Space`",
    note = "spaces are `f32`, `f64`, ndarray arrays of them, fixed-size arrays, `()` and tuples of spaces; a type of your own needs `impl Space`"
)]
pub trait Space: Clone + Debug + 'static {
    /// What a zero needs to know about a value: its array dimensions, the
    /// shapes of a tuple's parts, nothing for a scalar. Cheap to keep, so
    /// that a backward pass can make zeros without keeping whole values.
    type Shape: Clone + Debug + 'static;

    /// The shape of `self`.
    fn shape(&self) -> Self::Shape;

    /// The additive identity of the given shape.
    fn zero_of(shape: &Self::Shape) -> Self;

    /// The additive identity with the same shape as `self`.
    fn zero_like(&self) -> Self {
        Self::zero_of(&self.shape())
    }

    /// `self + other`; an error if the shapes differ.
    fn try_add(&self, other: &Self) -> Result<Self>;

    /// `self += other`; an error (and `self` unchanged) if the shapes differ.
    fn try_add_assign(&mut self, other: &Self) -> Result<()> {
        *self = self.try_add(other)?;
        Ok(())
    }

    /// `Ok` if `other` has the shape of `self`, else the error that adding
    /// them would give. The default tries the sum; the crate's spaces
    /// compare shapes without computing anything.
    fn check_same_shape(&self, other: &Self) -> Result<()> {
        self.try_add(other).map(|_| ())
    }

    /// Overwrites `self` with `other`, in `self`'s memory where the shapes
    /// agree (the crate's spaces do; the default clones). For reusing
    /// passes that keep a copy of a value in a buffer.
    fn assign_from(&mut self, other: &Self) {
        *self = other.clone();
    }

    /// The shape, printed for error messages: `scalar`, `(3, 4)`, `((2,), scalar)`.
    fn shape_string(&self) -> String;

    /// The value, printed for people: `1.5`, `[1, 2]`, `(0.5, [[1, 0], [0, 1]])`.
    /// Arrays print their elements only (no strides or memory layout); the
    /// default is the `Debug` form, which suits small user types.
    fn value_string(&self) -> String {
        format!("{self:?}")
    }
}

/// Multiplication of a space's values by scalars of type `S`.
pub trait Scalable<S>: Space {
    /// `s * self`.
    fn scale(&self, s: S) -> Self;
}

/// What [`Euclidean::zip_runs_mut`] calls for each run: the flat position
/// of the run's first coordinate, the run of `self` and the run of `other`.
pub type RunVisitor<'v, R> = dyn FnMut(usize, &mut [R], &[R]) + 'v;

/// A real space with an inner product and a flat list of coordinates.
///
/// Coordinates are listed in a fixed order (tuple components left to right,
/// array elements in logical row-major order); the Jacobian's rows and
/// columns follow it.
///
/// ```
/// use revdiff::Euclidean;
/// use ndarray::array;
///
/// let x = (2.0_f64, array![[1.0, 2.0], [3.0, 4.0]]);
/// assert_eq!(x.dimension(), 5);
/// assert_eq!(x.coordinates(), vec![2.0, 1.0, 2.0, 3.0, 4.0]);
/// let y = x.rebuild_from_coordinates(&[0.0, 1.0, 1.0, 1.0, 1.0]).unwrap();
/// assert_eq!(y, (0.0, array![[1.0, 1.0], [1.0, 1.0]]));
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` is not a real space with coordinates over `{R}`",
    label = "needs `Euclidean<{R}>`: parameters, gradients and Jacobians are read as flat lists of `{R}`",
    note = "`f32`, `f64`, arrays of them, fixed-size arrays and tuples of these are Euclidean; mixing `f32` and `f64` in one value is not"
)]
pub trait Euclidean<R: Real>: Scalable<R> {
    /// The inner product `<self, other>`; an error if the shapes differ.
    fn inner(&self, other: &Self) -> Result<R>;

    /// Number of real coordinates.
    fn dimension(&self) -> usize;

    /// Appends the coordinates to `out`.
    fn write_coordinates(&self, out: &mut Vec<R>);

    /// Builds a value shaped like `self` from the front of `coords`,
    /// advancing the slice past what it used.
    fn read_coordinates(&self, coords: &mut &[R]) -> Result<Self>;

    /// The coordinates as a vector.
    fn coordinates(&self) -> Vec<R> {
        let mut out = Vec::with_capacity(self.dimension());
        self.write_coordinates(&mut out);
        out
    }

    /// Builds a value shaped like `self` from exactly `self.dimension()` coordinates.
    fn rebuild_from_coordinates(&self, coords: &[R]) -> Result<Self> {
        if coords.len() != self.dimension() {
            return Err(Error::CoordinateCount {
                operation: "building a value from coordinates",
                expected: self.dimension(),
                found: coords.len(),
            });
        }
        let mut rest = coords;
        self.read_coordinates(&mut rest)
    }

    /// Whether every coordinate is finite.
    fn all_finite(&self) -> bool {
        self.coordinates().iter().all(|c| c.is_finite())
    }

    /// Walks the coordinates of `self` (mutably) and of `other` together, in
    /// coordinate order and in runs that are contiguous in both: `visit`
    /// gets the flat position of each run's first coordinate (counted from
    /// `offset`) and the two runs. Returns the position after the last run.
    /// The shapes must agree, or nothing is visited and the result is an
    /// error.
    ///
    /// This is how optimisers update parameters in place, with no flat
    /// copies. The default goes through flat copies (correct for any space);
    /// the crate's spaces visit their own memory.
    fn zip_runs_mut(
        &mut self,
        other: &Self,
        offset: usize,
        visit: &mut RunVisitor<'_, R>,
    ) -> Result<usize> {
        let mut mine = self.coordinates();
        let theirs = other.coordinates();
        if mine.len() != theirs.len() {
            return Err(Error::CoordinateCount {
                operation: "walking two values together",
                expected: mine.len(),
                found: theirs.len(),
            });
        }
        visit(offset, &mut mine, &theirs);
        *self = self.rebuild_from_coordinates(&mine)?;
        Ok(offset + theirs.len())
    }

    /// Overwrites `self` with `other`, reusing `self`'s memory. The shapes
    /// must agree.
    fn copy_from(&mut self, other: &Self) -> Result<()> {
        self.zip_runs_mut(other, 0, &mut |_, a, b| a.copy_from_slice(b))?;
        Ok(())
    }

    /// The squared Euclidean norm `<self, self>`.
    fn norm_squared(&self) -> R {
        self.inner(self).unwrap_or_else(|_| R::nan())
    }
}

/// A real space whose values are collections of scalar elements that can be
/// transformed one by one; the elementwise primitives act on any of them.
pub trait Pointwise: Euclidean<Self::Elem> {
    /// The element type.
    type Elem: Real;

    /// Applies `f` to every element.
    fn map_elems(&self, f: impl Fn(Self::Elem) -> Self::Elem + Sync + Send) -> Self;

    /// Combines two values of the same shape element by element; `operation`
    /// names the caller in the error when the shapes differ.
    fn zip_elems(
        &self,
        other: &Self,
        operation: &'static str,
        f: impl Fn(Self::Elem, Self::Elem) -> Self::Elem + Sync + Send,
    ) -> Result<Self>;

    /// [`map_elems`](Pointwise::map_elems) written into `out`, in its
    /// memory when it has `self`'s shape (else `out` is replaced).
    fn map_elems_into(&self, out: &mut Self, f: impl Fn(Self::Elem) -> Self::Elem + Sync + Send) {
        *out = self.map_elems(f);
    }

    /// Applies `f`, which gives two values per element, and returns the
    /// two results: a function and its slope computed in one pass where
    /// they share work (a sine and a cosine, an exponential).
    ///
    /// The default calls `f` twice per element; the crate's spaces call it
    /// once.
    fn map_elems_two(
        &self,
        f: impl Fn(Self::Elem) -> (Self::Elem, Self::Elem) + Sync + Send,
    ) -> (Self, Self) {
        (self.map_elems(|v| f(v).0), self.map_elems(|v| f(v).1))
    }

    /// [`map_elems_two`](Pointwise::map_elems_two) written into `first`
    /// and `second`, in their memory when they have `self`'s shape (else
    /// they are replaced).
    fn map_elems_two_into(
        &self,
        first: &mut Self,
        second: &mut Self,
        f: impl Fn(Self::Elem) -> (Self::Elem, Self::Elem) + Sync + Send,
    ) {
        (*first, *second) = self.map_elems_two(f);
    }

    /// [`zip_elems`](Pointwise::zip_elems) added to `out`, which must have
    /// `self`'s shape: how an elementwise map adds its input change to one
    /// already there ([`Map::backward_reusing_adding`](crate::Map::backward_reusing_adding)).
    /// The default adds a new value; the crate's spaces add in one pass.
    fn zip_elems_adding(
        &self,
        other: &Self,
        out: &mut Self,
        operation: &'static str,
        f: impl Fn(Self::Elem, Self::Elem) -> Self::Elem + Sync + Send,
    ) -> Result<()> {
        let change = self.zip_elems(other, operation, f)?;
        out.try_add_assign(&change)
    }

    /// [`zip_elems`](Pointwise::zip_elems) written into `out`, in its
    /// memory when it has `self`'s shape (else `out` is replaced).
    fn zip_elems_into(
        &self,
        other: &Self,
        out: &mut Self,
        operation: &'static str,
        f: impl Fn(Self::Elem, Self::Elem) -> Self::Elem + Sync + Send,
    ) -> Result<()> {
        *out = self.zip_elems(other, operation, f)?;
        Ok(())
    }
}

macro_rules! real_scalar_space {
    ($($t:ty),*) => {$(
        impl Space for $t {
            type Shape = ();
            fn shape(&self) {}
            fn zero_of(_: &()) -> Self {
                0.0
            }
            fn try_add(&self, other: &Self) -> Result<Self> {
                Ok(self + other)
            }
            fn shape_string(&self) -> String {
                "scalar".to_string()
            }
            fn check_same_shape(&self, _: &Self) -> Result<()> {
                Ok(())
            }
        }
        impl Scalable<$t> for $t {
            fn scale(&self, s: $t) -> Self {
                s * self
            }
        }
        impl Euclidean<$t> for $t {
            fn inner(&self, other: &Self) -> Result<$t> {
                Ok(self * other)
            }
            fn dimension(&self) -> usize {
                1
            }
            fn write_coordinates(&self, out: &mut Vec<$t>) {
                out.push(*self);
            }
            fn read_coordinates(&self, coords: &mut &[$t]) -> Result<Self> {
                let (first, rest) = coords.split_first().ok_or_else(|| Error::CoordinateCount {
                    operation: "reading a scalar from coordinates",
                    expected: 1,
                    found: 0,
                })?;
                *coords = rest;
                Ok(*first)
            }
            fn all_finite(&self) -> bool {
                self.is_finite()
            }
            fn zip_runs_mut(
                &mut self,
                other: &Self,
                offset: usize,
                visit: &mut RunVisitor<'_, $t>,
            ) -> Result<usize> {
                visit(offset, std::slice::from_mut(self), std::slice::from_ref(other));
                Ok(offset + 1)
            }
        }
        impl Pointwise for $t {
            type Elem = $t;
            fn map_elems(&self, f: impl Fn($t) -> $t + Sync + Send) -> Self {
                f(*self)
            }
            fn zip_elems(&self, other: &Self, _: &'static str, f: impl Fn($t, $t) -> $t + Sync + Send) -> Result<Self> {
                Ok(f(*self, *other))
            }
            fn map_elems_two(&self, f: impl Fn($t) -> ($t, $t) + Sync + Send) -> (Self, Self) {
                f(*self)
            }
            fn zip_elems_adding(&self, other: &Self, out: &mut Self, _: &'static str, f: impl Fn($t, $t) -> $t + Sync + Send) -> Result<()> {
                *out += f(*self, *other);
                Ok(())
            }
        }
    )*};
}
real_scalar_space!(f32, f64);

/// Prints an ndarray shape as a tuple: `(3, 4)`, `(5,)`, `()`.
pub(crate) fn shape_tuple(shape: &[usize]) -> String {
    match shape {
        [n] => format!("({n},)"),
        _ => {
            let parts: Vec<String> = shape.iter().map(|n| n.to_string()).collect();
            format!("({})", parts.join(", "))
        }
    }
}

/// Whether two shapes are equal, compared inline: a slice comparison calls
/// `memcmp`, which for the one to four dimensions of a shape costs more
/// than the comparison (a tenth of a run-time chain's time on one-element
/// arrays).
#[inline]
pub(crate) fn dims_equal(a: &[usize], b: &[usize]) -> bool {
    // No early exit, so that it is not turned back into a `memcmp` call.
    a.len() == b.len() && a.iter().zip(b).fold(true, |same, (x, y)| same & (x == y))
}

#[inline]
pub(crate) fn same_shape<T, D: Dimension + 'static>(
    operation: &'static str,
    a: &Array<T, D>,
    b: &Array<T, D>,
) -> Result<()> {
    if dims_equal(a.shape(), b.shape()) {
        Ok(())
    } else {
        Err(shapes_differ(operation, a.shape(), b.shape()))
    }
}

#[cold]
fn shapes_differ(operation: &'static str, a: &[usize], b: &[usize]) -> Error {
    Error::shape(operation, shape_tuple(a), shape_tuple(b))
}

/// The one value of a one-element array (the stages of a run-time chain
/// of scalar maps), read without ndarray's layout check, which on an array
/// of dynamic dimension costs more than the map itself.
#[inline]
fn single<T: Copy, D: Dimension>(a: &Array<T, D>) -> Option<T> {
    if a.len() == 1 {
        a.first().copied()
    } else {
        None
    }
}

/// Runs `each` over contiguous slices of `len` elements (`parts`, one or
/// several of that length): in two halves on two cores where the length
/// calls for it (see [`crate::cores`]), and, from a few vectors' worth of
/// elements, compiled for the processor's widest vector instructions
/// ([`crate::vectors`]). Every element is computed as it would be alone,
/// so neither choice changes a result.
#[inline]
fn over_slices<K: crate::cores::Halves>(len: usize, parts: K, each: impl Fn(K) + Sync) {
    crate::cores::over_halves(
        len,
        parts,
        &|k| crate::vectors::widest_for(len, || each(k)),
        |(), ()| (),
    )
}

/// Updates every element of `out` by `update` from the elements of `a`
/// and `b` at the same place (the caller checked that the three shapes
/// agree), through the fastest path their layouts allow: one element,
/// three slices, or a `Zip` (split across cores when large).
#[inline]
fn update_from_two<T: Real, D: Dimension>(
    out: &mut Array<T, D>,
    a: &Array<T, D>,
    b: &Array<T, D>,
    update: impl Fn(&mut T, T, T) + Sync + Send,
) {
    if let (Some(x), Some(y), Some(o)) = (single(a), single(b), out.first_mut()) {
        update(o, x, y);
        return;
    }
    if let (Some(o), Some(x), Some(y)) = (out.as_slice_mut(), a.as_slice(), b.as_slice()) {
        over_slices(o.len(), (o, (x, y)), |(o, (x, y))| {
            o.iter_mut()
                .zip(x.iter().zip(y))
                .for_each(|(o, (&x, &y))| update(o, x, y))
        });
        return;
    }
    let zip = Zip::from(out).and(a).and(b);
    #[cfg(feature = "threads")]
    if split_across_cores(a.len()) {
        zip.par_for_each(|o, &x, &y| update(o, x, y));
        return;
    }
    zip.for_each(|o, &x, &y| update(o, x, y));
}

impl<T: Real, D: Dimension + 'static> Space for Array<T, D> {
    type Shape = D;
    fn shape(&self) -> D {
        self.raw_dim()
    }
    fn zero_of(shape: &D) -> Self {
        Array::zeros(shape.clone())
    }
    fn try_add(&self, other: &Self) -> Result<Self> {
        same_shape("adding arrays", self, other)?;
        Ok(self + other)
    }
    fn try_add_assign(&mut self, other: &Self) -> Result<()> {
        same_shape("adding arrays", self, other)?;
        self.zip_mut_with(other, |a, b| *a = *a + *b);
        Ok(())
    }
    fn assign_from(&mut self, other: &Self) {
        if dims_equal(self.shape(), other.shape()) {
            self.assign(other);
        } else {
            *self = other.clone();
        }
    }
    fn shape_string(&self) -> String {
        shape_tuple(self.shape())
    }
    fn check_same_shape(&self, other: &Self) -> Result<()> {
        same_shape("adding arrays", self, other)
    }
    fn value_string(&self) -> String {
        // ndarray's Display nests rows over lines; one line reads better in
        // messages and tables.
        self.to_string()
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ")
    }
}

impl<T: Real, D: Dimension + 'static> Scalable<T> for Array<T, D> {
    fn scale(&self, s: T) -> Self {
        self * s
    }
}

impl<T: Real, D: Dimension + 'static> Euclidean<T> for Array<T, D> {
    fn inner(&self, other: &Self) -> Result<T> {
        same_shape("inner product of arrays", self, other)?;
        Ok(self
            .iter()
            .zip(other.iter())
            .fold(T::zero(), |acc, (a, b)| acc + *a * *b))
    }
    fn dimension(&self) -> usize {
        self.len()
    }
    fn write_coordinates(&self, out: &mut Vec<T>) {
        out.extend(self.iter().copied());
    }
    fn read_coordinates(&self, coords: &mut &[T]) -> Result<Self> {
        let n = self.len();
        if coords.len() < n {
            return Err(Error::CoordinateCount {
                operation: "reading an array from coordinates",
                expected: n,
                found: coords.len(),
            });
        }
        let (head, rest) = coords.split_at(n);
        *coords = rest;
        Array::from_shape_vec(self.raw_dim(), head.to_vec())
            .map_err(|e| Error::shape("reading an array from coordinates", self.shape_string(), e))
    }
    fn all_finite(&self) -> bool {
        match self.as_slice_memory_order() {
            Some(values) => all_finite_slice(values),
            None => self.iter().all(|v| v.is_finite()),
        }
    }
    fn zip_runs_mut(
        &mut self,
        other: &Self,
        offset: usize,
        visit: &mut RunVisitor<'_, T>,
    ) -> Result<usize> {
        same_shape("walking two arrays together", self, other)?;
        let n = self.len();
        match (self.as_slice_mut(), other.as_slice()) {
            (Some(a), Some(b)) => visit(offset, a, b),
            // Not both in standard layout: one coordinate at a time, still
            // in logical row-major order.
            _ => {
                for (i, (a, b)) in self.iter_mut().zip(other.iter()).enumerate() {
                    visit(offset + i, std::slice::from_mut(a), std::slice::from_ref(b));
                }
            }
        }
        Ok(offset + n)
    }
}

/// Whether every value is finite, in blocks whose test has no early exit,
/// so that the compiler can vectorise it (the training loop runs it over
/// every gradient and every set of parameters).
pub(crate) fn all_finite_slice<T: Real>(values: &[T]) -> bool {
    // `v - v` is 0 for a finite `v` and NaN for an infinity or a NaN: two
    // vector instructions per lane group, where `is_finite` takes four
    // (checks of gradients were a tenth of a small network's step).
    #[allow(clippy::eq_op)]
    let check = |values: &[T]| {
        crate::vectors::widest_for(values.len(), || {
            values.chunks(256).all(|block| {
                block
                    .iter()
                    .fold(true, |ok, &v| ok & ((v - v) == T::zero()))
            })
        })
    };
    if crate::cores::standing_by() {
        return crate::cores::over_halves(values.len(), values, &check, |a, b| a & b);
    }
    check(values)
}

/// Whether an elementwise map over `len` elements splits across cores
/// (see [`crate::cores`]).
#[cfg(feature = "threads")]
#[inline]
pub(crate) fn split_across_cores(len: usize) -> bool {
    crate::cores::split_elements(len)
}

impl<T: Real, D: Dimension + 'static> Pointwise for Array<T, D> {
    type Elem = T;
    fn map_elems(&self, f: impl Fn(T) -> T + Sync + Send) -> Self {
        // Contiguous (the crate's own outputs): a copy of `self`, mapped in
        // place through the slice loop.
        if self.as_slice_memory_order().is_some() {
            let mut out = self.clone();
            if let Some(o) = out.as_slice_memory_order_mut() {
                over_slices(o.len(), o, |o| o.iter_mut().for_each(|v| *v = f(*v)));
                return out;
            }
        }
        #[cfg(feature = "threads")]
        if split_across_cores(self.len()) {
            return Zip::from(self).par_map_collect(|&v| f(v));
        }
        self.mapv(f)
    }
    fn zip_elems(
        &self,
        other: &Self,
        operation: &'static str,
        f: impl Fn(T, T) -> T + Sync + Send,
    ) -> Result<Self> {
        same_shape(operation, self, other)?;
        // Both in standard layout: a copy of `self` overwritten in place,
        // without the setup of a `Zip`, which dominates for small arrays.
        if self.is_standard_layout() && other.is_standard_layout() {
            let mut out = self.clone();
            if let (Some(o), Some(b)) = (out.as_slice_mut(), other.as_slice()) {
                over_slices(o.len(), (o, b), |(o, b)| {
                    o.iter_mut().zip(b).for_each(|(o, &b)| *o = f(*o, b))
                });
                return Ok(out);
            }
        }
        #[cfg(feature = "threads")]
        if split_across_cores(self.len()) {
            return Ok(Zip::from(self).and(other).par_map_collect(|&a, &b| f(a, b)));
        }
        Ok(Zip::from(self).and(other).map_collect(|&a, &b| f(a, b)))
    }
    fn map_elems_into(&self, out: &mut Self, f: impl Fn(T) -> T + Sync + Send) {
        if !dims_equal(out.shape(), self.shape()) {
            *out = self.map_elems(f);
            return;
        }
        if let (Some(v), Some(o)) = (single(self), out.first_mut()) {
            *o = f(v);
            return;
        }
        // Both in standard layout (as the crate's own outputs are): plain
        // slices, without the per-call setup of a `Zip`, which dominates for
        // small arrays.
        if let (Some(o), Some(a)) = (out.as_slice_mut(), self.as_slice()) {
            over_slices(o.len(), (o, a), |(o, a)| {
                o.iter_mut().zip(a).for_each(|(o, &v)| *o = f(v))
            });
            return;
        }
        let zip = Zip::from(out).and(self);
        #[cfg(feature = "threads")]
        if split_across_cores(self.len()) {
            zip.par_for_each(|o, &v| *o = f(v));
            return;
        }
        zip.for_each(|o, &v| *o = f(v));
    }
    fn map_elems_two(&self, f: impl Fn(T) -> (T, T) + Sync + Send) -> (Self, Self) {
        // Contiguous (the crate's own outputs): two copies of `self`,
        // overwritten in place. A copy costs less than building an array
        // from a shape, which for small arrays of dynamic dimension costs
        // more than the map.
        if self.as_slice_memory_order().is_some() {
            let (mut first, mut second) = (self.clone(), self.clone());
            if let (Some(a), Some(b)) = (
                first.as_slice_memory_order_mut(),
                second.as_slice_memory_order_mut(),
            ) {
                over_slices(a.len(), (a, b), |(a, b)| {
                    a.iter_mut().zip(b).for_each(|(a, b)| (*a, *b) = f(*a))
                });
                return (first, second);
            }
        }
        let (mut first, mut second) = (Array::zeros(self.raw_dim()), Array::zeros(self.raw_dim()));
        // Same shapes now, so this does not come back here.
        self.map_elems_two_into(&mut first, &mut second, f);
        (first, second)
    }
    fn map_elems_two_into(
        &self,
        first: &mut Self,
        second: &mut Self,
        f: impl Fn(T) -> (T, T) + Sync + Send,
    ) {
        if !dims_equal(first.shape(), self.shape()) || !dims_equal(second.shape(), self.shape()) {
            (*first, *second) = self.map_elems_two(f);
            return;
        }
        if let Some(v) = single(self) {
            let both = f(v);
            // The shapes agree, so each holds one element too.
            if let (Some(a), Some(b)) = (first.first_mut(), second.first_mut()) {
                (*a, *b) = both;
            }
            return;
        }
        if let (Some(a), Some(b), Some(x)) =
            (first.as_slice_mut(), second.as_slice_mut(), self.as_slice())
        {
            over_slices(a.len(), (a, b, x), |(a, b, x)| {
                a.iter_mut()
                    .zip(b.iter_mut())
                    .zip(x)
                    .for_each(|((a, b), &v)| (*a, *b) = f(v))
            });
            return;
        }
        let zip = Zip::from(first).and(second).and(self);
        #[cfg(feature = "threads")]
        if split_across_cores(self.len()) {
            zip.par_for_each(|a, b, &v| (*a, *b) = f(v));
            return;
        }
        zip.for_each(|a, b, &v| (*a, *b) = f(v));
    }
    fn zip_elems_adding(
        &self,
        other: &Self,
        out: &mut Self,
        operation: &'static str,
        f: impl Fn(T, T) -> T + Sync + Send,
    ) -> Result<()> {
        same_shape(operation, self, other)?;
        same_shape("adding an input change to the one already there", out, self)?;
        update_from_two(out, self, other, |o, a, b| *o = *o + f(a, b));
        Ok(())
    }
    fn zip_elems_into(
        &self,
        other: &Self,
        out: &mut Self,
        operation: &'static str,
        f: impl Fn(T, T) -> T + Sync + Send,
    ) -> Result<()> {
        same_shape(operation, self, other)?;
        if !dims_equal(out.shape(), self.shape()) {
            *out = self.zip_elems(other, operation, f)?;
            return Ok(());
        }
        update_from_two(out, self, other, |o, a, b| *o = f(a, b));
        Ok(())
    }
}

/// The `Space` sums and printing of a sequence of values (a fixed-size
/// array or a `Vec`): part by part, after checking every part's shape, so
/// that a refusal leaves `self` unchanged.
macro_rules! sequence_sums {
    () => {
        fn try_add(&self, other: &Self) -> Result<Self> {
            let mut out = self.clone();
            out.try_add_assign(other)?;
            Ok(out)
        }
        fn try_add_assign(&mut self, other: &Self) -> Result<()> {
            self.check_same_shape(other)?;
            for (a, b) in self.iter_mut().zip(other) {
                a.try_add_assign(b)?;
            }
            Ok(())
        }
        fn value_string(&self) -> String {
            let parts: Vec<String> = self.iter().map(Space::value_string).collect();
            format!("[{}]", parts.join(", "))
        }
    };
}

impl<S: Space, const N: usize> Space for [S; N] {
    type Shape = [S::Shape; N];
    fn shape(&self) -> Self::Shape {
        std::array::from_fn(|i| self[i].shape())
    }
    fn zero_of(shape: &Self::Shape) -> Self {
        std::array::from_fn(|i| S::zero_of(&shape[i]))
    }
    sequence_sums!();
    fn shape_string(&self) -> String {
        match self.first() {
            Some(s) => format!("[{}; {N}]", s.shape_string()),
            None => "[; 0]".to_string(),
        }
    }
    fn check_same_shape(&self, other: &Self) -> Result<()> {
        self.iter()
            .zip(other)
            .try_for_each(|(a, b)| a.check_same_shape(b))
    }
}

/// The `Euclidean` methods that a sequence of values (a fixed-size array
/// or a `Vec`) takes from its parts, in order.
macro_rules! sequence_coordinates {
    ($r:ty) => {
        fn inner(&self, other: &Self) -> Result<$r> {
            self.check_same_shape(other)?;
            self.iter()
                .zip(other)
                .try_fold(<$r>::zero(), |acc, (a, b)| Ok(acc + a.inner(b)?))
        }
        fn dimension(&self) -> usize {
            self.iter().map(|s| s.dimension()).sum()
        }
        fn write_coordinates(&self, out: &mut Vec<$r>) {
            for s in self {
                s.write_coordinates(out);
            }
        }
        fn all_finite(&self) -> bool {
            self.iter().all(|s| s.all_finite())
        }
        fn zip_runs_mut(
            &mut self,
            other: &Self,
            offset: usize,
            visit: &mut RunVisitor<'_, $r>,
        ) -> Result<usize> {
            // Check every part first, so that a refusal visits nothing.
            self.check_same_shape(other)?;
            let mut at = offset;
            for (a, b) in self.iter_mut().zip(other) {
                at = a.zip_runs_mut(b, at, visit)?;
            }
            Ok(at)
        }
    };
}

/// A list of values of one space, for parameters whose count is known only
/// at run time (the stages of a run-time model). Lists of different
/// lengths do not add.
impl<S: Space> Space for Vec<S> {
    type Shape = Vec<S::Shape>;
    fn shape(&self) -> Self::Shape {
        self.iter().map(Space::shape).collect()
    }
    fn zero_of(shape: &Self::Shape) -> Self {
        shape.iter().map(S::zero_of).collect()
    }
    sequence_sums!();
    fn check_same_shape(&self, other: &Self) -> Result<()> {
        if self.len() != other.len() {
            return Err(Error::shape(
                "adding lists",
                format!("a list of {}", self.len()),
                format!("a list of {}", other.len()),
            ));
        }
        self.iter()
            .zip(other)
            .try_for_each(|(a, b)| a.check_same_shape(b))
    }
    fn shape_string(&self) -> String {
        let parts: Vec<String> = self.iter().map(Space::shape_string).collect();
        format!("[{}]", parts.join(", "))
    }
}

impl<S: Scalable<K>, K: Copy> Scalable<K> for Vec<S> {
    fn scale(&self, s: K) -> Self {
        self.iter().map(|v| v.scale(s)).collect()
    }
}

impl<S: Euclidean<R>, R: Real> Euclidean<R> for Vec<S> {
    fn read_coordinates(&self, coords: &mut &[R]) -> Result<Self> {
        self.iter().map(|s| s.read_coordinates(coords)).collect()
    }
    sequence_coordinates!(R);
}

impl<S: Scalable<K>, K: Copy, const N: usize> Scalable<K> for [S; N] {
    fn scale(&self, s: K) -> Self {
        std::array::from_fn(|i| self[i].scale(s))
    }
}

impl<S: Euclidean<R>, R: Real, const N: usize> Euclidean<R> for [S; N] {
    fn read_coordinates(&self, coords: &mut &[R]) -> Result<Self> {
        let mut parts = Vec::with_capacity(N);
        for s in self {
            parts.push(s.read_coordinates(coords)?);
        }
        parts.try_into().map_err(|_| Error::CoordinateCount {
            operation: "reading a fixed-size array from coordinates",
            expected: N,
            found: 0,
        })
    }
    sequence_coordinates!(R);
}

impl<T: Real, const N: usize> Pointwise for [T; N]
where
    T: Pointwise<Elem = T>,
{
    type Elem = T;
    fn map_elems(&self, f: impl Fn(T) -> T + Sync + Send) -> Self {
        self.map(f)
    }
    fn zip_elems(
        &self,
        other: &Self,
        _: &'static str,
        f: impl Fn(T, T) -> T + Sync + Send,
    ) -> Result<Self> {
        Ok(std::array::from_fn(|i| f(self[i], other[i])))
    }
    fn map_elems_two(&self, f: impl Fn(T) -> (T, T) + Sync + Send) -> (Self, Self) {
        let both = self.map(f);
        (both.map(|b| b.0), both.map(|b| b.1))
    }
    fn zip_elems_adding(
        &self,
        other: &Self,
        out: &mut Self,
        _: &'static str,
        f: impl Fn(T, T) -> T + Sync + Send,
    ) -> Result<()> {
        for ((o, &a), &b) in out.iter_mut().zip(self).zip(other) {
            *o = *o + f(a, b);
        }
        Ok(())
    }
}

impl Space for () {
    type Shape = ();
    fn shape(&self) {}
    fn zero_of(_: &()) -> Self {}
    fn try_add(&self, _: &Self) -> Result<Self> {
        Ok(())
    }
    fn shape_string(&self) -> String {
        "()".to_string()
    }
}

impl<K> Scalable<K> for () {
    fn scale(&self, _: K) -> Self {}
}

impl<R: Real> Euclidean<R> for () {
    fn inner(&self, _: &Self) -> Result<R> {
        Ok(R::zero())
    }
    fn dimension(&self) -> usize {
        0
    }
    fn write_coordinates(&self, _: &mut Vec<R>) {}
    fn read_coordinates(&self, _: &mut &[R]) -> Result<Self> {
        Ok(())
    }
}

macro_rules! tuple_space {
    ($($name:ident $idx:tt),+) => {
        impl<$($name: Space),+> Space for ($($name,)+) {
            type Shape = ($($name::Shape,)+);
            fn shape(&self) -> Self::Shape {
                ($(self.$idx.shape(),)+)
            }
            fn zero_of(shape: &Self::Shape) -> Self {
                ($($name::zero_of(&shape.$idx),)+)
            }
            fn try_add(&self, other: &Self) -> Result<Self> {
                Ok(($(self.$idx.try_add(&other.$idx)?,)+))
            }
            fn try_add_assign(&mut self, other: &Self) -> Result<()> {
                // Check every component first so that a refusal leaves `self` unchanged.
                self.check_same_shape(other)?;
                $(self.$idx.try_add_assign(&other.$idx)?;)+
                Ok(())
            }
            fn shape_string(&self) -> String {
                let parts = [$(self.$idx.shape_string()),+];
                format!("({})", parts.join(", "))
            }
            fn value_string(&self) -> String {
                let parts = [$(self.$idx.value_string()),+];
                format!("({})", parts.join(", "))
            }
            fn check_same_shape(&self, other: &Self) -> Result<()> {
                $(self.$idx.check_same_shape(&other.$idx)?;)+
                Ok(())
            }
            fn assign_from(&mut self, other: &Self) {
                $(self.$idx.assign_from(&other.$idx);)+
            }
        }
        impl<K: Copy, $($name: Scalable<K>),+> Scalable<K> for ($($name,)+) {
            fn scale(&self, s: K) -> Self {
                ($(self.$idx.scale(s),)+)
            }
        }
        impl<R: Real, $($name: Euclidean<R>),+> Euclidean<R> for ($($name,)+) {
            fn inner(&self, other: &Self) -> Result<R> {
                Ok(R::zero() $(+ self.$idx.inner(&other.$idx)?)+)
            }
            fn dimension(&self) -> usize {
                0 $(+ self.$idx.dimension())+
            }
            fn write_coordinates(&self, out: &mut Vec<R>) {
                $(self.$idx.write_coordinates(out);)+
            }
            fn read_coordinates(&self, coords: &mut &[R]) -> Result<Self> {
                Ok(($(self.$idx.read_coordinates(coords)?,)+))
            }
            fn all_finite(&self) -> bool {
                true $(&& self.$idx.all_finite())+
            }
            fn zip_runs_mut(
                &mut self,
                other: &Self,
                offset: usize,
                visit: &mut RunVisitor<'_, R>,
            ) -> Result<usize> {
                // Check every part first, so that a refusal visits nothing.
                $(if self.$idx.dimension() != other.$idx.dimension() {
                    return Err(Error::CoordinateCount {
                        operation: "walking two tuples together",
                        expected: self.$idx.dimension(),
                        found: other.$idx.dimension(),
                    });
                })+
                let at = offset;
                $(let at = self.$idx.zip_runs_mut(&other.$idx, at, visit)?;)+
                Ok(at)
            }
        }
    };
}
tuple_space!(A 0, B 1);
tuple_space!(A 0, B 1, C 2);
tuple_space!(A 0, B 1, C 2, D 3);
