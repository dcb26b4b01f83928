//! The sampling checker: laws checked at cases drawn by proptest, each
//! failure shrunk to the smallest case proptest finds.

use super::case::{Case, CaseSource, Drawn, panic_message, quietly};
use super::judge::to_f64;
use super::judge::{ComparisonIn, Discrepancy, Finding, Outcome, Tolerance};
use super::law::{CaseValue, Law};
use super::pairs;
use super::report::{LawReport, Undecided, Violation, short_type_name};
use super::single::{
    NOT_FINITE, in_range, in_range_second, map_law_real, output_size, reverse_law_real,
    reverse_output_size,
};
use crate::combinators::{Pair, Plus, Then};
use crate::error::{Error, Result};
use crate::map::{Map, Reverse};
use crate::space::{Euclidean, Real, Space};
use proptest::strategy::Strategy;
use proptest::test_runner::{Config, RngAlgorithm, TestCaseError, TestError, TestRng, TestRunner};
use std::sync::Arc;
use std::time::Duration;

/// Checks maps against the laws at cases drawn from proptest strategies.
///
/// Each law is checked at [`cases`](Self::cases) drawn cases (256 by
/// default), from a fixed [`seed`](Self::seed) so that a check gives the
/// same answer on every run; a broken law is shrunk to the smallest case
/// proptest can find and re-evaluated there for the report. A map that
/// panics, returns an error or returns NaN breaks a law at that input, and
/// so does one that takes longer than the [time limit](Self::time_limit);
/// the checker itself does not panic or hang. Cases the precision cannot
/// decide are counted as [undecided](super::Undecided) (see [`Tolerance`]).
///
/// Each case runs on a thread of its own (so that one that never returns
/// can be left behind): the maps checked must be `Clone + Send + Sync +
/// 'static`, as the catalogue's are and a hand-written map that owns its
/// data is.
///
/// Inputs come from any proptest strategy (see [`strategies`](super::strategies)
/// for ready ones); output changes are shaped like the map's output unless
/// given with [`with_output_changes`](super::with_output_changes).
///
/// # Example
///
/// A hand-written primitive `x -> x^2` whose backward pass forgot the 2:
///
/// ```
/// use revdiff::laws::{Checker, Law};
/// use revdiff::{Compose, Map, Result};
///
/// #[derive(Clone, Debug)]
/// struct Square;
/// impl Compose for Square {}
/// impl Map<f64> for Square {
///     type Output = f64;
///     type Memo = f64;
///     fn forward_memo(&self, x: &f64) -> Result<(f64, f64)> {
///         Ok((x * x, *x))
///     }
///     fn backward_memo(&self, x: &f64, dy: &f64) -> Result<f64> {
///         Ok(x * dy) // should be 2 x dy
///     }
/// }
///
/// let report = Checker::new().map(&Square, -3.0..3.0f64);
/// let broken = report.violation(Law::Derivative, 1).expect("caught");
/// let case = broken.case::<f64, f64>().unwrap();
/// assert!(case.x != 0.0); // at x = 0 the wrong slope is right
/// println!("{report}");
/// ```
#[derive(Clone, Debug)]
pub struct Checker<R = f64> {
    tolerance: Tolerance<R>,
    cases: u32,
    seed: u64,
    time_limit: Duration,
}

impl<R: Real> Default for Checker<R> {
    fn default() -> Self {
        Checker {
            tolerance: Tolerance::default(),
            cases: 256,
            seed: 0x0072_6576_6469_6666,
            time_limit: DEFAULT_TIME_LIMIT,
        }
    }
}

/// Runs `check`, turning a panic into a breach.
pub(crate) fn guarded(check: impl FnOnce() -> Outcome) -> Outcome {
    quietly(check).unwrap_or_else(|payload| {
        Err(Discrepancy::failure(format!("the map panicked: {}", panic_message(&*payload))).into())
    })
}

