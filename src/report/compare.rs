//! Fitted against reference molar absorptivities: does a resolved pure spectrum ε(λ) agree with
//! a literature value at a stated wavelength, within the stated tolerance?
//!
//! ## The reference table
//! A CSV table with one reference absorptivity per row (columns in any order; the delimiter is
//! `,`, `;` or a tab, chosen from the header; `.` is the decimal mark; cells holding the
//! delimiter are double-quoted; blank lines and lines starting with `#` are skipped anywhere;
//! one row per line):
//!
//! | column | required | meaning |
//! |---|---|---|
//! | `species` | yes | the species as the source names it, e.g. `[Ni(H2O)6]2+` |
//! | `wavelength_nm` | yes | λ, nm |
//! | `epsilon_L_mol_cm` | yes | the reference ε at λ, L mol⁻¹ cm⁻¹ (> 0) |
//! | `tolerance` | yes | `20%` (relative to the reference ε) or `1.5` (absolute, L mol⁻¹ cm⁻¹) |
//! | `source` | yes | where the value comes from (publication, standard, "from memory") |
//! | `from_memory` | no | `true`/`false` (also yes/no, 1/0; empty = false): the value is recalled, not checked against its source |
//!
//! Any other column (e.g. `note`) is ignored.
//!
//! ```text
//! species,wavelength_nm,epsilon_L_mol_cm,tolerance,from_memory,source
//! [Ni(H2O)6]2+,395,5.2,20%,true,"from memory (common figure for the aqua ion)"
//! [Cu(NH3)4]2+,640,77,10%,false,"Prenesti, Daniele, Toso, Anal. Chim. Acta (2002)"
//! ```
//!
//! ## Species names
//! Reference tables name species chemically while models use short names. A [`SpeciesMap`]
//! maps a reference name to a model name (`[Ni(H2O)6]2+` → `Ni`); a reference name that is not
//! mapped is looked up as it is.
//!
//! ## The fitted value at λ
//! The fitted spectra come from a [`HardFit`] in memory ([`FittedSpectra::from_hard_fit`]) or
//! from the `pure_spectra.csv` of a fit output folder ([`FittedSpectra::read_pure_spectra`]).
//! With temperature-dependent spectra only the order-0 block is used: ε at the spectra's
//! reference temperature T_ε. When λ falls between grid points λⱼ < λ < λⱼ₊₁ the value is
//! interpolated linearly, with t = (λ − λⱼ)/(λⱼ₊₁ − λⱼ):
//!
//! ```text
//! ε(λ) = (1 − t)·εⱼ + t·εⱼ₊₁,        SE(λ) = (1 − t)·SEⱼ + t·SEⱼ₊₁
//! ```
//!
//! The SE is interpolated the same way, which is exact if the errors at neighbouring grid points
//! are fully correlated and an upper bound otherwise; treating them as independent would shrink
//! the SE between grid points (by √2 at the midpoint) for no physical reason.
//!
//! ## The verdict
//! With the absolute tolerance τ (the relative tolerance times the reference ε), the difference
//! Δ = ε_fit − ε_ref, and the tolerance taken as the reference's standard uncertainty:
//!
//! ```text
//! pass  ⇔  |Δ| ≤ τ,           Δ/σ = Δ / √(SE_fit² + τ²)
//! ```
//!
//! Pass/fail depends on the tolerance alone (as the table states it); Δ/σ says how the difference
//! compares with the combined uncertainty. Rows whose species is not fitted, or whose λ is
//! outside the fitted range, are reported as not comparable ([`Uncomparable::Skip`], the default)
//! or refused as errors naming the row ([`Uncomparable::Refuse`]).
//!
//! # Examples
//! ```
//! use isosbestic::report::compare::{
//!     CompareParams, FittedSpectra, SpeciesMap, Verdict, compare, parse_reference_table,
//! };
//! let table = parse_reference_table(
//!     "species,wavelength_nm,epsilon_L_mol_cm,tolerance,source\n\
//!      aqua ion,395,5.2,20%,from memory\n",
//!     None,
//! )?;
//! let fitted = FittedSpectra::new(
//!     vec![394.0, 396.0],
//!     vec!["M".into()],
//!     ndarray::array![[5.0], [5.4]],
//!     ndarray::array![[0.1], [0.3]],
//! )?;
//! let params = CompareParams::default().map(SpeciesMap::new().with("aqua ion", "M")?);
//! let c = compare(&table, &fitted, &params)?;
//! let row = &c.rows[0];
//! approx::assert_relative_eq!(row.fitted_epsilon.unwrap(), 5.2); // midway: (5.0 + 5.4) / 2
//! approx::assert_relative_eq!(row.fitted_se.unwrap(), 0.2); // (0.1 + 0.3) / 2
//! assert_eq!(row.verdict, Verdict::Pass);
//! assert_eq!((c.passed, c.failed, c.not_comparable), (1, 0, 0));
//! # Ok::<(), isosbestic::report::compare::CompareError>(())
//! ```

use crate::data::Location;
use crate::data::csv_io::CsvError;
use crate::report::fit::{FitReport, InputFile, checksum, guard_outputs};
use crate::report::tables::{Table, format_float, write_json};
use crate::resolve::hard::HardFit;
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt;
use std::path::{Path, PathBuf};
use thiserror::Error;

/// Header of the species column of a reference table.
pub const SPECIES_COLUMN: &str = "species";
/// Header of the wavelength column of a reference table.
pub const WAVELENGTH_COLUMN: &str = "wavelength_nm";
/// Header of the reference ε column (L mol⁻¹ cm⁻¹).
pub const EPSILON_COLUMN: &str = "epsilon_L_mol_cm";
/// Header of the tolerance column (`20%` or an absolute value in L mol⁻¹ cm⁻¹).
pub const TOLERANCE_COLUMN: &str = "tolerance";
/// Header of the source column.
pub const SOURCE_COLUMN: &str = "source";
/// Header of the optional from-memory flag column.
pub const FROM_MEMORY_COLUMN: &str = "from_memory";

/// Names of the files [`write_comparison_outputs`] writes.
pub const COMPARE_OUTPUTS: [&str; 2] = ["comparison.csv", "comparison.json"];

/// Two wavelengths closer than this (nm) are the same grid point.
const GRID_SLACK_NM: f64 = 1e-9;

/// Why a comparison could not be made: a bad reference table, bad fitted spectra, or a species
/// map that does not match them. Variants about a place in a file carry its [`Location`].
///
/// # Examples
/// ```
/// use isosbestic::report::compare::{CompareError, parse_reference_table};
/// let e = parse_reference_table(
///     "species,wavelength_nm,epsilon_L_mol_cm,tolerance,source\nNi,395,5.2,twenty,memory\n",
///     None,
/// )
/// .unwrap_err();
/// assert!(matches!(e, CompareError::BadTolerance { .. }));
/// assert_eq!(e.location().and_then(|l| l.column), Some(4));
/// ```
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum CompareError {
    /// The reference table or the pure-spectra table is not a readable table (structure, a
    /// missing column, a cell that is not a number, …).
    #[error(transparent)]
    Table(#[from] CsvError),
    /// A tolerance cell is neither a percentage nor a positive number.
    #[error(
        "{location}: tolerance '{text}' {problem}; write a relative tolerance as e.g. '20%' or an \
         absolute one in L mol⁻¹ cm⁻¹ as e.g. '1.5'"
    )]
    BadTolerance {
        /// File, line and column of the cell.
        location: Location,
        /// The cell text.
        text: String,
        /// What is wrong.
        problem: &'static str,
    },
    /// A reference row names a species with no fitted spectrum (with [`Uncomparable::Refuse`]).
    #[error(
        "{location}: species '{species}'{mapped} has no fitted spectrum (fitted: {fitted}); map it \
         with --map '{species}=<model species>' or remove the row",
        mapped = if .species == .model_species { String::new() } else { format!(" (mapped to '{}')", .model_species) },
        fitted = .fitted.join(", ")
    )]
    SpeciesNotFitted {
        /// Reference file and line of the row.
        location: Location,
        /// The species as the reference names it.
        species: String,
        /// The name looked up among the fitted spectra.
        model_species: String,
        /// The fitted species.
        fitted: Box<[String]>,
    },
    /// A reference wavelength is outside the fitted range (with [`Uncomparable::Refuse`]).
    #[error("{location}: {wavelength_nm} nm ({species}) is outside the fitted range {min_nm}–{max_nm} nm")]
    OutsideFittedRange {
        /// Reference file, line and wavelength column of the row.
        location: Location,
        /// The species as the reference names it.
        species: String,
        /// The reference wavelength, nm.
        wavelength_nm: f64,
        /// Shortest fitted wavelength, nm.
        min_nm: f64,
        /// Longest fitted wavelength, nm.
        max_nm: f64,
    },
    /// A species-map entry is not of the form `REFERENCE=MODEL`.
    #[error("species map entry '{entry}' is not of the form REFERENCE=MODEL (e.g. '[Ni(H2O)6]2+=Ni')")]
    BadMapEntry {
        /// The entry as given.
        entry: String,
    },
    /// The same reference species is mapped twice.
    #[error("species map: '{species}' is mapped twice (to '{first}' and to '{second}')")]
    DuplicateMap {
        /// The reference species.
        species: String,
        /// The first target.
        first: String,
        /// The second target.
        second: String,
    },
    /// A species-map target names no fitted spectrum.
    #[error(
        "species map: '{species}' is mapped to '{model_species}', but no fitted spectrum has that \
         name (fitted: {fitted})",
        fitted = .fitted.join(", ")
    )]
    MapTargetNotFitted {
        /// The reference species.
        species: String,
        /// The target named in the map.
        model_species: String,
        /// The fitted species.
        fitted: Box<[String]>,
    },
    /// A species-map source names no row of the reference table.
    #[error("species map: no row of {reference} names species '{species}'")]
    MapSourceUnused {
        /// The reference table.
        reference: Location,
        /// The reference species named in the map.
        species: String,
    },
    /// A pure-spectra table has no `eps_<species>` column.
    #[error(
        "{location}: no eps_<species> column; expected the pure_spectra.csv written by \
         `isosbestic fit` (wavelength_nm, eps_<species>, se_<species>, …)"
    )]
    NoSpectra {
        /// File and header line.
        location: Location,
    },
    /// A pure-spectra table has an `eps_<species>` column without its `se_<species>`.
    #[error("{location}: column eps_{species} has no se_{species} column beside it")]
    MissingStandardError {
        /// File, header line and column of the ε column.
        location: Location,
        /// The species.
        species: String,
    },
    /// Fitted spectra given in memory are inconsistent (shapes, wavelengths).
    #[error("the fitted spectra are inconsistent: {detail}")]
    InconsistentSpectra {
        /// What is wrong.
        detail: String,
    },
    /// No row of the reference table could be compared.
    #[error(
        "nothing to compare: no row of {reference} names a fitted species ({fitted}) inside the \
         fitted range; map the table's names with --map REFERENCE=MODEL",
        fitted = .fitted.join(", ")
    )]
    NothingComparable {
        /// The reference table.
        reference: Location,
        /// The fitted species.
        fitted: Box<[String]>,
    },
}

