//! Per-example pieces on batches: a model or a loss written for one example
//! (one row), lifted to a matrix of rows.
//!
//! The batched path (maps that act on a whole matrix, such as
//! [`Affine`](crate::Affine) and the elementwise maps) is the fast one: one
//! matrix product per stage. These liftings run the per-example piece once
//! per row, so that a scalar curve, a hand-written per-row kernel or a
//! per-example loss still trains with [`Training`](crate::Training). Both
//! are first-order maps: they have backward passes, not reverse maps.

use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::space::{Real, Space, shape_tuple};
use crate::workspace::SplitInput;
use ndarray::{Array1, Array2, ArrayView1, Axis};

/// A model for one example, `(P, x) -> y` with vectors `x` and `y`, lifted
/// to a batch `(P, X) -> Y`: row `i` of `Y` is the model at row `i` of `X`.
/// Its parameter change is the sum of the rows' changes.
///
/// Each row gets its own copy of the parameters (the per-example model takes
/// them by value in its input pair), so this is the slow path: prefer maps
/// that act on batches where they exist.
///
/// ```
/// use revdiff::{Affine, Map, Rowwise};
/// use ndarray::array;
///
/// let params = (array![[2.0, 0.0], [0.0, 3.0]], array![1.0, 1.0]);
/// let x = array![[1.0, 1.0], [2.0, -1.0]];
/// // Row by row, the same as the batched affine map.
/// let by_rows = Rowwise::new(Affine).forward(&(params.clone(), x.clone())).unwrap();
/// assert_eq!(by_rows, Affine.forward(&(params, x)).unwrap());
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Rowwise<M> {
    /// The per-example model.
    pub model: M,
}

impl<M> Rowwise<M> {
    /// `model`, applied to each row of a batch.
    pub fn new(model: M) -> Self {
        Rowwise { model }
    }
}

impl<M: Compose> Compose for Rowwise<M> {
    fn boxed_depth(&self) -> usize {
        self.model.boxed_depth()
    }
}

/// Stacks equal-length rows into a matrix; `what` names them in the error.
fn stack_rows<T: Real>(
    what: &'static str,
    rows: Vec<Array1<T>>,
    width: usize,
) -> Result<Array2<T>> {
    if let Some(bad) = rows.iter().find(|r| r.len() != width) {
        return Err(Error::shape(
            what,
            format!("({width},)"),
            shape_tuple(bad.shape()),
        ));
    }
    let n = rows.len();
    let flat: Vec<T> = rows.into_iter().flat_map(|r| r.into_iter()).collect();
    Array2::from_shape_vec((n, width), flat).map_err(|e| Error::shape(what, "rows", e))
}

fn nonempty_rows<T>(operation: &'static str, x: &Array2<T>) -> Result<()> {
    if x.nrows() == 0 {
        return Err(Error::Empty { operation });
    }
    Ok(())
}

impl<T, P, M> Map<(P, Array2<T>)> for Rowwise<M>
where
    T: Real,
    P: Space,
    M: Map<(P, Array1<T>), Output = Array1<T>>,
{
    type Output = Array2<T>;
    type Memo = (P::Shape, usize, Vec<M::Memo>);
    fn forward_memo(&self, (p, x): &(P, Array2<T>)) -> Result<(Array2<T>, Self::Memo)> {
        nonempty_rows("row-wise model", x)?;
        let mut outputs = Vec::with_capacity(x.nrows());
        let mut memos = Vec::with_capacity(x.nrows());
        for row in x.rows() {
            let (y, memo) = self.model.forward_memo(&(p.clone(), row.to_owned()))?;
            outputs.push(y);
            memos.push(memo);
        }
        let width = outputs[0].len();
        let y = stack_rows("row-wise model (every row's output)", outputs, width)?;
        Ok((y, (p.shape(), x.ncols(), memos)))
    }
    fn backward_memo(
        &self,
        (p_shape, width, memos): &Self::Memo,
        dy: &Array2<T>,
    ) -> Result<(P, Array2<T>)> {
        if dy.nrows() != memos.len() {
            return Err(Error::OutputChangeShape {
                map: "row-wise model",
                expected: format!("({}, _)", memos.len()),
                found: shape_tuple(dy.shape()),
            });
        }
        let mut dp = P::zero_of(p_shape);
        let mut dx = Vec::with_capacity(memos.len());
        for (memo, d) in memos.iter().zip(dy.rows()) {
            let (dpi, dxi) = self.model.backward_memo(memo, &d.to_owned())?;
            dp.try_add_assign(&dpi)?;
            dx.push(dxi);
        }
        Ok((
            dp,
            stack_rows("row-wise model (input changes)", dx, *width)?,
        ))
    }
}

