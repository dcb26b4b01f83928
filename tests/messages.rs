//! What the user reads: error messages that name the wrong argument,
//! positions counted from 0, and the printed forms of values, stops and fit
//! reports.

use ndarray::{Array1, Array2, array};
use revdiff::{
    Affine, Chain, Compose, CurveResiduals, Error, Examples, Exp, LeastSquares, Map, MatVec,
    MulPair, Powi, Softmax, Space, Stop, fst, hessian_vector, snd,
};

#[test]
fn a_chain_whose_first_stage_does_not_fit_its_input_says_so() {
    let mut chain = Chain::<f64>::new(&[3]);
    let err = chain
        .push_affine(Array2::zeros((2, 4)), Array1::zeros(2))
        .unwrap_err();
    assert_eq!(
        err.to_string(),
        "stage 0 of the chain (affine (2, 4)) expects input of shape (4,), \
         but the chain's input has shape (3,)"
    );
    assert!(matches!(
        err,
        Error::ChainShape {
            stage: 0,
            previous: None,
            ..
        }
    ));
    assert!(
        chain.is_empty(),
        "a refused stage leaves the chain as it was"
    );
}

#[test]
fn a_backward_pass_given_a_change_of_the_wrong_shape_blames_the_output_change() {
    let x = array![1.0, 2.0, 3.0];
    let short = array![1.0, 2.0];
    let cases: Vec<(&str, Error)> = vec![
        ("exp", Exp.backward(&x, &short).unwrap_err()),
        ("softmax", Softmax.backward(&x, &short).unwrap_err()),
        (
            "multiplication",
            MulPair
                .backward(&(x.clone(), x.clone()), &short)
                .unwrap_err(),
        ),
        (
            "matrix-vector product",
            MatVec::plain()
                .backward(&(Array2::zeros((3, 3)), x.clone()), &short)
                .unwrap_err(),
        ),
        (
            "affine map",
            Affine
                .backward(&((Array2::zeros((3, 3)), x.clone()), x.clone()), &short)
                .unwrap_err(),
        ),
    ];
    for (map, err) in cases {
        match &err {
            Error::OutputChangeShape {
                map: named, found, ..
            } => {
                assert_eq!(*named, map);
                assert_eq!(found, "(2,)", "{err}");
            }
            other => panic!("{map}: expected OutputChangeShape, got {other:?}"),
        }
        assert!(
            err.to_string().contains("the output change has shape (2,)"),
            "{err}"
        );
    }
}

#[test]
fn row_counts_are_spelled_for_one_row() {
    let err = Examples::new(array![[1.0], [2.0]], array![[2.0]]).unwrap_err();
    assert_eq!(
        err.to_string(),
        "examples: the inputs have 2 rows but the targets have 1 row"
    );
    let err = Examples::new(array![[1.0], [f64::NAN]], array![[2.0], [3.0]]).unwrap_err();
    // Rows count from 0, like every position.
    assert!(err.to_string().contains("input row 1"), "{err}");
}

#[test]
fn values_print_without_strides_or_layout() {
    let value = (0.5_f64, array![[1.0, 0.0], [0.0, 1.0]]);
    assert_eq!(value.value_string(), "(0.5, [[1, 0], [0, 1]])");
    assert_eq!([array![1.5], array![2.0]].value_string(), "[[1.5], [2]]");
    assert!(!format!("{:?}", value.1).is_empty());
}

#[test]
fn stops_read_as_sentences_and_reports_as_tables() {
    assert_eq!(
        Stop::IterationLimit.to_string(),
        "not converged: the iteration limit came first"
    );
    assert!(Stop::SmallStep.to_string().starts_with("converged: "));

    // ((b0, b1), x) -> b0 + b1 x through four points.
    let line = fst()
        .then(fst())
        .pair(fst().then(snd()).pair(snd()).then(MulPair))
        .then(revdiff::AddPair);
    let residuals =
        CurveResiduals::new(line, vec![0.0, 1.0, 2.0, 3.0], vec![1.1, 2.9, 5.2, 6.8]).unwrap();
    let fit = LeastSquares::levenberg_marquardt()
        .fit(&residuals, (0.0, 0.0))
        .unwrap();
    let text = fit.to_string();
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines[0].starts_with(&fit.stop.to_string()), "{text}");
    assert!(lines[1].contains("2 degrees of freedom"), "{text}");
    assert!(lines[2].contains("estimate") && lines[2].contains("standard error"));
    assert!(lines[2].contains("95% confidence interval"), "{text}");
    // One row per parameter coordinate, with the estimate printed, then the
    // 2 x 2 correlation matrix under its heading.
    assert_eq!(lines.len(), 8, "{text}");
    assert_eq!(lines[5], "correlation", "{text}");
    let slope: f64 = lines[4].split_whitespace().nth(1).unwrap().parse().unwrap();
    assert!(
        (slope - fit.parameters.1).abs() < 1e-8 * slope.abs(),
        "{text}"
    );
}

/// `x -> x^3` by hand, first order only.
#[derive(Clone, Debug)]
struct Cube;
impl Compose for Cube {}
impl Map<f64> for Cube {
    type Output = f64;
    type Memo = f64;
    fn forward_memo(&self, x: &f64) -> revdiff::Result<(f64, f64)> {
        Ok((x * x * x, *x))
    }
    fn backward_memo(&self, x: &f64, dy: &f64) -> revdiff::Result<f64> {
        Ok(3.0 * x * x * dy)
    }
}

#[test]
fn a_hand_written_map_borrows_second_order_from_an_equal_composite() {
    let cube = Cube.reversed_through(Powi::<f64>::new(3));
    for x in [-1.5, 0.25, 2.0] {
        // The passes are the hand-written ones; the second derivative is 6x.
        assert_eq!(cube.forward(&x).unwrap(), x * x * x);
        let hv = hessian_vector(&cube, &x, &1.0).unwrap();
        assert!((hv - 6.0 * x).abs() < 1e-12 * (1.0 + x.abs()), "{x}: {hv}");
    }
    // It composes further with second order intact: sin(x^3).
    let model = Cube
        .reversed_through(Powi::<f64>::new(3))
        .then(revdiff::Sin);
    let x = 0.7_f64;
    let exact = 6.0 * x * (x * x * x).cos() - 9.0 * x.powi(4) * (x * x * x).sin();
    let hv = hessian_vector(&model, &x, &1.0).unwrap();
    assert!((hv - exact).abs() < 1e-12, "{hv} against {exact}");
}
