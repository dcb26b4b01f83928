// A map with only the first-order trait asked for a Hessian-vector product.
use revdiff::{hessian_vector, Compose, Map, Result};

#[derive(Clone, Debug)]
struct Cube;
impl Compose for Cube {}
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

fn main() {
    let _ = hessian_vector(&Cube, &1.0, &1.0);
}
