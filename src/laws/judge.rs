//! How two values that a law says are equal are compared: within a
//! [`Tolerance`] on real spaces, or exactly ([`ExactComparison`]) on finite domains.

use crate::error::{Error, Result};
use crate::space::{Euclidean, Real, Space};
use ndarray::{Array, Dimension};
use std::fmt::Debug;
use std::marker::PhantomData;

/// Why one case broke a law: the two sides, how far apart they were and how
/// far apart they may be. The checkers attach the law and the case to make
/// a [`Violation`](crate::laws::Violation).
#[derive(Clone, Debug, PartialEq)]
pub struct Discrepancy {
    /// The side the law predicts, as `name = value`.
    pub expected: String,
    /// The side the map produced, as `name = value`.
    pub observed: String,
    /// The error measure's value, when the comparison has one.
    pub error: Option<f64>,
    /// The largest error the tolerance allows, when it has one.
    pub tolerance: Option<f64>,
    /// What `error` measures (or why there is no measure).
    pub measure: String,
}

impl Discrepancy {
    /// A breach with no numbers: the map failed, panicked or gave the wrong
    /// shape.
    pub fn failure(what: impl Into<String>) -> Self {
        Discrepancy {
            expected: String::new(),
            observed: String::new(),
            error: None,
            tolerance: None,
            measure: what.into(),
        }
    }

    /// One line, for the messages proptest keeps while shrinking.
    pub fn summary(&self) -> String {
        match (self.error, self.tolerance) {
            (Some(e), Some(t)) => format!("{}: error {e:e} > tolerance {t:e}", self.measure),
            _ => self.measure.clone(),
        }
    }
}

impl From<Error> for Discrepancy {
    fn from(e: Error) -> Self {
        Discrepancy::failure(format!("the map returned an error: {e}"))
    }
}

/// The result of checking one law at one case.
pub type Outcome = std::result::Result<(), Discrepancy>;

/// A way of comparing the scalars a law produces (inner products).
///
/// Implemented by [`Tolerance`] (real arithmetic, rounding allowed) and by
/// [`ExactComparison`] (finite domains, no tolerance). The laws are written once
/// against this trait and [`ComparisonIn`].
pub trait Comparison {
    /// The value of an inner product, with whatever the comparison needs to
    /// know about it.
    type Scalar: Clone + Debug;

    /// `Ok` if the scalars are equal in this judge's sense.
    fn same_scalar(
        &self,
        expected: (&str, &Self::Scalar),
        observed: (&str, &Self::Scalar),
    ) -> Outcome;
}

/// A [`Comparison`] that can compare values of the space `S`.
pub trait ComparisonIn<S: Space>: Comparison {
    /// The inner product `<a, b>`.
    fn inner(&self, a: &S, b: &S) -> Result<Self::Scalar>;

    /// `Ok` if `expected` and `observed` are equal in this judge's sense.
    /// `context` lists values that were combined to make them (the parts of
    /// a sum): their sizes set the scale of the rounding allowed.
    fn same(&self, expected: (&str, &S), observed: (&str, &S), context: &[&S]) -> Outcome;

    /// A description of what is wrong with a value that should be finite,
    /// or `None`.
    fn defect(&self, value: &S) -> Option<String>;

    /// The value, as a report shows it.
    fn show(&self, value: &S) -> String;
}

/// The tolerance policy for checks on real spaces.
///
/// Three kinds of comparison are made:
///
/// - Identities that hold exactly in exact arithmetic (law 1, law 3 and 4
///   through the second reverse derivative, law 5, the pair laws) allow an
///   error of `exact` relative to the scale of the values: the largest of
///   the Euclidean norms of the two sides and of the parts they were summed
///   from, or for inner products the sum of the absolute values of their
///   terms. Rounding is relative to those sizes, so sums of 10,000 terms
///   and 100 x 100 matrix products pass while real differences do not.
/// - Comparisons against central differences (law 2, and law 3 for maps
///   without a reverse map) allow `estimated` relative to the same scale,
///   plus the extrapolation's own error estimate. The derivative estimate
///   uses Ridders' extrapolation of central differences (Ridders, 1982,
///   "Accurate computation of F'(x) and F'(x) F''(x)"), from a step of one
///   tenth of the scale of `x`, halved until the map is finite at twice the
///   step, so points near the edge of a domain (`ln` near `1e-6`, `sqrt`
///   near 0) are reached from inside it.
/// - `absolute` is added to every allowance, for maps whose values are all
///   near zero; it is 0 by default.
///
/// The defaults come from the precision: `exact = sqrt(eps) / 10` and
/// `estimated = cbrt(eps) / 6`, that is `1.5e-9` and `1.0e-6` for `f64`.
/// With these, a gradient off by a relative `1e-4` fails law 2 while `exp`
/// near 30, `ln` near `1e-6` and the other ill-conditioned maps of the test
/// suite pass over thousands of cases. Change them with the builder methods:
///
/// ```
/// use revdiff::laws::{Checker, Tolerance};
///
/// let loose = Tolerance::<f64>::default().estimated(1e-4)?.absolute(1e-12)?;
/// assert_eq!(loose.estimated_relative(), 1e-4);
/// let checker = Checker::new().tolerance(loose);
/// # let _ = checker;
/// // A negative allowance is refused.
/// assert!(Tolerance::<f64>::default().exact(-1.0).is_err());
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerance<R> {
    exact: R,
    estimated: R,
    absolute: R,
}

