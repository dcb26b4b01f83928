//! The minibatch training loop: a parametrised model, a loss, an optimiser
//! and an in-memory dataset of ndarray rows.

use super::mailbox::{CloseOnDrop, Mailbox};
use crate::error::{Error, Result};
use crate::learning::optimise::{Optimiser, step_finite};
use crate::map::Map;
use crate::space::{Euclidean, Real, Space};
use crate::workspace::{SplitInput, Workspace, reshape_to};
use ndarray::{Array1, Array2, Axis, Slice};
use rand::SeedableRng;
use rand::rngs::StdRng;
use rand::seq::SliceRandom;
use std::borrow::Cow;
use std::fmt;
use std::ops::ControlFlow;
use std::sync::{Mutex, MutexGuard, RwLock};

/// Examples as rows: row `i` of the inputs goes with row `i` of the targets.
///
/// ```
/// use revdiff::Examples;
/// use ndarray::array;
/// let data = Examples::new(array![[1.0], [2.0]], array![[2.0], [4.0]]).unwrap();
/// assert_eq!(data.len(), 2);
/// assert!(Examples::new(array![[1.0], [2.0]], array![[2.0]]).is_err());
/// assert!(Examples::new(array![[f64::NAN]], array![[2.0]]).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct Examples<T> {
    inputs: Array2<T>,
    targets: Array2<T>,
}

impl<T: Real> Examples<T> {
    /// A dataset from input rows and target rows. Refuses no rows
    /// ([`Error::Empty`]), different row counts ([`Error::RowCountMismatch`]) and
    /// non-finite values ([`Error::NonFinite`], naming the row).
    pub fn new(inputs: Array2<T>, targets: Array2<T>) -> Result<Self> {
        if inputs.nrows() != targets.nrows() {
            return Err(Error::RowCountMismatch {
                inputs: inputs.nrows(),
                targets: targets.nrows(),
            });
        }
        if inputs.nrows() == 0 {
            return Err(Error::Empty {
                operation: "dataset",
            });
        }
        for (name, values) in [("input", &inputs), ("target", &targets)] {
            if let Some((row, _)) = values
                .axis_iter(Axis(0))
                .enumerate()
                .find(|(_, r)| r.iter().any(|v| !v.is_finite()))
            {
                return Err(Error::NonFinite {
                    operation: "dataset",
                    detail: format!("in {name} row {row}"),
                });
            }
        }
        Ok(Examples { inputs, targets })
    }

    /// Reads examples from CSV text with a header row: the columns named in
    /// `inputs` become the input rows and those in `targets` the target rows,
    /// in the order named; other columns are ignored. Every value must parse
    /// as a finite number.
    ///
    /// Errors name the place: a missing column ([`Error::Csv`] at the
    /// header), a value that is not a number or a row of the wrong length
    /// ([`Error::Csv`] with the data row, counted from 0, and the column), a
    /// non-finite value ([`Error::NonFinite`]), or no data rows
    /// ([`Error::Empty`]).
    ///
    /// ```
    /// use revdiff::Examples;
    ///
    /// let text = "width,height,mass\n1.0,2.0,0.5\n2.0,1.5,0.75\n";
    /// let data = Examples::<f64>::read_csv(text.as_bytes(), &["width", "height"], &["mass"]).unwrap();
    /// assert_eq!(data.len(), 2);
    /// assert_eq!(data.targets()[[1, 0]], 0.75);
    ///
    /// let bad = "width,height,mass\n1.0,two,0.5\n";
    /// let err = Examples::<f64>::read_csv(bad.as_bytes(), &["width", "height"], &["mass"]).unwrap_err();
    /// assert_eq!(err.to_string(), "CSV row 0, column 1 (\"height\"): cannot read \"two\" as a number");
    /// ```
    pub fn read_csv(reader: impl std::io::Read, inputs: &[&str], targets: &[&str]) -> Result<Self> {
        let mut csv = csv::ReaderBuilder::new()
            .has_headers(true)
            .trim(csv::Trim::All)
            .from_reader(reader);
        let header = csv.headers().map_err(|e| Error::Csv {
            location: "header".to_string(),
            problem: e.to_string(),
        })?;
        let names: Vec<String> = header.iter().map(str::to_string).collect();
        let find = |wanted: &[&str]| -> Result<Vec<usize>> {
            wanted
                .iter()
                .map(|w| {
                    names.iter().position(|n| n == w).ok_or_else(|| Error::Csv {
                        location: "header".to_string(),
                        problem: format!("no column named \"{w}\" (the columns are {names:?})"),
                    })
                })
                .collect()
        };
        let (input_columns, target_columns) = (find(inputs)?, find(targets)?);
        let (mut x, mut t) = (Vec::new(), Vec::new());
        let mut rows = 0;
        for (row, record) in csv.records().enumerate() {
            let record = record.map_err(|e| Error::Csv {
                location: format!("row {row}"),
                problem: e.to_string(),
            })?;
            let value = |column: usize| -> Result<T> {
                let text = record.get(column).ok_or_else(|| Error::Csv {
                    location: format!("row {row}"),
                    problem: format!("{} fields, but column {column} was asked for", record.len()),
                })?;
                let place = format!("row {row}, column {column} (\"{}\")", names[column]);
                let v: f64 = text.parse().map_err(|_| Error::Csv {
                    location: place.clone(),
                    problem: format!("cannot read \"{text}\" as a number"),
                })?;
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        operation: "reading examples from CSV",
                        detail: format!("{text} at {place}"),
                    });
                }
                T::from(v).ok_or_else(|| Error::Csv {
                    location: place,
                    problem: format!("{text} does not fit the element type"),
                })
            };
            for &c in &input_columns {
                x.push(value(c)?);
            }
            for &c in &target_columns {
                t.push(value(c)?);
            }
            rows += 1;
        }
        if rows == 0 {
            return Err(Error::Empty {
                operation: "reading examples from CSV (no data rows)",
            });
        }
        let shaped = |v: Vec<T>, width: usize| {
            Array2::from_shape_vec((rows, width), v)
                .map_err(|e| Error::shape("reading examples from CSV", "rows", e))
        };
        Examples::new(
            shaped(x, input_columns.len())?,
            shaped(t, target_columns.len())?,
        )
    }

    /// Number of examples (at least 1).
    pub fn len(&self) -> usize {
        self.inputs.nrows()
    }

    /// Always false: a dataset has at least one example.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// The input rows.
    pub fn inputs(&self) -> &Array2<T> {
        &self.inputs
    }

    /// The target rows.
    pub fn targets(&self) -> &Array2<T> {
        &self.targets
    }

    /// Example `i` as (input, target).
    pub fn example(&self, i: usize) -> (Array1<T>, Array1<T>) {
        (
            self.inputs.row(i).to_owned(),
            self.targets.row(i).to_owned(),
        )
    }

    fn select(&self, rows: &[usize]) -> Self {
        Examples {
            inputs: self.inputs.select(Axis(0), rows),
            targets: self.targets.select(Axis(0), rows),
        }
    }
}

