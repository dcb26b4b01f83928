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
//! - [`Word`] is one wire's 64 examples; the gates act on words too, and
//!   [`WordByWord`] runs a whole circuit over words at every word position
//!   of bit-sliced values, its intermediate values in registers.
//! - [`CircuitTraining`] learns the parameter bits of a circuit such as
//!   [`SumOfProducts`] by reverse derivative ascent.
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

mod gates;
mod learning;
mod polynomial;
mod values;
mod word_by_word;

pub use gates::*;
pub use learning::*;
pub use polynomial::*;
pub use values::*;
pub use word_by_word::{Sliceable, Word, WordByWord, WordValue};
