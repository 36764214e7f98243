//! One entry point for reading a data set, whatever format the spectra come in.

use super::csv_io;
use super::jcamp;
use super::{Interpolation, SpectraSet};
use crate::Result;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// Where the spectra of a data set are.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SpectraSource {
    /// A spectra table (CSV): wavelength column, one column per sample.
    Csv(PathBuf),
    /// JCAMP-DX files; single-block files are named by their stem, blocks of multi-block files
    /// by their TITLE.
    Jcamp(Vec<PathBuf>),
}

/// The files of one data set: spectra plus the samples table with the conditions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DataFiles {
    /// The spectra.
    pub spectra: SpectraSource,
    /// The samples table (CSV).
    pub samples: PathBuf,
    /// Interpolation used when JCAMP-DX spectra sit on different grids.
    #[serde(default)]
    pub interpolation: Interpolation,
}

impl DataFiles {
    /// A CSV data set.
    pub fn csv(spectra: impl Into<PathBuf>, samples: impl Into<PathBuf>) -> Self {
        Self {
            spectra: SpectraSource::Csv(spectra.into()),
            samples: samples.into(),
            interpolation: Interpolation::default(),
        }
    }

    /// All input files (spectra first, then the samples table).
    pub fn paths(&self) -> Vec<PathBuf> {
        let mut out = match &self.spectra {
            SpectraSource::Csv(p) => vec![p.clone()],
            SpectraSource::Jcamp(ps) => ps.clone(),
        };
        out.push(self.samples.clone());
        out
    }
}

/// Reads a data set into a validated [`SpectraSet`].
///
/// # Errors
/// [`crate::Error::Csv`] or [`crate::Error::Jcamp`] naming the file, line and column, or the
/// sample id, of the first problem found.
///
/// # Examples
/// ```
/// use isosbestic::data::{load, DataFiles};
/// let root = env!("CARGO_MANIFEST_DIR");
/// let set = load(&DataFiles::csv(
///     format!("{root}/data/demo/spectra.csv"),
///     format!("{root}/data/demo/samples.csv"),
/// ))?;
/// assert_eq!(set.n_samples(), 54);
/// assert_eq!(set.components(), &["Ni".to_string(), "Br".to_string()]); // samples-table order
/// # Ok::<(), isosbestic::Error>(())
/// ```
pub fn load(files: &DataFiles) -> Result<SpectraSet> {
    match &files.spectra {
        SpectraSource::Csv(spectra) => Ok(csv_io::load_csv_set(spectra, &files.samples)?),
        SpectraSource::Jcamp(paths) => {
            let table = csv_io::read_samples_table(&files.samples)?;
            let mut spectra = Vec::new();
            for path in paths {
                let blocks = jcamp::read_jcamp(path)?;
                let n = blocks.len();
                for (i, block) in blocks.into_iter().enumerate() {
                    let id = jcamp::sample_id_for(path, &block, i, n);
                    spectra.push((id, block));
                }
            }
            let mut sources = paths.clone();
            sources.push(files.samples.clone());
            Ok(jcamp::assemble_set(
                spectra,
                table.samples,
                table.components,
                files.interpolation,
                sources,
            )?)
        }
    }
}
