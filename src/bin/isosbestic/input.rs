//! Flags naming a data set's files, shared by the subcommands that read one.

use clap::Args;
use isosbestic::data::{DataFiles, Interpolation, SpectraSource};
use std::path::PathBuf;

/// Where the data set is.
#[derive(Debug, Args)]
#[group(id = "spectra_source", required = true, multiple = false)]
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
    pub samples: PathBuf,
    /// Use monotone cubic instead of linear interpolation when JCAMP-DX grids differ.
    #[arg(long)]
    pub cubic: bool,
}

impl DataArgs {
    pub fn files(&self) -> DataFiles {
        let spectra = match &self.source.spectra {
            Some(csv) => SpectraSource::Csv(csv.clone()),
            None => SpectraSource::Jcamp(self.source.jcamp.clone()),
        };
        DataFiles {
            spectra,
            samples: self.samples.clone(),
            interpolation: if self.cubic {
                Interpolation::MonotoneCubic
            } else {
                Interpolation::Linear
            },
        }
    }
}
