use ndarray::ArrayD;
use revdiff::*;
use std::hint::black_box;
use std::time::Instant;
fn main() {
    let which = std::env::args().nth(1).unwrap_or("memo".into());
    let mut chain = Chain::<f64>::new(&[1]);
    for _ in 0..8 {
        chain.push_per_element("sin", Sin).unwrap();
    }
    let xd = ArrayD::from_elem(vec![1], 0.7);
    let mut w = Workspace::new();
    let mut d = xd.clone();
    let n = 20_000_000;
    let t = Instant::now();
    for _ in 0..n {
        if which == "memo" {
            black_box(chain.backward(black_box(&xd), &xd).unwrap());
        } else {
            chain.forward_reusing(black_box(&xd), &mut w).unwrap();
            chain.backward_reusing(&xd, &mut w, &xd, &mut d).unwrap();
            black_box(&d);
        }
    }
    println!(
        "{which}: {:.1} ns",
        t.elapsed().as_secs_f64() / n as f64 * 1e9
    );
}
