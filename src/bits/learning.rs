//! Learning circuits from examples: [`SumOfProducts`] and reverse
//! derivative ascent by [`CircuitTraining`].

use super::{Bits, Polynomial, words_for};
use crate::error::{Error, Result};
use crate::map::{Compose, Map};
use crate::space::Space;

/// A sum of products with learnable structure: `terms` AND terms over
/// `inputs` input wires, each term switched on or off, each input selected
/// into a term or not; the output is the XOR of the terms that are on.
///
/// As a polynomial: `out = sum_k e_k prod_i (1 + s_ki (1 + x_i))`, where
/// `1 + s (1 + x)` is `x` if `s` is 1 and `1` if it is 0. The map takes
/// `(parameters, inputs)`: parameter wires `e_0 .. e_{K-1}` then `s_ki` term
/// by term, each the same for every example (one example per parameter
/// wire is broadcast by [`CircuitTraining`]). Multilinear, so its backward
/// pass is the Boolean difference (tested with
/// [`boolean_difference_mismatch`](super::boolean_difference_mismatch)).
///
/// ```
/// use revdiff::bits::{Bits, SumOfProducts};
/// use revdiff::Map;
///
/// // x0 x1 + x2 over three inputs, two terms.
/// let sop = SumOfProducts::new(3, 2)?;
/// let on = [true, true, true, true, false, false, false, true];
/// let x = Bits::from_fn(3, 8, |w, e| e >> w & 1 == 1);
/// let p = Bits::from_fn(sop.parameter_wires(), 8, |w, _| on[w]);
/// let y = sop.forward(&(p, x))?;
/// assert!((0..8).all(|e| y.get(0, e) == ((e & 1 == 1 && e & 2 == 2) ^ (e & 4 == 4))));
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SumOfProducts {
    inputs: usize,
    terms: usize,
}

impl Compose for SumOfProducts {}

impl SumOfProducts {
    /// `terms` terms over `inputs` inputs; zero of either is
    /// [`Error::InvalidSetting`].
    pub fn new(inputs: usize, terms: usize) -> Result<Self> {
        if inputs == 0 || terms == 0 {
            return Err(Error::InvalidSetting {
                name: "sum of products",
                value: format!("{inputs} inputs, {terms} terms"),
                reason: "a sum of products needs at least one input and one term",
            });
        }
        Ok(SumOfProducts { inputs, terms })
    }

    /// The number of parameter wires: one switch per term and one selector
    /// per term and input.
    pub fn parameter_wires(&self) -> usize {
        self.terms * (1 + self.inputs)
    }

    fn selector(&self, k: usize, i: usize) -> usize {
        self.terms + k * self.inputs + i
    }

    /// The polynomial of the map with parameters `p` (one example): the
    /// learned circuit, readable.
    pub fn polynomial(&self, p: &Bits) -> Polynomial {
        let monomials = (0..self.terms).filter(|&k| p.get(k, 0)).map(|k| {
            (0..self.inputs)
                .filter(|&i| p.get(self.selector(k, i), 0))
                .fold(0u64, |m, i| m | 1 << i)
        });
        Polynomial::new(self.inputs, monomials)
    }

    fn check(&self, (p, x): &(Bits, Bits)) -> Result<()> {
        if p.wires != self.parameter_wires() || x.wires != self.inputs || p.examples != x.examples {
            return Err(Error::shape(
                "sum of products, its (parameters, inputs)",
                format!(
                    "(({} wires, n examples), ({} wires, n examples))",
                    self.parameter_wires(),
                    self.inputs
                ),
                format!("({}, {})", p.shape_string(), x.shape_string()),
            ));
        }
        Ok(())
    }

    /// Word `j` of literal `(k, i)`: `x_i` where selected, else all ones.
    fn literal(&self, p: &Bits, x: &Bits, k: usize, i: usize, j: usize) -> u64 {
        let n = words_for(x.examples);
        let s = p.words[self.selector(k, i) * n + j];
        (x.words[i * n + j] & s) | (!s & x.valid(j))
    }
}

