//! Whole circuits run word by word: a composite of gates over [`Word`]s (64
//! examples of one wire, in one `u64`) lifted to [`Bits`] by
//! [`WordByWord`], which runs the whole composite, forward and backward,
//! once per word position. The values between gates stay in registers
//! instead of passing through memory one gate at a time.

use super::{AndGate, Bit, Bits, MuxGate, NotGate, OrGate, XorGate, words_for};
use crate::error::{Error, Result};
use crate::laws::ExactPairing;
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;
use crate::workspace::Workspace;

/// One wire's values for 64 examples, bit `e` for example `e`: the unit a
/// bit-sliced gate acts on. Addition is XOR. The gates act on words as on
/// [`Bits`], so a circuit written over words is the body of a
/// [`WordByWord`] loop.
///
/// ```
/// use revdiff::bits::{AndGate, Word};
/// use revdiff::Map;
///
/// let (x, y) = (Word(0b1100), Word(0b1010));
/// assert_eq!(AndGate.forward(&(x, y)).unwrap(), Word(0b1000));
/// // The change of x is y dz, example by example.
/// let (dx, dy) = AndGate.backward(&(x, y), &Word(0b0110)).unwrap();
/// assert_eq!((dx, dy), (Word(0b0010), Word(0b0100)));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub struct Word(pub u64);

impl Space for Word {
    type Shape = ();
    fn shape(&self) {}
    fn zero_of(_: &()) -> Self {
        Word(0)
    }
    fn try_add(&self, other: &Self) -> Result<Self> {
        Ok(Word(self.0 ^ other.0))
    }
    fn try_add_assign(&mut self, other: &Self) -> Result<()> {
        self.0 ^= other.0;
        Ok(())
    }
    fn check_same_shape(&self, _: &Self) -> Result<()> {
        Ok(())
    }
    fn shape_string(&self) -> String {
        "word".to_string()
    }
}

impl ExactPairing<Bit> for Word {
    /// The sum over Z2 of the products of corresponding bits.
    fn pair_exactly(&self, other: &Self) -> Result<Bit> {
        Ok(Bit((self.0 & other.0).count_ones() % 2 == 1))
    }
    fn show_exactly(&self) -> String {
        format!("{:#018x}", self.0)
    }
}

impl Map<(Word, Word)> for XorGate {
    type Output = Word;
    type Memo = ();
    fn forward_memo(&self, (x, y): &(Word, Word)) -> Result<(Word, ())> {
        Ok((Word(x.0 ^ y.0), ()))
    }
    fn backward_memo(&self, _: &(), dz: &Word) -> Result<(Word, Word)> {
        Ok((*dz, *dz))
    }
}

// As `two_input_gate!` for `Bits`: the output is `value(x, y)`, the change
// of each input `slope(other input, dz)`.
macro_rules! two_input_word_gate {
    ($gate:ty, |$a:ident, $b:ident| $value:expr, |$o:ident, $d:ident| $slope:expr) => {
        impl Map<(Word, Word)> for $gate {
            type Output = Word;
            type Memo = (Word, Word);
            fn forward_memo(&self, &(x, y): &(Word, Word)) -> Result<(Word, (Word, Word))> {
                let ($a, $b) = (x.0, y.0);
                Ok((Word($value), (x, y)))
            }
            fn backward_memo(&self, &(x, y): &(Word, Word), dz: &Word) -> Result<(Word, Word)> {
                let slope = |$o: u64, $d: u64| $slope;
                Ok((Word(slope(y.0, dz.0)), Word(slope(x.0, dz.0))))
            }
        }
    };
}

two_input_word_gate!(AndGate, |a, b| a & b, |other, dz| other & dz);
// OR is x + y + xy: the change of x is (1 + y) dz.
two_input_word_gate!(OrGate, |a, b| a | b, |other, dz| !other & dz);

