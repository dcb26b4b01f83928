//! The catalogue through every law at orders 1 and 2 on extreme but valid
//! domains: no false failures (cases the checker cannot decide are reported
//! as undecided, never passed or failed), and at each of those scales a
//! backward pass off by a relative 1e-4 is caught.

use ndarray::Array1;
use proptest::strategy::Strategy;
use revdiff::laws::strategies::{log_uniform, matrices, vectors};
use revdiff::laws::{Checker, Law, LawReport};
use revdiff::*;

/// A map whose backward pass is `1 + skew` times the wrapped map's: a
/// relative gradient error of `skew` in every coordinate.
#[derive(Clone, Debug)]
struct Skewed<F> {
    map: F,
    skew: f64,
}
impl<F> Compose for Skewed<F> {}
impl<A: Euclidean<f64>, F: Map<A>> Map<A> for Skewed<F> {
    type Output = F::Output;
    type Memo = F::Memo;
    fn forward_memo(&self, x: &A) -> Result<(F::Output, F::Memo)> {
        self.map.forward_memo(x)
    }
    fn backward_memo(&self, memo: &F::Memo, dy: &F::Output) -> Result<A> {
        Ok(self.map.backward_memo(memo, dy)?.scale(1.0 + self.skew))
    }
}

/// No law broken, and every law decided at some case at order 1.
fn assert_no_false_failures(report: &LawReport, name: &str) {
    assert!(report.is_clean(), "{name}: a correct map failed\n{report}");
    for c in report.checked() {
        if c.order == 1 && c.law != Law::Derivative {
            assert!(c.cases > 0, "{name}: {} was never decided\n{report}", c.law);
        }
    }
}

/// Every law at orders 1 and 2 on `f`, then the same map with a backward
/// pass off by 1e-4: law 2 must catch it.
fn extreme<A, F, S>(name: &str, f: F, inputs: S, cases: u32)
where
    A: Euclidean<f64> + Send + 'static,
    F: Reverse<A> + Send + Sync + 'static,
    F::Rev: Send + Sync + 'static,
    F::Output: Euclidean<f64> + Send + 'static,
    S: Strategy<Value = A> + Clone,
{
    let checker = Checker::new().cases(cases).unwrap();
    let report = checker.reverse(&f, inputs.clone());
    assert_no_false_failures(&report, name);
    let wrong = Skewed { map: f, skew: 1e-4 };
    let caught = checker.map_law(Law::Derivative, &wrong, inputs);
    let violation = caught
        .violation(Law::Derivative, 1)
        .unwrap_or_else(|| panic!("{name}: a relative error of 1e-4 was not caught\n{caught}"));
    // Caught as a real difference, not at the edge of the allowance.
    let (error, allowed) = (
        violation.breach.error.unwrap(),
        violation.breach.tolerance.unwrap(),
    );
    assert!(error > 2.0 * allowed, "{name}: {violation}");
}

#[test]
fn exp_up_to_700() {
    extreme("exp", Exp, -700.0..700.0f64, 64);
    extreme("exp near 700", Exp, 690.0..709.0f64, 64);
}

#[test]
fn ln_near_1e_minus_300() {
    extreme("ln", Ln, log_uniform(1e-300, 1e-290).unwrap(), 64);
}

#[test]
fn the_softmax_family_at_700_and_near_1e6() {
    for (lo, hi) in [(697.0, 703.0), (-703.0, -697.0), (1e6 - 3.0, 1e6 + 3.0)] {
        extreme("softmax", Softmax, vectors(5, lo, hi).unwrap(), 48);
        extreme("log-sum-exp", LogSumExp, vectors(5, lo, hi).unwrap(), 48);
        extreme("log-softmax", LogSoftmax, vectors(5, lo, hi).unwrap(), 48);
    }
    // Spread over +-700: mostly saturated, so mostly undecided at law 2,
    // but never failed.
    extreme(
        "softmax spread",
        Softmax,
        vectors(5, -700.0, 700.0).unwrap(),
        48,
    );
    extreme(
        "log-sum-exp spread",
        LogSumExp,
        vectors(5, -700.0, 700.0).unwrap(),
        48,
    );
}

