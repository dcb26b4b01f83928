//! The combinators that build maps from maps: sequential composition,
//! pairing, product, sum, scaling and transpose.

use crate::combinators::{AddPair, Fst, Snd};
use crate::dynamic::ScalarStages;
use crate::error::{Error, Result};
use crate::map::{Compose, Kept, Linear, Map, Reverse};
use crate::space::{Scalable, Space};
use crate::workspace::{SplitInput, Workspace, shaped_like};
use std::rc::Rc;

/// Sequential composition in diagrammatic order: first `f`, then `g`.
///
/// Created by [`Compose::then`]. The backward pass is the chain rule,
/// `R[f ; g](x, dz) = R[f](x, R[g](f(x), dz))`, run on the memos kept by
/// the forward pass, so nothing is evaluated twice.
///
/// ```
/// use revdiff::{Compose, Exp, Map, Sin};
/// let f = Sin.then(Exp); // x -> exp(sin x)
/// let x = 0.3_f64;
/// assert!((f.backward(&x, &1.0).unwrap() - x.sin().exp() * x.cos()).abs() < 1e-12);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Then<F, G> {
    /// The map applied first.
    pub first: F,
    /// The map applied second.
    pub second: G,
}

impl<F, G> Then<F, G> {
    /// `f` then `g`.
    pub fn new(first: F, second: G) -> Self {
        Then { first, second }
    }
}

/// The pairing `<f, g>`: one input, both outputs.
///
/// Created by [`Compose::pair`]. Its backward is the sum
/// `R[<f, g>](x, (dy, dz)) = R[f](x, dy) + R[g](x, dz)`.
///
/// ```
/// use revdiff::{Compose, Cos, Map, Sin};
/// let f = Sin.pair(Cos);
/// let x = 0.3_f64;
/// assert_eq!(f.forward(&x).unwrap(), (x.sin(), x.cos()));
/// let g = f.backward(&x, &(1.0, 1.0)).unwrap();
/// assert!((g - (x.cos() - x.sin())).abs() < 1e-12);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Pair<F, G> {
    /// Gives the first output.
    pub left: F,
    /// Gives the second output.
    pub right: G,
}

impl<F, G> Pair<F, G> {
    /// `<f, g>`.
    pub fn new(left: F, right: G) -> Self {
        Pair { left, right }
    }
}

/// The product `f x g`, acting on pairs: `(a, c) -> (f(a), g(c))`.
///
/// Created by [`Compose::alongside`].
///
/// ```
/// use revdiff::{Compose, Exp, Map, Sin};
/// let f = Sin.alongside(Exp);
/// let (da, dc) = f.backward(&(0.0_f64, 0.0_f64), &(2.0, 3.0)).unwrap();
/// assert_eq!((da, dc), (2.0, 3.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Alongside<F, G> {
    /// Acts on the first component.
    pub left: F,
    /// Acts on the second component.
    pub right: G,
}

impl<F, G> Alongside<F, G> {
    /// `f x g`.
    pub fn new(left: F, right: G) -> Self {
        Alongside { left, right }
    }
}

/// The sum of two maps with the same input and output, `x -> f(x) + g(x)`.
///
/// Created by [`Compose::plus`]. `R[f + g] = R[f] + R[g]`.
///
/// ```
/// use revdiff::{Compose, Cos, Map, Sin};
/// let f = Sin.plus(Cos);
/// let x = 0.3_f64;
/// assert!((f.forward(&x).unwrap() - (x.sin() + x.cos())).abs() < 1e-15);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Plus<F, G> {
    /// The first summand.
    pub left: F,
    /// The second summand.
    pub right: G,
}

impl<F, G> Plus<F, G> {
    /// `f + g`.
    pub fn new(left: F, right: G) -> Self {
        Plus { left, right }
    }
}

/// A map scaled by a fixed scalar, `x -> s f(x)`.
///
/// Created by [`Compose::scaled`].
///
/// ```
/// use revdiff::{Compose, Map, Sin};
/// let f = Sin.scaled(2.0);
/// assert_eq!(f.backward(&0.0_f64, &1.0).unwrap(), 2.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Scaled<F, S> {
    /// The map.
    pub map: F,
    /// The factor.
    pub factor: S,
}

