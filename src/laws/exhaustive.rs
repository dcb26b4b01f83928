//! The exhaustive checker: on finite domains, every law that is an identity
//! among a map's own passes is checked at every combination of drawn
//! values, exactly.

use super::case::{Case, Drawn};
use super::judge::{Discrepancy, ExactComparison, ExactPairing, ExactScalar, Finding, Outcome};
use super::law::{CaseValue, Law};
use super::pairs;
use super::report::{LawReport, Violation, short_type_name};
use super::sampled::show_case;
use super::single::{map_law_exact, reverse_law_exact};
use crate::error::{Error, Result};
use crate::map::{Map, Reverse};
use crate::space::Real;
use ndarray::Array1;

/// The finite sets a map's laws are checked over: inputs, input changes and
/// output changes. List the small values first: the first broken case in
/// enumeration order is the one reported.
#[derive(Clone, Debug)]
pub struct FiniteDomain<A, B> {
    inputs: Vec<A>,
    input_changes: Vec<A>,
    output_changes: Vec<B>,
}

impl<A, B> FiniteDomain<A, B> {
    /// The domain; an empty set is an [`Error::Empty`].
    pub fn new(inputs: Vec<A>, input_changes: Vec<A>, output_changes: Vec<B>) -> Result<Self> {
        let empty = |what: &'static str| Err(Error::Empty { operation: what });
        if inputs.is_empty() {
            return empty("the inputs of a finite domain");
        }
        if input_changes.is_empty() {
            return empty("the input changes of a finite domain");
        }
        if output_changes.is_empty() {
            return empty("the output changes of a finite domain");
        }
        Ok(FiniteDomain {
            inputs,
            input_changes,
            output_changes,
        })
    }

    /// How many values each slot ranges over.
    fn size(&self, slot: CaseValue) -> usize {
        match slot {
            CaseValue::X => self.inputs.len(),
            CaseValue::V | CaseValue::U => self.input_changes.len(),
            CaseValue::W | CaseValue::W2 => self.output_changes.len(),
            CaseValue::S => 1,
        }
    }
}

impl<A: Clone, B: Clone> FiniteDomain<A, B> {
    /// The case with the given index for each slot of `slots` (0 for the
    /// slots a law does not use).
    fn case(&self, slots: &[CaseValue], index: &[usize]) -> Case<A, B> {
        let at = |slot: CaseValue| {
            slots
                .iter()
                .position(|&s| s == slot)
                .map_or(0, |i| index[i])
        };
        Case {
            x: self.inputs[at(CaseValue::X)].clone(),
            v: self.input_changes[at(CaseValue::V)].clone(),
            u: self.input_changes[at(CaseValue::U)].clone(),
            w: self.output_changes[at(CaseValue::W)].clone(),
            w2: self.output_changes[at(CaseValue::W2)].clone(),
            s: 1.0,
        }
    }
}

/// Every vector of length `len` with entries from `values`, in
/// lexicographic order of the positions in `values`.
///
/// ```
/// use revdiff::laws::grid;
///
/// let all = grid(&[0.0, 1.0, -1.0], 2);
/// assert_eq!(all.len(), 9);
/// assert_eq!(all[1].to_vec(), vec![0.0, 1.0]);
/// ```
pub fn grid<T: Real>(values: &[T], len: usize) -> Vec<Array1<T>> {
    let mut out = vec![Vec::with_capacity(len)];
    for _ in 0..len {
        out = out
            .into_iter()
            .flat_map(|prefix| {
                values.iter().map(move |v| {
                    let mut next = prefix.clone();
                    next.push(*v);
                    next
                })
            })
            .collect();
    }
    out.into_iter().map(Array1::from).collect()
}

