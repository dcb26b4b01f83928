//! The crate's one error type.
//!
//! Every fallible operation returns [`Result<T>`](Result). Messages name the
//! values that were wrong, so that a failure deep inside a composite still
//! says which shapes met and where.
//!
//! # Positions count from 0
//!
//! Every position the crate reports, in a message or a field, counts from 0
//! as Rust's indices do: rows and columns of data, flat coordinates, stages
//! of a run-time chain, training steps and epochs. Counts of things done
//! ([`Trained::steps`](crate::Trained::steps),
//! [`FitReport::iterations`](crate::FitReport::iterations)) are counts.

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
    /// A backward pass was given an output change whose shape is not the
    /// shape of the map's output.
    #[error(
        "{map}, backward pass: the output change has shape {found}, \
         but the map's output has shape {expected}"
    )]
    OutputChangeShape {
        /// The map whose backward pass refused the change.
        map: &'static str,
        /// The shape of the map's output at the point.
        expected: String,
        /// The shape of the change given.
        found: String,
    },
    /// A stage of a run-time chain cannot accept what the stage before it
    /// produces.
    #[error(
        "stage {stage} of the chain ({name}) expects input of shape {expected}, \
         but {} has shape {found}",
        match previous { Some(p) => format!("the output of stage {p}"), None => "the chain's input".to_string() }
    )]
    ChainShape {
        /// Position of the refusing stage (the first stage is 0).
        stage: usize,
        /// Position of the stage whose output was refused, or `None` when it
        /// was the chain's own input.
        previous: Option<usize>,
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
    CoordinateCount {
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
    /// A memo handed to a type-erased map's backward pass was not one
    /// that map's forward pass kept.
    #[error("{operation}: the memo was not produced by this map's forward pass")]
    ForeignMemo {
        /// The map that refused it.
        operation: &'static str,
    },
    /// A reusing backward pass (or a read of a reused output) found no
    /// forward pass of this map in its [`Workspace`](crate::Workspace).
    #[error(
        "{operation}: the workspace holds no forward pass of this map; run the reusing forward pass into it first"
    )]
    WorkspaceNotFilled {
        /// What needed the forward pass.
        operation: &'static str,
    },
    /// An input was empty where at least one element is needed.
    #[error("{operation}: empty input")]
    Empty {
        /// The operation that needed elements.
        operation: &'static str,
    },
    /// Inputs and targets of a set of examples had different numbers of rows.
    #[error(
        "examples: the inputs have {} but the targets have {}",
        rows(*inputs),
        rows(*targets)
    )]
    RowCountMismatch {
        /// Rows of the inputs.
        inputs: usize,
        /// Rows of the targets.
        targets: usize,
    },
    /// A least-squares problem with fewer residuals than parameters: no
    /// fit determines the parameters.
    #[error(
        "least squares: {residuals} residuals cannot determine {parameters} parameters \
         (a fit needs at least as many residuals as parameters)"
    )]
    Underdetermined {
        /// Number of residuals.
        residuals: usize,
        /// Number of parameter coordinates.
        parameters: usize,
    },
    /// A shard of a sharded training step did not finish.
    #[error("sharded training: {detail}")]
    ShardFailed {
        /// What happened.
        detail: String,
    },
    /// A CSV file could not be read as examples: a value that is not a
    /// number, a row of the wrong length, a named column that is missing, or
    /// malformed CSV.
    #[error("CSV {location}: {problem}")]
    Csv {
        /// Where: `row 3, column 2 ("width")`, or `header`. Rows count the
        /// data rows from 0 (the header is not a data row); columns count
        /// from 0.
        location: String,
        /// What was wrong there.
        problem: String,
    },
    /// Boxed maps nested deeper than [`Boxed::MAX_DEPTH`](crate::Boxed::MAX_DEPTH).
    #[error(
        "boxed maps nested {depth} deep, beyond the limit of {limit}: every pass recurses once \
         per level and would overflow the stack; a Chain holds any number of stages without nesting"
    )]
    NestingTooDeep {
        /// The nesting the refused map would have had.
        depth: usize,
        /// The limit.
        limit: usize,
    },
    /// Training met a non-finite loss, gradient or parameter.
    #[error("training step {step} (epoch {epoch}): the {quantity} is not finite")]
    Diverged {
        /// The step whose update was refused (the first step is 0).
        step: usize,
        /// The epoch it belonged to (the first epoch is 0).
        epoch: usize,
        /// What was not finite: `loss`, `gradient` or `updated parameters`.
        quantity: &'static str,
    },
}

/// `1 row`, `3 rows`.
fn rows(n: usize) -> String {
    if n == 1 {
        "1 row".to_string()
    } else {
        format!("{n} rows")
    }
}

/// Shorthand for results whose error is [`enum@Error`].
pub type Result<T> = std::result::Result<T, Error>;

impl Error {
    /// Re-labels a shape mismatch met while pairing a backward pass's output
    /// change with what the forward pass kept: the wrong argument was the
    /// output change `dy`, not the map. Other errors pass unchanged.
    pub(crate) fn in_output_change(self, map: &'static str) -> Self {
        match self {
            Error::ShapeMismatch {
                expected, found, ..
            } => Error::OutputChangeShape {
                map,
                expected,
                found,
            },
            other => other,
        }
    }

    /// Builds a [`Error::ShapeMismatch`] from two printable shapes.
    pub fn shape(operation: &'static str, expected: impl ToString, found: impl ToString) -> Self {
        Error::ShapeMismatch {
            operation,
            expected: expected.to_string(),
            found: found.to_string(),
        }
    }
}
