//! Type-erased maps for models assembled at run time.
//!
//! [`Boxed`] hides any map's type (and its memo's) behind a box, so maps
//! of different types can be stored together and nested to a depth known
//! only at run time. [`Chain`] is a sequence of stages over
//! `ArrayD<T>` whose shapes are checked as it is assembled: a stage that
//! cannot take what the previous one produces is refused with an
//! [`Error::ChainShape`] naming both shapes and the stage, and the chain is
//! left as it was.
//!
//! A boxed map of `f64` or `f32` whose map is a composition of maps on one
//! real number lists its stages ([`ScalarStages`]) and sweeps them, with
//! no dynamic call or workspace lookup per level of nesting.
//!
//! Both forms are first-order (forward and backward passes). Reverse
//! derivatives as maps, and so second order, need the statically typed
//! combinators, whose types describe the whole map.

use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::memory::HeldBytes;
use crate::primitives::Affine;
use crate::retention::{PassCost, Retention};
use crate::space::{Real, Space, shape_tuple};
use crate::workspace::Workspace;
use ndarray::linalg::general_mat_vec_mul;
use ndarray::{Array1, Array2, ArrayD, Ix1, IxDyn};
use std::any::{Any, TypeId};
use std::fmt;
use std::sync::{Arc, OnceLock};

mod per_element;
mod scalar_stages;
mod spare;
use per_element::{
    EachElement, ElementPasses, PerElementStage, RunWork, one_shot_one, run_backward, run_forward,
    sweep_one, times_slopes,
};
pub use scalar_stages::ScalarStages;
use scalar_stages::{same_mut, same_owned, same_ref};
pub use spare::free_spare_workspaces;

trait ErasedMap<A, B> {
    fn erased_forward(&self, x: &A) -> Result<B>;
    fn erased_forward_memo(&self, x: &A) -> Result<(B, BoxedMemo)>;
    fn erased_backward(&self, memo: &dyn Any, dy: &B) -> Result<A>;
    // The reusing passes, one dynamic call each: the workspace is untyped
    // already, so erasing the map costs no box.
    fn erased_forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w B>;
    fn erased_reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w B>;
    fn erased_backward_reusing(
        &self,
        x: &A,
        work: &mut Workspace,
        dy: &B,
        dx: &mut A,
    ) -> Result<()>;
    fn erased_scalar_stages(&self, into: &mut ScalarStages) -> bool;
}

impl<A: Space, F: Map<A>> ErasedMap<A, F::Output> for F
where
    F::Memo: HeldBytes + 'static,
{
    fn erased_forward(&self, x: &A) -> Result<F::Output> {
        Map::forward(self, x)
    }
    fn erased_forward_memo(&self, x: &A) -> Result<(F::Output, BoxedMemo)> {
        let (y, r) = Map::forward_memo(self, x)?;
        // Measured once here, where the type is known.
        let bytes = r.held_bytes();
        Ok((
            y,
            BoxedMemo {
                memo: Box::new(r),
                bytes,
            },
        ))
    }
    fn erased_backward(&self, memo: &dyn Any, dy: &F::Output) -> Result<A> {
        let r = memo.downcast_ref::<F::Memo>().ok_or(Error::ForeignMemo {
            operation: "backward pass of a boxed map",
        })?;
        Map::backward_memo(self, r, dy)
    }
    fn erased_forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w F::Output> {
        Map::forward_reusing(self, x, work)
    }
    fn erased_reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w F::Output> {
        Map::reused_output(self, work)
    }
    fn erased_backward_reusing(
        &self,
        x: &A,
        work: &mut Workspace,
        dy: &F::Output,
        dx: &mut A,
    ) -> Result<()> {
        Map::backward_reusing(self, x, work, dy, dx)
    }
    fn erased_scalar_stages(&self, into: &mut ScalarStages) -> bool {
        Compose::scalar_stages(self, into)
    }
}

/// What a [`Boxed`] map's forward pass keeps: the erased map's own memo,
/// and its size in bytes ([`HeldBytes`]), measured when it was made.
pub struct BoxedMemo {
    memo: Box<dyn Any>,
    bytes: usize,
}

impl fmt::Debug for BoxedMemo {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "BoxedMemo({} bytes)", self.bytes)
    }
}

impl HeldBytes for BoxedMemo {
    fn held_bytes(&self) -> usize {
        self.bytes
    }
}

/// A map `A -> B` whose concrete type is erased. Created by [`Boxed::new`].
///
/// Boxed maps may hold boxed maps, to a depth of at most
/// [`Boxed::MAX_DEPTH`]: every pass (and dropping the map) recurses once
/// per level, and an unoptimised build spends about a kilobyte of stack per
/// level, so that 1,000 levels fit a thread's default 2 MiB. For models
/// deeper than that, a [`Chain`] holds any number of stages side by side,
/// without nesting.
///
/// A `Boxed<f64, f64>` (or `f32`) whose map is, all the way down, a
/// composition of maps on one real number that list their stages
/// ([`Compose::scalar_stages`]: the catalogue's elementwise maps, [`Then`](crate::Then)
/// and boxed maps) runs its reusing passes and its one-shot
/// [`backward`](Map::backward) as one sweep through the stages, however
/// deep the nesting: one dynamic call a stage, each stage's slope kept,
/// the backward pass the product of the change and the slopes, and no
/// allocation once the workspace is filled (see [`ScalarStages`]). The
/// numbers are those of the maps' own passes, bit for bit for the
/// catalogue's maps; a NaN value (which may stand for an error) or a slope
/// that is not a finite number sends the pass through the maps' own
/// passes, so errors and NaNs come back as they would. The memo passes
/// are always the maps' own.
///
/// ```
/// use revdiff::{Boxed, Compose, Error, Map, Sin};
/// // A left-nested chain whose depth is read at run time.
/// let depth = 5;
/// let mut f: Boxed<f64, f64> = Boxed::new(Sin)?;
/// for _ in 1..depth {
///     f = Boxed::new(f.then(Sin))?;
/// }
/// let mut expect = 0.5_f64;
/// for _ in 0..depth {
///     expect = expect.sin();
/// }
/// assert_eq!(f.forward(&0.5)?, expect);
///
/// // Nesting past the limit is refused, not a stack overflow later.
/// let mut g: Boxed<f64, f64> = Boxed::new(Sin)?;
/// let refused = loop {
///     match Boxed::new(g.then(Sin)) {
///         Ok(deeper) => g = deeper,
///         Err(e) => break e,
///     }
/// };
/// assert!(matches!(refused, Error::NestingTooDeep { limit: Boxed::<f64, f64>::MAX_DEPTH, .. }));
/// # Ok::<(), revdiff::Error>(())
/// ```
pub struct Boxed<A, B> {
    // Shared, so that a boxed map clones cheaply and can be sent to the
    // threads of a law check or of sharded training.
    inner: Arc<dyn ErasedMap<A, B> + Send + Sync>,
    depth: usize,
    // The map's stages as a composition of maps on one real number, listed
    // the first time a pass asks (so that the levels of a nested boxed map
    // do not each keep a copy of the list below them). Shared by the
    // clones, and its address tells the workspaces this map filled.
    stages: Arc<OnceLock<Option<ScalarStages>>>,
}

