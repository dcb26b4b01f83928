//! Work beside a standing-by core (`on_awake_cores`, which `Training::run`
//! runs in) gives the numbers of work on one core, and the standing-by
//! thread is released however the work ends.

use ndarray::{Array1, Array2};
use revdiff::{
    Adam, Affine, Compose, Error, Euclidean, Examples, MeanSquaredError, Optimiser, Parametrised,
    Real, Tanh, Trained, Training, on_awake_cores,
};

/// Values without a pattern that makes sums exact (so that a different
/// order of summation would show).
fn values<T: Real>(rows: usize, cols: usize, seed: usize) -> Array2<T> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        let t = ((i * 131 + j * 71 + seed * 17) as f64 * 0.7131).sin();
        T::from(t).unwrap()
    })
}

fn product<T: Real>(a: &Array2<T>, b: &Array2<T>) -> Array2<T> {
    let mut c = Array2::zeros((a.nrows(), b.ncols()));
    T::product_into(T::one(), a.view(), b.view(), T::zero(), c.view_mut());
    c
}

fn same_products<T: Real>() {
    // Large enough to split in halves beside a standing core (2^20
    // multiply-adds and up), too small to split elsewhere (2^24), and an
    // odd number of rows.
    for (m, k, n) in [(128, 256, 256), (131, 100, 97), (16, 256, 256)] {
        let (a, b) = (values::<T>(m, k, 1), values::<T>(k, n, 2));
        let alone = product(&a, &b);
        let beside = on_awake_cores(|| product(&a, &b));
        assert_eq!(
            alone, beside,
            "{m} x {k} x {n} product beside a standing core"
        );
    }
}

#[test]
fn products_beside_a_standing_core_are_those_of_one_core() {
    same_products::<f64>();
    same_products::<f32>();
}

/// A two-layer network's parameters.
type Layers2 = ((Array2<f64>, Array1<f64>), (Array2<f64>, Array1<f64>));

fn network_data() -> (Examples<f64>, Layers2) {
    // 256 -> 128 (tanh) -> 3 on 512 rows, batches of 128: products of
    // 2^22 multiply-adds and Adam over 32,768 weights, all of which split
    // beside a standing core.
    let x = values::<f64>(512, 256, 3);
    let y = values::<f64>(512, 3, 4);
    let start = (
        (values::<f64>(128, 256, 5) * 0.05, Array1::zeros(128)),
        (values::<f64>(3, 128, 6) * 0.1, Array1::zeros(3)),
    );
    (Examples::new(x, y).unwrap(), start)
}

/// The network of [`network_data`] trained with Adam under mean squared
/// error.
fn trained(training: &Training, data: &Examples<f64>, start: &Layers2) -> Trained<Layers2, f64> {
    let model = Affine.then(Tanh).then_parametrised(Affine);
    let mut adam = Adam::new(1e-3).unwrap();
    training
        .run(
            &model,
            &MeanSquaredError,
            &mut adam,
            start.clone(),
            data,
            |_| {},
        )
        .unwrap()
}

#[test]
fn training_beside_a_standing_core_gives_the_parameters_of_one_core() {
    let (data, start) = network_data();
    let training = Training::new(3, 128).unwrap().seed(9);
    let train = || trained(&training, &data, &start);
    // From the test's thread: the run stands a second core by (when the
    // pool has two threads). From a thread of a pool of one: it cannot.
    let beside = train();
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let alone = pool.install(train);
    assert_eq!(beside.parameters, alone.parameters);
    assert_eq!(beside.epoch_losses, alone.epoch_losses);
    // And the training moved the parameters (the comparison is not of
    // two copies of the start).
    assert_ne!(alone.parameters, start);
}

#[test]
fn a_panic_beside_a_standing_core_comes_back_and_releases_it() {
    let caught = std::panic::catch_unwind(|| on_awake_cores(|| panic!("from the work")));
    let message = caught.unwrap_err();
    assert_eq!(message.downcast_ref::<&str>(), Some(&"from the work"));
    // The standing-by thread was released: the pool still serves work,
    // and a second call stands one by again.
    let (a, b) = (values::<f64>(128, 256, 7), values::<f64>(256, 256, 8));
    assert_eq!(on_awake_cores(|| product(&a, &b)), product(&a, &b));
    // Nested calls run the inner work as it is.
    assert_eq!(on_awake_cores(|| on_awake_cores(|| 7)), 7);
}

