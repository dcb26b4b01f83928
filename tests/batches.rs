//! Models on batches (rows are examples), the per-row liftings, and the
//! training loop that sends each minibatch through the model at once.

use ndarray::{Array1, Array2, array};
use revdiff::laws::Checker;
use revdiff::laws::strategies::{matrices, vectors};
use revdiff::*;
use std::ops::ControlFlow;

fn near(a: &Array2<f64>, b: &Array2<f64>, tol: f64) -> bool {
    a.shape() == b.shape() && a.iter().zip(b).all(|(x, y)| (x - y).abs() <= tol)
}

#[test]
fn the_batched_affine_map_is_the_per_row_map_on_every_row() {
    let w = array![[1.0, -2.0, 0.5], [0.0, 3.0, 1.0]];
    let b = array![0.25, -1.0];
    let x = array![
        [1.0, 2.0, 3.0],
        [-1.0, 0.5, 2.0],
        [0.0, 0.0, 1.0],
        [4.0, -3.0, 0.0]
    ];
    let batched = Affine
        .forward(&((w.clone(), b.clone()), x.clone()))
        .unwrap();
    for (i, row) in x.rows().into_iter().enumerate() {
        let one = Affine
            .forward(&((w.clone(), b.clone()), row.to_owned()))
            .unwrap();
        assert_eq!(batched.row(i), one);
    }
    // The backward pass: the parameter change is the sum of the rows' changes.
    let dy = array![[1.0, 0.0], [0.5, -1.0], [0.0, 2.0], [1.0, 1.0]];
    let ((dw, db), dx) = Affine
        .backward(&((w.clone(), b.clone()), x.clone()), &dy)
        .unwrap();
    let mut sum_dw = Array2::zeros((2, 3));
    let mut sum_db = Array1::zeros(2);
    for i in 0..4 {
        let ((dwi, dbi), dxi) = Affine
            .backward(
                &((w.clone(), b.clone()), x.row(i).to_owned()),
                &dy.row(i).to_owned(),
            )
            .unwrap();
        sum_dw += &dwi;
        sum_db += &dbi;
        assert_eq!(dx.row(i), dxi);
    }
    assert!(near(&dw, &sum_dw, 1e-12));
    assert!((&db - &sum_db).iter().all(|v| v.abs() < 1e-12));
}

#[test]
fn the_batched_affine_map_and_its_pieces_obey_the_laws_at_two_orders() {
    let checker = Checker::new().cases(64).unwrap();
    let inputs = (
        (
            matrices(3, 4, -2.0, 2.0).unwrap(),
            vectors(3, -2.0, 2.0).unwrap(),
        ),
        matrices(5, 4, -2.0, 2.0).unwrap(),
    );
    checker.reverse(&Affine, inputs.clone()).assert_clean();
    checker
        .same_reverse(&Affine, &affine_batch_composite(), inputs)
        .assert_clean();
    checker
        .reverse(&ColumnSums, matrices(4, 3, -3.0, 3.0).unwrap())
        .assert_clean();
    checker
        .reverse(
            &RepeatRows,
            (
                matrices(4, 3, -3.0, 3.0).unwrap(),
                vectors(3, -3.0, 3.0).unwrap(),
            ),
        )
        .assert_clean();
}

#[test]
fn batch_shapes_that_do_not_fit_are_errors_naming_them() {
    let params = (Array2::<f64>::zeros((2, 3)), Array1::zeros(2));
    let err = Affine
        .forward(&(params.clone(), Array2::zeros((4, 5))))
        .unwrap_err();
    assert!(err.to_string().contains("(4, 5)"), "{err}");
    let err = Affine
        .backward(&(params, Array2::zeros((4, 3))), &Array2::zeros((4, 3)))
        .unwrap_err();
    assert!(matches!(err, Error::OutputChangeShape { .. }), "{err}");
}

