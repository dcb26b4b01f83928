//! The same algebra over the two-element field Z2: XOR is addition, AND is
//! multiplication, and the reverse derivative of a polynomial map is given
//! by its formal partial derivatives.
//!
//! - [`Bit`] is the scalar; [`Bits`] holds bit-sliced values: `wires`
//!   wires, each with one bit per example, packed 64 examples to a `u64`,
//!   so that a gate costs one word operation per 64 examples.
//! - Gates are maps with reverse derivatives as maps, closed under
//!   repetition: [`XorGate`], [`AndGate`], [`NotGate`] (`1 + x`),
//!   [`OrGate`] (`x + y + xy`) and [`MuxGate`] (`s ? b : a`). Constants
//!   and copies are the crate's own [`Constant`](crate::Constant) and
//!   [`Duplicate`](crate::Duplicate), and every combinator works unchanged.
//! - [`Polynomial`] is a function's algebraic normal form, computed from its
//!   truth table by the Moebius transform, printed readably, and made into a
//!   map by [`PolynomialMap`].
//!
//! # The derivative belongs to the polynomial
//!
//! Over Z2, `x` and `x * x` are the same function but different
//! polynomials, and their reverse derivatives differ: `1` and `2x = 0`.
//!
//! ```
//! use revdiff::bits::{AndGate, Bits};
//! use revdiff::{Compose, Duplicate, Id, Map};
//!
//! let x = Bits::from_fn(1, 2, |_, e| e == 1); // x = 0 and x = 1
//! let square = Duplicate.then(AndGate); // x -> x * x
//! assert_eq!(square.forward(&x).unwrap(), Id.forward(&x).unwrap());
//! let dz = Bits::from_fn(1, 2, |_, _| true);
//! // d(x)/dx = 1, but d(x x)/dx = x + x = 0.
//! assert_eq!(Id.backward(&x, &dz).unwrap(), dz);
//! assert_eq!(square.backward(&x, &dz).unwrap(), Bits::zeros(1, 2));
//! ```

use crate::combinators::{Fst, Pair, Snd, Then};
use crate::error::{Error, Result};
use crate::laws::{ExactPairing, ExactScalar};
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;
use crate::workspace::Workspace;
use std::fmt;

mod word_by_word;
pub use word_by_word::{Sliceable, Word, WordByWord, WordValue};

/// An element of Z2: `Bit(true) + Bit(true) = Bit(false)`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub struct Bit(pub bool);

impl Space for Bit {
    type Shape = ();
    fn shape(&self) {}
    fn zero_of(_: &()) -> Self {
        Bit(false)
    }
    fn try_add(&self, other: &Self) -> Result<Self> {
        Ok(Bit(self.0 ^ other.0))
    }
    fn shape_string(&self) -> String {
        "bit".to_string()
    }
}

impl ExactScalar for Bit {
    fn zero() -> Self {
        Bit(false)
    }
    fn plus(&self, other: &Self) -> Self {
        Bit(self.0 ^ other.0)
    }
}

impl ExactPairing<Bit> for Bit {
    fn pair_exactly(&self, other: &Self) -> Result<Bit> {
        Ok(Bit(self.0 & other.0))
    }
    fn show_exactly(&self) -> String {
        u8::from(self.0).to_string()
    }
}

/// Bit-sliced values: `wires` wires, each holding one bit per example,
/// packed 64 examples to a word. Addition is XOR; values of different
/// shapes do not add (a typed error names both shapes).
///
/// ```
/// use revdiff::bits::Bits;
/// use revdiff::Space;
///
/// // Two wires over three examples.
/// let a = Bits::from_fn(2, 3, |wire, example| (wire + example) % 2 == 0);
/// assert!(a.get(0, 0) && !a.get(1, 0));
/// assert_eq!(a.try_add(&a).unwrap(), Bits::zeros(2, 3));
/// assert!(a.try_add(&Bits::zeros(2, 4)).is_err());
/// ```
#[derive(Clone, PartialEq, Eq, Hash)]
pub struct Bits {
    wires: usize,
    examples: usize,
    // Wire-major; bits past `examples` in a wire's last word are always 0.
    words: Vec<u64>,
}

