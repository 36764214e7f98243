//! Solvent density ρ(T), the thermal-expansion factor of molar concentrations, and the molal
//! scale.
//!
//! Totals are made up (weighed and diluted to volume) at a preparation temperature T_prep. The
//! amount of substance is fixed, the volume expands with temperature, so at the measurement
//! temperature T the molar concentration is
//!
//! ```text
//! c(T) = c(T_prep) · ρ(T) / ρ(T_prep)
//! ```
//!
//! for a dilute solution whose expansion is that of the solvent ([`SolventDensity::concentration_factor`]).
//! For water, ρ comes from Kell's equation (J. Chem. Eng. Data 20 (1975) 97, Eq. 16, valid at
//! 0.101325 MPa); other solvents or brines can supply a table of (T, ρ) interpolated with the
//! monotone cubic of [`crate::preprocess::interpolate`]; or a constant density switches the
//! correction off.
//!
//! ## Density table file (CSV)
//! [`DensityTable::read_csv`] reads a table of a solvent or brine: one temperature column whose
//! header states its unit, `temperature_C` or `temperature_K`, and a `density_kg_m3` column;
//! other columns are ignored. Columns are separated by `,`, `;` or a tab (chosen from the
//! header); `.` is the decimal mark; `#` comment lines and blank lines are skipped; rows must
//! be in strictly increasing temperature. Every error names the file, line and column.
//!
//! ```text
//! # 1 mol/kg LiClO4 (invented values, for illustration)
//! temperature_C,density_kg_m3
//! 10,1064.1
//! 25,1059.3
//! 40,1053.6
//! ```

use super::ThermoError;
use crate::data::csv_io::CsvError;
use crate::data::{Interpolation, Location, ZERO_CELSIUS_K};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Lowest temperature at which [`kell_water_density_kg_m3`] is used, K (0 °C).
pub const KELL_MIN_K: f64 = ZERO_CELSIUS_K;
/// Highest temperature at which [`kell_water_density_kg_m3`] is used, K (100 °C: the liquid
/// range at 0.101325 MPa).
pub const KELL_MAX_K: f64 = ZERO_CELSIUS_K + 100.0;

/// Density of liquid water at 0.101325 MPa, kg/m³, by Kell (J. Chem. Eng. Data 20 (1975) 97,
/// Eq. 16), with t = T − 273.15 K in °C:
///
/// ```text
/// ρ = (999.83952 + 16.945176 t − 7.9870401e-3 t² − 46.170461e-6 t³ + 105.56302e-9 t⁴
///      − 280.54253e-12 t⁵) / (1 + 16.879850e-3 t)
/// ```
///
/// No range check here (see [`SolventDensity::Water`] for the checked form).
///
/// # Examples
/// ```
/// use isosbestic::thermo::kell_water_density_kg_m3;
/// // IAPWS-95 at 25 °C, 0.101325 MPa: 997.0476 kg/m³ (Wagner & Pruß, J. Phys. Chem. Ref. Data
/// // 31 (2002) 387, via a general-purpose IAPWS implementation; isosbestic REFERENCES.md)
/// approx::assert_abs_diff_eq!(kell_water_density_kg_m3(298.15), 997.0476, epsilon = 0.02);
/// ```
pub fn kell_water_density_kg_m3(temperature_k: f64) -> f64 {
    let t = temperature_k - ZERO_CELSIUS_K;
    let num = 999.839_52
        + t * (16.945_176
            + t * (-7.987_040_1e-3 + t * (-46.170_461e-6 + t * (105.563_02e-9 + t * (-280.542_53e-12)))));
    num / (1.0 + 16.879_850e-3 * t)
}

/// A validated table of solvent (or solution) density against temperature.
///
/// Serialised as `{ "name": …, "temperatures_k": […], "densities_kg_m3": […] }`; deserialising
/// runs the same validation as [`DensityTable::new`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "RawDensityTable")]
pub struct DensityTable {
    name: String,
    temperatures_k: Vec<f64>,
    densities_kg_m3: Vec<f64>,
}

