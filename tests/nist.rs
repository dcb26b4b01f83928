//! The NIST StRD nonlinear regression problems in tests/data/nist (19 of
//! the suite's 27; NIST, Statistical Reference Datasets, public domain),
//! fitted by the default Levenberg-Marquardt from both of NIST's starting
//! points. Each model is one line of formula.
//!
//! The bar (from the suite's own guidance, NIST's certified values beside
//! it in each file): every parameter and the residual sum of squares to at
//! least 6 significant digits (log relative error >= 6), and the standard
//! errors against NIST's certified standard deviations to at least 4.

use ndarray::Array1;
use revdiff::{CurveResiduals, FitReport, LeastSquares, Map, input, input_at, parameter};
use std::f64::consts::PI;

struct Problem {
    name: &'static str,
    starts: [Vec<f64>; 2],
    certified: Vec<f64>,
    deviations: Vec<f64>,
    rss: f64,
    /// Rows of (y, x1, x2, ...).
    data: Vec<Vec<f64>>,
}

/// Reads NIST's file format: parameter lines `b1 = start1 start2 value sd`,
/// the `Residual Sum of Squares:` line, then the data after the last
/// `Data:` line.
fn read(name: &'static str, text: &str) -> Problem {
    let mut starts = [Vec::new(), Vec::new()];
    let (mut certified, mut deviations) = (Vec::new(), Vec::new());
    let mut rss = f64::NAN;
    let lines: Vec<&str> = text.lines().collect();
    for line in &lines {
        let t = line.trim();
        if let Some(rest) = t.strip_prefix('b')
            && let Some((index, values)) = rest.split_once('=')
            && index.trim().parse::<usize>().is_ok()
        {
            let v: Vec<f64> = values
                .split_whitespace()
                .map(|s| s.parse().unwrap())
                .collect();
            assert_eq!(v.len(), 4, "{name}: {line}");
            starts[0].push(v[0]);
            starts[1].push(v[1]);
            certified.push(v[2]);
            deviations.push(v[3]);
        }
        if let Some(rest) = t.strip_prefix("Residual Sum of Squares:") {
            rss = rest.trim().parse().unwrap();
        }
    }
    let data_start = lines
        .iter()
        .rposition(|l| l.trim_start().starts_with("Data:"))
        .unwrap();
    let data = lines[data_start + 1..]
        .iter()
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split_whitespace().map(|s| s.parse().unwrap()).collect())
        .collect();
    Problem {
        name,
        starts,
        certified,
        deviations,
        rss,
        data,
    }
}

/// Log relative error: the number of agreeing significant digits, at most 11.
fn digits(estimate: f64, certified: f64) -> f64 {
    if estimate == certified {
        return 11.0;
    }
    let e = ((estimate - certified) / certified).abs();
    (-e.log10()).min(11.0)
}

struct Score {
    worst_parameter: f64,
    rss: f64,
    worst_deviation: f64,
    iterations: usize,
    converged: bool,
}

fn judge(p: &Problem, fit: &FitReport<Array1<f64>, f64>) -> Score {
    let worst_parameter = fit
        .parameters
        .iter()
        .zip(&p.certified)
        .map(|(e, c)| digits(*e, *c))
        .fold(f64::INFINITY, f64::min);
    let worst_deviation = match &fit.standard_errors {
        // Lanczos1's certified standard deviations come from its
        // rounding-noise sum of squares, as ours do: both are noise, and
        // agree in order of magnitude only. Checked as such: within a
        // factor of 10, and at least 8 digits below the parameters.
        Some(se) if p.rss < 1e-20 => {
            let noise = se
                .iter()
                .zip(&p.deviations)
                .zip(&p.certified)
                .all(|((e, c), b)| {
                    (e / c).abs() < 10.0 && (c / e).abs() < 10.0 && e.abs() < 1e-8 * b.abs()
                });
            if noise { 11.0 } else { 0.0 }
        }
        Some(se) => se
            .iter()
            .zip(&p.deviations)
            .map(|(e, c)| digits(*e, *c))
            .fold(f64::INFINITY, f64::min),
        None => 0.0,
    };
    // Lanczos1's certified sum of squares is rounding noise (about 1e-25):
    // compared absolutely (the suite's README).
    let rss = if p.rss < 1e-20 {
        if (fit.residual_sum_of_squares - p.rss).abs() < 1e-20 {
            11.0
        } else {
            0.0
        }
    } else {
        digits(fit.residual_sum_of_squares, p.rss)
    };
    Score {
        worst_parameter,
        rss,
        worst_deviation,
        iterations: fit.iterations,
        converged: fit.stop.converged(),
    }
}

