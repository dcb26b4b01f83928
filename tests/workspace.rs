//! The reusing passes: into a kept workspace, they give what the memo
//! passes give, on the first call and on every later one, whatever the
//! batch sizes in between; and training through them gives what training
//! through the memo passes gives.

use ndarray::{Array1, Array2, array};
use proptest::prelude::*;
use revdiff::*;

type Layer = (Array2<f64>, Array1<f64>);
type Params3 = ((Layer, Layer), Layer);

fn model() -> impl SplitInput<Params3, Array2<f64>, Output = Array2<f64>> + Clone {
    Affine
        .then(Tanh)
        .then_parametrised(Affine.then(Sigmoid))
        .then_parametrised(Affine)
}

fn layer(out: usize, inp: usize, seed: usize) -> Layer {
    let w = Array2::from_shape_fn((out, inp), |(i, j)| {
        ((i * 7 + j * 3 + seed * 5) % 11) as f64 / 5.5 - 1.0
    });
    let b = Array1::from_shape_fn(out, |i| ((i + seed) % 3) as f64 * 0.1 - 0.1);
    (w, b)
}

fn params() -> Params3 {
    ((layer(4, 3, 1), layer(5, 4, 2)), layer(2, 5, 3))
}

fn rows(n: usize, seed: usize) -> Array2<f64> {
    Array2::from_shape_fn((n, 3), |(i, j)| {
        ((i * 5 + j * 13 + seed) % 17) as f64 / 8.5 - 1.0
    })
}

/// The largest difference between two values' coordinates.
fn gap<S: Euclidean<f64>>(a: &S, b: &S) -> f64 {
    assert_eq!(a.dimension(), b.dimension());
    a.coordinates()
        .iter()
        .zip(b.coordinates())
        .fold(0.0, |m, (x, y)| m.max((x - y).abs()))
}

#[test]
fn reusing_passes_equal_the_memo_passes_on_every_call_and_batch_size() {
    let (model, p) = (model(), params());
    let mut work = Workspace::new();
    let mut dp = p.zero_like();
    let mut dx = Array2::zeros((0, 0));
    // A batch size changes between calls (as the last batch of an epoch
    // does), then comes back: each call must still be right.
    for (n, seed) in [(6, 0), (6, 1), (2, 2), (6, 3)] {
        let x = rows(n, seed);
        let dy = Array2::from_shape_fn((n, 2), |(i, j)| (i as f64 - j as f64) * 0.3 + 0.1);
        let y = model.forward_split(&p, &x, &mut work).unwrap().clone();
        let input = (p.clone(), x.clone());
        assert_eq!(y, model.forward(&input).unwrap());
        model
            .backward_split(&p, &x, &mut work, &dy, &mut dp, Some(&mut dx))
            .unwrap();
        let (expected_dp, expected_dx) = model.backward(&input, &dy).unwrap();
        assert!(
            gap(&dp, &expected_dp) < 1e-14,
            "batch {n}: {}",
            gap(&dp, &expected_dp)
        );
        assert!(gap(&dx, &expected_dx) < 1e-14, "batch {n}");
        // Without an input change the parameter change is the same.
        let mut dp_only = p.zero_like();
        model
            .backward_split(&p, &x, &mut work, &dy, &mut dp_only, None)
            .unwrap();
        assert_eq!(dp_only, dp);
        assert_eq!(model.reused_output(&work).unwrap(), &y);
    }
}

#[test]
fn elementwise_maps_reuse_their_output_and_read_the_input_again() {
    let x = array![[0.3, -1.2, 2.0], [0.0, 0.7, -0.4]];
    let dy = array![[1.0, -0.5, 0.25], [2.0, 0.0, -1.0]];
    fn check<F: Map<Array2<f64>, Output = Array2<f64>>>(f: F, x: &Array2<f64>, dy: &Array2<f64>) {
        let mut work = Workspace::new();
        let mut dx = Array2::zeros((1, 1)); // the wrong shape: reshaped
        for _ in 0..2 {
            let y = f.forward_reusing(x, &mut work).unwrap().clone();
            assert_eq!(y, f.forward(x).unwrap());
            f.backward_reusing(x, &mut work, dy, &mut dx).unwrap();
            assert_eq!(dx, f.backward(x, dy).unwrap());
        }
    }
    // Tanh keeps its output; sigmoid, exp and sin their slope, computed
    // with the value.
    check(Tanh, &x, &dy);
    check(Sigmoid, &x, &dy);
    check(Exp, &x, &dy);
    check(Sin, &x, &dy);
    check(Tanh.then(Sin).then(Exp), &x, &dy);
    // A map with only the memo passes goes through the defaults.
    check(Softmax, &x, &dy);
}

