//! Nonlinear least squares: Gauss-Newton and Levenberg-Marquardt for
//! residual maps `r: P -> R^m`, with the Jacobian from the library's own
//! derivatives.
//!
//! A residual map is anything implementing [`Residuals`]: a whole map of the
//! library ([`residual_map`]; its Jacobian by `m` backward passes or `n`
//! forward passes, whichever is cheaper), or a model fitted to data points
//! ([`CurveResiduals`]; one backward pass per point).

use crate::error::{Error, Result};
use crate::higher::{jacobian, jacobian_by_backward, jacobian_by_forward};
use crate::map::{Map, Reverse};
use crate::space::{Euclidean, Real};
use ndarray::{Array1, Array2, Axis};
use std::fmt;
use std::sync::OnceLock;
use std::time::Instant;

/// A residual vector and the Jacobian of the residuals at the same point.
pub type ResidualsAndJacobian<R> = (Array1<R>, Array2<R>);

/// A map `P -> R^m` whose value and Jacobian a fitter can ask for.
///
/// [`ResidualMap`] and [`CurveResiduals`] implement it from the library's
/// derivatives; implement it yourself when you have residuals in another
/// form.
///
/// # Example
///
/// Rosenbrock's function as residuals `(10 (b - a^2), 1 - a)`, with a
/// Jacobian written by hand, minimised from the classic start `(-1.2, 1)`:
///
/// ```
/// use revdiff::{LeastSquares, Residuals, Result, ResidualsAndJacobian};
/// use ndarray::{array, Array1};
///
/// struct Valley;
///
/// impl Residuals<(f64, f64)> for Valley {
///     type Real = f64;
///     fn residuals(&self, &(a, b): &(f64, f64)) -> Result<Array1<f64>> {
///         Ok(array![10.0 * (b - a * a), 1.0 - a])
///     }
///     fn residuals_and_jacobian(&self, p: &(f64, f64)) -> Result<ResidualsAndJacobian<f64>> {
///         let a = p.0;
///         Ok((self.residuals(p)?, array![[-20.0 * a, 10.0], [-1.0, 0.0]]))
///     }
/// }
///
/// let report = LeastSquares::levenberg_marquardt().fit(&Valley, (-1.2, 1.0)).unwrap();
/// assert!(report.stop.converged());
/// assert!((report.parameters.0 - 1.0).abs() < 1e-9 && (report.parameters.1 - 1.0).abs() < 1e-9);
/// ```
#[diagnostic::on_unimplemented(
    message = "`{Self}` does not give residuals and a Jacobian for parameters `{P}`",
    label = "least squares needs `Residuals<{P}>`",
    note = "wrap a whole map `P -> R^m` with `residual_map(map)`, or a model `(P, x) -> y` over data points with `CurveResiduals::new(model, xs, ys)`"
)]
pub trait Residuals<P> {
    /// The real type of the residuals.
    type Real: Real;

    /// The residual vector at `p`.
    fn residuals(&self, p: &P) -> Result<Array1<Self::Real>>;

    /// The residual vector and the `m x n` Jacobian at `p` (`n` parameter
    /// coordinates, in [`Euclidean`] order).
    fn residuals_and_jacobian(&self, p: &P) -> Result<ResidualsAndJacobian<Self::Real>>;

    /// The Euclidean norm of the values the residuals are differences of
    /// (for a curve, of the observed targets), when known: rounding in the
    /// residuals is measured against it, so that a fit whose residuals are
    /// rounding noise is recognised as converged. `None` by default.
    fn target_scale(&self) -> Option<Self::Real> {
        None
    }
}

/// How [`ResidualMap`] takes its Jacobian.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum JacobianRoute {
    /// One backward pass per residual ([`jacobian_by_backward`]).
    Backward,
    /// One forward derivative per parameter ([`jacobian_by_forward`]), each
    /// read off the second reverse derivative.
    Forward,
    /// Whichever is cheaper. With no more residuals than parameters that is
    /// the backward route (fewer passes, and a forward derivative costs at
    /// least a backward pass). Otherwise the first Jacobian is taken both
    /// ways and timed, and the faster route is kept from then on: a forward
    /// derivative of a composite costs several times a backward pass (40
    /// times for `p -> tanh(A p) - b` in `benches/learning.rs`), so fewer
    /// passes is not always less work. Both routes are exact; they differ
    /// only by rounding.
    Cheaper,
}

/// A map of the library `P -> Array1<R>` as residuals. Created by
/// [`residual_map`].
#[derive(Clone, Debug)]
pub struct ResidualMap<F> {
    map: F,
    route: JacobianRoute,
    chosen: OnceLock<JacobianRoute>,
}

/// Uses a map `P -> Array1<R>` as a residual map, its Jacobian by the
/// cheaper route ([`JacobianRoute::Cheaper`]); see [`ResidualMap::route`].
///
/// ```
/// use revdiff::{constant, id, residual_map, Compose, Neg, Residuals, SubPair};
/// use ndarray::array;
/// // r(a) = a - (1, 2) as a map of arrays.
/// let r = residual_map(constant(array![1.0, 2.0]).pair(id()).then(SubPair).then(Neg));
/// let (value, j) = r.residuals_and_jacobian(&array![3.0, 3.0]).unwrap();
/// assert_eq!(value, array![2.0, 1.0]);
/// assert_eq!(j, array![[1.0, 0.0], [0.0, 1.0]]);
/// ```
pub fn residual_map<F>(map: F) -> ResidualMap<F> {
    ResidualMap {
        map,
        route: JacobianRoute::Cheaper,
        chosen: OnceLock::new(),
    }
}

impl<F> ResidualMap<F> {
    /// Fixes the route of the Jacobian.
    pub fn route(self, route: JacobianRoute) -> Self {
        ResidualMap {
            map: self.map,
            route,
            chosen: OnceLock::new(),
        }
    }