/// The values a law uses, as a judge shows them.
///
/// At order 2 the law is evaluated at the lifted case (see [`Case::lift`]),
/// so the values shown are those the lifted slots are made of.
pub(crate) fn show_case<A: Space, B: Space, J: ComparisonIn<A> + ComparisonIn<B>>(
    judge: &J,
    law: Law,
    order: u8,
    c: &Case<A, B>,
) -> Vec<(CaseValue, String)> {
    let slots = law.slots_at(order);
    slots
        .into_iter()
        .map(|slot| {
            let shown = match slot {
                CaseValue::X => judge.show(&c.x),
                CaseValue::V => judge.show(&c.v),
                CaseValue::U => judge.show(&c.u),
                CaseValue::W => judge.show(&c.w),
                CaseValue::W2 => judge.show(&c.w2),
                CaseValue::S => c.s.to_string(),
            };
            (slot, shown)
        })
        .collect()
}

/// 32 seed bytes from a 64-bit seed and the check's place (splitmix64).
fn seed_bytes(seed: u64, law: Law, order: u8) -> [u8; 32] {
    let mut state = seed ^ ((law as u64) << 8 | order as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15);
    let mut out = [0u8; 32];
    for chunk in out.chunks_mut(8) {
        state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        chunk.copy_from_slice(&(z ^ (z >> 31)).to_le_bytes());
    }
    out
}

impl<R: Real> Checker<R> {
    /// A checker with the default tolerance, 256 cases per law and a fixed
    /// seed.
    pub fn new() -> Self {
        Self::default()
    }

    /// Checks each law at `n` drawn cases. Zero cases is an
    /// [`Error::InvalidSetting`]: a check of nothing would pass anything.
    pub fn cases(mut self, n: u32) -> Result<Self> {
        if n == 0 {
            return Err(Error::InvalidSetting {
                name: "cases",
                value: n.to_string(),
                reason: "a law check needs at least one case",
            });
        }
        self.cases = n;
        Ok(self)
    }

    /// Gives each case at most `limit` (60 s by default): a case that takes
    /// longer breaks the law with a message saying so, and the check moves
    /// on. Each case runs on a thread of its own for this; a map that never
    /// returns keeps its thread busy until the process ends, since safe Rust
    /// cannot stop a thread. A zero limit is an [`Error::InvalidSetting`].
    ///
    /// ```
    /// use std::time::Duration;
    /// use revdiff::laws::Checker;
    ///
    /// let quick = Checker::<f64>::new().time_limit(Duration::from_secs(5))?;
    /// assert_eq!(quick.time_limit_per_case(), Duration::from_secs(5));
    /// assert!(Checker::<f64>::new().time_limit(Duration::ZERO).is_err());
    /// # Ok::<(), revdiff::Error>(())
    /// ```
    pub fn time_limit(mut self, limit: Duration) -> Result<Self> {
        if limit.is_zero() {
            return Err(Error::InvalidSetting {
                name: "time_limit",
                value: format!("{limit:?}"),
                reason: "a case needs some time to run",
            });
        }
        self.time_limit = limit;
        Ok(self)
    }

    /// The time each case may take.
    pub fn time_limit_per_case(&self) -> Duration {
        self.time_limit
    }

    /// Draws cases from `seed` (every seed gives a reproducible check).
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Uses the tolerance policy `tolerance`.
    pub fn tolerance(mut self, tolerance: Tolerance<R>) -> Self {
        self.tolerance = tolerance;
        self
    }

    /// The tolerance policy in use.
    pub fn tolerance_policy(&self) -> &Tolerance<R> {
        &self.tolerance
    }

    /// Checks the laws of [`Law::FOR_MAPS`] on a map without a reverse map.
    pub fn map<A, F, C>(&self, f: &F, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Map<A> + Clone + Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        let checks: Vec<(Law, u8)> = Law::FOR_MAPS.iter().map(|&l| (l, 1)).collect();
        self.map_checks(f, cases, &checks)
    }

    /// Checks one law of [`Law::FOR_MAPS`] on a map without a reverse map
    /// (what each test of [`law_tests!`](crate::law_tests) runs).
    pub fn map_law<A, F, C>(&self, law: Law, f: &F, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Map<A> + Clone + Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        self.map_checks(f, cases, &[(law, 1)])
    }