/// A loss's reusing passes, into one workspace over batches of 3, 2 and 3
/// rows, give its memo passes' value and both changes, bit for bit.
fn loss_reuses_and_agrees<L>(loss: L)
where
    L: SplitInput<Array2<f64>, Array2<f64>, Output = f64> + std::fmt::Debug,
{
    // Logits and targets in [0, 1], some logits far out (the losses'
    // stable branches); every row a distribution for the cross-entropies.
    let y = array![[800.0, -2.0, 0.5], [0.25, 1.5, -800.0], [3.0, -0.75, 2.0]];
    let t = array![[0.5, 0.25, 0.25], [0.0, 1.0, 0.0], [0.2, 0.3, 0.5]];
    let mut work = Workspace::new();
    let (mut dy, mut dt) = (Array2::zeros((0, 0)), Array2::zeros((0, 0)));
    for rows in [3, 2, 3] {
        let (y, t) = (
            y.slice(ndarray::s![..rows, ..]).to_owned(),
            t.slice(ndarray::s![..rows, ..]).to_owned(),
        );
        let value = *loss.forward_split(&y, &t, &mut work).unwrap();
        let expected = loss.forward(&(y.clone(), t.clone())).unwrap();
        assert_eq!(value.to_bits(), expected.to_bits(), "{loss:?}: value");
        loss.backward_split(&y, &t, &mut work, &-1.5, &mut dy, Some(&mut dt))
            .unwrap();
        let (ey, et) = loss.backward(&(y.clone(), t.clone()), &-1.5).unwrap();
        assert_eq!((&dy, &dt), (&ey, &et), "{loss:?}: changes at {rows} rows");
        // Without the target's change, the prediction's is the same.
        dy.fill(f64::NAN);
        loss.backward_split(&y, &t, &mut work, &-1.5, &mut dy, None)
            .unwrap();
        assert_eq!(dy, ey, "{loss:?}: prediction change alone");
    }
    // A backward pass for predictions of another shape than the kept
    // forward pass's is refused, not read out of bounds.
    let other = Array2::zeros((5, 3));
    let err = loss
        .backward_split(&other, &other, &mut work, &1.0, &mut dy, None)
        .unwrap_err();
    assert!(
        matches!(err, Error::ShapeMismatch { .. }),
        "{loss:?}: {err}"
    );
}

#[test]
fn every_loss_reuses_its_buffers_and_agrees_with_its_memo_passes() {
    loss_reuses_and_agrees(MeanSquaredError);
    loss_reuses_and_agrees(SquaredError::new());
    loss_reuses_and_agrees(SquaredError::halved());
    loss_reuses_and_agrees(LogitCrossEntropy);
    loss_reuses_and_agrees(LogitBinaryCrossEntropy);
    loss_reuses_and_agrees(Huber::new(0.5).unwrap());
}

#[test]
fn a_backward_pass_before_any_forward_pass_is_an_error() {
    let p = params();
    let x = rows(3, 0);
    let mut dp = p.zero_like();
    let err = model()
        .backward_split(
            &p,
            &x,
            &mut Workspace::new(),
            &Array2::zeros((3, 2)),
            &mut dp,
            None,
        )
        .unwrap_err();
    assert!(matches!(err, Error::WorkspaceNotFilled { .. }), "{err}");
    let mut dx = x.clone();
    let err = Tanh
        .backward_reusing(&x, &mut Workspace::new(), &x, &mut dx)
        .unwrap_err();
    assert!(matches!(err, Error::WorkspaceNotFilled { .. }), "{err}");
}

