//! Losses: maps `(prediction, target) -> scalar` over arrays of one shape.
//!
//! Each loss is a map of the library with its reverse derivative, so it
//! composes with a model like any other map and goes through the law
//! checkers; its reverse derivative as a map is that of an equal composite of
//! catalogue pieces, so every order exists. Losses sum over all elements
//! (except [`MeanSquaredError`], which averages); a training loop averages
//! over the examples of a batch.
//!
//! Different shapes of prediction and target are an
//! [`Error::ShapeMismatch`], never a broadcast.
//!
//! ```
//! use revdiff::{Compose, LogitCrossEntropy, Map};
//! use ndarray::array;
//!
//! // Logits for three classes; the target is class 2, one-hot.
//! let (z, t) = (array![1.0, 2.0, 4.0], array![0.0, 0.0, 1.0]);
//! let loss = LogitCrossEntropy.forward(&(z.clone(), t.clone())).unwrap();
//! let expected = (1.0_f64.exp() + 2.0_f64.exp() + 4.0_f64.exp()).ln() - 4.0;
//! assert!((loss - expected).abs() < 1e-12);
//! // The change for the logits is softmax(z) - t.
//! let (dz, _) = LogitCrossEntropy.backward(&(z, t), &1.0).unwrap();
//! assert!(dz[2] < 0.0 && dz[0] > 0.0);
//! ```

use crate::combinators::{Duplicate, Fst, Id, MultiplyBy, Pair, Snd, Then};
use crate::error::{Error, Result};
use crate::map::{Compose, Map, Reverse};
use crate::primitives::pointwise::{logistic, softplus};
use crate::primitives::{
    Clamp, Dot, ElementReduction, LogSumExp, MulPair, Powi, Softplus, SubPair, dot,
};
use crate::space::{Real, same_shape};
use crate::workspace::{SplitInput, Workspace, reshape_to};
use ndarray::{Array, Axis, Dimension, Ix1, Zip};

/// A prediction and its target, arrays of the same shape.
type Pairs<T, D> = (Array<T, D>, Array<T, D>);

/// `(y, t) -> c sum_i (y_i - t_i)^2`, with `c = 1` ([`SquaredError::new`])
/// or `c = 1/2` ([`SquaredError::halved`], whose gradient is `y - t`).
///
/// Reverse derivative: `(2c (y - t) dl, -2c (y - t) dl)`.
///
/// ```
/// use revdiff::{Map, SquaredError};
/// use ndarray::array;
/// let input = (array![1.0, 2.0], array![0.0, 4.0]);
/// assert_eq!(SquaredError::new().forward(&input).unwrap(), 5.0);
/// let (dy, dt) = SquaredError::halved().backward(&input, &1.0).unwrap();
/// assert_eq!((dy, dt), (array![1.0, -2.0], array![-1.0, 2.0]));
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SquaredError {
    half: bool,
}

impl SquaredError {
    /// `sum (y - t)^2`.
    pub fn new() -> Self {
        SquaredError { half: false }
    }
    /// `sum (y - t)^2 / 2`.
    pub fn halved() -> Self {
        SquaredError { half: true }
    }
    fn factor<T: Real>(&self) -> T {
        if self.half { real(0.5) } else { T::one() }
    }
}

impl Default for SquaredError {
    fn default() -> Self {
        SquaredError::new()
    }
}

/// `(y, t) -> mean_i (y_i - t_i)^2`. An empty pair of arrays is an
/// [`Error::Empty`].
///
/// Reverse derivative: `(2 (y - t) dl / n, -2 (y - t) dl / n)`.
///
/// ```
/// use revdiff::{Map, MeanSquaredError};
/// use ndarray::array;
/// let input = (array![1.0, 2.0], array![0.0, 4.0]);
/// assert_eq!(MeanSquaredError.forward(&input).unwrap(), 2.5);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MeanSquaredError;

