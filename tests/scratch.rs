use revdiff::*;
fn rev3<A: Space, F: Reverse<A>>(
    f: &F,
) -> impl Map<(((A, F::Output), A), (A, F::Output)), Output = ((A, F::Output), A)> {
    f.rev().rev().rev()
}
#[test]
fn third() {
    let f = Div
        .then(Sigmoid)
        .pair(Mul)
        .then(Mul)
        .then(Tanh.plus(Cos))
        .then(Softplus.scaled(2.0));
    let x = (1.3_f64, 0.7);
    let r3 = rev3::<(f64, f64), _>(&f);
    let v = r3
        .forward(&(((x, 1.0), (0.1, 0.2)), ((0.3, 0.4), 0.5)))
        .unwrap();
    println!("{v:?}");
}
