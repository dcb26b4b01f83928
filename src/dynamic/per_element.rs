//! Scalar maps applied to every element of a run-time chain's arrays
//! ([`Chain::push_per_element`](super::Chain::push_per_element)).
//!
//! A run of such stages is the common case of a deep run-time model of
//! scalar maps, and through the general stage interface each stage would
//! pay a dynamic call, workspace lookups and ndarray's dynamic-dimension
//! bookkeeping, which for small arrays cost several times the map itself.
//! The chain's reusing passes run a run of consecutive per-element stages
//! over flat slices instead: one dynamic call per stage in the forward
//! pass, the values between stages in one buffer, and each stage's memos
//! in a vector of the scalar map's own memo type (over one element the
//! value goes from stage to stage in a register, with no buffer between
//! them: a chain of scalar maps). On short arrays the
//! forward pass also keeps each element's slope `R[f](x, 1)`; the reverse
//! derivative of a scalar map being linear in the change, the backward
//! pass of the whole run is then products of changes and slopes, with no
//! dynamic call. The one-shot backward pass of a chain of scalar maps
//! ([`one_shot_one`]) needs no buffers at all: one sweep through the stages
//! keeps their slopes on the stack.

use crate::cores::Halves;
use crate::dynamic::expect_shape;
use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::memory::HeldBytes;
use crate::space::{Real, dims_equal};
use ndarray::{ArrayD, Dimension, IxDyn};
use std::sync::Arc;

/// A scalar map applied to each element of an `ArrayD<T>`: the array map
/// of a per-element stage, used by every pass but the chain's reusing ones.
pub(crate) struct EachElement<F>(pub(crate) Arc<F>);

impl<F: Compose> Compose for EachElement<F> {
    fn boxed_depth(&self) -> usize {
        self.0.boxed_depth()
    }
}

/// What a per-element stage's memo pass keeps: the scalar map's memo of
/// every element, in logical order, and the shape they came from.
pub(crate) struct EachElementMemo<M> {
    // `IxDyn` holds up to four lengths inline: no allocation for the shape.
    shape: IxDyn,
    memos: ElementMemos<M>,
}

/// The memos of a per-element stage: one inline (a chain of scalar maps
/// on one-element arrays, where an allocation per stage would cost more
/// than the map), or one per element.
enum ElementMemos<M> {
    One(M),
    Each(Vec<M>),
}

impl<M> ElementMemos<M> {
    fn as_slice(&self) -> &[M] {
        match self {
            ElementMemos::One(memo) => std::slice::from_ref(memo),
            ElementMemos::Each(memos) => memos,
        }
    }
}

impl<M: HeldBytes> HeldBytes for EachElementMemo<M> {
    fn held_bytes(&self) -> usize {
        match &self.memos {
            ElementMemos::One(memo) => memo.held_bytes(),
            ElementMemos::Each(memos) => memos.held_bytes(),
        }
    }
}

impl<T: Real, F: Map<T, Output = T>> Map<ArrayD<T>> for EachElement<F> {
    type Output = ArrayD<T>;
    type Memo = EachElementMemo<F::Memo>;
    fn forward(&self, x: &ArrayD<T>) -> Result<ArrayD<T>> {
        each_element(x, |v| self.0.forward(&v))
    }
    fn forward_memo(&self, x: &ArrayD<T>) -> Result<(ArrayD<T>, Self::Memo)> {
        let shape = x.raw_dim();
        if let Some(&v) = x.first()
            && x.len() == 1
        {
            let (out, memo) = self.0.forward_memo(&v)?;
            let y = with_only_element(x, out);
            let memos = ElementMemos::One(memo);
            return Ok((y, EachElementMemo { shape, memos }));
        }
        let mut memos = Vec::with_capacity(x.len());
        let y = each_element(x, |v| {
            let (out, memo) = self.0.forward_memo(&v)?;
            memos.push(memo);
            Ok(out)
        })?;
        let memos = ElementMemos::Each(memos);
        Ok((y, EachElementMemo { shape, memos }))
    }
    fn backward_memo(&self, memo: &Self::Memo, dy: &ArrayD<T>) -> Result<ArrayD<T>> {
        expect_shape(OUTPUT_CHANGE, memo.shape.slice(), dy)?;
        // As many memos as elements of `dy`: its shape was checked.
        let (map, memos) = (&*self.0, memo.memos.as_slice());
        // The same products as the reusing passes (see `change_at`).
        let mut memos = memos.iter();
        each_element(dy, |d| match memos.next() {
            Some(m) => change_at(map, m, slope_of(map, m), d),
            None => Err(Error::ForeignMemo {
                operation: "backward pass of a per-element stage of a run-time chain",
            }),
        })
    }
}

