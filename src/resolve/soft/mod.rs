//! Soft resolution: multivariate curve resolution by alternating least squares (MCR-ALS).
//!
//! Tauler, Chemom. Intell. Lab. Syst. 30 (1995) 133; de Juan & Tauler, Crit. Rev. Anal. Chem. 36
//! (2006) 163. Without an equilibrium model, D (samples × wavelengths) is split as
//!
//! ```text
//! D = diag(b)·C·Sᵀ + E
//! ```
//!
//! (b the path lengths, C samples × species, S wavelengths × species) by alternating two
//! constrained least-squares steps from an initial estimate:
//!
//! 1. C from S, row by row (sample by sample): non-negativity by NNLS
//!    ([`crate::resolve::linear::nnls_normal`], never by clipping negative values), species
//!    declared absent in a sample held at zero, and optionally closure (mass balance, below);
//!    then optionally unimodality of each profile along temperature within each series;
//! 2. S from C for all wavelengths at once ([`crate::resolve::linear::solve_spectra`]):
//!    non-negative or not, known spectra held fixed.
//!
//! When neither closure nor a known spectrum fixes the scale of a species, its spectrum is
//! scaled to unit Euclidean norm after each S step (and its profile accordingly); the fit is
//! unchanged.
//!
//! ## Closure (mass balance)
//! For each listed component m, the sum of the concentrations of the species containing it,
//! weighted by the number of m in each (`a_mk`), equals the component's total in each sample:
//! Σ_k a_mk·c_ik = t_im. This is an equality constraint on each row of C, imposed together with
//! non-negativity by the method of weighting with deferred correction (Van Loan, SIAM J. Numer.
//! Anal. 22 (1985) 851): the row solves
//!
//! ```text
//! min ‖b_i·S·c − d_i‖² + w²‖A·c − t̃‖²,  c ≥ 0,
//! ```
//!
//! with w² = `weight` × trace(b_i²SᵀS)/trace(AᵀA), and the target is corrected,
//! t̃ ← t̃ + (t − A·c), until A·c = t to 1e-14 relative. At the fixed point the stationarity
//! conditions are exactly those of the equality-constrained problem (the multiplier is
//! w²(t̃ − t)), so closure holds to rounding while w stays moderate and the normal equations well
//! conditioned. Only components whose containing species are all resolved should be listed.
//!
//! ## Convergence
//! The lack of fit LOF = 100·√(Σe²/Σd²) % (Tauler 1995) is computed after every iteration.
//! The run stops as [`SoftTermination::Converged`] when its relative change falls below
//! `tolerance` (or LOF falls below 1e-9 %, an exact fit), as [`SoftTermination::Diverging`]
//! when it rose in `divergence_patience` consecutive iterations, or at the iteration limit; the
//! last state is returned in every case.
//!
//! ## Rotational ambiguity
//! [`band_boundaries`] gives, for each species, the range of its share of the signal over all
//! transformations that keep the fit and (within a penalty) the constraints (Tauler, J. Chemom.
//! 15 (2001) 627). See [`bands`] for the method and its limits.
//!
//! ## Hybrid hard–soft
//! Optionally ([`Hybrid`]) the profiles of selected species follow an equilibrium model whose
//! parameters are refitted to the soft profiles at every iteration (de Juan, Maeder, Martínez,
//! Tauler, Chemom. Intell. Lab. Syst. 54 (2000) 123); see [`hybrid`] for the variant used.
//! The model's speciation runs in the same solution medium as the global fit's, with the same
//! settings: activity corrections with a background electrolyte (the ionic strength iterated
//! to self-consistency in each sample), the molal scale, thermal expansion of the totals. Off
//! by default (an ideal medium: conditional constants, totals as given).
//!
//! # Examples
//! ```
//! use isosbestic::resolve::soft::{resolve_matrix, SampleLayout, SoftParams, InitialEstimate};
//! use ndarray::Array2;
//! // two species with selective bands, one turning into the other along 8 samples
//! let c = Array2::from_shape_fn((8, 2), |(i, k)| if k == 0 { 1.0 - i as f64 / 7.0 } else { i as f64 / 7.0 });
//! let s = Array2::from_shape_fn((40, 2), |(j, k)| {
//!     let centre = if k == 0 { 10.0 } else { 30.0 };
//!     (-0.5 * ((j as f64 - centre) / 4.0).powi(2)).exp()
//! });
//! let d = c.dot(&s.t());
//! let params = SoftParams { n_species: 2, initial: InitialEstimate::PurestVariables { noise_percent: 1.0 }, ..SoftParams::default() }
//!     .check()?;
//! let out = resolve_matrix(d.view(), &SampleLayout::single_series(8), &params)?;
//! assert!(out.lack_of_fit_percent < 1e-3);
//! assert!(out.explained_variance_percent > 99.999);
//! # Ok::<(), isosbestic::resolve::soft::SoftError>(())
//! ```

pub mod bands;
pub mod hybrid;
mod init;
mod unimodal;

pub use bands::{BandParams, BoundaryProfiles, SpeciesBand, ValidBandParams, band_boundaries};
pub use hybrid::{HybridParameter, HybridResult};

use super::hard::{ConcentrationBasis, HardFitError, HardFitParams};
use super::linear::{self, Constraint, LinearError, NnlsParams, nnls_normal};
use super::lm::LmParams;
use crate::data::{Sample, SpectraSet, SpectraSetError};
use crate::factor::{FactorError, decompose};
use crate::speciation::{EquilibriumModel, SpeciationError, ValidModel};
use crate::thermo::{ActivityCorrection, ConcentrationScale};
use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use ndarray_linalg::LeastSquaresSvd;
use serde::{Deserialize, Serialize};
use thiserror::Error;

