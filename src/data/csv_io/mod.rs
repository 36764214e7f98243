//! CSV input: the spectra table and the samples table, and pairing them into a
//! [`SpectraSet`].
//!
//! ## Spectra table
//! Wavelength (nm) in the first column, one absorbance column per sample; the header row is
//! `wavelength_nm` (or any first header) followed by the sample ids:
//!
//! ```text
//! # optional comment lines before the header
//! wavelength_nm,s01,s02,s03
//! 400,0.112,0.131,0.150
//! 401,0.115,0.133,0.154
//! ```
//!
//! ## Samples table
//! One row per sample: `sample_id` (or `id`), `series`, `temperature_K` or `temperature_C`,
//! `path_cm`, one `<component>_M` column per component total (mol/L); optionally
//! `prep_temperature_K`/`prep_temperature_C` (default 25 °C) and `blank`; every other column is
//! kept as metadata.
//!
//! ```text
//! sample_id,series,temperature_C,path_cm,metal_M,ligand_M,note
//! s01,low,15,1.0,0.010,0.002,
//! s02,low,35,1.0,0.010,0.002,fresh cuvette
//! ```
//!
//! ## Dialect
//! Columns separated by `,`, `;` or a tab, detected from the header and the rows after it; `.`
//! is the only decimal mark (a file with decimal commas is refused with
//! [`CsvError::DecimalComma`]); cells are trimmed; double quotes may enclose cells; a UTF-8
//! byte-order mark, blank lines, `#` comment lines before the header, and a delimiter ending
//! every line (an empty last column) are allowed.
//!
//! Errors are [`CsvError`]s naming file, line and column. The matching writers are in
//! [`crate::report::tables`].

mod dialect;
mod error;
mod known;
mod ktable;
mod samples;
mod spectra;

pub use error::CsvError;
pub use known::{KnownSpectrumTable, parse_known_spectrum, read_known_spectrum};
pub use ktable::{KTable, parse_k_table, read_k_table};
pub(crate) use samples::{ColumnRole, classify_column};
pub use samples::{
    PREP_TEMPERATURE_C_COLUMN, PREP_TEMPERATURE_K_COLUMN, SamplesTable, TEMPERATURE_C_COLUMN,
    TEMPERATURE_K_COLUMN, TOTAL_SUFFIX, parse_samples_table,
};
pub use spectra::{SpectraTable, parse_spectra_table};

use super::{Location, ProcessingStep, SpectraSet};
use dialect::column_number;
use ndarray::{Array1, Array2, Axis};
use std::collections::HashMap;
use std::path::Path;

/// Header of the wavelength column written by [`crate::report::tables::write_spectra_table`].
pub const WAVELENGTH_COLUMN: &str = "wavelength_nm";

/// Reads a file as UTF-8 text.
fn read_text(path: &Path) -> Result<String, CsvError> {
    let bytes = std::fs::read(path).map_err(|source| CsvError::Unreadable {
        file: path.to_path_buf(),
        source,
    })?;
    String::from_utf8(bytes).map_err(|e| {
        let valid = e.as_bytes().get(..e.utf8_error().valid_up_to()).unwrap_or(&[]);
        let newlines = valid.iter().filter(|&&b| b == b'\n').count();
        CsvError::NotUtf8 {
            location: Location::in_file(path).at_line(column_number(newlines)),
        }
    })
}

/// Reads a spectra table from a file; see [`parse_spectra_table`].
///
/// # Errors
/// [`CsvError::Unreadable`], [`CsvError::NotUtf8`], or any error of [`parse_spectra_table`],
/// naming `path`.
///
/// # Examples
/// ```
/// let dir = tempfile::tempdir()?;
/// let p = dir.path().join("spectra.csv");
/// std::fs::write(&p, "wavelength_nm\ta\n400\t0.5\n")?;
/// let t = isosbestic::data::csv_io::read_spectra_table(&p)?;
/// assert_eq!(t.sample_ids, vec!["a"]);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn read_spectra_table(path: &Path) -> Result<SpectraTable, CsvError> {
    parse_spectra_table(&read_text(path)?, Some(path))
}

/// Reads a samples table from a file; see [`parse_samples_table`].
///
/// # Errors
/// [`CsvError::Unreadable`], [`CsvError::NotUtf8`], or any error of [`parse_samples_table`],
/// naming `path`.
///
/// # Examples
/// ```
/// let dir = tempfile::tempdir()?;
/// let p = dir.path().join("samples.csv");
/// std::fs::write(&p, "id;series;temperature_K;path_cm;M_M\nx;a;300;1;0.1\n")?;
/// let t = isosbestic::data::csv_io::read_samples_table(&p)?;
/// assert_eq!(t.components, vec!["M"]);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn read_samples_table(path: &Path) -> Result<SamplesTable, CsvError> {
    parse_samples_table(&read_text(path)?, Some(path))
}

