//! Learning checked against published references. Each check names its
//! source beside it.

use crate::common::assert_close;
use ndarray::{Array1, Array2, array};
use revdiff::*;

/// Asserts agreement to `digits` significant digits: relative error below
/// half a unit in the last digit.
fn assert_digits(what: &str, got: f64, certified: f64, digits: i32) {
    let relative = ((got - certified) / certified).abs();
    assert!(
        relative < 0.5 * 10f64.powi(1 - digits),
        "{what}: {got:.12e} against certified {certified:.12e} (relative error {relative:.1e})"
    );
}

/// `((b1, b2), x) -> b1 (1 - exp(-b2 x))`, from catalogue pieces.
fn misra1a_model() -> impl Map<((f64, f64), f64), Output = f64> + Clone {
    let one_minus = constant(1.0_f64).pair(id()).then(SubPair);
    fst()
        .then(fst())
        .pair(
            fst()
                .then(snd())
                .pair(snd())
                .then(MulPair)
                .then(Neg)
                .then(Exp)
                .then(one_minus),
        )
        .then(MulPair)
}

/// `((b1, b2), x) -> b1 x^b2 = b1 exp(b2 ln x)`, from catalogue pieces.
fn danwood_model() -> impl Map<((f64, f64), f64), Output = f64> + Clone {
    fst()
        .then(fst())
        .pair(
            fst()
                .then(snd())
                .pair(snd().then(Ln))
                .then(MulPair)
                .then(Exp),
        )
        .then(MulPair)
}

/// `((b0, b1), x) -> b0 + b1 x`.
fn line_model() -> impl Map<((f64, f64), f64), Output = f64> + Clone {
    fst()
        .then(fst())
        .pair(fst().then(snd()).pair(snd()).then(MulPair))
        .then(AddPair)
}

#[test]
fn nist_misra1a_from_the_first_start_to_six_digits() {
    // NIST Statistical Reference Datasets, nonlinear regression, Misra1a
    // (public domain, US National Institute of Standards and Technology);
    // data, start and certified values as given in the project's issue, from
    // memory, confirmed there by reproducing the certified values to 8 digits.
    let x = vec![
        77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1,
        760.0,
    ];
    let y = vec![
        10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47,
        81.78,
    ];
    let residuals = CurveResiduals::new(misra1a_model(), x, y).unwrap();
    let report = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (500.0, 1e-4))
        .unwrap();
    assert!(report.stop.converged(), "{:?}", report.stop);
    assert_digits("b1", report.parameters.0, 2.3894212918E+02, 6);
    assert_digits("b2", report.parameters.1, 5.5015643181E-04, 6);
    assert_digits(
        "residual sum of squares",
        report.residual_sum_of_squares,
        1.2455138894E-01,
        6,
    );
    // NIST's certified standard deviations of the estimates, from memory.
    let (se1, se2) = report.standard_errors.unwrap();
    assert_digits("standard error of b1", se1, 2.7070075241E+00, 6);
    assert_digits("standard error of b2", se2, 7.2668688436E-06, 6);
}

#[test]
fn nist_danwood_from_the_first_start_to_six_digits() {
    // NIST Statistical Reference Datasets, nonlinear regression, DanWood
    // (public domain, NIST); values as given in the project's issue, from
    // memory, confirmed there to 8 digits.
    let x = vec![1.309, 1.471, 1.490, 1.565, 1.611, 1.680];
    let y = vec![2.138, 3.421, 3.597, 4.340, 4.882, 5.660];
    let residuals = CurveResiduals::new(danwood_model(), x, y).unwrap();
    let report = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (1.0, 5.0))
        .unwrap();
    assert!(report.stop.converged(), "{:?}", report.stop);
    assert_digits("b1", report.parameters.0, 7.6886226176E-01, 6);
    assert_digits("b2", report.parameters.1, 3.8604055871E+00, 6);
    assert_digits(
        "residual sum of squares",
        report.residual_sum_of_squares,
        4.3173084083E-03,
        6,
    );
    // NIST's certified standard deviations of the estimates, from memory.
    let (se1, se2) = report.standard_errors.unwrap();
    assert_digits("standard error of b1", se1, 1.8281973860E-02, 6);
    assert_digits("standard error of b2", se2, 5.1726610913E-02, 6);
}