/// Why a soft resolution could not be run.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SoftError {
    /// A setting has a nonsense value.
    #[error("soft-resolution setting {name} is invalid: {reason}")]
    InvalidParameter {
        /// The setting.
        name: &'static str,
        /// What is wrong and what is required.
        reason: String,
    },
    /// Sizes do not agree.
    #[error("shape mismatch: {what}")]
    Shape {
        /// What disagrees.
        what: String,
    },
    /// A non-finite absorbance.
    #[error("absorbance of sample '{sample}' at wavelength index {wavelength_index} is not a finite number")]
    NonFinite {
        /// Sample id.
        sample: String,
        /// Column of D, 0-based.
        wavelength_index: usize,
    },
    /// More species than the data can hold.
    #[error("{n_species} species cannot be resolved from {samples} samples × {wavelengths} wavelengths")]
    TooManySpecies {
        /// Requested number of species.
        n_species: usize,
        /// Samples in D.
        samples: usize,
        /// Wavelengths in D.
        wavelengths: usize,
    },
    /// A known spectrum does not have one value per wavelength.
    #[error(
        "known spectrum of species {species} has {points} values, the data have {wavelengths} wavelengths"
    )]
    KnownSpectrumLength {
        /// Species index.
        species: usize,
        /// Values given.
        points: usize,
        /// Wavelengths in D.
        wavelengths: usize,
    },
    /// A sample id that is not in the data.
    #[error("sample '{id}' named in the absence list is not in the data")]
    UnknownSample {
        /// The id.
        id: String,
    },
    /// A closure component without totals in the samples.
    #[error("closure on component '{component}', but the samples give no total for it")]
    MissingTotal {
        /// Component name.
        component: String,
    },
    /// A closure that no non-negative row can meet.
    #[error(
        "sample '{sample}': component '{component}' has a positive total but every species containing it is declared absent"
    )]
    ClosureInfeasible {
        /// Sample id.
        sample: String,
        /// Component name.
        component: String,
    },
    /// A species or component name not in the equilibrium model.
    #[error("'{name}' is not a {kind} of the equilibrium model")]
    NotInModel {
        /// The name.
        name: String,
        /// "species" or "component".
        kind: &'static str,
    },
    /// The hybrid option's equilibrium model is invalid or its speciation failed.
    #[error("hybrid model: {0}")]
    Model(SpeciationError),
    /// A linear solve failed.
    #[error(transparent)]
    Linear(#[from] LinearError),
    /// Factor analysis (initial estimate, PCA reconstruction) failed.
    #[error(transparent)]
    Factor(#[from] FactorError),
    /// The spectra set could not be prepared (e.g. selecting measurement samples).
    #[error(transparent)]
    Set(#[from] SpectraSetError),
    /// A small dense computation failed.
    #[error("numerical failure: {what}")]
    Numerical {
        /// What failed.
        what: String,
    },
}

/// Closure (mass balance) per sample: Σ_k a_mk·c_ik = t_im for each listed component m.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Closure {
    /// Components whose totals are balanced (names as in the samples' totals).
    pub components: Vec<String>,
    /// a_mk: `counts[k][m]` is the number of component m in resolved species k.
    pub counts: Vec<Vec<f64>>,
    /// Relative weight of the balance in the weighted least squares (default 1e6; see the
    /// module docs — the deferred correction makes the balance exact whatever the weight).
    #[serde(default = "default_closure_weight")]
    pub weight: f64,
}

fn default_closure_weight() -> f64 {
    1e6
}

impl Closure {
    /// Closure from an equilibrium model: `species` names the resolved species in order,
    /// `components` the balanced components.
    ///
    /// # Errors
    /// [`SoftError::NotInModel`] for an unknown species or component name.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::resolve::soft::Closure;
    /// use isosbestic::speciation::EquilibriumModel;
    /// let model = EquilibriumModel::from_toml_str(r#"
    ///     components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
    ///     [[species]]
    ///     name = "MX2"
    ///     stoichiometry = { M = 1, X = 2 }
    ///     absorbs = true
    ///     law = { kind = "van_t_hoff", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 } }
    /// "#)?.check()?;
    /// let closure = Closure::from_model(&model, &["M", "MX2"], &["M"])?;
    /// assert_eq!(closure.counts, vec![vec![1.0], vec![1.0]]);
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn from_model(model: &ValidModel, species: &[&str], components: &[&str]) -> Result<Self, SoftError> {
        let nc = model.n_components();
        let comp_idx = components
            .iter()
            .map(|c| {
                model
                    .component_names()
                    .iter()
                    .position(|n| n == c)
                    .ok_or_else(|| SoftError::NotInModel {
                        name: (*c).to_string(),
                        kind: "component",
                    })
            })
            .collect::<Result<Vec<_>, _>>()?;
        let counts = species
            .iter()
            .map(|s| {
                let k = model.species_index(s).ok_or_else(|| SoftError::NotInModel {
                    name: (*s).to_string(),
                    kind: "species",
                })?;
                Ok(comp_idx
                    .iter()
                    .map(|&m| model.stoichiometry().get(k * nc + m).copied().unwrap_or(0.0))
                    .collect())
            })
            .collect::<Result<Vec<Vec<f64>>, SoftError>>()?;
        Ok(Self {
            components: components.iter().map(|c| (*c).to_string()).collect(),
            counts,
            weight: default_closure_weight(),
        })
    }
}

/// A species whose pure spectrum is known and held fixed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct KnownSpectrum {
    /// Species index (column of S).
    pub species: usize,
    /// ε at each wavelength of D, L mol⁻¹ cm⁻¹ (or in the units of the problem).
    pub spectrum: Vec<f64>,
}

/// A species known to be absent from a sample (its concentration held at zero there).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Absence {
    /// Sample id.
    pub sample: String,
    /// Species index.
    pub species: usize,
}

/// Shape constraint on the concentration profiles.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Unimodality {
    /// No shape constraint.
    #[default]
    Off,
    /// Each species' profile is unimodal along increasing temperature within each series
    /// (least-squares unimodal regression; see the `unimodal` submodule docs).
    AlongTemperature,
}

/// Where the alternating least squares start.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum InitialEstimate {
    /// Concentration profiles from evolving factor analysis within each series along
    /// temperature.
    EvolvingFactors,
    /// Concentration profiles from the purest wavelengths (Windig & Guilment 1991).
    PurestVariables {
        /// Noise offset α as a percentage of the largest mean absorbance (typically 1–5).
        noise_percent: f64,
    },
    /// Given spectra, wavelengths × species.
    Spectra {
        /// S₀.
        spectra: Array2<f64>,
    },
}

