//! Passes that reuse their buffers from one call to the next.
//!
//! [`Map::forward_memo`] returns a fresh output and a memo that owns copies
//! of what the backward pass needs; called once per training step, that is
//! a new set of arrays every step. The reusing passes write into a
//! [`Workspace`] kept by the caller instead: the first call fills it, and
//! every later call with inputs of the same shapes overwrites the same
//! buffers, so a training loop allocates nothing after its first step.
//!
//! Two differences from the memo passes make this cheap:
//!
//! - the backward pass receives the input it was called with again (by
//!   reference), so no map keeps a copy of its input;
//! - a map on a pair whose parts come from different places (a parametrised
//!   map: parameters and input) takes them as two references through
//!   [`SplitInput`], so a composite hands its parts their pieces of the
//!   parameters without building owned pairs.
//!
//! Every map has the one-argument passes ([`Map::forward_reusing`],
//! [`Map::reused_output`], [`Map::backward_reusing`]); their defaults go
//! through the memo passes (correct, but allocating), and the catalogue's
//! elementwise maps and [`Then`](crate::Then) override them.
//! [`SplitInput`] is what [`Training`](crate::Training) asks of a model and
//! a loss; a hand-written model opts in with one line,
//! `impl SplitInput<P, Array2<f64>> for MyModel {}`, and gets the defaults.
//!
//! # Example
//!
//! A two-layer model's gradient, twice into one workspace: the second call
//! reuses every buffer of the first, and agrees with the memo passes.
//!
//! ```
//! use revdiff::{Affine, Compose, Map, Parametrised, SplitInput, Tanh, Workspace};
//! use ndarray::{array, Array1, Array2};
//!
//! let model = Affine.then(Tanh).then_parametrised(Affine);
//! let p = (
//!     (array![[0.5, -0.2], [0.1, 0.3]], array![0.0, 0.1]),
//!     (array![[1.0, -1.0]], array![0.2]),
//! );
//! let x = array![[1.0, 2.0], [0.5, -1.0], [0.0, 3.0]]; // three rows
//! let dy = array![[1.0], [0.0], [-2.0]];
//!
//! let mut work = Workspace::new();
//! let mut dp = ((Array2::zeros((2, 2)), Array1::zeros(2)), (Array2::zeros((1, 2)), Array1::zeros(1)));
//! for _ in 0..2 {
//!     let y = model.forward_split(&p, &x, &mut work)?;
//!     assert_eq!(*y, model.forward(&(p.clone(), x.clone()))?);
//!     // No input change wanted: the first layer skips its product.
//!     model.backward_split(&p, &x, &mut work, &dy, &mut dp, None)?;
//! }
//! let (expected, _) = model.backward(&(p, x), &dy)?;
//! assert_eq!(dp, expected);
//! # Ok::<(), revdiff::Error>(())
//! ```

use crate::error::{Error, Result};
use crate::map::Map;
use crate::space::Space;
use std::any::Any;
use std::fmt;

/// The buffers of one map's reusing passes, kept by the caller between
/// calls: the output of the last forward pass and whatever else the map
/// keeps (its memo, or for a composite its parts' workspaces).
///
/// A workspace is untyped so that every map can use one without naming its
/// layout; a map downcasts what it finds (a type check, no copy) and
/// replaces it if it finds something else. Each map fills its own
/// workspace: give a composite one workspace, and it gives its parts theirs.
#[derive(Default)]
pub struct Workspace {
    output: Option<Box<dyn Any>>,
    state: Option<Box<dyn Any>>,
    // The default `Map::backward_reusing_adding`'s buffer, apart from the
    // map's own state so that the map can use its workspace meanwhile.
    scratch: Option<Box<dyn Any>>,
}

impl fmt::Debug for Workspace {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Workspace")
            .field("holds_output", &self.output.is_some())
            .field("holds_state", &self.state.is_some())
            .finish()
    }
}

fn not_filled(operation: &'static str) -> Error {
    Error::WorkspaceNotFilled { operation }
}

impl Workspace {
    /// An empty workspace; the first forward pass fills it.
    pub const fn new() -> Self {
        Workspace {
            output: None,
            state: None,
            scratch: None,
        }
    }

