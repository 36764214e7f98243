//! JCAMP-DX reader and writer (McDonald & Wilks, Appl. Spectrosc. 42 (1988) 151; IUPAC open
//! standard).
//!
//! A JCAMP-DX file is a sequence of labelled data records (LDRs), `##LABEL=value`, grouped in
//! blocks that run from `##TITLE=` to `##END=`; a LINK file nests several such blocks in an outer
//! one. Labels are compared after removing spaces, dashes, slashes and underscores and ignoring
//! case (`##X UNITS=` is `##XUNITS=`); `$$` starts a comment that runs to the end of the line.
//!
//! - [`parse_jcamp`], [`read_jcamp`]: every block with `##XYDATA=(X++(Y..Y))` (AFFN or any
//!   mixture of the compressed forms PAC, SQZ, DIF, DUP) or `##XYPOINTS=(XY..XY)` becomes a
//!   [`JcampSpectrum`] with the wavelength in nm (increasing) and absorbance, every unit
//!   conversion recorded in words.
//! - [`assemble_set`], [`sample_id_for`]: spectra and sample conditions into a
//!   [`SpectraSet`](crate::data::SpectraSet), on a common grid.
//! - [`to_jcamp_string`], [`write_jcamp`]: AFFN output at full precision.
//!
//! Every reading error is a [`JcampError`] carrying the [`Location`] (file, line, column).
//!
//! # Examples
//! ```
//! use isosbestic::data::jcamp::parse_jcamp;
//! let text = "##TITLE=demo\n##JCAMP-DX=4.24\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\
//!             \n##FIRSTX=400\n##LASTX=403\n##NPOINTS=4\n##XYDATA=(X++(Y..Y))\
//!             \n400 1BCC\n##END=\n";
//! let spectra = parse_jcamp(text, None)?;
//! assert_eq!(spectra[0].wavelengths_nm, vec![400.0, 401.0, 402.0, 403.0]);
//! assert_eq!(spectra[0].absorbance, vec![1.0, 2.0, 3.0, 3.0]);
//! # Ok::<(), isosbestic::data::jcamp::JcampError>(())
//! ```

mod asdf;
mod assemble;
mod reader;
mod writer;

pub use assemble::{assemble_set, sample_id_for};
pub use reader::{parse_jcamp, read_jcamp};
pub use writer::{to_jcamp_string, write_jcamp};

use crate::data::{Location, SpectraSetError};
use crate::preprocess::PreprocessError;
use std::collections::BTreeMap;
use thiserror::Error;

/// One spectrum read from a JCAMP-DX block, converted to wavelength (nm) and absorbance.
///
/// Math: one row of **D** on its own axis λ.
#[derive(Debug, Clone, PartialEq)]
pub struct JcampSpectrum {
    /// The block's `##TITLE=` (trimmed).
    pub title: String,
    /// Wavelengths λ, nm, strictly increasing.
    pub wavelengths_nm: Vec<f64>,
    /// Absorbance A (decadic) at each wavelength.
    pub absorbance: Vec<f64>,
    /// Unit conversions applied on reading, in words, for the processing history.
    pub conversions: Vec<String>,
    /// All other labelled data records of the block, keyed by the label as written (trimmed),
    /// values verbatim (comments removed, lines of a multi-line value joined by `\n`).
    pub labels: BTreeMap<String, String>,
    /// Where the block starts (file and line of its `##TITLE=`).
    pub location: Location,
}