/// A resolved species whose profile follows a species of the equilibrium model.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HybridSpecies {
    /// Column of C (resolved species index).
    pub resolved: usize,
    /// Name of the model species (a free component or a formed species).
    pub model_species: String,
}

/// The hybrid hard–soft option: an equilibrium model for some of the profiles.
///
/// The solution medium of the model's speciation has the same settings, with the same
/// meaning, as the global fit's ([`HardFitParams`]): `concentrations`, `concentration_scale`,
/// `activity` and `medium_ionic_strength`. By default it is ideal: totals as given, molar
/// scale, no activity corrections (conditional constants for a constant ionic medium).
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::{Hybrid, HybridSpecies, SoftParams};
/// use isosbestic::speciation::EquilibriumModel;
/// use isosbestic::thermo::{ActivityCorrection, Davies};
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true, charge = 2 }, { name = "X", absorbs = false, charge = -1 }]
///     [[species]]
///     name = "MX"
///     stoichiometry = { M = 1, X = 1 }
///     absorbs = true
///     law = { kind = "van_t_hoff", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 } }
/// "#)?;
/// let species = vec![
///     HybridSpecies { resolved: 0, model_species: "M".into() },
///     HybridSpecies { resolved: 1, model_species: "MX".into() },
/// ];
/// let hybrid = Hybrid {
///     activity: ActivityCorrection::Davies(Davies::default()),
///     medium_ionic_strength: 0.1,
///     ..Hybrid::new(model, species)
/// };
/// assert!(SoftParams { hybrid: Some(hybrid.clone()), ..SoftParams::default() }.check().is_ok());
/// // a negative background ionic strength is refused, naming the setting
/// let bad = Hybrid { medium_ionic_strength: -0.1, ..hybrid };
/// let e = SoftParams { hybrid: Some(bad), ..SoftParams::default() }.check().unwrap_err();
/// assert!(e.to_string().contains("hybrid.medium_ionic_strength"));
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Hybrid {
    /// The equilibrium model; its free law parameters are refitted at every iteration.
    pub model: EquilibriumModel,
    /// Which resolved species follow which model species.
    pub species: Vec<HybridSpecies>,
    /// Settings of the parameter fit (default [`LmParams::default`]).
    #[serde(default)]
    pub solver: LmParams,
    /// How the totals at the measurement temperature are obtained from those prepared (default
    /// as given; thermal expansion needs each sample's preparation temperature, see
    /// [`SampleLayout::preparation_temperatures_k`]; explicit factors are one per row of D,
    /// i.e. per measurement sample in [`resolve`]).
    #[serde(default)]
    pub concentrations: ConcentrationBasis,
    /// Concentration scale of the model's formation constants (default molar); on the molal
    /// scale the speciation runs in mol/kg (see [`HardFitParams::concentration_scale`]).
    #[serde(default)]
    pub concentration_scale: ConcentrationScale,
    /// Activity corrections (default none). When on, the fitted log β are thermodynamic
    /// (infinite dilution) constants and every model species needs a charge.
    #[serde(default)]
    pub activity: ActivityCorrection,
    /// Ionic strength of the inert background electrolyte, mol/L as prepared (scaled like the
    /// totals); used only with `activity`.
    #[serde(default)]
    pub medium_ionic_strength: f64,
}

impl Hybrid {
    /// The hybrid option for `model` and `species`, with the default solver and an ideal
    /// medium (totals as given, molar scale, no activity corrections).
    pub fn new(model: EquilibriumModel, species: Vec<HybridSpecies>) -> Self {
        Self {
            model,
            species,
            solver: LmParams::default(),
            concentrations: ConcentrationBasis::AsGiven,
            concentration_scale: ConcentrationScale::Molar,
            activity: ActivityCorrection::None,
            medium_ionic_strength: 0.0,
        }
    }

    /// The global fit's settings that describe this hybrid's solution medium (every other
    /// setting at its default).
    fn medium_params(&self) -> HardFitParams {
        HardFitParams {
            concentrations: self.concentrations.clone(),
            concentration_scale: self.concentration_scale,
            activity: self.activity,
            medium_ionic_strength: self.medium_ionic_strength,
            ..HardFitParams::default()
        }
    }
}

/// Settings of a soft resolution (unchecked; [`SoftParams::check`] validates them).
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::SoftParams;
/// assert!(SoftParams::default().check().is_ok());
/// let bad = SoftParams { tolerance: -1.0, ..SoftParams::default() };
/// assert!(bad.check().is_err());
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SoftParams {
    /// Number of species resolved (columns of C and S; default 2).
    pub n_species: usize,
    /// Constraint on C (default non-negative, by NNLS).
    pub concentrations: Constraint,
    /// Constraint on S (default non-negative, by NNLS).
    pub spectra: Constraint,
    /// Closure / mass balance (default none).
    pub closure: Option<Closure>,
    /// Spectra held fixed.
    pub known_spectra: Vec<KnownSpectrum>,
    /// Species absent from given samples.
    pub absent: Vec<Absence>,
    /// Unimodality of the concentration profiles (default off).
    pub unimodality: Unimodality,
    /// Initial estimate (default evolving factor analysis).
    pub initial: InitialEstimate,
    /// Convergence: relative change of the lack of fit between iterations (default 1e-6).
    pub tolerance: f64,
    /// Iteration limit (default 2000).
    pub max_iterations: usize,
    /// Consecutive rises of the lack of fit that count as divergence (default 20).
    pub divergence_patience: usize,
    /// Hybrid hard–soft option (default none).
    pub hybrid: Option<Hybrid>,
}

impl Default for SoftParams {
    fn default() -> Self {
        Self {
            n_species: 2,
            concentrations: Constraint::NonNegative,
            spectra: Constraint::NonNegative,
            closure: None,
            known_spectra: Vec::new(),
            absent: Vec::new(),
            unimodality: Unimodality::Off,
            initial: InitialEstimate::EvolvingFactors,
            tolerance: 1e-6,
            max_iterations: 2000,
            divergence_patience: 20,
            hybrid: None,
        }
    }
}

/// Checked settings, made by [`SoftParams::check`].
#[derive(Debug, Clone, PartialEq)]
pub struct ValidSoftParams {
    params: SoftParams,
    /// The checked model and (resolved column, model species index) pairs of the hybrid option.
    hybrid: Option<(ValidModel, Vec<(usize, usize)>)>,
}

