//! Learning: parametrised maps, losses, optimisers, schedules, the training
//! loop and least squares, each against hand computations and the law
//! checkers.

use crate::common::assert_close;
use ndarray::{Array1, Array2, array};
use proptest::prelude::*;
use revdiff::laws::strategies::{matrices, vectors};
use revdiff::*;

/// Whether two arrays of one shape agree to `tol` in every element.
fn near<D: ndarray::Dimension>(
    a: &ndarray::Array<f64, D>,
    b: &ndarray::Array<f64, D>,
    tol: f64,
) -> bool {
    a.shape() == b.shape() && a.iter().zip(b.iter()).all(|(x, y)| (x - y).abs() <= tol)
}

// ---------------------------------------------------------------- losses

/// Pairs of arrays of length 3 with entries in [-3, 3].
fn pairs() -> impl Strategy<Value = (Array1<f64>, Array1<f64>)> + Clone {
    (
        vectors(3, -3.0, 3.0).unwrap(),
        vectors(3, -3.0, 3.0).unwrap(),
    )
}

/// Pairs whose differences stay 0.15 away from the Huber threshold 1, where
/// the loss has no second derivative.
fn huber_pairs() -> impl Strategy<Value = (Array1<f64>, Array1<f64>)> + Clone {
    let gap = prop_oneof![-0.85..0.85f64, 1.15..3.0f64, -3.0..-1.15f64];
    (
        vectors(3, -2.0, 2.0).unwrap(),
        proptest::collection::vec(gap, 3),
    )
        .prop_map(|(t, r)| (&t + &Array1::from(r), t))
}

#[test]
fn every_loss_passes_the_laws_at_orders_one_and_two() {
    let checker = Checker::new();
    checker
        .reverse(&SquaredError::new(), pairs())
        .assert_clean();
    checker
        .reverse(&SquaredError::halved(), pairs())
        .assert_clean();
    checker.reverse(&MeanSquaredError, pairs()).assert_clean();
    checker.reverse(&LogitCrossEntropy, pairs()).assert_clean();
    checker
        .reverse(&LogitBinaryCrossEntropy, pairs())
        .assert_clean();
    checker
        .reverse(&Huber::new(1.0).unwrap(), huber_pairs())
        .assert_clean();
}

#[test]
fn loss_values_match_their_definitions() {
    let (y, t) = (array![0.5, -1.0, 2.0], array![0.0, 1.0, 0.5]);
    let r: Array1<f64> = &y - &t;
    let sq: f64 = r.iter().map(|v| v * v).sum();
    assert_close(
        "squared error",
        SquaredError::new()
            .forward(&(y.clone(), t.clone()))
            .unwrap(),
        sq,
        1e-15,
    );
    assert_close(
        "halved",
        SquaredError::halved()
            .forward(&(y.clone(), t.clone()))
            .unwrap(),
        sq / 2.0,
        1e-15,
    );
    assert_close(
        "mean",
        MeanSquaredError.forward(&(y.clone(), t.clone())).unwrap(),
        sq / 3.0,
        1e-15,
    );

    // Cross-entropy with a one-hot target is minus the log of the softmax.
    let z = array![0.3, -1.2, 2.5];
    let onehot = array![0.0, 1.0, 0.0];
    let softmax_1 = (-1.2_f64).exp() / z.iter().map(|v: &f64| v.exp()).sum::<f64>();
    assert_close(
        "cross-entropy",
        LogitCrossEntropy
            .forward(&(z.clone(), onehot.clone()))
            .unwrap(),
        -softmax_1.ln(),
        1e-14,
    );
    let (dz, _) = LogitCrossEntropy
        .backward(&(z.clone(), onehot), &1.0)
        .unwrap();
    assert_close("cross-entropy slope", dz[1], softmax_1 - 1.0, 1e-14);

    // Binary cross-entropy against its textbook form at moderate logits.
    let targets = array![0.0, 1.0, 0.3];
    let textbook: f64 = z
        .iter()
        .zip(&targets)
        .map(|(zi, ti)| {
            let s = 1.0 / (1.0 + (-zi).exp());
            -(ti * s.ln() + (1.0 - ti) * (1.0 - s).ln())
        })
        .sum();
    assert_close(
        "binary cross-entropy",
        LogitBinaryCrossEntropy.forward(&(z, targets)).unwrap(),
        textbook,
        1e-13,
    );

    // Huber: quadratic inside, linear outside, continuous at the threshold.
    let huber = Huber::new(2.0).unwrap();
    let at = |r: f64| huber.forward(&(array![r], array![0.0])).unwrap();
    assert_eq!(at(1.0), 0.5);
    assert_eq!(at(-5.0), 2.0 * (5.0 - 1.0));
    assert_close("huber at the threshold", at(2.0), at(2.0 + 1e-12), 1e-11);
}

#[test]
fn logit_losses_stay_finite_at_extreme_logits() {
    let z = array![1000.0, -1000.0, 0.0];
    let ce = LogitCrossEntropy
        .forward(&(z.clone(), array![0.0, 1.0, 0.0]))
        .unwrap();
    assert_eq!(ce, 2000.0);
    let (dz, _) = LogitCrossEntropy
        .backward(&(z.clone(), array![1.0, 0.0, 0.0]), &1.0)
        .unwrap();
    assert!(dz.iter().all(|v: &f64| v.is_finite()));
    let bce = LogitBinaryCrossEntropy
        .forward(&(z.clone(), array![0.0, 1.0, 0.5]))
        .unwrap();
    assert_close("binary cross-entropy", bce, 2000.0 + 2.0_f64.ln(), 1e-12);
}