impl Map<Word> for NotGate {
    type Output = Word;
    type Memo = ();
    fn forward_memo(&self, x: &Word) -> Result<(Word, ())> {
        Ok((Word(!x.0), ()))
    }
    fn backward_memo(&self, _: &(), dz: &Word) -> Result<Word> {
        Ok(*dz)
    }
}

impl Map<(Word, (Word, Word))> for MuxGate {
    type Output = Word;
    type Memo = (Word, (Word, Word));
    fn forward_memo(
        &self,
        &(s, (a, b)): &(Word, (Word, Word)),
    ) -> Result<(Word, (Word, (Word, Word)))> {
        Ok((Word((a.0 & !s.0) | (b.0 & s.0)), (s, (a, b))))
    }
    fn backward_memo(
        &self,
        &(s, (a, b)): &(Word, (Word, Word)),
        dz: &Word,
    ) -> Result<(Word, (Word, Word))> {
        Ok((
            Word((a.0 ^ b.0) & dz.0),
            (Word(!s.0 & dz.0), Word(s.0 & dz.0)),
        ))
    }
}

super::gate_reverse_maps!(Word);

/// Bit values that split into one value per word position: [`Bits`] into
/// [`Word`]s, and tuples part by part (every part of one shape). Implemented
/// by the crate for `Bits` and tuples of sliceable values.
pub trait Sliceable: Space {
    /// The value at one word position.
    type Word: WordValue<Whole = Self>;

    /// The `(wires, examples)` every part has; an error naming two parts'
    /// shapes if they differ.
    fn slicing(&self) -> Result<(usize, usize)>;

    /// The value at word position `k` (below `wires * words per wire`).
    fn word(&self, k: usize) -> Self::Word;

    /// Writes `word` at position `k`, keeping only the bits in `mask` (the
    /// examples the position holds).
    fn put_word(&mut self, k: usize, word: Self::Word, mask: u64);

    /// Adds (XOR) `word` at position `k`, keeping only the bits in `mask`.
    fn add_word(&mut self, k: usize, word: Self::Word, mask: u64);

    /// Gives every part the shape `(wires, examples)`, in its own memory
    /// where it can; the contents are then unspecified.
    fn reshape_bits(&mut self, wires: usize, examples: usize);

    /// Zeros with every part of shape `(wires, examples)`.
    fn zeros_sliced(wires: usize, examples: usize) -> Self;
}

/// The value at one word position of a [`Sliceable`] value: [`Word`], and
/// tuples of word values.
pub trait WordValue: Space + Copy {
    /// The bit-sliced value this is one word position of.
    type Whole: Sliceable<Word = Self>;
}

impl WordValue for Word {
    type Whole = Bits;
}

impl Sliceable for Bits {
    type Word = Word;
    fn slicing(&self) -> Result<(usize, usize)> {
        Ok((self.wires, self.examples))
    }
    fn word(&self, k: usize) -> Word {
        Word(self.words[k])
    }
    fn put_word(&mut self, k: usize, word: Word, mask: u64) {
        self.words[k] = word.0 & mask;
    }
    fn add_word(&mut self, k: usize, word: Word, mask: u64) {
        self.words[k] ^= word.0 & mask;
    }
    fn reshape_bits(&mut self, wires: usize, examples: usize) {
        self.wires = wires;
        self.examples = examples;
        self.words.resize(wires * words_for(examples), 0);
    }
    fn zeros_sliced(wires: usize, examples: usize) -> Self {
        Bits::zeros(wires, examples)
    }
}

impl<A: WordValue, B: WordValue> WordValue for (A, B) {
    type Whole = (A::Whole, B::Whole);
}

