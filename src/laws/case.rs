//! The values a law is checked at, and how they are drawn.

use crate::map::Map;
use crate::space::{Euclidean, Real, Space};
use proptest::prelude::*;
use std::panic::{AssertUnwindSafe, catch_unwind};

/// The values one check of a law is made at: an input, two input changes,
/// two output changes and a real scalar. Each law uses some of them (see
/// [`Law::slots`](crate::laws::Law::slots)); a report shows those.
///
/// ```
/// use revdiff::laws::Case;
///
/// let case = Case { x: 1.0, v: 0.5, u: -0.5, w: 2.0, w2: 1.0, s: 3.0 };
/// let lifted = case.lift();
/// // At order 2 the input is (x, w) and the output change is u.
/// assert_eq!(lifted.x, (1.0, 2.0));
/// assert_eq!(lifted.w, -0.5);
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Case<A, B> {
    /// The input `x`.
    pub x: A,
    /// An input change `v`.
    pub v: A,
    /// A second input change `u`.
    pub u: A,
    /// An output change `w`.
    pub w: B,
    /// A second output change `w2`.
    pub w2: B,
    /// A real scalar `s` (for homogeneity).
    pub s: f64,
}

impl<A: Clone, B: Clone> Case<A, B> {
    /// The case for the reverse derivative `R[f]: (A, B) -> A`, so that the
    /// laws at order 2 are the laws at order 1 applied to `R[f]`: input
    /// `(x, w)`, input changes `(v, w2)` and `(u, w)`, output changes `u`
    /// and `v`.
    pub fn lift(&self) -> Case<(A, B), A> {
        Case {
            x: (self.x.clone(), self.w.clone()),
            v: (self.v.clone(), self.w2.clone()),
            u: (self.u.clone(), self.w.clone()),
            w: self.u.clone(),
            w2: self.v.clone(),
            s: self.s,
        }
    }
}

/// What a case generator produced: a case, or an input at which the map
/// could not even be evaluated (so output changes could not be shaped).
#[derive(Clone, Debug)]
pub enum Drawn<A, B> {
    /// A full case.
    Case(Case<A, B>),
    /// The forward pass failed or panicked at `x`, for `reason`.
    Unevaluable {
        /// The input.
        x: A,
        /// What went wrong.
        reason: String,
    },
}

/// A source of cases for a map `A -> B`: any proptest strategy of inputs
/// (output changes are then drawn shaped like the map's output, with
/// coordinates in `[-1, 1]`), or [`with_output_changes`] to draw the output
/// changes from a strategy of your own. Input changes are always shaped like
/// the input, with coordinates in `[-1, 1]`.
pub trait CaseSource<R: Real, A: Space, B: Space> {
    /// The strategy of cases for the map `f`.
    fn cases<'a, F: Map<A, Output = B>>(
        &'a self,
        f: &'a F,
    ) -> impl Strategy<Value = Drawn<A, B>> + 'a
    where
        A: 'a,
        B: 'a;
}

/// Inputs from `inputs`, output changes from `output_changes`.
///
/// ```
/// use revdiff::laws::{with_output_changes, Checker};
/// use revdiff::Exp;
///
/// let report = Checker::new().reverse(&Exp, with_output_changes(-2.0..2.0f64, -10.0..10.0f64));
/// assert!(report.is_clean(), "{report}");
/// ```
pub fn with_output_changes<SX, SW>(inputs: SX, output_changes: SW) -> WithOutputChanges<SX, SW> {
    WithOutputChanges {
        inputs,
        output_changes,
    }
}

/// A [`CaseSource`] with output changes from a strategy of your own; see
/// [`with_output_changes`].
#[derive(Clone, Debug)]
pub struct WithOutputChanges<SX, SW> {
    inputs: SX,
    output_changes: SW,
}

/// One coordinate of a drawn change: uniform in `[-1, 1]` most of the time,
/// sometimes exactly 0, 1 or -1. Shrinking moves towards those, so a shrunk
/// counterexample has simple changes: zero where a coordinate does not
/// matter, one where it does.
fn coordinate() -> impl Strategy<Value = f64> + Clone {
    prop_oneof![
        1 => Just(0.0),
        1 => Just(1.0),
        1 => Just(-1.0),
        7 => -1.0..=1.0f64,
    ]
}