impl<R: Real> Default for Tolerance<R> {
    fn default() -> Self {
        let eps = R::epsilon();
        Tolerance {
            exact: eps.sqrt() / R::from(10.0).unwrap_or_else(R::one),
            estimated: eps.cbrt() / R::from(6.0).unwrap_or_else(R::one),
            absolute: R::zero(),
        }
    }
}

impl<R: Real> Tolerance<R> {
    /// Sets the relative allowance for exact identities. A negative or
    /// non-finite allowance is an [`Error::InvalidSetting`].
    pub fn exact(mut self, relative: R) -> Result<Self> {
        self.exact = checked_allowance("exact", relative)?;
        Ok(self)
    }

    /// Sets the relative allowance for comparisons with central differences.
    /// A negative or non-finite allowance is an [`Error::InvalidSetting`].
    pub fn estimated(mut self, relative: R) -> Result<Self> {
        self.estimated = checked_allowance("estimated", relative)?;
        Ok(self)
    }

    /// Sets the absolute allowance added to every comparison. A negative or
    /// non-finite allowance is an [`Error::InvalidSetting`].
    pub fn absolute(mut self, absolute: R) -> Result<Self> {
        self.absolute = checked_allowance("absolute", absolute)?;
        Ok(self)
    }

    /// The relative allowance for exact identities.
    pub fn exact_relative(&self) -> R {
        self.exact
    }

    /// The relative allowance for comparisons with central differences.
    pub fn estimated_relative(&self) -> R {
        self.estimated
    }

    /// The absolute allowance.
    pub fn absolute_allowance(&self) -> R {
        self.absolute
    }

    /// Compares `observed` with a central-difference estimate whose own
    /// error estimate is `estimate_error`.
    pub(crate) fn against_estimate(
        &self,
        expected: (&str, R),
        estimate_error: R,
        observed: (&str, &Term<R>),
    ) -> Outcome {
        let scale = expected.1.abs().max(observed.1.magnitude);
        let allowed = self.estimated * scale + estimate_error + self.absolute;
        let error = (expected.1 - observed.1.value).abs();
        verdict(
            error,
            allowed,
            || format!("{} = {}", expected.0, number(expected.1)),
            || format!("{} = {}", observed.0, number(observed.1.value)),
            format!(
                "|expected - observed| against {:.1e} x scale + the estimate's own error {:.1e} \
                 (scale {:.3e}: the larger of |expected| and the sum of |terms| of the inner product)",
                to_f64(self.estimated),
                to_f64(estimate_error),
                to_f64(scale)
            ),
        )
    }
}

/// An inner product's value and the sum of the absolute values of its terms,
/// which sets the scale of its rounding error.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Term<R> {
    /// `<a, b>`.
    pub value: R,
    /// `sum |a_i b_i|`.
    pub magnitude: R,
}

fn checked_allowance<R: Real>(name: &'static str, value: R) -> Result<R> {
    // The relative allowances must leave room for rounding: at zero every
    // correct map would be reported broken. The absolute one may be zero.
    let zero_allowed = name == "absolute";
    if value.is_finite() && (value > R::zero() || (zero_allowed && value == R::zero())) {
        Ok(value)
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: if zero_allowed {
                "an absolute tolerance must be finite and not negative"
            } else {
                "a relative tolerance must be finite and positive (zero leaves no room for rounding)"
            },
        })
    }
}

/// A number as a report shows it: plainly between 1e-4 and 1e6, else in
/// scientific notation.
pub(crate) fn number<R: Real>(r: R) -> String {
    let v = to_f64(r);
    if v == 0.0 || (1e-4..1e6).contains(&v.abs()) || !v.is_finite() {
        r.to_string()
    } else {
        format!("{v:e}")
    }
}

pub(crate) fn to_f64<R: Real>(r: R) -> f64 {
    r.to_f64().unwrap_or(f64::NAN)
}

