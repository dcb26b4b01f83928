//! The core traits: [`Map`] (a map with a fast reverse derivative),
//! [`Reverse`] (a map whose reverse derivative is again a map), [`Linear`]
//! (linear maps, which have transposes) and [`Compose`] (the combinator
//! methods).

use crate::combinators::{Alongside, Pair, Plus, ReversedThrough, Scaled, Then, Transpose};
use crate::dynamic::ScalarStages;
use crate::error::{Error, Result};
use crate::space::Space;
use crate::workspace::Workspace;
use std::any::Any;
use std::rc::Rc;

/// A map `A -> Self::Output` that carries its reverse derivative.
///
/// The reverse derivative `R[f]: A x B -> A` sends a point `x` and a change
/// `dy` of the output to the change of the input, the transposed Jacobian of
/// `f` at `x` applied to `dy`. It is computed in two passes:
/// [`forward_memo`](Map::forward_memo) evaluates the map and keeps a memo
/// (whatever the backward pass needs: the input, the output, nothing), and
/// [`backward_memo`](Map::backward_memo) turns the memo and an output
/// change into an input change. [`backward`](Map::backward) does both.
///
/// Composites keep the memos of their parts, so one forward pass and one
/// backward pass cost the same order of work as evaluating the map, however
/// deeply the combinators are nested.
///
/// # What `Map` alone gives, and what needs [`Reverse`]
///
/// With only `Map`, a hand-written map composes with every combinator, has
/// gradients ([`backward`](Map::backward)), trains with
/// [`Training`](crate::Training), fits by least squares through
/// [`CurveResiduals`](crate::CurveResiduals), has a Jacobian by backward
/// passes ([`jacobian_by_backward`](crate::jacobian_by_backward)) and goes
/// through the first-order laws ([`Checker::map`](crate::laws::Checker::map)).
///
/// Everything of second order needs [`Reverse`]: forward derivatives,
/// Hessian-vector products, [`jacobian`](crate::jacobian) by forward passes,
/// [`residual_map`](crate::residual_map) and the order-2 laws. The shortest
/// way there is [`Compose::reversed_through`], which borrows the reverse map
/// of an equal composite of catalogue pieces.
///
/// The input space is a type parameter rather than an associated type, so one
/// primitive (say [`Exp`](crate::Exp)) acts on `f64`, `f32` and arrays of
/// any dimension alike.
///
/// # Example
///
/// A hand-written primitive, `x -> x^3`, composed with a catalogue piece:
///
/// ```
/// use revdiff::{Compose, Map, Result, Sin};
///
/// #[derive(Clone, Debug)]
/// struct Cube;
///
/// impl Compose for Cube {}
///
/// impl Map<f64> for Cube {
///     type Output = f64;
///     type Memo = f64; // the input, for the slope 3x^2
///     fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
///         Ok((x * x * x, *x))
///     }
///     fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
///         Ok(3.0 * x * x * dy)
///     }
/// }
///
/// let model = Cube.then(Sin); // x -> sin(x^3)
/// let x = 0.7_f64;
/// let grad = model.backward(&x, &1.0).unwrap();
/// assert!((grad - (x * x * x).cos() * 3.0 * x * x).abs() < 1e-12);
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` is not a map with input `{A}`",
    label = "this map cannot take `{A}` as its input",
    note = "check that the input type matches what the previous stage outputs: in `f.then(g)`, `g` takes `f`'s output",
    note = "a parametrised stage such as `Affine` takes `(parameters, input)`: after another parametrised stage, join it with `.then_parametrised(stage)`, not `.then(stage)`",
    note = "a hand-written map needs `impl Map<{A}> for {Self}` (and `impl Compose for {Self} {{}}`)"
)]
pub trait Map<A: Space>: Compose {
    /// The output space.
    type Output: Space;
    /// What the forward pass keeps for the backward pass. It owns what it
    /// keeps (`'static`), so that it can be held type-erased.
    type Memo: 'static;

    /// Evaluates the map.
    fn forward(&self, x: &A) -> Result<Self::Output> {
        Ok(self.forward_memo(x)?.0)
    }

    /// Evaluates the map and keeps what the backward pass needs.
    fn forward_memo(&self, x: &A) -> Result<(Self::Output, Self::Memo)>;

    /// The input change for output change `dy`, at the point the memo was
    /// kept for. One memo serves any number of output changes.
    fn backward_memo(&self, memo: &Self::Memo, dy: &Self::Output) -> Result<A>;

    /// The reverse derivative `R[f](x, dy)`.
    fn backward(&self, x: &A, dy: &Self::Output) -> Result<A> {
        let (_, memo) = self.forward_memo(x)?;
        self.backward_memo(&memo, dy)
    }

    /// The forward pass into a [`Workspace`] kept by the caller, reusing
    /// the buffers an earlier pass left there; returns the output, which
    /// stays in the workspace ([`reused_output`](Map::reused_output)). The default stores the
    /// output and memo of [`forward_memo`](Map::forward_memo); the
    /// catalogue's elementwise maps write into the previous output's
    /// buffer and keep nothing else. See [`crate::workspace`].
    fn forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w Self::Output> {
        let (y, memo) = self.forward_memo(x)?;
        work.put_output(y);
        work.put_state(memo);
        self.reused_output(work)
    }

    /// The output of the last [`forward_reusing`](Map::forward_reusing)
    /// (or [`forward_split`](crate::SplitInput::forward_split)) into
    /// `work`. A map that stores its output elsewhere than
    /// [`Workspace::put_output`] (a composite, in its last part's
    /// workspace) overrides this.
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w Self::Output> {
        work.output()
    }

    /// The backward pass at the point of the last
    /// [`forward_reusing`](Map::forward_reusing) into `work`, which was
    /// called with this same `x`: overwrites `dx` with the input change
    /// (reshaping it if its shape is not `x`'s). Reading `x` again, rather
    /// than a copy in a memo, is what lets a map keep nothing.
    fn backward_reusing(
        &self,
        x: &A,
        work: &mut Workspace,
        dy: &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        let _ = x;
        *dx = self.backward_memo(work.state::<Self::Memo>()?, dy)?;
        Ok(())
    }

    /// Exchanges the output of the last reusing forward pass, where `work`
    /// holds it, with `with` (a value of the same type, whose contents the
    /// map will overwrite at its next forward pass): how a composite keeps
    /// its parts' outputs together without copying them ([`Pair`]). An
    /// error, and nothing exchanged, where the output is not in the
    /// workspace's output slot; the caller then copies. A composite that
    /// keeps its output in a part's workspace forwards this to the part.
    fn swap_reused_output(&self, work: &mut Workspace, with: &mut Self::Output) -> Result<()> {
        // Only where the output really is the slot's: a composite that
        // keeps it elsewhere may have an old value in the slot.
        let reported = self.reused_output(work).ok().map(std::ptr::from_ref);
        match work.output_mut::<Self::Output>() {
            Some(out) if reported == Some(std::ptr::from_ref(out)) => {
                std::mem::swap(out, with);
                Ok(())
            }
            _ => Err(Error::WorkspaceNotFilled {
                operation: "exchanging a reused output (this map keeps its output elsewhere)",
            }),
        }
    }

    /// [`backward_reusing`](Map::backward_reusing), adding the input
    /// change to `dx` (of `x`'s shape) instead of overwriting it: what a
    /// pairing ([`Pair`]) needs, whose input change is the sum of its
    /// parts'. The default computes the change into a scratch buffer kept
    /// in `work` and adds it; the crate's gates and elementwise maps add in
    /// the same pass that computes it.
    fn backward_reusing_adding(
        &self,
        x: &A,
        work: &mut Workspace,
        dy: &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        work.with_scratch(
            || x.zero_like(),
            |work, change| {
                self.backward_reusing(x, work, dy, change)?;
                dx.try_add_assign(change)
            },
        )
    }
}