impl CompareError {
    /// Where in which file the problem is, when it concerns one place.
    pub fn location(&self) -> Option<&Location> {
        match self {
            Self::Table(e) => e.location(),
            Self::BadTolerance { location, .. }
            | Self::SpeciesNotFitted { location, .. }
            | Self::OutsideFittedRange { location, .. }
            | Self::NoSpectra { location }
            | Self::MissingStandardError { location, .. } => Some(location),
            Self::MapSourceUnused { reference, .. } | Self::NothingComparable { reference, .. } => {
                Some(reference)
            }
            Self::BadMapEntry { .. }
            | Self::DuplicateMap { .. }
            | Self::MapTargetNotFitted { .. }
            | Self::InconsistentSpectra { .. } => None,
        }
    }
}

/// The tolerance of a reference value: how far a fitted ε may lie from it and still agree.
///
/// # Examples
/// ```
/// use isosbestic::report::compare::Tolerance;
/// let rel = Tolerance::parse("20 %").unwrap();
/// assert_eq!(rel, Tolerance::Relative(0.2));
/// approx::assert_relative_eq!(rel.absolute_for(5.2), 1.04);
/// assert_eq!(rel.to_string(), "20%");
/// let abs = Tolerance::parse("1.5").unwrap();
/// approx::assert_relative_eq!(abs.absolute_for(77.0), 1.5);
/// assert!(Tolerance::parse("-3%").is_err());
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind", content = "value")]
pub enum Tolerance {
    /// A fraction of the reference ε (written `20%` → 0.2).
    Relative(f64),
    /// An absolute width, L mol⁻¹ cm⁻¹.
    Absolute(f64),
}

impl Tolerance {
    /// Parses `20%` (relative; spaces allowed before `%`) or `1.5` (absolute, L mol⁻¹ cm⁻¹).
    ///
    /// # Errors
    /// What is wrong, in words: not a number, not finite, not positive.
    pub fn parse(text: &str) -> Result<Self, &'static str> {
        let text = text.trim();
        let (number, relative) = match text.strip_suffix('%') {
            Some(n) => (n.trim_end(), true),
            None => (text, false),
        };
        if number.is_empty() {
            return Err("is empty");
        }
        let value: f64 = number.parse().map_err(|_| "is not a number or a percentage")?;
        if !value.is_finite() {
            return Err("is not finite");
        }
        if value <= 0.0 {
            return Err("must be positive");
        }
        Ok(if relative {
            Self::Relative(value / 100.0)
        } else {
            Self::Absolute(value)
        })
    }

    /// The tolerance in L mol⁻¹ cm⁻¹ for a reference value ε_ref: τ = fraction·|ε_ref| or the
    /// absolute width.
    pub fn absolute_for(self, reference_epsilon: f64) -> f64 {
        match self {
            Self::Relative(f) => f * reference_epsilon.abs(),
            Self::Absolute(a) => a,
        }
    }
}

impl fmt::Display for Tolerance {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Relative(x) => write!(f, "{}%", format_float(x * 100.0)),
            Self::Absolute(a) => write!(f, "{}", format_float(*a)),
        }
    }
}

/// One reference absorptivity: ε of a species at one wavelength, with tolerance and source.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReferenceRow {
    /// The species as the source names it.
    pub species: String,
    /// λ, nm.
    pub wavelength_nm: f64,
    /// Reference ε at λ, L mol⁻¹ cm⁻¹.
    pub epsilon_l_mol_cm: f64,
    /// How far a fitted value may lie from it and still agree.
    pub tolerance: Tolerance,
    /// Where the value comes from.
    pub source: String,
    /// The value is recalled, not checked against its source: judge it with care.
    pub from_memory: bool,
}

/// A reference table: rows in file order with their source lines.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReferenceTable {
    /// The rows.
    pub rows: Vec<ReferenceRow>,
    /// 1-based source line of each row.
    pub lines: Vec<u64>,
    /// The file the table was read from, if any.
    pub file: Option<PathBuf>,
}

impl ReferenceTable {
    /// Where row `index` sits in the source.
    fn location_of(&self, index: usize) -> Location {
        let mut at = self.location();
        if let Some(&line) = self.lines.get(index) {
            at = at.at_line(line);
        }
        at
    }

    /// The table's file as a location.
    fn location(&self) -> Location {
        Location {
            file: self.file.clone(),
            line: None,
            column: None,
        }
    }
}

/// One non-blank, non-comment line of a table split into trimmed cells.
struct Line {
    number: u64,
    cells: Vec<String>,
}

fn at(source: Option<&Path>) -> Location {
    Location {
        file: source.map(Path::to_path_buf),
        line: None,
        column: None,
    }
}

fn column_number(index: usize) -> u64 {
    u64::try_from(index).map_or(u64::MAX, |i| i.saturating_add(1))
}

/// Splits a table into lines of cells: UTF-8 BOM dropped, blank and `#` lines skipped, the
/// delimiter (`,` `;` tab) chosen as the one occurring most often in the header (`,` on a tie).
fn split_lines(text: &str, source: Option<&Path>) -> Result<Vec<Line>, CsvError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut delimiter = None;
    let mut out = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let number = column_number(i);
        let trimmed = raw.trim();
        if trimmed.is_empty() || trimmed.starts_with('#') {
            continue;
        }
        let d = *delimiter.get_or_insert_with(|| {
            [b',', b';', b'\t']
                .into_iter()
                .rev()
                .max_by_key(|&d| trimmed.bytes().filter(|&b| b == d).count())
                .unwrap_or(b',')
        });
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(csv::Trim::All)
            .delimiter(d)
            .from_reader(raw.as_bytes());
        let mut record = csv::StringRecord::new();
        match reader.read_record(&mut record) {
            Ok(_) if record.iter().all(str::is_empty) => {}
            Ok(_) => out.push(Line {
                number,
                cells: record.iter().map(str::to_string).collect(),
            }),
            Err(e) => {
                return Err(CsvError::Malformed {
                    location: at(source).at_line(number),
                    detail: e.to_string(),
                });
            }
        }
    }
    match out.first() {
        None => Err(CsvError::Empty {
            location: at(source),
            what: "no header line (only blank or # comment lines)",
        }),
        Some(header) if header.cells.len() < 2 => Err(CsvError::DelimiterGuess {
            location: at(source).at_line(header.number),
            header: header.cells.join("").chars().take(60).collect(),
        }),
        Some(_) => Ok(out),
    }
}

