//! The laws on one map, each evaluated at one case.
//!
//! The `*_exact` dispatchers hold the laws that are identities among the
//! map's own passes; they are written against any [`ComparisonIn`], so the same
//! code runs within a tolerance on real spaces and exactly on finite
//! domains. The `*_real` dispatchers add the laws that need real arithmetic
//! (homogeneity, and comparisons with central differences).

use super::case::Case;
use super::differences::derivative_at_zero;
use super::judge::{ComparisonIn, Discrepancy, Outcome, Term, Tolerance, term};
use super::law::Law;
use crate::error::Result;
use crate::map::{Map, Reverse};
use crate::space::{Euclidean, Real, Scalable, Space};

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
    Some(match law {
        Law::Homogeneous => homogeneous(tol, f, c),
        Law::Derivative => derivative(tol, f, c),
        _ => return reverse_law_exact(tol, law, f, c),
    })
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
            "f(x) is not finite on a finite input: f(x) = {d}"
        )));
    }
    let back = f.backward_memo(&keep, &c.w)?;
    if back.shape_string() != c.x.shape_string() {
        return Err(Discrepancy {
            expected: format!("the shape of x, {}", c.x.shape_string()),
            observed: format!("R[f](x, w) of shape {}", back.shape_string()),
            error: None,
            tolerance: None,
            measure: "the backward pass returned a value of the wrong shape".to_string(),
        });
    }
    if let Some(d) = ComparisonIn::<A>::defect(j, &back) {
        return Err(Discrepancy::failure(format!(
            "R[f](x, w) is not finite on finite values: R[f](x, w) = {d}"
        )));
    }
    Ok(())
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

/// `d/dt phi(t)` at 0 by central differences, as a breach on failure.
fn estimate<R: Real>(
    what: &str,
    phi: impl Fn(R) -> Result<R>,
    start: R,
) -> std::result::Result<super::differences::Estimate<R>, Discrepancy> {
    derivative_at_zero(phi, start)
        .map_err(|why| Discrepancy::failure(format!("central differences of {what} failed: {why}")))
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
    let est = estimate("t -> <w, f(x + t v)>", along, first_step(&c.x, &c.v))?;
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
