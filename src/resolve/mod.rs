//! Resolution of D = C·Sᵀ: linear least squares and NNLS, soft resolution (MCR-ALS), the global
//! model fit and the classic two-wavelength estimates.
//!
//! - [`classic`]: the textbook two-wavelength route (direct Beer–Lambert and mass-balance
//!   estimates of a two-absorber equilibrium), kept for comparison with the full-spectrum fits.
//!
//! The linear, soft and hard resolutions are not written yet (see the issues).

pub mod classic;

pub use classic::ClassicError;
