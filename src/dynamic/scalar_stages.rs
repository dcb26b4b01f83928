//! Compositions of maps on one real number, flattened into their stages so
//! that a [`Boxed`] map runs them in one sweep.
//!
//! A boxed map that holds boxed maps (a chain whose depth is read at run
//! time, built as `Boxed::new(f.then(g))` level by level) pays, through
//! the general passes, a dynamic call and several workspace lookups per
//! level: on scalars, several times the cost of the maps themselves. When
//! the boxed map is, all the way down, a composition of maps on one real
//! number whose stages are known ([`Compose::scalar_stages`]), a
//! [`Boxed<f64, f64>`] (or `f32`) sweeps the stages instead, as a
//! [`Chain`](super::Chain) of per-element stages does over one element:
//! one dynamic call a stage, the value in a register, each stage's slope
//! `R[f](x, 1)` kept; the backward pass is the product of the change and
//! the slopes, last stage first. The numbers are those of the general
//! passes, bit for bit, for the catalogue's maps.

use super::per_element::{EachElement, ElementPasses, PerElementStage};
use crate::map::Map;
use crate::space::Real;
use std::any::Any;
use std::sync::Arc;

/// The stages of a composition of maps on one real number (`f64`, `f32`
/// or both), listed by [`Compose::scalar_stages`](crate::Compose::scalar_stages)
/// for [`Boxed`](crate::Boxed), which then runs them in one sweep.
///
/// A list for each of `f64` and `f32`; a stage that acts on one of them
/// only ([`push_on`](Self::push_on)) drops the other's list, since the
/// composition no longer acts on that type stage by stage.
///
/// # Example
///
/// A hand-written scalar map that lists itself, so that boxed chains
/// holding it are swept:
///
/// ```
/// use revdiff::{Boxed, Compose, Map, Result, ScalarStages, Sin};
///
/// #[derive(Clone, Copy, Debug)]
/// struct Cube;
/// impl Compose for Cube {
///     fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
///         into.push_on::<f64, _>(*self)
///     }
/// }
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
/// let mut stages = ScalarStages::new();
/// assert!(Cube.then(Sin).scalar_stages(&mut stages));
/// assert_eq!((stages.len_on::<f64>(), stages.len_on::<f32>()), (Some(2), None));
///
/// let mut f: Boxed<f64, f64> = Boxed::new(Cube)?;
/// for _ in 0..3 {
///     f = Boxed::new(f.then(Sin).then(Cube))?;
/// }
/// let x = 0.8_f64;
/// let mut expect = (x * x * x, 3.0 * x * x);
/// for _ in 0..3 {
///     let (v, s) = expect;
///     let (sin, cos) = v.sin_cos();
///     expect = (sin * sin * sin, s * cos * 3.0 * sin * sin);
/// }
/// assert!((f.forward(&x)? - expect.0).abs() < 1e-15);
/// assert!((f.backward(&x, &1.0)? - expect.1).abs() < 1e-14);
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone)]
pub struct ScalarStages {
    on_f64: Option<Vec<PerElementStage<f64>>>,
    on_f32: Option<Vec<PerElementStage<f32>>>,
}

impl Default for ScalarStages {
    fn default() -> Self {
        Self::new()
    }
}

impl std::fmt::Debug for ScalarStages {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ScalarStages")
            .field("on_f64", &self.len_on::<f64>())
            .field("on_f32", &self.len_on::<f32>())
            .finish()
    }
}

impl ScalarStages {
    /// No stages yet, on both `f64` and `f32`: the identity.
    pub fn new() -> Self {
        ScalarStages {
            on_f64: Some(Vec::new()),
            on_f32: Some(Vec::new()),
        }
    }

    /// Appends `map`, which acts on both `f64` and `f32`, as the next
    /// stage. Returns whether some list is left (see
    /// [`push_on`](Self::push_on)).
    pub fn push<F>(&mut self, map: F) -> bool
    where
        F: Map<f64, Output = f64> + Map<f32, Output = f32> + Send + Sync + 'static,
        <F as Map<f64>>::Memo: Send + Sync + 'static,
        <F as Map<f32>>::Memo: Send + Sync + 'static,
    {
        let map = Arc::new(map);
        if let Some(list) = &mut self.on_f64 {
            list.push(stage_of::<f64, F>(Arc::clone(&map)));
        }
        if let Some(list) = &mut self.on_f32 {
            list.push(stage_of::<f32, F>(map));
        }
        self.is_listed()
    }

