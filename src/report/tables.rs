//! Writing results: a versioned JSON envelope for any serialisable result, a plain CSV table,
//! and the spectra and samples tables that [`crate::data::csv_io`] reads back.
//!
//! Every file is written atomically ([`super::atomic::write_atomic`]). Floats are printed with
//! the shortest digits that read back to the same `f64` ([`format_float`]), so a table written
//! here and read with [`crate::data::csv_io::load_csv_set`] gives back the same numbers.
//!
//! ## JSON documents
//! ```text
//! {"format": "isosbestic", "kind": "<kind>", "format_version": 1,
//!  "crate_version": "<version of the crate that wrote it>", "data": <the value>}
//! ```
//! [`read_json`] checks `format`, `kind` and `format_version` before decoding `data`.

use super::atomic::write_atomic;
use crate::data::csv_io::{
    ColumnRole, PREP_TEMPERATURE_K_COLUMN, TEMPERATURE_K_COLUMN, TOTAL_SUFFIX, WAVELENGTH_COLUMN,
    classify_column,
};
use crate::data::{Location, SampleRole, SpectraSet};
use serde::Serialize;
use serde::de::DeserializeOwned;
use serde_json::{Map, Value};
use std::collections::BTreeSet;
use std::io;
use std::path::Path;
use thiserror::Error;

/// Version of the JSON document layout written by [`write_json`]; raised on incompatible
/// changes. [`read_json`] accepts versions `1..=FORMAT_VERSION`.
pub const FORMAT_VERSION: u32 = 1;

/// The `format` field of every JSON document written by this crate.
pub const FORMAT_NAME: &str = "isosbestic";

/// Errors reading a JSON document written by [`write_json`].
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum DocumentError {
    /// The file could not be read.
    #[error("cannot read {file}: {source}", file = .file.display())]
    Unreadable {
        /// The file.
        file: std::path::PathBuf,
        /// The I/O error.
        source: io::Error,
    },
    /// The file is not valid JSON.
    #[error("{location}: not valid JSON: {message}")]
    Syntax {
        /// File, line and column.
        location: Location,
        /// The JSON parser's message.
        message: String,
    },
    /// Valid JSON, but not an isosbestic document.
    #[error("{location}: not an isosbestic document: {detail}")]
    NotADocument {
        /// The file.
        location: Location,
        /// What is missing or wrong.
        detail: String,
    },
    /// A document of another kind.
    #[error("{location}: holds a '{found}' document, expected '{expected}'")]
    WrongKind {
        /// The file.
        location: Location,
        /// The kind asked for.
        expected: String,
        /// The kind found.
        found: String,
    },
    /// A format version this build cannot read.
    #[error(
        "{location}: format_version {found} is not supported (this build reads 1 to {supported}); \
         read it with the isosbestic version that wrote it or a newer one"
    )]
    UnsupportedVersion {
        /// The file.
        location: Location,
        /// The version found.
        found: u64,
        /// The newest version this build reads.
        supported: u32,
    },
    /// The `data` field does not match the expected type.
    #[error("{location}: the data do not match a '{kind}' document: {message}")]
    Data {
        /// The file.
        location: Location,
        /// The document kind.
        kind: String,
        /// The decoder's message.
        message: String,
    },
}

fn output_error(path: &Path, source: io::Error) -> crate::Error {
    crate::Error::Output {
        path: path.to_path_buf(),
        source,
    }
}

fn try_json_document<T: Serialize>(kind: &str, value: &T) -> Result<Value, serde_json::Error> {
    let mut doc = Map::new();
    doc.insert("format".into(), Value::from(FORMAT_NAME));
    doc.insert("kind".into(), Value::from(kind));
    doc.insert("format_version".into(), Value::from(FORMAT_VERSION));
    doc.insert("crate_version".into(), Value::from(env!("CARGO_PKG_VERSION")));
    doc.insert("data".into(), serde_json::to_value(value)?);
    Ok(Value::Object(doc))
}

