//! What a composite keeps for its backward pass: everything, only its
//! input (recomputing the rest), the input of every k-th stage, or a
//! binomial schedule of checkpoints.
//!
//! Keeping everything is fastest and its memory grows with depth;
//! recomputing from the input keeps one state and repeats the forward pass;
//! checkpoints trade between the two. All give bit-identical results: they
//! run the same stage passes on the same values, only at other times.
//!
//! - [`Recomputed`] (made by [`Compose::recomputed`]) keeps only the input
//!   of any map and re-runs its forward pass in the backward pass. Around a
//!   segment of a static composition it is segment checkpointing.
//! - [`Retention`] chooses the strategy of a run-time [`Chain`](crate::Chain),
//!   including binomial checkpointing (Griewank and Walther, 2000,
//!   "Algorithm 799: revolve", ACM TOMS 26(1)), whose number of forward
//!   steps is optimal for a chain of `n` stages with `s` stored states.

use crate::error::{Error, Result};
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;

/// A map that keeps only its input, and recomputes its forward pass in the
/// backward pass. Created by [`Compose::recomputed`].
///
/// ```
/// use revdiff::{Compose, Exp, Map, Sin, Tanh};
///
/// let kept = Sin.then(Exp).then(Tanh);
/// let recomputed = Sin.then(Exp).then(Tanh).recomputed();
/// // The same numbers, bit for bit.
/// assert_eq!(kept.backward(&0.3, &1.0).unwrap(), recomputed.backward(&0.3, &1.0).unwrap());
/// // Its memo is the input alone.
/// let (_, memo) = recomputed.forward_memo(&0.3).unwrap();
/// assert_eq!(memo, 0.3);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Recomputed<F> {
    /// The map whose forward pass is repeated.
    pub map: F,
}

impl<F: Compose> Compose for Recomputed<F> {
    fn boxed_depth(&self) -> usize {
        self.map.boxed_depth()
    }
}

impl<A: Space, F: Map<A>> Map<A> for Recomputed<F> {
    type Output = F::Output;
    type Memo = A;
    fn forward(&self, x: &A) -> Result<F::Output> {
        self.map.forward(x)
    }
    fn forward_memo(&self, x: &A) -> Result<(F::Output, A)> {
        Ok((self.map.forward(x)?, x.clone()))
    }
    fn backward_memo(&self, x: &A, dy: &F::Output) -> Result<A> {
        self.map.backward(x, dy)
    }
}

/// The reverse map is the wrapped map's: only the memo differs.
impl<A: Space, F: Reverse<A>> Reverse<A> for Recomputed<F> {
    type Rev = F::Rev;
    fn rev(&self) -> F::Rev {
        self.map.rev()
    }
}

/// What a run-time [`Chain`](crate::Chain) keeps for its backward pass.
/// Set it with [`Chain::retaining`](crate::Chain::retaining).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Retention {
    /// Every stage's memo (the default): no recomputation, memory linear in
    /// the number of stages.
    #[default]
    All,
    /// The chain's input only: the backward pass runs the forward pass
    /// again, keeping every memo for the duration of the backward pass.
    InputOnly,
    /// The input of every `k`-th stage: the backward pass recomputes one
    /// segment of `k` stages at a time.
    EveryKth(usize),
    /// Binomial checkpointing with at most `states` stored states (the
    /// chain's input counts as one): the fewest forward steps possible with
    /// that many states.
    Binomial {
        /// The most states kept at once, at least 1.
        states: usize,
    },
}

impl Retention {
    /// `Ok` if the setting makes sense: `EveryKth(0)` and `Binomial` with
    /// no states are [`Error::InvalidSetting`].
    pub fn checked(self) -> Result<Self> {
        let bad = |name, value: usize, reason| {
            Err(Error::InvalidSetting {
                name,
                value: value.to_string(),
                reason,
            })
        };
        match self {
            Retention::EveryKth(0) => bad("EveryKth", 0, "segments need at least one stage"),
            Retention::Binomial { states: 0 } => {
                bad("Binomial states", 0, "the chain's input needs a state")
            }
            other => Ok(other),
        }
    }
}

/// The strategy in a few words, as tables and benchmarks name it.
impl std::fmt::Display for Retention {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Retention::All => f.write_str("keep all"),
            Retention::InputOnly => f.write_str("input only"),
            Retention::EveryKth(k) => write!(f, "segments of {k}"),
            Retention::Binomial { states } => write!(f, "binomial, {states} states"),
        }
    }
}

