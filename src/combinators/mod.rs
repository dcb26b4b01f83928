//! Combinators: the structural maps and the ways of building maps from maps.
//!
//! Each combinator is a small generic struct, statically dispatched; its
//! reverse derivative is assembled from combinators by the standard formulas
//! (chain rule for [`Then`], sum for [`Pair`], and so on).

pub(crate) mod compose;
mod reversed_through;
mod structural;

pub use compose::{
    Alongside, AlongsideRev, Pair, PairRev, Plus, Scaled, Then, ThenRev, ThenReverse, Transpose,
};
pub use reversed_through::ReversedThrough;
pub use structural::{
    AddPair, Constant, Discard, Duplicate, Fst, Id, MultiplyBy, Snd, ZeroMap, add_pair, constant,
    discard, duplicate, fst, id, multiply_by, snd, zero_map,
};