#[test]
fn losses_refuse_mismatched_shapes_empty_arrays_and_bad_thresholds() {
    let mismatched = (array![1.0, 2.0], array![1.0]);
    for result in [
        SquaredError::new().forward(&mismatched.clone()),
        MeanSquaredError.forward(&mismatched.clone()),
        LogitCrossEntropy.forward(&mismatched.clone()),
        LogitBinaryCrossEntropy.forward(&mismatched.clone()),
        Huber::new(1.0).unwrap().forward(&mismatched.clone()),
    ] {
        assert!(
            matches!(result, Err(Error::ShapeMismatch { .. })),
            "{result:?}"
        );
    }
    let empty = (Array1::<f64>::zeros(0), Array1::<f64>::zeros(0));
    assert!(matches!(
        MeanSquaredError.forward(&empty),
        Err(Error::Empty { .. })
    ));
    assert!(matches!(
        LogitCrossEntropy.forward(&empty),
        Err(Error::Empty { .. })
    ));
    for delta in [0.0, -1.0, f64::NAN, f64::INFINITY] {
        assert!(matches!(
            Huber::new(delta),
            Err(Error::InvalidSetting {
                name: "huber delta",
                ..
            })
        ));
    }
}

#[test]
fn a_loss_composes_with_a_model_like_any_map() {
    // (W, x) -> mean squared error of W x against a fixed target, as one map.
    let target = array![1.0, -1.0];
    let model = MatVec::plain();
    let whole = model.pair(constant(target.clone())).then(MeanSquaredError);
    let (w, x) = (array![[1.0, 2.0], [0.5, -1.0]], array![0.5, 1.5]);
    let y = w.dot(&x);
    let (dw, _) = whole.backward(&(w.clone(), x.clone()), &1.0).unwrap();
    // d/dW mean (Wx - t)^2 = (Wx - t) x' (2 / n, n = 2).
    let expected = Array2::from_shape_fn((2, 2), |(i, j)| (y[i] - target[i]) * x[j]);
    assert!(near(&dw, &expected, 1e-14), "{dw} vs {expected}");
}

// ---------------------------------------------------------------- parametrised maps

type Layer = (Array2<f64>, Array1<f64>);

fn layer(rows: usize, cols: usize) -> impl Strategy<Value = Layer> + Clone {
    (
        matrices(rows, cols, -1.0, 1.0).unwrap(),
        vectors(rows, -1.0, 1.0).unwrap(),
    )
}

#[test]
fn stacked_models_pass_the_laws_and_agree_with_their_composite() {
    let model = Affine.then(Tanh).then_parametrised(Affine.then(Sigmoid));
    let inputs = ((layer(3, 2), layer(2, 3)), vectors(2, -2.0, 2.0).unwrap());
    let checker = Checker::new().cases(64).unwrap();
    checker.reverse(&model, inputs.clone()).assert_clean();
    checker
        .same_reverse(&model, &model.composite(), inputs)
        .assert_clean();

    // Three layers, so that a parametrised composite holds another and its
    // reverse map reads the inner one's from the same forward pass.
    let deep = Affine
        .then(Tanh)
        .then_parametrised(Affine.then(Tanh))
        .then_parametrised(Affine);
    let inputs = (
        ((layer(3, 2), layer(2, 3)), layer(2, 2)),
        vectors(2, -2.0, 2.0).unwrap(),
    );
    checker.reverse(&deep, inputs.clone()).assert_clean();
    checker
        .same_reverse(&deep, &deep.composite(), inputs)
        .assert_clean();
}

#[test]
fn stacked_gradient_is_the_hand_chain_rule() {
    // ((a, b), x) -> b sin(a x): d/da = b cos(a x) x, d/db = sin(a x), d/dx = b cos(a x) a.
    let model = MulPair.then(Sin).then_parametrised(MulPair);
    let ((a, b), x) = ((0.7_f64, -1.3), 0.4);
    let ((da, db), dx) = model.backward(&((a, b), x), &1.0).unwrap();
    assert_close("d/da", da, b * (a * x).cos() * x, 1e-15);
    assert_close("d/db", db, (a * x).sin(), 1e-15);
    assert_close("d/dx", dx, b * (a * x).cos() * a, 1e-15);
}

#[test]
fn reparametrised_shared_frozen_and_bound_maps_pass_the_laws() {
    let checker = Checker::new().cases(64).unwrap();
    // A positive scale learnt through its logarithm.
    checker
        .reverse(
            &MulPair.then(Tanh).reparametrised(Exp),
            (-2.0..2.0f64, -2.0..2.0f64),
        )
        .assert_clean();
    // One weight used twice.
    checker
        .reverse(
            &MulPair.then(Sin).then_parametrised(MulPair).shared(),
            (-2.0..2.0f64, -2.0..2.0f64),
        )
        .assert_clean();
    // A fixed bias, and fixed weights.
    checker
        .reverse(
            &Affine.freeze_second(array![0.5, -0.5]).then(Tanh),
            (
                matrices(2, 2, -1.0, 1.0).unwrap(),
                vectors(2, -1.0, 1.0).unwrap(),
            ),
        )
        .assert_clean();
    checker
        .reverse(
            &Affine.freeze_first(array![[1.0, 2.0]]),
            (
                vectors(1, -1.0, 1.0).unwrap(),
                vectors(2, -1.0, 1.0).unwrap(),
            ),
        )
        .assert_clean();
    // All parameters bound: an ordinary map of the input.
    let bound = Affine
        .then(Tanh)
        .with_parameters((array![[0.3, -0.7]], array![0.1]));
    checker
        .reverse(&bound, vectors(2, -2.0, 2.0).unwrap())
        .assert_clean();
}