/// Registers one benchmark per strategy of `retentions` in a criterion
/// group: a gradient of `chain` at `x`, `dy` under that strategy, named as
/// the strategy's `Display`. Needs the `criterion` feature. A strategy
/// whose setting makes no sense is [`Error::InvalidSetting`], before any
/// benchmark is registered.
///
/// ```ignore
/// // benches/my_model.rs, with `revdiff = { features = ["criterion"] }`
/// let mut group = c.benchmark_group("my model");
/// revdiff::retention::bench_retentions(
///     &mut group,
///     &model,
///     &x,
///     &dy,
///     &[Retention::All, Retention::Binomial { states: 8 }],
/// )?;
/// group.finish();
/// ```
#[cfg(feature = "criterion")]
pub fn bench_retentions<T, M>(
    group: &mut criterion::BenchmarkGroup<'_, M>,
    chain: &crate::Chain<T>,
    x: &ndarray::ArrayD<T>,
    dy: &ndarray::ArrayD<T>,
    retentions: &[Retention],
) -> Result<()>
where
    T: crate::Real,
    M: criterion::measurement::Measurement,
{
    let mut trials = Vec::with_capacity(retentions.len());
    for &retention in retentions {
        let mut trial = chain.clone();
        trial.retaining(retention)?;
        trials.push((retention, trial));
    }
    for (retention, trial) in &trials {
        group.bench_function(retention.to_string(), |b| {
            b.iter(|| trial.gradient_and_cost(std::hint::black_box(x), dy))
        });
    }
    Ok(())
}

/// What one backward pass of a [`Chain`](crate::Chain) cost under its
/// [`Retention`]: see [`Chain::gradient_and_cost`](crate::Chain::gradient_and_cost).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct PassCost {
    /// Stage forward passes run again, without keeping a memo, to reach a
    /// stage from a stored state ("advances" in Griewank's terms).
    pub advances: u64,
    /// Stage forward passes run again keeping their memo, in the backward
    /// pass (0 when every memo was kept).
    pub recorded: u64,
    /// The most values held at once: stored stage inputs and stage memos.
    pub peak_states: usize,
    /// The bytes of the stored stage inputs at their peak.
    pub peak_checkpoint_bytes: usize,
    /// The bytes of the stages' memos at their peak ([`HeldBytes`](crate::HeldBytes)).
    pub peak_memo_bytes: usize,
    /// The bytes of stored inputs and memos together at their peak: what
    /// the strategy holds beyond a pass's transients (the value being
    /// advanced and the change being passed back, one array each).
    pub peak_bytes: usize,
}

/// `C(s + r, s)`, saturating.
fn beta(s: usize, r: usize) -> u128 {
    let mut b: u128 = 1;
    for i in 1..=s.min(r) as u128 {
        let top = (s.max(r) as u128) + i;
        b = b.saturating_mul(top) / i;
    }
    b
}

/// The fewest forward steps beyond the taping ones ("advances") that
/// reverse a chain of `steps` stages holding at most `states` states, the
/// chain's input among them: `r n - C(s + r, s + 1)` with `r` the least
/// integer such that `C(s + r, s) >= n` (Griewank and Walther, 2000). `None`
/// without a state or a stage.
///
/// ```
/// use revdiff::binomial_advances;
/// // One state: every stage is reached from the input again.
/// assert_eq!(binomial_advances(4, 1), Some(6));
/// // Enough states to keep every input: no advance is repeated.
/// assert_eq!(binomial_advances(4, 4), Some(3));
/// ```
pub fn binomial_advances(steps: usize, states: usize) -> Option<u64> {
    if steps == 0 || states == 0 {
        return None;
    }
    let n = steps as u128;
    let s = states;
    let mut r = 0usize;
    while beta(s, r) < n {
        r += 1;
    }
    if r == 0 {
        return Some(0);
    }
    let total = (r as u128) * n - beta(s + 1, r - 1);
    u64::try_from(total).ok()
}