/// Builds the outcome of `error <= allowed` (false for NaN, so a NaN never
/// passes).
fn verdict<R: Real>(
    error: R,
    allowed: R,
    expected: impl FnOnce() -> String,
    observed: impl FnOnce() -> String,
    measure: String,
) -> Outcome {
    if error <= allowed {
        return Ok(());
    }
    Err(Discrepancy {
        expected: expected(),
        observed: observed(),
        error: Some(to_f64(error)),
        tolerance: Some(to_f64(allowed)),
        measure,
    })
}

pub(crate) fn term<R: Real, S: Euclidean<R>>(a: &S, b: &S) -> Result<Term<R>> {
    let (ca, cb) = (a.coordinates(), b.coordinates());
    if ca.len() != cb.len() {
        return Err(Error::shape(
            "inner product in a law",
            a.shape_string(),
            b.shape_string(),
        ));
    }
    let mut value = R::zero();
    let mut magnitude = R::zero();
    for (p, q) in ca.iter().zip(&cb) {
        value = value + *p * *q;
        magnitude = magnitude + (*p * *q).abs();
    }
    Ok(Term { value, magnitude })
}

fn norm<R: Real>(coords: &[R]) -> R {
    coords.iter().fold(R::zero(), |acc, c| acc + *c * *c).sqrt()
}

impl<R: Real> Comparison for Tolerance<R> {
    type Scalar = Term<R>;

    fn same_scalar(&self, expected: (&str, &Term<R>), observed: (&str, &Term<R>)) -> Outcome {
        let (e, o) = (expected.1, observed.1);
        let scale = e
            .value
            .abs()
            .max(o.value.abs())
            .max(e.magnitude)
            .max(o.magnitude);
        let allowed = self.exact * scale + self.absolute;
        verdict(
            (e.value - o.value).abs(),
            allowed,
            || format!("{} = {}", expected.0, number(e.value)),
            || format!("{} = {}", observed.0, number(o.value)),
            format!(
                "|expected - observed| against {:.1e} x scale (scale {:.3e}: the sum of |terms| of the inner products)",
                to_f64(self.exact),
                to_f64(scale)
            ),
        )
    }
}

impl<R: Real, S: Euclidean<R>> ComparisonIn<S> for Tolerance<R> {
    fn inner(&self, a: &S, b: &S) -> Result<Term<R>> {
        term(a, b)
    }

    fn same(&self, expected: (&str, &S), observed: (&str, &S), context: &[&S]) -> Outcome {
        let (e, o) = (expected.1.coordinates(), observed.1.coordinates());
        if e.len() != o.len() || expected.1.shape_string() != observed.1.shape_string() {
            return Err(Discrepancy {
                expected: format!("{} of shape {}", expected.0, expected.1.shape_string()),
                observed: format!("{} of shape {}", observed.0, observed.1.shape_string()),
                error: None,
                tolerance: None,
                measure: "the shapes differ".to_string(),
            });
        }
        let diff: Vec<R> = e.iter().zip(&o).map(|(a, b)| *a - *b).collect();
        let scale = context
            .iter()
            .map(|c| norm(&c.coordinates()))
            .fold(norm(&e).max(norm(&o)), |m, n| m.max(n));
        let allowed = self.exact * scale + self.absolute;
        verdict(
            norm(&diff),
            allowed,
            || format!("{} = {}", expected.0, self.show(expected.1)),
            || format!("{} = {}", observed.0, self.show(observed.1)),
            format!(
                "|expected - observed| (Euclidean norm) against {:.1e} x scale (scale {:.3e}: the largest norm of the values compared and their parts)",
                to_f64(self.exact),
                to_f64(scale)
            ),
        )
    }

    fn defect(&self, value: &S) -> Option<String> {
        if value.all_finite() {
            None
        } else {
            Some(self.show(value))
        }
    }

    fn show(&self, value: &S) -> String {
        show_coordinates(value)
    }
}

/// Coordinates with the shape, the first 12 only for large values.
pub(crate) fn show_coordinates<R: Real, S: Euclidean<R>>(value: &S) -> String {
    let coords = value.coordinates();
    let shape = value.shape_string();
    if shape == "scalar" && coords.len() == 1 {
        return number(coords[0]);
    }
    const SHOWN: usize = 12;
    let mut parts: Vec<String> = coords.iter().take(SHOWN).map(|c| number(*c)).collect();
    if coords.len() > SHOWN {
        parts.push(format!("... ({} more)", coords.len() - SHOWN));
    }
    format!("{shape} [{}]", parts.join(", "))
}

/// Exact comparison, for finite domains: values must be equal, with no
/// tolerance. `K` is the scalar that inner products take values in.
///
/// ```
/// use revdiff::laws::{ExactComparison, Comparison};
///
/// let judge = ExactComparison::<f64>::new();
/// assert!(judge.same_scalar(("a", &2.0), ("b", &2.0)).is_ok());
/// assert!(judge.same_scalar(("a", &2.0), ("b", &2.5)).is_err());
/// ```
#[derive(Clone, Copy, Debug, Default)]
pub struct ExactComparison<K>(PhantomData<K>);