/// Reads a spectra table and a samples table and pairs them into a validated [`SpectraSet`].
///
/// Rows of D follow the order of the samples table; the wavelength axis is increasing. The set's
/// history starts with [`ProcessingStep::Imported`] (format `csv`, both files).
///
/// # Errors
/// Any error of [`read_spectra_table`] or [`read_samples_table`];
/// [`CsvError::SpectrumWithoutSample`] for a spectra column whose id is not in the samples table
/// (naming the column), [`CsvError::SampleWithoutSpectrum`] for a samples row with no spectrum
/// (naming the line); [`CsvError::Invalid`] if the set fails validation.
///
/// # Examples
/// ```
/// let dir = tempfile::tempdir()?;
/// let spectra = dir.path().join("spectra.csv");
/// let samples = dir.path().join("samples.csv");
/// std::fs::write(&spectra, "wavelength_nm,b,a\n400,0.2,0.1\n500,0.4,0.3\n")?;
/// std::fs::write(&samples, "sample_id,series,temperature_C,path_cm,metal_M\n\
///                           a,s,25,1,0.01\nb,s,50,1,0.01\n")?;
/// let set = isosbestic::data::csv_io::load_csv_set(&spectra, &samples)?;
/// assert_eq!(set.samples()[0].id, "a"); // samples-table order
/// approx::assert_relative_eq!(set.absorbance()[[0, 1]], 0.3);
/// approx::assert_relative_eq!(set.samples()[1].temperature_k, 323.15);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn load_csv_set(spectra: &Path, samples: &Path) -> Result<SpectraSet, CsvError> {
    let spectra_table = read_spectra_table(spectra)?;
    let samples_table = read_samples_table(samples)?;
    pair_tables(spectra_table, samples_table, spectra, samples)
}

/// Pairs tables already read; `spectra`/`samples` name the files in errors.
fn pair_tables(
    spectra_table: SpectraTable,
    samples_table: SamplesTable,
    spectra: &Path,
    samples: &Path,
) -> Result<SpectraSet, CsvError> {
    let row_of: HashMap<&str, usize> = samples_table
        .samples
        .iter()
        .enumerate()
        .map(|(i, s)| (s.id.as_str(), i))
        .collect();
    let column_of: HashMap<&str, usize> = spectra_table
        .sample_ids
        .iter()
        .enumerate()
        .map(|(i, id)| (id.as_str(), i))
        .collect();
    if let Some((index, id)) = spectra_table
        .sample_ids
        .iter()
        .enumerate()
        .find(|(_, id)| !row_of.contains_key(id.as_str()))
    {
        return Err(CsvError::SpectrumWithoutSample {
            location: Location::in_file(spectra)
                .at_line(spectra_table.header_line)
                .at_column(column_number(index + 1)),
            id: id.clone(),
            samples_file: samples.to_path_buf(),
        });
    }
    let mut rows = Vec::with_capacity(samples_table.samples.len());
    for (sample, line) in samples_table.samples.iter().zip(&samples_table.lines) {
        match column_of.get(sample.id.as_str()) {
            Some(&i) => rows.push(i),
            None => {
                return Err(CsvError::SampleWithoutSpectrum {
                    location: Location::in_file(samples).at_line(*line),
                    id: sample.id.clone(),
                    spectra_file: spectra.to_path_buf(),
                });
            }
        }
    }
    let absorbance: Array2<f64> = spectra_table.absorbance.select(Axis(0), &rows);
    let invalid = |source| CsvError::Invalid {
        spectra_file: spectra.to_path_buf(),
        samples_file: samples.to_path_buf(),
        source,
    };
    let mut set = SpectraSet::new(
        Array1::from(spectra_table.wavelengths_nm),
        absorbance,
        samples_table.samples,
        samples_table.components,
    )
    .map_err(invalid)?;
    set.push_history(ProcessingStep::Imported {
        format: "csv".into(),
        files: vec![spectra.to_path_buf(), samples.to_path_buf()],
    });
    Ok(set)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::SpectraSetError;

    #[test]
    fn validation_failures_are_wrapped_with_both_files() {
        // The readers already reject everything the set checks; an empty samples table built
        // by hand is the one way to reach validation.
        let spectra = parse_spectra_table("wl,a\n400,1\n", None).unwrap();
        let samples = SamplesTable {
            samples: Vec::new(),
            components: Vec::new(),
            lines: Vec::new(),
        };
        let e = pair_tables(
            SpectraTable {
                sample_ids: Vec::new(),
                absorbance: Array2::zeros((0, 1)),
                ..spectra
            },
            samples,
            Path::new("sp.csv"),
            Path::new("sa.csv"),
        )
        .unwrap_err();
        assert!(matches!(
            e,
            CsvError::Invalid {
                source: SpectraSetError::Empty { .. },
                ..
            }
        ));
        assert!(e.to_string().starts_with("sp.csv with sa.csv: "));
    }
}
