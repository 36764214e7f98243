//! Splitting a JCAMP-DX text into labelled data records and blocks, decoding the data records
//! and converting units to wavelength (nm) and absorbance.

use super::asdf::{DataLine, MAX_POINTS, decode_xydata};
use super::{JcampError, JcampSpectrum};
use crate::data::Location;
use std::collections::BTreeMap;
use std::path::Path;

/// One labelled data record: `##LABEL=value`, plus any continuation lines.
struct Ldr<'a> {
    /// Label as written, trimmed.
    label: String,
    /// Normalised label: upper case, without spaces, dashes, slashes and underscores.
    key: String,
    /// 1-based line of `##`.
    line: u64,
    /// Value on the label line (comment removed).
    value: &'a str,
    /// 1-based column where `value` starts.
    value_column: u64,
    /// Continuation lines (comment removed), with their line numbers.
    more: Vec<(u64, &'a str)>,
}

impl Ldr<'_> {
    /// The whole value, lines joined by `\n`, trimmed.
    fn full_value(&self) -> String {
        let mut s = self.value.trim().to_string();
        for (_, l) in &self.more {
            s.push('\n');
            s.push_str(l.trim_end());
        }
        s.trim().to_string()
    }
}

/// A block from `##TITLE=` to `##END=`.
struct Block<'a> {
    title: String,
    line: u64,
    ldrs: Vec<Ldr<'a>>,
}

/// Normalises a label as the standard says: case, spaces, dashes, slashes and underscores are
/// not significant.
fn normalise(label: &str) -> String {
    label
        .chars()
        .filter(|c| !matches!(c, ' ' | '\t' | '-' | '/' | '_'))
        .flat_map(char::to_uppercase)
        .collect()
}

/// The line without its `$$` comment.
fn strip_comment(line: &str) -> &str {
    match line.find("$$") {
        Some(k) => &line[..k],
        None => line,
    }
}

/// Splits the text into labelled data records. Text before the first `##` is ignored.
fn split_ldrs(text: &str) -> (Vec<Ldr<'_>>, u64) {
    let mut ldrs: Vec<Ldr<'_>> = Vec::new();
    let mut last_line = 0;
    for (idx, raw) in text.lines().enumerate() {
        let line_no = idx as u64 + 1;
        last_line = line_no;
        let content = strip_comment(raw);
        let start = content.trim_start();
        if let Some(rest) = start.strip_prefix("##") {
            let (label, value) = match rest.find('=') {
                Some(k) => (&rest[..k], &rest[k + 1..]),
                None => (rest, ""),
            };
            let before_value = content.len() - value.len();
            let value_column = content[..before_value].chars().count() as u64 + 1;
            ldrs.push(Ldr {
                label: label.trim().to_string(),
                key: normalise(label),
                line: line_no,
                value,
                value_column,
                more: Vec::new(),
            });
        } else if let Some(current) = ldrs.last_mut() {
            current.more.push((line_no, content));
        }
    }
    (ldrs, last_line.max(1))
}

