//! Maps over Z2: gate truth tables, exact law checks of gates and their
//! composites at every input and change, the Boolean difference, wrong
//! gates caught, and algebraic normal forms.

use revdiff::bits::{
    AndGate, Bit, Bits, MuxGate, NotGate, OrGate, Polynomial, PolynomialMap, SeparateWires,
    XorGate, boolean_difference_mismatch,
};
use revdiff::laws::{Exhaustive, FiniteDomain};
use revdiff::*;

/// Every value of `wires` wires over `examples` examples.
fn all_bits(wires: usize, examples: usize) -> Vec<Bits> {
    let n = wires * examples;
    (0..1u64 << n)
        .map(|code| Bits::from_fn(wires, examples, |w, e| code >> (w * examples + e) & 1 == 1))
        .collect()
}

fn all_pairs(examples: usize) -> Vec<(Bits, Bits)> {
    let one = all_bits(1, examples);
    one.iter()
        .flat_map(|a| one.iter().map(move |b| (a.clone(), b.clone())))
        .collect()
}

/// One wire per input over all `2^k` input combinations, one example each.
fn inputs(k: usize) -> Vec<Bits> {
    (0..k)
        .map(|i| Bits::from_fn(1, 1 << k, |_, e| e >> i & 1 == 1))
        .collect()
}

fn column(b: &Bits) -> Vec<u8> {
    (0..b.examples()).map(|e| u8::from(b.get(0, e))).collect()
}

#[test]
fn gate_truth_tables() {
    // Truth tables (common practice, no source). Inputs in the order
    // (x, y) = (0,0), (1,0), (0,1), (1,1).
    let v = inputs(2);
    let (x, y) = (v[0].clone(), v[1].clone());
    let xy = (x.clone(), y.clone());
    assert_eq!(column(&XorGate.forward(&xy).unwrap()), [0, 1, 1, 0]);
    assert_eq!(column(&AndGate.forward(&xy).unwrap()), [0, 0, 0, 1]);
    assert_eq!(column(&OrGate.forward(&xy).unwrap()), [0, 1, 1, 1]);
    assert_eq!(column(&NotGate.forward(&x).unwrap()), [1, 0, 1, 0]);
    // The multiplexer, (s, a, b) over all eight inputs: b where s is 1.
    let v = inputs(3);
    let mux = MuxGate
        .forward(&(v[0].clone(), (v[1].clone(), v[2].clone())))
        .unwrap();
    for e in 0..8 {
        let (s, a, b) = (e & 1 == 1, e >> 1 & 1 == 1, e >> 2 & 1 == 1);
        assert_eq!(mux.get(0, e), if s { b } else { a }, "input {e:03b}");
    }
    // The same as the composites the reverse maps come from.
    assert_eq!(
        OrGate.forward(&xy).unwrap(),
        OrGate.composite().forward(&xy).unwrap()
    );
}

#[test]
fn gates_and_composites_pass_every_law_exactly_at_every_case() {
    let checker = Exhaustive::<Bit>::new();
    // One example: every value of every slot (law checks range over up to
    // five slots at once; bit-slicing itself is exercised elsewhere).
    let pairs = all_pairs(1);
    let singles = all_bits(1, 1);
    let on_pairs = FiniteDomain::new(pairs.clone(), pairs.clone(), singles.clone()).unwrap();
    for report in [
        checker.reverse(&XorGate, &on_pairs),
        checker.reverse(&AndGate, &on_pairs),
        checker.reverse(&OrGate, &on_pairs),
        checker.reverse(&XorGate.pair(AndGate).then(OrGate), &on_pairs),
    ] {
        report.assert_clean();
        assert!(report.checked().iter().any(|c| c.order == 2 && c.cases > 0));
    }
    let on_singles = FiniteDomain::new(singles.clone(), singles.clone(), singles.clone()).unwrap();
    checker.reverse(&NotGate, &on_singles).assert_clean();
    checker
        .reverse(&Duplicate.then(AndGate), &on_singles)
        .assert_clean();
    checker
        .reverse(
            &Duplicate.then(NotGate.alongside(Id)).then(OrGate),
            &on_singles,
        )
        .assert_clean();
    // The multiplexer over one example: every (s, (a, b)).
    let one = all_bits(1, 1);
    let triples: Vec<(Bits, (Bits, Bits))> = one
        .iter()
        .flat_map(|s| all_pairs(1).into_iter().map(move |ab| (s.clone(), ab)))
        .collect();
    let on_triples = FiniteDomain::new(triples.clone(), triples, one).unwrap();
    checker.reverse(&MuxGate, &on_triples).assert_clean();
}