/// What the observer is told after every step.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Progress<'a, T, P> {
    /// The position of this step among all steps of the run (the first
    /// step is 0).
    pub step: usize,
    /// The epoch of this step (the first epoch is 0).
    pub epoch: usize,
    /// The loss of this step's batch, at the parameters before the update.
    pub loss: T,
    /// Whether this step ended its epoch.
    pub epoch_finished: bool,
    /// On the step that ends an epoch: the epoch's loss, the mean of its
    /// batch losses weighted by their row counts (each taken at the
    /// parameters of its own step), the figure [`Trained::epoch_losses`]
    /// records.
    pub epoch_loss: Option<T>,
    /// At the end of an epoch with early stopping: the loss over the
    /// validation rows, after the update.
    pub validation_loss: Option<T>,
    /// The parameters after this step's update.
    pub parameters: &'a P,
}

/// What an observer's return value says about the run: `()` lets it go
/// on; [`ControlFlow::Break`] stops it after the step just reported, with
/// [`Trained::stopped_by_observer`] set.
pub trait ObserverVerdict {
    /// Whether the run should stop now.
    fn stops(&self) -> bool;
}

impl ObserverVerdict for () {
    fn stops(&self) -> bool {
        false
    }
}

impl ObserverVerdict for ControlFlow<()> {
    fn stops(&self) -> bool {
        self.is_break()
    }
}

/// A finished training run.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct Trained<P, T> {
    /// The parameters: the last ones, or with early stopping those with the
    /// lowest validation loss.
    pub parameters: P,
    /// Parameter updates made.
    pub steps: usize,
    /// Epochs run (an epoch the observer stopped counts).
    pub epochs: usize,
    /// Whether early stopping ended the run before the last epoch.
    pub stopped_early: bool,
    /// Whether the observer stopped the run.
    pub stopped_by_observer: bool,
    /// The loss of each finished epoch: the mean of its batch losses
    /// weighted by their row counts.
    pub epoch_losses: Vec<T>,
    /// Validation loss after each epoch (empty without early stopping).
    pub validation_losses: Vec<T>,
}

/// A training run that could not go on. No work is lost: `parameters` are
/// the most recent good ones, whose loss over the training rows is finite.
#[derive(Clone, Debug, PartialEq)]
pub struct Interrupted<P> {
    /// What went wrong; a non-finite loss, gradient or update is
    /// [`Error::Diverged`] naming the step.
    pub error: Error,
    /// The step that failed (the first step is 0), or `None` when the run
    /// was refused before its first step (bad settings or start).
    pub step: Option<usize>,
    /// The most recent parameters with a finite loss over the training
    /// rows: those before the failing step when they qualify, else those at
    /// the end of the last finished epoch, else the start.
    pub parameters: P,
}

impl<P> fmt::Display for Interrupted<P> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // A divergence already names its step and epoch: say it once.
        match (&self.error, self.step) {
            (Error::Diverged { .. }, _) => write!(f, "training interrupted: {}", self.error),
            (_, Some(step)) => write!(f, "training interrupted at step {step}: {}", self.error),
            (_, None) => write!(f, "training refused before its first step: {}", self.error),
        }
    }
}

impl<P: fmt::Debug> std::error::Error for Interrupted<P> {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        Some(&self.error)
    }
}

/// The settings of a training run, checked at construction.
///
/// # Example
///
/// Fitting `y = 2x + 1` with an affine model, mean squared error and Adam:
///
/// ```
/// use revdiff::{Adam, Affine, Examples, MeanSquaredError, Training};
/// use ndarray::{array, Array2};
///
/// let x = Array2::from_shape_fn((20, 1), |(i, _)| i as f64 / 10.0);
/// let y = x.mapv(|v| 2.0 * v + 1.0);
/// let data = Examples::new(x, y).unwrap();
/// let start = (array![[0.0]], array![0.0]);
/// let mut adam = Adam::new(0.05).unwrap();
/// let mut losses = Vec::new();
/// let run = Training::new(300, 5)
///     .unwrap()
///     .run(&Affine, &MeanSquaredError, &mut adam, start, &data, |p| losses.push(p.loss))
///     .unwrap();
/// let (w, b) = &run.parameters;
/// assert!((w[[0, 0]] - 2.0).abs() < 1e-2 && (b[0] - 1.0).abs() < 1e-2);
/// assert_eq!(run.steps, 300 * 4);
/// assert_eq!(losses.len(), run.steps);
///
/// assert!(Training::new(10, 0).is_err()); // a batch size of zero
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Training {
    epochs: usize,
    batch_size: usize,
    seed: u64,
    hold_out: Option<HoldOut>,
}

#[derive(Clone, Copy, Debug, PartialEq)]
struct HoldOut {
    fraction: f64,
    stall_epochs: usize,
}

impl Training {
    /// `epochs` passes over the data in batches of `batch_size` rows (the
    /// last batch of an epoch may be smaller); both must be at least 1. Rows
    /// are shuffled every epoch by a generator seeded with 0 by default.
    pub fn new(epochs: usize, batch_size: usize) -> Result<Self> {
        for (name, value) in [("epochs", epochs), ("batch size", batch_size)] {
            if value == 0 {
                return Err(Error::InvalidSetting {
                    name,
                    value: "0".to_string(),
                    reason: "must be at least 1",
                });
            }
        }
        Ok(Training {
            epochs,
            batch_size,
            seed: 0,
            hold_out: None,
        })
    }

    /// Seeds the shuffling (and the validation split); the same seed gives
    /// the same run.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Holds out `fraction` (in `(0, 1)`) of the rows, chosen by the seeded
    /// generator, and stops when the validation loss has not improved for
    /// `stall_epochs` (at least 1) epochs, returning the best parameters seen.
    pub fn stop_early(mut self, fraction: f64, stall_epochs: usize) -> Result<Self> {
        if !(fraction > 0.0 && fraction < 1.0) {
            return Err(Error::InvalidSetting {
                name: "validation fraction",
                value: fraction.to_string(),
                reason: "must be in (0, 1)",
            });
        }
        if stall_epochs == 0 {
            return Err(Error::InvalidSetting {
                name: "stall epochs",
                value: "0".to_string(),
                reason: "must be at least 1",
            });
        }
        self.hold_out = Some(HoldOut {
            fraction,
            stall_epochs,
        });
        Ok(self)
    }