fn fit_scalar<M>(p: &Problem, model: M, transform: fn(f64) -> f64) -> Vec<Score>
where
    M: Map<(Array1<f64>, f64), Output = f64> + Clone,
{
    let xs: Vec<f64> = p.data.iter().map(|r| r[1]).collect();
    let ys: Vec<f64> = p.data.iter().map(|r| transform(r[0])).collect();
    let residuals = CurveResiduals::new(model, xs, ys).unwrap();
    p.starts
        .iter()
        .map(|start| {
            let fit = LeastSquares::levenberg_marquardt()
                .fit(&residuals, Array1::from(start.clone()))
                .unwrap();
            judge(p, &fit)
        })
        .collect()
}

macro_rules! problem {
    ($name:ident, |$b:ident, $x:ident| $model:expr) => {{
        let p = read(
            stringify!($name),
            include_str!(concat!("data/nist/", stringify!($name), ".dat")),
        );
        let ($b, $x) = (parameter, input());
        let scores = fit_scalar(&p, $model, |y| y);
        (p.name, scores)
    }};
}

fn all_problems() -> Vec<(&'static str, Vec<Score>)> {
    let mut out = vec![
        problem!(Misra1a, |b, x| b(0) * (1.0 - (-b(1) * x).exp())),
        problem!(Misra1b, |b, x| b(0)
            * (1.0 - (1.0 + b(1) * x * 0.5).powi(-2))),
        problem!(Misra1c, |b, x| b(0)
            * (1.0 - (1.0 + 2.0 * b(1) * x).powf(-0.5))),
        problem!(Misra1d, |b, x| b(0) * b(1) * x / (1.0 + b(1) * x)),
        problem!(Chwirut1, |b, x| (-b(0) * x).exp() / (b(1) + b(2) * x)),
        problem!(Chwirut2, |b, x| (-b(0) * x).exp() / (b(1) + b(2) * x)),
        problem!(DanWood, |b, x| b(0) * x.pow(b(1))),
        problem!(Lanczos1, |b, x| b(0) * (-b(1) * x).exp()
            + b(2) * (-b(3) * x).exp()
            + b(4) * (-b(5) * x).exp()),
        problem!(Lanczos2, |b, x| b(0) * (-b(1) * x).exp()
            + b(2) * (-b(3) * x).exp()
            + b(4) * (-b(5) * x).exp()),
        problem!(Lanczos3, |b, x| b(0) * (-b(1) * x).exp()
            + b(2) * (-b(3) * x).exp()
            + b(4) * (-b(5) * x).exp()),
        problem!(Gauss1, |b, x| b(0) * (-b(1) * x).exp()
            + b(2) * (-(x - b(3)).powi(2) / b(4).powi(2)).exp()
            + b(5) * (-(x - b(6)).powi(2) / b(7).powi(2)).exp()),
        problem!(Gauss2, |b, x| b(0) * (-b(1) * x).exp()
            + b(2) * (-(x - b(3)).powi(2) / b(4).powi(2)).exp()
            + b(5) * (-(x - b(6)).powi(2) / b(7).powi(2)).exp()),
        problem!(Kirby2, |b, x| (b(0) + b(1) * x + b(2) * x.powi(2))
            / (1.0 + b(3) * x + b(4) * x.powi(2))),
        problem!(MGH10, |b, x| b(0) * (b(1) / (x + b(2))).exp()),
        problem!(MGH17, |b, x| b(0)
            + b(1) * (-x * b(3)).exp()
            + b(2) * (-x * b(4)).exp()),
        problem!(Bennett5, |b, x| b(0) * (b(1) + x).pow(-1.0 / b(2))),
        problem!(Roszman1, |b, x| b(0)
            - b(1) * x
            - (b(2) / (x - b(3))).atan() / PI),
        problem!(ENSO, |b, x| b(0)
            + b(1) * (2.0 * PI / 12.0 * x).cos()
            + b(2) * (2.0 * PI / 12.0 * x).sin()
            + b(4) * (2.0 * PI * x / b(3)).cos()
            + b(5) * (2.0 * PI * x / b(3)).sin()
            + b(7) * (2.0 * PI * x / b(6)).cos()
            + b(8) * (2.0 * PI * x / b(6)).sin()),
    ];
    // Nelson: two predictors, and the model is for ln y.
    let p = read("Nelson", include_str!("data/nist/Nelson.dat"));
    let (b, x1, x2) = (parameter, input_at(0), input_at(1));
    let model = b(0) - b(1) * x1 * (-b(2) * x2).exp();
    let xs: Vec<Array1<f64>> = p
        .data
        .iter()
        .map(|r| Array1::from(vec![r[1], r[2]]))
        .collect();
    let ys: Vec<f64> = p.data.iter().map(|r| r[0].ln()).collect();
    let residuals = CurveResiduals::new(model, xs, ys).unwrap();
    let scores = p
        .starts
        .iter()
        .map(|s| {
            judge(
                &p,
                &LeastSquares::levenberg_marquardt()
                    .fit(&residuals, Array1::from(s.clone()))
                    .unwrap(),
            )
        })
        .collect();
    out.push((p.name, scores));
    out
}