impl<A, B> Clone for Boxed<A, B> {
    fn clone(&self) -> Self {
        Boxed {
            inner: Arc::clone(&self.inner),
            depth: self.depth,
            stages: Arc::clone(&self.stages),
        }
    }
}

impl<A: Space, B: Space> Boxed<A, B> {
    /// The deepest nesting of boxed maps that [`new`](Self::new) accepts.
    pub const MAX_DEPTH: usize = 1000;

    /// Erases the type of `map`. If `map` already holds boxed maps nested
    /// [`MAX_DEPTH`](Self::MAX_DEPTH) deep, this is
    /// [`Error::NestingTooDeep`]. The map must be `Send + Sync`, so that a
    /// boxed map can be used from several threads.
    pub fn new<F>(map: F) -> Result<Self>
    where
        F: Map<A, Output = B> + Send + Sync + 'static,
        F::Memo: HeldBytes + 'static,
    {
        Self::shared(Arc::new(map))
    }

    /// [`new`](Self::new) for a map already shared, checked the same way.
    fn shared<F>(map: Arc<F>) -> Result<Self>
    where
        F: Map<A, Output = B> + Send + Sync + 'static,
        F::Memo: HeldBytes + 'static,
    {
        let depth = map.boxed_depth() + 1;
        if depth > Self::MAX_DEPTH {
            return Err(Error::NestingTooDeep {
                depth,
                limit: Self::MAX_DEPTH,
            });
        }
        Ok(Boxed {
            inner: map,
            depth,
            stages: Arc::default(),
        })
    }

    /// [`new`](Self::new) without the depth limit, for the crate's own
    /// stages, which hold maps a user has already boxed.
    pub(crate) fn unchecked<F>(map: F) -> Self
    where
        F: Map<A, Output = B> + Send + Sync + 'static,
        F::Memo: HeldBytes + 'static,
    {
        Boxed {
            depth: map.boxed_depth() + 1,
            inner: Arc::new(map),
            stages: Arc::default(),
        }
    }

    /// The stages this map sweeps when `A` and `B` are both the real type
    /// `T` and the map lists its stages on `T` ([`Compose::scalar_stages`]).
    #[inline]
    fn sweeps<T: Real>(&self) -> Option<&[PerElementStage<T>]> {
        // Both comparisons are resolved when the code is generated.
        if TypeId::of::<A>() != TypeId::of::<T>() || TypeId::of::<B>() != TypeId::of::<T>() {
            return None;
        }
        self.stages
            .get_or_init(|| {
                let mut stages = ScalarStages::new();
                self.inner
                    .erased_scalar_stages(&mut stages)
                    .then_some(stages)
            })
            .as_ref()?
            .on::<T>()
    }

    /// The forward pass as a sweep of `stages`, into `work`; through the
    /// map's own passes when the sweep meets a NaN value (which may stand
    /// for an error) or a slope that is not a finite number.
    fn sweep_forward<'w, T: Real>(
        &self,
        stages: &[PerElementStage<T>],
        x: &A,
        work: &'w mut Workspace,
    ) -> Result<&'w B> {
        let w = work.state_or_insert_with(|| Swept::<T>::new(&self.stages));
        if !Arc::ptr_eq(&w.owner, &self.stages) {
            *w = Swept::new(&self.stages);
        }
        w.slopes.resize(stages.len(), T::zero());
        let swept = same_ref::<A, T>(x).and_then(|&v| sweep_one(stages, v, &mut w.slopes));
        match swept {
            Some(y) => {
                w.value = Some(y);
                Ok(same_ref(w.value.as_ref().expect("just set")).expect("B is T"))
            }
            None => {
                w.value = None;
                self.inner.erased_forward_reusing(x, &mut w.through_map)
            }
        }
    }

    /// What the last [`sweep_forward`](Self::sweep_forward) into `work`
    /// kept, checked to be this map's.
    fn swept<'w, T: Real>(&self, work: &'w mut Workspace) -> Result<&'w mut Swept<T>> {
        match work.state_mut::<Swept<T>>()? {
            w if Arc::ptr_eq(&w.owner, &self.stages) => Ok(w),
            _ => Err(not_swept_here()),
        }
    }

    fn swept_output<'w, T: Real>(&self, work: &'w Workspace) -> Result<&'w B> {
        let w = work.state::<Swept<T>>()?;
        match &w.value {
            _ if !Arc::ptr_eq(&w.owner, &self.stages) => Err(not_swept_here()),
            Some(y) => Ok(same_ref(y).expect("B is T")),
            None => self.inner.erased_reused_output(&w.through_map),
        }
    }

    fn sweep_backward<T: Real>(
        &self,
        x: &A,
        work: &mut Workspace,
        dy: &B,
        dx: &mut A,
    ) -> Result<()> {
        let w = self.swept::<T>(work)?;
        match (w.value, same_ref::<B, T>(dy), same_mut::<A, T>(dx)) {
            (Some(_), Some(&g), Some(d)) => {
                *d = times_slopes(&w.slopes, g);
                Ok(())
            }
            _ => self
                .inner
                .erased_backward_reusing(x, &mut w.through_map, dy, dx),
        }
    }

    /// The one-shot backward pass as a sweep of `stages`, keeping nothing;
    /// `None` where [`sweep_forward`](Self::sweep_forward) would go
    /// through the map's own passes.
    fn sweep_once<T: Real>(&self, stages: &[PerElementStage<T>], x: &A, dy: &B) -> Option<A> {
        let dx = one_shot_one(stages, *same_ref::<A, T>(x)?, *same_ref::<B, T>(dy)?)?;
        same_owned(dx)
    }
}

fn not_swept_here() -> Error {
    Error::WorkspaceNotFilled {
        operation: "reading what a boxed map's reusing forward pass kept",
    }
}

/// What a [`Boxed`] map that sweeps its stages keeps between its reusing
/// passes: the output and each stage's slope, or, when the sweep gave way
/// to the map's own passes, their workspace.
struct Swept<T> {
    owner: Arc<OnceLock<Option<ScalarStages>>>,
    value: Option<T>,
    slopes: Vec<T>,
    through_map: Workspace,
}

impl<T> Swept<T> {
    // Keeping the owner's list alive keeps its address from being reused
    // by another boxed map while this workspace holds its slopes.
    fn new(owner: &Arc<OnceLock<Option<ScalarStages>>>) -> Self {
        Swept {
            owner: Arc::clone(owner),
            value: None,
            slopes: Vec::new(),
            through_map: Workspace::new(),
        }
    }
}

impl<A, B> fmt::Debug for Boxed<A, B> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Boxed(..)")
    }
}

