//! JCAMP-DX output in AFFN (plain decimal numbers) at full precision.

use super::JcampError;
use crate::data::Location;
use std::fmt::Write as _;
use std::path::Path;

/// Ordinates per `(X++(Y..Y))` line.
const VALUES_PER_LINE: usize = 8;

/// Labels the writer sets itself; `extra` may not repeat them.
const RESERVED: [&str; 14] = [
    "TITLE", "JCAMPDX", "DATATYPE", "XUNITS", "YUNITS", "XFACTOR", "YFACTOR", "FIRSTX", "LASTX", "DELTAX",
    "NPOINTS", "FIRSTY", "XYDATA", "XYPOINTS",
];

/// Formats a number in AFFN so that parsing it gives back exactly the same `f64`.
///
/// Rust's shortest round-trip decimal form is used; very large or small magnitudes use the AFFN
/// exponent form `E+nn` / `E-nn` (a sign and at least two digits, as the standard requires).
fn affn(v: f64) -> String {
    let plain = format!("{v}");
    if plain.len() <= 24 {
        return plain;
    }
    let sci = format!("{v:e}");
    match sci.split_once('e') {
        Some((mantissa, exp)) => {
            let (sign, digits) = match exp.strip_prefix('-') {
                Some(d) => ('-', d),
                None => ('+', exp),
            };
            format!("{mantissa}E{sign}{digits:0>2}")
        }
        None => plain,
    }
}

/// Removes line breaks so a value stays on its record's line.
fn one_line(s: &str) -> String {
    s.replace(['\r', '\n'], " ")
}

/// Writes one spectrum as a JCAMP-DX 4.24 text (AFFN, one block).
///
/// Evenly spaced wavelengths (every λᵢ within 1e-12 relative of λ₀ + i·(λₙ₋₁ − λ₀)/(n − 1))
/// are written as `##XYDATA=(X++(Y..Y))` with `FIRSTX`, `LASTX`, `DELTAX`, `NPOINTS`; others as
/// `##XYPOINTS=(XY..XY)`. `XFACTOR` and `YFACTOR` are 1 and every number is written in its
/// shortest exact decimal form, so reading the text back with
/// [`parse_jcamp`](super::parse_jcamp) gives the same values (to 1e-12 relative for the
/// reconstructed X of an even grid, exactly otherwise). `##XUNITS=` is NANOMETERS;
/// `y_units` is written as given (e.g. `ABSORBANCE`). `extra` records follow the header, in
/// order; line breaks in the title and values are replaced by spaces.
///
/// # Errors
/// [`JcampError::InvalidOutput`] for empty or mismatched arrays, non-finite values, wavelengths
/// not strictly increasing, or an `extra` label that is empty, holds `=`, `$$` or a line
/// break, or repeats one the writer sets.
///
/// # Examples
/// ```
/// use isosbestic::data::jcamp::{parse_jcamp, to_jcamp_string};
/// let text = to_jcamp_string("fitted ε", &[400.0, 401.0, 402.0], &[0.1, 0.2, 0.3], "ABSORBANCE",
///     &[("ORIGIN".to_string(), "isosbestic".to_string())])?;
/// assert!(text.contains("##XYDATA=(X++(Y..Y))"));
/// let back = &parse_jcamp(&text, None)?[0];
/// assert_eq!(back.absorbance, vec![0.1, 0.2, 0.3]);
/// assert_eq!(back.labels["ORIGIN"], "isosbestic");
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn to_jcamp_string(
    title: &str,
    wavelengths_nm: &[f64],
    values: &[f64],
    y_units: &str,
    extra: &[(String, String)],
) -> Result<String, JcampError> {
    let invalid = |reason: String| JcampError::InvalidOutput { reason };
    let n = wavelengths_nm.len();
    if n == 0 {
        return Err(invalid("no points to write".into()));
    }
    if values.len() != n {
        return Err(invalid(format!("{n} wavelengths but {} values", values.len())));
    }
    if let Some(k) = wavelengths_nm.iter().position(|v| !v.is_finite()) {
        return Err(invalid(format!("wavelength number {k} is not finite")));
    }
    if let Some(k) = values.iter().position(|v| !v.is_finite()) {
        return Err(invalid(format!(
            "the value at {} nm is not finite",
            wavelengths_nm[k]
        )));
    }
    if let Some(w) = wavelengths_nm.windows(2).find(|w| w[1] <= w[0]) {
        return Err(invalid(format!(
            "wavelengths must be strictly increasing ({} then {} nm)",
            w[0], w[1]
        )));
    }
    let y_units = one_line(y_units);
    if y_units.trim().is_empty() || y_units.contains("$$") {
        return Err(invalid("y units must be a non-empty text without '$$'".into()));
    }
    for (label, value) in extra {
        let key: String = label
            .chars()
            .filter(|c| !matches!(c, ' ' | '-' | '/' | '_'))
            .flat_map(char::to_uppercase)
            .collect();
        if key.is_empty()
            || label.contains(['=', '\r', '\n'])
            || label.contains("$$")
            || value.contains("$$")
            || RESERVED.contains(&key.as_str())
            || key == "END"
        {
            return Err(invalid(format!("extra label '{label}' cannot be written")));
        }
    }
    let title = one_line(title).replace("$$", "$");

    let first = wavelengths_nm[0];
    let last = wavelengths_nm[n - 1];
    let step = if n > 1 {
        (last - first) / (n - 1) as f64
    } else {
        0.0
    };
    let scale = first.abs().max(last.abs());
    let even = n > 1
        && wavelengths_nm
            .iter()
            .enumerate()
            .all(|(i, &x)| (x - (first + step * i as f64)).abs() <= 1e-12 * scale);

    let mut out = String::new();
    // Writing to a String cannot fail.
    let _ = writeln!(out, "##TITLE={title}");
    let _ = writeln!(out, "##JCAMP-DX=4.24");
    let _ = writeln!(out, "##DATA TYPE=UV/VIS SPECTRUM");
    for (label, value) in extra {
        let _ = writeln!(out, "##{}={}", label.trim(), one_line(value));
    }
    let _ = writeln!(out, "##XUNITS=NANOMETERS");
    let _ = writeln!(out, "##YUNITS={}", y_units.trim());
    let _ = writeln!(out, "##XFACTOR=1");
    let _ = writeln!(out, "##YFACTOR=1");
    let _ = writeln!(out, "##FIRSTX={}", affn(first));
    let _ = writeln!(out, "##LASTX={}", affn(last));
    if even {
        let _ = writeln!(out, "##DELTAX={}", affn(step));
    }
    let _ = writeln!(out, "##NPOINTS={n}");
    let _ = writeln!(out, "##FIRSTY={}", affn(values[0]));
    if even {
        let _ = writeln!(out, "##XYDATA=(X++(Y..Y))");
        for start in (0..n).step_by(VALUES_PER_LINE) {
            let x = if start == 0 {
                first
            } else {
                first + step * start as f64
            };
            let _ = write!(out, "{}", affn(x));
            for v in &values[start..(start + VALUES_PER_LINE).min(n)] {
                let _ = write!(out, " {}", affn(*v));
            }
            out.push('\n');
        }
    } else {
        let _ = writeln!(out, "##XYPOINTS=(XY..XY)");
        for (x, y) in wavelengths_nm.iter().zip(values) {
            let _ = writeln!(out, "{}, {}", affn(*x), affn(*y));
        }
    }
    let _ = writeln!(out, "##END=");
    Ok(out)
}

