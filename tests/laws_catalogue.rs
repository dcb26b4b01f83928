//! Every primitive and combinator of the library passes every law, at
//! orders 1 and 2, through the one-line `law_tests!` macro; and exactly on
//! integer grids through the exhaustive checker.

use ndarray::{Array1, array};
use revdiff::laws::strategies::{log_uniform, matrices, nonzero, vectors};
use revdiff::laws::{Exhaustive, FiniteDomain, grid};
use revdiff::*;
// The library's space of one bit (XOR as addition), for the exhaustive
// checker's extension point.
use revdiff::bits::Bit;

fn v(n: usize) -> impl proptest::strategy::Strategy<Value = Array1<f64>> + Clone {
    vectors(n, -2.0, 2.0).unwrap()
}

// Elementwise, on scalars and on arrays.
law_tests!(exp, reverse Exp, -4.0..4.0f64);
law_tests!(exp_arrays, reverse Exp, v(4));
law_tests!(ln, reverse Ln, log_uniform(0.01, 100.0).unwrap());
law_tests!(sqrt, reverse Sqrt, log_uniform(0.01, 100.0).unwrap());
law_tests!(powi_cube, reverse Powi::new(3), -3.0..3.0f64);
law_tests!(powi_inverse_square, reverse Powi::with_coefficient(0.5, -2), nonzero(0.3, 3.0).unwrap());
law_tests!(powf, reverse Powf::new(1.7), log_uniform(0.1, 10.0).unwrap());
law_tests!(sin, reverse Sin, -6.0..6.0f64);
law_tests!(cos, reverse Cos, -6.0..6.0f64);
law_tests!(tanh, reverse Tanh, v(4));
law_tests!(sech_squared, reverse SechSquared, -3.0..3.0f64);
law_tests!(sigmoid, reverse Sigmoid, v(4));
law_tests!(softplus, reverse Softplus, -8.0..8.0f64);
law_tests!(relu, reverse Relu, nonzero(0.1, 3.0).unwrap());
law_tests!(heaviside, reverse Heaviside, nonzero(0.1, 3.0).unwrap());
law_tests!(abs, reverse Abs, nonzero(0.1, 3.0).unwrap());
law_tests!(signum, reverse Signum, nonzero(0.1, 3.0).unwrap());
law_tests!(neg, reverse Neg, v(3));
law_tests!(sub, reverse SubPair, (v(3), v(3)));
law_tests!(mul, reverse MulPair, (-3.0..3.0f64, -3.0..3.0f64));
law_tests!(mul_arrays, reverse MulPair, (v(3), v(3)));
law_tests!(div, reverse DivPair, (-3.0..3.0f64, nonzero(0.3, 3.0).unwrap()));

// Linear algebra.
law_tests!(matvec, reverse MatVec::plain(), (matrices(3, 2, -2.0, 2.0).unwrap(), v(2)));
law_tests!(matvec_transposed, reverse MatVec::transposed(), (matrices(3, 2, -2.0, 2.0).unwrap(), v(3)));
law_tests!(outer, reverse Outer::plain(), (v(3), v(2)));
law_tests!(outer_swapped, reverse Outer::swapped(), (v(3), v(2)));
law_tests!(matmul, reverse MatMul::plain(), (matrices(2, 3, -2.0, 2.0).unwrap(), matrices(3, 2, -2.0, 2.0).unwrap()));
law_tests!(matmul_flags, reverse MatMul::new(true, false, true), (matrices(3, 2, -2.0, 2.0).unwrap(), matrices(3, 2, -2.0, 2.0).unwrap()));
law_tests!(matrix_transpose, reverse MatrixTranspose, matrices(2, 3, -2.0, 2.0).unwrap());
law_tests!(affine, reverse Affine, ((matrices(2, 3, -2.0, 2.0).unwrap(), v(2)), v(3)));
law_tests!(affine_composite, reverse affine_composite(), ((matrices(2, 3, -2.0, 2.0).unwrap(), v(2)), v(3)));