/// Wraps a serialisable value in the versioned document envelope.
///
/// # Panics
/// Only if `T`'s `Serialize` implementation fails or produces a map whose keys are not strings
/// (a programming error, never caused by data values); [`write_json`] reports that case as an
/// error instead.
///
/// # Examples
/// ```
/// use isosbestic::report::tables::{to_json_document, FORMAT_VERSION};
/// let doc = to_json_document("example", &vec![1.5, 2.0]);
/// assert_eq!(doc["format"], "isosbestic");
/// assert_eq!(doc["kind"], "example");
/// assert_eq!(doc["format_version"], FORMAT_VERSION);
/// assert_eq!(doc["data"][0], 1.5);
/// ```
pub fn to_json_document<T: Serialize>(kind: &str, value: &T) -> Value {
    match try_json_document(kind, value) {
        Ok(doc) => doc,
        Err(e) => panic!("a '{kind}' value cannot be represented as JSON: {e}"),
    }
}

/// Writes `value` as a pretty-printed JSON document of the given kind, atomically.
///
/// # Errors
/// [`crate::Error::Output`] naming `path` if the value cannot be represented as JSON or the file
/// cannot be written.
///
/// # Examples
/// ```
/// use isosbestic::report::tables::{read_json, write_json};
/// let dir = tempfile::tempdir()?;
/// let p = dir.path().join("k.json");
/// write_json(&p, "constants", &vec![("log_beta_1".to_string(), 2.5)])?;
/// let back: Vec<(String, f64)> = read_json(&p, "constants")?;
/// assert_eq!(back[0].0, "log_beta_1");
/// approx::assert_relative_eq!(back[0].1, 2.5);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn write_json<T: Serialize>(path: &Path, kind: &str, value: &T) -> Result<(), crate::Error> {
    let doc = try_json_document(kind, value).map_err(|e| output_error(path, e.into()))?;
    let mut bytes = serde_json::to_vec_pretty(&doc).map_err(|e| output_error(path, e.into()))?;
    bytes.push(b'\n');
    write_atomic(path, &bytes).map_err(|e| output_error(path, e))
}

/// Reads a JSON document written by [`write_json`], checking its format, kind and version.
///
/// # Errors
/// [`DocumentError`] naming the file (and line/column for JSON syntax errors).
///
/// # Examples
/// ```
/// use isosbestic::report::tables::{read_json, write_json, DocumentError};
/// let dir = tempfile::tempdir()?;
/// let p = dir.path().join("x.json");
/// write_json(&p, "fit", &3_u32)?;
/// assert!(matches!(read_json::<u32>(&p, "inspect"), Err(DocumentError::WrongKind { .. })));
/// assert_eq!(read_json::<u32>(&p, "fit")?, 3);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn read_json<T: DeserializeOwned>(path: &Path, kind: &str) -> Result<T, DocumentError> {
    let text = std::fs::read_to_string(path).map_err(|source| DocumentError::Unreadable {
        file: path.to_path_buf(),
        source,
    })?;
    let doc: Value = serde_json::from_str(&text).map_err(|e| DocumentError::Syntax {
        location: Location::in_file(path)
            .at_line(e.line() as u64)
            .at_column(e.column() as u64),
        message: e.to_string(),
    })?;
    from_json_document(doc, kind, Some(path))
}