/// Parses a numeric cell with `.` as the decimal mark (same rules as [`crate::data::csv_io`]).
fn parse_number(cell: &str, location: Location, what: &str) -> Result<f64, CsvError> {
    if cell.is_empty() {
        return Err(CsvError::MissingValue {
            location,
            what: what.to_string(),
        });
    }
    match cell.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(CsvError::NonFinite {
            location,
            what: what.to_string(),
            text: cell.to_string(),
        }),
        Err(_) if looks_like_decimal_comma(cell) => Err(CsvError::DecimalComma {
            location,
            cell: cell.to_string(),
        }),
        Err(_) => Err(CsvError::NonNumeric {
            location,
            what: what.to_string(),
            text: cell.to_string(),
        }),
    }
}

/// `[+-]digits,digits`: a number written with a decimal comma.
fn looks_like_decimal_comma(cell: &str) -> bool {
    let unsigned = cell.strip_prefix(['+', '-']).unwrap_or(cell);
    unsigned.split_once(',').is_some_and(|(a, b)| {
        let digits = |s: &str| !s.is_empty() && s.bytes().all(|c| c.is_ascii_digit());
        digits(a) && digits(b.split_once(['e', 'E']).map_or(b, |(m, _)| m))
    })
}

/// Parses a yes/no cell (empty = false).
fn parse_flag(cell: &str, location: Location, what: &str) -> Result<bool, CsvError> {
    match cell.to_ascii_lowercase().as_str() {
        "" | "false" | "no" | "0" | "n" => Ok(false),
        "true" | "yes" | "1" | "y" => Ok(true),
        _ => Err(CsvError::InvalidFlag {
            location,
            what: what.to_string(),
            text: cell.to_string(),
        }),
    }
}

/// Parses a reference table (see the [module docs](self) for the format).
///
/// `source` only names the file in errors and in the result.
///
/// # Errors
/// [`CompareError::Table`] with a located [`CsvError`]: a missing required column
/// ([`CsvError::MissingColumn`]), a repeated column ([`CsvError::BadHeader`]), a row with more or
/// fewer cells than the header ([`CsvError::Ragged`]), a cell that is not a number, empty, or
/// written with a decimal comma, a non-positive wavelength or ε ([`CsvError::ImpossibleValue`]),
/// an invalid from_memory flag, no rows ([`CsvError::Empty`]); [`CompareError::BadTolerance`].
///
/// # Examples
/// ```
/// use isosbestic::report::compare::{Tolerance, parse_reference_table};
/// let t = parse_reference_table(
///     "# literature values\n\
///      species;wavelength_nm;epsilon_L_mol_cm;tolerance;from_memory;source\n\
///      MnO4-;525;2400;20%;yes;from memory\n",
///     None,
/// )?;
/// assert_eq!(t.lines, vec![3]);
/// assert!(t.rows[0].from_memory);
/// assert_eq!(t.rows[0].tolerance, Tolerance::Relative(0.2));
/// # Ok::<(), isosbestic::report::compare::CompareError>(())
/// ```
pub fn parse_reference_table(text: &str, source: Option<&Path>) -> Result<ReferenceTable, CompareError> {
    let lines = split_lines(text, source)?;
    let Some((header, data)) = lines.split_first() else {
        return Err(CsvError::Empty {
            location: at(source),
            what: "no header line",
        }
        .into());
    };
    let header_at = |col: usize| at(source).at_line(header.number).at_column(column_number(col));
    let find = |name: &str| -> Result<Option<usize>, CsvError> {
        let mut hits = header
            .cells
            .iter()
            .enumerate()
            .filter(|(_, h)| h.eq_ignore_ascii_case(name))
            .map(|(i, _)| i);
        let first = hits.next();
        if let Some(second) = hits.next() {
            return Err(CsvError::BadHeader {
                location: header_at(second),
                name: name.to_string(),
                problem: "appears twice".into(),
            });
        }
        Ok(first)
    };
    let require = |name: &str| -> Result<usize, CsvError> {
        find(name)?.ok_or_else(|| CsvError::MissingColumn {
            location: at(source).at_line(header.number),
            column: name.to_string(),
        })
    };
    let species_col = require(SPECIES_COLUMN)?;
    let wavelength_col = require(WAVELENGTH_COLUMN)?;
    let epsilon_col = require(EPSILON_COLUMN)?;
    let tolerance_col = require(TOLERANCE_COLUMN)?;
    let source_col = require(SOURCE_COLUMN)?;
    let memory_col = find(FROM_MEMORY_COLUMN)?;
    let width = header.cells.len();
    let mut rows = Vec::with_capacity(data.len());
    let mut numbers = Vec::with_capacity(data.len());
    for line in data {
        if line.cells.len() != width {
            return Err(CsvError::Ragged {
                location: at(source).at_line(line.number),
                expected: width,
                found: line.cells.len(),
            }
            .into());
        }
        let here = |col: usize| at(source).at_line(line.number).at_column(column_number(col));
        let cell = |col: usize| line.cells.get(col).map_or("", String::as_str);
        let text = |col: usize, what: &str| -> Result<String, CsvError> {
            let c = cell(col);
            if c.is_empty() {
                return Err(CsvError::MissingValue {
                    location: here(col),
                    what: what.to_string(),
                });
            }
            Ok(c.to_string())
        };
        let positive = |col: usize, what: &str, requirement: &'static str| -> Result<f64, CsvError> {
            let v = parse_number(cell(col), here(col), what)?;
            if v <= 0.0 {
                return Err(CsvError::ImpossibleValue {
                    location: here(col),
                    what: what.to_string(),
                    value: v,
                    requirement,
                });
            }
            Ok(v)
        };
        let species = text(species_col, "species")?;
        let wavelength_nm = positive(wavelength_col, "wavelength", "wavelengths must be positive (nm)")?;
        let epsilon = positive(
            epsilon_col,
            "reference ε",
            "a reference molar absorptivity must be positive (L mol⁻¹ cm⁻¹)",
        )?;
        let tolerance =
            Tolerance::parse(cell(tolerance_col)).map_err(|problem| CompareError::BadTolerance {
                location: here(tolerance_col),
                text: cell(tolerance_col).to_string(),
                problem,
            })?;
        let source_text = text(source_col, "source")?;
        let from_memory = match memory_col {
            Some(c) => parse_flag(cell(c), here(c), FROM_MEMORY_COLUMN)?,
            None => false,
        };
        rows.push(ReferenceRow {
            species,
            wavelength_nm,
            epsilon_l_mol_cm: epsilon,
            tolerance,
            source: source_text,
            from_memory,
        });
        numbers.push(line.number);
    }
    if rows.is_empty() {
        return Err(CsvError::Empty {
            location: at(source).at_line(header.number),
            what: "a header but no reference rows",
        }
        .into());
    }
    Ok(ReferenceTable {
        rows,
        lines: numbers,
        file: source.map(Path::to_path_buf),
    })
}

/// Reads a reference table from a file; see [`parse_reference_table`].
///
/// # Errors
/// [`CsvError::Unreadable`] or [`CsvError::NotUtf8`] naming the file, or as
/// [`parse_reference_table`].
pub fn read_reference_table(path: &Path) -> Result<ReferenceTable, CompareError> {
    parse_reference_table(&read_text(path)?, Some(path))
}

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

/// Fitted pure spectra ε(λ) with standard errors: the S matrix of a fit (order-0 block),
/// wavelengths increasing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FittedSpectra {
    /// Wavelengths, nm, strictly increasing.
    pub wavelengths_nm: Vec<f64>,
    /// Species names (columns).
    pub species: Vec<String>,
    /// ε, L mol⁻¹ cm⁻¹, wavelengths × species.
    pub epsilon: Array2<f64>,
    /// Standard errors of ε (conditional on the fitted θ), same shape; NaN where unknown.
    pub standard_errors: Array2<f64>,
    /// The file the spectra were read from, if any.
    pub file: Option<PathBuf>,
}

/// A fitted ε at one wavelength.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FittedValue {
    /// ε, L mol⁻¹ cm⁻¹.
    pub epsilon: f64,
    /// Its standard error.
    pub standard_error: f64,
}

/// Why a fitted value cannot be had at a wavelength.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
#[non_exhaustive]
pub enum NotComparable {
    /// No fitted spectrum has this name.
    SpeciesNotFitted {
        /// The name looked up.
        model_species: String,
    },
    /// The wavelength is outside the fitted range.
    OutsideFittedRange {
        /// Shortest fitted wavelength, nm.
        min_nm: f64,
        /// Longest fitted wavelength, nm.
        max_nm: f64,
    },
}

impl fmt::Display for NotComparable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::SpeciesNotFitted { model_species } => {
                write!(f, "no fitted spectrum named '{model_species}'")
            }
            Self::OutsideFittedRange { min_nm, max_nm } => {
                write!(f, "outside the fitted range {min_nm}–{max_nm} nm")
            }
        }
    }
}

