//! Splitting a table's text into rows: BOM, comment and blank lines, delimiter detection, cell
//! trimming, and parsing numeric cells.

use super::CsvError;
use crate::data::Location;
use std::path::Path;

/// The delimiters tried, in order of preference on a tie.
const DELIMITERS: [u8; 3] = [b',', b';', b'\t'];

/// How many data rows after the header are used to check a delimiter guess.
const SAMPLED_ROWS: usize = 5;

/// One non-blank row of a table with its 1-based source line.
#[derive(Debug, Clone)]
pub(crate) struct Row {
    /// 1-based line where the row starts.
    pub line: u64,
    /// Trimmed cells.
    pub fields: Vec<String>,
}

/// A table split into header and data rows.
#[derive(Debug, Clone)]
pub(crate) struct RawTable {
    /// The header row.
    pub header: Row,
    /// Data rows (blank rows removed), in file order.
    pub data: Vec<Row>,
}

/// A location in the (optional) source file.
pub(crate) fn at(source: Option<&Path>) -> Location {
    Location {
        file: source.map(Path::to_path_buf),
        line: None,
        column: None,
    }
}

/// 1-based column number of a 0-based field index.
pub(crate) fn column_number(index: usize) -> u64 {
    u64::try_from(index).map_or(u64::MAX, |i| i.saturating_add(1))
}

/// Splits `text` into header and data rows.
///
/// A leading UTF-8 byte-order mark is dropped; blank lines and lines starting with `#` before
/// the header are skipped; rows whose cells are all blank are skipped anywhere; a last column
/// that is empty on every line (a delimiter ending each line) is dropped. The delimiter is
/// the one of `,` `;` tab that splits the header into the most fields (at least two) while
/// splitting the next few rows into as many; failing consistency, the one giving the most
/// header fields (the row that disagrees is then reported as ragged by the caller).
pub(crate) fn split_table(text: &str, source: Option<&Path>) -> Result<RawTable, CsvError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let Some((header_line, offset)) = find_header(text) else {
        return Err(CsvError::Empty {
            location: at(source),
            what: "no header line (only blank or # comment lines)",
        });
    };
    let rest = text.get(offset..).unwrap_or("");
    let line_offset = header_line - 1;

    let probes = DELIMITERS.map(|d| {
        let (header_fields, consistent) = probe(rest, d);
        (d, header_fields, consistent)
    });
    // widest consistent split first; failing that, the widest split (first on a tie)
    let widest = |consistent_only: bool| {
        probes
            .iter()
            .filter(|(_, h, c)| *h >= 2 && (*c || !consistent_only))
            .fold(None, |acc: Option<(u8, usize)>, &(d, h, _)| match acc {
                Some((_, best)) if best >= h => acc,
                _ => Some((d, h)),
            })
    };
    let best = widest(true).or_else(|| widest(false));
    let delimiter = match best {
        Some((d, _)) => d,
        None => {
            let first = rest.lines().next().unwrap_or("").trim();
            let mut header: String = first.chars().take(60).collect();
            if first.chars().count() > 60 {
                header.push('…');
            }
            return Err(CsvError::DelimiterGuess {
                location: at(source).at_line(header_line),
                header,
            });
        }
    };
    let mut rows = Vec::new();
    let mut lines = LineCounter::new(rest);
    for record in reader(rest, delimiter).records() {
        match record {
            Ok(r) => {
                let line = line_offset + lines.record_line(r.position().map_or(0, csv::Position::byte));
                if r.iter().all(str::is_empty) {
                    continue;
                }
                rows.push(Row {
                    line,
                    fields: r.iter().map(str::to_string).collect(),
                });
            }
            Err(e) => {
                let line = line_offset + lines.record_line(e.position().map_or(0, csv::Position::byte));
                return Err(CsvError::Malformed {
                    location: at(source).at_line(line),
                    detail: e.to_string(),
                });
            }
        }
    }
    let mut rows = rows.into_iter();
    let Some(mut header) = rows.next() else {
        return Err(CsvError::Empty {
            location: at(source).at_line(header_line),
            what: "no header line",
        });
    };
    let mut data: Vec<Row> = rows.collect();
    drop_trailing_empty_column(&mut header, &mut data);
    Ok(RawTable { header, data })
}