    /// The route taken: the one set, or for [`JacobianRoute::Cheaper`] the
    /// one chosen at the first Jacobian (`None` before it).
    pub fn route_taken(&self) -> Option<JacobianRoute> {
        match self.route {
            JacobianRoute::Cheaper => self.chosen.get().copied(),
            fixed => Some(fixed),
        }
    }
}

impl<R, P, F> Residuals<P> for ResidualMap<F>
where
    R: Real,
    P: Euclidean<R>,
    F: Reverse<P, Output = Array1<R>>,
{
    type Real = R;
    fn residuals(&self, p: &P) -> Result<Array1<R>> {
        self.map.forward(p)
    }
    fn residuals_and_jacobian(&self, p: &P) -> Result<ResidualsAndJacobian<R>> {
        let r = self.map.forward(p)?;
        let route = match (self.route, self.chosen.get()) {
            (JacobianRoute::Cheaper, Some(chosen)) => *chosen,
            (JacobianRoute::Cheaper, None) if r.len() <= p.dimension() => {
                *self.chosen.get_or_init(|| JacobianRoute::Backward)
            }
            (JacobianRoute::Cheaper, None) => {
                let clock = Instant::now();
                let backward = jacobian_by_backward(&self.map, p)?;
                let backward_time = clock.elapsed();
                let clock = Instant::now();
                let forward = jacobian_by_forward(&self.map, p)?;
                let faster = if clock.elapsed() < backward_time {
                    JacobianRoute::Forward
                } else {
                    JacobianRoute::Backward
                };
                let chosen = *self.chosen.get_or_init(|| faster);
                let j = if chosen == JacobianRoute::Forward {
                    forward
                } else {
                    backward
                };
                return Ok((r, j));
            }
            (fixed, _) => fixed,
        };
        let j = match route {
            JacobianRoute::Forward => jacobian_by_forward(&self.map, p)?,
            _ => jacobian_by_backward(&self.map, p)?,
        };
        Ok((r, j))
    }
}

/// The residuals `model(p, x_i) - y_i` of a scalar model over data points
/// `(x_i, y_i)`. The Jacobian takes one backward pass per point (a point's
/// residual has one coordinate, so that is the cheaper route).
///
/// ```
/// use revdiff::{CurveResiduals, MulPair, Residuals};
/// use ndarray::array;
/// // y = p x through the points (1, 2) and (2, 3).
/// let r = CurveResiduals::new(MulPair, vec![1.0, 2.0], vec![2.0, 3.0]).unwrap();
/// let (value, j) = r.residuals_and_jacobian(&1.0).unwrap();
/// assert_eq!(value, array![-1.0, -1.0]);
/// assert_eq!(j, array![[1.0], [2.0]]);
/// assert!(CurveResiduals::new(MulPair, vec![1.0], vec![2.0, 3.0]).is_err());
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct CurveResiduals<M, A, R> {
    model: M,
    inputs: Vec<A>,
    targets: Vec<R>,
}

impl<M, A, R: Real> CurveResiduals<M, A, R> {
    /// Residuals of `model` at the points `(inputs[i], targets[i])`. Refuses
    /// no points, different counts and non-finite targets.
    pub fn new(model: M, inputs: Vec<A>, targets: Vec<R>) -> Result<Self> {
        if inputs.len() != targets.len() {
            return Err(Error::RowCountMismatch {
                inputs: inputs.len(),
                targets: targets.len(),
            });
        }
        if inputs.is_empty() {
            return Err(Error::Empty {
                operation: "curve residuals",
            });
        }
        if let Some(i) = targets.iter().position(|t| !t.is_finite()) {
            return Err(Error::NonFinite {
                operation: "curve residuals",
                detail: format!("{} at target {i}", targets[i]),
            });
        }
        Ok(CurveResiduals {
            model,
            inputs,
            targets,
        })
    }
}

impl<R, P, A, M> Residuals<P> for CurveResiduals<M, A, R>
where
    R: Real,
    P: Euclidean<R>,
    A: Euclidean<R>,
    M: Map<(P, A), Output = R>,
{
    type Real = R;
    fn target_scale(&self) -> Option<R> {
        Some(
            self.targets
                .iter()
                .fold(R::zero(), |t, y| t + *y * *y)
                .sqrt(),
        )
    }
    fn residuals(&self, p: &P) -> Result<Array1<R>> {
        self.inputs
            .iter()
            .zip(&self.targets)
            .map(|(x, y)| Ok(self.model.forward(&(p.clone(), x.clone()))? - *y))
            .collect::<Result<Vec<R>>>()
            .map(Array1::from)
    }
    fn residuals_and_jacobian(&self, p: &P) -> Result<ResidualsAndJacobian<R>> {
        let n = p.dimension();
        let m = self.inputs.len();
        let mut r = Array1::zeros(m);
        let mut j = Array2::zeros((m, n));
        for (i, (x, y)) in self.inputs.iter().zip(&self.targets).enumerate() {
            let (value, kept) = self.model.forward_memo(&(p.clone(), x.clone()))?;
            r[i] = value - *y;
            let row = self.model.backward_memo(&kept, &R::one())?.0.coordinates();
            j.row_mut(i).assign(&Array1::from(row));
        }
        Ok((r, j))
    }
}

/// Why a fit stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[non_exhaustive]
pub enum Stop {
    /// The step was small against the parameters.
    SmallStep,
    /// The residuals were (nearly) orthogonal to every Jacobian column.
    SmallGradient,
    /// An accepted step reduced the residual sum of squares by a tiny fraction.
    SmallDecrease,
    /// The residuals were exactly zero.
    ExactFit,
    /// Levenberg-Marquardt could not find a reducing step however strongly
    /// damped: the parameters are at a minimum to working precision.
    DampingLimit,
    /// The iteration limit came first: not converged.
    IterationLimit,
    /// The steps became small or stopped lowering the sum of squares while
    /// the gradient was not small: a plateau or a stall, not a minimum.
    Stalled,
    /// A convergence test passed, but some parameters do not affect the
    /// residuals there (their Jacobian columns vanish): not identifiable,
    /// so not converged. [`FitReport::undetermined`] lists them.
    Undetermined,
    /// Gauss-Newton's system `J'J d = -J'r` had no unique solution (a
    /// parameter the residuals do not determine): not converged; the
    /// parameters are those reached. Levenberg-Marquardt's damping avoids it.
    Singular,
    /// Gauss-Newton's step led to residuals that are not finite: not
    /// converged; the parameters are those before the step.
    NonFiniteStep,
}

