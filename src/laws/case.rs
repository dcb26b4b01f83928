//! The values a law is checked at, and how they are drawn.

use crate::map::Map;
use crate::space::{Euclidean, Real, Space};
use proptest::prelude::*;
use std::cell::Cell;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::Once;

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
/// `[-1, 1]`: the changes the checkers draw. Up to 32 coordinates shrink one
/// by one towards 0, 1 and -1; larger values come from a drawn seed.
pub fn changes_like<R: Real, S: Euclidean<R>>(template: S) -> impl Strategy<Value = S> {
    coordinates(template.dimension()).prop_map(move |c| shaped(&template, &c))
}

/// Evaluates `f` at `x`, turning errors and panics into a reason.
pub(crate) fn evaluate<A: Space, F: Map<A>>(
    f: &F,
    x: &A,
) -> std::result::Result<F::Output, String> {
    match quietly(|| f.forward(x)) {
        Ok(Ok(y)) => Ok(y),
        Ok(Err(e)) => Err(format!("the forward pass returned an error: {e}")),
        Err(payload) => Err(format!(
            "the forward pass panicked: {}",
            panic_message(&*payload)
        )),
    }
}

thread_local! {
    static QUIET: Cell<bool> = const { Cell::new(false) };
}

/// Runs `run`, catching a panic. While it runs, panics on this thread are
/// not printed (the report says what happened); other threads' panics print
/// as before.
pub(crate) fn quietly<T>(run: impl FnOnce() -> T) -> std::thread::Result<T> {
    static HOOK: Once = Once::new();
    HOOK.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            if !QUIET.with(Cell::get) {
                previous(info);
            }
        }));
    });
    let was = QUIET.with(|q| q.replace(true));
    let result = catch_unwind(AssertUnwindSafe(run));
    QUIET.with(|q| q.set(was));
    result
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

/// A value shaped like `template` from drawn coordinates, reused cyclically
/// if the template has more coordinates than were drawn.
fn shaped<R: Real, S: Euclidean<R>>(template: &S, drawn: &[f64]) -> S {
    let n = template.dimension();
    if drawn.is_empty() {
        return template.zero_like();
    }
    let coords: Vec<R> = (0..n)
        .map(|i| R::from(drawn[i % drawn.len()]).unwrap_or_else(R::nan))
        .collect();
    template
        .rebuild_from_coordinates(&coords)
        .unwrap_or_else(|_| template.zero_like())
}

/// How many change coordinates to draw: the largest input and output
/// dimensions among a few inputs drawn from a fixed seed. Drawing the
/// coordinates independently of the input (rather than from it, with a
/// dependent strategy) lets proptest shrink inputs and changes separately,
/// and quickly; inputs of other dimensions reuse the coordinates cyclically.
fn probe_dimensions<R, A, F, SX>(inputs: &SX, f: &F) -> (usize, usize)
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
    SX: Strategy<Value = A>,
{
    probe_inputs(inputs).iter().fold((1, 1), |(nx, ny), x| {
        let ny_here = evaluate(f, x).map_or(0, |y| y.dimension());
        (nx.max(x.dimension()), ny.max(ny_here))
    })
}

/// A few inputs drawn from a fixed seed, to size the drawn changes.
fn probe_inputs<SX: Strategy>(inputs: &SX) -> Vec<SX::Value> {
    use proptest::strategy::ValueTree;
    use proptest::test_runner::TestRunner;
    const PROBES: usize = 8;
    let mut runner = TestRunner::deterministic();
    (0..PROBES)
        .filter_map(|_| inputs.new_tree(&mut runner).ok())
        .map(|tree| tree.current())
        .collect()
}

/// Up to this many coordinates, each is drawn and shrunk on its own; above
/// it, all are made from one drawn seed.
pub(crate) const SHRINK_EACH_UP_TO: usize = 32;

/// `n` change coordinates. Small changes shrink coordinate by coordinate
/// towards 0, 1 and -1, which makes a readable counterexample; large ones
/// are made from a drawn seed (proptest's per-coordinate trees cost about a
/// microsecond per coordinate, which dominates a check of a 10,000-element
/// map, and a shrunk 10,000-element change is not readable anyway).
fn coordinates(n: usize) -> BoxedStrategy<Vec<f64>> {
    if n <= SHRINK_EACH_UP_TO {
        proptest::collection::vec(coordinate(), n).boxed()
    } else {
        any::<u64>()
            .prop_map(move |seed| seeded_uniform(seed, n, -1.0, 1.0))
            .boxed()
    }
}

/// `n` numbers uniform in `[lo, hi)` from `seed` (splitmix64; any fixed
/// generator would do).
pub(crate) fn seeded_uniform(seed: u64, n: usize, lo: f64, hi: f64) -> Vec<f64> {
    let mut state = seed;
    (0..n)
        .map(|_| {
            state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^= z >> 31;
            let unit = (z >> 11) as f64 / (1u64 << 53) as f64;
            lo + (hi - lo) * unit
        })
        .collect()
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
        let (nx, ny) = probe_dimensions(self, f);
        (
            self,
            coordinates(nx),
            coordinates(nx),
            coordinates(ny),
            coordinates(ny),
            scalar(),
        )
            .prop_map(move |(x, v, u, w, w2, s)| match evaluate(f, &x) {
                Ok(y) => Drawn::Case(Case {
                    v: shaped(&x, &v),
                    u: shaped(&x, &u),
                    w: shaped(&y, &w),
                    w2: shaped(&y, &w2),
                    x,
                    s,
                }),
                Err(reason) => Drawn::Unevaluable { x, reason },
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
        let nx = probe_inputs(&self.inputs)
            .iter()
            .map(|x| x.dimension())
            .fold(1, usize::max);
        (
            &self.inputs,
            coordinates(nx),
            coordinates(nx),
            proptest::array::uniform2(&self.output_changes),
            scalar(),
        )
            .prop_map(|(x, v, u, [w, w2], s)| {
                Drawn::Case(Case {
                    v: shaped(&x, &v),
                    u: shaped(&x, &u),
                    x,
                    w,
                    w2,
                    s,
                })
            })
    }
}
