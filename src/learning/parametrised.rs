//! Parametrised maps `P x A -> B` and the ways of building them from one
//! another.
//!
//! A parametrised map is any map whose input is a pair `(parameters, input)`:
//! its reverse derivative returns a change for the parameters and a change
//! for the input at once. [`Affine`](crate::Affine) (parameters `(W, b)`) and
//! [`MulPair`](crate::MulPair) (a scalar parameter times the input) are parametrised
//! maps as they stand; a map with no parameters becomes one with
//! [`parameter_free`], and any parametrised map post-composes with an
//! ordinary map by [`Compose::then`].
//!
//! The methods of [`Parametrised`] build the rest: stacking (the parameter of
//! the result is the pair of both parameters), reparametrisation, sharing and
//! freezing. Each is one small struct with a direct forward and backward pass;
//! its reverse derivative as a map is that of an equal composite of the
//! catalogue's combinators, so every order exists.

use crate::combinators::compose::TwoStageWork;
use crate::combinators::{Alongside, Constant, Duplicate, Fst, Id, Pair, Snd, Then};
use crate::error::{Error, Result};
use crate::map::{Compose, Kept, Map, Reverse};
use crate::space::Space;
use crate::workspace::{SplitInput, Workspace, shaped_like};
use std::rc::Rc;

/// The methods that build parametrised maps, provided for every map.
///
/// # Example
///
/// A two-stage model `x -> tanh(W2 tanh(W1 x + b1) + b2)` whose parameter is
/// the pair of both stages' parameters, and its gradient:
///
/// ```
/// use revdiff::{Affine, Compose, Map, Parametrised, Tanh};
/// use ndarray::array;
///
/// let model = Affine.then(Tanh).then_parametrised(Affine.then(Tanh));
/// let first = (array![[0.5, -0.2], [0.1, 0.3]], array![0.0, 0.1]);
/// let second = (array![[1.0, -1.0]], array![0.2]);
/// let params = (first, second);
/// let x = array![1.0, 2.0];
///
/// let y = model.forward(&(params.clone(), x.clone())).unwrap();
/// assert_eq!(y.len(), 1);
/// // One backward pass: a change for every parameter and for the input.
/// let ((d_first, d_second), dx) = model.backward(&(params, x), &array![1.0]).unwrap();
/// assert_eq!(d_first.0.dim(), (2, 2));
/// assert_eq!(d_second.1.len(), 1);
/// assert_eq!(dx.len(), 2);
/// ```
pub trait Parametrised: Compose {
    /// Feeds the output of `self: P x A -> B` into `g: Q x B -> C`: the map
    /// `((p, q), a) -> g(q, self(p, a))`, parametrised by the pair. See
    /// [`ThenParametrised`].
    fn then_parametrised<G>(self, g: G) -> ThenParametrised<Self, G>
    where
        Self: Sized,
        G: Compose,
    {
        ThenParametrised {
            first: self,
            second: g,
        }
    }

    /// Pre-composes `r: Q -> P` on the parameter: `(q, a) -> self(r(q), a)`,
    /// whose parameter change is `R[r](q, dp)`. See [`Reparametrised`].
    fn reparametrised<R>(self, r: R) -> Reparametrised<Self, R>
    where
        Self: Sized,
        R: Compose,
    {
        Reparametrised {
            map: self,
            through: r,
        }
    }

    /// Uses one parameter in both slots of a map parametrised by `(P, P)`:
    /// `(p, a) -> self((p, p), a)`. The gradient is the sum of both slots'
    /// gradients (the reverse derivative of the copy).
    ///
    /// ```
    /// use revdiff::{Compose, Map, MulPair, Parametrised};
    /// // (w, x) -> w (w x) = w^2 x, from two uses of one weight.
    /// let twice = MulPair.then_parametrised(MulPair).shared();
    /// let (dw, dx) = twice.backward(&(3.0_f64, 2.0), &1.0).unwrap();
    /// assert_eq!(twice.forward(&(3.0, 2.0)).unwrap(), 18.0);
    /// assert_eq!((dw, dx), (12.0, 9.0)); // 2 w x and w^2
    /// ```
    fn shared(self) -> Reparametrised<Self, Duplicate>
    where
        Self: Sized,
    {
        self.reparametrised(Duplicate)
    }

