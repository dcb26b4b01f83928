//! The combinator laws, exactly, on tuples of arrays; the combinators at
//! orders one to three; nesting; the cost of the first-order path; the
//! dynamic forms.

use crate::common::check_orders;
use ndarray::{Array1, ArrayD};
use proptest::prelude::*;
use revdiff::*;
use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};

fn vector(len: usize) -> impl Strategy<Value = Array1<f64>> {
    proptest::collection::vec(-2.0..2.0f64, len).prop_map(Array1::from)
}

type V = Array1<f64>;

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn identity_law(x in vector(3), dy in vector(3)) {
        prop_assert_eq!(id().backward(&x, &dy).unwrap(), dy);
    }

    #[test]
    fn projection_laws(a in vector(2), b in vector(3), da in vector(2), db in vector(3)) {
        let x = (a.clone(), b.clone());
        prop_assert_eq!(fst().backward(&x, &da).unwrap(), (da.clone(), Array1::zeros(3)));
        prop_assert_eq!(snd().backward(&x, &db).unwrap(), (Array1::zeros(2), db.clone()));
    }

    #[test]
    fn pairing_backward_is_the_sum(x in vector(3), dy in vector(3), dz in vector(3)) {
        let (f, g) = (Tanh, Sin.then(Exp));
        let paired = f.pair(g).backward(&x, &(dy.clone(), dz.clone())).unwrap();
        let sum = f.backward(&x, &dy).unwrap() + g.backward(&x, &dz).unwrap();
        prop_assert_eq!(paired, sum);
    }

    #[test]
    fn chain_rule(a in vector(3), b in vector(3), dz in vector(3)) {
        let x = (a, b);
        let (f, g) = (MulPair, Sigmoid.then(Cos));
        let y = f.forward(&x).unwrap();
        let composed = f.then(g).backward(&x, &dz).unwrap();
        let by_hand = f.backward(&x, &g.backward(&y, &dz).unwrap()).unwrap();
        prop_assert_eq!(composed, by_hand);
    }

    #[test]
    fn sum_of_maps(x in vector(3), dy in vector(3)) {
        let (f, g) = (Sin, Softplus);
        let summed = f.plus(g).backward(&x, &dy).unwrap();
        let apart = f.backward(&x, &dy).unwrap() + g.backward(&x, &dy).unwrap();
        prop_assert_eq!(summed, apart);
        prop_assert_eq!(f.plus(g).forward(&x).unwrap(), f.forward(&x).unwrap() + g.forward(&x).unwrap());
    }

    #[test]
    fn product_acts_componentwise(a in vector(2), c in vector(3), db in vector(2), dd in vector(3)) {
        let m = Exp.alongside(Tanh);
        let got = m.backward(&(a.clone(), c.clone()), &(db.clone(), dd.clone())).unwrap();
        prop_assert_eq!(got, (Exp.backward(&a, &db).unwrap(), Tanh.backward(&c, &dd).unwrap()));
    }

    #[test]
    fn copy_add_discard_zero_constant_scale(x in vector(3), d1 in vector(3), d2 in vector(3)) {
        prop_assert_eq!(duplicate().backward(&x, &(d1.clone(), d2.clone())).unwrap(), &d1 + &d2);
        prop_assert_eq!(add_pair().backward(&(x.clone(), x.clone()), &d1).unwrap(), (d1.clone(), d1.clone()));
        prop_assert_eq!(discard().backward(&x, &()).unwrap(), Array1::<f64>::zeros(3));
        prop_assert_eq!(zero_map().backward(&x, &d1).unwrap(), Array1::<f64>::zeros(3));
        prop_assert_eq!(constant(d2.clone()).forward(&x).unwrap(), d2.clone());
        prop_assert_eq!(constant(d2.clone()).backward(&x, &d1).unwrap(), Array1::<f64>::zeros(3));
        prop_assert_eq!(multiply_by(2.5).backward(&x, &d1).unwrap(), &d1 * 2.5);
        prop_assert_eq!(Sin.scaled(2.5).backward(&x, &d1).unwrap(), Sin.backward(&x, &(&d1 * 2.5)).unwrap());
    }

    #[test]
    fn left_and_right_nesting_agree(x in vector(4), dz in vector(4)) {
        let left = Sin.then(Tanh).then(Exp).then(Softplus);
        let right = Sin.then(Tanh.then(Exp.then(Softplus)));
        prop_assert_eq!(left.forward(&x).unwrap(), right.forward(&x).unwrap());
        prop_assert_eq!(left.backward(&x, &dz).unwrap(), right.backward(&x, &dz).unwrap());
    }

    #[test]
    fn combinators_at_three_orders(a in -2.0..2.0f64, b in -2.0..2.0f64, seed in any::<u64>()) {
        let x = (a, b);
        check_orders("then", &MulPair.then(Sin), &x, seed);
        check_orders("pair", &MulPair.pair(SubPair), &x, seed);
        check_orders("cross", &Sin.alongside(Tanh), &x, seed);
        check_orders("sum", &MulPair.plus(SubPair), &x, seed);
        check_orders("scaled", &MulPair.scaled(-1.5), &x, seed);
        check_orders("fst", &fst(), &x, seed);
        check_orders("snd", &snd(), &x, seed);
        check_orders("add", &add_pair(), &x, seed);
        check_orders("id", &id(), &x, seed);
        check_orders("duplicate", &duplicate(), &a, seed);
        check_orders("zero", &zero_map(), &x, seed);
        check_orders("constant", &constant(3.0_f64), &x, seed);
        check_orders("scaling", &multiply_by(0.5), &x, seed);
        check_orders("transpose", &SubPair.transpose_at((0.0, 0.0)), &a, seed);
    }
}

