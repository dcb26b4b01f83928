//! Main demonstration: fitting a model with a hand-written primitive to noisy
//! data, first by Adam in the minibatch loop, then by Levenberg-Marquardt,
//! and drawing the result.
//!
//! Scenario (invented): a tea house steeps cold brew for up to twelve hours
//! and samples the brew's strength (grams of extract per litre) now and then.
//! Strength rises along a saturating S-curve: nothing much at first, half of
//! the attainable rise after `h` hours, then a plateau. The steepness `n`,
//! the half-rise time `h`, the attainable rise `c` and the strength of the
//! water at the start `c0` are what the tea house wants to know.
//!
//! The model: `strength(t) = c * rise(t; h, n) + c0` with the user's own
//! primitive `rise(t; h, n) = t^n / (h^n + t^n)`, its backward pass written
//! by hand and checked by the law checker before use. `h` and `n` are
//! learnt through their logarithms (a reparametrisation by `exp`), so they
//! stay positive; `c` and `c0` are a 1 x 1 affine stage stacked after it.
//!
//! Run with `cargo run --release --example cold_brew [OUTPUT.svg]`; the plot
//! goes to `target/cold_brew_fit.svg` by default.

use ndarray::{Array, Array1, Array2, Dimension, array};
use plotters::prelude::*;
use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use revdiff::laws::strategies::positive_vectors;
use revdiff::{
    Adam, Affine, Checker, Compose, CurveResiduals, ElementReduction, Examples, Exp, LeastSquares,
    Map, MeanSquaredError, Parametrised, Result, Training,
};
use std::error::Error as StdError;

/// The user's primitive `((h, n), t) -> t^n / (h^n + t^n)` for every
/// element of `t` (a vector of times, or a batch of them as a matrix of
/// rows: the map is elementwise, so one impl serves both), computed as `sigmoid(n ln(t / h))` so that it neither
/// overflows nor loses digits. Domain: `t > 0`, `h > 0`.
#[derive(Clone, Debug)]
struct Rise;

impl Compose for Rise {}

type RiseInput<D> = ((f64, f64), Array<f64, D>);

/// What the backward pass needs: `n`, `h`, `ln(t / h)`, `t`, and the slope
/// `f (1 - f)` of the sigmoid at each element.
#[derive(Clone, Debug)]
struct RiseKept<D: Dimension + 'static> {
    n: f64,
    h: f64,
    log_ratio: Array<f64, D>,
    t: Array<f64, D>,
    slope: Array<f64, D>,
}

impl<D: Dimension + 'static> Map<RiseInput<D>> for Rise {
    type Output = Array<f64, D>;
    type Memo = RiseKept<D>;
    fn forward_memo(&self, ((h, n), t): &RiseInput<D>) -> Result<(Array<f64, D>, RiseKept<D>)> {
        let log_ratio = t.mapv(|ti| (ti / h).ln());
        let f = log_ratio.mapv(|l| 1.0 / (1.0 + (-n * l).exp()));
        let slope = f.mapv(|fi| fi * (1.0 - fi));
        let kept = RiseKept {
            n: *n,
            h: *h,
            log_ratio,
            t: t.clone(),
            slope,
        };
        Ok((f, kept))
    }
    fn backward_memo(&self, k: &RiseKept<D>, dy: &Array<f64, D>) -> Result<RiseInput<D>> {
        // f = sigmoid(z), z = n ln(t / h): dz/dh = -n / h, dz/dn = ln(t / h), dz/dt = n / t.
        let dz = &k.slope * dy;
        let dh = -k.n / k.h * dz.sum();
        let dn = (&dz * &k.log_ratio).sum();
        let dt = &dz * &k.t.mapv(|ti| k.n / ti);
        Ok(((dh, dn), dt))
    }
}

/// `((ln h, ln n), (c as 1 x 1, c0 as length 1))`.
type Params = ((f64, f64), (Array2<f64>, Array1<f64>));

/// The true curve the invented samples are drawn from.
const TRUE_H: f64 = 3.0;
const TRUE_N: f64 = 2.2;
const TRUE_C: f64 = 8.5;
const TRUE_C0: f64 = 0.4;
const NOISE: f64 = 0.15;

fn true_strength(t: f64) -> f64 {
    TRUE_C * t.powf(TRUE_N) / (TRUE_H.powf(TRUE_N) + t.powf(TRUE_N)) + TRUE_C0
}