    /// Holds the first part of a pair parameter `(P, Q)` at `p`: the result
    /// is parametrised by `Q` alone, so an optimiser never sees or moves `p`.
    ///
    /// ```
    /// use revdiff::{Affine, Map, Parametrised};
    /// use ndarray::array;
    /// // An affine map that learns its bias only.
    /// let shift_only = Affine.freeze_first(array![[2.0]]);
    /// let (db, dx) = shift_only.backward(&(array![1.0], array![3.0]), &array![1.0]).unwrap();
    /// assert_eq!(db, array![1.0]);
    /// assert_eq!(dx, array![2.0]);
    /// ```
    fn freeze_first<P>(self, p: P) -> Reparametrised<Self, Pair<Constant<P>, Id>>
    where
        Self: Sized,
    {
        self.reparametrised(Pair::new(Constant(p), Id))
    }

    /// Holds the second part of a pair parameter `(P, Q)` at `q`: the result
    /// is parametrised by `P` alone.
    ///
    /// ```
    /// use revdiff::{Affine, Map, Parametrised};
    /// use ndarray::array;
    /// // An affine map with a fixed bias, learning its weights only.
    /// let fixed_bias = Affine.freeze_second(array![0.5]);
    /// let y = fixed_bias.forward(&(array![[2.0]], array![3.0])).unwrap();
    /// assert_eq!(y, array![6.5]);
    /// ```
    fn freeze_second<Q>(self, q: Q) -> Reparametrised<Self, Pair<Id, Constant<Q>>>
    where
        Self: Sized,
    {
        self.reparametrised(Pair::new(Id, Constant(q)))
    }

    /// Fixes all parameters: the ordinary map `a -> self(p, a)`, for
    /// predictions and for checking the input side alone. See [`WithParameters`].
    fn with_parameters<P>(self, p: P) -> WithParameters<Self, P>
    where
        Self: Sized,
    {
        WithParameters {
            map: self,
            parameters: p,
        }
    }
}

impl<T: Compose> Parametrised for T {}

/// A map with no parameters as a parametrised map with parameter `()`:
/// `((), a) -> f(a)`.
///
/// ```
/// use revdiff::{parameter_free, Affine, Map, Parametrised, Tanh};
/// use ndarray::array;
/// let model = Affine.then_parametrised(parameter_free(Tanh));
/// let params = ((array![[1.0]], array![0.0]), ());
/// let y = model.forward(&(params, array![0.5])).unwrap();
/// assert!((y[0] - 0.5_f64.tanh()).abs() < 1e-15);
/// ```
pub fn parameter_free<F: Compose>(f: F) -> Then<Snd, F> {
    Snd.then(f)
}

/// `first` then `second`, parametrised by the pair of their parameters.
/// Created by [`Parametrised::then_parametrised`]; see there for an example.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ThenParametrised<F, G> {
    /// The map applied first, `P x A -> B`.
    pub first: F,
    /// The map applied second, `Q x B -> C`.
    pub second: G,
}

/// A parametrised map whose parameter comes through a map `Q -> P`.
/// Created by [`Parametrised::reparametrised`], [`Parametrised::shared`],
/// [`Parametrised::freeze_first`] and [`Parametrised::freeze_second`].
///
/// ```
/// use revdiff::{Compose, Exp, Map, MulPair, Parametrised};
/// // A positive scale learnt through its logarithm: (s, x) -> e^s x.
/// let model = MulPair.reparametrised(Exp);
/// let (ds, dx) = model.backward(&(0.0_f64, 3.0), &1.0).unwrap();
/// assert_eq!((ds, dx), (3.0, 1.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Reparametrised<F, R> {
    /// The parametrised map.
    pub map: F,
    /// The map from the new parameter to the old one.
    pub through: R,
}