impl<A, B> Compose for Boxed<A, B> {
    fn boxed_depth(&self) -> usize {
        self.depth
    }
    fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
        match self.stages.get() {
            Some(Some(listed)) => into.append(listed),
            Some(None) => false,
            None => self.inner.erased_scalar_stages(into),
        }
    }
}

impl<A: Space, B: Space> Map<A> for Boxed<A, B> {
    type Output = B;
    type Memo = BoxedMemo;
    fn forward(&self, x: &A) -> Result<B> {
        self.inner.erased_forward(x)
    }
    fn forward_memo(&self, x: &A) -> Result<(B, BoxedMemo)> {
        self.inner.erased_forward_memo(x)
    }
    fn backward_memo(&self, memo: &BoxedMemo, dy: &B) -> Result<A> {
        self.inner.erased_backward(memo.memo.as_ref(), dy)
    }
    // A map on `f64` or `f32` that lists its stages sweeps them (see
    // `ScalarStages`); the memo passes stay the map's own, so that a memo
    // is the same whatever the map.
    fn backward(&self, x: &A, dy: &B) -> Result<A> {
        let swept = match (self.sweeps::<f64>(), self.sweeps::<f32>()) {
            (Some(stages), _) => self.sweep_once(stages, x, dy),
            (_, Some(stages)) => self.sweep_once(stages, x, dy),
            _ => None,
        };
        match swept {
            Some(dx) => Ok(dx),
            None => {
                let (_, memo) = self.forward_memo(x)?;
                self.backward_memo(&memo, dy)
            }
        }
    }
    fn forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w B> {
        if let Some(stages) = self.sweeps::<f64>() {
            return self.sweep_forward(stages, x, work);
        }
        if let Some(stages) = self.sweeps::<f32>() {
            return self.sweep_forward(stages, x, work);
        }
        self.inner.erased_forward_reusing(x, work)
    }
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w B> {
        if self.sweeps::<f64>().is_some() {
            return self.swept_output::<f64>(work);
        }
        if self.sweeps::<f32>().is_some() {
            return self.swept_output::<f32>(work);
        }
        self.inner.erased_reused_output(work)
    }
    fn backward_reusing(&self, x: &A, work: &mut Workspace, dy: &B, dx: &mut A) -> Result<()> {
        if self.sweeps::<f64>().is_some() {
            return self.sweep_backward::<f64>(x, work, dy, dx);
        }
        if self.sweeps::<f32>().is_some() {
            return self.sweep_backward::<f32>(x, work, dy, dx);
        }
        self.inner.erased_backward_reusing(x, work, dy, dx)
    }
}

/// What a stage of a [`Chain`] does to shapes.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum StageShape {
    /// Any input shape; the output has the same shape (elementwise maps).
    Preserving,
    /// One input shape, one output shape.
    Fixed {
        /// The only input shape accepted.
        input: Vec<usize>,
        /// The output shape.
        output: Vec<usize>,
    },
}

#[derive(Clone)]
struct Stage<T> {
    name: String,
    map: Boxed<ArrayD<T>, ArrayD<T>>,
    /// The output shape the stage declared when it was pushed.
    output: Vec<usize>,
    /// Whether [`Chain::push_per_element`] pushed it (its passes over flat
    /// slices are then in the chain's segment of consecutive such stages).
    per_element: bool,
}

/// The stages of a [`Chain`] as its reusing passes run them: one stage
/// alone, or a run of consecutive per-element stages together.
#[derive(Clone)]
enum Segment<T> {
    One(usize),
    Run {
        first: usize,
        /// Shared with the workspaces filled for them, which tell their
        /// own stages by the address (see `RunWork`).
        stages: Arc<[PerElementStage<T>]>,
    },
}

impl<T> Segment<T> {
    /// The segment's stages, `first..end`.
    fn range(&self) -> std::ops::Range<usize> {
        match self {
            Segment::One(k) => *k..k + 1,
            Segment::Run { first, stages } => *first..first + stages.len(),
        }
    }
}

impl<T: Real> Stage<T> {
    /// A stage's output must have the shape it declared: otherwise the
    /// error names this stage, not the next one.
    fn check_output(&self, position: usize, y: &ArrayD<T>) -> Result<()> {
        if crate::space::dims_equal(y.shape(), &self.output) {
            return Ok(());
        }
        Err(Error::ShapeMismatch {
            operation: "run-time chain, a stage's output against the shape it declared",
            expected: format!(
                "stage {position} ({}) declared {}",
                self.name,
                shape_tuple(&self.output)
            ),
            found: shape_tuple(y.shape()),
        })
    }
}

/// A sequence of stages `ArrayD<T> -> ArrayD<T>`, shape-checked as it is
/// assembled, for models whose structure is known only at run time.
///
/// ```
/// use revdiff::{Chain, Map, Tanh};
/// use ndarray::{Array1, Array2};
///
/// // Layer widths read from a configuration at run time.
/// let widths = [3, 4, 2];
/// let mut chain = Chain::<f64>::new(&[widths[0]]);
/// for pair in widths.windows(2) {
///     chain.push_affine(Array2::from_elem((pair[1], pair[0]), 0.1), Array1::zeros(pair[1])).unwrap();
///     chain.push_elementwise("tanh", Tanh).unwrap();
/// }
/// assert_eq!(chain.output_shape(), &[2]);
///
/// // A stage of the wrong width is refused, naming both shapes and the place.
/// let err = chain.push_affine(Array2::zeros((5, 3)), Array1::zeros(5)).unwrap_err();
/// assert_eq!(
///     err.to_string(),
///     "stage 4 of the chain (affine (5, 3)) expects input of shape (3,), but the output of stage 3 has shape (2,)"
/// );
/// assert_eq!(chain.len(), 4); // the chain is as it was
///
/// let x = ndarray::arr1(&[1.0, 2.0, 3.0]).into_dyn();
/// let dx = chain.backward(&x, &ndarray::arr1(&[1.0, 0.0]).into_dyn()).unwrap();
/// assert_eq!(dx.shape(), &[3]);
/// ```
#[derive(Clone)]
pub struct Chain<T> {
    input_shape: Vec<usize>,
    output_shape: Vec<usize>,
    stages: Vec<Stage<T>>,
    /// The stages as the reusing passes run them.
    segments: Vec<Segment<T>>,
    /// How many of the segments are runs of per-element stages.
    run_count: usize,
    /// Elements of the input and of every stage's output: what the values
    /// between stages hold, for deciding whether to keep their buffers.
    value_elements: usize,
    retention: Retention,
}

/// What a [`Chain`]'s forward pass keeps, by its [`Retention`].
pub enum ChainMemo<T> {
    /// Every stage's memo.
    Stages(Vec<BoxedMemo>),
    /// Stored stage inputs (the chain's input first), for the strategies
    /// that recompute.
    Checkpoints(Vec<ArrayD<T>>),
}

impl<T> HeldBytes for ChainMemo<T> {
    fn held_bytes(&self) -> usize {
        match self {
            ChainMemo::Stages(memos) => memos.held_bytes(),
            ChainMemo::Checkpoints(states) => states.held_bytes(),
        }
    }
}

