//! Preprocessing: wavelength window, resampling, blank subtraction, baseline correction and the
//! saturation mask. Every step returns a new [`SpectraSet`](crate::data::SpectraSet) and records
//! itself in the set's history.
//!
//! The steps, in the order a [`PreprocessParams`] plan runs them:
//! 1. [`window()`]: keep `[min_nm, max_nm]`;
//! 2. [`resample()`]: interpolate onto a common grid ([`even_grid`] or an explicit list);
//! 3. [`subtract_blanks`]: subtract the blank samples' spectra and drop the blanks;
//! 4. [`baseline_offset`] / [`baseline_linear`]: subtract a constant or straight line estimated
//!    in non-absorbing windows;
//! 5. [`mask_saturation`]: exclude points above an absorbance limit
//!    ([`DEFAULT_SATURATION_LIMIT`] = 2, European Pharmacopoeia 2.2.25).
//!
//! # Examples
//! ```
//! use isosbestic::data::{Sample, SampleRole, SpectraSet};
//! use isosbestic::preprocess::{BlankMatching, PreprocessParams};
//! use ndarray::array;
//! let set = SpectraSet::new(
//!     array![380.0, 400.0, 420.0, 440.0],
//!     array![[0.05, 0.35, 2.45, 0.05], [0.05, 0.05, 0.05, 0.05]],
//!     vec![
//!         Sample::new("m", "s", 298.15, 1.0),
//!         Sample::new("blank", "s", 298.15, 1.0).with_role(SampleRole::Blank),
//!     ],
//!     vec![],
//! )?;
//! let plan = PreprocessParams::default().window([390.0, 440.0]).blanks(BlankMatching::PerSeries).check()?;
//! let (out, summary) = plan.apply(&set)?;
//! assert_eq!(out.n_samples(), 1);
//! assert_eq!(out.n_wavelengths(), 3);
//! approx::assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.30, epsilon = 1e-12);
//! assert_eq!(summary.saturation.map(|r| r.points()), Some(1)); // 2.40 at 420 nm
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

mod baseline;
mod blank;
mod plan;
mod resample;
mod saturation;
mod window;

pub use baseline::{BaselineModel, BaselineReport, SampleBaseline, baseline_linear, baseline_offset};
pub use blank::{BlankMatching, BlankReport, BlankUse, subtract_blanks};
pub use plan::{
    BaselineSpec, GridSpec, PreprocessParams, PreprocessSummary, ResampleReport, ValidPreprocessParams,
    WindowReport,
};
pub use resample::{Interpolation, even_grid, interpolate, resample};
pub use saturation::{DEFAULT_SATURATION_LIMIT, MaskedRun, SaturationReport, mask_saturation};
pub use window::window;

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
    /// A wavelength window has a non-finite bound or its bounds are reversed.
    #[error("window {min_nm}–{max_nm} nm is not valid: both bounds must be finite and min ≤ max")]
    InvalidWindow {
        /// Lower bound, nm.
        min_nm: f64,
        /// Upper bound, nm.
        max_nm: f64,
    },
    /// A wavelength window keeps fewer than two wavelengths.
    #[error(
        "window {min_nm}–{max_nm} nm keeps {kept} wavelength(s) of the data range {first_nm}–{last_nm} nm; \
         at least 2 are needed"
    )]
    WindowTooNarrow {
        /// Lower bound, nm.
        min_nm: f64,
        /// Upper bound, nm.
        max_nm: f64,
        /// Wavelengths inside the window.
        kept: usize,
        /// First wavelength of the data, nm.
        first_nm: f64,
        /// Last wavelength of the data, nm.
        last_nm: f64,
    },
    /// Blank subtraction was asked for but no sample is a blank.
    #[error("none of the {samples} samples is a blank (role 'blank'), so there is nothing to subtract")]
    NoBlanks {
        /// Number of samples in the set.
        samples: usize,
    },
    /// Every sample is a blank.
    #[error("all {blanks} samples are blanks; there is no measurement to subtract them from")]
    NoMeasurements {
        /// Number of blanks.
        blanks: usize,
    },
    /// Per-series blank matching found a series without a blank.
    #[error(
        "series '{series}' (sample '{sample}') has no blank; add one or match blanks by temperature or globally"
    )]
    NoBlankInSeries {
        /// The series without a blank.
        series: String,
        /// A measurement of that series.
        sample: String,
    },
    /// A baseline correction was asked for without any window.
    #[error("a linear baseline needs at least one non-absorbing window, none given")]
    NoBaselineWindows,
    /// A baseline window contains no wavelength of the data.
    #[error(
        "baseline window {min_nm}–{max_nm} nm holds no wavelength of the data range {first_nm}–{last_nm} nm"
    )]
    EmptyBaselineWindow {
        /// Lower bound, nm.
        min_nm: f64,
        /// Upper bound, nm.
        max_nm: f64,
        /// First wavelength of the data, nm.
        first_nm: f64,
        /// Last wavelength of the data, nm.
        last_nm: f64,
    },
    /// A sample has too few usable (unmasked) points in the baseline windows.
    #[error(
        "sample '{sample}': the baseline window(s) {} hold unmasked points at {found} distinct \
         wavelength(s); at least {needed} needed",
        format_windows(.windows)
    )]
    TooFewBaselinePoints {
        /// Sample id.
        sample: String,
        /// The windows `(min_nm, max_nm)`.
        windows: Vec<(f64, f64)>,
        /// Distinct wavelengths found.
        found: usize,
        /// Distinct wavelengths needed (1 for an offset, 2 for a line).
        needed: usize,
    },
    /// The saturation limit is not a positive, finite absorbance.
    #[error("saturation limit {limit} is not a positive, finite absorbance")]
    InvalidSaturationLimit {
        /// The limit given.
        limit: f64,
    },
    /// The result failed validation.
    #[error(transparent)]
    Set(#[from] SpectraSetError),
}

/// `400–420, 600–650 nm`
fn format_windows(windows: &[(f64, f64)]) -> String {
    let parts: Vec<String> = windows.iter().map(|(a, b)| format!("{a}–{b}")).collect();
    format!("{} nm", parts.join(", "))
}
