//! Elementwise primitives over real scalars and arrays.
//!
//! Every map here acts on any [`Pointwise`] space: `f32`, `f64`, `[T; N]`
//! and ndarray arrays of any dimension, one element at a time. Binary maps
//! take a pair of values of the same shape; different shapes are an
//! [`Error::ShapeMismatch`](crate::Error::ShapeMismatch), never a broadcast.
//!
//! Outside a map's domain the value follows IEEE arithmetic (`Ln` of a
//! negative number is NaN); the law checkers and the training loop report
//! such values as errors. At non-differentiable points the derivative is
//! fixed by convention and documented on each map.
//!
//! Each reverse derivative is `(x, dy) -> slope(x) * dy` with `slope` itself
//! a primitive of this module, so reverse derivatives of every order exist.

use crate::combinators::{Fst, Id, MultiplyBy, Pair, Snd, Then, ZeroMap};
use crate::dynamic::ScalarStages;
use crate::error::{Error, Result};
use crate::map::{Compose, Linear, Map, Reverse};
use crate::space::{Pointwise, Real};
use crate::workspace::Workspace;

// Every map here lists itself as a stage on one real number, so that a
// boxed composition of them is swept (see `ScalarStages`).
macro_rules! scalar_stage {
    ($($ty:ident),*) => {$(
        impl Compose for $ty {
            fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
                into.push(self.clone())
            }
        }
    )*};
    // Maps with a setting of the element type act on that type only.
    ($($ty:ident<T>),*) => {$(
        impl<T: Real> Compose for $ty<T> {
            fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
                into.push_either::<$ty<f64>, $ty<f32>>(self)
            }
        }
    )*};
}
scalar_stage!(
    Exp,
    ExpMinusOne,
    LnOnePlus,
    Arctan,
    Ln,
    Sqrt,
    Sin,
    Cos,
    Tanh,
    SechSquared,
    Sigmoid,
    Softplus,
    Relu,
    Heaviside,
    Abs,
    Signum,
    Neg,
    IntegerPower
);
scalar_stage!(Shift<T>, Powi<T>, Powf<T>, Clamp<T>, InsideBand<T>);

/// A scalar function with its derivative, applied element by element.
trait Elementwise<T: Real> {
    /// Name used in error messages.
    const NAME: &'static str;
    /// The function's value.
    fn value(&self, x: T) -> T;
    /// Its derivative.
    fn slope(&self, x: T) -> T;
    /// The value and the slope together, for maps where they share work;
    /// such maps keep the slope (see the macro's `slope with value`).
    fn value_and_slope(&self, x: T) -> (T, T) {
        (self.value(x), self.slope(x))
    }
    /// `slope(x) * d`, where a map whose slope can overflow while the
    /// product cannot computes it without the overflow.
    fn slope_times(&self, x: T, d: T) -> T {
        self.slope(x) * d
    }
    /// An error if the map's settings (public fields, so not checked at
    /// construction) make no sense; checked at every pass.
    fn settings(&self) -> Result<()> {
        Ok(())
    }
}

/// `Ok` if `value` is finite, else [`Error::InvalidSetting`] naming it.
fn finite_setting<T: Real>(name: &'static str, value: T) -> Result<()> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(Error::InvalidSetting {
            name,
            value: value.to_string(),
            reason: "the setting of a power must be finite",
        })
    }
}

fn real<T: Real>(v: f64) -> T {
    T::from(v).expect("every real type holds small constants")
}

/// The logistic function `1 / (1 + e^-x)`, without overflow for either sign.
pub(crate) fn logistic<T: Real>(x: T) -> T {
    if x >= T::zero() {
        T::one() / (T::one() + (-x).exp())
    } else {
        let e = x.exp();
        e / (T::one() + e)
    }
}

/// The logistic function at `x` and at `-x`, from one exponential
/// `e^-|x|`; each is what [`logistic`] gives.
fn logistic_both<T: Real>(x: T) -> (T, T) {
    let e = (-x.abs()).exp();
    let (near_one, near_zero) = (T::one() / (T::one() + e), e / (T::one() + e));
    if x >= T::zero() {
        (near_one, near_zero)
    } else {
        (near_zero, near_one)
    }
}

/// `ln(1 + e^x)` as `max(x, 0) + ln(1 + e^-|x|)`: no overflow, no lost digits.
pub(crate) fn softplus<T: Real>(x: T) -> T {
    x.max(T::zero()) + (-x.abs()).exp().ln_1p()
}

/// Adds `product(kept, dy)` to `dx` element by element. A `dy` of the
/// wrong shape is an error naming the map's output change; a `dx` of the
/// wrong shape, one naming the sum.
fn adding<E: Pointwise>(
    name: &'static str,
    kept: &E,
    dy: &E,
    dx: &mut E,
    product: impl Fn(E::Elem, E::Elem) -> E::Elem + Sync + Send,
) -> Result<()> {
    kept.check_same_shape(dy)
        .map_err(|e| e.in_output_change(name))?;
    kept.zip_elems_adding(dy, dx, name, product)
}

/// An elementwise map's value at every element, after checking its settings.
fn values<E: Pointwise, M: Elementwise<E::Elem> + Sync>(map: &M, x: &E) -> Result<E> {
    map.settings()?;
    Ok(x.map_elems(|v| map.value(v)))
}