impl<T> fmt::Debug for ChainMemo<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ChainMemo::Stages(m) => write!(f, "ChainMemo::Stages({} memos)", m.len()),
            ChainMemo::Checkpoints(c) => write!(f, "ChainMemo::Checkpoints({} states)", c.len()),
        }
    }
}

impl<T> fmt::Debug for Chain<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let names: Vec<&str> = self.stages.iter().map(|s| s.name.as_str()).collect();
        f.debug_struct("Chain")
            .field("input_shape", &self.input_shape)
            .field("output_shape", &self.output_shape)
            .field("stages", &names)
            .finish()
    }
}

impl<T: Real> Chain<T> {
    /// An empty chain (the identity) on arrays of shape `input_shape`.
    pub fn new(input_shape: &[usize]) -> Self {
        Chain {
            input_shape: input_shape.to_vec(),
            output_shape: input_shape.to_vec(),
            stages: Vec::new(),
            segments: Vec::new(),
            run_count: 0,
            value_elements: input_shape.iter().product(),
            retention: Retention::All,
        }
    }

    /// Chooses what the forward pass keeps for the backward pass (see
    /// [`Retention`]); every choice gives the same numbers, bit for bit.
    /// A setting that makes no sense is [`Error::InvalidSetting`].
    ///
    /// ```
    /// use revdiff::{Chain, Map, Retention, Tanh};
    /// use ndarray::ArrayD;
    ///
    /// let mut chain = Chain::<f64>::new(&[4]);
    /// for _ in 0..10 {
    ///     chain.push_elementwise("tanh", Tanh)?;
    /// }
    /// let x = ArrayD::from_elem(vec![4], 0.5);
    /// let dy = ArrayD::from_elem(vec![4], 1.0);
    /// let (kept, all) = chain.gradient_and_cost(&x, &dy)?;
    /// chain.retaining(Retention::Binomial { states: 3 })?;
    /// let (binomial, cost) = chain.gradient_and_cost(&x, &dy)?;
    /// assert_eq!(kept, binomial);
    /// assert_eq!(all.advances, 0);
    /// assert_eq!(cost.advances, revdiff::binomial_advances(10, 3).unwrap());
    /// assert!(cost.peak_states < all.peak_states);
    /// # Ok::<(), revdiff::Error>(())
    /// ```
    pub fn retaining(&mut self, retention: Retention) -> Result<()> {
        self.retention = retention.checked()?;
        Ok(())
    }

    /// What the forward pass keeps.
    pub fn retention(&self) -> Retention {
        self.retention
    }

    /// The input change for output change `dy` at `x`, and what the
    /// backward pass cost under the chain's [`Retention`]: forward passes
    /// repeated, and the most states held at once.
    pub fn gradient_and_cost(
        &self,
        x: &ArrayD<T>,
        dy: &ArrayD<T>,
    ) -> Result<(ArrayD<T>, PassCost)> {
        let (_, memo) = self.forward_memo(x)?;
        let mut cost = PassCost::default();
        let dx = self.backward_counted(&memo, dy, &mut cost)?;
        Ok((dx, cost))
    }

    /// The gradient at `x`, `dy` under each strategy of `retentions`,
    /// timed over `repeats` runs each (the median is kept): a table of
    /// time per gradient, forward passes repeated and states held, for
    /// choosing a strategy for this chain. The chain's own setting is left
    /// as it was. All strategies must give the same gradient bit for bit;
    /// if one does not, that is an error naming it (it would be a bug).
    ///
    /// ```
    /// use revdiff::{Chain, Retention, Sin};
    /// use ndarray::ArrayD;
    ///
    /// let mut chain = Chain::<f64>::new(&[8]);
    /// for _ in 0..50 {
    ///     chain.push_elementwise("sin", Sin)?;
    /// }
    /// let (x, dy) = (ArrayD::from_elem(vec![8], 0.3), ArrayD::from_elem(vec![8], 1.0));
    /// let table = chain.compare_retentions(
    ///     &x,
    ///     &dy,
    ///     &[Retention::All, Retention::EveryKth(7), Retention::Binomial { states: 4 }],
    ///     5,
    /// )?;
    /// assert_eq!(table.rows[2].cost.advances, revdiff::binomial_advances(50, 4).unwrap());
    /// println!("{table}");
    /// # Ok::<(), revdiff::Error>(())
    /// ```
    pub fn compare_retentions(
        &self,
        x: &ArrayD<T>,
        dy: &ArrayD<T>,
        retentions: &[Retention],
        repeats: usize,
    ) -> Result<crate::retention::RetentionComparison> {
        if retentions.is_empty() || repeats == 0 {
            return Err(Error::InvalidSetting {
                name: "compare_retentions",
                value: format!("{} strategies, {repeats} repeats", retentions.len()),
                reason: "a comparison needs at least one strategy and one run",
            });
        }
        let mut trial = self.clone();
        let mut rows = Vec::with_capacity(retentions.len());
        let mut first: Option<ArrayD<T>> = None;
        for &retention in retentions {
            trial.retaining(retention)?;
            let mut times = Vec::with_capacity(repeats);
            let mut last = None;
            for _ in 0..repeats {
                let started = std::time::Instant::now();
                let (dx, cost) = trial.gradient_and_cost(x, dy)?;
                times.push(started.elapsed());
                last = Some((dx, cost));
            }
            let (dx, cost) = last.expect("at least one run");
            match &first {
                None => first = Some(dx),
                Some(expected) if *expected != dx => {
                    return Err(Error::InvalidSetting {
                        name: "retention",
                        value: format!("{retention:?}"),
                        reason: "this strategy changed the gradient, which no strategy may do",
                    });
                }
                Some(_) => {}
            }
            times.sort();
            rows.push(crate::retention::RetentionRow {
                retention,
                time: times[times.len() / 2],
                cost,
            });
        }
        Ok(crate::retention::RetentionComparison { rows })
    }

