//! The samples table: one row per sample with its conditions.

use super::CsvError;
use super::dialect::{at, cell_error, column_number, parse_number, split_table};
use crate::data::{DEFAULT_PREPARATION_K, Location, Sample, SampleRole, Temperature};
use std::collections::{BTreeMap, HashMap};
use std::path::Path;

/// Header of the kelvin measurement-temperature column (also accepted: `temperature_k`).
pub const TEMPERATURE_K_COLUMN: &str = "temperature_K";
/// Header of the Celsius measurement-temperature column (also accepted: `temperature_c`).
pub const TEMPERATURE_C_COLUMN: &str = "temperature_C";
/// Header of the kelvin preparation-temperature column (also accepted: `prep_temperature_k`).
pub const PREP_TEMPERATURE_K_COLUMN: &str = "prep_temperature_K";
/// Header of the Celsius preparation-temperature column (also accepted: `prep_temperature_c`).
pub const PREP_TEMPERATURE_C_COLUMN: &str = "prep_temperature_C";
/// Suffix of a component-total column, `<component>_M`, mol/L.
pub const TOTAL_SUFFIX: &str = "_M";

/// A samples table as read.
#[derive(Debug, Clone, PartialEq)]
pub struct SamplesTable {
    /// The samples, in file order.
    pub samples: Vec<Sample>,
    /// Component names, in header order (from the `<component>_M` columns).
    pub components: Vec<String>,
    /// 1-based source line of each sample, for later error messages.
    pub lines: Vec<u64>,
}

/// Unit of a temperature column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Unit {
    Kelvin,
    Celsius,
}

impl Unit {
    fn temperature(self, value: f64) -> Temperature {
        match self {
            Self::Kelvin => Temperature::Kelvin(value),
            Self::Celsius => Temperature::Celsius(value),
        }
    }
}

/// What a samples-table column holds, decided from its header.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) enum ColumnRole {
    /// `sample_id` or `id`.
    Id,
    /// `series`.
    Series,
    /// Measurement temperature.
    Temperature(Unit),
    /// Preparation temperature.
    PrepTemperature(Unit),
    /// `path_cm`.
    Path,
    /// `blank`.
    Blank,
    /// `<component>_M`.
    Total(String),
    /// Anything else, kept verbatim.
    Metadata,
}

/// Why a header cannot be used.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) enum HeaderProblem {
    /// A temperature column without a unit (or with the unit in the wrong case).
    NoUnit {
        expected_k: &'static str,
        expected_c: &'static str,
    },
    /// Blank header cell.
    Blank,
    /// `_M` with nothing before it.
    NoComponentName,
}

/// Decides what a samples-table column holds from its (trimmed) header.
///
/// Fixed names (`sample_id`, `id`, `series`, `path_cm`, `blank`) match in any ASCII case; the
/// unit suffixes `_K`, `_C` (also `_k`, `_c` for temperatures) and `_M` are case-sensitive.
pub(crate) fn classify_column(name: &str) -> Result<ColumnRole, HeaderProblem> {
    let lower = name.to_ascii_lowercase();
    match name {
        "" => return Err(HeaderProblem::Blank),
        "temperature_K" | "temperature_k" => return Ok(ColumnRole::Temperature(Unit::Kelvin)),
        "temperature_C" | "temperature_c" => return Ok(ColumnRole::Temperature(Unit::Celsius)),
        "prep_temperature_K" | "prep_temperature_k" => return Ok(ColumnRole::PrepTemperature(Unit::Kelvin)),
        "prep_temperature_C" | "prep_temperature_c" => return Ok(ColumnRole::PrepTemperature(Unit::Celsius)),
        _ => {}
    }
    match lower.as_str() {
        "sample_id" | "id" => return Ok(ColumnRole::Id),
        "series" => return Ok(ColumnRole::Series),
        "path_cm" => return Ok(ColumnRole::Path),
        "blank" => return Ok(ColumnRole::Blank),
        "temperature" | "temp" | "t" | "temperature_k" | "temperature_c" => {
            return Err(HeaderProblem::NoUnit {
                expected_k: TEMPERATURE_K_COLUMN,
                expected_c: TEMPERATURE_C_COLUMN,
            });
        }
        "prep_temperature" | "preparation_temperature" | "prep_temperature_k" | "prep_temperature_c" => {
            return Err(HeaderProblem::NoUnit {
                expected_k: PREP_TEMPERATURE_K_COLUMN,
                expected_c: PREP_TEMPERATURE_C_COLUMN,
            });
        }
        _ => {}
    }
    match name.strip_suffix(TOTAL_SUFFIX) {
        Some("") => Err(HeaderProblem::NoComponentName),
        Some(component) => Ok(ColumnRole::Total(component.to_string())),
        None => Ok(ColumnRole::Metadata),
    }
}

