//! Per-element stages of run-time chains (`Chain::push_per_element`): a
//! scalar map applied to every element gives, through every pass, what the
//! catalogue's array maps give, and the reusing passes (flat buffers for a
//! run of such stages) give what the memo passes give, whatever the other
//! stages, layouts and earlier calls.

use ndarray::{Array2, ArrayD, IxDyn, ShapeBuilder};
use proptest::prelude::*;
use revdiff::*;

/// The stages a generated chain is made of.
#[derive(Clone, Copy, Debug)]
enum Kind {
    SinPerElement,
    TanhPerElement,
    /// A static composite as one per-element stage.
    SinThenExpPerElement,
    TanhArray,
    Affine,
}

fn kind() -> impl Strategy<Value = Kind> {
    prop_oneof![
        Just(Kind::SinPerElement),
        Just(Kind::TanhPerElement),
        Just(Kind::SinThenExpPerElement),
        Just(Kind::TanhArray),
        Just(Kind::Affine),
    ]
}

/// The chain of `kinds` on vectors of length `width`; with `per_element`
/// false, every scalar stage is pushed as the catalogue's array map instead.
fn chain_of(kinds: &[Kind], width: usize, per_element: bool) -> Chain<f64> {
    let mut chain = Chain::<f64>::new(&[width]);
    for (k, kind) in kinds.iter().enumerate() {
        match (kind, per_element) {
            (Kind::SinPerElement, true) => chain.push_per_element("sin", Sin),
            (Kind::SinPerElement, false) => chain.push_elementwise("sin", Sin),
            (Kind::TanhPerElement, true) => chain.push_per_element("tanh", Tanh),
            (Kind::TanhPerElement | Kind::TanhArray, _) => chain.push_elementwise("tanh", Tanh),
            (Kind::SinThenExpPerElement, true) => chain.push_per_element("sin exp", Sin.then(Exp)),
            (Kind::SinThenExpPerElement, false) => chain.push_elementwise("sin exp", Sin.then(Exp)),
            (Kind::Affine, _) => chain.push_affine(
                Array2::from_shape_fn((width, width), |(i, j)| {
                    ((i * 5 + j * 3 + k) % 7) as f64 / 7.0 - 0.4
                }),
                ndarray::Array1::from_shape_fn(width, |i| 0.1 * i as f64 - 0.2),
            ),
        }
        .unwrap();
    }
    chain
}

fn largest(a: &ArrayD<f64>) -> f64 {
    a.iter().fold(1.0_f64, |m, v| m.max(v.abs()))
}

fn gap(a: &ArrayD<f64>, b: &ArrayD<f64>) -> f64 {
    assert_eq!(a.shape(), b.shape());
    a.iter()
        .zip(b)
        .fold(0.0_f64, |m, (x, y)| m.max((x - y).abs()))
}

/// Forward and backward through the reusing passes into `work`.
fn reusing(
    chain: &Chain<f64>,
    x: &ArrayD<f64>,
    dy: &ArrayD<f64>,
    work: &mut Workspace,
) -> (ArrayD<f64>, ArrayD<f64>) {
    let y = chain.forward_reusing(x, work).unwrap().clone();
    // A stale buffer of another shape, to be replaced.
    let mut dx = ArrayD::from_elem(IxDyn(&[7]), f64::NAN);
    chain.backward_reusing(x, work, dy, &mut dx).unwrap();
    (y, dx)
}

/// The input change through the memo passes, spelled out (`backward`
/// itself may run the reusing passes in a kept workspace).
fn memo_passes(chain: &Chain<f64>, x: &ArrayD<f64>, dy: &ArrayD<f64>) -> ArrayD<f64> {
    let (_, memo) = chain.forward_memo(x).unwrap();
    chain.backward_memo(&memo, dy).unwrap()
}

