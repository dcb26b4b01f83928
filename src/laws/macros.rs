//! [`law_tests!`](crate::law_tests): one line that turns the laws into
//! `#[test]` functions for a user's map.

/// Generates a module of `#[test]` functions, one per law (and order), for a
/// map.
///
/// `law_tests!(name, map MAP, INPUTS)` checks the laws of
/// [`Law::FOR_MAPS`](crate::laws::Law::FOR_MAPS) on a map without a reverse
/// map; `law_tests!(name, reverse MAP, INPUTS)` checks every law of
/// [`Law::FOR_REVERSE`](crate::laws::Law::FOR_REVERSE) at orders 1 and 2.
/// `INPUTS` is anything [`Checker::map`](crate::laws::Checker::map)
/// accepts (a proptest strategy of inputs, say); an optional fourth argument
/// is the [`Checker`](crate::laws::Checker) to use (the default has 256
/// cases per law). Both expressions are evaluated in each test, inside the
/// generated module, which imports everything from the enclosing one.
///
/// A broken law fails its test with the report: the law, the shrunk case,
/// expected and observed values, the error and the tolerance.
///
/// ```
/// use revdiff::{law_tests, Compose, Map, Result};
///
/// #[derive(Clone, Debug)]
/// struct Cube;
/// impl Compose for Cube {}
/// impl Map<f64> for Cube {
///     type Output = f64;
///     type Memo = f64;
///     fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
///         Ok((x * x * x, *x))
///     }
///     fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
///         Ok(3.0 * x * x * dy)
///     }
/// }
///
/// law_tests!(cube_laws, map Cube, -3.0..3.0f64);
/// // With a checker of your own:
/// law_tests!(cube_laws_long, map Cube, -3.0..3.0f64, revdiff::laws::Checker::new().cases(1000).unwrap());
/// # fn main() {}
/// ```
#[macro_export]
macro_rules! law_tests {
    ($module:ident, map $f:expr, $inputs:expr $(, $checker:expr)? $(,)?) => {
        #[allow(non_snake_case)]
        mod $module {
            #[allow(unused_imports)]
            use super::*;
            $crate::law_tests!(@tests map, $f, $inputs, ($($checker)?), [
                additive Additive 1,
                zero_change ZeroChange 1,
                homogeneous Homogeneous 1,
                derivative Derivative 1,
                symmetric Symmetric 1,
                shapes_finite ShapesFinite 1,
                reusing_agrees ReusingAgrees 1
            ]);
        }
    };
    ($module:ident, reverse $f:expr, $inputs:expr $(, $checker:expr)? $(,)?) => {
        #[allow(non_snake_case)]
        mod $module {
            #[allow(unused_imports)]
            use super::*;
            $crate::law_tests!(@tests reverse, $f, $inputs, ($($checker)?), [
                additive Additive 1,
                zero_change ZeroChange 1,
                homogeneous Homogeneous 1,
                derivative Derivative 1,
                symmetric Symmetric 1,
                linear_in_change LinearInChange 1,
                reverse_agrees ReverseAgrees 1,
                shapes_finite ShapesFinite 1,
                additive_order_2 Additive 2,
                zero_change_order_2 ZeroChange 2,
                homogeneous_order_2 Homogeneous 2,
                derivative_order_2 Derivative 2,
                symmetric_order_2 Symmetric 2,
                linear_in_change_order_2 LinearInChange 2,
                reverse_agrees_order_2 ReverseAgrees 2,
                shapes_finite_order_2 ShapesFinite 2,
                reusing_agrees ReusingAgrees 1,
                reusing_agrees_order_2 ReusingAgrees 2
            ]);
        }
    };
    (@tests $kind:ident, $f:expr, $inputs:expr, $checker:tt,
     [$($name:ident $law:ident $order:literal),*]) => {
        $(
            #[test]
            fn $name() {
                let checker = $crate::law_tests!(@checker $checker);
                $crate::law_tests!(@run $kind, checker, $law, $order, $f, $inputs).assert_clean();
            }
        )*
    };
    (@checker ()) => { <$crate::laws::Checker>::new() };
    (@checker ($checker:expr)) => { $checker };
    (@run map, $checker:ident, $law:ident, $order:literal, $f:expr, $inputs:expr) => {
        $checker.map_law($crate::laws::Law::$law, &$f, $inputs)
    };
    (@run reverse, $checker:ident, $law:ident, $order:literal, $f:expr, $inputs:expr) => {
        $checker.reverse_law($crate::laws::Law::$law, $order, &$f, $inputs)
    };
}
