//! Law checkers: put any map through the laws of reverse derivatives, and
//! be told which law failed, at which case, by how much, shrunk to the
//! smallest case found.
//!
//! A hand-written backward pass goes wrong in a few typical ways: a dropped
//! factor, a sign, a matrix not transposed, a gradient right only for
//! positive inputs, a backward pass that is not linear in the change, a
//! fused kernel that no longer matches the composite it replaced, a reverse
//! map with the right values but the wrong derivative. Each breaks one of
//! the laws below.
//!
//! # The laws
//!
//! On one map `f: A -> B` (see [`Law`] for the statements):
//!
//! 1. [`Additive`](Law::Additive), [`ZeroChange`](Law::ZeroChange),
//!    [`Homogeneous`](Law::Homogeneous): `R[f](x, -)` is linear.
//! 2. [`Derivative`](Law::Derivative): `<R[f](x, w), v> = <w, Df(x) v>`,
//!    `Df(x) v` by central differences of the forward pass. (This is the
//!    law that ties the backward pass to the forward pass; the exact forward
//!    derivative read off the reverse map would only check the reverse map
//!    against itself, so it is not used here.)
//! 3. [`Symmetric`](Law::Symmetric): mixed second derivatives commute;
//!    exactly through the second reverse derivative where the map has a
//!    reverse map, else by central differences of the backward pass.
//! 4. [`LinearInChange`](Law::LinearInChange): the reverse derivative of
//!    `R[f]` in its change argument gives back `R[f]`.
//! 5. [`ReverseAgrees`](Law::ReverseAgrees): the reverse map equals the
//!    backward pass.
//! 6. [`ShapesFinite`](Law::ShapesFinite): shapes and finite values.
//! 7. [`ReusingAgrees`](Law::ReusingAgrees): the reusing passes (into a
//!    [`Workspace`](crate::Workspace) kept between calls) agree with the
//!    memo passes, for a map that overrides them.
//!
//! For a map with a reverse map ([`Checker::reverse`]) every law is checked
//! at order 1 and again at order 2, on `R[f]` itself: so the second
//! derivative is checked against central differences too.
//!
//! On a map `h` claimed equal to others: [`ChainRule`](Law::ChainRule)
//! (`h = f then g`, the hand-fused kernel), [`Pairing`](Law::Pairing) and
//! [`Projection`](Law::Projection) (`h = <f, g>`), [`SumRule`](Law::SumRule)
//! (`h = f + g`), [`SameMap`](Law::SameMap) (`a = b`).
//!
//! # Two checkers
//!
//! - [`Checker`] draws cases from proptest strategies you give, shrinks
//!   every failure, and compares within a [`Tolerance`]. A case the
//!   precision cannot decide (a saturated map, a derivative far below the
//!   rounding of its values) is reported as [undecided](Undecided), never
//!   passed or failed; no allowance exceeds the tolerance's detection
//!   limit, so what is decided is decided at every scale. Each case runs
//!   under a time limit.
//! - [`Exhaustive`] checks every case of a [`FiniteDomain`] exactly, for
//!   integer grids and for spaces of bits ([`ExactPairing`]).
//!
//! Both return a [`LawReport`]; [`law_tests!`](crate::law_tests) makes
//! `#[test]` functions of the laws.
//!
//! # Example
//!
//! A user primitive, the logistic ramp `x -> x sigmoid(x)`, with a
//! hand-written backward pass; the check passes, and a version with a wrong
//! sign in one term is caught:
//!
//! ```
//! use revdiff::laws::{Checker, Law};
//! use revdiff::{Compose, Map, Result};
//!
//! #[derive(Clone, Debug)]
//! struct Ramp { wrong: bool }
//! impl Compose for Ramp {}
//! impl Map<f64> for Ramp {
//!     type Output = f64;
//!     type Memo = f64;
//!     fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
//!         Ok((x / (1.0 + (-x).exp()), *x))
//!     }
//!     fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
//!         let s = 1.0 / (1.0 + (-x).exp());
//!         let sign = if self.wrong { -1.0 } else { 1.0 };
//!         Ok((s + sign * x * s * (1.0 - s)) * dy)
//!     }
//! }
//!
//! let checker = Checker::new();
//! assert!(checker.map(&Ramp { wrong: false }, -6.0..6.0f64).is_clean());
//!
//! let report = checker.map(&Ramp { wrong: true }, -6.0..6.0f64);
//! let broken = report.violation(Law::Derivative, 1).expect("the sign is caught");
//! assert!(broken.breach.error.unwrap() > broken.breach.tolerance.unwrap());
//! println!("{report}");
//! ```

// An outcome is built at most once per case and carries a report's worth of
// text; boxing its error would only move that allocation.
#![allow(clippy::result_large_err)]

mod case;
mod differences;
mod exhaustive;
mod judge;
mod law;
mod macros;
mod pairs;
mod report;
mod sampled;
mod single;
pub mod strategies;

pub use case::{Case, CaseSource, Drawn, WithOutputChanges, changes_like, with_output_changes};
pub use exhaustive::{Exhaustive, FiniteDomain, grid};
pub use judge::{
    Comparison, ComparisonIn, Discrepancy, ExactComparison, ExactPairing, ExactScalar, Finding,
    Outcome, Term, Tolerance,
};
pub use law::{CaseValue, Law};
pub use report::{Checked, LawReport, Undecided, Violation};
pub use sampled::Checker;