impl<F, S> Scaled<F, S> {
    /// `s f`.
    pub fn new(map: F, factor: S) -> Self {
        Scaled { map, factor }
    }
}

/// The transpose `B -> A` of a linear map `A -> B`.
///
/// Created by [`Linear::transpose_at`]; see there for an example. Its own
/// reverse derivative is the original map.
#[derive(Clone, Debug, PartialEq)]
pub struct Transpose<F, R, A> {
    map: F,
    rev: R,
    at: A,
}

impl<F, R, A> Transpose<F, R, A> {
    /// The transpose of `map`, whose reverse derivative is `rev`, with `at`
    /// giving the input's shape.
    pub fn new(map: F, rev: R, at: A) -> Self {
        Transpose { map, rev, at }
    }
}

/// A combinator of two maps nests as deeply as the deeper of them.
macro_rules! compose_two {
    ($($ty:ident . $a:ident . $b:ident),*) => {$(
        impl<F: Compose, G: Compose> Compose for $ty<F, G> {
            fn boxed_depth(&self) -> usize {
                self.$a.boxed_depth().max(self.$b.boxed_depth())
            }
        }
    )*};
}
compose_two!(Pair.left.right, Alongside.left.right, Plus.left.right);

// The stages of `f.then(g)` are `f`'s, then `g`'s.
impl<F: Compose, G: Compose> Compose for Then<F, G> {
    fn boxed_depth(&self) -> usize {
        self.first.boxed_depth().max(self.second.boxed_depth())
    }
    fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
        self.first.scalar_stages(into) && self.second.scalar_stages(into)
    }
}

impl<F: Compose, S> Compose for Scaled<F, S> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth()
    }
}
impl<F: Compose, R: Compose, A> Compose for Transpose<F, R, A> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth().max(self.rev.boxed_depth())
    }
}

impl<A: Space, F: Map<A>, G: Map<F::Output>> Map<A> for Then<F, G> {
    type Output = G::Output;
    type Memo = (F::Memo, G::Memo);
    #[inline]
    fn forward(&self, x: &A) -> Result<G::Output> {
        self.second.forward(&self.first.forward(x)?)
    }
    #[inline]
    fn forward_memo(&self, x: &A) -> Result<(G::Output, Self::Memo)> {
        let (y, rf) = self.first.forward_memo(x)?;
        let (z, rg) = self.second.forward_memo(&y)?;
        Ok((z, (rf, rg)))
    }
    #[inline]
    fn backward_memo(&self, memo: &Self::Memo, dz: &G::Output) -> Result<A> {
        let (rf, rg) = memo;
        let dy = self.second.backward_memo(rg, dz)?;
        self.first.backward_memo(rf, &dy)
    }
    fn forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w G::Output> {
        let w = work.state_or_insert_with(TwoStageWork::<F::Output>::default);
        let y = self.first.forward_reusing(x, &mut w.first)?;
        self.second.forward_reusing(y, &mut w.second)
    }
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w G::Output> {
        let w = work.state::<TwoStageWork<F::Output>>()?;
        self.second.reused_output(&w.second)
    }
    fn swap_reused_output(&self, work: &mut Workspace, with: &mut G::Output) -> Result<()> {
        let w = work.state_mut::<TwoStageWork<F::Output>>()?;
        self.second.swap_reused_output(&mut w.second, with)
    }
    fn backward_reusing(
        &self,
        x: &A,
        work: &mut Workspace,
        dz: &G::Output,
        dx: &mut A,
    ) -> Result<()> {
        self.backward_then(x, work, dz, dx, false)
    }
    fn backward_reusing_adding(
        &self,
        x: &A,
        work: &mut Workspace,
        dz: &G::Output,
        dx: &mut A,
    ) -> Result<()> {
        self.backward_then(x, work, dz, dx, true)
    }
}

impl<F, G> Then<F, G> {
    /// The reusing backward pass: the second stage's into the buffer between
    /// the stages, then the first stage's into `dx`, overwriting it or
    /// `adding` to it.
    fn backward_then<A: Space>(
        &self,
        x: &A,
        work: &mut Workspace,
        dz: &G::Output,
        dx: &mut A,
        adding: bool,
    ) -> Result<()>
    where
        F: Map<A>,
        G: Map<F::Output>,
    {
        let w = work.state_mut::<TwoStageWork<F::Output>>()?;
        let y = self.first.reused_output(&w.first)?;
        let dy = shaped_like(&mut w.between_change, y);
        self.second.backward_reusing(y, &mut w.second, dz, dy)?;
        if adding {
            self.first.backward_reusing_adding(x, &mut w.first, dy, dx)
        } else {
            self.first.backward_reusing(x, &mut w.first, dy, dx)
        }
    }
}