/// A new array of `x`'s shape holding `f` of each element of `x`, called
/// in logical order. Over the flat slice when `x` is in standard order, as
/// it is between stages: the dynamic-dimension iterator steps a
/// multi-index per element, which costs more than a cheap map itself.
fn each_element<T: Real>(x: &ArrayD<T>, mut f: impl FnMut(T) -> Result<T>) -> Result<ArrayD<T>> {
    if let Some(&v) = x.first()
        && x.len() == 1
    {
        return Ok(with_only_element(x, f(v)?));
    }
    // A clone rather than a new array: it copies the shape and strides as
    // they are, where building an `ArrayD` checks them again.
    let mut y = x.clone();
    match y.as_slice_mut() {
        Some(ys) => {
            for v in ys {
                *v = f(*v)?;
            }
        }
        None => {
            for v in y.iter_mut() {
                *v = f(*v)?;
            }
        }
    }
    Ok(y)
}

/// A copy of the one-element array `x` holding `v`. Written through
/// `first_mut`: `fill` and slices check the layout, which for a dynamic
/// dimension costs more than a scalar map.
fn with_only_element<T: Real>(x: &ArrayD<T>, v: T) -> ArrayD<T> {
    let mut y = x.clone();
    if let Some(only) = y.first_mut() {
        *only = v;
    }
    y
}

/// What a shape mismatch of the change of a per-element stage's output
/// names.
const OUTPUT_CHANGE: &str =
    "backward pass of a per-element stage of a run-time chain (its output change)";

/// A per-element stage as a chain holds it: its passes, and their
/// identity, read once here rather than through a dynamic call per pass.
#[derive(Clone)]
pub(crate) struct PerElementStage<T> {
    passes: Arc<dyn ElementPasses<T>>,
    identity: usize,
}

impl<T> PerElementStage<T> {
    pub(crate) fn new(passes: Arc<dyn ElementPasses<T>>) -> Self {
        let identity = passes.identity();
        PerElementStage { passes, identity }
    }
}

/// The per-element passes of a stage, which make the buffers its reusing
/// passes run in.
pub(crate) trait ElementPasses<T>: Send + Sync {
    /// Empty buffers for this stage; the first forward pass fills them.
    fn buffers(&self) -> Box<dyn StageBuffers<T>>;
    /// What tells this stage's buffers from another's: the address of the
    /// scalar map, which the buffers keep alive, so that no other map can
    /// take the address while they exist.
    fn identity(&self) -> usize;
    /// `(f(x), R[f](x, 1))` on one element, keeping nothing: the one-shot
    /// backward pass of a chain of scalar maps ([`one_shot_one`]). A NaN
    /// value may stand for an error, as in [`StageBuffers::forward_one`].
    fn value_and_slope(&self, x: T) -> (T, T);
}

/// A per-element stage's memos between its reusing passes, with the map
/// that reads them: the pass over flat slices is one dynamic call, with no
/// lookup of what the memos are.
pub(crate) trait StageBuffers<T> {
    /// `y[i] = f(x[i])`, keeping each element's memo, and, unless `slopes`
    /// is empty, writing its slope `R[f](x[i], 1)` ([`slope_of`]) into
    /// `slopes[i]`. The reverse derivative of a scalar map is linear in the
    /// change, so `R[f](x[i], d) = slopes[i] * d`: the run's backward pass
    /// is then products, with no dynamic call ([`through_slopes`]).
    fn forward(&mut self, x: &[T], y: &mut [T], slopes: &mut [T]) -> Boxed<()>;
    /// [`forward`](Self::forward) on one element, `(f(x), slope)` returned
    /// in registers: a chain of scalar maps then passes its value from
    /// stage to stage without a trip through memory. A NaN value may stand
    /// for an error, which the caller gets by running `forward` on the
    /// element again (a map is a function of its input: it fails again, or
    /// gives the NaN again).
    fn forward_one(&mut self, x: T) -> (T, T);
    /// `dx[i] = R[f](x[i], dy[i])` from the memos of the last forward pass,
    /// as [`change_at`] computes it.
    fn backward(&self, dy: &[T], dx: &mut [T]) -> Boxed<()>;
}