/// A parametrised map with its parameters fixed, `a -> f(p, a)`. Created by
/// [`Parametrised::with_parameters`].
///
/// ```
/// use revdiff::{Map, MulPair, Parametrised};
/// let triple = MulPair.with_parameters(3.0_f64);
/// assert_eq!(triple.forward(&2.0).unwrap(), 6.0);
/// assert_eq!(triple.backward(&2.0, &1.0).unwrap(), 3.0);
/// ```
#[derive(Clone, Debug, Default, PartialEq)]
pub struct WithParameters<F, P> {
    /// The parametrised map.
    pub map: F,
    /// The fixed parameters.
    pub parameters: P,
}

impl<F: Compose, G: Compose> Compose for ThenParametrised<F, G> {
    fn boxed_depth(&self) -> usize {
        self.first.boxed_depth().max(self.second.boxed_depth())
    }
}
impl<F: Compose, R: Compose> Compose for Reparametrised<F, R> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth().max(self.through.boxed_depth())
    }
}
impl<F: Compose, P> Compose for WithParameters<F, P> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth()
    }
}

/// `((p, q), a) -> second(q, first(p, a))` written with combinators.
pub type ThenParametrisedComposite<F, G> =
    Then<Pair<Then<Fst, Snd>, Then<Pair<Then<Fst, Fst>, Snd>, F>>, G>;

/// `(q, a) -> map(through(q), a)` written with combinators.
pub type ReparametrisedComposite<F, R> = Then<Alongside<R, Id>, F>;

/// `a -> map(p, a)` written with combinators.
pub type WithParametersComposite<F, P> = Then<Pair<Constant<P>, Id>, F>;

impl<F: Clone + Compose, G: Clone> ThenParametrised<F, G> {
    /// The equal composite of catalogue combinators.
    pub fn composite(&self) -> ThenParametrisedComposite<F, G> {
        let first = Then::new(Fst.then(Fst).pair(Snd), self.first.clone());
        Then::new(Fst.then(Snd).pair(first), self.second.clone())
    }
}

impl<F: Clone, R: Clone> Reparametrised<F, R> {
    /// The equal composite of catalogue combinators.
    pub fn composite(&self) -> ReparametrisedComposite<F, R> {
        Then::new(Alongside::new(self.through.clone(), Id), self.map.clone())
    }
}

impl<F: Clone, P: Clone> WithParameters<F, P> {
    /// The equal composite of catalogue combinators.
    pub fn composite(&self) -> WithParametersComposite<F, P> {
        Then::new(Constant(self.parameters.clone()).pair(Id), self.map.clone())
    }
}

impl<P, Q, A, F, G> Map<((P, Q), A)> for ThenParametrised<F, G>
where
    P: Space,
    Q: Space,
    A: Space,
    F: Map<(P, A)>,
    G: Map<(Q, F::Output)>,
{
    type Output = G::Output;
    type Memo = (F::Memo, G::Memo);
    fn forward(&self, ((p, q), a): &((P, Q), A)) -> Result<G::Output> {
        let b = self.first.forward(&(p.clone(), a.clone()))?;
        self.second.forward(&(q.clone(), b))
    }
    fn forward_memo(&self, ((p, q), a): &((P, Q), A)) -> Result<(G::Output, Self::Memo)> {
        let (b, rf) = self.first.forward_memo(&(p.clone(), a.clone()))?;
        let (c, rg) = self.second.forward_memo(&(q.clone(), b))?;
        Ok((c, (rf, rg)))
    }
    fn backward_memo(&self, (rf, rg): &Self::Memo, dc: &G::Output) -> Result<((P, Q), A)> {
        let (dq, db) = self.second.backward_memo(rg, dc)?;
        let (dp, da) = self.first.backward_memo(rf, &db)?;
        Ok(((dp, dq), da))
    }
    // After `forward_split` the output is the second stage's; after the
    // default `forward_reusing` it is where that default put it.
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w G::Output> {
        match work.state::<TwoStageWork<F::Output>>() {
            Ok(w) => self.second.reused_output(&w.second),
            Err(_) => work.output(),
        }
    }
}