/// Drops a last column that is empty in the header and in every row: the trace of a delimiter
/// written at the end of every line, as some spreadsheet and instrument exports do.
fn drop_trailing_empty_column(header: &mut Row, data: &mut [Row]) {
    let n = header.fields.len();
    let empty_last = |r: &Row| r.fields.len() == n && r.fields.last().is_some_and(String::is_empty);
    if n > 2 && empty_last(header) && data.iter().all(empty_last) {
        header.fields.pop();
        for r in data.iter_mut() {
            r.fields.pop();
        }
    }
}

/// The 1-based line number and byte offset of the first line that is neither blank nor a
/// `#` comment.
fn find_header(text: &str) -> Option<(u64, usize)> {
    let mut offset = 0;
    for (i, line) in text.split_inclusive('\n').enumerate() {
        let t = line.trim();
        if !t.is_empty() && !t.starts_with('#') {
            return Some((column_number(i), offset));
        }
        offset += line.len();
    }
    None
}

/// Line numbers from byte offsets, counted incrementally (offsets must not decrease).
///
/// The CSV reader reports a record's position as the end of the previous record, before any
/// empty lines it skips; the record's own line is found by skipping those line ends.
struct LineCounter<'a> {
    bytes: &'a [u8],
    byte: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(text: &'a str) -> Self {
        Self {
            bytes: text.as_bytes(),
            byte: 0,
            line: 1,
        }
    }

    /// 1-based line of the record whose reported position is byte `offset`.
    fn record_line(&mut self, offset: u64) -> u64 {
        let mut target = usize::try_from(offset)
            .unwrap_or(usize::MAX)
            .min(self.bytes.len());
        while matches!(self.bytes.get(target), Some(b'\r' | b'\n')) {
            target += 1;
        }
        if target > self.byte {
            let newlines = self
                .bytes
                .get(self.byte..target)
                .map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count());
            self.line += newlines as u64;
            self.byte = target;
        }
        self.line
    }
}

fn reader(text: &str, delimiter: u8) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .delimiter(delimiter)
        .from_reader(text.as_bytes())
}

/// Number of header fields with `delimiter`, and whether the next rows have as many.
fn probe(text: &str, delimiter: u8) -> (usize, bool) {
    let mut rdr = reader(text, delimiter);
    let mut counts = rdr
        .records()
        .filter_map(|r| r.ok().map(|r| (r.len(), r.iter().all(str::is_empty))))
        .filter(|(_, blank)| !blank)
        .map(|(n, _)| n)
        .take(SAMPLED_ROWS + 1);
    let Some(h) = counts.next() else {
        return (0, false);
    };
    let consistent = counts.all(|n| n == h);
    (h, consistent)
}

/// Why a cell is not a usable number.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum CellProblem {
    /// Nothing in the cell.
    Empty,
    /// Not a number.
    NotNumber,
    /// A number written with a decimal comma.
    DecimalComma,
    /// NaN, infinite, or overflowing.
    NonFinite,
}

/// Parses a trimmed numeric cell with `.` as the decimal mark.
pub(crate) fn parse_number(cell: &str) -> Result<f64, CellProblem> {
    let cell = cell.trim();
    if cell.is_empty() {
        return Err(CellProblem::Empty);
    }
    match cell.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(CellProblem::NonFinite),
        Err(_) if looks_like_decimal_comma(cell) => Err(CellProblem::DecimalComma),
        Err(_) => Err(CellProblem::NotNumber),
    }
}

