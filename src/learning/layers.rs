//! Trainable models assembled at run time: depth, widths and activations
//! read from a configuration rather than written as types.

use crate::dynamic::{Boxed, BoxedMemo};
use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::memory::HeldBytes;
use crate::products::product;
use crate::space::{Real, shape_tuple};
use crate::workspace::{SplitInput, Workspace, reshape_to, shaped_like};
use ndarray::{Array1, Array2, Axis, Zip};
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use std::fmt;

/// The parameters of [`Layers`]: one `(weights, bias)` pair per affine
/// stage, in order. A list of spaces is itself a space, so optimisers and
/// [`Training`](crate::Training) take it as they take a tuple.
pub type LayerParameters<T> = Vec<(Array2<T>, Array1<T>)>;

#[derive(Clone)]
enum Stage<T> {
    /// Affine stage: `(rows, inputs) -> (rows, outputs)`, parameters at `slot`.
    Affine {
        inputs: usize,
        outputs: usize,
        slot: usize,
    },
    /// A parameter-free map on the batch, keeping its width.
    Elementwise {
        name: String,
        map: Boxed<Array2<T>, Array2<T>>,
    },
}

/// A trainable model assembled at run time: affine stages with their own
/// parameters and parameter-free stages between them, acting on a batch (a
/// matrix whose rows are examples). Its parameters are
/// [`LayerParameters`]; [`Training`](crate::Training) trains it like any
/// parametrised map.
///
/// Widths are checked as the model is assembled, and the parameters are
/// checked against the stages at every pass, naming the stage that does
/// not fit. It is a first-order map (a backward pass, no reverse map).
///
/// # Example
///
/// Depth and widths read from a configuration string:
///
/// ```
/// use revdiff::{Adam, Examples, Layers, MeanSquaredError, Tanh, Training};
/// use ndarray::Array2;
///
/// let config = "2, 8, 8, 1"; // widths, input first
/// let widths: Vec<usize> = config.split(',').map(|w| w.trim().parse().unwrap()).collect();
/// let mut model = Layers::<f64>::new(widths[0]).unwrap();
/// for (i, &w) in widths[1..].iter().enumerate() {
///     model = model.affine(w).unwrap();
///     if i + 2 < widths.len() {
///         model = model.elementwise("tanh", Tanh);
///     }
/// }
/// assert_eq!(model.to_string(), "2 -> affine 8 -> tanh -> affine 8 -> tanh -> affine 1");
///
/// let x = Array2::from_shape_fn((32, 2), |(i, j)| ((i + j) % 7) as f64 / 7.0);
/// let y = x.sum_axis(ndarray::Axis(1)).insert_axis(ndarray::Axis(1));
/// let data = Examples::new(x, y).unwrap();
/// let start = model.initial_parameters(7);
/// let run = Training::new(50, 8).unwrap()
///     .run(&model, &MeanSquaredError, &mut Adam::new(0.01).unwrap(), start, &data, |_| {})
///     .unwrap();
/// assert!(run.epoch_losses.last() < run.epoch_losses.first());
/// ```
#[derive(Clone)]
pub struct Layers<T> {
    input_width: usize,
    width: usize,
    slots: usize,
    stages: Vec<Stage<T>>,
}

impl<T> Compose for Layers<T> {
    fn boxed_depth(&self) -> usize {
        self.stages
            .iter()
            .map(|s| match s {
                Stage::Affine { .. } => 0,
                Stage::Elementwise { map, .. } => map.boxed_depth(),
            })
            .max()
            .unwrap_or(0)
    }
}

impl<T> fmt::Debug for Layers<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Layers({self})")
    }
}

impl<T> fmt::Display for Layers<T> {
    /// The stages in order: `2 -> affine 8 -> tanh -> affine 1`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.input_width)?;
        for stage in &self.stages {
            match stage {
                Stage::Affine { outputs, .. } => write!(f, " -> affine {outputs}")?,
                Stage::Elementwise { name, .. } => write!(f, " -> {name}")?,
            }
        }
        Ok(())
    }
}

