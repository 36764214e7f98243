//! Speciation: the equilibrium model, formation laws log β(T) and the mass-balance solver.
//!
//! This is the forward model of the global fit: from thermodynamic parameters and each sample's
//! conditions it gives C (samples × species) and ∂C/∂ log₁₀ β.
//!
//! ## The equilibrium model
//! n_c components (free concentrations xⱼ, totals Tⱼ from the samples table column
//! `<component>_M`) and n_s species with integer stoichiometry A (species × components). The
//! free components are species with unit rows and β = 1; they are added automatically (see
//! [`EquilibriumModel::check`]), so a model file lists only the formed species. Mass action and
//! mass balance (molar concentrations, constant ionic medium, conditional constants; see
//! below for activity corrections and the molal scale):
//!
//! ```text
//! cᵢ = βᵢ · Πⱼ xⱼ^aᵢⱼ                       (i = 1 … n_s)
//! gⱼ(x) = Σᵢ aᵢⱼ cᵢ − Tⱼ = 0                (j = 1 … n_c)
//! ```
//!
//! ## The solver ([`speciate`], [`speciate_all`])
//! With uⱼ = ln xⱼ, cᵢ = exp(ln βᵢ + aᵢ·u) and the mass balance is the gradient of the
//! strictly convex potential
//!
//! ```text
//! f(u) = Σᵢ cᵢ(u) − Σⱼ Tⱼ uⱼ,    ∇f = Aᵀc − T = g,    ∇²f = Aᵀ diag(c) A = J
//! ```
//!
//! (J is positive definite because A contains the identity rows of the free components). So the
//! solution, when it exists, is unique, and Newton's step J δu = −g is a descent direction of
//! f. The solver:
//! 1. starts from xⱼ = Tⱼ and applies a few diagonal log updates
//!    uⱼ += ln(Tⱼ/Sⱼ)/āⱼ (Sⱼ = Σᵢ aᵢⱼ cᵢ, āⱼ = Σᵢ aᵢⱼ² cᵢ/Sⱼ) that remove the huge excesses a
//!    strong complex gives at the start (or starts from a previous answer, [`Start::Warm`]);
//! 2. runs Newton in u with J factorised by a Jacobi-scaled Cholesky (J's entries can span
//!    many decades), steps capped at 30 in ln x, and a backtracking line search accepting a
//!    step on Armijo's condition for f or on a halving of the relative residual (near the
//!    solution the change of f is below its rounding);
//! 3. if Newton stalls, falls back to Gauss–Seidel sweeps that solve each component's mass
//!    balance exactly with the others held (a bracketed, safeguarded Newton–bisection on the
//!    monotone 1-D function; for one component this alone is the solution), then Newton again.
//!
//! Convergence: max_j |gⱼ| / max(|Tⱼ|, Σᵢ |aᵢⱼ| cᵢ) ≤ [`RESIDUAL_TOLERANCE`] (accepted down to
//! 1e-10 when rounding stops progress). A component with total 0 that enters every species with
//! a non-negative coefficient is absent: its free concentration and every species containing it
//! are exactly 0 and it is removed from the system. A component with a negative coefficient
//! somewhere (H⁺ with hydroxo species, OH⁻ written as −1 H⁺) may have a zero or negative total.
//!
//! ## Derivatives
//! Differentiating g(u(β), β) = 0: J ∂u/∂ln βₖ = −cₖ aₖ and
//! ∂cᵢ/∂log₁₀ βₖ = ln 10 · cᵢ (δᵢₖ + aᵢ·∂u/∂ln βₖ) — one factorisation per sample
//! ([`concentration_derivatives`], [`Derivatives::LogBeta`]). Chain with
//! [`FormationLaw::log10_beta_gradient_with`] for the law parameters.
//!
//! ## Activity corrections and the molal scale ([`speciate_all_in_medium`], [`Medium`])
//! **Off by default.** Without them the model describes a constant ionic medium: the log β are
//! *conditional* constants, valid for the medium the data were measured in (the usual design,
//! with an inert background electrolyte in excess). With an activity model
//! ([`crate::thermo::ActivityCorrection`]: Davies, extended Debye–Hückel; the
//! [`crate::thermo::ActivityModel`] trait admits others) the log β are thermodynamic
//! (infinite-dilution) constants, and each sample's speciation is solved at a self-consistent
//! ionic strength:
//!
//! ```text
//! I = I_bg + ½ Σᵢ cᵢ zᵢ²
//! log βᵢ,c(I) = log βᵢ + Σⱼ aᵢⱼ log γⱼ(I, T) − log γᵢ(I, T)
//! cᵢ = βᵢ,c(I) Πⱼ xⱼ^aᵢⱼ,   Σᵢ aᵢⱼ cᵢ = Tⱼ
//! ```
//!
//! I is found by Newton's method on F(I) = I_bg + ½ Σ zᵢ² cᵢ(I) − I, each evaluation a
//! mass-balance solve warm-started from the last, with the exact slope dF/dI from implicit
//! differentiation (a damped fixed-point step I ← I + ½F when Newton's step is not usable),
//! until |ΔI| ≤ [`IONIC_STRENGTH_TOLERANCE`]·I; otherwise
//! [`SpeciationError::IonicStrengthNotConverged`] names the sample. The derivatives
//! ∂c/∂log β are exact for the coupled system (mass balance and the ionic-strength equation;
//! see [`speciate_all_in_medium`]), so the global fit keeps its exact Jacobian.
//!
//! Every species then needs a charge z: `charge` on each component, from which a formed
//! species' charge follows as Σⱼ aᵢⱼ zⱼ (charge is conserved); a species may state its
//! `charge` too, which must agree ([`SpeciationError::ChargeMismatch`]), or which supplies it
//! when some component has none. Inert ions outside the model enter through the background
//! ionic strength I_bg — or as components with charges and totals, with no species formed.
//!
//! On the molal scale the totals are divided by the kg of solvent per litre of solution, the
//! speciation runs in mol/kg (β are molal constants, I is molal), and concentrations and
//! derivatives come back in mol/L for Beer–Lambert. On the molar scale the activity models are
//! used with I in mol/L, the usual dilute approximation (mol/L ≈ mol/kg within 0.3 % for water
//! at 25 °C, 4 % at 95 °C).
//!
//! ## A model file (TOML; JSON has the same structure)
//! An invented system: a metal M binding a halide X as MX, MX₂, MX₃; only M-containing species
//! absorb; MX₃ is a weak absorber with an ε ceiling.
//!
//! ```
//! use isosbestic::speciation::{EquilibriumModel, FormationLaw, Optics};
//! let text = r#"
//! [[components]]
//! name = "M"
//! absorbs = true
//! charge = 2        # optional; needed only for activity corrections
//!
//! [[components]]
//! name = "X"
//! absorbs = false
//! charge = -1
//!
//! [[species]]
//! name = "MX"
//! stoichiometry = { M = 1, X = 1 }
//! absorbs = true
//! law = { kind = "fixed", log_beta = { value = 1.5 } }
//!
//! [[species]]
//! name = "MX2"
//! stoichiometry = { M = 1, X = 2 }
//! absorbs = true
//! known_spectrum = "spectra/mx2.csv"
//! law = { kind = "van_t_hoff", log_beta_ref = { value = 2.7 }, dh_ref = { value = 18000.0 } }
//!
//! [[species]]
//! name = "MX3"
//! stoichiometry = { M = 1, X = 3 }
//! absorbs = true
//! max_absorptivity = 40.0
//!
//! [species.law]
//! kind = "heat_capacity"
//! t_ref_k = 310.0
//! log_beta_ref = { value = 3.4 }
//! dh_ref = { value = 45000.0 }
//! dcp = { value = -150.0, fixed = true }
//! "#;
//! let model = EquilibriumModel::from_toml_str(text)?.check()?;
//! assert_eq!(model.n_species(), 5); // M, X, MX, MX2, MX3
//! assert_eq!(model.species()[1].optics, Optics::Transparent);
//! assert_eq!(model.species()[4].law.parameter_names(), ["log_beta_ref", "dh_ref", "dcp"]);
//! assert_eq!(model.charges()?, vec![2, -1, 1, 0, -1]); // MX⁺, MX₂, MX₃⁻ from the components
//! model.check_totals(&["M".to_string(), "X".to_string()])?;
//! assert!(model.check_totals(&["M".to_string()]).is_err());
//! # Ok::<(), isosbestic::speciation::SpeciationError>(())
//! ```

