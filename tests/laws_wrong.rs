//! A battery of deliberately wrong maps: each must be caught by the law
//! that its mistake breaks, and the shrunk counterexample must show the
//! mistake.

use ndarray::{Array1, array};
use revdiff::laws::strategies::{nonzero, vectors};
use revdiff::laws::{Checker, Exhaustive, FiniteDomain, Law, LawReport, grid};
use revdiff::*;

/// Asserts that `law` at `order` is broken in `report`, and returns the
/// violation's typed case.
fn broken<A: 'static, B: 'static>(report: &LawReport, law: Law, order: u8) -> &laws::Case<A, B> {
    let v = report
        .violation(law, order)
        .unwrap_or_else(|| panic!("{law} at order {order} was not caught:\n{report}"));
    v.case::<A, B>()
        .unwrap_or_else(|| panic!("the violation has no case of the expected types: {v:?}"))
}

/// A scalar map given by its value and a (possibly wrong) slope.
#[derive(Clone)]
struct Scalar {
    value: fn(f64) -> f64,
    backward: fn(f64, f64) -> f64,
}
impl std::fmt::Debug for Scalar {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Scalar")
    }
}
impl Compose for Scalar {}
impl Map<f64> for Scalar {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok(((self.value)(*x), *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        Ok((self.backward)(*x, *dy))
    }
}

#[test]
fn sign_flip_breaks_the_derivative_law() {
    let f = Scalar {
        value: f64::sin,
        backward: |x, dy| -x.cos() * dy,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let c = broken::<f64, f64>(&report, Law::Derivative, 1);
    // cos(0) = 1 is as wrong as anywhere: the input shrinks to 0, the
    // changes to 1 or -1.
    assert_eq!(c.x, 0.0);
    assert_eq!(c.v.abs(), 1.0);
    assert_eq!(c.w.abs(), 1.0);
    // Only law 2 sees a sign: the backward map is still linear.
    assert_eq!(report.violations().len(), 1, "{report}");
}

#[test]
fn missing_factor_two_breaks_the_derivative_law() {
    let f = Scalar {
        value: |x| x * x,
        backward: |x, dy| x * dy,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let c = broken::<f64, f64>(&report, Law::Derivative, 1);
    // At x = 0 both slopes are 0; the counterexample is anywhere else.
    assert!(c.x != 0.0);
    let breach = &report.violation(Law::Derivative, 1).unwrap().breach;
    // Observed is half of expected.
    assert!(breach.error.unwrap() > breach.tolerance.unwrap());
    assert!(breach.observed.contains("<R[f](x, w), v>"));
}

/// `x -> A x` for a fixed square matrix, with the backward pass forgetting
/// the transpose.
#[derive(Clone, Debug)]
struct Untransposed(ndarray::Array2<f64>);
impl Compose for Untransposed {}
impl Map<Array1<f64>> for Untransposed {
    type Output = Array1<f64>;
    type Memo = ();
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(Array1<f64>, ())> {
        Ok((self.0.dot(x), ()))
    }
    fn backward_memo(&self, _: &(), dy: &Array1<f64>) -> Result<Array1<f64>> {
        Ok(self.0.dot(dy)) // should be self.0.t().dot(dy)
    }
}

#[test]
fn untransposed_matrix_breaks_the_derivative_law() {
    let a = array![[1.0, 2.0, 0.0], [0.0, 1.0, 3.0], [0.0, 0.0, 1.0]];
    let report = Checker::new().map(&Untransposed(a.clone()), vectors(3, -2.0, 2.0).unwrap());
    let c = broken::<Array1<f64>, Array1<f64>>(&report, Law::Derivative, 1);
    // The map is linear, so the input does not matter and shrinks to 0.
    assert!(c.x.iter().all(|&x| x == 0.0), "{report}");
    // The shrunk changes really tell A from its transpose.
    assert!((c.w.dot(&a.dot(&c.v)) - c.w.dot(&a.t().dot(&c.v))).abs() > 0.5);
    // Additivity still holds: only the derivative law sees the mistake.
    assert!(report.violation(Law::Additive, 1).is_none());
}

/// `(a, b) -> a b` with the gradient of `b` dropped.
#[derive(Clone, Debug)]
struct DroppedInput;
impl Compose for DroppedInput {}
impl Map<(f64, f64)> for DroppedInput {
    type Output = f64;
    type Memo = (f64, f64);
    fn forward_memo(&self, x: &(f64, f64)) -> Result<(f64, (f64, f64))> {
        Ok((x.0 * x.1, *x))
    }
    fn backward_memo(&self, x: &(f64, f64), dy: &f64) -> Result<(f64, f64)> {
        Ok((x.1 * dy, 0.0)) // should be (x.1 dy, x.0 dy)
    }
}

#[test]
fn dropped_input_gradient_breaks_the_derivative_law() {
    let report = Checker::new().map(&DroppedInput, (-3.0..3.0f64, -3.0..3.0f64));
    let c = broken::<(f64, f64), f64>(&report, Law::Derivative, 1);
    // The change in a does not matter and shrinks to 0; the change in b
    // and the value of a are what expose the dropped gradient.
    assert_eq!(c.v.0, 0.0, "{report}");
    assert!(c.v.1 != 0.0 && c.x.0 != 0.0);
}

#[test]
fn gradient_right_only_for_positive_inputs_is_caught_at_a_negative_input() {
    // x |x| has slope 2 |x|; 2 x is right only for x > 0.
    let f = Scalar {
        value: |x| x * x.abs(),
        backward: |x, dy| 2.0 * x * dy,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let c = broken::<f64, f64>(&report, Law::Derivative, 1);
    assert!(c.x < 0.0, "{report}");
}

#[test]
fn backward_not_linear_in_the_change_breaks_additivity() {
    let f = Scalar {
        value: f64::tanh,
        backward: |x, dy| (1.0 - x.tanh().powi(2)) * dy * dy.abs(),
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let c = broken::<f64, f64>(&report, Law::Additive, 1);
    // Both output changes are needed and neither is zero.
    assert!(c.w != 0.0 && c.w2 != 0.0, "{report}");
    broken::<f64, f64>(&report, Law::Homogeneous, 1);
}

#[test]
fn backward_off_by_a_constant_breaks_the_zero_change_law() {
    let f = Scalar {
        value: f64::exp,
        backward: |x, dy| x.exp() * dy + 0.5,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let v = report
        .violation(Law::ZeroChange, 1)
        .unwrap_or_else(|| panic!("{report}"));
    assert!(v.breach.observed.contains("R[f](x, 0) = 0.5"), "{report}");
    assert_eq!(v.case::<f64, f64>().unwrap().x, 0.0);
}

/// `x -> (sin x, cos x)` whose backward pass swaps the slots of the
/// output change.
#[derive(Clone, Debug)]
struct SwappedPair;
impl Compose for SwappedPair {}
impl Map<f64> for SwappedPair {
    type Output = (f64, f64);
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<((f64, f64), f64)> {
        Ok(((x.sin(), x.cos()), *x))
    }
    fn backward_memo(&self, x: &f64, dy: &(f64, f64)) -> Result<f64> {
        Ok(x.cos() * dy.1 - x.sin() * dy.0) // should be cos x dy.0 - sin x dy.1
    }
}

#[test]
fn swapped_pair_components_break_the_pairing_laws() {
    let report = Checker::new().pairing(&SwappedPair, &Sin, &Cos, -3.0..3.0f64);
    let c = broken::<f64, (f64, f64)>(&report, Law::Projection, 1);
    // One slot of the change is enough to see the swap.
    assert!(c.w.0 == 0.0 || c.w.1 == 0.0, "{report}");
    broken::<f64, (f64, f64)>(&report, Law::Pairing, 1);
    // The single-map check agrees: it is the derivative that is wrong.
    let single = Checker::new().map(&SwappedPair, -3.0..3.0f64);
    broken::<f64, (f64, f64)>(&single, Law::Derivative, 1);
}

/// `x -> x^3`, with a reverse map whose values are right (`3 x^2 dy`) but
/// whose own backward pass has the wrong derivative in `x` (`3 x dy`
/// instead of `6 x dy`).
#[derive(Clone, Debug)]
struct Cube;
impl Compose for Cube {}
impl Map<f64> for Cube {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok((x * x * x, *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        Ok(3.0 * x * x * dy)
    }
}

#[derive(Clone, Debug)]
struct CubeRev;
impl Compose for CubeRev {}
impl Map<(f64, f64)> for CubeRev {
    type Output = f64;
    type Memo = (f64, f64);
    fn forward_memo(&self, p: &(f64, f64)) -> Result<(f64, (f64, f64))> {
        Ok((3.0 * p.0 * p.0 * p.1, *p))
    }
    fn backward_memo(&self, p: &(f64, f64), u: &f64) -> Result<(f64, f64)> {
        Ok((3.0 * p.0 * p.1 * u, 3.0 * p.0 * p.0 * u)) // first slot should be 6 x dy u
    }
}

/// The correct reverse map of the cube, from the catalogue.
fn cube_rev() -> Then<Pair<Then<Fst, Powi<f64>>, Snd>, MulPair> {
    fst()
        .then(Powi::with_coefficient(3.0, 2))
        .pair(snd())
        .then(MulPair)
}

impl Reverse<(f64, f64)> for CubeRev {
    type Rev = <Then<Pair<Then<Fst, Powi<f64>>, Snd>, MulPair> as Reverse<(f64, f64)>>::Rev;
    fn rev(&self) -> Self::Rev {
        Reverse::<(f64, f64)>::rev(&cube_rev())
    }
}
impl Reverse<f64> for Cube {
    type Rev = CubeRev;
    fn rev(&self) -> CubeRev {
        CubeRev
    }
}

#[test]
fn right_first_derivative_with_wrong_second_order_is_caught_at_order_two() {
    let report = Checker::new().reverse(&Cube, -3.0..3.0f64);
    // Order 1 holds: the values of the backward pass and of the reverse map
    // are right.
    for law in [Law::Derivative, Law::ReverseAgrees, Law::Additive] {
        assert!(report.violation(law, 1).is_none(), "{report}");
    }
    // The reverse map's own derivative is checked at order 2.
    let c = broken::<f64, f64>(&report, Law::Derivative, 2);
    assert!(c.x != 0.0 && c.w != 0.0, "{report}");
}

/// A hand-fused `relu then square`: right for x > 0, wrong in the x < 0
/// branch of the backward pass.
#[derive(Clone, Debug)]
struct FusedRampSquare;
impl Compose for FusedRampSquare {}
impl Map<f64> for FusedRampSquare {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok((x.max(0.0).powi(2), *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        // The x <= 0 branch should be 0: it took the slope of |x|^2 instead.
        Ok(if *x > 0.0 {
            2.0 * x * dy
        } else {
            2.0 * x.abs() * dy
        })
    }
}

#[test]
fn fused_kernel_wrong_in_one_branch_breaks_the_chain_rule() {
    let report = Checker::new().chain_rule(&FusedRampSquare, &Relu, &Powi::new(2), -3.0..3.0f64);
    let c = broken::<f64, f64>(&report, Law::ChainRule, 1);
    assert!(c.x < 0.0, "{report}");
    assert!(
        report
            .violation(Law::ChainRule, 1)
            .unwrap()
            .breach
            .observed
            .contains("R[h](x, w)")
    );
}

#[test]
fn a_relative_gradient_error_of_1e_minus_4_is_caught() {
    let f = Scalar {
        value: f64::exp,
        backward: |x, dy| x.exp() * dy * (1.0 + 1e-4),
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    broken::<f64, f64>(&report, Law::Derivative, 1);
}

/// 100 elementwise `tanh`s whose slope is off by a relative 1e-4.
#[derive(Clone, Debug)]
struct SlightlyWrongTanh;
impl Compose for SlightlyWrongTanh {}
impl Map<Array1<f64>> for SlightlyWrongTanh {
    type Output = Array1<f64>;
    type Memo = Array1<f64>;
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(Array1<f64>, Array1<f64>)> {
        let y = x.mapv(f64::tanh);
        Ok((y.clone(), y))
    }
    fn backward_memo(&self, y: &Array1<f64>, dy: &Array1<f64>) -> Result<Array1<f64>> {
        Ok(y.mapv(|t| (1.0 - t * t) * (1.0 + 1e-4)) * dy)
    }
}

#[test]
fn a_relative_gradient_error_of_1e_minus_4_is_caught_in_100_dimensions() {
    let report = Checker::new().map(&SlightlyWrongTanh, vectors(100, -2.0, 2.0).unwrap());
    broken::<Array1<f64>, Array1<f64>>(&report, Law::Derivative, 1);
}

#[test]
fn a_panicking_map_is_a_violation_with_its_input() {
    let f = Scalar {
        value: |x| {
            assert!(x < 2.0, "the model only knows inputs below 2");
            x
        },
        backward: |_, dy| dy,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    assert!(!report.is_clean());
    let v = &report.violations()[0];
    assert!(v.breach.measure.contains("panicked"), "{report}");
    assert!(v.breach.measure.contains("only knows inputs below 2"));
    // The counterexample is an input of the panicking region.
    let x = *v.input::<f64, f64>().unwrap();
    assert!((2.0..3.0).contains(&x), "{report}");
}

#[test]
fn a_map_returning_nan_breaks_the_finiteness_law() {
    // sqrt(x + 1) is NaN below -1, and the strategy draws there.
    let f = Scalar {
        value: |x| (x + 1.0).sqrt(),
        backward: |x, dy| 0.5 / (x + 1.0).sqrt() * dy,
    };
    let report = Checker::new().map(&f, -3.0..3.0f64);
    let v = report
        .violation(Law::ShapesFinite, 1)
        .unwrap_or_else(|| panic!("{report}"));
    assert!(v.breach.measure.contains("not finite"));
    assert!(*v.input::<f64, f64>().unwrap() < -1.0);
}

/// A backward pass that returns one coordinate too many.
#[derive(Clone, Debug)]
struct WrongShape;
impl Compose for WrongShape {}
impl Map<Array1<f64>> for WrongShape {
    type Output = f64;
    type Memo = usize;
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(f64, usize)> {
        Ok((x.sum(), x.len()))
    }
    fn backward_memo(&self, n: &usize, dy: &f64) -> Result<Array1<f64>> {
        Ok(Array1::from_elem(n + 1, *dy))
    }
}

#[test]
fn wrong_backward_shape_breaks_the_shape_law() {
    let report = Checker::new().map(&WrongShape, vectors(3, -1.0, 1.0).unwrap());
    let v = report
        .violation(Law::ShapesFinite, 1)
        .unwrap_or_else(|| panic!("{report}"));
    assert!(v.breach.observed.contains("(4,)"), "{report}");
    assert!(v.breach.expected.contains("(3,)"));
}

#[test]
fn the_report_names_the_law_the_case_and_the_numbers() {
    let f = Scalar {
        value: |x| x * x,
        backward: |x, dy| x * dy,
    };
    let text = Checker::new().map(&f, -3.0..3.0f64).to_string();
    for part in [
        "BROKEN derivative (law 2)",
        "<R[f](x, w), v> = <w, Df(x) v>",
        "input x",
        "input change v",
        "output change w",
        "expected",
        "observed",
        "error",
        "allowed",
    ] {
        assert!(text.contains(part), "{part:?} missing from\n{text}");
    }
}

/// `(a, b) -> a b` with a backward pass quadratic in the change; the
/// exhaustive checker finds the first broken case in enumeration order.
#[derive(Clone, Debug)]
struct SquaredChange;
impl Compose for SquaredChange {}
impl Map<f64> for SquaredChange {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok((x * x, *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        Ok(2.0 * x * dy * dy)
    }
}

#[test]
fn exhaustive_mode_finds_the_first_broken_case_exactly() {
    let values = [0.0, 1.0, -1.0, 2.0, -2.0];
    let domain = FiniteDomain::new(values.to_vec(), values.to_vec(), values.to_vec()).unwrap();
    let report = Exhaustive::<f64>::new().map(&SquaredChange, &domain);
    let c = broken::<f64, f64>(&report, Law::Additive, 1);
    // x = 0 passes everything; the first case with x = 1 and two nonzero
    // changes is (x, w, w2) = (1, 1, 1): 2 (1 + 1)^2 = 8 but 2 + 2 = 4.
    assert_eq!((c.x, c.w, c.w2), (1.0, 1.0, 1.0));
    let v = report.violation(Law::Additive, 1).unwrap();
    assert!(v.breach.expected.contains("= 4"), "{report}");
    assert!(v.breach.observed.contains("= 8"), "{report}");
    assert_eq!(v.breach.tolerance, None);
}

#[test]
fn exhaustive_mode_finds_a_fused_kernel_wrong_on_one_grid_point() {
    let points = grid(&[0.0, 1.0, -1.0, 2.0, -2.0], 1);
    let xs: Vec<f64> = points.iter().map(|p| p[0]).collect();
    let domain = FiniteDomain::new(xs.clone(), xs.clone(), xs).unwrap();
    let report =
        Exhaustive::<f64>::new().chain_rule(&FusedRampSquare, &Relu, &Powi::new(2), &domain);
    let c = broken::<f64, f64>(&report, Law::ChainRule, 1);
    assert_eq!((c.x, c.w), (-1.0, 1.0), "{report}");
}

#[test]
fn the_macro_generates_failing_tests_for_wrong_maps() {
    // The generated tests call `reverse_law` and `assert_clean`; this is
    // what a generated test does for the wrong cube at order 2.
    let result = std::panic::catch_unwind(|| {
        Checker::new()
            .reverse_law(Law::Derivative, 2, &Cube, nonzero(0.5, 3.0).unwrap())
            .assert_clean()
    });
    let message = *result.unwrap_err().downcast::<String>().unwrap();
    assert!(
        message.contains("BROKEN derivative (law 2), order 2"),
        "{message}"
    );
}

/// A map whose backward pass never returns (it waits without using a core).
#[derive(Clone, Debug)]
struct NeverReturns;
impl Compose for NeverReturns {}
impl Map<f64> for NeverReturns {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok((*x, *x))
    }
    fn backward_memo(&self, _: &f64, _: &f64) -> Result<f64> {
        loop {
            std::thread::park();
        }
    }
}

#[test]
fn a_backward_pass_that_never_returns_breaks_the_law_at_the_time_limit() {
    let checker = Checker::new()
        .time_limit(std::time::Duration::from_millis(200))
        .unwrap();
    let started = std::time::Instant::now();
    let report = checker.map_law(Law::Derivative, &NeverReturns, -1.0..1.0f64);
    let v = report
        .violation(Law::Derivative, 1)
        .unwrap_or_else(|| panic!("not reported:\n{report}"));
    assert!(v.breach.measure.contains("time limit of 200ms"), "{v}");
    // One case ran into the limit; the rest and the shrinking were skipped.
    assert!(started.elapsed() < std::time::Duration::from_secs(5));
}

/// `x -> x^2` elementwise with right memo passes and reusing passes that
/// go wrong in the ways buffer reuse does: a backward pass that adds into
/// its buffer instead of overwriting it (stale values), or an adding pass
/// that overwrites.
#[derive(Clone, Debug)]
struct Squares {
    stale: bool,
}
impl Compose for Squares {}
impl Map<Array1<f64>> for Squares {
    type Output = Array1<f64>;
    type Memo = Array1<f64>;
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(Array1<f64>, Array1<f64>)> {
        Ok((x * x, x.clone()))
    }
    fn backward_memo(&self, x: &Array1<f64>, dy: &Array1<f64>) -> Result<Array1<f64>> {
        Ok(x * dy * 2.0)
    }
    fn forward_reusing<'w>(
        &self,
        x: &Array1<f64>,
        work: &'w mut Workspace,
    ) -> Result<&'w Array1<f64>> {
        work.put_output(x * x);
        work.output()
    }
    fn backward_reusing(
        &self,
        x: &Array1<f64>,
        _: &mut Workspace,
        dy: &Array1<f64>,
        dx: &mut Array1<f64>,
    ) -> Result<()> {
        if self.stale {
            *dx += &(x * dy * 2.0); // the mistake: the old contents stay
        } else {
            *dx = x * dy * 2.0;
        }
        Ok(())
    }
    fn backward_reusing_adding(
        &self,
        x: &Array1<f64>,
        _: &mut Workspace,
        dy: &Array1<f64>,
        dx: &mut Array1<f64>,
    ) -> Result<()> {
        if self.stale {
            *dx += &(x * dy * 2.0);
        } else {
            *dx = x * dy * 2.0; // the mistake: overwrites what was there
        }
        Ok(())
    }
}

#[test]
fn reusing_passes_that_keep_stale_values_or_overwrite_are_caught_by_law_7() {
    for stale in [true, false] {
        let report = Checker::new().map(&Squares { stale }, vectors(3, -2.0, 2.0).unwrap());
        broken::<Array1<f64>, Array1<f64>>(&report, Law::ReusingAgrees, 1);
        // The memo passes are right: law 7 is the only one broken.
        assert_eq!(report.violations().len(), 1, "{report}");
    }
}