/// Writes one spectrum to a JCAMP-DX file atomically (see [`to_jcamp_string`]).
///
/// The text goes to a temporary file beside `path`, which is then renamed over it, so a reader
/// never sees half a file. Not overwriting an input that is being read is the caller's job.
///
/// # Errors
/// As [`to_jcamp_string`], and [`JcampError::Io`] naming the file when writing fails.
///
/// # Examples
/// ```
/// use isosbestic::data::jcamp::{read_jcamp, write_jcamp};
/// let dir = tempfile::tempdir().unwrap();
/// let p = dir.path().join("out.jdx");
/// write_jcamp(&p, "s", &[400.0, 410.0, 430.0], &[0.5, 0.25, 0.125], "ABSORBANCE", &[])?;
/// let back = read_jcamp(&p)?;
/// assert_eq!(back[0].wavelengths_nm, vec![400.0, 410.0, 430.0]);
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn write_jcamp(
    path: &Path,
    title: &str,
    wavelengths_nm: &[f64],
    values: &[f64],
    y_units: &str,
    extra: &[(String, String)],
) -> Result<(), JcampError> {
    let text = to_jcamp_string(title, wavelengths_nm, values, y_units, extra)?;
    crate::report::atomic::write_atomic(path, text.as_bytes()).map_err(|source| JcampError::Io {
        location: Location::in_file(path),
        source,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn affn_numbers_parse_back_exactly() {
        for v in [
            0.0,
            -0.0,
            1.5,
            -2.25e-300,
            6.02e23,
            f64::MAX,
            f64::MIN_POSITIVE,
            0.1 + 0.2,
        ] {
            let s = affn(v);
            let back: f64 = s.parse().unwrap();
            assert_eq!(back.to_bits(), v.to_bits(), "{s}");
            if s.contains('E') {
                let exp = s.split_once('E').unwrap().1;
                assert!(exp.starts_with(['+', '-']) && exp.len() >= 3, "{s}");
            }
        }
    }

    #[test]
    fn uneven_grids_use_xypoints() {
        let t = to_jcamp_string("u", &[400.0, 401.0, 403.0], &[1.0, 2.0, 3.0], "ABSORBANCE", &[]).unwrap();
        assert!(t.contains("##XYPOINTS=(XY..XY)"));
        assert!(!t.contains("DELTAX"));
    }

    #[test]
    fn reserved_extra_labels_are_refused() {
        let e = to_jcamp_string(
            "u",
            &[1.0],
            &[1.0],
            "ABSORBANCE",
            &[("N Points".into(), "3".into())],
        );
        assert!(matches!(e, Err(JcampError::InvalidOutput { .. })));
    }
}
