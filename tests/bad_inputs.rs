//! Every kind of bad input the crate knows of, and the typed error it gets.
//! Add a row whenever a new kind is found.

use ndarray::{Array1, Array2, ArrayD, array};
use revdiff::laws::{Checker, Tolerance};
use revdiff::*;

/// A stage that claims to keep its input's shape but drops an element.
#[derive(Clone, Debug)]
struct Shrinks;
impl Compose for Shrinks {}
impl Map<ArrayD<f64>> for Shrinks {
    type Output = ArrayD<f64>;
    type Memo = ();
    fn forward_memo(&self, x: &ArrayD<f64>) -> Result<(ArrayD<f64>, ())> {
        Ok((ArrayD::zeros(vec![x.len() - 1]), ()))
    }
    fn backward_memo(&self, _: &(), dy: &ArrayD<f64>) -> Result<ArrayD<f64>> {
        Ok(dy.clone())
    }
}

macro_rules! table {
    ($($what:literal => $result:expr, $pattern:pat,)*) => {{
        let mut checked = 0;
        $(
            match $result {
                Err($pattern) => checked += 1,
                Err(other) => panic!("{}: the wrong error: {other:?}", $what),
                Ok(_) => panic!("{}: accepted", $what),
            }
        )*
        checked
    }};
}

