//! The laws on one map, each evaluated at one case.
//!
//! The `*_exact` dispatchers hold the laws that are identities among the
//! map's own passes; they are written against any [`ComparisonIn`], so the same
//! code runs within a tolerance on real spaces and exactly on finite
//! domains. The `*_real` dispatchers add the laws that need real arithmetic
//! (homogeneity, and comparisons with central differences).

use super::case::Case;
use super::differences::derivative_at_zero;
use super::judge::{ComparisonIn, Discrepancy, Finding, Outcome, Term, Tolerance, term};
use super::law::Law;
use crate::error::Result;
use crate::map::{Map, Reverse};
use crate::space::{Euclidean, Real, Scalable, Space};
use crate::workspace::Workspace;

/// The words law 6 uses for a value that is not finite.
pub(crate) const NOT_FINITE: &str = "is not finite";

/// Laws 1 (additive, zero change) and 6 for any map; `None` for other laws.
pub(crate) fn map_law_exact<A, F, J>(
    judge: &J,
    law: Law,
    f: &F,
    c: &Case<A, F::Output>,
) -> Option<Outcome>
where
    A: Space,
    F: Map<A>,
    J: ComparisonIn<A> + ComparisonIn<F::Output>,
{
    Some(match law {
        Law::Additive => additive(judge, f, c),
        Law::ZeroChange => zero_change(judge, f, c),
        Law::ShapesFinite => shapes_finite(judge, f, c),
        Law::ReusingAgrees => reusing_agrees(judge, f, c),
        _ => return None,
    })
}

/// The exact laws of [`map_law_exact`], and laws 3, 4 and 5 through the
/// reverse map.
pub(crate) fn reverse_law_exact<A, F, J>(
    judge: &J,
    law: Law,
    f: &F,
    c: &Case<A, F::Output>,
) -> Option<Outcome>
where
    A: Space,
    F: Reverse<A>,
    J: ComparisonIn<A> + ComparisonIn<F::Output>,
{
    Some(match law {
        Law::Symmetric => symmetric_exact(judge, f, c),
        Law::LinearInChange => linear_in_change(judge, f, c),
        Law::ReverseAgrees => reverse_agrees(judge, f, c),
        _ => return map_law_exact(judge, law, f, c),
    })
}

/// Every law of [`Law::FOR_MAPS`] on a real map.
pub(crate) fn map_law_real<R, A, F>(
    tol: &Tolerance<R>,
    law: Law,
    f: &F,
    c: &Case<A, F::Output>,
) -> Option<Outcome>
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let tol = &tol.floored(natural_scale(law, tol.natural_output(), c));
    Some(match law {
        Law::Homogeneous => homogeneous(tol, f, c),
        Law::Derivative => derivative(tol, f, c),
        Law::Symmetric => symmetric_by_differences(tol, f, c),
        _ => return map_law_exact(tol, law, f, c),
    })
}

/// Every law of [`Law::FOR_REVERSE`] on a real map with a reverse map.
pub(crate) fn reverse_law_real<R, A, F>(
    tol: &Tolerance<R>,
    law: Law,
    f: &F,
    c: &Case<A, F::Output>,
) -> Option<Outcome>
where
    R: Real,
    A: Euclidean<R>,
    F: Reverse<A>,
    F::Output: Euclidean<R>,
{
    let tol = &tol.floored(natural_scale(law, tol.natural_output(), c));
    Some(match law {
        Law::Homogeneous => homogeneous(tol, f, c),
        Law::Derivative => derivative(tol, f, c),
        _ => return reverse_law_exact(tol, law, f, c),
    })
}