/// An elementwise map's input change from what its forward pass kept and
/// the output change, combined element by element by `product`; a shape
/// error names the map.
fn changes<E: Pointwise, M: Elementwise<E::Elem>>(
    map: &M,
    kept: &E,
    dy: &E,
    product: impl Fn(E::Elem, E::Elem) -> E::Elem + Sync + Send,
) -> Result<E> {
    map.settings()?;
    kept.zip_elems(dy, M::NAME, product)
        .map_err(|e| e.in_output_change(M::NAME))
}

/// `(x, dy) -> slope(x) * dy`, where `S` is the map computing `slope`.
pub type ElementwiseRev<S> = Then<Pair<Then<Fst, S>, Snd>, MulPair>;

macro_rules! elementwise {
    // Maps whose slope is cheap from the output keep the output, not the
    // input: the backward pass then recomputes nothing.
    ([$($gen:tt)*] $ty:ty, slope map $slope_ty:ty = |$s:ident| $slope:expr,
     slope from output |$y:ident| $from_output:expr) => {
        elementwise!(@map [$($gen)*] $ty, keeps output, |$y, d, _map| $from_output * d);
        elementwise!(@reverse [$($gen)*] $ty, $slope_ty, |$s| $slope);
    };
    // Maps whose value and slope share work (a sine and a cosine from one
    // `sin_cos`, an exponential that is its own slope) compute both in the
    // forward passes that keep something, and keep the slope: the backward
    // pass is then one product.
    ([$($gen:tt)*] $ty:ty, slope map $slope_ty:ty = |$s:ident| $slope:expr,
     slope with value) => {
        elementwise!(@map_slope [$($gen)*] $ty);
        elementwise!(@reverse [$($gen)*] $ty, $slope_ty, |$s| $slope);
    };
    ([$($gen:tt)*] $ty:ty, slope map $slope_ty:ty = |$s:ident| $slope:expr) => {
        elementwise!(@map [$($gen)*] $ty, keeps input,
            |v, d, map| Elementwise::<E::Elem>::slope_times(map, v, d));
        elementwise!(@reverse [$($gen)*] $ty, $slope_ty, |$s| $slope);
    };
    // `kept` is the input or the output; `$slope` turns one kept element
    // into the slope there.
    (@map [$($gen:tt)*] $ty:ty, keeps $which:ident, |$k:ident, $d:ident, $map:ident| $product:expr) => {
        impl<$($gen)*> Map<E> for $ty {
            type Output = E;
            type Memo = E;
            fn forward(&self, x: &E) -> Result<E> {
                values(self, x)
            }
            fn forward_memo(&self, x: &E) -> Result<(E, E)> {
                let y = self.forward(x)?;
                let kept = elementwise!(@kept $which, x, y);
                Ok((y, kept))
            }
            fn backward_memo(&self, kept: &E, dy: &E) -> Result<E> {
                let $map = self;
                changes(self, kept, dy, |$k, $d| $product)
            }
            // The reusing passes keep no memo: the output stays in the
            // workspace and the backward pass is handed the input again.
            fn forward_reusing<'w>(&self, x: &E, work: &'w mut Workspace) -> Result<&'w E> {
                Elementwise::<E::Elem>::settings(self)?;
                let f = |v| Elementwise::<E::Elem>::value(self, v);
                match work.output_mut::<E>() {
                    Some(y) => x.map_elems_into(y, f),
                    None => work.put_output(x.map_elems(f)),
                }
                work.output::<E>()
            }
            fn backward_reusing(&self, x: &E, work: &mut Workspace, dy: &E, dx: &mut E) -> Result<()> {
                Elementwise::<E::Elem>::settings(self)?;
                let name = <Self as Elementwise<E::Elem>>::NAME;
                let $map = self;
                let kept = elementwise!(@kept_ref $which, x, work);
                kept.zip_elems_into(dy, dx, name, |$k, $d| $product)
                    .map_err(|e| e.in_output_change(name))
            }
            // The change is added in the pass that computes it.
            fn backward_reusing_adding(&self, x: &E, work: &mut Workspace, dy: &E, dx: &mut E) -> Result<()> {
                Elementwise::<E::Elem>::settings(self)?;
                let name = <Self as Elementwise<E::Elem>>::NAME;
                let $map = self;
                let kept = elementwise!(@kept_ref $which, x, work);
                adding(name, kept, dy, dx, |$k, $d| $product)
            }
        }
    };
    (@map_slope [$($gen:tt)*] $ty:ty) => {
        impl<$($gen)*> Map<E> for $ty {
            type Output = E;
            type Memo = E;
            fn forward(&self, x: &E) -> Result<E> {
                values(self, x)
            }
            fn forward_memo(&self, x: &E) -> Result<(E, E)> {
                Elementwise::<E::Elem>::settings(self)?;
                Ok(x.map_elems_two(|v| Elementwise::<E::Elem>::value_and_slope(self, v)))
            }
            fn backward_memo(&self, slope: &E, dy: &E) -> Result<E> {
                changes(self, slope, dy, |s, d| s * d)
            }
            // The output stays in the workspace's output slot, the slope
            // in its state.
            fn forward_reusing<'w>(&self, x: &E, work: &'w mut Workspace) -> Result<&'w E> {
                Elementwise::<E::Elem>::settings(self)?;
                let f = |v| Elementwise::<E::Elem>::value_and_slope(self, v);
                let (output, slope) = work.output_and_state::<E, E>(|| x.clone());
                if let Some(y) = output {
                    x.map_elems_two_into(y, slope, f);
                } else {
                    let (y, s) = x.map_elems_two(f);
                    *slope = s;
                    work.put_output(y);
                }
                work.output::<E>()
            }
            fn backward_reusing(&self, x: &E, work: &mut Workspace, dy: &E, dx: &mut E) -> Result<()> {
                let _ = x;
                Elementwise::<E::Elem>::settings(self)?;
                let name = <Self as Elementwise<E::Elem>>::NAME;
                work.state::<E>()?
                    .zip_elems_into(dy, dx, name, |s, d| s * d)
                    .map_err(|e| e.in_output_change(name))
            }
            fn backward_reusing_adding(&self, x: &E, work: &mut Workspace, dy: &E, dx: &mut E) -> Result<()> {
                let _ = x;
                Elementwise::<E::Elem>::settings(self)?;
                let name = <Self as Elementwise<E::Elem>>::NAME;
                adding(name, work.state::<E>()?, dy, dx, |s, d| s * d)
            }
        }
    };
    (@kept input, $x:ident, $y:ident) => { $x.clone() };
    (@kept output, $x:ident, $y:ident) => { $y.clone() };
    (@kept_ref input, $x:ident, $w:ident) => {{ let _ = &$w; $x }};
    (@kept_ref output, $x:ident, $w:ident) => {{ let _ = $x; $w.output::<E>()? }};
    (@reverse [$($gen:tt)*] $ty:ty, $slope_ty:ty, |$s:ident| $slope:expr) => {
        impl<$($gen)*> Reverse<E> for $ty {
            type Rev = ElementwiseRev<$slope_ty>;
            fn rev(&self) -> Self::Rev {
                let $s = self;
                Fst.then($slope).pair(Snd).then(MulPair)
            }
        }
    };
}