impl<T, F> ElementPasses<T> for EachElement<F>
where
    T: Real,
    F: Map<T, Output = T> + Send + Sync + 'static,
    F::Memo: Send + Sync + 'static,
{
    fn buffers(&self) -> Box<dyn StageBuffers<T>> {
        Box::new(Buffers {
            map: Arc::clone(&self.0),
            memos: Vec::new(),
        })
    }
    fn identity(&self) -> usize {
        Arc::as_ptr(&self.0) as *const () as usize
    }
    fn value_and_slope(&self, x: T) -> (T, T) {
        let map = &*self.0;
        match map.forward_memo(&x) {
            Ok((y, memo)) => (y, slope_of(map, &memo)),
            Err(_) => (T::nan(), T::nan()),
        }
    }
}

/// A result whose error is boxed: one word, returned in a register by the
/// dynamic call of every stage, where [`Error`] itself would go through
/// memory.
type Boxed<R> = std::result::Result<R, Box<Error>>;

struct Buffers<F: Map<T>, T: Real> {
    map: Arc<F>,
    memos: Vec<F::Memo>,
}

impl<T, F> StageBuffers<T> for Buffers<F, T>
where
    T: Real,
    F: Map<T, Output = T> + Send + Sync,
    F::Memo: Send + Sync,
{
    fn forward(&mut self, x: &[T], y: &mut [T], slopes: &mut [T]) -> Boxed<()> {
        self.forward_unboxed(x, y, slopes).map_err(Box::new)
    }
    fn forward_one(&mut self, x: T) -> (T, T) {
        let map = &*self.map;
        // No branch between the value and the memo: a map that computes
        // both from one call (`sin_cos`) keeps them together.
        let [kept] = self.memos.as_mut_slice() else {
            return self.forward_first_one(x);
        };
        let Ok((y, memo)) = map.forward_memo(&x) else {
            return (T::nan(), T::nan());
        };
        *kept = memo;
        (y, slope_of(map, kept))
    }
    fn backward(&self, dy: &[T], dx: &mut [T]) -> Boxed<()> {
        self.backward_unboxed(dy, dx).map_err(Box::new)
    }
}