/// Column indices of the roles found in a header (0-based).
#[derive(Debug)]
struct Columns {
    id: usize,
    series: usize,
    temperature: (usize, Unit),
    prep_temperature: Option<(usize, Unit)>,
    path: usize,
    blank: Option<usize>,
    totals: Vec<(usize, String)>,
    metadata: Vec<(usize, String)>,
}

/// [`Columns`] while the header is being read.
#[derive(Debug, Default)]
struct Found {
    id: Option<usize>,
    series: Option<usize>,
    temperature: Option<(usize, Unit)>,
    prep_temperature: Option<(usize, Unit)>,
    path: Option<usize>,
    blank: Option<usize>,
    totals: Vec<(usize, String)>,
    metadata: Vec<(usize, String)>,
}

fn map_header(fields: &[String], header: &Location) -> Result<Columns, CsvError> {
    let mut cols = Found::default();
    let mut names: HashMap<&str, usize> = HashMap::new();
    for (index, name) in fields.iter().enumerate() {
        let location = header.clone().at_column(column_number(index));
        let bad = |problem: String| CsvError::BadHeader {
            location: location.clone(),
            name: name.clone(),
            problem,
        };
        if let Some(&first) = names.get(name.as_str()) {
            return Err(bad(format!(
                "appears twice (also column {})",
                column_number(first)
            )));
        }
        names.insert(name, index);
        let role = classify_column(name).map_err(|p| match p {
            HeaderProblem::NoUnit {
                expected_k,
                expected_c,
            } => CsvError::MissingTemperatureUnit {
                location: location.clone(),
                column: name.clone(),
                expected_k,
                expected_c,
            },
            HeaderProblem::Blank => bad("is blank; every column needs a name".into()),
            HeaderProblem::NoComponentName => {
                bad("has no component name; name total columns <component>_M, e.g. metal_M".into())
            }
        })?;
        let slot_taken = |what: &str, first: usize| {
            bad(format!(
                "is a second {what} column (column {} is one already); keep exactly one",
                column_number(first)
            ))
        };
        match role {
            ColumnRole::Id => match cols.id {
                Some(first) => return Err(slot_taken("sample id", first)),
                None => cols.id = Some(index),
            },
            ColumnRole::Series => cols.series = Some(index),
            ColumnRole::Path => cols.path = Some(index),
            ColumnRole::Blank => cols.blank = Some(index),
            ColumnRole::Temperature(unit) => match cols.temperature {
                Some((first, _)) => return Err(slot_taken("temperature", first)),
                None => cols.temperature = Some((index, unit)),
            },
            ColumnRole::PrepTemperature(unit) => match cols.prep_temperature {
                Some((first, _)) => return Err(slot_taken("preparation temperature", first)),
                None => cols.prep_temperature = Some((index, unit)),
            },
            ColumnRole::Total(component) => cols.totals.push((index, component)),
            ColumnRole::Metadata => cols.metadata.push((index, name.clone())),
        }
    }
    let missing = |column: &str| CsvError::MissingColumn {
        location: header.clone(),
        column: column.to_string(),
    };
    Ok(Columns {
        id: cols.id.ok_or_else(|| missing("sample_id (or id)"))?,
        series: cols.series.ok_or_else(|| missing("series"))?,
        temperature: cols
            .temperature
            .ok_or_else(|| missing("temperature (temperature_K or temperature_C)"))?,
        prep_temperature: cols.prep_temperature,
        path: cols.path.ok_or_else(|| missing("path_cm"))?,
        blank: cols.blank,
        totals: cols.totals,
        metadata: cols.metadata,
    })
}

