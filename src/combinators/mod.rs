//! Combinators: the structural maps and the ways of building maps from maps.
//!
//! Each combinator is a small generic struct, statically dispatched; its
//! reverse derivative is assembled from combinators by the standard formulas
//! (chain rule for [`Then`], sum for [`Pair`], and so on).

mod compose;
mod structural;

pub use compose::{Cross, CrossRev, Pair, PairRev, Scaled, Sum, Then, ThenRev, Transpose};
pub use structural::{
    Add, Constant, Discard, Duplicate, Fst, Id, Scaling, Snd, ZeroMap, add, constant, discard,
    duplicate, fst, id, scaling, snd, zero_map,
};