impl<T, F> Buffers<F, T>
where
    T: Real,
    F: Map<T, Output = T> + Send + Sync,
    F::Memo: Send + Sync,
{
    #[inline]
    fn forward_unboxed(&mut self, x: &[T], y: &mut [T], slopes: &mut [T]) -> Result<()> {
        let map = &*self.map;
        // One element (a chain of scalar maps): no loop to set up.
        if let ([v], [out], [memo], [slope]) = (x, &mut *y, self.memos.as_mut_slice(), &mut *slopes)
        {
            (*out, *memo) = map.forward_memo(v)?;
            *slope = slope_of(map, memo);
            return Ok(());
        }
        if self.memos.len() != x.len() {
            // First pass, or another width: filled element by element.
            self.memos.clear();
            for (out, v) in y.iter_mut().zip(x) {
                let (value, memo) = map.forward_memo(v)?;
                *out = value;
                self.memos.push(memo);
            }
        } else if slopes.is_empty() {
            split_elements(
                x,
                y,
                self.memos.as_mut_slice(),
                &|x: &[T], y: &mut [T], memos: &mut [F::Memo]| {
                    for ((out, memo), v) in y.iter_mut().zip(memos).zip(x) {
                        (*out, *memo) = map.forward_memo(v)?;
                    }
                    Ok(())
                },
            )?;
        } else {
            // A short array (see `SLOPES_UP_TO`): not split across cores.
            for (((out, memo), slope), v) in
                y.iter_mut().zip(&mut self.memos).zip(&mut *slopes).zip(x)
            {
                (*out, *memo) = map.forward_memo(v)?;
                *slope = slope_of(map, memo);
            }
            return Ok(());
        }
        for (slope, memo) in slopes.iter_mut().zip(&self.memos) {
            *slope = slope_of(map, memo);
        }
        Ok(())
    }
    /// [`StageBuffers::forward_one`] when the memos do not hold one
    /// element (the first pass, or another width before).
    #[cold]
    fn forward_first_one(&mut self, x: T) -> (T, T) {
        let map = &*self.map;
        self.memos.clear();
        let Ok((y, memo)) = map.forward_memo(&x) else {
            return (T::nan(), T::nan());
        };
        let slope = slope_of(map, &memo);
        self.memos.push(memo);
        (y, slope)
    }
    #[inline]
    fn backward_unboxed(&self, dy: &[T], dx: &mut [T]) -> Result<()> {
        if self.memos.len() != dy.len() {
            return Err(Error::WorkspaceNotFilled {
                operation: "backward pass of a per-element stage of a run-time chain",
            });
        }
        let map = &*self.map;
        // The slope of each element, then its product with the change, as
        // the other passes compute it (see `change_at`).
        let change = |memo, g| change_at(map, memo, slope_of(map, memo), g);
        if let ([g], [d], [memo]) = (dy, &mut *dx, self.memos.as_slice()) {
            *d = change(memo, *g)?;
            return Ok(());
        }
        split_elements(
            dy,
            dx,
            self.memos.as_slice(),
            &|dy: &[T], dx: &mut [T], memos: &[F::Memo]| {
                for ((d, memo), g) in dx.iter_mut().zip(memos).zip(dy) {
                    *d = change(memo, *g)?;
                }
                Ok(())
            },
        )
    }
}

/// `R[f](x, 1)` from the memo of `f` at `x`, or NaN when that is an
/// error. Where it is not a finite number (a slope that overflows while
/// its products with changes need not, as a power near 0), the backward
/// passes ask the map itself ([`change_at`]).
#[inline]
fn slope_of<T: Real, F: Map<T, Output = T>>(map: &F, memo: &F::Memo) -> T {
    map.backward_memo(memo, &T::one()).unwrap_or(T::nan())
}

/// `R[f](x, d)` as every pass of a per-element stage computes it: `slope *
/// d` when `slope` ([`slope_of`]) is a finite number, else the map's own
/// backward pass. For the catalogue's scalar maps, whose backward pass is that
/// product, this is what the map gives, bit for bit; for a composite the
/// product may differ in the last bit (it is associated differently).
#[inline]
fn change_at<T: Real, F: Map<T, Output = T>>(map: &F, memo: &F::Memo, slope: T, d: T) -> Result<T> {
    if !slope.is_finite() {
        map.backward_memo(memo, &d)
    } else {
        Ok(slope * d)
    }
}

/// Runs `pass` over the three slices (of equal length), split in halves
/// across the cores when they are long enough for that to pay.
#[inline]
fn split_elements<T, K, P>(from: &[T], into: &mut [T], kept: K, pass: &P) -> Result<()>
where
    T: Send + Sync,
    K: Halves,
    P: Fn(&[T], &mut [T], K) -> Result<()> + Sync,
{
    crate::cores::over_halves(
        from.len(),
        (from, into, kept),
        &|(from, into, kept)| pass(from, into, kept),
        Result::and,
    )
}

/// A stage's buffers, tagged with the identity of the stage that made them.
type Tagged<T> = (usize, Box<dyn StageBuffers<T>>);