/// Parses a samples table from text.
///
/// One row per sample. Required columns: `sample_id` (or `id`), `series`, exactly one of
/// `temperature_K` / `temperature_C` (the measurement temperature T; `temperature_k` and
/// `temperature_c` are accepted too), `path_cm` (path length b, cm) and one `<component>_M`
/// column per component (total concentration, mol/L, as prepared). Optional:
/// `prep_temperature_K` / `prep_temperature_C` (temperature at which the totals were made up;
/// default 25 °C, also when a cell is empty) and `blank` (true/false, yes/no, 1/0; empty means
/// false). Every other column is kept verbatim in [`Sample::metadata`] (empty cells are left
/// out). Delimiter, decimal mark, comments and blank lines as for
/// [`parse_spectra_table`](super::parse_spectra_table).
///
/// `source` is used only to name the file in errors.
///
/// # Errors
/// A [`CsvError`] naming the line and column: [`CsvError::MissingColumn`],
/// [`CsvError::MissingTemperatureUnit`] (a bare `temperature`/`T` column),
/// [`CsvError::BadHeader`], [`CsvError::DuplicateSampleId`], [`CsvError::MissingValue`],
/// [`CsvError::NonNumeric`], [`CsvError::NonFinite`], [`CsvError::DecimalComma`],
/// [`CsvError::ImpossibleValue`] (path ≤ 0, temperature ≤ 0 K, negative total),
/// [`CsvError::InvalidFlag`], [`CsvError::Ragged`], [`CsvError::DelimiterGuess`],
/// [`CsvError::Empty`], [`CsvError::Malformed`].
///
/// # Examples
/// ```
/// use isosbestic::data::csv_io::parse_samples_table;
/// let text = "sample_id,series,temperature_C,path_cm,metal_M,ligand_M,operator\n\
///             s1,low,25,1.0,0.01,0.002,ana\n\
///             s2,low,45,1.0,0.01,0.002,ana\n";
/// let t = parse_samples_table(text, None)?;
/// assert_eq!(t.components, vec!["metal", "ligand"]);
/// approx::assert_relative_eq!(t.samples[1].temperature_k, 318.15);
/// approx::assert_relative_eq!(t.samples[0].totals_m["ligand"], 0.002);
/// assert_eq!(t.samples[0].metadata["operator"], "ana");
/// assert_eq!(t.lines, vec![2, 3]);
/// # Ok::<(), isosbestic::data::csv_io::CsvError>(())
/// ```
pub fn parse_samples_table(text: &str, source: Option<&Path>) -> Result<SamplesTable, CsvError> {
    let raw = split_table(text, source)?;
    let header = at(source).at_line(raw.header.line);
    let cols = map_header(&raw.header.fields, &header)?;
    let n_fields = raw.header.fields.len();
    if raw.data.is_empty() {
        return Err(CsvError::Empty {
            location: header,
            what: "a header but no sample rows",
        });
    }

    let mut samples = Vec::with_capacity(raw.data.len());
    let mut lines = Vec::with_capacity(raw.data.len());
    let mut ids: HashMap<String, u64> = HashMap::new();
    for row in &raw.data {
        let here = at(source).at_line(row.line);
        if row.fields.len() != n_fields {
            return Err(CsvError::Ragged {
                location: here,
                expected: n_fields,
                found: row.fields.len(),
            });
        }
        let cell = |index: usize| row.fields.get(index).map_or("", String::as_str);
        let place = |index: usize| here.clone().at_column(column_number(index));
        let name = |index: usize| raw.header.fields.get(index).cloned().unwrap_or_default();
        let text_cell = |index: usize| -> Result<String, CsvError> {
            match cell(index) {
                "" => Err(CsvError::MissingValue {
                    location: place(index),
                    what: name(index),
                }),
                t => Ok(t.to_string()),
            }
        };
        let number = |index: usize| -> Result<Option<f64>, CsvError> {
            match parse_number(cell(index)) {
                Ok(v) => Ok(Some(v)),
                Err(super::dialect::CellProblem::Empty) => Ok(None),
                Err(p) => Err(cell_error(p, place(index), name(index), cell(index))),
            }
        };
        let required = |index: usize| -> Result<f64, CsvError> {
            number(index)?.ok_or_else(|| CsvError::MissingValue {
                location: place(index),
                what: name(index),
            })
        };
        let impossible = |index: usize, value: f64, requirement: &'static str| CsvError::ImpossibleValue {
            location: place(index),
            what: name(index),
            value,
            requirement,
        };

        let id = text_cell(cols.id)?;
        if let Some(&first) = ids.get(&id) {
            return Err(CsvError::DuplicateSampleId {
                location: place(cols.id),
                id,
                first_seen: format!("line {first}"),
            });
        }
        ids.insert(id.clone(), row.line);
        let series = text_cell(cols.series)?;

        let (t_index, t_unit) = cols.temperature;
        let stated = required(t_index)?;
        let temperature_k = t_unit.temperature(stated).kelvin();
        if temperature_k <= 0.0 {
            return Err(impossible(
                t_index,
                stated,
                "the temperature must be above absolute zero (0 K = -273.15 °C)",
            ));
        }

        let path_index = cols.path;
        let path_cm = required(path_index)?;
        if path_cm <= 0.0 {
            return Err(impossible(
                path_index,
                path_cm,
                "the path length must be positive (cm)",
            ));
        }

        let preparation_temperature_k = match cols.prep_temperature {
            None => DEFAULT_PREPARATION_K,
            Some((index, unit)) => match number(index)? {
                None => DEFAULT_PREPARATION_K,
                Some(stated) => {
                    let k = unit.temperature(stated).kelvin();
                    if k <= 0.0 {
                        return Err(impossible(
                            index,
                            stated,
                            "the preparation temperature must be above absolute zero (0 K = -273.15 °C)",
                        ));
                    }
                    k
                }
            },
        };

        let mut totals_m = BTreeMap::new();
        for (index, component) in &cols.totals {
            let total = required(*index)?;
            if total < 0.0 {
                return Err(impossible(
                    *index,
                    total,
                    "a total concentration cannot be negative",
                ));
            }
            totals_m.insert(component.clone(), total);
        }

        let role = match cols.blank {
            None => SampleRole::Measurement,
            Some(index) => match parse_flag(cell(index)) {
                Some(true) => SampleRole::Blank,
                Some(false) => SampleRole::Measurement,
                None => {
                    return Err(CsvError::InvalidFlag {
                        location: place(index),
                        what: name(index),
                        text: cell(index).to_string(),
                    });
                }
            },
        };

        let metadata = cols
            .metadata
            .iter()
            .filter(|(index, _)| !cell(*index).is_empty())
            .map(|(index, key)| (key.clone(), cell(*index).to_string()))
            .collect();

        samples.push(Sample {
            id,
            series,
            temperature_k,
            path_cm,
            totals_m,
            preparation_temperature_k,
            role,
            metadata,
        });
        lines.push(row.line);
    }
    Ok(SamplesTable {
        samples,
        components: cols.totals.into_iter().map(|(_, c)| c).collect(),
        lines,
    })
}