#[test]
fn cross_entropy_on_a_batch_is_the_sum_of_its_rows() {
    let z: Array2<f64> = array![[2.0, -1.0, 0.5], [900.0, 0.0, -900.0]];
    let t = array![[0.0, 1.0, 0.0], [0.2, 0.3, 0.5]];
    let (whole, (dz, dt)) = LogitCrossEntropy
        .forward_memo(&(z.clone(), t.clone()))
        .unwrap();
    let mut total = 0.0_f64;
    for i in 0..2 {
        let pair = (z.row(i).to_owned(), t.row(i).to_owned());
        total += LogitCrossEntropy.forward(&pair).unwrap();
        let (dzi, dti) = LogitCrossEntropy.backward(&pair, &1.0).unwrap();
        assert_eq!(dz.row(i), dzi);
        assert_eq!(dt.row(i), dti);
    }
    assert!((whole - total).abs() < 1e-12 * total.abs());
    assert!(whole.is_finite());
}

/// The parameters of 2 -> 3 (tanh) -> 1.
type Params = ((Array2<f64>, Array1<f64>), (Array2<f64>, Array1<f64>));

/// The model 2 -> 3 (tanh) -> 1 and its starting parameters.
fn small_network() -> (ThenParametrised<Then<Affine, Tanh>, Affine>, Params) {
    let model = Affine.then(Tanh).then_parametrised(Affine);
    let start = (
        (
            array![[0.3, -0.2], [0.1, 0.4], [-0.5, 0.2]],
            array![0.0, 0.1, -0.1],
        ),
        (array![[0.5, -0.3, 0.2]], array![0.05]),
    );
    (model, start)
}

fn wave(n: usize) -> Examples<f64> {
    let x = Array2::from_shape_fn((n, 2), |(i, j)| ((i * 7 + j * 3) % 11) as f64 / 5.0 - 1.0);
    let y = Array2::from_shape_fn((n, 1), |(i, _)| {
        (x[[i, 0]] * 1.5).sin() * 0.5 + x[[i, 1]] * 0.25
    });
    Examples::new(x, y).unwrap()
}

#[test]
fn batched_and_per_row_training_give_the_same_parameters() {
    let (model, start) = small_network();
    let data = wave(30);
    let train = |batched: bool| {
        let training = Training::new(20, 8).unwrap().seed(5);
        let mut adam = Adam::new(0.02).unwrap();
        if batched {
            training.run(
                &model,
                &MeanSquaredError,
                &mut adam,
                start.clone(),
                &data,
                |_| {},
            )
        } else {
            training.run(
                &Rowwise::new(model),
                &RowMean::new(MeanSquaredError),
                &mut adam,
                start.clone(),
                &data,
                |_| {},
            )
        }
        .unwrap()
    };
    let (fast, slow) = (train(true), train(false));
    assert_eq!(fast.steps, slow.steps);
    let (a, b) = (fast.parameters.coordinates(), slow.parameters.coordinates());
    let moved = a
        .iter()
        .zip(start.coordinates())
        .map(|(p, q)| (p - q).abs())
        .fold(0.0, f64::max);
    assert!(moved > 1e-2, "training moved the parameters by {moved}");
    for (p, q) in a.iter().zip(&b) {
        assert!((p - q).abs() < 1e-10, "{p} against {q}");
    }
    for (l, m) in fast.epoch_losses.iter().zip(&slow.epoch_losses) {
        assert!((l - m).abs() < 1e-12 * l.abs().max(1.0));
    }
    assert!(fast.epoch_losses.last() < fast.epoch_losses.first());
}

#[test]
fn reusing_buffers_changes_no_result() {
    let (model, start) = small_network();
    let data = wave(20);
    let run = || {
        Training::new(3, 6)
            .unwrap()
            .run(
                &model,
                &MeanSquaredError,
                &mut Adam::new(0.05).unwrap(),
                start.clone(),
                &data,
                |_| {},
            )
            .unwrap()
    };
    // The same run twice, bit for bit.
    assert_eq!(run(), run());
    // Updating in place equals updating into a new value, for every rule.
    let gradient = (
        (Array2::from_elem((3, 2), 0.5), array![1.0, -2.0, 0.25]),
        (array![[0.1, -0.1, 3.0]], array![-0.5]),
    );
    type InPlace = Box<dyn FnMut(&mut Params, &Params)>;
    type Fresh = Box<dyn FnMut(&Params, &Params) -> Params>;
    let mut rules: Vec<(InPlace, Fresh)> = Vec::new();
    macro_rules! both {
        ($make:expr) => {{
            let (mut a, mut b) = ($make, $make);
            rules.push((
                Box::new(move |p: &mut Params, g: &Params| a.update_in_place(p, g).unwrap()),
                Box::new(move |p: &Params, g: &Params| b.update(p, g).unwrap()),
            ));
        }};
    }
    both!(GradientDescent::new(0.1).unwrap());
    both!(Momentum::new(0.1, 0.9).unwrap());
    both!(Nesterov::new(0.1, 0.9).unwrap());
    both!(Adagrad::new(0.1).unwrap());
    both!(RmsProp::new(0.1).unwrap());
    both!(Adam::new(0.1).unwrap());
    for (in_place, fresh) in &mut rules {
        let mut p = start.clone();
        let mut q = start.clone();
        for _ in 0..3 {
            in_place(&mut p, &gradient);
            q = fresh(&q, &gradient);
        }
        assert_eq!(p, q);
        assert_ne!(p, start);
    }
}