/// `chain`'s reusing backward pass refuses `work`: no forward pass of its
/// own filled it.
fn assert_refused(
    chain: &Chain<f64>,
    x: &ArrayD<f64>,
    work: &mut Workspace,
    dy: &ArrayD<f64>,
    dx: &mut ArrayD<f64>,
) {
    let err = chain.backward_reusing(x, work, dy, dx).unwrap_err();
    assert!(matches!(err, Error::WorkspaceNotFilled { .. }), "{err}");
}

/// [`assert_refused`], then `chain`'s own forward pass refills `work`,
/// after which its reusing passes give what its `backward` gives.
fn assert_refused_then_refilled(
    chain: &Chain<f64>,
    x: &ArrayD<f64>,
    work: &mut Workspace,
    dy: &ArrayD<f64>,
    dx: &mut ArrayD<f64>,
) {
    assert_refused(chain, x, work, dy, dx);
    chain.forward_reusing(x, work).unwrap();
    chain.backward_reusing(x, work, dy, dx).unwrap();
    assert_eq!(*dx, chain.backward(x, dy).unwrap());
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(96))]
    /// Any mix of per-element, array and affine stages: the reusing passes,
    /// on a second call after one at another point, equal the memo passes,
    /// and both equal the chain of catalogue array maps.
    #[test]
    fn per_element_stages_agree_with_array_stages_through_every_pass(
        kinds in proptest::collection::vec(kind(), 1..9),
        // Short arrays, whose forward pass keeps slopes, and longer ones.
        width in prop_oneof![1usize..5, 17usize..20],
        xs in proptest::collection::vec(-2.0..2.0_f64, 20),
        dys in proptest::collection::vec(-3.0..3.0_f64, 20),
    ) {
        let chain = chain_of(&kinds, width, true);
        let arrays = chain_of(&kinds, width, false);
        let x = ArrayD::from_shape_vec(IxDyn(&[width]), xs[..width].to_vec()).unwrap();
        let dy = ArrayD::from_shape_vec(IxDyn(&[width]), dys[..width].to_vec()).unwrap();

        let mut work = Workspace::new();
        reusing(&chain, &x.mapv(|v| 0.5 - v), &dy.mapv(|v| -v), &mut work);
        let (y, dx) = reusing(&chain, &x, &dy, &mut work);

        let expected_y = arrays.forward(&x).unwrap();
        let expected_dx = arrays.backward(&x, &dy).unwrap();
        let memo_dx = memo_passes(&chain, &x, &dy);
        let tolerance = 1e-14 * largest(&expected_dx);
        prop_assert!(gap(&y, &expected_y) <= 1e-14 * largest(&expected_y), "outputs differ: {} against {}", y, expected_y);
        prop_assert_eq!(&chain.forward(&x).unwrap(), &y, "the plain forward pass differs");
        prop_assert!(gap(&dx, &expected_dx) <= tolerance, "reusing passes: {} against {}", dx, expected_dx);
        prop_assert!(gap(&memo_dx, &expected_dx) <= tolerance, "memo passes: {} against {}", memo_dx, expected_dx);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]
    /// `backward` without a workspace of the caller's runs the reusing
    /// passes in one the thread keeps: it must equal the memo passes bit for
    /// bit whatever chains ran before it on this thread, including a chain
    /// since dropped (whose address a new one may take) and a chain that
    /// grew since its last call.
    #[test]
    fn one_shot_backward_passes_equal_the_memo_passes_whatever_ran_before(
        first in proptest::collection::vec(kind(), 1..7),
        second in proptest::collection::vec(kind(), 1..7),
        widths in (prop_oneof![1usize..5, 17usize..20], prop_oneof![1usize..5, 17usize..20]),
        xs in proptest::collection::vec(-2.0..2.0_f64, 20),
    ) {
        let at = |width: usize, scale: f64| {
            ArrayD::from_shape_vec(IxDyn(&[width]), xs[..width].iter().map(|v| v * scale).collect()).unwrap()
        };
        let mut a = chain_of(&first, widths.0, true);
        let (xa, dya) = (at(widths.0, 1.0), at(widths.0, -1.5));
        let (xb, dyb) = (at(widths.1, 0.5), at(widths.1, 2.0));
        for round in 0..3 {
            // A new chain each round, likely at the address of the last.
            let b = chain_of(&second, widths.1, round != 1);
            prop_assert_eq!(a.backward(&xa, &dya).unwrap(), memo_passes(&a, &xa, &dya), "first chain, round {}", round);
            prop_assert_eq!(b.backward(&xb, &dyb).unwrap(), memo_passes(&b, &xb, &dyb), "second chain, round {}", round);
            // The second chain's stages, pushed onto the first when widths match.
            if round == 0 && widths.0 == widths.1 {
                for kind in &second {
                    match kind {
                        Kind::SinPerElement => a.push_per_element("sin", Sin),
                        _ => a.push_elementwise("tanh", Tanh),
                    }
                    .unwrap();
                }
            }
        }
        // The same chain moved to another address.
        let moved = Box::new(a);
        prop_assert_eq!(moved.backward(&xa, &dya).unwrap(), memo_passes(&moved, &xa, &dya), "moved chain");
    }
}

