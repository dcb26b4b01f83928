//! The elementwise loops run on the widest vector instructions the
//! processor has (chosen at run time); this test code is built for the
//! target's baseline. Their results must be the same bit for bit: each
//! element through the same operations in the same order, whatever the
//! length (the short arrays take a plain loop, the longer ones the wide
//! one, with a remainder).

use ndarray::Array1;
use proptest::prelude::*;
use revdiff::{
    Adagrad, Adam, GradientDescent, Map, Momentum, Nesterov, Optimiser, Pointwise, Real, RmsProp,
    Tanh, Workspace,
};

/// One optimiser's step on flat coordinates.
type Stepper = Box<dyn FnMut(&mut [f64], &[f64])>;

/// Values in `[-6, 6]`, of lengths on both sides of the wide loop's start
/// (32 elements) and past a few vectors.
fn values() -> impl Strategy<Value = Vec<f64>> {
    prop::collection::vec(-6.0..6.0_f64, 1..200)
}

proptest! {
    #[test]
    fn tanh_and_its_slope_are_those_of_one_element_at_a_time(v in values()) {
        let x = Array1::from(v);
        let dy = x.mapv(|a| 0.5 - a / 7.0);
        let expected_y: Vec<f64> = x.iter().map(|a| a.vector_tanh()).collect();
        let expected_dx: Vec<f64> = x
            .iter()
            .zip(&dy)
            .map(|(a, d)| (1.0 - a.vector_tanh() * a.vector_tanh()) * d)
            .collect();
        // The allocating passes and the reusing ones.
        prop_assert_eq!(Tanh.forward(&x).unwrap().to_vec(), expected_y.clone());
        prop_assert_eq!(Tanh.backward(&x, &dy).unwrap().to_vec(), expected_dx.clone());
        let mut work = Workspace::new();
        let mut dx = Array1::zeros(0);
        prop_assert_eq!(Tanh.forward_reusing(&x, &mut work).unwrap().to_vec(), expected_y);
        Tanh.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
        prop_assert_eq!(dx.to_vec(), expected_dx);
    }

    #[test]
    fn f32_maps_of_a_users_closure_are_those_of_one_element_at_a_time(v in values()) {
        let x: Array1<f32> = v.iter().map(|&a| a as f32).collect();
        let f = |a: f32| (a * a - a / 3.0) / (1.0 + a.abs()).sqrt();
        let expected: Vec<f32> = x.iter().map(|&a| f(a)).collect();
        prop_assert_eq!(x.map_elems(f).to_vec(), expected.clone());
        let mut out = x.clone();
        x.map_elems_into(&mut out, f);
        prop_assert_eq!(out.to_vec(), expected);
    }

    #[test]
    fn optimisers_move_every_coordinate_as_they_move_it_alone(
        v in values(),
        which in 0..5_usize,
    ) {
        // Three steps on all coordinates at once, and on each alone with an
        // optimiser of its own: the same numbers.
        let make = || -> Stepper {
            fn boxed<O: Optimiser<f64> + 'static>(mut o: O) -> Stepper {
                Box::new(move |p, g| o.step_coordinates(p, g).unwrap())
            }
            match which {
                0 => boxed(GradientDescent::new(0.1).unwrap()),
                1 => boxed(Momentum::new(0.1, 0.9).unwrap()),
                2 => boxed(Nesterov::new(0.1, 0.9).unwrap()),
                3 => boxed(Adagrad::new(0.1).unwrap()),
                _ => boxed(RmsProp::new(0.1).unwrap()),
            }
        };
        let gradient = |p: &[f64]| -> Vec<f64> { p.iter().map(|a| a * a - 1.5).collect() };
        let mut all = v.clone();
        let mut together = make();
        for _ in 0..3 {
            let g = gradient(&all);
            together(&mut all, &g);
        }
        for (i, &start) in v.iter().enumerate() {
            let mut one = [start];
            let mut alone = make();
            for _ in 0..3 {
                let g = gradient(&one);
                alone(&mut one, &g);
            }
            prop_assert_eq!(one[0].to_bits(), all[i].to_bits(), "coordinate {}", i);
        }
    }

    #[test]
    fn adam_is_its_formula_coordinate_by_coordinate(v in values()) {
        // Kingma and Ba (2015), with the bias corrections folded into two
        // constants per step as the library folds them (its doc says so).
        let (rate, b1, b2, eps) = (0.01_f64, 0.9_f64, 0.999_f64, 1e-8_f64);
        let mut adam = Adam::new(rate).unwrap();
        let mut p = v.clone();
        let (mut m, mut s) = (vec![0.0; v.len()], vec![0.0; v.len()]);
        let mut expected = v.clone();
        for t in 1..=3 {
            let g: Vec<f64> = p.iter().map(|a| a * a - 1.5).collect();
            adam.step_coordinates(&mut p, &g).unwrap();
            let step = rate / (1.0 - b1.powi(t));
            let root = 1.0 / (1.0 - b2.powi(t)).sqrt();
            for i in 0..v.len() {
                let g = expected[i] * expected[i] - 1.5;
                m[i] = b1 * m[i] + (1.0 - b1) * g;
                s[i] = b2 * s[i] + (1.0 - b2) * g * g;
                expected[i] -= step * m[i] / (s[i].sqrt() * root + eps);
            }
        }
        prop_assert_eq!(p, expected);
    }
}