    fn map_checks<A, F, C>(&self, f: &F, cases: C, checks: &[(Law, u8)]) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Map<A> + Clone + Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        let strategy = cases.cases(f);
        let f = f.clone();
        self.run(
            short_type_name::<F>(),
            checks,
            &strategy,
            move |tol, law, _, c| {
                escalated(
                    tol,
                    c,
                    |c| in_range(&f, c),
                    |c| output_size(&f, c),
                    |tol, c| {
                        map_law_real(tol, law, &f, c)
                            .unwrap_or_else(|| Err(not_for_maps(law).into()))
                    },
                )
            },
        )
    }

    /// Checks every law of [`Law::FOR_REVERSE`] at orders 1 and 2 on a map
    /// with a reverse map. At order 2 each law is applied to `R[f]` at the
    /// input `(x, w)` (see [`Case::lift`]), which checks the reverse map's
    /// own derivative, so a reverse map that gives the right values but the
    /// wrong second derivative is caught.
    pub fn reverse<A, F, C>(&self, f: &F, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Reverse<A> + Send + Sync + 'static,
        F::Rev: Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        let checks: Vec<(Law, u8)> = [1, 2]
            .into_iter()
            .flat_map(|order| Law::FOR_REVERSE.iter().map(move |&l| (l, order)))
            .collect();
        self.reverse_checks(f, cases, &checks)
    }

    /// Checks one law of [`Law::FOR_REVERSE`] at `order` (1 or 2).
    pub fn reverse_law<A, F, C>(&self, law: Law, order: u8, f: &F, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Reverse<A> + Send + Sync + 'static,
        F::Rev: Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        self.reverse_checks(f, cases, &[(law, order)])
    }

    fn reverse_checks<A, F, C>(&self, f: &F, cases: C, checks: &[(Law, u8)]) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Reverse<A> + Send + Sync + 'static,
        F::Rev: Send + Sync + 'static,
        F::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, F::Output>,
    {
        let strategy = cases.cases(f);
        let (f, rev) = (f.clone(), f.rev());
        self.run(
            short_type_name::<F>(),
            checks,
            &strategy,
            move |tol, law, order, c| {
                let f = &f;
                let outcome = match order {
                    1 => escalated(
                        tol,
                        c,
                        |c| in_range_second(f, &rev, c),
                        |c| output_size(f, c),
                        |tol, c| reverse_law_real(tol, law, f, c),
                    ),
                    // At order 2 the case is lifted, and its output changes
                    // are u and v: those are what rescaling scales.
                    2 => escalated(
                        tol,
                        c,
                        |c| {
                            let first = in_range_second(f, &rev, c);
                            let lifted = in_range(&rev, &first.lift());
                            Case {
                                u: lifted.w,
                                v: lifted.w2,
                                ..first
                            }
                        },
                        |c| reverse_output_size(f, c),
                        |tol, c| reverse_law_real(tol, law, &rev, &c.lift()),
                    ),
                    _ => Some(Err(Discrepancy::failure(
                        "laws are checked at orders 1 and 2",
                    )
                    .into())),
                };
                outcome.unwrap_or_else(|| Err(not_for_maps(law).into()))
            },
        )
    }

    /// Checks that `a` and `b` are the same map: equal values and backward
    /// passes ([`Law::SameMap`] at order 1).
    pub fn same_map<A, M, N, C>(&self, a: &M, b: &N, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        M: Map<A> + Clone + Send + Sync + 'static,
        M::Output: Euclidean<R> + Send + 'static,
        N: Map<A, Output = M::Output> + Clone + Send + Sync + 'static,
        C: CaseSource<R, A, M::Output>,
    {
        let strategy = cases.cases(a);
        let (a, b) = (a.clone(), b.clone());
        self.run(
            short_type_name::<M>(),
            &[(Law::SameMap, 1)],
            &strategy,
            move |tol, _, _, c| pairs::same_map(tol, &a, &b, c),
        )
    }

    /// [`same_map`](Self::same_map), and equal second reverse derivatives
    /// ([`Law::SameMap`] at order 2), for maps with reverse maps.
    pub fn same_reverse<A, M, N, C>(&self, a: &M, b: &N, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        M: Reverse<A> + Send + Sync + 'static,
        M::Output: Euclidean<R> + Send + 'static,
        N: Reverse<A, Output = M::Output> + Send + Sync + 'static,
        C: CaseSource<R, A, M::Output>,
    {
        let strategy = cases.cases(a);
        let (a, b) = (a.clone(), b.clone());
        self.run(
            short_type_name::<M>(),
            &[(Law::SameMap, 1), (Law::SameMap, 2)],
            &strategy,
            move |tol, _, order, c| match order {
                1 => pairs::same_map(tol, &a, &b, c),
                _ => pairs::same_second_order(tol, &a, &b, c),
            },
        )
    }

    /// Checks that `h` (a hand-fused kernel, say) equals `f` then `g`:
    /// the same values and the chain rule's backward pass.
    pub fn chain_rule<A, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Map<A> + Clone + Send + Sync + 'static,
        G: Map<F::Output> + Clone + Send + Sync + 'static,
        H: Map<A, Output = G::Output> + Clone + Send + Sync + 'static,
        G::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, G::Output>,
    {
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::ChainRule, 1)],
            &strategy,
            move |tol, _, _, c| pairs::chain_rule(tol, &h, &f, &g, c),
        )
    }

    /// [`chain_rule`](Self::chain_rule), and the second reverse derivative
    /// of `h` against that of the library's composite `f.then(g)`.
    pub fn chain_rule_reverse<A, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        F: Reverse<A> + Send + Sync + 'static,
        G: Reverse<F::Output> + Send + Sync + 'static,
        H: Reverse<A, Output = G::Output> + Send + Sync + 'static,
        G::Output: Euclidean<R> + Send + 'static,
        C: CaseSource<R, A, G::Output>,
        Then<F, G>: Reverse<A, Output = G::Output>,
    {
        let composite = f.clone().then(g.clone());
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::ChainRule, 1), (Law::SameMap, 2)],
            &strategy,
            move |tol, law, _, c| match law {
                Law::ChainRule => pairs::chain_rule(tol, &h, &f, &g, c),
                _ => pairs::same_second_order(tol, &h, &composite, c),
            },
        )
    }

    /// Checks that `h` equals the pairing `<f, g>`: the same values, the
    /// summed backward pass ([`Law::Pairing`]) and the projections
    /// ([`Law::Projection`]).
    pub fn pairing<A, B, D, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        D: Euclidean<R> + Send + 'static,
        F: Map<A, Output = B> + Clone + Send + Sync + 'static,
        G: Map<A, Output = D> + Clone + Send + Sync + 'static,
        H: Map<A, Output = (B, D)> + Clone + Send + Sync + 'static,
        C: CaseSource<R, A, (B, D)>,
    {
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::Pairing, 1), (Law::Projection, 1)],
            &strategy,
            move |tol, law, _, c| match law {
                Law::Pairing => pairs::pairing(tol, &h, &f, &g, c),
                _ => pairs::projection(tol, &h, &f, &g, c),
            },
        )
    }

    /// [`pairing`](Self::pairing), and the second reverse derivative of `h`
    /// against that of the library's `f.pair(g)`.
    pub fn pairing_reverse<A, B, D, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        D: Euclidean<R> + Send + 'static,
        F: Reverse<A, Output = B> + Send + Sync + 'static,
        G: Reverse<A, Output = D> + Send + Sync + 'static,
        H: Reverse<A, Output = (B, D)> + Send + Sync + 'static,
        C: CaseSource<R, A, (B, D)>,
        Pair<F, G>: Reverse<A, Output = (B, D)>,
    {
        let composite = f.clone().pair(g.clone());
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::Pairing, 1), (Law::Projection, 1), (Law::SameMap, 2)],
            &strategy,
            move |tol, law, _, c| match law {
                Law::Pairing => pairs::pairing(tol, &h, &f, &g, c),
                Law::Projection => pairs::projection(tol, &h, &f, &g, c),
                _ => pairs::same_second_order(tol, &h, &composite, c),
            },
        )
    }

    /// Checks that `h` equals the sum `f + g`: the same values and the
    /// summed backward pass.
    pub fn sum_rule<A, B, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        F: Map<A, Output = B> + Clone + Send + Sync + 'static,
        G: Map<A, Output = B> + Clone + Send + Sync + 'static,
        H: Map<A, Output = B> + Clone + Send + Sync + 'static,
        C: CaseSource<R, A, B>,
    {
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::SumRule, 1)],
            &strategy,
            move |tol, _, _, c| pairs::sum_rule(tol, &h, &f, &g, c),
        )
    }

    /// [`sum_rule`](Self::sum_rule), and the second reverse derivative of
    /// `h` against that of the library's `f.plus(g)`.
    pub fn sum_rule_reverse<A, B, F, G, H, C>(&self, h: &H, f: &F, g: &G, cases: C) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        F: Reverse<A, Output = B> + Send + Sync + 'static,
        G: Reverse<A, Output = B> + Send + Sync + 'static,
        H: Reverse<A, Output = B> + Send + Sync + 'static,
        C: CaseSource<R, A, B>,
        Plus<F, G>: Reverse<A, Output = B>,
    {
        let composite = f.clone().plus(g.clone());
        let strategy = cases.cases(h);
        let (h, f, g) = (h.clone(), f.clone(), g.clone());
        self.run(
            short_type_name::<H>(),
            &[(Law::SumRule, 1), (Law::SameMap, 2)],
            &strategy,
            move |tol, law, _, c| match law {
                Law::SumRule => pairs::sum_rule(tol, &h, &f, &g, c),
                _ => pairs::same_second_order(tol, &h, &composite, c),
            },
        )
    }

    /// Runs each check over the strategy, shrinking failures, and collects
    /// the report.
    fn run<A, B, S, E>(
        &self,
        subject: String,
        checks: &[(Law, u8)],
        strategy: &S,
        eval: E,
    ) -> LawReport
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        S: Strategy<Value = Drawn<A, B>>,
        E: Fn(&Tolerance<R>, Law, u8, &Case<A, B>) -> Outcome + Send + Sync + 'static,
    {
        let eval = Arc::new(eval);
        let mut report = LawReport::new(
            subject,
            format!("{} drawn cases per law, seed {:#x}", self.cases, self.seed),
        );
        for &(law, order) in checks {
            // After a case overruns the time limit, the law is broken there:
            // the rest of its cases (and proptest's shrinking) are skipped,
            // not run into the limit again and again.
            let overran = std::cell::RefCell::new(None::<Discrepancy>);
            let judged = |d: &Drawn<A, B>| -> Outcome {
                match d {
                    Drawn::Case(c) if c.x.dimension() == 0 => Err(Discrepancy::failure(
                        "the input has no coordinates: a law checked on an empty input checks nothing",
                    )
                    .into()),
                    Drawn::Case(c) => {
                        let outcome = self.judge_in_time(&eval, law, order, c);
                        if let Err(Finding::Broken(b)) = &outcome
                            && b.measure.starts_with(OVERRAN)
                        {
                            *overran.borrow_mut() = Some(b.clone());
                        }
                        outcome
                    }
                    Drawn::Unevaluable { reason, .. } => {
                        Err(Discrepancy::failure(reason.clone()).into())
                    }
                }
            };
            // Undecided cases pass through proptest as passes; they are
            // counted here, and the first is kept for the report.
            let undecided = std::cell::RefCell::new(None::<Undecided>);
            let config = Config {
                cases: self.cases,
                failure_persistence: None,
                ..Config::default()
            };
            let rng = TestRng::from_seed(RngAlgorithm::ChaCha, &seed_bytes(self.seed, law, order));
            let mut runner = TestRunner::new_with_rng(config, rng);
            let result = runner.run(strategy, |d| {
                if overran.borrow().is_some() {
                    return Ok(());
                }
                match judged(&d) {
                    Ok(()) => Ok(()),
                    Err(Finding::Undecided(reason)) => {
                        let mut slot = undecided.borrow_mut();
                        match slot.as_mut() {
                            Some(u) => u.cases += 1,
                            None => {
                                let shown = match &d {
                                    Drawn::Case(c) => show_case(&self.tolerance, law, order, c),
                                    Drawn::Unevaluable { .. } => Vec::new(),
                                };
                                *slot = Some(Undecided {
                                    law,
                                    order,
                                    cases: 1,
                                    reason,
                                    shown,
                                });
                            }
                        }
                        Ok(())
                    }
                    Err(Finding::Broken(b)) => Err(TestCaseError::fail(b.summary())),
                }
            });
            let stored = overran.borrow().clone();
            let violation = match (result, stored) {
                (Ok(()), None) => None,
                // The overrun case was the one proptest reports (its
                // shrinks were skipped), and it is not run again.
                (Ok(()), Some(b)) => Some(Violation::without_case(law, order, b)),
                (Err(TestError::Fail(_, drawn)), Some(b)) => {
                    Some(self.violation(law, order, b, drawn))
                }
                (Err(TestError::Fail(_, drawn)), None) => {
                    let breach = match judged(&drawn) {
                        Err(Finding::Broken(b)) => b,
                        _ => Discrepancy::failure(
                            "broken while shrinking, but not when re-run: the map is not deterministic",
                        ),
                    };
                    Some(self.violation(law, order, breach, drawn))
                }
                (Err(TestError::Abort(why)), _) => Some(Violation::without_case(
                    law,
                    order,
                    Discrepancy::failure(format!("the case generator gave up: {why}")),
                )),
            };
            let undecided = undecided.into_inner();
            let cases = match (&violation, &undecided) {
                (Some(_), _) => 0,
                (None, Some(u)) => u64::from(self.cases).saturating_sub(u.cases),
                (None, None) => u64::from(self.cases),
            };
            report.record(law, order, cases, undecided, violation);
        }
        report
    }

    /// [`judge_case`](Self::judge_case) on a thread of its own, given
    /// [`time_limit`](Self::time_limit) to finish.
    fn judge_in_time<A, B, E>(&self, eval: &Arc<E>, law: Law, order: u8, c: &Case<A, B>) -> Outcome
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
        E: Fn(&Tolerance<R>, Law, u8, &Case<A, B>) -> Outcome + Send + Sync + 'static,
    {
        let (sender, receiver) = std::sync::mpsc::channel();
        let (checker, shared, case) = (self.clone(), Arc::clone(eval), c.clone());
        let spawned = std::thread::Builder::new()
            .name("revdiff law case".to_string())
            // Reverse maps of order three of deep composites recurse
            // deeply; the stack is reserved, not touched, until used.
            .stack_size(CASE_STACK_BYTES)
            .spawn(move || {
                // The receiver may have given up waiting: nothing to do then.
                let _ = sender.send(checker.judge_case(&*shared, law, order, &case));
            });
        let Ok(thread) = spawned else {
            // No thread to be had: judge here, without a limit.
            return self.judge_case(eval.as_ref(), law, order, c);
        };
        let received = receiver.recv_timeout(self.time_limit);
        // Never drop (detach) the handle of a thread that may be ending:
        // glibc's `pthread_detach` reads the thread's descriptor after
        // marking it detached, and a thread that ends in between unmaps
        // its stack (a stack this large is not kept in glibc's cache), so
        // the read faulted (SIGSEGV, seen in test runs). A thread that
        // answered is joined; one that overran is kept until it ends.
        match received {
            Ok(_) | Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => {
                // Its result was sent (or it panicked, which `judge_case`
                // already caught and reported), so it is ending.
                let _ = thread.join();
            }
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => keep_until_ended(thread),
        }
        match received {
            Ok(outcome) => outcome,
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => Err(Discrepancy::failure(format!(
                "{OVERRAN} of {:?}: the map may never return at this case (its thread was left \
                 running, and the law's remaining cases were skipped)",
                self.time_limit
            ))
            .into()),
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => {
                Err(Discrepancy::failure("the check of this case ended without a result").into())
            }
        }
    }

    /// Judges one case. A comparison that fails is re-evaluated at tiny
    /// perturbations of the case: a broken law survives them, rounding does
    /// not (see [`Tolerance`]).
    fn judge_case<A, B, E>(&self, eval: &E, law: Law, order: u8, c: &Case<A, B>) -> Outcome
    where
        E: Fn(&Tolerance<R>, Law, u8, &Case<A, B>) -> Outcome + ?Sized,
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
    {
        let first = guarded(|| eval(&self.tolerance, law, order, c));
        let mut breach = match first {
            Err(Finding::Broken(b)) if overflowed(&b) && extreme(&c.x) => {
                return Err(Finding::Undecided(format!(
                    "the map's values are not finite at an input beyond the range where its \
                     derivatives fit in floating point ({})",
                    b.summary()
                )));
            }
            Err(Finding::Broken(b)) if !b.difference.is_empty() => b,
            other => return other,
        };
        let (Some(error), Some(allowed), Some(scale)) =
            (breach.error, breach.tolerance, breach.scale)
        else {
            return Err(breach.into());
        };
        let probe = self.tolerance.probing(&breach.compared);
        let mut noise = 0.0_f64;
        for &d in &PERTURBATIONS {
            let moved = perturbed(c, d);
            match guarded(|| eval(&probe, law, order, &moved)) {
                Err(Finding::Broken(p))
                    if p.compared == breach.compared
                        && p.difference.len() == breach.difference.len() =>
                {
                    let moved_by = breach
                        .difference
                        .iter()
                        .zip(&p.difference)
                        .map(|(a, b)| (a - b) * (a - b))
                        .sum::<f64>()
                        .sqrt();
                    if !moved_by.is_finite() {
                        return Err(breach.into());
                    }
                    noise = noise.max(moved_by);
                }
                // No measurement at the perturbed case: the verdict stands.
                _ => return Err(breach.into()),
            }
        }
        let rounding = NOISE_MARGIN * noise;
        if error.is_nan() || error > allowed + rounding {
            breach.measure.push_str(&format!(
                "; not rounding: the difference moves by only {noise:.1e} under perturbations of the case"
            ));
            return Err(breach.into());
        }
        let limit = to_f64(self.tolerance.detection_limit_relative()) * scale
            + to_f64(self.tolerance.absolute_allowance());
        if rounding <= limit {
            Ok(())
        } else {
            Err(Finding::Undecided(format!(
                "the two sides differ by {error:.1e}, and rounding moves that difference by \
                 {noise:.1e} under perturbations of the case: more than the detection limit \
                 allows for values of size {scale:.1e}"
            )))
        }
    }

    fn violation<A, B>(
        &self,
        law: Law,
        order: u8,
        breach: Discrepancy,
        drawn: Drawn<A, B>,
    ) -> Violation
    where
        A: Euclidean<R> + Send + 'static,
        B: Euclidean<R> + Send + 'static,
    {
        let shown = match &drawn {
            Drawn::Case(c) => show_case(&self.tolerance, law, order, c),
            Drawn::Unevaluable { x, .. } => vec![(CaseValue::X, self.tolerance.show(x))],
        };
        Violation::new(law, order, shown, breach, drawn)
    }
}

