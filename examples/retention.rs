//! Choosing what a deep run-time model keeps for its backward pass: the
//! same 1,000-stage chain of 256-wide stages under each strategy, as the
//! table `Chain::compare_retentions` prints.
//!
//! `cargo run --release --example retention`

use ndarray::ArrayD;
use revdiff::{Chain, Result, Retention, Sin, Tanh};

fn main() -> Result<()> {
    for (stages, width) in [(1000usize, 256usize), (1000, 1)] {
        let mut chain = Chain::<f64>::new(&[width]);
        for k in 0..stages {
            if k % 2 == 0 {
                chain.push_elementwise("tanh", Tanh)?;
            } else {
                chain.push_elementwise("sin", Sin)?;
            }
        }
        let x = ArrayD::from_elem(vec![width], 0.3);
        let dy = ArrayD::from_elem(vec![width], 1.0);
        let table = chain.compare_retentions(
            &x,
            &dy,
            &[
                Retention::All,
                Retention::InputOnly,
                Retention::EveryKth(32),
                Retention::Binomial { states: 16 },
                Retention::Binomial { states: 4 },
            ],
            15,
        )?;
        println!("{stages} stages of width {width}:\n{table}");
    }
    Ok(())
}