/// Checks laws at every case of a [`FiniteDomain`], with no tolerance.
///
/// The laws checked are those that are identities among a map's own passes:
/// additivity and zero change (law 1), symmetry and linearity in the change
/// through the reverse map (laws 3 and 4), the reverse map against the
/// backward pass (law 5), shapes (law 6), and the pair laws. Homogeneity
/// and the comparison with central differences need real arithmetic and
/// belong to the sampling [`Checker`](super::Checker).
///
/// Any space implementing [`ExactPairing<K>`] can be checked: the real
/// spaces on integer grids (where floating-point arithmetic on small
/// integers is exact), or a space of bits with `K` its bit type.
///
/// ```
/// use revdiff::laws::{grid, Exhaustive, FiniteDomain};
/// use revdiff::{Compose, MulPair};
///
/// // (a, b) -> a b on the integer grid -2..=2.
/// let points: Vec<(f64, f64)> = grid(&[0.0, 1.0, -1.0, 2.0, -2.0], 2)
///     .into_iter()
///     .map(|p| (p[0], p[1]))
///     .collect();
/// let domain = FiniteDomain::new(points.clone(), points, vec![0.0, 1.0, -1.0, 2.0]).unwrap();
/// let report = Exhaustive::<f64>::new().reverse(&MulPair, &domain);
/// assert!(report.is_clean(), "{report}");
/// ```
#[derive(Clone, Copy, Debug, Default)]
pub struct Exhaustive<K> {
    judge: ExactComparison<K>,
}

impl<K: ExactScalar> Exhaustive<K> {
    /// The exhaustive checker.
    pub fn new() -> Self {
        Exhaustive {
            judge: ExactComparison::new(),
        }
    }

    /// Laws 1 (additive, zero change), 6 and 7 on a map without a reverse map.
    pub fn map<A, F>(&self, f: &F, domain: &FiniteDomain<A, F::Output>) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        F: Map<A>,
        F::Output: ExactPairing<K> + 'static,
    {
        let checks = [
            Law::Additive,
            Law::ZeroChange,
            Law::ShapesFinite,
            Law::ReusingAgrees,
        ]
        .map(|l| (l, 1));
        self.run(short_type_name::<F>(), &checks, domain, |law, _, c| {
            map_law_exact(&self.judge, law, f, c).unwrap_or_else(|| Err(unexpected(law).into()))
        })
    }

    /// The exact laws (1, 3, 4, 5, 6, 7) at orders 1 and 2 on a map with a
    /// reverse map.
    pub fn reverse<A, F>(&self, f: &F, domain: &FiniteDomain<A, F::Output>) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        F: Reverse<A>,
        F::Output: ExactPairing<K> + 'static,
    {
        let laws = [
            Law::Additive,
            Law::ZeroChange,
            Law::Symmetric,
            Law::LinearInChange,
            Law::ReverseAgrees,
            Law::ShapesFinite,
            Law::ReusingAgrees,
        ];
        let checks: Vec<(Law, u8)> = [1, 2]
            .into_iter()
            .flat_map(|order| laws.iter().map(move |&l| (l, order)))
            .collect();
        let rev = f.rev();
        self.run(short_type_name::<F>(), &checks, domain, |law, order, c| {
            let outcome = if order == 1 {
                reverse_law_exact(&self.judge, law, f, c)
            } else {
                reverse_law_exact(&self.judge, law, &rev, &c.lift())
            };
            outcome.unwrap_or_else(|| Err(unexpected(law).into()))
        })
    }

    /// `a` and `b` agree in values and backward passes at every case.
    pub fn same_map<A, M, N>(&self, a: &M, b: &N, domain: &FiniteDomain<A, M::Output>) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        M: Map<A>,
        M::Output: ExactPairing<K> + 'static,
        N: Map<A, Output = M::Output>,
    {
        self.run(
            short_type_name::<M>(),
            &[(Law::SameMap, 1)],
            domain,
            |_, _, c| pairs::same_map(&self.judge, a, b, c),
        )
    }

    /// [`same_map`](Self::same_map), and equal second reverse derivatives.
    pub fn same_reverse<A, M, N>(
        &self,
        a: &M,
        b: &N,
        domain: &FiniteDomain<A, M::Output>,
    ) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        M: Reverse<A>,
        M::Output: ExactPairing<K> + 'static,
        N: Reverse<A, Output = M::Output>,
    {
        self.run(
            short_type_name::<M>(),
            &[(Law::SameMap, 1), (Law::SameMap, 2)],
            domain,
            |_, order, c| match order {
                1 => pairs::same_map(&self.judge, a, b, c),
                _ => pairs::same_second_order(&self.judge, a, b, c),
            },
        )
    }

