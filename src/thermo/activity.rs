//! Activity coefficients of ions in water, ionic strength, and conditional constants.
//!
//! **Off by default** ([`ActivityCorrection::None`]). Most spectrophotometric equilibrium
//! studies hold the ionic strength constant with an inert background electrolyte; the activity
//! coefficients are then (nearly) constant and are absorbed into the fitted constants, which are
//! *conditional* constants valid for that medium. Switch a model on only to estimate
//! thermodynamic (infinite-dilution) constants from data at low and varying ionic strength.
//!
//! Models (log₁₀ γ of an ion of charge z at ionic strength I, molal scale, temperature T):
//!
//! ```text
//! extended Debye–Hückel:  log γ = −A(T) z² √I / (1 + B(T) å √I)
//! Bates–Guggenheim:       the same with B å = 1.5 kg^½ mol^-½ (IUPAC Gold Book convention)
//! Davies:                 log γ = −A(T) z² (√I / (1 + √I) − 0.3 I)
//! ```
//!
//! A(T) and B(T) follow from Debye–Hückel theory with CODATA 2018 constants, the water density
//! of Kell (J. Chem. Eng. Data 20 (1975) 97) and the relative permittivity of water of Malmberg &
//! Maryott (J. Res. Natl. Bur. Stand. 56 (1956) 1, ε = 87.740 − 0.40008 t + 9.398e-4 t²
//! − 1.410e-6 t³, t in °C, 0–100 °C):
//!
//! ```text
//! l_B = e² / (4π ε₀ ε k T)                     (Bjerrum length)
//! A   = √(2π N_A ρ_w) · l_B^{3/2} / ln 10      (kg^½ mol^-½)
//! B   = √(8π N_A ρ_w l_B)                       (m⁻¹ kg^½ mol^-½; ×1e-10 for Å⁻¹)
//! ```
//!
//! Against values computed with the IAPWS permittivity formulation (isosbestic REFERENCES.md)
//! this A(T) agrees within 0.5 % over 0–95 °C (the two permittivity correlations differ by a few
//! tenths of a percent; A ∝ ε^{-3/2}).
//!
//! The [`ActivityModel`] trait is the extension point for further models (e.g. specific ion
//! interaction): a model supplies log γ(z, I, T), and optionally its slope in I (a finite
//! difference is provided). Iterating ionic strength and speciation to self-consistency
//! happens where the speciation is solved ([`crate::speciation::speciate_all_in_medium`]);
//! [`conditional_log_beta`] converts a thermodynamic log β to the conditional log β for given
//! activity coefficients.
//!
//! ## Limits
//! - Both models know an ion only by its charge (and, for extended Debye–Hückel, one size
//!   parameter): no specific interactions, no ion pairing beyond the species in the model.
//!   Extended Debye–Hückel is meant for I up to about 0.1 mol/kg, Davies up to about 0.5;
//!   above that (e.g. 1–3 mol/L brines) neither is reliable, and a constant ionic medium with
//!   conditional constants (the default) is the sound choice.
//! - γ of neutral species is 1 (no salting-out term).
//! - A(T), B(T) are those of pure water at 0.101325 MPa, 0–100 °C, whatever the solvent: not
//!   for other solvents or mixed solvents.
//! - The models are written for the molal scale; with molar concentrations I in mol/L is used
//!   in their place (a dilute approximation; choose the molal scale for hot solutions).

use super::ThermoError;
use super::density::kell_water_density_kg_m3;
use crate::data::ZERO_CELSIUS_K;
use serde::{Deserialize, Serialize};
use std::f64::consts::{LN_10, PI};

/// Avogadro constant, mol⁻¹ (exact, SI 2019).
const AVOGADRO: f64 = 6.022_140_76e23;
/// Elementary charge, C (exact, SI 2019).
const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Boltzmann constant, J/K (exact, SI 2019).
const BOLTZMANN: f64 = 1.380_649e-23;
/// Vacuum electric permittivity, F/m (CODATA 2018).
const VACUUM_PERMITTIVITY: f64 = 8.854_187_812_8e-12;