/// A strategy of values shaped like `template` with coordinates in
/// `[-1, 1]`, shrinking towards coordinates 0, 1 and -1.
pub fn changes_like<R: Real, S: Euclidean<R>>(template: S) -> impl Strategy<Value = S> + Clone {
    let n = template.dimension();
    proptest::collection::vec(coordinate(), n).prop_map(move |c| {
        let coords: Vec<R> = c.into_iter().map(|v| R::from(v).unwrap_or_else(R::nan)).collect();
        template
            .rebuild_from_coordinates(&coords)
            .unwrap_or_else(|_| template.clone())
    })
}

/// Evaluates `f` at `x`, turning errors and panics into a reason.
pub(crate) fn evaluate<A: Space, F: Map<A>>(
    f: &F,
    x: &A,
) -> std::result::Result<F::Output, String> {
    match catch_unwind(AssertUnwindSafe(|| f.forward(x))) {
        Ok(Ok(y)) => Ok(y),
        Ok(Err(e)) => Err(format!("the forward pass returned an error: {e}")),
        Err(payload) => Err(format!("the forward pass panicked: {}", panic_message(&*payload))),
    }
}

/// The message of a caught panic.
pub(crate) fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_string()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "(a panic without a message)".to_string()
    }
}

fn scalar() -> std::ops::Range<f64> {
    -4.0..4.0
}

impl<R, A, B, SX> CaseSource<R, A, B> for SX
where
    R: Real,
    A: Euclidean<R>,
    B: Euclidean<R>,
    SX: Strategy<Value = A>,
{
    fn cases<'a, F: Map<A, Output = B>>(
        &'a self,
        f: &'a F,
    ) -> impl Strategy<Value = Drawn<A, B>> + 'a
    where
        A: 'a,
        B: 'a,
    {
        self.prop_flat_map(move |x| {
            let y = evaluate(f, &x);
            let template = y.as_ref().ok().cloned();
            let n = template.as_ref().map_or(0, |t| t.dimension());
            let w = proptest::collection::vec(coordinate(), n);
            (
                Just((x.clone(), y.err())),
                changes_like(x.clone()),
                changes_like(x),
                w.clone(),
                w,
                scalar(),
                Just(template),
            )
        })
        .prop_map(|((x, failure), v, u, w, w2, s, template)| {
            match (template, failure) {
                (Some(t), _) => {
                    let shape = |c: Vec<f64>| {
                        let coords: Vec<R> =
                            c.into_iter().map(|v| R::from(v).unwrap_or_else(R::nan)).collect();
                        t.rebuild_from_coordinates(&coords)
                            .unwrap_or_else(|_| t.clone())
                    };
                    Drawn::Case(Case {
                        x,
                        v,
                        u,
                        w: shape(w),
                        w2: shape(w2),
                        s,
                    })
                }
                (None, failure) => Drawn::Unevaluable {
                    x,
                    reason: failure.unwrap_or_default(),
                },
            }
        })
    }
}

impl<R, A, B, SX, SW> CaseSource<R, A, B> for WithOutputChanges<SX, SW>
where
    R: Real,
    A: Euclidean<R>,
    B: Space,
    SX: Strategy<Value = A>,
    SW: Strategy<Value = B>,
{
    fn cases<'a, F: Map<A, Output = B>>(
        &'a self,
        _f: &'a F,
    ) -> impl Strategy<Value = Drawn<A, B>> + 'a
    where
        A: 'a,
        B: 'a,
    {
        let inputs = (&self.inputs)
            .prop_flat_map(|x| (Just(x.clone()), changes_like(x.clone()), changes_like(x)));
        (
            inputs,
            proptest::array::uniform2(&self.output_changes),
            scalar(),
        )
            .prop_map(|((x, v, u), [w, w2], s)| {
                Drawn::Case(Case { x, v, u, w, w2, s })
            })
    }
}