/// Cross-entropy of the softmax of logits `z` against a target distribution
/// `t`: `(z, t) -> -sum_i t_i log softmax(z)_i`, computed as
/// `sum(t) logsumexp(z) - <t, z>`, finite for logits of any size.
///
/// Reverse derivative: `((sum(t) softmax(z) - t) dl, (logsumexp(z) - z) dl)`.
/// An empty pair of arrays is an [`Error::Empty`].
///
/// On a matrix, each row is one example's logits and the rows' losses add
/// up (softmax is taken per row, never across a batch). The reverse
/// derivative as a map ([`Reverse`]) is for one example, a vector. See the
/// [module example](self).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LogitCrossEntropy;

/// Binary cross-entropy of the logistic of logits `z` against targets `t`
/// in `[0, 1]`: `(z, t) -> sum_i softplus(z_i) - t_i z_i`, which equals
/// `-sum_i t_i ln sigmoid(z_i) + (1 - t_i) ln(1 - sigmoid(z_i))` and stays
/// finite for logits of any size.
///
/// Reverse derivative: `((sigmoid(z) - t) dl, -z dl)`.
///
/// ```
/// use revdiff::{LogitBinaryCrossEntropy, Map};
/// use ndarray::array;
/// let l = LogitBinaryCrossEntropy.forward(&(array![800.0, -800.0], array![1.0, 0.0])).unwrap();
/// assert_eq!(l, 0.0);
/// let l = LogitBinaryCrossEntropy.forward(&(array![0.0], array![1.0])).unwrap();
/// assert!((l - 2.0_f64.ln()).abs() < 1e-15);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LogitBinaryCrossEntropy;

/// The Huber loss with threshold `delta`: with `r = y - t`,
/// `sum_i h(r_i)`, `h(r) = r^2 / 2` for `|r| <= delta` and
/// `delta (|r| - delta / 2)` beyond; quadratic near zero, linear far out.
///
/// Reverse derivative: `(clamp(r, -delta, delta) dl, -clamp(r, -delta, delta) dl)`.
///
/// ```
/// use revdiff::{Huber, Map};
/// use ndarray::array;
/// let huber = Huber::new(1.0_f64).unwrap();
/// let input = (array![0.5, 3.0], array![0.0, 0.0]);
/// assert_eq!(huber.forward(&input).unwrap(), 0.125 + 2.5);
/// assert_eq!(huber.backward(&input, &1.0).unwrap().0, array![0.5, 1.0]);
/// assert!(Huber::new(0.0).is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Huber<T> {
    delta: T,
}

impl<T: Real> Huber<T> {
    /// The Huber loss with threshold `delta`, which must be positive and finite.
    pub fn new(delta: T) -> Result<Self> {
        if !(delta > T::zero() && delta.is_finite()) {
            return Err(Error::InvalidSetting {
                name: "huber delta",
                value: delta.to_string(),
                reason: "must be positive and finite",
            });
        }
        Ok(Huber { delta })
    }

    /// The threshold between the quadratic and the linear part.
    pub fn delta(&self) -> T {
        self.delta
    }
}

impl Compose for SquaredError {}
impl Compose for MeanSquaredError {}
impl Compose for LogitCrossEntropy {}
impl Compose for LogitBinaryCrossEntropy {}
impl<T> Compose for Huber<T> {}

fn real<T: Real>(v: f64) -> T {
    T::from(v).expect("every real type holds small constants")
}

/// Checks shapes and non-emptiness, and returns `y - t`.
fn difference<T: Real, D: Dimension + 'static>(
    operation: &'static str,
    (y, t): &Pairs<T, D>,
) -> Result<Array<T, D>> {
    same_shape(operation, y, t)?;
    Ok(y - t)
}

fn nonempty<T, D: Dimension + 'static>(operation: &'static str, y: &Array<T, D>) -> Result<()> {
    if y.is_empty() {
        Err(Error::Empty { operation })
    } else {
        Ok(())
    }
}

/// The change `(s r dl, -s r dl)` shared by the squared errors and Huber,
/// where `r` is the kept slope array.
fn opposite_pair<T: Real, D: Dimension + 'static>(slope: &Array<T, D>, dl: T) -> Pairs<T, D> {
    let d = slope * dl;
    let neg = d.mapv(|v| -v);
    (d, neg)
}