/// Reads every spectrum in a JCAMP-DX text.
///
/// Single-block and multi-block (LINK) files are read alike: every block holding
/// `##XYDATA=(X++(Y..Y))` or `##XYPOINTS=(XY..XY)` gives one [`JcampSpectrum`], in file order;
/// blocks without spectral data (a LINK header, a structure block) are skipped.
///
/// Checks made: `##NPOINTS=` equals the number of decoded points; every data line's X lies
/// within half a point spacing of `FIRSTX + i·(LASTX − FIRSTX)/(NPOINTS − 1)` (so `##FIRSTX=`
/// and `##LASTX=` agree with the data); DIF check values; every block ends with `##END=`.
///
/// Units: `##XUNITS=` NANOMETERS, MICROMETERS (λ/nm = 1000·λ/µm) or 1/CM (λ/nm = 10⁷/ν̃);
/// `##YUNITS=` ABSORBANCE, TRANSMITTANCE (fraction) or %T / PERCENT TRANSMITTANCE, converted
/// with A = −log₁₀ T. Data are sorted to increasing wavelength (wavenumber data come reversed).
///
/// `source` only names the file in errors and in [`JcampSpectrum::location`].
///
/// # Errors
/// A [`JcampError`] naming the file, line and (for data) column of the first problem.
///
/// # Examples
/// ```
/// use isosbestic::data::jcamp::parse_jcamp;
/// // a wavenumber axis in %T, written in DIF form with a check value on the second line
/// let text = "##TITLE=t\n##XUNITS=1/CM\n##YUNITS=%T\n##FIRSTX=20000\n##LASTX=25000\
///             \n##NPOINTS=2\n##YFACTOR=10\n##XYDATA=(X++(Y..Y))\n20000 AJ\n25000 B\n##END=\n";
/// let s = &parse_jcamp(text, None)?[0];
/// approx::assert_relative_eq!(s.wavelengths_nm[0], 400.0); // 1e7 / 25000
/// approx::assert_relative_eq!(s.wavelengths_nm[1], 500.0); // 1e7 / 20000
/// approx::assert_relative_eq!(s.absorbance[0], -(0.2f64).log10()); // T = 20 %
/// approx::assert_relative_eq!(s.absorbance[1], 1.0); // T = 10 %
/// assert_eq!(s.conversions.len(), 2);
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn parse_jcamp(text: &str, source: Option<&Path>) -> Result<Vec<JcampSpectrum>, JcampError> {
    let file = source.map(Path::to_path_buf);
    let at = |line: u64| Location {
        file: file.clone(),
        line: Some(line),
        column: None,
    };
    let (ldrs, last_line) = split_ldrs(text);
    let mut stack: Vec<Block<'_>> = Vec::new();
    let mut spectra = Vec::new();
    let mut total_points: u64 = 0;
    for ldr in ldrs {
        match ldr.key.as_str() {
            "TITLE" => stack.push(Block {
                title: ldr.full_value(),
                line: ldr.line,
                ldrs: Vec::new(),
            }),
            "END" => {
                if let Some(block) = stack.pop()
                    && let Some(s) = block_to_spectrum(&block, &at)?
                {
                    total_points += s.wavelengths_nm.len() as u64;
                    if total_points > MAX_POINTS {
                        return Err(JcampError::TooManyPoints {
                            limit: MAX_POINTS,
                            location: at(ldr.line),
                        });
                    }
                    spectra.push(s);
                }
            }
            _ => {
                if stack.is_empty() {
                    stack.push(Block {
                        title: String::new(),
                        line: ldr.line,
                        ldrs: Vec::new(),
                    });
                }
                if let Some(b) = stack.last_mut() {
                    b.ldrs.push(ldr);
                }
            }
        }
    }
    if let Some(open) = stack.last() {
        return Err(JcampError::Truncated {
            detail: format!(
                "the block '{}' opened at line {} has no ##END=",
                open.title, open.line
            ),
            location: at(last_line),
        });
    }
    if spectra.is_empty() {
        return Err(JcampError::EmptyData {
            detail: "no block holds ##XYDATA= or ##XYPOINTS=".into(),
            location: Location {
                file: file.clone(),
                ..Location::default()
            },
        });
    }
    Ok(spectra)
}

/// Reads every spectrum in a JCAMP-DX file (see [`parse_jcamp`]).
///
/// The bytes are decoded as UTF-8 when they are valid UTF-8 and as Latin-1 (ISO 8859-1)
/// otherwise, so a file with stray non-ASCII bytes in a comment still reads.
///
/// # Errors
/// [`JcampError::Io`] naming the file if it cannot be read; otherwise as [`parse_jcamp`].
///
/// # Examples
/// ```
/// let dir = tempfile::tempdir().unwrap();
/// let p = dir.path().join("a.jdx");
/// std::fs::write(&p, b"##TITLE=a \xb5\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\
///     \n##XYPOINTS=(XY..XY)\n400,0.5 410,0.25\n##END=\n").unwrap();
/// let s = isosbestic::data::jcamp::read_jcamp(&p)?;
/// assert_eq!(s[0].title, "a µ"); // 0xB5 is µ in Latin-1
/// assert_eq!(s[0].absorbance, vec![0.5, 0.25]);
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn read_jcamp(path: &Path) -> Result<Vec<JcampSpectrum>, JcampError> {
    let bytes = std::fs::read(path).map_err(|source| JcampError::Io {
        location: Location::in_file(path),
        source,
    })?;
    let text = match String::from_utf8(bytes) {
        Ok(s) => s,
        Err(e) => e.into_bytes().iter().map(|&b| char::from(b)).collect(),
    };
    parse_jcamp(&text, Some(path))
}