/// A stage that runs a whole chain of its own, through that chain's
/// `backward`: a one-shot backward pass inside another.
struct Inner(Chain<f64>);

impl Compose for Inner {}

impl Map<ArrayD<f64>> for Inner {
    type Output = ArrayD<f64>;
    type Memo = ArrayD<f64>;
    fn forward_memo(&self, x: &ArrayD<f64>) -> Result<(ArrayD<f64>, ArrayD<f64>)> {
        Ok((self.0.forward(x)?, x.clone()))
    }
    fn backward_memo(&self, x: &ArrayD<f64>, dy: &ArrayD<f64>) -> Result<ArrayD<f64>> {
        self.0.backward(x, dy)
    }
}

#[test]
fn one_shot_backward_passes_nest_and_survive_failures() {
    let mut inner = Chain::<f64>::new(&[2]);
    inner.push_per_element("sin", Sin).unwrap();
    inner.push_elementwise("tanh", Tanh).unwrap();
    let mut outer = Chain::<f64>::new(&[2]);
    outer.push_per_element("exp", Exp).unwrap();
    outer.push_per_element("double", DoubleUpToTen).unwrap();
    outer.push_elementwise("inner chain", Inner(inner)).unwrap();
    let x = ndarray::arr1(&[0.3, -0.8]).into_dyn();
    let dy = ndarray::arr1(&[1.0, -2.0]).into_dyn();
    let expected = memo_passes(&outer, &x, &dy);
    // The chain rule by hand at the first element: tanh(sin(2 exp x)).
    let e2 = 2.0 * 0.3_f64.exp();
    let by_hand = (1.0 - e2.sin().tanh().powi(2)) * e2.cos() * e2;
    assert!(
        (expected[0] - by_hand).abs() < 1e-14,
        "{} against {by_hand}",
        expected[0]
    );
    for _ in 0..3 {
        assert_eq!(outer.backward(&x, &dy).unwrap(), expected);
    }
    // A forward pass that fails partway leaves the kept workspace half
    // filled; the next call must not read the failed pass's values.
    let far = ndarray::arr1(&[3.0, 0.0]).into_dyn();
    assert!(outer.backward(&far, &dy).is_err());
    assert_eq!(outer.backward(&x, &dy).unwrap(), expected);
    free_spare_workspaces();
    assert_eq!(outer.backward(&x, &dy).unwrap(), expected);
}