/// The stages take their own parameters and the running value by
/// reference: no pair is built, nothing is copied.
impl<P, Q, A, F, G> SplitInput<(P, Q), A> for ThenParametrised<F, G>
where
    P: Space,
    Q: Space,
    A: Space,
    F: SplitInput<P, A>,
    G: SplitInput<Q, F::Output>,
{
    fn forward_split<'w>(
        &self,
        (p, q): &(P, Q),
        a: &A,
        work: &'w mut Workspace,
    ) -> Result<&'w G::Output> {
        let w = work.state_or_insert_with(TwoStageWork::<F::Output>::default);
        let b = self.first.forward_split(p, a, &mut w.first)?;
        self.second.forward_split(q, b, &mut w.second)
    }
    fn backward_split(
        &self,
        (p, q): &(P, Q),
        a: &A,
        work: &mut Workspace,
        dc: &G::Output,
        (dp, dq): &mut (P, Q),
        da: Option<&mut A>,
    ) -> Result<()> {
        let w = work.state_mut::<TwoStageWork<F::Output>>()?;
        let b = self.first.reused_output(&w.first)?;
        let db = shaped_like(&mut w.between_change, b);
        self.second
            .backward_split(q, b, &mut w.second, dc, dq, Some(&mut *db))?;
        self.first.backward_split(p, a, &mut w.first, db, dp, da)
    }
}

impl<P, Q, A, F, G> Reverse<((P, Q), A)> for ThenParametrised<F, G>
where
    P: Space,
    Q: Space,
    A: Space,
    F: Reverse<(P, A)>,
    G: Reverse<(Q, F::Output)>,
    ThenParametrisedComposite<F, G>: Reverse<((P, Q), A), Output = G::Output>,
{
    type Rev = ThenParametrisedReverse<F, G, F::Rev, G::Rev>;
    fn rev(&self) -> Self::Rev {
        ThenParametrisedReverse {
            map: self.clone(),
            first_rev: self.first.rev(),
            second_rev: self.second.rev(),
        }
    }
    fn forward_keeping(&self, ((p, q), a): &((P, Q), A)) -> Result<(G::Output, Kept)> {
        let first_input = (p.clone(), a.clone());
        let (b, first) = self.first.forward_keeping(&first_input)?;
        let second_input = (q.clone(), b);
        let (c, second) = self.second.forward_keeping(&second_input)?;
        let kept = ThenParametrisedKept {
            first_input,
            first,
            second_input,
            second,
        };
        Ok((c, Rc::new(kept)))
    }
    fn backward_kept(&self, kept: &Kept, dc: &G::Output) -> Result<((P, Q), A)> {
        let kept = parametrised_kept::<P, A, Q, F::Output>(kept)?;
        let (dq, db) = self.second.backward_kept(&kept.second, dc)?;
        let (dp, da) = self.first.backward_kept(&kept.first, &db)?;
        Ok(((dp, dq), da))
    }
    fn rev_forward_kept(
        &self,
        rev: &Self::Rev,
        _: &((P, Q), A),
        kept: &Kept,
        dc: &G::Output,
    ) -> Result<(
        ((P, Q), A),
        <Self::Rev as Map<(((P, Q), A), G::Output)>>::Memo,
    )> {
        let parts = parametrised_kept::<P, A, Q, F::Output>(kept)?;
        let ((dq, db), rg) = self.second.rev_forward_kept(
            &rev.second_rev,
            &parts.second_input,
            &parts.second,
            dc,
        )?;
        let ((dp, da), rf) =
            self.first
                .rev_forward_kept(&rev.first_rev, &parts.first_input, &parts.first, &db)?;
        Ok((((dp, dq), da), (Rc::clone(&parts.first), rg, rf)))
    }
}