/// What a two-stage composite ([`Then`], and parametrised composites)
/// keeps in its workspace: each stage's own, and the buffer for the change
/// of the value between them.
pub(crate) struct TwoStageWork<B> {
    pub(crate) first: Workspace,
    pub(crate) second: Workspace,
    pub(crate) between_change: Option<B>,
}

impl<B> Default for TwoStageWork<B> {
    fn default() -> Self {
        TwoStageWork {
            first: Workspace::new(),
            second: Workspace::new(),
            between_change: None,
        }
    }
}

/// A parametrised map then an ordinary one, `(p, x) -> g(f(p, x))`, with
/// the parameters and input taken apart.
impl<P, X, F, G> SplitInput<P, X> for Then<F, G>
where
    P: Space,
    X: Space,
    F: SplitInput<P, X>,
    G: Map<F::Output>,
{
    fn forward_split<'w>(&self, p: &P, x: &X, work: &'w mut Workspace) -> Result<&'w G::Output> {
        let w = work.state_or_insert_with(TwoStageWork::<F::Output>::default);
        let y = self.first.forward_split(p, x, &mut w.first)?;
        self.second.forward_reusing(y, &mut w.second)
    }
    fn backward_split(
        &self,
        p: &P,
        x: &X,
        work: &mut Workspace,
        dz: &G::Output,
        dp: &mut P,
        dx: Option<&mut X>,
    ) -> Result<()> {
        let w = work.state_mut::<TwoStageWork<F::Output>>()?;
        let y = self.first.reused_output(&w.first)?;
        let dy = shaped_like(&mut w.between_change, y);
        self.second.backward_reusing(y, &mut w.second, dz, dy)?;
        self.first.backward_split(p, x, &mut w.first, dy, dp, dx)
    }
}

/// `R[f ; g] = <fst, <fst ; f, snd> ; R[g]> ; R[f]`, the reverse derivative
/// of [`Then`] written with combinators; equal to [`ThenReverse`], and the
/// form through which [`ThenReverse`] is differentiated again.
pub type ThenRev<F, FR, GR> = Then<Pair<Fst, Then<Pair<Then<Fst, F>, Snd>, GR>>, FR>;

/// The reverse derivative of `f` then `g` as a map `(x, dz) -> dx`, equal
/// to the composite [`ThenRev`]: `R[f ; g](x, dz) = R[f](x, R[g](f(x), dz))`.
///
/// Made by [`Reverse::rev`] on a [`Then`]. Where the composite would run
/// `f` forward once for `R[g]` and again inside `R[f]`, at every level of a
/// nested composite (work growing as depth times length), this runs the
/// whole forward pass once ([`Reverse::forward_keeping`]) and reads every
/// level's reverse map from it ([`Reverse::rev_forward_kept`]), so that
/// its forward and backward passes, and so Hessian-vector products and
/// forward derivatives, cost a small multiple of a backward pass at any
/// depth.
///
/// ```
/// use revdiff::{hessian_vector, Compose, Map, Reverse, Sin};
///
/// let f = Sin.then(Sin).then(Sin);
/// let x = 0.4_f64;
/// // The reverse map agrees with the backward pass...
/// let rev = Reverse::<f64>::rev(&f);
/// assert_eq!(rev.forward(&(x, 1.0))?, f.backward(&x, &1.0)?);
/// // ...and its own backward pass is the second derivative.
/// let (s1, s2) = (x.sin(), x.sin().sin());
/// let d1 = x.cos() * s1.cos() * s2.cos();
/// let d2 = -x.sin() * s1.cos() * s2.cos()
///     - x.cos().powi(2) * s1.sin() * s2.cos()
///     - x.cos().powi(2) * s1.cos().powi(2) * s2.sin();
/// assert!((f.backward(&x, &1.0)? - d1).abs() < 1e-15);
/// assert!((hessian_vector(&f, &x, &1.0)? - d2).abs() < 1e-14);
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ThenReverse<F, G, FR, GR> {
    first: F,
    second: G,
    first_rev: FR,
    second_rev: GR,
}