/// `x -> e^x`. Reverse derivative: `e^x dy`.
///
/// ```
/// use revdiff::{Exp, Map};
/// assert_eq!(Exp.backward(&0.0_f64, &2.0).unwrap(), 2.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Exp;

impl<T: Real> Elementwise<T> for Exp {
    const NAME: &'static str = "exp";
    fn value(&self, x: T) -> T {
        x.exp()
    }
    fn slope(&self, x: T) -> T {
        x.exp()
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        let e = x.exp();
        (e, e)
    }
}
elementwise!([E: Pointwise] Exp, slope map Exp = |_s| Exp, slope with value);

/// The natural logarithm, domain `x > 0`. Reverse derivative: `dy / x`.
///
/// ```
/// use revdiff::{Ln, Map};
/// assert_eq!(Ln.backward(&4.0_f64, &2.0).unwrap(), 0.5);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Ln;

impl<T: Real> Elementwise<T> for Ln {
    const NAME: &'static str = "ln";
    fn value(&self, x: T) -> T {
        x.ln()
    }
    fn slope(&self, x: T) -> T {
        x.recip()
    }
}
elementwise!([E: Pointwise] Ln, slope map Powi<E::Elem> = |_s| Powi::new(-1));

/// The square root, domain `x >= 0`, differentiable for `x > 0`. Reverse
/// derivative: `dy / (2 sqrt x)` (infinite at 0).
///
/// ```
/// use revdiff::{Map, Sqrt};
/// assert_eq!(Sqrt.backward(&4.0_f64, &1.0).unwrap(), 0.25);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Sqrt;

impl<T: Real> Elementwise<T> for Sqrt {
    const NAME: &'static str = "sqrt";
    fn value(&self, x: T) -> T {
        x.sqrt()
    }
    fn slope(&self, x: T) -> T {
        real::<T>(0.5) / x.sqrt()
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        let r = x.sqrt();
        (r, real::<T>(0.5) / r)
    }
}
elementwise!([E: Pointwise] Sqrt,
    slope map Powf<E::Elem> = |_s| Powf::with_coefficient(real(0.5), real(-0.5)),
    slope with value);

/// A scaled integer power `x -> c x^n` (with `c = 1` from [`Powi::new`]).
///
/// Reverse derivative: `c n x^(n-1) dy`, whose slope is again a `Powi`. A
/// zero coefficient gives the zero map, also where `x^n` would be infinite,
/// so that the derivative of a constant is zero everywhere.
///
/// ```
/// use revdiff::{Map, Powi};
/// assert_eq!(Powi::new(3).forward(&2.0_f64).unwrap(), 8.0);
/// assert_eq!(Powi::new(3).backward(&2.0_f64, &1.0).unwrap(), 12.0);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Powi<T> {
    /// The coefficient `c`.
    pub coef: T,
    /// The exponent `n`.
    pub n: i32,
}

impl<T: Real> Powi<T> {
    /// `x -> x^n`.
    pub fn new(n: i32) -> Self {
        Powi { coef: T::one(), n }
    }
    /// `x -> c x^n`.
    pub fn with_coefficient(coef: T, n: i32) -> Self {
        Powi { coef, n }
    }
}