/// What [`ThenParametrised`] keeps for its reverse map: each part's input
/// and what each part kept.
struct ThenParametrisedKept<P, A, Q, B> {
    first_input: (P, A),
    first: Kept,
    second_input: (Q, B),
    second: Kept,
}

fn parametrised_kept<P: 'static, A: 'static, Q: 'static, B: 'static>(
    kept: &Kept,
) -> Result<&ThenParametrisedKept<P, A, Q, B>> {
    kept.downcast_ref::<ThenParametrisedKept<P, A, Q, B>>()
        .ok_or(Error::ForeignMemo {
            operation: "reverse map of a parametrised composite",
        })
}

/// The reverse derivative of [`ThenParametrised`] as a map
/// `(((p, q), a), dc) -> ((dp, dq), da)`, with direct passes: like
/// [`ThenReverse`](crate::ThenReverse) it runs the first map forward once,
/// keeping what its reverse map needs, and threads the parameters without
/// the projections of the equal composite [`ThenParametrisedComposite`]
/// (which copy every parameter and fill zeros of their size at each step).
/// It is differentiated again through that composite.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ThenParametrisedReverse<F, G, FR, GR> {
    map: ThenParametrised<F, G>,
    first_rev: FR,
    second_rev: GR,
}

impl<F: Compose, G: Compose, FR: Compose, GR: Compose> Compose
    for ThenParametrisedReverse<F, G, FR, GR>
{
    fn boxed_depth(&self) -> usize {
        self.map
            .boxed_depth()
            .max(self.first_rev.boxed_depth())
            .max(self.second_rev.boxed_depth())
    }
}

impl<P, Q, A, F, G, FR, GR> Map<(((P, Q), A), G::Output)> for ThenParametrisedReverse<F, G, FR, GR>
where
    P: Space,
    Q: Space,
    A: Space,
    F: Reverse<(P, A), Rev = FR>,
    G: Reverse<(Q, F::Output), Rev = GR>,
    FR: Reverse<((P, A), F::Output), Output = (P, A)>,
    GR: Reverse<((Q, F::Output), G::Output), Output = (Q, F::Output)>,
{
    type Output = ((P, Q), A);
    /// What the first map kept, and the memos of the two reverse maps.
    type Memo = (
        Kept,
        <GR as Map<((Q, F::Output), G::Output)>>::Memo,
        <FR as Map<((P, A), F::Output)>>::Memo,
    );
    fn forward_memo(
        &self,
        (((p, q), a), dc): &(((P, Q), A), G::Output),
    ) -> Result<(((P, Q), A), Self::Memo)> {
        let pa = (p.clone(), a.clone());
        let (b, kept) = self.map.first.forward_keeping(&pa)?;
        let ((dq, db), rg) = self
            .second_rev
            .forward_memo(&((q.clone(), b), dc.clone()))?;
        let ((dp, da), rf) = self
            .map
            .first
            .rev_forward_kept(&self.first_rev, &pa, &kept, &db)?;
        Ok((((dp, dq), da), (kept, rg, rf)))
    }
    fn backward_memo(
        &self,
        (kept, rg, rf): &Self::Memo,
        ((ddp, ddq), dda): &((P, Q), A),
    ) -> Result<(((P, Q), A), G::Output)> {
        let ((mut xp, mut xa), ddb) = self
            .first_rev
            .backward_memo(rf, &(ddp.clone(), dda.clone()))?;
        let ((xq, xb), ddc) = self.second_rev.backward_memo(rg, &(ddq.clone(), ddb))?;
        let (yp, ya) = self.map.first.backward_kept(kept, &xb)?;
        xp.try_add_assign(&yp)?;
        xa.try_add_assign(&ya)?;
        Ok((((xp, xq), xa), ddc))
    }
}