impl Stop {
    /// Whether this is one of the convergence tests (not a limit or a failure).
    pub fn converged(&self) -> bool {
        !matches!(
            self,
            Stop::IterationLimit
                | Stop::Singular
                | Stop::NonFiniteStep
                | Stop::Stalled
                | Stop::Undetermined
        )
    }
}

impl fmt::Display for Stop {
    /// A sentence: whether the fit converged, and why it stopped.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Stop::SmallStep => "converged: the step became small against the parameters",
            Stop::SmallGradient => {
                "converged: the residuals became orthogonal to every Jacobian column"
            }
            Stop::SmallDecrease => {
                "converged: a step lowered the residual sum of squares by a negligible fraction"
            }
            Stop::ExactFit => "converged: the residuals are exactly zero",
            Stop::DampingLimit => {
                "converged: no damped step lowers the residual sum of squares any further"
            }
            Stop::IterationLimit => "not converged: the iteration limit came first",
            Stop::Stalled => {
                "not converged: the fit stalled on a plateau (small steps, but the gradient is not small)"
            }
            Stop::Undetermined => {
                "not converged: some parameters do not affect the residuals (see the undetermined coordinates)"
            }
            Stop::Singular => {
                "not converged: the Gauss-Newton system is singular (a parameter is not determined)"
            }
            Stop::NonFiniteStep => {
                "not converged: a Gauss-Newton step led to residuals that are not finite"
            }
        })
    }
}

/// The result of a least-squares fit.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub struct FitReport<P, R> {
    /// The fitted parameters.
    pub parameters: P,
    /// Iterations (Jacobian evaluations after the first) made.
    pub iterations: usize,
    /// Residual evaluations made, counting those of rejected steps.
    pub evaluations: usize,
    /// The residual sum of squares at the fitted parameters.
    pub residual_sum_of_squares: R,
    /// Residuals less parameters, `m - n`.
    pub degrees_of_freedom: usize,
    /// `sqrt(RSS / (m - n))`, the estimate of the residuals' standard
    /// deviation; `None` without degrees of freedom.
    pub residual_standard_deviation: Option<R>,
    /// The covariance matrix of the parameter coordinates,
    /// `s^2 (J'J)^-1`, in the order of [`Euclidean::coordinates`]; `None`
    /// when `m <= n` or `J'J` is singular.
    pub covariance: Option<Array2<R>>,
    /// Standard errors of the parameters, the roots of the diagonal of
    /// `s^2 (J'J)^-1` with `s^2 = RSS / (m - n)`, shaped like the parameters;
    /// `None` when `m <= n` or `J'J` is singular.
    pub standard_errors: Option<P>,
    /// Why the fit stopped.
    pub stop: Stop,
    /// The parameter coordinates (in the order of
    /// [`Euclidean::coordinates`], counted from 0) that the residuals do not
    /// determine at the fitted point: their Jacobian columns vanish. Empty
    /// for an identifiable fit; when not, there are no standard errors.
    pub undetermined: Vec<usize>,
}

impl<P: Euclidean<R>, R: Real> FitReport<P, R> {
    /// The correlation matrix of the parameter coordinates, from the
    /// covariance; `None` where the covariance is.
    pub fn correlation(&self) -> Option<Array2<R>> {
        let c = self.covariance.as_ref()?;
        let sd: Vec<R> = c.diag().iter().map(|v| v.sqrt()).collect();
        Some(Array2::from_shape_fn(c.dim(), |(a, b)| {
            c[[a, b]] / (sd[a] * sd[b])
        }))
    }

    /// Confidence intervals for each parameter coordinate at `level` (in
    /// `(0, 1)`, say 0.95): estimate plus or minus Student's t quantile with
    /// the fit's degrees of freedom times the standard error. `Ok(None)`
    /// where there are no standard errors.
    ///
    /// ```
    /// use revdiff::{input, parameter, CurveResiduals, LeastSquares};
    /// use ndarray::array;
    ///
    /// let model = parameter(0) + parameter(1) * input();
    /// let fit = LeastSquares::levenberg_marquardt()
    ///     .fit(&CurveResiduals::new(model, vec![0.0, 1.0, 2.0, 3.0], vec![1.1, 2.9, 5.2, 6.8]).unwrap(), array![0.0, 0.0])
    ///     .unwrap();
    /// let intervals = fit.confidence_intervals(0.95).unwrap().unwrap();
    /// let (low, high) = intervals[1];
    /// assert!(low < fit.parameters[1] && fit.parameters[1] < high);
    /// assert!(fit.confidence_intervals(1.5).is_err());
    /// ```
    pub fn confidence_intervals(&self, level: f64) -> Result<Option<Vec<(R, R)>>> {
        if !(level > 0.0 && level < 1.0) {
            return Err(Error::InvalidSetting {
                name: "confidence level",
                value: level.to_string(),
                reason: "must be in (0, 1)",
            });
        }
        let Some(se) = &self.standard_errors else {
            return Ok(None);
        };
        let t = student_t_quantile(self.degrees_of_freedom, 0.5 + level / 2.0)?;
        let t = R::from(t).expect("quantiles fit every real type");
        Ok(Some(
            self.parameters
                .coordinates()
                .iter()
                .zip(se.coordinates())
                .map(|(p, s)| (*p - t * s, *p + t * s))
                .collect(),
        ))
    }