/// The size an exact identity's values would have if `f` varied on the
/// scale of its input: `output_size / s` per derivative, times the sizes of
/// the changes the law is linear in. The input's scale `s` is its smallest
/// coordinate in absolute value, at least 1: a map of a large input (`ln`
/// at `1e300`) varies slowly, but a map of an input with one large
/// coordinate may not (a softmax varies on unit scale wherever its input
/// is). `output_size` is `|f(x)|`
/// at order 1 (see [`output_size`]) and the natural size of `R[f](x, w)`
/// at order 2 (see [`reverse_output_size`]).
///
/// The backward passes of saturating maps (a softmax at +-700, `tanh` at
/// 30) are tiny because large terms cancel, and their rounding is relative
/// to those terms, not to the tiny result. Such terms cannot be seen from
/// outside; this is the size they have when the map is not saturated, and
/// the least scale an exact identity's rounding is measured against.
fn natural_scale<R, A, B>(law: Law, output_size: R, c: &Case<A, B>) -> R
where
    R: Real,
    A: Euclidean<R>,
    B: Euclidean<R>,
{
    let x_size = input_scale(&c.x);
    let per_derivative = output_size / x_size;
    let (w, w2, u, v) = (
        norm(c.w.coordinates()),
        norm(c.w2.coordinates()),
        norm(c.u.coordinates()),
        norm(c.v.coordinates()),
    );
    match law {
        Law::Additive | Law::Homogeneous | Law::ReverseAgrees | Law::ReusingAgrees => {
            per_derivative * w.max(w2)
        }
        Law::LinearInChange => per_derivative * w2 * u,
        // The size of t -> <w, f(x + t v)>, whose rounding the central
        // differences must allow for.
        Law::Derivative => output_size * w,
        Law::Symmetric => per_derivative / x_size * w * u * v,
        _ => R::zero(),
    }
}

/// The smallest `|x_i|`, at least 1 (see [`natural_scale`]).
fn input_scale<R: Real, A: Euclidean<R>>(x: &A) -> R {
    x.coordinates()
        .iter()
        .fold(R::infinity(), |m, v| m.min(v.abs()))
        .max(R::one())
}

fn norm<R: Real>(coords: Vec<R>) -> R {
    coords.iter().fold(R::zero(), |a, v| a + *v * *v).sqrt()
}

/// `|f(x)|`, the output size of [`natural_scale`] at order 1 (0 if `f`
/// fails at `x`: the laws report that).
pub(crate) fn output_size<R, A, F>(f: &F, c: &Case<A, F::Output>) -> R
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    f.forward(&c.x).map_or(R::zero(), |y| norm(y.coordinates()))
}

/// The natural size of `R[f](x, w)`, the output size of [`natural_scale`]
/// at order 2: the larger of its value and `|f(x)| max(|w|, |w2|) / s`
/// (`s` the input's scale), which a saturated map's tiny backward pass falls far
/// below. (`w2` counts because at order 2 the change of `w` is `w2`: the
/// derivative of `R[f]` in `w` matters even where `w` is 0.)
pub(crate) fn reverse_output_size<R, A, F>(f: &F, c: &Case<A, F::Output>) -> R
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let back = f
        .backward(&c.x, &c.w)
        .map_or(R::zero(), |b| norm(b.coordinates()));
    let natural = output_size(f, c) * norm(c.w.coordinates()).max(norm(c.w2.coordinates()))
        / input_scale(&c.x);
    back.max(natural)
}

fn additive<A: Space, F: Map<A>, J: ComparisonIn<A>>(
    j: &J,
    f: &F,
    c: &Case<A, F::Output>,
) -> Outcome {
    let (_, keep) = f.forward_memo(&c.x)?;
    let a = f.backward_memo(&keep, &c.w)?;
    let b = f.backward_memo(&keep, &c.w2)?;
    let both = f.backward_memo(&keep, &c.w.try_add(&c.w2)?)?;
    j.same(
        ("R[f](x, w) + R[f](x, w2)", &a.try_add(&b)?),
        ("R[f](x, w + w2)", &both),
        &[&a, &b],
    )
}

fn zero_change<A: Space, F: Map<A>, J: ComparisonIn<A>>(
    j: &J,
    f: &F,
    c: &Case<A, F::Output>,
) -> Outcome {
    let (_, keep) = f.forward_memo(&c.x)?;
    let typical = f.backward_memo(&keep, &c.w)?;
    let at_zero = f.backward_memo(&keep, &c.w.zero_like())?;
    j.same(
        ("0", &c.x.zero_like()),
        ("R[f](x, 0)", &at_zero),
        &[&typical],
    )
}

