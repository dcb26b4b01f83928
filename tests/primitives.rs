//! Every primitive of the catalogue, at proptest-drawn points of its domain:
//! backward against central differences, rev() against backward, the
//! forward derivative against the finite-difference directional derivative,
//! and the same at the second and third reverse derivatives.

use crate::common::check_orders;
use ndarray::{Array1, Array2};
use proptest::prelude::*;
use revdiff::*;

fn vector(len: usize, lo: f64, hi: f64) -> impl Strategy<Value = Array1<f64>> {
    proptest::collection::vec(lo..hi, len).prop_map(Array1::from)
}

fn matrix(rows: usize, cols: usize) -> impl Strategy<Value = Array2<f64>> {
    proptest::collection::vec(-2.0..2.0f64, rows * cols)
        .prop_map(move |v| Array2::from_shape_vec((rows, cols), v).unwrap())
}

/// Points bounded away from 0 (for maps with a kink or jump there).
fn away_from_zero() -> impl Strategy<Value = f64> {
    prop_oneof![-3.0..-0.1f64, 0.1..3.0f64]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    #[test]
    fn exp(x in -5.0..5.0f64, seed in any::<u64>()) { check_orders("exp", &Exp, &x, seed); }
    #[test]
    fn ln(x in 0.05..20.0f64, seed in any::<u64>()) { check_orders("ln", &Ln, &x, seed); }
    #[test]
    fn sqrt(x in 0.05..20.0f64, seed in any::<u64>()) { check_orders("sqrt", &Sqrt, &x, seed); }
    #[test]
    fn powi(x in -3.0..3.0f64, n in -3i32..5, seed in any::<u64>()) {
        prop_assume!(n >= 0 || x.abs() > 0.2);
        check_orders("powi", &Powi::new(n), &x, seed);
    }
    #[test]
    fn powf(x in 0.1..5.0f64, p in -2.0..3.0f64, seed in any::<u64>()) {
        check_orders("powf", &Powf::new(p), &x, seed);
    }
    #[test]
    fn sin(x in -6.0..6.0f64, seed in any::<u64>()) { check_orders("sin", &Sin, &x, seed); }
    #[test]
    fn cos(x in -6.0..6.0f64, seed in any::<u64>()) { check_orders("cos", &Cos, &x, seed); }
    #[test]
    fn tanh(x in -4.0..4.0f64, seed in any::<u64>()) { check_orders("tanh", &Tanh, &x, seed); }
    #[test]
    fn sigmoid(x in -8.0..8.0f64, seed in any::<u64>()) { check_orders("sigmoid", &Sigmoid, &x, seed); }
    #[test]
    fn softplus(x in -8.0..8.0f64, seed in any::<u64>()) { check_orders("softplus", &Softplus, &x, seed); }
    #[test]
    fn relu(x in away_from_zero(), seed in any::<u64>()) { check_orders("relu", &Relu, &x, seed); }
    #[test]
    fn abs(x in away_from_zero(), seed in any::<u64>()) { check_orders("abs", &Abs, &x, seed); }
    #[test]
    fn neg(x in -5.0..5.0f64, seed in any::<u64>()) { check_orders("neg", &Neg, &x, seed); }
    #[test]
    fn sub(a in -5.0..5.0f64, b in -5.0..5.0f64, seed in any::<u64>()) {
        check_orders("sub", &SubPair, &(a, b), seed);
    }
    #[test]
    fn mul(a in -5.0..5.0f64, b in -5.0..5.0f64, seed in any::<u64>()) {
        check_orders("mul", &MulPair, &(a, b), seed);
    }
    #[test]
    fn div(a in -5.0..5.0f64, b in away_from_zero(), seed in any::<u64>()) {
        check_orders("div", &DivPair, &(a, b), seed);
    }
    #[test]
    fn elementwise_on_arrays(x in vector(4, -2.0, 2.0), seed in any::<u64>()) {
        check_orders("tanh on arrays", &Tanh, &x, seed);
        check_orders("mul on arrays", &MulPair, &(x.clone(), x.mapv(f64::cos)), seed);
    }
    #[test]
    fn matvec(w in matrix(3, 2), x in vector(2, -2.0, 2.0), xt in vector(3, -2.0, 2.0), seed in any::<u64>()) {
        check_orders("matvec", &MatVec::plain(), &(w.clone(), x), seed);
        check_orders("matvec transposed", &MatVec::transposed(), &(w, xt), seed);
    }
    #[test]
    fn outer(a in vector(3, -2.0, 2.0), b in vector(2, -2.0, 2.0), seed in any::<u64>()) {
        check_orders("outer", &Outer::plain(), &(a.clone(), b.clone()), seed);
        check_orders("outer swapped", &Outer::swapped(), &(a, b), seed);
    }
    #[test]
    fn matmul_all_flags(a in matrix(2, 2), b in matrix(2, 2), c in matrix(2, 3), seed in any::<u64>()) {
        for flags in 0..8u8 {
            let m = MatMul::new(flags & 1 != 0, flags & 2 != 0, flags & 4 != 0);
            check_orders(&format!("matmul {m:?}"), &m, &(a.clone(), b.clone()), seed);
        }
        // A non-square case: (2, 2) times (2, 3).
        check_orders("matmul (2,2)x(2,3)", &MatMul::plain(), &(a, c), seed);
    }
    #[test]
    fn transpose_and_affine(w in matrix(2, 3), b in vector(2, -1.0, 1.0), x in vector(3, -2.0, 2.0), seed in any::<u64>()) {
        check_orders("matrix transpose", &MatrixTranspose, &w, seed);
        check_orders("affine", &Affine, &((w, b), x), seed);
    }
    #[test]
    fn reductions(x in vector(5, -2.0, 2.0), y in vector(5, -2.0, 2.0), s in -2.0..2.0f64, seed in any::<u64>()) {
        check_orders("sum", &ElementReduction::sum(), &x, seed);
        check_orders("mean", &ElementReduction::mean(), &x, seed);
        check_orders("fill", &FillLike::mean(), &(x.clone(), s), seed);
        check_orders("dot", &dot(), &(x.clone(), y), seed);
        check_orders("squared norm", &squared_norm(), &x, seed);
    }
    #[test]
    fn softmax_family(x in vector(4, -3.0, 3.0), seed in any::<u64>()) {
        check_orders("softmax", &Softmax, &x, seed);
        check_orders("log-softmax", &LogSoftmax, &x, seed);
        check_orders("log-sum-exp", &LogSumExp, &x, seed);
    }
}