#[test]
fn the_observer_can_stop_the_run() {
    let (model, start) = small_network();
    let data = wave(20);
    let run = Training::new(10, 5)
        .unwrap()
        .run(
            &model,
            &MeanSquaredError,
            &mut Adam::new(0.05).unwrap(),
            start,
            &data,
            |p| {
                if p.step == 5 {
                    ControlFlow::Break(())
                } else {
                    ControlFlow::Continue(())
                }
            },
        )
        .unwrap();
    assert!(run.stopped_by_observer && !run.stopped_early);
    assert_eq!(run.steps, 6);
    // Steps 0..=3 finish epoch 0; the stop came in epoch 1.
    assert_eq!((run.epoch_losses.len(), run.epochs), (1, 1));
}

#[test]
fn examples_read_from_csv_and_bad_files_say_where() {
    let good = "a, b, y\n1, 2, 3\n4, 5, 6\n";
    let data = Examples::<f64>::read_csv(good.as_bytes(), &["b", "a"], &["y"]).unwrap();
    assert_eq!(data.inputs(), &array![[2.0, 1.0], [5.0, 4.0]]);
    assert_eq!(data.targets(), &array![[3.0], [6.0]]);
    let f32_data = Examples::<f32>::read_csv(good.as_bytes(), &["a"], &["y"]).unwrap();
    assert_eq!(f32_data.targets()[[1, 0]], 6.0_f32);

    let cases: [(&str, &str); 5] = [
        ("a,b,y\n1,2,3\n", "CSV header: no column named \"c\""),
        (
            "a,c,y\n1,2,3\n4,x,6\n",
            "CSV row 1, column 1 (\"c\"): cannot read \"x\" as a number",
        ),
        ("a,c,y\n1,2,3\n4,5\n", "CSV row 1"),
        (
            "a,c,y\n1,NaN,3\n",
            "non-finite value NaN at row 0, column 1 (\"c\")",
        ),
        ("a,c,y\n", "no data rows"),
    ];
    for (text, expected) in cases {
        let err = Examples::<f64>::read_csv(text.as_bytes(), &["a", "c"], &["y"]).unwrap_err();
        assert!(err.to_string().contains(expected), "{text:?}: {err}");
    }
}

#[test]
fn row_blocks_join_and_cut_into_kept_buffers() {
    let a = Array2::from_shape_fn((3, 2), |(i, j)| (i * 2 + j) as f64);
    let b = Array2::from_shape_fn((2, 2), |(i, j)| 10.0 + (i * 2 + j) as f64);
    let joined = Array2::join_rows(&[a.clone(), b.clone()]).unwrap();
    // A buffer of the joined shape is overwritten in its own memory.
    let mut kept = Array2::from_elem((5, 2), f64::NAN);
    let at = kept.as_ptr();
    Array2::join_rows_into(&[a.clone(), b.clone()], &mut kept).unwrap();
    assert_eq!((&kept, kept.as_ptr()), (&joined, at));
    // One of another shape is replaced.
    let mut other = Array2::zeros((4, 2));
    Array2::join_rows_into(&[a.clone(), b.clone()], &mut other).unwrap();
    assert_eq!(other, joined);
    // Parts of different widths are an error either way.
    let wide = Array2::<f64>::zeros((1, 3));
    assert!(Array2::join_rows_into(&[a.clone(), wide], &mut kept).is_err());
    // Blocks of rows, into a fitting buffer and into one of another shape.
    let mut block = Array2::from_elem((2, 2), f64::NAN);
    let at = block.as_ptr();
    joined.row_block_into(1, 3, &mut block);
    assert_eq!((&block, block.as_ptr()), (&joined.row_block(1, 3), at));
    joined.row_block_into(2, 5, &mut block);
    assert_eq!(block, joined.slice(ndarray::s![2..5, ..]));
}