#[test]
fn bad_shapes_are_refused_by_the_reusing_passes() {
    let p = params();
    let mut work = Workspace::new();
    // Rows of the wrong width.
    let err = model()
        .forward_split(&p, &Array2::zeros((2, 4)), &mut work)
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
    // An output change of the wrong shape.
    let x = rows(3, 0);
    model().forward_split(&p, &x, &mut work).unwrap();
    let mut dp = p.zero_like();
    let err = model()
        .backward_split(&p, &x, &mut work, &Array2::zeros((3, 3)), &mut dp, None)
        .unwrap_err();
    assert!(matches!(err, Error::OutputChangeShape { .. }), "{err}");
    // Predictions and targets of different shapes.
    let err = MeanSquaredError
        .forward_split(
            &Array2::<f64>::zeros((2, 2)),
            &Array2::zeros((2, 3)),
            &mut work,
        )
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
}

/// A model that has only the memo passes: `SplitInput`'s defaults.
#[derive(Clone, Debug)]
struct MemoOnly<M>(M);
impl<M> Compose for MemoOnly<M> {}
impl<A: Space, M: Map<A>> Map<A> for MemoOnly<M> {
    type Output = M::Output;
    type Memo = M::Memo;
    fn forward_memo(&self, x: &A) -> Result<(M::Output, M::Memo)> {
        self.0.forward_memo(x)
    }
    fn backward_memo(&self, memo: &M::Memo, dy: &M::Output) -> Result<A> {
        self.0.backward_memo(memo, dy)
    }
}
impl<P: Space, X: Space, M: Map<(P, X)>> SplitInput<P, X> for MemoOnly<M> {}

