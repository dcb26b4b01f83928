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
use crate::space::{Real, same_shape, shape_tuple};
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

fn nonempty<T, D: Dimension + 'static>(operation: &'static str, y: &Array<T, D>) -> Result<()> {
    if y.is_empty() {
        Err(Error::Empty { operation })
    } else {
        Ok(())
    }
}

/// What a loss keeps from its forward pass: the change of its inputs per
/// unit change of its value, from which the backward pass scales the change
/// for `dl`. One array (the prediction's slope `s`, the target's change
/// being `-s`: the squared errors and Huber) or a pair (both changes: the
/// cross-entropies).
trait UnitChange<T: Real, D: Dimension>: Sized + 'static {
    /// Zeros shaped for a prediction like `y`.
    fn zeros_like(y: &Array<T, D>) -> Self;
    /// The kept change of the prediction (its shape is the prediction's).
    fn shaped(&self) -> &Array<T, D>;
    /// Whether this was kept for a prediction of `y`'s shape.
    fn fits(&self, y: &Array<T, D>) -> bool {
        self.shaped().shape() == y.shape()
    }
    /// Overwrites `dy` (and `dt`, when given) with the changes for `dl`;
    /// both already have the prediction's shape.
    fn scale_into(&self, dl: T, dy: &mut Array<T, D>, dt: Option<&mut Array<T, D>>);
}

impl<T: Real, D: Dimension + 'static> UnitChange<T, D> for Array<T, D> {
    fn zeros_like(y: &Array<T, D>) -> Self {
        Array::zeros(y.raw_dim())
    }
    fn shaped(&self) -> &Array<T, D> {
        self
    }
    fn scale_into(&self, dl: T, dy: &mut Array<T, D>, dt: Option<&mut Array<T, D>>) {
        Zip::from(&mut *dy).and(self).for_each(|d, &s| *d = s * dl);
        if let Some(dt) = dt {
            Zip::from(dt).and(&*dy).for_each(|d, &v| *d = -v);
        }
    }
}

impl<T: Real, D: Dimension + 'static> UnitChange<T, D> for Pairs<T, D> {
    fn zeros_like(y: &Array<T, D>) -> Self {
        (Array::zeros(y.raw_dim()), Array::zeros(y.raw_dim()))
    }
    fn shaped(&self) -> &Array<T, D> {
        &self.0
    }
    fn scale_into(&self, dl: T, dy: &mut Array<T, D>, dt: Option<&mut Array<T, D>>) {
        Zip::from(&mut *dy)
            .and(&self.0)
            .for_each(|d, &s| *d = s * dl);
        if let Some(dt) = dt {
            Zip::from(dt).and(&self.1).for_each(|d, &s| *d = s * dl);
        }
    }
}

/// The forward arithmetic of a loss, shared by its memo passes (into new
/// arrays) and its reusing passes (into the workspace's): the same numbers
/// from both, bit for bit.
trait LossPasses<T: Real, D: Dimension> {
    /// What the forward pass keeps (the loss's memo).
    type Kept: UnitChange<T, D>;
    /// Checks the inputs, overwrites `kept` (shaped for `y` already) and
    /// returns the loss.
    fn fill(&self, y: &Array<T, D>, t: &Array<T, D>, kept: &mut Self::Kept) -> Result<T>;
}

/// `Map` and `SplitInput` for losses from their [`LossPasses`]: the reusing
/// passes keep the changes per unit in the workspace and write the
/// prediction change into the caller's array, so a training step allocates
/// nothing for its loss after the first.
macro_rules! loss_passes {
    ($($loss:ty => $kept:ty),*) => {$(
        impl<T: Real, D: Dimension + 'static> Map<Pairs<T, D>> for $loss {
            type Output = T;
            type Memo = $kept;
            fn forward_memo(&self, (y, t): &Pairs<T, D>) -> Result<(T, Self::Memo)> {
                let mut kept = UnitChange::zeros_like(y);
                let value = self.fill(y, t, &mut kept)?;
                Ok((value, kept))
            }
            fn backward_memo(&self, kept: &Self::Memo, dl: &T) -> Result<Pairs<T, D>> {
                let (mut dy, mut dt) = <Pairs<T, D> as UnitChange<T, D>>::zeros_like(kept.shaped());
                kept.scale_into(*dl, &mut dy, Some(&mut dt));
                Ok((dy, dt))
            }
        }

        impl<T: Real, D: Dimension + 'static> SplitInput<Array<T, D>, Array<T, D>> for $loss {
            fn forward_split<'w>(
                &self,
                y: &Array<T, D>,
                t: &Array<T, D>,
                work: &'w mut Workspace,
            ) -> Result<&'w T> {
                let kept = work.state_or_insert_with(|| <$kept as UnitChange<T, D>>::zeros_like(y));
                if !kept.fits(y) {
                    *kept = UnitChange::zeros_like(y);
                }
                let value = self.fill(y, t, kept)?;
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
                let kept = work.state::<$kept>()?;
                if !kept.fits(y) {
                    return Err(Error::shape(
                        "loss (predictions against the kept forward pass)",
                        shape_tuple(kept.shaped().shape()),
                        shape_tuple(y.shape()),
                    ));
                }
                // Both changes have the prediction's shape, which the
                // forward pass found equal to the targets'.
                let _ = t;
                reshape_to(dy, y);
                let dt = dt.map(|dt| {
                    reshape_to(dt, y);
                    dt
                });
                kept.scale_into(*dl, dy, dt);
                Ok(())
            }
        }
    )*};
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