// Reductions and the softmax family.
law_tests!(sum, reverse ElementReduction::sum(), v(5));
law_tests!(mean, reverse ElementReduction::mean(), v(5));
law_tests!(fill_like, reverse FillLike::mean(), (v(4), -2.0..2.0f64));
law_tests!(dot_product, reverse dot(), (v(4), v(4)));
law_tests!(squared_norm_of, reverse squared_norm(), v(4));
law_tests!(log_sum_exp, reverse LogSumExp, vectors(5, -3.0, 3.0).unwrap());
law_tests!(softmax, reverse Softmax, vectors(5, -3.0, 3.0).unwrap());
law_tests!(log_softmax, reverse LogSoftmax, vectors(5, -3.0, 3.0).unwrap());

// Structural maps.
law_tests!(identity, reverse id(), v(3));
law_tests!(first, reverse fst(), (v(2), v(3)));
law_tests!(second, reverse snd(), (v(2), v(3)));
law_tests!(duplicating, reverse duplicate(), v(3));
law_tests!(adding, reverse add_pair(), (v(3), v(3)));
law_tests!(discarding, reverse discard(), v(3));
law_tests!(zero, reverse ZeroMap, v(3));
law_tests!(constant_map, reverse constant(array![1.0, -2.0]), v(3));
law_tests!(scaling_map, reverse multiply_by(-1.5), v(3));

// Combinators.
law_tests!(then, reverse Sin.then(Exp).then(Tanh), v(3));
law_tests!(pair, reverse Sin.pair(Cos.then(Exp)), v(3));
law_tests!(cross, reverse Sin.alongside(Exp), (v(2), v(3)));
law_tests!(sum_of_maps, reverse Sin.plus(Tanh), v(3));
law_tests!(scaled, reverse Sigmoid.scaled(2.5), v(3));
law_tests!(transpose, reverse ElementReduction::sum().transpose_at(Array1::<f64>::zeros(3)), -2.0..2.0f64);
law_tests!(transpose_of_a_composite, reverse Neg.then(MatrixTranspose).transpose_at(ndarray::Array2::<f64>::zeros((2, 3))), matrices(3, 2, -2.0, 2.0).unwrap());
law_tests!(deep_model, reverse Affine.then(Tanh).then(Softplus).then(ElementReduction::mean()), ((matrices(3, 4, -1.0, 1.0).unwrap(), v(3)), v(4)));

// Maps without a reverse map: the first-order laws.
law_tests!(boxed, map Boxed::<Array1<f64>, Array1<f64>>::new(Sin.then(Exp)).unwrap(), v(4));

#[test]
fn run_time_chains_pass_the_first_order_laws() {
    let mut chain = Chain::<f64>::new(&[3]);
    chain.push_elementwise("tanh", Tanh).unwrap();
    chain
        .push_affine(array![[1.0, 0.5, -1.0], [0.0, 2.0, 1.0]], array![0.1, -0.2])
        .unwrap();
    chain.push_elementwise("sin", Sin).unwrap();
    let inputs = v(3).prop_map_dyn();
    Checker::new().map(&chain, inputs).assert_clean();
}

/// `prop_map` to dynamic-dimensional arrays, for the run-time chain.
trait ToDyn {
    fn prop_map_dyn(self) -> impl proptest::strategy::Strategy<Value = ndarray::ArrayD<f64>>;
}
impl<S: proptest::strategy::Strategy<Value = Array1<f64>>> ToDyn for S {
    fn prop_map_dyn(self) -> impl proptest::strategy::Strategy<Value = ndarray::ArrayD<f64>> {
        proptest::strategy::Strategy::prop_map(self, |a| a.into_dyn())
    }
}

fn integer_points_2d() -> Vec<(f64, f64)> {
    grid(&[0.0, 1.0, -1.0, 2.0, -2.0], 2)
        .into_iter()
        .map(|p| (p[0], p[1]))
        .collect()
}