/// Lowest temperature of the water correlations used for A(T), B(T), K.
const WATER_MIN_K: f64 = ZERO_CELSIUS_K;
/// Highest temperature of the water correlations used for A(T), B(T), K.
const WATER_MAX_K: f64 = ZERO_CELSIUS_K + 100.0;

fn check_water_range(temperature_k: f64) -> Result<f64, ThermoError> {
    if (WATER_MIN_K..=WATER_MAX_K).contains(&temperature_k) {
        Ok(temperature_k - ZERO_CELSIUS_K)
    } else {
        Err(ThermoError::TemperatureOutsideRange {
            source_name: "the water permittivity correlation of Malmberg & Maryott (1956)".into(),
            temperature_k,
            min_k: WATER_MIN_K,
            max_k: WATER_MAX_K,
        })
    }
}

/// Relative permittivity (dielectric constant) of water by Malmberg & Maryott (J. Res. Natl.
/// Bur. Stand. 56 (1956) 1): ε = 87.740 − 0.40008 t + 9.398e-4 t² − 1.410e-6 t³, t in °C.
///
/// # Errors
/// [`ThermoError::TemperatureOutsideRange`] outside 0–100 °C.
///
/// # Examples
/// ```
/// // 78.30 at 25 °C, the value Malmberg & Maryott report in their abstract
/// let e = isosbestic::thermo::water_relative_permittivity(298.15)?;
/// approx::assert_abs_diff_eq!(e, 78.30, epsilon = 0.01);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn water_relative_permittivity(temperature_k: f64) -> Result<f64, ThermoError> {
    let t = check_water_range(temperature_k)?;
    Ok(87.740 - 0.400_08 * t + 9.398e-4 * t * t - 1.410e-6 * t * t * t)
}

fn bjerrum_length_m(temperature_k: f64) -> Result<f64, ThermoError> {
    let eps = water_relative_permittivity(temperature_k)?;
    Ok(ELEMENTARY_CHARGE * ELEMENTARY_CHARGE
        / (4.0 * PI * VACUUM_PERMITTIVITY * eps * BOLTZMANN * temperature_k))
}

/// Debye–Hückel A(T) for water, log₁₀ basis, kg^½ mol^-½ (see the module docs for the formula).
///
/// # Errors
/// [`ThermoError::TemperatureOutsideRange`] outside 0–100 °C.
///
/// # Examples
/// ```
/// // 0.5098 at 25 °C (isosbestic REFERENCES.md, from IAPWS density and permittivity);
/// // this correlation is within 0.5 % of it
/// let a = isosbestic::thermo::debye_huckel_a(298.15)?;
/// approx::assert_relative_eq!(a, 0.5098, max_relative = 5e-3);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn debye_huckel_a(temperature_k: f64) -> Result<f64, ThermoError> {
    let lb = bjerrum_length_m(temperature_k)?;
    let rho = kell_water_density_kg_m3(temperature_k);
    Ok((2.0 * PI * AVOGADRO * rho).sqrt() * lb.powf(1.5) / LN_10)
}

/// Debye–Hückel B(T) for water, Å⁻¹ kg^½ mol^-½.
///
/// # Errors
/// [`ThermoError::TemperatureOutsideRange`] outside 0–100 °C.
///
/// # Examples
/// ```
/// // 0.3284 Å⁻¹ at 25 °C (isosbestic REFERENCES.md)
/// let b = isosbestic::thermo::debye_huckel_b_per_angstrom(298.15)?;
/// approx::assert_relative_eq!(b, 0.3284, max_relative = 2e-3);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn debye_huckel_b_per_angstrom(temperature_k: f64) -> Result<f64, ThermoError> {
    let lb = bjerrum_length_m(temperature_k)?;
    let rho = kell_water_density_kg_m3(temperature_k);
    Ok((8.0 * PI * AVOGADRO * rho * lb).sqrt() * 1e-10)
}