    /// Trains `model: P x (batch of input rows) -> B` on `data` under
    /// `loss: B x (batch of target rows) -> T`, starting from `start`;
    /// `observer` sees every step and the parameters after it, and can stop
    /// the run by returning [`ControlFlow::Break`].
    ///
    /// Each step sends one minibatch through the model as one batch (a
    /// matrix whose rows are examples): one forward and one backward pass,
    /// whose parameter change is the gradient of the batch's loss as the
    /// loss map defines it ([`MeanSquaredError`](crate::MeanSquaredError)
    /// averages over the batch, [`SquaredError`](crate::SquaredError) sums
    /// over it). The optimiser updates the parameters in place. A model
    /// written for one example trains through [`Rowwise`](crate::Rowwise),
    /// a per-example loss through [`RowMean`](crate::RowMean).
    ///
    /// A non-finite loss, gradient or updated parameter stops the run with
    /// [`Error::Diverged`]; any error comes back as [`Interrupted`] holding
    /// the most recent parameters with a finite training loss.
    ///
    /// The whole run goes through [`on_awake_cores`](crate::on_awake_cores):
    /// with the `threads` feature it runs on a thread of rayon's pool while
    /// another stands by, so that the step's products and elementwise maps
    /// use two cores (an f32 step of the comparison example went from 58-79
    /// to 69-120 GFLOP/s over twelve runs). That is why the model and loss must be
    /// `Sync`, and the optimiser, parameters and observer `Send`, and why
    /// the observer may run on another thread than the caller's (what it
    /// keeps in thread-local storage is that thread's). The numbers are
    /// those of a run on one core.
    pub fn run<T, P, B, M, L, O, V>(
        &self,
        model: &M,
        loss: &L,
        optimiser: &mut O,
        start: P,
        data: &Examples<T>,
        observer: impl FnMut(&Progress<'_, T, P>) -> V + Send,
    ) -> std::result::Result<Trained<P, T>, Interrupted<P>>
    where
        T: Real,
        P: Euclidean<T> + Send,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B> + Sync,
        L: SplitInput<B, Array2<T>, Output = T> + Sync,
        O: Optimiser<T> + Send,
        V: ObserverVerdict,
    {
        let prepared = match self.prepare(data, &start) {
            Ok(prepared) => prepared,
            Err(error) => return Err(refused(error, start)),
        };
        // The whole run on a thread of rayon's pool with another standing
        // by, so that its products and elementwise maps use two cores.
        crate::cores::on_awake_cores(|| {
            let train = &*prepared.train;
            self.run_core(
                model,
                loss,
                optimiser,
                start,
                prepared.rng,
                train,
                prepared.validation.as_ref(),
                observer,
                |batch, rows, input, gradient| {
                    batch.gather(train, rows, &mut input.1);
                    batch.gradient(model, loss, input, gradient)
                },
            )
        })
    }

    /// [`run`](Training::run) with each minibatch split into `shards`
    /// contiguous groups of rows whose passes run on their own threads: the
    /// model's forward passes run in parallel, the loss sees the whole
    /// batch, the backward passes run in parallel, and `reduction` sums the
    /// shards' parameter gradients.
    ///
    /// Reverse derivatives are additive, so the sum of the shards' gradients
    /// is the batch's gradient, for any loss, up to the order of summation
    /// (rounding only). This needs a model that treats rows independently,
    /// as every batched map of the crate does.
    ///
    /// The calling thread runs the first shard itself, and one thread per
    /// other shard starts once per run; each shard keeps its workspace (the
    /// model's reusing passes), its rows and its gradient for the whole
    /// run. Every step the parameters are lent to the shards, not copied,
    /// and each gathers its own rows of the batch from the training data.
    /// A shard's matrix products and elementwise maps stay on its thread,
    /// so the shards, not the products, share the cores. Jobs and answers
    /// pass through one-message slots (a mutex and a condition variable),
    /// which a thread waits on awake for up to half a millisecond before it
    /// sleeps: between the phases of a step, waking a sleeping thread took
    /// longer than the wait. On 2 cores, batch 1,024 (f64), 2 shards ran
    /// 1.71 to 1.83 times as fast as [`run`](Training::run) on one core in
    /// runs of 50 steps (1.61 to 1.82 in runs of 10, where filling the
    /// buffers at the first step weighs more), and 1.05 to 1.22 times as
    /// fast as `run` with the `threads` feature (whose products and
    /// elementwise maps split over the two cores beside a standing-by
    /// thread, see [`on_awake_cores`](crate::on_awake_cores)). Sharding is
    /// the form whose gradient sum can go beyond one machine
    /// ([`GradientReduction`]).
    ///
    /// Each shard's output is copied to this thread (the loss needs the
    /// whole batch's) and joined, and the output change goes back in row
    /// blocks, all through buffers kept from step to step: with up to 9
    /// shards a step allocates nothing once the buffers are filled (beyond
    /// that, two lists of references per step).
    ///
    /// A shard's error stops the run like any other; a shard whose model
    /// panics stops it with
    /// [`Error::ShardFailed`].
    ///
    /// ```
    /// use revdiff::{Adam, Affine, Compose, Examples, MeanSquaredError, Parametrised, ShardSum, Tanh, Training};
    /// use ndarray::{array, Array2};
    ///
    /// let x = Array2::from_shape_fn((64, 2), |(i, j)| (i * (j + 1)) as f64 / 64.0);
    /// let y = x.sum_axis(ndarray::Axis(1)).insert_axis(ndarray::Axis(1));
    /// let data = Examples::new(x, y).unwrap();
    /// let model = Affine.then(Tanh).then_parametrised(Affine);
    /// let start = ((array![[0.1, 0.2], [0.3, -0.1]], array![0.0, 0.0]), (array![[1.0, 1.0]], array![0.0]));
    /// let training = Training::new(5, 16).unwrap();
    /// let whole = training.run(&model, &MeanSquaredError, &mut Adam::new(0.01).unwrap(), start.clone(), &data, |_| {}).unwrap();
    /// let split = training
    ///     .run_sharded(&model, &MeanSquaredError, &mut Adam::new(0.01).unwrap(), start, &data, 2, &mut ShardSum, |_| {})
    ///     .unwrap();
    /// let (a, b) = (&whole.parameters.1 .0, &split.parameters.1 .0);
    /// assert!((a - b).iter().all(|d| d.abs() < 1e-12));
    /// ```
    #[allow(clippy::too_many_arguments)]
    pub fn run_sharded<T, P, B, M, L, O, V, R>(
        &self,
        model: &M,
        loss: &L,
        optimiser: &mut O,
        start: P,
        data: &Examples<T>,
        shards: usize,
        reduction: &mut R,
        observer: impl FnMut(&Progress<'_, T, P>) -> V,
    ) -> std::result::Result<Trained<P, T>, Interrupted<P>>
    where
        T: Real,
        P: Euclidean<T> + Send + Sync,
        B: Space + RowBlocks + Send,
        M: SplitInput<P, Array2<T>, Output = B> + Sync,
        L: SplitInput<B, Array2<T>, Output = T>,
        O: Optimiser<T>,
        V: ObserverVerdict,
        R: GradientReduction<P>,
    {
        if shards == 0 {
            let error = Error::InvalidSetting {
                name: "shards",
                value: "0".to_string(),
                reason: "must be at least 1",
            };
            return Err(refused(error, start));
        }
        let prepared = match self.prepare(data, &start) {
            Ok(prepared) => prepared,
            Err(error) => return Err(refused(error, start)),
        };
        let train = &*prepared.train;
        // The parameters lent for the step, and the batch's row numbers.
        let shared = RwLock::new((start.clone(), Vec::new()));
        let slots: Vec<Mutex<P>> = (0..shards).map(|_| Mutex::new(start.zero_like())).collect();
        // One job and one answer at a time each way, for each shard but the
        // first, which this thread runs itself: one thread less to hand work
        // to and wake, and none waiting idle beside the shards.
        let lines: Vec<ShardLine<B>> = (1..shards).map(|_| ShardLine::new()).collect();
        std::thread::scope(|scope| {
            let threads: Vec<_> = lines
                .iter()
                .zip(&slots[1..])
                .map(|(line, slot)| {
                    let shared = &shared;
                    scope.spawn(move || shard_worker(model, train, shared, slot, line))
                })
                .collect();
            let mut pool = ShardPool {
                model,
                train,
                own: Shard::new(),
                lines: &lines,
                shared: &shared,
                slots: &slots,
                ranges: Vec::with_capacity(shards),
                outputs: Vec::with_capacity(shards),
                spare_outputs: (0..shards).map(|_| None).collect(),
                joined: None,
                spare_changes: (0..shards).map(|_| None).collect(),
            };
            let result = self.run_core(
                model,
                loss,
                optimiser,
                start,
                prepared.rng,
                train,
                prepared.validation.as_ref(),
                observer,
                |batch, rows, input, gradient| {
                    pool.gradient(batch, loss, rows, &mut input.0, gradient, reduction)
                },
            );
            // Closing the job slots ends the threads; joining them here
            // (a panic was already reported as an error) keeps the scope
            // from panicking in turn.
            drop(pool);
            for thread in threads {
                let _ = thread.join();
            }
            result
        })
    }

    #[allow(clippy::too_many_arguments)]
    fn run_core<T, P, B, M, L, O, V>(
        &self,
        model: &M,
        loss: &L,
        optimiser: &mut O,
        start: P,
        mut rng: StdRng,
        train: &Examples<T>,
        validation: Option<&Examples<T>>,
        mut observer: impl FnMut(&Progress<'_, T, P>) -> V,
        mut gradient: impl FnMut(&mut Batch<T>, &[usize], &mut (P, Array2<T>), &mut P) -> Result<T>,
    ) -> std::result::Result<Trained<P, T>, Interrupted<P>>
    where
        T: Real,
        P: Euclidean<T>,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B>,
        L: SplitInput<B, Array2<T>, Output = T>,
        O: Optimiser<T>,
        V: ObserverVerdict,
    {
        // The fallbacks for an interrupted run, made once: the start and a
        // copy refreshed (in place) at the end of every epoch.
        let kept_start = start.clone();
        let mut epoch_snapshot = start.clone();
        let mut batch = Batch::new(train);
        // The held-out rows' buffers, kept from epoch to epoch.
        let mut held_out = validation.map(|valid| {
            let rows: Vec<usize> = (0..valid.len()).collect();
            (
                Batch::new(valid),
                Array2::zeros((0, valid.inputs.ncols())),
                rows,
            )
        });
        // The gradient's buffer, overwritten every step.
        let mut grad = start.zero_like();
        let mut input: (P, Array2<T>) = (start, Array2::zeros((0, train.inputs.ncols())));
        let mut order: Vec<usize> = (0..train.len()).collect();
        let mut steps_taken = 0;
        let mut epoch_losses = Vec::with_capacity(self.epochs);
        let mut validation_losses =
            Vec::with_capacity(if validation.is_some() { self.epochs } else { 0 });
        let mut best: Option<(T, P)> = None;
        let mut since_best = 0;
        let mut stopped_early = false;
        let mut stopped_by_observer = false;

        for epoch in 0..self.epochs {
            order.shuffle(&mut rng);
            let batches = order.len().div_ceil(self.batch_size);
            let mut epoch_total = T::zero();
            for (b, rows) in order.chunks(self.batch_size).enumerate() {
                let step = steps_taken;
                steps_taken += 1;
                let diverged = |quantity| Error::Diverged {
                    step,
                    epoch,
                    quantity,
                };
                // `fresh`: whether the parameters in `input` are those
                // before this step (nothing has moved them yet).
                let fail = |error: Error, input: (P, Array2<T>), fresh: bool| {
                    let candidates = [
                        fresh.then_some(input.0),
                        Some(epoch_snapshot.clone()),
                        Some(kept_start.clone()),
                    ];
                    Interrupted {
                        error,
                        step: Some(step),
                        parameters: first_with_finite_loss(model, loss, train, self, candidates)
                            .unwrap_or_else(|| kept_start.clone()),
                    }
                };
                let batch_loss = match gradient(&mut batch, rows, &mut input, &mut grad) {
                    Ok(l) => l,
                    Err(e) => return Err(fail(e, input, true)),
                };
                if !batch_loss.is_finite() {
                    return Err(fail(diverged("loss"), input, true));
                }
                if !grad.all_finite() {
                    return Err(fail(diverged("gradient"), input, true));
                }
                if grad.dimension() != input.0.dimension() {
                    let error = Error::CoordinateCount {
                        operation: "training (the model's parameter change against its parameters)",
                        expected: input.0.dimension(),
                        found: grad.dimension(),
                    };
                    return Err(fail(error, input, true));
                }
                // The gradient was just found finite; `update_in_place`
                // would look again.
                let finite = match step_finite(optimiser, &mut input.0, &grad) {
                    Ok(finite) => finite,
                    Err(e) => return Err(fail(e, input, true)),
                };
                if !finite {
                    return Err(fail(diverged("updated parameters"), input, false));
                }
                epoch_total = epoch_total + batch_loss * count::<T>(rows.len());

                let epoch_finished = b + 1 == batches;
                let mut validation_loss = None;
                if let (true, Some(valid), Some((buffers, inputs, rows))) =
                    (epoch_finished, validation, held_out.as_mut())
                {
                    let size = self.batch_size;
                    match buffers.mean_loss(model, loss, &input.0, valid, rows, size, inputs) {
                        Ok(v) if v.is_finite() => validation_loss = Some(v),
                        Ok(_) => return Err(fail(diverged("validation loss"), input, false)),
                        Err(e) => return Err(fail(e, input, false)),
                    }
                }
                let epoch_loss = epoch_finished.then(|| epoch_total / count::<T>(order.len()));
                let verdict = observer(&Progress {
                    step,
                    epoch,
                    loss: batch_loss,
                    epoch_finished,
                    epoch_loss,
                    validation_loss,
                    parameters: &input.0,
                });
                if let Some(v) = validation_loss {
                    validation_losses.push(v);
                    if best.as_ref().is_none_or(|(b, _)| v < *b) {
                        // Into the kept copy when there is one: a copy,
                        // not an allocation, at every improvement.
                        let copied = match &mut best {
                            Some((b, p)) => {
                                *b = v;
                                p.copy_from(&input.0).is_ok()
                            }
                            None => false,
                        };
                        if !copied {
                            best = Some((v, input.0.clone()));
                        }
                        since_best = 0;
                    } else {
                        since_best += 1;
                    }
                }
                if let Some(mean) = epoch_loss {
                    epoch_losses.push(mean);
                    // Same shape, so this only copies.
                    let _ = epoch_snapshot.copy_from(&input.0);
                }
                if verdict.stops() {
                    stopped_by_observer = true;
                    break;
                }
            }
            let stall_epochs = self.hold_out.map_or(usize::MAX, |e| e.stall_epochs);
            if stopped_by_observer {
                break;
            }
            if since_best >= stall_epochs && epoch + 1 < self.epochs {
                stopped_early = true;
                break;
            }
        }

        Ok(Trained {
            parameters: best.map_or(input.0, |(_, p)| p),
            steps: steps_taken,
            epochs: epoch_losses.len().max(usize::from(stopped_by_observer)),
            stopped_early,
            stopped_by_observer,
            epoch_losses,
            validation_losses,
        })
    }

    /// What a run needs before its first step: the seeded generator, after
    /// it drew the validation split (with early stopping), the training and
    /// validation rows, and a check that the start is finite.
    fn prepare<'d, T: Real, P: Euclidean<T>>(
        &self,
        data: &'d Examples<T>,
        start: &P,
    ) -> Result<Prepared<'d, T>> {
        let mut rng = StdRng::seed_from_u64(self.seed);
        let (train, validation) = self.split(data, &mut rng)?;
        if !start.all_finite() {
            return Err(Error::NonFinite {
                operation: "training",
                detail: "in the starting parameters".to_string(),
            });
        }
        Ok(Prepared {
            rng,
            train,
            validation,
        })
    }

    /// The training rows and, with early stopping, the validation rows.
    fn split<'d, T: Real>(&self, data: &'d Examples<T>, rng: &mut StdRng) -> Result<Split<'d, T>> {
        let Some(stopping) = self.hold_out else {
            return Ok((Cow::Borrowed(data), None));
        };
        let n = data.len();
        let held = (stopping.fraction * n as f64).round() as usize;
        if held == 0 || held == n {
            return Err(Error::InvalidSetting {
                name: "validation fraction",
                value: stopping.fraction.to_string(),
                reason: "leaves no validation rows or no training rows for this dataset",
            });
        }
        let mut rows: Vec<usize> = (0..n).collect();
        rows.shuffle(rng);
        let (valid, train) = rows.split_at(held);
        Ok((Cow::Owned(data.select(train)), Some(data.select(valid))))
    }
}