#[test]
fn a_non_finite_value_is_found_in_either_half() {
    // The finite checks of the training loop and of `update_in_place` run
    // in halves beside a standing core: a NaN must be found wherever it is.
    let n = 40_000;
    on_awake_cores(|| {
        let clean = Array1::from_elem(n, 0.5);
        assert!(clean.all_finite());
        for at in [0, n / 2 - 1, n / 2, n - 1] {
            let mut bad = clean.clone();
            bad[at] = f64::NAN;
            assert!(!bad.all_finite(), "NaN at {at} of {n}");
            let mut params = clean.clone();
            let refused = Adam::new(0.1).unwrap().update_in_place(&mut params, &bad);
            assert!(
                matches!(refused, Err(Error::NonFinite { .. })),
                "NaN at {at}: {refused:?}"
            );
            assert_eq!(params, clean, "a refused update changes nothing");
        }
        // And a clean update moves every coordinate, in both halves.
        let mut params = clean.clone();
        let mut adam = Adam::new(0.1).unwrap();
        adam.update_in_place(&mut params, &Array1::from_elem(n, 2.0))
            .unwrap();
        // Adam's first step moves each coordinate by the rate times the
        // sign of its gradient (common practice, no source).
        assert!(params.iter().all(|&p| (p - 0.4).abs() < 1e-8));
    });
}

#[test]
fn concurrent_training_runs_share_the_pool_and_agree() {
    // Four runs at once from four threads of the test's own, ten times: their
    // standing-by jobs and halves mix in one pool of rayon threads, which
    // may steal one run's standing by while waiting inside another run.
    // Every run must end, with the parameters of the same run made alone.
    let (data, start) = network_data();
    let run =
        |seed: u64| trained(&Training::new(2, 128).unwrap().seed(seed), &data, &start).parameters;
    let alone: Vec<_> = (0..4).map(run).collect();
    // Several rounds: which thread steals what differs from round to round.
    for round in 0..10 {
        let together: Vec<_> = std::thread::scope(|scope| {
            let threads: Vec<_> = (0..4).map(|seed| scope.spawn(move || run(seed))).collect();
            threads.into_iter().map(|t| t.join().unwrap()).collect()
        });
        assert_eq!(alone, together, "round {round}");
    }
    // Different seeds shuffle differently: the runs are not one run four
    // times.
    assert_ne!(alone[0], alone[1]);
}

/// Finite values from every range a finite check must let through: zeros
/// of both signs, subnormals, ordinary values and the largest magnitudes.
fn finite_value<T: Real + std::fmt::Debug>() -> impl proptest::strategy::Strategy<Value = T> {
    use proptest::prelude::*;
    prop_oneof![
        Just(T::zero()),
        Just(-T::zero()),
        Just(T::min_positive_value() / T::from(4.0).unwrap()),
        Just(T::max_value()),
        Just(T::min_value()),
        (-1.0e6..1.0e6f64).prop_map(|v| T::from(v).unwrap()),
    ]
}

fn finite_check_finds_what_is_not_finite<T: Real + std::fmt::Debug>(
    values: Vec<T>,
    at: usize,
    which: usize,
) {
    let clean = Array1::from(values);
    assert!(clean.all_finite(), "finite values refused: {clean:?}");
    let mut bad = clean.clone();
    let n = bad.len();
    bad[at % n] = [T::nan(), T::infinity(), T::neg_infinity()][which];
    assert!(
        !bad.all_finite(),
        "{:?} at {} not found",
        bad[at % n],
        at % n
    );
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
    // Lengths across the check's blocks of 256 and its vector lanes.
    #[test]
    fn the_finite_check_finds_every_non_finite_value_f64(
        values in proptest::collection::vec(finite_value::<f64>(), 1..700),
        at in 0..700usize,
        which in 0..3usize,
    ) {
        finite_check_finds_what_is_not_finite(values, at, which);
    }
    #[test]
    fn the_finite_check_finds_every_non_finite_value_f32(
        values in proptest::collection::vec(finite_value::<f32>(), 1..700),
        at in 0..700usize,
        which in 0..3usize,
    ) {
        finite_check_finds_what_is_not_finite(values, at, which);
    }
}