#[derive(Deserialize)]
struct RawDensityTable {
    name: String,
    temperatures_k: Vec<f64>,
    densities_kg_m3: Vec<f64>,
}

impl TryFrom<RawDensityTable> for DensityTable {
    type Error = ThermoError;
    fn try_from(r: RawDensityTable) -> Result<Self, ThermoError> {
        DensityTable::new(r.name, r.temperatures_k, r.densities_kg_m3)
    }
}

impl DensityTable {
    /// A table named `name` (used in error messages) of densities ρ (kg/m³) at strictly
    /// increasing temperatures (K).
    ///
    /// # Errors
    /// [`ThermoError::DensityTableTooShort`] (fewer than two rows or columns of different
    /// length), [`ThermoError::DensityTableNotIncreasing`] (temperatures not strictly
    /// increasing, or not finite), [`ThermoError::NonPositiveDensity`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{DensityTable, ThermoError};
    /// let bad = DensityTable::new("brine", vec![300.0, 290.0], vec![1100.0, 1105.0]);
    /// assert!(matches!(bad, Err(ThermoError::DensityTableNotIncreasing { index: 1, .. })));
    /// ```
    pub fn new(
        name: impl Into<String>,
        temperatures_k: Vec<f64>,
        densities_kg_m3: Vec<f64>,
    ) -> Result<Self, ThermoError> {
        let name = name.into();
        if temperatures_k.len() < 2 || temperatures_k.len() != densities_kg_m3.len() {
            return Err(ThermoError::DensityTableTooShort {
                table: name,
                rows: temperatures_k.len().min(densities_kg_m3.len()),
            });
        }
        for (i, (&t, &rho)) in temperatures_k.iter().zip(&densities_kg_m3).enumerate() {
            let previous_k = if i == 0 { 0.0 } else { temperatures_k[i - 1] };
            if !(t.is_finite() && t > previous_k) {
                return Err(ThermoError::DensityTableNotIncreasing {
                    table: name,
                    index: i,
                    temperature_k: t,
                    previous_k,
                });
            }
            if !(rho.is_finite() && rho > 0.0) {
                return Err(ThermoError::NonPositiveDensity {
                    table: name,
                    temperature_k: t,
                    density_kg_m3: rho,
                });
            }
        }
        Ok(Self {
            name,
            temperatures_k,
            densities_kg_m3,
        })
    }

    /// The table's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Temperatures, K.
    pub fn temperatures_k(&self) -> &[f64] {
        &self.temperatures_k
    }

    /// Densities, kg/m³.
    pub fn densities_kg_m3(&self) -> &[f64] {
        &self.densities_kg_m3
    }