#[test]
fn affine_matches_its_composite() {
    let w = ndarray::array![[1.0, -2.0, 0.5], [0.3, 0.0, 4.0]];
    let b = ndarray::array![0.1, -0.2];
    let x = ndarray::array![1.0, 2.0, -1.0];
    let input = ((w, b), x);
    let dy = ndarray::array![0.7, -1.3];
    assert_eq!(
        Affine.forward(&input).unwrap(),
        affine_composite().forward(&input).unwrap()
    );
    assert_eq!(
        Affine.backward(&input, &dy).unwrap(),
        affine_composite().backward(&input, &dy).unwrap()
    );
}

#[test]
fn conventions_at_non_differentiable_points() {
    assert_eq!(Relu.backward(&0.0_f64, &1.0).unwrap(), 0.0);
    assert_eq!(Abs.backward(&0.0_f64, &1.0).unwrap(), 0.0);
    assert_eq!(Heaviside.forward(&0.0_f64).unwrap(), 0.0);
    assert_eq!(Signum.forward(&0.0_f64).unwrap(), 0.0);
    // The derivative of a constant power is zero even where x^-1 is infinite.
    assert_eq!(Powi::new(0).backward(&0.0_f64, &1.0).unwrap(), 0.0);
}

#[test]
fn stable_at_large_inputs() {
    let x: Array1<f64> = ndarray::array![1000.0, 999.0, -1000.0];
    let s = Softmax.forward(&x).unwrap();
    assert!(s.iter().all(|v| v.is_finite()));
    assert!((s.sum() - 1.0).abs() < 1e-15);
    let l = LogSoftmax.forward(&x).unwrap();
    assert!((l[0] + (1.0 + (-1.0_f64).exp()).ln()).abs() < 1e-12);
    assert_eq!(Sigmoid.forward(&-1000.0_f64).unwrap(), 0.0);
    assert_eq!(Sigmoid.forward(&1000.0_f64).unwrap(), 1.0);
    assert_eq!(Softplus.forward(&-1000.0_f64).unwrap(), 0.0);
    assert!(Softplus.backward(&-1000.0_f64, &1.0).unwrap().is_finite());
}

#[test]
fn shape_errors_name_both_shapes() {
    let w = Array2::<f64>::zeros((3, 4));
    let err = MatVec::plain().forward(&(w, Array1::zeros(3))).unwrap_err();
    assert!(
        err.to_string().contains("(4,)") && err.to_string().contains("(3,)"),
        "{err}"
    );
    let err = MulPair
        .forward(&(Array1::<f64>::zeros(2), Array1::zeros(3)))
        .unwrap_err();
    assert_eq!(
        err.to_string(),
        "multiplication: expected shape (2,), got (3,)"
    );
    let err = MatMul::plain()
        .forward(&(Array2::<f64>::zeros((2, 3)), Array2::zeros((2, 3))))
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");
    assert!(matches!(
        ElementReduction::mean().forward(&Array1::<f64>::zeros(0)),
        Err(Error::Empty { .. })
    ));
    assert!(matches!(
        Softmax.forward(&Array1::<f64>::zeros(0)),
        Err(Error::Empty { .. })
    ));
}

