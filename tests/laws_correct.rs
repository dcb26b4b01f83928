//! Correct maps, including ill-conditioned ones, checked at 1,000 cases per
//! law: the default tolerance policy must give no false failures.

use ndarray::Array1;
use proptest::prelude::*;
use revdiff::laws::strategies::{log_uniform, matrices, positive_vectors, vectors};
use revdiff::laws::{Checker, Law};
use revdiff::*;

fn checker() -> Checker {
    Checker::new().cases(1000).unwrap()
}

/// For the largest maps: every law at order 1 at `cases` cases (where the
/// ill-conditioning is), and at order 2 at 40 (the order-2 structure of
/// these maps is checked at small sizes in laws_catalogue.rs).
fn check_large<A, F, S>(f: &F, inputs: S, cases: u32)
where
    A: Euclidean<f64> + Send + 'static,
    F: Reverse<A> + Send + Sync + 'static,
    F::Rev: Send + Sync + 'static,
    F::Output: Euclidean<f64> + Send + 'static,
    S: proptest::strategy::Strategy<Value = A> + Clone,
{
    for law in Law::FOR_REVERSE {
        Checker::new()
            .cases(cases)
            .unwrap()
            .reverse_law(law, 1, f, inputs.clone())
            .assert_clean();
        Checker::new()
            .cases(40)
            .unwrap()
            .reverse_law(law, 2, f, inputs.clone())
            .assert_clean();
    }
}

#[test]
fn exp_near_30() {
    // exp(30) is about 1e13: errors must be judged relative to it.
    checker().reverse(&Exp, 29.0..31.0f64).assert_clean();
    checker()
        .reverse(&Exp, positive_vectors(8, 29.0, 31.0).unwrap())
        .assert_clean();
}

#[test]
fn ln_near_1e_minus_6() {
    // Central differences must stay inside the domain: steps shrink to a
    // fraction of x.
    checker()
        .reverse(&Ln, log_uniform(1e-7, 1e-5).unwrap())
        .assert_clean();
}

#[test]
fn sqrt_near_zero_from_above() {
    checker()
        .reverse(&Sqrt, log_uniform(1e-12, 1e-3).unwrap())
        .assert_clean();
}

#[test]
fn matrix_products_of_100_by_100() {
    let inputs = (
        matrices(100, 100, -1.0, 1.0).unwrap(),
        matrices(100, 100, -1.0, 1.0).unwrap(),
    );
    // 20,000 inputs a case (as for the inner products below, at 400):
    // fewer cases keep the test near 10 s.
    check_large(&MatMul::plain(), inputs, 300);
}

#[test]
fn sums_of_10000_terms() {
    check_large(
        &ElementReduction::sum(),
        vectors(10_000, -1.0, 1.0).unwrap(),
        1000,
    );
}

#[test]
fn inner_products_of_10000_terms() {
    let pairs = (
        vectors(10_000, -1.0, 1.0).unwrap(),
        vectors(10_000, -1.0, 1.0).unwrap(),
    );
    check_large(&dot(), pairs, 400);
}

#[test]
fn smooth_maps_in_100_dimensions() {
    let x = || vectors(100, -3.0, 3.0).unwrap();
    // 400 cases a map, every law at orders 1 and 2: about 10 s in all.
    let checker = || Checker::new().cases(400).unwrap();
    checker().reverse(&Tanh, x()).assert_clean();
    checker().reverse(&Sigmoid.then(Sin), x()).assert_clean();
    checker().reverse(&LogSumExp, x()).assert_clean();
    checker().reverse(&Softmax, x()).assert_clean();
}

#[test]
fn an_affine_layer_with_a_nonlinearity() {
    let inputs = (
        (
            matrices(4, 6, -1.0, 1.0).unwrap(),
            vectors(4, -1.0, 1.0).unwrap(),
        ),
        vectors(6, -2.0, 2.0).unwrap(),
    );
    let layer = Affine.then(Tanh).then(squared_norm());
    checker().reverse(&layer, inputs).assert_clean();
}

#[test]
fn pair_laws_hold_for_library_composites() {
    let x = || vectors(5, -2.0, 2.0).unwrap();
    let c = checker();
    c.chain_rule_reverse(&Sin.then(Exp), &Sin, &Exp, x())
        .assert_clean();
    c.pairing_reverse(&Sin.pair(Tanh), &Sin, &Tanh, x())
        .assert_clean();
    c.sum_rule_reverse(&Sin.plus(Cos), &Sin, &Cos, x())
        .assert_clean();
    c.same_reverse(&Tanh.then(Neg), &Neg.then(Tanh), x())
        .assert_clean();
}

#[test]
fn maps_without_a_reverse_map_are_checked_at_first_order() {
    // Boxed maps are first-order only; law 3 then uses central differences
    // of the backward pass.
    let boxed: Boxed<Array1<f64>, Array1<f64>> = Boxed::new(Tanh.then(Sin)).unwrap();
    let report = checker().map(&boxed, vectors(20, -2.0, 2.0).unwrap());
    report.assert_clean();
    assert_eq!(report.checked().len(), Law::FOR_MAPS.len());
}

#[test]
fn user_supplied_output_changes_are_used() {
    // Large output changes: the laws are homogeneous in them.
    let report = checker().reverse(
        &Exp,
        laws::with_output_changes(-2.0..2.0f64, prop_oneof![-1e6..-1e3, 1e3..1e6f64]),
    );
    report.assert_clean();
}

#[test]
fn f32_maps_pass_with_the_f32_policy() {
    let c: Checker<f32> = Checker::new().cases(1000).unwrap();
    c.reverse(&Tanh, -3.0..3.0f32).assert_clean();
    let x = proptest::collection::vec(-2.0..2.0f32, 4).prop_map(Array1::from);
    c.reverse(&Sigmoid, x).assert_clean();
}