    /// Values and standard errors of derived quantities `map(parameters)`,
    /// by the delta method: the covariance `J C J'` with `J` the Jacobian of
    /// `map` at the fitted parameters. This is how a fit through a
    /// reparametrisation (say `b = exp(c)`, to keep `b` positive) reports
    /// standard errors for the parameter the user cares about. The standard
    /// errors are `None` where the fit has none.
    ///
    /// ```
    /// use revdiff::{input, parameter, CurveResiduals, Exp, LeastSquares};
    /// use ndarray::array;
    ///
    /// // y = b0 exp(-b1 x) with b1 = exp(c) > 0: fit c, report b1.
    /// let model = parameter(0) * (-(parameter(1).exp()) * input()).exp();
    /// let xs: Vec<f64> = (0..10).map(f64::from).collect();
    /// let ys: Vec<f64> = xs.iter().map(|x| 3.0 * (-0.4 * x).exp() + 0.01 * (x * 7.0).sin()).collect();
    /// let fit = LeastSquares::levenberg_marquardt()
    ///     .fit(&CurveResiduals::new(model, xs, ys).unwrap(), array![1.0, 0.0])
    ///     .unwrap();
    /// let (rate, rate_se) = fit.derived(&Exp).unwrap();
    /// assert!((rate[1] - 0.4).abs() < 0.01);
    /// // The delta method: se(exp(c)) = exp(c) se(c).
    /// let se = fit.standard_errors.as_ref().unwrap();
    /// assert!((rate_se.unwrap()[1] - rate[1] * se[1]).abs() < 1e-12);
    /// ```
    pub fn derived<M>(&self, map: &M) -> Result<(M::Output, Option<M::Output>)>
    where
        M: Reverse<P>,
        M::Output: Euclidean<R>,
    {
        let value = map.forward(&self.parameters)?;
        let Some(c) = &self.covariance else {
            return Ok((value, None));
        };
        let j = jacobian(map, &self.parameters)?;
        let cov = j.dot(c).dot(&j.t());
        let se: Vec<R> = cov.diag().iter().map(|v| v.max(R::zero()).sqrt()).collect();
        let se = value.rebuild_from_coordinates(&se)?;
        Ok((value, Some(se)))
    }
}

/// Student's t quantile: the `p` quantile with `dof` degrees of freedom.
fn student_t_quantile(dof: usize, p: f64) -> Result<f64> {
    use statrs::distribution::{ContinuousCDF, StudentsT};
    let t = StudentsT::new(0.0, 1.0, dof as f64).map_err(|_| Error::InvalidSetting {
        name: "degrees of freedom",
        value: dof.to_string(),
        reason: "a t distribution needs at least 1",
    })?;
    Ok(t.inverse_cdf(p))
}

impl<P: Euclidean<R>, R: Real> fmt::Display for FitReport<P, R> {
    /// A sentence on how the fit ended, the residual summary, then a table
    /// with one row per parameter coordinate (in the order of
    /// [`Euclidean::coordinates`]): estimate, standard error and 95%
    /// confidence interval; then the correlation matrix.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{} after {} iterations ({} residual evaluations)",
            self.stop, self.iterations, self.evaluations
        )?;
        write!(
            f,
            "residual sum of squares {:.6e}, {} degrees of freedom",
            self.residual_sum_of_squares, self.degrees_of_freedom
        )?;
        match self.residual_standard_deviation {
            Some(s) => writeln!(f, ", residual standard deviation {s:.6e}")?,
            None => writeln!(f)?,
        }
        if !self.undetermined.is_empty() {
            writeln!(
                f,
                "not determined by the residuals: coordinates {:?}",
                self.undetermined
            )?;
        }
        let estimates = self.parameters.coordinates();
        let errors = self.standard_errors.as_ref().map(Euclidean::coordinates);
        let intervals = self.confidence_intervals(0.95).ok().flatten();
        writeln!(
            f,
            "{:>10}  {:>16}  {:>16}  {:>33}",
            "coordinate", "estimate", "standard error", "95% confidence interval"
        )?;
        for (i, p) in estimates.iter().enumerate() {
            let (se, ci) = match (&errors, &intervals) {
                (Some(e), Some(c)) => (
                    format!("{:.6e}", e[i]),
                    format!("{:>16.6e} {:>16.6e}", c[i].0, c[i].1),
                ),
                _ => ("not available".to_string(), "not available".to_string()),
            };
            writeln!(f, "{i:>10}  {p:>16.9e}  {se:>16}  {ci:>33}")?;
        }
        if let Some(c) = self.correlation() {
            writeln!(f, "correlation")?;
            for row in c.rows() {
                let cells: Vec<String> = row.iter().map(|v| format!("{v:>7.3}")).collect();
                writeln!(f, "{:>10}  {}", "", cells.join(" "))?;
            }
        }
        Ok(())
    }
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Method {
    GaussNewton,
    LevenbergMarquardt,
}

/// Settings of a least-squares fit, checked at construction.
///
/// Levenberg-Marquardt (Marquardt, 1963) solves a damped system and
/// accepts a step only if it lowers the residual sum of squares; the
/// scaling, the damping rule and the geodesic acceleration are described at
/// [`LeastSquares::levenberg_marquardt`]. Gauss-Newton takes the undamped
/// step every time. Both test for convergence when every Jacobian column is
/// nearly orthogonal to the residuals (`gradient_tolerance`, on the cosine),
/// when the step is small against the parameters (`step_tolerance`) or when
/// a step lowers the sum of squares by less than `reduction_tolerance` of
/// it; Levenberg-Marquardt calls the last two converged only where the
/// gradient is small too, and a stall otherwise ([`Stop`]).
///
/// # Example
///
/// Fitting `y = b1 (1 - exp(-b2 x))` to points made from `b = (2, 0.5)`:
///
/// ```
/// use revdiff::{constant, fst, snd, Compose, CurveResiduals, Exp, Id, LeastSquares, MulPair, Neg, SubPair};
///
/// // ((b1, b2), x) -> b1 (1 - exp(-b2 x)), from catalogue pieces.
/// let one_minus = constant(1.0_f64).pair(Id).then(SubPair);
/// let model = fst().then(fst())
///     .pair(fst().then(snd()).pair(snd()).then(MulPair).then(Neg).then(Exp).then(one_minus))
///     .then(MulPair);
/// let xs: Vec<f64> = (1..=8).map(f64::from).collect();
/// let ys = xs.iter().map(|x| 2.0 * (1.0 - (-0.5 * x).exp())).collect();
/// let residuals = CurveResiduals::new(model, xs, ys).unwrap();
///
/// let report = LeastSquares::levenberg_marquardt().fit(&residuals, (1.0, 1.0)).unwrap();
/// assert!(report.stop.converged());
/// assert!((report.parameters.0 - 2.0).abs() < 1e-9 && (report.parameters.1 - 0.5).abs() < 1e-9);
/// assert!(report.residual_sum_of_squares < 1e-20);
/// ```
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LeastSquares {
    method: Method,
    max_iterations: usize,
    initial_damping: f64,
    step_tolerance: f64,
    gradient_tolerance: f64,
    reduction_tolerance: f64,
}