    /// Parses a density table from CSV text (format in the [module docs](self)); `source` is
    /// the file named in errors and, by its name, the table's name.
    ///
    /// # Errors
    /// [`CsvError`] naming file, line and column: no temperature column or one without its unit
    /// ([`CsvError::MissingTemperatureUnit`]), no `density_kg_m3` column, a ragged row, a cell
    /// that is not a finite number, a temperature at or below absolute zero or not above the
    /// previous row's, a density that is not positive ([`CsvError::ImpossibleValue`]), fewer
    /// than two rows ([`CsvError::Empty`]).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{DensityTable, SolventDensity};
    /// let t = DensityTable::parse_csv("temperature_C;density_kg_m3\n10;1064.1\n40;1053.6\n", None)?;
    /// approx::assert_abs_diff_eq!(t.temperatures_k()[1], 313.15, epsilon = 1e-12);
    /// let rho = SolventDensity::Table(t).density_kg_m3(298.15)?;
    /// approx::assert_abs_diff_eq!(rho, 0.5 * (1064.1 + 1053.6), epsilon = 1e-9); // two rows: a line
    ///
    /// let e = DensityTable::parse_csv("temperature_C,density_kg_m3\n10,1064.1\n5,1065\n", None)
    ///     .unwrap_err();
    /// assert!(e.to_string().contains("line 3"), "{e}");
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn parse_csv(text: &str, source: Option<&Path>) -> Result<Self, CsvError> {
        let at = || Location {
            file: source.map(Path::to_path_buf),
            line: None,
            column: None,
        };
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        let mut lines = text
            .lines()
            .enumerate()
            .map(|(i, l)| {
                (
                    u64::try_from(i).map_or(u64::MAX, |i| i.saturating_add(1)),
                    l.trim(),
                )
            })
            .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
        let Some((header_line, header)) = lines.next() else {
            return Err(CsvError::Empty {
                location: at(),
                what: "no header line (only blank or # comment lines)",
            });
        };
        let delimiter = [',', ';', '\t']
            .into_iter()
            .max_by_key(|d| header.split(*d).count())
            .unwrap_or(',');
        let split = |l: &str| -> Vec<String> {
            l.split(delimiter)
                .map(|c| c.trim().trim_matches('"').trim().to_string())
                .collect()
        };
        let fields = split(header);
        let col_at = |c: usize| u64::try_from(c).map_or(u64::MAX, |c| c.saturating_add(1));
        let find = |names: &[&str]| fields.iter().position(|f| names.contains(&f.as_str()));
        let t_col = match (
            find(&["temperature_C", "temperature_c"]),
            find(&["temperature_K", "temperature_k"]),
        ) {
            (Some(c), None) => (c, true),
            (None, Some(k)) => (k, false),
            (Some(_), Some(k)) => {
                return Err(CsvError::BadHeader {
                    location: at().at_line(header_line).at_column(col_at(k)),
                    name: fields[k].clone(),
                    problem: "is a second temperature column; give temperature_C or temperature_K".into(),
                });
            }
            (None, None) => {
                if let Some(c) = find(&["temperature", "T", "temp", "t"]) {
                    return Err(CsvError::MissingTemperatureUnit {
                        location: at().at_line(header_line).at_column(col_at(c)),
                        column: fields[c].clone(),
                        expected_k: "temperature_K",
                        expected_c: "temperature_C",
                    });
                }
                return Err(CsvError::MissingColumn {
                    location: at().at_line(header_line),
                    column: "temperature_C (or temperature_K)".into(),
                });
            }
        };
        let Some(rho_col) = find(&["density_kg_m3"]) else {
            return Err(CsvError::MissingColumn {
                location: at().at_line(header_line),
                column: "density_kg_m3".into(),
            });
        };
        let (mut temps, mut rhos) = (Vec::new(), Vec::new());
        for (line, l) in lines {
            let cells = split(l);
            if cells.len() != fields.len() {
                return Err(CsvError::Ragged {
                    location: at().at_line(line),
                    expected: fields.len(),
                    found: cells.len(),
                });
            }
            let number = |c: usize, what: &str| -> Result<f64, CsvError> {
                let text = cells[c].as_str();
                let location = at().at_line(line).at_column(col_at(c));
                if text.is_empty() {
                    return Err(CsvError::MissingValue {
                        location,
                        what: what.into(),
                    });
                }
                match text.parse::<f64>() {
                    Ok(v) if v.is_finite() => Ok(v),
                    Ok(_) => Err(CsvError::NonFinite {
                        location,
                        what: what.into(),
                        text: text.into(),
                    }),
                    Err(_) => Err(CsvError::NonNumeric {
                        location,
                        what: what.into(),
                        text: text.into(),
                    }),
                }
            };
            let impossible =
                |c: usize, what: &str, value: f64, requirement: &'static str| CsvError::ImpossibleValue {
                    location: at().at_line(line).at_column(col_at(c)),
                    what: what.into(),
                    value,
                    requirement,
                };
            let t = number(t_col.0, "temperature")?;
            let t_k = if t_col.1 { t + ZERO_CELSIUS_K } else { t };
            if t_k <= 0.0 {
                return Err(impossible(
                    t_col.0,
                    "temperature",
                    t,
                    "must be above absolute zero",
                ));
            }
            if temps.last().is_some_and(|&prev| t_k <= prev) {
                return Err(impossible(
                    t_col.0,
                    "temperature",
                    t,
                    "rows must be in strictly increasing temperature (it is not above the previous row's)",
                ));
            }
            let rho = number(rho_col, "density_kg_m3")?;
            if rho <= 0.0 {
                return Err(impossible(rho_col, "density_kg_m3", rho, "must be positive"));
            }
            temps.push(t_k);
            rhos.push(rho);
        }
        if temps.len() < 2 {
            return Err(CsvError::Empty {
                location: at(),
                what: "a density table needs at least two rows below the header",
            });
        }
        let name = source.and_then(|p| p.file_name()).map_or_else(
            || "density table".to_string(),
            |n| n.to_string_lossy().into_owned(),
        );
        // validated above row by row; this cannot fail, but report rather than panic
        Self::new(name, temps, rhos).map_err(|e| CsvError::Malformed {
            location: at(),
            detail: e.to_string(),
        })
    }

    /// Reads a density table from a CSV file (see [`DensityTable::parse_csv`]).
    ///
    /// # Errors
    /// [`CsvError::Unreadable`] naming the file, or as [`DensityTable::parse_csv`].
    ///
    /// # Examples
    /// ```
    /// let dir = tempfile::tempdir()?;
    /// let p = dir.path().join("brine.csv");
    /// std::fs::write(&p, "temperature_K,density_kg_m3\n280,1066\n320,1050\n")?;
    /// let t = isosbestic::thermo::DensityTable::read_csv(&p)?;
    /// assert_eq!(t.name(), "brine.csv");
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn read_csv(path: &Path) -> Result<Self, CsvError> {
        let text = std::fs::read_to_string(path).map_err(|source| CsvError::Unreadable {
            file: path.to_path_buf(),
            source,
        })?;
        Self::parse_csv(&text, Some(path))
    }
}