    fn backward_counted(
        &self,
        memo: &ChainMemo<T>,
        dy: &ArrayD<T>,
        cost: &mut PassCost,
    ) -> Result<ArrayD<T>> {
        self.check_output_change(dy)?;
        let n = self.stages.len();
        let mut held = Held::default();
        let d = match (memo, self.retention) {
            (ChainMemo::Stages(memos), _) => {
                if memos.len() != n {
                    return Err(Error::ForeignMemo {
                        operation: "backward pass of a chain",
                    });
                }
                held.keep_memos(memos);
                self.backward_through(0, memos, dy)
            }
            (ChainMemo::Checkpoints(states), Retention::EveryKth(k)) if !states.is_empty() => {
                for state in states {
                    held.store(state.held_bytes());
                }
                let mut d: Option<ArrayD<T>> = None;
                for (segment, start) in states.iter().enumerate().rev() {
                    let first = segment * k;
                    let memos = self.record(first, (first + k).min(n), start, cost)?;
                    held.keep_memos(&memos);
                    d = Some(self.backward_through(first, &memos, d.as_ref().unwrap_or(dy))?);
                    held.free_memos(&memos);
                }
                Ok(d.unwrap_or_else(|| dy.clone()))
            }
            (ChainMemo::Checkpoints(states), Retention::Binomial { states: slots })
                if states.len() == 1 =>
            {
                held.store(states[0].held_bytes());
                if n == 0 {
                    Ok(dy.clone())
                } else {
                    self.reverse_range(0, n, &states[0], slots, dy.clone(), cost, &mut held)
                }
            }
            (ChainMemo::Checkpoints(states), _) if states.len() == 1 => {
                held.store(states[0].held_bytes());
                let memos = self.record(0, n, &states[0], cost)?;
                held.keep_memos(&memos);
                self.backward_through(0, &memos, dy)
            }
            _ => Err(Error::ForeignMemo {
                operation: "backward pass of a chain",
            }),
        }?;
        cost.peak_states = held.peak_states;
        cost.peak_checkpoint_bytes = held.peak_checkpoint_bytes;
        cost.peak_memo_bytes = held.peak_memo_bytes;
        cost.peak_bytes = held.peak_bytes;
        Ok(d)
    }

    /// Backward through stages `first..first + memos.len()`, from the
    /// change `dy` of the last one's output (read, not copied).
    fn backward_through(
        &self,
        first: usize,
        memos: &[BoxedMemo],
        dy: &ArrayD<T>,
    ) -> Result<ArrayD<T>> {
        let mut d: Option<ArrayD<T>> = None;
        for (offset, r) in memos.iter().enumerate().rev() {
            let change = d.as_ref().unwrap_or(dy);
            d = Some(self.stages[first + offset].map.backward_memo(r, change)?);
        }
        Ok(d.unwrap_or_else(|| dy.clone()))
    }

    /// Runs stages `from..to` on `state` keeping their memos.
    fn record(
        &self,
        from: usize,
        to: usize,
        state: &ArrayD<T>,
        cost: &mut PassCost,
    ) -> Result<Vec<BoxedMemo>> {
        let mut memos = Vec::with_capacity(to - from);
        let mut y = state.clone();
        for k in from..to {
            let (next, r) = self.stages[k].map.forward_memo(&y)?;
            self.stages[k].check_output(k, &next)?;
            cost.recorded += 1;
            memos.push(r);
            y = next;
        }
        Ok(memos)
    }

    /// Runs stages `from..to` on `state` without memos.
    fn advance(
        &self,
        from: usize,
        to: usize,
        state: &ArrayD<T>,
        cost: &mut PassCost,
    ) -> Result<ArrayD<T>> {
        let mut y = state.clone();
        for k in from..to {
            y = self.stages[k].map.forward(&y)?;
            self.stages[k].check_output(k, &y)?;
            cost.advances += 1;
        }
        Ok(y)
    }

    /// Reverses stages `a..b` from `state` (the input of stage `a`) with
    /// `slots` states, `state` among them, by the binomial schedule.
    #[allow(clippy::too_many_arguments)]
    fn reverse_range(
        &self,
        a: usize,
        b: usize,
        state: &ArrayD<T>,
        slots: usize,
        dy: ArrayD<T>,
        cost: &mut PassCost,
        held: &mut Held,
    ) -> Result<ArrayD<T>> {
        let n = b - a;
        if n == 1 {
            let memos = self.record(a, b, state, cost)?;
            held.keep_memos(&memos);
            let d = self.backward_through(a, &memos, &dy);
            held.free_memos(&memos);
            return d;
        }
        if slots == 1 {
            // No state to spare: reach each stage from `state` again.
            let mut d = dy;
            for k in (a..b).rev() {
                let input = self.advance(a, k, state, cost)?;
                let memos = self.record(k, k + 1, &input, cost)?;
                held.keep_memos(&memos);
                d = self.backward_through(k, &memos, &d)?;
                held.free_memos(&memos);
            }
            return Ok(d);
        }
        let j = crate::retention::best_split(n, slots);
        let stored = self.advance(a, a + j, state, cost)?;
        let size = stored.held_bytes();
        held.store(size);
        let d = self.reverse_range(a + j, b, &stored, slots - 1, dy, cost, held)?;
        drop(stored);
        held.release(size);
        self.reverse_range(a, a + j, state, slots, d, cost, held)
    }
    /// Appends a stage after checking that it accepts the current output
    /// shape. On refusal the chain is unchanged.
    pub fn push<F, M>(&mut self, name: &str, map: F, shape: StageShape) -> Result<()>
    where
        F: Map<ArrayD<T>, Output = ArrayD<T>, Memo = M> + Send + Sync + 'static,
        M: HeldBytes + 'static,
    {
        let output = match &shape {
            StageShape::Preserving => self.output_shape.clone(),
            StageShape::Fixed { input, output } => {
                if *input != self.output_shape {
                    return Err(Error::ChainShape {
                        stage: self.stages.len(),
                        previous: self.stages.len().checked_sub(1),
                        name: name.to_string(),
                        expected: shape_tuple(input),
                        found: shape_tuple(&self.output_shape),
                    });
                }
                output.clone()
            }
        };
        self.stages.push(Stage {
            name: name.to_string(),
            map: Boxed::new(map)?,
            output: output.clone(),
            per_element: false,
        });
        self.segments.push(Segment::One(self.stages.len() - 1));
        self.value_elements += output.iter().product::<usize>();
        self.output_shape = output;
        Ok(())
    }

    /// Appends an elementwise stage (any map that keeps shapes).
    pub fn push_elementwise<F, M>(&mut self, name: &str, map: F) -> Result<()>
    where
        F: Map<ArrayD<T>, Output = ArrayD<T>, Memo = M> + Send + Sync + 'static,
        M: HeldBytes + 'static,
    {
        self.push(name, map, StageShape::Preserving)
    }

