#![forbid(unsafe_code)]
#![warn(missing_docs)]
//! doc
pub mod combinators;
pub mod error;
pub mod higher;
pub mod map;
pub mod primitives;
pub mod space;
pub use combinators::*;
pub use error::{Error, Result};
pub use primitives::*;
pub use higher::{forward_derivative, hessian_vector, jacobian, jacobian_by_backward, jacobian_by_forward, second_reverse};
pub use map::{Compose, Linear, Map, Reverse};
pub use space::{Euclidean, Pointwise, Real, Scale, Space};