/// Where the solvent density ρ(T) comes from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "kind", rename_all = "snake_case")]
#[non_exhaustive]
pub enum SolventDensity {
    /// Liquid water at 0.101325 MPa by Kell's equation ([`kell_water_density_kg_m3`]), 0–100 °C.
    #[default]
    Water,
    /// A user table, interpolated with the monotone cubic (Fritsch–Carlson); no extrapolation.
    Table(DensityTable),
    /// A temperature-independent density: no thermal-expansion correction.
    Constant {
        /// ρ, kg/m³.
        density_kg_m3: f64,
    },
}

impl SolventDensity {
    /// ρ(T), kg/m³.
    ///
    /// # Errors
    /// [`ThermoError::TemperatureOutsideRange`] outside 0–100 °C (water) or the table's range,
    /// naming the table; [`ThermoError::NonPositiveDensity`] for a bad constant.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{DensityTable, SolventDensity};
    /// let t = DensityTable::new("brine", vec![290.0, 300.0, 310.0], vec![1110.0, 1106.0, 1101.0])?;
    /// let rho = SolventDensity::Table(t).density_kg_m3(300.0)?;
    /// approx::assert_abs_diff_eq!(rho, 1106.0, epsilon = 1e-12);
    /// assert!(SolventDensity::Water.density_kg_m3(400.0).is_err());
    /// # Ok::<(), isosbestic::thermo::ThermoError>(())
    /// ```
    pub fn density_kg_m3(&self, temperature_k: f64) -> Result<f64, ThermoError> {
        match self {
            Self::Water => {
                if !(KELL_MIN_K..=KELL_MAX_K).contains(&temperature_k) {
                    return Err(ThermoError::TemperatureOutsideRange {
                        source_name: "Kell's water density equation".into(),
                        temperature_k,
                        min_k: KELL_MIN_K,
                        max_k: KELL_MAX_K,
                    });
                }
                Ok(kell_water_density_kg_m3(temperature_k))
            }
            Self::Table(t) => {
                let (lo, hi) = (t.temperatures_k[0], t.temperatures_k[t.temperatures_k.len() - 1]);
                if !(lo..=hi).contains(&temperature_k) {
                    return Err(ThermoError::TemperatureOutsideRange {
                        source_name: format!("density table '{}'", t.name),
                        temperature_k,
                        min_k: lo,
                        max_k: hi,
                    });
                }
                let v = crate::preprocess::interpolate(
                    &t.temperatures_k,
                    &t.densities_kg_m3,
                    &[temperature_k],
                    Interpolation::MonotoneCubic,
                )
                .map_err(|_| ThermoError::TemperatureOutsideRange {
                    source_name: format!("density table '{}'", t.name),
                    temperature_k,
                    min_k: lo,
                    max_k: hi,
                })?;
                Ok(v[0])
            }
            Self::Constant { density_kg_m3 } => {
                if density_kg_m3.is_finite() && *density_kg_m3 > 0.0 {
                    Ok(*density_kg_m3)
                } else {
                    Err(ThermoError::NonPositiveDensity {
                        table: "constant".into(),
                        temperature_k,
                        density_kg_m3: *density_kg_m3,
                    })
                }
            }
        }
    }