/// Anscombe's quartet, set I (Anscombe, 1973, "Graphs in statistical
/// analysis", The American Statistician 27(1)), from memory.
fn anscombe_one() -> (Vec<f64>, Vec<f64>) {
    (
        vec![10.0, 8.0, 13.0, 9.0, 11.0, 14.0, 6.0, 4.0, 12.0, 7.0, 5.0],
        vec![
            8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68,
        ],
    )
}

#[test]
fn anscombe_one_by_levenberg_marquardt() {
    // The least-squares line of set I is y = 3.00009 + 0.50009 x (Anscombe,
    // 1973; the digits as given in the project's issue, from memory).
    let (x, y) = anscombe_one();
    let residuals = CurveResiduals::new(line_model(), x, y).unwrap();
    let report = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (0.0, 0.0))
        .unwrap();
    assert!(report.stop.converged());
    assert!(
        (report.parameters.0 - 3.00009).abs() < 1e-5,
        "{}",
        report.parameters.0
    );
    assert!(
        (report.parameters.1 - 0.50009).abs() < 1e-5,
        "{}",
        report.parameters.1
    );
    // Standard errors of the usual regression output for set I: 1.1247 and
    // 0.1179 (from memory).
    let (se0, se1) = report.standard_errors.unwrap();
    assert!(
        (se0 - 1.1247).abs() < 1e-4 && (se1 - 0.1179).abs() < 1e-4,
        "{se0} {se1}"
    );
}

#[test]
fn anscombe_one_by_adam_on_mean_squared_error() {
    // Same line (Anscombe, 1973); Adam on the mean squared error reaches
    // intercept 3.00 +- 0.01 and slope 0.500 +- 0.002 (tolerances from the
    // project's issue).
    let (x, y) = anscombe_one();
    let n = x.len();
    let data = Examples::new(
        Array2::from_shape_vec((n, 1), x).unwrap(),
        Array2::from_shape_vec((n, 1), y).unwrap(),
    )
    .unwrap();
    let steps = 4000;
    let mut adam = Adam::new(0.1)
        .unwrap()
        .with_schedule(Schedule::cosine(0.1, 0.0, steps).unwrap());
    let run = Training::new(steps, n)
        .unwrap()
        .run(
            &Affine,
            &MeanSquaredError,
            &mut adam,
            (array![[0.0]], array![0.0]),
            &data,
            |_| {},
        )
        .unwrap();
    let (w, b) = &run.parameters;
    assert!((b[0] - 3.00).abs() <= 0.01, "intercept {}", b[0]);
    assert!((w[[0, 0]] - 0.500).abs() <= 0.002, "slope {}", w[[0, 0]]);
}

#[test]
fn adam_first_step_is_the_learning_rate_times_g_over_g_plus_eps() {
    // Kingma and Ba, 2015, "Adam: a method for stochastic optimization",
    // sections 2.1 and 3 (from memory): with bias correction the first step
    // of each coordinate is lr |g| / (|g| + eps), about lr.
    let lr = 0.01;
    let eps = 1e-8;
    let g = array![1e-3, 1.0, -250.0, 3e-8, -1e-9];
    let mut adam = Adam::new(lr).unwrap();
    let p = adam.update(&Array1::<f64>::zeros(5), &g).unwrap();
    for (k, (step, gk)) in p.iter().zip(&g).enumerate() {
        let expected = -lr * gk / (gk.abs() + eps);
        assert_close(&format!("coordinate {k}"), *step, expected, 1e-12);
    }
    // Away from eps the magnitude is the learning rate, whatever |g|.
    for step in &p.as_slice().unwrap()[..3] {
        assert!((step.abs() - lr).abs() < lr * 1e-5, "{step}");
    }
}