impl ValidSoftParams {
    /// The settings.
    pub fn params(&self) -> &SoftParams {
        &self.params
    }
}

fn invalid(name: &'static str, reason: impl Into<String>) -> SoftError {
    SoftError::InvalidParameter {
        name,
        reason: reason.into(),
    }
}

impl SoftParams {
    /// Validates the settings that do not depend on the data.
    ///
    /// # Errors
    /// [`SoftError::InvalidParameter`] naming the setting.
    pub fn check(self) -> Result<ValidSoftParams, SoftError> {
        let k = self.n_species;
        if k == 0 {
            return Err(invalid("n_species", "at least one species is needed"));
        }
        if !(self.tolerance.is_finite() && self.tolerance > 0.0) {
            return Err(invalid(
                "tolerance",
                format!("{} is not a positive number", self.tolerance),
            ));
        }
        if self.max_iterations == 0 {
            return Err(invalid("max_iterations", "at least one iteration is needed"));
        }
        if self.divergence_patience == 0 {
            return Err(invalid("divergence_patience", "must be at least 1"));
        }
        if let Some(cl) = &self.closure {
            if cl.components.is_empty() {
                return Err(invalid("closure.components", "lists no component"));
            }
            if cl.counts.len() != k {
                return Err(invalid(
                    "closure.counts",
                    format!("{} rows for {k} species", cl.counts.len()),
                ));
            }
            for (s, row) in cl.counts.iter().enumerate() {
                if row.len() != cl.components.len() {
                    return Err(invalid(
                        "closure.counts",
                        format!(
                            "species {s} has {} counts for {} components",
                            row.len(),
                            cl.components.len()
                        ),
                    ));
                }
                if row.iter().any(|v| !(v.is_finite() && *v >= 0.0)) {
                    return Err(invalid(
                        "closure.counts",
                        format!("species {s}: counts must be finite and not negative"),
                    ));
                }
            }
            for (m, name) in cl.components.iter().enumerate() {
                if cl.counts.iter().all(|row| row[m] <= 0.0) {
                    return Err(invalid(
                        "closure.counts",
                        format!("no species contains component '{name}'"),
                    ));
                }
            }
            if !(cl.weight.is_finite() && cl.weight > 0.0) {
                return Err(invalid(
                    "closure.weight",
                    format!("{} is not positive", cl.weight),
                ));
            }
        }
        let mut seen = vec![false; k];
        for ks in &self.known_spectra {
            match seen.get_mut(ks.species) {
                None => {
                    return Err(invalid(
                        "known_spectra",
                        format!("species {} is out of range (0…{})", ks.species, k - 1),
                    ));
                }
                Some(true) => {
                    return Err(invalid(
                        "known_spectra",
                        format!("species {} is given twice", ks.species),
                    ));
                }
                Some(f) => *f = true,
            }
            if ks.spectrum.iter().any(|v| !v.is_finite()) {
                return Err(invalid(
                    "known_spectra",
                    format!("species {}: non-finite value", ks.species),
                ));
            }
        }
        if let Some(a) = self.absent.iter().find(|a| a.species >= k) {
            return Err(invalid(
                "absent",
                format!("species {} (sample '{}') is out of range", a.species, a.sample),
            ));
        }
        match &self.initial {
            InitialEstimate::EvolvingFactors => {}
            InitialEstimate::PurestVariables { noise_percent } => {
                if !(noise_percent.is_finite() && *noise_percent > 0.0) {
                    return Err(invalid(
                        "initial.noise_percent",
                        format!("{noise_percent} is not a positive percentage"),
                    ));
                }
            }
            InitialEstimate::Spectra { spectra } => {
                if spectra.ncols() != k {
                    return Err(invalid(
                        "initial.spectra",
                        format!("{} columns for {k} species", spectra.ncols()),
                    ));
                }
                if spectra.iter().any(|v| !v.is_finite()) {
                    return Err(invalid("initial.spectra", "non-finite value"));
                }
            }
        }
        let hybrid = match &self.hybrid {
            None => None,
            Some(h) => {
                let model = h.model.check().map_err(SoftError::Model)?;
                if h.species.is_empty() {
                    return Err(invalid("hybrid.species", "lists no species"));
                }
                let mut pairs = Vec::with_capacity(h.species.len());
                for hs in &h.species {
                    if hs.resolved >= k {
                        return Err(invalid(
                            "hybrid.species",
                            format!("resolved species {} is out of range (0…{})", hs.resolved, k - 1),
                        ));
                    }
                    if pairs.iter().any(|&(r, _)| r == hs.resolved) {
                        return Err(invalid(
                            "hybrid.species",
                            format!("resolved species {} is given twice", hs.resolved),
                        ));
                    }
                    let m = model
                        .species_index(&hs.model_species)
                        .ok_or_else(|| SoftError::NotInModel {
                            name: hs.model_species.clone(),
                            kind: "species",
                        })?;
                    pairs.push((hs.resolved, m));
                }
                let i_bg = h.medium_ionic_strength;
                if !(i_bg.is_finite() && i_bg >= 0.0) {
                    return Err(invalid(
                        "hybrid.medium_ionic_strength",
                        format!("{i_bg} is not a non-negative ionic strength (mol/L)"),
                    ));
                }
                if !h.activity.is_none() {
                    model.charges().map_err(SoftError::Model)?;
                }
                Some((model, pairs))
            }
        };
        Ok(ValidSoftParams { params: self, hybrid })
    }
}

/// What the resolution needs to know about each sample (rows of D).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SampleLayout {
    /// Sample ids (named in errors and absences).
    pub ids: Vec<String>,
    /// Series label of each sample.
    pub series: Vec<String>,
    /// Temperature of each sample, K (orders the profiles within a series).
    pub temperatures_k: Vec<f64>,
    /// Path length b of each sample, cm.
    pub path_cm: Vec<f64>,
    /// Component names of `totals_m`.
    pub components: Vec<String>,
    /// Totals, samples × components, mol/L as prepared (used by closure and the hybrid option).
    pub totals_m: Array2<f64>,
    /// Temperature at which each sample's totals were made up, K (used only by the hybrid
    /// option's thermal-expansion correction).
    pub preparation_temperatures_k: Vec<f64>,
}

