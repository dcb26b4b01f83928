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
    /// The coordinates of `expected - observed`, for numeric comparisons
    /// (empty otherwise). The sampling checker compares them across tiny
    /// perturbations of the case to tell rounding from a broken law.
    pub difference: Vec<f64>,
    /// The size of the values compared, which the allowance is relative
    /// to, when the comparison has one.
    pub scale: Option<f64>,
    /// The name of the observed side alone, which tells the comparisons of
    /// one law apart.
    pub compared: String,
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
            difference: Vec::new(),
            scale: None,
            compared: String::new(),
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

/// What checking one law at one case found, when the law did not simply
/// hold there.
///
/// ```
/// use revdiff::laws::{Discrepancy, Finding};
///
/// let broken: Finding = Discrepancy::failure("the map panicked").into();
/// assert!(matches!(broken, Finding::Broken(_)));
/// let unsure = Finding::Undecided("the estimate is too coarse here".to_string());
/// assert_eq!(unsure.to_string(), "undecided: the estimate is too coarse here");
/// ```
#[derive(Clone, Debug, PartialEq)]
pub enum Finding {
    /// The law is broken at the case.
    Broken(Discrepancy),
    /// The checker cannot tell at this case whether the law holds: the map
    /// is too ill-conditioned here for the precision (the reason says how).
    /// Such a case neither passes nor fails; the report counts it.
    Undecided(String),
}

impl std::fmt::Display for Finding {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Finding::Broken(d) => write!(f, "broken: {}", d.summary()),
            Finding::Undecided(why) => write!(f, "undecided: {why}"),
        }
    }
}

impl From<Discrepancy> for Finding {
    fn from(d: Discrepancy) -> Self {
        Finding::Broken(d)
    }
}

impl From<Error> for Finding {
    fn from(e: Error) -> Self {
        Finding::Broken(e.into())
    }
}

/// The result of checking one law at one case: `Ok` if it held.
pub type Outcome = std::result::Result<(), Finding>;

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
///   terms.
/// - Comparisons against central differences (law 2, and law 3 for maps
///   without a reverse map) allow `estimated` relative to the size of the
///   values compared, plus the extrapolation's own error estimate, plus the
///   rounding of the inner product (a few units of precision times the sum
///   of the absolute values of its terms). The derivative estimate uses
///   Ridders' extrapolation of central differences (Ridders, 1982,
///   "Accurate computation of F'(x) and F'(x) F''(x)") from first steps a
///   decade apart, starting at a tenth of the scale of `x` and shrinking
///   until two neighbouring estimates agree: the step follows the
///   function's own scale of variation, and the disagreement of the
///   neighbours bounds the error, so that the estimate's error is not
///   understated.
/// - `absolute` is added to every allowance, for maps whose values are all
///   near zero; it is 0 by default.
///
/// # Rounding, undecided cases and the detection limit
///
/// Where a comparison fails, the sampling checker evaluates the law again
/// at three tiny perturbations of the case (every value times `1 + d`,
/// `|d|` about `1e-6`). A broken law is a property of the map and survives
/// them almost unchanged; rounding does not. If the difference of the two
/// sides moves under the perturbations by as much as it is large, it is
/// rounding, and the case holds, unless that rounding exceeds the
/// detection limit times the size of the values compared: then the map is
/// too ill-conditioned at the case to decide anything, and the case is
/// reported as *undecided* with the reason (saturated softmax, `tanh` at
/// 30, sums of 100,000 terms of both signs). The same holds for central
/// differences whose error estimate exceeds the limit. An undecided case
/// neither passes nor fails; the report counts them.
///
/// So no allowance ever exceeds the detection limit (default `1e-5` for
/// `f64`, relative to the size of the values compared): at every case that
/// is decided, a backward pass off by more than a relative `1e-5` plus the
/// `estimated` allowance is caught, whatever the scale of the values.
///
/// Before the comparison, output changes whose backward pass would
/// overflow or underflow are multiplied by a power of two (exactly), which
/// every law allows, so that `ln` near `1e-300` is checked at order 2.
///
/// The defaults come from the precision: `exact = sqrt(eps) / 10`,
/// `estimated = cbrt(eps) / 6` and the detection limit ten times
/// `estimated`, that is `1.5e-9`, `1.0e-6` and `1.0e-5` for `f64`. Change
/// them with the builder methods:
///
/// ```
/// use revdiff::laws::{Checker, Tolerance};
///
/// let loose = Tolerance::<f64>::default().estimated(1e-4)?.detection_limit(1e-3)?;
/// assert_eq!(loose.estimated_relative(), 1e-4);
/// let checker = Checker::new().tolerance(loose);
/// # let _ = checker;
/// // A negative allowance is refused, and so is a limit below `estimated`.
/// assert!(Tolerance::<f64>::default().exact(-1.0).is_err());
/// assert!(Tolerance::<f64>::default().detection_limit(1e-8).is_err());
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerance<R> {
    exact: R,
    estimated: R,
    absolute: R,
    limit: R,
    // The natural size of the checked map's output at the current case
    // (set by the checker only where a first comparison failed), and from
    // it the least scale of exact identities (see `natural_scale`).
    natural_output: R,
    floor: R,
    // Set only for the perturbed re-evaluations of a failed comparison:
    // the hash of its observed side's name. That comparison then reports
    // its difference whether or not it is within the allowance; the
    // others judge as usual, so the law reaches it as it did before.
    probing: Option<u64>,
}