impl<P, Q, A, F, G, FR, GR> Reverse<(((P, Q), A), G::Output)>
    for ThenParametrisedReverse<F, G, FR, GR>
where
    P: Space,
    Q: Space,
    A: Space,
    F: Reverse<(P, A), Rev = FR>,
    G: Reverse<(Q, F::Output), Rev = GR>,
    FR: Reverse<((P, A), F::Output), Output = (P, A)>,
    GR: Reverse<((Q, F::Output), G::Output), Output = (Q, F::Output)>,
    ThenParametrisedComposite<F, G>: Reverse<((P, Q), A), Output = G::Output>,
{
    type Rev = <<ThenParametrisedComposite<F, G> as Reverse<((P, Q), A)>>::Rev as Reverse<(
        ((P, Q), A),
        G::Output,
    )>>::Rev;
    fn rev(&self) -> Self::Rev {
        Reverse::<(((P, Q), A), G::Output)>::rev(&Reverse::<((P, Q), A)>::rev(
            &self.map.composite(),
        ))
    }
}

impl<Q, A, F, R> Map<(Q, A)> for Reparametrised<F, R>
where
    Q: Space,
    A: Space,
    R: Map<Q>,
    F: Map<(R::Output, A)>,
{
    type Output = F::Output;
    type Memo = (R::Memo, F::Memo);
    fn forward(&self, (q, a): &(Q, A)) -> Result<F::Output> {
        let p = self.through.forward(q)?;
        self.map.forward(&(p, a.clone()))
    }
    fn forward_memo(&self, (q, a): &(Q, A)) -> Result<(F::Output, Self::Memo)> {
        let (p, rr) = self.through.forward_memo(q)?;
        let (y, rf) = self.map.forward_memo(&(p, a.clone()))?;
        Ok((y, (rr, rf)))
    }
    fn backward_memo(&self, (rr, rf): &Self::Memo, dy: &F::Output) -> Result<(Q, A)> {
        let (dp, da) = self.map.backward_memo(rf, dy)?;
        Ok((self.through.backward_memo(rr, &dp)?, da))
    }
}

impl<Q, A, F, R> SplitInput<Q, A> for Reparametrised<F, R>
where
    Q: Space,
    A: Space,
    R: Map<Q>,
    F: Map<(R::Output, A)>,
{
}

impl<Q, A, F, R> Reverse<(Q, A)> for Reparametrised<F, R>
where
    Q: Space,
    A: Space,
    R: Reverse<Q>,
    F: Reverse<(R::Output, A)>,
    ReparametrisedComposite<F, R>: Reverse<(Q, A), Output = F::Output>,
{
    type Rev = <ReparametrisedComposite<F, R> as Reverse<(Q, A)>>::Rev;
    fn rev(&self) -> Self::Rev {
        self.composite().rev()
    }
}

impl<P, A, F> Map<A> for WithParameters<F, P>
where
    P: Space,
    A: Space,
    F: Map<(P, A)>,
{
    type Output = F::Output;
    type Memo = F::Memo;
    fn forward(&self, a: &A) -> Result<F::Output> {
        self.map.forward(&(self.parameters.clone(), a.clone()))
    }
    fn forward_memo(&self, a: &A) -> Result<(F::Output, F::Memo)> {
        self.map.forward_memo(&(self.parameters.clone(), a.clone()))
    }
    fn backward_memo(&self, memo: &F::Memo, dy: &F::Output) -> Result<A> {
        Ok(self.map.backward_memo(memo, dy)?.1)
    }
}

impl<P, A, F> Reverse<A> for WithParameters<F, P>
where
    P: Space,
    A: Space,
    F: Reverse<(P, A)>,
    WithParametersComposite<F, P>: Reverse<A, Output = F::Output>,
{
    type Rev = <WithParametersComposite<F, P> as Reverse<A>>::Rev;
    fn rev(&self) -> Self::Rev {
        self.composite().rev()
    }
}
