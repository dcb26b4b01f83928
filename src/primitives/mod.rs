//! The primitive catalogue: elementwise maps, linear algebra, reductions and
//! softmax. Each reverse derivative is assembled from primitives of this
//! catalogue and combinators, so every order exists.

mod pointwise;

pub use pointwise::{
    Abs, Cos, Div, DivRev, Exp, Heaviside, Ln, Mul, MulRev, Neg, Powf, Powi, Relu, SechSquared,
    Sigmoid, Signum, Sin, SlopeTimes, Softplus, Sqrt, Sub, Tanh,
};
