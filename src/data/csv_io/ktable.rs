//! The K(T) table: equilibrium constants a chemist already has, for the van 't Hoff fit.
//!
//! Columns (same delimiter and number rules as the other tables):
//! - a temperature column stating its unit: `temperature_K` or `temperature_C`;
//! - exactly one constant column: `log10_K`, `ln_K` or `K`;
//! - optionally its uncertainty: `sigma_log10_K`, `sigma_ln_K` or `sigma_K` (matching the
//!   constant column);
//! - any other column is ignored.

use super::dialect::{at, cell_error, column_number, parse_number, split_table};
use super::error::CsvError;
use crate::data::ZERO_CELSIUS_K;
use crate::thermo::{ConstantScale, KData};
use std::path::Path;

/// A K(T) table read from CSV.
#[derive(Debug, Clone, PartialEq)]
pub struct KTable {
    /// The points, ready for [`crate::thermo::fit_vant_hoff`].
    pub data: KData,
    /// Source line of each point.
    pub lines: Vec<u64>,
}

/// Parses a K(T) table.
///
/// # Errors
/// [`CsvError`] naming the file, line and column: no temperature column or no unit in its
/// header, no (or more than one) constant column, non-numeric cells, temperatures at or below
/// absolute zero, non-positive K or σ.
///
/// # Examples
/// ```
/// use isosbestic::data::csv_io::parse_k_table;
/// let t = parse_k_table("temperature_C,log10_K,sigma_log10_K\n25,1.5,0.02\n45,1.9,0.02\n", None)?;
/// approx::assert_relative_eq!(t.data.temperatures_k[1], 318.15);
/// assert_eq!(t.lines, vec![2, 3]);
/// # Ok::<(), isosbestic::data::csv_io::CsvError>(())
/// ```
pub fn parse_k_table(text: &str, source: Option<&Path>) -> Result<KTable, CsvError> {
    let table = split_table(text, source)?;
    let header_at = |col: usize| {
        at(source)
            .at_line(table.header.line)
            .at_column(column_number(col))
    };
    let find = |names: &[&str]| -> Vec<usize> {
        table
            .header
            .fields
            .iter()
            .enumerate()
            .filter(|(_, h)| names.contains(&h.as_str()))
            .map(|(i, _)| i)
            .collect()
    };
    let t_cols = find(&["temperature_K", "temperature_k", "temperature_C", "temperature_c"]);
    let bare_t = find(&["temperature", "T", "temp"]);
    let t_col = match (t_cols.as_slice(), bare_t.first()) {
        ([c], _) => *c,
        ([], Some(&c)) => {
            return Err(CsvError::MissingTemperatureUnit {
                location: header_at(c),
                column: table.header.fields[c].clone(),
                expected_k: "temperature_K",
                expected_c: "temperature_C",
            });
        }
        ([], None) => {
            return Err(CsvError::MissingColumn {
                location: at(source).at_line(table.header.line),
                column: "temperature_K (or temperature_C)".into(),
            });
        }
        (several, _) => {
            return Err(CsvError::BadHeader {
                location: header_at(several[1]),
                name: table.header.fields[several[1]].clone(),
                problem: "a second temperature column".into(),
            });
        }
    };
    let celsius = table.header.fields[t_col].ends_with(['C', 'c']);
    let scales = [
        ("log10_K", ConstantScale::Log10),
        ("ln_K", ConstantScale::Ln),
        ("K", ConstantScale::Linear),
    ];
    let found: Vec<(usize, ConstantScale, &str)> = scales
        .iter()
        .flat_map(|(name, scale)| find(&[name]).into_iter().map(move |c| (c, *scale, *name)))
        .collect();
    let (k_col, scale, k_name) = match found.as_slice() {
        [one] => *one,
        [] => {
            return Err(CsvError::MissingColumn {
                location: at(source).at_line(table.header.line),
                column: "log10_K, ln_K or K".into(),
            });
        }
        [_, second, ..] => {
            return Err(CsvError::BadHeader {
                location: header_at(second.0),
                name: second.2.to_string(),
                problem: "only one constant column (log10_K, ln_K or K) may be given".into(),
            });
        }
    };
    let sigma_name = format!("sigma_{k_name}");
    let sigma_col = find(&[sigma_name.as_str()]).first().copied();
    let width = table.header.fields.len();
    let (mut temps, mut values, mut sigmas, mut lines) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for row in &table.data {
        if row.fields.len() != width {
            return Err(CsvError::Ragged {
                location: at(source).at_line(row.line),
                expected: width,
                found: row.fields.len(),
            });
        }
        let cell = |col: usize, what: &str| -> Result<f64, CsvError> {
            let text = &row.fields[col];
            parse_number(text).map_err(|p| {
                cell_error(
                    p,
                    at(source).at_line(row.line).at_column(column_number(col)),
                    what.to_string(),
                    text,
                )
            })
        };
        let t = cell(t_col, "temperature")?;
        let t_k = if celsius { t + ZERO_CELSIUS_K } else { t };
        let impossible =
            |col: usize, what: &str, value: f64, requirement: &'static str| CsvError::ImpossibleValue {
                location: at(source).at_line(row.line).at_column(column_number(col)),
                what: what.to_string(),
                value,
                requirement,
            };
        if t_k <= 0.0 {
            return Err(impossible(t_col, "temperature", t, "must be above absolute zero"));
        }
        let v = cell(k_col, k_name)?;
        if scale == ConstantScale::Linear && v <= 0.0 {
            return Err(impossible(k_col, "K", v, "must be positive"));
        }
        if let Some(sc) = sigma_col {
            let s = cell(sc, &sigma_name)?;
            if s <= 0.0 {
                return Err(impossible(sc, &sigma_name, s, "must be positive"));
            }
            sigmas.push(s);
        }
        temps.push(t_k);
        values.push(v);
        lines.push(row.line);
    }
    if temps.is_empty() {
        return Err(CsvError::Empty {
            location: at(source),
            what: "no K(T) rows below the header",
        });
    }
    let mut data = KData::new(temps, values, scale);
    if sigma_col.is_some() {
        data = data.with_sigmas(sigmas);
    }
    Ok(KTable { data, lines })
}

