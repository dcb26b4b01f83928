//! Scalar maps applied to every element of a run-time chain's arrays
//! ([`Chain::push_per_element`](super::Chain::push_per_element)).
//!
//! A run of such stages is the common case of a deep run-time model of
//! scalar maps, and through the general stage interface each stage would
//! pay a dynamic call, workspace lookups and ndarray's dynamic-dimension
//! bookkeeping, which for small arrays cost several times the map itself.
//! The chain's reusing passes run a run of consecutive per-element stages
//! over flat slices instead: one dynamic call per stage and pass, the
//! values between stages in one buffer, and each stage's memos in a
//! vector of the scalar map's own memo type.

use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::memory::HeldBytes;
use crate::space::{Real, dims_equal, shape_tuple, split_across_cores};
use ndarray::{ArrayD, IxDyn};
use std::any::Any;

/// A scalar map applied to each element of an `ArrayD<T>`: the array map
/// of a per-element stage, used by every pass but the chain's reusing ones.
pub(crate) struct EachElement<F>(pub(crate) F);

impl<F: Compose> Compose for EachElement<F> {
    fn boxed_depth(&self) -> usize {
        self.0.boxed_depth()
    }
}

/// What a per-element stage's memo pass keeps: the scalar map's memo of
/// every element, in logical order, and the shape they came from.
pub(crate) struct EachElementMemo<M> {
    shape: Vec<usize>,
    memos: Vec<M>,
}

impl<M: HeldBytes> HeldBytes for EachElementMemo<M> {
    fn held_bytes(&self) -> usize {
        self.memos.held_bytes()
    }
}

impl<T: Real, F: Map<T, Output = T>> Map<ArrayD<T>> for EachElement<F> {
    type Output = ArrayD<T>;
    type Memo = EachElementMemo<F::Memo>;
    fn forward(&self, x: &ArrayD<T>) -> Result<ArrayD<T>> {
        let mut y = x.clone();
        for v in y.iter_mut() {
            *v = self.0.forward(v)?;
        }
        Ok(y)
    }
    fn forward_memo(&self, x: &ArrayD<T>) -> Result<(ArrayD<T>, Self::Memo)> {
        let mut y = x.clone();
        let mut memos = Vec::with_capacity(x.len());
        for v in y.iter_mut() {
            let (out, memo) = self.0.forward_memo(v)?;
            *v = out;
            memos.push(memo);
        }
        let shape = x.shape().to_vec();
        Ok((y, EachElementMemo { shape, memos }))
    }
    fn backward_memo(&self, memo: &Self::Memo, dy: &ArrayD<T>) -> Result<ArrayD<T>> {
        check_change(&memo.shape, dy)?;
        let mut dx = dy.clone();
        for (d, m) in dx.iter_mut().zip(&memo.memos) {
            *d = self.0.backward_memo(m, d)?;
        }
        Ok(dx)
    }
}

fn check_change<T>(shape: &[usize], dy: &ArrayD<T>) -> Result<()> {
    if dims_equal(dy.shape(), shape) {
        return Ok(());
    }
    Err(Error::shape(
        "backward pass of a per-element stage of a run-time chain (its output change)",
        shape_tuple(shape),
        shape_tuple(dy.shape()),
    ))
}

/// Where a per-element stage keeps its memos between the reusing passes:
/// a `Vec` of the scalar map's memo type, behind `Any` because the chain's
/// workspace cannot name that type.
pub(crate) type KeptMemos = Option<Box<dyn Any>>;

/// A per-element stage's passes over flat slices of elements, in the same
/// order: what a chain's reusing passes call, once per stage and pass.
pub(crate) trait ElementPasses<T>: Send + Sync {
    /// `y[i] = f(x[i])`, keeping each element's memo in `kept`.
    fn forward_elements(&self, x: &[T], y: &mut [T], kept: &mut KeptMemos) -> Result<()>;
    /// `dx[i] = R[f](x[i], dy[i])` from the memos of the last forward pass.
    fn backward_elements(&self, kept: &KeptMemos, dy: &[T], dx: &mut [T]) -> Result<()>;
}

