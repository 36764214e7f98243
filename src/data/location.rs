//! Where in an input a problem sits: file, line, column.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::path::PathBuf;

/// A position in an input file, as precise as the reader knows it.
///
/// Lines and columns are 1-based, as text editors show them.
///
/// # Examples
/// ```
/// use isosbestic::data::Location;
/// let at = Location::in_file("spectra.csv").at_line(4).at_column(3);
/// assert_eq!(at.to_string(), "spectra.csv, line 4, column 3");
/// assert_eq!(Location::default().to_string(), "<input>");
/// ```
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Location {
    /// The file, when the input came from one.
    pub file: Option<PathBuf>,
    /// 1-based line number.
    pub line: Option<u64>,
    /// 1-based column (field) number.
    pub column: Option<u64>,
}

impl Location {
    /// A location naming only a file.
    pub fn in_file(path: impl Into<PathBuf>) -> Self {
        Self {
            file: Some(path.into()),
            line: None,
            column: None,
        }
    }

    /// The same location at a given 1-based line.
    #[must_use]
    pub fn at_line(mut self, line: u64) -> Self {
        self.line = Some(line);
        self
    }

    /// The same location at a given 1-based column.
    #[must_use]
    pub fn at_column(mut self, column: u64) -> Self {
        self.column = Some(column);
        self
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut parts = Vec::new();
        if let Some(file) = &self.file {
            parts.push(file.display().to_string());
        }
        if let Some(line) = self.line {
            parts.push(format!("line {line}"));
        }
        if let Some(column) = self.column {
            parts.push(format!("column {column}"));
        }
        if parts.is_empty() {
            f.write_str("<input>")
        } else {
            f.write_str(&parts.join(", "))
        }
    }
}