impl Map<(Bits, Bits)> for SumOfProducts {
    type Output = Bits;
    type Memo = (Bits, Bits);
    fn forward_memo(&self, input: &(Bits, Bits)) -> Result<(Bits, (Bits, Bits))> {
        self.check(input)?;
        let (p, x) = input;
        let n = words_for(x.examples);
        let mut out = Bits::zeros(1, x.examples);
        for k in 0..self.terms {
            for j in 0..n {
                let mut term = p.words[k * n + j];
                for i in 0..self.inputs {
                    term &= self.literal(p, x, k, i, j);
                }
                out.words[j] ^= term;
            }
        }
        Ok((out, input.clone()))
    }
    fn backward_memo(&self, (p, x): &(Bits, Bits), dz: &Bits) -> Result<(Bits, Bits)> {
        if dz.wires != 1 || dz.examples != x.examples {
            return Err(Error::shape(
                "the output change of a sum of products",
                format!("(1 wires, {} examples)", x.examples),
                dz.shape_string(),
            ));
        }
        let n = words_for(x.examples);
        let mut dp = Bits::zeros(p.wires, p.examples);
        let mut dx = Bits::zeros(x.wires, x.examples);
        for k in 0..self.terms {
            for j in 0..n {
                let lits: Vec<u64> = (0..self.inputs)
                    .map(|i| self.literal(p, x, k, i, j))
                    .collect();
                // Products of all literals but one, from both ends.
                let mut before = vec![x.valid(j); self.inputs + 1];
                for i in 0..self.inputs {
                    before[i + 1] = before[i] & lits[i];
                }
                let mut after = x.valid(j);
                let e = p.words[k * n + j];
                let d = dz.words[j];
                dp.words[k * n + j] ^= before[self.inputs] & d;
                for i in (0..self.inputs).rev() {
                    let others = before[i] & after;
                    let s = p.words[self.selector(k, i) * n + j];
                    let xi = x.words[i * n + j];
                    // d/ds = e (1 + x) others; d/dx = e s others.
                    dp.words[self.selector(k, i) * n + j] ^= e & !xi & others & d;
                    dx.words[i * n + j] ^= e & s & others & d;
                    after &= lits[i];
                }
            }
        }
        Ok((dp, dx))
    }
}

/// How the parameter changes asked for by the examples of a batch make one
/// update.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Aggregate {
    /// Flip the parameter most asked for, when more than half of the wrong
    /// examples ask for it. The sum over Z2 flips a parameter whenever an
    /// odd number ask, so one example more or less decides; a vote acts on
    /// what the errors agree on.
    Vote,
    /// Flip a parameter when an odd number of examples ask: the reverse
    /// derivative of using one parameter for every example, which is the
    /// sum.
    Sum,
    /// Update after every example, in order: the rule of the paper applied
    /// to one example at a time (the default; of the first three it is the
    /// one that learns conjunctions from a zero start).
    #[default]
    EachExample,
    /// Try each flip that at least one wrong example asks for, one at a
    /// time, and make the one that leaves the fewest wrong examples (ties go
    /// to the flip more examples ask for), among those that do not lead back
    /// to parameters seen before. The reverse derivative proposes, a forward
    /// pass per proposal decides: a pass costs one forward pass per
    /// parameter asked for, and it may move to an equally good or worse
    /// state, which lets it leave a plateau; it stops as
    /// [`CircuitFit::Revisited`] when every proposal leads back.
    Tested,
}

/// How many examples are wrong: those where any output wire of the change
/// (prediction plus target) is 1.
fn wrong_examples(change: &Bits) -> u64 {
    let n = words_for(change.examples);
    (0..n)
        .map(|k| {
            let word = (0..change.wires).fold(0u64, |acc, w| acc | change.words[w * n + k]);
            u64::from(word.count_ones())
        })
        .sum()
}

/// How many examples ask for parameter wire `w` to flip.
fn asked_for(requests: &Bits, w: usize) -> u64 {
    requests
        .wire(w)
        .iter()
        .map(|x| u64::from(x.count_ones()))
        .sum()
}