impl<T, F> ElementPasses<T> for EachElement<F>
where
    T: Real,
    F: Map<T, Output = T> + Send + Sync,
    F::Memo: Send + Sync + 'static,
{
    fn forward_elements(&self, x: &[T], y: &mut [T], kept: &mut KeptMemos) -> Result<()> {
        let memos = match kept.as_mut().and_then(|b| b.downcast_mut::<Vec<F::Memo>>()) {
            Some(memos) if memos.len() == x.len() => memos,
            _ => {
                // First pass, or another width: filled element by element.
                let mut memos = Vec::with_capacity(x.len());
                for (out, v) in y.iter_mut().zip(x) {
                    let (value, memo) = self.0.forward_memo(v)?;
                    *out = value;
                    memos.push(memo);
                }
                *kept = Some(Box::new(memos));
                return Ok(());
            }
        };
        split_elements(
            x,
            y,
            memos.as_mut_slice(),
            &|x, y, memos: &mut [F::Memo]| {
                for ((out, memo), v) in y.iter_mut().zip(memos).zip(x) {
                    (*out, *memo) = self.0.forward_memo(v)?;
                }
                Ok(())
            },
        )
    }
    fn backward_elements(&self, kept: &KeptMemos, dy: &[T], dx: &mut [T]) -> Result<()> {
        // The error is made only when needed: this runs once per stage.
        let Some(memos) = kept
            .as_ref()
            .and_then(|b| b.downcast_ref::<Vec<F::Memo>>())
            .filter(|memos| memos.len() == dy.len())
        else {
            return Err(Error::WorkspaceNotFilled {
                operation: "backward pass of a per-element stage of a run-time chain",
            });
        };
        split_elements(dy, dx, memos.as_slice(), &|dy, dx, memos: &[F::Memo]| {
            for ((d, memo), g) in dx.iter_mut().zip(memos).zip(dy) {
                *d = self.0.backward_memo(memo, g)?;
            }
            Ok(())
        })
    }
}

/// Runs `pass` over the three slices (of equal length), split in halves
/// across the cores when they are long enough for that to pay.
#[inline]
fn split_elements<T, K, P>(from: &[T], into: &mut [T], kept: K, pass: &P) -> Result<()>
where
    T: Send + Sync,
    K: SplitAt,
    P: Fn(&[T], &mut [T], K) -> Result<()> + Sync,
{
    #[cfg(feature = "threads")]
    if split_across_cores(from.len()) {
        let mid = from.len() / 2;
        let (from_a, from_b) = from.split_at(mid);
        let (into_a, into_b) = into.split_at_mut(mid);
        let (kept_a, kept_b) = kept.split(mid);
        let (a, b) = rayon::join(
            || split_elements(from_a, into_a, kept_a, pass),
            || split_elements(from_b, into_b, kept_b, pass),
        );
        return a.and(b);
    }
    #[cfg(not(feature = "threads"))]
    let _ = split_across_cores;
    pass(from, into, kept)
}

/// A slice of memos, shared or not, that can be cut in two for the halves
/// of [`split_elements`].
trait SplitAt: Sized + Send {
    fn split(self, mid: usize) -> (Self, Self);
}

impl<M: Send> SplitAt for &mut [M] {
    fn split(self, mid: usize) -> (Self, Self) {
        self.split_at_mut(mid)
    }
}

impl<M: Sync> SplitAt for &[M] {
    fn split(self, mid: usize) -> (Self, Self) {
        self.split_at(mid)
    }
}

/// What a run of consecutive per-element stages keeps between the reusing
/// passes. Every buffer is the run's width long (per stage where it says
/// so) and is reused while the width stays.
pub(crate) struct RunWork<T> {
    /// The run's input (forward) or output change (backward), copied here
    /// only when it is not in standard layout.
    scratch: Vec<T>,
    /// The outputs of every stage but the last, one after another.
    values: Vec<T>,
    /// Every stage's memos.
    kept: Vec<KeptMemos>,
    /// The last stage's output, read by the next stage or the caller.
    pub(crate) output: ArrayD<T>,
    /// The change being passed back, in two buffers used in turn.
    changes: [Vec<T>; 2],
}

