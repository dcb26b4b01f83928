//! Reductions of arrays to scalars, and the fills that are their reverse
//! derivatives.

use crate::combinators::{Duplicate, Fst, Pair, Snd, Then, ZeroMap};
use crate::error::{Error, Result};
use crate::map::{Compose, Linear, Map, Reverse};
use crate::primitives::MulPair;
use crate::space::{Real, shape_tuple};
use ndarray::{Array, Dimension};

/// The sum (or, with `mean`, the mean) of all elements of an array, a linear
/// map `Array<T, D> -> T`. The mean of an empty array is an
/// [`Error::Empty`].
///
/// Reverse derivative: `dy` spread over every element (divided by the
/// element count for the mean), which is [`FillLike`].
///
/// ```
/// use revdiff::{Map, ElementReduction};
/// use ndarray::array;
/// let x = array![[1.0, 2.0], [3.0, 4.0]];
/// assert_eq!(ElementReduction::sum().forward(&x).unwrap(), 10.0);
/// assert_eq!(ElementReduction::mean().forward(&x).unwrap(), 2.5);
/// assert_eq!(ElementReduction::mean().backward(&x, &1.0).unwrap(), array![[0.25, 0.25], [0.25, 0.25]]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ElementReduction {
    /// Divide by the number of elements.
    pub mean: bool,
}

impl ElementReduction {
    /// The sum of all elements.
    pub fn sum() -> Self {
        ElementReduction { mean: false }
    }
    /// The mean of all elements.
    pub fn mean() -> Self {
        ElementReduction { mean: true }
    }
    fn divisor<T: Real>(&self, len: usize) -> Result<T> {
        if !self.mean {
            return Ok(T::one());
        }
        if len == 0 {
            return Err(Error::Empty {
                operation: "mean of an array",
            });
        }
        Ok(T::from(len).expect("element counts fit every real type"))
    }
}

/// `(x, s) -> s` spread over an array shaped like `x` (divided by the
/// element count of `x` when `mean`): the reverse derivative of [`ElementReduction`],
/// linear in the pair.
///
/// ```
/// use revdiff::{FillLike, Map};
/// use ndarray::array;
/// let y = FillLike::sum().forward(&(array![7.0, 8.0], 3.0)).unwrap();
/// assert_eq!(y, array![3.0, 3.0]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct FillLike {
    /// Divide by the number of elements.
    pub mean: bool,
}

impl FillLike {
    /// Fill with the value.
    pub fn sum() -> Self {
        FillLike { mean: false }
    }
    /// Fill with the value divided by the element count.
    pub fn mean() -> Self {
        FillLike { mean: true }
    }
}

/// The inner product of two arrays, `(a, b) -> sum a_i b_i`.
pub type Dot = Then<MulPair, ElementReduction>;

/// The inner product of two arrays of the same shape.
///
/// ```
/// use revdiff::{dot, Map};
/// use ndarray::array;
/// assert_eq!(dot().forward(&(array![1.0, 2.0], array![3.0, 4.0])).unwrap(), 11.0);
/// ```
pub fn dot() -> Dot {
    MulPair.then(ElementReduction::sum())
}

/// The squared Euclidean norm of an array, `x -> sum x_i^2`.
pub type SquaredNorm = Then<Duplicate, Dot>;

/// The squared Euclidean norm.
///
/// ```
/// use revdiff::{squared_norm, Map};
/// use ndarray::array;
/// let x = array![3.0, 4.0];
/// assert_eq!(squared_norm().forward(&x).unwrap(), 25.0);
/// assert_eq!(squared_norm().backward(&x, &1.0).unwrap(), array![6.0, 8.0]);
/// ```
pub fn squared_norm() -> SquaredNorm {
    Duplicate.then(dot())
}

impl Compose for ElementReduction {}
impl Compose for FillLike {}

impl<T: Real, D: Dimension + 'static> Map<Array<T, D>> for ElementReduction {
    type Output = T;
    type Memo = D;
    fn forward(&self, x: &Array<T, D>) -> Result<T> {
        Ok(x.sum() / self.divisor::<T>(x.len())?)
    }
    fn forward_memo(&self, x: &Array<T, D>) -> Result<(T, D)> {
        Ok((self.forward(x)?, x.raw_dim()))
    }
    fn backward_memo(&self, dim: &D, dy: &T) -> Result<Array<T, D>> {
        let fill = *dy / self.divisor::<T>(dim.size())?;
        Ok(Array::from_elem(dim.clone(), fill))
    }
}

impl<T: Real, D: Dimension + 'static> Reverse<Array<T, D>> for ElementReduction {
    type Rev = FillLike;
    fn rev(&self) -> FillLike {
        FillLike { mean: self.mean }
    }
}

impl<T: Real, D: Dimension + 'static> Map<(Array<T, D>, T)> for FillLike {
    type Output = Array<T, D>;
    type Memo = D;
    fn forward(&self, (x, s): &(Array<T, D>, T)) -> Result<Array<T, D>> {
        let total = ElementReduction { mean: self.mean };
        Ok(Array::from_elem(
            x.raw_dim(),
            *s / total.divisor::<T>(x.len())?,
        ))
    }
    fn forward_memo(&self, input: &(Array<T, D>, T)) -> Result<(Array<T, D>, D)> {
        Ok((self.forward(input)?, input.0.raw_dim()))
    }
    fn backward_memo(&self, dim: &D, dy: &Array<T, D>) -> Result<(Array<T, D>, T)> {
        if dy.raw_dim() != *dim {
            return Err(Error::OutputChangeShape {
                map: "fill like",
                expected: shape_tuple(dim.slice()),
                found: shape_tuple(dy.shape()),
            });
        }
        Ok((
            Array::zeros(dim.clone()),
            ElementReduction { mean: self.mean }.forward(dy)?,
        ))
    }
}

/// `((x, s), D) -> (0, total(D))`.
pub type FillLikeRev = Pair<Then<Then<Fst, Fst>, ZeroMap>, Then<Snd, ElementReduction>>;

impl<T: Real, D: Dimension + 'static> Reverse<(Array<T, D>, T)> for FillLike {
    type Rev = FillLikeRev;
    fn rev(&self) -> FillLikeRev {
        Fst.then(Fst)
            .then(ZeroMap)
            .pair(Snd.then(ElementReduction { mean: self.mean }))
    }
}

impl<T: Real, D: Dimension + 'static> Linear<Array<T, D>> for ElementReduction {}
impl<T: Real, D: Dimension + 'static> Linear<(Array<T, D>, T)> for FillLike {}