fn check_ionic_strength(ionic_strength: f64) -> Result<(), ThermoError> {
    if ionic_strength.is_finite() && ionic_strength >= 0.0 {
        Ok(())
    } else {
        Err(ThermoError::InvalidConcentration {
            what: "ionic strength".into(),
            value: ionic_strength,
        })
    }
}

/// An activity-coefficient model: log₁₀ γ of an ion of charge `charge` at ionic strength
/// `ionic_strength` (mol/kg) and temperature `temperature_k`.
///
/// This is the extension point for further models (e.g. specific ion interaction).
pub trait ActivityModel {
    /// log₁₀ γ.
    ///
    /// # Errors
    /// A negative or non-finite ionic strength, or a temperature outside the model's range.
    fn log10_gamma(&self, charge: i32, ionic_strength: f64, temperature_k: f64) -> Result<f64, ThermoError>;

    /// ∂ log₁₀ γ / ∂I at fixed T, for the exact derivatives of a speciation with activity
    /// corrections (implicit differentiation through the ionic strength).
    ///
    /// The provided method is a central difference (one-sided near I = 0) of
    /// [`ActivityModel::log10_gamma`], so a new model needs only `log10_gamma`; the models here
    /// override it with the analytic derivative. Models of the form √I (all of them) have an
    /// infinite slope at I = 0: it is evaluated at I ≥ 1e-30 mol/kg, where it is large but finite.
    ///
    /// # Errors
    /// As [`ActivityModel::log10_gamma`].
    fn d_log10_gamma_d_ionic_strength(
        &self,
        charge: i32,
        ionic_strength: f64,
        temperature_k: f64,
    ) -> Result<f64, ThermoError> {
        check_ionic_strength(ionic_strength)?;
        let i = ionic_strength.max(SLOPE_FLOOR);
        let h = 1e-5 * i;
        if i > h {
            let up = self.log10_gamma(charge, i + h, temperature_k)?;
            let down = self.log10_gamma(charge, i - h, temperature_k)?;
            Ok((up - down) / (2.0 * h))
        } else {
            let up = self.log10_gamma(charge, i + h, temperature_k)?;
            Ok((up - self.log10_gamma(charge, i, temperature_k)?) / h)
        }
    }
}

/// Smallest ionic strength at which the slope of a √I law is evaluated, mol/kg.
const SLOPE_FLOOR: f64 = 1e-30;

/// The Davies equation: log γ = −A(T) z² (√I/(1 + √I) − c I), with c = 0.3 by default.
///
/// # Examples
/// ```
/// use isosbestic::thermo::{ActivityModel, Davies};
/// // z = 2, I = 0.1, 25 °C → −0.4287 (isosbestic REFERENCES.md, with A = 0.5098);
/// // within the 0.5 % difference of this A(T)
/// let lg = Davies::default().log10_gamma(2, 0.1, 298.15)?;
/// approx::assert_relative_eq!(lg, -0.4287, max_relative = 5e-3);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Davies {
    /// The linear coefficient c (0.3 in Davies' equation).
    pub linear_coefficient: f64,
}

impl Default for Davies {
    fn default() -> Self {
        Self {
            linear_coefficient: 0.3,
        }
    }
}

impl ActivityModel for Davies {
    fn log10_gamma(&self, charge: i32, ionic_strength: f64, temperature_k: f64) -> Result<f64, ThermoError> {
        check_ionic_strength(ionic_strength)?;
        let a = debye_huckel_a(temperature_k)?;
        let s = ionic_strength.sqrt();
        let z2 = f64::from(charge * charge);
        Ok(-a * z2 * (s / (1.0 + s) - self.linear_coefficient * ionic_strength))
    }

