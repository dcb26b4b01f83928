//! Derivatives of scalar functions of one real variable by central
//! differences with Ridders' extrapolation (Ridders, 1982, "Accurate
//! computation of F'(x) and F'(x) F''(x)", Advances in Engineering Software
//! 4(2)).

use crate::error::Result;
use crate::space::Real;

/// A derivative estimate and the extrapolation's own error estimate.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Estimate<R> {
    pub value: R,
    pub error: R,
}

/// How many step sizes the extrapolation tableau uses at most.
const LEVELS: usize = 10;
/// The step shrinks by this factor from one level to the next.
const SHRINK: f64 = 1.4;
/// Stop when the newest diagonal entry is this many times worse than the
/// best error so far: rounding has taken over.
const GIVE_UP: f64 = 2.0;
/// Halvings of the first step allowed while looking for a finite one.
const HALVINGS: usize = 64;
/// Levels always computed before stopping early is allowed.
const MIN_LEVELS: usize = 3;

/// `phi'(0)`, starting from step `start`.
///
/// The step is halved until `phi` is finite at `+-2 step`, so that every
/// evaluation stays at most half way to the edge of the domain; then central
/// differences at steps shrinking by 1.4 are extrapolated to zero step in a
/// Neville tableau, and the entry with the smallest error estimate is kept.
/// This is done from two first steps; see the comment inside.
pub(crate) fn derivative_at_zero<R: Real>(
    phi: impl Fn(R) -> Result<R>,
    start: R,
) -> std::result::Result<Estimate<R>, String> {
    let finite_at = |t: R| matches!(phi(t), Ok(v) if v.is_finite());
    let two = R::one() + R::one();
    let mut h = start;
    let mut halvings = 0;
    while !(finite_at(two * h) && finite_at(-two * h)) {
        h = h / two;
        halvings += 1;
        if halvings > HALVINGS || h == R::zero() {
            return Err(format!(
                "no step found at which the map is finite on both sides (tried down to {:e})",
                h.to_f64().unwrap_or(f64::NAN)
            ));
        }
    }
    // Two independent extrapolations, from the step found and from a
    // quarter of it: the better one is kept, and their disagreement bounds
    // its error, which catches tableaux stopped before their asymptotic
    // regime (sums of terms of both signs) and functions that are not
    // smooth enough for extrapolation (x |x| at 0).
    let wide = extrapolate(&phi, h)?;
    let narrow = extrapolate(&phi, h / (two * two))?;
    let best = if narrow.error <= wide.error {
        narrow
    } else {
        wide
    };
    let error = best.error.max((wide.value - narrow.value).abs());
    if error.is_finite() && best.value.is_finite() {
        Ok(Estimate {
            value: best.value,
            error,
        })
    } else {
        Err("central differences gave no finite estimate".to_string())
    }
}

/// Ridders' tableau from step `h`.
fn extrapolate<R: Real>(
    phi: &impl Fn(R) -> Result<R>,
    mut h: R,
) -> std::result::Result<Estimate<R>, String> {
    let two = R::one() + R::one();
    // The largest |phi| seen: rounding in phi is relative to it.
    let largest = std::cell::Cell::new(R::zero());
    let central = |h: R| -> std::result::Result<R, String> {
        let up = phi(h).map_err(|e| e.to_string())?;
        let down = phi(-h).map_err(|e| e.to_string())?;
        largest.set(largest.get().max(up.abs()).max(down.abs()));
        Ok((up - down) / (two * h))
    };
    let shrink = R::from(SHRINK).unwrap_or(two);
    let shrink2 = shrink * shrink;
    let give_up = R::from(GIVE_UP).unwrap_or(two);

    // previous[j] and current[j]: the j-th extrapolation at the last two steps.
    let mut previous = vec![central(h)?];
    let mut best = Estimate {
        value: previous[0],
        error: R::infinity(),
    };
    for level in 1..LEVELS {
        h = h / shrink;
        let mut current = Vec::with_capacity(previous.len() + 1);
        current.push(central(h)?);
        let mut factor = shrink2;
        for j in 1..=previous.len() {
            let next = (current[j - 1] * factor - previous[j - 1]) / (factor - R::one());
            factor = factor * shrink2;
            let error = (next - current[j - 1])
                .abs()
                .max((next - previous[j - 1]).abs());
            if error <= best.error {
                best = Estimate { value: next, error };
            }
            current.push(next);
        }
        let last = current.len() - 1;
        if level >= MIN_LEVELS && (current[last] - previous[last - 1]).abs() >= give_up * best.error
        {
            break;
        }
        previous = current;
    }
    // A floor for the error: rounding of phi, divided by the smallest step,
    // which the tableau's own estimate can miss when every entry is tiny.
    let rounding = R::from(16.0).unwrap_or(two) * R::epsilon() * largest.get() / h;
    best.error = best.error.max(rounding);
    Ok(best)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_for_smooth_functions() {
        // d/dt exp(1 + t) at 0 is e (from the definition of exp).
        let e = derivative_at_zero(|t: f64| Ok((1.0 + t).exp()), 0.1).unwrap();
        assert!((e.value - std::f64::consts::E).abs() < 1e-11, "{e:?}");
        // d/dt ln(1e-6 + t) at 0 is 1e6: the first step is shrunk to stay in the domain.
        let l = derivative_at_zero(|t: f64| Ok((1e-6 + t).ln()), 0.1).unwrap();
        assert!((l.value - 1e6).abs() < 1e-3, "{l:?}");
    }

    #[test]
    fn reports_functions_that_are_never_finite() {
        assert!(derivative_at_zero(|_: f64| Ok(f64::NAN), 0.1).is_err());
    }
}