#[test]
fn tanh_and_sigmoid_at_40() {
    extreme("tanh", Tanh, vectors(6, -40.0, 40.0).unwrap(), 64);
    extreme("sigmoid", Sigmoid, vectors(6, -40.0, 40.0).unwrap(), 64);
}

#[test]
fn products_of_100_terms() {
    // Elementwise products of 100 pairs, and a user's product of all 100
    // entries (first order: the catalogue has no such reduction).
    extreme(
        "products",
        MulPair,
        (
            vectors(100, -30.0, 30.0).unwrap(),
            vectors(100, -30.0, 30.0).unwrap(),
        ),
        32,
    );
    let checker = Checker::new().cases(64).unwrap();
    // Factors between 0.5 and 2: products from 1e-30 to 1e30.
    let inputs = vectors(100, 0.5, 2.0).unwrap();
    assert_no_false_failures(
        &checker.map(&ProductOfEntries { skew: 0.0 }, inputs.clone()),
        "product of entries",
    );
    let caught = checker.map_law(Law::Derivative, &ProductOfEntries { skew: 1e-4 }, inputs);
    assert!(caught.violation(Law::Derivative, 1).is_some(), "{caught}");
}

#[test]
fn sums_of_100000_terms() {
    extreme(
        "sum",
        ElementReduction::sum(),
        vectors(100_000, -1e3, 1e3).unwrap(),
        6,
    );
}

#[test]
fn matrix_products_200_by_200_with_entries_up_to_1000() {
    extreme(
        "matmul",
        MatMul::plain(),
        (
            matrices(200, 200, -1e3, 1e3).unwrap(),
            matrices(200, 200, -1e3, 1e3).unwrap(),
        ),
        3,
    );
}

/// `x -> x_0 x_1 ... x_99`, backward pass by prefix and suffix products
/// (no division, so zeros are fine), off by `1 + skew`.
#[derive(Clone, Debug)]
struct ProductOfEntries {
    skew: f64,
}
impl Compose for ProductOfEntries {}
impl Map<Array1<f64>> for ProductOfEntries {
    type Output = f64;
    type Memo = Array1<f64>;
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(f64, Array1<f64>)> {
        Ok((x.product(), x.clone()))
    }
    fn backward_memo(&self, x: &Array1<f64>, dy: &f64) -> Result<Array1<f64>> {
        let n = x.len();
        let mut out = Array1::from_elem(n, dy * (1.0 + self.skew));
        let mut prefix = 1.0;
        for i in 0..n {
            out[i] *= prefix;
            prefix *= x[i];
        }
        let mut suffix = 1.0;
        for i in (0..n).rev() {
            out[i] *= suffix;
            suffix *= x[i];
        }
        Ok(out)
    }
}

#[test]
fn undecided_cases_are_reported_with_their_reason_and_neither_pass_nor_fail() {
    // A softmax spread over +-700 is saturated at most inputs: its slopes
    // are far below the rounding of its values, so law 2 cannot decide.
    let report = Checker::new().cases(48).unwrap().reverse_law(
        Law::Derivative,
        1,
        &Softmax,
        vectors(5, -700.0, 700.0).unwrap(),
    );
    assert!(report.is_clean() && !report.is_decided(), "{report}");
    let undecided = report.undecided_of(Law::Derivative, 1).unwrap();
    assert!(undecided.reason.contains("central differences"), "{report}");
    let checked = report.checked()[0];
    assert_eq!(checked.cases + checked.undecided, 48);
    assert_eq!(checked.undecided, undecided.cases);
    let shown = report.to_string();
    assert!(
        shown.contains("UNDECIDED derivative (law 2), at"),
        "{shown}"
    );
    assert!(shown.contains("1 with undecided cases"), "{shown}");
    // The same law at unsaturated inputs decides every case.
    let decided = Checker::new().cases(48).unwrap().reverse_law(
        Law::Derivative,
        1,
        &Softmax,
        vectors(5, -3.0, 3.0).unwrap(),
    );
    assert!(decided.is_clean() && decided.is_decided(), "{decided}");
}