    /// −A z² (1/(2√I (1 + √I)²) − c).
    fn d_log10_gamma_d_ionic_strength(
        &self,
        charge: i32,
        ionic_strength: f64,
        temperature_k: f64,
    ) -> Result<f64, ThermoError> {
        check_ionic_strength(ionic_strength)?;
        let a = debye_huckel_a(temperature_k)?;
        if charge == 0 {
            return Ok(0.0);
        }
        let s = ionic_strength.max(SLOPE_FLOOR).sqrt();
        let z2 = f64::from(charge * charge);
        Ok(-a * z2 * (1.0 / (2.0 * s * (1.0 + s) * (1.0 + s)) - self.linear_coefficient))
    }
}

/// The size term of the extended Debye–Hückel equation (Bates–Guggenheim by default).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum DebyeHuckelSize {
    /// An ion-size parameter å in Å, multiplied by B(T).
    IonSizeAngstrom {
        /// å, Å.
        value: f64,
    },
    /// The Bates–Guggenheim convention: B å = 1.5 kg^½ mol^-½ at every temperature (IUPAC
    /// Gold Book).
    #[default]
    BatesGuggenheim,
}

/// The extended Debye–Hückel equation: log γ = −A(T) z² √I / (1 + B(T) å √I).
///
/// # Examples
/// ```
/// use isosbestic::thermo::{ActivityModel, DebyeHuckelSize, ExtendedDebyeHuckel, debye_huckel_a};
/// let m = ExtendedDebyeHuckel { size: DebyeHuckelSize::BatesGuggenheim };
/// let lg = m.log10_gamma(1, 0.04, 298.15)?;
/// // √0.04 = 0.2: −A·0.2/(1 + 1.5·0.2)
/// approx::assert_relative_eq!(lg, -debye_huckel_a(298.15)? * 0.2 / 1.3, max_relative = 1e-12);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(default, deny_unknown_fields)]
pub struct ExtendedDebyeHuckel {
    /// The size term in the denominator.
    pub size: DebyeHuckelSize,
}

impl ExtendedDebyeHuckel {
    /// B(T)·å, kg^½ mol^-½.
    fn size_term(&self, temperature_k: f64) -> Result<f64, ThermoError> {
        Ok(match self.size {
            DebyeHuckelSize::BatesGuggenheim => 1.5,
            DebyeHuckelSize::IonSizeAngstrom { value } => {
                if !(value.is_finite() && value >= 0.0) {
                    return Err(ThermoError::InvalidParameter {
                        name: "ion_size_angstrom",
                        value,
                        reason: "must be non-negative and finite",
                    });
                }
                debye_huckel_b_per_angstrom(temperature_k)? * value
            }
        })
    }
}

impl ActivityModel for ExtendedDebyeHuckel {
    fn log10_gamma(&self, charge: i32, ionic_strength: f64, temperature_k: f64) -> Result<f64, ThermoError> {
        check_ionic_strength(ionic_strength)?;
        let a = debye_huckel_a(temperature_k)?;
        let ba = self.size_term(temperature_k)?;
        let s = ionic_strength.sqrt();
        Ok(-a * f64::from(charge * charge) * s / (1.0 + ba * s))
    }

    /// −A z² / (2√I (1 + Bå√I)²).
    fn d_log10_gamma_d_ionic_strength(
        &self,
        charge: i32,
        ionic_strength: f64,
        temperature_k: f64,
    ) -> Result<f64, ThermoError> {
        check_ionic_strength(ionic_strength)?;
        let a = debye_huckel_a(temperature_k)?;
        let ba = self.size_term(temperature_k)?;
        if charge == 0 {
            return Ok(0.0);
        }
        let s = ionic_strength.max(SLOPE_FLOOR).sqrt();
        let q = 1.0 + ba * s;
        Ok(-a * f64::from(charge * charge) / (2.0 * s * q * q))
    }
}

/// Which activity model to apply; [`ActivityCorrection::None`] (the default) means constant
/// ionic medium and conditional constants.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "model", rename_all = "snake_case")]
#[non_exhaustive]
pub enum ActivityCorrection {
    /// No correction: γ = 1 (constant ionic medium, conditional constants).
    #[default]
    None,
    /// [`Davies`].
    Davies(Davies),
    /// [`ExtendedDebyeHuckel`].
    ExtendedDebyeHuckel(ExtendedDebyeHuckel),
}