    /// The factor ρ(T)/ρ(T_prep) that turns a molar concentration made up at `preparation_k`
    /// into the molar concentration at `temperature_k`.
    ///
    /// # Errors
    /// As [`SolventDensity::density_kg_m3`], for either temperature.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::SolventDensity;
    /// // Water made up at 25 °C is 0.9777× as concentrated at 75 °C (REFERENCES.md, from
    /// // IAPWS-95 densities 974.8429 / 997.0476 kg/m³)
    /// let f = SolventDensity::Water.concentration_factor(348.15, 298.15)?;
    /// approx::assert_abs_diff_eq!(f, 0.9777, epsilon = 5e-5);
    /// # Ok::<(), isosbestic::thermo::ThermoError>(())
    /// ```
    pub fn concentration_factor(&self, temperature_k: f64, preparation_k: f64) -> Result<f64, ThermoError> {
        Ok(self.density_kg_m3(temperature_k)? / self.density_kg_m3(preparation_k)?)
    }
}

/// The concentration scale in which equilibrium constants are expressed.
///
/// The molal scale (mol per kg of solvent) needs the mass of solvent per litre of solution,
/// ρ_solution · w_solvent. The conversion offered here is
///
/// ```text
/// m = c / (ρ · w / 1000)          (c in mol/L, ρ in kg/m³, m in mol/kg)
/// ```
///
/// which is exact when ρ is the *solution* density at T and w the solvent mass fraction of the
/// solution. With ρ the pure-solvent density and w = 1 it is the **dilute approximation**
/// m ≈ c/ρ_solvent, good to about the solute mass fraction (≈ 1 % for 0.1 mol/L of a salt of
/// molar mass 100 g/mol). isosbestic does not model how ρ_solution and w depend on composition.
///
/// In the global fit ([`crate::resolve::hard::HardFitParams::concentration_scale`]) ρ is the
/// density at each sample's measurement temperature from the thermal-expansion density source
/// (Kell's water, or a density table of the solvent or brine — then ρ is that solution's
/// density and w its solvent mass fraction), so the molal totals do not change with
/// temperature: c(T)/ρ(T) = c(T_prep)/ρ(T_prep).
///
/// In a file: `{ scale = "molar" }`, `{ scale = "molal" }` (w = 1) or
/// `{ scale = "molal", solvent_mass_fraction = 0.95 }`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "scale", rename_all = "snake_case")]
pub enum ConcentrationScale {
    /// mol/L (the default).
    #[default]
    Molar,
    /// mol/kg of solvent.
    Molal {
        /// Solvent mass fraction w of the solution (1, the default, for the dilute
        /// approximation).
        #[serde(default = "unit_mass_fraction")]
        solvent_mass_fraction: f64,
    },
}

fn unit_mass_fraction() -> f64 {
    1.0
}