impl SampleLayout {
    /// One series of `n` samples in order (ids "0", "1", …, temperatures 0, 1, … K as a mere
    /// order), path 1 cm, no totals, prepared at 25 °C: the layout for a bare matrix.
    ///
    /// # Examples
    /// ```
    /// let l = isosbestic::resolve::soft::SampleLayout::single_series(3);
    /// assert_eq!(l.ids, vec!["0", "1", "2"]);
    /// ```
    pub fn single_series(n: usize) -> Self {
        Self {
            ids: (0..n).map(|i| i.to_string()).collect(),
            series: vec![String::new(); n],
            temperatures_k: (0..n).map(|i| i as f64).collect(),
            path_cm: vec![1.0; n],
            components: Vec::new(),
            totals_m: Array2::zeros((n, 0)),
            preparation_temperatures_k: vec![crate::data::DEFAULT_PREPARATION_K; n],
        }
    }

    /// The layout of a spectra set's samples.
    pub fn from_set(set: &SpectraSet) -> Self {
        Self {
            ids: set.samples().iter().map(|s| s.id.clone()).collect(),
            series: set.samples().iter().map(|s| s.series.clone()).collect(),
            temperatures_k: set.temperatures_k().to_vec(),
            path_cm: set.path_lengths_cm().to_vec(),
            components: set.components().to_vec(),
            totals_m: set.totals_matrix(),
            preparation_temperatures_k: set
                .samples()
                .iter()
                .map(|s| s.preparation_temperature_k)
                .collect(),
        }
    }

    /// Rows of each series in increasing temperature, series in order of first appearance.
    fn groups(&self) -> Vec<Vec<usize>> {
        let mut labels: Vec<&String> = Vec::new();
        for s in &self.series {
            if !labels.contains(&s) {
                labels.push(s);
            }
        }
        labels
            .iter()
            .map(|l| {
                let mut rows: Vec<usize> = (0..self.series.len())
                    .filter(|&i| &self.series[i] == *l)
                    .collect();
                rows.sort_by(|&a, &b| self.temperatures_k[a].total_cmp(&self.temperatures_k[b]));
                rows
            })
            .collect()
    }
}

/// How the alternating least squares ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SoftTermination {
    /// The relative change of the lack of fit fell below the tolerance (or the fit is exact).
    Converged,
    /// The iteration limit was reached.
    IterationLimit,
    /// The lack of fit rose in `divergence_patience` consecutive iterations.
    Diverging,
}

/// Result of a soft resolution.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SoftResolution {
    /// C, samples × species.
    pub concentrations: Array2<f64>,
    /// S, wavelengths × species.
    pub spectra: Array2<f64>,
    /// Columns of the set's D used (all of them for [`resolve_matrix`]; the wavelengths free of
    /// masked points for [`resolve`]).
    pub wavelength_indices: Vec<usize>,
    /// Rows of the set's D used (all for [`resolve_matrix`]; the measurement samples for
    /// [`resolve`]).
    pub sample_ids: Vec<String>,
    /// LOF = 100·√(Σe²/Σd²), %, against D.
    pub lack_of_fit_percent: f64,
    /// LOF against the PCA reconstruction of D with `n_species` factors, %.
    pub lack_of_fit_pca_percent: f64,
    /// Explained variance 100·(1 − Σe²/Σd²), %.
    pub explained_variance_percent: f64,
    /// Iterations done.
    pub iterations: usize,
    /// Why the iterations stopped.
    pub termination: SoftTermination,
    /// LOF (%) after each iteration.
    pub history: Vec<f64>,
    /// The model parameters of the hybrid option, when used.
    pub hybrid: Option<HybridResult>,
}

/// The constraint data for a run, resolved against D and the layout.
pub(crate) struct Prepared {
    pub(crate) path: Array1<f64>,
    pub(crate) groups: Vec<Vec<usize>>,
    /// A, components × species.
    pub(crate) closure: Option<(Array2<f64>, Array2<f64>, f64)>,
    /// true where the species is absent.
    pub(crate) absent: Array2<bool>,
    pub(crate) known: Vec<Option<Array1<f64>>>,
    pub(crate) c_constraint: Constraint,
    pub(crate) s_constraint: Constraint,
    pub(crate) unimodality: Unimodality,
}

impl Prepared {
    fn new(d: ArrayView2<f64>, layout: &SampleLayout, params: &SoftParams) -> Result<Self, SoftError> {
        let (ns, nw) = d.dim();
        let k = params.n_species;
        let lens = [
            layout.ids.len(),
            layout.series.len(),
            layout.temperatures_k.len(),
            layout.path_cm.len(),
            layout.totals_m.nrows(),
            layout.preparation_temperatures_k.len(),
        ];
        if lens.iter().any(|&l| l != ns) || layout.totals_m.ncols() != layout.components.len() {
            return Err(SoftError::Shape {
                what: format!(
                    "D has {ns} samples; the layout has ids/series/temperatures/paths/totals/preparation temperatures rows {lens:?} and {} totals columns for {} components",
                    layout.totals_m.ncols(),
                    layout.components.len()
                ),
            });
        }
        if let Some(((i, j), _)) = d.indexed_iter().find(|(_, v)| !v.is_finite()) {
            return Err(SoftError::NonFinite {
                sample: layout.ids[i].clone(),
                wavelength_index: j,
            });
        }
        if let Some(i) = layout.path_cm.iter().position(|b| !(b.is_finite() && *b > 0.0)) {
            return Err(invalid(
                "path_cm",
                format!(
                    "sample '{}': {} is not a positive length",
                    layout.ids[i], layout.path_cm[i]
                ),
            ));
        }
        let mut known = vec![None; k];
        for ks in &params.known_spectra {
            if ks.spectrum.len() != nw {
                return Err(SoftError::KnownSpectrumLength {
                    species: ks.species,
                    points: ks.spectrum.len(),
                    wavelengths: nw,
                });
            }
            known[ks.species] = Some(Array1::from(ks.spectrum.clone()));
        }
        if let InitialEstimate::Spectra { spectra } = &params.initial
            && spectra.nrows() != nw
        {
            return Err(SoftError::Shape {
                what: format!(
                    "initial spectra have {} rows, D has {nw} wavelengths",
                    spectra.nrows()
                ),
            });
        }
        let mut absent = Array2::from_elem((ns, k), false);
        for a in &params.absent {
            let i = layout
                .ids
                .iter()
                .position(|id| id == &a.sample)
                .ok_or_else(|| SoftError::UnknownSample { id: a.sample.clone() })?;
            absent[[i, a.species]] = true;
        }
        let closure = match &params.closure {
            None => None,
            Some(cl) => {
                let nc = cl.components.len();
                let mut a = Array2::zeros((nc, k));
                let mut t = Array2::zeros((ns, nc));
                for (m, name) in cl.components.iter().enumerate() {
                    let col = layout.components.iter().position(|c| c == name).ok_or_else(|| {
                        SoftError::MissingTotal {
                            component: name.clone(),
                        }
                    })?;
                    t.column_mut(m).assign(&layout.totals_m.column(col));
                    for s in 0..k {
                        a[[m, s]] = cl.counts[s][m];
                    }
                }
                for i in 0..ns {
                    for (m, name) in cl.components.iter().enumerate() {
                        let reachable = (0..k).any(|s| a[[m, s]] > 0.0 && !absent[[i, s]]);
                        if t[[i, m]] > 0.0 && !reachable {
                            return Err(SoftError::ClosureInfeasible {
                                sample: layout.ids[i].clone(),
                                component: name.clone(),
                            });
                        }
                    }
                }
                Some((a, t, cl.weight))
            }
        };
        Ok(Self {
            path: Array1::from(layout.path_cm.clone()),
            groups: layout.groups(),
            closure,
            absent,
            known,
            c_constraint: params.concentrations,
            s_constraint: params.spectra,
            unimodality: params.unimodality,
        })
    }