impl ActivityModel for ActivityCorrection {
    fn log10_gamma(&self, charge: i32, ionic_strength: f64, temperature_k: f64) -> Result<f64, ThermoError> {
        match self {
            Self::None => {
                check_ionic_strength(ionic_strength)?;
                Ok(0.0)
            }
            Self::Davies(m) => m.log10_gamma(charge, ionic_strength, temperature_k),
            Self::ExtendedDebyeHuckel(m) => m.log10_gamma(charge, ionic_strength, temperature_k),
        }
    }

    fn d_log10_gamma_d_ionic_strength(
        &self,
        charge: i32,
        ionic_strength: f64,
        temperature_k: f64,
    ) -> Result<f64, ThermoError> {
        match self {
            Self::None => {
                check_ionic_strength(ionic_strength)?;
                Ok(0.0)
            }
            Self::Davies(m) => m.d_log10_gamma_d_ionic_strength(charge, ionic_strength, temperature_k),
            Self::ExtendedDebyeHuckel(m) => {
                m.d_log10_gamma_d_ionic_strength(charge, ionic_strength, temperature_k)
            }
        }
    }
}

impl ActivityCorrection {
    /// `true` for [`ActivityCorrection::None`].
    pub fn is_none(&self) -> bool {
        matches!(self, Self::None)
    }
}

/// Ionic strength I = ½ Σ cᵢ zᵢ² (in the unit of the concentrations).
///
/// # Errors
/// [`ThermoError::LengthMismatch`]; [`ThermoError::InvalidConcentration`] for a negative or
/// non-finite concentration (naming its index).
///
/// # Examples
/// ```
/// // 0.1 mol/kg MgCl₂: ½(0.1·4 + 0.2·1) = 0.3
/// let i = isosbestic::thermo::ionic_strength(&[0.1, 0.2], &[2, -1])?;
/// approx::assert_abs_diff_eq!(i, 0.3, epsilon = 1e-15);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn ionic_strength(concentrations: &[f64], charges: &[i32]) -> Result<f64, ThermoError> {
    if concentrations.len() != charges.len() {
        return Err(ThermoError::LengthMismatch {
            what: "charges (one per concentration)",
            expected: concentrations.len(),
            found: charges.len(),
        });
    }
    let mut sum = 0.0;
    for (i, (&c, &z)) in concentrations.iter().zip(charges).enumerate() {
        if !(c.is_finite() && c >= 0.0) {
            return Err(ThermoError::InvalidConcentration {
                what: format!("concentration {i}"),
                value: c,
            });
        }
        sum += c * f64::from(z * z);
    }
    Ok(0.5 * sum)
}