impl<R: Real> Default for Tolerance<R> {
    fn default() -> Self {
        let eps = R::epsilon();
        let estimated = eps.cbrt() / R::from(6.0).unwrap_or_else(R::one);
        Tolerance {
            exact: eps.sqrt() / R::from(10.0).unwrap_or_else(R::one),
            estimated,
            absolute: R::zero(),
            limit: estimated * R::from(10.0).unwrap_or_else(R::one),
            natural_output: R::zero(),
            floor: R::zero(),
            probing: None,
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
    /// A negative or non-finite allowance is an [`Error::InvalidSetting`],
    /// and so is one above the detection limit.
    pub fn estimated(mut self, relative: R) -> Result<Self> {
        let relative = checked_allowance("estimated", relative)?;
        if relative > self.limit {
            self.limit = relative;
        }
        self.estimated = relative;
        Ok(self)
    }

    /// Sets the detection limit: the largest rounding or estimation error,
    /// relative to the size of the values compared, at which a case is
    /// still decided (see the type's documentation). It must be finite and
    /// at least the `estimated` allowance, else [`Error::InvalidSetting`].
    pub fn detection_limit(mut self, relative: R) -> Result<Self> {
        let relative = checked_allowance("detection_limit", relative)?;
        if relative < self.estimated {
            return Err(Error::InvalidSetting {
                name: "detection_limit",
                value: relative.to_string(),
                reason: "the detection limit must be at least the estimated allowance",
            });
        }
        self.limit = relative;
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

    /// The detection limit, relative to the size of the values compared.
    pub fn detection_limit_relative(&self) -> R {
        self.limit
    }

    /// The absolute allowance.
    pub fn absolute_allowance(&self) -> R {
        self.absolute
    }

    /// The same policy, knowing the natural size of the map's output at
    /// the current case.
    pub(crate) fn with_natural_output(mut self, size: R) -> Self {
        self.natural_output = if size.is_finite() { size } else { R::zero() };
        self
    }

    /// The size set by [`with_natural_output`](Self::with_natural_output).
    pub(crate) fn natural_output(&self) -> R {
        self.natural_output
    }

    /// The same policy, with `floor` as the least scale of exact
    /// identities at the current case.
    pub(crate) fn floored(mut self, floor: R) -> Self {
        self.floor = if floor.is_finite() { floor } else { R::zero() };
        self
    }

    /// The least scale set by [`floored`](Self::floored).
    pub(crate) fn scale_floor(&self) -> R {
        self.floor
    }

    /// The same policy, for the perturbed re-evaluations of a failed case.
    pub(crate) fn probing(mut self, compared: &str) -> Self {
        self.probing = Some(name_hash(compared));
        self
    }

    fn probes(&self, observed: &str) -> bool {
        self.probing == Some(name_hash(observed))
    }

    /// Compares `observed` with a central-difference estimate whose own
    /// error estimate is `estimate_error`.
    pub(crate) fn against_estimate(
        &self,
        expected: (&str, R),
        estimate_error: R,
        observed: (&str, &Term<R>),
    ) -> Outcome {
        let size = expected.1.abs().max(observed.1.value.abs());
        // A change that is exactly zero (every term 0) against an estimate
        // that is zero within its error: nothing to detect.
        let rounding =
            R::from(ROUNDING_UNITS).unwrap_or_else(R::one) * R::epsilon() * observed.1.magnitude;
        let both_zero = expected.1.abs() <= estimate_error && observed.1.value.abs() <= rounding;
        let probing = self.probes(observed.0);
        if both_zero && !probing {
            return Ok(());
        }
        if !probing && estimate_error > self.limit * size + self.absolute {
            return Err(Finding::Undecided(format!(
                "central differences cannot estimate {} closely enough here: their error \
                 estimate {:.1e} exceeds the detection limit {:.0e} x the size of the values {:.1e}",
                expected.0,
                to_f64(estimate_error),
                to_f64(self.limit),
                to_f64(size)
            )));
        }
        let allowed = self.estimated * size + estimate_error + rounding + self.absolute;
        let error = (expected.1 - observed.1.value).abs();
        self.verdict(
            observed.0,
            error,
            allowed,
            (vec![to_f64(expected.1 - observed.1.value)], size),
            (
                || format!("{} = {}", expected.0, number(expected.1)),
                || format!("{} = {}", observed.0, number(observed.1.value)),
            ),
            format!(
                "|expected - observed| against {:.1e} x size + the estimate's own error {:.1e} \
                 + rounding {:.1e} (size {:.3e}: the larger of |expected| and |observed|)",
                to_f64(self.estimated),
                to_f64(estimate_error),
                to_f64(rounding),
                to_f64(size)
            ),
        )
    }

    /// Builds the outcome of `error <= allowed` (false for NaN, so a NaN
    /// never passes). When probing, the difference is always reported.
    fn verdict(
        &self,
        compared: &str,
        error: R,
        allowed: R,
        (difference, scale): (Vec<f64>, R),
        (expected, observed): (impl FnOnce() -> String, impl FnOnce() -> String),
        measure: String,
    ) -> Outcome {
        if error <= allowed && !self.probes(compared) {
            return Ok(());
        }
        Err(Finding::Broken(Discrepancy {
            expected: expected(),
            observed: observed(),
            error: Some(to_f64(error)),
            tolerance: Some(to_f64(allowed)),
            measure,
            difference,
            scale: Some(to_f64(scale)),
            compared: compared.to_string(),
        }))
    }
}

fn name_hash(name: &str) -> u64 {
    use std::hash::{Hash, Hasher};
    let mut h = std::collections::hash_map::DefaultHasher::new();
    name.hash(&mut h);
    h.finish()
}

/// Units of precision allowed, times the sum of the absolute values of an
/// inner product's terms, for the rounding of that inner product.
const ROUNDING_UNITS: f64 = 16.0;

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
            .max(o.magnitude)
            .max(self.floor);
        let allowed = self.exact * scale + self.absolute;
        self.verdict(
            observed.0,
            (e.value - o.value).abs(),
            allowed,
            (vec![to_f64(e.value - o.value)], scale),
            (|| format!("{} = {}", expected.0, number(e.value)),
            || format!("{} = {}", observed.0, number(o.value))),
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
                ..Discrepancy::failure("the shapes differ")
            }
            .into());
        }
        let diff: Vec<R> = e.iter().zip(&o).map(|(a, b)| *a - *b).collect();
        let scale = context
            .iter()
            .map(|c| norm(&c.coordinates()))
            .fold(norm(&e).max(norm(&o)), |m, n| m.max(n))
            .max(self.floor);
        let allowed = self.exact * scale + self.absolute;
        self.verdict(
            observed.0,
            norm(&diff),
            allowed,
            (diff.iter().map(|d| to_f64(*d)).collect(), scale),
            (|| format!("{} = {}", expected.0, self.show(expected.1)),
            || format!("{} = {}", observed.0, self.show(observed.1))),
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

impl<T: Real + ExactScalar, D: Dimension + 'static> ExactPairing<T> for Array<T, D> {
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
                ..Discrepancy::failure("exact comparison: the values differ")
            }
            .into())
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
                ..Discrepancy::failure("exact comparison: the values differ")
            }
            .into())
        }
    }

    fn defect(&self, _value: &S) -> Option<String> {
        None
    }

    fn show(&self, value: &S) -> String {
        value.show_exactly()
    }
}