impl FittedSpectra {
    /// Fitted spectra from their parts; rows may come in any wavelength order and are sorted.
    ///
    /// # Errors
    /// [`CompareError::InconsistentSpectra`] if the shapes disagree, a wavelength is not finite
    /// and positive, or a wavelength repeats.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::compare::FittedSpectra;
    /// let s = FittedSpectra::new(
    ///     vec![500.0, 400.0],
    ///     vec!["M".into()],
    ///     ndarray::array![[2.0], [1.0]],
    ///     ndarray::array![[0.1], [0.1]],
    /// )?;
    /// assert_eq!(s.wavelengths_nm, vec![400.0, 500.0]);
    /// approx::assert_relative_eq!(s.at("M", 450.0).unwrap().epsilon, 1.5);
    /// # Ok::<(), isosbestic::report::compare::CompareError>(())
    /// ```
    pub fn new(
        wavelengths_nm: Vec<f64>,
        species: Vec<String>,
        epsilon: Array2<f64>,
        standard_errors: Array2<f64>,
    ) -> Result<Self, CompareError> {
        let bad = |detail: String| CompareError::InconsistentSpectra { detail };
        let shape = (wavelengths_nm.len(), species.len());
        if epsilon.dim() != shape || standard_errors.dim() != shape {
            return Err(bad(format!(
                "{} wavelengths × {} species, but ε is {:?} and the standard errors {:?}",
                shape.0,
                shape.1,
                epsilon.dim(),
                standard_errors.dim()
            )));
        }
        if shape.0 == 0 || shape.1 == 0 {
            return Err(bad("no wavelengths or no species".into()));
        }
        if let Some(w) = wavelengths_nm.iter().find(|w| !(w.is_finite() && **w > 0.0)) {
            return Err(bad(format!("wavelength {w} nm is not a positive number")));
        }
        let mut order: Vec<usize> = (0..shape.0).collect();
        order.sort_by(|&a, &b| wavelengths_nm[a].total_cmp(&wavelengths_nm[b]));
        let sorted: Vec<f64> = order.iter().map(|&i| wavelengths_nm[i]).collect();
        if let Some(pair) = sorted.windows(2).find(|p| p[1] - p[0] <= GRID_SLACK_NM) {
            return Err(bad(format!("wavelength {} nm appears twice", pair[0])));
        }
        Ok(Self {
            wavelengths_nm: sorted,
            species,
            epsilon: epsilon.select(ndarray::Axis(0), &order),
            standard_errors: standard_errors.select(ndarray::Axis(0), &order),
            file: None,
        })
    }

    /// The order-0 pure spectra of a global fit (ε at T_ε for temperature-dependent spectra).
    ///
    /// `wavelengths_nm` is the wavelength axis of the data the fit was made on
    /// ([`FitReport::wavelengths_nm`]).
    ///
    /// # Errors
    /// [`CompareError::InconsistentSpectra`] if the fit's shapes disagree with the axis.
    pub fn from_hard_fit(fit: &HardFit, wavelengths_nm: &[f64]) -> Result<Self, CompareError> {
        let n = fit.absorbing_species.len();
        if fit.spectra.ncols() < n || fit.spectra_standard_errors.ncols() < n {
            return Err(CompareError::InconsistentSpectra {
                detail: format!(
                    "{} absorbing species but {} spectra columns",
                    n,
                    fit.spectra.ncols()
                ),
            });
        }
        let cols = ndarray::s![.., ..n];
        Self::new(
            wavelengths_nm.to_vec(),
            fit.absorbing_species.clone(),
            fit.spectra.slice(cols).to_owned(),
            fit.spectra_standard_errors.slice(cols).to_owned(),
        )
    }

    /// The pure spectra of a fit report; see [`FittedSpectra::from_hard_fit`].
    ///
    /// # Errors
    /// As [`FittedSpectra::from_hard_fit`].
    pub fn from_report(report: &FitReport) -> Result<Self, CompareError> {
        Self::from_hard_fit(&report.fit, &report.wavelengths_nm)
    }

    /// Parses a `pure_spectra.csv` as written by [`crate::report::fit::write_fit_outputs`]:
    /// `wavelength_nm` first, then `eps_<species>`, `se_<species>` pairs. Columns of
    /// temperature-dependent terms (`eps_<species>_dT`, `eps_<species>_dT2` where `<species>`
    /// also has an order-0 column) and unknown columns are ignored. Standard errors may be `NaN`
    /// (unknown); ε must be finite.
    ///
    /// # Errors
    /// [`CompareError::Table`] (located: structure, cells, repeated wavelength),
    /// [`CompareError::NoSpectra`], [`CompareError::MissingStandardError`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::compare::FittedSpectra;
    /// let s = FittedSpectra::parse_pure_spectra(
    ///     "wavelength_nm,eps_M,se_M,eps_M_dT,se_M_dT\n400,1,0.1,0.01,0.001\n402,2,NaN,0.01,0.001\n",
    ///     None,
    /// )?;
    /// assert_eq!(s.species, vec!["M"]);
    /// assert!(s.standard_errors[[1, 0]].is_nan());
    /// # Ok::<(), isosbestic::report::compare::CompareError>(())
    /// ```
    pub fn parse_pure_spectra(text: &str, source: Option<&Path>) -> Result<Self, CompareError> {
        let lines = split_lines(text, source)?;
        let Some((header, data)) = lines.split_first() else {
            return Err(CsvError::Empty {
                location: at(source),
                what: "no header line",
            }
            .into());
        };
        let header_at = |col: usize| at(source).at_line(header.number).at_column(column_number(col));
        let eps: Vec<(usize, &str)> = header
            .cells
            .iter()
            .enumerate()
            .skip(1)
            .filter_map(|(i, h)| h.strip_prefix("eps_").map(|s| (i, s)))
            .collect();
        let names: Vec<&str> = eps.iter().map(|(_, s)| *s).collect();
        let is_higher_order = |s: &str| {
            ["_dT", "_dT2"]
                .iter()
                .any(|suffix| s.strip_suffix(suffix).is_some_and(|stem| names.contains(&stem)))
        };
        let mut columns = Vec::new();
        for &(col, name) in &eps {
            if is_higher_order(name) {
                continue;
            }
            let se = format!("se_{name}");
            let se_col = header.cells.iter().position(|h| *h == se).ok_or_else(|| {
                CompareError::MissingStandardError {
                    location: header_at(col),
                    species: name.to_string(),
                }
            })?;
            columns.push((name.to_string(), col, se_col));
        }
        if columns.is_empty() {
            return Err(CompareError::NoSpectra {
                location: at(source).at_line(header.number),
            });
        }
        let width = header.cells.len();
        let mut wavelengths = Vec::with_capacity(data.len());
        let mut first_line: Vec<u64> = Vec::with_capacity(data.len());
        let mut epsilon = Array2::zeros((data.len(), columns.len()));
        let mut errors = Array2::zeros((data.len(), columns.len()));
        for (r, line) in data.iter().enumerate() {
            if line.cells.len() != width {
                return Err(CsvError::Ragged {
                    location: at(source).at_line(line.number),
                    expected: width,
                    found: line.cells.len(),
                }
                .into());
            }
            let here = |col: usize| at(source).at_line(line.number).at_column(column_number(col));
            let cell = |col: usize| line.cells.get(col).map_or("", String::as_str);
            let w = parse_number(cell(0), here(0), "wavelength")?;
            if w <= 0.0 {
                return Err(CsvError::ImpossibleValue {
                    location: here(0),
                    what: "wavelength".into(),
                    value: w,
                    requirement: "wavelengths must be positive (nm)",
                }
                .into());
            }
            if let Some(k) = wavelengths
                .iter()
                .position(|&x: &f64| (x - w).abs() <= GRID_SLACK_NM)
            {
                return Err(CsvError::DuplicateWavelength {
                    location: here(0),
                    wavelength_nm: w,
                    first_line: first_line.get(k).copied().unwrap_or(0),
                }
                .into());
            }
            for (c, (name, eps_col, se_col)) in columns.iter().enumerate() {
                epsilon[[r, c]] = parse_number(cell(*eps_col), here(*eps_col), &format!("ε of {name}"))?;
                let se_text = cell(*se_col);
                errors[[r, c]] = if se_text.eq_ignore_ascii_case("nan") {
                    f64::NAN
                } else {
                    parse_number(se_text, here(*se_col), &format!("standard error of {name}"))?
                };
            }
            wavelengths.push(w);
            first_line.push(line.number);
        }
        if wavelengths.is_empty() {
            return Err(CsvError::Empty {
                location: at(source).at_line(header.number),
                what: "a header but no wavelength rows",
            }
            .into());
        }
        let species = columns.into_iter().map(|(n, _, _)| n).collect();
        let mut out = Self::new(wavelengths, species, epsilon, errors)?;
        out.file = source.map(Path::to_path_buf);
        Ok(out)
    }