#[test]
fn polynomial_maps_pass_exactly_on_integer_grids() {
    let exhaustive = Exhaustive::<f64>::new();
    let points = integer_points_2d();
    let scalars = vec![0.0, 1.0, -1.0, 2.0, -2.0];
    let domain = FiniteDomain::new(points.clone(), points.clone(), scalars.clone()).unwrap();
    exhaustive.reverse(&MulPair, &domain).assert_clean();
    exhaustive.reverse(&SubPair, &domain).assert_clean();
    let squares = FiniteDomain::new(scalars.clone(), scalars.clone(), scalars.clone()).unwrap();
    exhaustive.reverse(&Powi::new(3), &squares).assert_clean();
    exhaustive
        .reverse(&Powi::new(2).then(Neg).scaled(3.0), &squares)
        .assert_clean();
    // Pair laws, exactly.
    let pairs: Vec<(f64, f64)> = points.clone();
    let paired = FiniteDomain::new(scalars.clone(), scalars.clone(), pairs).unwrap();
    let (f, g) = (Powi::new(2), Neg);
    exhaustive
        .pairing(&f.pair(g), &f, &g, &paired)
        .assert_clean();
    exhaustive
        .sum_rule(&f.plus(g), &f, &g, &squares)
        .assert_clean();
    exhaustive
        .chain_rule(&f.then(g), &f, &g, &squares)
        .assert_clean();
    exhaustive
        .same_reverse(
            &Powi::new(2).then(Neg),
            &Neg.then(Powi::new(2)).then(Neg),
            &squares,
        )
        .assert_clean();
}

#[test]
fn integer_matrices_pass_exactly() {
    let vectors2 = grid(&[0.0, 1.0, -1.0], 2);
    let matrices: Vec<ndarray::Array2<f64>> = grid(&[0.0, 1.0, -1.0], 4)
        .into_iter()
        .map(|m| m.into_shape_with_order((2, 2)).unwrap())
        .collect();
    let inputs: Vec<(ndarray::Array2<f64>, Array1<f64>)> = matrices
        .iter()
        .step_by(20)
        .flat_map(|m| vectors2.iter().map(move |x| (m.clone(), x.clone())))
        .collect();
    // Every input; a spread of input changes (the symmetry law ranges over
    // inputs x changes^2 x output changes).
    let changes: Vec<_> = inputs.iter().step_by(11).cloned().collect();
    let domain = FiniteDomain::new(inputs, changes, vectors2).unwrap();
    Exhaustive::<f64>::new()
        .reverse(&MatVec::plain(), &domain)
        .assert_clean();
}

#[test]
fn empty_finite_domains_are_refused() {
    let err = FiniteDomain::<f64, f64>::new(vec![], vec![1.0], vec![1.0]).unwrap_err();
    assert!(matches!(err, Error::Empty { .. }), "{err}");
}

#[test]
fn zero_cases_is_an_invalid_setting() {
    let err = Checker::<f64>::new().cases(0).unwrap_err();
    assert!(
        matches!(err, Error::InvalidSetting { name: "cases", .. }),
        "{err}"
    );
}

/// The AND gate `(a, b) -> a b` over Z2, whose reverse derivative is
/// `(b dy, a dy)`; `wrong` forgets the change.
#[derive(Clone, Debug)]
struct And {
    wrong: bool,
}
impl Compose for And {}
impl Map<(Bit, Bit)> for And {
    type Output = Bit;
    type Memo = (Bit, Bit);
    fn forward_memo(&self, x: &(Bit, Bit)) -> Result<(Bit, (Bit, Bit))> {
        Ok((Bit(x.0.0 & x.1.0), *x))
    }
    fn backward_memo(&self, x: &(Bit, Bit), dy: &Bit) -> Result<(Bit, Bit)> {
        if self.wrong {
            Ok((x.1, x.0))
        } else {
            Ok((Bit(x.1.0 & dy.0), Bit(x.0.0 & dy.0)))
        }
    }
}

#[test]
fn a_space_of_bits_plugs_into_the_exhaustive_checker() {
    let bits = [Bit(false), Bit(true)];
    let pairs: Vec<(Bit, Bit)> = bits
        .iter()
        .flat_map(|a| bits.iter().map(move |b| (*a, *b)))
        .collect();
    let domain = FiniteDomain::new(pairs.clone(), pairs, bits.to_vec()).unwrap();
    let exhaustive = Exhaustive::<Bit>::new();
    exhaustive
        .map(&And { wrong: false }, &domain)
        .assert_clean();
    exhaustive
        .same_map(&And { wrong: false }, &And { wrong: false }, &domain)
        .assert_clean();
    // Forgetting the change breaks the zero-change law at the first input
    // with a set bit.
    let report = exhaustive.map(&And { wrong: true }, &domain);
    let v = report
        .violation(laws::Law::ZeroChange, 1)
        .unwrap_or_else(|| panic!("{report}"));
    let c = v.case::<(Bit, Bit), Bit>().unwrap();
    assert!(c.x.0.0 || c.x.1.0, "{report}");
}
