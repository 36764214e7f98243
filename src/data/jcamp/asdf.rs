//! ASDF decoding (McDonald & Wilks, Appl. Spectrosc. 42 (1988) 151, §5): AFFN numbers and the
//! compressed forms PAC, SQZ, DIF and DUP, in any mixture, as found in `##XYDATA=(X++(Y..Y))`.
//!
//! Pseudo-digits (the first digit of a number, with the sign or the form folded in):
//!
//! | form | characters | meaning |
//! |---|---|---|
//! | SQZ | `@`, `A`–`I`, `a`–`i` | absolute value starting with 0, +1…+9, −1…−9 |
//! | DIF | `%`, `J`–`R`, `j`–`r` | difference from the previous ordinate, 0, +1…+9, −1…−9 |
//! | DUP | `S`–`Z`, `s` | the previous value (or difference) occurs 1…9 times in all |
//! | PAC | `+`, `-` | a sign that also delimits numbers |
//!
//! Later digits are plain ASCII digits; a decimal point may appear inside any number.

use super::JcampError;
use crate::data::Location;

/// Most points one data record may expand to (DUP counts could otherwise ask for any amount
/// of memory).
pub(crate) const MAX_POINTS: u64 = 10_000_000;

/// One number of an ASDF line.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Token {
    /// An absolute value (AFFN, PAC or SQZ).
    Abs(f64),
    /// A difference from the previous ordinate (DIF).
    Dif(f64),
    /// A repeat count of the previous token, the original included (DUP).
    Dup(u64),
}

/// A token with its 1-based column.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Located {
    pub token: Token,
    pub column: u64,
}

#[derive(Clone, Copy, PartialEq)]
enum Kind {
    Abs,
    Dif,
    Dup,
}

/// Value of a pseudo-digit: its kind and its signed first digit.
fn pseudo_digit(c: char) -> Option<(Kind, i32)> {
    let u = c as u32;
    match c {
        '@' => Some((Kind::Abs, 0)),
        'A'..='I' => Some((Kind::Abs, (u - 'A' as u32 + 1) as i32)),
        'a'..='i' => Some((Kind::Abs, -((u - 'a' as u32 + 1) as i32))),
        '%' => Some((Kind::Dif, 0)),
        'J'..='R' => Some((Kind::Dif, (u - 'J' as u32 + 1) as i32)),
        'j'..='r' => Some((Kind::Dif, -((u - 'j' as u32 + 1) as i32))),
        'S'..='Z' => Some((Kind::Dup, (u - 'S' as u32 + 1) as i32)),
        's' => Some((Kind::Dup, 9)),
        _ => None,
    }
}

/// A number being accumulated.
struct Pending {
    kind: Kind,
    text: String,
    column: u64,
}

/// Splits one line of ASDF text into tokens.
///
/// `at` is the location of the line (file and line number); columns are added from the
/// position in `line` plus `column_offset` (the characters before `line` on its source line).
///
/// An AFFN exponent is recognised as in the standard: `E` or `e` directly followed by `+` or
/// `-` and a digit, inside a number written with plain digits. Otherwise `E`/`e` are SQZ digits.
pub(crate) fn tokenize(line: &str, at: &Location, column_offset: u64) -> Result<Vec<Located>, JcampError> {
    let chars: Vec<char> = line.chars().collect();
    let mut out = Vec::new();
    let mut pending: Option<Pending> = None;
    let col = |i: usize| column_offset + i as u64 + 1;
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        if c.is_ascii_digit() || c == '.' {
            match pending.as_mut() {
                Some(p) => p.text.push(c),
                None => {
                    pending = Some(Pending {
                        kind: Kind::Abs,
                        text: c.to_string(),
                        column: col(i),
                    })
                }
            }
        } else if (c == 'E' || c == 'e')
            && pending
                .as_ref()
                .is_some_and(|p| p.kind == Kind::Abs && is_plain(&p.text))
            && matches!(chars.get(i + 1), Some('+' | '-'))
            && chars.get(i + 2).is_some_and(char::is_ascii_digit)
        {
            if let Some(p) = pending.as_mut() {
                p.text.push('e');
                p.text.push(chars[i + 1]);
            }
            i += 1;
        } else if c == '+' || c == '-' {
            flush(&mut pending, &mut out, at)?;
            pending = Some(Pending {
                kind: Kind::Abs,
                text: c.to_string(),
                column: col(i),
            });
        } else if c.is_whitespace() || c == ',' || c == ';' {
            flush(&mut pending, &mut out, at)?;
        } else if let Some((kind, digit)) = pseudo_digit(c) {
            flush(&mut pending, &mut out, at)?;
            pending = Some(Pending {
                kind,
                text: digit.to_string(),
                column: col(i),
            });
        } else if c == '?' {
            return Err(JcampError::BadNumber {
                text: "?".into(),
                reason: "missing values ('?') are not supported".into(),
                location: at.clone().at_column(col(i)),
            });
        } else {
            return Err(JcampError::UnknownCompression {
                character: c,
                location: at.clone().at_column(col(i)),
            });
        }
        i += 1;
    }
    flush(&mut pending, &mut out, at)?;
    Ok(out)
}

