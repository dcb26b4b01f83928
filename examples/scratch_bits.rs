#[path = "../benches/support/circuits.rs"]
mod circuits;
use std::time::Instant;
fn main() {
    let model = circuits::circuit();
    let (input, bools) = circuits::examples(65536);
    let mut work = revdiff::Workspace::new();
    let mut change = (input.0.clone(), input.1.clone());
    for _ in 0..3 {
        let s = Instant::now();
        for _ in 0..20 { circuits::bits_pass(&model, &input, &mut work, &mut change); }
        let b = s.elapsed().as_secs_f64() / 20.0;
        let s = Instant::now();
        for _ in 0..20 { std::hint::black_box(circuits::bools_pass(&bools)); }
        let h = s.elapsed().as_secs_f64() / 20.0;
        println!("bits {:.1} us ({:.3} ns per example-gate), bools {:.1} us ({:.3} ns per example-gate)", b*1e6, b*1e9/65536.0/64.0, h*1e6, h*1e9/65536.0/64.0);
    }
}