/// What a run of consecutive per-element stages keeps between the reusing
/// passes. Every buffer is the run's width long (per stage where it says
/// so) and is reused while the width stays.
pub(crate) struct RunWork<T> {
    /// The run's input (forward) or output change (backward), copied here
    /// only when it is not in standard layout.
    scratch: Vec<T>,
    /// The outputs of every stage but the last, one after another.
    values: Vec<T>,
    /// Every stage's slopes (see [`StageBuffers::forward`]), one stage
    /// after another.
    slopes: Vec<T>,
    /// Every stage's buffers, with the identity of the stage that made
    /// them, for the stages in `filled_for`.
    kept: Vec<Tagged<T>>,
    /// The stages whose buffers `kept` holds: checked once per pass (an
    /// address comparison, sound because this holds the stages alive)
    /// rather than stage by stage.
    filled_for: Option<Arc<[PerElementStage<T>]>>,
    /// The last stage's output, read by the next stage or the caller.
    pub(crate) output: ArrayD<T>,
    /// The change being passed back, in two buffers used in turn.
    changes: [Vec<T>; 2],
    /// Whether the last forward pass ran to the end (one that stopped at
    /// an error leaves some stages' buffers from the pass before).
    complete: bool,
}

impl<T: Real> Default for RunWork<T> {
    fn default() -> Self {
        RunWork {
            scratch: Vec::new(),
            values: Vec::new(),
            slopes: Vec::new(),
            kept: Vec::new(),
            filled_for: None,
            output: ArrayD::zeros(IxDyn(&[0])),
            changes: [Vec::new(), Vec::new()],
            complete: false,
        }
    }
}

/// `a`'s elements as one slice in logical order; `a` is replaced by zeros
/// of shape `shape` when it has another shape or is not in standard
/// layout (then its contents are stale anyway).
#[inline]
fn standard_slice_mut<'a, T: Real>(a: &'a mut ArrayD<T>, shape: &[usize]) -> &'a mut [T] {
    // One element (a chain of scalar maps): any strides will do, and
    // ndarray's layout check costs more than the stage.
    let shape_of_a = a.shape();
    let one_element = shape_of_a.len() == shape.len()
        && shape_of_a
            .iter()
            .zip(shape)
            .fold(true, |one, (p, q)| one & (*p == 1) & (*q == 1));
    if one_element {
        return std::slice::from_mut(a.first_mut().expect("one element"));
    }
    if !dims_equal(a.shape(), shape) || !a.is_standard_layout() {
        *a = ArrayD::zeros(IxDyn(shape));
    }
    a.as_slice_mut()
        .expect("an array in standard layout is one slice")
}

/// The reusing forward pass of a run of per-element stages (`stages`, in
/// order, at least one) from `input`; the result stays in `work.output`.
pub(crate) fn run_forward<T: Real>(
    stages: &Arc<[PerElementStage<T>]>,
    input: &ArrayD<T>,
    work: &mut RunWork<T>,
) -> Result<()> {
    let RunWork {
        scratch,
        values,
        slopes,
        kept,
        filled_for,
        output,
        complete,
        ..
    } = work;
    // Until every stage has run, the buffers mix two passes.
    *complete = false;
    if !filled_for
        .as_ref()
        .is_some_and(|filled| Arc::ptr_eq(filled, stages))
    {
        fit_buffers(stages, kept);
        *filled_for = Some(Arc::clone(stages));
    }
    let x = logical_slice(input, scratch);
    let len = x.len();
    let count = stages.len();
    // Checked first: this runs on every pass, and almost always fits.
    let between = len * count.saturating_sub(1);
    if values.len() != between {
        values.resize(between, T::zero());
    }
    let kept_slopes = if len <= SLOPES_UP_TO { len * count } else { 0 };
    if slopes.len() != kept_slopes {
        slopes.resize(kept_slopes, T::zero());
    }
    let y = standard_slice_mut(output, input.shape());
    if let ([v], [out]) = (x, &mut *y) {
        *out = through_one(kept, slopes, *v)?;
        *complete = true;
        return Ok(());
    }
    for (i, (_, buffers)) in kept.iter_mut().enumerate() {
        // Stage i reads stage i - 1's output and writes its own.
        let slopes = slopes.get_mut(i * len..(i + 1) * len).unwrap_or_default();
        let (before, after) = values.split_at_mut(i * len);
        let from = if i == 0 { x } else { &before[(i - 1) * len..] };
        let into = if i + 1 == count {
            &mut *y
        } else {
            &mut after[..len]
        };
        buffers.forward(from, into, slopes).map_err(|e| *e)?;
    }
    *complete = true;
    Ok(())
}

