// A closure is not a map with a reverse derivative: refused at `then`.
use revdiff::{Compose, Exp};

fn main() {
    let _ = Exp.then(|x: f64| x * 2.0);
}