/// Decodes a document value (as made by [`to_json_document`]), checking format, kind and
/// version; `source` names the file in errors.
///
/// # Errors
/// [`DocumentError::NotADocument`], [`DocumentError::WrongKind`],
/// [`DocumentError::UnsupportedVersion`], [`DocumentError::Data`].
///
/// # Examples
/// ```
/// use isosbestic::report::tables::{from_json_document, to_json_document, DocumentError};
/// let mut doc = to_json_document("fit", &1.0_f64);
/// doc["format_version"] = 99.into();
/// let e = from_json_document::<f64>(doc, "fit", None).unwrap_err();
/// assert!(matches!(e, DocumentError::UnsupportedVersion { found: 99, .. }));
/// ```
pub fn from_json_document<T: DeserializeOwned>(
    document: Value,
    kind: &str,
    source: Option<&Path>,
) -> Result<T, DocumentError> {
    let location = Location {
        file: source.map(Path::to_path_buf),
        line: None,
        column: None,
    };
    let not_ours = |detail: &str| DocumentError::NotADocument {
        location: location.clone(),
        detail: detail.to_string(),
    };
    let Value::Object(mut doc) = document else {
        return Err(not_ours("the top level is not a JSON object"));
    };
    if doc.get("format").and_then(Value::as_str) != Some(FORMAT_NAME) {
        return Err(not_ours("its \"format\" field is not \"isosbestic\""));
    }
    let found = doc
        .get("kind")
        .and_then(Value::as_str)
        .ok_or_else(|| not_ours("it has no \"kind\" field"))?;
    if found != kind {
        return Err(DocumentError::WrongKind {
            location,
            expected: kind.to_string(),
            found: found.to_string(),
        });
    }
    let version = doc
        .get("format_version")
        .and_then(Value::as_u64)
        .ok_or_else(|| not_ours("it has no whole-number \"format_version\" field"))?;
    if !(1..=u64::from(FORMAT_VERSION)).contains(&version) {
        return Err(DocumentError::UnsupportedVersion {
            location,
            found: version,
            supported: FORMAT_VERSION,
        });
    }
    let data = doc
        .remove("data")
        .ok_or_else(|| not_ours("it has no \"data\" field"))?;
    serde_json::from_value(data).map_err(|e| DocumentError::Data {
        location,
        kind: kind.to_string(),
        message: e.to_string(),
    })
}

/// Formats a float with the shortest digits that parse back to the same `f64`.
///
/// Plain notation for 10⁻⁵ ≤ |x| < 10¹⁶ (and zero), scientific notation otherwise, so values
/// stay short in both directions.
///
/// # Examples
/// ```
/// use isosbestic::report::tables::format_float;
/// assert_eq!(format_float(0.1), "0.1");
/// assert_eq!(format_float(298.15), "298.15");
/// assert_eq!(format_float(1.5e-9), "1.5e-9");
/// let x = 1.0_f64 / 3.0;
/// assert_eq!(format_float(x).parse::<f64>().unwrap().to_bits(), x.to_bits());
/// ```
pub fn format_float(x: f64) -> String {
    let a = x.abs();
    if a == 0.0 || (1e-5..1e16).contains(&a) || !a.is_finite() {
        format!("{x}")
    } else {
        format!("{x:e}")
    }
}

/// A plain table of text cells, written as comma-separated CSV with one header row.
///
/// # Examples
/// ```
/// use isosbestic::report::tables::Table;
/// let mut t = Table::new(["species", "log_beta"]);
/// t.push_row(["ML", "3.2"]);
/// assert_eq!(t.to_csv_string()?, "species,log_beta\nML,3.2\n");
/// # Ok::<(), std::io::Error>(())
/// ```
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Table {
    /// Column headers.
    pub headers: Vec<String>,
    /// Rows of cells; each row must have as many cells as there are headers.
    pub rows: Vec<Vec<String>>,
}

impl Table {
    /// An empty table with the given headers.
    pub fn new<S: Into<String>>(headers: impl IntoIterator<Item = S>) -> Self {
        Self {
            headers: headers.into_iter().map(Into::into).collect(),
            rows: Vec::new(),
        }
    }

    /// Appends a row.
    pub fn push_row<S: Into<String>>(&mut self, cells: impl IntoIterator<Item = S>) {
        self.rows.push(cells.into_iter().map(Into::into).collect());
    }

