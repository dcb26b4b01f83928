//! Softmax, log-softmax and log-sum-exp over all elements of an array,
//! numerically stable at large inputs (the largest element is subtracted
//! before exponentiating). An empty array is an [`Error::Empty`].

use crate::combinators::{Fst, Pair, Snd, Then};
use crate::error::{Error, Result};
use crate::map::{Compose, Map, Reverse};
use crate::primitives::{ElementReduction, FillLike, MulPair, SubPair};
use crate::space::Real;
use ndarray::{Array, Dimension};

fn largest<T: Real, D: Dimension + 'static>(operation: &'static str, x: &Array<T, D>) -> Result<T> {
    if x.is_empty() {
        return Err(Error::Empty { operation });
    }
    Ok(x.fold(T::neg_infinity(), |m, &v| m.max(v)))
}

/// `(softmax(x), log-sum-exp(x))`, both from one shifted exponential.
fn softmax_parts<T: Real, D: Dimension + 'static>(
    operation: &'static str,
    x: &Array<T, D>,
) -> Result<(Array<T, D>, T)> {
    let m = largest(operation, x)?;
    let e = x.mapv(|v| (v - m).exp());
    let total = e.sum();
    Ok((e / total, m + total.ln()))
}

/// `x -> ln sum_i e^(x_i)`, computed as `m + ln sum_i e^(x_i - m)` with `m`
/// the largest element. Reverse derivative: `dy softmax(x)`.
///
/// ```
/// use revdiff::{LogSumExp, Map};
/// use ndarray::array;
/// let v = LogSumExp.forward(&array![1000.0, 1000.0]).unwrap();
/// assert!((v - (1000.0 + 2.0_f64.ln())).abs() < 1e-12);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LogSumExp;

/// `x -> e^x / sum e^x` over all elements. Reverse derivative:
/// `s (dy - <s, dy>)` with `s = softmax(x)`, whose Jacobian is
/// `diag(s) - s s'`.
///
/// ```
/// use revdiff::{Map, Softmax};
/// use ndarray::array;
/// let s = Softmax.forward(&array![0.0, 800.0]).unwrap();
/// assert_eq!(s, array![0.0, 1.0]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Softmax;

/// `x -> x - log-sum-exp(x)`, the logarithm of [`Softmax`], finite wherever
/// `x` is. Reverse derivative: `dy - softmax(x) sum(dy)`.
///
/// ```
/// use revdiff::{LogSoftmax, Map};
/// use ndarray::array;
/// let l = LogSoftmax.forward(&array![0.0, 800.0]).unwrap();
/// assert_eq!(l, array![-800.0, 0.0]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LogSoftmax;

impl Compose for LogSumExp {}
impl Compose for Softmax {}
impl Compose for LogSoftmax {}

impl<T: Real, D: Dimension + 'static> Map<Array<T, D>> for LogSumExp {
    type Output = T;
    type Memo = Array<T, D>;
    fn forward_memo(&self, x: &Array<T, D>) -> Result<(T, Array<T, D>)> {
        let (s, lse) = softmax_parts("log-sum-exp", x)?;
        Ok((lse, s))
    }
    fn backward_memo(&self, s: &Array<T, D>, dy: &T) -> Result<Array<T, D>> {
        Ok(s * *dy)
    }
}

/// `(x, dy) -> softmax(x) filled-dy`.
pub type LogSumExpRev = Then<Pair<Then<Fst, Softmax>, FillLike>, MulPair>;

impl<T: Real, D: Dimension + 'static> Reverse<Array<T, D>> for LogSumExp {
    type Rev = LogSumExpRev;
    fn rev(&self) -> LogSumExpRev {
        Fst.then(Softmax).pair(FillLike::sum()).then(MulPair)
    }
}

impl<T: Real, D: Dimension + 'static> Map<Array<T, D>> for Softmax {
    type Output = Array<T, D>;
    type Memo = Array<T, D>;
    fn forward_memo(&self, x: &Array<T, D>) -> Result<(Array<T, D>, Array<T, D>)> {
        let (s, _) = softmax_parts("softmax", x)?;
        Ok((s.clone(), s))
    }
    fn backward_memo(&self, s: &Array<T, D>, dy: &Array<T, D>) -> Result<Array<T, D>> {
        crate::space::same_shape("softmax", s, dy).map_err(|e| e.in_output_change("softmax"))?;
        let sdy = s * dy;
        let total = sdy.sum();
        Ok(sdy - s * total)
    }
}

/// `(x, dy) -> s dy` with `s = softmax(x)`.
type SoftmaxTimesDy = Then<Pair<Then<Fst, Softmax>, Snd>, MulPair>;

/// `(x, dy) -> s dy - s <s, dy>`.
pub type SoftmaxRev = Then<
    Pair<
        SoftmaxTimesDy,
        Then<
            Pair<
                Then<Fst, Softmax>,
                Then<Pair<Fst, Then<SoftmaxTimesDy, ElementReduction>>, FillLike>,
            >,
            MulPair,
        >,
    >,
    SubPair,
>;

impl<T: Real, D: Dimension + 'static> Reverse<Array<T, D>> for Softmax {
    type Rev = SoftmaxRev;
    fn rev(&self) -> SoftmaxRev {
        let s_dy = || Fst.then(Softmax).pair(Snd).then(MulPair);
        let spread = Fst
            .pair(s_dy().then(ElementReduction::sum()))
            .then(FillLike::sum());
        s_dy()
            .pair(Fst.then(Softmax).pair(spread).then(MulPair))
            .then(SubPair)
    }
}

impl<T: Real, D: Dimension + 'static> Map<Array<T, D>> for LogSoftmax {
    type Output = Array<T, D>;
    type Memo = Array<T, D>;
    fn forward_memo(&self, x: &Array<T, D>) -> Result<(Array<T, D>, Array<T, D>)> {
        let (s, lse) = softmax_parts("log-softmax", x)?;
        Ok((x.mapv(|v| v - lse), s))
    }
    fn backward_memo(&self, s: &Array<T, D>, dy: &Array<T, D>) -> Result<Array<T, D>> {
        crate::space::same_shape("log-softmax", s, dy)
            .map_err(|e| e.in_output_change("log-softmax"))?;
        Ok(dy - &(s * dy.sum()))
    }
}

/// `(x, dy) -> dy - softmax(x) sum(dy)`.
pub type LogSoftmaxRev = Then<
    Pair<
        Snd,
        Then<
            Pair<Then<Fst, Softmax>, Then<Pair<Fst, Then<Snd, ElementReduction>>, FillLike>>,
            MulPair,
        >,
    >,
    SubPair,
>;

impl<T: Real, D: Dimension + 'static> Reverse<Array<T, D>> for LogSoftmax {
    type Rev = LogSoftmaxRev;
    fn rev(&self) -> LogSoftmaxRev {
        let spread = Fst
            .pair(Snd.then(ElementReduction::sum()))
            .then(FillLike::sum());
        Snd.pair(Fst.then(Softmax).pair(spread).then(MulPair))
            .then(SubPair)
    }
}
