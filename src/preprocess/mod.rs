//! Preprocessing: wavelength window, resampling, blank subtraction, baseline correction and the
//! saturation mask. Every step returns a new [`SpectraSet`](crate::data::SpectraSet) and records
//! itself in the set's history.

mod resample;

pub use resample::{Interpolation, even_grid, interpolate, resample};

use crate::data::SpectraSetError;
use thiserror::Error;

/// Why a preprocessing step could not be applied.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum PreprocessError {
    /// Interpolation needs at least two points.
    #[error("interpolation needs at least two data points, got {points}")]
    TooFewPoints {
        /// Points available.
        points: usize,
    },
    /// A requested wavelength lies outside the measured range.
    #[error("{wavelength_nm} nm lies outside the measured range {first_nm}–{last_nm} nm (no extrapolation)")]
    OutsideRange {
        /// The requested wavelength.
        wavelength_nm: f64,
        /// First measured wavelength.
        first_nm: f64,
        /// Last measured wavelength.
        last_nm: f64,
    },
    /// A target grid is unusable.
    #[error("invalid wavelength grid: {reason}")]
    InvalidGrid {
        /// Why.
        reason: String,
    },
    /// The result failed validation.
    #[error(transparent)]
    Set(#[from] SpectraSetError),
}