/// `[+-]digits,digits[e[+-]digits]`: a number with a decimal comma.
fn looks_like_decimal_comma(cell: &str) -> bool {
    let unsigned = cell.strip_prefix(['+', '-']).unwrap_or(cell);
    let Some((int, frac)) = unsigned.split_once(',') else {
        return false;
    };
    let (frac, exp) = match frac.split_once(['e', 'E']) {
        Some((f, e)) => (f, Some(e.strip_prefix(['+', '-']).unwrap_or(e))),
        None => (frac, None),
    };
    let digits = |s: &str| !s.is_empty() && s.bytes().all(|b| b.is_ascii_digit());
    digits(int) && digits(frac) && exp.is_none_or(digits)
}

/// Turns a cell problem into the matching error.
pub(crate) fn cell_error(problem: CellProblem, location: Location, what: String, text: &str) -> CsvError {
    match problem {
        CellProblem::Empty => CsvError::MissingValue { location, what },
        CellProblem::NotNumber => CsvError::NonNumeric {
            location,
            what,
            text: text.to_string(),
        },
        CellProblem::DecimalComma => CsvError::DecimalComma {
            location,
            cell: text.to_string(),
        },
        CellProblem::NonFinite => CsvError::NonFinite {
            location,
            what,
            text: text.to_string(),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn delimiter_of(text: &str) -> usize {
        split_table(text, None).unwrap().header.fields.len()
    }

    #[test]
    fn each_delimiter_is_detected_from_the_header() {
        assert_eq!(delimiter_of("a,b,c\n1,2,3\n"), 3);
        assert_eq!(delimiter_of("a;b;c\n1;2;3\n"), 3);
        assert_eq!(delimiter_of("a\tb\tc\n1\t2\t3\n"), 3);
    }

    #[test]
    fn a_delimiter_that_agrees_with_the_data_wins_over_a_wider_one() {
        // header splits into 3 at ',' but the rows do not; ';' gives 2 everywhere
        let t = split_table("a,x;b,y\n1;2\n3;4\n", None).unwrap();
        assert_eq!(t.header.fields, vec!["a,x", "b,y"]);
    }

    #[test]
    fn bom_comments_and_blank_lines_are_skipped_and_lines_counted() {
        let t = split_table("\u{feff}# made by hand\n\n a , b \n\n1,2\r\n,\n3,4\n", None).unwrap();
        assert_eq!(t.header.line, 3);
        assert_eq!(t.header.fields, vec!["a", "b"]);
        let lines: Vec<u64> = t.data.iter().map(|r| r.line).collect();
        assert_eq!(lines, vec![5, 7]);
    }

    #[test]
    fn a_delimiter_ending_every_line_is_ignored() {
        let t = split_table("wl,a,b,\n400,1,2,\n410,3,4,\n", None).unwrap();
        assert_eq!(t.header.fields, vec!["wl", "a", "b"]);
        assert!(t.data.iter().all(|r| r.fields.len() == 3));
        // but not when a row has something there
        let t = split_table("wl,a,b,\n400,1,2,\n410,3,4,5\n", None).unwrap();
        assert_eq!(t.header.fields.len(), 4);
    }

    #[test]
    fn numbers_parse_with_a_decimal_point_only() {
        assert_relative_eq!(parse_number(" 1.5e-3 ").unwrap(), 1.5e-3);
        assert_eq!(parse_number("0,123"), Err(CellProblem::DecimalComma));
        assert_eq!(parse_number("-1,5E+2"), Err(CellProblem::DecimalComma));
        assert_eq!(parse_number("1,2,3"), Err(CellProblem::NotNumber));
        assert_eq!(parse_number("NaN"), Err(CellProblem::NonFinite));
        assert_eq!(parse_number("-inf"), Err(CellProblem::NonFinite));
        assert_eq!(parse_number("1e400"), Err(CellProblem::NonFinite));
        assert_eq!(parse_number(""), Err(CellProblem::Empty));
        assert_eq!(parse_number("n/a"), Err(CellProblem::NotNumber));
    }
}