impl<F, G, FR, GR> ThenReverse<F, G, FR, GR> {
    /// The equal composite of combinators.
    pub fn composite(&self) -> ThenRev<F, FR, GR>
    where
        F: Compose + Clone,
        FR: Compose + Clone,
        GR: Compose + Clone,
    {
        Fst.pair(
            Fst.then(self.first.clone())
                .pair(Snd)
                .then(self.second_rev.clone()),
        )
        .then(self.first_rev.clone())
    }
}

impl<F: Compose, G: Compose, FR: Compose, GR: Compose> Compose for ThenReverse<F, G, FR, GR> {
    fn boxed_depth(&self) -> usize {
        self.first
            .boxed_depth()
            .max(self.second.boxed_depth())
            .max(self.first_rev.boxed_depth())
            .max(self.second_rev.boxed_depth())
    }
}

/// What [`Then`] keeps for its reverse map: its parts' keeps and the value
/// between them.
struct ThenKept<B> {
    first: Kept,
    between: B,
    second: Kept,
}

fn then_kept<B: 'static>(kept: &Kept) -> Result<&ThenKept<B>> {
    kept.downcast_ref::<ThenKept<B>>()
        .ok_or(Error::ForeignMemo {
            operation: "reverse map of a sequential composite",
        })
}

impl<A, F, G, FR, GR> Map<(A, G::Output)> for ThenReverse<F, G, FR, GR>
where
    A: Space,
    F: Reverse<A, Rev = FR>,
    G: Reverse<F::Output, Rev = GR>,
    FR: Reverse<(A, F::Output), Output = A>,
    GR: Reverse<(F::Output, G::Output), Output = F::Output>,
{
    type Output = A;
    /// What `f` kept, and the memos of `R[g]` and `R[f]`.
    type Memo = (
        Kept,
        <GR as Map<(F::Output, G::Output)>>::Memo,
        <FR as Map<(A, F::Output)>>::Memo,
    );
    fn forward_memo(&self, (x, dz): &(A, G::Output)) -> Result<(A, Self::Memo)> {
        let (y, kept) = self.first.forward_keeping(x)?;
        let (dy, rg) = self.second_rev.forward_memo(&(y, dz.clone()))?;
        let (dx, rf) = self
            .first
            .rev_forward_kept(&self.first_rev, x, &kept, &dy)?;
        Ok((dx, (kept, rg, rf)))
    }
    fn backward_memo(&self, (kept, rg, rf): &Self::Memo, ddx: &A) -> Result<(A, G::Output)> {
        let (mut dx, ddy) = self.first_rev.backward_memo(rf, ddx)?;
        let (dy, ddz) = self.second_rev.backward_memo(rg, &ddy)?;
        dx.try_add_assign(&self.first.backward_kept(kept, &dy)?)?;
        Ok((dx, ddz))
    }
}

impl<A, F, G, FR, GR> Reverse<(A, G::Output)> for ThenReverse<F, G, FR, GR>
where
    A: Space,
    F: Reverse<A, Rev = FR>,
    G: Reverse<F::Output, Rev = GR>,
    FR: Reverse<(A, F::Output), Output = A>,
    GR: Reverse<(F::Output, G::Output), Output = F::Output>,
    ThenRev<F, FR, GR>: Reverse<(A, G::Output), Output = A>,
{
    type Rev = <ThenRev<F, FR, GR> as Reverse<(A, G::Output)>>::Rev;
    fn rev(&self) -> Self::Rev {
        self.composite().rev()
    }
}