impl<T: Real> Default for RunWork<T> {
    fn default() -> Self {
        RunWork {
            scratch: Vec::new(),
            values: Vec::new(),
            kept: Vec::new(),
            output: ArrayD::zeros(IxDyn(&[0])),
            changes: [Vec::new(), Vec::new()],
        }
    }
}

/// `a`'s elements as one slice in logical order; `a` is replaced by zeros
/// of shape `shape` when it has another shape or is not in standard
/// layout (then its contents are stale anyway).
fn standard_slice_mut<'a, T: Real>(a: &'a mut ArrayD<T>, shape: &[usize]) -> &'a mut [T] {
    if !dims_equal(a.shape(), shape) || !a.is_standard_layout() {
        *a = ArrayD::zeros(IxDyn(shape));
    }
    a.as_slice_mut()
        .expect("an array in standard layout is one slice")
}

/// The reusing forward pass of a run of per-element stages (`passes`, in
/// order, at least one) from `input`; the result stays in `work.output`.
pub(crate) fn run_forward<'p, T: Real + 'p>(
    passes: impl ExactSizeIterator<Item = &'p dyn ElementPasses<T>>,
    input: &ArrayD<T>,
    work: &mut RunWork<T>,
) -> Result<()> {
    let RunWork {
        scratch,
        values,
        kept,
        output,
        ..
    } = work;
    let x = logical_slice(input, scratch);
    let len = x.len();
    let stages = passes.len();
    values.resize(len * stages.saturating_sub(1), T::zero());
    kept.resize_with(stages, || None);
    let y = standard_slice_mut(output, input.shape());
    for (i, (passes, kept)) in passes.zip(kept.iter_mut()).enumerate() {
        // Stage i reads stage i - 1's output and writes its own.
        let (before, after) = values.split_at_mut(i * len);
        let from = if i == 0 { x } else { &before[(i - 1) * len..] };
        let into = if i + 1 == stages {
            &mut *y
        } else {
            &mut after[..len]
        };
        passes.forward_elements(from, into, kept)?;
    }
    Ok(())
}

/// `a`'s elements in logical order: its own slice when it is in standard
/// layout, else a copy in `scratch`.
fn logical_slice<'a, T: Real>(a: &'a ArrayD<T>, scratch: &'a mut Vec<T>) -> &'a [T] {
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
pub(crate) fn run_backward<'p, T: Real + 'p>(
    passes: impl DoubleEndedIterator<Item = &'p dyn ElementPasses<T>> + ExactSizeIterator,
    work: &mut RunWork<T>,
    dy: &ArrayD<T>,
    dx: &mut ArrayD<T>,
) -> Result<()> {
    let RunWork {
        scratch,
        kept,
        output,
        changes: [first, second],
        ..
    } = work;
    check_change(output.shape(), dy)?;
    if kept.len() != passes.len() {
        return Err(Error::WorkspaceNotFilled {
            operation: "backward pass of a run of per-element stages (the chain changed since the forward pass)",
        });
    }
    let dy = logical_slice(dy, scratch);
    first.resize(dy.len(), T::zero());
    second.resize(dy.len(), T::zero());
    let dx = standard_slice_mut(dx, output.shape());
    let stages = passes.len();
    for (i, (passes, kept)) in passes.zip(kept.iter()).enumerate().rev() {
        // Stage i reads the change of its output (the run's, or what
        // stage i + 1 wrote) and writes the change of its input: the two
        // buffers take turns.
        let (read, write) = if i % 2 == 0 {
            (&**second, &mut **first)
        } else {
            (&**first, &mut **second)
        };
        let from = if i + 1 == stages { dy } else { read };
        let into = if i == 0 { &mut *dx } else { write };
        passes.backward_elements(kept, from, into)?;
    }
    Ok(())
}