#[test]
fn arrays_in_column_major_layout_keep_their_element_order() {
    // Owned arrays whose memory order is not their logical order: the run
    // reads and writes elements in logical order all the same.
    let x = Array2::from_shape_vec((3, 2).f(), vec![0.1, -0.7, 1.3, 0.4, -1.9, 2.2])
        .unwrap()
        .into_dyn();
    let dy = Array2::from_shape_vec((3, 2).f(), vec![1.0, -2.0, 0.5, 3.0, -1.5, 0.25])
        .unwrap()
        .into_dyn();
    assert!(!x.is_standard_layout());
    let mut chain = Chain::<f64>::new(&[3, 2]);
    chain.push_per_element("sin", Sin).unwrap();
    chain.push_per_element("tanh", Tanh).unwrap();
    let y = x.mapv(|v: f64| v.sin().tanh());
    // d/dx tanh(sin x) = (1 - tanh(sin x)^2) cos x
    let expected = ndarray::Zip::from(&x)
        .and(&dy)
        .map_collect(|&v: &f64, &d: &f64| (1.0 - v.sin().tanh().powi(2)) * v.cos() * d);
    let mut work = Workspace::new();
    for _ in 0..2 {
        let (out, dx) = reusing(&chain, &x, &dy, &mut work);
        assert!(gap(&out, &y) <= 1e-15, "{out} against {y}");
        assert!(gap(&dx, &expected) <= 1e-15, "{dx} against {expected}");
    }
    let memo = chain.backward(&x, &dy).unwrap();
    assert!(gap(&memo, &expected) <= 1e-15, "{memo} against {expected}");
}

#[test]
fn arrays_long_enough_to_split_across_cores_give_the_same_changes() {
    // 140,000 elements: over the size from which the passes split their
    // elements across the cores (with the `threads` feature).
    let n = 140_000;
    let x = ArrayD::from_shape_fn(IxDyn(&[n]), |i| (i[0] as f64 * 1e-4).sin());
    let dy = ArrayD::from_shape_fn(IxDyn(&[n]), |i| 1.0 + (i[0] % 3) as f64);
    let mut chain = Chain::<f64>::new(&[n]);
    chain.push_per_element("sin", Sin).unwrap();
    chain.push_per_element("exp", Exp).unwrap();
    let expected = ndarray::Zip::from(&x)
        .and(&dy)
        .map_collect(|&v: &f64, &d: &f64| v.sin().exp() * v.cos() * d);
    let mut work = Workspace::new();
    for _ in 0..2 {
        let (_, dx) = reusing(&chain, &x, &dy, &mut work);
        assert!(gap(&dx, &expected) <= 1e-14 * largest(&expected));
    }
}

#[test]
fn slopes_that_overflow_leave_the_change_to_the_maps_own_backward_pass() {
    // The backward passes multiply changes by each stage's slope
    // `R[f](x, 1)`. Near 0 the slope of x^-2 overflows while its product
    // with a small change does not: there the map's own backward pass
    // (which divides step by step) must give the change, in both kinds of
    // passes, and the other elements keep the products.
    // Over a short array (whose forward pass keeps slopes) and a long one
    // (whose backward pass computes them).
    let inverse_square = Powi { coef: 1.0, n: -2 };
    for n in [3, 40] {
        let mut chain = Chain::<f64>::new(&[n]);
        chain.push_per_element("sin", Sin).unwrap();
        chain
            .push_per_element("inverse square", inverse_square)
            .unwrap();
        let x = ArrayD::from_shape_fn(IxDyn(&[n]), |i| [1e-120, 0.5, -2.0][i[0] % 3]);
        let dy = ArrayD::from_shape_fn(IxDyn(&[n]), |i| [1e-200, 1.0, -3.0][i[0] % 3]);
        let expected = ndarray::Zip::from(&x)
            .and(&dy)
            .map_collect(|&v: &f64, &d: &f64| {
                let (s, _) = Sin.forward_memo(&v).unwrap();
                Sin.backward(&v, &inverse_square.backward(&s, &d).unwrap())
                    .unwrap()
            });
        // -2 x^-3 dy at x = 1e-120, dy = 1e-200 (common practice, no source).
        assert!((expected[0] / -2e160 - 1.0).abs() < 1e-12, "{expected}");
        let mut work = Workspace::new();
        let (_, dx) = reusing(&chain, &x, &dy, &mut work);
        assert_eq!(dx, expected, "reusing passes, {n} elements");
        assert_eq!(
            chain.backward(&x, &dy).unwrap(),
            expected,
            "memo passes, {n} elements"
        );
    }
}

