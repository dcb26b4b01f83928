//! Learning: parametrised maps, losses, optimisers, the training loop and
//! nonlinear least squares.
//!
//! A model is a parametrised map `P x A -> B` ([`Parametrised`]); its
//! backward pass gives a change for the parameters and for the input. A
//! loss ([`loss`]) turns a prediction and a target into a scalar whose
//! backward pass starts the model's; an optimiser ([`Optimiser`]) turns the
//! parameter change into new parameters. [`Training`] runs that loop over a
//! [`Examples`]; [`LeastSquares`] fits small models by Gauss-Newton or
//! Levenberg-Marquardt instead.

pub mod layers;
pub mod least_squares;
pub mod loss;
mod mailbox;
pub mod optimise;
pub mod parametrised;
pub mod rows;
pub mod schedule;
pub mod train;

pub use layers::{LayerParameters, Layers, StageMemo};
pub use least_squares::{
    CurveResiduals, FitReport, JacobianRoute, LeastSquares, ResidualMap, Residuals,
    ResidualsAndJacobian, Stop, residual_map,
};
pub use loss::{Huber, LogitBinaryCrossEntropy, LogitCrossEntropy, MeanSquaredError, SquaredError};
pub use optimise::{Adagrad, Adam, GradientDescent, Momentum, Nesterov, Optimiser, RmsProp};
pub use parametrised::{
    Parametrised, Reparametrised, ThenParametrised, ThenParametrisedComposite,
    ThenParametrisedReverse, WithParameters, parameter_free,
};
pub use rows::{RowMean, Rowwise};
pub use schedule::Schedule;
pub use train::{
    Examples, GradientReduction, Interrupted, ObserverVerdict, Progress, RowBlocks, ShardSum,
    Trained, Training,
};
