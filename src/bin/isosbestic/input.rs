//! Flags naming a data set's files, shared by the subcommands that read one.

use clap::Args;
use isosbestic::data::{DataFiles, Interpolation, SpectraSource};
use std::path::PathBuf;

/// Where the spectra are (one of the two).
#[derive(Debug, Args)]
#[group(id = "spectra_source", required = false, multiple = false)]
pub struct SpectraArgs {
    /// Spectra table (CSV): wavelength_nm column, then one column per sample id.
    #[arg(long, value_name = "CSV", group = "spectra_source")]
    pub spectra: Option<PathBuf>,
    /// JCAMP-DX files (sample id = file stem; in multi-block files, each block's TITLE).
    #[arg(long, value_name = "JDX", num_args = 1.., group = "spectra_source")]
    pub jcamp: Vec<PathBuf>,
}

/// The samples table and the spectra.
#[derive(Debug, Args)]
pub struct DataArgs {
    #[command(flatten)]
    pub source: SpectraArgs,
    /// Samples table (CSV): sample_id, series, temperature_K or temperature_C, path_cm, <component>_M.
    #[arg(long, value_name = "CSV")]
    pub samples: Option<PathBuf>,
    /// Use monotone cubic instead of linear interpolation when JCAMP-DX grids differ.
    #[arg(long)]
    pub cubic: bool,
}

impl DataArgs {
    /// True when any data flag was given.
    pub fn given(&self) -> bool {
        self.source.spectra.is_some() || !self.source.jcamp.is_empty() || self.samples.is_some()
    }

    /// The data files, or a usage error naming what is missing.
    pub fn files(&self) -> isosbestic::Result<DataFiles> {
        let spectra = match (&self.source.spectra, self.source.jcamp.is_empty()) {
            (Some(csv), _) => SpectraSource::Csv(csv.clone()),
            (None, false) => SpectraSource::Jcamp(self.source.jcamp.clone()),
            (None, true) => {
                return Err(crate::usage(
                    "give the spectra: --spectra <CSV> or --jcamp <JDX>...",
                ));
            }
        };
        let samples = self
            .samples
            .clone()
            .ok_or_else(|| crate::usage("give the samples table: --samples <CSV>"))?;
        Ok(DataFiles {
            spectra,
            samples,
            interpolation: if self.cubic {
                Interpolation::MonotoneCubic
            } else {
                Interpolation::Linear
            },
        })
    }
}