    /// Appends a stage that applies the scalar map `map` to every element
    /// (any map `T -> T`: a catalogue map such as [`Sin`](crate::Sin), a
    /// static composite of them, or your own).
    ///
    /// Consecutive per-element stages are the fast path of the reusing
    /// passes ([`Map::forward_reusing`], [`Map::backward_reusing`]): the
    /// forward pass runs over flat slices, with one dynamic call per stage,
    /// where a stage pushed by [`push_elementwise`](Self::push_elementwise)
    /// pays for workspace lookups and dynamic-dimension bookkeeping that for
    /// small arrays cost more than the map. The other passes apply the map
    /// element by element.
    ///
    /// The reverse derivative of a scalar map is linear in the change:
    /// `R[f](x, d) = R[f](x, 1) d`. So every backward pass of a per-element
    /// stage multiplies the change by the slope `R[f](x, 1)`. On arrays of
    /// at most 16 elements the forward pass keeps the slopes, and a run of
    /// such stages goes backward with no dynamic call at all; on longer
    /// ones each stage's backward pass computes them. For the catalogue's scalar maps, whose backward
    /// pass is that product, this is what the map gives, bit for bit; for a
    /// composite such as `Sin.then(Tanh)` it can differ in the last bit (the
    /// products are associated differently). Where the slope is not a
    /// finite number (a power near 0, whose slope overflows while its
    /// product with a small change need not), the map's own backward pass
    /// gives the change. All passes (reusing or not) compute the same
    /// numbers. Arrays of 262,144 elements or more are split across the
    /// cores (with the `threads` feature), which is why the map's memo must
    /// be `Send` and `Sync`.
    ///
    /// ```
    /// use revdiff::{Chain, Compose, Map, Sin, Tanh, Workspace};
    /// use ndarray::ArrayD;
    ///
    /// let depth = 6; // read at run time
    /// let mut chain = Chain::<f64>::new(&[1]);
    /// for _ in 0..depth {
    ///     chain.push_per_element("sin", Sin)?;
    /// }
    /// chain.push_per_element("tanh after sin", Sin.then(Tanh))?;
    ///
    /// let (x, dy) = (ArrayD::from_elem(vec![1], 0.7), ArrayD::from_elem(vec![1], 1.0));
    /// let mut work = Workspace::new();
    /// let mut dx = ArrayD::zeros(vec![1]);
    /// for _ in 0..2 {
    ///     chain.forward_reusing(&x, &mut work)?;
    ///     chain.backward_reusing(&x, &mut work, &dy, &mut dx)?;
    /// }
    /// assert_eq!(dx, chain.backward(&x, &dy)?);
    /// # Ok::<(), revdiff::Error>(())
    /// ```
    pub fn push_per_element<F>(&mut self, name: &str, map: F) -> Result<()>
    where
        F: Map<T, Output = T> + Send + Sync + 'static,
        F::Memo: HeldBytes + Send + Sync + 'static,
    {
        let map = Arc::new(EachElement(Arc::new(map)));
        let passes: Arc<dyn ElementPasses<T>> = map.clone();
        let stage = PerElementStage::new(passes);
        let k = self.stages.len();
        self.stages.push(Stage {
            name: name.to_string(),
            map: Boxed::shared(map)?,
            output: self.output_shape.clone(),
            per_element: true,
        });
        self.value_elements += self.output_shape.iter().product::<usize>();
        match self.segments.last_mut() {
            Some(Segment::Run { stages, .. }) => {
                // A new list, so that workspaces filled for the shorter
                // run (which they tell by its address) are refitted.
                let mut grown = stages.to_vec();
                grown.push(stage);
                *stages = grown.into();
            }
            _ => {
                self.segments.push(Segment::Run {
                    first: k,
                    stages: Arc::new([stage]),
                });
                self.run_count += 1;
            }
        }
        Ok(())
    }

    /// Appends the affine stage `x -> W x + b` with fixed `W` of shape
    /// `(m, n)` and `b` of length `m`, taking vectors of length `n`.
    pub fn push_affine(&mut self, weights: Array2<T>, bias: Array1<T>) -> Result<()> {
        let (m, n) = weights.dim();
        if bias.len() != m {
            return Err(Error::shape(
                "affine stage (bias length must equal weight rows)",
                format!("({m},)"),
                format!("({},)", bias.len()),
            ));
        }
        let name = format!("affine ({m}, {n})");
        let shape = StageShape::Fixed {
            input: vec![n],
            output: vec![m],
        };
        self.push(&name, FixedAffine { weights, bias }, shape)
    }

    /// Number of stages.
    pub fn len(&self) -> usize {
        self.stages.len()
    }

    /// Whether the chain has no stages.
    pub fn is_empty(&self) -> bool {
        self.stages.is_empty()
    }

    /// The input shape the chain accepts.
    pub fn input_shape(&self) -> &[usize] {
        &self.input_shape
    }

    /// The output shape the chain produces.
    pub fn output_shape(&self) -> &[usize] {
        &self.output_shape
    }

    /// The names of the stages, in order.
    pub fn stage_names(&self) -> Vec<&str> {
        self.stages.iter().map(|s| s.name.as_str()).collect()
    }

    fn check_output_change(&self, dy: &ArrayD<T>) -> Result<()> {
        expect_shape("output change of a chain", &self.output_shape, dy)
    }

    fn check_input(&self, x: &ArrayD<T>) -> Result<()> {
        expect_shape("run-time chain, its input", &self.input_shape, x)
    }
}

/// A shape mismatch naming `operation` unless `a` has shape `expected`.
/// Inline: it runs on every pass of a chain, where a call would cost more
/// than the comparison.
#[inline]
pub(crate) fn expect_shape<T>(
    operation: &'static str,
    expected: &[usize],
    a: &ArrayD<T>,
) -> Result<()> {
    if crate::space::dims_equal(a.shape(), expected) {
        return Ok(());
    }
    Err(shape_mismatch(operation, expected, a.shape()))
}

#[cold]
#[inline(never)]
fn shape_mismatch(operation: &'static str, expected: &[usize], found: &[usize]) -> Error {
    Error::shape(operation, shape_tuple(expected), shape_tuple(found))
}

impl<T> Compose for Chain<T> {
    fn boxed_depth(&self) -> usize {
        self.stages
            .iter()
            .map(|s| s.map.boxed_depth())
            .max()
            .unwrap_or(0)
    }
}