impl ConcentrationScale {
    /// The molal scale in the dilute approximation (w = 1, ρ = the solvent's density).
    pub fn molal_dilute() -> Self {
        Self::Molal {
            solvent_mass_fraction: 1.0,
        }
    }

    /// Converts a molar concentration `c_molar` (mol/L) to this scale, given the density
    /// `density_kg_m3` (of the solution, or of the solvent in the dilute approximation).
    ///
    /// # Errors
    /// [`ThermoError::InvalidParameter`] for a mass fraction outside (0, 1] or a non-positive
    /// density; [`ThermoError::InvalidConcentration`] for a negative or non-finite `c_molar`.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::ConcentrationScale;
    /// // 0.1 mol/L in water of 997.05 kg/m³ is 0.1003 mol/kg (dilute approximation)
    /// let m = ConcentrationScale::molal_dilute().from_molar(0.1, 997.05)?;
    /// approx::assert_abs_diff_eq!(m, 0.1 / 0.99705, epsilon = 1e-12);
    /// # Ok::<(), isosbestic::thermo::ThermoError>(())
    /// ```
    pub fn from_molar(&self, c_molar: f64, density_kg_m3: f64) -> Result<f64, ThermoError> {
        if !(c_molar.is_finite() && c_molar >= 0.0) {
            return Err(ThermoError::InvalidConcentration {
                what: "molar concentration".into(),
                value: c_molar,
            });
        }
        match *self {
            Self::Molar => Ok(c_molar),
            Self::Molal {
                solvent_mass_fraction: w,
            } => {
                if !(w > 0.0 && w <= 1.0) {
                    return Err(ThermoError::InvalidParameter {
                        name: "solvent_mass_fraction",
                        value: w,
                        reason: "must lie in (0, 1]",
                    });
                }
                if !(density_kg_m3.is_finite() && density_kg_m3 > 0.0) {
                    return Err(ThermoError::InvalidParameter {
                        name: "density_kg_m3",
                        value: density_kg_m3,
                        reason: "must be positive and finite",
                    });
                }
                Ok(c_molar / (density_kg_m3 * w / 1000.0))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn kell_reproduces_its_own_zero_celsius_coefficient() {
        // At t = 0 Eq. 16 reduces to its constant term (Kell 1975, Eq. 16).
        assert_abs_diff_eq!(kell_water_density_kg_m3(273.15), 999.83952, epsilon = 1e-9);
    }

    #[test]
    fn a_table_interpolates_between_rows_and_refuses_to_extrapolate() {
        let t = DensityTable::new("b", vec![280.0, 300.0], vec![1000.0, 990.0]).unwrap();
        let d = SolventDensity::Table(t);
        // two points: the monotone cubic is the straight line
        assert_abs_diff_eq!(d.density_kg_m3(290.0).unwrap(), 995.0, epsilon = 1e-12);
        let e = d.density_kg_m3(301.0).unwrap_err();
        assert!(
            matches!(e, ThermoError::TemperatureOutsideRange { ref source_name, .. } if source_name.contains("'b'"))
        );
    }

    #[test]
    fn a_five_degree_table_of_kell_values_interpolates_kell_closely() {
        // Self-consistency of the table route. Bound: piecewise-linear interpolation errs by at
        // most h²·max|ρ''|/8 = 25 · 0.0183 / 8 ≈ 0.057 kg/m³ (ρ'' of Kell's equation is largest,
        // −0.0183 kg m⁻³ K⁻², at 0 °C; numerical second difference); the monotone cubic must
        // stay inside that everywhere and within 0.01 kg/m³ away from the table ends.
        let t: Vec<f64> = (0..=20).map(|k| 273.15 + 5.0 * f64::from(k)).collect();
        let rho = t.iter().map(|&t| kell_water_density_kg_m3(t)).collect();
        let d = SolventDensity::Table(DensityTable::new("water every 5 °C", t, rho).unwrap());
        for k in 0..100 {
            let tk = 273.65 + f64::from(k);
            let tol = if (283.15..=363.15).contains(&tk) {
                0.01
            } else {
                0.057
            };
            assert_abs_diff_eq!(
                d.density_kg_m3(tk).unwrap(),
                kell_water_density_kg_m3(tk),
                epsilon = tol
            );
        }
    }

    #[test]
    fn table_validation_names_the_problem() {
        assert!(matches!(
            DensityTable::new("x", vec![280.0, 290.0], vec![1000.0, -1.0]),
            Err(ThermoError::NonPositiveDensity { .. })
        ));
        assert!(matches!(
            DensityTable::new("x", vec![280.0], vec![1000.0]),
            Err(ThermoError::DensityTableTooShort { rows: 1, .. })
        ));
        assert!(matches!(
            DensityTable::new("x", vec![280.0, 280.0], vec![1000.0, 1000.0]),
            Err(ThermoError::DensityTableNotIncreasing { index: 1, .. })
        ));
        let json = r#"{"kind":"table","name":"x","temperatures_k":[300,290],"densities_kg_m3":[1,1]}"#;
        assert!(serde_json::from_str::<SolventDensity>(json).is_err());
    }

    #[test]
    fn a_density_csv_reads_either_temperature_unit_and_ignores_other_columns() {
        let c = DensityTable::parse_csv(
            "\u{feff}# brine\n\ntemperature_C\tnote\tdensity_kg_m3\n10\ta\t1064.1\n25\t\t1059.3\n",
            None,
        )
        .unwrap();
        assert_abs_diff_eq!(c.temperatures_k()[0], 283.15, epsilon = 1e-12);
        assert_abs_diff_eq!(c.densities_kg_m3()[1], 1059.3, epsilon = 1e-12);
        let k = DensityTable::parse_csv(
            "temperature_K,density_kg_m3\n283.15,1064.1\n298.15,1059.3\n",
            None,
        )
        .unwrap();
        assert_eq!(k.temperatures_k(), c.temperatures_k());
    }

    #[test]
    fn a_bad_density_csv_names_file_line_and_column() {
        let f = Some(Path::new("brine.csv"));
        let cases = [
            ("temperature,density_kg_m3\n10,1\n20,1\n", "line 1, column 1"),
            ("temperature_C,rho\n10,1\n20,1\n", "density_kg_m3"),
            (
                "temperature_C,density_kg_m3\n10,1000\n20,abc\n",
                "line 3, column 2",
            ),
            (
                "temperature_C,density_kg_m3\n10,1000\n20,-5\n",
                "line 3, column 2",
            ),
            ("temperature_C,density_kg_m3\n10,1000\n20\n", "line 3"),
            ("temperature_C,density_kg_m3\n10,1000\n", "two rows"),
            (
                "temperature_C,density_kg_m3\n-300,1000\n20,1\n",
                "line 2, column 1",
            ),
        ];
        for (text, expected) in cases {
            let e = DensityTable::parse_csv(text, f).unwrap_err().to_string();
            assert!(e.contains("brine.csv") && e.contains(expected), "{text:?}: {e}");
        }
    }

    #[test]
    fn a_constant_density_gives_no_expansion() {
        let d = SolventDensity::Constant { density_kg_m3: 789.0 };
        assert_abs_diff_eq!(
            d.concentration_factor(350.0, 298.15).unwrap(),
            1.0,
            epsilon = 1e-15
        );
        assert!(
            SolventDensity::Constant { density_kg_m3: 0.0 }
                .density_kg_m3(300.0)
                .is_err()
        );
    }

    #[test]
    fn density_source_round_trips_through_json() {
        let t = DensityTable::new("b", vec![280.0, 300.0], vec![1000.0, 990.0]).unwrap();
        for d in [
            SolventDensity::Water,
            SolventDensity::Table(t),
            SolventDensity::Constant { density_kg_m3: 800.0 },
        ] {
            let s = serde_json::to_string(&d).unwrap();
            assert_eq!(serde_json::from_str::<SolventDensity>(&s).unwrap(), d);
        }
    }
}