#[test]
fn sharing_sums_the_gradients_of_both_uses() {
    let two_slots = MulPair.then(Sin).then_parametrised(MulPair);
    let shared = two_slots.shared();
    let (w, x) = (0.6_f64, 1.7);
    let ((d1, d2), dx_pair) = two_slots.backward(&((w, w), x), &1.0).unwrap();
    let (dw, dx) = shared.backward(&(w, x), &1.0).unwrap();
    assert_close("shared gradient", dw, d1 + d2, 1e-15);
    assert_eq!(dx, dx_pair);
    assert!(
        d1 != d2,
        "the two uses must differ for this test to mean anything"
    );
}

#[test]
fn a_frozen_parameter_gets_no_update_and_the_free_one_its_own_gradient() {
    let w = array![[2.0, -1.0]];
    let b = array![0.25];
    let x = array![0.5, 1.0];
    let ((dw_full, db_full), _) = Affine
        .backward(&((w.clone(), b.clone()), x.clone()), &array![3.0])
        .unwrap();
    let (dw, _) = Affine
        .freeze_second(b.clone())
        .backward(&(w.clone(), x.clone()), &array![3.0])
        .unwrap();
    let (db, _) = Affine
        .freeze_first(w.clone())
        .backward(&(b.clone(), x.clone()), &array![3.0])
        .unwrap();
    assert_eq!(dw, dw_full);
    assert_eq!(db, db_full);

    // Training a model with a frozen bias moves the weights only; the bias
    // is not part of the trained parameters at all.
    let data = Examples::new(array![[1.0, 0.0], [0.0, 1.0]], array![[3.0], [-1.0]]).unwrap();
    let model = Affine.freeze_second(array![1.0]);
    let mut descent = GradientDescent::new(0.5).unwrap();
    let run = Training::new(200, 2)
        .unwrap()
        .run(
            &model,
            &SquaredError::halved(),
            &mut descent,
            array![[0.0, 0.0]],
            &data,
            |_| {},
        )
        .unwrap();
    // With the bias held at 1 the exact fit is W = (2, -2).
    assert!(
        near(&run.parameters, &array![[2.0, -2.0]], 1e-6),
        "{}",
        run.parameters
    );
}

// ---------------------------------------------------------------- optimisers

/// Two updates of each rule on a parameter made of an array and a scalar,
/// against the update formulas computed by hand.
#[test]
fn each_optimiser_makes_its_published_update_on_a_tuple_of_arrays() {
    type Mixed = (Array1<f64>, f64);
    let p0 = (array![1.0, -2.0], 0.5_f64);
    let g1 = (array![0.2, -4.0], 1.0_f64);
    let g2 = (array![-0.1, 2.0], 3.0_f64);
    let flat = |p: &(Array1<f64>, f64)| vec![p.0[0], p.0[1], p.1];
    let (lr, mu) = (0.1, 0.9);
    let [a, b] = [flat(&g1), flat(&g2)];
    let start = flat(&p0);

    let run = |opt: &mut dyn FnMut(&Mixed, &Mixed) -> Mixed| {
        let p1 = opt(&p0, &g1);
        flat(&opt(&p1, &g2))
    };
    let expect = |name: &str, got: Vec<f64>, want: Vec<f64>| {
        for (k, (g, w)) in got.iter().zip(&want).enumerate() {
            assert_close(&format!("{name}, coordinate {k}"), *g, *w, 1e-14);
        }
    };

    let mut o = GradientDescent::new(lr).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    expect(
        "gradient descent",
        got,
        (0..3).map(|k| start[k] - lr * (a[k] + b[k])).collect(),
    );

    let mut o = Momentum::new(lr, mu).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    expect(
        "momentum",
        got,
        (0..3)
            .map(|k| start[k] - lr * a[k] - lr * (mu * a[k] + b[k]))
            .collect(),
    );

    let mut o = Nesterov::new(lr, mu).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    let nesterov = (0..3)
        .map(|k| {
            let v1 = a[k];
            let v2 = mu * v1 + b[k];
            start[k] - lr * (a[k] + mu * v1) - lr * (b[k] + mu * v2)
        })
        .collect();
    expect("nesterov", got, nesterov);

    let eps = 1e-8;
    let mut o = Adagrad::new(lr).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    let adagrad = (0..3)
        .map(|k| {
            let s1 = a[k] * a[k];
            let s2 = s1 + b[k] * b[k];
            start[k] - lr * a[k] / (s1.sqrt() + eps) - lr * b[k] / (s2.sqrt() + eps)
        })
        .collect();
    expect("adagrad", got, adagrad);

    let rho = 0.9;
    let mut o = RmsProp::new(lr).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    let rmsprop = (0..3)
        .map(|k| {
            let s1 = (1.0 - rho) * a[k] * a[k];
            let s2 = rho * s1 + (1.0 - rho) * b[k] * b[k];
            start[k] - lr * a[k] / (s1.sqrt() + eps) - lr * b[k] / (s2.sqrt() + eps)
        })
        .collect();
    expect("rmsprop", got, rmsprop);

    let (b1, b2) = (0.9, 0.999);
    let mut o = Adam::new(lr).unwrap();
    let got = run(&mut |p, g| o.update(p, g).unwrap());
    let adam = (0..3)
        .map(|k| {
            let (m1, v1) = ((1.0 - b1) * a[k], (1.0 - b2) * a[k] * a[k]);
            let step1 = lr * (m1 / (1.0 - b1)) / ((v1 / (1.0 - b2)).sqrt() + eps);
            let (m2, v2) = (
                b1 * m1 + (1.0 - b1) * b[k],
                b2 * v1 + (1.0 - b2) * b[k] * b[k],
            );
            let step2 = lr * (m2 / (1.0 - b1 * b1)) / ((v2 / (1.0 - b2 * b2)).sqrt() + eps);
            start[k] - step1 - step2
        })
        .collect();
    expect("adam", got, adam);
}