    /// Reads a `pure_spectra.csv` file; see [`FittedSpectra::parse_pure_spectra`].
    ///
    /// # Errors
    /// [`CsvError::Unreadable`] or [`CsvError::NotUtf8`] naming the file, or as
    /// [`FittedSpectra::parse_pure_spectra`].
    pub fn read_pure_spectra(path: &Path) -> Result<Self, CompareError> {
        Self::parse_pure_spectra(&read_text(path)?, Some(path))
    }

    /// Column of a species.
    pub fn species_index(&self, species: &str) -> Option<usize> {
        self.species.iter().position(|s| s == species)
    }

    /// ε and its SE of `species` at `wavelength_nm`, linearly interpolated between grid points
    /// (see the [module docs](self) for the SE).
    ///
    /// # Errors
    /// [`NotComparable`] if no spectrum has that name or λ is outside the fitted range.
    pub fn at(&self, species: &str, wavelength_nm: f64) -> Result<FittedValue, NotComparable> {
        let col = self
            .species_index(species)
            .ok_or_else(|| NotComparable::SpeciesNotFitted {
                model_species: species.to_string(),
            })?;
        let w = &self.wavelengths_nm;
        let (min_nm, max_nm) = (
            w.first().copied().unwrap_or(f64::NAN),
            w.last().copied().unwrap_or(f64::NAN),
        );
        let outside = NotComparable::OutsideFittedRange { min_nm, max_nm };
        if !(wavelength_nm >= min_nm - GRID_SLACK_NM && wavelength_nm <= max_nm + GRID_SLACK_NM) {
            return Err(outside);
        }
        let value = |j: usize| Some((*self.epsilon.get([j, col])?, *self.standard_errors.get([j, col])?));
        // first grid point at or beyond λ
        let upper = w.partition_point(|&x| x < wavelength_nm - GRID_SLACK_NM);
        let (e1, s1) = value(upper).ok_or(outside.clone())?;
        let w1 = w.get(upper).copied().ok_or(outside.clone())?;
        if (w1 - wavelength_nm).abs() <= GRID_SLACK_NM || upper == 0 {
            return Ok(FittedValue {
                epsilon: e1,
                standard_error: s1,
            });
        }
        let (e0, s0) = value(upper - 1).ok_or(outside.clone())?;
        let w0 = w.get(upper - 1).copied().ok_or(outside)?;
        let t = (wavelength_nm - w0) / (w1 - w0);
        Ok(FittedValue {
            epsilon: (1.0 - t) * e0 + t * e1,
            standard_error: (1.0 - t) * s0 + t * s1,
        })
    }
}

/// Maps reference species names to model species names (`[Ni(H2O)6]2+` → `Ni`).
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct SpeciesMap {
    entries: BTreeMap<String, String>,
}

impl SpeciesMap {
    /// An empty map: every reference name is looked up as it is.
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds `reference` → `model`.
    ///
    /// # Errors
    /// [`CompareError::DuplicateMap`] if `reference` is mapped already.
    pub fn with(
        mut self,
        reference: impl Into<String>,
        model: impl Into<String>,
    ) -> Result<Self, CompareError> {
        let (reference, model) = (reference.into(), model.into());
        if let Some(first) = self.entries.get(&reference) {
            return Err(CompareError::DuplicateMap {
                species: reference,
                first: first.clone(),
                second: model,
            });
        }
        self.entries.insert(reference, model);
        Ok(self)
    }

    /// Adds an entry written `REFERENCE=MODEL` (split at the last `=`; both sides trimmed and
    /// non-empty).
    ///
    /// # Errors
    /// [`CompareError::BadMapEntry`], [`CompareError::DuplicateMap`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::compare::SpeciesMap;
    /// let m = SpeciesMap::new().with_entry("[Ni(H2O)6]2+ = Ni")?;
    /// assert_eq!(m.model_name("[Ni(H2O)6]2+"), "Ni");
    /// assert_eq!(m.model_name("NiBr"), "NiBr"); // unmapped names stay as they are
    /// assert!(SpeciesMap::new().with_entry("Ni").is_err());
    /// # Ok::<(), isosbestic::report::compare::CompareError>(())
    /// ```
    pub fn with_entry(self, entry: &str) -> Result<Self, CompareError> {
        match entry.rsplit_once('=') {
            Some((r, m)) if !r.trim().is_empty() && !m.trim().is_empty() => self.with(r.trim(), m.trim()),
            _ => Err(CompareError::BadMapEntry {
                entry: entry.to_string(),
            }),
        }
    }

    /// The model name a reference name is compared as.
    pub fn model_name<'a>(&'a self, reference: &'a str) -> &'a str {
        self.entries.get(reference).map_or(reference, String::as_str)
    }

    /// The entries, reference → model.
    pub fn entries(&self) -> &BTreeMap<String, String> {
        &self.entries
    }
}

/// What to do with a reference row that cannot be compared (species not fitted, λ outside the
/// fitted range).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Uncomparable {
    /// Report it as not comparable and go on (a shipped table lists many species).
    #[default]
    Skip,
    /// Refuse it: an error naming the row.
    Refuse,
}

/// Settings of a comparison.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct CompareParams {
    /// Reference name → model name.
    pub map: SpeciesMap,
    /// What to do with rows that cannot be compared.
    pub uncomparable: Uncomparable,
}

impl CompareParams {
    /// Sets the species map.
    #[must_use]
    pub fn map(mut self, map: SpeciesMap) -> Self {
        self.map = map;
        self
    }

    /// Sets what to do with rows that cannot be compared.
    #[must_use]
    pub fn uncomparable(mut self, uncomparable: Uncomparable) -> Self {
        self.uncomparable = uncomparable;
        self
    }
}

/// The outcome of one reference row.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// |ε_fit − ε_ref| ≤ τ.
    Pass,
    /// |ε_fit − ε_ref| > τ.
    Fail,
    /// No fitted value at this species and wavelength.
    NotComparable,
}

impl Verdict {
    /// `pass`, `fail` or `not_comparable` (as in the CSV).
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Pass => "pass",
            Self::Fail => "fail",
            Self::NotComparable => "not_comparable",
        }
    }
}

/// One reference row compared with the fitted spectra.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ComparedRow {
    /// 1-based line of the row in the reference table.
    pub line: u64,
    /// The reference row.
    pub reference: ReferenceRow,
    /// The fitted species it was compared with.
    pub model_species: String,
    /// Absolute tolerance τ, L mol⁻¹ cm⁻¹.
    pub tolerance_l_mol_cm: f64,
    /// Fitted ε at the reference wavelength, L mol⁻¹ cm⁻¹.
    pub fitted_epsilon: Option<f64>,
    /// Its standard error (interpolated like ε).
    pub fitted_se: Option<f64>,
    /// Δ = ε_fit − ε_ref, L mol⁻¹ cm⁻¹.
    pub difference: Option<f64>,
    /// Δ / √(SE_fit² + τ²): the difference in units of the combined uncertainty.
    pub difference_sigma: Option<f64>,
    /// Pass, fail or not comparable.
    pub verdict: Verdict,
    /// Why the row is not comparable.
    pub not_comparable: Option<NotComparable>,
}

/// A comparison of fitted spectra with a reference table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Comparison {
    /// Software name and version.
    pub software: String,
    /// The inputs with checksums (empty for a comparison made in memory).
    pub inputs: Vec<InputFile>,
    /// The reference table file, if it came from one.
    pub reference_file: Option<PathBuf>,
    /// The fitted spectra file, if they came from one.
    pub fitted_file: Option<PathBuf>,
    /// The settings.
    pub params: CompareParams,
    /// One entry per reference row, in table order.
    pub rows: Vec<ComparedRow>,
    /// Rows within tolerance.
    pub passed: usize,
    /// Rows outside tolerance.
    pub failed: usize,
    /// Rows that could not be compared.
    pub not_comparable: usize,
}

impl Comparison {
    /// Whether every comparable row passed.
    pub fn all_passed(&self) -> bool {
        self.failed == 0
    }

    /// The comparison as a CSV table (one row per reference row; empty cells where a row is not
    /// comparable). Columns: `line, species, model_species, wavelength_nm,
    /// reference_epsilon_L_mol_cm, tolerance, tolerance_L_mol_cm, fitted_epsilon_L_mol_cm,
    /// fitted_se_L_mol_cm, difference_L_mol_cm, difference_sigma, verdict, from_memory, source,
    /// remark`.
    pub fn to_table(&self) -> Table {
        let mut t = Table::new([
            "line",
            "species",
            "model_species",
            "wavelength_nm",
            "reference_epsilon_L_mol_cm",
            "tolerance",
            "tolerance_L_mol_cm",
            "fitted_epsilon_L_mol_cm",
            "fitted_se_L_mol_cm",
            "difference_L_mol_cm",
            "difference_sigma",
            "verdict",
            "from_memory",
            "source",
            "remark",
        ]);
        let opt = |x: Option<f64>| x.map(format_float).unwrap_or_default();
        for r in &self.rows {
            t.push_row([
                r.line.to_string(),
                r.reference.species.clone(),
                r.model_species.clone(),
                format_float(r.reference.wavelength_nm),
                format_float(r.reference.epsilon_l_mol_cm),
                r.reference.tolerance.to_string(),
                format_float(r.tolerance_l_mol_cm),
                opt(r.fitted_epsilon),
                opt(r.fitted_se),
                opt(r.difference),
                opt(r.difference_sigma),
                r.verdict.as_str().to_string(),
                r.reference.from_memory.to_string(),
                r.reference.source.clone(),
                r.not_comparable
                    .as_ref()
                    .map(ToString::to_string)
                    .unwrap_or_default(),
            ]);
        }
        t
    }
}