fn shapes_finite<A, F, J>(j: &J, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    A: Space,
    F: Map<A>,
    J: ComparisonIn<A> + ComparisonIn<F::Output>,
{
    let (y, keep) = f.forward_memo(&c.x)?;
    if let Some(d) = ComparisonIn::<F::Output>::defect(j, &y) {
        return Err(Discrepancy::failure(format!(
            "f(x) {NOT_FINITE} on a finite input: f(x) = {d}"
        ))
        .into());
    }
    let back = f.backward_memo(&keep, &c.w)?;
    if back.shape_string() != c.x.shape_string() {
        return Err(Discrepancy {
            expected: format!("the shape of x, {}", c.x.shape_string()),
            observed: format!("R[f](x, w) of shape {}", back.shape_string()),
            ..Discrepancy::failure("the backward pass returned a value of the wrong shape")
        }
        .into());
    }
    if let Some(d) = ComparisonIn::<A>::defect(j, &back) {
        return Err(Discrepancy::failure(format!(
            "R[f](x, w) {NOT_FINITE} on finite values: R[f](x, w) = {d}"
        ))
        .into());
    }
    Ok(())
}

/// Law 7. The first call is at `x + v` (at `x` where `f` refuses that
/// point), so that a pass which leaves stale values in its buffers, or
/// reads them, is caught.
fn reusing_agrees<A, F, J>(j: &J, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    A: Space,
    F: Map<A>,
    J: ComparisonIn<A> + ComparisonIn<F::Output>,
{
    let (y, keep) = f.forward_memo(&c.x)?;
    let back = f.backward_memo(&keep, &c.w)?;
    let back2 = f.backward_memo(&keep, &c.w2)?;
    let mut work = Workspace::new();
    let elsewhere =
        c.x.try_add(&c.v)
            .ok()
            .filter(|p| f.forward(p).is_ok())
            .unwrap_or_else(|| c.x.clone());
    let mut dx = c.x.zero_like();
    f.forward_reusing(&elsewhere, &mut work)?;
    f.backward_reusing(&elsewhere, &mut work, &c.w2, &mut dx)?;
    let reused = f.forward_reusing(&c.x, &mut work)?.clone();
    ComparisonIn::<F::Output>::same(
        j,
        ("f(x)", &y),
        ("the reusing forward pass at x", &reused),
        &[],
    )?;
    f.backward_reusing(&c.x, &mut work, &c.w, &mut dx)?;
    j.same(
        ("R[f](x, w) by the memo passes", &back),
        ("R[f](x, w) by the reusing backward pass", &dx),
        &[],
    )?;
    let mut sum = back2.clone();
    f.backward_reusing_adding(&c.x, &mut work, &c.w, &mut sum)?;
    j.same(
        ("R[f](x, w2) + R[f](x, w)", &back2.try_add(&back)?),
        (
            "R[f](x, w) added onto R[f](x, w2) by the reusing pass",
            &sum,
        ),
        &[&back, &back2],
    )
}

fn symmetric_exact<A, F, J>(j: &J, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    A: Space,
    F: Reverse<A>,
    J: ComparisonIn<A>,
{
    let g = f.rev();
    let (_, keep) = g.forward_memo(&(c.x.clone(), c.w.clone()))?;
    let (hv, _) = g.backward_memo(&keep, &c.v)?;
    let (hu, _) = g.backward_memo(&keep, &c.u)?;
    j.same_scalar(
        (
            "<v, H u> by the second reverse derivative",
            &j.inner(&c.v, &hu)?,
        ),
        (
            "<u, H v> by the second reverse derivative",
            &j.inner(&c.u, &hv)?,
        ),
    )
}

fn linear_in_change<A, F, J>(j: &J, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    A: Space,
    F: Reverse<A>,
    J: ComparisonIn<A> + ComparisonIn<F::Output>,
{
    let (_, change_part) = f.rev().backward(&(c.x.clone(), c.w.clone()), &c.u)?;
    let back = f.backward(&c.x, &c.w2)?;
    j.same_scalar(
        ("<R[f](x, w2), u>", &j.inner(&back, &c.u)?),
        (
            "<change part of R[R[f]]((x, w), u), w2>",
            &j.inner(&change_part, &c.w2)?,
        ),
    )
}

fn reverse_agrees<A, F, J>(j: &J, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    A: Space,
    F: Reverse<A>,
    J: ComparisonIn<A>,
{
    let via_map = f.rev().forward(&(c.x.clone(), c.w.clone()))?;
    let back = f.backward(&c.x, &c.w)?;
    j.same(
        ("R[f](x, w) by the backward pass", &back),
        ("rev() at (x, w)", &via_map),
        &[],
    )
}

fn homogeneous<R, A, F>(tol: &Tolerance<R>, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let s = R::from(c.s).unwrap_or_else(R::one);
    let (_, keep) = f.forward_memo(&c.x)?;
    let back = f.backward_memo(&keep, &c.w)?;
    let scaled = f.backward_memo(&keep, &c.w.scale(s))?;
    tol.same(
        ("s R[f](x, w)", &back.scale(s)),
        ("R[f](x, s w)", &scaled),
        &[],
    )
}

/// The first step of central differences along `v` at `x`: small enough
/// that no nonzero coordinate of `x` moves by more than a tenth of its size
/// (so a pole or a domain edge at 0 is not crossed), and no coordinate moves
/// by more than a tenth of the scale of `x` (its largest coordinate, at
/// least 1). Coordinates that are exactly 0 are bounded by the scale.
fn first_step<R: Real, A: Euclidean<R>>(x: &A, v: &A) -> R {
    let (xs, vs) = (x.coordinates(), v.coordinates());
    let scale = xs.iter().fold(R::one(), |m, c| m.max(c.abs()));
    let tenth = R::from(0.1).unwrap_or_else(R::one);
    let step = xs
        .iter()
        .zip(&vs)
        .filter(|(_, vi)| **vi != R::zero())
        .map(|(xi, vi)| {
            let size = if *xi != R::zero() { xi.abs() } else { scale };
            tenth * size / vi.abs()
        })
        .fold(R::infinity(), |m, h| m.min(h));
    if step.is_finite() {
        step
    } else {
        tenth * scale
    }
}

/// `d/dt phi(t)` at 0 by central differences. Where no estimate can be
/// made the case is undecided: the forward pass's finiteness is law 6's
/// business, not this law's.
fn estimate<R: Real>(
    what: &str,
    phi: impl Fn(R) -> Result<R>,
    start: R,
    noise: R,
    claimed: (R, R),
) -> std::result::Result<super::differences::Estimate<R>, Finding> {
    derivative_at_zero(phi, start, noise, claimed)
        .map_err(|why| Finding::Undecided(format!("central differences of {what} failed: {why}")))
}

/// The case with its output changes `w` and `w2` multiplied by a power of
/// two, so that `R[f](x, w)` is neither overflowing nor vanishing: every
/// law holds for every output change, and the scaling is exact, so this
/// only moves the check into the range of the floating-point numbers.
/// Cases already in range are returned unchanged.
pub(crate) fn in_range<R, A, F>(f: &F, c: &Case<A, F::Output>) -> Case<A, F::Output>
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let largest = |w: &F::Output| -> Option<R> {
        let back = f.backward(&c.x, w).ok()?;
        back.coordinates()
            .iter()
            .try_fold(R::zero(), |m, v| v.is_finite().then(|| m.max(v.abs())))
    };
    let two = R::one() + R::one();
    // Values up to a ten-thousandth of the largest float are left alone:
    // scaling down only to gain room would make products of two scaled
    // values (at order 2) underflow.
    let high = R::max_value() * R::from(1e-4).unwrap_or_else(R::epsilon);
    let power = |k: i32| two.powi(k);
    let scaled = |k: i32| Case {
        w: c.w.scale(power(k)),
        w2: c.w2.scale(power(k)),
        ..c.clone()
    };
    // Only ever scale down: a backward pass that is tiny because of
    // cancellation has rounding relative to the change, not to itself, and
    // scaling the change up would only scale that rounding up too.
    let limit = R::max_value().log2().to_i32().unwrap_or(1024);
    let mut k = 0;
    let m = loop {
        if let Some(m) = largest(&scaled(k).w) {
            break m;
        }
        // Not finite: halve by 64 binary orders at a time.
        k -= 64;
        if k <= -limit {
            return c.clone();
        }
    };
    if m > high {
        // Scale no further than needed, so that products of scaled values
        // (at order 2) do not underflow.
        k -= (m.log2() - high.log2()).ceil().to_i32().unwrap_or(0);
    }
    if k == 0 { c.clone() } else { scaled(k) }
}

/// [`in_range`], and further down by powers of two until the second
/// reverse derivative at `((x, w), u)` is finite too, for the laws that use
/// it at order 1 (3, 4 and 5).
pub(crate) fn in_range_second<R, A, F>(
    f: &F,
    rev: &F::Rev,
    c: &Case<A, F::Output>,
) -> Case<A, F::Output>
where
    R: Real,
    A: Euclidean<R>,
    F: Reverse<A>,
    F::Output: Euclidean<R>,
{
    let mut c = in_range(f, c);
    let two = R::one() + R::one();
    for _ in 0..(R::max_value().log2().to_i32().unwrap_or(1024) / 64) {
        let at = (c.x.clone(), c.w.clone());
        let finite = [&c.u, &c.v]
            .iter()
            .all(|change| match rev.backward(&at, change) {
                Ok((dx, dw)) => dx.all_finite() && dw.all_finite(),
                // Errors are for the laws to report.
                Err(_) => true,
            });
        if finite {
            break;
        }
        let by = two.powi(-64);
        c.w = c.w.scale(by);
        c.w2 = c.w2.scale(by);
    }
    c
}

fn derivative<R, A, F>(tol: &Tolerance<R>, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    let back = f.backward(&c.x, &c.w)?;
    let observed = term(&back, &c.v)?;
    let along = |t: R| -> Result<R> {
        let y = f.forward(&c.x.try_add(&c.v.scale(t))?)?;
        Ok(term(&c.w, &y)?.value)
    };
    // Rounding x + t v moves phi by about eps sum |x_i| |d phi / d x_i|,
    // and the gradient of phi is the backward pass.
    let noise =
        c.x.coordinates()
            .iter()
            .zip(back.coordinates())
            .fold(R::zero(), |acc, (x, g)| acc + (*x * g).abs())
            * R::epsilon()
            + tol.scale_floor() * R::epsilon();
    let est = estimate(
        "t -> <w, f(x + t v)>",
        along,
        first_step(&c.x, &c.v),
        noise,
        (
            observed.value,
            R::from(16.0).unwrap_or_else(R::one) * R::epsilon() * observed.magnitude,
        ),
    )?;
    tol.against_estimate(
        ("<w, Df(x) v> by central differences of f", est.value),
        est.error,
        ("<R[f](x, w), v>", &observed),
    )
}

fn symmetric_by_differences<R, A, F>(tol: &Tolerance<R>, f: &F, c: &Case<A, F::Output>) -> Outcome
where
    R: Real,
    A: Euclidean<R>,
    F: Map<A>,
    F::Output: Euclidean<R>,
{
    // <u, d/dt R[f](x + t v, w)> and <v, d/dt R[f](x + t u, w)>.
    let mixed = |along: &A, against: &A| {
        let phi = |t: R| -> Result<R> {
            let back = f.backward(&c.x.try_add(&along.scale(t))?, &c.w)?;
            Ok(term(against, &back)?.value)
        };
        estimate(
            "the backward pass along an input change",
            phi,
            first_step(&c.x, along),
            R::zero(),
            (R::zero(), R::zero()),
        )
    };
    let hv = mixed(&c.v, &c.u)?;
    let hu = mixed(&c.u, &c.v)?;
    let observed = Term {
        value: hv.value,
        magnitude: hv.value.abs(),
    };
    tol.against_estimate(
        (
            "<v, H u> by central differences of the backward pass",
            hu.value,
        ),
        hu.error + hv.error,
        (
            "<u, H v> by central differences of the backward pass",
            &observed,
        ),
    )
}