/// The time each case may take by default.
const DEFAULT_TIME_LIMIT: Duration = Duration::from_secs(60);
/// How the message of a case that overran the time limit begins.
const OVERRAN: &str = "the case did not finish within the time limit";

/// Relative sizes of the perturbations that tell rounding from a broken
/// law: large enough to change every rounding, small enough that a broken
/// law's difference moves by a millionth of itself.
const PERTURBATIONS: [f64; 3] = [0.93e-6, -1.37e-6, 0.71e-6];
/// A difference within this many times its movement under perturbation is
/// taken for rounding.
const NOISE_MARGIN: f64 = 4.0;

/// The case with every value moved by a relative `d` (a different multiple
/// of it for each value, so that no two move in step).
fn perturbed<R: Real, A: Euclidean<R>, B: Euclidean<R>>(c: &Case<A, B>, d: f64) -> Case<A, B> {
    let by = |k: f64| R::from(1.0 + k * d).unwrap_or_else(R::one);
    Case {
        x: c.x.scale(by(1.0)),
        v: c.v.scale(by(1.3)),
        u: c.u.scale(by(-0.8)),
        w: c.w.scale(by(0.7)),
        w2: c.w2.scale(by(-1.1)),
        s: c.s,
    }
}

/// Evaluates a single-map law at `c`, doing more only where the plain
/// evaluation fails: where a value is not finite, again at the case with
/// its output changes scaled down by a power of two (`rescaled`); where a
/// comparison fails, again with the natural size of the values
/// (`natural`, see `single::natural_scale`) as the least scale of exact
/// identities. A correct, well-conditioned map pays for neither.
fn escalated<R, A, B, O>(
    tol: &Tolerance<R>,
    c: &Case<A, B>,
    rescaled: impl Fn(&Case<A, B>) -> Case<A, B>,
    natural: impl Fn(&Case<A, B>) -> R,
    eval: impl Fn(&Tolerance<R>, &Case<A, B>) -> O,
) -> O
where
    R: Real,
    A: Clone,
    B: Clone,
    O: Escalates,
{
    let mut case = std::borrow::Cow::Borrowed(c);
    let mut outcome = eval(tol, &case);
    if outcome.broken().is_some_and(overflowed) {
        case = std::borrow::Cow::Owned(rescaled(c));
        outcome = eval(tol, &case);
    }
    if outcome.broken().is_some_and(|b| !b.difference.is_empty()) {
        outcome = eval(&tol.with_natural_output(natural(&case)), &case);
    }
    outcome
}