/// Converts a thermodynamic log₁₀ β of a species formed from components (stoichiometric
/// coefficients νᵢ) to the conditional (concentration) constant for the given activity
/// coefficients:
///
/// ```text
/// β = γ_species c_species / Πᵢ (γᵢ cᵢ)^νᵢ   ⇒   log β_c = log β + Σ νᵢ log γᵢ − log γ_species
/// ```
///
/// # Errors
/// [`ThermoError::LengthMismatch`] when `stoichiometry` and `log10_gamma_components` differ in
/// length.
///
/// # Examples
/// ```
/// use isosbestic::thermo::conditional_log_beta;
/// // M²⁺ + L⁻ ⇌ ML⁺ with log γ = −0.4, −0.1, −0.1: log β_c = log β − 0.4 − 0.1 + 0.1
/// let c = conditional_log_beta(3.0, &[1, 1], &[-0.4, -0.1], -0.1)?;
/// approx::assert_abs_diff_eq!(c, 2.6, epsilon = 1e-12);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn conditional_log_beta(
    log10_beta: f64,
    stoichiometry: &[i32],
    log10_gamma_components: &[f64],
    log10_gamma_species: f64,
) -> Result<f64, ThermoError> {
    if stoichiometry.len() != log10_gamma_components.len() {
        return Err(ThermoError::LengthMismatch {
            what: "component activity coefficients (one per stoichiometric coefficient)",
            expected: stoichiometry.len(),
            found: log10_gamma_components.len(),
        });
    }
    let sum: f64 = stoichiometry
        .iter()
        .zip(log10_gamma_components)
        .map(|(&nu, &lg)| f64::from(nu) * lg)
        .sum();
    Ok(log10_beta + sum - log10_gamma_species)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn no_correction_gives_unit_activity_coefficients() {
        let lg = ActivityCorrection::None.log10_gamma(3, 0.5, 298.15).unwrap();
        assert_abs_diff_eq!(lg, 0.0);
        assert!(ActivityCorrection::None.log10_gamma(1, -0.1, 298.15).is_err());
    }

    #[test]
    fn every_model_is_zero_at_infinite_dilution_and_negative_above() {
        let models = [
            ActivityCorrection::Davies(Davies::default()),
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel {
                size: DebyeHuckelSize::IonSizeAngstrom { value: 4.0 },
            }),
        ];
        for m in models {
            assert_abs_diff_eq!(m.log10_gamma(2, 0.0, 310.0).unwrap(), 0.0);
            assert!(m.log10_gamma(2, 0.05, 310.0).unwrap() < 0.0);
            assert!(m.log10_gamma(1, 0.05, 400.0).is_err());
        }
    }

    #[test]
    fn ion_size_zero_is_the_limiting_law() {
        let m = ExtendedDebyeHuckel {
            size: DebyeHuckelSize::IonSizeAngstrom { value: 0.0 },
        };
        let a = debye_huckel_a(300.0).unwrap();
        assert_abs_diff_eq!(m.log10_gamma(1, 0.01, 300.0).unwrap(), -a * 0.1, epsilon = 1e-14);
    }

    #[test]
    fn analytic_slopes_match_central_differences() {
        // the trait's provided finite-difference slope is the reference for the analytic ones
        struct Plain<M: ActivityModel>(M);
        impl<M: ActivityModel> ActivityModel for Plain<M> {
            fn log10_gamma(&self, z: i32, i: f64, t: f64) -> Result<f64, ThermoError> {
                self.0.log10_gamma(z, i, t)
            }
        }
        let models = [
            ActivityCorrection::Davies(Davies::default()),
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel::default()),
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel {
                size: DebyeHuckelSize::IonSizeAngstrom { value: 6.0 },
            }),
        ];
        for m in models {
            for (z, i, t) in [
                (1, 1e-4, 280.0),
                (2, 0.05, 298.15),
                (-3, 0.7, 350.0),
                (0, 0.2, 300.0),
            ] {
                let exact = m.d_log10_gamma_d_ionic_strength(z, i, t).unwrap();
                let fd = Plain(m).d_log10_gamma_d_ionic_strength(z, i, t).unwrap();
                assert_abs_diff_eq!(exact, fd, epsilon = 1e-7 * exact.abs().max(1e-3));
            }
        }
    }

    #[test]
    fn short_forms_of_the_models_parse_with_their_defaults() {
        let d: ActivityCorrection = serde_json::from_str(r#"{"model":"davies"}"#).unwrap();
        assert_eq!(d, ActivityCorrection::Davies(Davies::default()));
        let e: ActivityCorrection = serde_json::from_str(r#"{"model":"extended_debye_huckel"}"#).unwrap();
        assert_eq!(
            e,
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel {
                size: DebyeHuckelSize::BatesGuggenheim
            })
        );
        assert!(serde_json::from_str::<ActivityCorrection>(r#"{"model":"davies","c":1}"#).is_err());
    }

    #[test]
    fn activity_choice_round_trips_through_json() {
        let m = ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel {
            size: DebyeHuckelSize::BatesGuggenheim,
        });
        let s = serde_json::to_string(&m).unwrap();
        assert_eq!(serde_json::from_str::<ActivityCorrection>(&s).unwrap(), m);
    }
}
