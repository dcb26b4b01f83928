//! Check values from outside the crate, each with its source beside it.

use ndarray::{Array1, Array2, array};
use revdiff::*;

type V = Array1<f64>;
type M = Array2<f64>;

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * (1.0 + a.abs() + b.abs())
}

fn assert_matrix_close(got: &M, want: &M) {
    assert_eq!(got.shape(), want.shape());
    for (g, w) in got.iter().zip(want.iter()) {
        assert!(close(*g, *w, 1e-12), "got\n{got}\nwant\n{want}");
    }
}

fn a3() -> M {
    array![[1.0, -2.0, 0.5], [3.0, 0.25, -1.0], [0.0, 4.0, 2.0]]
}

// Petersen and Pedersen, The Matrix Cookbook (2012), d(a'Xb)/dX = ab'
// (eq. 70, number from memory).
#[test]
fn cookbook_bilinear_form() {
    let (a, b) = (array![1.0, -1.0, 2.0], array![0.5, 3.0, -2.0]);
    let f = id()
        .pair(constant(b.clone()))
        .then(MatVec::plain())
        .pair(constant(a.clone()))
        .then(dot());
    let x = a3();
    let grad = f.backward(&x, &1.0).unwrap();
    let want = Outer::plain().forward(&(a, b)).unwrap();
    assert_matrix_close(&grad, &want);
}

// The Matrix Cookbook (2012), d tr(AX)/dX = A' (eq. 100, from memory).
#[test]
fn cookbook_trace() {
    let a = a3();
    let trace = id()
        .pair(constant(M::eye(3)))
        .then(MulPair)
        .then(ElementReduction::sum());
    let f = constant(a.clone())
        .pair(id())
        .then(MatMul::plain())
        .then(trace);
    let x = array![[0.3, 1.0, -1.0], [2.0, 0.0, 0.5], [1.0, 1.0, 1.0]];
    assert!(close(f.forward(&x).unwrap(), a.dot(&x).diag().sum(), 1e-14));
    assert_matrix_close(&f.backward(&x, &1.0).unwrap(), &a.t().to_owned());
}

// The Matrix Cookbook (2012), d(x'Ax)/dx = (A + A')x (eq. 81, from memory).
#[test]
fn cookbook_quadratic_form() {
    let a = a3();
    let f = id()
        .pair(constant(a.clone()).pair(id()).then(MatVec::plain()))
        .then(dot());
    let x: V = array![0.5, -1.5, 2.0];
    let want = (&a + &a.t()).dot(&x);
    let got = f.backward(&x, &1.0).unwrap();
    for (g, w) in got.iter().zip(want.iter()) {
        assert!(close(*g, *w, 1e-12), "{got} vs {want}");
    }
}

// The Matrix Cookbook (2012), d||Ax - b||^2/dx = 2A'(Ax - b) (eq. 84, from memory).
#[test]
fn cookbook_least_squares() {
    let a = array![[1.0, 2.0], [3.0, -1.0], [0.5, 0.5]];
    let b: V = array![1.0, 0.0, -2.0];
    let f = constant(a.clone())
        .pair(id())
        .then(MatVec::plain())
        .pair(constant(b.clone()))
        .then(SubPair)
        .then(squared_norm());
    let x: V = array![0.7, -0.2];
    let want = a.t().dot(&(a.dot(&x) - &b)) * 2.0;
    let got = f.backward(&x, &1.0).unwrap();
    for (g, w) in got.iter().zip(want.iter()) {
        assert!(close(*g, *w, 1e-12), "{got} vs {want}");
    }
}

// Logistic sigmoid derivative s(1 - s) (common practice, no source).
#[test]
fn sigmoid_derivative() {
    for x in [-6.0_f64, -1.0, 0.0, 0.3, 2.5, 9.0] {
        let s = 1.0 / (1.0 + (-x).exp());
        assert!(close(
            Sigmoid.backward(&x, &1.0).unwrap(),
            s * (1.0 - s),
            1e-14
        ));
        assert!(close(
            forward_derivative(&Sigmoid, &x, &1.0).unwrap(),
            s * (1.0 - s),
            1e-14
        ));
    }
}

// Softmax Jacobian diag(p) - pp' (common practice, no source).
#[test]
fn softmax_jacobian() {
    let x: V = array![0.2, -1.0, 3.0, 0.5];
    let p = Softmax.forward(&x).unwrap();
    let want = M::from_diag(&p) - Outer::plain().forward(&(p.clone(), p.clone())).unwrap();
    assert_matrix_close(&jacobian_by_backward(&Softmax, &x).unwrap(), &want);
    assert_matrix_close(&jacobian_by_forward(&Softmax, &x).unwrap(), &want);
}

/// Rosenbrock (1960), f(x, y) = (1 - x)^2 + 100 (y - x^2)^2, from the catalogue.
fn rosenbrock() -> impl Reverse<(f64, f64), Output = f64> {
    let first = fst()
        .then(constant(1.0).pair(id()))
        .then(SubPair)
        .then(Powi::new(2));
    let second = snd()
        .pair(fst().then(Powi::new(2)))
        .then(SubPair)
        .then(Powi::with_coefficient(100.0, 2));
    first.plus(second)
}

// Rosenbrock, H. H. (1960), "An automatic method for finding the greatest or
// least value of a function": minimum f(1, 1) = 0; the standard start
// (-1.2, 1) has f = 24.2, gradient (-215.6, -88) (values from memory, checked
// by hand against the closed form).
#[test]
fn rosenbrock_values_gradient_and_hessian() {
    let f = rosenbrock();
    assert_eq!(f.forward(&(1.0, 1.0)).unwrap(), 0.0);
    assert_eq!(f.backward(&(1.0, 1.0), &1.0).unwrap(), (0.0, 0.0));

    let x = (-1.2, 1.0);
    assert!(close(f.forward(&x).unwrap(), 24.2, 1e-14));
    let (gx, gy) = f.backward(&x, &1.0).unwrap();
    assert!(
        close(gx, -215.6, 1e-13) && close(gy, -88.0, 1e-13),
        "{gx} {gy}"
    );

    // Closed-form Hessian [[1200x^2 - 400y + 2, -400x], [-400x, 200]].
    let (a, b) = x;
    let h = [
        [1200.0 * a * a - 400.0 * b + 2.0, -400.0 * a],
        [-400.0 * a, 200.0],
    ];
    for v in [(1.0, 0.0), (0.0, 1.0), (0.3, -2.0)] {
        let hv = hessian_vector(&f, &x, &v).unwrap();
        let want = (h[0][0] * v.0 + h[0][1] * v.1, h[1][0] * v.0 + h[1][1] * v.1);
        assert!(
            close(hv.0, want.0, 1e-12) && close(hv.1, want.1, 1e-12),
            "{hv:?} vs {want:?}"
        );
    }
}
