//! Maps that carry their own reverse derivative, composed like ordinary
//! functions.
//!
//! A map `f: A -> B` ([`Map`]) comes with its reverse derivative
//! `R[f]: A x B -> A`, the transposed Jacobian at a point applied to a
//! change of the output. Maps compose ([`Compose::then`]), pair up
//! ([`Compose::pair`]), act side by side ([`Compose::alongside`]), add
//! ([`Compose::plus`]) and scale ([`Compose::scaled`]); the reverse
//! derivative of every composite follows from those of its parts, with no
//! re-derivation.
//!
//! Where a map implements [`Reverse`], its reverse derivative is itself a map
//! of the library, built from the same combinators and primitives, and can be
//! differentiated again: [`forward_derivative`], [`hessian_vector`],
//! [`second_reverse`] and [`jacobian`] are read off it exactly.
//!
//! # Layout
//!
//! - [`space`]: the values maps act on ([`Space`], [`Euclidean`], [`Pointwise`]).
//! - [`map`]: the core traits ([`Map`], [`Reverse`], [`Linear`], [`Compose`]).
//! - [`combinators`]: structural maps and combinators.
//! - [`primitives`]: the catalogue (elementwise, linear algebra, reductions, softmax).
//! - [`formula`]: maps written with arithmetic operators, for models.
//! - [`higher`]: forward derivatives, Hessian-vector products, Jacobians.
//! - [`dynamic`]: type-erased maps and run-time chains.
//! - [`workspace`]: passes that reuse their buffers from call to call, so that training allocates nothing after its first step.
//! - [`retention`] and [`memory`]: what a forward pass keeps for the backward pass, and its size in bytes.
//! - [`laws`]: checkers that put any map through the laws of reverse derivatives.
//! - [`learning`]: parametrised maps, losses, optimisers, training and least squares.
//!
//! # Example
//!
//! ```
//! use revdiff::{forward_derivative, jacobian, Compose, Exp, Map, MulPair, Sin};
//!
//! // f(a, b) = exp(sin(a b))
//! let f = MulPair.then(Sin).then(Exp);
//! let x = (0.5_f64, 1.5);
//! let y = f.forward(&x).unwrap();
//! let (da, db) = f.backward(&x, &1.0).unwrap();
//! let slope = y * (x.0 * x.1).cos();
//! assert!((da - slope * x.1).abs() < 1e-12 && (db - slope * x.0).abs() < 1e-12);
//!
//! // The forward derivative along (1, 0) equals the partial derivative in a.
//! let d = forward_derivative(&f, &x, &(1.0, 0.0)).unwrap();
//! assert!((d - da).abs() < 1e-12);
//! assert_eq!(jacobian(&f, &x).unwrap().shape(), &[1, 2]);
//! ```
#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod bits;
pub mod combinators;
mod cores;
pub mod dynamic;
pub mod error;
pub mod formula;
pub mod higher;
pub mod laws;
pub mod learning;
pub mod map;
pub mod memory;
pub mod primitives;
mod products;
pub mod retention;
pub mod space;
mod vectors;
pub mod workspace;

/// The ndarray this crate is built on, re-exported so that a user's arrays
/// are of the same version: `use revdiff::ndarray;`.
pub use ndarray;
/// The proptest the law checkers are built on, re-exported so that a user's
/// strategies are of the same version: `use revdiff::proptest;`.
pub use proptest;

pub use combinators::*;
pub use cores::on_awake_cores;
pub use dynamic::{
    Boxed, BoxedMemo, Chain, ChainMemo, ScalarStages, StageShape, free_spare_workspaces,
};
pub use error::{Error, Result};
pub use formula::{Formula, as_formula, input, input_at, parameter};
pub use higher::{
    forward_derivative, hessian_vector, jacobian, jacobian_by_backward, jacobian_by_forward,
    second_reverse,
};
pub use laws::{Checker, Exhaustive, FiniteDomain, Law, LawReport, Tolerance};
pub use learning::*;
pub use map::{Compose, Kept, Linear, Map, Reverse};
pub use memory::{HeldBytes, kept_bytes};
pub use primitives::*;
pub use retention::{
    PassCost, Recomputed, Retention, RetentionComparison, RetentionRow, binomial_advances,
};
pub use space::{Euclidean, Pointwise, Real, RunVisitor, Scalable, Space};
pub use workspace::{SplitInput, Workspace};

/// The README's code, compiled and run as doc-tests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
struct ReadmeExamples;
