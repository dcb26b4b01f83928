//! Shared test helpers: deterministic directions, central differences and
//! the per-order agreement checks used by several test files.
#![allow(dead_code)]

use revdiff::{Euclidean, Map, Reverse, forward_derivative};

/// A value shaped like `like` with coordinates in [-1, 1], from `seed`
/// (a 64-bit linear congruential generator; any fixed sequence would do).
pub fn direction_like<S: Euclidean<f64>>(like: &S, seed: u64) -> S {
    let mut state = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    let coords: Vec<f64> = (0..like.dimension())
        .map(|_| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((state >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
        })
        .collect();
    like.rebuild_from_coordinates(&coords).unwrap()
}

/// Largest absolute coordinate, at least 1.
pub fn scale_of<S: Euclidean<f64>>(x: &S) -> f64 {
    x.coordinates().iter().fold(1.0_f64, |m, c| m.max(c.abs()))
}

/// `(f(x + h v) - f(x - h v)) / 2h`, as coordinates.
pub fn central_difference<A, F>(f: &F, x: &A, v: &A, h: f64) -> Vec<f64>
where
    A: Euclidean<f64>,
    F: Map<A>,
    F::Output: Euclidean<f64>,
{
    let plus = f
        .forward(&x.try_add(&v.scale(h)).unwrap())
        .unwrap()
        .coordinates();
    let minus = f
        .forward(&x.try_add(&v.scale(-h)).unwrap())
        .unwrap()
        .coordinates();
    plus.iter()
        .zip(&minus)
        .map(|(p, m)| (p - m) / (2.0 * h))
        .collect()
}

pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len(), "coordinate lengths differ");
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Asserts `|a - b| <= tol (1 + |a| + |b|)`, naming what was compared.
pub fn assert_close(what: &str, a: f64, b: f64, tol: f64) {
    assert!(
        (a - b).abs() <= tol * (1.0 + a.abs() + b.abs()),
        "{what}: {a} vs {b} (difference {:e})",
        (a - b).abs()
    );
}

pub fn assert_all_close(what: &str, a: &[f64], b: &[f64], tol: f64) {
    assert_eq!(a.len(), b.len(), "{what}: lengths differ");
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        assert_close(&format!("{what}, coordinate {i}"), *x, *y, tol);
    }
}

/// First-order agreement of a map at `x`, with directions from `seed`:
/// the backward pass against central differences (`<R[f](x, w), v>` equals
/// `<w, Df(x) v>`), and the reverse derivative as a map against the
/// backward pass.
pub fn check_first_order<A, F>(label: &str, f: &F, x: &A, seed: u64)
where
    A: Euclidean<f64>,
    F: Reverse<A>,
    F::Output: Euclidean<f64>,
{
    let y = f.forward(x).unwrap();
    let v = direction_like(x, seed);
    let w = direction_like(&y, seed ^ 0x9e37);
    let back = f.backward(x, &w).unwrap();
    assert_eq!(
        back.shape_string(),
        x.shape_string(),
        "{label}: backward shape"
    );
    let h = 1e-5 * scale_of(x);
    let fd = central_difference(f, x, &v, h);
    assert_close(
        &format!("{label}: <R[f](x, w), v> against central differences"),
        dot(&back.coordinates(), &v.coordinates()),
        dot(&w.coordinates(), &fd),
        1e-5,
    );
    let via_map = f.rev().forward(&(x.clone(), w.clone())).unwrap();
    assert_all_close(
        &format!("{label}: rev().forward against backward"),
        &via_map.coordinates(),
        &back.coordinates(),
        1e-12,
    );
}

/// Checks a map at orders one to three: the map, its reverse derivative and
/// its second reverse derivative each pass [`check_first_order`] (so the
/// third reverse derivative is built and compared), and the forward
/// derivative equals the central-difference directional derivative.
pub fn check_orders<A, F>(label: &str, f: &F, x: &A, seed: u64)
where
    A: Euclidean<f64> + Sync,
    F: Reverse<A> + Sync,
    F::Output: Euclidean<f64>,
{
    // Third-order maps of composites are deeply nested values whose passes
    // recurse deeply: a test thread's 2 MiB stack is too small for some in
    // an unoptimised build, so they run on a thread of their own.
    std::thread::scope(|scope| {
        std::thread::Builder::new()
            .stack_size(64 << 20)
            .spawn_scoped(scope, || check_orders_here(label, f, x, seed))
            .expect("a thread for the check")
            .join()
            .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
    })
}

fn check_orders_here<A, F>(label: &str, f: &F, x: &A, seed: u64)
where
    A: Euclidean<f64>,
    F: Reverse<A>,
    F::Output: Euclidean<f64>,
{
    check_first_order(&format!("{label} (order 1)"), f, x, seed);
    let y = f.forward(x).unwrap();
    let w = direction_like(&y, seed.wrapping_add(1));
    let r1 = f.rev();
    let p1 = (x.clone(), w);
    check_first_order(
        &format!("{label} (order 2)"),
        &r1,
        &p1,
        seed.wrapping_add(2),
    );
    let u = direction_like(x, seed.wrapping_add(3));
    let r2 = r1.rev();
    let p2 = (p1, u);
    check_first_order(
        &format!("{label} (order 3)"),
        &r2,
        &p2,
        seed.wrapping_add(4),
    );

    let v = direction_like(x, seed.wrapping_add(5));
    let d = forward_derivative(f, x, &v).unwrap();
    let fd = central_difference(f, x, &v, 1e-5 * scale_of(x));
    assert_all_close(
        &format!("{label}: forward derivative against central differences"),
        &d.coordinates(),
        &fd,
        1e-5,
    );
}