#[test]
fn every_optimiser_minimises_an_ill_scaled_quadratic() {
    // f(w) = 10 (w0 - 1)^2 + 0.1 (w1 + 2)^2, minimum at (1, -2).
    let grad = |w: &Array1<f64>| array![20.0 * (w[0] - 1.0), 0.2 * (w[1] + 2.0)];
    fn minimise<O: Optimiser<f64>>(
        mut o: O,
        steps: usize,
        grad: impl Fn(&Array1<f64>) -> Array1<f64>,
    ) -> Array1<f64> {
        let mut w = array![0.0, 0.0];
        for _ in 0..steps {
            w = o.update(&w, &grad(&w)).unwrap();
        }
        w
    }
    let target = array![1.0, -2.0];
    let results = [
        (
            "gradient descent",
            minimise(GradientDescent::new(0.09).unwrap(), 3000, grad),
        ),
        (
            "momentum",
            minimise(Momentum::new(0.01, 0.9).unwrap(), 3000, grad),
        ),
        (
            "nesterov",
            minimise(Nesterov::new(0.01, 0.9).unwrap(), 3000, grad),
        ),
        ("adagrad", minimise(Adagrad::new(0.5).unwrap(), 3000, grad)),
        (
            "rmsprop",
            minimise(
                RmsProp::new(0.01)
                    .unwrap()
                    .with_schedule(Schedule::exponential(0.01, 0.998).unwrap()),
                3000,
                grad,
            ),
        ),
        (
            "adam",
            minimise(
                Adam::new(0.05)
                    .unwrap()
                    .with_schedule(Schedule::cosine(0.05, 0.0, 3000).unwrap()),
                3000,
                grad,
            ),
        ),
    ];
    for (name, w) in results {
        assert!(near(&w, &target, 1e-3), "{name} ended at {w}");
    }
}

#[test]
fn invalid_optimiser_settings_are_refused_at_construction() {
    let named = |r: Result<()>, want: &str| match r {
        Err(Error::InvalidSetting { name, .. }) => assert_eq!(name, want),
        other => panic!("expected a refusal of {want}, got {other:?}"),
    };
    for lr in [-0.1, 0.0, f64::NAN, f64::INFINITY] {
        named(GradientDescent::new(lr).map(drop), "learning rate");
        named(Adam::new(lr).map(drop), "learning rate");
        named(Momentum::new(lr, 0.5).map(drop), "learning rate");
    }
    for beta in [1.0, -0.1, 1.5, f64::NAN] {
        named(
            Adam::new(0.1).unwrap().with_betas(beta, 0.999).map(drop),
            "beta1",
        );
        named(
            Adam::new(0.1).unwrap().with_betas(0.9, beta).map(drop),
            "beta2",
        );
        named(Momentum::new(0.1, beta).map(drop), "momentum");
        named(Nesterov::new(0.1, beta).map(drop), "momentum");
        named(
            RmsProp::new(0.1).unwrap().with_decay(beta).map(drop),
            "rmsprop decay",
        );
    }
    for eps in [0.0, -1e-8] {
        named(
            Adam::new(0.1).unwrap().with_epsilon(eps).map(drop),
            "epsilon",
        );
        named(
            Adagrad::new(0.1).unwrap().with_epsilon(eps).map(drop),
            "epsilon",
        );
        named(
            RmsProp::new(0.1).unwrap().with_epsilon(eps).map(drop),
            "epsilon",
        );
    }
    named(
        Schedule::step_decay(0.1, 0.5, 0).map(drop),
        "steps between decays",
    );
    named(
        Schedule::step_decay(0.1, 1.5, 2).map(drop),
        "step decay factor",
    );
    named(
        Schedule::exponential(0.1, 0.0).map(drop),
        "exponential decay factor",
    );
    named(
        Schedule::cosine(0.1, 0.2, 10).map(drop),
        "final learning rate",
    );
}

#[test]
fn an_optimiser_refuses_bad_gradients_and_keeps_its_state() {
    let mut adam = Adam::new(0.1).unwrap();
    let p = adam.update(&array![1.0, 2.0], &array![1.0, 1.0]).unwrap();
    assert!(matches!(
        adam.update(&p, &array![f64::NAN, 1.0]),
        Err(Error::NonFinite { .. })
    ));
    assert!(matches!(
        adam.update(&p, &array![1.0, 1.0, 1.0]),
        Err(Error::CoordinateCount { .. })
    ));
    // Parameters of another size than the state was made for.
    assert!(matches!(
        adam.update(&array![1.0], &array![1.0]),
        Err(Error::CoordinateCount { .. })
    ));
    assert_eq!(adam.steps_taken(), 1);
    adam.reset();
    assert_eq!(adam.steps_taken(), 0);
    assert!(adam.update(&array![1.0], &array![1.0]).is_ok());
}

#[test]
fn schedules_give_their_rates() {
    let step = Schedule::step_decay(1.0, 0.1, 3).unwrap();
    assert_eq!([step.rate_at(0), step.rate_at(2)], [1.0, 1.0]);
    assert_close("step decay", step.rate_at(7), 0.01, 1e-15);
    let exp = Schedule::exponential(2.0, 0.5).unwrap();
    assert_close("exponential", exp.rate_at(3), 0.25, 1e-15);
    let cos = Schedule::cosine(1.0, 0.0, 4).unwrap();
    let expected = [1.0, (1.0 + (std::f64::consts::PI / 4.0).cos()) / 2.0, 0.5];
    for (k, e) in expected.iter().enumerate() {
        assert_close("cosine", cos.rate_at(k), *e, 1e-15);
    }
    assert_eq!(cos.rate_at(4), 0.0);
    assert_eq!(cos.rate_at(40), 0.0);

    // An optimiser follows its schedule: two descent steps at rates 1 and 0.5.
    let mut descent = GradientDescent::new(1.0)
        .unwrap()
        .with_schedule(Schedule::exponential(1.0, 0.5).unwrap());
    let p = descent.update(&0.0, &1.0).unwrap();
    assert_eq!(descent.update(&p, &1.0).unwrap(), -1.5);
}

