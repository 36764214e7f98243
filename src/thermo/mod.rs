//! Thermodynamics: van 't Hoff and heat-capacity fits of K(T), solvent density and activity
//! models.
//!
//! - [`vanthoff`]: weighted least squares of ln K against 1/T,
//!   `ln K = −ΔH°/(RT) + ΔS°/R`, optionally with a heat-capacity term (Clarke & Glew, Trans.
//!   Faraday Soc. 62 (1966) 539), with standard errors, covariance, the harmonic-mean centring
//!   of Krug, Hunter & Grieger (Nature 261 (1976) 566) and confidence bands.
//! - [`density`]: the solvent density ρ(T) (water by Kell, J. Chem. Eng. Data 20 (1975) 97, a
//!   user table, or a constant), the thermal-expansion factor ρ(T)/ρ(T_prep) applied to molar
//!   totals, and the (dilute) molal scale.
//! - [`activity`]: activity coefficients (Davies; extended Debye–Hückel) with A(T), B(T) for
//!   water, ionic strength, and the conversion of thermodynamic to conditional constants.
//!   **Activity corrections are off by default**: with a constant ionic medium the fitted
//!   constants are *conditional* constants valid for that medium, not thermodynamic ones.
//!
//! All energies are in J/mol, entropies and heat capacities in J K⁻¹ mol⁻¹, temperatures in K.

pub mod activity;
pub mod density;
pub mod vanthoff;

use thiserror::Error;

pub use activity::{
    ActivityCorrection, ActivityModel, Davies, DebyeHuckelSize, ExtendedDebyeHuckel, conditional_log_beta,
    debye_huckel_a, debye_huckel_b_per_angstrom, ionic_strength, water_relative_permittivity,
};
pub use density::{ConcentrationScale, DensityTable, SolventDensity, kell_water_density_kg_m3};
pub use vanthoff::{
    BandPoint, CentredParameters, ConstantScale, ErrorScale, Estimate, HeatCapacityModel, KData,
    ValidVanThoffParams, VanThoffFit, VanThoffParams, Weighting, fit_vant_hoff, ln_k_clarke_glew,
};

/// The molar gas constant R, J mol⁻¹ K⁻¹ (CODATA 2018, exact since the 2019 SI redefinition).
pub const GAS_CONSTANT: f64 = 8.314_462_618;

/// Errors in thermodynamic fitting and solvent/activity corrections.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum ThermoError {
    /// Fewer data points than parameters to fit.
    #[error("{points} K(T) points cannot determine {parameters} parameters (need at least {parameters})")]
    TooFewPoints {
        /// Points given.
        points: usize,
        /// Parameters in the model.
        parameters: usize,
    },
    /// Too few distinct temperatures: the fit would be singular.
    #[error(
        "only {distinct} distinct temperatures for {parameters} parameters: repeated temperatures make the fit singular"
    )]
    TooFewDistinctTemperatures {
        /// Distinct temperatures.
        distinct: usize,
        /// Parameters in the model.
        parameters: usize,
    },
    /// Input arrays of different lengths.
    #[error("{what}: expected {expected} values, found {found}")]
    LengthMismatch {
        /// Which array.
        what: &'static str,
        /// Expected length.
        expected: usize,
        /// Found length.
        found: usize,
    },
    /// A temperature is not positive and finite.
    #[error("point {index}: temperature {temperature_k} K must be above absolute zero and finite")]
    NonPositiveTemperature {
        /// 0-based point index.
        index: usize,
        /// The value.
        temperature_k: f64,
    },
    /// A K value (or its logarithm) is not finite, or K itself is not positive.
    #[error(
        "point {index} at {temperature_k} K: equilibrium constant value {value} is not usable ({reason})"
    )]
    InvalidConstant {
        /// 0-based point index.
        index: usize,
        /// Temperature of the point.
        temperature_k: f64,
        /// The value as given.
        value: f64,
        /// Why.
        reason: &'static str,
    },
    /// An uncertainty is not positive and finite.
    #[error("point {index} at {temperature_k} K: uncertainty {sigma} must be positive and finite")]
    NonPositiveSigma {
        /// 0-based point index.
        index: usize,
        /// Temperature of the point.
        temperature_k: f64,
        /// The value.
        sigma: f64,
    },
    /// A parameter setting is invalid.
    #[error("invalid setting {name} = {value}: {reason}")]
    InvalidParameter {
        /// Setting name.
        name: &'static str,
        /// Its value.
        value: f64,
        /// What is required.
        reason: &'static str,
    },
    /// Residual-based errors need more points than parameters.
    #[error(
        "{points} points for {parameters} parameters leave no degrees of freedom to estimate the scatter; give uncertainties or more points"
    )]
    NoDegreesOfFreedom {
        /// Points given.
        points: usize,
        /// Parameters in the model.
        parameters: usize,
    },
    /// The least-squares problem is numerically singular.
    #[error("the van 't Hoff fit is singular: {reason}")]
    Singular {
        /// Why.
        reason: String,
    },
    /// A density table's temperatures are not strictly increasing.
    #[error(
        "density table '{table}': temperatures must increase strictly, but {temperature_k} K follows {previous_k} K (row {index})"
    )]
    DensityTableNotIncreasing {
        /// Table name.
        table: String,
        /// 0-based row.
        index: usize,
        /// The offending temperature.
        temperature_k: f64,
        /// The one before it.
        previous_k: f64,
    },
    /// A density is not positive and finite.
    #[error(
        "density table '{table}': density {density_kg_m3} kg/m³ at {temperature_k} K must be positive and finite"
    )]
    NonPositiveDensity {
        /// Table (or "constant") name.
        table: String,
        /// Temperature of the row.
        temperature_k: f64,
        /// The value.
        density_kg_m3: f64,
    },
    /// A density table has fewer than two rows or mismatched columns.
    #[error("density table '{table}' needs at least two rows of (temperature, density), found {rows}")]
    DensityTableTooShort {
        /// Table name.
        table: String,
        /// Rows found.
        rows: usize,
    },
    /// A temperature lies outside the range of a table or correlation.
    #[error(
        "{temperature_k} K lies outside the range of {source_name} ({min_k}–{max_k} K); no extrapolation"
    )]
    TemperatureOutsideRange {
        /// The table name or correlation.
        source_name: String,
        /// The requested temperature.
        temperature_k: f64,
        /// Lowest valid temperature.
        min_k: f64,
        /// Highest valid temperature.
        max_k: f64,
    },
    /// An ionic strength or concentration is negative or not finite.
    #[error("{what} {value} must be non-negative and finite")]
    InvalidConcentration {
        /// What the value is.
        what: String,
        /// The value.
        value: f64,
    },
}