#[test]
fn every_visible_nist_problem_from_both_starts_to_six_digits() {
    let results = all_problems();
    assert_eq!(results.len(), 19);
    let mut failures = Vec::new();
    for (name, scores) in &results {
        for (start, s) in scores.iter().enumerate() {
            println!(
                "{name:>9} start {}: parameters {:>5.2} digits, rss {:>5.2}, standard errors {:>5.2}, {:>4} iterations, converged {}",
                start + 1,
                s.worst_parameter,
                s.rss,
                s.worst_deviation,
                s.iterations,
                s.converged
            );
            if s.worst_parameter < 6.0 || s.rss < 6.0 || s.worst_deviation < 4.0 || !s.converged {
                failures.push(format!("{name} start {}", start + 1));
            }
        }
    }
    assert!(failures.is_empty(), "below the bar: {failures:?}");
}

/// A user's residuals whose length changes from point to point.
struct Shifty;

impl revdiff::Residuals<Array1<f64>> for Shifty {
    type Real = f64;
    fn residuals(&self, p: &Array1<f64>) -> revdiff::Result<Array1<f64>> {
        // Three residuals at the start, two anywhere else.
        Ok(if p[0] == 1.0 {
            Array1::from(vec![p[0] - 2.0, p[1], 0.5])
        } else {
            Array1::from(vec![p[0] - 2.0, p[1]])
        })
    }
    fn residuals_and_jacobian(
        &self,
        p: &Array1<f64>,
    ) -> revdiff::Result<revdiff::ResidualsAndJacobian<f64>> {
        let r = self.residuals(p)?;
        let mut j = ndarray::Array2::zeros((r.len(), 2));
        j[[0, 0]] = 1.0;
        j[[1, 1]] = 1.0;
        Ok((r, j))
    }
}