/// What learning a circuit reached. Every variant holds the best
/// parameters seen (fewest wrong examples) and how many passes were made.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum CircuitFit {
    /// Every example reproduced exactly.
    Exact {
        /// The parameters, one example per wire.
        parameters: Bits,
        /// Passes over the examples made, the fitting one included.
        passes: usize,
    },
    /// The update led back to parameters seen before without an exact fit:
    /// it would cycle forever, so learning stopped.
    Revisited {
        /// The parameters with the fewest wrong examples seen.
        best: Bits,
        /// How many examples they get wrong.
        wrong: u64,
        /// Passes made.
        passes: usize,
    },
    /// The pass limit was reached.
    OutOfPasses {
        /// The parameters with the fewest wrong examples seen.
        best: Bits,
        /// How many examples they get wrong.
        wrong: u64,
        /// Passes made.
        passes: usize,
    },
}

/// Learning the parameter bits of a circuit by reverse derivative ascent
/// (Wilson and Zanasi, 2021, "Reverse Derivative Ascent: A Categorical
/// Approach to Learning Boolean Circuits"): each pass, the change is the
/// prediction plus the target (XOR: the wrong bits), and the parameters
/// move by the parameter part of `R[f]((p, x), change)`, aggregated over
/// the examples by an [`Aggregate`] rule.
///
/// Where the parameters come back to a state seen before without an exact
/// fit, learning stops with [`CircuitFit::Revisited`] and the best
/// parameters seen; it never loops forever.
///
/// Measured (`tests/bits.rs`, seeded starts): with [`Aggregate::Tested`],
/// 3-input majority (a [`SumOfProducts`] of three terms) fits exactly from
/// 32 of 32 starts, the parity of a hidden subset of 8 inputs (eight
/// terms) from 10 of 16, and a 12-input rule from 8 of 8. The published
/// rule alone, per example, summed or voted, fits majority from none of
/// 32: its flips overshoot together, and a switched-off term hides its
/// selectors' slopes. Where one start does not fit, try another: the
/// outcome says which happened.
///
/// ```
/// use revdiff::bits::{Bits, CircuitFit, CircuitTraining, SumOfProducts};
///
/// // Learn y = x0 AND x1 from its four examples.
/// let sop = SumOfProducts::new(2, 1)?;
/// let x = Bits::from_fn(2, 4, |w, e| e >> w & 1 == 1);
/// let y = Bits::from_fn(1, 4, |_, e| e == 3);
/// let start = Bits::zeros(sop.parameter_wires(), 1);
/// match CircuitTraining::new(50)?.run(&sop, start, &x, &y)? {
///     CircuitFit::Exact { parameters, .. } => {
///         assert_eq!(sop.polynomial(&parameters).to_string(), "ab");
///     }
///     other => panic!("{other:?}"),
/// }
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CircuitTraining {
    max_passes: usize,
    aggregate: Aggregate,
}

impl CircuitTraining {
    /// At most `max_passes` passes over the examples; zero is
    /// [`Error::InvalidSetting`].
    pub fn new(max_passes: usize) -> Result<Self> {
        if max_passes == 0 {
            return Err(Error::InvalidSetting {
                name: "max_passes",
                value: "0".to_string(),
                reason: "learning needs at least one pass",
            });
        }
        Ok(CircuitTraining {
            max_passes,
            aggregate: Aggregate::EachExample,
        })
    }

    /// Uses `aggregate` to combine the examples' requests.
    pub fn aggregate(mut self, aggregate: Aggregate) -> Self {
        self.aggregate = aggregate;
        self
    }