/// Reads a K(T) table from a file.
///
/// # Errors
/// [`CsvError::Unreadable`] naming the file, or as [`parse_k_table`].
pub fn read_k_table(path: &Path) -> Result<KTable, CsvError> {
    let text = std::fs::read_to_string(path).map_err(|source| CsvError::Unreadable {
        file: path.to_path_buf(),
        source,
    })?;
    parse_k_table(&text, Some(path))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_temperature_without_unit_is_rejected_naming_the_column() {
        let e = parse_k_table("T,log10_K\n25,1\n", Some(Path::new("k.csv"))).unwrap_err();
        assert!(matches!(e, CsvError::MissingTemperatureUnit { .. }));
        assert!(e.to_string().contains("k.csv"), "{e}");
    }

    #[test]
    fn two_constant_columns_are_ambiguous() {
        let e = parse_k_table("temperature_K,log10_K,ln_K\n298,1,2.3\n", None).unwrap_err();
        assert!(matches!(e, CsvError::BadHeader { .. }), "{e}");
    }

    #[test]
    fn a_non_positive_k_names_line_and_column() {
        let e = parse_k_table("temperature_K,K\n298,5\n310,-1\n", Some(Path::new("k.csv"))).unwrap_err();
        assert!(matches!(e, CsvError::ImpossibleValue { .. }));
        let msg = e.to_string();
        assert!(msg.contains("line 3") && msg.contains("column 2"), "{msg}");
    }

    #[test]
    fn a_non_numeric_cell_is_a_typed_error() {
        let e = parse_k_table("temperature_C,ln_K\n25,abc\n", None).unwrap_err();
        assert!(matches!(e, CsvError::NonNumeric { .. }), "{e}");
    }
}