/// Compares fitted spectra with a reference table (see the [module docs](self)).
///
/// # Errors
/// [`CompareError::MapTargetNotFitted`] or [`CompareError::MapSourceUnused`] for a species map
/// that does not match the fit or the table; with [`Uncomparable::Refuse`],
/// [`CompareError::SpeciesNotFitted`] or [`CompareError::OutsideFittedRange`] naming the first
/// such row; [`CompareError::NothingComparable`] when no row could be compared.
pub fn compare(
    table: &ReferenceTable,
    fitted: &FittedSpectra,
    params: &CompareParams,
) -> Result<Comparison, CompareError> {
    for (reference, model) in params.map.entries() {
        if fitted.species_index(model).is_none() {
            return Err(CompareError::MapTargetNotFitted {
                species: reference.clone(),
                model_species: model.clone(),
                fitted: fitted.species.clone().into(),
            });
        }
        if !table.rows.iter().any(|r| r.species == *reference) {
            return Err(CompareError::MapSourceUnused {
                reference: table.location(),
                species: reference.clone(),
            });
        }
    }
    let mut rows = Vec::with_capacity(table.rows.len());
    let (mut passed, mut failed, mut skipped) = (0, 0, 0);
    for (i, row) in table.rows.iter().enumerate() {
        let model_species = params.map.model_name(&row.species).to_string();
        let tau = row.tolerance.absolute_for(row.epsilon_l_mol_cm);
        let line = table.lines.get(i).copied().unwrap_or(0);
        let mut out = ComparedRow {
            line,
            reference: row.clone(),
            model_species: model_species.clone(),
            tolerance_l_mol_cm: tau,
            fitted_epsilon: None,
            fitted_se: None,
            difference: None,
            difference_sigma: None,
            verdict: Verdict::NotComparable,
            not_comparable: None,
        };
        match fitted.at(&model_species, row.wavelength_nm) {
            Ok(v) => {
                let diff = v.epsilon - row.epsilon_l_mol_cm;
                let sigma = v.standard_error.hypot(tau);
                out.fitted_epsilon = Some(v.epsilon);
                out.fitted_se = Some(v.standard_error);
                out.difference = Some(diff);
                out.difference_sigma = Some(diff / sigma);
                out.verdict = if diff.abs() <= tau {
                    passed += 1;
                    Verdict::Pass
                } else {
                    failed += 1;
                    Verdict::Fail
                };
            }
            Err(reason) => {
                if params.uncomparable == Uncomparable::Refuse {
                    let location = table.location_of(i);
                    return Err(match reason {
                        NotComparable::SpeciesNotFitted { .. } => CompareError::SpeciesNotFitted {
                            location,
                            species: row.species.clone(),
                            model_species,
                            fitted: fitted.species.clone().into(),
                        },
                        NotComparable::OutsideFittedRange { min_nm, max_nm } => {
                            CompareError::OutsideFittedRange {
                                location,
                                species: row.species.clone(),
                                wavelength_nm: row.wavelength_nm,
                                min_nm,
                                max_nm,
                            }
                        }
                    });
                }
                skipped += 1;
                out.not_comparable = Some(reason);
            }
        }
        rows.push(out);
    }
    if passed + failed == 0 {
        return Err(CompareError::NothingComparable {
            reference: table.location(),
            fitted: fitted.species.clone().into(),
        });
    }
    Ok(Comparison {
        software: format!("isosbestic {}", env!("CARGO_PKG_VERSION")),
        inputs: Vec::new(),
        reference_file: table.file.clone(),
        fitted_file: fitted.file.clone(),
        params: params.clone(),
        rows,
        passed,
        failed,
        not_comparable: skipped,
    })
}

/// Reads the fitted spectra (a fit output folder holding `pure_spectra.csv`, or that file
/// itself) and a reference table, and compares them; the result names both files with their
/// checksums.
///
/// # Errors
/// [`crate::Error::Input`] for an unreadable file; [`crate::Error::Compare`] as
/// [`read_reference_table`], [`FittedSpectra::read_pure_spectra`] and [`compare`].
pub fn compare_files(fit: &Path, reference: &Path, params: &CompareParams) -> crate::Result<Comparison> {
    let spectra_path = if fit.is_dir() {
        fit.join(crate::report::fit::FIT_OUTPUTS[4])
    } else {
        fit.to_path_buf()
    };
    let inputs = vec![checksum(&spectra_path)?, checksum(reference)?];
    let fitted = FittedSpectra::read_pure_spectra(&spectra_path)?;
    let table = read_reference_table(reference)?;
    let mut comparison = compare(&table, &fitted, params)?;
    comparison.inputs = inputs;
    Ok(comparison)
}

/// Writes `comparison.csv` and `comparison.json` (kind `comparison`) into `dir` (created if
/// needed), atomically; refuses to overwrite the comparison's inputs, and earlier outputs unless
/// `force`.
///
/// # Errors
/// [`crate::Error::WouldOverwrite`] naming the file; [`crate::Error::Output`].
pub fn write_comparison_outputs(
    dir: &Path,
    comparison: &Comparison,
    force: bool,
) -> crate::Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).map_err(|source| crate::Error::Output {
        path: dir.to_path_buf(),
        source,
    })?;
    let targets: Vec<PathBuf> = COMPARE_OUTPUTS.iter().map(|n| dir.join(n)).collect();
    guard_outputs(&targets, &comparison.inputs, force)?;
    comparison.to_table().write_csv(&targets[0])?;
    write_json(&targets[1], "comparison", comparison)?;
    Ok(targets)
}

