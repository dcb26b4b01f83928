//! The scalar [`Bit`] and bit-sliced values, [`Bits`]: wire-major `u64`
//! words, 64 examples each; padding bits past the last example are kept 0.

use crate::error::{Error, Result};
use crate::laws::{ExactPairing, ExactScalar};
use crate::space::Space;
use crate::workspace::Workspace;
use std::fmt;

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
    pub(super) wires: usize,
    pub(super) examples: usize,
    // Wire-major; bits past `examples` in a wire's last word are always 0.
    pub(super) words: Vec<u64>,
}

pub(super) fn words_for(examples: usize) -> usize {
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
    pub(super) fn valid(&self, k: usize) -> u64 {
        let n = words_for(self.examples);
        let rest = self.examples - 64 * (k % n.max(1));
        if rest >= 64 {
            u64::MAX
        } else {
            (1u64 << rest) - 1
        }
    }

    pub(super) fn same_shape(&self, other: &Bits, operation: &'static str) -> Result<()> {
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
    pub(super) fn zip(
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
    pub(super) fn zip_into(
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
    pub(super) fn zip_adding(
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
    pub(super) fn zip_reusing<'w>(
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

    pub(super) fn complement(&self) -> Bits {
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
