//! CSV spectra and samples tables (placeholder: being written).

use thiserror::Error;

/// Errors reading or writing CSV tables.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum CsvError {
    /// Placeholder.
    #[error("csv input is not implemented yet")]
    Unimplemented,
}
