//! The crate's top-level error: one variant per stage, each wrapping that stage's typed error.

use thiserror::Error;

/// Any error isosbestic's library can return. Match on the stage, then on the stage's variant.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum Error {
    /// The spectra set failed validation.
    #[error(transparent)]
    SpectraSet(#[from] crate::data::SpectraSetError),
    /// A CSV table could not be read or written.
    #[error(transparent)]
    Csv(#[from] crate::data::csv_io::CsvError),
    /// A saved result document could not be read.
    #[error(transparent)]
    Document(#[from] crate::report::tables::DocumentError),
    /// A JCAMP-DX file could not be read or written.
    #[error(transparent)]
    Jcamp(#[from] crate::data::jcamp::JcampError),
    /// A preprocessing step failed.
    #[error(transparent)]
    Preprocess(#[from] crate::preprocess::PreprocessError),
    /// Factor analysis failed.
    #[error(transparent)]
    Factor(#[from] crate::factor::FactorError),
    /// The equilibrium model or speciation failed.
    #[error(transparent)]
    Speciation(#[from] crate::speciation::SpeciationError),
    /// Thermodynamic fitting or a solvent/activity correction failed.
    #[error(transparent)]
    Thermo(#[from] crate::thermo::ThermoError),
    /// A classic two-wavelength estimate failed.
    #[error(transparent)]
    Classic(#[from] crate::resolve::ClassicError),
    /// The global fit could not be run.
    #[error(transparent)]
    HardFit(#[from] crate::resolve::hard::HardFitError),
    /// Soft resolution failed.
    #[error(transparent)]
    Soft(#[from] crate::resolve::soft::SoftError),
    /// A plot could not be drawn or written.
    #[error(transparent)]
    Plot(#[from] crate::report::plots::PlotError),
    /// Fitted and reference absorptivities could not be compared.
    #[error(transparent)]
    Compare(#[from] crate::report::compare::CompareError),
    /// A simulation could not be run.
    #[error(transparent)]
    Simulation(#[from] crate::simulate::SimulationError),
    /// A batch of data sets could not be run as a whole (a failing data set is a result).
    #[error(transparent)]
    Batch(#[from] crate::report::batch::BatchError),
    /// An equilibrium model file is invalid.
    #[error("{path}: {source}")]
    InModel {
        /// The model file.
        path: std::path::PathBuf,
        /// What is wrong.
        source: crate::speciation::SpeciationError,
    },
    /// An input file could not be read.
    #[error("cannot read {path}: {source}")]
    Input {
        /// The file.
        path: std::path::PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// An output would overwrite a file it must not.
    #[error("refusing to write {path}: {reason}")]
    WouldOverwrite {
        /// The file.
        path: std::path::PathBuf,
        /// Why not.
        reason: &'static str,
    },
    /// Settings given by the caller are unusable (e.g. a run configuration file that does not
    /// parse, a missing required option).
    #[error("{0}")]
    Usage(String),
    /// Writing an output failed.
    #[error("cannot write {path}: {source}")]
    Output {
        /// The file being written.
        path: std::path::PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
}

/// `Result` with the crate's [`enum@Error`].
pub type Result<T, E = Error> = std::result::Result<T, E>;