/// Parses the value of a numeric label (AFFN).
fn label_number(ldr: &Ldr<'_>, at: &dyn Fn(u64) -> Location) -> Result<f64, JcampError> {
    let text = ldr.value.trim();
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        _ => Err(JcampError::BadNumber {
            text: text.to_string(),
            reason: format!("##{}= needs a finite number", ldr.label),
            location: at(ldr.line).at_column(ldr.value_column),
        }),
    }
}

/// Points of one data record: abscissa and ordinate in file units after the factors, and the
/// source line of each point.
struct Points {
    x: Vec<f64>,
    y: Vec<f64>,
    lines: Vec<u64>,
}

fn block_to_spectrum(
    block: &Block<'_>,
    at: &dyn Fn(u64) -> Location,
) -> Result<Option<JcampSpectrum>, JcampError> {
    let find = |key: &str| block.ldrs.iter().rev().find(|l| l.key == key);
    let Some(data) = find("XYDATA").or_else(|| find("XYPOINTS")) else {
        return Ok(None);
    };
    let data_at = at(data.line);
    let number = |key: &str| find(key).map(|l| label_number(l, at)).transpose();
    let xfactor = number("XFACTOR")?.unwrap_or(1.0);
    let yfactor = number("YFACTOR")?.unwrap_or(1.0);
    let npoints = match find("NPOINTS") {
        Some(l) => {
            let v = label_number(l, at)?;
            if v < 0.0 || v.fract() != 0.0 || v > 1e12 {
                return Err(JcampError::BadNumber {
                    text: l.value.trim().to_string(),
                    reason: "##NPOINTS= needs a whole number of points".into(),
                    location: at(l.line).at_column(l.value_column),
                });
            }
            Some((v as usize, at(l.line)))
        }
        None => None,
    };
    let xunits = find("XUNITS").ok_or_else(|| JcampError::MissingLabel {
        label: "XUNITS".into(),
        location: data_at.clone(),
    })?;
    let yunits = find("YUNITS").ok_or_else(|| JcampError::MissingLabel {
        label: "YUNITS".into(),
        location: data_at.clone(),
    })?;
    let form: String = data
        .value
        .chars()
        .filter(|c| !c.is_whitespace())
        .collect::<String>()
        .to_uppercase();

    let points = if data.key == "XYDATA" {
        if form != "(X++(Y..Y))" {
            return Err(JcampError::UnsupportedForm {
                label: data.label.clone(),
                form: data.value.trim().to_string(),
                location: data_at.at_column(data.value_column),
            });
        }
        let lines: Vec<DataLine<'_>> = data
            .more
            .iter()
            .map(|&(n, text)| DataLine {
                text,
                at: at(n),
                column_offset: 0,
            })
            .collect();
        let decoded = decode_xydata(&lines)?;
        let n = decoded.y.len();
        if n == 0 {
            return Err(JcampError::EmptyData {
                detail: format!("##{}= has no points", data.label),
                location: data_at,
            });
        }
        if let Some((declared, loc)) = &npoints
            && *declared != n
        {
            return Err(JcampError::NpointsMismatch {
                declared: *declared,
                decoded: n,
                location: loc.clone(),
            });
        }
        let firstx = number("FIRSTX")?.ok_or_else(|| JcampError::MissingLabel {
            label: "FIRSTX".into(),
            location: data_at.clone(),
        })?;
        let lastx = number("LASTX")?;
        let deltax = number("DELTAX")?;
        let (last_label, last_value, x): (&str, f64, Vec<f64>) = match (lastx, deltax) {
            (Some(lastx), _) => {
                let x = if n == 1 {
                    vec![firstx]
                } else {
                    let step = (lastx - firstx) / (n - 1) as f64;
                    (0..n)
                        .map(|i| {
                            if i + 1 == n {
                                lastx
                            } else {
                                firstx + step * i as f64
                            }
                        })
                        .collect()
                };
                ("LASTX", lastx, x)
            }
            (None, Some(dx)) => ("DELTAX", dx, (0..n).map(|i| firstx + dx * i as f64).collect()),
            (None, None) => {
                return Err(JcampError::MissingLabel {
                    label: "LASTX (or DELTAX)".into(),
                    location: data_at,
                });
            }
        };
        let spacing = if n > 1 {
            (x[n - 1] - x[0]).abs() / (n - 1) as f64
        } else {
            0.0
        };
        for (line_x, index, loc) in &decoded.line_x {
            let Some(&expected) = x.get(*index) else {
                continue;
            };
            let decoded_x = line_x * xfactor;
            let tol = 0.5 * spacing + 1e-9 * expected.abs().max(decoded_x.abs());
            // all values are finite here (checked on parsing)
            if (decoded_x - expected).abs() > tol {
                let (label, declared) = if *index == 0 {
                    ("FIRSTX", firstx)
                } else {
                    (last_label, last_value)
                };
                return Err(JcampError::XMismatch {
                    label: label.into(),
                    declared,
                    decoded: decoded_x,
                    location: loc.clone(),
                });
            }
        }
        Points {
            x,
            y: decoded.y.iter().map(|v| v * yfactor).collect(),
            lines: decoded.y_lines,
        }
    } else {
        if form != "(XY..XY)" {
            return Err(JcampError::UnsupportedForm {
                label: data.label.clone(),
                form: data.value.trim().to_string(),
                location: data_at.at_column(data.value_column),
            });
        }
        let pts = xy_points(data, at, xfactor, yfactor)?;
        if pts.x.is_empty() {
            return Err(JcampError::EmptyData {
                detail: format!("##{}= has no points", data.label),
                location: data_at,
            });
        }
        if let Some((declared, loc)) = &npoints
            && *declared != pts.x.len()
        {
            return Err(JcampError::NpointsMismatch {
                declared: *declared,
                decoded: pts.x.len(),
                location: loc.clone(),
            });
        }
        pts
    };

    let mut conversions = Vec::new();
    let wavelengths = convert_x(&points, xunits, at, &mut conversions)?;
    let absorbance = convert_y(&points, yunits, at, &mut conversions)?;
    if let Some(k) =
        (0..wavelengths.len()).find(|&k| !(wavelengths[k].is_finite() && absorbance[k].is_finite()))
    {
        return Err(JcampError::BadNumber {
            text: format!("{} {}", points.x[k], points.y[k]),
            reason: "the point overflows after XFACTOR/YFACTOR or unit conversion".into(),
            location: at(points.lines[k]),
        });
    }
    let (wavelengths_nm, absorbance) = sort_increasing(wavelengths, absorbance, &points.lines, at)?;

    let labels: BTreeMap<String, String> = block
        .ldrs
        .iter()
        .filter(|l| !matches!(l.key.as_str(), "XYDATA" | "XYPOINTS"))
        .map(|l| (l.label.clone(), l.full_value()))
        .collect();
    Ok(Some(JcampSpectrum {
        title: block.title.clone(),
        wavelengths_nm,
        absorbance,
        conversions,
        labels,
        location: at(block.line),
    }))
}