impl<T: Real> Map<ArrayD<T>> for Chain<T> {
    type Output = ArrayD<T>;
    type Memo = ChainMemo<T>;
    fn forward(&self, x: &ArrayD<T>) -> Result<ArrayD<T>> {
        self.check_input(x)?;
        let Some((first, rest)) = self.stages.split_first() else {
            return Ok(x.clone());
        };
        let mut y = first.map.forward(x)?;
        first.check_output(0, &y)?;
        for (k, stage) in rest.iter().enumerate() {
            y = stage.map.forward(&y)?;
            stage.check_output(k + 1, &y)?;
        }
        Ok(y)
    }
    fn forward_memo(&self, x: &ArrayD<T>) -> Result<(ArrayD<T>, Self::Memo)> {
        self.check_input(x)?;
        match self.retention {
            Retention::All => {
                let mut memos = Vec::with_capacity(self.stages.len());
                // The first stage reads `x` itself: no copy of the input.
                let mut y: Option<ArrayD<T>> = None;
                for (k, stage) in self.stages.iter().enumerate() {
                    let (next, r) = stage.map.forward_memo(y.as_ref().unwrap_or(x))?;
                    stage.check_output(k, &next)?;
                    memos.push(r);
                    y = Some(next);
                }
                Ok((y.unwrap_or_else(|| x.clone()), ChainMemo::Stages(memos)))
            }
            Retention::EveryKth(k) => {
                let mut y = x.clone();
                let mut states = Vec::with_capacity(self.stages.len() / k.max(1) + 1);
                for (i, stage) in self.stages.iter().enumerate() {
                    if i % k.max(1) == 0 {
                        states.push(y.clone());
                    }
                    y = stage.map.forward(&y)?;
                    stage.check_output(i, &y)?;
                }
                if states.is_empty() {
                    states.push(x.clone());
                }
                Ok((y, ChainMemo::Checkpoints(states)))
            }
            Retention::InputOnly | Retention::Binomial { .. } => {
                let y = self.forward(x)?;
                Ok((y, ChainMemo::Checkpoints(vec![x.clone()])))
            }
        }
    }
    fn backward_memo(&self, memo: &Self::Memo, dy: &ArrayD<T>) -> Result<ArrayD<T>> {
        self.backward_counted(memo, dy, &mut PassCost::default())
    }
    /// The reverse derivative. A chain that keeps every stage's memo
    /// (`Retention::All`) and whose passes' buffers hold at most 1 MiB
    /// (three numbers per value between stages, the input's included: the
    /// value, its change and a slope; about 43,000 `f64` values) runs its
    /// reusing passes in a workspace the thread keeps for the next call
    /// ([`free_spare_workspaces`]): the same numbers as the memo passes,
    /// without their allocation per stage. (A stage of your own pushed with
    /// [`push`](Chain::push) keeps there, besides, whatever its reusing
    /// passes keep.)
    ///
    /// A chain of scalar maps (only stages pushed with
    /// [`push_per_element`](Chain::push_per_element), over one-element
    /// arrays) needs no workspace at all: one sweep through the stages
    /// keeps each stage's slope on the stack and multiplies the change by
    /// them, last stage first, as the other passes do.
    fn backward(&self, x: &ArrayD<T>, dy: &ArrayD<T>) -> Result<ArrayD<T>> {
        if let [Segment::Run { stages, .. }] = self.segments.as_slice()
            && x.len() == 1
        {
            self.check_input(x)?;
            self.check_output_change(dy)?;
            // Allocated before the sweep, which does not wait for it.
            let mut dx = x.clone();
            if let (Some(&v), Some(&g), Some(out)) = (x.first(), dy.first(), dx.first_mut())
                && let Some(d) = one_shot_one(stages, v, g)
            {
                *out = d;
                return Ok(dx);
            }
        }
        // Bytes of values, changes and the per-element slopes.
        let bytes = 3 * self.value_elements * std::mem::size_of::<T>();
        if self.retention != Retention::All || self.stages.is_empty() || bytes > SPARE_BYTES {
            let (_, memo) = self.forward_memo(x)?;
            return self.backward_memo(&memo, dy);
        }
        self.check_output_change(dy)?;
        spare::with_spare_workspace(self as *const Self as usize, |work| {
            self.forward_reusing(x, work)?;
            // A clone is cheaper to make than zeros (no strides to compute); every
            // element is overwritten.
            let mut dx = x.clone();
            self.backward_reusing(x, work, dy, &mut dx)?;
            Ok(dx)
        })
    }
    // The reusing passes keep every stage's workspace, as `Retention::All`
    // keeps every memo; under another retention they are the memo passes,
    // so that the memory the user chose to save stays saved.
    fn forward_reusing<'w>(&self, x: &ArrayD<T>, work: &'w mut Workspace) -> Result<&'w ArrayD<T>> {
        if self.retention != Retention::All || self.stages.is_empty() {
            let (y, memo) = self.forward_memo(x)?;
            work.put_output(y);
            work.put_state(memo);
            return work.output();
        }
        self.check_input(x)?;
        let w = work.state_or_insert_with(ChainWork::<T>::default);
        w.fit(self);
        // Each stage's output, borrowed from its own workspace (or its
        // run's), is the next stage's input: no lookups between stages.
        let mut y: Option<&'w ArrayD<T>> = None;
        let (mut stage_work, mut run_work) = (&mut w.stages[..], &mut w.runs[..]);
        for segment in &self.segments {
            let input = y.unwrap_or(x);
            match segment {
                Segment::Run { stages, .. } => {
                    let (run, rest) = std::mem::take(&mut run_work)
                        .split_first_mut()
                        .expect("fitted: one run workspace per run");
                    run_forward(stages, input, run)?;
                    y = Some(&run.output);
                    run_work = rest;
                    stage_work = &mut std::mem::take(&mut stage_work)[stages.len()..];
                }
                &Segment::One(k) => {
                    let (own, rest) = std::mem::take(&mut stage_work)
                        .split_first_mut()
                        .expect("fitted: one workspace per stage");
                    let stage = &self.stages[k];
                    let output = stage.map.forward_reusing(input, own)?;
                    stage.check_output(k, output)?;
                    y = Some(output);
                    stage_work = rest;
                }
            }
        }
        // The chain has stages (checked above), so the last one's output.
        let Some(y) = y else {
            return Err(Error::WorkspaceNotFilled {
                operation: "forward pass of a run-time chain",
            });
        };
        Ok(y)
    }
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w ArrayD<T>> {
        match (work.state::<ChainWork<T>>(), self.stages.last()) {
            (Ok(w), Some(last)) if w.stages.len() == self.stages.len() => {
                if last.per_element
                    && let Some(run) = w.runs.last()
                {
                    return Ok(&run.output);
                }
                last.map.reused_output(&w.stages[self.stages.len() - 1])
            }
            _ => work.output(),
        }
    }
    fn backward_reusing(
        &self,
        x: &ArrayD<T>,
        work: &mut Workspace,
        dy: &ArrayD<T>,
        dx: &mut ArrayD<T>,
    ) -> Result<()> {
        if self.retention != Retention::All || self.stages.is_empty() {
            *dx = self.backward_memo(work.state::<ChainMemo<T>>()?, dy)?;
            return Ok(());
        }
        let w = work.state_mut::<ChainWork<T>>()?;
        if w.stages.len() != self.stages.len() || w.runs.len() != self.run_count {
            return Err(Error::WorkspaceNotFilled {
                operation: "backward pass of a run-time chain (its stages changed since the forward pass)",
            });
        }
        let n = self.stages.len();
        let mut runs = &mut w.runs[..];
        for (i, segment) in self.segments.iter().enumerate().rev() {
            // A segment reads its input (the previous segment's output) and
            // the change of its output, and writes the change of its input.
            let std::ops::Range { start: first, end } = segment.range();
            let (earlier_runs, this_run) = match segment {
                Segment::Run { stages, .. } => {
                    let (last, rest) = std::mem::take(&mut runs)
                        .split_last_mut()
                        .expect("checked: one run workspace per run");
                    (rest, Some((stages, last)))
                }
                Segment::One(_) => (std::mem::take(&mut runs), None),
            };
            let (before, rest) = w.stages.split_at_mut(first);
            let input = match i.checked_sub(1).map(|p| &self.segments[p]) {
                None => x,
                Some(Segment::Run { .. }) => match earlier_runs.last() {
                    Some(run) => &run.output,
                    None => x,
                },
                Some(&Segment::One(p)) => self.stages[p].map.reused_output(&before[p])?,
            };
            let (lower, upper) = w.changes.split_at_mut(first);
            let change = if end == n {
                dy
            } else {
                upper[end - 1 - first]
                    .as_ref()
                    .expect("filled by the next segment")
            };
            let into = match lower.last_mut() {
                Some(slot) => crate::workspace::shaped_like(slot, input),
                None => &mut *dx,
            };
            match this_run {
                Some((stages, run)) => run_backward(stages, run, change, into)?,
                None => {
                    self.stages[first]
                        .map
                        .backward_reusing(input, &mut rest[0], change, into)?
                }
            }
            runs = earlier_runs;
        }
        Ok(())
    }
}