impl<A: Space, F: Reverse<A>, G: Reverse<F::Output>> Reverse<A> for Then<F, G> {
    type Rev = ThenReverse<F, G, F::Rev, G::Rev>;
    fn rev(&self) -> Self::Rev {
        ThenReverse {
            first: self.first.clone(),
            second: self.second.clone(),
            first_rev: self.first.rev(),
            second_rev: self.second.rev(),
        }
    }
    fn forward_keeping(&self, x: &A) -> Result<(G::Output, Kept)> {
        let (y, first) = self.first.forward_keeping(x)?;
        let (z, second) = self.second.forward_keeping(&y)?;
        let kept = ThenKept {
            first,
            between: y,
            second,
        };
        Ok((z, Rc::new(kept)))
    }
    fn backward_kept(&self, kept: &Kept, dz: &G::Output) -> Result<A> {
        let kept = then_kept::<F::Output>(kept)?;
        let dy = self.second.backward_kept(&kept.second, dz)?;
        self.first.backward_kept(&kept.first, &dy)
    }
    fn rev_forward_kept(
        &self,
        rev: &Self::Rev,
        x: &A,
        kept: &Kept,
        dz: &G::Output,
    ) -> Result<(A, <Self::Rev as Map<(A, G::Output)>>::Memo)> {
        let parts = then_kept::<F::Output>(kept)?;
        let (dy, rg) =
            self.second
                .rev_forward_kept(&rev.second_rev, &parts.between, &parts.second, dz)?;
        let (dx, rf) = self
            .first
            .rev_forward_kept(&rev.first_rev, x, &parts.first, &dy)?;
        Ok((dx, (Rc::clone(&parts.first), rg, rf)))
    }
}

impl<A: Space, F: Map<A>, G: Map<A>> Map<A> for Pair<F, G> {
    type Output = (F::Output, G::Output);
    type Memo = (F::Memo, G::Memo);
    #[inline]
    fn forward(&self, x: &A) -> Result<Self::Output> {
        Ok((self.left.forward(x)?, self.right.forward(x)?))
    }
    #[inline]
    fn forward_memo(&self, x: &A) -> Result<(Self::Output, Self::Memo)> {
        let (y, rf) = self.left.forward_memo(x)?;
        let (z, rg) = self.right.forward_memo(x)?;
        Ok(((y, z), (rf, rg)))
    }
    #[inline]
    fn backward_memo(&self, (rf, rg): &Self::Memo, (dy, dz): &Self::Output) -> Result<A> {
        let mut dx = self.left.backward_memo(rf, dy)?;
        dx.try_add_assign(&self.right.backward_memo(rg, dz)?)?;
        Ok(dx)
    }
    // The pair's output is a tuple of its own. From the second call on,
    // each part's fresh output is exchanged with the tuple's old one (no
    // copy), or copied where the part keeps its output elsewhere; the
    // backward pass gives the parts their outputs back while they run.
    fn forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w Self::Output> {
        let w = work.state_or_insert_with(PairWork::<A, F::Output, G::Output>::default);
        w.lent = (false, false);
        self.left.forward_reusing(x, &mut w.left)?;
        self.right.forward_reusing(x, &mut w.right)?;
        match &mut w.output {
            Some((oy, oz)) => {
                w.lent.0 = self.left.swap_reused_output(&mut w.left, oy).is_ok();
                if !w.lent.0 {
                    oy.assign_from(self.left.reused_output(&w.left)?);
                }
                w.lent.1 = self.right.swap_reused_output(&mut w.right, oz).is_ok();
                if !w.lent.1 {
                    oz.assign_from(self.right.reused_output(&w.right)?);
                }
            }
            None => {
                let y = self.left.reused_output(&w.left)?.clone();
                let z = self.right.reused_output(&w.right)?.clone();
                w.output = Some((y, z));
            }
        }
        Ok(w.output.as_ref().expect("just filled"))
    }
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w Self::Output> {
        match work.state::<PairWork<A, F::Output, G::Output>>() {
            Ok(PairWork {
                output: Some(o), ..
            }) => Ok(o),
            _ => work.output(),
        }
    }
    fn backward_reusing(
        &self,
        x: &A,
        work: &mut Workspace,
        (dy, dz): &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        let w = work.state_mut::<PairWork<A, F::Output, G::Output>>()?;
        w.with_parts(self, |left, right| {
            self.left.backward_reusing(x, left, dy, dx)?;
            self.right.backward_reusing_adding(x, right, dz, dx)
        })
    }
    fn backward_reusing_adding(
        &self,
        x: &A,
        work: &mut Workspace,
        (dy, dz): &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        let w = work.state_mut::<PairWork<A, F::Output, G::Output>>()?;
        w.with_parts(self, |left, right| {
            self.left.backward_reusing_adding(x, left, dy, dx)?;
            self.right.backward_reusing_adding(x, right, dz, dx)
        })
    }
}