/// An outcome [`escalated`] can look into: a plain one, or one of a law
/// that may not apply.
trait Escalates {
    fn broken(&self) -> Option<&Discrepancy>;
}

impl Escalates for Outcome {
    fn broken(&self) -> Option<&Discrepancy> {
        match self {
            Err(Finding::Broken(b)) => Some(b),
            _ => None,
        }
    }
}

impl Escalates for Option<Outcome> {
    fn broken(&self) -> Option<&Discrepancy> {
        self.as_ref().and_then(Escalates::broken)
    }
}

/// Whether a breach is a value that is not finite.
fn overflowed(b: &Discrepancy) -> bool {
    b.error.is_some_and(|e| !e.is_finite()) || b.measure.contains(NOT_FINITE)
}

/// Whether `x` has a coordinate so large or so small (but not 0) that a
/// map's second or third derivatives there, powers of `1 / x` or of `x`,
/// can leave the range of floating point: beyond `1e+-154` for `f64`.
fn extreme<R: Real, A: Euclidean<R>>(x: &A) -> bool {
    let (small, large) = (R::min_positive_value().sqrt(), R::max_value().sqrt());
    x.coordinates()
        .iter()
        .any(|v| *v != R::zero() && (v.abs() < small || v.abs() > large))
}

fn not_for_maps(law: Law) -> Discrepancy {
    Discrepancy::failure(format!(
        "{law} is not a law of one map; use the pair checks for it"
    ))
}

/// The stack of the thread each sampled case runs on.
const CASE_STACK_BYTES: usize = 64 << 20;

/// Keeps the handle of a case's thread that overran its time limit, and
/// joins those kept before that have ended since (see
/// [`Checker::judge_in_time`] for why a handle is never dropped).
fn keep_until_ended(thread: std::thread::JoinHandle<()>) {
    static OVERRUNNING: std::sync::Mutex<Vec<std::thread::JoinHandle<()>>> =
        std::sync::Mutex::new(Vec::new());
    let mut kept = OVERRUNNING
        .lock()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    let (ended, running): (Vec<_>, Vec<_>) = kept.drain(..).partition(|t| t.is_finished());
    *kept = running;
    kept.push(thread);
    drop(kept);
    for t in ended {
        let _ = t.join();
    }
}