    /// The table as CSV text (cells quoted where needed, `\n` line ends).
    ///
    /// # Errors
    /// An [`io::Error`] of kind `InvalidData` if a row's length differs from the header's.
    pub fn to_csv_string(&self) -> io::Result<String> {
        let mut w = csv::WriterBuilder::new().from_writer(Vec::new());
        w.write_record(&self.headers)?;
        for row in &self.rows {
            w.write_record(row)?;
        }
        let bytes = w.into_inner().map_err(|e| io::Error::other(e.to_string()))?;
        String::from_utf8(bytes).map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e))
    }

    /// Writes the table as CSV to `path`, atomically.
    ///
    /// # Errors
    /// [`crate::Error::Output`] naming `path` (ragged rows or an I/O failure).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::tables::Table;
    /// let dir = tempfile::tempdir()?;
    /// let p = dir.path().join("t.csv");
    /// let mut t = Table::new(["a", "b"]);
    /// t.push_row(["1", "x, y"]);
    /// t.write_csv(&p)?;
    /// assert_eq!(std::fs::read_to_string(&p)?, "a,b\n1,\"x, y\"\n");
    /// t.push_row(["too short"]);
    /// assert!(t.write_csv(&p).is_err());
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn write_csv(&self, path: &Path) -> Result<(), crate::Error> {
        let text = self.to_csv_string().map_err(|e| output_error(path, e))?;
        write_atomic(path, text.as_bytes()).map_err(|e| output_error(path, e))
    }
}

/// The spectra table of a set: `wavelength_nm` then one column per sample (ids as headers),
/// one row per wavelength, increasing.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::report::tables::spectra_table;
/// let set = SpectraSet::new(
///     ndarray::array![400.0, 500.0],
///     ndarray::array![[0.1, 0.2]],
///     vec![Sample::new("a", "s", 298.15, 1.0)],
///     vec![],
/// )?;
/// assert_eq!(spectra_table(&set).to_csv_string()?, "wavelength_nm,a\n400,0.1\n500,0.2\n");
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn spectra_table(set: &SpectraSet) -> Table {
    let mut table = Table::new(
        std::iter::once(WAVELENGTH_COLUMN.to_string()).chain(set.samples().iter().map(|s| s.id.clone())),
    );
    for (j, wavelength) in set.wavelengths_nm().iter().enumerate() {
        let column = set.absorbance().column(j);
        table.push_row(
            std::iter::once(format_float(*wavelength)).chain(column.iter().map(|a| format_float(*a))),
        );
    }
    table
}

/// The samples table of a set: `sample_id, series, temperature_K, path_cm, <component>_M…,
/// prep_temperature_K, blank`, then the metadata columns (sorted by name; empty where a sample
/// has no value).
///
/// # Errors
/// An [`io::Error`] of kind `InvalidInput` if a metadata name would be read back as something
/// else (e.g. `note_M` as a component total, a fixed column name, a blank name, or a name with
/// surrounding spaces).
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::report::tables::samples_table;
/// let set = SpectraSet::new(
///     ndarray::array![400.0],
///     ndarray::array![[0.1]],
///     vec![Sample::new("a", "s", 298.15, 1.0).with_total("metal", 0.01)],
///     vec!["metal".into()],
/// )?;
/// let t = samples_table(&set)?;
/// assert_eq!(
///     t.headers,
///     ["sample_id", "series", "temperature_K", "path_cm", "metal_M", "prep_temperature_K", "blank"]
/// );
/// assert_eq!(t.rows[0], ["a", "s", "298.15", "1", "0.01", "298.15", "false"]);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn samples_table(set: &SpectraSet) -> io::Result<Table> {
    let metadata: BTreeSet<&String> = set.samples().iter().flat_map(|s| s.metadata.keys()).collect();
    for key in &metadata {
        if key.trim() != key.as_str() || classify_column(key) != Ok(ColumnRole::Metadata) {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!(
                    "metadata column '{key}' would not read back as metadata (it is blank, has \
                     surrounding spaces, or is a reserved or <component>{TOTAL_SUFFIX} name); rename it"
                ),
            ));
        }
    }
    let mut headers: Vec<String> = ["sample_id", "series", TEMPERATURE_K_COLUMN, "path_cm"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    headers.extend(set.components().iter().map(|c| format!("{c}{TOTAL_SUFFIX}")));
    headers.push(PREP_TEMPERATURE_K_COLUMN.into());
    headers.push("blank".into());
    headers.extend(metadata.iter().map(|k| (*k).clone()));
    let mut table = Table::new(headers);
    for s in set.samples() {
        let mut row = vec![
            s.id.clone(),
            s.series.clone(),
            format_float(s.temperature_k),
            format_float(s.path_cm),
        ];
        row.extend(
            set.components()
                .iter()
                .map(|c| s.totals_m.get(c).map_or_else(String::new, |v| format_float(*v))),
        );
        row.push(format_float(s.preparation_temperature_k));
        row.push((s.role == SampleRole::Blank).to_string());
        row.extend(
            metadata
                .iter()
                .map(|k| s.metadata.get(*k).cloned().unwrap_or_default()),
        );
        table.rows.push(row);
    }
    Ok(table)
}