fn words_for(examples: usize) -> usize {
    examples.div_ceil(64)
}

impl Bits {
    /// All zeros.
    pub fn zeros(wires: usize, examples: usize) -> Self {
        Bits {
            wires,
            examples,
            words: vec![0; wires * words_for(examples)],
        }
    }

    /// Bit `f(wire, example)` on each wire for each example.
    pub fn from_fn(wires: usize, examples: usize, f: impl Fn(usize, usize) -> bool) -> Self {
        let mut out = Bits::zeros(wires, examples);
        for w in 0..wires {
            for e in 0..examples {
                if f(w, e) {
                    out.set(w, e, true);
                }
            }
        }
        out
    }

    /// The number of wires.
    pub fn wires(&self) -> usize {
        self.wires
    }

    /// The number of examples.
    pub fn examples(&self) -> usize {
        self.examples
    }

    /// The bit of `wire` for `example` (false outside the shape).
    pub fn get(&self, wire: usize, example: usize) -> bool {
        if wire >= self.wires || example >= self.examples {
            return false;
        }
        let word = self.words[wire * words_for(self.examples) + example / 64];
        (word >> (example % 64)) & 1 == 1
    }

    /// Sets the bit of `wire` for `example` (ignored outside the shape).
    pub fn set(&mut self, wire: usize, example: usize, bit: bool) {
        if wire >= self.wires || example >= self.examples {
            return;
        }
        let index = wire * words_for(self.examples) + example / 64;
        let mask = 1u64 << (example % 64);
        if bit {
            self.words[index] |= mask;
        } else {
            self.words[index] &= !mask;
        }
    }

    /// The words of one wire.
    pub fn wire(&self, wire: usize) -> &[u64] {
        let n = words_for(self.examples);
        &self.words[wire * n..(wire + 1) * n]
    }

    /// How many bits are set.
    pub fn count_ones(&self) -> u64 {
        self.words.iter().map(|w| u64::from(w.count_ones())).sum()
    }

    /// The mask of the examples a wire's `k`-th word holds.
    fn valid(&self, k: usize) -> u64 {
        let n = words_for(self.examples);
        let rest = self.examples - 64 * (k % n.max(1));
        if rest >= 64 {
            u64::MAX
        } else {
            (1u64 << rest) - 1
        }
    }

    fn same_shape(&self, other: &Bits, operation: &'static str) -> Result<()> {
        if (self.wires, self.examples) == (other.wires, other.examples) {
            Ok(())
        } else {
            Err(Error::shape(
                operation,
                self.shape_string(),
                other.shape_string(),
            ))
        }
    }

    /// `op` word by word on two values of one shape.
    fn zip(
        &self,
        other: &Bits,
        operation: &'static str,
        op: impl Fn(u64, u64) -> u64,
    ) -> Result<Bits> {
        self.same_shape(other, operation)?;
        Ok(Bits {
            wires: self.wires,
            examples: self.examples,
            words: self
                .words
                .iter()
                .zip(&other.words)
                .map(|(a, b)| op(*a, *b))
                .collect(),
        })
    }

    /// [`zip`](Bits::zip) into `out`, in its memory.
    fn zip_into(
        &self,
        other: &Bits,
        out: &mut Bits,
        operation: &'static str,
        op: impl Fn(u64, u64) -> u64,
    ) -> Result<()> {
        self.same_shape(other, operation)?;
        out.wires = self.wires;
        out.examples = self.examples;
        out.words.resize(self.words.len(), 0);
        for ((o, &a), &b) in out.words.iter_mut().zip(&self.words).zip(&other.words) {
            *o = op(a, b);
        }
        Ok(())
    }

    /// `op` word by word, added (XOR) into `acc`, which must have this shape.
    fn zip_adding(
        &self,
        other: &Bits,
        acc: &mut Bits,
        operation: &'static str,
        op: impl Fn(u64, u64) -> u64,
    ) -> Result<()> {
        self.same_shape(other, operation)?;
        self.same_shape(acc, operation)?;
        for ((o, &a), &b) in acc.words.iter_mut().zip(&self.words).zip(&other.words) {
            *o ^= op(a, b);
        }
        Ok(())
    }

