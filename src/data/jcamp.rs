//! JCAMP-DX reader and writer (placeholder: being written).

use thiserror::Error;

/// Errors reading or writing JCAMP-DX.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum JcampError {
    /// Placeholder.
    #[error("JCAMP-DX input is not implemented yet")]
    Unimplemented,
}