/// A map whose reverse derivative is itself a map of the library, from
/// `A x B` to `A`, and so can be differentiated again, to any order.
///
/// The rule: [`rev`](Reverse::rev)`().forward(&(x, dy))` equals
/// `backward(&x, &dy)` to rounding. Its own reverse derivative gives the
/// second-order quantities: the forward derivative
/// ([`forward_derivative`](crate::forward_derivative)), Hessian-vector products
/// ([`hessian_vector`](crate::hessian_vector)) and the second-order laws.
///
/// # Example
///
/// The user primitive `x -> x^3` again, its reverse derivative assembled from
/// catalogue pieces: `R[cube](x, dy) = 3 x^2 dy`. (Where an equal composite
/// exists, [`Compose::reversed_through`] does this without naming any type.)
///
/// ```
/// use revdiff::{fst, snd, Compose, Fst, Map, MulPair, Pair, Powi, Result, Reverse, Snd, Then};
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
/// impl Reverse<f64> for Cube {
///     type Rev = Then<Pair<Then<Fst, Powi<f64>>, Snd>, MulPair>;
///     fn rev(&self) -> Self::Rev {
///         fst().then(Powi::with_coefficient(3.0, 2)).pair(snd()).then(MulPair)
///     }
/// }
///
/// let x = 1.5;
/// assert_eq!(Cube.rev().forward(&(x, 2.0)).unwrap(), Cube.backward(&x, &2.0).unwrap());
/// // The second derivative 6x, read off the second reverse derivative.
/// let hv = revdiff::hessian_vector(&Cube, &x, &1.0).unwrap();
/// assert!((hv - 6.0 * x).abs() < 1e-12);
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` has no reverse derivative as a map, on input `{A}`",
    label = "second-order quantities need `Reverse<{A}>` here",
    note = "for a hand-written map, `.reversed_through(composite)` borrows the reverse map of an equal composite of catalogue pieces",
    note = "or implement `Reverse<{A}>` for `{Self}`; with only `Map`, use first-order tools (`backward`, `jacobian_by_backward`, `Checker::map`)"
)]
pub trait Reverse<A: Space>: Map<A> + Clone {
    /// The reverse derivative, as a map `(A, B) -> A`.
    type Rev: Reverse<(A, Self::Output), Output = A>;

    /// Builds the reverse derivative.
    fn rev(&self) -> Self::Rev;

    /// Evaluates the map and keeps, at every level of a composite, what
    /// its reverse map's forward pass at the same point needs, so that
    /// [`rev_forward_kept`](Reverse::rev_forward_kept) repeats no part of
    /// the forward pass. The default keeps the memo; sequential composition
    /// ([`Then`]) keeps its parts' and the value between them.
    /// Second-order quantities go through it; a hand-written map has no
    /// reason to override it.
    fn forward_keeping(&self, x: &A) -> Result<(Self::Output, Kept)> {
        let (y, memo) = self.forward_memo(x)?;
        Ok((y, Rc::new(memo)))
    }

    /// The backward pass from what [`forward_keeping`](Reverse::forward_keeping)
    /// kept. Something else is [`Error::ForeignMemo`].
    fn backward_kept(&self, kept: &Kept, dy: &Self::Output) -> Result<A> {
        let memo = kept
            .downcast_ref::<Self::Memo>()
            .ok_or(Error::ForeignMemo {
                operation: "backward pass from a kept forward pass",
            })?;
        self.backward_memo(memo, dy)
    }

    /// The reverse map `rev` (this map's [`rev`](Reverse::rev)) run forward
    /// at `(x, dy)`, keeping its memo, where `kept` is what
    /// [`forward_keeping`](Reverse::forward_keeping) kept at `x`. The
    /// default evaluates `rev` afresh, which repeats this map's forward
    /// pass; [`Then`] reads its parts' forward passes from
    /// `kept` instead, so a composite's reverse map costs the same order of
    /// work as its backward pass at any depth.
    #[allow(clippy::type_complexity)]
    fn rev_forward_kept(
        &self,
        rev: &Self::Rev,
        x: &A,
        kept: &Kept,
        dy: &Self::Output,
    ) -> Result<(A, <Self::Rev as Map<(A, Self::Output)>>::Memo)> {
        let _ = kept;
        rev.forward_memo(&(x.clone(), dy.clone()))
    }
}

/// What [`Reverse::forward_keeping`] keeps: a shared, type-erased value,
/// so that the reverse maps of a composite's parts can each hold their
/// part of it without copying.
pub type Kept = Rc<dyn Any>;

/// A linear map: its reverse derivative does not depend on the point, so it
/// has a transpose `B -> A`.
///
/// Implement it only for maps that really are linear; the transpose's own
/// reverse derivative is the map itself, which is right only then.
///
/// ```
/// use revdiff::{Linear, Map, MatrixTranspose};
/// use ndarray::array;
///
/// let a = array![[1.0, 2.0, 3.0]];
/// // The transpose of taking the matrix transpose is taking the transpose.
/// let t = MatrixTranspose.transpose_at(array![[0.0], [0.0], [0.0]]);
/// assert_eq!(t.forward(&a).unwrap(), array![[1.0], [2.0], [3.0]]);
/// ```
pub trait Linear<A: Space>: Reverse<A> {
    /// The transpose `dy -> R[f](x, dy)`. For a linear map the point `x` only
    /// supplies shapes; any value of the input's shape will do.
    fn transpose_at(&self, x: A) -> Transpose<Self, Self::Rev, A>
    where
        Self: Sized,
    {
        Transpose::new(self.clone(), self.rev(), x)
    }
}