#[test]
fn backward_passes_are_the_boolean_difference() {
    let two = SeparateWires { at: 1 };
    assert_eq!(
        boolean_difference_mismatch(&two.then(XorGate), 2).unwrap(),
        None
    );
    assert_eq!(
        boolean_difference_mismatch(&two.then(AndGate), 2).unwrap(),
        None
    );
    assert_eq!(
        boolean_difference_mismatch(&two.then(OrGate), 2).unwrap(),
        None
    );
    assert_eq!(boolean_difference_mismatch(&NotGate, 1).unwrap(), None);
    let three = SeparateWires { at: 1 }.then(Id.alongside(SeparateWires { at: 1 }));
    assert_eq!(
        boolean_difference_mismatch(&three.then(MuxGate), 3).unwrap(),
        None
    );
    let majority = Polynomial::from_truth_table(3, |x| x.count_ones() >= 2).unwrap();
    let map = PolynomialMap::new(3, vec![majority]).unwrap();
    assert_eq!(boolean_difference_mismatch(&map, 3).unwrap(), None);
}

/// A gate with a (possibly wrong) hand-written backward pass.
#[derive(Clone, Debug)]
struct Gate {
    value: fn(u64, u64) -> u64,
    backward: fn(u64, u64, u64) -> (u64, u64),
}
impl Compose for Gate {}
impl Map<(Bits, Bits)> for Gate {
    type Output = Bits;
    type Memo = (Bits, Bits);
    fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, (Bits, Bits))> {
        let z = Bits::from_fn(1, x.examples(), |_, e| {
            (self.value)(u64::from(x.get(0, e)), u64::from(y.get(0, e))) == 1
        });
        Ok((z, (x.clone(), y.clone())))
    }
    fn backward_memo(&self, (x, y): &(Bits, Bits), dz: &Bits) -> Result<(Bits, Bits)> {
        let at = |e| {
            (self.backward)(
                u64::from(x.get(0, e)),
                u64::from(y.get(0, e)),
                u64::from(dz.get(0, e)),
            )
        };
        Ok((
            Bits::from_fn(1, x.examples(), |_, e| at(e).0 == 1),
            Bits::from_fn(1, x.examples(), |_, e| at(e).1 == 1),
        ))
    }
}

#[test]
fn three_wrong_gate_derivatives_are_caught_at_the_first_failing_case() {
    let two = SeparateWires { at: 1 };
    // AND with its partial derivatives swapped: (x dz, y dz).
    let swapped = Gate {
        value: |x, y| x & y,
        backward: |x, y, d| (x & d, y & d),
    };
    let m = boolean_difference_mismatch(&two.then(swapped), 2)
        .unwrap()
        .expect("caught");
    // First failing case: variable 0 at x = 1, y = 0 (input 0b01), where
    // d(xy)/dx = y = 0 but the wrong pass gives x = 1.
    assert_eq!(
        (m.variable, m.input, m.expected, m.observed),
        (0, 0b01, 0, 1)
    );

    // OR without the (1 + y) factor: (dz, dz).
    let no_factor = Gate {
        value: |x, y| x | y,
        backward: |_, _, d| (d, d),
    };
    let m = boolean_difference_mismatch(&two.then(no_factor), 2)
        .unwrap()
        .expect("caught");
    assert_eq!((m.variable, m.input), (0, 0b10));

    // XOR whose derivative in y forgets the change: (dz, 0). Linear in dz,
    // so the exact laws of one map hold; the Boolean difference does not.
    let dropped = Gate {
        value: |x, y| x ^ y,
        backward: |_, _, d| (d, 0),
    };
    let m = boolean_difference_mismatch(&two.then(dropped.clone()), 2)
        .unwrap()
        .expect("caught");
    assert_eq!((m.variable, m.input, m.expected, m.observed), (1, 0, 1, 0));
    // And against the gate it claims to be, exactly, at the first case.
    let pairs = all_pairs(1);
    let domain = FiniteDomain::new(pairs.clone(), pairs, all_bits(1, 1)).unwrap();
    let report = Exhaustive::<Bit>::new().same_map(&dropped, &XorGate, &domain);
    assert!(!report.is_clean(), "{report}");
}