impl<T: Real> Layers<T> {
    /// A model with no stages yet, taking rows of `input_width` values (at
    /// least 1).
    pub fn new(input_width: usize) -> Result<Self> {
        positive_width("input width", input_width)?;
        Ok(Layers {
            input_width,
            width: input_width,
            slots: 0,
            stages: Vec::new(),
        })
    }

    /// Appends an affine stage with `outputs` outputs (at least 1) and
    /// parameters of its own.
    pub fn affine(mut self, outputs: usize) -> Result<Self> {
        positive_width("affine outputs", outputs)?;
        self.stages.push(Stage::Affine {
            inputs: self.width,
            outputs,
            slot: self.slots,
        });
        self.slots += 1;
        self.width = outputs;
        Ok(self)
    }

    /// Appends a parameter-free map on the batch that keeps its shape (an
    /// elementwise map such as [`Tanh`](crate::Tanh)); `name` shows in
    /// messages and in the model's `Display`.
    pub fn elementwise<F, M>(mut self, name: &str, map: F) -> Self
    where
        F: Map<Array2<T>, Output = Array2<T>, Memo = M> + Send + Sync + 'static,
        M: HeldBytes + 'static,
    {
        self.stages.push(Stage::Elementwise {
            name: name.to_string(),
            map: Boxed::unchecked(map),
        });
        self
    }

    /// The width of the model's output rows.
    pub fn output_width(&self) -> usize {
        self.width
    }

    /// Starting parameters: weights uniform in `+-1/sqrt(inputs)` from a
    /// generator seeded with `seed`, biases zero.
    pub fn initial_parameters(&self, seed: u64) -> LayerParameters<T> {
        let mut rng = StdRng::seed_from_u64(seed);
        self.affine_shapes()
            .map(|(inputs, outputs)| {
                let bound = 1.0 / (inputs as f64).sqrt();
                let w = Array2::from_shape_fn((outputs, inputs), |_| {
                    let u: f64 = rng.random();
                    T::from((2.0 * u - 1.0) * bound).expect("small values fit every real type")
                });
                (w, Array1::zeros(outputs))
            })
            .collect()
    }

    fn affine_shapes(&self) -> impl Iterator<Item = (usize, usize)> + '_ {
        self.stages.iter().filter_map(|s| match s {
            Stage::Affine {
                inputs, outputs, ..
            } => Some((*inputs, *outputs)),
            Stage::Elementwise { .. } => None,
        })
    }

    /// Checks the parameters against the stages and the batch's width.
    fn check(&self, params: &LayerParameters<T>, x: &Array2<T>) -> Result<()> {
        if x.ncols() != self.input_width {
            return Err(Error::shape(
                "run-time model, its input rows",
                format!("(_, {})", self.input_width),
                shape_tuple(x.shape()),
            ));
        }
        if params.len() != self.slots {
            return Err(Error::shape(
                "run-time model, its parameters",
                format!("{} (weights, bias) pairs", self.slots),
                format!("{} pairs", params.len()),
            ));
        }
        for (k, ((inputs, outputs), (w, b))) in self.affine_shapes().zip(params).enumerate() {
            if w.dim() != (outputs, inputs) || b.len() != outputs {
                return Err(Error::ShapeMismatch {
                    operation: "run-time model, the parameters of an affine stage",
                    expected: format!(
                        "stage {k}: weights ({outputs}, {inputs}), bias ({outputs},)"
                    ),
                    found: format!(
                        "weights {}, bias {}",
                        shape_tuple(w.shape()),
                        shape_tuple(b.shape())
                    ),
                });
            }
        }
        Ok(())
    }
}

fn positive_width(name: &'static str, width: usize) -> Result<()> {
    if width == 0 {
        return Err(Error::InvalidSetting {
            name,
            value: "0".to_string(),
            reason: "must be at least 1",
        });
    }
    Ok(())
}

/// What one stage keeps for the backward pass.
pub enum StageMemo<T> {
    /// An affine stage: its input rows and its weights.
    Affine(Array2<T>, Array2<T>),
    /// A parameter-free stage's own memo.
    Elementwise(BoxedMemo),
}

impl<T> HeldBytes for StageMemo<T> {
    fn held_bytes(&self) -> usize {
        match self {
            StageMemo::Affine(x, w) => x.held_bytes() + w.held_bytes(),
            StageMemo::Elementwise(memo) => memo.held_bytes(),
        }
    }
}