/// The most bytes of buffers (the values between stages, their changes
/// and slopes) for which a chain's one-shot backward pass keeps them for
/// the next call.
const SPARE_BYTES: usize = 1 << 20;

/// What a [`Chain`]'s reusing passes keep: every stage's workspace, and a
/// buffer for the change of every value between stages.
struct ChainWork<T> {
    stages: Vec<Workspace>,
    changes: Vec<Option<ArrayD<T>>>,
    /// One per run of consecutive per-element stages, in order.
    runs: Vec<RunWork<T>>,
}

impl<T> Default for ChainWork<T> {
    fn default() -> Self {
        ChainWork {
            stages: Vec::new(),
            changes: Vec::new(),
            runs: Vec::new(),
        }
    }
}

impl<T: Real> ChainWork<T> {
    /// One workspace per stage and per run (the chain may have grown since
    /// the last call).
    fn fit(&mut self, chain: &Chain<T>) {
        // Checked first: this runs on every pass, and almost always fits.
        let (stages, runs) = (chain.stages.len(), chain.run_count);
        if self.stages.len() != stages || self.changes.len() != stages || self.runs.len() != runs {
            self.stages.resize_with(stages, Workspace::new);
            self.changes.resize_with(stages, || None);
            self.runs.resize_with(runs, RunWork::default);
        }
    }
}

/// What a backward pass holds: stored stage inputs (checkpoints) and stage
/// memos, counted and in bytes, with their peaks. Transients (the value
/// being advanced, the change being passed back) are not counted.
#[derive(Default)]
struct Held {
    states: usize,
    checkpoint_bytes: usize,
    memo_bytes: usize,
    peak_states: usize,
    peak_checkpoint_bytes: usize,
    peak_memo_bytes: usize,
    peak_bytes: usize,
}

impl Held {
    fn update_peaks(&mut self) {
        self.peak_states = self.peak_states.max(self.states);
        self.peak_checkpoint_bytes = self.peak_checkpoint_bytes.max(self.checkpoint_bytes);
        self.peak_memo_bytes = self.peak_memo_bytes.max(self.memo_bytes);
        self.peak_bytes = self.peak_bytes.max(self.checkpoint_bytes + self.memo_bytes);
    }
    fn store(&mut self, bytes: usize) {
        self.states += 1;
        self.checkpoint_bytes += bytes;
        self.update_peaks();
    }
    fn release(&mut self, bytes: usize) {
        self.states -= 1;
        self.checkpoint_bytes -= bytes;
    }
    fn keep_memos(&mut self, memos: &[BoxedMemo]) {
        self.states += memos.len();
        self.memo_bytes += memos.held_bytes();
        self.update_peaks();
    }
    fn free_memos(&mut self, memos: &[BoxedMemo]) {
        self.states -= memos.len();
        self.memo_bytes -= memos.held_bytes();
    }
}

/// `x -> W x + b` on one-dimensional `ArrayD`s, with `W` and `b` fixed.
struct FixedAffine<T> {
    weights: Array2<T>,
    bias: Array1<T>,
}

impl<T> Compose for FixedAffine<T> {}

fn as_vector<T: Real>(x: &ArrayD<T>) -> Result<Array1<T>> {
    x.clone()
        .into_dimensionality::<Ix1>()
        .map_err(|_| Error::shape("affine stage input", "(n,)", shape_tuple(x.shape())))
}

impl<T: Real> Map<ArrayD<T>> for FixedAffine<T> {
    type Output = ArrayD<T>;
    type Memo = <Affine as Map<((Array2<T>, Array1<T>), Array1<T>)>>::Memo;
    fn forward_memo(&self, x: &ArrayD<T>) -> Result<(ArrayD<T>, Self::Memo)> {
        let input = ((self.weights.clone(), self.bias.clone()), as_vector(x)?);
        let (y, r) = Affine.forward_memo(&input)?;
        Ok((
            y.into_dimensionality::<IxDyn>()
                .expect("any array is dynamic"),
            r,
        ))
    }
    fn backward_memo(&self, r: &Self::Memo, dy: &ArrayD<T>) -> Result<ArrayD<T>> {
        let (_, dx) =
            Map::<((Array2<T>, Array1<T>), Array1<T>)>::backward_memo(&Affine, r, &as_vector(dy)?)?;
        Ok(dx.into_dyn())
    }
    // The weights stay where they are and nothing is kept: `W x + b` into
    // the previous output's buffer, `W' dy` into the caller's.
    fn forward_reusing<'w>(&self, x: &ArrayD<T>, work: &'w mut Workspace) -> Result<&'w ArrayD<T>> {
        let x = vector_view(x, self.weights.ncols(), "affine stage input")?;
        let m = self.weights.nrows();
        let y = work.output_or_insert_with(|| ArrayD::zeros(IxDyn(&[m])));
        if y.shape() != [m] {
            *y = ArrayD::zeros(IxDyn(&[m]));
        }
        let mut y1 = y
            .view_mut()
            .into_dimensionality::<Ix1>()
            .expect("shaped (m,) above");
        y1.assign(&self.bias);
        general_mat_vec_mul(T::one(), &self.weights, &x, T::one(), &mut y1);
        work.output()
    }
    fn backward_reusing(
        &self,
        x: &ArrayD<T>,
        _work: &mut Workspace,
        dy: &ArrayD<T>,
        dx: &mut ArrayD<T>,
    ) -> Result<()> {
        let (m, n) = self.weights.dim();
        vector_view(x, n, "affine stage input")?;
        let dy = vector_view(dy, m, "affine stage output change")?;
        if dx.shape() != [n] {
            *dx = ArrayD::zeros(IxDyn(&[n]));
        }
        let mut dx1 = dx
            .view_mut()
            .into_dimensionality::<Ix1>()
            .expect("shaped (n,) above");
        general_mat_vec_mul(T::one(), &self.weights.t(), &dy, T::zero(), &mut dx1);
        Ok(())
    }
}

/// `x` as a vector of length `n`, or an error naming `what`.
fn vector_view<'a, T: Real>(
    x: &'a ArrayD<T>,
    n: usize,
    what: &'static str,
) -> Result<ndarray::ArrayView1<'a, T>> {
    match x.view().into_dimensionality::<Ix1>() {
        Ok(v) if v.len() == n => Ok(v),
        _ => Err(Error::shape(
            what,
            format!("({n},)"),
            shape_tuple(x.shape()),
        )),
    }
}