/// `kept` made to hold one set of buffers per stage of `stages`, in order:
/// those a stage made before stay (at the same place), others are made.
#[cold]
fn fit_buffers<T>(stages: &[PerElementStage<T>], kept: &mut Vec<Tagged<T>>) {
    kept.truncate(stages.len());
    for (i, stage) in stages.iter().enumerate() {
        match kept.get_mut(i) {
            Some((id, _)) if *id == stage.identity => {}
            Some(other) => *other = (stage.identity, stage.passes.buffers()),
            None => kept.push((stage.identity, stage.passes.buffers())),
        }
    }
}

/// The forward pass of a run over one element `v` (a chain of scalar
/// maps): the value goes from stage to stage in a register, each stage's
/// slope into `slopes` (one per stage). Returns the run's output.
fn through_one<T: Real>(kept: &mut [Tagged<T>], slopes: &mut [T], mut v: T) -> Result<T> {
    for ((_, buffers), slope) in kept.iter_mut().zip(slopes) {
        let (mut y, mut s) = buffers.forward_one(v);
        if y.is_nan() {
            // An error, or a NaN the map gives: the slice pass tells which.
            let (mut out, mut at) = ([T::zero()], [T::zero()]);
            buffers.forward(&[v], &mut out, &mut at).map_err(|e| *e)?;
            (y, s) = (out[0], at[0]);
        }
        *slope = s;
        v = y;
    }
    Ok(v)
}

/// How many slopes [`one_shot_one`] keeps on the stack; a longer run
/// keeps them in one vector.
const SLOPES_ON_STACK: usize = 32;

/// The change of the input of a run of per-element stages over one element
/// `x` (a chain of scalar maps) from the change `dy` of its output, in one
/// sweep that keeps nothing but the stages' slopes: the one-shot backward
/// pass, with no workspace. The products are those of the other passes
/// ([`through_slopes`]), last stage first, so the numbers are the same bit
/// for bit. `None` when a value is NaN (which may stand for an error) or a
/// slope is not a finite number: the passes that keep each stage's memo
/// then tell the error, or compute the change through the map's own
/// backward pass ([`change_at`]).
pub(crate) fn one_shot_one<T: Real>(stages: &[PerElementStage<T>], x: T, dy: T) -> Option<T> {
    let mut on_stack = [T::zero(); SLOPES_ON_STACK];
    let mut on_heap = Vec::new();
    let slopes = match on_stack.get_mut(..stages.len()) {
        Some(slopes) => slopes,
        None => {
            on_heap.resize(stages.len(), T::zero());
            &mut on_heap[..]
        }
    };
    sweep_one(stages, x, slopes)?;
    Some(times_slopes(slopes, dy))
}

/// The value of a chain of scalar stages at `x`, each stage's slope
/// `R[f](x, 1)` written into `slopes` (one per stage): one dynamic call a
/// stage, nothing kept. `None` when a value is NaN (which may stand for an
/// error) or a slope is not a finite number, as in [`one_shot_one`].
#[inline]
pub(crate) fn sweep_one<T: Real>(
    stages: &[PerElementStage<T>],
    x: T,
    slopes: &mut [T],
) -> Option<T> {
    let mut v = x;
    for (stage, slope) in stages.iter().zip(slopes.iter_mut()) {
        let (y, s) = stage.passes.value_and_slope(v);
        if y.is_nan() || !s.is_finite() {
            return None;
        }
        (v, *slope) = (y, s);
    }
    Some(v)
}

/// `R[f](x, dy)` for a chain of scalar stages whose slopes at `x` are
/// `slopes`: the change times each slope, last stage first, as the chain
/// rule applies them and as every other pass multiplies.
#[inline]
pub(crate) fn times_slopes<T: Real>(slopes: &[T], dy: T) -> T {
    slopes.iter().rev().fold(dy, |d, s| *s * d)
}