impl<K> ExactComparison<K> {
    /// The exact judge.
    pub fn new() -> Self {
        ExactComparison(PhantomData)
    }
}

/// A scalar that exact inner products take values in: the reals on integer
/// grids, or the bits of a Boolean space.
pub trait ExactScalar: Clone + Debug + PartialEq {
    /// The zero scalar.
    fn zero() -> Self;
    /// The sum of two scalars.
    fn plus(&self, other: &Self) -> Self;
}

/// A space whose values can be compared and paired exactly, for the
/// [`Exhaustive`](crate::laws::Exhaustive) checker.
///
/// The real spaces implement it with ordinary arithmetic, which is exact on
/// small integer grids; a space of bits implements it with XOR and AND, and
/// plugs into the exhaustive checker with no change to it.
pub trait ExactPairing<K: ExactScalar>: Space + PartialEq {
    /// The inner product `<self, other>`, exactly.
    fn pair_exactly(&self, other: &Self) -> Result<K>;

    /// The value, as a report shows it.
    fn show_exactly(&self) -> String {
        format!("{self:?}")
    }
}

macro_rules! exact_real {
    ($($t:ty),*) => {$(
        impl ExactScalar for $t {
            fn zero() -> Self {
                0.0
            }
            fn plus(&self, other: &Self) -> Self {
                self + other
            }
        }
        impl ExactPairing<$t> for $t {
            fn pair_exactly(&self, other: &Self) -> Result<$t> {
                Ok(self * other)
            }
            fn show_exactly(&self) -> String {
                self.to_string()
            }
        }
    )*};
}
exact_real!(f32, f64);

impl<T: Real + ExactScalar, D: Dimension> ExactPairing<T> for Array<T, D> {
    fn pair_exactly(&self, other: &Self) -> Result<T> {
        self.inner(other)
    }
    fn show_exactly(&self) -> String {
        show_coordinates(self)
    }
}

impl<K: ExactScalar> ExactPairing<K> for () {
    fn pair_exactly(&self, _: &Self) -> Result<K> {
        Ok(K::zero())
    }
}

impl<K: ExactScalar, S: ExactPairing<K>, const N: usize> ExactPairing<K> for [S; N] {
    fn pair_exactly(&self, other: &Self) -> Result<K> {
        self.iter()
            .zip(other)
            .try_fold(K::zero(), |acc, (a, b)| Ok(acc.plus(&a.pair_exactly(b)?)))
    }
}

macro_rules! exact_tuple {
    ($($name:ident $idx:tt),+) => {
        impl<K: ExactScalar, $($name: ExactPairing<K>),+> ExactPairing<K> for ($($name,)+) {
            fn pair_exactly(&self, other: &Self) -> Result<K> {
                let mut acc = K::zero();
                $(acc = acc.plus(&self.$idx.pair_exactly(&other.$idx)?);)+
                Ok(acc)
            }
            fn show_exactly(&self) -> String {
                let parts = [$(self.$idx.show_exactly()),+];
                format!("({})", parts.join(", "))
            }
        }
    };
}
exact_tuple!(A 0, B 1);
exact_tuple!(A 0, B 1, C 2);
exact_tuple!(A 0, B 1, C 2, D 3);

impl<K: ExactScalar> Comparison for ExactComparison<K> {
    type Scalar = K;

    fn same_scalar(&self, expected: (&str, &K), observed: (&str, &K)) -> Outcome {
        if expected.1 == observed.1 {
            Ok(())
        } else {
            Err(Discrepancy {
                expected: format!("{} = {:?}", expected.0, expected.1),
                observed: format!("{} = {:?}", observed.0, observed.1),
                error: None,
                tolerance: None,
                measure: "exact comparison: the values differ".to_string(),
            })
        }
    }
}

impl<K: ExactScalar, S: ExactPairing<K>> ComparisonIn<S> for ExactComparison<K> {
    fn inner(&self, a: &S, b: &S) -> Result<K> {
        a.pair_exactly(b)
    }

    fn same(&self, expected: (&str, &S), observed: (&str, &S), _context: &[&S]) -> Outcome {
        if expected.1 == observed.1 {
            Ok(())
        } else {
            Err(Discrepancy {
                expected: format!("{} = {}", expected.0, expected.1.show_exactly()),
                observed: format!("{} = {}", observed.0, observed.1.show_exactly()),
                error: None,
                tolerance: None,
                measure: "exact comparison: the values differ".to_string(),
            })
        }
    }

    fn defect(&self, _value: &S) -> Option<String> {
        None
    }

    fn show(&self, value: &S) -> String {
        value.show_exactly()
    }
}