/// Samples at 48 times between 0.2 and 12 hours, with Gaussian noise
/// (Box-Muller from a seeded generator, so every run draws the same data).
fn invented_samples() -> (Vec<f64>, Vec<f64>) {
    let mut rng = StdRng::seed_from_u64(2026);
    let times: Vec<f64> = (0..48)
        .map(|i| 0.2 + 11.8 * (i as f64 + rng.random::<f64>()) / 48.0)
        .collect();
    let strengths = times
        .iter()
        .map(|&t| {
            let (u1, u2): (f64, f64) = (rng.random(), rng.random());
            let gauss = (-2.0 * (1.0 - u1).ln()).sqrt() * (std::f64::consts::TAU * u2).cos();
            true_strength(t) + NOISE * gauss
        })
        .collect();
    (times, strengths)
}

fn main() -> std::result::Result<(), Box<dyn StdError>> {
    let out = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "target/cold_brew_fit.svg".to_string());

    // 1. The hand-written primitive goes through every law before use.
    let cases = (
        (0.5..5.0f64, 0.5..4.0f64),
        positive_vectors(3, 0.1, 12.0).unwrap(),
    );
    let report = Checker::new().map(&Rise, cases);
    println!("{report}");
    report.assert_clean();

    // 2. The model: rise through log-parameters, then c * rise + c0.
    let model = Rise
        .reparametrised(Exp.alongside(Exp))
        .then_parametrised(Affine);
    let start: Params = ((0.0, 0.0), (array![[1.0]], array![0.0]));

    let (times, strengths) = invented_samples();
    let m = times.len();
    let data = Examples::new(
        Array2::from_shape_vec((m, 1), times.clone())?,
        Array2::from_shape_vec((m, 1), strengths.clone())?,
    )?;

    // 3. Adam in the minibatch loop, printing as it goes.
    println!("\nAdam, 400 epochs of {m} samples in batches of 8:");
    let mut adam = Adam::new(0.05)?;
    let run = Training::new(400, 8)?.seed(7).run(
        &model,
        &MeanSquaredError,
        &mut adam,
        start,
        &data,
        |p| {
            let shown = p.epoch == 0 || (p.epoch + 1) % 50 == 0;
            match p.epoch_loss {
                Some(mean) if shown => println!(
                    "  epoch {:>3}  step {:>4}  mean loss over the epoch {:.5}",
                    p.epoch, p.step, mean
                ),
                _ => {}
            }
        },
    )?;
    let adam_params = run.parameters.clone();
    let adam_mse = *run.epoch_losses.last().expect("at least one epoch");
    println!("  {}", describe(&adam_params));

    // 4. Levenberg-Marquardt from where Adam stopped.
    let inputs: Vec<Array1<f64>> = times.iter().map(|&t| array![t]).collect();
    let scalar_model = model.clone().then(ElementReduction::sum());
    let residuals = CurveResiduals::new(scalar_model, inputs, strengths.clone())?;
    let fit = LeastSquares::levenberg_marquardt().fit(&residuals, adam_params.clone())?;
    println!(
        "\nLevenberg-Marquardt from Adam's parameters (mean squared error {:.6}, Adam's last epoch {:.6}):\n{fit}",
        fit.residual_sum_of_squares / m as f64,
        adam_mse
    );
    println!("  {}", describe(&fit.parameters));
    if let Some(((se_log_h, se_log_n), (se_c, se_c0))) = &fit.standard_errors {
        let ((log_h, log_n), _) = fit.parameters;
        println!(
            "  standard errors: h +- {:.3} h, n +- {:.3}, c +- {:.3} g/L, c0 +- {:.3} g/L",
            log_h.exp() * se_log_h,
            log_n.exp() * se_log_n,
            se_c[[0, 0]],
            se_c0[0]
        );
    }
    println!(
        "  the curve the samples were drawn from: h = {TRUE_H} h, n = {TRUE_N}, c = {TRUE_C} g/L, c0 = {TRUE_C0} g/L, noise {NOISE} g/L"
    );

    // 5. The plot: loss per epoch, and the fitted curves over the data.
    let curve = |p: &Params, t: f64| model.forward(&(p.clone(), array![t])).map(|y| y[0]);
    draw(
        &out,
        &run.epoch_losses,
        fit.residual_sum_of_squares / m as f64,
        &times,
        &strengths,
        |t| {
            (
                curve(&adam_params, t).unwrap_or(f64::NAN),
                curve(&fit.parameters, t).unwrap_or(f64::NAN),
            )
        },
    )?;
    println!("\nplot written to {out}");
    Ok(())
}

