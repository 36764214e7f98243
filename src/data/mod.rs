//! Input stage: the [`SpectraSet`] data model and its readers and writers.
//!
//! - [`SpectraSet`], [`Sample`]: validated data (D, λ, sample conditions).
//! - [`csv_io`]: the spectra table and samples table (CSV), and CSV/JSON writers.
//! - [`jcamp`]: JCAMP-DX (McDonald & Wilks, Appl. Spectrosc. 42 (1988) 151) reader and writer.
//! - [`Location`]: file/line/column carried by every input error.

pub mod csv_io;
mod history;
pub mod jcamp;
mod load;
mod location;
mod spectra_set;

pub use history::{Interpolation, ProcessingStep};
pub use load::{DataFiles, SpectraSource, load};
pub use location::Location;
pub use spectra_set::{
    DEFAULT_PREPARATION_K, Sample, SampleRole, SpectraSet, SpectraSetError, Temperature, ZERO_CELSIUS_K,
};