/// Damping beyond which no step is worth trying.
const MAX_DAMPING: f64 = 1e16;

impl LeastSquares {
    /// Levenberg-Marquardt with initial damping `1e-3`, at most 2,000
    /// iterations, and tolerances `1e-12` (step), `1e-12` (gradient) and
    /// `1e-15` (reduction).
    ///
    /// The damped system is `(J'J + lambda D^2) d = -J'r`, with `D^2` the
    /// largest diagonal of `J'J` seen so far for each parameter (Moré, 1978,
    /// "The Levenberg-Marquardt algorithm: implementation and theory"), so
    /// the steps do not depend on the parameters' units. After an accepted
    /// step `lambda` shrinks by up to 3 as the quadratic model predicted the
    /// decrease well, and after a refused one it grows by 2, 4, 8, ...
    /// (Nielsen, 1999, "Damping parameter in Marquardt's method"). Each step
    /// adds geodesic acceleration (Transtrum and Sethna, 2012, "Improvements
    /// to the Levenberg-Marquardt algorithm for nonlinear least-squares
    /// minimization"): the residuals' second derivative along the step, from
    /// one extra evaluation, bends the step along a curved valley, and a
    /// step whose acceleration is large against its velocity is refused.
    ///
    /// It stops as converged only where the first-order conditions hold
    /// (see [`Stop`]); a plateau is [`Stop::Stalled`] and parameters the
    /// residuals ignore are [`Stop::Undetermined`]. On the 19 NIST StRD
    /// problems in the test suite it reaches the certified values to 6
    /// digits or more from both starting points; MGH10 from its far start
    /// needs about 1,000 iterations, the others fewer than 150.
    pub fn levenberg_marquardt() -> Self {
        LeastSquares {
            method: Method::LevenbergMarquardt,
            max_iterations: 2000,
            initial_damping: 1e-3,
            step_tolerance: 1e-12,
            gradient_tolerance: 1e-12,
            reduction_tolerance: 1e-15,
        }
    }

    /// Gauss-Newton, with the same limits and tolerances. It converges fast
    /// from close starts and may diverge from far ones.
    pub fn gauss_newton() -> Self {
        LeastSquares {
            method: Method::GaussNewton,
            ..Self::levenberg_marquardt()
        }
    }

    /// Sets the iteration limit (at least 1).
    pub fn max_iterations(mut self, n: usize) -> Result<Self> {
        if n == 0 {
            return Err(Error::InvalidSetting {
                name: "max iterations",
                value: "0".to_string(),
                reason: "must be at least 1",
            });
        }
        self.max_iterations = n;
        Ok(self)
    }

    /// Sets the starting damping `lambda` of Levenberg-Marquardt (positive).
    pub fn initial_damping(mut self, lambda: f64) -> Result<Self> {
        crate::learning::schedule::positive("initial damping", lambda)?;
        self.initial_damping = lambda;
        Ok(self)
    }

    /// Sets the three convergence tolerances (each non-negative and finite;
    /// zero switches a test off).
    pub fn tolerances(mut self, step: f64, gradient: f64, reduction: f64) -> Result<Self> {
        for (name, v) in [
            ("step tolerance", step),
            ("gradient tolerance", gradient),
            ("reduction tolerance", reduction),
        ] {
            if !(v >= 0.0 && v.is_finite()) {
                return Err(Error::InvalidSetting {
                    name,
                    value: v.to_string(),
                    reason: "must be non-negative and finite",
                });
            }
        }
        self.step_tolerance = step;
        self.gradient_tolerance = gradient;
        self.reduction_tolerance = reduction;
        Ok(self)
    }

    /// Fits the parameters, starting from `start`.
    ///
    /// Errors: non-finite residuals or Jacobian at the start or at an
    /// accepted point ([`Error::NonFinite`]), a Jacobian not shaped `m x n`
    /// ([`Error::ShapeMismatch`]), and any error of the residual map.
    /// Levenberg-Marquardt treats a trial point with non-finite residuals as a
    /// refused step. Reaching the iteration limit, a singular Gauss-Newton
    /// system and a Gauss-Newton step to non-finite residuals are not errors:
    /// the report holds the parameters reached and says why it stopped
    /// ([`Stop::converged`] is false).
    pub fn fit<P, R, F>(&self, residuals: &F, start: P) -> Result<FitReport<P, R>>
    where
        R: Real,
        F: Residuals<P, Real = R>,
        P: Euclidean<R>,
    {
        if self.method == Method::LevenbergMarquardt {
            return self.fit_damped(residuals, start);
        }
        let real = |v: f64| R::from(v).expect("settings fit every real type");
        let mut p = start.coordinates();
        let n = p.len();
        let (mut r, mut j) = at_the_start(residuals, &start, n)?;
        let mut rss = r.dot(&r);
        let mut evaluations = 1;
        let mut iterations = 0;
        let stop = loop {
            let jtj = j.t().dot(&j);
            let g = j.t().dot(&r);
            if let Some(stop) = self.before_step(rss, &jtj, &g, iterations) {
                break stop;
            }
            iterations += 1;
            let current = Array1::from(p.clone());
            // The undamped step; Levenberg-Marquardt is `fit_damped`.
            let Some(step) = solve_symmetric(&jtj, &g.mapv(|v| -v)) else {
                break Stop::Singular;
            };
            let trial = &current + &step;
            let trial_p = start.rebuild_from_coordinates(trial.as_slice().expect("contiguous"))?;
            let trial_r = residuals.residuals(&trial_p);
            evaluations += 1;
            if let Ok(tr) = &trial_r {
                same_length(tr, &r)?;
            }
            let trial_rss = match &trial_r {
                Ok(tr) if tr.iter().all(|v| v.is_finite()) => tr.dot(tr),
                _ => break Stop::NonFiniteStep,
            };
            let step_norm = step.dot(&step).sqrt();
            let size = current.dot(&current).sqrt();
            let reduction = rss - trial_rss;
            p = trial.to_vec();
            let new_p = start.rebuild_from_coordinates(&p)?;
            (r, j) = residuals.residuals_and_jacobian(&new_p)?;
            evaluations += 1;
            check_pair(&r, &j, n, "after a step")?;
            let old_rss = rss;
            rss = r.dot(&r);
            let step_tol = real(self.step_tolerance);
            if step_norm <= step_tol * (size + step_tol) {
                break Stop::SmallStep;
            }
            if reduction >= R::zero() && reduction <= real(self.reduction_tolerance) * old_rss {
                break Stop::SmallDecrease;
            }
        };
        self.report(&start, &p, &r, &j, iterations, evaluations, stop)
    }