/// `(y, t) -> c |y - t|^2` as a composite.
pub type SquaredErrorComposite<T> = Then<Then<SubPair, Then<Duplicate, Dot>>, MultiplyBy<T>>;
/// `(y, t) -> mean (y - t)^2` as a composite.
pub type MeanSquaredErrorComposite =
    Then<Then<Then<SubPair, Duplicate>, MulPair>, ElementReduction>;
/// `(z, t) -> sum(t) logsumexp(z) - <z, t>` as a composite.
pub type LogitCrossEntropyComposite = Then<
    Pair<Then<Pair<Then<Snd, ElementReduction>, Then<Fst, LogSumExp>>, MulPair>, Dot>,
    SubPair,
>;
/// `(z, t) -> sum softplus(z) - <z, t>` as a composite.
pub type LogitBinaryCrossEntropyComposite =
    Then<Pair<Then<Then<Fst, Softplus>, ElementReduction>, Dot>, SubPair>;
/// `(y, t) -> sum clamp(r) r - clamp(r)^2 / 2` with `r = y - t`, as a
/// composite; it equals the Huber loss and has the clamp as its slope.
pub type HuberComposite<T> = Then<
    Then<SubPair, Then<Pair<Then<Pair<Clamp<T>, Id>, MulPair>, Then<Clamp<T>, Powi<T>>>, SubPair>>,
    ElementReduction,
>;

impl SquaredError {
    /// The equal composite of catalogue pieces.
    pub fn composite<T: Real>(&self) -> SquaredErrorComposite<T> {
        SubPair
            .then(Duplicate.then(dot()))
            .then(MultiplyBy(self.factor()))
    }
}

impl MeanSquaredError {
    /// The equal composite of catalogue pieces.
    pub fn composite(&self) -> MeanSquaredErrorComposite {
        SubPair
            .then(Duplicate)
            .then(MulPair)
            .then(ElementReduction::mean())
    }
}

impl LogitCrossEntropy {
    /// The equal composite of catalogue pieces.
    pub fn composite(&self) -> LogitCrossEntropyComposite {
        Snd.then(ElementReduction::sum())
            .pair(Fst.then(LogSumExp))
            .then(MulPair)
            .pair(dot())
            .then(SubPair)
    }
}

impl LogitBinaryCrossEntropy {
    /// The equal composite of catalogue pieces.
    pub fn composite(&self) -> LogitBinaryCrossEntropyComposite {
        Fst.then(Softplus)
            .then(ElementReduction::sum())
            .pair(dot())
            .then(SubPair)
    }
}

impl<T: Real> Huber<T> {
    /// The equal composite of catalogue pieces.
    pub fn composite(&self) -> HuberComposite<T> {
        // The threshold was checked when the loss was made.
        let clamp =
            Clamp::new(self.delta).expect("a checked Huber threshold is a valid clamp limit");
        let inner = clamp
            .pair(Id)
            .then(MulPair)
            .pair(clamp.then(Powi::with_coefficient(real(0.5), 2)));
        SubPair
            .then(inner.then(SubPair))
            .then(ElementReduction::sum())
    }
}

impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for SquaredError {
    type Output = T;
    type Memo = Array<T, D>;
    fn forward_memo(&self, input: &Pairs<T, D>) -> Result<(T, Array<T, D>)> {
        let r = difference("squared error", input)?;
        let value = r.fold(T::zero(), |acc, &v| acc + v * v) * self.factor::<T>();
        Ok((value, r * (real::<T>(2.0) * self.factor::<T>())))
    }
    fn backward_memo(&self, slope: &Array<T, D>, dl: &T) -> Result<Pairs<T, D>> {
        Ok(opposite_pair(slope, *dl))
    }
}

impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for MeanSquaredError {
    type Output = T;
    type Memo = Array<T, D>;
    fn forward_memo(&self, input: &Pairs<T, D>) -> Result<(T, Array<T, D>)> {
        let r = difference("mean squared error", input)?;
        nonempty("mean squared error", &r)?;
        let n: T = real(r.len() as f64);
        let value = r.fold(T::zero(), |acc, &v| acc + v * v) / n;
        Ok((value, r * (real::<T>(2.0) / n)))
    }
    fn backward_memo(&self, slope: &Array<T, D>, dl: &T) -> Result<Pairs<T, D>> {
        Ok(opposite_pair(slope, *dl))
    }
}

/// The residuals go into a buffer kept in the workspace, and the
/// prediction change into the caller's: no allocation after the first call,
/// and the same arithmetic, in the same order, as the memo passes.
impl<T: Real, D: Dimension + 'static> SplitInput<Array<T, D>, Array<T, D>> for MeanSquaredError {
    fn forward_split<'w>(
        &self,
        y: &Array<T, D>,
        t: &Array<T, D>,
        work: &'w mut Workspace,
    ) -> Result<&'w T> {
        let operation = "mean squared error";
        same_shape(operation, y, t)?;
        nonempty(operation, y)?;
        let r = work.state_or_insert_with(|| y.clone());
        if r.raw_dim() != y.raw_dim() {
            *r = y.clone();
        }
        Zip::from(&mut *r)
            .and(y)
            .and(t)
            .for_each(|r, &a, &b| *r = a - b);
        let n: T = real(r.len() as f64);
        let value = r.fold(T::zero(), |acc, &v| acc + v * v) / n;
        work.put_output(value);
        work.output::<T>()
    }
    fn backward_split(
        &self,
        y: &Array<T, D>,
        t: &Array<T, D>,
        work: &mut Workspace,
        dl: &T,
        dy: &mut Array<T, D>,
        dt: Option<&mut Array<T, D>>,
    ) -> Result<()> {
        let r = work.state::<Array<T, D>>()?;
        same_shape(
            "mean squared error (predictions against the kept forward pass)",
            y,
            r,
        )?;
        let (n, dl): (T, T) = (real(r.len() as f64), *dl);
        let c = real::<T>(2.0) / n;
        reshape_to(dy, y);
        Zip::from(&mut *dy).and(r).for_each(|d, &r| *d = r * c * dl);
        if let Some(dt) = dt {
            reshape_to(dt, t);
            Zip::from(dt).and(&*dy).for_each(|d, &v| *d = -v);
        }
        Ok(())
    }
}

/// The other losses keep their memo passes.
macro_rules! split_by_memo {
    ($($loss:ty),*) => {$(
        impl<T: Real, D: Dimension + 'static> SplitInput<Array<T, D>, Array<T, D>> for $loss {}
    )*};
}
split_by_memo!(
    SquaredError,
    LogitCrossEntropy,
    LogitBinaryCrossEntropy,
    Huber<T>
);

impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for LogitCrossEntropy {
    type Output = T;
    /// `(sum(t) softmax(z) - t, logsumexp(z) - z)` per row: the change per unit `dl`.
    type Memo = Pairs<T, D>;
    fn forward_memo(&self, input: &Pairs<T, D>) -> Result<(T, Pairs<T, D>)> {
        let (z, t) = input;
        same_shape("cross-entropy on logits", z, t)?;
        nonempty("cross-entropy on logits", z)?;
        // Each lane along the last axis is one example's logits: a vector is
        // one example, the rows of a matrix are a batch, whose losses add.
        let last = Axis(z.ndim() - 1);
        let mut dz = Array::zeros(z.raw_dim());
        let mut dt = Array::zeros(z.raw_dim());
        let mut value = T::zero();
        for (((zl, tl), mut dzl), mut dtl) in z
            .lanes(last)
            .into_iter()
            .zip(t.lanes(last))
            .zip(dz.lanes_mut(last))
            .zip(dt.lanes_mut(last))
        {
            let m = zl.fold(T::neg_infinity(), |m, &v| m.max(v));
            let total = zl.fold(T::zero(), |acc, &v| acc + (v - m).exp());
            let lse = m + total.ln();
            let mass = tl.sum();
            value = value + mass * lse
                - Zip::from(&zl)
                    .and(&tl)
                    .fold(T::zero(), |acc, &a, &b| acc + a * b);
            Zip::from(&mut dzl)
                .and(&zl)
                .and(&tl)
                .for_each(|d, &zi, &ti| *d = mass * (zi - m).exp() / total - ti);
            Zip::from(&mut dtl)
                .and(&zl)
                .for_each(|d, &zi| *d = lse - zi);
        }
        Ok((value, (dz, dt)))
    }
    fn backward_memo(&self, (dz, dt): &Pairs<T, D>, dl: &T) -> Result<Pairs<T, D>> {
        Ok((dz * *dl, dt * *dl))
    }
}

impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for LogitBinaryCrossEntropy {
    type Output = T;
    /// `(sigmoid(z) - t, -z)`: the change per unit `dl`.
    type Memo = Pairs<T, D>;
    fn forward_memo(&self, input: &Pairs<T, D>) -> Result<(T, Pairs<T, D>)> {
        let (z, t) = input;
        same_shape("binary cross-entropy on logits", z, t)?;
        let value = Zip::from(z)
            .and(t)
            .fold(T::zero(), |acc, &zi, &ti| acc + softplus(zi) - ti * zi);
        let dz = Zip::from(z)
            .and(t)
            .map_collect(|&zi, &ti| logistic(zi) - ti);
        Ok((value, (dz, z.mapv(|v| -v))))
    }
    fn backward_memo(&self, (dz, dt): &Pairs<T, D>, dl: &T) -> Result<Pairs<T, D>> {
        Ok((dz * *dl, dt * *dl))
    }
}

impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for Huber<T> {
    type Output = T;
    /// The clamped difference.
    type Memo = Array<T, D>;
    fn forward_memo(&self, input: &Pairs<T, D>) -> Result<(T, Array<T, D>)> {
        let r = difference("huber loss", input)?;
        let d = self.delta;
        let half: T = real(0.5);
        let value = r.fold(T::zero(), |acc, &v| {
            acc + if v.abs() <= d {
                half * v * v
            } else {
                d * (v.abs() - half * d)
            }
        });
        Ok((value, r.mapv(|v| v.max(-d).min(d))))
    }
    fn backward_memo(&self, slope: &Array<T, D>, dl: &T) -> Result<Pairs<T, D>> {
        Ok(opposite_pair(slope, *dl))
    }
}

macro_rules! reverse_through_composite {
    ($ty:ty, $composite:ty, [$($gen:tt)*]) => {
        reverse_through_composite!($ty, $composite, [$($gen)*], D);
    };
    ($ty:ty, $composite:ty, [$($gen:tt)*], $dim:ty) => {
        impl<$($gen)*> Reverse<Pairs<T, $dim>> for $ty {
            type Rev = <$composite as Reverse<Pairs<T, $dim>>>::Rev;
            fn rev(&self) -> Self::Rev {
                Reverse::<Pairs<T, $dim>>::rev(&self.composite())
            }
        }
    };
}

reverse_through_composite!(SquaredError, SquaredErrorComposite<T>, [T: Real, D: Dimension + 'static]);
reverse_through_composite!(MeanSquaredError, MeanSquaredErrorComposite, [T: Real, D: Dimension + 'static]);
// On a batch the loss is a sum of per-row log-sum-exps, which the
// composite (one log-sum-exp over the whole array) is not: second order is
// for single examples.
reverse_through_composite!(LogitCrossEntropy, LogitCrossEntropyComposite, [T: Real], Ix1);
reverse_through_composite!(
    LogitBinaryCrossEntropy,
    LogitBinaryCrossEntropyComposite,
    [T: Real, D: Dimension + 'static]
);
reverse_through_composite!(Huber<T>, HuberComposite<T>, [T: Real, D: Dimension + 'static]);