// ---------------------------------------------------------------- training

fn line_data(n: usize) -> Examples<f64> {
    // y = 2x - 1 plus a fixed, deterministic wobble.
    let x = Array2::from_shape_fn((n, 1), |(i, _)| i as f64 / n as f64);
    let y = Array2::from_shape_fn((n, 1), |(i, _)| {
        2.0 * x[[i, 0]] - 1.0 + 0.05 * ((i * 7) as f64).sin()
    });
    Examples::new(x, y).unwrap()
}

fn start() -> Layer {
    (array![[0.0]], array![0.0])
}

#[test]
fn bad_datasets_and_settings_are_typed_errors() {
    let none = Array2::<f64>::zeros((0, 2));
    assert!(matches!(
        Examples::new(none.clone(), none),
        Err(Error::Empty { .. })
    ));
    assert_eq!(
        Examples::new(Array2::<f64>::zeros((3, 2)), Array2::zeros((2, 1))),
        Err(Error::RowCountMismatch {
            inputs: 3,
            targets: 2
        })
    );
    let mut bad = Array2::<f64>::zeros((3, 1));
    bad[[2, 0]] = f64::INFINITY;
    let err = Examples::new(Array2::zeros((3, 1)), bad).unwrap_err();
    assert!(err.to_string().contains("target row 2"), "{err}");

    assert!(matches!(
        Training::new(5, 0),
        Err(Error::InvalidSetting {
            name: "batch size",
            ..
        })
    ));
    assert!(matches!(
        Training::new(0, 5),
        Err(Error::InvalidSetting { name: "epochs", .. })
    ));
    let t = Training::new(1, 1).unwrap();
    assert!(t.stop_early(0.0, 3).is_err());
    assert!(t.stop_early(1.0, 3).is_err());
    assert!(t.stop_early(0.2, 0).is_err());
    // A validation fraction that leaves no validation rows for this dataset.
    let tiny = line_data(3);
    let err = t
        .stop_early(0.1, 1)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut Adam::new(0.1).unwrap(),
            start(),
            &tiny,
            |_| {},
        )
        .unwrap_err();
    assert!(matches!(
        err.error,
        Error::InvalidSetting {
            name: "validation fraction",
            ..
        }
    ));
    assert_eq!((err.step, err.parameters), (None, start()));
}

#[test]
fn the_observer_sees_every_step_in_order_and_each_epoch_end() {
    let data = line_data(10);
    let mut seen = Vec::new();
    let run = Training::new(3, 4)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut GradientDescent::new(0.1).unwrap(),
            start(),
            &data,
            |p| {
                seen.push((
                    p.step,
                    p.epoch,
                    p.epoch_finished,
                    p.loss,
                    p.validation_loss,
                    p.parameters.clone(),
                ))
            },
        )
        .unwrap();
    // 10 rows in batches of 4: 3 steps an epoch.
    assert_eq!(run.steps, 9);
    assert_eq!(
        seen.iter().map(|p| p.0).collect::<Vec<_>>(),
        (0..9).collect::<Vec<_>>()
    );
    assert_eq!(
        seen.iter().map(|p| p.1).collect::<Vec<_>>(),
        vec![0, 0, 0, 1, 1, 1, 2, 2, 2]
    );
    assert_eq!(seen.iter().filter(|p| p.2).count(), 3);
    assert!(seen.iter().all(|p| p.4.is_none() && p.3.is_finite()));
    // The observer sees the parameters after each step: the last are the result.
    assert_eq!(seen.last().unwrap().5, run.parameters);
    assert_ne!(seen[0].5, start());
    assert_eq!(run.epoch_losses.len(), 3);
    assert!(run.epoch_losses[2] < run.epoch_losses[0]);
}

#[test]
fn the_same_seed_gives_the_same_run_and_another_seed_another() {
    let data = line_data(12);
    let go = |seed| {
        Training::new(2, 3)
            .unwrap()
            .seed(seed)
            .run(
                &Affine,
                &MeanSquaredError,
                &mut Momentum::new(0.1, 0.5).unwrap(),
                start(),
                &data,
                |_| {},
            )
            .unwrap()
            .parameters
    };
    assert_eq!(go(7), go(7));
    assert_ne!(go(7), go(8));
}

#[test]
fn a_non_finite_loss_stops_the_run_naming_the_step_and_keeping_the_last_good_parameters() {
    // (w, x) -> ln(w x), row by row: one large step sends w below zero,
    // and the next loss is NaN. One full batch a step, so step 1 is in epoch 1.
    let model = Rowwise::new(MulPair.then(Ln));
    let data = Examples::new(array![[1.0], [2.0]], array![[-5.0], [-5.0]]).unwrap();
    let trainer = Training::new(5, 2).unwrap();
    let mut one_step = GradientDescent::new(10.0).unwrap();
    let after_one = trainer
        .run(
            &model,
            &RowMean::new(SquaredError::new()),
            &mut one_step,
            array![1.0],
            &data,
            |_| {},
        )
        .unwrap_err();
    assert_eq!(
        after_one.error,
        Error::Diverged {
            step: 1,
            epoch: 1,
            quantity: "loss"
        }
    );
    assert_eq!(after_one.step, Some(1));
    // The parameters after step 0 are finite but give a NaN loss (w < 0), so
    // they are not returned: the start is the most recent with a finite loss.
    let mut fresh = GradientDescent::new(10.0).unwrap();
    let one = Training::new(1, 2)
        .unwrap()
        .run(
            &model,
            &RowMean::new(SquaredError::new()),
            &mut fresh,
            array![1.0],
            &data,
            |_| {},
        )
        .unwrap();
    assert!(one.parameters[0] < 0.0);
    assert_eq!(after_one.parameters, array![1.0]);
    let input = (after_one.parameters.clone(), data.inputs().clone());
    let predicted = model.forward(&input).unwrap();
    let loss: f64 = RowMean::new(SquaredError::new())
        .forward(&(predicted, data.targets().clone()))
        .unwrap();
    assert!(loss.is_finite());
    // The message names the step once, counting from 0.
    assert_eq!(
        after_one.to_string(),
        "training interrupted: training step 1 (epoch 1): the loss is not finite"
    );
}