    /// A gate's output into the workspace's buffer (made on the first call).
    fn zip_reusing<'w>(
        &self,
        other: &Bits,
        work: &'w mut Workspace,
        operation: &'static str,
        op: impl Fn(u64, u64) -> u64,
    ) -> Result<&'w Bits> {
        let out = work.output_or_insert_with(|| Bits::zeros(0, 0));
        self.zip_into(other, out, operation, op)?;
        Ok(out)
    }

    fn complement(&self) -> Bits {
        let mut out = self.clone();
        for (k, w) in out.words.iter_mut().enumerate() {
            *w = !*w & self.valid(k);
        }
        out
    }
}

impl fmt::Debug for Bits {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Bits{}", self.shape_string())?;
        for w in 0..self.wires.min(16) {
            let shown: String = (0..self.examples.min(64))
                .map(|e| if self.get(w, e) { '1' } else { '0' })
                .collect();
            write!(f, " {shown}")?;
        }
        Ok(())
    }
}

impl Space for Bits {
    type Shape = (usize, usize);
    fn shape(&self) -> (usize, usize) {
        (self.wires, self.examples)
    }
    fn zero_of(&(wires, examples): &(usize, usize)) -> Self {
        Bits::zeros(wires, examples)
    }
    fn try_add(&self, other: &Self) -> Result<Self> {
        self.zip(other, "adding bit values", |a, b| a ^ b)
    }
    fn try_add_assign(&mut self, other: &Self) -> Result<()> {
        self.same_shape(other, "adding bit values")?;
        for (a, b) in self.words.iter_mut().zip(&other.words) {
            *a ^= b;
        }
        Ok(())
    }
    fn check_same_shape(&self, other: &Self) -> Result<()> {
        self.same_shape(other, "adding bit values")
    }
    fn assign_from(&mut self, other: &Self) {
        self.wires = other.wires;
        self.examples = other.examples;
        self.words.clone_from(&other.words);
    }
    fn shape_string(&self) -> String {
        format!("({} wires, {} examples)", self.wires, self.examples)
    }
}

impl ExactPairing<Bit> for Bits {
    /// The sum over Z2 of the products of corresponding bits.
    fn pair_exactly(&self, other: &Self) -> Result<Bit> {
        let both = self.zip(other, "pairing bit values", |a, b| a & b)?;
        Ok(Bit(both.count_ones() % 2 == 1))
    }
    fn show_exactly(&self) -> String {
        format!("{self:?}")
    }
}

/// `(x, y) -> x + y` (XOR), bit by bit. Reverse derivative: `dz -> (dz, dz)`.
///
/// Truth table (common practice, no source): 0 0 -> 0, 0 1 -> 1, 1 0 -> 1,
/// 1 1 -> 0.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct XorGate;

/// `(x, y) -> x y` (AND), bit by bit. Reverse derivative:
/// `((x, y), dz) -> (y dz, x dz)`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct AndGate;

/// `x -> 1 + x` (NOT), bit by bit. Reverse derivative: `dz -> dz`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct NotGate;

/// `(x, y) -> x + y + x y` (OR), bit by bit. Its reverse derivative,
/// `((x, y), dz) -> ((1 + y) dz, (1 + x) dz)`, is that of the equal
/// composite of XOR and AND gates.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct OrGate;

/// `(s, (a, b)) -> a + s (a + b)`: `b` where `s` is 1, `a` where it is 0.
/// Its reverse derivative, `((a + b) dz, ((1 + s) dz, s dz))`, is that of
/// the equal composite of gates.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MuxGate;

impl Compose for XorGate {}
impl Compose for AndGate {}
impl Compose for NotGate {}
impl Compose for OrGate {}
impl Compose for MuxGate {}

