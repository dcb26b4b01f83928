//! Composition strategies: every way of keeping what the backward pass
//! needs gives the same numbers bit for bit, and reports what it cost; the
//! binomial schedule makes exactly the optimal number of forward steps.

use ndarray::{ArrayD, array};
use proptest::prelude::*;
use revdiff::*;

/// A chain of `n` stages of three kinds, so that the order matters.
fn chain(n: usize) -> Chain<f64> {
    let mut chain = Chain::<f64>::new(&[3]);
    for k in 0..n {
        match k % 3 {
            0 => chain.push_elementwise("tanh", Tanh).unwrap(),
            1 => chain
                .push_affine(
                    array![[0.9, -0.2, 0.1], [0.3, 0.8, -0.4], [0.05, 0.2, 1.1]],
                    array![0.1, -0.05, 0.02],
                )
                .unwrap(),
            _ => chain.push_elementwise("sin", Sin).unwrap(),
        }
    }
    chain
}

fn point() -> (ArrayD<f64>, ArrayD<f64>) {
    (
        ArrayD::from_shape_vec(vec![3], vec![0.4, -0.7, 1.3]).unwrap(),
        ArrayD::from_shape_vec(vec![3], vec![1.0, -0.5, 0.25]).unwrap(),
    )
}

#[test]
fn recomputing_a_static_composite_changes_no_bit_at_either_order() {
    let kept = Sin.then(Exp).then(Tanh).then(Softplus);
    let recomputed = Sin.then(Exp).then(Tanh).recomputed().then(Softplus);
    for x in [-1.3, 0.0, 0.4, 2.2_f64] {
        assert_eq!(
            kept.backward(&x, &1.5).unwrap().to_bits(),
            recomputed.backward(&x, &1.5).unwrap().to_bits()
        );
        assert_eq!(
            hessian_vector(&kept, &x, &0.7).unwrap().to_bits(),
            hessian_vector(&recomputed, &x, &0.7).unwrap().to_bits()
        );
    }
    // The memo is the input of the recomputed segment, not its stages'.
    let (_, (inner, _)) = Sin.recomputed().then(Exp).forward_memo(&0.5).unwrap();
    assert_eq!(inner, 0.5);
}

#[test]
fn every_retention_gives_the_same_gradient_and_reports_its_cost() {
    let (x, dy) = point();
    for n in [1usize, 2, 7, 30] {
        let mut c = chain(n);
        let (kept, all) = c.gradient_and_cost(&x, &dy).unwrap();
        assert_eq!((all.advances, all.recorded, all.peak_states), (0, 0, n));
        // Every stage keeps one array of three values (tanh its output,
        // sin its input) or, affine, its input and its 3 x 3 weights.
        let memo_bytes = |stages: std::ops::Range<usize>| -> usize {
            stages
                .map(|k| if k % 3 == 1 { 12 * 8 } else { 3 * 8 })
                .sum()
        };
        assert_eq!(all.peak_memo_bytes, memo_bytes(0..n));
        assert_eq!(
            (all.peak_checkpoint_bytes, all.peak_bytes),
            (0, memo_bytes(0..n))
        );
        // The same as the plain backward pass.
        assert_eq!(kept, c.backward(&x, &dy).unwrap());

        c.retaining(Retention::InputOnly).unwrap();
        let (dx, cost) = c.gradient_and_cost(&x, &dy).unwrap();
        assert_eq!(dx, kept, "input only, n = {n}");
        assert_eq!(
            (cost.advances, cost.recorded, cost.peak_states),
            (0, n as u64, n + 1)
        );
        assert_eq!(cost.peak_checkpoint_bytes, 3 * 8);
        assert_eq!(cost.peak_memo_bytes, memo_bytes(0..n));
        assert_eq!(cost.peak_bytes, 3 * 8 + memo_bytes(0..n));

        for k in [1usize, 3, 4] {
            c.retaining(Retention::EveryKth(k)).unwrap();
            let (dx, cost) = c.gradient_and_cost(&x, &dy).unwrap();
            assert_eq!(dx, kept, "every {k}th, n = {n}");
            assert_eq!(cost.recorded, n as u64);
            let segments = n.div_ceil(k);
            assert_eq!(cost.peak_states, segments + k.min(n));
            assert_eq!(cost.peak_checkpoint_bytes, segments * 3 * 8);
            // The memos of one segment at a time: the largest segment's.
            let largest = (0..segments)
                .map(|j| memo_bytes(j * k..((j + 1) * k).min(n)))
                .max()
                .unwrap();
            assert_eq!(cost.peak_memo_bytes, largest);
            assert_eq!(cost.peak_bytes, segments * 3 * 8 + largest);
        }

        for states in [1usize, 2, 3, 5] {
            c.retaining(Retention::Binomial { states }).unwrap();
            let (dx, cost) = c.gradient_and_cost(&x, &dy).unwrap();
            assert_eq!(dx, kept, "binomial with {states} states, n = {n}");
            assert_eq!(
                Some(cost.advances),
                binomial_advances(n, states),
                "n = {n}, s = {states}"
            );
            assert_eq!(cost.recorded, n as u64);
            assert!(cost.peak_states <= states + 1, "{cost:?}");
            assert!(cost.peak_checkpoint_bytes <= states * 3 * 8);
            // One stage's memo at a time.
            let largest_stage = (0..n).map(|k| memo_bytes(k..k + 1)).max().unwrap();
            assert_eq!(cost.peak_memo_bytes, largest_stage);
            assert!(cost.peak_bytes <= cost.peak_checkpoint_bytes + cost.peak_memo_bytes);
        }
    }
}