#[test]
fn sharded_gradients_equal_unsharded_ones() {
    let (model, start) = small_network();
    let data = wave(37);
    // Without and with a held-out validation split (the shards then read
    // their rows from the training part).
    let plain = Training::new(4, 10).unwrap().seed(2);
    let held_out = plain.stop_early(0.25, 10).unwrap();
    for training in [plain, held_out] {
        sharded_training_equals_unsharded(&model, &start, &data, &training);
    }
}

fn sharded_training_equals_unsharded(
    model: &ThenParametrised<Then<Affine, Tanh>, Affine>,
    start: &Params,
    data: &Examples<f64>,
    training: &Training,
) {
    let whole = training
        .run(
            model,
            &MeanSquaredError,
            &mut Adam::new(0.02).unwrap(),
            start.clone(),
            data,
            |_| {},
        )
        .unwrap();
    for shards in [1, 2, 3, 16] {
        let split = training
            .run_sharded(
                model,
                &MeanSquaredError,
                &mut Adam::new(0.02).unwrap(),
                start.clone(),
                data,
                shards,
                &mut ShardSum,
                |_| {},
            )
            .unwrap();
        assert_eq!(split.steps, whole.steps);
        assert_eq!(split.validation_losses.len(), whole.validation_losses.len());
        // Additivity: the same up to the order of summation.
        for (p, q) in split
            .parameters
            .coordinates()
            .iter()
            .zip(whole.parameters.coordinates())
        {
            assert!((p - q).abs() < 1e-10, "{shards} shards: {p} against {q}");
        }
    }
    let err = training
        .run_sharded(
            model,
            &MeanSquaredError,
            &mut Adam::new(0.02).unwrap(),
            start.clone(),
            data,
            0,
            &mut ShardSum,
            |_| {},
        )
        .unwrap_err();
    assert!(matches!(
        err.error,
        Error::InvalidSetting { name: "shards", .. }
    ));
}

/// `(w, x) -> w x` on a batch, which refuses rows holding 100 and panics
/// on a shard (fewer than 12 rows) holding -100: for the failures of one
/// shard among several. (The fallback evaluation of the parameters after a
/// failure runs whole batches, so it does not panic.)
#[derive(Clone, Debug)]
struct Touchy;
impl Compose for Touchy {}
impl Map<(f64, Array2<f64>)> for Touchy {
    type Output = Array2<f64>;
    type Memo = (f64, Array2<f64>);
    fn forward_memo(&self, (w, x): &(f64, Array2<f64>)) -> Result<(Array2<f64>, Self::Memo)> {
        if x.nrows() < 12 && x.iter().any(|v| *v == -100.0) {
            panic!("a row the model cannot take");
        }
        if x.iter().any(|v| *v == 100.0) {
            return Err(Error::InvalidSetting {
                name: "row",
                value: "100".to_string(),
                reason: "refused by the model",
            });
        }
        Ok((x * *w, (*w, x.clone())))
    }
    fn backward_memo(&self, (w, x): &Self::Memo, dy: &Array2<f64>) -> Result<(f64, Array2<f64>)> {
        Ok(((x * dy).sum(), dy * *w))
    }
}
impl SplitInput<f64, Array2<f64>> for Touchy {}

