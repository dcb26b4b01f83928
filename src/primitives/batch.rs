//! Maps on batches: a matrix whose rows are examples.
//!
//! [`Affine`] acts on one example (a vector) or on a batch (a matrix of
//! rows) with one matrix product. [`ColumnSums`] and [`RepeatRows`] are the
//! linear pieces that broadcasting a bias over rows needs; each is the other's
//! reverse derivative, so the batched affine map is closed under reverse
//! derivatives like the rest of the catalogue.

use crate::combinators::{AddPair, Fst, Pair, Snd, Then, ZeroMap};
use crate::error::{Error, Result};
use crate::map::{Compose, Linear, Map, Reverse};
use crate::primitives::{Affine, MatMul};
use crate::products::product;
use crate::space::{Real, shape_tuple};
use crate::workspace::{SplitInput, Workspace, reshape_to};
use ndarray::{Array1, Array2, Axis, Zip};

/// The sum of a matrix's rows, `X -> 1' X`, a linear map `Array2 -> Array1`:
/// over a batch, the total of each column.
///
/// Reverse derivative: the change repeated over every row, [`RepeatRows`].
///
/// ```
/// use revdiff::{ColumnSums, Map};
/// use ndarray::array;
/// let x = array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]];
/// assert_eq!(ColumnSums.forward(&x).unwrap(), array![9.0, 12.0]);
/// assert_eq!(ColumnSums.backward(&x, &array![1.0, -1.0]).unwrap(), array![[1.0, -1.0], [1.0, -1.0], [1.0, -1.0]]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ColumnSums;

/// A vector repeated once per row of the first argument, `(X, b) -> 1 b'`:
/// the broadcast of a bias over a batch, a linear map (the template `X`
/// gives only the row count; the result has `b`'s length as its columns).
///
/// Reverse derivative: no change for the template, [`ColumnSums`] of the
/// change for the vector.
///
/// ```
/// use revdiff::{Map, RepeatRows};
/// use ndarray::array;
/// let like = array![[0.0, 0.0], [0.0, 0.0]];
/// assert_eq!(RepeatRows.forward(&(like, array![1.0, 2.0])).unwrap(), array![[1.0, 2.0], [1.0, 2.0]]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct RepeatRows;

impl Compose for ColumnSums {}
impl Compose for RepeatRows {}

impl<T: Real> Map<Array2<T>> for ColumnSums {
    type Output = Array1<T>;
    type Memo = usize;
    fn forward(&self, x: &Array2<T>) -> Result<Array1<T>> {
        Ok(x.sum_axis(Axis(0)))
    }
    fn forward_memo(&self, x: &Array2<T>) -> Result<(Array1<T>, usize)> {
        Ok((self.forward(x)?, x.nrows()))
    }
    fn backward_memo(&self, rows: &usize, dy: &Array1<T>) -> Result<Array2<T>> {
        Ok(repeat_rows(*rows, dy))
    }
}

fn repeat_rows<T: Real>(rows: usize, b: &Array1<T>) -> Array2<T> {
    b.broadcast((rows, b.len()))
        .expect("a vector broadcasts over any number of rows")
        .to_owned()
}

impl<T: Real> Reverse<Array2<T>> for ColumnSums {
    type Rev = Then<Pair<Fst, Snd>, RepeatRows>;
    fn rev(&self) -> Self::Rev {
        Fst.pair(Snd).then(RepeatRows)
    }
}

impl<T: Real> Linear<Array2<T>> for ColumnSums {}

