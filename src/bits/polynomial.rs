//! Algebraic normal forms: [`Polynomial`] from a truth table by the Moebius
//! transform, [`PolynomialMap`] with [`JoinWires`] and [`SeparateWires`],
//! and the Boolean-difference check.

use super::{Bits, words_for};
use crate::combinators::{Snd, Then};
use crate::error::{Error, Result};
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;
use std::fmt;

/// A polynomial over Z2 in at most 64 variables, in algebraic normal form:
/// a sum of distinct monomials, each a product of distinct variables (a bit
/// mask; the empty product is 1).
///
/// Variables print as `a`, `b`, `c`, ... up to 26 variables, as `x0`, `x1`,
/// ... beyond.
///
/// ```
/// use revdiff::bits::Polynomial;
/// // 3-input majority (common fact, no source): ab + ac + bc.
/// let majority = Polynomial::from_truth_table(3, |x| x.count_ones() >= 2).unwrap();
/// assert_eq!(majority.to_string(), "ab + ac + bc");
/// // 3-input parity: a + b + c.
/// let parity = Polynomial::from_truth_table(3, |x| x.count_ones() % 2 == 1).unwrap();
/// assert_eq!(parity.to_string(), "a + b + c");
/// ```
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct Polynomial {
    vars: usize,
    monomials: Vec<u64>,
}

/// The most inputs a truth table may have (its length is `2^inputs`).
pub const MAX_TRUTH_TABLE_INPUTS: usize = 30;

impl Polynomial {
    /// The algebraic normal form of the function `f` of `inputs` bits
    /// (`f(x)` reads input `i` as bit `i` of `x`), by the Moebius transform
    /// of its truth table, `O(inputs 2^inputs)` bit operations, 64 at a
    /// time. More than [`MAX_TRUTH_TABLE_INPUTS`] inputs is
    /// [`Error::InvalidSetting`].
    pub fn from_truth_table(inputs: usize, f: impl Fn(u64) -> bool) -> Result<Self> {
        if inputs > MAX_TRUTH_TABLE_INPUTS {
            return Err(Error::InvalidSetting {
                name: "truth table inputs",
                value: inputs.to_string(),
                reason: "a truth table of more than 30 inputs does not fit in memory",
            });
        }
        let size = 1usize << inputs;
        let mut table = vec![0u64; size.div_ceil(64)];
        for x in 0..size {
            if f(x as u64) {
                table[x / 64] |= 1 << (x % 64);
            }
        }
        moebius(&mut table, inputs);
        let monomials: Vec<u64> = (0..size)
            .filter(|&m| (table[m / 64] >> (m % 64)) & 1 == 1)
            .map(|m| m as u64)
            .collect();
        Ok(Polynomial::new(inputs, monomials))
    }

    /// The polynomial with these monomials (bit masks of variables; a
    /// monomial listed twice cancels, as over Z2 it must).
    pub fn new(vars: usize, monomials: impl IntoIterator<Item = u64>) -> Self {
        let mut ms: Vec<u64> = monomials.into_iter().collect();
        // By degree, then by the variables in order: ab before ac before bc.
        ms.sort_by_key(|&m| {
            let vars: Vec<u32> = (0..64).filter(|i| m >> i & 1 == 1).collect();
            (m.count_ones(), vars)
        });
        let mut out: Vec<u64> = Vec::with_capacity(ms.len());
        for m in ms {
            if out.last() == Some(&m) {
                out.pop();
            } else {
                out.push(m);
            }
        }
        Polynomial {
            vars,
            monomials: out,
        }
    }

    /// The number of variables.
    pub fn variables(&self) -> usize {
        self.vars
    }

    /// The monomials, as bit masks of variables.
    pub fn monomials(&self) -> &[u64] {
        &self.monomials
    }

    /// The value at `x` (variable `i` is bit `i` of `x`).
    pub fn eval(&self, x: u64) -> bool {
        self.monomials.iter().filter(|&&m| x & m == m).count() % 2 == 1
    }

