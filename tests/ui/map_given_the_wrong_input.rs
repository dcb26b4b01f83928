// A matrix product applied to a single number.
use revdiff::{Map, MatMul};

fn main() {
    let _ = MatMul::plain().forward(&2.0_f64);
}