    /// Appends `map`, which acts on `T` only, as the next stage on `T`,
    /// and drops the list of the other type. Returns whether the list on
    /// `T` is left: false when an earlier stage dropped it, or when `T`
    /// is neither `f64` nor `f32`.
    pub fn push_on<T, F>(&mut self, map: F) -> bool
    where
        T: Real,
        F: Map<T, Output = T> + Send + Sync + 'static,
        F::Memo: Send + Sync + 'static,
    {
        let mut stage = Some(stage_of::<T, F>(Arc::new(map)));
        let on_f64 = push_if_same(&mut self.on_f64, &mut stage);
        let on_f32 = push_if_same(&mut self.on_f32, &mut stage);
        if !on_f64 {
            self.on_f64 = None;
        }
        if !on_f32 {
            self.on_f32 = None;
        }
        self.is_listed()
    }

    /// Appends `map`, a `M64` or a `M32` (one type with a setting of each
    /// real type, such as `Powi<f64>` and `Powi<f32>`), with
    /// [`push_on`](Self::push_on) on its type; false, listing nothing, when
    /// it is neither.
    pub(crate) fn push_either<M64, M32>(&mut self, map: &dyn Any) -> bool
    where
        M64: Map<f64, Output = f64> + Clone + Send + Sync + 'static,
        M64::Memo: Send + Sync + 'static,
        M32: Map<f32, Output = f32> + Clone + Send + Sync + 'static,
        M32::Memo: Send + Sync + 'static,
    {
        if let Some(map) = map.downcast_ref::<M64>() {
            self.push_on::<f64, _>(map.clone())
        } else if let Some(map) = map.downcast_ref::<M32>() {
            self.push_on::<f32, _>(map.clone())
        } else {
            false
        }
    }

    /// How many stages are listed on `T`, or `None` when a stage does not
    /// act on `T` (or `T` is neither `f64` nor `f32`).
    pub fn len_on<T: Real>(&self) -> Option<usize> {
        self.on::<T>().map(<[_]>::len)
    }

    /// Appends `other`'s stages after these, type by type.
    pub(crate) fn append(&mut self, other: &ScalarStages) -> bool {
        match (&mut self.on_f64, &other.on_f64) {
            (Some(list), Some(more)) => list.extend_from_slice(more),
            _ => self.on_f64 = None,
        }
        match (&mut self.on_f32, &other.on_f32) {
            (Some(list), Some(more)) => list.extend_from_slice(more),
            _ => self.on_f32 = None,
        }
        self.is_listed()
    }

    /// The stages on `T`, if every stage acts on it.
    #[inline]
    pub(crate) fn on<T: Real>(&self) -> Option<&[PerElementStage<T>]> {
        // Resolved when the code is generated: no dynamic call is left.
        type On<T> = Option<Vec<PerElementStage<T>>>;
        same_ref::<_, On<T>>(&self.on_f64)
            .or_else(|| same_ref(&self.on_f32))
            .and_then(Option::as_deref)
    }

    fn is_listed(&self) -> bool {
        self.on_f64.is_some() || self.on_f32.is_some()
    }
}

fn stage_of<T, F>(map: Arc<F>) -> PerElementStage<T>
where
    T: Real,
    F: Map<T, Output = T> + Send + Sync + 'static,
    F::Memo: Send + Sync + 'static,
{
    let passes: Arc<dyn ElementPasses<T>> = Arc::new(EachElement(map));
    PerElementStage::new(passes)
}

/// Moves `stage` into `list` when they are of the same type (and the list
/// is still there); whether they were.
fn push_if_same<S: 'static, U: 'static>(list: &mut Option<Vec<U>>, stage: &mut Option<S>) -> bool {
    match same_mut::<Option<S>, Option<U>>(stage) {
        Some(same) => {
            if let (Some(list), Some(stage)) = (list.as_mut(), same.take()) {
                list.push(stage);
            }
            true
        }
        None => false,
    }
}

/// `value` as a `U`, when `T` is `U`: a check resolved when the code is
/// generated, with no copy.
#[inline]
pub(crate) fn same_ref<T: 'static, U: 'static>(value: &T) -> Option<&U> {
    (value as &dyn Any).downcast_ref::<U>()
}

/// [`same_ref`] for a mutable reference.
#[inline]
pub(crate) fn same_mut<T: 'static, U: 'static>(value: &mut T) -> Option<&mut U> {
    (value as &mut dyn Any).downcast_mut::<U>()
}

/// [`same_ref`] for an owned value.
#[inline]
pub(crate) fn same_owned<T: 'static, U: 'static>(value: T) -> Option<U> {
    let mut value = Some(value);
    same_mut::<Option<T>, Option<U>>(&mut value).and_then(Option::take)
}