impl Map<(Bits, Bits)> for XorGate {
    type Output = Bits;
    type Memo = ();
    fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, ())> {
        Ok((x.zip(y, "XOR gate", |a, b| a ^ b)?, ()))
    }
    fn backward_memo(&self, _: &(), dz: &Bits) -> Result<(Bits, Bits)> {
        Ok((dz.clone(), dz.clone()))
    }
    fn forward_reusing<'w>(
        &self,
        (x, y): &(Bits, Bits),
        work: &'w mut Workspace,
    ) -> Result<&'w Bits> {
        x.zip_reusing(y, work, "XOR gate", |a, b| a ^ b)
    }
    fn backward_reusing(
        &self,
        (x, _): &(Bits, Bits),
        _: &mut Workspace,
        dz: &Bits,
        (dx, dy): &mut (Bits, Bits),
    ) -> Result<()> {
        x.same_shape(dz, "the output change of an XOR gate")?;
        dx.assign_from(dz);
        dy.assign_from(dz);
        Ok(())
    }
    fn backward_reusing_adding(
        &self,
        (x, _): &(Bits, Bits),
        _: &mut Workspace,
        dz: &Bits,
        (dx, dy): &mut (Bits, Bits),
    ) -> Result<()> {
        let op = "the output change of an XOR gate";
        x.same_shape(dz, op)?;
        dx.try_add_assign(dz)?;
        dy.try_add_assign(dz)
    }
}

// The AND and OR gates: the output is `value(x, y)`; the change of each
// input is `slope(other input, dz)`, so the passes keep (or are handed
// again) both inputs.
macro_rules! two_input_gate {
    ($gate:ty, $name:literal, |$a:ident, $b:ident| $value:expr, $change_of:literal, |$o:ident, $d:ident| $slope:expr) => {
        impl Map<(Bits, Bits)> for $gate {
            type Output = Bits;
            type Memo = (Bits, Bits);
            fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, (Bits, Bits))> {
                Ok((x.zip(y, $name, |$a, $b| $value)?, (x.clone(), y.clone())))
            }
            fn backward_memo(&self, (x, y): &(Bits, Bits), dz: &Bits) -> Result<(Bits, Bits)> {
                Ok((
                    y.zip(dz, $change_of, |$o, $d| $slope)?,
                    x.zip(dz, $change_of, |$o, $d| $slope)?,
                ))
            }
            // The reusing passes keep no copies: the inputs come again.
            fn forward_reusing<'w>(
                &self,
                (x, y): &(Bits, Bits),
                work: &'w mut Workspace,
            ) -> Result<&'w Bits> {
                x.zip_reusing(y, work, $name, |$a, $b| $value)
            }
            fn backward_reusing(
                &self,
                (x, y): &(Bits, Bits),
                _: &mut Workspace,
                dz: &Bits,
                (dx, dy): &mut (Bits, Bits),
            ) -> Result<()> {
                y.zip_into(dz, dx, $change_of, |$o, $d| $slope)?;
                x.zip_into(dz, dy, $change_of, |$o, $d| $slope)
            }
            fn backward_reusing_adding(
                &self,
                (x, y): &(Bits, Bits),
                _: &mut Workspace,
                dz: &Bits,
                (dx, dy): &mut (Bits, Bits),
            ) -> Result<()> {
                y.zip_adding(dz, dx, $change_of, |$o, $d| $slope)?;
                x.zip_adding(dz, dy, $change_of, |$o, $d| $slope)
            }
        }
    };
}

two_input_gate!(
    AndGate,
    "AND gate",
    |a, b| a & b,
    "the output change of an AND gate",
    |other, dz| other & dz
);

/// `((x, y), dz) -> (y dz, x dz)` from gates.
pub type AndGateRev =
    Pair<Then<Pair<Then<Fst, Snd>, Snd>, AndGate>, Then<Pair<Then<Fst, Fst>, Snd>, AndGate>>;

impl Map<Bits> for NotGate {
    type Output = Bits;
    type Memo = ();
    fn forward_memo(&self, x: &Bits) -> Result<(Bits, ())> {
        Ok((x.complement(), ()))
    }
    fn backward_memo(&self, _: &(), dz: &Bits) -> Result<Bits> {
        Ok(dz.clone())
    }
}

