//! Resolution of D = diag(b)·C·Sᵀ.
//!
//! - [`linear`]: S from C (or C from S) by least squares or fast NNLS, all wavelengths at once.
//! - [`lm`]: Levenberg–Marquardt as an argmin solver.
//! - [`classic`]: the textbook two-wavelength route (direct Beer–Lambert and mass-balance
//!   estimates of a two-absorber equilibrium), kept for comparison with the full-spectrum fits.
//! - [`soft`]: soft resolution, MCR-ALS with constraints, band boundaries and a hybrid
//!   hard–soft option.
//! - [`hard`]: the global model fit (variable projection).

pub mod classic;
pub mod linear;
pub mod lm;
pub mod soft;

pub use classic::ClassicError;
pub mod hard;