    /// The report at coordinates `p` with residuals `r` and Jacobian `j`.
    #[allow(clippy::too_many_arguments)]
    fn report<P: Euclidean<R>, R: Real>(
        &self,
        start: &P,
        p: &[R],
        r: &Array1<R>,
        j: &Array2<R>,
        iterations: usize,
        evaluations: usize,
        stop: Stop,
    ) -> Result<FitReport<P, R>> {
        let n = p.len();
        let rss = r.dot(r);
        let parameters = start.rebuild_from_coordinates(p)?;
        let m = r.len();
        let covariance = if m > n {
            let s2 = rss / R::from(m - n).expect("counts fit every real type");
            inverse_symmetric(&j.t().dot(j)).map(|inv| inv * s2)
        } else {
            None
        };
        let standard_errors = covariance.as_ref().and_then(|c| {
            let se: Vec<R> = c.diag().iter().map(|v| v.sqrt()).collect();
            parameters.rebuild_from_coordinates(&se).ok()
        });
        Ok(FitReport {
            parameters,
            iterations,
            evaluations,
            residual_sum_of_squares: rss,
            degrees_of_freedom: m.saturating_sub(n),
            residual_standard_deviation: (m > n)
                .then(|| (rss / R::from(m - n).expect("counts fit every real type")).sqrt()),
            standard_errors,
            covariance,
            stop,
            undetermined: undetermined(j),
        })
    }

    /// The tests made before every step, by both methods: an exact fit, a
    /// small gradient, the iteration limit.
    fn before_step<R: Real>(
        &self,
        rss: R,
        jtj: &Array2<R>,
        g: &Array1<R>,
        iterations: usize,
    ) -> Option<Stop> {
        if rss == R::zero() {
            Some(Stop::ExactFit)
        } else if self.gradient_small(jtj, g, rss) {
            Some(Stop::SmallGradient)
        } else if iterations == self.max_iterations {
            Some(Stop::IterationLimit)
        } else {
            None
        }
    }

