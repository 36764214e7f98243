//! Speciation (placeholder: being written).

use thiserror::Error;

/// Errors in the equilibrium model or the speciation solver.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SpeciationError {
    /// Placeholder.
    #[error("speciation is not implemented yet")]
    Unimplemented,
}
