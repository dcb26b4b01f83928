#[path = "../benches/support/hand_written.rs"]
mod hand_written;
use hand_written::*;
use revdiff::*;
use std::time::Instant;
fn main() {
    let model = library_model();
    let batch = 1024;
    let (x, t) = data::<f64>(2 * batch);
    let examples = Examples::new(x, t).unwrap();
    let p0: Params<f64> = start();
    let training = Training::new(5, batch).unwrap();
    for round in 0..8 {
        for shards in [std::env::args().nth(1).unwrap().parse::<usize>().unwrap()] {
            let t0 = Instant::now();
            let mut adam = Adam::new(1e-3).unwrap();
            if shards == 0 {
                training
                    .run(
                        &model,
                        &MeanSquaredError,
                        &mut adam,
                        p0.clone(),
                        &examples,
                        |_| {},
                    )
                    .unwrap();
            } else {
                training
                    .run_sharded(
                        &model,
                        &MeanSquaredError,
                        &mut adam,
                        p0.clone(),
                        &examples,
                        shards,
                        &mut ShardSum,
                        |_| {},
                    )
                    .unwrap();
            }
            println!(
                "round {round} shards {shards}: {:.1} ms",
                t0.elapsed().as_secs_f64() * 1e3
            );
        }
    }
}
