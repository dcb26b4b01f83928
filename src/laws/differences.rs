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
    /// The largest `|phi|` the estimate evaluated, which sets its rounding.
    pub largest: R,
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
/// First steps tried at most, each a tenth of the one before.
const DECADES: usize = 16;
/// The scan ends when rounding alone exceeds this fraction of the largest
/// estimate seen.
const GIVE_UP_RELATIVE: f64 = 1e-3;
/// Neighbouring runs disagree when they differ by more than this many
/// times the larger of their error estimates.
const DISAGREE: f64 = 3.0;

/// `phi'(0)`, from first steps `start`, `start / 10`, `start / 100`, ...
/// `noise` is the absolute rounding error of one evaluation of `phi` beyond
/// its own relative rounding (for example from rounding `x + t v`), and
/// `claimed` the value the map claims, which sets how far down the steps
/// must go before rounding leaves no digits, with `claimed_error` its own
/// rounding.
///
/// The step is halved until `phi` is finite at `+-2 step`, so that every
/// evaluation stays at most half way to the edge of the domain. Then
/// Ridders' extrapolation runs from that first step and from first steps a
/// decade apart below it, down to where rounding leaves no digits. The
/// first step need not match the function's scale: far beyond the scale on
/// which `phi` bends (a softmax at `x = 1e6`, probed with steps of `1e5`),
/// neighbouring runs may agree with each other (both flat) but then
/// disagree with the runs at smaller steps. So only the runs after the last
/// disagreement count, and among them the one with the smallest error. The
/// error reported is the larger of that run's own estimate and its
/// difference from its neighbours, so it is not understated.
pub(crate) fn derivative_at_zero<R: Real>(
    phi: impl Fn(R) -> Result<R>,
    start: R,
    noise: R,
    (claimed, claimed_error): (R, R),
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
    let decade = R::from(10.0).unwrap_or(two);
    let disagree = |a: &Estimate<R>, b: &Estimate<R>| {
        (a.value - b.value).abs() > R::from(DISAGREE).unwrap_or(two) * a.error.max(b.error)
    };
    let mut runs: Vec<Estimate<R>> = Vec::with_capacity(DECADES);
    let mut largest_value = claimed.abs();
    for _ in 0..DECADES {
        let run = extrapolate(&phi, h, noise)?;
        largest_value = largest_value.max(run.value.abs());
        runs.push(run);
        // Two neighbouring runs that agree with each other and with the
        // claimed value settle it; a disagreement with the claim is looked
        // at on every scale before it is reported.
        if let [.., before, last] = runs.as_slice() {
            let matches_claim = |e: &Estimate<R>| {
                (e.value - claimed).abs()
                    <= R::from(DISAGREE).unwrap_or(two) * e.error.max(before.error) + claimed_error
            };
            if !disagree(before, last) && matches_claim(last) {
                break;
            }
        }
        // Stop once rounding alone (the floor in the run's error) leaves no
        // digit at the detection level: smaller steps only add rounding.
        let floor = rounding_floor(run.largest, noise, h);
        if runs.len() >= 2 && floor > R::from(GIVE_UP_RELATIVE).unwrap_or(two) * largest_value {
            break;
        }
        h = h / decade;
        if h == R::zero() {
            break;
        }
    }
    // Two neighbouring runs disagree if they differ by more than their
    // errors allow; the runs up to the last disagreement are discarded.
    let first = (1..runs.len())
        .rev()
        .find(|&k| disagree(&runs[k - 1], &runs[k]))
        .unwrap_or(0);
    let spread = |k: usize| {
        let mut e = runs[k].error;
        if k > first {
            e = e.max((runs[k].value - runs[k - 1].value).abs());
        }
        if k + 1 < runs.len() {
            e = e.max((runs[k].value - runs[k + 1].value).abs());
        }
        e
    };
    let best = (first..runs.len())
        .map(|k| Estimate {
            value: runs[k].value,
            error: spread(k),
            largest: runs[k].largest,
        })
        .min_by(|a, b| {
            a.error
                .partial_cmp(&b.error)
                .unwrap_or(std::cmp::Ordering::Greater)
        });
    match best {
        Some(b) if b.error.is_finite() && b.value.is_finite() => Ok(b),
        _ => Err("central differences gave no finite estimate".to_string()),
    }
}

/// The error of a central difference at step `h` from rounding in `phi`.
fn rounding_floor<R: Real>(largest: R, noise: R, h: R) -> R {
    R::from(16.0).unwrap_or_else(R::one) * (R::epsilon() * largest).max(noise) / h
}

/// Ridders' tableau from step `h`.
fn extrapolate<R: Real>(
    phi: &impl Fn(R) -> Result<R>,
    mut h: R,
    noise: R,
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
        largest: R::zero(),
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
                best = Estimate {
                    value: next,
                    error,
                    largest: R::zero(),
                };
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
    best.largest = largest.get();
    best.error = best.error.max(rounding_floor(best.largest, noise, h));
    Ok(best)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_for_smooth_functions() {
        // d/dt exp(1 + t) at 0 is e (from the definition of exp).
        let e = derivative_at_zero(|t: f64| Ok((1.0 + t).exp()), 0.1, 0.0, (0.0, 0.0)).unwrap();
        assert!((e.value - std::f64::consts::E).abs() < 1e-11, "{e:?}");
        // d/dt ln(1e-6 + t) at 0 is 1e6: the first step is shrunk to stay in the domain.
        let l = derivative_at_zero(|t: f64| Ok((1e-6 + t).ln()), 0.1, 0.0, (0.0, 0.0)).unwrap();
        assert!((l.value - 1e6).abs() < 1e-3, "{l:?}");
    }

    #[test]
    fn reports_functions_that_are_never_finite() {
        assert!(derivative_at_zero(|_: f64| Ok(f64::NAN), 0.1, 0.0, (0.0, 0.0)).is_err());
    }
}