/// The training rows (borrowed when nothing is held out) and the validation rows.
type Split<'d, T> = (Cow<'d, Examples<T>>, Option<Examples<T>>);

/// See [`Training::prepare`].
struct Prepared<'d, T: Clone> {
    rng: StdRng,
    train: Cow<'d, Examples<T>>,
    validation: Option<Examples<T>>,
}

/// A run refused before its first step: the start comes back unchanged.
fn refused<P>(error: Error, parameters: P) -> Interrupted<P> {
    Interrupted {
        error,
        step: None,
        parameters,
    }
}

fn count<T: Real>(n: usize) -> T {
    T::from(n).expect("row counts fit every real type")
}

/// The batch buffers of a run, reused from step to step: the targets, and
/// the workspaces of the model's and the loss's passes and of the change
/// of the prediction between them.
struct Batch<T> {
    targets: Array2<T>,
    model_work: Workspace,
    loss_work: Workspace,
    prediction_change: Workspace,
}

impl<T: Real> Batch<T> {
    fn new(data: &Examples<T>) -> Self {
        Batch {
            targets: Array2::zeros((0, data.targets.ncols())),
            model_work: Workspace::new(),
            loss_work: Workspace::new(),
            prediction_change: Workspace::new(),
        }
    }

    /// Copies the given rows of the inputs into `inputs` and of the targets
    /// into the kept target buffer, reallocating only when the batch size
    /// changes (the last batch of an epoch may be smaller).
    fn gather(&mut self, data: &Examples<T>, rows: &[usize], inputs: &mut Array2<T>) {
        gather_rows(&data.inputs, rows, inputs);
        gather_rows(&data.targets, rows, &mut self.targets);
    }