#[test]
fn training_through_reused_buffers_equals_training_through_memos() {
    // 22 rows in batches of 4: the last batch of each epoch has 2 rows, so
    // the buffers change shape and back every epoch.
    let x = rows(22, 4);
    let t = Array2::from_shape_fn((22, 2), |(i, j)| ((i + 3 * j) % 5) as f64 / 5.0);
    let data = Examples::new(x, t).unwrap();
    let training = Training::new(6, 4).unwrap();
    let run = |fast: bool| {
        let mut adam = Adam::new(0.01).unwrap();
        if fast {
            training.run(
                &model(),
                &MeanSquaredError,
                &mut adam,
                params(),
                &data,
                |_| {},
            )
        } else {
            let slow = MemoOnly(model());
            training.run(
                &slow,
                &MemoOnly(MeanSquaredError),
                &mut adam,
                params(),
                &data,
                |_| {},
            )
        }
        .unwrap()
    };
    let (fast, slow) = (run(true), run(false));
    assert_eq!(fast.steps, 36);
    assert!(gap(&fast.parameters, &slow.parameters) < 1e-12);
    // The parameters moved: the comparison is not of two starts.
    assert!(gap(&fast.parameters, &params()) > 1e-3);
    for (a, b) in fast.epoch_losses.iter().zip(&slow.epoch_losses) {
        assert!((a - b).abs() <= 1e-12 * a.abs());
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    /// On random parameters, rows and output changes, reused buffers give
    /// the memo passes' changes, to rounding.
    #[test]
    fn reusing_matches_memo_on_random_points(
        scale in 0.1..3.0_f64,
        shift in -1.0..1.0_f64,
        n in 1usize..7,
        seed in 0usize..50,
    ) {
        let ((l1, l2), l3) = params();
        let p = (((&l1.0 * scale, &l1.1 + shift), l2), l3);
        let x = rows(n, seed) * scale;
        let dy = Array2::from_shape_fn((n, 2), |(i, j)| ((i * 3 + j + seed) % 7) as f64 - 3.0);
        let model = model();
        let mut work = Workspace::new();
        // A first call at another batch size, so the second reuses and reshapes.
        let other = rows(n + 2, seed + 1);
        model.forward_split(&p, &other, &mut work).unwrap();
        let y = model.forward_split(&p, &x, &mut work).unwrap().clone();
        let input = (p.clone(), x.clone());
        prop_assert_eq!(&y, &model.forward(&input).unwrap());
        let mut dp = p.zero_like();
        let mut dx = Array2::zeros((0, 0));
        model.backward_split(&p, &x, &mut work, &dy, &mut dp, Some(&mut dx)).unwrap();
        let (edp, edx) = model.backward(&input, &dy).unwrap();
        let size = edp.coordinates().iter().fold(1.0_f64, |m, v| m.max(v.abs()));
        prop_assert!(gap(&dp, &edp) <= 1e-13 * size, "parameter change off by {}", gap(&dp, &edp));
        prop_assert!(gap(&dx, &edx) <= 1e-13 * size, "input change off by {}", gap(&dx, &edx));
    }
}

#[test]
fn run_time_chains_and_boxed_maps_reuse_their_stages_workspaces() {
    use ndarray::ArrayD;
    let mut chain = Chain::<f64>::new(&[3]);
    chain
        .push_affine(
            array![[0.5, -1.0, 0.2], [0.3, 0.1, -0.4]],
            array![0.1, -0.2],
        )
        .unwrap();
    chain.push_elementwise("tanh", Tanh).unwrap();
    chain
        .push_affine(
            array![[1.0, -2.0], [0.5, 0.5], [0.0, 1.5]],
            array![0.0, 0.3, -0.1],
        )
        .unwrap();
    chain.push_elementwise("sin", Sin).unwrap();
    let x = array![0.4, -1.1, 2.0].into_dyn();
    let dy = array![1.0, -0.5, 0.25].into_dyn();
    let check = |chain: &Chain<f64>, work: &mut Workspace| {
        let mut dx = ArrayD::zeros(vec![1]);
        let y = chain.forward_reusing(&x, work).unwrap().clone();
        assert_eq!(y, chain.forward(&x).unwrap());
        chain.backward_reusing(&x, work, &dy, &mut dx).unwrap();
        assert_eq!(dx, chain.backward(&x, &dy).unwrap());
    };
    let mut work = Workspace::new();
    check(&chain, &mut work);
    check(&chain, &mut work);
    // Under checkpointing the reusing passes are the memo passes, and agree.
    let mut saving = chain.clone();
    saving.retaining(Retention::Binomial { states: 2 }).unwrap();
    check(&saving, &mut work);
    // A chain that grew since its workspace was filled.
    chain.push_elementwise("exp", Exp).unwrap();
    check(&chain, &mut work);
    // A wrong input shape is refused by name.
    let err = chain
        .forward_reusing(&array![1.0, 2.0].into_dyn(), &mut work)
        .unwrap_err();
    assert!(err.to_string().contains("run-time chain"), "{err}");

    // Nested boxed maps take their parts' reusing passes through the box.
    let mut boxed: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
    for _ in 0..5 {
        boxed = Boxed::new(boxed.then(Tanh)).unwrap();
    }
    let mut work = Workspace::new();
    let mut dx = 0.0;
    for x in [0.3, -1.2] {
        assert_eq!(
            *boxed.forward_reusing(&x, &mut work).unwrap(),
            boxed.forward(&x).unwrap()
        );
        boxed
            .backward_reusing(&x, &mut work, &2.0, &mut dx)
            .unwrap();
        assert_eq!(dx, boxed.backward(&x, &2.0).unwrap());
    }
}

#[test]
fn run_time_models_reuse_their_buffers_and_agree_with_their_memo_passes() {
    let model = Layers::<f64>::new(3)
        .unwrap()
        .affine(5)
        .unwrap()
        .elementwise("tanh", Tanh)
        .affine(4)
        .unwrap()
        .elementwise("sigmoid", Sigmoid)
        .affine(2)
        .unwrap();
    let p = model.initial_parameters(11);
    let mut work = Workspace::new();
    let mut dp = Vec::new(); // the wrong shape: reshaped
    let mut dx = Array2::zeros((0, 0));
    for (n, seed) in [(5, 0), (5, 1), (2, 2), (5, 3)] {
        let x = rows(n, seed);
        let dy = Array2::from_shape_fn((n, 2), |(i, j)| (i as f64 + 1.0) * 0.2 - j as f64 * 0.7);
        let input = (p.clone(), x.clone());
        let y = model.forward_split(&p, &x, &mut work).unwrap();
        assert_eq!(*y, model.forward(&input).unwrap());
        model
            .backward_split(&p, &x, &mut work, &dy, &mut dp, Some(&mut dx))
            .unwrap();
        let (edp, edx) = model.backward(&input, &dy).unwrap();
        assert!(gap(&dp, &edp) < 1e-14, "batch {n}: {}", gap(&dp, &edp));
        assert!(gap(&dx, &edx) < 1e-14, "batch {n}");
    }
    // Training it through its own passes and through the memo passes.
    let x = rows(18, 5);
    let t = Array2::from_shape_fn((18, 2), |(i, j)| ((i * 2 + j) % 3) as f64 / 3.0);
    let data = Examples::new(x, t).unwrap();
    let training = Training::new(5, 4).unwrap();
    let fast = training
        .run(
            &model,
            &MeanSquaredError,
            &mut Adam::new(0.02).unwrap(),
            p.clone(),
            &data,
            |_| {},
        )
        .unwrap();
    let slow = training
        .run(
            &MemoOnly(model.clone()),
            &MeanSquaredError,
            &mut Adam::new(0.02).unwrap(),
            p.clone(),
            &data,
            |_| {},
        )
        .unwrap();
    assert!(gap(&fast.parameters, &slow.parameters) < 1e-12);
    assert!(gap(&fast.parameters, &p) > 1e-3);
}

#[test]
fn pairs_and_gates_reuse_their_buffers_over_bits_and_arrays() {
    use revdiff::bits::{AndGate, Bits, OrGate, XorGate};
    // Four layers of gates on a pair of wires, then an AND of the two.
    let layer = || XorGate.pair(OrGate);
    let circuit = layer()
        .then(layer())
        .then(AndGate.pair(XorGate))
        .then(layer())
        .then(AndGate);
    let mut work = Workspace::new();
    let mut dx = (Bits::zeros(1, 1), Bits::zeros(1, 1));
    // Example counts that change between calls, across a word boundary.
    for (examples, seed) in [(100, 1), (100, 2), (64, 3), (130, 4)] {
        let bits = |k: usize| Bits::from_fn(1, examples, |_, e| (e * 7 + k * 3 + seed) % 5 < 2);
        let x = (bits(0), bits(1));
        let dz = bits(2);
        let y = circuit.forward_reusing(&x, &mut work).unwrap().clone();
        assert_eq!(y, circuit.forward(&x).unwrap());
        circuit
            .backward_reusing(&x, &mut work, &dz, &mut dx)
            .unwrap();
        assert_eq!(
            dx,
            circuit.backward(&x, &dz).unwrap(),
            "{examples} examples"
        );
    }
    // The same pair combinator over arrays adds the parts' changes.
    let f = Sin.pair(Tanh).then(MulPair);
    let x = array![0.3, -1.0, 2.0];
    let mut work = Workspace::new();
    let mut dx = array![0.0];
    for _ in 0..2 {
        assert_eq!(
            *f.forward_reusing(&x, &mut work).unwrap(),
            f.forward(&x).unwrap()
        );
        f.backward_reusing(&x, &mut work, &array![1.0, 2.0, -1.0], &mut dx)
            .unwrap();
        assert_eq!(dx, f.backward(&x, &array![1.0, 2.0, -1.0]).unwrap());
    }
    // Gates of different widths are refused.
    let err = XorGate
        .forward_reusing(
            &(Bits::zeros(1, 10), Bits::zeros(1, 11)),
            &mut Workspace::new(),
        )
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
}

#[test]
fn adding_backward_passes_add_the_input_change_to_what_is_there() {
    use revdiff::bits::{AndGate, Bits, OrGate, XorGate};
    // Arrays: elementwise maps keeping their input, output or slope, the
    // default (through a scratch buffer, for softmax) and a composite.
    let x = array![0.2, -0.7, 1.5];
    let dy = array![1.0, 0.5, -2.0];
    let start = array![10.0, 20.0, 30.0];
    fn check<F: Map<ndarray::Array1<f64>, Output = ndarray::Array1<f64>>>(
        f: F,
        x: &ndarray::Array1<f64>,
        dy: &ndarray::Array1<f64>,
        start: &ndarray::Array1<f64>,
    ) {
        let mut work = Workspace::new();
        for _ in 0..2 {
            f.forward_reusing(x, &mut work).unwrap();
            let mut acc = start.clone();
            f.backward_reusing_adding(x, &mut work, dy, &mut acc)
                .unwrap();
            assert_eq!(acc, start + &f.backward(x, dy).unwrap());
        }
    }
    check(Tanh, &x, &dy, &start);
    check(Sin, &x, &dy, &start);
    check(Ln.then(Abs), &x.mapv(f64::abs), &dy, &start);
    check(Sin.then(Exp), &x, &dy, &start);
    check(Softmax, &x, &dy, &start);
    // Scalars and fixed-size arrays add in place too.
    let mut work = Workspace::new();
    Sin.forward_reusing(&0.3_f64, &mut work).unwrap();
    let mut acc = 2.0;
    Sin.backward_reusing_adding(&0.3, &mut work, &-1.5, &mut acc)
        .unwrap();
    assert_eq!(acc, 2.0 + Sin.backward(&0.3, &-1.5).unwrap());
    let mut work = Workspace::new();
    let xs = [0.3_f64, -0.8];
    Relu.forward_reusing(&xs, &mut work).unwrap();
    let mut acc = [1.0, 1.0];
    Relu.backward_reusing_adding(&xs, &mut work, &[4.0, 4.0], &mut acc)
        .unwrap();
    assert_eq!(acc, [5.0, 1.0]);
    // A sum of the wrong shape is refused, naming it, and left as it was;
    // so is an output change of the wrong shape, naming the map.
    let mut work = Workspace::new();
    Sin.forward_reusing(&x, &mut work).unwrap();
    let mut short = array![1.0, 2.0];
    let err = Sin
        .backward_reusing_adding(&x, &mut work, &dy, &mut short)
        .unwrap_err();
    assert!(err.to_string().contains("adding an input change"), "{err}");
    assert_eq!(short, array![1.0, 2.0]);
    let mut acc = start.clone();
    let err = Sin
        .backward_reusing_adding(&x, &mut work, &array![1.0], &mut acc)
        .unwrap_err();
    assert!(
        matches!(err, Error::OutputChangeShape { map: "sin", .. }),
        "{err}"
    );
    assert_eq!(acc, start);
    // Gates: XOR into what is there.
    let bits = |k: usize| Bits::from_fn(1, 70, |_, e| (e * 3 + k).is_multiple_of(4));
    let input = (bits(0), bits(1));
    let (dz, base) = (bits(2), (bits(3), bits(4)));
    for gate in 0..3 {
        let mut work = Workspace::new();
        let mut acc = base.clone();
        let change = match gate {
            0 => {
                XorGate.forward_reusing(&input, &mut work).unwrap();
                XorGate
                    .backward_reusing_adding(&input, &mut work, &dz, &mut acc)
                    .unwrap();
                XorGate.backward(&input, &dz).unwrap()
            }
            1 => {
                AndGate.forward_reusing(&input, &mut work).unwrap();
                AndGate
                    .backward_reusing_adding(&input, &mut work, &dz, &mut acc)
                    .unwrap();
                AndGate.backward(&input, &dz).unwrap()
            }
            _ => {
                OrGate.forward_reusing(&input, &mut work).unwrap();
                OrGate
                    .backward_reusing_adding(&input, &mut work, &dz, &mut acc)
                    .unwrap();
                OrGate.backward(&input, &dz).unwrap()
            }
        };
        assert_eq!(
            acc,
            (
                base.0.try_add(&change.0).unwrap(),
                base.1.try_add(&change.1).unwrap()
            ),
            "gate {gate}"
        );
    }
}

#[test]
fn pairs_give_their_parts_outputs_back_for_the_backward_pass() {
    // Tanh and sigmoid read their own output in the backward pass, which
    // the pair holds between the passes; the first call is elsewhere, so a
    // part that read a stale output would be wrong.
    let f = Tanh
        .pair(Sigmoid.then(Exp))
        .then(MulPair)
        .pair(Tanh.pair(Sin).then(SubPair));
    let mut work = Workspace::new();
    let mut dx = array![0.0];
    let dz = (array![1.0, -2.0], array![0.5, 3.0]);
    for x in [array![2.0, -3.0], array![0.3, 0.8], array![-1.0, 0.1]] {
        assert_eq!(
            *f.forward_reusing(&x, &mut work).unwrap(),
            f.forward(&x).unwrap()
        );
        f.backward_reusing(&x, &mut work, &dz, &mut dx).unwrap();
        // Equal up to the order of the additions (the reusing passes add
        // each part's change into one buffer in turn).
        assert!(gap(&dx, &f.backward(&x, &dz).unwrap()) < 1e-14);
        // The pair's output is still the last forward pass's.
        assert_eq!(*f.reused_output(&work).unwrap(), f.forward(&x).unwrap());
        let mut acc = array![1.0, 1.0];
        f.backward_reusing_adding(&x, &mut work, &dz, &mut acc)
            .unwrap();
        // Equal up to the order of the additions.
        assert!(gap(&acc, &(f.backward(&x, &dz).unwrap() + 1.0)) < 1e-14);
    }
}
