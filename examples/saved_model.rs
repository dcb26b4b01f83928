//! Saving a trained model and reading it back (needs the `serde` feature):
//! `cargo run --release --features serde --example saved_model`.
//!
//! The scenario is invented: a small greenhouse learns how much its misting
//! nozzles raise humidity from the pump pressure and the outside air
//! temperature. The trained parameters, the training summary and a
//! least-squares fit report go to JSON and come back equal, and the model
//! read back predicts exactly what the trained one did.
//!
//! serde_json reads floats back exactly only with its `float_roundtrip`
//! feature (this crate's dev-dependency turns it on): without it the last
//! bit of some parameters changes on the way back.

use ndarray::{Array2, array};
use revdiff::{
    Adam, Affine, Compose, CurveResiduals, Examples, LeastSquares, Map, MeanSquaredError, MulPair,
    Parametrised, Tanh, Trained, Training, fst, snd,
};
use std::error::Error;

type Layer = (Array2<f64>, ndarray::Array1<f64>);
type Params = (Layer, Layer);

fn main() -> Result<(), Box<dyn Error>> {
    // Invented readings: pressure in bar, outside temperature in degrees C,
    // humidity rise in percentage points.
    let x = Array2::from_shape_fn((64, 2), |(i, j)| {
        if j == 0 {
            1.0 + (i % 8) as f64 * 0.5
        } else {
            12.0 + (i / 8) as f64 * 2.0
        }
    });
    let rise = x.map_axis(ndarray::Axis(1), |r| {
        9.0 * (0.4 * r[0]).tanh() * (1.0 - 0.02 * (r[1] - 12.0))
    });
    let y = rise.insert_axis(ndarray::Axis(1));
    let data = Examples::new(x.clone(), y)?;

    let model = Affine.then(Tanh).then_parametrised(Affine);
    let start: Params = (
        (
            array![[0.2, 0.0], [0.1, -0.05], [0.0, 0.1]],
            array![0.0, 0.0, 0.0],
        ),
        (array![[1.0, 1.0, 1.0]], array![0.0]),
    );
    let run = Training::new(300, 16)?.seed(3).run(
        &model,
        &MeanSquaredError,
        &mut Adam::new(0.02)?,
        start,
        &data,
        |_| {},
    )?;
    println!(
        "trained: {} steps, last epoch's mean squared error {:.4}",
        run.steps,
        run.epoch_losses.last().copied().unwrap_or(f64::NAN)
    );

    // The whole training result, parameters included, as JSON and back.
    let saved = serde_json::to_string_pretty(&run)?;
    let read: Trained<Params, f64> = serde_json::from_str(&saved)?;
    assert_eq!(read, run, "the training result reads back equal");
    let before = model.forward(&(run.parameters.clone(), x.clone()))?;
    let after = model.forward(&(read.parameters.clone(), x.clone()))?;
    assert_eq!(before, after, "the model read back predicts the same");
    println!(
        "saved {} bytes of JSON; read back equal, same predictions",
        saved.len()
    );

    // A least-squares fit report the same way: rise = a + b pressure.
    let line = fst()
        .then(fst())
        .pair(fst().then(snd()).pair(snd()).then(MulPair))
        .then(revdiff::AddPair);
    let pressure: Vec<f64> = x.column(0).to_vec();
    let residuals = CurveResiduals::new(line, pressure, read_rise(&data))?;
    let fit = LeastSquares::levenberg_marquardt().fit(&residuals, (0.0, 0.0))?;
    let json = serde_json::to_string(&fit)?;
    let back: revdiff::FitReport<(f64, f64), f64> = serde_json::from_str(&json)?;
    assert_eq!(back, fit);
    println!("\na straight-line fit of rise against pressure, saved and read back:\n{back}");
    Ok(())
}

fn read_rise(data: &Examples<f64>) -> Vec<f64> {
    data.targets().column(0).to_vec()
}