    /// The batch loss, and its parameter gradient into `gradient`: one
    /// forward and one backward pass of the model and of the loss, each
    /// into its kept workspace. No input change is asked of the model.
    fn gradient<P, B, M, L>(
        &mut self,
        model: &M,
        loss: &L,
        (p, x): &(P, Array2<T>),
        gradient: &mut P,
    ) -> Result<T>
    where
        P: Euclidean<T>,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B>,
        L: SplitInput<B, Array2<T>, Output = T>,
    {
        let y = model.forward_split(p, x, &mut self.model_work)?;
        let l = *loss.forward_split(y, &self.targets, &mut self.loss_work)?;
        let dy = self
            .prediction_change
            .output_or_insert_with(|| y.zero_like());
        reshape_to(dy, y);
        loss.backward_split(y, &self.targets, &mut self.loss_work, &T::one(), dy, None)?;
        model.backward_split(p, x, &mut self.model_work, dy, gradient, None)?;
        Ok(l)
    }

    /// The mean loss per row over `rows` of `data` (all of them, in order),
    /// in batches of `batch_size` gathered into `inputs`: each batch's loss
    /// weighted by its row count, as [`mean_loss`] computes it, through this
    /// batch's workspaces (forward passes only) rather than new arrays and a
    /// copy of the parameters.
    #[allow(clippy::too_many_arguments)]
    fn mean_loss<P, B, M, L>(
        &mut self,
        model: &M,
        loss: &L,
        params: &P,
        data: &Examples<T>,
        rows: &[usize],
        batch_size: usize,
        inputs: &mut Array2<T>,
    ) -> Result<T>
    where
        P: Space,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B>,
        L: SplitInput<B, Array2<T>, Output = T>,
    {
        let mut total = T::zero();
        for chunk in rows.chunks(batch_size) {
            self.gather(data, chunk, inputs);
            let y = model.forward_split(params, inputs, &mut self.model_work)?;
            let l = *loss.forward_split(y, &self.targets, &mut self.loss_work)?;
            total = total + l * count::<T>(chunk.len());
        }
        Ok(total / count::<T>(rows.len()))
    }
}

