//! The laws comparing a map `h` with maps it is claimed to equal, each
//! evaluated at one case, against any [`ComparisonIn`].

use super::case::Case;
use super::judge::{ComparisonIn, Outcome};
use crate::map::{Map, Reverse};
use crate::space::Space;

/// `a` and `b` agree in value and backward pass at `x`, `w`.
pub(crate) fn same_map<A, B, M, N, J>(j: &J, a: &M, b: &N, c: &Case<A, B>) -> Outcome
where
    A: Space,
    B: Space,
    M: Map<A, Output = B>,
    N: Map<A, Output = B>,
    J: ComparisonIn<A> + ComparisonIn<B>,
{
    let (ya, ka) = a.forward_memo(&c.x)?;
    let (yb, kb) = b.forward_memo(&c.x)?;
    j.same(("b(x)", &yb), ("a(x)", &ya), &[])?;
    let ba = a.backward_memo(&ka, &c.w)?;
    let bb = b.backward_memo(&kb, &c.w)?;
    j.same(("R[b](x, w)", &bb), ("R[a](x, w)", &ba), &[])
}

/// `a` and `b` agree in their second reverse derivatives at `(x, w)`, `u`.
pub(crate) fn same_second_order<A, B, M, N, J>(j: &J, a: &M, b: &N, c: &Case<A, B>) -> Outcome
where
    A: Space,
    B: Space,
    M: Reverse<A, Output = B>,
    N: Reverse<A, Output = B>,
    J: ComparisonIn<(A, B)>,
{
    let at = (c.x.clone(), c.w.clone());
    let ra = a.rev().backward(&at, &c.u)?;
    let rb = b.rev().backward(&at, &c.u)?;
    j.same(
        ("R[R[b]]((x, w), u)", &rb),
        ("R[R[a]]((x, w), u)", &ra),
        &[],
    )
}

/// `h = f then g`: values and the chain rule.
pub(crate) fn chain_rule<A, F, G, H, J>(
    j: &J,
    h: &H,
    f: &F,
    g: &G,
    c: &Case<A, H::Output>,
) -> Outcome
where
    A: Space,
    F: Map<A>,
    G: Map<F::Output>,
    H: Map<A, Output = G::Output>,
    J: ComparisonIn<A> + ComparisonIn<G::Output>,
{
    let (yf, kf) = f.forward_memo(&c.x)?;
    let (yg, kg) = g.forward_memo(&yf)?;
    let (yh, kh) = h.forward_memo(&c.x)?;
    j.same(("g(f(x))", &yg), ("h(x)", &yh), &[])?;
    let through_g = g.backward_memo(&kg, &c.w)?;
    let expected = f.backward_memo(&kf, &through_g)?;
    let observed = h.backward_memo(&kh, &c.w)?;
    j.same(
        ("R[f](x, R[g](f(x), w))", &expected),
        ("R[h](x, w)", &observed),
        &[],
    )
}

/// `h = <f, g>`: values and the summed backward pass.
pub(crate) fn pairing<A, B, C, F, G, H, J>(
    j: &J,
    h: &H,
    f: &F,
    g: &G,
    c: &Case<A, (B, C)>,
) -> Outcome
where
    A: Space,
    B: Space,
    C: Space,
    F: Map<A, Output = B>,
    G: Map<A, Output = C>,
    H: Map<A, Output = (B, C)>,
    J: ComparisonIn<A> + ComparisonIn<(B, C)>,
{
    let (yh, kh) = h.forward_memo(&c.x)?;
    let both = (f.forward(&c.x)?, g.forward(&c.x)?);
    j.same(("(f(x), g(x))", &both), ("h(x)", &yh), &[])?;
    let bf = f.backward(&c.x, &c.w.0)?;
    let bg = g.backward(&c.x, &c.w.1)?;
    let observed = h.backward_memo(&kh, &c.w)?;
    j.same(
        ("R[f](x, w.0) + R[g](x, w.1)", &bf.try_add(&bg)?),
        ("R[h](x, w)", &observed),
        &[&bf, &bg],
    )
}

/// `h = <f, g>`: a zero change in one slot leaves the other slot's backward
/// pass.
pub(crate) fn projection<A, B, C, F, G, H, J>(
    j: &J,
    h: &H,
    f: &F,
    g: &G,
    c: &Case<A, (B, C)>,
) -> Outcome
where
    A: Space,
    B: Space,
    C: Space,
    F: Map<A, Output = B>,
    G: Map<A, Output = C>,
    H: Map<A, Output = (B, C)>,
    J: ComparisonIn<A>,
{
    let (_, kh) = h.forward_memo(&c.x)?;
    let (w0, w1) = &c.w;
    let first = h.backward_memo(&kh, &(w0.clone(), w1.zero_like()))?;
    j.same(
        ("R[f](x, w.0)", &f.backward(&c.x, w0)?),
        ("R[h](x, (w.0, 0))", &first),
        &[],
    )?;
    let second = h.backward_memo(&kh, &(w0.zero_like(), w1.clone()))?;
    j.same(
        ("R[g](x, w.1)", &g.backward(&c.x, w1)?),
        ("R[h](x, (0, w.1))", &second),
        &[],
    )
}

/// `h = f + g`: values and the summed backward pass.
pub(crate) fn sum_rule<A, B, F, G, H, J>(j: &J, h: &H, f: &F, g: &G, c: &Case<A, B>) -> Outcome
where
    A: Space,
    B: Space,
    F: Map<A, Output = B>,
    G: Map<A, Output = B>,
    H: Map<A, Output = B>,
    J: ComparisonIn<A> + ComparisonIn<B>,
{
    let (yh, kh) = h.forward_memo(&c.x)?;
    let (yf, yg) = (f.forward(&c.x)?, g.forward(&c.x)?);
    j.same(
        ("f(x) + g(x)", &yf.try_add(&yg)?),
        ("h(x)", &yh),
        &[&yf, &yg],
    )?;
    let bf = f.backward(&c.x, &c.w)?;
    let bg = g.backward(&c.x, &c.w)?;
    let observed = h.backward_memo(&kh, &c.w)?;
    j.same(
        ("R[f](x, w) + R[g](x, w)", &bf.try_add(&bg)?),
        ("R[h](x, w)", &observed),
        &[&bf, &bg],
    )
}