impl<T: Real> Map<(Array2<T>, Array1<T>)> for RepeatRows {
    type Output = Array2<T>;
    /// The template's shape and the vector's length.
    type Memo = ((usize, usize), usize);
    fn forward(&self, (x, b): &(Array2<T>, Array1<T>)) -> Result<Array2<T>> {
        Ok(repeat_rows(x.nrows(), b))
    }
    fn forward_memo(&self, input: &(Array2<T>, Array1<T>)) -> Result<(Array2<T>, Self::Memo)> {
        Ok((self.forward(input)?, (input.0.dim(), input.1.len())))
    }
    fn backward_memo(
        &self,
        (template, len): &Self::Memo,
        dy: &Array2<T>,
    ) -> Result<(Array2<T>, Array1<T>)> {
        if dy.dim() != (template.0, *len) {
            return Err(Error::OutputChangeShape {
                map: "repeat rows",
                expected: shape_tuple(&[template.0, *len]),
                found: shape_tuple(dy.shape()),
            });
        }
        Ok((Array2::zeros(*template), dy.sum_axis(Axis(0))))
    }
}

/// `((X, b), dY) -> (0, 1' dY)`.
pub type RepeatRowsRev = Pair<Then<Then<Fst, Fst>, ZeroMap>, Then<Snd, ColumnSums>>;

impl<T: Real> Reverse<(Array2<T>, Array1<T>)> for RepeatRows {
    type Rev = RepeatRowsRev;
    fn rev(&self) -> Self::Rev {
        Fst.then(Fst).then(ZeroMap).pair(Snd.then(ColumnSums))
    }
}

impl<T: Real> Linear<(Array2<T>, Array1<T>)> for RepeatRows {}

/// The input of the batched affine map: `((W, b), X)` with one example per
/// row of `X`.
pub type AffineBatch<T> = ((Array2<T>, Array1<T>), Array2<T>);

/// `((W, b), X) -> X W' + 1 b'` written with combinators: [`Affine`] on a
/// batch.
pub type AffineBatchComposite = Then<
    Pair<Then<Pair<Snd, Then<Fst, Fst>>, MatMul>, Then<Pair<Snd, Then<Fst, Snd>>, RepeatRows>>,
    AddPair,
>;

/// The batched affine map as a composite of catalogue pieces; equal to
/// [`Affine`] on a matrix of rows.
pub fn affine_batch_composite() -> AffineBatchComposite {
    Snd.pair(Fst.then(Fst))
        .then(MatMul::new(false, true, false))
        .pair(Snd.pair(Fst.then(Snd)).then(RepeatRows))
        .then(AddPair)
}

/// Checks `W` `(m, n)`, `b` `(m,)` and `X` `(k, n)`.
fn check_batch<T>(((w, b), x): &AffineBatch<T>) -> Result<()> {
    check_batch_parts(w, b, x)
}

fn check_batch_parts<T>(w: &Array2<T>, b: &Array1<T>, x: &Array2<T>) -> Result<()> {
    if b.len() != w.nrows() {
        return Err(Error::shape(
            "affine map (bias length must equal weight rows)",
            format!("({},)", w.nrows()),
            shape_tuple(b.shape()),
        ));
    }
    if x.ncols() != w.ncols() {
        return Err(Error::shape(
            "affine map on a batch (each row's length must equal the weight columns)",
            format!("(_, {})", w.ncols()),
            shape_tuple(x.shape()),
        ));
    }
    Ok(())
}

impl<T: Real> Map<AffineBatch<T>> for Affine {
    type Output = Array2<T>;
    type Memo = (Array2<T>, Array2<T>);
    fn forward(&self, input: &AffineBatch<T>) -> Result<Array2<T>> {
        check_batch(input)?;
        let ((w, b), x) = input;
        // Start from the bias in every row, then one product adds X W'.
        let mut y = repeat_rows(x.nrows(), b);
        T::product_into(T::one(), x.view(), w.t(), T::one(), y.view_mut());
        Ok(y)
    }
    fn forward_memo(&self, input: &AffineBatch<T>) -> Result<(Array2<T>, Self::Memo)> {
        let y = self.forward(input)?;
        let ((w, _), x) = input;
        Ok((y, (w.clone(), x.clone())))
    }
    fn backward_memo(&self, (w, x): &Self::Memo, dy: &Array2<T>) -> Result<AffineBatch<T>> {
        check_output_change(x.nrows(), w.nrows(), dy)?;
        // dW = dY' X, db = 1' dY, dX = dY W: three kernel calls, no strided loops.
        let dw = product(dy.t(), x.view());
        let db = dy.sum_axis(Axis(0));
        let dx = product(dy.view(), w.view());
        Ok(((dw, db), dx))
    }
}