mod law;
mod model;
mod solver;

pub use law::{
    DEFAULT_REFERENCE_K, FixedLaw, FormationLaw, GAS_CONSTANT, HeatCapacityLaw, Law, Parameter,
    StandardQuantities, VanTHoffLaw,
};
pub use model::{ComponentSpec, EquilibriumModel, Optics, Species, SpeciesRole, SpeciesSpec, ValidModel};
pub use solver::{
    Derivatives, IONIC_STRENGTH_TOLERANCE, LOOSEST_TOLERANCE, Medium, RESIDUAL_TOLERANCE, SolveRoute,
    Speciation, SpeciationBatch, Start, concentration_derivatives, speciate, speciate_all,
    speciate_all_in_medium, speciate_all_into,
};

use thiserror::Error;

/// Errors in the equilibrium model or the speciation solver. Each names the species,
/// component or sample concerned.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SpeciationError {
    /// The model file could not be parsed.
    #[error("cannot parse the model ({format}): {message}")]
    Parse {
        /// "TOML" or "JSON".
        format: &'static str,
        /// The parser's message, with line and column.
        message: String,
    },
    /// The model declares no component.
    #[error("the model has no components")]
    NoComponents,
    /// A component or species has an empty name.
    #[error("{what} number {index} has an empty name")]
    EmptyName {
        /// "component" or "species".
        what: &'static str,
        /// 0-based position in its list.
        index: usize,
    },
    /// A component is listed twice.
    #[error("component '{component}' is listed more than once")]
    DuplicateComponent {
        /// The name.
        component: String,
    },
    /// Two species share a name, or a species is named like a component.
    #[error("species '{species}' is defined more than once (components are species too)")]
    DuplicateSpecies {
        /// The name.
        species: String,
    },
    /// A stoichiometry names a component the model does not declare.
    #[error("species '{species}' uses component '{component}', which is not declared")]
    UnknownComponent {
        /// The species.
        species: String,
        /// The unknown name.
        component: String,
    },
    /// All stoichiometric coefficients of a species are zero.
    #[error("species '{species}' has no non-zero stoichiometric coefficient")]
    ZeroStoichiometry {
        /// The species.
        species: String,
    },
    /// Two species have the same stoichiometry: only the sum of their β could be determined.
    #[error(
        "species '{species}' has the same stoichiometry as '{same_as}'; their concentrations would \
         stay in a fixed ratio, so merge them into one species"
    )]
    DuplicateStoichiometry {
        /// The later species.
        species: String,
        /// The earlier species (or free component) with the same row.
        same_as: String,
    },
    /// A law parameter is not finite, or the reference temperature is not positive.
    #[error("species '{species}': parameter '{parameter}' = {value} is not valid")]
    InvalidParameter {
        /// The species.
        species: String,
        /// The parameter name.
        parameter: String,
        /// The value.
        value: f64,
    },
    /// `max_absorptivity` is not a positive finite number.
    #[error("species '{species}': max_absorptivity {value} L/(mol cm) must be positive and finite")]
    InvalidMaxAbsorptivity {
        /// The species (or free component).
        species: String,
        /// The value.
        value: f64,
    },
    /// Components without a total in the samples table.
    #[error("no total (column '<component>_M') for component(s): {}", components.join(", "))]
    MissingTotals {
        /// The components without a total.
        components: Vec<String>,
    },
    /// A batch's [`SpeciationBatch::tolerance`] outside the range the solver supports.
    #[error(
        "speciation tolerance {value} is outside [{}, {}]",
        RESIDUAL_TOLERANCE,
        LOOSEST_TOLERANCE
    )]
    InvalidTolerance {
        /// The tolerance given.
        value: f64,
    },
    /// An array has the wrong size.
    #[error("shape mismatch in {what}: expected {expected}, found {found}")]
    Shape {
        /// Which array.
        what: &'static str,
        /// Expected size.
        expected: usize,
        /// Found size.
        found: usize,
    },
    /// A total is not finite, or negative for a component that only enters positively.
    #[error("sample '{sample}': total of '{component}' is {value} mol/L, which is not valid")]
    InvalidTotal {
        /// Sample id.
        sample: String,
        /// Component.
        component: String,
        /// The value.
        value: f64,
    },
    /// A log β is not finite.
    #[error("sample '{sample}': log β of '{species}' is {value}")]
    InvalidLogBeta {
        /// Sample id.
        sample: String,
        /// Species.
        species: String,
        /// The value.
        value: f64,
    },
    /// The log β given for a free component is not 0.
    #[error("sample '{sample}': log β of free component '{component}' must be 0, found {value}")]
    FreeComponentLogBeta {
        /// Sample id.
        sample: String,
        /// Component.
        component: String,
        /// The value.
        value: f64,
    },
    /// The mass balance could not be solved.
    #[error(
        "sample '{sample}': speciation did not converge (relative residual {residual:e} after \
         {iterations} iterations); check that the totals admit a solution"
    )]
    NotConverged {
        /// Sample id.
        sample: String,
        /// Best relative residual reached.
        residual: f64,
        /// Iterations used.
        iterations: usize,
    },
    /// The mass-balance Jacobian could not be factorised for the derivatives.
    #[error("sample '{sample}': the mass-balance Jacobian is singular")]
    SingularJacobian {
        /// Sample id.
        sample: String,
    },
    /// A species' charge contradicts the charges of its components.
    #[error(
        "species '{species}': charge {given} differs from {from_components}, the stoichiometric sum of \
         its components' charges (charge is conserved; correct or remove one of them)"
    )]
    ChargeMismatch {
        /// The species.
        species: String,
        /// The charge given in the model.
        given: i32,
        /// Σⱼ aⱼ zⱼ over its components.
        from_components: i32,
    },
    /// Activity corrections need a charge the model does not give.
    #[error(
        "activity corrections need the charge of every species, but '{species}' has none: give \
         `charge` for it, or for every component it is made of"
    )]
    UnknownCharge {
        /// The species (or free component).
        species: String,
    },
    /// An activity coefficient could not be evaluated (e.g. a temperature outside the range of
    /// the water properties behind A(T), B(T)).
    #[error("sample '{sample}': activity coefficients: {source}")]
    Activity {
        /// Sample id.
        sample: String,
        /// Why.
        source: crate::thermo::ThermoError,
    },
    /// Ionic strength and speciation did not reach self-consistency.
    #[error(
        "sample '{sample}': ionic strength did not become self-consistent with the speciation \
         (I = {ionic_strength:e}, last change {change:e} after {iterations} iterations)"
    )]
    IonicStrengthNotConverged {
        /// Sample id.
        sample: String,
        /// Last ionic strength used.
        ionic_strength: f64,
        /// Last |ΔI|.
        change: f64,
        /// Outer iterations used.
        iterations: usize,
    },
    /// A per-sample setting of the solution medium is unusable.
    #[error("sample '{sample}': {what} is {value}, which is not valid ({requirement})")]
    InvalidMedium {
        /// Sample id.
        sample: String,
        /// Which setting.
        what: &'static str,
        /// Its value.
        value: f64,
        /// What is required.
        requirement: &'static str,
    },
    /// A covariance for [`FormationLaw::to_standard`] has the wrong size.
    #[error("covariance has {found} entries; the law has {free} free parameters ({free}² entries expected)")]
    CovarianceShape {
        /// Free parameters of the law.
        free: usize,
        /// Entries given.
        found: usize,
    },
}