/// Reads `(XY..XY)` pairs: AFFN numbers separated by blanks, commas or semicolons.
fn xy_points(
    data: &Ldr<'_>,
    at: &dyn Fn(u64) -> Location,
    xfactor: f64,
    yfactor: f64,
) -> Result<Points, JcampError> {
    let mut values: Vec<(f64, u64)> = Vec::new();
    let mut last_loc = at(data.line);
    for &(n, text) in &data.more {
        let mut column = 1u64;
        for field in text.split_inclusive([' ', '\t', ',', ';']) {
            let width = field.chars().count() as u64;
            let token = field.trim_end_matches([' ', '\t', ',', ';']);
            if !token.is_empty() {
                let loc = at(n).at_column(column);
                match token.parse::<f64>() {
                    Ok(v) if v.is_finite() => values.push((v, n)),
                    _ => {
                        return Err(JcampError::BadNumber {
                            text: token.to_string(),
                            reason: "(XY..XY) data need plain (AFFN) numbers".into(),
                            location: loc,
                        });
                    }
                }
                last_loc = loc;
            }
            column += width;
        }
    }
    if values.len() % 2 == 1 {
        return Err(JcampError::Truncated {
            detail: format!("##{}= ends with an X value that has no Y value", data.label),
            location: last_loc,
        });
    }
    let mut pts = Points {
        x: Vec::new(),
        y: Vec::new(),
        lines: Vec::new(),
    };
    for pair in values.chunks_exact(2) {
        pts.x.push(pair[0].0 * xfactor);
        pts.y.push(pair[1].0 * yfactor);
        pts.lines.push(pair[0].1);
    }
    Ok(pts)
}

/// Upper case, trimmed, inner blanks collapsed.
fn unit_key(value: &str) -> String {
    value
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ")
        .to_uppercase()
}