fn check_output_change<T>(rows: usize, outputs: usize, dy: &Array2<T>) -> Result<()> {
    if dy.dim() != (rows, outputs) {
        return Err(Error::OutputChangeShape {
            map: "affine map",
            expected: shape_tuple(&[rows, outputs]),
            found: shape_tuple(dy.shape()),
        });
    }
    Ok(())
}

/// The batched affine map with its weights, bias and rows borrowed: the
/// output goes into the workspace's buffer, the changes into the caller's,
/// each by one matrix product; nothing is kept.
impl<T: Real> SplitInput<(Array2<T>, Array1<T>), Array2<T>> for Affine {
    fn forward_split<'w>(
        &self,
        (w, b): &(Array2<T>, Array1<T>),
        x: &Array2<T>,
        work: &'w mut Workspace,
    ) -> Result<&'w Array2<T>> {
        check_batch_parts(w, b, x)?;
        let shape = (x.nrows(), w.nrows());
        let y = work.output_or_insert_with(|| Array2::<T>::zeros(shape));
        if y.dim() != shape {
            *y = Array2::zeros(shape);
        }
        // Start from the bias in every row, then one product adds X W'.
        match (y.as_slice_mut(), b.as_slice()) {
            (Some(rows), Some(b)) if !b.is_empty() => rows
                .chunks_exact_mut(b.len())
                .for_each(|row| row.copy_from_slice(b)),
            _ => y.assign(&b.broadcast(shape).expect("the bias length was checked")),
        }
        T::product_into(T::one(), x.view(), w.t(), T::one(), y.view_mut());
        Ok(y)
    }
    fn backward_split(
        &self,
        (w, b): &(Array2<T>, Array1<T>),
        x: &Array2<T>,
        _work: &mut Workspace,
        dy: &Array2<T>,
        (dw, db): &mut (Array2<T>, Array1<T>),
        dx: Option<&mut Array2<T>>,
    ) -> Result<()> {
        check_batch_parts(w, b, x)?;
        check_output_change(x.nrows(), w.nrows(), dy)?;
        reshape_to(dw, w);
        reshape_to(db, b);
        T::product_into(T::one(), dy.t(), x.view(), T::zero(), dw.view_mut());
        column_totals(dy, db);
        if let Some(dx) = dx {
            reshape_to(dx, x);
            T::product_into(T::one(), dy.view(), w.view(), T::zero(), dx.view_mut());
        }
        Ok(())
    }
}

/// The total of each column of `m` into `totals` (of `m`'s column count),
/// row after row: contiguous rows through plain slices, compiled for the
/// widest vector instructions; others through a `Zip`.
fn column_totals<T: Real>(m: &Array2<T>, totals: &mut Array1<T>) {
    totals.fill(T::zero());
    if let (Some(all), Some(t)) = (m.as_slice(), totals.as_slice_mut())
        && !t.is_empty()
    {
        crate::vectors::widest_for(all.len(), || {
            for row in all.chunks_exact(t.len()) {
                t.iter_mut().zip(row).for_each(|(s, &r)| *s = *s + r);
            }
        });
        return;
    }
    for row in m.rows() {
        Zip::from(&mut *totals)
            .and(&row)
            .for_each(|s, &r| *s = *s + r);
    }
}

/// One example at a time: the memo passes.
impl<T: Real> SplitInput<(Array2<T>, Array1<T>), Array1<T>> for Affine {}

impl<T: Real> Reverse<AffineBatch<T>> for Affine {
    type Rev = <AffineBatchComposite as Reverse<AffineBatch<T>>>::Rev;
    fn rev(&self) -> Self::Rev {
        Reverse::<AffineBatch<T>>::rev(&affine_batch_composite())
    }
}