#[test]
fn each_bad_input_gets_its_typed_error() {
    let line = parameter(0) + parameter(1) * input();
    let mut chain = Chain::<f64>::new(&[3]);
    chain
        .push("shrinks", Shrinks, StageShape::Preserving)
        .unwrap();
    let x3 = ArrayD::from_elem(vec![3], 1.0);
    let mut deepest: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
    for _ in 1..Boxed::<f64, f64>::MAX_DEPTH {
        deepest = Boxed::new(deepest.then(Sin)).unwrap();
    }
    let checked = table! {
        "examples with different row counts" =>
            Examples::new(array![[1.0], [2.0]], array![[1.0]]), Error::RowCountMismatch { .. },
        "examples with no rows" =>
            Examples::new(Array2::<f64>::zeros((0, 1)), Array2::zeros((0, 1))), Error::Empty { .. },
        "examples with a NaN" =>
            Examples::new(array![[f64::NAN]], array![[1.0]]), Error::NonFinite { .. },
        "examples from CSV without the named column" =>
            Examples::<f64>::read_csv("a,b\n1,2\n".as_bytes(), &["c"], &["b"]), Error::Csv { .. },
        "a batch size of zero" => Training::new(3, 0), Error::InvalidSetting { .. },
        "zero epochs" => Training::new(0, 3), Error::InvalidSetting { .. },
        "a validation fraction of 1.5" =>
            Training::new(3, 3).unwrap().stop_early(1.5, 2), Error::InvalidSetting { .. },
        "a negative learning rate" => Adam::new(-0.1_f64), Error::InvalidSetting { .. },
        "a momentum of 1" => Momentum::new(0.1_f64, 1.0), Error::InvalidSetting { .. },
        "a schedule with a NaN rate" => Schedule::constant(f64::NAN), Error::InvalidSetting { .. },
        "a relative tolerance of zero" =>
            Tolerance::<f64>::default().exact(0.0), Error::InvalidSetting { .. },
        "a negative absolute tolerance" =>
            Tolerance::<f64>::default().absolute(-1.0), Error::InvalidSetting { .. },
        "zero law-check cases" => Checker::<f64>::new().cases(0), Error::InvalidSetting { .. },
        "a negative clamp limit" => Clamp::new(-1.0_f64), Error::InvalidSetting { .. },
        "a NaN band limit" => InsideBand::new(f64::NAN), Error::InvalidSetting { .. },
        "an infinite shift" => Shift::new(f64::INFINITY), Error::InvalidSetting { .. },
        "a Huber threshold of zero" => Huber::new(0.0_f64), Error::InvalidSetting { .. },
        "a forward derivative along a direction of another length" =>
            forward_derivative(&MatVec::plain(), &(Array2::<f64>::eye(2), array![1.0, 2.0]),
                &(Array2::<f64>::eye(2), array![1.0, 2.0, 3.0])),
            Error::ShapeMismatch { .. },
        "a backward pass given an output change of the wrong shape" =>
            Exp.backward(&array![1.0, 2.0], &array![1.0]), Error::OutputChangeShape { .. },
        "a batch whose rows do not fit the weights" =>
            Affine.forward(&((Array2::<f64>::zeros((2, 3)), Array1::zeros(2)), Array2::zeros((4, 5)))),
            Error::ShapeMismatch { .. },
        "a chain stage that breaks the shape it declared" =>
            chain.forward(&x3), Error::ShapeMismatch { .. },
        "a coordinate past the end" =>
            Coordinate::new(3).forward(&array![1.0, 2.0]), Error::ShapeMismatch { .. },
        "a run-time model with no input width" => Layers::<f64>::new(0), Error::InvalidSetting { .. },
        "a fit with more parameters than residuals" =>
            LeastSquares::levenberg_marquardt()
                .fit(&CurveResiduals::new(line, vec![1.0], vec![2.0]).unwrap(), array![0.0, 0.0]),
            Error::Underdetermined { .. },
        "an iteration limit of zero" =>
            LeastSquares::levenberg_marquardt().max_iterations(0), Error::InvalidSetting { .. },
        "a reversed range for a strategy" =>
            laws::strategies::log_uniform(2.0, -2.0), Error::InvalidSetting { .. },
        "a strategy of empty vectors" =>
            laws::strategies::vectors(0, -1.0, 1.0), Error::InvalidSetting { .. },
        "a strategy with a NaN bound" =>
            laws::strategies::matrices(2, 2, f64::NAN, 1.0), Error::InvalidSetting { .. },
        "a detection limit below the estimated allowance" =>
            Tolerance::<f64>::default().detection_limit(1e-9), Error::InvalidSetting { .. },
        "a power with a NaN exponent" =>
            Powf::new(f64::NAN).forward(&2.0), Error::InvalidSetting { .. },
        "boxed maps nested past the limit" =>
            Boxed::new(deepest.then(Sin)), Error::NestingTooDeep { .. },
    };
    assert_eq!(checked, 31);

    // The chain's message names the stage that broke its shape.
    let err = chain.forward(&x3).unwrap_err();
    assert!(
        err.to_string().contains("stage 0 (shrinks) declared (3,)"),
        "{err}"
    );
    // A confidence level outside (0, 1), and zero shards.
    let fit = LeastSquares::levenberg_marquardt()
        .fit(
            &CurveResiduals::new(
                parameter(0) * input(),
                vec![1.0, 2.0, 3.0],
                vec![2.0, 4.1, 5.9],
            )
            .unwrap(),
            array![1.0],
        )
        .unwrap();
    assert!(matches!(
        fit.confidence_intervals(1.0),
        Err(Error::InvalidSetting { .. })
    ));
}

#[test]
fn boxed_maps_at_the_depth_limit_run_and_drop_on_a_small_stack() {
    // A thread's default stack in a test; the limit is chosen for it.
    let ran = std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(|| {
            let mut f: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
            for _ in 1..Boxed::<f64, f64>::MAX_DEPTH {
                f = Boxed::new(f.then(Sin)).unwrap();
            }
            let mut expect = 0.5_f64;
            for _ in 0..Boxed::<f64, f64>::MAX_DEPTH {
                expect = expect.sin();
            }
            assert_eq!(f.forward(&0.5).unwrap(), expect);
            f.backward(&0.5, &1.0).unwrap()
        })
        .unwrap()
        .join()
        .unwrap();
    assert!(ran > 0.0 && ran < 1.0, "{ran}");
}

#[test]
fn a_law_check_of_an_empty_input_is_a_violation_not_a_pass() {
    let empty = proptest::strategy::Just(Array1::<f64>::zeros(0));
    let report = Checker::new().map(&Exp, empty);
    assert!(!report.is_clean(), "{report}");
    assert_eq!(report.violations().len(), Law::FOR_MAPS.len());
    let v = report.violation(Law::Derivative, 1).unwrap();
    assert!(v.breach.measure.contains("no coordinates"), "{v}");
}
