//! Learning a small rule as a Boolean circuit, in an invented scenario: the
//! misting valve of a seed-propagation bench. From the logged behaviour of
//! the old controller (every combination of four sensor bits), learn a sum
//! of products that reproduces it, print it as a polynomial over Z2, and
//! check it against the log row by row.
//!
//! `cargo run --release --example misting_valve`

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use revdiff::bits::{Aggregate, Bits, CircuitFit, CircuitTraining, Polynomial, SumOfProducts};
use revdiff::{Error, Map, Result};

/// The sensor bits, in wire order (a, b, c, d in the printed polynomial).
const SENSORS: [&str; 4] = ["tray dry", "lamp on", "rinse running", "frost warning"];

/// The old controller: mist when the tray is dry under the lamp, unless a
/// rinse is running; and always when frost is warned.
fn logged(row: usize) -> bool {
    let on = |sensor: usize| row >> sensor & 1 == 1;
    (on(0) && on(1) && !on(2)) || on(3)
}

/// Seeded random starting parameters, one example per wire.
fn random_start(wires: usize, rng: &mut StdRng) -> Bits {
    let draws: Vec<bool> = (0..wires).map(|_| rng.random()).collect();
    Bits::from_fn(wires, 1, |w, _| draws[w])
}

fn main() -> Result<()> {
    let rows = 1 << SENSORS.len();
    let inputs = Bits::from_fn(SENSORS.len(), rows, |sensor, row| row >> sensor & 1 == 1);
    let targets = Bits::from_fn(1, rows, |_, row| logged(row));
    let wanted = Polynomial::from_truth_table(SENSORS.len(), |x| logged(x as usize))?;
    println!(
        "sensors: a = {}, b = {}, c = {}, d = {}",
        SENSORS[0], SENSORS[1], SENSORS[2], SENSORS[3]
    );
    println!("the log as a polynomial (Moebius transform): {wanted}\n");

    // Six terms over the four sensors; learning tries seeded starts until
    // one fits the log exactly.
    let model = SumOfProducts::new(SENSORS.len(), 6)?;
    let training = CircuitTraining::new(200)?.aggregate(Aggregate::Tested);
    let mut rng = StdRng::seed_from_u64(7);
    let mut learned = None;
    for attempt in 1..=16 {
        let start = random_start(model.parameter_wires(), &mut rng);
        match training.run(&model, start, &inputs, &targets)? {
            CircuitFit::Exact { parameters, passes } => {
                println!("start {attempt}: exact after {passes} passes");
                learned = Some(parameters);
                break;
            }
            CircuitFit::Revisited { wrong, passes, .. } => {
                println!(
                    "start {attempt}: parameters revisited after {passes} passes, best {wrong} rows wrong"
                );
            }
            CircuitFit::OutOfPasses { wrong, passes, .. } => {
                println!("start {attempt}: {passes} passes, best {wrong} rows wrong");
            }
        }
    }
    let Some(parameters) = learned else {
        return Err(Error::InvalidSetting {
            name: "starts",
            value: "16".to_string(),
            reason: "no start fitted the log exactly",
        });
    };
    println!("learned circuit: {}\n", model.polynomial(&parameters));

    // The truth-table check: the learned circuit on every row of the log.
    let broadcast = Bits::from_fn(parameters.wires(), rows, |w, _| parameters.get(w, 0));
    let predicted = model.forward(&(broadcast, inputs.clone()))?;
    println!("a b c d  log  circuit");
    let mut agree = 0;
    for row in 0..rows {
        let bits: Vec<String> = (0..SENSORS.len())
            .map(|s| (row >> s & 1).to_string())
            .collect();
        let (want, got) = (targets.get(0, row), predicted.get(0, row));
        agree += usize::from(want == got);
        println!(
            "{}  {:>3}  {:>7}",
            bits.join(" "),
            u8::from(want),
            u8::from(got)
        );
    }
    println!("{agree} of {rows} rows agree\n");

    // The published rule on its own, for comparison, from 64 starts each.
    for aggregate in [
        Aggregate::EachExample,
        Aggregate::Sum,
        Aggregate::Vote,
        Aggregate::Tested,
    ] {
        let training = CircuitTraining::new(200)?.aggregate(aggregate);
        let mut rng = StdRng::seed_from_u64(11);
        let mut exact = 0;
        for _ in 0..64 {
            let start = random_start(model.parameter_wires(), &mut rng);
            if let CircuitFit::Exact { .. } = training.run(&model, start, &inputs, &targets)? {
                exact += 1;
            }
        }
        println!("{aggregate:?}: {exact} of 64 starts fit exactly");
    }
    Ok(())
}
