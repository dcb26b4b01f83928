//! Formulas: maps written with arithmetic operators and method calls, for
//! models such as `b(0) * (1.0 - (-b(1) * x).exp())`.
//!
//! A [`Formula`] wraps any map and gives it `+`, `-`, `*`, `/` and unary
//! minus (with another formula or a plain `f64` number on either side) and the
//! elementwise functions as methods. Every operator builds an ordinary
//! composite of catalogue maps, so a formula has a backward pass and a
//! reverse map to every order, like any other map, with no new derivative
//! rules. The leaves are [`parameter`] (coordinate `i` of a parameter
//! vector), [`input`] (a scalar input) and [`input_at`] (coordinate `i` of
//! an input vector), for models `(parameters, x) -> y` as
//! [`CurveResiduals`](crate::CurveResiduals) takes them.
//!
//! # Example
//!
//! ```
//! use revdiff::{input, parameter, CurveResiduals, LeastSquares};
//! use ndarray::array;
//!
//! // y = b0 (1 - exp(-b1 x)), one readable line.
//! let (b, x) = (parameter, input());
//! let model = b(0) * (1.0 - (-b(1) * x).exp());
//!
//! let xs: Vec<f64> = (1..=8).map(f64::from).collect();
//! let ys = xs.iter().map(|x| 2.0 * (1.0 - (-0.5 * x).exp())).collect();
//! let fit = LeastSquares::levenberg_marquardt()
//!     .fit(&CurveResiduals::new(model, xs, ys).unwrap(), array![1.0, 1.0])
//!     .unwrap();
//! assert!((fit.parameters[0] - 2.0).abs() < 1e-9 && (fit.parameters[1] - 0.5).abs() < 1e-9);
//! ```

use crate::combinators::MultiplyBy;
use crate::combinators::{AddPair, Fst, Pair, Snd, Then};
use crate::error::Result;
use crate::map::{Compose, Map, Reverse};
use crate::primitives::{
    Arctan, Coordinate, Cos, DivPair, Exp, ExpMinusOne, IntegerPower, Ln, LnOnePlus, MulPair, Neg,
    PowPair, Powf, Powi, Shift, Sigmoid, Sin, Sqrt, SubPair, Tanh,
};
use crate::space::Space;
use std::ops;

/// A map with arithmetic operators and elementwise methods; see the
/// [module documentation](self). The wrapped map is public: a formula is a
/// map, and `formula.0` is the composite it built.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Formula<F>(pub F);

impl<F: Compose> Compose for Formula<F> {
    fn boxed_depth(&self) -> usize {
        self.0.boxed_depth()
    }
}

impl<A: Space, F: Map<A>> Map<A> for Formula<F> {
    type Output = F::Output;
    type Memo = F::Memo;
    fn forward(&self, x: &A) -> Result<F::Output> {
        self.0.forward(x)
    }
    fn forward_memo(&self, x: &A) -> Result<(F::Output, F::Memo)> {
        self.0.forward_memo(x)
    }
    fn backward_memo(&self, memo: &F::Memo, dy: &F::Output) -> Result<A> {
        self.0.backward_memo(memo, dy)
    }
}

impl<A: Space, F: Reverse<A>> Reverse<A> for Formula<F> {
    type Rev = F::Rev;
    fn rev(&self) -> F::Rev {
        self.0.rev()
    }
}

/// Coordinate `i` of the parameter vector of a model `(parameters, x) -> y`.
pub fn parameter(i: usize) -> Formula<Then<Fst, Coordinate>> {
    Formula(Fst.then(Coordinate::new(i)))
}

/// The scalar input `x` of a model `(parameters, x) -> y`.
pub fn input() -> Formula<Snd> {
    Formula(Snd)
}

/// Coordinate `i` of the input vector of a model `(parameters, x) -> y`
/// with several predictors.
pub fn input_at(i: usize) -> Formula<Then<Snd, Coordinate>> {
    Formula(Snd.then(Coordinate::new(i)))
}

/// Any map as a formula, to combine it with operators.
///
/// ```
/// use revdiff::{as_formula, input, Map, Sin};
/// let wave = as_formula(Sin) * 2.0 + 1.0;
/// assert_eq!(wave.forward(&0.0_f64).unwrap(), 1.0);
/// # let _ = input();
/// ```
pub fn as_formula<F: Compose>(f: F) -> Formula<F> {
    Formula(f)
}

