// A hand-written map that forgot `impl Compose for Cube {}`.
use revdiff::{Map, Result, Sin};

#[derive(Clone, Debug)]
struct Cube;

impl Map<f64> for Cube {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        Ok((x * x * x, *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        Ok(3.0 * x * x * dy)
    }
}

fn main() {}
