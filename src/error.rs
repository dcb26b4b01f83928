//! The crate's one error type.
//!
//! Every fallible operation returns [`Result<T>`](Result). Messages name the
//! values that were wrong, so that a failure deep inside a composite still
//! says which shapes met and where.

use thiserror::Error;

/// What went wrong in a forward pass, a backward pass, a space operation or
/// the assembly of a run-time chain.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum Error {
    /// Two values that must have the same shape did not.
    #[error("{operation}: expected shape {expected}, got {found}")]
    ShapeMismatch {
        /// The operation that compared the shapes.
        operation: &'static str,
        /// The shape it required.
        expected: String,
        /// The shape it was given.
        found: String,
    },
    /// A stage of a run-time chain cannot accept what the stage before it
    /// produces.
    #[error(
        "stage {stage} of the chain ({name}) expects input of shape {expected}, \
         but stage {previous} produces shape {found}"
    )]
    ChainShape {
        /// Position of the refusing stage, counting from 1.
        stage: usize,
        /// Position of the stage whose output was refused (0 is the chain's input).
        previous: usize,
        /// Name of the refusing stage.
        name: String,
        /// The input shape the stage accepts.
        expected: String,
        /// The shape it would have received.
        found: String,
    },
    /// A flat coordinate vector had the wrong length for the value it was
    /// meant to fill.
    #[error("{operation}: expected {expected} coordinates, got {found}")]
    Length {
        /// The operation that needed the coordinates.
        operation: &'static str,
        /// Number of coordinates needed.
        expected: usize,
        /// Number of coordinates given.
        found: usize,
    },
    /// A setting was outside the range where it makes sense.
    #[error("invalid setting {name} = {value}: {reason}")]
    InvalidSetting {
        /// Name of the setting.
        name: &'static str,
        /// Its value, printed.
        value: String,
        /// Why it was refused.
        reason: &'static str,
    },
    /// A computation produced or received a value that is not finite.
    #[error("{operation}: non-finite value {detail}")]
    NonFinite {
        /// Where the value was seen.
        operation: &'static str,
        /// What was seen, and where in the value.
        detail: String,
    },
    /// A residual handed to a type-erased map's backward pass was not one
    /// that map's forward pass kept.
    #[error("{operation}: the residual was not produced by this map's forward pass")]
    ForeignResidual {
        /// The map that refused it.
        operation: &'static str,
    },
    /// An input was empty where at least one element is needed.
    #[error("{operation}: empty input")]
    Empty {
        /// The operation that needed elements.
        operation: &'static str,
    },
    /// Inputs and targets of a dataset had different numbers of rows.
    #[error("dataset: {inputs} input rows but {targets} target rows")]
    Rows {
        /// Rows of the inputs.
        inputs: usize,
        /// Rows of the targets.
        targets: usize,
    },
    /// Training met a non-finite loss, gradient or parameter.
    #[error("training step {step} (epoch {epoch}): the {quantity} is not finite")]
    Diverged {
        /// The step, counting from 1, whose update was refused.
        step: usize,
        /// The epoch it belonged to, counting from 1.
        epoch: usize,
        /// What was not finite: `loss`, `gradient` or `updated parameters`.
        quantity: &'static str,
    },
}

/// Shorthand for results whose error is [`enum@Error`].
pub type Result<T> = std::result::Result<T, Error>;

impl Error {
    /// Builds a [`Error::ShapeMismatch`] from two printable shapes.
    pub fn shape(operation: &'static str, expected: impl ToString, found: impl ToString) -> Self {
        Error::ShapeMismatch {
            operation,
            expected: expected.to_string(),
            found: found.to_string(),
        }
    }
}