#[test]
fn a_failing_or_panicking_shard_stops_sharded_training_with_an_error() {
    // Row 11 is in the last shard of every batch that holds it (a thread
    // of its own); row 0 in the first, which the calling thread runs.
    for row in [11, 0] {
        let train = |marker: f64| {
            let mut x = Array2::from_shape_fn((12, 1), |(i, _)| i as f64 / 12.0);
            x[[row, 0]] = marker;
            let data = Examples::new(x.clone(), x * 2.0).unwrap();
            Training::new(3, 12).unwrap().run_sharded(
                &Touchy,
                &MeanSquaredError,
                &mut Adam::new(0.1).unwrap(),
                0.5,
                &data,
                3,
                &mut ShardSum,
                |_| {},
            )
        };
        let refused = train(100.0).unwrap_err();
        assert!(
            matches!(refused.error, Error::InvalidSetting { name: "row", .. }),
            "row {row}: {}",
            refused.error
        );
        assert_eq!(refused.step, Some(0));
        assert_eq!(refused.parameters, 0.5);
        let panicked = train(-100.0).unwrap_err();
        assert!(
            matches!(panicked.error, Error::ShardFailed { .. }),
            "row {row}: {}",
            panicked.error
        );
        // The parameters lent to the shards for the step come back.
        assert_eq!(panicked.step, Some(0));
        assert_eq!(panicked.parameters, 0.5);
        // A clean run of the same model trains.
        let fit = train(0.5).unwrap();
        assert!((fit.parameters - 2.0).abs() < (0.5_f64 - 2.0).abs());
    }
}

#[test]
fn large_elementwise_maps_split_across_cores_give_the_same_values() {
    // Above the 262,144 elements from which elementwise work is split.
    let x: Array1<f64> = Array1::linspace(-5.0, 5.0, 300_000);
    let y = Tanh.forward(&x).unwrap();
    // The reusing passes split too, into the kept buffers.
    let mut work = Workspace::new();
    let mut dx = Array1::zeros(3);
    for _ in 0..2 {
        assert_eq!(Tanh.forward_reusing(&x, &mut work).unwrap(), &y);
        Tanh.backward_reusing(&x, &mut work, &x, &mut dx).unwrap();
        assert_eq!(dx, Tanh.backward(&x, &x).unwrap());
    }
    // Element by element, exactly as on one thread.
    assert!(y.iter().zip(&x).all(|(a, b)| *a == b.vector_tanh()));
    let d = Tanh.backward(&x, &x).unwrap();
    assert!(
        d.iter()
            .zip(&x)
            .all(|(a, b)| *a == (1.0 - b.vector_tanh() * b.vector_tanh()) * b)
    );
}

#[test]
fn a_run_time_model_has_the_gradient_of_the_same_static_model() {
    let layers = Layers::<f64>::new(2)
        .unwrap()
        .affine(3)
        .unwrap()
        .elementwise("tanh", Tanh)
        .affine(1)
        .unwrap();
    let (model, ((w1, b1), (w2, b2))) = small_network();
    let params: LayerParameters<f64> = vec![(w1.clone(), b1.clone()), (w2.clone(), b2.clone())];
    let x = wave(9).inputs().clone();
    let dy = Array2::from_shape_fn((9, 1), |(i, _)| i as f64 - 4.0);
    let (dp, dx) = layers.backward(&(params.clone(), x.clone()), &dy).unwrap();
    let (((dw1, db1), (dw2, db2)), dx_static) = model
        .backward(&(((w1, b1), (w2, b2)), x.clone()), &dy)
        .unwrap();
    assert!(near(&dp[0].0, &dw1, 1e-12) && near(&dp[1].0, &dw2, 1e-12));
    assert!(
        (&dp[0].1 - &db1)
            .iter()
            .chain((&dp[1].1 - &db2).iter())
            .all(|d| d.abs() < 1e-12)
    );
    assert!(near(&dx, &dx_static, 1e-12));

    // Parameters that do not fit the stages name the stage.
    let mut wrong = params.clone();
    wrong[1].0 = Array2::zeros((1, 4));
    let err = layers.forward(&(wrong, x.clone())).unwrap_err();
    assert!(err.to_string().contains("stage 1: weights (1, 3)"), "{err}");
    let err = layers.forward(&(params[..1].to_vec(), x)).unwrap_err();
    assert!(err.to_string().contains("2 (weights, bias) pairs"), "{err}");
    assert!(Layers::<f64>::new(0).is_err());
    assert!(Layers::<f64>::new(2).unwrap().affine(0).is_err());
}
