//! The primitive catalogue: elementwise maps, linear algebra, reductions and
//! softmax. Each reverse derivative is assembled from primitives of this
//! catalogue and combinators, so every order exists.

mod batch;
pub(crate) mod elementary;
mod linalg;
mod pick;
pub(crate) mod pointwise;
mod reduce;
mod softmax;

pub use batch::{
    AffineBatch, AffineBatchComposite, ColumnSums, RepeatRows, RepeatRowsRev,
    affine_batch_composite,
};
pub use linalg::{
    Affine, AffineComposite, AffineReverse, MatMul, MatMulRev, MatVec, MatVecRev, MatrixTranspose,
    Outer, OuterRev, affine_composite,
};
pub use pick::{Coordinate, PlaceAt, PlaceAtRev, PowPair, PowPairComposite, pow_pair_composite};
pub use pointwise::{
    Abs, Arctan, Clamp, Cos, DivPair, DivPairRev, ElementwiseRev, Exp, ExpMinusOne, Heaviside,
    InsideBand, IntegerPower, Ln, LnOnePlus, MulPair, MulPairRev, Neg, Powf, Powi, Relu,
    SechSquared, Shift, Sigmoid, Signum, Sin, Softplus, Sqrt, SubPair, Tanh,
};
pub use reduce::{Dot, ElementReduction, FillLike, FillLikeRev, SquaredNorm, dot, squared_norm};
pub use softmax::{LogSoftmax, LogSoftmaxRev, LogSumExp, LogSumExpRev, Softmax, SoftmaxRev};