impl<T> fmt::Debug for StageMemo<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            StageMemo::Affine(..) => "StageMemo::Affine",
            StageMemo::Elementwise(_) => "StageMemo::Elementwise",
        })
    }
}

/// What [`Layers`]' reusing passes keep: every stage's workspace (an
/// affine stage's holds its output only) and a buffer for the change of
/// every value between stages.
struct LayersWork<T> {
    stages: Vec<Workspace>,
    changes: Vec<Option<Array2<T>>>,
}

impl<T: Real> Layers<T> {
    /// The output stage `k` left in its workspace.
    fn stage_output<'w>(&self, k: usize, work: &'w Workspace) -> Result<&'w Array2<T>> {
        match &self.stages[k] {
            Stage::Affine { .. } => work.output(),
            Stage::Elementwise { map, .. } => map.reused_output(work),
        }
    }
}

/// The stages read their parameters where they are and write into kept
/// buffers: no copies, and no allocation once the workspace is filled.
impl<T: Real> SplitInput<LayerParameters<T>, Array2<T>> for Layers<T> {
    fn forward_split<'w>(
        &self,
        params: &LayerParameters<T>,
        x: &Array2<T>,
        work: &'w mut Workspace,
    ) -> Result<&'w Array2<T>> {
        self.check(params, x)?;
        let n = self.stages.len();
        if n == 0 {
            work.put_output(x.clone());
            return work.output();
        }
        let w = work.state_or_insert_with(|| LayersWork::<T> {
            stages: Vec::new(),
            changes: Vec::new(),
        });
        w.stages.resize_with(n, Workspace::new);
        w.changes.resize_with(n, || None);
        for k in 0..n {
            let (before, rest) = w.stages.split_at_mut(k);
            let input = match before.last() {
                Some(previous) => self.stage_output(k - 1, previous)?,
                None => x,
            };
            match &self.stages[k] {
                Stage::Affine { slot, outputs, .. } => {
                    let (wt, b) = &params[*slot];
                    let shape = (input.nrows(), *outputs);
                    let y = rest[0].output_or_insert_with(|| Array2::<T>::zeros(shape));
                    if y.dim() != shape {
                        *y = Array2::zeros(shape);
                    }
                    y.assign(&b.broadcast(shape).expect("the bias was checked"));
                    T::product_into(T::one(), input.view(), wt.t(), T::one(), y.view_mut());
                }
                Stage::Elementwise { map, .. } => {
                    map.forward_reusing(input, &mut rest[0])?;
                }
            }
        }
        self.reused_output(work)
    }
    fn backward_split(
        &self,
        params: &LayerParameters<T>,
        x: &Array2<T>,
        work: &mut Workspace,
        dy: &Array2<T>,
        dp: &mut LayerParameters<T>,
        mut dx: Option<&mut Array2<T>>,
    ) -> Result<()> {
        self.check(params, x)?;
        let n = self.stages.len();
        if n == 0 {
            if let Some(dx) = dx {
                dx.clone_from(dy);
            }
            *dp = Vec::new();
            return Ok(());
        }
        let w = work.state_mut::<LayersWork<T>>()?;
        if w.stages.len() != n {
            return Err(Error::WorkspaceNotFilled {
                operation: "backward pass of a run-time model (its stages changed since the forward pass)",
            });
        }
        reshape_to(dp, params);
        for k in (0..n).rev() {
            let (before, rest) = w.stages.split_at_mut(k);
            let input = match before.last() {
                Some(previous) => self.stage_output(k - 1, previous)?,
                None => x,
            };
            let (lower, upper) = w.changes.split_at_mut(k);
            let change = if k + 1 == n {
                dy
            } else {
                upper[0].as_ref().expect("written by stage k + 1")
            };
            // The change of this stage's input: the previous stage's buffer,
            // the caller's, or none for the first stage when none is asked.
            let into = match lower.last_mut() {
                Some(slot) => Some(shaped_like(slot, input)),
                None => {
                    if let Some(d) = dx.as_deref_mut() {
                        reshape_to(d, input);
                    }
                    dx.as_deref_mut()
                }
            };
            match &self.stages[k] {
                Stage::Affine { slot, outputs, .. } => {
                    if change.dim() != (input.nrows(), *outputs) {
                        return Err(Error::OutputChangeShape {
                            map: "run-time model (an affine stage)",
                            expected: shape_tuple(&[input.nrows(), *outputs]),
                            found: shape_tuple(change.shape()),
                        });
                    }
                    let (gw, gb) = &mut dp[*slot];
                    T::product_into(T::one(), change.t(), input.view(), T::zero(), gw.view_mut());
                    gb.fill(T::zero());
                    for row in change.rows() {
                        Zip::from(&mut *gb).and(&row).for_each(|s, &r| *s = *s + r);
                    }
                    if let Some(into) = into {
                        T::product_into(
                            T::one(),
                            change.view(),
                            params[*slot].0.view(),
                            T::zero(),
                            into.view_mut(),
                        );
                    }
                }
                Stage::Elementwise { map, .. } => {
                    if let Some(into) = into {
                        map.backward_reusing(input, &mut rest[0], change, into)?;
                    }
                }
            }
        }
        Ok(())
    }
}