#[test]
fn wrong_changes_and_stale_workspaces_are_errors() {
    let mut chain = Chain::<f64>::new(&[2]);
    chain.push_per_element("sin", Sin).unwrap();
    chain.push_per_element("cos", Cos).unwrap();
    let x = ndarray::arr1(&[0.3, 0.9]).into_dyn();
    let mut dx = ArrayD::zeros(IxDyn(&[2]));

    // Backward before any forward pass.
    let mut work = Workspace::new();
    assert_refused(&chain, &x, &mut work, &x, &mut dx);

    // An output change of the wrong shape, through both kinds of passes.
    chain.forward_reusing(&x, &mut work).unwrap();
    let wrong = ndarray::arr1(&[1.0, 2.0, 3.0]).into_dyn();
    for err in [
        chain
            .backward_reusing(&x, &mut work, &wrong, &mut dx)
            .unwrap_err(),
        chain.backward(&x, &wrong).unwrap_err(),
    ] {
        match err {
            Error::ShapeMismatch {
                expected, found, ..
            } => assert_eq!((expected.as_str(), found.as_str()), ("(2,)", "(3,)")),
            other => panic!("expected a shape mismatch, got {other}"),
        }
    }

    // A workspace filled by a chain of another make: refused, not misread.
    let mut other = Chain::<f64>::new(&[2]);
    other.push_elementwise("sin", Sin).unwrap();
    other.push_per_element("cos", Cos).unwrap();
    // Its own forward pass refits the workspace, and then all agrees.
    assert_refused_then_refilled(&other, &x, &mut work, &x, &mut dx);
}

/// `x -> 2x`, refusing inputs over 10: a map whose forward pass fails at
/// some points and not at others.
struct DoubleUpToTen;

impl Compose for DoubleUpToTen {}

impl Map<f64> for DoubleUpToTen {
    type Output = f64;
    type Memo = ();
    fn forward_memo(&self, x: &f64) -> Result<(f64, ())> {
        if *x > 10.0 {
            return Err(Error::InvalidSetting {
                name: "input of DoubleUpToTen",
                value: x.to_string(),
                reason: "over 10",
            });
        }
        Ok((2.0 * x, ()))
    }
    fn backward_memo(&self, _: &(), dy: &f64) -> Result<f64> {
        Ok(2.0 * dy)
    }
}

/// `err` is the error [`DoubleUpToTen`] gives, and not another.
fn assert_is_over_ten(err: &Error) {
    assert!(
        matches!(
            err,
            Error::InvalidSetting {
                reason: "over 10",
                ..
            }
        ),
        "{err}"
    );
}

#[test]
fn a_forward_pass_that_failed_halfway_is_not_read_back() {
    // The first stage's buffers are from the failed pass, the second's from
    // the one before: the backward pass must refuse them, not mix them.
    let mut chain = Chain::<f64>::new(&[1]);
    chain.push_per_element("exp", Exp).unwrap();
    chain.push_per_element("double", DoubleUpToTen).unwrap();
    let (x, dy) = (
        ArrayD::from_elem(vec![1], 1.0),
        ArrayD::from_elem(vec![1], 1.0),
    );
    let mut work = Workspace::new();
    let mut dx = x.clone();
    chain.forward_reusing(&x, &mut work).unwrap();
    chain.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
    assert_eq!(dx[0], 2.0 * 1.0_f64.exp());
    let far = ArrayD::from_elem(vec![1], 3.0);
    // The stage's own error, not a NaN or another error.
    let err = chain.forward_reusing(&far, &mut work).unwrap_err();
    assert_is_over_ten(&err);
    assert_refused(&chain, &far, &mut work, &dy, &mut dx);
}

/// `x -> x` below 1, NaN from 1 on, never an error; slope 1 below 1, NaN
/// from 1 on: a map that gives NaN as a value.
struct NanFromOne;