/// True if `text` is a sign and/or digits and a decimal point (an AFFN mantissa so far).
fn is_plain(text: &str) -> bool {
    let body = text.strip_prefix(['+', '-']).unwrap_or(text);
    !body.is_empty() && body.chars().all(|c| c.is_ascii_digit() || c == '.') && !text.contains('e')
}

fn flush(pending: &mut Option<Pending>, out: &mut Vec<Located>, at: &Location) -> Result<(), JcampError> {
    let Some(p) = pending.take() else {
        return Ok(());
    };
    let location = at.clone().at_column(p.column);
    let bad = |reason: &str| JcampError::BadNumber {
        text: p.text.clone(),
        reason: reason.to_string(),
        location: location.clone(),
    };
    let token = match p.kind {
        Kind::Dup => {
            let n: u64 = p
                .text
                .parse()
                .map_err(|_| bad("a DUP count must be a whole number"))?;
            if n == 0 {
                return Err(bad("a DUP count must be at least 1"));
            }
            Token::Dup(n)
        }
        kind => {
            let text = if p.text == "+" || p.text == "-" {
                return Err(bad("a sign without digits"));
            } else {
                // SQZ/DIF digits were stored as a signed first digit; "-3.5" parses as −3.5.
                p.text.as_str()
            };
            let v: f64 = text.parse().map_err(|_| bad("not a number"))?;
            if !v.is_finite() {
                return Err(bad("not a finite number"));
            }
            if kind == Kind::Dif {
                Token::Dif(v)
            } else {
                Token::Abs(v)
            }
        }
    };
    out.push(Located {
        token,
        column: p.column,
    });
    Ok(())
}

/// One line of `(X++(Y..Y))` data, already split from the record.
pub(crate) struct DataLine<'a> {
    /// Text of the line (comment removed).
    pub text: &'a str,
    /// Where the line starts.
    pub at: Location,
    /// Characters before `text` on its source line.
    pub column_offset: u64,
}

/// The ordinates decoded from `(X++(Y..Y))` lines, in file units (factors not applied).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Decoded {
    /// Y values.
    pub y: Vec<f64>,
    /// Source line of each Y value.
    pub y_lines: Vec<u64>,
    /// For every data line: its X value, the index of its first new ordinate (after the DIF
    /// check value, if any), and its location.
    pub line_x: Vec<(f64, usize, Location)>,
}