/// The longest arrays for which the forward pass of a run keeps slopes.
/// For short arrays the run's backward pass is then products, where a
/// dynamic call per stage would cost as much as the stage's work. Over
/// longer ones a call is small against a stage's work, and storing the
/// slopes cost more than it saved (4 to 5 % of a pass pair of 8 sine
/// stages over 256 elements): there each stage's backward pass computes
/// the same slopes and products itself.
const SLOPES_UP_TO: usize = 16;

/// The change `dx` of a run's input from the change `dy` of its output
/// (at most [`SLOPES_UP_TO`] elements): `dy` times every stage's slopes
/// (stored one stage after another), last stage first, as each stage's
/// own backward pass would multiply. False when a slope is not a finite
/// number: then `dx` is to be overwritten through the stages' own backward
/// passes.
fn through_slopes<T: Real>(slopes: &[T], dy: &[T], dx: &mut [T]) -> bool {
    let len = dy.len();
    if let ([g], [d]) = (dy, &mut *dx) {
        // One element: the product in a register, not through memory.
        let (product, finite) = slopes.iter().rev().fold((*g, true), |(d, finite), s| {
            (*s * d, finite & s.is_finite())
        });
        *d = product;
        return finite;
    }
    if len == 0 {
        return true;
    }
    dx.copy_from_slice(dy);
    // The check rides along with the products: one pass over the slopes.
    let mut finite = true;
    for stage_slopes in slopes.chunks_exact(len).rev() {
        for (d, s) in dx.iter_mut().zip(stage_slopes) {
            finite &= s.is_finite();
            *d = *s * *d;
        }
    }
    finite
}

/// `a`'s elements in logical order: its own slice when it is in standard
/// layout, else a copy in `scratch`.
#[inline]
fn logical_slice<'a, T: Real>(a: &'a ArrayD<T>, scratch: &'a mut Vec<T>) -> &'a [T] {
    // One element: any strides will do (see `standard_slice_mut`).
    if a.len() == 1
        && let Some(only) = a.first()
    {
        return std::slice::from_ref(only);
    }
    match a.as_slice() {
        Some(elements) => elements,
        None => {
            scratch.clear();
            scratch.extend(a.iter().copied());
            scratch
        }
    }
}

/// The reusing backward pass of the run whose forward pass filled `work`:
/// the change `dy` of its output into `dx`, the change of its input
/// (reshaped to the input's shape when it has another, or is not in
/// standard layout).
pub(crate) fn run_backward<T: Real>(
    stages: &Arc<[PerElementStage<T>]>,
    work: &mut RunWork<T>,
    dy: &ArrayD<T>,
    dx: &mut ArrayD<T>,
) -> Result<()> {
    let RunWork {
        scratch,
        slopes,
        kept,
        filled_for,
        output,
        changes: [first, second],
        complete,
        ..
    } = work;
    expect_shape(OUTPUT_CHANGE, output.shape(), dy)?;
    let filled = *complete
        && filled_for
            .as_ref()
            .is_some_and(|filled| Arc::ptr_eq(filled, stages));
    if !filled {
        return Err(Error::WorkspaceNotFilled {
            operation: "backward pass of a run of per-element stages (the workspace was filled by another chain, or the chain changed since)",
        });
    }
    let dy = logical_slice(dy, scratch);
    let dx = standard_slice_mut(dx, output.shape());
    if dy.len() <= SLOPES_UP_TO && through_slopes(slopes, dy, dx) {
        return Ok(());
    }
    if first.len() != dy.len() || second.len() != dy.len() {
        first.resize(dy.len(), T::zero());
        second.resize(dy.len(), T::zero());
    }
    let count = stages.len();
    for (i, (_, buffers)) in kept.iter().enumerate().rev() {
        // Stage i reads the change of its output (the run's, or what
        // stage i + 1 wrote) and writes the change of its input: the two
        // buffers take turns.
        let (read, write) = if i % 2 == 0 {
            (&**second, &mut **first)
        } else {
            (&**first, &mut **second)
        };
        let from = if i + 1 == count { dy } else { read };
        let into = if i == 0 { &mut *dx } else { write };
        buffers.backward(from, into).map_err(|e| *e)?;
    }
    Ok(())
}