/// The combinator methods, shared by every map.
///
/// It has no required items: a hand-written map opts in with
/// `impl Compose for MyMap {}`. The methods do not depend on the input
/// space, which is why they live here rather than on [`Map`]. They check at
/// the composition that the other side is a map of the library (`Compose`);
/// whether the two fit (one's output is the other's input) depends on the
/// input type, which a composite learns only where it is applied, so that
/// is checked there, with a message naming the likely fix.
#[diagnostic::on_unimplemented(
    message = "`{Self}` is not a map of this library",
    label = "a map must implement `Compose` and `Map`",
    note = "a hand-written map opts in with `impl Compose for {Self} {{}}` and `impl Map<Input> for {Self}`"
)]
pub trait Compose {
    /// First `self`, then `g`: the map `x -> g(self(x))`. See [`Then`].
    fn then<G>(self, g: G) -> Then<Self, G>
    where
        Self: Sized,
        G: Compose,
    {
        Then::new(self, g)
    }

    /// The pairing `<self, g>`: `x -> (self(x), g(x))`. See [`Pair`].
    fn pair<G>(self, g: G) -> Pair<Self, G>
    where
        Self: Sized,
        G: Compose,
    {
        Pair::new(self, g)
    }

    /// The product `self x g`: `(a, c) -> (self(a), g(c))`. See [`Alongside`].
    fn alongside<G>(self, g: G) -> Alongside<Self, G>
    where
        Self: Sized,
        G: Compose,
    {
        Alongside::new(self, g)
    }

