//! A training step allocates nothing once its buffers are filled, whatever
//! the loss, the optimiser and the kind of model (a static composite or a
//! model assembled at run time), with or without held-out rows whose loss
//! ends every epoch, and split into shards (`run_sharded`). One test only: the counting allocator
//! counts for the whole process.

use ndarray::{Array1, Array2};
use revdiff::*;
#[path = "common/allocation_count.rs"]
mod allocation_count;
use allocation_count::allocations;

/// Allocations per step after the first two epochs, counted between the
/// observer's calls at the end of the second epoch and at the last step of
/// a run of 10 epochs in batches of 8 rows (what the run sets up before its
/// first step, and rayon's own bookkeeping for starting a run, fall
/// outside). With `hold_out`, a quarter of the rows are held out for early
/// stopping, and the end of every epoch computes their loss. With `shards`
/// above 0, through `run_sharded` with that many shards.
fn per_step<P, M, L, O>(
    model: &M,
    loss: &L,
    optimiser: impl Fn() -> O,
    start: &P,
    hold_out: bool,
    shards: usize,
) -> f64
where
    P: Euclidean<f64> + Send + Sync,
    M: SplitInput<P, Array2<f64>, Output = Array2<f64>> + Sync,
    L: SplitInput<Array2<f64>, Array2<f64>, Output = f64> + Sync,
    O: Optimiser<f64> + Send,
{
    let x = Array2::from_shape_fn((32, 5), |(i, j)| ((i * 7 + j * 3) % 11) as f64 / 11.0 - 0.5);
    // Rows that are distributions, for the cross-entropies.
    let t = Array2::from_shape_fn((32, 3), |(i, j)| [0.2, 0.3, 0.5][(i + j) % 3]);
    let data = Examples::new(x, t).unwrap();
    let mut seen = Vec::with_capacity(40);
    let mut o = optimiser();
    let mut training = Training::new(10, 8).unwrap();
    if hold_out {
        // A stall longer than the run: it runs all 10 epochs.
        training = training.stop_early(0.25, 20).unwrap();
    }
    let observer = |_: &Progress<'_, f64, P>| seen.push(allocations());
    let run = if shards == 0 {
        training.run(model, loss, &mut o, start.clone(), &data, observer)
    } else {
        let (reduction, start) = (&mut ShardSum, start.clone());
        training.run_sharded(
            model, loss, &mut o, start, &data, shards, reduction, observer,
        )
    }
    .unwrap();
    assert!(run.epoch_losses.iter().all(|l| l.is_finite()));
    assert_eq!(run.validation_losses.len(), if hold_out { 10 } else { 0 });
    let per_epoch = if hold_out { 3 } else { 4 };
    assert_eq!(seen.len(), 10 * per_epoch, "one observer call per step");
    // From the observer's call at the end of the second epoch: the end of
    // the first, after that call, makes the kept copy of the best
    // parameters.
    let counted = seen.len() - 2 * per_epoch;
    (seen[seen.len() - 1] - seen[2 * per_epoch - 1]) as f64 / counted as f64
}

fn each_optimiser<P, M, L>(what: &str, model: &M, loss: &L, start: &P)
where
    P: Euclidean<f64> + Send + Sync,
    M: SplitInput<P, Array2<f64>, Output = Array2<f64>> + Sync,
    L: SplitInput<Array2<f64>, Array2<f64>, Output = f64> + Sync,
{
    let counts = [
        (
            "gradient descent",
            per_step(
                model,
                loss,
                || GradientDescent::new(0.01).unwrap(),
                start,
                false,
                0,
            ),
        ),
        (
            "momentum",
            per_step(
                model,
                loss,
                || Momentum::new(0.01, 0.9).unwrap(),
                start,
                false,
                0,
            ),
        ),
        (
            "Nesterov",
            per_step(
                model,
                loss,
                || Nesterov::new(0.01, 0.9).unwrap(),
                start,
                false,
                0,
            ),
        ),
        (
            "Adagrad",
            per_step(model, loss, || Adagrad::new(0.01).unwrap(), start, false, 0),
        ),
        (
            "RMSProp",
            per_step(model, loss, || RmsProp::new(0.01).unwrap(), start, false, 0),
        ),
        (
            "Adam",
            per_step(model, loss, || Adam::new(0.01).unwrap(), start, false, 0),
        ),
        (
            "Adam, with held-out rows",
            per_step(model, loss, || Adam::new(0.01).unwrap(), start, true, 0),
        ),
        (
            "Adam, 2 shards",
            per_step(model, loss, || Adam::new(0.01).unwrap(), start, false, 2),
        ),
        (
            // Batches of 8 rows in blocks of 3, 3 and 2.
            "Adam, 3 shards",
            per_step(model, loss, || Adam::new(0.01).unwrap(), start, false, 3),
        ),
    ];
    for (optimiser, count) in counts {
        assert!(
            count == 0.0,
            "{what}, {optimiser}: {count} allocations per step"
        );
    }
}

fn each_loss<P, M>(what: &str, model: &M, start: &P)
where
    P: Euclidean<f64> + Send + Sync,
    M: SplitInput<P, Array2<f64>, Output = Array2<f64>> + Sync,
{
    each_optimiser(
        &format!("{what}, mean squared error"),
        model,
        &MeanSquaredError,
        start,
    );
    each_optimiser(
        &format!("{what}, squared error"),
        model,
        &SquaredError::halved(),
        start,
    );
    each_optimiser(
        &format!("{what}, cross-entropy"),
        model,
        &LogitCrossEntropy,
        start,
    );
    let binary = &LogitBinaryCrossEntropy;
    each_optimiser(
        &format!("{what}, binary cross-entropy"),
        model,
        binary,
        start,
    );
    each_optimiser(
        &format!("{what}, Huber"),
        model,
        &Huber::new(0.5).unwrap(),
        start,
    );
}

#[test]
fn training_steps_allocate_nothing_after_the_first() {
    // Every thread of rayon's pool started (starting one allocates, at
    // whatever moment it gets its core), before anything is counted.
    rayon::broadcast(|_| ());
    let layer = |out: usize, inp: usize| {
        let w = Array2::from_shape_fn((out, inp), |(i, j)| ((i * 3 + j) % 5) as f64 * 0.1 - 0.2);
        (w, Array1::zeros(out))
    };
    let fixed = Affine
        .then(Relu)
        .then_parametrised(Affine.then(Sigmoid))
        .then_parametrised(Affine);
    let start = ((layer(8, 5), layer(8, 8)), layer(3, 8));
    each_loss("static model", &fixed, &start);

    let assembled = Layers::<f64>::new(5)
        .unwrap()
        .affine(8)
        .unwrap()
        .elementwise("tanh", Tanh)
        .affine(8)
        .unwrap()
        .elementwise("softplus", Softplus)
        .affine(3)
        .unwrap();
    each_loss(
        "run-time model",
        &assembled,
        &assembled.initial_parameters(3),
    );
}