/// What the training thread asks of a shard's thread.
enum ToShard<B> {
    /// The forward pass on the batch's rows `start..end` (positions in the
    /// shared list of row numbers), gathered by the shard itself, its
    /// output copied into the buffer sent along (the last step's, when
    /// there is one).
    Forward(usize, usize, Option<B>),
    /// The backward pass for this change of the shard's output.
    Backward(B),
}

/// What a shard's thread answers.
enum FromShard<B> {
    /// Its output (a copy: the loss needs the whole batch's).
    Output(Result<B>),
    /// Its gradient is in its slot; the change it was sent comes back, as
    /// the buffer for the next step's.
    Done(Result<()>, Option<B>),
}

fn poisoned() -> Error {
    Error::ShardFailed {
        detail: "a shard's thread panicked while holding shared training state".to_string(),
    }
}

/// One shard's thread for the whole run: its workspace, its rows and its
/// gradient slot are reused from step to step, and never cross threads.
fn shard_worker<T, P, B, M>(
    model: &M,
    train: &Examples<T>,
    shared: &RwLock<(P, Vec<usize>)>,
    slot: &Mutex<P>,
    line: &ShardLine<B>,
) where
    T: Real,
    P: Euclidean<T>,
    B: Space,
    M: SplitInput<P, Array2<T>, Output = B>,
{
    // However this thread ends, a panic included, the training thread's
    // wait for its answer ends.
    let _closing = CloseOnDrop(&line.answers);
    crate::cores::keep_work_on_this_thread();
    let mut shard = Shard::new();
    while let Some(job) = line.jobs.receive() {
        let answer = match job {
            ToShard::Forward(start, end, buffer) => {
                FromShard::Output(shard.forward(model, train, shared, start..end, buffer))
            }
            ToShard::Backward(dy) => {
                FromShard::Done(shard.backward(model, shared, slot, &dy), Some(dy))
            }
        };
        if !line.answers.send(answer) {
            return;
        }
    }
}

/// A shard's thread's two slots: its jobs and its answers.
struct ShardLine<B> {
    jobs: Mailbox<ToShard<B>>,
    answers: Mailbox<FromShard<B>>,
}

impl<B> ShardLine<B> {
    fn new() -> Self {
        ShardLine {
            jobs: Mailbox::new(),
            answers: Mailbox::new(),
        }
    }
}

/// What a shard keeps for the whole run, on whichever thread runs it: the
/// model's workspace (its reusing passes) and its rows of the batch.
struct Shard<T> {
    work: Workspace,
    rows: Array2<T>,
}

impl<T: Real> Shard<T> {
    fn new() -> Self {
        Shard {
            work: Workspace::new(),
            rows: Array2::zeros((0, 0)),
        }
    }

    /// The forward pass on the batch's rows at positions `at` of the shared
    /// list (gathered here from the training data), with the lent
    /// parameters; its output copied into `buffer` (the last step's, when
    /// there is one).
    fn forward<P, B, M>(
        &mut self,
        model: &M,
        train: &Examples<T>,
        shared: &RwLock<(P, Vec<usize>)>,
        at: std::ops::Range<usize>,
        buffer: Option<B>,
    ) -> Result<B>
    where
        P: Space,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B>,
    {
        let shared = shared.read().map_err(|_| poisoned())?;
        gather_rows(&train.inputs, &shared.1[at], &mut self.rows);
        let y = model.forward_split(&shared.0, &self.rows, &mut self.work)?;
        Ok(match buffer {
            Some(mut kept) => {
                kept.assign_from(y);
                kept
            }
            None => y.clone(),
        })
    }

    /// The backward pass for the change `dy` of the last forward pass's
    /// output, its parameter gradient into `slot`.
    fn backward<P, B, M>(
        &mut self,
        model: &M,
        shared: &RwLock<(P, Vec<usize>)>,
        slot: &Mutex<P>,
        dy: &B,
    ) -> Result<()>
    where
        P: Space,
        B: Space,
        M: SplitInput<P, Array2<T>, Output = B>,
    {
        let shared = shared.read().map_err(|_| poisoned())?;
        let mut gradient = slot.lock().map_err(|_| poisoned())?;
        model.backward_split(
            &shared.0,
            &self.rows,
            &mut self.work,
            dy,
            &mut gradient,
            None,
        )
    }
}

/// The shards, as the training thread sees them: the first its own, the
/// others on their threads.
struct ShardPool<'s, T, P, B, M> {
    model: &'s M,
    train: &'s Examples<T>,
    own: Shard<T>,
    /// The other shards' slots, shard 1 first.
    lines: &'s [ShardLine<B>],
    shared: &'s RwLock<(P, Vec<usize>)>,
    slots: &'s [Mutex<P>],
    ranges: Vec<(usize, usize)>,
    outputs: Vec<B>,
    /// Buffers kept from step to step, so that a step allocates nothing:
    /// each shard's output (lent to it with its forward job), their join,
    /// and each shard's block of the output change; one per shard, in
    /// order, so that each gets back the shape it had.
    spare_outputs: Vec<Option<B>>,
    joined: Option<B>,
    spare_changes: Vec<Option<B>>,
}