impl Compose for NanFromOne {}

impl Map<f64> for NanFromOne {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok(if *x < 1.0 {
            (*x, 1.0)
        } else {
            (f64::NAN, f64::NAN)
        })
    }
    fn backward_memo(&self, slope: &f64, dy: &f64) -> Result<f64> {
        Ok(slope * dy)
    }
}

#[test]
fn a_nan_a_stage_gives_is_a_value_over_one_element_too() {
    // One element goes from stage to stage in a register, where a NaN may
    // stand for an error; a NaN the map gives must come out as the memo
    // passes give it, and the stages after it must run.
    let mut chain = Chain::<f64>::new(&[1]);
    chain.push_per_element("nan from one", NanFromOne).unwrap();
    chain.push_per_element("exp", Exp).unwrap();
    let mut work = Workspace::new();
    for v in [0.5, 2.0, 0.25] {
        let x = ArrayD::from_elem(vec![1], v);
        let dy = ArrayD::from_elem(vec![1], 1.0);
        let y = chain.forward_reusing(&x, &mut work).unwrap().clone();
        let mut dx = x.clone();
        chain.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
        let (y_memo, memo) = chain.forward_memo(&x).unwrap();
        let dx_memo = chain.backward_memo(&memo, &dy).unwrap();
        if v < 1.0 {
            assert_eq!((y[0], dx[0]), (v.exp(), v.exp()));
        } else {
            assert!(y[0].is_nan() && dx[0].is_nan(), "{y} {dx}");
        }
        assert_eq!(y[0].to_bits(), y_memo[0].to_bits());
        assert_eq!(dx[0].to_bits(), dx_memo[0].to_bits());
    }
}

#[test]
fn clones_of_a_chain_share_its_buffers_and_a_grown_chain_refills_them() {
    let mut chain = Chain::<f64>::new(&[1]);
    chain.push_per_element("sin", Sin).unwrap();
    chain.push_per_element("exp", Exp).unwrap();
    let twin = chain.clone();
    let (x, dy) = (
        ArrayD::from_elem(vec![1], 0.4),
        ArrayD::from_elem(vec![1], -1.5),
    );
    let mut work = Workspace::new();
    let mut dx = x.clone();
    // Filled by one, read back by its clone: the same stages.
    chain.forward_reusing(&x, &mut work).unwrap();
    twin.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
    let by_hand = -1.5 * 0.4_f64.sin().exp() * 0.4_f64.cos();
    assert!(
        (dx[0] - by_hand).abs() < 1e-15,
        "{} against {by_hand}",
        dx[0]
    );
    // Grown after the forward pass: the workspace is stale for it.
    chain.push_per_element("sin", Sin).unwrap();
    // Its own forward pass refills it; the clone's is then stale in turn.
    assert_refused_then_refilled(&chain, &x, &mut work, &dy, &mut dx);
    assert_refused(&twin, &x, &mut work, &dy, &mut dx);
    // A chain of the same make (one run of three per-element stages) but
    // other maps: its stages did not fill the workspace.
    let mut other = Chain::<f64>::new(&[1]);
    for _ in 0..3 {
        other.push_per_element("exp", Exp).unwrap();
    }
    assert_refused(&other, &x, &mut work, &dy, &mut dx);
}

/// A chain of scalar maps: `count` per-element stages, in turn a sine, a
/// hyperbolic tangent, a static composite and a power.
fn scalar_chain(count: usize, shape: &[usize]) -> Chain<f64> {
    let mut chain = Chain::<f64>::new(shape);
    for k in 0..count {
        match k % 4 {
            0 => chain.push_per_element("sin", Sin),
            1 => chain.push_per_element("tanh", Tanh),
            2 => chain.push_per_element("sin exp", Sin.then(Exp)),
            _ => chain.push_per_element("cube", Powi { coef: 0.5, n: 3 }),
        }
        .unwrap();
    }
    chain
}