/// `true`/`false`, `yes`/`no`, `1`/`0` in any case; empty is `false`.
fn parse_flag(cell: &str) -> Option<bool> {
    match cell.to_ascii_lowercase().as_str() {
        "true" | "yes" | "1" => Some(true),
        "false" | "no" | "0" | "" => Some(false),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn headers_are_classified_with_case_sensitive_units() {
        assert_eq!(classify_column("ID"), Ok(ColumnRole::Id));
        assert_eq!(
            classify_column("temperature_k"),
            Ok(ColumnRole::Temperature(Unit::Kelvin))
        );
        assert_eq!(
            classify_column("prep_temperature_C"),
            Ok(ColumnRole::PrepTemperature(Unit::Celsius))
        );
        assert_eq!(classify_column("metal_M"), Ok(ColumnRole::Total("metal".into())));
        assert_eq!(classify_column("metal_m"), Ok(ColumnRole::Metadata));
        assert_eq!(classify_column("note"), Ok(ColumnRole::Metadata));
        assert!(matches!(classify_column("T"), Err(HeaderProblem::NoUnit { .. })));
        assert!(matches!(
            classify_column("TEMPERATURE_K"),
            Err(HeaderProblem::NoUnit { .. })
        ));
        assert_eq!(classify_column("_M"), Err(HeaderProblem::NoComponentName));
    }

    #[test]
    fn flags_accept_the_documented_spellings() {
        for t in ["true", "YES", "1"] {
            assert_eq!(parse_flag(t), Some(true));
        }
        for f in ["False", "no", "0", ""] {
            assert_eq!(parse_flag(f), Some(false));
        }
        assert_eq!(parse_flag("maybe"), None);
    }
}