#[test]
fn silent_outcomes_are_typed_errors_or_honest_stops() {
    use revdiff::{Error, Stop};
    // More parameters than residuals: an error naming both counts.
    let (b, x) = (parameter, input());
    let three = CurveResiduals::new(
        b(0) + b(1) * x + b(2) * x * x,
        vec![1.0, 2.0],
        vec![1.0, 3.0],
    )
    .unwrap();
    let err = LeastSquares::levenberg_marquardt()
        .fit(&three, Array1::zeros(3))
        .unwrap_err();
    assert_eq!(
        err,
        Error::Underdetermined {
            residuals: 2,
            parameters: 3
        }
    );
    assert!(
        LeastSquares::gauss_newton()
            .fit(&three, Array1::zeros(3))
            .is_err()
    );

    // Residuals of inconsistent lengths: an error, not "converged" at the start.
    let err = LeastSquares::levenberg_marquardt()
        .fit(&Shifty, Array1::from(vec![1.0, 1.0]))
        .unwrap_err();
    assert!(matches!(err, Error::ShapeMismatch { .. }), "{err}");

    // A plateau (MGH17 from a start where exp(-b x) underflows, b = 700)
    // is not called converged.
    let p = read("MGH17", include_str!("data/nist/MGH17.dat"));
    let xs: Vec<f64> = p.data.iter().map(|r| r[1]).collect();
    let ys: Vec<f64> = p.data.iter().map(|r| r[0]).collect();
    let model = b(0) + b(1) * (-x * b(3)).exp() + b(2) * (-x * b(4)).exp();
    let residuals = CurveResiduals::new(model, xs, ys).unwrap();
    let fit = LeastSquares::levenberg_marquardt()
        .fit(&residuals, Array1::from(vec![0.5, 1.5, -1.0, 700.0, 800.0]))
        .unwrap();
    assert!(!fit.stop.converged(), "{}", fit.stop);
    assert!(
        matches!(fit.stop, Stop::Stalled | Stop::Undetermined),
        "{}",
        fit.stop
    );
}

#[test]
fn the_report_has_covariance_correlation_and_intervals() {
    // Misra1a from start 2: the certified standard deviations (NIST) give
    // the covariance's diagonal; a 95% interval is estimate +- t(12) se,
    // with t(12, 0.975) = 2.1788 (from memory).
    let p = read("Misra1a", include_str!("data/nist/Misra1a.dat"));
    let (b, x) = (parameter, input());
    let xs: Vec<f64> = p.data.iter().map(|r| r[1]).collect();
    let ys: Vec<f64> = p.data.iter().map(|r| r[0]).collect();
    let residuals = CurveResiduals::new(b(0) * (1.0 - (-b(1) * x).exp()), xs, ys).unwrap();
    let fit = LeastSquares::levenberg_marquardt()
        .fit(&residuals, Array1::from(p.starts[1].clone()))
        .unwrap();
    let c = fit.covariance.as_ref().unwrap();
    for k in 0..2 {
        assert!(digits(c[[k, k]].sqrt(), p.deviations[k]) > 6.0);
    }
    let r = fit.correlation().unwrap();
    assert!((r[[0, 0]] - 1.0).abs() < 1e-12 && (r[[0, 1]] - r[[1, 0]]).abs() < 1e-12);
    assert!(r[[0, 1]] < -0.9, "b1 and b2 trade off: {}", r[[0, 1]]);
    let ci = fit.confidence_intervals(0.95).unwrap().unwrap();
    let half = (ci[0].1 - ci[0].0) / 2.0;
    assert!(
        (half / p.deviations[0] - 2.1788).abs() < 1e-3,
        "{}",
        half / p.deviations[0]
    );
    let s = fit.residual_standard_deviation.unwrap();
    assert!(digits(s * s * 12.0, p.rss) > 6.0);
    let text = fit.to_string();
    assert!(
        text.contains("95% confidence interval") && text.contains("correlation"),
        "{text}"
    );
}

#[test]
fn parameters_that_only_act_together_are_named() {
    use revdiff::Stop;
    // y = (b0 + b1) x: only the sum is determined.
    let (b, x) = (parameter, input());
    let residuals =
        CurveResiduals::new((b(0) + b(1)) * x, vec![1.0, 2.0, 3.0], vec![2.0, 4.1, 5.9]).unwrap();
    let fit = LeastSquares::levenberg_marquardt()
        .fit(&residuals, Array1::from(vec![1.0, 0.5]))
        .unwrap();
    assert_eq!(fit.stop, Stop::Undetermined);
    assert_eq!(fit.undetermined, vec![1]);
    assert!(fit.standard_errors.is_none() && fit.covariance.is_none());
    assert!((fit.parameters[0] + fit.parameters[1] - 27.9_f64 / 14.0).abs() < 1e-9);
    assert!(
        fit.to_string()
            .contains("not determined by the residuals: coordinates [1]")
    );
}