impl<A: Sliceable, B: Sliceable> Sliceable for (A, B) {
    type Word = (A::Word, B::Word);
    fn slicing(&self) -> Result<(usize, usize)> {
        let (a, b) = (self.0.slicing()?, self.1.slicing()?);
        if a != b {
            return Err(Error::shape(
                "a word-by-word circuit, the parts of its value",
                self.0.shape_string(),
                self.1.shape_string(),
            ));
        }
        Ok(a)
    }
    fn word(&self, k: usize) -> Self::Word {
        (self.0.word(k), self.1.word(k))
    }
    fn put_word(&mut self, k: usize, (a, b): Self::Word, mask: u64) {
        self.0.put_word(k, a, mask);
        self.1.put_word(k, b, mask);
    }
    fn add_word(&mut self, k: usize, (a, b): Self::Word, mask: u64) {
        self.0.add_word(k, a, mask);
        self.1.add_word(k, b, mask);
    }
    fn reshape_bits(&mut self, wires: usize, examples: usize) {
        self.0.reshape_bits(wires, examples);
        self.1.reshape_bits(wires, examples);
    }
    fn zeros_sliced(wires: usize, examples: usize) -> Self {
        (
            A::zeros_sliced(wires, examples),
            B::zeros_sliced(wires, examples),
        )
    }
}

/// A circuit over [`Word`]s run on bit-sliced values: at every word
/// position (64 examples of one wire), the whole circuit forward, and for
/// the backward pass forward and backward again, with everything between
/// its gates in registers. Gate by gate over [`Bits`], each gate would pass
/// over memory once; here the circuit passes once.
///
/// Every part of the input must have the same wires and examples, as must
/// the output change; a mismatch is an error naming both shapes. Bits past
/// the last example (which a `NotGate` turns to 1 inside the loop) are
/// cleared in every output and change.
///
/// The map is exactly the circuit applied example by example, so its
/// reverse derivative is the circuit's reverse derivative applied word by
/// word: [`Reverse::rev`] gives `WordByWord` of the circuit's reverse map.
///
/// ```
/// use revdiff::bits::{Bits, OrGate, Word, WordByWord, XorGate};
/// use revdiff::{Compose, Map};
///
/// // Two layers of (x + y, x or y), written once over words...
/// let layer = || XorGate.pair(OrGate);
/// let by_words = WordByWord::new(layer().then(layer()));
/// // ...agree with the same gates run one after another over whole values.
/// let x = (
///     Bits::from_fn(1, 100, |_, e| e % 3 == 0),
///     Bits::from_fn(1, 100, |_, e| e % 5 == 1),
/// );
/// let gate_by_gate = layer().then(layer());
/// assert_eq!(by_words.forward(&x)?, gate_by_gate.forward(&x)?);
/// let dz = x.clone();
/// assert_eq!(by_words.backward(&x, &dz)?, gate_by_gate.backward(&x, &dz)?);
/// # Ok::<(), revdiff::Error>(())
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct WordByWord<M> {
    /// The circuit over words.
    pub circuit: M,
}

impl<M> WordByWord<M> {
    /// `circuit`, run at every word position of bit-sliced values.
    pub fn new(circuit: M) -> Self {
        WordByWord { circuit }
    }
}

impl<M: Compose> Compose for WordByWord<M> {
    fn boxed_depth(&self) -> usize {
        self.circuit.boxed_depth()
    }
}

/// Calls `body(k, mask)` at every word position of values of `wires` wires
/// over `examples` examples, with the mask of the examples position `k`
/// holds.
fn each_word(
    (wires, examples): (usize, usize),
    mut body: impl FnMut(usize, u64) -> Result<()>,
) -> Result<()> {
    let n = words_for(examples);
    let last = match examples % 64 {
        0 => u64::MAX,
        rest => (1u64 << rest) - 1,
    };
    for w in 0..wires {
        for j in 0..n {
            body(w * n + j, if j + 1 == n { last } else { u64::MAX })?;
        }
    }
    Ok(())
}