impl<T, P, B, M> ShardPool<'_, T, P, B, M>
where
    T: Real,
    P: Euclidean<T>,
    B: Space + RowBlocks,
    M: SplitInput<P, Array2<T>, Output = B>,
{
    /// The answer of shard `k` (at least 1), or the error that its thread
    /// is gone.
    fn answer(&self, k: usize) -> FromShard<B> {
        self.lines[k - 1]
            .answers
            .receive()
            .unwrap_or_else(|| FromShard::Done(Err(panicked()), None))
    }

    /// Sends `job` to shard `k` (at least 1); an error when its thread is
    /// gone.
    fn send(&self, k: usize, job: ToShard<B>) -> Result<()> {
        if self.lines[k - 1].jobs.send(job) {
            Ok(())
        } else {
            Err(panicked())
        }
    }

    /// The batch loss, and its parameter gradient into `gradient`: the
    /// model's passes run on the shards' threads, the loss on this one
    /// between them, and `reduction` combines the shards' gradients.
    ///
    /// The parameters are lent to the shards for the step (swapped into
    /// the shared slot and back, whatever happens), not copied; each shard
    /// gathers its own rows of the batch from the training data, so this
    /// thread gathers only the targets.
    #[allow(clippy::too_many_arguments)]
    fn gradient<L, R>(
        &mut self,
        batch: &mut Batch<T>,
        loss: &L,
        rows: &[usize],
        parameters: &mut P,
        gradient: &mut P,
        reduction: &mut R,
    ) -> Result<T>
    where
        L: SplitInput<B, Array2<T>, Output = T>,
        R: GradientReduction<P>,
    {
        gather_rows(&self.train.targets, rows, &mut batch.targets);
        {
            let mut shared = self.shared.write().map_err(|_| poisoned())?;
            std::mem::swap(&mut shared.0, parameters);
            shared.1.clear();
            shared.1.extend_from_slice(rows);
        }
        // The step, while the shared slot holds the lent parameters; its
        // errors are returned only after they are taken back.
        let result = (|| {
            let l = self.passes(batch, loss, rows.len())?;
            self.sum_gradients(gradient, reduction)?;
            Ok(l)
        })();
        // A shard that panicked while reading poisons the lock but leaves
        // its contents whole: the parameters are taken back either way.
        let mut shared = self
            .shared
            .write()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        std::mem::swap(&mut shared.0, parameters);
        result
    }

    /// The shards' forward passes, the loss and its change on this thread,
    /// and the shards' backward passes, for a batch of `rows` rows; returns
    /// the loss.
    fn passes<L>(&mut self, batch: &mut Batch<T>, loss: &L, rows: usize) -> Result<T>
    where
        L: SplitInput<B, Array2<T>, Output = T>,
    {
        let count = (self.lines.len() + 1).min(rows).max(1);
        let per = rows.div_ceil(count);
        self.ranges.clear();
        self.ranges.extend(
            (0..count)
                .map(|k| (k * per, ((k + 1) * per).min(rows)))
                .filter(|(a, b)| a < b),
        );
        // The other shards start first; this thread then runs its own.
        for (k, &(a, b)) in self.ranges.iter().enumerate().skip(1) {
            let buffer = self.spare_outputs.get_mut(k).and_then(Option::take);
            self.send(k, ToShard::Forward(a, b, buffer))?;
        }
        self.outputs.clear();
        let mut failure = None;
        if let Some(&(a, b)) = self.ranges.first() {
            let buffer = self.spare_outputs.first_mut().and_then(Option::take);
            let own = own_shard(|| {
                self.own
                    .forward(self.model, self.train, self.shared, a..b, buffer)
            });
            match own {
                Ok(y) => self.outputs.push(y),
                Err(e) => failure = Some(e),
            }
        }
        // Every answer is collected, even after a failure, so that none is
        // left to be read as the next step's.
        for k in 1..self.ranges.len() {
            match self.answer(k) {
                FromShard::Output(Ok(y)) => self.outputs.push(y),
                FromShard::Output(Err(e)) | FromShard::Done(Err(e), _) => {
                    failure = failure.or(Some(e));
                }
                FromShard::Done(Ok(()), _) => failure = failure.or(Some(panicked())),
            }
        }
        if let Some(e) = failure {
            return Err(e);
        }
        match &mut self.joined {
            Some(joined) => B::join_rows_into(&self.outputs, joined)?,
            None => self.joined = Some(B::join_rows(&self.outputs)?),
        }
        // The outputs are copied: their buffers serve the next step.
        for (spare, y) in self.spare_outputs.iter_mut().zip(self.outputs.drain(..)) {
            *spare = Some(y);
        }
        let y = self.joined.as_ref().expect("just joined");
        let l = *loss.forward_split(y, &batch.targets, &mut batch.loss_work)?;
        let dy = batch
            .prediction_change
            .output_or_insert_with(|| y.zero_like());
        reshape_to(dy, y);
        loss.backward_split(y, &batch.targets, &mut batch.loss_work, &T::one(), dy, None)?;
        for (k, &range) in self.ranges.iter().enumerate().skip(1) {
            let block = row_block_in(dy, range, &mut self.spare_changes[k]);
            self.send(k, ToShard::Backward(block))?;
        }
        if let Some(&range) = self.ranges.first() {
            let block = row_block_in(dy, range, &mut self.spare_changes[0]);
            let done = own_shard(|| {
                self.own
                    .backward(self.model, self.shared, &self.slots[0], &block)
            });
            self.spare_changes[0] = Some(block);
            if let Err(e) = done {
                failure = Some(e);
            }
        }
        for k in 1..self.ranges.len() {
            match self.answer(k) {
                FromShard::Done(Ok(()), kept) => self.spare_changes[k] = kept,
                FromShard::Done(Err(e), _) | FromShard::Output(Err(e)) => {
                    failure = failure.or(Some(e));
                }
                FromShard::Output(Ok(_)) => failure = failure.or(Some(panicked())),
            }
        }
        match failure {
            Some(e) => Err(e),
            None => Ok(l),
        }
    }

    /// The shards' parameter gradients, combined by `reduction`, into
    /// `gradient`.
    fn sum_gradients<R: GradientReduction<P>>(
        &mut self,
        gradient: &mut P,
        reduction: &mut R,
    ) -> Result<()> {
        let (first, rest) = self.slots[..self.ranges.len()]
            .split_first()
            .expect("a batch has at least one row, so one shard");
        let mut first = first.lock().map_err(|_| poisoned())?;
        // The other shards' gradients are lent to `reduction` as a slice
        // of references: built on the stack for up to `ON_STACK` shards (no
        // allocation per step), in vectors beyond.
        const ON_STACK: usize = 8;
        if rest.len() > ON_STACK {
            let guards = rest
                .iter()
                .map(|slot| slot.lock().map_err(|_| poisoned()))
                .collect::<Result<Vec<_>>>()?;
            let others: Vec<&P> = guards.iter().map(|g| &**g).collect();
            reduction.reduce(&mut first, &others)?;
            std::mem::swap(gradient, &mut *first);
            return Ok(());
        }
        let mut guards: [Option<MutexGuard<'_, P>>; ON_STACK] = std::array::from_fn(|_| None);
        for (guard, slot) in guards.iter_mut().zip(rest) {
            *guard = Some(slot.lock().map_err(|_| poisoned())?);
        }
        match guards[0].as_deref() {
            None => reduction.reduce(&mut first, &[])?,
            Some(any) => {
                let mut others: [&P; ON_STACK] = [any; ON_STACK];
                for (other, guard) in others.iter_mut().zip(&guards) {
                    if let Some(g) = guard.as_deref() {
                        *other = g;
                    }
                }
                reduction.reduce(&mut first, &others[..rest.len()])?;
            }
        }
        // The sum changes places with the last step's gradient rather than
        // being copied: the first shard's backward pass overwrites its slot
        // whole (as `backward_split` does), and both have the
        // parameters' shapes.
        std::mem::swap(gradient, &mut *first);
        Ok(())
    }
}

/// A pass of the shard the training thread runs itself, with its work
/// kept on this thread as on the other shards' threads; a panic in it is
/// [`Error::ShardFailed`], as in theirs. (The pool and the shard's state
/// are not used again after that error: the run stops.)
fn own_shard<R>(pass: impl FnOnce() -> Result<R>) -> Result<R> {
    let pass = std::panic::AssertUnwindSafe(pass);
    std::panic::catch_unwind(|| crate::cores::with_work_on_this_thread(pass))
        .unwrap_or_else(|_| Err(panicked()))
}

impl<T, P, B, M> Drop for ShardPool<'_, T, P, B, M> {
    /// Closing the job slots ends the shards' threads, however the run
    /// ended.
    fn drop(&mut self) {
        for line in self.lines {
            line.jobs.close();
        }
    }
}