/// Decodes `(X++(Y..Y))` lines in any mixture of AFFN, PAC, SQZ, DIF and DUP.
///
/// When a line ends in DIF form, the first ordinate of the next line repeats the last ordinate
/// as a check value (McDonald & Wilks 1988, §5): it is verified and not counted twice. The
/// check tolerance is 1e-9 relative to the larger of the two values (and 1e-9 absolute), which
/// leaves room for the rounding of decimal differences but catches any lost or spurious digit.
///
/// The X of a line is the abscissa of its first ordinate; with a check value that is the
/// check point, i.e. the last point of the previous line.
pub(crate) fn decode_xydata(lines: &[DataLine<'_>]) -> Result<Decoded, JcampError> {
    let mut y: Vec<f64> = Vec::new();
    let mut y_lines = Vec::new();
    let mut line_x = Vec::new();
    let mut previous_ended_in_dif = false;
    for line in lines {
        let tokens = tokenize(line.text, &line.at, line.column_offset)?;
        let Some((first, rest)) = tokens.split_first() else {
            continue;
        };
        let x = match first.token {
            Token::Abs(v) => v,
            _ => {
                return Err(JcampError::BadNumber {
                    text: line.text.trim().chars().take(20).collect(),
                    reason: "a data line must start with an absolute X value".into(),
                    location: line.at.clone().at_column(first.column),
                });
            }
        };
        let line_no = line.at.line.unwrap_or(0);
        let mut last: Option<Repeat> = None;
        let mut ended_in_dif = false;
        let mut first_index = y.len();
        for (k, t) in rest.iter().enumerate() {
            let location = || line.at.clone().at_column(t.column);
            match t.token {
                Token::Abs(v) if k == 0 && previous_ended_in_dif => {
                    let expected = y.last().copied().unwrap_or(v);
                    let tol = 1e-9 * expected.abs().max(v.abs()).max(1.0);
                    if (v - expected).abs() > tol {
                        return Err(JcampError::DifCheckFailed {
                            expected,
                            found: v,
                            location: location(),
                        });
                    }
                    // the check point is the previous line's last point
                    first_index = y.len().saturating_sub(1);
                    last = Some(Repeat::Abs(v));
                    ended_in_dif = false;
                }
                Token::Abs(v) => {
                    y.push(v);
                    y_lines.push(line_no);
                    last = Some(Repeat::Abs(v));
                    ended_in_dif = false;
                }
                Token::Dif(d) => {
                    let Some(&prev) = y.last() else {
                        return Err(JcampError::BadNumber {
                            text: format!("{d}"),
                            reason: "a DIF difference needs a preceding ordinate".into(),
                            location: location(),
                        });
                    };
                    y.push(prev + d);
                    y_lines.push(line_no);
                    last = Some(Repeat::Dif(d));
                    ended_in_dif = true;
                }
                Token::Dup(n) => {
                    let Some(repeated) = last else {
                        return Err(JcampError::BadNumber {
                            text: format!("DUP {n}"),
                            reason: "a DUP count needs a preceding value on its line".into(),
                            location: location(),
                        });
                    };
                    // The DUP count includes the original; cap what user data can ask for.
                    if n > MAX_POINTS || y.len() as u64 + n > MAX_POINTS {
                        return Err(JcampError::TooManyPoints {
                            limit: MAX_POINTS,
                            location: location(),
                        });
                    }
                    for _ in 1..n {
                        let v = match repeated {
                            Repeat::Dif(d) => y.last().copied().unwrap_or(0.0) + d,
                            Repeat::Abs(v) => v,
                        };
                        y.push(v);
                        y_lines.push(line_no);
                    }
                    // ended_in_dif keeps the state of the repeated token
                }
            }
        }
        line_x.push((x, first_index, line.at.clone().at_column(first.column)));
        previous_ended_in_dif = ended_in_dif;
    }
    Ok(Decoded { y, y_lines, line_x })
}

/// What a DUP count repeats.
#[derive(Clone, Copy)]
enum Repeat {
    Abs(f64),
    Dif(f64),
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    fn ys(text: &str) -> Vec<f64> {
        let lines: Vec<DataLine<'_>> = text
            .lines()
            .enumerate()
            .map(|(i, l)| DataLine {
                text: l,
                at: Location::default().at_line(i as u64 + 1),
                column_offset: 0,
            })
            .collect();
        decode_xydata(&lines).unwrap().y
    }

    #[test]
    fn pseudo_digits_follow_the_encoding_table() {
        // Table of McDonald & Wilks 1988 (summarised in /work/shared/REFERENCES.md).
        assert_eq!(ys("0 @ABCDEFGHI"), vec![0., 1., 2., 3., 4., 5., 6., 7., 8., 9.]);
        assert_eq!(
            ys("0 abcdefghi"),
            vec![-1., -2., -3., -4., -5., -6., -7., -8., -9.]
        );
        assert_eq!(
            ys("0 A%JKLMNOPQR"),
            vec![1., 1., 2., 4., 7., 11., 16., 22., 29., 37., 46.]
        );
        assert_eq!(
            ys("0 Ijklmnopqr"),
            vec![9., 8., 6., 3., -1., -6., -12., -19., -27., -36.]
        );
        // DUP: S..Z = 1..8, s = 9, count includes the original
        assert_eq!(ys("0 AS"), vec![1.0]);
        assert_eq!(ys("0 As"), vec![1.0; 9]);
        assert_eq!(ys("0 AZ"), vec![1.0; 8]);
    }

    #[test]
    fn multi_digit_and_decimal_compressed_numbers() {
        assert_eq!(ys("10 A23b45J1j1"), vec![123.0, -245.0, -234.0, -245.0]);
        let v = ys("1 A.5J.25");
        assert_abs_diff_eq!(v[0], 1.5);
        assert_abs_diff_eq!(v[1], 2.75); // J.25 is the difference +1.25
    }

    #[test]
    fn affn_exponent_needs_a_sign() {
        assert_eq!(ys("1 1.5E+02 2e-01"), vec![150.0, 0.2]);
        // "1E5" is 1 followed by the SQZ number +55
        assert_eq!(ys("1 1E5"), vec![1.0, 55.0]);
    }

    #[test]
    fn dif_check_value_is_verified_and_not_duplicated() {
        assert_eq!(ys("1 AJJ\n4 CJ\n6 D"), vec![1.0, 2.0, 3.0, 4.0]);
        let lines = [
            DataLine {
                text: "1 AJJ",
                at: Location::default().at_line(7),
                column_offset: 0,
            },
            DataLine {
                text: "4 DJ",
                at: Location::default().at_line(8),
                column_offset: 0,
            },
        ];
        let e = decode_xydata(&lines).unwrap_err();
        assert!(matches!(e, JcampError::DifCheckFailed { .. }));
        assert!(e.to_string().contains("line 8"), "{e}");
    }

    #[test]
    fn dup_after_dif_repeats_the_difference() {
        assert_eq!(ys("0 AJU"), vec![1.0, 2.0, 3.0, 4.0]);
    }

    #[test]
    fn unknown_character_names_its_column() {
        let e = tokenize("12 A#B", &Location::default().at_line(3), 0).unwrap_err();
        assert!(matches!(e, JcampError::UnknownCompression { character: '#', .. }));
        assert!(e.to_string().contains("column 5"), "{e}");
    }
}
