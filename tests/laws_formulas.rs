//! The maps that formulas are made of, and formulas themselves, through
//! every law at orders 1 and 2; and formulas against the same expressions
//! computed by hand.

use ndarray::{Array1, array};
use revdiff::laws::strategies::{log_uniform, vectors};
use revdiff::*;

law_tests!(arctan, reverse Arctan, -5.0..5.0f64);
law_tests!(arctan_arrays, reverse Arctan, vectors(4, -3.0, 3.0).unwrap());
law_tests!(exp_minus_one, reverse ExpMinusOne, -4.0..4.0f64);
law_tests!(ln_one_plus, reverse LnOnePlus, -0.9..5.0f64);
law_tests!(shift, reverse Shift::new(2.5).unwrap(), vectors(3, -2.0, 2.0).unwrap());
law_tests!(integer_power, reverse IntegerPower(3), -3.0..3.0f64);
law_tests!(integer_power_negative, reverse IntegerPower(-2), log_uniform(0.2, 5.0).unwrap());
law_tests!(coordinate, reverse Coordinate::new(2), vectors(4, -2.0, 2.0).unwrap());
law_tests!(place_at, reverse PlaceAt::new(1), (vectors(3, -2.0, 2.0).unwrap(), -2.0..2.0f64));
law_tests!(pow_pair, reverse PowPair, (log_uniform(0.1, 10.0).unwrap(), -2.0..2.0f64));
law_tests!(
    misra1a_formula,
    reverse parameter(0) * (1.0 - (-parameter(1) * input()).exp()),
    (vectors(2, 0.1, 2.0).unwrap(), 0.5..5.0f64)
);
law_tests!(
    roszman1_formula,
    reverse parameter(0) - parameter(1) * input()
        - (parameter(2) / (input() - parameter(3))).atan() / std::f64::consts::PI,
    (vectors(4, 0.5, 1.0).unwrap(), 2.0..5.0f64)
);
law_tests!(
    power_formula,
    reverse input_at(0).pow(parameter(0)) + 2.0 / input_at(1).powi(2),
    (vectors(1, -1.5, 1.5).unwrap(), vectors(2, 0.5, 3.0).unwrap())
);

#[test]
fn formulas_compute_what_they_say() {
    let b = array![1.5, -0.5, 2.0];
    let x = 0.75_f64;
    let cases: Vec<(f64, f64)> = vec![
        ((parameter(0) + 1.0).forward(&(b.clone(), x)).unwrap(), 2.5),
        ((1.0 - parameter(0)).forward(&(b.clone(), x)).unwrap(), -0.5),
        (
            (parameter(0) * input()).forward(&(b.clone(), x)).unwrap(),
            1.125,
        ),
        (
            (parameter(2) / input()).forward(&(b.clone(), x)).unwrap(),
            2.0 / 0.75,
        ),
        ((3.0 / parameter(2)).forward(&(b.clone(), x)).unwrap(), 1.5),
        ((parameter(0) / 2.0).forward(&(b.clone(), x)).unwrap(), 0.75),
        ((-parameter(1)).forward(&(b.clone(), x)).unwrap(), 0.5),
        (
            (parameter(0) - input()).forward(&(b.clone(), x)).unwrap(),
            0.75,
        ),
        (
            input().pow(parameter(2)).forward(&(b.clone(), x)).unwrap(),
            0.5625,
        ),
        (
            input().powf(0.5).forward(&(b.clone(), x)).unwrap(),
            0.75_f64.sqrt(),
        ),
        (
            input().ln_1p().forward(&(b.clone(), x)).unwrap(),
            0.75_f64.ln_1p(),
        ),
        (
            input().exp_m1().forward(&(b.clone(), x)).unwrap(),
            0.75_f64.exp_m1(),
        ),
    ];
    for (i, (got, want)) in cases.iter().enumerate() {
        assert!((got - want).abs() < 1e-15, "case {i}: {got} against {want}");
    }
    // The gradient of b0 (1 - exp(-b1 x)) with respect to b, by hand.
    let model = parameter(0) * (1.0 - (-parameter(1) * input()).exp());
    let (db, dx) = model.backward(&(b.clone(), x), &1.0).unwrap();
    let e = (0.5_f64 * 0.75).exp(); // exp(-b1 x) with b1 = -0.5
    assert!((db[0] - (1.0 - e)).abs() < 1e-15);
    assert!((db[1] - 1.5 * x * e).abs() < 1e-14);
    assert_eq!(db[2], 0.0);
    assert!((dx - 1.5 * -0.5 * e).abs() < 1e-14);
    // An index past the parameters is an error, not a panic.
    assert!(
        parameter(5)
            .forward(&(Array1::<f64>::zeros(2), 1.0))
            .is_err()
    );
}