    /// The constrained C step.
    fn concentrations(&self, d: ArrayView2<f64>, s: ArrayView2<f64>) -> Result<Array2<f64>, SoftError> {
        let (ns, _) = d.dim();
        let k = s.ncols();
        let sts = s.t().dot(&s);
        let std = s.t().dot(&d.t()); // species × samples
        let mut c = Array2::zeros((ns, k));
        for i in 0..ns {
            let allowed: Vec<usize> = (0..k).filter(|&q| !self.absent[[i, q]]).collect();
            if allowed.is_empty() {
                continue;
            }
            let b = self.path[i];
            let xtx = sts.select(Axis(0), &allowed).select(Axis(1), &allowed) * (b * b);
            let xty = std.column(i).select(Axis(0), &allowed) * b;
            let row = match &self.closure {
                None => self.solve_row(xtx.view(), xty.view())?,
                Some((a, t, weight)) => {
                    let a = a.select(Axis(1), &allowed);
                    let t = t.row(i).to_owned();
                    let ata = a.t().dot(&a);
                    let scale_a = ata.diag().sum().max(f64::MIN_POSITIVE);
                    let w2 = weight * xtx.diag().sum().max(f64::MIN_POSITIVE) / scale_a;
                    let h = &xtx + &(&ata * w2);
                    let tmax = t.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                    let mut target = t.clone();
                    let mut sol = Array1::zeros(allowed.len());
                    for _ in 0..100 {
                        let g = &xty + &(a.t().dot(&target) * w2);
                        sol = self.solve_row(h.view(), g.view())?;
                        let viol = &t - &a.dot(&sol);
                        let vmax = viol.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                        if vmax <= 1e-14 * tmax.max(f64::MIN_POSITIVE) {
                            break;
                        }
                        target += &viol;
                    }
                    sol
                }
            };
            for (&q, &v) in allowed.iter().zip(row.iter()) {
                c[[i, q]] = v;
            }
        }
        if self.unimodality == Unimodality::AlongTemperature {
            for rows in &self.groups {
                for q in 0..k {
                    let y: Vec<f64> = rows.iter().map(|&i| c[[i, q]]).collect();
                    let f = unimodal::unimodal_fit(&y);
                    for (&i, v) in rows.iter().zip(f) {
                        c[[i, q]] = v;
                    }
                }
            }
        }
        Ok(c)
    }

    fn solve_row(&self, h: ArrayView2<f64>, g: ArrayView1<f64>) -> Result<Array1<f64>, SoftError> {
        match self.c_constraint {
            Constraint::NonNegative => Ok(nnls_normal(h, g, &NnlsParams::default()).0),
            Constraint::Unconstrained => {
                let sol = h
                    .to_owned()
                    .least_squares(&g.to_owned())
                    .map_err(|e| SoftError::Numerical {
                        what: format!("concentration step: {e}"),
                    })?;
                Ok(sol.solution)
            }
        }
    }

    /// The S step, with the scale normalisation of free species.
    fn spectra(&self, d: ArrayView2<f64>, c: &mut Array2<f64>) -> Result<Array2<f64>, SoftError> {
        let mut s =
            linear::solve_spectra(d, c.view(), self.path.view(), &self.known, self.s_constraint)?.spectra;
        if self.closure.is_none() {
            for q in 0..s.ncols() {
                if self.known[q].is_some() {
                    continue;
                }
                let norm = s.column(q).dot(&s.column(q)).sqrt();
                if norm > 0.0 && norm.is_finite() {
                    s.column_mut(q).mapv_inplace(|v| v / norm);
                    c.column_mut(q).mapv_inplace(|v| v * norm);
                }
            }
        }
        Ok(s)
    }
}