impl<T: Real> Elementwise<T> for Powi<T> {
    const NAME: &'static str = "integer power";
    fn value(&self, x: T) -> T {
        if self.coef == T::zero() {
            T::zero()
        } else {
            self.coef * x.powi(self.n)
        }
    }
    fn slope(&self, x: T) -> T {
        self.rev_slope().value(x)
    }
    fn slope_times(&self, x: T, d: T) -> T {
        let product = self.slope(x) * d;
        let k = 1 - self.n;
        if product.is_finite() || k <= 0 || !d.is_finite() || self.coef == T::zero() {
            return product;
        }
        // x^(n-1) overflowed (x near 0, n - 1 < 0) while d is small: divide
        // by x one factor at a time, which overflows only if the result does.
        let mut r = self.coef * real::<T>(f64::from(self.n)) * d;
        for _ in 0..k {
            r = r / x;
        }
        r
    }
    fn settings(&self) -> Result<()> {
        finite_setting("Powi coefficient", self.coef)
    }
}

impl<T: Real> Powi<T> {
    fn rev_slope(&self) -> Powi<T> {
        Powi::with_coefficient(self.coef * real::<T>(f64::from(self.n)), self.n - 1)
    }
}
elementwise!([T: Real, E: Pointwise<Elem = T>] Powi<T>, slope map Powi<T> = |s| s.rev_slope());

/// A scaled real power `x -> c x^p`, domain `x > 0` (for integer exponents
/// on all reals, use [`Powi`]).
///
/// Reverse derivative: `c p x^(p-1) dy`. A zero coefficient gives the zero map.
///
/// ```
/// use revdiff::{Map, Powf};
/// assert_eq!(Powf::new(0.5).forward(&9.0_f64).unwrap(), 3.0);
/// // A setting that is not finite is an error at the first pass.
/// assert!(Powf::new(f64::NAN).forward(&9.0_f64).is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Powf<T> {
    /// The coefficient `c`.
    pub coef: T,
    /// The exponent `p`.
    pub p: T,
}

impl<T: Real> Powf<T> {
    /// `x -> x^p`.
    pub fn new(p: T) -> Self {
        Powf { coef: T::one(), p }
    }
    /// `x -> c x^p`.
    pub fn with_coefficient(coef: T, p: T) -> Self {
        Powf { coef, p }
    }
    fn rev_slope(&self) -> Powf<T> {
        Powf::with_coefficient(self.coef * self.p, self.p - T::one())
    }
}

impl<T: Real> Elementwise<T> for Powf<T> {
    const NAME: &'static str = "real power";
    fn value(&self, x: T) -> T {
        if self.coef == T::zero() {
            T::zero()
        } else {
            self.coef * x.powf(self.p)
        }
    }
    fn slope(&self, x: T) -> T {
        self.rev_slope().value(x)
    }
    fn settings(&self) -> Result<()> {
        finite_setting("Powf coefficient", self.coef)?;
        finite_setting("Powf exponent", self.p)
    }
}
elementwise!([T: Real, E: Pointwise<Elem = T>] Powf<T>, slope map Powf<T> = |s| s.rev_slope());

/// The sine. Reverse derivative: `cos(x) dy`.
///
/// ```
/// use revdiff::{Map, Sin};
/// assert_eq!(Sin.backward(&0.0_f64, &3.0).unwrap(), 3.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Sin;

impl<T: Real> Elementwise<T> for Sin {
    const NAME: &'static str = "sin";
    fn value(&self, x: T) -> T {
        x.sin()
    }
    fn slope(&self, x: T) -> T {
        x.cos()
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        x.sin_cos()
    }
}
elementwise!([E: Pointwise] Sin, slope map Cos = |_s| Cos, slope with value);

/// The cosine. Reverse derivative: `-sin(x) dy`.
///
/// ```
/// use revdiff::{Cos, Map};
/// assert_eq!(Cos.backward(&0.0_f64, &3.0).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Cos;

impl<T: Real> Elementwise<T> for Cos {
    const NAME: &'static str = "cos";
    fn value(&self, x: T) -> T {
        x.cos()
    }
    fn slope(&self, x: T) -> T {
        -x.sin()
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        let (s, c) = x.sin_cos();
        (c, -s)
    }
}
elementwise!([E: Pointwise] Cos, slope map Then<Sin, Neg> = |_s| Sin.then(Neg), slope with value);

/// The hyperbolic tangent. Reverse derivative: `(1 - tanh(x)^2) dy`.
///
/// ```
/// use revdiff::{Map, Tanh};
/// assert_eq!(Tanh.backward(&0.0_f64, &1.0).unwrap(), 1.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Tanh;

impl<T: Real> Elementwise<T> for Tanh {
    const NAME: &'static str = "tanh";
    fn value(&self, x: T) -> T {
        x.vector_tanh()
    }
    fn slope(&self, x: T) -> T {
        SechSquared.value(x)
    }
}
elementwise!([E: Pointwise] Tanh, slope map SechSquared = |_s| SechSquared,
    slope from output |t| <E::Elem as num_traits::One>::one() - t * t);

/// `x -> sech(x)^2 = 1 - tanh(x)^2`, the slope of [`Tanh`]. Reverse
/// derivative: `-2 sech(x)^2 tanh(x) dy`.
///
/// ```
/// use revdiff::{Map, SechSquared};
/// assert_eq!(SechSquared.forward(&0.0_f64).unwrap(), 1.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct SechSquared;

