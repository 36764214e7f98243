//! The processing history a [`SpectraSet`](super::SpectraSet) carries: every import and
//! preprocessing step, in order, so a report can say exactly what was done to the data.

use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// How values were interpolated onto a new wavelength grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Interpolation {
    /// Piecewise linear: exact for straight lines, never overshoots.
    #[default]
    Linear,
    /// Monotone piecewise cubic Hermite (Fritsch & Carlson, SIAM J. Numer. Anal. 17 (1980) 238):
    /// smooth, exact for straight lines, never overshoots the data between two points.
    MonotoneCubic,
}

/// One recorded step in a spectra set's history.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "step", rename_all = "snake_case")]
#[non_exhaustive]
pub enum ProcessingStep {
    /// Data read from files.
    Imported {
        /// Format name, e.g. `csv` or `jcamp-dx`.
        format: String,
        /// The files read.
        files: Vec<PathBuf>,
    },
    /// Converted from another unit on import (e.g. 1/CM to nm, %T to absorbance).
    UnitsConverted {
        /// Sample concerned (or `*` for all).
        sample: String,
        /// What was converted, in words.
        detail: String,
    },
    /// Kept only wavelengths inside `[min_nm, max_nm]`.
    Window {
        /// Lower bound, nm.
        min_nm: f64,
        /// Upper bound, nm.
        max_nm: f64,
    },
    /// Interpolated onto a new wavelength grid.
    Resampled {
        /// Interpolation used.
        method: Interpolation,
        /// First grid point, nm.
        first_nm: f64,
        /// Last grid point, nm.
        last_nm: f64,
        /// Number of grid points.
        points: usize,
        /// Samples that were resampled (others were already on the grid).
        samples: Vec<String>,
        /// Why the resampling was done.
        reason: String,
    },
    /// Blank spectra subtracted.
    BlankSubtracted {
        /// Ids of the blank samples used.
        blanks: Vec<String>,
        /// How blanks were matched to samples, in words.
        matching: String,
    },
    /// A constant offset per sample, estimated in a non-absorbing window, subtracted.
    BaselineOffset {
        /// Window lower bound, nm.
        min_nm: f64,
        /// Window upper bound, nm.
        max_nm: f64,
    },
    /// A straight line per sample, fitted in one or more non-absorbing windows, subtracted.
    BaselineLinear {
        /// Windows `(min_nm, max_nm)` used for the fit.
        windows: Vec<(f64, f64)>,
    },
    /// Points above an absorbance limit masked out.
    SaturationMasked {
        /// The absorbance limit.
        limit: f64,
        /// Number of masked points.
        points: usize,
    },
    /// Samples dropped or selected.
    SamplesSelected {
        /// Ids kept.
        kept: Vec<String>,
    },
}