    /// The output the last forward pass stored, if it is an `O`.
    pub fn output<O: 'static>(&self) -> Result<&O> {
        self.output
            .as_ref()
            .and_then(|b| b.downcast_ref::<O>())
            .ok_or_else(|| not_filled("reading the output of a reusing forward pass"))
    }

    /// The stored output to overwrite in place, if there is one of type `O`.
    pub fn output_mut<O: 'static>(&mut self) -> Option<&mut O> {
        self.output.as_mut().and_then(|b| b.downcast_mut::<O>())
    }

    /// Stores `value` as the output, in the box of the previous output when
    /// that was an `O` too (no allocation).
    pub fn put_output<O: 'static>(&mut self, value: O) {
        put(&mut self.output, value);
    }

    /// The stored output of type `O`, created by `make` when there is none
    /// (or one of another type), to be overwritten in place.
    pub fn output_or_insert_with<O: 'static>(&mut self, make: impl FnOnce() -> O) -> &mut O {
        slot(&mut self.output, make)
    }

    /// What else the map stored, if it is an `S`.
    pub fn state<S: 'static>(&self) -> Result<&S> {
        self.state
            .as_ref()
            .and_then(|b| b.downcast_ref::<S>())
            .ok_or_else(|| not_filled("reading what a reusing forward pass kept"))
    }

    /// The stored state of type `S`, to change in place.
    pub fn state_mut<S: 'static>(&mut self) -> Result<&mut S> {
        self.state
            .as_mut()
            .and_then(|b| b.downcast_mut::<S>())
            .ok_or_else(|| not_filled("reading what a reusing forward pass kept"))
    }

    /// Stores `value` as the state, in the previous state's box when that
    /// was an `S` too.
    pub fn put_state<S: 'static>(&mut self, value: S) {
        put(&mut self.state, value);
    }

    /// The stored state of type `S`, created by `make` when there is none
    /// (or one of another type).
    pub fn state_or_insert_with<S: 'static>(&mut self, make: impl FnOnce() -> S) -> &mut S {
        slot(&mut self.state, make)
    }

    /// Runs `f` with this workspace and its scratch buffer of type `V`
    /// (made by `make` the first time), which is kept, in its box, for the
    /// next call: the buffer of the default adding backward pass.
    pub(crate) fn with_scratch<V: 'static, R>(
        &mut self,
        make: impl FnOnce() -> V,
        f: impl FnOnce(&mut Workspace, &mut V) -> R,
    ) -> R {
        let mut boxed = match self.scratch.take() {
            Some(b) if b.is::<V>() => b,
            _ => Box::new(make()),
        };
        let value = boxed.downcast_mut::<V>().expect("checked or just made");
        let result = f(self, value);
        self.scratch = Some(boxed);
        result
    }

    /// The output slot and the state at once (both mutable), the state
    /// created by `make` when missing: for a map whose forward pass writes
    /// its output while updating what it keeps.
    pub fn output_and_state<O: 'static, S: 'static>(
        &mut self,
        make: impl FnOnce() -> S,
    ) -> (Option<&mut O>, &mut S) {
        let state = slot(&mut self.state, make);
        (
            self.output.as_mut().and_then(|b| b.downcast_mut::<O>()),
            state,
        )
    }
}

fn put<V: 'static>(place: &mut Option<Box<dyn Any>>, value: V) {
    match place.as_mut().and_then(|b| b.downcast_mut::<V>()) {
        Some(old) => *old = value,
        None => *place = Some(Box::new(value)),
    }
}

fn slot<V: 'static>(place: &mut Option<Box<dyn Any>>, make: impl FnOnce() -> V) -> &mut V {
    if !place.as_ref().is_some_and(|b| b.is::<V>()) {
        *place = Some(Box::new(make()));
    }
    place
        .as_mut()
        .and_then(|b| b.downcast_mut::<V>())
        .expect("the slot was just filled with a value of this type")
}

/// `buffer`, made to have `like`'s shape: kept when it has it already
/// (its contents are then stale, to be overwritten), else replaced by zeros.
pub(crate) fn shaped_like<'b, S: Space>(buffer: &'b mut Option<S>, like: &S) -> &'b mut S {
    let fits = buffer
        .as_ref()
        .is_some_and(|b| b.check_same_shape(like).is_ok());
    if !fits {
        *buffer = Some(like.zero_like());
    }
    buffer.as_mut().expect("just filled")
}

/// `target` made to have `like`'s shape, replaced by zeros only when it
/// has another.
pub(crate) fn reshape_to<S: Space>(target: &mut S, like: &S) {
    if target.check_same_shape(like).is_err() {
        *target = like.zero_like();
    }
}