#[test]
fn the_one_shot_backward_pass_of_a_chain_of_scalar_maps_equals_the_memo_passes() {
    // Over one element the one-shot pass sweeps the stages once, keeping
    // their slopes on the stack (in a vector past 32 stages): bit for bit
    // the memo passes' numbers, at every depth and on either side of 32.
    for count in [1, 2, 8, 31, 32, 33, 70] {
        for shape in [&[1][..], &[1, 1]] {
            let chain = scalar_chain(count, shape);
            for (v, d) in [(0.3, 1.0), (-1.2, -2.5), (0.9, 1e-3)] {
                let x = ArrayD::from_elem(IxDyn(shape), v);
                let dy = ArrayD::from_elem(IxDyn(shape), d);
                let dx = chain.backward(&x, &dy).unwrap();
                assert_eq!(dx.shape(), shape);
                assert_eq!(
                    dx.first().unwrap().to_bits(),
                    memo_passes(&chain, &x, &dy).first().unwrap().to_bits(),
                    "{count} stages, shape {shape:?}, x = {v}"
                );
            }
        }
    }
    // The chain rule by hand for two stages: cos(x) (1 - tanh(sin x)^2) dy.
    let chain = scalar_chain(2, &[1]);
    let dx = chain
        .backward(
            &ArrayD::from_elem(IxDyn(&[1]), 0.7),
            &ArrayD::from_elem(IxDyn(&[1]), -2.0),
        )
        .unwrap();
    let by_hand = 0.7_f64.cos() * (1.0 - 0.7_f64.sin().tanh().powi(2)) * -2.0;
    assert!(
        (dx[0] - by_hand).abs() < 1e-15,
        "{} against {by_hand}",
        dx[0]
    );
}

#[test]
fn the_one_shot_backward_pass_of_a_chain_of_scalar_maps_reports_what_a_stage_reports() {
    let one = |v: f64| ArrayD::from_elem(IxDyn(&[1]), v);
    // A stage's own error.
    let mut chain = Chain::<f64>::new(&[1]);
    chain.push_per_element("exp", Exp).unwrap();
    chain.push_per_element("double", DoubleUpToTen).unwrap();
    let err = chain.backward(&one(3.0), &one(1.0)).unwrap_err();
    assert_is_over_ten(&err);
    assert_eq!(
        chain.backward(&one(1.0), &one(1.0)).unwrap()[0],
        2.0 * 1.0_f64.exp()
    );
    // A NaN a stage gives is a value, and the stages after it run.
    let mut chain = Chain::<f64>::new(&[1]);
    chain.push_per_element("nan from one", NanFromOne).unwrap();
    chain.push_per_element("exp", Exp).unwrap();
    assert!(chain.backward(&one(2.0), &one(1.0)).unwrap()[0].is_nan());
    assert_eq!(
        chain.backward(&one(0.5), &one(1.0)).unwrap()[0],
        0.5_f64.exp()
    );
    // A slope that overflows where its product with the change does not:
    // the map's own backward pass gives the change.
    let inverse_square = Powi { coef: 1.0, n: -2 };
    let mut chain = Chain::<f64>::new(&[1]);
    chain
        .push_per_element("inverse square", inverse_square)
        .unwrap();
    chain.push_per_element("sin", Sin).unwrap();
    let dx = chain.backward(&one(1e-120), &one(1e-200)).unwrap();
    let (s, _) = inverse_square.forward_memo(&1e-120_f64).unwrap();
    let expected: f64 = inverse_square
        .backward(&1e-120, &Sin.backward(&s, &1e-200).unwrap())
        .unwrap();
    assert!(expected.is_finite() && expected != 0.0, "{expected}");
    assert_eq!(dx[0], expected);
    // Changes and inputs of the wrong shape.
    let err = chain
        .backward(&one(0.5), &ArrayD::from_elem(IxDyn(&[1, 1]), 1.0))
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
    let err = chain
        .backward(&ArrayD::from_elem(IxDyn(&[1, 1]), 0.5), &one(1.0))
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
}