    /// The gradient test: the largest cosine between the residual vector and
    /// a Jacobian column, `|J_k' r| / (|J_k| |r|)`.
    /// Levenberg-Marquardt with Moré's scaling, Nielsen's damping update and
    /// geodesic acceleration; see [`LeastSquares::levenberg_marquardt`].
    fn fit_damped<P, R, F>(&self, residuals: &F, start: P) -> Result<FitReport<P, R>>
    where
        R: Real,
        F: Residuals<P, Real = R>,
        P: Euclidean<R>,
    {
        let real = |v: f64| R::from(v).expect("settings fit every real type");
        let mut p = Array1::from(start.coordinates());
        let n = p.len();
        let (mut r, mut j) = at_the_start(residuals, &start, n)?;
        let mut evaluations = 1;
        let mut iterations = 0;
        let mut rss = r.dot(&r);
        let mut jtj = j.t().dot(&j);
        // Moré's scaling: each parameter's damping follows the largest
        // curvature it has shown, so the step is invariant to its units.
        let mut scale = jtj.diag().to_owned();
        let mut lambda = real(self.initial_damping);
        let mut growth = real(2.0);
        let mut quiet_steps = 0;
        let at = |q: &Array1<R>| -> Result<P> {
            start.rebuild_from_coordinates(q.as_slice().expect("contiguous"))
        };
        let stop = loop {
            let g = j.t().dot(&r);
            if let Some(stop) = self.before_step(rss, &jtj, &g, iterations) {
                break stop;
            }
            iterations += 1;
            let largest = jtj.diag().iter().fold(R::zero(), |m, v| m.max(*v));
            let floor = if largest > R::zero() {
                largest * real(1e-12)
            } else {
                R::one()
            };
            for (s, d) in scale.iter_mut().zip(jtj.diag()) {
                *s = s.max(*d).max(floor);
            }
            let accepted = loop {
                if lambda > real(MAX_DAMPING) {
                    break None;
                }
                let mut a = jtj.clone();
                for k in 0..n {
                    a[[k, k]] = a[[k, k]] + lambda * scale[k];
                }
                let Some(velocity) = solve_symmetric(&a, &g.mapv(|v| -v)) else {
                    lambda = lambda * growth;
                    growth = growth * real(2.0);
                    continue;
                };
                // Geodesic acceleration (Transtrum and Sethna, 2012): the
                // residuals' second derivative along the step, by one
                // extra evaluation, bends the step along a curved valley.
                let jv = j.dot(&velocity);
                let size = |v: &Array1<R>| {
                    v.iter()
                        .zip(&scale)
                        .fold(R::zero(), |t, (x, s)| t + *x * *x * *s)
                        .sqrt()
                };
                let mut step = velocity.clone();
                // Near a minimum the step is tiny and a second difference
                // would be rounding noise: no acceleration there.
                if size(&velocity) > real(1e-6) * size(&p) {
                    let h = real(0.1);
                    let probe = residuals.residuals(&at(&(&p + &(&velocity * h)))?);
                    evaluations += 1;
                    if let Ok(rh) = &probe
                        && rh.len() == r.len()
                        && rh.iter().all(|v| v.is_finite())
                    {
                        let second = (&(rh - &r) / h - &jv) * (real(2.0) / h);
                        if let Some(acc) = solve_symmetric(&a, &j.t().dot(&second).mapv(|v| -v)) {
                            // Too large an acceleration means the quadratic
                            // model is not to be trusted this far: damp more.
                            if real(2.0) * size(&acc) > real(0.75) * size(&velocity) {
                                lambda = lambda * growth;
                                growth = growth * real(2.0);
                                continue;
                            }
                            step = &velocity + &(acc * real(0.5));
                        }
                    }
                }
                let trial = &p + &step;
                let trial_r = residuals.residuals(&at(&trial)?);
                evaluations += 1;
                // The decrease as sum (r - t)(r + t): no cancellation of two
                // nearly equal sums of squares, so the last digits still
                // count near the minimum. Likewise the predicted decrease,
                // -(2 r + J v)' J v.
                if let Ok(tr) = &trial_r {
                    same_length(tr, &r)?;
                }
                let decrease = match &trial_r {
                    Ok(tr) if tr.iter().all(|v| v.is_finite()) => (&r - tr).dot(&(&r + tr)),
                    _ => R::neg_infinity(),
                };
                let predicted = -(&(&r * real(2.0)) + &jv).dot(&jv);
                let gain = decrease / predicted;
                if decrease > R::zero() && predicted > R::zero() && gain > R::zero() {
                    let trial_rss = rss - decrease;
                    // Nielsen (1999): shrink the damping by up to 3 when the
                    // model predicted the decrease well.
                    let t = real(2.0) * gain - R::one();
                    lambda = lambda * (R::one() - t * t * t).max(real(1.0 / 3.0));
                    growth = real(2.0);
                    break Some((trial, step, trial_rss));
                }
                lambda = lambda * growth;
                growth = growth * real(2.0);
            };
            let Some((trial, step, trial_rss)) = accepted else {
                // No damped step lowers the sum of squares: a minimum if the
                // gradient is small there, else a stall.
                break self.settled(&jtj, &g, rss, residuals.target_scale(), Stop::DampingLimit);
            };
            let step_size = step
                .iter()
                .zip(&scale)
                .fold(R::zero(), |t, (x, s)| t + *x * *x * *s)
                .sqrt();
            let size = p
                .iter()
                .zip(&scale)
                .fold(R::zero(), |t, (x, s)| t + *x * *x * *s)
                .sqrt();
            let old_rss = rss;
            p = trial;
            (r, j) = residuals.residuals_and_jacobian(&at(&p)?)?;
            evaluations += 1;
            check_pair(&r, &j, n, "after a step")?;
            rss = r.dot(&r);
            let _ = trial_rss;
            jtj = j.t().dot(&j);
            let g = j.t().dot(&r);
            let step_tol = real(self.step_tolerance);
            let decrease = old_rss - rss;
            let candidate = if step_size <= step_tol * (size + step_tol) {
                Some(Stop::SmallStep)
            } else if decrease >= R::zero() && decrease <= real(self.reduction_tolerance) * old_rss
            {
                Some(Stop::SmallDecrease)
            } else {
                None
            };
            if let Some(stop) = candidate {
                // A small step or decrease ends the fit at once where the
                // gradient is strictly small, after a few more tries where
                // it is only loosely small (the last digits still come),
                // and as a stall where it is not small at all.
                let scale_y = residuals.target_scale();
                match self.settled(&jtj, &g, rss, scale_y, stop) {
                    Stop::Stalled => break Stop::Stalled,
                    _ if self.strictly_settled(&jtj, &g, rss, scale_y) || quiet_steps >= 4 => {
                        break stop;
                    }
                    _ => quiet_steps += 1,
                }
            }
        };
        let stop = if stop.converged() && !undetermined(&j).is_empty() {
            Stop::Undetermined
        } else {
            stop
        };
        self.report(
            &start,
            p.as_slice().expect("contiguous"),
            &r,
            &j,
            iterations,
            evaluations,
            stop,
        )
    }

    /// `stop` if the first-order conditions hold (a small scaled gradient,
    /// within the square root of the gradient tolerance), else a stall.
    ///
    /// Each residual carries rounding of about `eps` times the values it is
    /// the difference of, so `J_k' r` cannot fall below about
    /// `|J_k| eps |y|` whatever the parameters: that much is allowed too
    /// (64 times, for the sums), when the residuals know their scale `|y|`.
    fn settled<R: Real>(
        &self,
        jtj: &Array2<R>,
        g: &Array1<R>,
        rss: R,
        target_scale: Option<R>,
        stop: Stop,
    ) -> Stop {
        let real = |v: f64| R::from(v).expect("small constants fit every real type");
        let tol = real(self.gradient_tolerance.sqrt());
        let rounding = target_scale.map_or(R::zero(), |y| real(64.0) * R::epsilon() * y);
        let small = g.iter().enumerate().all(|(k, gk)| {
            let column = jtj[[k, k]].sqrt();
            gk.abs() <= column * (tol * rss.sqrt() + rounding)
        });
        if small { stop } else { Stop::Stalled }
    }

    /// Whether the first-order conditions hold at the strict gradient
    /// tolerance (plus the rounding allowance of [`settled`](Self::settled)).
    fn strictly_settled<R: Real>(
        &self,
        jtj: &Array2<R>,
        g: &Array1<R>,
        rss: R,
        target_scale: Option<R>,
    ) -> bool {
        let strict = LeastSquares {
            gradient_tolerance: self.gradient_tolerance * self.gradient_tolerance,
            ..*self
        };
        strict.settled(jtj, g, rss, target_scale, Stop::SmallStep) == Stop::SmallStep
    }