#[test]
fn algebraic_normal_forms_from_truth_tables_and_back() {
    // Majority and parity of three (common fact, no source).
    let majority = Polynomial::from_truth_table(3, |x| x.count_ones() >= 2).unwrap();
    assert_eq!(majority.to_string(), "ab + ac + bc");
    let parity = Polynomial::from_truth_table(3, |x| x.count_ones() % 2 == 1).unwrap();
    assert_eq!(parity.to_string(), "a + b + c");
    // OR of two: a + b + ab; NOT: 1 + a; the constants.
    assert_eq!(
        Polynomial::from_truth_table(2, |x| x != 0)
            .unwrap()
            .to_string(),
        "a + b + ab"
    );
    assert_eq!(
        Polynomial::from_truth_table(1, |x| x == 0)
            .unwrap()
            .to_string(),
        "1 + a"
    );
    assert_eq!(
        Polynomial::from_truth_table(2, |_| false)
            .unwrap()
            .to_string(),
        "0"
    );
    // Round trip on a function of 12 inputs with many terms.
    let rule = |x: u64| (x.wrapping_mul(0x9e37_79b9) >> 7) & 1 == 1;
    let p = Polynomial::from_truth_table(12, rule).unwrap();
    for x in 0..(1u64 << 12) {
        assert_eq!(p.eval(x), rule(x), "x = {x}");
    }
    // And as a map, all 4,096 inputs at once.
    let map = PolynomialMap::new(12, vec![p]).unwrap();
    let xs = Bits::from_fn(12, 4096, |w, e| e >> w & 1 == 1);
    let y = map.forward(&xs).unwrap();
    assert!((0..4096).all(|e| y.get(0, e) == rule(e as u64)));
    assert!(Polynomial::from_truth_table(31, |_| true).is_err());
}

#[test]
fn polynomial_maps_pass_the_laws_at_orders_1_and_2_exactly() {
    let majority = Polynomial::from_truth_table(3, |x| x.count_ones() >= 2).unwrap();
    let parity = Polynomial::from_truth_table(3, |x| x.count_ones() % 2 == 1).unwrap();
    let map = PolynomialMap::new(3, vec![majority, parity]).unwrap();
    let domain = FiniteDomain::new(all_bits(3, 1), all_bits(3, 1), all_bits(2, 1)).unwrap();
    let report = Exhaustive::<Bit>::new().reverse(&map, &domain);
    report.assert_clean();
    assert!(report.checked().iter().any(|c| c.order == 2 && c.cases > 0));
}

#[test]
fn shapes_that_differ_are_a_typed_error_naming_both() {
    let err = XorGate
        .forward(&(Bits::zeros(1, 3), Bits::zeros(1, 4)))
        .unwrap_err();
    let text = err.to_string();
    assert!(
        text.contains("(1 wires, 3 examples)") && text.contains("(1 wires, 4 examples)"),
        "{text}"
    );
    assert!(matches!(err, Error::ShapeMismatch { .. }));
}

mod learning {
    use super::*;
    use revdiff::bits::{Aggregate, CircuitFit, CircuitTraining, SumOfProducts};

    /// All `2^k` inputs of `k` wires, one example each, and `rule` on them.
    fn truth(k: usize, rule: impl Fn(u64) -> bool) -> (Bits, Bits) {
        let n = 1usize << k;
        (
            Bits::from_fn(k, n, |w, e| e >> w & 1 == 1),
            Bits::from_fn(1, n, |_, e| rule(e as u64)),
        )
    }

    /// The outcome's best parameters, checked to get exactly the number of
    /// examples wrong that the outcome reports.
    fn checked(sop: &SumOfProducts, fit: &CircuitFit, x: &Bits, y: &Bits) -> (Bits, u64) {
        let (p, wrong) = match fit {
            CircuitFit::Exact { parameters, .. } => (parameters.clone(), 0),
            CircuitFit::Revisited { best, wrong, .. }
            | CircuitFit::OutOfPasses { best, wrong, .. } => (best.clone(), *wrong),
        };
        let wide = Bits::from_fn(p.wires(), x.examples(), |w, _| p.get(w, 0));
        let z = sop.forward(&(wide, x.clone())).unwrap();
        assert_eq!(z.try_add(y).unwrap().count_ones(), wrong, "{fit:?}");
        (p, wrong)
    }

    #[test]
    fn the_sum_of_products_backward_pass_is_the_boolean_difference() {
        // Parameters and inputs as one bundle of wires: 2 terms over 3
        // inputs is 8 parameter wires and 3 input wires, 2,048 inputs.
        let sop = SumOfProducts::new(3, 2).unwrap();
        let bundle = SeparateWires {
            at: sop.parameter_wires(),
        }
        .then(sop);
        assert_eq!(boolean_difference_mismatch(&bundle, 11).unwrap(), None);
    }