#[test]
fn retention_settings_are_checked() {
    let mut c = chain(3);
    assert!(matches!(
        c.retaining(Retention::EveryKth(0)),
        Err(Error::InvalidSetting { .. })
    ));
    assert!(matches!(
        c.retaining(Retention::Binomial { states: 0 }),
        Err(Error::InvalidSetting { .. })
    ));
    // A refused setting leaves the chain as it was.
    assert_eq!(c.retention(), Retention::All);
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    /// Any chain length, any number of states: the binomial schedule gives
    /// the kept-all gradient bit for bit with Griewank's optimal number of
    /// forward steps, and never holds more states than allowed.
    #[test]
    fn binomial_checkpointing_is_exact_and_optimal(n in 1usize..40, states in 1usize..7) {
        let (x, dy) = point();
        let mut c = chain(n);
        let (kept, _) = c.gradient_and_cost(&x, &dy).unwrap();
        c.retaining(Retention::Binomial { states }).unwrap();
        let (dx, cost) = c.gradient_and_cost(&x, &dy).unwrap();
        prop_assert_eq!(dx, kept);
        prop_assert_eq!(Some(cost.advances), binomial_advances(n, states));
        prop_assert!(cost.peak_states <= states + 1);
    }
}

#[test]
fn a_comparison_table_of_strategies_for_a_users_chain() {
    let (x, dy) = point();
    let c = chain(24);
    let strategies = [
        Retention::All,
        Retention::InputOnly,
        Retention::EveryKth(5),
        Retention::Binomial { states: 3 },
    ];
    let table = c.compare_retentions(&x, &dy, &strategies, 3).unwrap();
    assert_eq!(table.rows.len(), 4);
    assert_eq!(table.rows[0].cost.advances, 0);
    assert_eq!(
        table.rows[3].cost.advances,
        binomial_advances(24, 3).unwrap()
    );
    // The chain's own setting is untouched.
    assert_eq!(c.retention(), Retention::All);
    let shown = table.to_string();
    assert!(shown.starts_with("strategy"), "{shown}");
    assert!(shown.contains("binomial, 3 states"), "{shown}");
    assert_eq!(shown.lines().count(), 5);
    assert!(matches!(
        c.compare_retentions(&x, &dy, &[], 3),
        Err(Error::InvalidSetting { .. })
    ));
}