loss_passes!(
    SquaredError => Array<T, D>,
    MeanSquaredError => Array<T, D>,
    LogitCrossEntropy => Pairs<T, D>,
    LogitBinaryCrossEntropy => Pairs<T, D>,
    Huber<T> => Array<T, D>
);

/// Writes `slope(y_i - t_i)` into `kept` and returns the sum of
/// `value(y_i - t_i)` (in logical order), after checking the shapes: the
/// squared errors and Huber.
fn residual_passes<T: Real, D: Dimension + 'static>(
    operation: &'static str,
    y: &Array<T, D>,
    t: &Array<T, D>,
    kept: &mut Array<T, D>,
    value: impl Fn(T) -> T,
    slope: impl Fn(T) -> T,
) -> Result<T> {
    same_shape(operation, y, t)?;
    let mut total = T::zero();
    // Contiguous (the crate's own outputs): plain slices, compiled for the
    // widest vector instructions; the same sum in the same order.
    if let (Some(k), Some(y), Some(t)) = (kept.as_slice_mut(), y.as_slice(), t.as_slice())
        && k.len() == y.len()
    {
        crate::vectors::widest_for(k.len(), || {
            for ((s, &a), &b) in k.iter_mut().zip(y).zip(t) {
                let r = a - b;
                total = total + value(r);
                *s = slope(r);
            }
        });
        return Ok(total);
    }
    Zip::from(kept).and(y).and(t).for_each(|s, &a, &b| {
        let r = a - b;
        total = total + value(r);
        *s = slope(r);
    });
    Ok(total)
}

impl<T: Real, D: Dimension + 'static> LossPasses<T, D> for SquaredError {
    /// The slope `2c (y - t)`.
    type Kept = Array<T, D>;
    fn fill(&self, y: &Array<T, D>, t: &Array<T, D>, kept: &mut Array<T, D>) -> Result<T> {
        let c = self.factor::<T>();
        let twice = real::<T>(2.0) * c;
        let sum = residual_passes("squared error", y, t, kept, |r| r * r, |r| r * twice)?;
        Ok(sum * c)
    }
}

impl<T: Real, D: Dimension + 'static> LossPasses<T, D> for MeanSquaredError {
    /// The slope `2 (y - t) / n`.
    type Kept = Array<T, D>;
    fn fill(&self, y: &Array<T, D>, t: &Array<T, D>, kept: &mut Array<T, D>) -> Result<T> {
        let operation = "mean squared error";
        same_shape(operation, y, t)?;
        nonempty(operation, y)?;
        let n: T = real(y.len() as f64);
        let c = real::<T>(2.0) / n;
        let sum = residual_passes(operation, y, t, kept, |r| r * r, |r| r * c)?;
        Ok(sum / n)
    }
}

impl<T: Real, D: Dimension + 'static> LossPasses<T, D> for LogitCrossEntropy {
    /// `(sum(t) softmax(z) - t, logsumexp(z) - z)` per row: the change per unit `dl`.
    type Kept = Pairs<T, D>;
    fn fill(&self, z: &Array<T, D>, t: &Array<T, D>, (dz, dt): &mut Pairs<T, D>) -> Result<T> {
        same_shape("cross-entropy on logits", z, t)?;
        nonempty("cross-entropy on logits", z)?;
        // Each lane along the last axis is one example's logits: a vector is
        // one example, the rows of a matrix are a batch, whose losses add.
        let last = Axis(z.ndim() - 1);
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
        Ok(value)
    }
}

impl<T: Real, D: Dimension + 'static> LossPasses<T, D> for LogitBinaryCrossEntropy {
    /// `(sigmoid(z) - t, -z)`: the change per unit `dl`.
    type Kept = Pairs<T, D>;
    fn fill(&self, z: &Array<T, D>, t: &Array<T, D>, (dz, dt): &mut Pairs<T, D>) -> Result<T> {
        same_shape("binary cross-entropy on logits", z, t)?;
        let mut value = T::zero();
        Zip::from(dz)
            .and(dt)
            .and(z)
            .and(t)
            .for_each(|dz, dt, &zi, &ti| {
                value = value + softplus(zi) - ti * zi;
                *dz = logistic(zi) - ti;
                *dt = -zi;
            });
        Ok(value)
    }
}

impl<T: Real, D: Dimension + 'static> LossPasses<T, D> for Huber<T> {
    /// The clamped difference.
    type Kept = Array<T, D>;
    fn fill(&self, y: &Array<T, D>, t: &Array<T, D>, kept: &mut Array<T, D>) -> Result<T> {
        let d = self.delta;
        let half: T = real(0.5);
        let value = |r: T| {
            if r.abs() <= d {
                half * r * r
            } else {
                d * (r.abs() - half * d)
            }
        };
        residual_passes("huber loss", y, t, kept, value, |r| r.max(-d).min(d))
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