/// Rows `start..end` of `dy`, in the buffer `spare` holds when there is
/// one (the last step's block of the same shard).
fn row_block_in<B: RowBlocks>(dy: &B, (start, end): (usize, usize), spare: &mut Option<B>) -> B {
    match spare.take() {
        Some(mut kept) => {
            dy.row_block_into(start, end, &mut kept);
            kept
        }
        None => dy.row_block(start, end),
    }
}

/// Values made of rows, one per example, that can be cut into blocks of
/// rows and joined again: what sharded training needs of a model's output.
pub trait RowBlocks: Sized {
    /// The parts, one after the other along the rows.
    fn join_rows(parts: &[Self]) -> Result<Self>;
    /// Rows `start..end`.
    fn row_block(&self, start: usize, end: usize) -> Self;
    /// [`join_rows`](RowBlocks::join_rows) into `into`, in its memory when
    /// it has the joined shape (the default makes a new value).
    fn join_rows_into(parts: &[Self], into: &mut Self) -> Result<()> {
        *into = Self::join_rows(parts)?;
        Ok(())
    }
    /// [`row_block`](RowBlocks::row_block) into `into`, in its memory when
    /// it has the block's shape (the default makes a new value).
    fn row_block_into(&self, start: usize, end: usize, into: &mut Self) {
        *into = self.row_block(start, end);
    }
}

impl<T: Real, D: ndarray::RemoveAxis> RowBlocks for ndarray::Array<T, D> {
    fn join_rows(parts: &[Self]) -> Result<Self> {
        let views: Vec<_> = parts.iter().map(|p| p.view()).collect();
        ndarray::concatenate(Axis(0), &views)
            .map_err(|e| Error::shape("joining blocks of rows", "blocks with equal rows", e))
    }
    fn row_block(&self, start: usize, end: usize) -> Self {
        self.slice_axis(Axis(0), Slice::from(start..end)).to_owned()
    }
    fn join_rows_into(parts: &[Self], into: &mut Self) -> Result<()> {
        let rows: usize = parts.iter().map(|p| p.len_of(Axis(0))).sum();
        let fits = parts.iter().all(|p| p.shape()[1..] == into.shape()[1..])
            && into.len_of(Axis(0)) == rows;
        if !fits {
            *into = Self::join_rows(parts)?;
            return Ok(());
        }
        let mut at = 0;
        for part in parts {
            let n = part.len_of(Axis(0));
            into.slice_axis_mut(Axis(0), Slice::from(at..at + n))
                .assign(part);
            at += n;
        }
        Ok(())
    }
    fn row_block_into(&self, start: usize, end: usize, into: &mut Self) {
        let block = self.slice_axis(Axis(0), Slice::from(start..end));
        if into.shape() == block.shape() {
            into.assign(&block);
        } else {
            *into = block.to_owned();
        }
    }
}

/// The error for a shard whose thread ended without an answer (a panic in
/// the model).
fn panicked() -> Error {
    Error::ShardFailed {
        detail: "a shard's thread ended without a result (the model panicked)".to_string(),
    }
}

/// How the parameter gradients of a minibatch's shards become the
/// minibatch's gradient: by default their sum ([`ShardSum`]).
///
/// This is the seam for training across processes: an implementation can
/// sum its own shards, then combine the result with the other processes'
/// (an allreduce) before the optimiser step. Each process then takes the
/// same step.
///
/// ```
/// use revdiff::{GradientReduction, ShardSum};
/// let mut total = 1.0_f64; // the first shard's
/// ShardSum.reduce(&mut total, &[&2.0, &3.5]).unwrap();
/// assert_eq!(total, 6.5);
/// ```
pub trait GradientReduction<P> {
    /// Combines the shards' gradients in place: `total` holds the first
    /// shard's on entry and the combination on return; `others` are the
    /// other shards', in shard order.
    fn reduce(&mut self, total: &mut P, others: &[&P]) -> Result<()>;
}

/// The sum of the shards' gradients, added in shard order.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ShardSum;

impl<P: Space> GradientReduction<P> for ShardSum {
    fn reduce(&mut self, total: &mut P, others: &[&P]) -> Result<()> {
        others
            .iter()
            .try_for_each(|part| total.try_add_assign(part))
    }
}

fn gather_rows<T: Real>(from: &Array2<T>, rows: &[usize], into: &mut Array2<T>) {
    if into.dim() != (rows.len(), from.ncols()) {
        *into = Array2::zeros((rows.len(), from.ncols()));
    }
    // Whole rows as slices where both are in standard layout: a plain copy
    // per row (the row views' setup cost about as much as the copy).
    let width = from.ncols();
    if let (Some(source), Some(target)) = (from.as_slice(), into.as_slice_mut())
        && width > 0
    {
        for (row, &r) in target.chunks_exact_mut(width).zip(rows) {
            row.copy_from_slice(&source[r * width..(r + 1) * width]);
        }
        return;
    }
    for (mut row, &r) in into.rows_mut().into_iter().zip(rows) {
        row.assign(&from.row(r));
    }
}

/// The mean loss per row over all of `data`, in batches: each batch's loss
/// weighted by its row count.
fn mean_loss<T, P, B, M, L>(
    model: &M,
    loss: &L,
    params: &P,
    data: &Examples<T>,
    batch_size: usize,
) -> Result<T>
where
    T: Real,
    P: Space,
    B: Space,
    M: Map<(P, Array2<T>), Output = B>,
    L: Map<(B, Array2<T>), Output = T>,
{
    let rows: Vec<usize> = (0..data.len()).collect();
    let mut input = (params.clone(), Array2::zeros((0, data.inputs.ncols())));
    let mut targets = Array2::zeros((0, data.targets.ncols()));
    let mut total = T::zero();
    for chunk in rows.chunks(batch_size) {
        gather_rows(&data.inputs, chunk, &mut input.1);
        gather_rows(&data.targets, chunk, &mut targets);
        let y = model.forward(&input)?;
        let pair = (y, targets);
        let l = loss.forward(&pair);
        targets = pair.1;
        total = total + l? * count::<T>(chunk.len());
    }
    Ok(total / count::<T>(data.len()))
}

/// The first candidate whose mean training loss is finite.
fn first_with_finite_loss<T, P, B, M, L, const N: usize>(
    model: &M,
    loss: &L,
    data: &Examples<T>,
    training: &Training,
    candidates: [Option<P>; N],
) -> Option<P>
where
    T: Real,
    P: Space,
    B: Space,
    M: Map<(P, Array2<T>), Output = B>,
    L: Map<(B, Array2<T>), Output = T>,
{
    candidates
        .into_iter()
        .flatten()
        .find(|p| mean_loss(model, loss, p, data, training.batch_size).is_ok_and(|l| l.is_finite()))
}
