//! The law checker finding a real bug in a hand-written primitive.
//!
//! Scenario (invented): a soil-moisture model needs the smooth ramp
//! `ln(1 + e^x)` of a suction value, and its author fused it into one
//! primitive with two branches for numerical stability: `x + ln(1 + e^-x)`
//! for large positive `x`, `ln(1 + e^x)` otherwise. The backward pass of the
//! first branch was typed from memory, and is wrong. The law checker finds
//! it, says which law broke and where, and the corrected primitive passes
//! every law, and matches the library's `Softplus`.
//!
//! Run with `cargo run --release --example law_hunt`.

use revdiff::laws::{Checker, Law};
use revdiff::{Compose, Map, Result, Softplus};

/// The fused smooth ramp. `fixed` selects the corrected backward pass.
#[derive(Clone, Debug)]
struct SuctionRamp {
    fixed: bool,
}

impl Compose for SuctionRamp {}

impl Map<f64> for SuctionRamp {
    type Output = f64;
    type Memo = f64; // the input
    fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
        let y = if *x > 20.0 {
            x + (-x).exp().ln_1p()
        } else {
            x.exp().ln_1p()
        };
        Ok((y, *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
        let slope = if *x > 20.0 {
            if self.fixed {
                1.0 / (1.0 + (-x).exp())
            } else {
                // The bug: the slope of ln(1 + e^-x), not of x + ln(1 + e^-x).
                -(-x).exp() / (1.0 + (-x).exp())
            }
        } else {
            let e = x.exp();
            e / (1.0 + e)
        };
        Ok(slope * dy)
    }
}

fn main() {
    // Suction values in the model's range, both branches included.
    let inputs = -30.0..60.0f64;
    let checker = Checker::new();

    println!("== the primitive as first written ==\n");
    let report = checker.map(&SuctionRamp { fixed: false }, inputs.clone());
    println!("{report}");
    let broken = report
        .violation(Law::Derivative, 1)
        .expect("the checker must find the wrong branch");
    let x = broken.case::<f64, f64>().expect("a drawn case").x;
    assert!(x > 20.0, "the counterexample lies in the wrong branch");
    println!("The counterexample x = {x} lies in the branch x > 20.\n");

    println!("== the same primitive against the library's Softplus ==\n");
    let against = checker.same_map(&SuctionRamp { fixed: false }, &Softplus, inputs.clone());
    println!("{against}");
    assert!(!against.is_clean());

    println!("== after the fix ==\n");
    let fixed = checker
        .map(&SuctionRamp { fixed: true }, inputs.clone())
        .merge(checker.same_map(&SuctionRamp { fixed: true }, &Softplus, inputs));
    println!("{fixed}");
    fixed.assert_clean();
}