#[test]
fn mazur_step_by_step_backpropagation() {
    // The step-by-step backpropagation example of Mazur, 2015 ("A step by
    // step backpropagation example"), values from memory: a 2-2-2 logistic
    // network, biases 0.35 and 0.60 held fixed, half squared error, one
    // gradient-descent step with learning rate 0.5.
    let hidden = Affine.freeze_second(array![0.35, 0.35]).then(Sigmoid);
    let output = Affine.freeze_second(array![0.60, 0.60]).then(Sigmoid);
    let model = hidden.then_parametrised(output);
    let w_hidden: Array2<f64> = array![[0.15, 0.20], [0.25, 0.30]];
    let w_output: Array2<f64> = array![[0.40, 0.45], [0.50, 0.55]];
    let data = Examples::new(array![[0.05, 0.10]], array![[0.01, 0.99]]).unwrap();

    let mut losses: Vec<f64> = Vec::new();
    let run = Training::new(1, 1)
        .unwrap()
        .run(
            &model,
            &SquaredError::halved(),
            &mut GradientDescent::new(0.5).unwrap(),
            (w_hidden, w_output),
            &data,
            |p| losses.push(p.loss),
        )
        .unwrap();
    assert_eq!(losses.len(), 1);
    assert!(
        (losses[0] - 0.298371109).abs() < 1e-9,
        "total error {}",
        losses[0]
    );

    let (wh, wo) = &run.parameters;
    let expected_output: [f64; 4] = [0.35891648, 0.408666186, 0.511301270, 0.561370121];
    let expected_hidden: [f64; 4] = [0.149780716, 0.19956143, 0.24975114, 0.29950229];
    for (k, (got, want)) in wo.iter().zip(expected_output).enumerate() {
        assert!(
            (got - want).abs() < 1e-8,
            "w{}: {got} against {want}",
            k + 5
        );
    }
    for (k, (got, want)) in wh.iter().zip(expected_hidden).enumerate() {
        assert!(
            (got - want).abs() < 1e-8,
            "w{}: {got} against {want}",
            k + 1
        );
    }
}

#[test]
fn iris_softmax_regression_with_adam() {
    // Fisher, 1936, "The use of multiple measurements in taxonomic problems",
    // from tests/data/iris.txt (see tests/data/README.md). At least 95%
    // training accuracy for softmax regression: common practice, no source.
    let (mut x, classes) = read_iris();
    let rows = x.nrows();
    // The copy is the one we meant: 150 flowers, 50 of each species, and the
    // column means of the widely circulated copy (from memory).
    assert_eq!(rows, 150);
    for c in 0..3 {
        assert_eq!(classes.iter().filter(|&&k| k == c).count(), 50);
    }
    for (column, mean) in x.columns().into_iter().zip([5.8433, 3.054, 3.7587, 1.1987]) {
        assert!((column.mean().unwrap() - mean).abs() < 1e-4, "{mean}");
    }
    // Standardise each feature (common practice).
    for mut column in x.columns_mut() {
        let mean = column.mean().unwrap();
        let sd = column.mapv(|v| (v - mean).powi(2)).mean().unwrap().sqrt();
        column.mapv_inplace(|v| (v - mean) / sd);
    }
    let onehot = Array2::from_shape_fn((rows, 3), |(i, c)| if classes[i] == c { 1.0 } else { 0.0 });
    let data = Examples::new(x.clone(), onehot).unwrap();

    let start = (Array2::zeros((3, 4)), Array1::zeros(3));
    let run = Training::new(60, 15)
        .unwrap()
        .seed(3)
        .run(
            &Affine,
            &LogitCrossEntropy,
            &mut Adam::new(0.05).unwrap(),
            start,
            &data,
            |_| {},
        )
        .unwrap();
    let (w, b) = &run.parameters;
    let correct = (0..rows)
        .filter(|&i| {
            let logits = w.dot(&x.row(i)) + b;
            let best = (0..3)
                .max_by(|&a, &c| logits[a].total_cmp(&logits[c]))
                .unwrap();
            best == classes[i]
        })
        .count();
    let accuracy = correct as f64 / rows as f64;
    assert!(accuracy >= 0.95, "training accuracy {accuracy}");
    assert!(run.epoch_losses.last().unwrap() < &run.epoch_losses[0]);
}

/// The four measurements and the species (0 setosa, 1 versicolor, 2
/// virginica) of tests/data/iris.txt.
fn read_iris() -> (Array2<f64>, Vec<usize>) {
    let text = include_str!("data/iris.txt");
    let mut values = Vec::new();
    let mut classes = Vec::new();
    for line in text.lines().skip(1) {
        let fields: Vec<&str> = line.split(';').collect();
        assert_eq!(fields.len(), 5, "{line}");
        values.extend(fields[..4].iter().map(|f| f.parse::<f64>().unwrap()));
        let species = ["setosa", "versicolor", "virginica"];
        classes.push(species.iter().position(|s| *s == fields[4]).unwrap());
    }
    (
        Array2::from_shape_vec((classes.len(), 4), values).unwrap(),
        classes,
    )
}