/// The largest gap between two arrays relative to the larger entry of
/// `scale` (at least 1).
fn relative_gap(a: &Array2<f64>, b: &Array2<f64>, scale: &Array2<f64>) -> f64 {
    let size = scale.iter().fold(1.0_f64, |m, v| m.max(v.abs()));
    a.iter()
        .zip(b)
        .fold(0.0_f64, |m, (p, q)| m.max((p - q).abs()))
        / size
}

/// A map that keeps its slope (computed with its value in one pass) gives,
/// through its memo passes and its reusing passes, the output `forward`
/// gives and the input change its reverse map gives from its separate slope
/// map, to a few units of rounding.
fn slope_kept_agrees(
    name: &str,
    f: impl Reverse<Array2<f64>, Output = Array2<f64>>,
    x: &Array2<f64>,
    dy: &Array2<f64>,
) -> std::result::Result<(), TestCaseError> {
    let expected = f.rev().forward(&(x.clone(), dy.clone())).unwrap();
    let (y, memo) = f.forward_memo(x).unwrap();
    prop_assert_eq!(&y, &f.forward(x).unwrap(), "{}: memo forward output", name);
    let dx = f.backward_memo(&memo, dy).unwrap();
    prop_assert!(
        relative_gap(&dx, &expected, &expected) <= 4.0 * f64::EPSILON,
        "{}: memo passes off by {:e}",
        name,
        relative_gap(&dx, &expected, &expected)
    );
    let mut work = Workspace::new();
    let mut reused = Array2::zeros((0, 0));
    // Twice: the second call writes into the first call's buffers.
    for _ in 0..2 {
        prop_assert_eq!(
            f.forward_reusing(x, &mut work).unwrap(),
            &y,
            "{}: reusing output",
            name
        );
        f.backward_reusing(x, &mut work, dy, &mut reused).unwrap();
        prop_assert_eq!(&reused, &dx, "{}: reusing against memo passes", name);
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]
    /// Sine, cosine, exponential, square root, sigmoid and softplus keep
    /// their slope; on arrays in row-major and in column-major memory.
    #[test]
    fn maps_that_keep_their_slope_agree_with_their_slope_maps(
        x in matrix(3, 4),
        dy in matrix(3, 4),
        column_major in any::<bool>(),
    ) {
        // `reversed_axes` keeps the memory: a column-major 4 x 3 array.
        let (x, dy) = if column_major { (x.reversed_axes(), dy.reversed_axes()) } else { (x, dy) };
        let positive = x.mapv(|v| v.abs() + 0.1);
        slope_kept_agrees("sin", Sin, &x, &dy)?;
        slope_kept_agrees("cos", Cos, &x, &dy)?;
        slope_kept_agrees("exp", Exp, &x, &dy)?;
        slope_kept_agrees("sqrt", Sqrt, &positive, &dy)?;
        slope_kept_agrees("sigmoid", Sigmoid, &(&x * 4.0), &dy)?;
        slope_kept_agrees("softplus", Softplus, &(&x * 4.0), &dy)?;
    }

    /// `map_elems_two` and `map_elems_two_into` give what two `map_elems`
    /// give, on every space, in every layout, into buffers of any shape.
    #[test]
    fn two_results_per_element_equal_two_maps(x in matrix(3, 4), column_major in any::<bool>()) {
        let x = if column_major { x.reversed_axes() } else { x };
        let f = |v: f64| (v.exp(), 2.0 * v - 1.0);
        let expected = (x.mapv(|v| f(v).0), x.mapv(|v| f(v).1));
        prop_assert_eq!(&x.map_elems_two(f), &expected);
        // Into buffers of the wrong shape (replaced), then of the right one.
        let (mut a, mut b) = (Array2::zeros((1, 1)), Array2::zeros((2, 2)));
        for _ in 0..2 {
            x.map_elems_two_into(&mut a, &mut b, f);
            prop_assert_eq!(&(a.clone(), b.clone()), &expected);
        }
        // An owned array that is not contiguous: every other column.
        let mut gaps = x.to_owned();
        gaps.slice_collapse(ndarray::s![.., ..;2]);
        let expected_gaps = (gaps.mapv(|v| f(v).0), gaps.mapv(|v| f(v).1));
        prop_assert_eq!(&gaps.map_elems_two(f), &expected_gaps);
        let one = Array1::from_elem(1, x[[0, 0]]).into_dyn();
        let (mut a, mut b) = (one.clone(), one.clone());
        one.map_elems_two_into(&mut a, &mut b, f);
        prop_assert_eq!((a[[0]], b[[0]]), f(x[[0, 0]]));
        prop_assert_eq!(x[[0, 0]].map_elems_two(f), f(x[[0, 0]]));
        let fixed = [x[[0, 0]], x[[1, 1]]];
        prop_assert_eq!(fixed.map_elems_two(f), ([f(fixed[0]).0, f(fixed[1]).0], [f(fixed[0]).1, f(fixed[1]).1]));
    }
}