fn convert_x(
    points: &Points,
    xunits: &Ldr<'_>,
    at: &dyn Fn(u64) -> Location,
    conversions: &mut Vec<String>,
) -> Result<Vec<f64>, JcampError> {
    let key = unit_key(xunits.value);
    match key.as_str() {
        "NANOMETERS" | "NANOMETER" | "NM" => Ok(points.x.clone()),
        "MICROMETERS" | "MICROMETER" | "MICRONS" | "UM" | "µM" => {
            conversions.push("X converted from micrometres to nm (λ/nm = 1000 × λ/µm)".into());
            Ok(points.x.iter().map(|v| v * 1000.0).collect())
        }
        "1/CM" | "CM-1" | "CM^-1" | "WAVENUMBERS" => {
            if let Some(k) = points.x.iter().position(|v| *v <= 0.0) {
                return Err(JcampError::NonPositiveWavenumber {
                    wavenumber_per_cm: points.x[k],
                    location: at(points.lines[k]),
                });
            }
            conversions.push(
                "X converted from wavenumber (1/CM) to wavelength (λ/nm = 10⁷ / (ν̃/cm⁻¹)), \
                 then sorted to increasing wavelength"
                    .into(),
            );
            Ok(points.x.iter().map(|v| 1e7 / v).collect())
        }
        _ => Err(JcampError::UnsupportedUnits {
            label: xunits.label.clone(),
            value: xunits.value.trim().to_string(),
            location: at(xunits.line).at_column(xunits.value_column),
        }),
    }
}

fn convert_y(
    points: &Points,
    yunits: &Ldr<'_>,
    at: &dyn Fn(u64) -> Location,
    conversions: &mut Vec<String>,
) -> Result<Vec<f64>, JcampError> {
    let key = unit_key(yunits.value);
    let scale = match key.as_str() {
        "ABSORBANCE" => return Ok(points.y.clone()),
        "TRANSMITTANCE" => {
            conversions
                .push("Y converted from transmittance T (fraction) to absorbance (A = −log10 T)".into());
            1.0
        }
        "%T" | "% T" | "PERCENT TRANSMITTANCE" | "%TRANSMITTANCE" | "% TRANSMITTANCE" => {
            conversions
                .push("Y converted from percent transmittance to absorbance (A = −log10(%T/100))".into());
            0.01
        }
        _ => {
            return Err(JcampError::UnsupportedUnits {
                label: yunits.label.clone(),
                value: yunits.value.trim().to_string(),
                location: at(yunits.line).at_column(yunits.value_column),
            });
        }
    };
    points
        .y
        .iter()
        .enumerate()
        .map(|(k, &v)| {
            let t = v * scale;
            if t > 0.0 {
                Ok(-t.log10())
            } else {
                Err(JcampError::NonPositiveTransmittance {
                    x: points.x[k],
                    transmittance: t,
                    location: at(points.lines[k]),
                })
            }
        })
        .collect()
}

/// Orders the points by increasing wavelength (a decreasing axis is reversed) and rejects
/// repeated wavelengths.
fn sort_increasing(
    x: Vec<f64>,
    y: Vec<f64>,
    lines: &[u64],
    at: &dyn Fn(u64) -> Location,
) -> Result<(Vec<f64>, Vec<f64>), JcampError> {
    let mut order: Vec<usize> = (0..x.len()).collect();
    if x.windows(2).all(|w| w[1] < w[0]) {
        order.reverse();
    } else if !x.windows(2).all(|w| w[1] > w[0]) {
        order.sort_by(|&a, &b| x[a].total_cmp(&x[b]));
    }
    for w in order.windows(2) {
        if x[w[1]] <= x[w[0]] {
            return Err(JcampError::DuplicateWavelength {
                wavelength_nm: x[w[1]],
                location: at(lines[w[1]].max(lines[w[0]])),
            });
        }
    }
    Ok((
        order.iter().map(|&k| x[k]).collect(),
        order.iter().map(|&k| y[k]).collect(),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_are_normalised_as_the_standard_says() {
        assert_eq!(normalise("X UNITS"), "XUNITS");
        assert_eq!(normalise("data_type"), "DATATYPE");
        assert_eq!(normalise("JCAMP-DX"), "JCAMPDX");
        assert_eq!(normalise("Data/Type "), "DATATYPE");
    }

    #[test]
    fn comments_are_removed() {
        assert_eq!(strip_comment("400 1 2 $$ note"), "400 1 2 ");
        assert_eq!(strip_comment("$$ all comment"), "");
    }
}