impl fmt::Display for Comparison {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(r) = &self.reference_file {
            write!(f, "reference {}", r.display())?;
            if let Some(s) = &self.fitted_file {
                write!(f, ", fitted spectra {}", s.display())?;
            }
            writeln!(f)?;
            writeln!(f)?;
        }
        writeln!(
            f,
            "  {:<16} {:<8} {:>7} {:>10} {:>8} {:>20} {:>10} {:>7}  verdict",
            "species", "model", "λ/nm", "ε ref", "tol.", "ε fitted ± SE", "Δ", "Δ/σ"
        )?;
        for r in self.rows.iter().filter(|r| r.verdict != Verdict::NotComparable) {
            let (e, s, d, z) = (
                r.fitted_epsilon.unwrap_or(f64::NAN),
                r.fitted_se.unwrap_or(f64::NAN),
                r.difference.unwrap_or(f64::NAN),
                r.difference_sigma.unwrap_or(f64::NAN),
            );
            writeln!(
                f,
                "  {:<16} {:<8} {:>7} {:>10} {:>8} {:>20} {:>+10.4} {:>+7.2}  {}{}",
                r.reference.species,
                r.model_species,
                format_float(r.reference.wavelength_nm),
                format!("{:.4}", r.reference.epsilon_l_mol_cm),
                format!("±{}", r.reference.tolerance),
                format!("{e:.4} ± {s:.4}"),
                d,
                z,
                r.verdict.as_str().to_uppercase(),
                if r.reference.from_memory {
                    " (reference from memory)"
                } else {
                    ""
                }
            )?;
        }
        let skipped: Vec<&ComparedRow> = self
            .rows
            .iter()
            .filter(|r| r.verdict == Verdict::NotComparable)
            .collect();
        if !skipped.is_empty() {
            writeln!(f)?;
            writeln!(f, "  not comparable:")?;
            for r in skipped {
                let why = r
                    .not_comparable
                    .as_ref()
                    .map(ToString::to_string)
                    .unwrap_or_default();
                writeln!(
                    f,
                    "    line {}: {} at {} nm: {why}",
                    r.line,
                    r.reference.species,
                    format_float(r.reference.wavelength_nm)
                )?;
            }
        }
        writeln!(f)?;
        write!(
            f,
            "passed {}, failed {}, not comparable {}",
            self.passed, self.failed, self.not_comparable
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use ndarray::array;

    const HEADER: &str = "species,wavelength_nm,epsilon_L_mol_cm,tolerance,from_memory,source\n";

    fn fitted() -> FittedSpectra {
        FittedSpectra::new(
            vec![400.0, 410.0, 420.0],
            vec!["M".into(), "ML".into()],
            array![[2.0, 10.0], [4.0, 20.0], [8.0, 30.0]],
            array![[0.1, 1.0], [0.3, 1.0], [0.5, 1.0]],
        )
        .unwrap()
    }

    fn table(rows: &str) -> ReferenceTable {
        parse_reference_table(&format!("{HEADER}{rows}"), Some(Path::new("ref.csv"))).unwrap()
    }

    #[test]
    fn interpolation_matches_a_hand_computed_value() {
        // λ = 413 nm between 410 (ε 4, SE 0.3) and 420 (ε 8, SE 0.5): t = 0.3,
        // ε = 0.7·4 + 0.3·8 = 5.2, SE = 0.7·0.3 + 0.3·0.5 = 0.36 (worked by hand).
        let v = fitted().at("M", 413.0).unwrap();
        assert_relative_eq!(v.epsilon, 5.2, epsilon = 1e-12);
        assert_relative_eq!(v.standard_error, 0.36, epsilon = 1e-12);
        // on a grid point and at both ends the grid values are returned
        let v = fitted().at("ML", 410.0).unwrap();
        assert_relative_eq!(v.epsilon, 20.0);
        assert_relative_eq!(fitted().at("M", 400.0).unwrap().epsilon, 2.0);
        assert_relative_eq!(fitted().at("M", 420.0).unwrap().epsilon, 8.0);
    }

    #[test]
    fn outside_the_range_or_an_unknown_species_is_not_comparable() {
        assert!(matches!(
            fitted().at("M", 399.9),
            Err(NotComparable::OutsideFittedRange { .. })
        ));
        assert!(matches!(
            fitted().at("M", 420.1),
            Err(NotComparable::OutsideFittedRange { .. })
        ));
        assert!(matches!(
            fitted().at("X", 410.0),
            Err(NotComparable::SpeciesNotFitted { .. })
        ));
    }

    #[test]
    fn tolerance_decides_pass_and_fail_and_sigma_combines_both_uncertainties() {
        // fitted M at 410 nm: 4.0 ± 0.3
        let t = table("M,410,3.5,20%,no,a\nM,410,3.0,0.5,no,b\nM,410,5,1.2,yes,c\n");
        let c = compare(&t, &fitted(), &CompareParams::default()).unwrap();
        // row 1: τ = 0.2·3.5 = 0.7 ≥ |0.5| → pass; Δ/σ = 0.5/√(0.09 + 0.49)
        assert_eq!(c.rows[0].verdict, Verdict::Pass);
        assert_relative_eq!(c.rows[0].tolerance_l_mol_cm, 0.7, epsilon = 1e-12);
        assert_relative_eq!(
            c.rows[0].difference_sigma.unwrap(),
            0.5 / (0.09_f64 + 0.49).sqrt(),
            epsilon = 1e-12
        );
        // row 2: |4 − 3| = 1 > 0.5 → fail; Δ/σ = 1/√(0.09 + 0.25)
        assert_eq!(c.rows[1].verdict, Verdict::Fail);
        assert_relative_eq!(
            c.rows[1].difference_sigma.unwrap(),
            1.0 / (0.09_f64 + 0.25).sqrt(),
            epsilon = 1e-12
        );
        // row 3: |4 − 5| = 1 ≤ 1.2 → pass, negative difference
        assert_eq!(c.rows[2].verdict, Verdict::Pass);
        assert_relative_eq!(c.rows[2].difference.unwrap(), -1.0);
        assert!(c.rows[2].reference.from_memory);
        assert_eq!((c.passed, c.failed, c.not_comparable), (2, 1, 0));
        assert!(!c.all_passed());
        assert_eq!(c.rows.iter().map(|r| r.line).collect::<Vec<_>>(), vec![2, 3, 4]);
    }

    #[test]
    fn the_boundary_of_the_tolerance_passes() {
        // |Δ| = τ exactly (4 − 3.0 = 1, τ = 1): "within tolerance" includes the edge.
        let c = compare(&table("M,410,3,1,,src\n"), &fitted(), &CompareParams::default()).unwrap();
        assert_eq!(c.rows[0].verdict, Verdict::Pass);
    }

    #[test]
    fn a_species_map_renames_reference_species() {
        let t = table("[M(H2O)6]2+,400,2.1,10%,true,memory\nOther,400,1,10%,,x\n");
        let params = CompareParams::default().map(SpeciesMap::new().with("[M(H2O)6]2+", "M").unwrap());
        let c = compare(&t, &fitted(), &params).unwrap();
        assert_eq!(c.rows[0].model_species, "M");
        assert_eq!(c.rows[0].verdict, Verdict::Pass);
        assert_eq!(c.rows[1].verdict, Verdict::NotComparable);
        assert_eq!(c.not_comparable, 1);
        // the CSV has one line per row plus the header, empty cells for the skipped row
        let csv = c.to_table().to_csv_string().unwrap();
        assert_eq!(csv.lines().count(), 3);
        assert!(csv.lines().nth(2).unwrap().contains(",not_comparable,"), "{csv}");
    }

    #[test]
    fn refusing_uncomparable_rows_names_file_and_line() {
        let t = table("M,400,2,10%,,x\nZ,400,1,10%,,y\n");
        let params = CompareParams::default().uncomparable(Uncomparable::Refuse);
        let e = compare(&t, &fitted(), &params).unwrap_err();
        assert!(matches!(e, CompareError::SpeciesNotFitted { .. }), "{e}");
        assert_eq!(e.location().and_then(|l| l.line), Some(3));
        let msg = e.to_string();
        assert!(msg.contains("ref.csv, line 3") && msg.contains("'Z'"), "{msg}");
        let t = table("M,500,2,10%,,x\n");
        let e = compare(&t, &fitted(), &params).unwrap_err();
        assert!(matches!(e, CompareError::OutsideFittedRange { .. }), "{e}");
        assert!(e.to_string().contains("400–420 nm"), "{e}");
    }

    #[test]
    fn a_table_with_nothing_comparable_is_an_error() {
        let e = compare(&table("Z,400,2,10%,,x\n"), &fitted(), &CompareParams::default()).unwrap_err();
        assert!(matches!(e, CompareError::NothingComparable { .. }), "{e}");
    }

    #[test]
    fn map_entries_must_match_the_fit_and_the_table() {
        let t = table("A,400,2,10%,,x\n");
        let to_missing = CompareParams::default().map(SpeciesMap::new().with("A", "Q").unwrap());
        assert!(matches!(
            compare(&t, &fitted(), &to_missing),
            Err(CompareError::MapTargetNotFitted { .. })
        ));
        let unused = CompareParams::default().map(SpeciesMap::new().with("B", "M").unwrap());
        assert!(matches!(
            compare(&t, &fitted(), &unused),
            Err(CompareError::MapSourceUnused { .. })
        ));
        assert!(matches!(
            SpeciesMap::new().with("A", "M").unwrap().with("A", "ML"),
            Err(CompareError::DuplicateMap { .. })
        ));
        assert!(matches!(
            SpeciesMap::new().with_entry("=M"),
            Err(CompareError::BadMapEntry { .. })
        ));
    }

    fn reader_error(text: &str) -> CompareError {
        parse_reference_table(text, Some(Path::new("ref.csv"))).unwrap_err()
    }

    #[test]
    fn a_bad_number_is_named_by_line_and_column() {
        let e = reader_error(&format!("{HEADER}M,400,2,10%,,x\nM,410,abc,10%,,y\n"));
        assert!(
            matches!(e, CompareError::Table(CsvError::NonNumeric { .. })),
            "{e}"
        );
        let loc = e.location().unwrap();
        assert_eq!((loc.line, loc.column), (Some(3), Some(3)));
        assert!(e.to_string().starts_with("ref.csv, line 3, column 3"), "{e}");
        let e = reader_error(&format!("{HEADER}M,400,0,10%,,x\n"));
        assert!(
            matches!(e, CompareError::Table(CsvError::ImpossibleValue { .. })),
            "{e}"
        );
        let e = reader_error(&format!("{HEADER}M,400,\"2,5\",10%,,x\n"));
        assert!(
            matches!(e, CompareError::Table(CsvError::DecimalComma { .. })),
            "{e}"
        );
    }

    #[test]
    fn a_missing_column_is_named() {
        let e = reader_error("species,wavelength_nm,epsilon_L_mol_cm,source\nM,400,2,x\n");
        assert!(
            matches!(e, CompareError::Table(CsvError::MissingColumn { .. })),
            "{e}"
        );
        assert!(e.to_string().contains("tolerance"), "{e}");
        assert_eq!(e.location().and_then(|l| l.line), Some(1));
    }

    #[test]
    fn bad_tolerance_flag_and_ragged_rows_are_located() {
        let e = reader_error(&format!("{HEADER}M,400,2,0%,,x\n"));
        assert!(matches!(e, CompareError::BadTolerance { .. }), "{e}");
        let e = reader_error(&format!("{HEADER}M,400,2,10%,maybe,x\n"));
        assert!(
            matches!(e, CompareError::Table(CsvError::InvalidFlag { .. })),
            "{e}"
        );
        assert_eq!(e.location().and_then(|l| l.column), Some(5));
        let e = reader_error(&format!("{HEADER}M,400,2,10%,x\n"));
        assert!(matches!(e, CompareError::Table(CsvError::Ragged { .. })), "{e}");
        let e = reader_error(&format!("{HEADER}M,400,2,10%,,\n"));
        assert!(
            matches!(e, CompareError::Table(CsvError::MissingValue { .. })),
            "{e}"
        );
        let e = reader_error(HEADER);
        assert!(matches!(e, CompareError::Table(CsvError::Empty { .. })), "{e}");
    }

    #[test]
    fn comments_quotes_semicolons_and_extra_columns_are_read() {
        let t = parse_reference_table(
            "# provenance\nspecies;note;wavelength_nm;epsilon_L_mol_cm;tolerance;source\n\n\
             # a comment between rows\nM;anything;400;2;10 %;\"Smith; Jones (1999)\"\n",
            None,
        )
        .unwrap();
        assert_eq!(t.lines, vec![5]);
        assert_eq!(t.rows[0].source, "Smith; Jones (1999)");
        assert!(!t.rows[0].from_memory);
        assert_eq!(t.rows[0].tolerance, Tolerance::Relative(0.1));
    }

    #[test]
    fn pure_spectra_tables_are_read_without_temperature_terms() {
        let s = FittedSpectra::parse_pure_spectra(
            "wavelength_nm,eps_A,se_A,eps_A_dT,se_A_dT,eps_B_dT,se_B_dT\n\
             402,2,0.2,9,9,1,1\n400,1,0.1,9,9,1,1\n",
            Some(Path::new("p.csv")),
        )
        .unwrap();
        // A_dT is A's temperature term; B_dT has no order-0 column, so it is a species name
        assert_eq!(s.species, vec!["A", "B_dT"]);
        assert_eq!(s.wavelengths_nm, vec![400.0, 402.0]);
        assert_relative_eq!(s.epsilon[[0, 0]], 1.0);
        let e = FittedSpectra::parse_pure_spectra("wavelength_nm,eps_A\n400,1\n", Some(Path::new("p.csv")))
            .unwrap_err();
        assert!(matches!(e, CompareError::MissingStandardError { .. }), "{e}");
        let e = FittedSpectra::parse_pure_spectra("wavelength_nm,a,b\n400,1,2\n", None).unwrap_err();
        assert!(matches!(e, CompareError::NoSpectra { .. }), "{e}");
        let e = FittedSpectra::parse_pure_spectra(
            "wavelength_nm,eps_A,se_A\n400,1,0.1\n400,2,0.1\n",
            Some(Path::new("p.csv")),
        )
        .unwrap_err();
        assert!(
            matches!(e, CompareError::Table(CsvError::DuplicateWavelength { .. })),
            "{e}"
        );
        assert!(e.to_string().contains("line 3"), "{e}");
    }

    #[test]
    fn in_memory_spectra_must_be_consistent() {
        let e = FittedSpectra::new(
            vec![400.0],
            vec!["A".into()],
            array![[1.0, 2.0]],
            array![[0.1, 0.1]],
        );
        assert!(matches!(e, Err(CompareError::InconsistentSpectra { .. })));
        let e = FittedSpectra::new(
            vec![400.0, 400.0],
            vec!["A".into()],
            array![[1.0], [2.0]],
            array![[0.1], [0.1]],
        );
        assert!(matches!(e, Err(CompareError::InconsistentSpectra { .. })));
    }

    #[test]
    fn a_hard_fit_in_memory_is_compared_through_its_order_0_spectra() {
        use crate::resolve::hard::{self, HardFitParams, SpectraTemperature};
        use crate::simulate::{Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
        use crate::testing::band;
        let model = |lb1, dh1, lb2, dh2| {
            crate::testing::metal_ligand_model("M", "X", &[(1, lb1, dh1), (2, lb2, dh2)], None)
        };
        let plan = SimulationPlan {
            seed: 1,
            first_nm: 350.0,
            last_nm: 800.0,
            step_nm: 3.0,
            temperatures_c: (0..10).map(|k| 5.0 + 9.0 * f64::from(k)).collect(),
            path_cm: 1.0,
            preparation_temperature_c: 25.0,
            thermal_expansion: false,
            noise: Noise::None,
            offset_sd_au: 0.0,
            slope_sd_au_per_100nm: 0.0,
            series: [0.3, 1.0, 3.0]
                .iter()
                .map(|&x| SeriesPlan {
                    label: format!("X{x}"),
                    totals_m: [("M".into(), 0.02), ("X".into(), x)].into(),
                })
                .collect(),
            spectra: vec![
                PureSpectrum {
                    species: "M".into(),
                    bands: vec![band(420.0, 30.0, 6.0)],
                },
                PureSpectrum {
                    species: "MX".into(),
                    bands: vec![band(450.0, 35.0, 18.0)],
                },
                PureSpectrum {
                    species: "MX2".into(),
                    bands: vec![band(480.0, 40.0, 40.0), band(650.0, 45.0, 55.0)],
                },
            ],
        };
        let sim = simulate(&model(0.4, 12e3, -0.2, 35e3), &plan).unwrap();
        // temperature-dependent spectra: the comparison must use the order-0 block only
        let params = HardFitParams {
            spectra_temperature: SpectraTemperature::Linear { reference_k: 298.15 },
            ..HardFitParams::default()
        };
        let fit = hard::fit(&sim.set, &model(1.0, 0.0, 1.0, 0.0), &params).unwrap();
        assert_eq!(fit.spectra.ncols(), 6);
        let fitted =
            FittedSpectra::from_hard_fit(&fit, sim.set.wavelengths_nm().as_slice().unwrap()).unwrap();
        assert_eq!(fitted.species, vec!["M", "MX", "MX2"]);
        // 420 nm lies between the grid points 419 and 422 (t = 1/3); the truth is the simulated
        // band 6·exp(−½((λ − 420)/30)²) (the simulation's input), interpolated the same way.
        let truth = |l: f64| 6.0 * (-0.5 * ((l - 420.0) / 30.0_f64).powi(2)).exp();
        let expected = truth(419.0) * 2.0 / 3.0 + truth(422.0) / 3.0;
        let t = table("M,420,6.0,1%,,simulation input\nMX2,650,55,0.5,,simulation input\n");
        let c = compare(&t, &fitted, &CompareParams::default()).unwrap();
        assert_relative_eq!(c.rows[0].fitted_epsilon.unwrap(), expected, max_relative = 1e-6);
        assert_eq!((c.passed, c.failed), (2, 0));
    }

    proptest::proptest! {
        #[test]
        fn interpolation_agrees_with_the_resampler_and_keeps_the_se_between_its_neighbours(
            values in proptest::collection::vec((0.0f64..50.0, 0.01f64..2.0), 2..20),
            fraction in 0.0f64..1.0,
        ) {
            let n = values.len();
            let w: Vec<f64> = (0..n).map(|k| 400.0 + 2.5 * k as f64).collect();
            let eps: Vec<f64> = values.iter().map(|v| v.0).collect();
            let se: Vec<f64> = values.iter().map(|v| v.1).collect();
            let s = FittedSpectra::new(
                w.clone(),
                vec!["A".into()],
                Array2::from_shape_vec((n, 1), eps.clone()).unwrap(),
                Array2::from_shape_vec((n, 1), se.clone()).unwrap(),
            )
            .unwrap();
            let lambda = 400.0 + fraction * 2.5 * (n - 1) as f64;
            let v = s.at("A", lambda).unwrap();
            // an independent implementation: the preprocessing resampler's linear interpolation
            let r = crate::preprocess::interpolate(&w, &eps, &[lambda], crate::preprocess::Interpolation::Linear)
                .unwrap();
            proptest::prop_assert!((v.epsilon - r[0]).abs() <= 1e-9 * (1.0 + r[0].abs()));
            let k = (((lambda - 400.0) / 2.5).floor() as usize).min(n - 2);
            let (lo, hi) = (se[k].min(se[k + 1]), se[k].max(se[k + 1]));
            proptest::prop_assert!(v.standard_error >= lo - 1e-12 && v.standard_error <= hi + 1e-12);
        }
    }

    #[test]
    fn the_json_document_round_trips() {
        let params = CompareParams::default().map(SpeciesMap::new().with("aqua", "M").unwrap());
        let c = compare(&table("aqua,413,5,10%,,x\nZ,413,5,1,,y\n"), &fitted(), &params).unwrap();
        let doc = crate::report::tables::to_json_document("comparison", &c);
        assert_eq!(doc["data"]["params"]["map"]["aqua"], "M");
        assert_eq!(
            doc["data"]["rows"][1]["not_comparable"]["kind"],
            "species_not_fitted"
        );
        let back: Comparison = crate::report::tables::from_json_document(doc, "comparison", None).unwrap();
        assert_eq!(back, c);
    }
}