impl<T: Real> Elementwise<T> for SechSquared {
    const NAME: &'static str = "sech squared";
    fn value(&self, x: T) -> T {
        let t = x.vector_tanh();
        T::one() - t * t
    }
    fn slope(&self, x: T) -> T {
        let t = x.vector_tanh();
        real::<T>(-2.0) * (T::one() - t * t) * t
    }
}
elementwise!([E: Pointwise] SechSquared,
    slope map Then<Then<Pair<Tanh, SechSquared>, MulPair>, MultiplyBy<E::Elem>> =
    |_s| Tanh.pair(SechSquared).then(MulPair).then(MultiplyBy(real(-2.0))));

/// The logistic sigmoid `1 / (1 + e^-x)`, computed without overflow for
/// large `|x|`. Reverse derivative: `s (1 - s) dy` with `s` the sigmoid,
/// written `s(x) s(-x) dy`.
///
/// ```
/// use revdiff::{Map, Sigmoid};
/// assert_eq!(Sigmoid.forward(&0.0_f64).unwrap(), 0.5);
/// assert_eq!(Sigmoid.backward(&0.0_f64, &1.0).unwrap(), 0.25);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Sigmoid;

impl<T: Real> Elementwise<T> for Sigmoid {
    const NAME: &'static str = "sigmoid";
    fn value(&self, x: T) -> T {
        logistic(x)
    }
    fn slope(&self, x: T) -> T {
        self.value(x) * self.value(-x)
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        let (s, s_minus) = logistic_both(x);
        (s, s * s_minus)
    }
}
elementwise!([E: Pointwise] Sigmoid,
    slope map Then<Pair<Sigmoid, Then<Neg, Sigmoid>>, MulPair> =
    |_s| Sigmoid.pair(Neg.then(Sigmoid)).then(MulPair),
    slope with value);

/// `x -> ln(1 + e^x)`, computed as `max(x, 0) + ln(1 + e^-|x|)` so that it
/// neither overflows nor loses digits. Reverse derivative: `sigmoid(x) dy`.
///
/// ```
/// use revdiff::{Map, Softplus};
/// assert_eq!(Softplus.backward(&0.0_f64, &1.0).unwrap(), 0.5);
/// assert_eq!(Softplus.forward(&1000.0_f64).unwrap(), 1000.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Softplus;

impl<T: Real> Elementwise<T> for Softplus {
    const NAME: &'static str = "softplus";
    fn value(&self, x: T) -> T {
        softplus(x)
    }
    fn slope(&self, x: T) -> T {
        Sigmoid.value(x)
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        // Both from the one exponential `e^-|x|`.
        let e = (-x.abs()).exp();
        let value = x.max(T::zero()) + e.ln_1p();
        let slope = if x >= T::zero() {
            T::one() / (T::one() + e)
        } else {
            e / (T::one() + e)
        };
        (value, slope)
    }
}
elementwise!([E: Pointwise] Softplus, slope map Sigmoid = |_s| Sigmoid, slope with value);

/// Clamping to a band, `x -> max(-limit, min(x, limit))`. Reverse
/// derivative: `dy` inside the band (`|x| < limit`), `0` outside and on its
/// edges. It is the slope of the Huber loss.
///
/// ```
/// use revdiff::{Clamp, Map};
/// let c = Clamp::new(1.0_f64).unwrap();
/// assert!(Clamp::new(-1.0_f64).is_err());
/// assert_eq!(c.forward(&-3.0).unwrap(), -1.0);
/// assert_eq!(c.backward(&0.5, &2.0).unwrap(), 2.0);
/// assert_eq!(c.backward(&3.0, &2.0).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Clamp<T> {
    /// Half the width of the band.
    pub limit: T,
}

impl<T: Real> Clamp<T> {
    /// Clamping to `[-limit, limit]`; a negative or non-finite limit is an
    /// [`Error::InvalidSetting`](crate::Error::InvalidSetting).
    pub fn new(limit: T) -> Result<Self> {
        band_limit("clamp limit", limit)?;
        Ok(Clamp { limit })
    }
}

impl<T: Real> Elementwise<T> for Clamp<T> {
    const NAME: &'static str = "clamp";
    fn value(&self, x: T) -> T {
        x.max(-self.limit).min(self.limit)
    }
    fn slope(&self, x: T) -> T {
        InsideBand { limit: self.limit }.value(x)
    }
}
elementwise!([T: Real, E: Pointwise<Elem = T>] Clamp<T>,
    slope map InsideBand<T> = |s| InsideBand { limit: s.limit });

/// The indicator of a band: 1 where `|x| < limit`, 0 elsewhere; the slope of
/// [`Clamp`]. Its derivative is taken to be 0 everywhere.
///
/// ```
/// use revdiff::{InsideBand, Map};
/// let band = InsideBand::new(1.0_f64).unwrap();
/// assert!(InsideBand::new(f64::NAN).is_err());
/// assert_eq!(band.forward(&0.5).unwrap(), 1.0);
/// assert_eq!(band.forward(&-1.0).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct InsideBand<T> {
    /// Half the width of the band.
    pub limit: T,
}