/// Writes the spectra table of `set` ([`spectra_table`]) to `path`, atomically.
///
/// # Errors
/// [`crate::Error::Output`] naming `path`.
pub fn write_spectra_table(set: &SpectraSet, path: &Path) -> Result<(), crate::Error> {
    spectra_table(set).write_csv(path)
}

/// Writes the samples table of `set` ([`samples_table`]) to `path`, atomically.
///
/// Together with [`write_spectra_table`] the output reads back with
/// [`crate::data::csv_io::load_csv_set`] to a set with the same values (history aside).
///
/// # Errors
/// [`crate::Error::Output`] naming `path`, including a metadata name that would not read back.
///
/// # Examples
/// ```
/// use isosbestic::data::{csv_io::load_csv_set, Sample, SpectraSet};
/// use isosbestic::report::tables::{write_samples_table, write_spectra_table};
/// let set = SpectraSet::new(
///     ndarray::array![400.0, 450.5],
///     ndarray::array![[0.1, 1.0 / 3.0]],
///     vec![Sample::new("a", "s", 301.7, 0.5).with_total("metal", 1e-3)],
///     vec!["metal".into()],
/// )?;
/// let dir = tempfile::tempdir()?;
/// let (sp, sa) = (dir.path().join("spectra.csv"), dir.path().join("samples.csv"));
/// write_spectra_table(&set, &sp)?;
/// write_samples_table(&set, &sa)?;
/// let back = load_csv_set(&sp, &sa)?;
/// assert_eq!(back.absorbance(), set.absorbance()); // exact: shortest round-trip digits
/// assert_eq!(back.samples(), set.samples());
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn write_samples_table(set: &SpectraSet, path: &Path) -> Result<(), crate::Error> {
    samples_table(set)
        .map_err(|e| output_error(path, e))?
        .write_csv(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn format_float_round_trips_extremes_exactly() {
        for x in [
            0.0,
            -0.0,
            1e-300,
            -2.5e-7,
            9_999_999_999_999_998.0,
            1e16,
            f64::MAX,
            f64::MIN_POSITIVE,
            0.1 + 0.2,
        ] {
            let back: f64 = format_float(x).parse().unwrap();
            assert_eq!(back.to_bits(), x.to_bits(), "{x}");
        }
    }

    #[test]
    fn documents_that_are_not_ours_are_refused() {
        let e = from_json_document::<f64>(serde_json::json!({"data": 1.0}), "fit", None).unwrap_err();
        assert!(matches!(e, DocumentError::NotADocument { .. }));
        let e = from_json_document::<f64>(serde_json::json!([1]), "fit", None).unwrap_err();
        assert!(matches!(e, DocumentError::NotADocument { .. }));
        let mut doc = to_json_document("fit", &"text");
        assert!(matches!(
            from_json_document::<f64>(doc.clone(), "fit", None),
            Err(DocumentError::Data { .. })
        ));
        doc["format_version"] = 0.into();
        assert!(matches!(
            from_json_document::<String>(doc, "fit", None),
            Err(DocumentError::UnsupportedVersion { found: 0, .. })
        ));
    }

    #[test]
    fn a_json_syntax_error_names_file_line_and_column() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("bad.json");
        std::fs::write(&p, "{\n  \"format\": \"isosbestic\",\n  oops\n}").unwrap();
        let e = read_json::<f64>(&p, "fit").unwrap_err();
        assert!(matches!(&e, DocumentError::Syntax { location, .. } if location.line == Some(3)));
        assert!(e.to_string().contains("bad.json, line 3, column"));
    }
}