/// Errors reading or writing JCAMP-DX, each naming where it happened.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum JcampError {
    /// The file could not be read or written.
    #[error("{location}: {source}")]
    Io {
        /// The file.
        location: Location,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A character that is neither a digit nor an ASDF pseudo-digit in numeric data.
    #[error("{location}: unknown character '{character}' in compressed (ASDF) data")]
    UnknownCompression {
        /// The character.
        character: char,
        /// Where it is.
        location: Location,
    },
    /// `##NPOINTS=` disagrees with the number of decoded points.
    #[error("{location}: ##NPOINTS={declared} but the data hold {decoded} points")]
    NpointsMismatch {
        /// The declared count.
        declared: usize,
        /// The decoded count.
        decoded: usize,
        /// The `##NPOINTS=` record.
        location: Location,
    },
    /// The Y check value at the start of a DIF line differs from the last Y of the line before.
    #[error("{location}: DIF check value {found} differs from the previous line's last value {expected}")]
    DifCheckFailed {
        /// Last ordinate of the previous line.
        expected: f64,
        /// The check value found.
        found: f64,
        /// Where the check value is.
        location: Location,
    },
    /// The file ends inside a block or a record.
    #[error("{location}: file is truncated: {detail}")]
    Truncated {
        /// What is missing.
        detail: String,
        /// The end of the input (or the block left open).
        location: Location,
    },
    /// A label the data need is absent.
    #[error("{location}: missing required label ##{label}=")]
    MissingLabel {
        /// The label (or alternatives).
        label: String,
        /// The data record needing it.
        location: Location,
    },
    /// Units this reader does not convert.
    #[error("{location}: unsupported units ##{label}={value}")]
    UnsupportedUnits {
        /// `XUNITS` or `YUNITS`.
        label: String,
        /// The value found.
        value: String,
        /// The record.
        location: Location,
    },
    /// A data form this reader does not read (e.g. `(R..R)` or `(XYW..XYW)`).
    #[error("{location}: unsupported data form ##{label}={form}")]
    UnsupportedForm {
        /// The label.
        label: String,
        /// The form given.
        form: String,
        /// The record.
        location: Location,
    },
    /// A value that is not a usable number.
    #[error("{location}: bad number '{text}': {reason}")]
    BadNumber {
        /// The text.
        text: String,
        /// Why it was rejected.
        reason: String,
        /// Where it is.
        location: Location,
    },
    /// A transmittance of zero or below, whose absorbance −log₁₀ T does not exist.
    #[error(
        "{location}: transmittance {transmittance} at X = {x} is not positive; absorbance −log10(T) is undefined"
    )]
    NonPositiveTransmittance {
        /// The abscissa in file units.
        x: f64,
        /// The transmittance as a fraction.
        transmittance: f64,
        /// The data line holding it.
        location: Location,
    },
    /// A wavenumber of zero or below, which has no wavelength.
    #[error("{location}: wavenumber {wavenumber_per_cm} cm⁻¹ is not positive and has no wavelength")]
    NonPositiveWavenumber {
        /// The value, cm⁻¹.
        wavenumber_per_cm: f64,
        /// The data line holding it.
        location: Location,
    },
    /// Two points share one wavelength.
    #[error("{location}: wavelength {wavelength_nm} nm appears more than once")]
    DuplicateWavelength {
        /// The wavelength.
        wavelength_nm: f64,
        /// The data record.
        location: Location,
    },
    /// `##FIRSTX=` or `##LASTX=` disagrees with the X values written on the data lines.
    #[error(
        "{location}: ##{label}={declared} disagrees with the data: the line's X gives {decoded} \
         (more than half a point spacing away)"
    )]
    XMismatch {
        /// `FIRSTX` or `LASTX`.
        label: String,
        /// The declared value (after XFACTOR).
        declared: f64,
        /// The abscissa from the data line (after XFACTOR).
        decoded: f64,
        /// The data line.
        location: Location,
    },
    /// More points than this reader accepts in one file (a guard against DUP counts or
    /// inputs that would exhaust memory).
    #[error("{location}: more than {limit} points")]
    TooManyPoints {
        /// The limit.
        limit: u64,
        /// Where it was exceeded.
        location: Location,
    },
    /// No data at all: no spectrum block, or a data record without points.
    #[error("{location}: no spectral data ({detail})")]
    EmptyData {
        /// What is empty.
        detail: String,
        /// The block or file.
        location: Location,
    },
    /// A spectrum's sample id is not among the samples.
    #[error("{location}: spectrum for sample '{id}' has no entry in the samples table")]
    UnknownSample {
        /// The id.
        id: String,
        /// Where the spectrum came from.
        location: Location,
    },
    /// A sample has no spectrum.
    #[error("sample '{id}' has no spectrum in the JCAMP-DX files read ({files})")]
    MissingSpectrum {
        /// The sample id.
        id: String,
        /// The files read, comma-separated.
        files: String,
    },
    /// Two spectra claim one sample id.
    #[error("{location}: a second spectrum for sample '{id}' (the first came from {first})")]
    DuplicateSpectrum {
        /// The id.
        id: String,
        /// Where the first came from.
        first: Box<Location>,
        /// Where the second came from.
        location: Location,
    },
    /// The spectra share no wavelength range.
    #[error(
        "the spectra share no wavelength range: latest start {start_nm} nm (sample '{start_sample}') \
         is not below earliest end {end_nm} nm (sample '{end_sample}')"
    )]
    NoOverlap {
        /// Latest first wavelength.
        start_nm: f64,
        /// Its sample.
        start_sample: String,
        /// Earliest last wavelength.
        end_nm: f64,
        /// Its sample.
        end_sample: String,
    },
    /// Resampling a spectrum onto the common grid failed.
    #[error("{location}: resampling sample '{sample}' failed: {source}")]
    Resample {
        /// The sample.
        sample: String,
        /// Where its spectrum came from.
        location: Location,
        /// The cause.
        source: Box<PreprocessError>,
    },
    /// The assembled set failed validation.
    #[error(transparent)]
    Set(#[from] SpectraSetError),
    /// Arguments to the writer that cannot be written faithfully.
    #[error("cannot write JCAMP-DX: {reason}")]
    InvalidOutput {
        /// Why.
        reason: String,
    },
}

impl JcampError {
    /// Where the problem is, when the error has a place in an input.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::data::jcamp::{parse_jcamp, JcampError};
    /// let e = parse_jcamp("##TITLE=x\n##XUNITS=NANOMETERS\n", None).unwrap_err();
    /// assert!(matches!(e, JcampError::Truncated { .. }));
    /// assert_eq!(e.location().and_then(|l| l.line), Some(2));
    /// ```
    pub fn location(&self) -> Option<&Location> {
        match self {
            Self::Io { location, .. }
            | Self::UnknownCompression { location, .. }
            | Self::NpointsMismatch { location, .. }
            | Self::DifCheckFailed { location, .. }
            | Self::Truncated { location, .. }
            | Self::MissingLabel { location, .. }
            | Self::UnsupportedUnits { location, .. }
            | Self::UnsupportedForm { location, .. }
            | Self::BadNumber { location, .. }
            | Self::NonPositiveTransmittance { location, .. }
            | Self::NonPositiveWavenumber { location, .. }
            | Self::DuplicateWavelength { location, .. }
            | Self::XMismatch { location, .. }
            | Self::EmptyData { location, .. }
            | Self::TooManyPoints { location, .. }
            | Self::UnknownSample { location, .. }
            | Self::DuplicateSpectrum { location, .. }
            | Self::Resample { location, .. } => Some(location),
            Self::MissingSpectrum { .. }
            | Self::NoOverlap { .. }
            | Self::Set(_)
            | Self::InvalidOutput { .. } => None,
        }
    }
}