impl<T: Real> InsideBand<T> {
    /// The indicator of `(-limit, limit)`; a negative or non-finite limit
    /// is an [`Error::InvalidSetting`](crate::Error::InvalidSetting).
    pub fn new(limit: T) -> Result<Self> {
        band_limit("band limit", limit)?;
        Ok(InsideBand { limit })
    }
}

fn band_limit<T: Real>(name: &'static str, limit: T) -> Result<()> {
    if limit.is_finite() && limit >= T::zero() {
        Ok(())
    } else {
        Err(crate::Error::InvalidSetting {
            name,
            value: limit.to_string(),
            reason: "must be finite and not negative",
        })
    }
}

impl<T: Real> Elementwise<T> for InsideBand<T> {
    const NAME: &'static str = "band indicator";
    fn value(&self, x: T) -> T {
        if x.abs() < self.limit {
            T::one()
        } else {
            T::zero()
        }
    }
    fn slope(&self, _: T) -> T {
        T::zero()
    }
}
elementwise!([T: Real, E: Pointwise<Elem = T>] InsideBand<T>, slope map ZeroMap = |_s| ZeroMap);

/// `x -> max(x, 0)`. Reverse derivative: `dy` where `x > 0`, else `0`; at
/// `x = 0` the derivative is taken to be 0.
///
/// ```
/// use revdiff::{Map, Relu};
/// assert_eq!(Relu.backward(&0.0_f64, &1.0).unwrap(), 0.0);
/// assert_eq!(Relu.backward(&2.0_f64, &1.0).unwrap(), 1.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Relu;

impl<T: Real> Elementwise<T> for Relu {
    const NAME: &'static str = "relu";
    fn value(&self, x: T) -> T {
        x.max(T::zero())
    }
    fn slope(&self, x: T) -> T {
        Heaviside.value(x)
    }
}
elementwise!([E: Pointwise] Relu, slope map Heaviside = |_s| Heaviside);

/// The unit step: 1 where `x > 0`, 0 elsewhere (0 at `x = 0`), the slope of
/// [`Relu`]. Its derivative is taken to be 0 everywhere.
///
/// ```
/// use revdiff::{Heaviside, Map};
/// assert_eq!(Heaviside.forward(&0.0_f64).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Heaviside;

impl<T: Real> Elementwise<T> for Heaviside {
    const NAME: &'static str = "step";
    fn value(&self, x: T) -> T {
        if x > T::zero() { T::one() } else { T::zero() }
    }
    fn slope(&self, _: T) -> T {
        T::zero()
    }
}
elementwise!([E: Pointwise] Heaviside, slope map ZeroMap = |_s| ZeroMap);

/// The absolute value. Reverse derivative: `sign(x) dy`, with the sign of 0
/// taken to be 0.
///
/// ```
/// use revdiff::{Abs, Map};
/// assert_eq!(Abs.backward(&-2.0_f64, &1.0).unwrap(), -1.0);
/// assert_eq!(Abs.backward(&0.0_f64, &1.0).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Abs;

impl<T: Real> Elementwise<T> for Abs {
    const NAME: &'static str = "abs";
    fn value(&self, x: T) -> T {
        x.abs()
    }
    fn slope(&self, x: T) -> T {
        Signum.value(x)
    }
}
elementwise!([E: Pointwise] Abs, slope map Signum = |_s| Signum);

/// The sign: -1, 0 or 1 (0 at `x = 0`), the slope of [`Abs`]. Its derivative
/// is taken to be 0 everywhere.
///
/// ```
/// use revdiff::{Map, Signum};
/// assert_eq!(Signum.forward(&-3.0_f64).unwrap(), -1.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Signum;

impl<T: Real> Elementwise<T> for Signum {
    const NAME: &'static str = "sign";
    fn value(&self, x: T) -> T {
        if x > T::zero() {
            T::one()
        } else if x < T::zero() {
            -T::one()
        } else {
            T::zero()
        }
    }
    fn slope(&self, _: T) -> T {
        T::zero()
    }
}
elementwise!([E: Pointwise] Signum, slope map ZeroMap = |_s| ZeroMap);

/// Negation `x -> -x`, a linear map. Reverse derivative: `-dy`.
///
/// ```
/// use revdiff::{Map, Neg};
/// assert_eq!(Neg.backward(&1.0_f64, &2.0).unwrap(), -2.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Neg;

impl<E: Pointwise> Map<E> for Neg {
    type Output = E;
    type Memo = ();
    fn forward_memo(&self, x: &E) -> Result<(E, ())> {
        Ok((x.map_elems(|v| -v), ()))
    }
    fn backward_memo(&self, _: &(), dy: &E) -> Result<E> {
        Ok(dy.map_elems(|v| -v))
    }
}

impl<E: Pointwise> Reverse<E> for Neg {
    type Rev = Then<Snd, Neg>;
    fn rev(&self) -> Self::Rev {
        Snd.then(Neg)
    }
}

impl<E: Pointwise> Linear<E> for Neg {}

/// Elementwise subtraction `(a, b) -> a - b`, a linear map. Reverse
/// derivative: `(dy, -dy)`. (Addition is the structural [`AddPair`](crate::AddPair).)
///
/// ```
/// use revdiff::{Map, SubPair};
/// assert_eq!(SubPair.forward(&(5.0_f64, 3.0)).unwrap(), 2.0);
/// assert_eq!(SubPair.backward(&(5.0_f64, 3.0), &1.0).unwrap(), (1.0, -1.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct SubPair;