    /// `h` equals `f` then `g` at every case: values and the chain rule.
    pub fn chain_rule<A, F, G, H>(
        &self,
        h: &H,
        f: &F,
        g: &G,
        domain: &FiniteDomain<A, H::Output>,
    ) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        F: Map<A>,
        G: Map<F::Output>,
        H: Map<A, Output = G::Output>,
        G::Output: ExactPairing<K> + 'static,
    {
        self.run(
            short_type_name::<H>(),
            &[(Law::ChainRule, 1)],
            domain,
            |_, _, c| pairs::chain_rule(&self.judge, h, f, g, c),
        )
    }

    /// `h` equals `<f, g>` at every case: values, summed backward pass and
    /// projections.
    pub fn pairing<A, B, D, F, G, H>(
        &self,
        h: &H,
        f: &F,
        g: &G,
        domain: &FiniteDomain<A, (B, D)>,
    ) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        B: ExactPairing<K> + 'static,
        D: ExactPairing<K> + 'static,
        F: Map<A, Output = B>,
        G: Map<A, Output = D>,
        H: Map<A, Output = (B, D)>,
    {
        self.run(
            short_type_name::<H>(),
            &[(Law::Pairing, 1), (Law::Projection, 1)],
            domain,
            |law, _, c| match law {
                Law::Pairing => pairs::pairing(&self.judge, h, f, g, c),
                _ => pairs::projection(&self.judge, h, f, g, c),
            },
        )
    }

    /// `h` equals `f + g` at every case: values and summed backward pass.
    pub fn sum_rule<A, B, F, G, H>(
        &self,
        h: &H,
        f: &F,
        g: &G,
        domain: &FiniteDomain<A, B>,
    ) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        B: ExactPairing<K> + 'static,
        F: Map<A, Output = B>,
        G: Map<A, Output = B>,
        H: Map<A, Output = B>,
    {
        self.run(
            short_type_name::<H>(),
            &[(Law::SumRule, 1)],
            domain,
            |_, _, c| pairs::sum_rule(&self.judge, h, f, g, c),
        )
    }

    fn run<A, B>(
        &self,
        subject: String,
        checks: &[(Law, u8)],
        domain: &FiniteDomain<A, B>,
        eval: impl Fn(Law, u8, &Case<A, B>) -> Outcome,
    ) -> LawReport
    where
        A: ExactPairing<K> + 'static,
        B: ExactPairing<K> + 'static,
    {
        let mut report = LawReport::new(subject, "every case of a finite domain".to_string());
        for &(law, order) in checks {
            let slots = law.slots_at(order);
            let sizes: Vec<usize> = slots.iter().map(|&s| domain.size(s)).collect();
            let mut index = vec![0usize; slots.len()];
            let mut checked = 0u64;
            let mut violation = None;
            loop {
                let case = domain.case(&slots, &index);
                if let Err(finding) = super::sampled::guarded(|| eval(law, order, &case)) {
                    // Exact comparisons always decide; an undecided finding
                    // can only come from a law that needs real arithmetic.
                    let breach = match finding {
                        Finding::Broken(b) => b,
                        Finding::Undecided(why) => Discrepancy::failure(why),
                    };
                    violation = Some(self.violation(law, order, breach, case));
                    break;
                }
                checked += 1;
                if !advance(&mut index, &sizes) {
                    break;
                }
            }
            report.record(law, order, checked, None, violation);
        }
        report
    }

    fn violation<A, B>(
        &self,
        law: Law,
        order: u8,
        breach: Discrepancy,
        case: Case<A, B>,
    ) -> Violation
    where
        A: ExactPairing<K> + 'static,
        B: ExactPairing<K> + 'static,
    {
        let shown: Vec<(CaseValue, String)> = show_case(&self.judge, law, order, &case)
            .into_iter()
            .filter(|(slot, _)| *slot != CaseValue::S)
            .collect();
        Violation::new(law, order, shown, breach, Drawn::Case(case))
    }
}

/// The next index in lexicographic order (last position fastest); false
/// after the last.
fn advance(index: &mut [usize], sizes: &[usize]) -> bool {
    for i in (0..index.len()).rev() {
        index[i] += 1;
        if index[i] < sizes[i] {
            return true;
        }
        index[i] = 0;
    }
    false
}

fn unexpected(law: Law) -> Discrepancy {
    Discrepancy::failure(format!(
        "{law} needs real arithmetic; the exhaustive checker does not check it"
    ))
}