impl<M> WordByWord<M> {
    /// The output change's shape must be the input's.
    fn change_slicing<A: Sliceable, B: Sliceable>(x: &A, dy: &B) -> Result<(usize, usize)> {
        let shape = x.slicing()?;
        let of_change = dy.slicing()?;
        if shape != of_change {
            return Err(Error::shape(
                "the output change of a word-by-word circuit, against its input",
                x.shape_string(),
                dy.shape_string(),
            ));
        }
        Ok(shape)
    }

    /// The backward pass at every word position, each written by `put`.
    fn backward_words<A, B>(
        &self,
        x: &A,
        dy: &B,
        mut put: impl FnMut(usize, A::Word, u64),
    ) -> Result<()>
    where
        A: Sliceable,
        B: Sliceable,
        M: Map<A::Word, Output = B::Word>,
    {
        let shape = Self::change_slicing(x, dy)?;
        each_word(shape, |k, mask| {
            let (_, memo) = self.circuit.forward_memo(&x.word(k))?;
            put(k, self.circuit.backward_memo(&memo, &dy.word(k))?, mask);
            Ok(())
        })
    }
}

impl<A, M> Map<A> for WordByWord<M>
where
    A: Sliceable,
    M: Map<A::Word>,
    M::Output: WordValue,
{
    type Output = <M::Output as WordValue>::Whole;
    // The input: each word position's memo is remade in the backward pass,
    // which costs one more forward pass of registers, not memory.
    type Memo = A;
    fn forward(&self, x: &A) -> Result<Self::Output> {
        let shape = x.slicing()?;
        let mut y = Self::Output::zeros_sliced(shape.0, shape.1);
        self.fill_output(x, shape, &mut y)?;
        Ok(y)
    }
    fn forward_memo(&self, x: &A) -> Result<(Self::Output, A)> {
        Ok((self.forward(x)?, x.clone()))
    }
    fn backward_memo(&self, x: &A, dy: &Self::Output) -> Result<A> {
        let (wires, examples) = x.slicing()?;
        let mut dx = A::zeros_sliced(wires, examples);
        self.backward_words(x, dy, |k, d, mask| dx.put_word(k, d, mask))?;
        Ok(dx)
    }
    fn forward_reusing<'w>(&self, x: &A, work: &'w mut Workspace) -> Result<&'w Self::Output> {
        let shape = x.slicing()?;
        let y = work.output_or_insert_with(|| Self::Output::zeros_sliced(0, 0));
        self.fill_output(x, shape, y)?;
        Ok(y)
    }
    fn backward_reusing(
        &self,
        x: &A,
        _: &mut Workspace,
        dy: &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        let (wires, examples) = x.slicing()?;
        dx.reshape_bits(wires, examples);
        self.backward_words(x, dy, |k, d, mask| dx.put_word(k, d, mask))
    }
    fn backward_reusing_adding(
        &self,
        x: &A,
        _: &mut Workspace,
        dy: &Self::Output,
        dx: &mut A,
    ) -> Result<()> {
        x.check_same_shape(dx)?;
        self.backward_words(x, dy, |k, d, mask| dx.add_word(k, d, mask))
    }
}

impl<M> WordByWord<M> {
    /// The circuit's value at every word position of `x`, into `y`.
    fn fill_output<A>(
        &self,
        x: &A,
        shape: (usize, usize),
        y: &mut <M::Output as WordValue>::Whole,
    ) -> Result<()>
    where
        A: Sliceable,
        M: Map<A::Word>,
        M::Output: WordValue,
    {
        y.reshape_bits(shape.0, shape.1);
        each_word(shape, |k, mask| {
            y.put_word(k, self.circuit.forward(&x.word(k))?, mask);
            Ok(())
        })
    }
}

impl<A, M> Reverse<A> for WordByWord<M>
where
    A: Sliceable,
    M: Reverse<A::Word>,
    M::Output: WordValue,
    M::Rev: Reverse<(A::Word, M::Output), Output = A::Word>,
{
    type Rev = WordByWord<M::Rev>;
    fn rev(&self) -> Self::Rev {
        WordByWord::new(self.circuit.rev())
    }
}