impl Compose for SubPair {}

impl<E: Pointwise> Map<(E, E)> for SubPair {
    type Output = E;
    type Memo = ();
    fn forward_memo(&self, (a, b): &(E, E)) -> Result<(E, ())> {
        Ok((a.zip_elems(b, "subtraction", |u, v| u - v)?, ()))
    }
    fn backward_memo(&self, _: &(), dy: &E) -> Result<(E, E)> {
        Ok((dy.clone(), dy.map_elems(|v| -v)))
    }
}

impl<E: Pointwise> Reverse<(E, E)> for SubPair {
    type Rev = Then<Snd, Pair<Id, Neg>>;
    fn rev(&self) -> Self::Rev {
        Snd.then(Id.pair(Neg))
    }
}

impl<E: Pointwise> Linear<(E, E)> for SubPair {}

/// Elementwise multiplication `(a, b) -> a b`. Reverse derivative:
/// `(b dy, a dy)`.
///
/// ```
/// use revdiff::{Map, MulPair};
/// assert_eq!(MulPair.backward(&(2.0_f64, 3.0), &1.0).unwrap(), (3.0, 2.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MulPair;

impl Compose for MulPair {}

impl<E: Pointwise> Map<(E, E)> for MulPair {
    type Output = E;
    type Memo = (E, E);
    fn forward(&self, (a, b): &(E, E)) -> Result<E> {
        a.zip_elems(b, "multiplication", |u, v| u * v)
    }
    fn forward_memo(&self, x: &(E, E)) -> Result<(E, (E, E))> {
        Ok((self.forward(x)?, x.clone()))
    }
    fn backward_memo(&self, (a, b): &(E, E), dy: &E) -> Result<(E, E)> {
        Ok((
            b.zip_elems(dy, "multiplication", |u, v| u * v)
                .map_err(|e| e.in_output_change("multiplication"))?,
            a.zip_elems(dy, "multiplication", |u, v| u * v)
                .map_err(|e| e.in_output_change("multiplication"))?,
        ))
    }
}

/// `((a, b), dy) -> (b dy, a dy)`.
pub type MulPairRev =
    Pair<Then<Pair<Then<Fst, Snd>, Snd>, MulPair>, Then<Pair<Then<Fst, Fst>, Snd>, MulPair>>;

impl<E: Pointwise> Reverse<(E, E)> for MulPair {
    type Rev = MulPairRev;
    fn rev(&self) -> MulPairRev {
        let da = Fst.then(Snd).pair(Snd).then(MulPair);
        let db = Fst.then(Fst).pair(Snd).then(MulPair);
        da.pair(db)
    }
}

/// Elementwise division `(a, b) -> a / b`, domain `b != 0`. Reverse
/// derivative: `(dy / b, -(a / b) (dy / b))`.
///
/// ```
/// use revdiff::{DivPair, Map};
/// assert_eq!(DivPair.backward(&(1.0_f64, 2.0), &1.0).unwrap(), (0.5, -0.25));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct DivPair;

impl Compose for DivPair {}

impl<E: Pointwise> Map<(E, E)> for DivPair {
    type Output = E;
    /// The divisor and the quotient.
    type Memo = (E, E);
    fn forward(&self, (a, b): &(E, E)) -> Result<E> {
        a.zip_elems(b, "division", |u, v| u / v)
    }
    fn forward_memo(&self, x: &(E, E)) -> Result<(E, (E, E))> {
        let q = self.forward(x)?;
        Ok((q.clone(), (x.1.clone(), q)))
    }
    fn backward_memo(&self, (b, q): &(E, E), dy: &E) -> Result<(E, E)> {
        // `b` first, so that a mismatch reports dy as the found shape.
        let da = b
            .zip_elems(dy, "division", |v, d| d / v)
            .map_err(|e| e.in_output_change("division"))?;
        let db = da.zip_elems(q, "division", |d, v| -(d * v))?;
        Ok((da, db))
    }
}

/// `((a, b), dy) -> dy / b`.
type DyOverB = Then<Pair<Snd, Then<Fst, Snd>>, DivPair>;

/// `((a, b), dy) -> (dy / b, -(dy / b) (a / b))`.
pub type DivPairRev = Pair<DyOverB, Then<Then<Pair<DyOverB, Then<Fst, DivPair>>, MulPair>, Neg>>;

impl<E: Pointwise> Reverse<(E, E)> for DivPair {
    type Rev = DivPairRev;
    fn rev(&self) -> DivPairRev {
        let dy_over_b = || Snd.pair(Fst.then(Snd)).then(DivPair);
        dy_over_b().pair(dy_over_b().pair(Fst.then(DivPair)).then(MulPair).then(Neg))
    }
}

/// `x -> x + c` for a fixed real `c`. Reverse derivative: `dy`.
///
/// ```
/// use revdiff::{Map, Shift};
/// let shift = Shift::new(1.5).unwrap();
/// assert_eq!(shift.forward(&2.0_f64).unwrap(), 3.5);
/// assert_eq!(shift.backward(&2.0_f64, &4.0).unwrap(), 4.0);
/// assert!(Shift::new(f64::NAN).is_err());
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Shift<T> {
    offset: T,
}

