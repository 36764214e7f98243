//! A known pure spectrum: ε(λ) of one species, measured beforehand or taken from an earlier fit,
//! to be held fixed in the global fit.
//!
//! Columns (same delimiter and number rules as the other tables):
//! - `wavelength_nm`;
//! - the ε column, L mol⁻¹ cm⁻¹: `eps_<species>` (so the `pure_spectra.csv` of an earlier fit
//!   can be used as it is), else `epsilon`, else — when the table has exactly two columns — the
//!   second one;
//! - any other column is ignored.
//!
//! Wavelengths must increase strictly from row to row.

use super::dialect::{at, cell_error, column_number, parse_number, split_table};
use super::error::CsvError;
use std::path::Path;

/// One species' known spectrum read from CSV.
#[derive(Debug, Clone, PartialEq)]
pub struct KnownSpectrumTable {
    /// Wavelengths, nm, strictly increasing.
    pub wavelengths_nm: Vec<f64>,
    /// ε at each wavelength, L mol⁻¹ cm⁻¹.
    pub absorptivity: Vec<f64>,
    /// Source line of each point.
    pub lines: Vec<u64>,
}

/// Parses the known spectrum of `species`.
///
/// Columns: `wavelength_nm`; the ε column (L mol⁻¹ cm⁻¹) `eps_<species>` (as an earlier fit's
/// `pure_spectra.csv` writes it), else `epsilon`, else — when the table has exactly two
/// columns — the second one; other columns are ignored. Wavelengths must increase strictly.
///
/// # Errors
/// [`CsvError`] naming the file, line and column: no wavelength or ε column, non-numeric or
/// non-finite cells, wavelengths not strictly increasing or not positive, no data rows.
///
/// # Examples
/// ```
/// use isosbestic::data::csv_io::parse_known_spectrum;
/// // the pure_spectra.csv of an earlier fit: the eps_<species> column is taken
/// let text = "wavelength_nm,eps_M,se_M,eps_MX,se_MX\n400,1.5,0.1,20,0.2\n410,1.7,0.1,24,0.2\n";
/// let t = parse_known_spectrum(text, None, "MX")?;
/// assert_eq!(t.absorptivity, vec![20.0, 24.0]);
/// assert_eq!(t.lines, vec![2, 3]);
/// # Ok::<(), isosbestic::data::csv_io::CsvError>(())
/// ```
pub fn parse_known_spectrum(
    text: &str,
    source: Option<&Path>,
    species: &str,
) -> Result<KnownSpectrumTable, CsvError> {
    let table = split_table(text, source)?;
    let fields = &table.header.fields;
    let position = |name: &str| fields.iter().position(|h| h == name);
    let missing = |column: String| CsvError::MissingColumn {
        location: at(source).at_line(table.header.line),
        column,
    };
    let wl_col = position("wavelength_nm").ok_or_else(|| missing("wavelength_nm".into()))?;
    let eps_name = format!("eps_{species}");
    let eps_col = position(&eps_name)
        .or_else(|| position("epsilon"))
        .or_else(|| (fields.len() == 2).then_some(1 - wl_col))
        .ok_or_else(|| missing(format!("{eps_name} (or epsilon)")))?;
    let width = fields.len();
    let mut out = KnownSpectrumTable {
        wavelengths_nm: Vec::new(),
        absorptivity: Vec::new(),
        lines: Vec::new(),
    };
    for row in &table.data {
        if row.fields.len() != width {
            return Err(CsvError::Ragged {
                location: at(source).at_line(row.line),
                expected: width,
                found: row.fields.len(),
            });
        }
        let location = |col: usize| at(source).at_line(row.line).at_column(column_number(col));
        let cell = |col: usize, what: &str| -> Result<f64, CsvError> {
            let text = &row.fields[col];
            parse_number(text).map_err(|p| cell_error(p, location(col), what.to_string(), text))
        };
        let wl = cell(wl_col, "wavelength")?;
        let impossible = |value: f64, requirement: &'static str| CsvError::ImpossibleValue {
            location: location(wl_col),
            what: "wavelength".into(),
            value,
            requirement,
        };
        if wl <= 0.0 {
            return Err(impossible(wl, "must be positive"));
        }
        if out.wavelengths_nm.last().is_some_and(|&prev| wl <= prev) {
            return Err(impossible(
                wl,
                "wavelengths must increase strictly from row to row",
            ));
        }
        out.absorptivity.push(cell(eps_col, "absorptivity")?);
        out.wavelengths_nm.push(wl);
        out.lines.push(row.line);
    }
    if out.wavelengths_nm.is_empty() {
        return Err(CsvError::Empty {
            location: at(source),
            what: "no spectrum rows below the header",
        });
    }
    Ok(out)
}

/// Reads the known spectrum of `species` from a file; see [`parse_known_spectrum`].
///
/// # Errors
/// [`CsvError::Unreadable`] naming the file, or as [`parse_known_spectrum`].
pub fn read_known_spectrum(path: &Path, species: &str) -> Result<KnownSpectrumTable, CsvError> {
    let text = super::read_text(path)?;
    parse_known_spectrum(&text, Some(path), species)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_two_column_table_takes_its_second_column() {
        let t = parse_known_spectrum("wavelength_nm;value\n500;3\n501;4\n", None, "X").unwrap();
        assert_eq!(t.wavelengths_nm, vec![500.0, 501.0]);
        assert_eq!(t.absorptivity, vec![3.0, 4.0]);
    }

    #[test]
    fn errors_name_file_line_and_column() {
        let src = Path::new("mx.csv");
        let e = parse_known_spectrum("wavelength_nm,epsilon\n500,3\n500,4\n", Some(src), "MX").unwrap_err();
        let text = e.to_string();
        assert!(text.contains("mx.csv") && text.contains("line 3"), "{text}");
        assert!(text.contains("increase strictly"), "{text}");
        let e = parse_known_spectrum("wavelength_nm,epsilon\n500,abc\n", Some(src), "MX").unwrap_err();
        assert!(matches!(e, CsvError::NonNumeric { .. }), "{e}");
        assert!(e.to_string().contains("column 2"), "{e}");
        let e = parse_known_spectrum("wavelength_nm,a,b\n500,1,2\n", Some(src), "MX").unwrap_err();
        assert!(e.to_string().contains("eps_MX"), "{e}");
        let e = parse_known_spectrum("wavelength_nm,epsilon\n", Some(src), "MX").unwrap_err();
        assert!(matches!(e, CsvError::Empty { .. }), "{e}");
    }
}