    /// The formal partial derivative in variable `i`: the monomials that
    /// contain it, without it.
    pub fn derivative(&self, i: usize) -> Polynomial {
        let bit = 1u64 << i;
        Polynomial::new(
            self.vars,
            self.monomials
                .iter()
                .filter(|&&m| m & bit != 0)
                .map(|m| m & !bit),
        )
    }
}

impl fmt::Display for Polynomial {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.monomials.is_empty() {
            return f.write_str("0");
        }
        let name = |i: usize| {
            if self.vars <= 26 {
                ((b'a' + i as u8) as char).to_string()
            } else {
                format!("x{i}")
            }
        };
        let terms: Vec<String> = self
            .monomials
            .iter()
            .map(|&m| {
                if m == 0 {
                    "1".to_string()
                } else {
                    (0..64).filter(|i| m >> i & 1 == 1).map(name).collect()
                }
            })
            .collect();
        f.write_str(&terms.join(" + "))
    }
}

/// The Moebius transform over Z2 in place: entry `m` becomes the sum of the
/// entries at all subsets of `m`.
fn moebius(table: &mut [u64], inputs: usize) {
    // Within a word: variables 0..6, by shifts.
    const MASKS: [u64; 6] = [
        0x5555_5555_5555_5555,
        0x3333_3333_3333_3333,
        0x0f0f_0f0f_0f0f_0f0f,
        0x00ff_00ff_00ff_00ff,
        0x0000_ffff_0000_ffff,
        0x0000_0000_ffff_ffff,
    ];
    for (k, mask) in MASKS.iter().enumerate().take(inputs.min(6)) {
        for w in table.iter_mut() {
            *w ^= (*w & mask) << (1 << k);
        }
    }
    // Across words: variables 6 and up.
    for k in 6..inputs {
        let step = 1usize << (k - 6);
        for j in 0..table.len() {
            if j & step != 0 {
                table[j] ^= table[j ^ step];
            }
        }
    }
}

/// A map from bit-sliced inputs (a [`Bits`] whose wires are the variables)
/// to one output wire per polynomial, evaluated monomial by monomial, 64
/// examples per word operation.
///
/// Its reverse derivative is again a polynomial map, of the inputs and the
/// output change together: input change `i` is the sum over outputs `j` of
/// `dz_j` times the formal derivative of polynomial `j` in variable `i`.
///
/// ```
/// use revdiff::bits::{Bits, Polynomial, PolynomialMap};
/// use revdiff::Map;
///
/// let majority = Polynomial::from_truth_table(3, |x| x.count_ones() >= 2)?;
/// let map = PolynomialMap::new(3, vec![majority])?;
/// // All eight inputs at once, one example each.
/// let x = Bits::from_fn(3, 8, |wire, example| example >> wire & 1 == 1);
/// let y = map.forward(&x)?;
/// for e in 0..8 {
///     assert_eq!(y.get(0, e), (e as u32).count_ones() >= 2);
/// }
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PolynomialMap {
    inputs: usize,
    outputs: Vec<Polynomial>,
}

impl Compose for PolynomialMap {}

impl PolynomialMap {
    /// The map `x -> (p_0(x), p_1(x), ...)` of `inputs` input wires. More
    /// than 64 inputs, or a polynomial in another number of variables, is
    /// [`Error::InvalidSetting`].
    pub fn new(inputs: usize, outputs: Vec<Polynomial>) -> Result<Self> {
        if inputs > 64 || outputs.iter().any(|p| p.vars != inputs) {
            return Err(Error::InvalidSetting {
                name: "polynomial map",
                value: format!("{inputs} inputs"),
                reason: "every polynomial must be in the map's inputs, at most 64",
            });
        }
        Ok(PolynomialMap { inputs, outputs })
    }

    /// The polynomials, one per output wire.
    pub fn polynomials(&self) -> &[Polynomial] {
        &self.outputs
    }