#[test]
fn a_non_finite_gradient_stops_the_run_at_the_first_step_with_the_start() {
    // sqrt(w x) at w = 0: the loss is finite, its slope is not.
    let model = Rowwise::new(MulPair.then(Sqrt));
    let data = Examples::new(array![[1.0]], array![[1.0]]).unwrap();
    let err = Training::new(1, 1)
        .unwrap()
        .run(
            &model,
            &RowMean::new(SquaredError::new()),
            &mut Adam::new(0.1).unwrap(),
            array![0.0],
            &data,
            |_| {},
        )
        .unwrap_err();
    assert_eq!(
        err.error,
        Error::Diverged {
            step: 0,
            epoch: 0,
            quantity: "gradient"
        }
    );
    assert_eq!(err.parameters, array![0.0]);

    // Starting parameters that are not finite are refused before any step.
    let err = Training::new(1, 1)
        .unwrap()
        .run(
            &model,
            &RowMean::new(SquaredError::new()),
            &mut Adam::new(0.1).unwrap(),
            array![f64::NAN],
            &data,
            |_| {},
        )
        .unwrap_err();
    assert!(
        matches!(err.error, Error::NonFinite { .. }) && err.step.is_none(),
        "{err}"
    );
}

#[test]
fn a_model_whose_output_does_not_fit_the_targets_is_an_error_not_a_panic() {
    let data = Examples::new(array![[1.0, 2.0]], array![[1.0, 2.0, 3.0]]).unwrap();
    let err = Training::new(1, 1)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut Adam::new(0.1).unwrap(),
            (array![[1.0, 1.0]], array![0.0]),
            &data,
            |_| {},
        )
        .unwrap_err();
    assert!(
        matches!(err.error, Error::ShapeMismatch { .. }),
        "{}",
        err.error
    );
    assert_eq!(err.step, Some(0));
}

#[test]
fn early_stopping_ends_the_run_and_returns_the_best_validation_parameters() {
    // Noisy data and a learning rate too high to settle: the validation loss
    // stops improving long before 500 epochs.
    let data = line_data(40);
    let mut validation = Vec::new();
    let run = Training::new(500, 4)
        .unwrap()
        .stop_early(0.25, 3)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut GradientDescent::new(0.5).unwrap(),
            start(),
            &data,
            |p| {
                if let Some(v) = p.validation_loss {
                    validation.push(v)
                }
            },
        )
        .unwrap();
    assert!(
        run.stopped_early && run.epochs < 500,
        "ran {} epochs",
        run.epochs
    );
    assert_eq!(run.validation_losses, validation);
    assert_eq!(validation.len(), run.epochs);
    // The best epoch is exactly `stall_epochs` epochs before the end.
    let best = validation.iter().cloned().fold(f64::INFINITY, f64::min);
    let best_epoch = validation.iter().position(|v| *v == best).unwrap() + 1;
    assert_eq!(best_epoch + 3, run.epochs);
    // And the parameters returned are the fit at that epoch: close to the line.
    let (w, b) = &run.parameters;
    assert!(
        (w[[0, 0]] - 2.0).abs() < 0.2 && (b[0] + 1.0).abs() < 0.2,
        "{w} {b}"
    );
}

#[test]
fn the_validation_loss_is_the_mean_loss_of_the_held_out_rows() {
    // Forty copies of one example: whichever rows are held out (ten, in
    // batches of 3, 3, 3 and 1, whose losses are weighted by their row
    // counts), their mean loss is that example's loss at the epoch's
    // parameters, computed here on its own.
    let x = Array2::from_elem((40, 2), 0.5);
    let t = Array2::from_elem((40, 1), 2.0);
    let data = Examples::new(x, t).unwrap();
    let mut seen = Vec::new();
    Training::new(4, 3)
        .unwrap()
        .stop_early(0.25, 10)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut GradientDescent::new(0.01).unwrap(),
            (array![[0.1, -0.3]], array![0.2]),
            &data,
            |p| {
                if let Some(v) = p.validation_loss {
                    seen.push((v, p.parameters.clone()));
                }
            },
        )
        .unwrap();
    assert_eq!(seen.len(), 4);
    for (v, (w, b)) in seen {
        let y: f64 = w[[0, 0]] * 0.5 + w[[0, 1]] * 0.5 + b[0];
        let expected = (y - 2.0) * (y - 2.0);
        assert!(
            (v - expected).abs() <= 1e-12 * expected,
            "{v} against {expected}"
        );
    }
}

// ---------------------------------------------------------------- least squares

/// ((b0, b1), x) -> b0 + b1 x.
fn line() -> impl Map<((f64, f64), f64), Output = f64> + Clone {
    fst()
        .then(fst())
        .pair(fst().then(snd()).pair(snd()).then(MulPair))
        .then(AddPair)
}