    /// Learns the parameters of `model` (a map of `(parameters, inputs)`)
    /// from `start` (one example per parameter wire) so that it maps
    /// `inputs` to `targets` (examples side by side in both). Inputs and
    /// targets with different numbers of examples, or a start with more
    /// than one example, are [`Error::ShapeMismatch`].
    pub fn run<M>(
        &self,
        model: &M,
        start: Bits,
        inputs: &Bits,
        targets: &Bits,
    ) -> Result<CircuitFit>
    where
        M: Map<(Bits, Bits), Output = Bits>,
    {
        if inputs.examples != targets.examples || start.examples != 1 {
            return Err(Error::shape(
                "learning a circuit: parameters (one example), inputs and targets",
                format!(
                    "(n wires, 1 example), (.., {0} examples), (.., {0} examples)",
                    inputs.examples
                ),
                format!(
                    "{}, {}, {}",
                    start.shape_string(),
                    inputs.shape_string(),
                    targets.shape_string()
                ),
            ));
        }
        let examples = inputs.examples;
        let broadcast = |p: &Bits| Bits::from_fn(p.wires, examples, |w, _| p.get(w, 0));
        let mut seen = std::collections::HashSet::new();
        let mut p = start;
        seen.insert(p.clone());
        let mut best = (u64::MAX, p.clone());
        for pass in 1..=self.max_passes {
            let (z, memo) = model.forward_memo(&(broadcast(&p), inputs.clone()))?;
            let change = z.try_add(targets)?;
            let wrong = wrong_examples(&change);
            if wrong < best.0 {
                best = (wrong, p.clone());
            }
            if wrong == 0 {
                return Ok(CircuitFit::Exact {
                    parameters: p,
                    passes: pass,
                });
            }
            let next = if self.aggregate == Aggregate::Tested {
                let (requests, _) = model.backward_memo(&memo, &change)?;
                let mut proposals: Vec<(u64, usize)> = (0..p.wires)
                    .map(|w| (asked_for(&requests, w), w))
                    .filter(|&(a, _)| a > 0)
                    .collect();
                // Most asked for first, so that ties keep that order.
                proposals.sort_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(&b.1)));
                let flipped = |w: usize| {
                    let mut trial = p.clone();
                    trial.set(w, 0, !p.get(w, 0));
                    trial
                };
                if proposals.iter().all(|&(_, w)| seen.contains(&flipped(w))) {
                    // Where no example asks for a flip that leads anywhere
                    // new (a gate switched off hides its inputs' slopes),
                    // every single flip is tried.
                    proposals = (0..p.wires).map(|w| (0, w)).collect();
                }
                let mut chosen: Option<(u64, Bits)> = None;
                for (_, w) in proposals {
                    let trial = flipped(w);
                    if seen.contains(&trial) {
                        continue;
                    }
                    let z = model.forward(&(broadcast(&trial), inputs.clone()))?;
                    let wrong = wrong_examples(&z.try_add(targets)?);
                    if chosen.as_ref().is_none_or(|(fewest, _)| wrong < *fewest) {
                        chosen = Some((wrong, trial));
                    }
                }
                match chosen {
                    Some((_, trial)) => trial,
                    None => {
                        return Ok(CircuitFit::Revisited {
                            best: best.1,
                            wrong: best.0,
                            passes: pass,
                        });
                    }
                }
            } else if self.aggregate == Aggregate::EachExample {
                let mut next = p.clone();
                for e in 0..examples {
                    let one = |b: &Bits| Bits::from_fn(b.wires, 1, |w, _| b.get(w, e));
                    let (x1, y1) = (one(inputs), one(targets));
                    let (z1, m1) = model.forward_memo(&(next.clone(), x1))?;
                    let (dp, _) = model.backward_memo(&m1, &z1.try_add(&y1)?)?;
                    next.try_add_assign(&dp)?;
                }
                next
            } else {
                let (requests, _) = model.backward_memo(&memo, &change)?;
                let asked: Vec<u64> = (0..p.wires).map(|w| asked_for(&requests, w)).collect();
                let most = asked.iter().copied().max().unwrap_or(0);
                let mut next = p.clone();
                for (w, &a) in asked.iter().enumerate() {
                    let flip = match self.aggregate {
                        Aggregate::Sum | Aggregate::EachExample | Aggregate::Tested => a % 2 == 1,
                        // The most asked-for flip only, and only if a
                        // majority of the wrong examples ask for it.
                        Aggregate::Vote => a == most && 2 * a > wrong,
                    };
                    if flip {
                        next.set(w, 0, !p.get(w, 0));
                    }
                }
                next
            };
            if !seen.insert(next.clone()) {
                return Ok(CircuitFit::Revisited {
                    best: best.1,
                    wrong: best.0,
                    passes: pass,
                });
            }
            p = next;
        }
        Ok(CircuitFit::OutOfPasses {
            best: best.1,
            wrong: best.0,
            passes: self.max_passes,
        })
    }
}