macro_rules! method {
    ($(#[$doc:meta])* $name:ident, $map:ty, $make:expr) => {
        $(#[$doc])*
        pub fn $name(self) -> Formula<Then<F, $map>> {
            Formula(self.0.then($make))
        }
    };
}

impl<F: Compose> Formula<F> {
    method!(/// `e^f`.
        exp, Exp, Exp);
    method!(/// `ln f`.
        ln, Ln, Ln);
    method!(/// `sqrt f`.
        sqrt, Sqrt, Sqrt);
    method!(/// `sin f`.
        sin, Sin, Sin);
    method!(/// `cos f`.
        cos, Cos, Cos);
    method!(/// `tanh f`.
        tanh, Tanh, Tanh);
    method!(/// The logistic sigmoid of `f`.
        sigmoid, Sigmoid, Sigmoid);
    method!(/// `atan f`.
        atan, Arctan, Arctan);
    method!(/// `e^f - 1`, accurate where `f` is near 0.
        exp_m1, ExpMinusOne, ExpMinusOne);
    method!(/// `ln(1 + f)`, accurate where `f` is near 0.
        ln_1p, LnOnePlus, LnOnePlus);

    /// `f^n` for an integer `n`.
    pub fn powi(self, n: i32) -> Formula<Then<F, IntegerPower>> {
        Formula(self.0.then(IntegerPower(n)))
    }

    /// `f^p` for a fixed real `p` (where `f > 0`, or `p` is a whole number).
    pub fn powf<T: crate::Real>(self, p: T) -> Formula<Then<F, Powf<T>>> {
        Formula(self.0.then(Powf::new(p)))
    }

    /// `f^g`, the exponent a formula too (where `f > 0`).
    pub fn pow<G: Compose>(self, exponent: Formula<G>) -> Formula<Then<Pair<F, G>, PowPair>> {
        Formula(self.0.pair(exponent.0).then(PowPair))
    }
}

macro_rules! binary {
    ($trait:ident, $method:ident, $pair:ty, $make:expr) => {
        impl<F: Compose, G: Compose> ops::$trait<Formula<G>> for Formula<F> {
            type Output = Formula<Then<Pair<F, G>, $pair>>;
            fn $method(self, other: Formula<G>) -> Self::Output {
                Formula(self.0.pair(other.0).then($make))
            }
        }
    };
}

binary!(Add, add, AddPair, AddPair);
binary!(Sub, sub, SubPair, SubPair);
binary!(Mul, mul, MulPair, MulPair);
binary!(Div, div, DivPair, DivPair);

impl<F: Compose> ops::Neg for Formula<F> {
    type Output = Formula<Then<F, Neg>>;
    fn neg(self) -> Self::Output {
        Formula(self.0.then(Neg))
    }
}

macro_rules! with_numbers {
    ($($t:ty),*) => {$(
        impl<F: Compose> ops::Add<$t> for Formula<F> {
            type Output = Formula<Then<F, Shift<$t>>>;
            fn add(self, c: $t) -> Self::Output {
                Formula(self.0.then(Shift::by(c)))
            }
        }
        impl<F: Compose> ops::Add<Formula<F>> for $t {
            type Output = Formula<Then<F, Shift<$t>>>;
            fn add(self, f: Formula<F>) -> Self::Output {
                Formula(f.0.then(Shift::by(self)))
            }
        }
        impl<F: Compose> ops::Sub<$t> for Formula<F> {
            type Output = Formula<Then<F, Shift<$t>>>;
            fn sub(self, c: $t) -> Self::Output {
                Formula(self.0.then(Shift::by(-c)))
            }
        }
        impl<F: Compose> ops::Sub<Formula<F>> for $t {
            type Output = Formula<Then<Then<F, Neg>, Shift<$t>>>;
            fn sub(self, f: Formula<F>) -> Self::Output {
                Formula(f.0.then(Neg).then(Shift::by(self)))
            }
        }
        impl<F: Compose> ops::Mul<$t> for Formula<F> {
            type Output = Formula<Then<F, MultiplyBy<$t>>>;
            fn mul(self, c: $t) -> Self::Output {
                Formula(self.0.then(MultiplyBy(c)))
            }
        }
        impl<F: Compose> ops::Mul<Formula<F>> for $t {
            type Output = Formula<Then<F, MultiplyBy<$t>>>;
            fn mul(self, f: Formula<F>) -> Self::Output {
                Formula(f.0.then(MultiplyBy(self)))
            }
        }
        impl<F: Compose> ops::Div<$t> for Formula<F> {
            type Output = Formula<Then<F, MultiplyBy<$t>>>;
            fn div(self, c: $t) -> Self::Output {
                Formula(self.0.then(MultiplyBy(c.recip())))
            }
        }
        impl<F: Compose> ops::Div<Formula<F>> for $t {
            type Output = Formula<Then<F, Powi<$t>>>;
            fn div(self, f: Formula<F>) -> Self::Output {
                Formula(f.0.then(Powi::with_coefficient(self, -1)))
            }
        }
    )*};
}

// Plain numbers are `f64` only: with impls for `f32` as well, a literal
// such as `1.0` would fit both and the compiler could not choose.
with_numbers!(f64);