#[test]
fn discard_has_every_order() {
    // The map to () has no output coordinates; its reverse derivative of each
    // order is the zero map on the input.
    let x = 1.5_f64;
    assert_eq!(
        Reverse::<f64>::rev(&discard()).forward(&(x, ())).unwrap(),
        0.0
    );
    let r2 = Reverse::<(f64, ())>::rev(&Reverse::<f64>::rev(&discard()));
    assert_eq!(r2.forward(&((x, ()), 2.0)).unwrap(), (0.0, ()));
}

#[test]
fn transpose_is_the_backward_pass() {
    let w = ndarray::array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]];
    let lin = constant(w.clone()).pair(id()).then(MatVec::plain());
    let x0: V = Array1::zeros(2);
    let dy = ndarray::array![1.0, -1.0, 0.5];
    let rev = Reverse::<V>::rev(&lin);
    assert_eq!(
        rev.forward(&(x0.clone(), dy.clone())).unwrap(),
        w.t().dot(&dy)
    );
    // SubPair is linear: its transpose sends dy to (dy, -dy), and the transpose
    // of the transpose acts as SubPair again.
    let t = SubPair.transpose_at((0.0_f64, 0.0));
    assert_eq!(t.forward(&2.0).unwrap(), (2.0, -2.0));
    assert_eq!(t.backward(&2.0, &(3.0, 1.0)).unwrap(), 2.0);
}

/// Counts how often its forward pass runs.
#[derive(Clone)]
struct Counting(Arc<AtomicUsize>);

impl Compose for Counting {}

impl Map<f64> for Counting {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        self.0.fetch_add(1, Ordering::Relaxed);
        Ok((x.sin(), *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        Ok(x.cos() * dy)
    }
}

#[test]
fn left_nested_chain_of_1000_evaluates_each_map_once() {
    let count = Arc::new(AtomicUsize::new(0));
    let mut chain: Boxed<f64, f64> = Boxed::new(Counting(count.clone())).unwrap();
    for _ in 1..1000 {
        chain = Boxed::new(chain.then(Counting(count.clone()))).unwrap();
    }
    let x = 0.3_f64;
    let grad = chain.backward(&x, &1.0).unwrap();
    assert_eq!(
        count.load(Ordering::Relaxed),
        1000,
        "each forward runs exactly once"
    );

    // Against the chain rule by hand.
    let (mut v, mut g) = (x, 1.0);
    for _ in 0..1000 {
        g *= v.cos();
        v = v.sin();
    }
    assert!((grad - g).abs() <= 1e-12 * g.abs());
}

#[test]
fn static_left_nesting_evaluates_each_map_once() {
    let count = Arc::new(AtomicUsize::new(0));
    let c = || Counting(count.clone());
    let f = c()
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c());
    f.backward(&0.2, &1.0).unwrap();
    assert_eq!(count.load(Ordering::Relaxed), 8);
}

#[test]
fn second_order_of_a_left_nested_chain_evaluates_each_map_once() {
    // The reverse map of `f.then(g)` reads every level from one forward
    // pass; the composite form ran each prefix again at every level (36
    // forward passes for these 8 stages).
    let count = Arc::new(AtomicUsize::new(0));
    let c = || Counting(count.clone()).reversed_through(Sin);
    let f = c()
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c())
        .then(c());
    let x = 0.2_f64;
    let hv = hessian_vector(&f, &x, &1.0).unwrap();
    // Every stage but the last, whose output the reverse map never needs.
    assert_eq!(count.load(Ordering::Relaxed), 7, "Hessian-vector product");
    let d = forward_derivative(&f, &x, &1.0).unwrap();
    // One forward pass of all eight, which also gives the output's shape.
    assert_eq!(count.load(Ordering::Relaxed), 15, "forward derivative");

    // The same numbers as the chain of catalogue sines, and as the
    // composite form of the reverse map.
    let sines = Sin
        .then(Sin)
        .then(Sin)
        .then(Sin)
        .then(Sin)
        .then(Sin)
        .then(Sin)
        .then(Sin);
    assert!((hv - hessian_vector(&sines, &x, &1.0).unwrap()).abs() <= 1e-15);
    assert!((d - sines.backward(&x, &1.0).unwrap()).abs() <= 1e-15);
    let rev = Reverse::<f64>::rev(&sines);
    let composite = rev.composite();
    for (dz, v) in [(1.0, 0.5), (-2.0, 3.0)] {
        assert_eq!(
            rev.forward(&(x, dz)).unwrap(),
            composite.forward(&(x, dz)).unwrap()
        );
        assert_eq!(
            rev.backward(&(x, dz), &v).unwrap(),
            composite.backward(&(x, dz), &v).unwrap()
        );
    }
}

