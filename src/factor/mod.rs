//! Factor analysis (placeholder: being written).

use thiserror::Error;

/// Errors in factor analysis.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum FactorError {
    /// Placeholder.
    #[error("factor analysis is not implemented yet")]
    Unimplemented,
}