/// The hybrid model's speciation conditions: the totals at the measurement temperature and
/// the solution medium, set up by the global fit's own code from the layout's samples.
fn hybrid_conditions(
    layout: &SampleLayout,
    model: &ValidModel,
    hybrid: &Hybrid,
) -> Result<hybrid::Conditions, SoftError> {
    if let Some(name) = model
        .component_names()
        .iter()
        .find(|name| !layout.components.contains(name))
    {
        return Err(SoftError::MissingTotal {
            component: name.clone(),
        });
    }
    let ns = layout.ids.len();
    let ideal = matches!(hybrid.concentrations, ConcentrationBasis::AsGiven)
        && matches!(hybrid.concentration_scale, ConcentrationScale::Molar)
        && hybrid.activity.is_none();
    if ideal {
        // the totals as given in an ideal medium (any totals the layout holds, e.g. a negative
        // proton total, are passed on to the speciation unchanged)
        let mut totals = Array2::zeros((ns, model.n_components()));
        for (m, name) in model.component_names().iter().enumerate() {
            if let Some(col) = layout.components.iter().position(|c| c == name) {
                totals.column_mut(m).assign(&layout.totals_m.column(col));
            }
        }
        return Ok(hybrid::Conditions {
            temperatures_k: layout.temperatures_k.clone(),
            totals,
            ids: layout.ids.clone(),
            medium: crate::speciation::Medium::default(),
        });
    }
    // The layout's samples as a spectra set with one dummy wavelength: the global fit's setup
    // reads the samples only.
    let samples = (0..ns)
        .map(|i| {
            let mut sample = Sample::new(
                layout.ids[i].clone(),
                layout.series[i].clone(),
                layout.temperatures_k[i],
                layout.path_cm[i],
            );
            sample.preparation_temperature_k = layout.preparation_temperatures_k[i];
            for (m, name) in layout.components.iter().enumerate() {
                sample = sample.with_total(name.clone(), layout.totals_m[[i, m]]);
            }
            sample
        })
        .collect();
    let set = SpectraSet::new(
        Array1::from(vec![1.0]),
        Array2::zeros((ns, 1)),
        samples,
        layout.components.clone(),
    )?;
    let (totals, medium) = crate::resolve::hard::speciation_conditions(&set, model, &hybrid.medium_params())
        .map_err(|e| match e {
            HardFitError::Model(e) => SoftError::Model(e),
            other => SoftError::InvalidParameter {
                name: "hybrid",
                reason: other.to_string(),
            },
        })?;
    Ok(hybrid::Conditions {
        temperatures_k: layout.temperatures_k.clone(),
        totals,
        ids: layout.ids.clone(),
        medium,
    })
}

fn residual_ss(d: ArrayView2<f64>, path: &Array1<f64>, c: &Array2<f64>, s: &Array2<f64>) -> f64 {
    let fit = (c * &path.view().insert_axis(Axis(1))).dot(&s.t());
    (&d - &fit).iter().map(|v| v * v).sum()
}

/// One constrained concentration step (the C step of the iterations) on its own: C from D and
/// S under the settings' non-negativity, absences, closure and unimodality (not the hybrid
/// option).
///
/// # Errors
/// As [`resolve_matrix`].
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::{concentration_step, SampleLayout, SoftParams};
/// use ndarray::array;
/// let s = array![[1.0, 0.0], [0.0, 1.0], [1.0, 1.0]];
/// let d = array![[1.0, -1.0, 0.0]]; // the unconstrained answer (1, −1) is not allowed
/// let c = concentration_step(d.view(), s.view(), &SampleLayout::single_series(1), &SoftParams::default().check()?)?;
/// approx::assert_abs_diff_eq!(c[[0, 1]], 0.0, epsilon = 1e-15);
/// approx::assert_abs_diff_eq!(c[[0, 0]], 0.5, epsilon = 1e-12);
/// # Ok::<(), isosbestic::resolve::soft::SoftError>(())
/// ```
pub fn concentration_step(
    d: ArrayView2<f64>,
    spectra: ArrayView2<f64>,
    layout: &SampleLayout,
    params: &ValidSoftParams,
) -> Result<Array2<f64>, SoftError> {
    let p = Prepared::new(d, layout, params.params())?;
    if spectra.dim() != (d.ncols(), params.params().n_species) {
        return Err(SoftError::Shape {
            what: format!(
                "S is {:?}, expected {} wavelengths × {} species",
                spectra.dim(),
                d.ncols(),
                params.params().n_species
            ),
        });
    }
    p.concentrations(d, spectra)
}

