//! # isosbestic
//!
//! Multi-wavelength deconvolution of temperature-dependent chemical equilibria from UV–Vis
//! spectra.
//!
//! ## The model
//! Beer–Lambert for a mixture, written for all samples and wavelengths at once:
//!
//! ```text
//! D = diag(b) · C · Sᵀ + E
//! ```
//!
//! - **D** (samples × wavelengths): measured absorbance, held by [`data::SpectraSet`];
//! - **b**: path lengths, cm;
//! - **C** (samples × species): molar concentrations from the equilibrium model (speciation);
//! - **S** (wavelengths × species): molar absorptivities ε(λ), L mol⁻¹ cm⁻¹;
//! - **E**: noise.
//!
//! ## The stages (one module each, in data-flow order)
//! 1. [`data`]: read spectra (CSV, JCAMP-DX) and sample conditions into a validated set.
//! 2. [`preprocess`]: window, resample, subtract blanks and baselines, mask saturation.
//! 3. [`factor`]: SVD, noise level, how many species absorb (rank), evolving factors.
//! 4. [`speciation`]: equilibrium model, formation laws log β(T), mass-balance solver.
//! 5. [`resolve`]: linear/NNLS solutions for S or C, soft (MCR-ALS) and hard (global model fit).
//! 6. [`thermo`]: van 't Hoff and heat-capacity fits, solvent density, activity models.
//! 7. [`report`]: result types and their CSV/JSON/SVG/HTML writers; whole runs
//!    ([`report::fit::run_fit`]: read, preprocess, fit, diagnose, rank candidate models),
//!    fitted against reference absorptivities ([`report::compare`]) and many data sets at once
//!    ([`report::batch`]).
//!
//! The library never prints; progress goes through callbacks and results are plain data.
#![warn(missing_docs)]
#![doc(test(attr(deny(warnings))))]

pub mod data;
mod error;
pub mod factor;
pub mod preprocess;
pub mod report;
pub mod resolve;
pub mod simulate;
pub mod speciation;
pub mod stats;
#[doc(hidden)]
pub mod testing;
pub mod thermo;

pub use error::{Error, Result};