fn describe(((log_h, log_n), (w, b)): &Params) -> String {
    format!(
        "h = {:.4} h, n = {:.4}, c = {:.4} g/L, c0 = {:.4} g/L",
        log_h.exp(),
        log_n.exp(),
        w[[0, 0]],
        b[0]
    )
}

fn draw(
    path: &str,
    epoch_losses: &[f64],
    refined_mse: f64,
    times: &[f64],
    strengths: &[f64],
    fitted: impl Fn(f64) -> (f64, f64),
) -> std::result::Result<(), Box<dyn StdError>> {
    if let Some(dir) = std::path::Path::new(path).parent() {
        std::fs::create_dir_all(dir)?;
    }
    let root = SVGBackend::new(path, (1100, 440)).into_drawing_area();
    root.fill(&WHITE)?;
    let (left, right) = root.split_horizontally(480);

    let lo = epoch_losses.iter().cloned().fold(refined_mse, f64::min) * 0.8;
    let hi = epoch_losses.iter().cloned().fold(0.0, f64::max) * 1.2;
    let epochs = epoch_losses.len();
    let mut chart = ChartBuilder::on(&left)
        .caption("Mean squared error per epoch (Adam)", ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(60)
        .build_cartesian_2d(0..epochs - 1, (lo..hi).log_scale())?;
    chart
        .configure_mesh()
        .light_line_style(TRANSPARENT)
        .x_desc("epoch")
        .y_desc("(g/L)^2")
        .draw()?;
    chart
        .draw_series(LineSeries::new(
            epoch_losses.iter().enumerate().map(|(i, l)| (i, *l)),
            &BLUE,
        ))?
        .label("Adam, training loss")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], BLUE));
    chart
        .draw_series(LineSeries::new(
            [(0, refined_mse), (epochs - 1, refined_mse)],
            RED.stroke_width(2),
        ))?
        .label("after Levenberg-Marquardt")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], RED));
    chart
        .configure_series_labels()
        .border_style(BLACK)
        .background_style(WHITE)
        .draw()?;

    let top = strengths.iter().cloned().fold(0.0, f64::max) * 1.1;
    let mut chart = ChartBuilder::on(&right)
        .caption("Cold brew strength over steeping time", ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(50)
        .build_cartesian_2d(0.0..12.5, 0.0..top)?;
    chart
        .configure_mesh()
        .light_line_style(TRANSPARENT)
        .x_desc("hours")
        .y_desc("g/L")
        .draw()?;
    chart
        .draw_series(
            times
                .iter()
                .zip(strengths)
                .map(|(t, s)| Circle::new((*t, *s), 3, BLACK.filled())),
        )?
        .label("samples (invented)")
        .legend(|(x, y)| Circle::new((x + 9, y), 3, BLACK.filled()));
    let grid: Vec<f64> = (1..=250).map(|i| i as f64 * 0.05).collect();
    // Adam dashed, Levenberg-Marquardt solid, and the true curve drawn last,
    // dotted on top, so that all three stay visible where they overlap.
    let adam_style = BLUE.stroke_width(2);
    chart
        .draw_series(DashedLineSeries::new(
            grid.iter().map(|&t| (t, fitted(t).0)),
            10,
            6,
            adam_style,
        ))?
        .label("Adam (dashed)")
        .legend(move |(x, y)| PathElement::new([(x, y), (x + 8, y)], adam_style));
    chart
        .draw_series(LineSeries::new(
            grid.iter().map(|&t| (t, fitted(t).1)),
            RED.stroke_width(1),
        ))?
        .label("Levenberg-Marquardt (solid)")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], RED));
    let truth = BLACK.stroke_width(2);
    chart
        .draw_series(DottedLineSeries::new(
            grid.iter().map(|&t| (t, true_strength(t))),
            0,
            5,
            move |(x, y)| Circle::new((x, y), 1, truth.filled()),
        ))?
        .label("curve the samples came from (dotted)")
        .legend(move |(x, y)| {
            EmptyElement::at((x, y))
                + Circle::new((4, 0), 1, truth.filled())
                + Circle::new((10, 0), 1, truth.filled())
                + Circle::new((16, 0), 1, truth.filled())
        });
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::LowerRight)
        .border_style(BLACK)
        .background_style(WHITE)
        .draw()?;
    root.present()?;
    Ok(())
}