/// A map on a pair `(P, X)` whose reusing passes take the two parts as
/// separate references: what [`Training`](crate::Training) needs of a model
/// (parameters and a batch) and of a loss (prediction and targets).
///
/// Taking the parts apart is what lets a parametrised composite such as
/// [`ThenParametrised`](crate::ThenParametrised) give each stage its own
/// parameters and the running activations without building owned pairs
/// (copies) for them. Every method has a default that goes through the
/// memo passes ([`Map::forward_memo`], [`Map::backward_memo`]), so a
/// hand-written model opts in with an empty impl; the catalogue's affine
/// map, losses and parametrised combinators override them with passes that
/// copy nothing and allocate nothing once the workspace is filled.
///
/// The output of the last forward pass can be read again with
/// [`Map::reused_output`]; an implementation that stores its output
/// elsewhere than [`Workspace::put_output`] overrides that too.
///
/// # Example
///
/// A hand-written parametrised map, `(w, x) -> w x` on batches of scalars,
/// trained with the defaults:
///
/// ```
/// use revdiff::{Adam, Compose, Examples, Map, MeanSquaredError, Result, SplitInput, Training};
/// use ndarray::{Array1, Array2};
///
/// #[derive(Clone, Debug)]
/// struct Gain;
/// impl Compose for Gain {}
/// impl Map<(f64, Array2<f64>)> for Gain {
///     type Output = Array2<f64>;
///     type Memo = (f64, Array2<f64>);
///     fn forward_memo(&self, (w, x): &(f64, Array2<f64>)) -> Result<(Array2<f64>, Self::Memo)> {
///         Ok((x * *w, (*w, x.clone())))
///     }
///     fn backward_memo(&self, (w, x): &Self::Memo, dy: &Array2<f64>) -> Result<(f64, Array2<f64>)> {
///         Ok(((x * dy).sum(), dy * *w))
///     }
/// }
/// impl SplitInput<f64, Array2<f64>> for Gain {}
///
/// let x = Array2::from_shape_fn((40, 1), |(i, _)| i as f64 / 40.0);
/// let data = Examples::new(x.clone(), &x * 3.0)?;
/// let fit = Training::new(200, 8)?
///     .run(&Gain, &MeanSquaredError, &mut Adam::new(0.05)?, 0.0, &data, |_| {})
///     .unwrap();
/// assert!((fit.parameters - 3.0).abs() < 1e-3);
/// # Ok::<(), revdiff::Error>(())
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` has no reusing passes on the split input `({P}, {X})`",
    label = "training needs `SplitInput<{P}, {X}>` here",
    note = "a hand-written model or loss opts in with `impl SplitInput<{P}, {X}> for {Self} {{}}` (the defaults go through its memo passes)"
)]
pub trait SplitInput<P: Space, X: Space>: Map<(P, X)> {
    /// The forward pass at `(p, x)` into `work`, reusing what an earlier
    /// pass left there; returns the output, which stays in the workspace
    /// ([`Map::reused_output`]).
    fn forward_split<'w>(&self, p: &P, x: &X, work: &'w mut Workspace) -> Result<&'w Self::Output> {
        let (y, memo) = self.forward_memo(&(p.clone(), x.clone()))?;
        work.put_output(y);
        work.put_state(memo);
        self.reused_output(work)
    }

    /// The backward pass for output change `dy` at the point of the last
    /// [`forward_split`](SplitInput::forward_split) into `work` (called
    /// with the same `p` and `x`). Overwrites `dp` with the change of `p`,
    /// and `dx`, when given, with the change of `x`; with `None` a map may
    /// skip the work of the input change. `dp` and `dx` are reshaped when
    /// their shapes are not those of `p` and `x`.
    fn backward_split(
        &self,
        p: &P,
        x: &X,
        work: &mut Workspace,
        dy: &Self::Output,
        dp: &mut P,
        dx: Option<&mut X>,
    ) -> Result<()> {
        let _ = (p, x);
        let memo = work.state::<Self::Memo>()?;
        let (new_dp, new_dx) = self.backward_memo(memo, dy)?;
        *dp = new_dp;
        if let Some(dx) = dx {
            *dx = new_dx;
        }
        Ok(())
    }
}

// The catalogue's other maps on pairs take the memo passes: none of them
// is on the path of a batched model's training step.
macro_rules! split_by_memo {
    ($([$($gen:tt)*] $map:ty: $p:ty, $x:ty;)*) => {$(
        impl<$($gen)*> SplitInput<$p, $x> for $map {}
    )*};
}
split_by_memo! {
    [P: Space, X: Space] crate::Fst: P, X;
    [P: Space, X: Space] crate::Snd: P, X;
    [A: Space] crate::AddPair: A, A;
    [E: crate::Pointwise] crate::SubPair: E, E;
    [E: crate::Pointwise] crate::MulPair: E, E;
    [E: crate::Pointwise] crate::DivPair: E, E;
    [T: crate::Real] crate::MatMul: ndarray::Array2<T>, ndarray::Array2<T>;
    [T: crate::Real] crate::MatVec: ndarray::Array2<T>, ndarray::Array1<T>;
    [T: crate::Real] crate::Outer: ndarray::Array1<T>, ndarray::Array1<T>;
    [T: crate::Real] crate::PowPair: T, T;
    [A: Space, C: Space, F: Map<A>, G: Map<C>] crate::Alongside<F, G>: A, C;
}