    /// The sum of maps `self + g`: `x -> self(x) + g(x)`. See [`Plus`].
    fn plus<G>(self, g: G) -> Plus<Self, G>
    where
        Self: Sized,
        G: Compose,
    {
        Plus::new(self, g)
    }

    /// `self`, with the reverse derivative (as a map) of `composite`, an
    /// equal composite of catalogue pieces: second order for a hand-written
    /// map without writing its reverse map by hand. See [`ReversedThrough`].
    fn reversed_through<C>(self, composite: C) -> ReversedThrough<Self, C>
    where
        Self: Sized,
        C: Compose,
    {
        ReversedThrough::new(self, composite)
    }

    /// The scaled map `s * self`: `x -> s * self(x)`. See [`Scaled`].
    fn scaled<S>(self, s: S) -> Scaled<Self, S>
    where
        Self: Sized,
    {
        Scaled::new(self, s)
    }

    /// The same map, keeping only its input for the backward pass and
    /// recomputing the rest there. See [`Recomputed`](crate::Recomputed).
    fn recomputed(self) -> crate::Recomputed<Self>
    where
        Self: Sized,
    {
        crate::Recomputed { map: self }
    }

    /// How deeply [`Boxed`](crate::Boxed) maps nest inside this map: 0
    /// for a map that holds none. Combinators report the deepest of their
    /// parts, so that [`Boxed::new`](crate::Boxed::new) can refuse nesting
    /// deeper than the stack allows. A hand-written map that holds other
    /// maps should report the deepest of theirs; the default, 0, is right
    /// for every other map.
    fn boxed_depth(&self) -> usize {
        0
    }

    /// Appends this map's stages, as a composition of maps on one real
    /// number, to `into`, and returns true; false (the default) when it is
    /// not one, or its stages are not known. What a map appended before
    /// returning false is then thrown away.
    ///
    /// A [`Boxed<f64, f64>`](crate::Boxed) (or `f32`) whose map lists its
    /// stages runs them in one sweep, with no workspace lookup or dynamic
    /// call per level of nesting (see [`ScalarStages`]): the catalogue's
    /// elementwise maps and scaling list themselves, the identity lists no
    /// stage, [`Then`] lists its two parts one after the other, and a
    /// boxed map lists the map it holds. A hand-written scalar map opts in
    /// with `into.push_on::<f64, _>(self.clone())` (or
    /// [`push`](ScalarStages::push) for a map on both `f64` and `f32`), and
    /// must then be exactly the map on one number that it lists: its
    /// forward pass, and a backward pass that is its slope `R[f](x, 1)`
    /// times the change.
    fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
        let _ = into;
        false
    }
}