/// What a [`Pair`]'s reusing passes keep: each part's workspace, the
/// pair's output, and which parts' outputs were exchanged into it (lent).
struct PairWork<A, B, C> {
    left: Workspace,
    right: Workspace,
    output: Option<(B, C)>,
    lent: (bool, bool),
    input: std::marker::PhantomData<fn(A)>,
}

impl<A, B, C> Default for PairWork<A, B, C> {
    fn default() -> Self {
        PairWork {
            left: Workspace::new(),
            right: Workspace::new(),
            output: None,
            lent: (false, false),
            input: std::marker::PhantomData,
        }
    }
}

impl<A: Space, B: Space, C: Space> PairWork<A, B, C> {
    /// Runs `f` on the parts' workspaces with their outputs given back to
    /// them (a backward pass may read its own output), then lends them to
    /// the pair again, whether `f` succeeded or not.
    fn with_parts<F: Map<A, Output = B>, G: Map<A, Output = C>>(
        &mut self,
        pair: &Pair<F, G>,
        f: impl FnOnce(&mut Workspace, &mut Workspace) -> Result<()>,
    ) -> Result<()> {
        let (oy, oz) = self.output.as_mut().ok_or(Error::WorkspaceNotFilled {
            operation: "backward pass of a pair",
        })?;
        let exchange = |left: &mut Workspace, right: &mut Workspace, oy: &mut B, oz: &mut C| {
            if self.lent.0 {
                pair.left.swap_reused_output(left, oy)?;
            }
            if self.lent.1 {
                pair.right.swap_reused_output(right, oz)?;
            }
            Ok::<(), Error>(())
        };
        exchange(&mut self.left, &mut self.right, oy, oz)?;
        let result = f(&mut self.left, &mut self.right);
        exchange(&mut self.left, &mut self.right, oy, oz)?;
        result
    }
}

/// `R[<f, g>] = <<fst, snd ; fst> ; R[f], <fst, snd ; snd> ; R[g]> ; add`.
pub type PairRev<FR, GR> =
    Then<Pair<Then<Pair<Fst, Then<Snd, Fst>>, FR>, Then<Pair<Fst, Then<Snd, Snd>>, GR>>, AddPair>;

impl<A: Space, F: Reverse<A>, G: Reverse<A>> Reverse<A> for Pair<F, G> {
    type Rev = PairRev<F::Rev, G::Rev>;
    fn rev(&self) -> Self::Rev {
        let left = Fst.pair(Snd.then(Fst)).then(self.left.rev());
        let right = Fst.pair(Snd.then(Snd)).then(self.right.rev());
        left.pair(right).then(AddPair)
    }
}

impl<A: Space, C: Space, F: Map<A>, G: Map<C>> Map<(A, C)> for Alongside<F, G> {
    type Output = (F::Output, G::Output);
    type Memo = (F::Memo, G::Memo);
    fn forward(&self, (a, c): &(A, C)) -> Result<Self::Output> {
        Ok((self.left.forward(a)?, self.right.forward(c)?))
    }
    fn forward_memo(&self, (a, c): &(A, C)) -> Result<(Self::Output, Self::Memo)> {
        let (b, rf) = self.left.forward_memo(a)?;
        let (d, rg) = self.right.forward_memo(c)?;
        Ok(((b, d), (rf, rg)))
    }
    fn backward_memo(&self, (rf, rg): &Self::Memo, (db, dd): &Self::Output) -> Result<(A, C)> {
        Ok((
            self.left.backward_memo(rf, db)?,
            self.right.backward_memo(rg, dd)?,
        ))
    }
}

/// `R[f x g] = <<fst ; fst, snd ; fst> ; R[f], <fst ; snd, snd ; snd> ; R[g]>`.
pub type AlongsideRev<FR, GR> = Pair<
    Then<Pair<Then<Fst, Fst>, Then<Snd, Fst>>, FR>,
    Then<Pair<Then<Fst, Snd>, Then<Snd, Snd>>, GR>,
>;

impl<A: Space, C: Space, F: Reverse<A>, G: Reverse<C>> Reverse<(A, C)> for Alongside<F, G> {
    type Rev = AlongsideRev<F::Rev, G::Rev>;
    fn rev(&self) -> Self::Rev {
        let left = Fst.then(Fst).pair(Snd.then(Fst)).then(self.left.rev());
        let right = Fst.then(Snd).pair(Snd.then(Snd)).then(self.right.rev());
        left.pair(right)
    }
}

