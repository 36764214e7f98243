//! Thermodynamics (placeholder: being written).

use thiserror::Error;

/// Errors in thermodynamic fitting and solvent/activity corrections.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum ThermoError {
    /// Placeholder.
    #[error("thermodynamics is not implemented yet")]
    Unimplemented,
}