    fn gradient_small<R: Real>(&self, jtj: &Array2<R>, g: &Array1<R>, rss: R) -> bool {
        let tol = R::from(self.gradient_tolerance).expect("settings fit every real type");
        g.iter().enumerate().all(|(k, gk)| {
            let scale = (jtj[[k, k]] * rss).sqrt();
            scale == R::zero() || gk.abs() <= tol * scale
        })
    }
}

/// The parameter coordinates the residuals do not determine: those whose
/// Jacobian column vanishes, or lies (to working precision) in the span of
/// the columns before it, found by Gram-Schmidt on the columns scaled to
/// unit length. In a dependent set, the later coordinates are named.
fn undetermined<R: Real>(j: &Array2<R>) -> Vec<usize> {
    let tiny = R::from(1e-10).expect("small constants fit every real type");
    let norms: Vec<R> = j.columns().into_iter().map(|c| c.dot(&c).sqrt()).collect();
    let largest = norms.iter().fold(R::zero(), |m, v| m.max(*v));
    let mut basis: Vec<Array1<R>> = Vec::new();
    let mut out = Vec::new();
    for (k, column) in j.columns().into_iter().enumerate() {
        if norms[k] <= tiny * largest {
            out.push(k);
            continue;
        }
        let mut v = column.mapv(|x| x / norms[k]);
        for q in &basis {
            let along = q.dot(&v);
            v = v - q * along;
        }
        let left = v.dot(&v).sqrt();
        if left <= tiny.sqrt() {
            out.push(k);
        } else {
            basis.push(v / left);
        }
    }
    out
}

/// A user's residuals must keep their length from point to point.
fn same_length<R>(trial: &Array1<R>, current: &Array1<R>) -> Result<()> {
    if trial.len() != current.len() {
        return Err(Error::shape(
            "least squares (the residuals at a trial point against those at the current point)",
            format!("({},)", current.len()),
            format!("({},)", trial.len()),
        ));
    }
    Ok(())
}

/// The residuals and Jacobian at the start, checked: shapes that fit, and
/// at least as many residuals as parameters.
fn at_the_start<R, P, F>(residuals: &F, start: &P, n: usize) -> Result<(Array1<R>, Array2<R>)>
where
    R: Real,
    F: Residuals<P, Real = R>,
    P: Euclidean<R>,
{
    let (r, j) = residuals.residuals_and_jacobian(start)?;
    check_pair(&r, &j, n, "at the start")?;
    if r.len() < n {
        return Err(Error::Underdetermined {
            residuals: r.len(),
            parameters: n,
        });
    }
    Ok((r, j))
}

/// Residuals and Jacobian finite, and the Jacobian shaped `m x n`.
fn check_pair<R: Real>(r: &Array1<R>, j: &Array2<R>, n: usize, when: &'static str) -> Result<()> {
    if j.dim() != (r.len(), n) {
        return Err(Error::shape(
            "least squares (Jacobian against residuals and parameters)",
            format!("({}, {n})", r.len()),
            format!("{:?}", j.dim()),
        ));
    }
    check_finite("residuals", when, r)?;
    check_finite("Jacobian", when, j)
}

fn check_finite<R: Real, D: ndarray::Dimension>(
    what: &'static str,
    when: &'static str,
    a: &ndarray::Array<R, D>,
) -> Result<()> {
    match a.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(i) => Err(Error::NonFinite {
            operation: "least squares",
            detail: format!("in the {what} {when}, at flat index {i}"),
        }),
    }
}

/// The Cholesky factor `L` of `D A D`, `D = diag(A)^-1/2`, which puts every
/// diagonal at 1 so that badly scaled parameters lose no digits.
/// `None` when `A` is singular or not positive definite.
fn scaled_cholesky<R: Real>(a: &Array2<R>) -> Option<(Array2<R>, Array1<R>)> {
    let n = a.nrows();
    let mut d = Array1::zeros(n);
    for k in 0..n {
        let v = a[[k, k]];
        if !(v > R::zero() && v.is_finite()) {
            return None;
        }
        d[k] = R::one() / v.sqrt();
    }
    let mut l = Array2::zeros((n, n));
    for i in 0..n {
        for k in 0..=i {
            let mut sum = a[[i, k]] * d[i] * d[k];
            for q in 0..k {
                sum = sum - l[[i, q]] * l[[k, q]];
            }
            if i == k {
                if sum.is_nan() || sum <= R::zero() {
                    return None;
                }
                l[[i, i]] = sum.sqrt();
            } else {
                l[[i, k]] = sum / l[[k, k]];
            }
        }
    }
    Some((l, d))
}

/// Solves `A x = b` for symmetric positive definite `A`.
fn solve_symmetric<R: Real>(a: &Array2<R>, b: &Array1<R>) -> Option<Array1<R>> {
    let (l, d) = scaled_cholesky(a)?;
    let n = b.len();
    // (D A D) y = D b, x = D y.
    let mut y = b * &d;
    for i in 0..n {
        for q in 0..i {
            y[i] = y[i] - l[[i, q]] * y[q];
        }
        y[i] = y[i] / l[[i, i]];
    }
    for i in (0..n).rev() {
        for q in i + 1..n {
            y[i] = y[i] - l[[q, i]] * y[q];
        }
        y[i] = y[i] / l[[i, i]];
    }
    Some(y * &d)
}

/// The inverse of a symmetric positive definite matrix, column by column.
fn inverse_symmetric<R: Real>(a: &Array2<R>) -> Option<Array2<R>> {
    let n = a.nrows();
    let mut inv = Array2::zeros((n, n));
    for k in 0..n {
        let mut e = Array1::zeros(n);
        e[k] = R::one();
        inv.index_axis_mut(Axis(1), k)
            .assign(&solve_symmetric(a, &e)?);
    }
    Some(inv)
}