/// `x + y + x y` from gates.
pub type OrComposite = Then<Pair<XorGate, AndGate>, XorGate>;

impl OrGate {
    /// The equal composite of XOR and AND gates.
    pub fn composite(&self) -> OrComposite {
        XorGate.pair(AndGate).then(XorGate)
    }
}

// OR is x + y + xy: the change of x is (1 + y) dz.
two_input_gate!(
    OrGate,
    "OR gate",
    |a, b| a | b,
    "the output change of an OR gate",
    |other, dz| !other & dz
);

/// `a + s (a + b)` from gates, on `(s, (a, b))`.
pub type MuxComposite =
    Then<Pair<Then<Snd, Fst>, Then<Pair<Fst, Then<Snd, XorGate>>, AndGate>>, XorGate>;

impl MuxGate {
    /// The equal composite of XOR and AND gates.
    pub fn composite(&self) -> MuxComposite {
        Snd.then(Fst)
            .pair(Fst.pair(Snd.then(XorGate)).then(AndGate))
            .then(XorGate)
    }
}

type MuxInput = (Bits, (Bits, Bits));

impl Map<MuxInput> for MuxGate {
    type Output = Bits;
    type Memo = MuxInput;
    fn forward_memo(&self, input: &MuxInput) -> Result<(Bits, MuxInput)> {
        let (s, (a, b)) = input;
        s.same_shape(a, "multiplexer, its selector against its first input")?;
        a.same_shape(b, "multiplexer inputs")?;
        let words = s
            .words
            .iter()
            .zip(&a.words)
            .zip(&b.words)
            .map(|((s, a), b)| (a & !s) | (b & s))
            .collect();
        let chosen = Bits {
            wires: a.wires,
            examples: a.examples,
            words,
        };
        Ok((chosen, input.clone()))
    }
    fn backward_memo(&self, (s, (a, b)): &MuxInput, dz: &Bits) -> Result<MuxInput> {
        let op = "the output change of a multiplexer";
        Ok((
            a.zip(b, op, |a, b| a ^ b)?.zip(dz, op, |d, z| d & z)?,
            (s.zip(dz, op, |s, z| !s & z)?, s.zip(dz, op, |s, z| s & z)?),
        ))
    }
}

// The gates' reverse maps, from gates, over `Bits` and over `Word`s alike.
macro_rules! gate_reverse_maps {
    ($v:ty) => {
        impl Reverse<($v, $v)> for XorGate {
            type Rev = $crate::combinators::Then<$crate::combinators::Snd, $crate::Duplicate>;
            fn rev(&self) -> Self::Rev {
                $crate::Compose::then($crate::combinators::Snd, $crate::Duplicate)
            }
        }
        impl Reverse<($v, $v)> for AndGate {
            type Rev = $crate::bits::AndGateRev;
            fn rev(&self) -> $crate::bits::AndGateRev {
                use $crate::Compose;
                use $crate::combinators::{Fst, Pair, Snd};
                Pair::new(
                    Fst.then(Snd).pair(Snd).then(AndGate),
                    Fst.then(Fst).pair(Snd).then(AndGate),
                )
            }
        }
        impl Reverse<$v> for NotGate {
            type Rev = $crate::combinators::Snd;
            fn rev(&self) -> Self::Rev {
                $crate::combinators::Snd
            }
        }
        impl Reverse<($v, $v)> for OrGate {
            type Rev = <$crate::bits::OrComposite as Reverse<($v, $v)>>::Rev;
            fn rev(&self) -> Self::Rev {
                <$crate::bits::OrComposite as Reverse<($v, $v)>>::rev(&self.composite())
            }
        }
        impl Reverse<($v, ($v, $v))> for MuxGate {
            type Rev = <$crate::bits::MuxComposite as Reverse<($v, ($v, $v))>>::Rev;
            fn rev(&self) -> Self::Rev {
                <$crate::bits::MuxComposite as Reverse<($v, ($v, $v))>>::rev(&self.composite())
            }
        }
    };
}
pub(crate) use gate_reverse_maps;

gate_reverse_maps!(Bits);

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
/// [`boolean_difference_mismatch`]).
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