impl<T: Real> Shift<T> {
    /// `x -> x + offset`; a non-finite offset is an
    /// [`Error::InvalidSetting`](crate::Error::InvalidSetting).
    pub fn new(offset: T) -> Result<Self> {
        if !offset.is_finite() {
            return Err(crate::Error::InvalidSetting {
                name: "shift offset",
                value: offset.to_string(),
                reason: "must be finite",
            });
        }
        Ok(Shift { offset })
    }

    /// `x -> x + offset`, unchecked: for the formula operators, whose
    /// constants come from the program text.
    pub(crate) fn by(offset: T) -> Self {
        Shift { offset }
    }
}

impl<T: Real> Elementwise<T> for Shift<T> {
    const NAME: &'static str = "shift";
    fn value(&self, x: T) -> T {
        x + self.offset
    }
    fn slope(&self, _: T) -> T {
        T::one()
    }
}
// The slope is 1 everywhere: x^0.
elementwise!([T: Real, E: Pointwise<Elem = T>] Shift<T>, slope map Powi<T> = |_s| Powi::new(0));

/// `x -> e^x - 1`, accurate near 0 where `exp(x) - 1` cancels. Reverse
/// derivative: `e^x dy`.
///
/// ```
/// use revdiff::{ExpMinusOne, Map};
/// let tiny = 1e-12_f64;
/// assert!((ExpMinusOne.forward(&tiny).unwrap() - tiny).abs() < 1e-24);
/// assert_eq!(ExpMinusOne.backward(&0.0_f64, &3.0).unwrap(), 3.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ExpMinusOne;

impl<T: Real> Elementwise<T> for ExpMinusOne {
    const NAME: &'static str = "exp minus one";
    fn value(&self, x: T) -> T {
        x.exp_m1()
    }
    fn slope(&self, x: T) -> T {
        x.exp()
    }
}
elementwise!([E: Pointwise] ExpMinusOne, slope map Exp = |_s| Exp);

/// `x -> ln(1 + x)`, accurate near 0 where `ln(1 + x)` loses digits.
/// Domain: `x > -1`. Reverse derivative: `dy / (1 + x)`.
///
/// ```
/// use revdiff::{LnOnePlus, Map};
/// let tiny = 1e-12_f64;
/// assert!((LnOnePlus.forward(&tiny).unwrap() - tiny).abs() < 1e-24);
/// assert_eq!(LnOnePlus.backward(&1.0_f64, &4.0).unwrap(), 2.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LnOnePlus;

impl<T: Real> Elementwise<T> for LnOnePlus {
    const NAME: &'static str = "ln of one plus";
    fn value(&self, x: T) -> T {
        x.ln_1p()
    }
    fn slope(&self, x: T) -> T {
        (T::one() + x).recip()
    }
}
elementwise!([E: Pointwise] LnOnePlus,
    slope map Then<Shift<E::Elem>, Powi<E::Elem>> =
    |_s| Shift::by(<E::Elem as num_traits::One>::one()).then(Powi::new(-1)));

/// The arctangent `x -> atan(x)`, in `(-pi/2, pi/2)`. Reverse derivative:
/// `dy / (1 + x^2)`.
///
/// ```
/// use revdiff::{Arctan, Map};
/// assert!((Arctan.forward(&1.0_f64).unwrap() - std::f64::consts::FRAC_PI_4).abs() < 1e-15);
/// assert_eq!(Arctan.backward(&1.0_f64, &1.0).unwrap(), 0.5);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Arctan;

impl<T: Real> Elementwise<T> for Arctan {
    const NAME: &'static str = "arctangent";
    fn value(&self, x: T) -> T {
        x.atan()
    }
    fn slope(&self, x: T) -> T {
        (T::one() + x * x).recip()
    }
}
elementwise!([E: Pointwise] Arctan,
    slope map Then<Then<Powi<E::Elem>, Shift<E::Elem>>, Powi<E::Elem>> =
    |_s| Powi::new(2).then(Shift::by(<E::Elem as num_traits::One>::one())).then(Powi::new(-1)));

/// The integer power `x -> x^n`, for any real element type (the type of
/// [`Powi`] carries its coefficient's type; this one does not, which is
/// what formulas need). Reverse derivative: `n x^(n-1) dy`.
///
/// ```
/// use revdiff::{IntegerPower, Map};
/// assert_eq!(IntegerPower(3).forward(&2.0_f32).unwrap(), 8.0);
/// assert_eq!(IntegerPower(3).backward(&2.0_f64, &1.0).unwrap(), 12.0);
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct IntegerPower(pub i32);

impl<T: Real> Elementwise<T> for IntegerPower {
    const NAME: &'static str = "integer power";
    fn value(&self, x: T) -> T {
        x.powi(self.0)
    }
    fn slope(&self, x: T) -> T {
        Powi::with_coefficient(real::<T>(f64::from(self.0)), self.0 - 1).value(x)
    }
}
elementwise!([E: Pointwise] IntegerPower, slope map Powi<E::Elem> =
    |s| Powi::with_coefficient(real(f64::from(s.0)), s.0 - 1));