/// MCR-ALS on a data matrix D (samples × wavelengths) whose rows are described by `layout`.
///
/// # Errors
/// [`SoftError`] naming the setting, sample or species at fault; LAPACK failures.
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::{resolve_matrix, SampleLayout, SoftParams, SoftTermination};
/// use ndarray::array;
/// // species 0 alone in sample 0 and at wavelength 0, species 1 alone in sample 3 and at
/// // wavelength 2: the resolution is unique up to scale
/// let c = array![[1.0, 0.0], [0.7, 0.3], [0.3, 0.7], [0.0, 1.0]];
/// let s = array![[2.0, 0.0], [1.0, 1.0], [0.0, 3.0]];
/// let d = c.dot(&s.t());
/// let out = resolve_matrix(d.view(), &SampleLayout::single_series(4), &SoftParams::default().check()?)?;
/// assert_eq!(out.termination, SoftTermination::Converged);
/// // the resolved profiles are proportional to the true ones: c₁/c₀ in sample 1 is 0.3/0.7
/// let ratio = out.concentrations[[1, 1]] / out.concentrations[[1, 0]];
/// let ratio_true_scaled = (0.3 / 0.7) * (out.concentrations[[3, 1]] / out.concentrations[[0, 0]]);
/// approx::assert_relative_eq!(ratio, ratio_true_scaled, max_relative = 1e-6);
/// # Ok::<(), isosbestic::resolve::soft::SoftError>(())
/// ```
pub fn resolve_matrix(
    d: ArrayView2<f64>,
    layout: &SampleLayout,
    params: &ValidSoftParams,
) -> Result<SoftResolution, SoftError> {
    let hybrid_setup = &params.hybrid;
    let params = params.params();
    let prep = Prepared::new(d, layout, params)?;
    let k = params.n_species;
    let (ns, nw) = d.dim();
    if k > ns.min(nw) {
        return Err(SoftError::TooManySpecies {
            n_species: k,
            samples: ns,
            wavelengths: nw,
        });
    }
    let (mut c, mut s) = match &params.initial {
        InitialEstimate::Spectra { spectra } => {
            let s0 = spectra.clone();
            let c0 = prep.concentrations(d, s0.view())?;
            (c0, s0)
        }
        InitialEstimate::EvolvingFactors => {
            let mut c0 = init::efa_concentrations(d, &prep.groups, k)?;
            let s0 = prep.spectra(d, &mut c0)?;
            (c0, s0)
        }
        InitialEstimate::PurestVariables { noise_percent } => {
            let cols = init::purest_variables(d, k, noise_percent / 100.0)?;
            let mut c0 = d.select(Axis(1), &cols).mapv(|v| v.max(0.0));
            if c0.ncols() < k {
                return Err(SoftError::Numerical {
                    what: format!("only {} purest wavelengths found for {k} species", c0.ncols()),
                });
            }
            let s0 = prep.spectra(d, &mut c0)?;
            (c0, s0)
        }
    };
    let mut hybrid = match (hybrid_setup, &params.hybrid) {
        (Some((model, pairs)), Some(h)) => Some(hybrid::HybridState::new(
            model.clone(),
            pairs.clone(),
            hybrid_conditions(layout, model, h)?,
            h.solver.clone(),
            prep.closure.is_some(),
        )),
        _ => None,
    };
    let ssd: f64 = d.iter().map(|v| v * v).sum::<f64>().max(f64::MIN_POSITIVE);
    let lof = |c: &Array2<f64>, s: &Array2<f64>| 100.0 * (residual_ss(d, &prep.path, c, s) / ssd).sqrt();
    let mut history = Vec::new();
    let mut previous = lof(&c, &s);
    let mut rises = 0;
    let mut termination = SoftTermination::IterationLimit;
    let mut iterations = 0;
    while iterations < params.max_iterations {
        iterations += 1;
        let mut c_new = prep.concentrations(d, s.view())?;
        if let Some(h) = hybrid.as_mut() {
            h.apply(&mut c_new)?;
        }
        let s_new = prep.spectra(d, &mut c_new)?;
        c = c_new;
        s = s_new;
        let current = lof(&c, &s);
        history.push(current);
        if current < 1e-9 || ((previous - current).abs() / previous.max(f64::MIN_POSITIVE)) < params.tolerance
        {
            termination = SoftTermination::Converged;
            break;
        }
        if current > previous {
            rises += 1;
            if rises >= params.divergence_patience {
                termination = SoftTermination::Diverging;
                break;
            }
        } else {
            rises = 0;
        }
        previous = current;
    }
    let ssr = residual_ss(d, &prep.path, &c, &s);
    let pca = decompose(d)?.reconstruct(k);
    let fit = (&c * &prep.path.view().insert_axis(Axis(1))).dot(&s.t());
    let ss_pca: f64 = pca.iter().map(|v| v * v).sum::<f64>().max(f64::MIN_POSITIVE);
    let ssr_pca: f64 = (&pca - &fit).iter().map(|v| v * v).sum();
    Ok(SoftResolution {
        concentrations: c,
        spectra: s,
        wavelength_indices: (0..d.ncols()).collect(),
        sample_ids: layout.ids.clone(),
        lack_of_fit_percent: 100.0 * (ssr / ssd).sqrt(),
        lack_of_fit_pca_percent: 100.0 * (ssr_pca / ss_pca).sqrt(),
        explained_variance_percent: 100.0 * (1.0 - ssr / ssd),
        iterations,
        termination,
        history,
        hybrid: hybrid.map(|h| h.result()),
    })
}

/// MCR-ALS on a spectra set: the measurement samples (blanks left out) at the wavelengths free
/// of masked points. Known spectra and initial spectra must be given at those wavelengths.
///
/// # Errors
/// As [`resolve_matrix`].
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::resolve::soft::{resolve, Closure, SoftParams};
/// use ndarray::array;
/// // A ⇌ B with total 0.01 mol/L; A absorbs at 400 nm only, B at 600 nm only (ε 100 and 50)
/// let frac_b = [0.1, 0.4, 0.8];
/// let d = ndarray::Array2::from_shape_fn((3, 3), |(i, j)| {
///     let (a, b) = (0.01 * (1.0 - frac_b[i]), 0.01 * frac_b[i]);
///     [100.0 * a, 60.0 * a + 20.0 * b, 50.0 * b][j]
/// });
/// let samples = (0..3)
///     .map(|i| Sample::new(format!("s{i}"), "one", 290.0 + 10.0 * i as f64, 1.0).with_total("A", 0.01))
///     .collect();
/// let set = SpectraSet::new(array![400.0, 500.0, 600.0], d, samples, vec!["A".into()])?;
/// let closure = Closure { components: vec!["A".into()], counts: vec![vec![1.0], vec![1.0]], weight: 1e6 };
/// let params = SoftParams { closure: Some(closure), tolerance: 1e-12, ..SoftParams::default() }.check()?;
/// let out = resolve(&set, &params)?;
/// for i in 0..3 {
///     // closure: [A] + [B] = 0.01 mol/L in every sample
///     approx::assert_relative_eq!(out.concentrations.row(i).sum(), 0.01, max_relative = 1e-10);
/// }
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn resolve(set: &SpectraSet, params: &ValidSoftParams) -> Result<SoftResolution, SoftError> {
    let ids = set.measurement_ids();
    let measured = if ids.len() == set.n_samples() {
        set.clone()
    } else {
        set.select_samples(&ids)?
    };
    let cols = measured.unmasked_wavelength_indices();
    let d = measured.absorbance().select(Axis(1), &cols);
    let layout = SampleLayout::from_set(&measured);
    let mut out = resolve_matrix(d.view(), &layout, params)?;
    out.wavelength_indices = cols;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_species_absent_from_a_sample_stays_zero_there() {
        let s = ndarray::array![[1.0, 0.5], [0.2, 1.0], [0.6, 0.6]];
        let c_true = ndarray::array![[1.0, 0.5], [0.3, 0.7]];
        let d = c_true.dot(&s.t());
        let params = SoftParams {
            absent: vec![Absence {
                sample: "1".into(),
                species: 0,
            }],
            ..SoftParams::default()
        }
        .check()
        .unwrap();
        let c = concentration_step(d.view(), s.view(), &SampleLayout::single_series(2), &params).unwrap();
        approx::assert_abs_diff_eq!(c[[1, 0]], 0.0);
        approx::assert_abs_diff_eq!(c[[0, 0]], 1.0, epsilon = 1e-12);
        assert!(c[[1, 1]] > 0.0);
    }
}