    fn evaluate(&self, x: &Bits) -> Result<Bits> {
        if x.wires != self.inputs {
            return Err(Error::shape(
                "polynomial map input",
                format!("({} wires, any examples)", self.inputs),
                x.shape_string(),
            ));
        }
        let n = words_for(x.examples);
        let mut out = Bits::zeros(self.outputs.len(), x.examples);
        for (j, p) in self.outputs.iter().enumerate() {
            for &m in &p.monomials {
                for k in 0..n {
                    let mut term = x.valid(k);
                    for i in 0..self.inputs {
                        if m >> i & 1 == 1 {
                            term &= x.words[i * n + k];
                        }
                    }
                    out.words[j * n + k] ^= term;
                }
            }
        }
        Ok(out)
    }

    /// The reverse derivative as a map of the inputs followed by the
    /// output change, concatenated as wires.
    fn derivative_map(&self) -> PolynomialMap {
        let m = self.outputs.len();
        let vars = self.inputs + m;
        let lift = |p: &Polynomial| Polynomial::new(vars, p.monomials.iter().copied());
        let outputs = (0..self.inputs)
            .map(|i| {
                let mut monomials = Vec::new();
                for (j, p) in self.outputs.iter().enumerate() {
                    let dz = 1u64 << (self.inputs + j);
                    monomials.extend(lift(&p.derivative(i)).monomials.iter().map(|t| t | dz));
                }
                Polynomial::new(vars, monomials)
            })
            .collect();
        PolynomialMap {
            inputs: vars,
            outputs,
        }
    }
}

impl Map<Bits> for PolynomialMap {
    type Output = Bits;
    type Memo = Bits;
    fn forward_memo(&self, x: &Bits) -> Result<(Bits, Bits)> {
        Ok((self.evaluate(x)?, x.clone()))
    }
    fn backward_memo(&self, x: &Bits, dz: &Bits) -> Result<Bits> {
        if dz.wires != self.outputs.len() {
            return Err(Error::shape(
                "the output change of a polynomial map",
                format!("({} wires, {} examples)", self.outputs.len(), x.examples),
                dz.shape_string(),
            ));
        }
        self.derivative_map().evaluate(&stack(x, dz)?)
    }
}

/// The reverse map: stack `(x, dz)` as wires, then the derivative's own
/// polynomial map, so the reverse map is again made of these two, to any
/// order.
impl Reverse<Bits> for PolynomialMap {
    type Rev = Then<JoinWires, PolynomialMap>;
    fn rev(&self) -> Self::Rev {
        Then::new(JoinWires { at: self.inputs }, self.derivative_map())
    }
}

/// The wires of `x` followed by those of `dz`, for the same examples.
fn stack(x: &Bits, dz: &Bits) -> Result<Bits> {
    if x.examples != dz.examples {
        return Err(Error::shape(
            "stacking bit values",
            x.shape_string(),
            dz.shape_string(),
        ));
    }
    let mut words = x.words.clone();
    words.extend_from_slice(&dz.words);
    Ok(Bits {
        wires: x.wires + dz.wires,
        examples: x.examples,
        words,
    })
}

/// The first `at` wires and the rest.
fn split(s: &Bits, at: usize) -> Result<(Bits, Bits)> {
    if at > s.wires {
        return Err(Error::shape(
            "splitting bit values",
            format!("at least {at} wires"),
            s.shape_string(),
        ));
    }
    let n = words_for(s.examples);
    let part = |from: usize, to: usize| Bits {
        wires: to - from,
        examples: s.examples,
        words: s.words[from * n..to * n].to_vec(),
    };
    Ok((part(0, at), part(at, s.wires)))
}

/// `(x, y) -> x ++ y`: the wires of `x` (which must have `at` wires)
/// followed by those of `y`. Linear; its reverse map is [`SeparateWires`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct JoinWires {
    /// The wires of the first part.
    pub at: usize,
}

/// `s -> (the first at wires, the rest)`. Linear; its reverse map is
/// [`JoinWires`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct SeparateWires {
    /// The wires of the first part.
    pub at: usize,
}

impl Compose for JoinWires {}
impl Compose for SeparateWires {}

impl Map<(Bits, Bits)> for JoinWires {
    type Output = Bits;
    type Memo = ();
    fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, ())> {
        if x.wires != self.at {
            return Err(Error::shape(
                "stacking bit values, the first part",
                format!("({} wires, {} examples)", self.at, x.examples),
                x.shape_string(),
            ));
        }
        Ok((stack(x, y)?, ()))
    }
    fn backward_memo(&self, _: &(), d: &Bits) -> Result<(Bits, Bits)> {
        split(d, self.at)
    }
}