#[test]
fn both_methods_fit_a_line_and_report_the_textbook_standard_errors() {
    let xs = vec![1.0, 2.0, 4.0, 5.0, 7.0, 8.0];
    let ys = vec![1.2, 1.9, 4.1, 4.8, 7.4, 7.9];
    let n = xs.len() as f64;
    let (mx, my) = (xs.iter().sum::<f64>() / n, ys.iter().sum::<f64>() / n);
    let sxx: f64 = xs.iter().map(|x| (x - mx) * (x - mx)).sum();
    let sxy: f64 = xs.iter().zip(&ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    let slope = sxy / sxx;
    let intercept = my - slope * mx;
    let rss: f64 = xs
        .iter()
        .zip(&ys)
        .map(|(x, y)| (y - intercept - slope * x).powi(2))
        .sum();
    let s2 = rss / (n - 2.0);
    let se_slope = (s2 / sxx).sqrt();
    let se_intercept = (s2 * (1.0 / n + mx * mx / sxx)).sqrt();

    let residuals = CurveResiduals::new(line(), xs, ys).unwrap();
    for method in [
        LeastSquares::gauss_newton(),
        LeastSquares::levenberg_marquardt(),
    ] {
        let report = method.fit(&residuals, (0.0, 0.0)).unwrap();
        assert!(report.stop.converged(), "{:?}", report.stop);
        assert_close("intercept", report.parameters.0, intercept, 1e-12);
        assert_close("slope", report.parameters.1, slope, 1e-12);
        assert_close("rss", report.residual_sum_of_squares, rss, 1e-10);
        assert_eq!(report.degrees_of_freedom, 4);
        let (se0, se1) = report.standard_errors.unwrap();
        assert_close("se intercept", se0, se_intercept, 1e-9);
        assert_close("se slope", se1, se_slope, 1e-9);
    }
    // Gauss-Newton solves a linear problem in one step.
    let gn = LeastSquares::gauss_newton()
        .fit(&residuals, (0.0, 0.0))
        .unwrap();
    assert!(gn.iterations <= 2, "{} iterations", gn.iterations);
}

/// p -> tanh(A p) - b, one library map from parameters to residuals.
fn tanh_residuals(
    a: Array2<f64>,
    b: Array1<f64>,
) -> impl Reverse<Array1<f64>, Output = Array1<f64>> {
    constant(a)
        .pair(id())
        .then(MatVec::plain())
        .then(Tanh)
        .pair(constant(b))
        .then(SubPair)
}

#[test]
fn a_whole_residual_map_gets_its_jacobian_by_either_route() {
    // Four residuals, two parameters.
    let a = array![[1.0, 0.5], [-0.3, 0.8], [0.2, -1.1], [0.9, 0.4]];
    let truth = array![0.3, -0.2];
    // Targets from the map's own tanh, so that the residuals vanish at the
    // truth to the last bit (`f64::tanh` differs by a few ulps).
    let b = a.dot(&truth).mapv(Real::vector_tanh);
    let r = tanh_residuals(a.clone(), b.clone());
    let p = array![0.1, 0.4];
    let by_backward = jacobian_by_backward(&r, &p).unwrap();
    let by_forward = jacobian_by_forward(&r, &p).unwrap();
    assert!(
        near(&by_backward, &by_forward, 1e-14),
        "{by_backward} vs {by_forward}"
    );

    let fixed_back = residual_map(r.clone()).route(JacobianRoute::Backward);
    let fixed_forward = residual_map(r.clone()).route(JacobianRoute::Forward);
    let (value, j) = fixed_back.residuals_and_jacobian(&p).unwrap();
    assert!(near(&value, &(a.dot(&p).mapv(f64::tanh) - &b), 1e-15));
    assert_eq!(j, by_backward);
    assert_eq!(
        fixed_forward.residuals_and_jacobian(&p).unwrap().1,
        by_forward
    );

    // The cheaper route is chosen at the first Jacobian and kept.
    let cheaper = residual_map(r.clone());
    assert_eq!(cheaper.route_taken(), None);
    let (_, j) = cheaper.residuals_and_jacobian(&p).unwrap();
    let taken = cheaper.route_taken().unwrap();
    assert_eq!(
        j,
        if taken == JacobianRoute::Forward {
            by_forward
        } else {
            by_backward
        }
    );
    let report = LeastSquares::levenberg_marquardt()
        .fit(&cheaper, array![0.0, 0.0])
        .unwrap();
    assert!(report.stop.converged(), "{:?} {report:?}", report.stop);
    assert!(
        near(&report.parameters, &truth, 1e-10),
        "{}",
        report.parameters
    );
    assert_eq!(cheaper.route_taken(), Some(taken));

    // Two residuals, three parameters: backward passes, without timing.
    let wide = residual_map(tanh_residuals(
        array![[1.0, 0.0, 2.0], [0.5, -1.0, 0.0]],
        array![0.1, 0.2],
    ));
    let q = array![0.2, 0.3, -0.1];
    wide.residuals_and_jacobian(&q).unwrap();
    assert_eq!(wide.route_taken(), Some(JacobianRoute::Backward));
}

#[test]
fn the_iteration_limit_is_reported_not_hidden() {
    let xs: Vec<f64> = (1..=6).map(f64::from).collect();
    let ys = xs.iter().map(|x| 3.0 * (0.4 * x).exp()).collect();
    let model = fst()
        .then(fst())
        .pair(fst().then(snd()).pair(snd()).then(MulPair).then(Exp))
        .then(MulPair);
    let residuals = CurveResiduals::new(model, xs, ys).unwrap();
    let report = LeastSquares::levenberg_marquardt()
        .max_iterations(2)
        .unwrap()
        .fit(&residuals, (1.0, 0.0))
        .unwrap();
    assert_eq!(report.stop, Stop::IterationLimit);
    assert!(!report.stop.converged());
    assert_eq!(report.iterations, 2);
    let full = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (1.0, 0.0))
        .unwrap();
    assert!(full.stop.converged());
    assert_close("a", full.parameters.0, 3.0, 1e-9);
    assert_close("b", full.parameters.1, 0.4, 1e-9);
}