/// The first split of an optimal schedule: advance `j` stages, store that
/// state, reverse the rest with one state fewer, then reverse the first `j`.
///
/// The cost `j + A(n - j, s - 1) + A(j, s)` is convex in `j` (the optimal
/// count `A(n, s)` is piecewise linear in `n` with growing slopes), so a
/// binary search on its differences finds the least in `O(log n)` steps.
pub(crate) fn best_split(steps: usize, states: usize) -> usize {
    let a = |n: usize, s: usize| binomial_advances(n, s).unwrap_or(u64::MAX);
    let cost = |j: usize| {
        (j as u64)
            .saturating_add(a(steps - j, states - 1))
            .saturating_add(a(j, states))
    };
    let (mut lo, mut hi) = (1, steps.saturating_sub(1).max(1));
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        if cost(mid + 1) < cost(mid) {
            lo = mid + 1;
        } else {
            hi = mid;
        }
    }
    lo
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The fewest advances by trying every split (no formula).
    fn brute_force(n: usize, s: usize, table: &mut Vec<Vec<Option<u64>>>) -> u64 {
        if let Some(v) = table[n][s] {
            return v;
        }
        let v = if n == 1 {
            0
        } else if s == 1 {
            (n * (n - 1) / 2) as u64
        } else {
            (1..n)
                .map(|j| j as u64 + brute_force(n - j, s - 1, table) + brute_force(j, s, table))
                .min()
                .unwrap()
        };
        table[n][s] = Some(v);
        v
    }

    #[test]
    fn the_closed_form_is_the_optimum_for_small_chains() {
        let mut table = vec![vec![None; 9]; 41];
        for n in 1..=40 {
            for s in 1..=8 {
                assert_eq!(
                    binomial_advances(n, s),
                    Some(brute_force(n, s, &mut table)),
                    "n = {n}, s = {s}"
                );
            }
        }
        // Griewank and Walther's example from memory: 3 steps, 1 state, 3
        // advances; and with 2 states, 2.
        assert_eq!(binomial_advances(3, 1), Some(3));
        assert_eq!(binomial_advances(3, 2), Some(2));
    }

    #[test]
    fn the_split_found_by_bisection_is_a_best_one() {
        for n in 2..=60 {
            for s in 2..=6 {
                let a = |n: usize, s: usize| binomial_advances(n, s).unwrap();
                let cost = |j: usize| j as u64 + a(n - j, s - 1) + a(j, s);
                let best = (1..n).map(cost).min().unwrap();
                assert_eq!(cost(best_split(n, s)), best, "n = {n}, s = {s}");
                assert_eq!(cost(best_split(n, s)), a(n, s), "n = {n}, s = {s}");
            }
        }
    }

    #[test]
    fn settings_are_checked() {
        assert!(Retention::EveryKth(0).checked().is_err());
        assert!(Retention::Binomial { states: 0 }.checked().is_err());
        assert_eq!(
            Retention::EveryKth(3).checked().unwrap(),
            Retention::EveryKth(3)
        );
    }
}

/// One row of a [`RetentionComparison`]: a strategy and what a gradient
/// cost under it.
#[derive(Clone, Debug, PartialEq)]
pub struct RetentionRow {
    /// The strategy.
    pub retention: Retention,
    /// The median time of one gradient (forward and backward pass).
    pub time: std::time::Duration,
    /// What the backward pass repeated and held.
    pub cost: PassCost,
}

/// The same gradient under several strategies, side by side: made by
/// [`Chain::compare_retentions`](crate::Chain::compare_retentions). Its
/// `Display` is a table.
#[derive(Clone, Debug, PartialEq)]
pub struct RetentionComparison {
    /// One row per strategy, in the order asked for.
    pub rows: Vec<RetentionRow>,
}

impl std::fmt::Display for RetentionComparison {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let base = self.rows.first().map(|r| r.time.as_secs_f64());
        writeln!(
            f,
            "{:<22} {:>12} {:>9} {:>9} {:>9} {:>7} {:>16} {:>12} {:>12}",
            "strategy",
            "per gradient",
            "vs first",
            "advances",
            "recorded",
            "states",
            "checkpoint bytes",
            "memo bytes",
            "peak bytes"
        )?;
        for row in &self.rows {
            let name = row.retention.to_string();
            let ratio = base
                .filter(|b| *b > 0.0)
                .map_or(f64::NAN, |b| row.time.as_secs_f64() / b);
            writeln!(
                f,
                "{:<22} {:>12} {:>9.2} {:>9} {:>9} {:>7} {:>16} {:>12} {:>12}",
                name,
                format!("{:.1?}", row.time),
                ratio,
                row.cost.advances,
                row.cost.recorded,
                row.cost.peak_states,
                row.cost.peak_checkpoint_bytes,
                row.cost.peak_memo_bytes,
                row.cost.peak_bytes
            )?;
        }
        Ok(())
    }
}