    /// Starts from a fixed pseudo-random sequence (splitmix64, common
    /// practice, no source), one per call.
    fn starts(wires: usize) -> impl FnMut() -> Bits {
        let mut state = 0x5eed_u64;
        move || {
            state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            let bits = z ^ (z >> 31);
            Bits::from_fn(wires, 1, |w, _| bits >> (w % 64) & 1 == 1)
        }
    }

    /// Learns `sop` from each of `tries` starts with `aggregate`; returns
    /// how many fit exactly, and the learned polynomials of those that did.
    fn learn_from_starts(
        sop: &SumOfProducts,
        aggregate: Aggregate,
        passes: usize,
        tries: usize,
        (x, y): &(Bits, Bits),
    ) -> Vec<(String, usize)> {
        let mut next = starts(sop.parameter_wires());
        let training = CircuitTraining::new(passes).unwrap().aggregate(aggregate);
        let mut exact = Vec::new();
        for _ in 0..tries {
            let fit = training.run(sop, next(), x, y).unwrap();
            let (p, wrong) = checked(sop, &fit, x, y);
            match fit {
                CircuitFit::Exact { passes, .. } => {
                    assert_eq!(wrong, 0);
                    exact.push((sop.polynomial(&p).to_string(), passes));
                }
                // Never called converged with wrong examples left.
                _ => {
                    println!("not exact: {fit:?}");
                    assert!(wrong > 0, "{fit:?}")
                }
            }
        }
        exact
    }

    #[test]
    fn learning_three_input_majority_from_its_truth_table() {
        let data = truth(3, |e| e.count_ones() >= 2);
        let sop = SumOfProducts::new(3, 3).unwrap();
        let exact = learn_from_starts(&sop, Aggregate::Tested, 100, 32, &data);
        println!("majority: {} of 32 starts exact: {exact:?}", exact.len());
        assert!(exact.len() >= 16, "{exact:?}");
        for (polynomial, _) in &exact {
            // Algebraic normal form of majority (common fact, no source).
            assert_eq!(polynomial, "ab + ac + bc");
        }
        // The published rule alone, summed or voted, rarely gets there:
        // it is reported, not asserted.
        for aggregate in [Aggregate::Vote, Aggregate::Sum, Aggregate::EachExample] {
            let plain = learn_from_starts(&sop, aggregate, 100, 32, &data);
            println!(
                "majority, {aggregate:?}: {} of 32 starts exact",
                plain.len()
            );
        }
    }

    #[test]
    fn learning_the_parity_of_a_hidden_subset_of_eight_inputs() {
        // Hidden subset: inputs 1, 4 and 6.
        let hidden = 0b0101_0010u64;
        let data = truth(8, |e| (e & hidden).count_ones() % 2 == 1);
        let sop = SumOfProducts::new(8, 8).unwrap();
        let exact = learn_from_starts(&sop, Aggregate::Tested, 300, 16, &data);
        println!(
            "hidden parity: {} of 16 starts exact: {exact:?}",
            exact.len()
        );
        assert!(exact.len() >= 8, "{exact:?}");
        for (polynomial, _) in &exact {
            assert_eq!(polynomial, "b + e + g");
        }
    }

    #[test]
    fn learning_a_rule_of_twelve_inputs() {
        // A shipping depot's rule of our own: a parcel goes on the early
        // van if it is prepaid (input 0) and light (input 1), or else if it
        // is marked urgent (input 2) and the route is open (input 3); the
        // other eight inputs (colour codes, shelf numbers) do not matter.
        let rule = |e: u64| (e & 0b11 == 0b11) ^ (e & 0b1100 == 0b1100);
        let data = truth(12, rule);
        let sop = SumOfProducts::new(12, 3).unwrap();
        let exact = learn_from_starts(&sop, Aggregate::Tested, 300, 8, &data);
        println!("depot rule: {} of 8 starts exact: {exact:?}", exact.len());
        assert!(exact.len() >= 4, "{exact:?}");
        for (polynomial, _) in &exact {
            assert_eq!(polynomial, "ab + cd");
        }
    }

    #[test]
    fn bad_settings_and_shapes_are_errors() {
        assert!(CircuitTraining::new(0).is_err());
        assert!(SumOfProducts::new(0, 2).is_err());
        let sop = SumOfProducts::new(2, 1).unwrap();
        let (x, y) = truth(2, |e| e == 3);
        let wrong_start = Bits::zeros(sop.parameter_wires(), 2);
        assert!(matches!(
            CircuitTraining::new(5)
                .unwrap()
                .run(&sop, wrong_start, &x, &y),
            Err(Error::ShapeMismatch { .. })
        ));
    }
}