/// A loss for one example, `(y, t) -> l` with vectors `y` and `t`, lifted to
/// a batch: the mean of the rows' losses. Its backward pass gives each row
/// its own change, divided by the row count.
///
/// ```
/// use revdiff::{LogitCrossEntropy, Map, RowMean};
/// use ndarray::array;
///
/// let z = array![[2.0, 0.0], [0.0, 0.0]];
/// let t = array![[1.0, 0.0], [0.0, 1.0]];
/// let mean: f64 = RowMean::new(LogitCrossEntropy).forward(&(z.clone(), t.clone())).unwrap();
/// // Cross-entropy sums over a batch's rows; the lifting averages them.
/// let sum = LogitCrossEntropy.forward(&(z, t)).unwrap();
/// assert!((mean - sum / 2.0).abs() < 1e-15);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct RowMean<L> {
    /// The per-example loss.
    pub loss: L,
}

impl<L> RowMean<L> {
    /// The mean of `loss` over the rows of a batch.
    pub fn new(loss: L) -> Self {
        RowMean { loss }
    }
}

impl<L: Compose> Compose for RowMean<L> {
    fn boxed_depth(&self) -> usize {
        self.loss.boxed_depth()
    }
}

impl<T, P, M> SplitInput<P, Array2<T>> for Rowwise<M>
where
    T: Real,
    P: Space,
    M: Map<(P, Array1<T>), Output = Array1<T>>,
{
}

impl<T, L> SplitInput<Array2<T>, Array2<T>> for RowMean<L>
where
    T: Real,
    L: Map<(Array1<T>, Array1<T>), Output = T>,
{
}

impl<T, L> Map<(Array2<T>, Array2<T>)> for RowMean<L>
where
    T: Real,
    L: Map<(Array1<T>, Array1<T>), Output = T>,
{
    type Output = T;
    type Memo = ((usize, usize), Vec<L::Memo>);
    fn forward_memo(&self, (y, t): &(Array2<T>, Array2<T>)) -> Result<(T, Self::Memo)> {
        nonempty_rows("row-mean loss", y)?;
        if y.dim() != t.dim() {
            return Err(Error::shape(
                "row-mean loss (targets against predictions)",
                shape_tuple(y.shape()),
                shape_tuple(t.shape()),
            ));
        }
        let n = T::from(y.nrows()).expect("row counts fit every real type");
        let mut total = T::zero();
        let mut memos = Vec::with_capacity(y.nrows());
        for (yi, ti) in y.rows().into_iter().zip(t.rows()) {
            let (l, memo) = self.loss.forward_memo(&(yi.to_owned(), ti.to_owned()))?;
            total = total + l;
            memos.push(memo);
        }
        Ok((total / n, (y.dim(), memos)))
    }
    fn backward_memo(&self, (dim, memos): &Self::Memo, dl: &T) -> Result<(Array2<T>, Array2<T>)> {
        let share = *dl / T::from(memos.len()).expect("row counts fit every real type");
        let mut dy = Array2::zeros(*dim);
        let mut dt = Array2::zeros(*dim);
        for ((memo, mut dyi), mut dti) in memos
            .iter()
            .zip(dy.axis_iter_mut(Axis(0)))
            .zip(dt.axis_iter_mut(Axis(0)))
        {
            let (a, b) = self.loss.backward_memo(memo, &share)?;
            assign_row(&mut dyi, &a, "row-mean loss (prediction change)")?;
            assign_row(&mut dti, &b, "row-mean loss (target change)")?;
        }
        Ok((dy, dt))
    }
}

fn assign_row<T: Real>(
    into: &mut ndarray::ArrayViewMut1<T>,
    from: &Array1<T>,
    what: &'static str,
) -> Result<()> {
    if into.len() != from.len() {
        return Err(Error::shape(
            what,
            format!("({},)", into.len()),
            shape_tuple(from.shape()),
        ));
    }
    into.assign(&ArrayView1::from(from));
    Ok(())
}
