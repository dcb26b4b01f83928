//! Second order for a hand-written map: borrow the reverse derivative of an
//! equal composite.

use crate::error::Result;
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;

/// A hand-written map whose reverse derivative, as a map, is that of an equal
/// composite of catalogue pieces.
///
/// Created by [`Compose::reversed_through`]. The forward and backward passes
/// are the hand-written map's own (fast, fused); [`Reverse::rev`] is the
/// composite's, so second-order quantities
/// ([`forward_derivative`](crate::forward_derivative),
/// [`hessian_vector`](crate::hessian_vector)), order-2 law checks and
/// [`residual_map`](crate::residual_map) work without spelling out the
/// composite's type.
///
/// The composite must compute the same function: put the pair through
/// [`Checker::same_map`](crate::laws::Checker::same_map) (as below), or
/// through [`Checker::reverse`](crate::laws::Checker::reverse), whose law 5
/// compares the backward pass with the borrowed reverse map.
///
/// # Example
///
/// A fused `x -> x^3` with its second derivative:
///
/// ```
/// use revdiff::{hessian_vector, laws::Checker, Compose, Map, Powi, Result};
///
/// #[derive(Clone, Debug)]
/// struct Cube;
/// impl Compose for Cube {}
/// impl Map<f64> for Cube {
///     type Output = f64;
///     type Memo = f64;
///     fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
///         Ok((x * x * x, *x))
///     }
///     fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
///         Ok(3.0 * x * x * dy)
///     }
/// }
///
/// let cube = Cube.reversed_through(Powi::new(3));
/// assert_eq!(cube.forward(&2.0).unwrap(), 8.0);
/// // The second derivative, 6x, read off the borrowed reverse map.
/// assert!((hessian_vector(&cube, &1.5, &1.0).unwrap() - 9.0).abs() < 1e-12);
/// // The two really are the same map, at both orders.
/// Checker::new().same_reverse(&Cube.reversed_through(Powi::new(3)), &Powi::new(3), -2.0..2.0)
///     .assert_clean();
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ReversedThrough<F, C> {
    /// The hand-written map: its passes are used.
    pub map: F,
    /// The equal composite: its reverse derivative is used.
    pub composite: C,
}

impl<F, C> ReversedThrough<F, C> {
    /// `map`, with the reverse derivative of `composite`.
    pub fn new(map: F, composite: C) -> Self {
        ReversedThrough { map, composite }
    }
}

impl<F: Compose, C: Compose> Compose for ReversedThrough<F, C> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth().max(self.composite.boxed_depth())
    }
}

impl<A: Space, F: Map<A>, C: Compose> Map<A> for ReversedThrough<F, C> {
    type Output = F::Output;
    type Memo = F::Memo;
    fn forward(&self, x: &A) -> Result<F::Output> {
        self.map.forward(x)
    }
    fn forward_memo(&self, x: &A) -> Result<(F::Output, F::Memo)> {
        self.map.forward_memo(x)
    }
    fn backward_memo(&self, memo: &F::Memo, dy: &F::Output) -> Result<A> {
        self.map.backward_memo(memo, dy)
    }
}

impl<A, F, C> Reverse<A> for ReversedThrough<F, C>
where
    A: Space,
    F: Map<A> + Clone,
    C: Reverse<A, Output = F::Output>,
{
    type Rev = C::Rev;
    fn rev(&self) -> C::Rev {
        self.composite.rev()
    }
}