#[test]
fn run_time_chain_matches_static_composite_and_checks_shapes() {
    let w1 = ndarray::array![[0.5, -1.0, 0.2], [0.1, 0.3, -0.7]];
    let b1 = ndarray::array![0.1, -0.1];
    let w2 = ndarray::array![[1.5, -0.5]];
    let b2 = ndarray::array![0.2];
    let mut chain = Chain::<f64>::new(&[3]);
    chain.push_affine(w1.clone(), b1.clone()).unwrap();
    chain.push_elementwise("tanh", Tanh).unwrap();
    chain.push_affine(w2.clone(), b2.clone()).unwrap();

    let layer = |w: ndarray::Array2<f64>, b: V| constant((w, b)).pair(id()).then(Affine);
    let fixed = layer(w1, b1).then(Tanh).then(layer(w2, b2));
    let x: V = ndarray::array![0.3, -1.2, 2.0];
    let dy: V = ndarray::array![1.0];
    let xd: ArrayD<f64> = x.clone().into_dyn();
    assert_eq!(
        chain.forward(&xd).unwrap(),
        fixed.forward(&x).unwrap().into_dyn()
    );
    assert_eq!(
        chain.backward(&xd, &dy.clone().into_dyn()).unwrap(),
        fixed.backward(&x, &dy).unwrap().into_dyn()
    );

    let err = chain
        .forward(&Array1::<f64>::zeros(4).into_dyn())
        .unwrap_err();
    assert_eq!(
        err,
        Error::shape("run-time chain, its input", "(3,)", "(4,)")
    );
    assert_eq!(
        err.to_string(),
        "run-time chain, its input: expected shape (3,), got (4,)"
    );
    let err = chain
        .push_affine(ndarray::Array2::zeros((2, 2)), Array1::zeros(2))
        .unwrap_err();
    assert!(err.to_string().contains("stage 3"), "{err}");
    assert!(
        err.to_string()
            .contains("expects input of shape (2,), but the output of stage 2 has shape (1,)"),
        "{err}"
    );
    assert_eq!(chain.len(), 3);
}

#[test]
fn spaces_refuse_mismatched_shapes() {
    let a: V = Array1::zeros(2);
    let b: V = Array1::zeros(3);
    let err = a.try_add(&b).unwrap_err();
    assert_eq!(
        err.to_string(),
        "adding arrays: expected shape (2,), got (3,)"
    );
    let mut t = (a.clone(), 1.0_f64);
    assert!(t.try_add_assign(&(b, 2.0)).is_err());
    assert_eq!(t, (a, 1.0), "a refused addition leaves the value unchanged");
    assert_eq!([1.0_f64, 2.0].try_add(&[3.0, 4.0]).unwrap(), [4.0, 6.0]);
    assert_eq!(().try_add(&()).unwrap(), ());
    let quad = (1.0_f64, 2.0_f64, 3.0_f64, [4.0_f64; 2]);
    assert_eq!(quad.coordinates(), vec![1.0, 2.0, 3.0, 4.0, 4.0]);
}

proptest! {
    #[test]
    fn coordinates_round_trip(a in vector(3), s in -1.0..1.0f64, m in proptest::collection::vec(-1.0..1.0f64, 4)) {
        let x = (a, (s, ndarray::Array2::from_shape_vec((2, 2), m).unwrap()));
        let back = x.rebuild_from_coordinates(&x.coordinates()).unwrap();
        prop_assert_eq!(back, x.clone());
        prop_assert!(x.rebuild_from_coordinates(&[0.0; 3]).is_err());
    }
}

#[test]
fn single_precision_and_fixed_arrays_work_too() {
    let f = MulPair.then(Tanh);
    let (da, db) = f.backward(&(0.5_f32, 2.0_f32), &1.0).unwrap();
    let slope = 1.0 - 1.0_f32.tanh().powi(2);
    assert!((da - 2.0 * slope).abs() < 1e-6 && (db - 0.5 * slope).abs() < 1e-6);
    let g = Sin.then(Exp);
    let x = [0.1_f64, 0.2, 0.3];
    let d = g.backward(&x, &[1.0; 3]).unwrap();
    for i in 0..3 {
        assert!((d[i] - x[i].sin().exp() * x[i].cos()).abs() < 1e-14);
    }
}
