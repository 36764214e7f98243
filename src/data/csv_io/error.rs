//! [`CsvError`]: everything that can be wrong with a spectra or samples table, each variant
//! naming where (file, line, column) so the table can be fixed from the message alone.

use crate::data::{Location, SpectraSetError};
use std::path::PathBuf;
use thiserror::Error;

/// Errors reading a spectra table or samples table (CSV), or pairing the two.
///
/// Every variant that concerns a place in a file carries a [`Location`] (1-based line and
/// column); [`CsvError::location`] returns it. The messages say what was found and what is
/// expected.
///
/// # Examples
/// ```
/// use isosbestic::data::csv_io::{parse_spectra_table, CsvError};
/// let e = parse_spectra_table("wavelength_nm,a\n400,high\n", None).unwrap_err();
/// assert!(matches!(e, CsvError::NonNumeric { .. }));
/// assert_eq!(e.location().and_then(|l| l.line), Some(2));
/// assert_eq!(e.location().and_then(|l| l.column), Some(2));
/// ```
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum CsvError {
    /// The file could not be read.
    #[error("cannot read {file}: {source}", file = .file.display())]
    Unreadable {
        /// The file.
        file: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file is not UTF-8 text.
    #[error(
        "{location}: the file is not UTF-8 text (invalid byte sequence on this line); \
         save the table as UTF-8 CSV"
    )]
    NotUtf8 {
        /// File and line of the first invalid byte.
        location: Location,
    },
    /// The header splits into a single column with every accepted delimiter.
    #[error(
        "{location}: cannot tell how the columns are separated: the header '{header}' is a single \
         column whether split at ',', ';' or a tab; expected a header such as \
         'wavelength_nm,s1,s2' with the columns separated by ',', ';' or a tab"
    )]
    DelimiterGuess {
        /// File and header line.
        location: Location,
        /// The header as seen (shortened when long).
        header: String,
    },
    /// A cell looks like a number written with a decimal comma.
    #[error(
        "{location}: '{cell}' looks like a number written with a decimal comma; only '.' is \
         accepted as the decimal mark (e.g. '0.123'), with ',', ';' or a tab between columns"
    )]
    DecimalComma {
        /// File, line and column of the cell.
        location: Location,
        /// The cell text.
        cell: String,
    },
    /// A row has a different number of fields than the header.
    #[error("{location}: this row has {found} fields but the header has {expected}")]
    Ragged {
        /// File and line of the row.
        location: Location,
        /// Number of header fields.
        expected: usize,
        /// Number of fields in the row.
        found: usize,
    },
    /// A cell that must hold a number does not.
    #[error("{location}: {what} '{text}' is not a number (expected e.g. 0.123 or 1.5e-3)")]
    NonNumeric {
        /// File, line and column of the cell.
        location: Location,
        /// What the cell holds, e.g. `wavelength` or `path_cm`.
        what: String,
        /// The cell text.
        text: String,
    },
    /// A numeric cell is NaN, infinite or too large for a 64-bit float.
    #[error("{location}: {what} is '{text}', which is not a finite number")]
    NonFinite {
        /// File, line and column of the cell.
        location: Location,
        /// What the cell holds.
        what: String,
        /// The cell text.
        text: String,
    },
    /// A required cell is empty.
    #[error("{location}: {what} is empty")]
    MissingValue {
        /// File, line and column of the cell.
        location: Location,
        /// What the cell should hold.
        what: String,
    },
    /// The same wavelength appears on two rows of a spectra table.
    #[error("{location}: wavelength {wavelength_nm} nm already appears on line {first_line}")]
    DuplicateWavelength {
        /// File and line of the second occurrence, column 1.
        location: Location,
        /// The repeated wavelength.
        wavelength_nm: f64,
        /// Line of the first occurrence.
        first_line: u64,
    },
    /// A sample id appears twice (spectra table header, or samples table rows).
    #[error("{location}: sample id '{id}' appears more than once (also at {first_seen})")]
    DuplicateSampleId {
        /// File, line and column of the second occurrence.
        location: Location,
        /// The repeated id.
        id: String,
        /// Where it appeared first, e.g. `column 2` or `line 4`.
        first_seen: String,
    },
    /// A required column is absent from the header.
    #[error("{location}: the header has no {column} column")]
    MissingColumn {
        /// File and header line.
        location: Location,
        /// The column that is missing, e.g. `sample_id (or id)`.
        column: String,
    },
    /// A temperature column whose header does not state the unit.
    #[error(
        "{location}: column '{column}' does not state its temperature unit as expected; the unit \
         is part of the name, exactly {expected_k} (kelvin) or {expected_c} (degrees Celsius)"
    )]
    MissingTemperatureUnit {
        /// File, header line and column.
        location: Location,
        /// The header as found.
        column: String,
        /// Accepted header for kelvin.
        expected_k: &'static str,
        /// Accepted header for degrees Celsius.
        expected_c: &'static str,
    },
    /// A header cell that cannot be used (blank, repeated, conflicting with another column).
    #[error("{location}: column header '{name}' {problem}")]
    BadHeader {
        /// File, header line and column.
        location: Location,
        /// The header cell.
        name: String,
        /// What is wrong, in words.
        problem: String,
    },
    /// A number that is physically impossible (non-positive path length or wavelength,
    /// temperature at or below 0 K, negative total).
    #[error("{location}: {what} is {value}, but {requirement}")]
    ImpossibleValue {
        /// File, line and column of the cell.
        location: Location,
        /// What the cell holds.
        what: String,
        /// The value as stated (in the column's unit).
        value: f64,
        /// The rule it breaks.
        requirement: &'static str,
    },
    /// A yes/no cell holds something else.
    #[error(
        "{location}: {what} '{text}' is not a yes/no value; use true/false, yes/no, 1/0, \
         or leave it empty (= false)"
    )]
    InvalidFlag {
        /// File, line and column of the cell.
        location: Location,
        /// The column, e.g. `blank`.
        what: String,
        /// The cell text.
        text: String,
    },
    /// A samples-table row has no matching column in the spectra table.
    #[error("{location}: sample '{id}' has no spectrum: {spectra_file} has no column with this id",
        spectra_file = .spectra_file.display())]
    SampleWithoutSpectrum {
        /// Samples file and line of the row.
        location: Location,
        /// The sample id.
        id: String,
        /// The spectra table searched.
        spectra_file: PathBuf,
    },
    /// A spectra-table column has no row in the samples table.
    #[error("{location}: spectrum '{id}' has no row in the samples table {samples_file}",
        samples_file = .samples_file.display())]
    SpectrumWithoutSample {
        /// Spectra file, header line and column.
        location: Location,
        /// The column's sample id.
        id: String,
        /// The samples table searched.
        samples_file: PathBuf,
    },
    /// The table has no header or no data rows.
    #[error("{location}: the table is empty: {what}")]
    Empty {
        /// The file (and line, when known).
        location: Location,
        /// What is missing.
        what: &'static str,
    },
    /// The CSV structure itself could not be read.
    #[error("{location}: malformed CSV: {detail}")]
    Malformed {
        /// File and line.
        location: Location,
        /// The CSV reader's message.
        detail: String,
    },
    /// The paired tables passed the readers but the spectra set rejected them.
    #[error("{spectra_file} with {samples_file}: {source}",
        spectra_file = .spectra_file.display(), samples_file = .samples_file.display())]
    Invalid {
        /// The spectra table.
        spectra_file: PathBuf,
        /// The samples table.
        samples_file: PathBuf,
        /// Why the set was rejected.
        source: SpectraSetError,
    },
}

impl CsvError {
    /// Where in which file the problem is, when it concerns one place.
    ///
    /// `None` for [`CsvError::Unreadable`] (see its `file`) and [`CsvError::Invalid`] (two files).
    pub fn location(&self) -> Option<&Location> {
        match self {
            Self::Unreadable { .. } | Self::Invalid { .. } => None,
            Self::NotUtf8 { location }
            | Self::DelimiterGuess { location, .. }
            | Self::DecimalComma { location, .. }
            | Self::Ragged { location, .. }
            | Self::NonNumeric { location, .. }
            | Self::NonFinite { location, .. }
            | Self::MissingValue { location, .. }
            | Self::DuplicateWavelength { location, .. }
            | Self::DuplicateSampleId { location, .. }
            | Self::MissingColumn { location, .. }
            | Self::MissingTemperatureUnit { location, .. }
            | Self::BadHeader { location, .. }
            | Self::ImpossibleValue { location, .. }
            | Self::InvalidFlag { location, .. }
            | Self::SampleWithoutSpectrum { location, .. }
            | Self::SpectrumWithoutSample { location, .. }
            | Self::Empty { location, .. }
            | Self::Malformed { location, .. } => Some(location),
        }
    }
}