#[test]
fn least_squares_refuses_bad_settings_and_bad_starts() {
    assert!(
        LeastSquares::levenberg_marquardt()
            .max_iterations(0)
            .is_err()
    );
    assert!(
        LeastSquares::levenberg_marquardt()
            .initial_damping(0.0)
            .is_err()
    );
    assert!(
        LeastSquares::levenberg_marquardt()
            .tolerances(-1.0, 0.0, 0.0)
            .is_err()
    );
    assert!(
        LeastSquares::levenberg_marquardt()
            .tolerances(0.0, f64::NAN, 0.0)
            .is_err()
    );
    // ln of a negative parameter at the start.
    let model = fst().then(Ln).pair(snd()).then(MulPair);
    let residuals = CurveResiduals::new(model, vec![1.0, 2.0], vec![1.0, 2.0]).unwrap();
    let err = LeastSquares::levenberg_marquardt()
        .fit(&residuals, -1.0)
        .unwrap_err();
    assert!(matches!(err, Error::NonFinite { .. }), "{err}");
    assert!(matches!(
        CurveResiduals::new(MulPair, Vec::<f64>::new(), Vec::<f64>::new()),
        Err(Error::Empty { .. })
    ));
}

#[test]
fn a_parameter_the_residuals_ignore_has_no_standard_error_and_gauss_newton_stops_as_singular() {
    // ((a, c), x) -> a x: c does nothing.
    let model = fst().then(fst()).pair(snd()).then(MulPair);
    let residuals = CurveResiduals::new(model, vec![1.0, 2.0, 3.0], vec![2.0, 4.1, 5.9]).unwrap();
    let report = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (1.0, 5.0))
        .unwrap();
    // Not "converged": c is not determined, and the report says which.
    assert_eq!(report.stop, Stop::Undetermined);
    assert!(!report.stop.converged());
    assert_eq!(report.undetermined, vec![1]);
    assert_eq!(report.parameters.1, 5.0);
    assert!(
        (report.parameters.0 - 27.9_f64 / 14.0).abs() < 1e-9,
        "{}",
        report.parameters.0
    );
    assert!(report.standard_errors.is_none());
    // Gauss-Newton cannot solve for c: it stops, says why, keeps the start.
    let gn = LeastSquares::gauss_newton()
        .fit(&residuals, (1.0, 5.0))
        .unwrap();
    assert_eq!(gn.stop, Stop::Singular);
    assert!(!gn.stop.converged());
    assert_eq!((gn.parameters, gn.iterations), ((1.0, 5.0), 1));
}

#[test]
fn training_works_in_f32_and_with_parameter_free_pieces() {
    let x = Array2::from_shape_fn((16, 1), |(i, _)| i as f32 / 16.0);
    let y = x.mapv(|v| (3.0 * v - 1.0).tanh());
    let data = Examples::new(x, y).unwrap();
    // x -> tanh(w x + b), the tanh as a parameter-free stage.
    let model = Affine.then_parametrised(parameter_free(Tanh));
    let start = ((Array2::<f32>::zeros((1, 1)), Array1::<f32>::zeros(1)), ());
    let mut adam = Adam::new(0.05_f32).unwrap();
    let run = Training::new(300, 4)
        .unwrap()
        .run(&model, &MeanSquaredError, &mut adam, start, &data, |_| {})
        .unwrap();
    let ((w, b), ()) = &run.parameters;
    assert!(
        (w[[0, 0]] - 3.0).abs() < 0.05 && (b[0] + 1.0).abs() < 0.05,
        "{w} {b}"
    );
}

#[test]
fn losses_act_on_arrays_of_any_dimension() {
    let y = array![[1.0, 2.0], [3.0, 4.0]];
    let t = array![[1.0, 0.0], [0.0, 4.0]];
    assert_eq!(
        MeanSquaredError.forward(&(y.clone(), t.clone())).unwrap(),
        (4.0 + 9.0) / 4.0
    );
    let (dy, dt) = SquaredError::new()
        .backward(&(y.clone(), t.clone()), &1.0)
        .unwrap();
    assert_eq!(dy, array![[0.0, 4.0], [6.0, 0.0]]);
    assert_eq!(dt, -&dy);
    assert!(matches!(
        MeanSquaredError.forward(&(y, array![[1.0, 2.0]])),
        Err(Error::ShapeMismatch { .. })
    ));
}

#[test]
fn a_gauss_newton_step_to_non_finite_residuals_stops_with_the_parameters_before_it() {
    // r(p) = ln(p x) - y with y far below: the full step sends p below zero,
    // where ln is NaN. Levenberg-Marquardt refuses such a step and goes on.
    let model = fst().then(Ln).pair(snd().then(Ln)).then(AddPair);
    let residuals = CurveResiduals::new(model, vec![1.0, 1.0], vec![-5.0, -5.0]).unwrap();
    let gn = LeastSquares::gauss_newton().fit(&residuals, 1.0).unwrap();
    assert_eq!(gn.stop, Stop::NonFiniteStep);
    assert!(!gn.stop.converged());
    assert_eq!(gn.parameters, 1.0);
    let lm = LeastSquares::levenberg_marquardt()
        .fit(&residuals, 1.0)
        .unwrap();
    assert!(lm.stop.converged(), "{:?}", lm.stop);
    assert_close("ln p = -5", lm.parameters, (-5.0_f64).exp(), 1e-9);
}
