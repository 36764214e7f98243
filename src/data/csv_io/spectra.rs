//! The spectra table: wavelength in the first column, one absorbance column per sample.

use super::CsvError;
use super::dialect::{at, cell_error, column_number, parse_number, split_table};
use ndarray::Array2;
use std::collections::HashMap;
use std::path::Path;

/// A spectra table as read: wavelength axis, sample ids and absorbance matrix D.
///
/// Rows of the file may come in any wavelength order; here the axis is strictly increasing and
/// the columns of `absorbance` follow it.
#[derive(Debug, Clone, PartialEq)]
pub struct SpectraTable {
    /// Wavelength axis λ, nm, strictly increasing.
    pub wavelengths_nm: Vec<f64>,
    /// Sample ids, from the header, in column order.
    pub sample_ids: Vec<String>,
    /// Absorbance D, samples × wavelengths (row `i` is sample `sample_ids[i]`).
    pub absorbance: Array2<f64>,
    /// 1-based line of the header in the source (after any comment lines); sample `i` sits in
    /// column `i + 2` of that line.
    pub header_line: u64,
}

/// Parses a spectra table from text.
///
/// Layout: a header row whose first cell names the wavelength column (any text, e.g.
/// `wavelength_nm`) and whose other cells are sample ids; then one row per wavelength (nm) with
/// one absorbance per sample. Columns are separated by `,`, `;` or a tab (detected from the
/// header and the rows after it); the decimal mark is `.`. A UTF-8 byte-order mark, blank lines,
/// and `#` comment lines before the header are allowed; cells are trimmed.
///
/// `source` is used only to name the file in errors.
///
/// # Errors
/// A [`CsvError`] naming the line and column: [`CsvError::DelimiterGuess`],
/// [`CsvError::DecimalComma`], [`CsvError::Ragged`], [`CsvError::NonNumeric`],
/// [`CsvError::NonFinite`], [`CsvError::MissingValue`], [`CsvError::ImpossibleValue`]
/// (wavelength ≤ 0), [`CsvError::DuplicateWavelength`], [`CsvError::DuplicateSampleId`],
/// [`CsvError::BadHeader`] (blank id), [`CsvError::Empty`], [`CsvError::Malformed`].
///
/// # Examples
/// ```
/// use isosbestic::data::csv_io::parse_spectra_table;
/// let t = parse_spectra_table("wavelength_nm;a;b\n510;0.2;0.4\n500;0.1;0.3\n", None)?;
/// assert_eq!(t.wavelengths_nm, vec![500.0, 510.0]); // sorted
/// assert_eq!(t.sample_ids, vec!["a", "b"]);
/// approx::assert_relative_eq!(t.absorbance[[1, 0]], 0.3); // sample b at 500 nm
/// # Ok::<(), isosbestic::data::csv_io::CsvError>(())
/// ```
pub fn parse_spectra_table(text: &str, source: Option<&Path>) -> Result<SpectraTable, CsvError> {
    let raw = split_table(text, source)?;
    let header_line = raw.header.line;
    let n_fields = raw.header.fields.len();

    let mut sample_ids = Vec::with_capacity(n_fields.saturating_sub(1));
    let mut seen: HashMap<&str, usize> = HashMap::new();
    for (index, id) in raw.header.fields.iter().enumerate().skip(1) {
        let location = at(source).at_line(header_line).at_column(column_number(index));
        if id.is_empty() {
            return Err(CsvError::BadHeader {
                location,
                name: String::new(),
                problem: "is blank; every absorbance column needs a sample id".into(),
            });
        }
        if let Some(&first) = seen.get(id.as_str()) {
            return Err(CsvError::DuplicateSampleId {
                location,
                id: id.clone(),
                first_seen: format!("column {}", column_number(first)),
            });
        }
        seen.insert(id, index);
        sample_ids.push(id.clone());
    }

    if raw.data.is_empty() {
        return Err(CsvError::Empty {
            location: at(source).at_line(header_line),
            what: "a header but no data rows",
        });
    }

    // (wavelength, line, absorbances)
    let mut rows: Vec<(f64, u64, Vec<f64>)> = Vec::with_capacity(raw.data.len());
    for row in &raw.data {
        let here = at(source).at_line(row.line);
        if row.fields.len() != n_fields {
            return Err(CsvError::Ragged {
                location: here,
                expected: n_fields,
                found: row.fields.len(),
            });
        }
        let Some((wavelength_cell, absorbance_cells)) = row.fields.split_first() else {
            continue; // unreachable: the header, and so every row, has at least two fields
        };
        let location = here.clone().at_column(1);
        let wavelength = parse_number(wavelength_cell)
            .map_err(|p| cell_error(p, location.clone(), "wavelength".into(), wavelength_cell))?;
        if wavelength <= 0.0 {
            return Err(CsvError::ImpossibleValue {
                location,
                what: "wavelength".into(),
                value: wavelength,
                requirement: "wavelengths must be positive (nm)",
            });
        }
        let values = absorbance_cells
            .iter()
            .zip(&sample_ids)
            .enumerate()
            .map(|(index, (cell, id))| {
                parse_number(cell).map_err(|p| {
                    let location = here.clone().at_column(column_number(index + 1));
                    cell_error(p, location, format!("absorbance of sample '{id}'"), cell)
                })
            })
            .collect::<Result<Vec<f64>, CsvError>>()?;
        rows.push((wavelength, row.line, values));
    }

    rows.sort_by(|a, b| a.0.total_cmp(&b.0));
    for pair in rows.windows(2) {
        if let [(w0, line0, _), (w1, line1, _)] = pair {
            #[allow(clippy::float_cmp)] // exact repetition is what is being detected
            if w0 == w1 {
                let (first_line, second_line) = ((*line0).min(*line1), (*line0).max(*line1));
                return Err(CsvError::DuplicateWavelength {
                    location: at(source).at_line(second_line).at_column(1),
                    wavelength_nm: *w1,
                    first_line,
                });
            }
        }
    }

    let n_samples = sample_ids.len();
    let mut absorbance = Array2::zeros((n_samples, rows.len()));
    for (j, (_, _, values)) in rows.iter().enumerate() {
        for (i, v) in values.iter().enumerate() {
            if let Some(cell) = absorbance.get_mut([i, j]) {
                *cell = *v;
            }
        }
    }
    Ok(SpectraTable {
        wavelengths_nm: rows.iter().map(|r| r.0).collect(),
        sample_ids,
        absorbance,
        header_line,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn rows_in_any_order_are_sorted_with_their_absorbances() {
        let t = parse_spectra_table("wl,a,b\n600,6,60\n400,4,40\n500,5,50\n", None).unwrap();
        assert_eq!(t.wavelengths_nm, vec![400.0, 500.0, 600.0]);
        assert_relative_eq!(t.absorbance[[0, 2]], 6.0);
        assert_relative_eq!(t.absorbance[[1, 0]], 40.0);
        assert_eq!(t.header_line, 1);
    }

    #[test]
    fn a_duplicate_wavelength_names_both_lines() {
        let e = parse_spectra_table("wl,a\n400,1\n500,2\n400,3\n", None).unwrap_err();
        assert!(
            matches!(e, CsvError::DuplicateWavelength { first_line: 2, ref location, .. } if location.line == Some(4))
        );
    }

    #[test]
    fn a_blank_sample_id_is_rejected() {
        let e = parse_spectra_table("wl,a,,c\n400,1,2,3\n", None).unwrap_err();
        assert!(matches!(e, CsvError::BadHeader { ref location, .. } if location.column == Some(3)));
    }
}