impl Reverse<(Bits, Bits)> for JoinWires {
    type Rev = Then<Snd, SeparateWires>;
    fn rev(&self) -> Self::Rev {
        Snd.then(SeparateWires { at: self.at })
    }
}

impl Map<Bits> for SeparateWires {
    type Output = (Bits, Bits);
    type Memo = ();
    fn forward_memo(&self, s: &Bits) -> Result<((Bits, Bits), ())> {
        Ok((split(s, self.at)?, ()))
    }
    fn backward_memo(&self, _: &(), (a, b): &(Bits, Bits)) -> Result<Bits> {
        stack(a, b)
    }
}

impl Reverse<Bits> for SeparateWires {
    type Rev = Then<Snd, JoinWires>;
    fn rev(&self) -> Self::Rev {
        Snd.then(JoinWires { at: self.at })
    }
}

/// Where a map's backward pass disagrees with the Boolean difference.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DifferenceMismatch {
    /// The input, variable `i` as bit `i`.
    pub input: u64,
    /// The variable differentiated in.
    pub variable: usize,
    /// `f(x with x_i = 1) + f(x with x_i = 0)`, per output wire (bit `j`).
    pub expected: u64,
    /// The backward pass's partial derivative, per output wire.
    pub observed: u64,
}

/// Checks a multilinear map's backward pass against the Boolean difference,
/// at every input of `inputs` wires: for each variable `i`, the partial
/// derivative `R[f](x, e_j)_i` must equal `f(x | x_i = 1) + f(x | x_i = 0)`
/// for every output wire `j`. (For multilinear polynomials the formal
/// derivative and the Boolean difference agree; for others, such as
/// `x x`, they need not.) All `2^inputs` inputs run at once, one example
/// each. Returns the first mismatch, in order of input then variable.
///
/// ```
/// use revdiff::bits::{boolean_difference_mismatch, AndGate, SeparateWires};
/// use revdiff::Compose;
///
/// let and = SeparateWires { at: 1 }.then(AndGate); // two wires -> one
/// assert_eq!(boolean_difference_mismatch(&and, 2).unwrap(), None);
/// ```
pub fn boolean_difference_mismatch<F>(f: &F, inputs: usize) -> Result<Option<DifferenceMismatch>>
where
    F: Map<Bits, Output = Bits>,
{
    if inputs > 20 {
        return Err(Error::InvalidSetting {
            name: "inputs",
            value: inputs.to_string(),
            reason: "the Boolean difference is checked at every input: at most 20 inputs",
        });
    }
    let cases = 1usize << inputs;
    let x = Bits::from_fn(inputs, cases, |wire, example| example >> wire & 1 == 1);
    let (y, memo) = f.forward_memo(&x)?;
    let outputs = y.wires;
    for i in 0..inputs {
        let with = |bit: bool| {
            Bits::from_fn(inputs, cases, |wire, e| {
                if wire == i { bit } else { e >> wire & 1 == 1 }
            })
        };
        let difference = f.forward(&with(true))?.try_add(&f.forward(&with(false))?)?;
        // Partial derivatives of every output: one backward pass per output.
        let mut observed = vec![0u64; cases];
        for j in 0..outputs {
            let dz = Bits::from_fn(outputs, cases, |wire, _| wire == j);
            let dx = f.backward_memo(&memo, &dz)?;
            for (e, o) in observed.iter_mut().enumerate() {
                *o |= u64::from(dx.get(i, e)) << j;
            }
        }
        for (e, &o) in observed.iter().enumerate() {
            let expected =
                (0..outputs).fold(0u64, |acc, j| acc | u64::from(difference.get(j, e)) << j);
            if expected != o {
                return Ok(Some(DifferenceMismatch {
                    input: e as u64,
                    variable: i,
                    expected,
                    observed: o,
                }));
            }
        }
    }
    Ok(None)
}