impl<A: Space, F: Map<A>, G: Map<A, Output = F::Output>> Map<A> for Plus<F, G> {
    type Output = F::Output;
    type Memo = (F::Memo, G::Memo);
    fn forward(&self, x: &A) -> Result<F::Output> {
        let mut y = self.left.forward(x)?;
        y.try_add_assign(&self.right.forward(x)?)?;
        Ok(y)
    }
    fn forward_memo(&self, x: &A) -> Result<(F::Output, Self::Memo)> {
        let (mut y, rf) = self.left.forward_memo(x)?;
        let (z, rg) = self.right.forward_memo(x)?;
        y.try_add_assign(&z)?;
        Ok((y, (rf, rg)))
    }
    fn backward_memo(&self, (rf, rg): &Self::Memo, dy: &F::Output) -> Result<A> {
        let mut dx = self.left.backward_memo(rf, dy)?;
        dx.try_add_assign(&self.right.backward_memo(rg, dy)?)?;
        Ok(dx)
    }
}

impl<A: Space, F: Reverse<A>, G: Reverse<A, Output = F::Output>> Reverse<A> for Plus<F, G> {
    type Rev = Plus<F::Rev, G::Rev>;
    fn rev(&self) -> Self::Rev {
        Plus::new(self.left.rev(), self.right.rev())
    }
}

impl<A: Space, S: Copy, F: Map<A>> Map<A> for Scaled<F, S>
where
    F::Output: Scalable<S>,
{
    type Output = F::Output;
    type Memo = F::Memo;
    fn forward(&self, x: &A) -> Result<F::Output> {
        Ok(self.map.forward(x)?.scale(self.factor))
    }
    fn forward_memo(&self, x: &A) -> Result<(F::Output, F::Memo)> {
        let (y, r) = self.map.forward_memo(x)?;
        Ok((y.scale(self.factor), r))
    }
    fn backward_memo(&self, r: &F::Memo, dy: &F::Output) -> Result<A> {
        self.map.backward_memo(r, &dy.scale(self.factor))
    }
}

impl<A: Scalable<S>, S: Copy, F: Reverse<A>> Reverse<A> for Scaled<F, S>
where
    F::Output: Scalable<S>,
    F::Rev: Clone,
{
    // R[s f](x, dy) = R[f](x, s dy) = s R[f](x, dy), the latter being a map.
    type Rev = Scaled<F::Rev, S>;
    fn rev(&self) -> Self::Rev {
        Scaled::new(self.map.rev(), self.factor)
    }
}

impl<A: Space, B: Space, F: Linear<A, Output = B, Rev = R>, R> Map<B> for Transpose<F, R, A>
where
    R: Reverse<(A, B), Output = A>,
{
    type Output = A;
    type Memo = ();
    fn forward_memo(&self, dy: &B) -> Result<(A, ())> {
        Ok((self.rev.forward(&(self.at.clone(), dy.clone()))?, ()))
    }
    fn backward_memo(&self, _: &(), dx: &A) -> Result<B> {
        self.map.forward(dx)
    }
}

impl<A: Space, B: Space, F: Linear<A, Output = B, Rev = R>, R> Reverse<B> for Transpose<F, R, A>
where
    R: Reverse<(A, B), Output = A>,
{
    type Rev = crate::combinators::Then<Snd, F>;
    fn rev(&self) -> Self::Rev {
        Then::new(Snd, self.map.clone())
    }
}

impl<A: Space, B: Space, F: Linear<A, Output = B, Rev = R>, R> Linear<B> for Transpose<F, R, A> where
    R: Reverse<(A, B), Output = A>
{
}

impl<A: Space, F: Linear<A>, G: Linear<F::Output>> Linear<A> for Then<F, G> {}
impl<A: Space, F: Linear<A>, G: Linear<A>> Linear<A> for Pair<F, G> {}
impl<A: Space, C: Space, F: Linear<A>, G: Linear<C>> Linear<(A, C)> for Alongside<F, G> {}
impl<A: Space, F: Linear<A>, G: Linear<A, Output = F::Output>> Linear<A> for Plus<F, G> {}
impl<A: Scalable<S>, S: Copy, F: Linear<A>> Linear<A> for Scaled<F, S> where F::Output: Scalable<S> {}
