//! What a forward pass keeps, in bytes: [`HeldBytes`] for memo types and
//! [`kept_bytes`] for a map at an input.
//!
//! The count is of the values' data: an array's length times its element
//! size, a scalar's size, the sum over the parts of a tuple, a vector or an
//! array of values. Bookkeeping that does not grow with the data (an
//! array's shape and strides, a vector's capacity beyond its length, the
//! allocator's headers) is not counted. That makes the count a property of
//! the strategy and the input, the same on every machine, and close to what
//! a counting allocator sees once arrays are large (`tests/retention_memory.rs`
//! checks both against each other).

use crate::error::Result;
use crate::map::Map;
use crate::space::Space;
use ndarray::{ArrayBase, Dimension, OwnedRepr};

/// A value whose data size in bytes is known: what a memo holds.
///
/// Every memo type of the catalogue implements it, as do tuples, vectors,
/// fixed arrays and options of such types. A hand-written map whose memo is
/// its own struct implements it by summing its fields, so that run-time
/// chains ([`Chain`](crate::Chain)) and boxed maps ([`Boxed`](crate::Boxed))
/// can report what they keep:
///
/// ```
/// use revdiff::HeldBytes;
/// use ndarray::Array1;
///
/// struct SplineMemo {
///     knots: Array1<f64>,
///     segment: usize,
/// }
///
/// impl HeldBytes for SplineMemo {
///     fn held_bytes(&self) -> usize {
///         self.knots.held_bytes() + self.segment.held_bytes()
///     }
/// }
///
/// let memo = SplineMemo { knots: Array1::zeros(10), segment: 3 };
/// assert_eq!(memo.held_bytes(), 10 * 8 + 8);
/// ```
#[diagnostic::on_unimplemented(
    message = "the memo type `{Self}` does not report its size in bytes",
    label = "`HeldBytes` is needed here to account for what a forward pass keeps",
    note = "implement `revdiff::HeldBytes` for `{Self}`: sum `held_bytes()` over its fields"
)]
pub trait HeldBytes {
    /// The bytes of data this value holds.
    fn held_bytes(&self) -> usize;
}

macro_rules! inline_size {
    ($($t:ty),*) => {$(
        impl HeldBytes for $t {
            fn held_bytes(&self) -> usize {
                std::mem::size_of::<$t>()
            }
        }
    )*};
}

inline_size!(
    bool, u8, u16, u32, u64, usize, i8, i16, i32, i64, isize, f32, f64
);

impl HeldBytes for () {
    fn held_bytes(&self) -> usize {
        0
    }
}

impl<T, D: Dimension + 'static> HeldBytes for ArrayBase<OwnedRepr<T>, D, T> {
    fn held_bytes(&self) -> usize {
        self.len() * std::mem::size_of::<T>()
    }
}

/// Shapes are bookkeeping: they do not grow with the data.
macro_rules! shape_size {
    ($($t:ty),*) => {$(
        impl HeldBytes for $t {
            fn held_bytes(&self) -> usize {
                0
            }
        }
    )*};
}

shape_size!(
    ndarray::Ix0,
    ndarray::Ix1,
    ndarray::Ix2,
    ndarray::Ix3,
    ndarray::Ix4,
    ndarray::Ix5,
    ndarray::Ix6,
    ndarray::IxDyn
);

impl<T: HeldBytes> HeldBytes for [T] {
    fn held_bytes(&self) -> usize {
        self.iter().map(HeldBytes::held_bytes).sum()
    }
}

impl<T: HeldBytes> HeldBytes for Vec<T> {
    fn held_bytes(&self) -> usize {
        self.as_slice().held_bytes()
    }
}

impl<T: HeldBytes, const N: usize> HeldBytes for [T; N] {
    fn held_bytes(&self) -> usize {
        self.iter().map(HeldBytes::held_bytes).sum()
    }
}

impl<T: HeldBytes> HeldBytes for Option<T> {
    fn held_bytes(&self) -> usize {
        self.as_ref().map_or(0, HeldBytes::held_bytes)
    }
}

impl<T: HeldBytes + ?Sized> HeldBytes for Box<T> {
    fn held_bytes(&self) -> usize {
        (**self).held_bytes()
    }
}

macro_rules! tuple_size {
    ($($name:ident $index:tt),+) => {
        impl<$($name: HeldBytes),+> HeldBytes for ($($name,)+) {
            fn held_bytes(&self) -> usize {
                0 $(+ self.$index.held_bytes())+
            }
        }
    };
}

tuple_size!(A 0);
tuple_size!(A 0, B 1);
tuple_size!(A 0, B 1, C 2);
tuple_size!(A 0, B 1, C 2, D 3);
tuple_size!(A 0, B 1, C 2, D 3, E 4);
tuple_size!(A 0, B 1, C 2, D 3, E 4, F 5);

/// The bytes that `f`'s forward pass at `x` keeps for its backward pass:
/// the size of its memo. For a static composite this is what keeping every
/// part's memo costs; wrapped in [`recomputed`](crate::Compose::recomputed)
/// it is the size of the input alone.
///
/// ```
/// use revdiff::{kept_bytes, Compose, Exp, Sin};
/// use ndarray::Array1;
///
/// let x = Array1::from_elem(1000, 0.5_f64);
/// // `sin` and `exp` each keep their slope: two arrays of 8,000 bytes.
/// assert_eq!(kept_bytes(&Sin.then(Exp), &x)?, 16_000);
/// // Recomputed, only the input is kept.
/// assert_eq!(kept_bytes(&Sin.then(Exp).recomputed(), &x)?, 8_000);
/// # Ok::<(), revdiff::Error>(())
/// ```
pub fn kept_bytes<A, F>(f: &F, x: &A) -> Result<usize>
where
    A: Space,
    F: Map<A>,
    F::Memo: HeldBytes,
{
    Ok(f.forward_memo(x)?.1.held_bytes())
}