impl<T: Real> Map<(LayerParameters<T>, Array2<T>)> for Layers<T> {
    type Output = Array2<T>;
    type Memo = Vec<StageMemo<T>>;
    fn forward_memo(
        &self,
        (params, x): &(LayerParameters<T>, Array2<T>),
    ) -> Result<(Array2<T>, Self::Memo)> {
        self.check(params, x)?;
        let mut memos = Vec::with_capacity(self.stages.len());
        let mut current = x.clone();
        for stage in &self.stages {
            current = match stage {
                Stage::Affine { slot, .. } => {
                    let (w, b) = &params[*slot];
                    let mut y = b
                        .broadcast((current.nrows(), b.len()))
                        .expect("a vector broadcasts over rows")
                        .to_owned();
                    T::product_into(T::one(), current.view(), w.t(), T::one(), y.view_mut());
                    memos.push(StageMemo::Affine(current, w.clone()));
                    y
                }
                Stage::Elementwise { map, .. } => {
                    let (y, memo) = map.forward_memo(&current)?;
                    memos.push(StageMemo::Elementwise(memo));
                    y
                }
            };
        }
        Ok((current, memos))
    }
    fn backward_memo(
        &self,
        memos: &Self::Memo,
        dy: &Array2<T>,
    ) -> Result<(LayerParameters<T>, Array2<T>)> {
        let mut grads: Vec<Option<(Array2<T>, Array1<T>)>> = vec![None; self.slots];
        let mut change = dy.clone();
        for (stage, memo) in self.stages.iter().zip(memos).rev() {
            change = match (stage, memo) {
                (Stage::Affine { slot, outputs, .. }, StageMemo::Affine(x, w)) => {
                    if change.dim() != (x.nrows(), *outputs) {
                        return Err(Error::OutputChangeShape {
                            map: "run-time model (an affine stage)",
                            expected: shape_tuple(&[x.nrows(), *outputs]),
                            found: shape_tuple(change.shape()),
                        });
                    }
                    grads[*slot] = Some((product(change.t(), x.view()), change.sum_axis(Axis(0))));
                    product(change.view(), w.view())
                }
                (Stage::Elementwise { map, .. }, StageMemo::Elementwise(m)) => {
                    map.backward_memo(m, &change)?
                }
                _ => {
                    return Err(Error::ForeignMemo {
                        operation: "run-time model",
                    });
                }
            };
        }
        let grads = grads
            .into_iter()
            .map(|g| {
                g.ok_or(Error::ForeignMemo {
                    operation: "run-time model",
                })
            })
            .collect::<Result<_>>()?;
        Ok((grads, change))
    }
    // After `forward_split`, the last stage's output; after the default
    // `forward_reusing`, where that put it.
    fn reused_output<'w>(&self, work: &'w Workspace) -> Result<&'w Array2<T>> {
        match work.state::<LayersWork<T>>() {
            Ok(w) if !self.stages.is_empty() && w.stages.len() == self.stages.len() => {
                let last = self.stages.len() - 1;
                self.stage_output(last, &w.stages[last])
            }
            _ => work.output(),
        }
    }
}
