//! Coordinates of vectors as maps, and powers with a variable exponent.

use crate::combinators::{Fst, Pair, Snd, Then, ZeroMap};
use crate::error::{Error, Result};
use crate::map::{Compose, Linear, Map, Reverse};
use crate::primitives::{Exp, Ln, MulPair};
use crate::space::Real;
use ndarray::Array1;

/// Coordinate `i` of a vector, `x -> x_i`, a linear map. An index past the
/// end is an [`Error::ShapeMismatch`] naming both.
///
/// Reverse derivative: `dy` at position `i` of a zero vector, [`PlaceAt`].
///
/// ```
/// use revdiff::{Coordinate, Map};
/// use ndarray::array;
/// assert_eq!(Coordinate::new(1).forward(&array![3.0, 4.0]).unwrap(), 4.0);
/// assert_eq!(Coordinate::new(1).backward(&array![3.0, 4.0], &2.0).unwrap(), array![0.0, 2.0]);
/// assert!(Coordinate::new(2).forward(&array![3.0, 4.0]).is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Coordinate {
    index: usize,
}

impl Coordinate {
    /// The map picking coordinate `index` (counted from 0).
    pub fn new(index: usize) -> Self {
        Coordinate { index }
    }

    fn check<T>(&self, x: &Array1<T>) -> Result<()> {
        if self.index >= x.len() {
            return Err(Error::shape(
                "coordinate of a vector",
                format!("a vector longer than {}", self.index),
                format!("({},)", x.len()),
            ));
        }
        Ok(())
    }
}

/// A scalar placed at position `i` of a zero vector as long as the first
/// argument, `(x, s) -> s e_i`, linear in `s`; the transpose of
/// [`Coordinate`].
///
/// ```
/// use revdiff::{Map, PlaceAt};
/// use ndarray::array;
/// assert_eq!(PlaceAt::new(0).forward(&(array![7.0, 7.0], 5.0)).unwrap(), array![5.0, 0.0]);
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PlaceAt {
    index: usize,
}

impl PlaceAt {
    /// The map placing its scalar at `index` (counted from 0).
    pub fn new(index: usize) -> Self {
        PlaceAt { index }
    }
}

impl Compose for Coordinate {}
impl Compose for PlaceAt {}

impl<T: Real> Map<Array1<T>> for Coordinate {
    type Output = T;
    type Memo = usize;
    fn forward(&self, x: &Array1<T>) -> Result<T> {
        self.check(x)?;
        Ok(x[self.index])
    }
    fn forward_memo(&self, x: &Array1<T>) -> Result<(T, usize)> {
        Ok((self.forward(x)?, x.len()))
    }
    fn backward_memo(&self, len: &usize, dy: &T) -> Result<Array1<T>> {
        let mut dx = Array1::zeros(*len);
        dx[self.index] = *dy;
        Ok(dx)
    }
}

impl<T: Real> Reverse<Array1<T>> for Coordinate {
    type Rev = PlaceAt;
    fn rev(&self) -> PlaceAt {
        PlaceAt::new(self.index)
    }
}

impl<T: Real> Linear<Array1<T>> for Coordinate {}

impl<T: Real> Map<(Array1<T>, T)> for PlaceAt {
    type Output = Array1<T>;
    type Memo = usize;
    fn forward(&self, (x, s): &(Array1<T>, T)) -> Result<Array1<T>> {
        Coordinate::new(self.index).check(x)?;
        let mut out = Array1::zeros(x.len());
        out[self.index] = *s;
        Ok(out)
    }
    fn forward_memo(&self, input: &(Array1<T>, T)) -> Result<(Array1<T>, usize)> {
        Ok((self.forward(input)?, input.0.len()))
    }
    fn backward_memo(&self, len: &usize, dy: &Array1<T>) -> Result<(Array1<T>, T)> {
        if dy.len() != *len {
            return Err(Error::OutputChangeShape {
                map: "place at",
                expected: format!("({len},)"),
                found: format!("({},)", dy.len()),
            });
        }
        Ok((Array1::zeros(*len), dy[self.index]))
    }
}

/// `((x, s), dv) -> (0, dv_i)`.
pub type PlaceAtRev = Pair<Then<Then<Fst, Fst>, ZeroMap>, Then<Snd, Coordinate>>;

impl<T: Real> Reverse<(Array1<T>, T)> for PlaceAt {
    type Rev = PlaceAtRev;
    fn rev(&self) -> PlaceAtRev {
        Fst.then(Fst)
            .then(ZeroMap)
            .pair(Snd.then(Coordinate::new(self.index)))
    }
}

impl<T: Real> Linear<(Array1<T>, T)> for PlaceAt {}

/// A power with a variable exponent, `(a, b) -> a^b`, for `a > 0`.
///
/// Reverse derivative: `(b a^(b-1) dy, a^b ln(a) dy)`; as a map, that of the
/// equal composite `exp(b ln a)` ([`pow_pair_composite`]).
///
/// ```
/// use revdiff::{Map, PowPair};
/// assert_eq!(PowPair.forward(&(2.0_f64, 3.0)).unwrap(), 8.0);
/// let (da, db) = PowPair.backward(&(2.0_f64, 3.0), &1.0).unwrap();
/// assert_eq!(da, 12.0);
/// assert!((db - 8.0 * 2.0_f64.ln()).abs() < 1e-12);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct PowPair;

/// `(a, b) -> exp(b ln a)` written with combinators.
pub type PowPairComposite = Then<Then<Pair<Snd, Then<Fst, Ln>>, MulPair>, Exp>;

/// The power with a variable exponent as a composite of catalogue pieces.
pub fn pow_pair_composite() -> PowPairComposite {
    Snd.pair(Fst.then(Ln)).then(MulPair).then(Exp)
}

impl Compose for PowPair {}

impl<T: Real> Map<(T, T)> for PowPair {
    type Output = T;
    /// `(a, b, a^b)`.
    type Memo = (T, T, T);
    fn forward_memo(&self, &(a, b): &(T, T)) -> Result<(T, (T, T, T))> {
        let y = a.powf(b);
        Ok((y, (a, b, y)))
    }
    fn backward_memo(&self, &(a, b, y): &(T, T, T), dy: &T) -> Result<(T, T)> {
        // b a^(b-1) as b y / a would divide by zero at a = 0.
        Ok((b * a.powf(b - T::one()) * *dy, y * a.ln() * *dy))
    }
}

impl<T: Real> Reverse<(T, T)> for PowPair {
    type Rev = <PowPairComposite as Reverse<(T, T)>>::Rev;
    fn rev(&self) -> Self::Rev {
        Reverse::<(T, T)>::rev(&pow_pair_composite())
    }
}
