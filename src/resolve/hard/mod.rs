//! The global model fit ("hard" resolution): the thermodynamic parameters of an equilibrium
//! model fitted to all samples, series and wavelengths at once.
//!
//! ## Model
//! With path lengths b, concentrations C(θ) from the speciation of each sample at its
//! temperature, molar absorptivities S and, optionally, per-spectrum baselines:
//!
//! ```text
//! D = X(θ)·Sᵀ + A·Wᵀ + E,   X(θ) = [diag(b)·C_abs, diag(b·x)·C_abs, diag(b·x²)·C_abs],  x = T − T_ε
//! ```
//!
//! where the blocks after the first exist when the pure spectra depend on temperature
//! (ε(T) = ε₀ + x·ε₁ + x²·ε₂, [`SpectraTemperature`]), W = [1, λ] holds the baseline shapes
//! (offset, slope in λ; [`Baseline`]) and A the per-sample baseline coefficients.
//!
//! ## Variable projection
//! For fixed θ the problem is linear in S and A. Eliminating them (Golub & Pereyra, SIAM J.
//! Numer. Anal. 10 (1973) 413) leaves a problem in θ alone:
//!
//! ```text
//! R(θ) = Q_X(θ) · D · (I − P_W),   Q_X = I − X X⁺,   P_W = W (WᵀW)⁻¹ Wᵀ
//! ```
//!
//! minimised by Levenberg–Marquardt ([`super::lm`]) with the exact Golub–Pereyra Jacobian
//! ∂R/∂θ_p = −[Q ∂X_p X⁺ D̃ + (X⁺)ᵀ ∂X_pᵀ R], ∂X/∂θ from the speciation derivatives
//! (implicit differentiation of the mass balance). The approach is that of hard-model global
//! analysis of multiwavelength equilibrium data (Gampp, Maeder, Meyer, Zuberbühler, Talanta 32
//! (1985) 95; Maeder & Zuberbühler, Anal. Chem. 62 (1990) 2220).
//!
//! ## Data reduction (exact)
//! D̃ = D(I − P_W) enters the fit only through D̃D̃ᵀ (samples × samples), formed in one pass over
//! D and factored by pivoted Cholesky as G·Gᵀ (G samples × r, r ≤ number of samples): G = D̃·V
//! for some orthonormal V, so ‖Q_X D̃‖, Jᵀr and JᵀJ are unchanged. The reduction is exact, not
//! an approximation, and after it each iteration costs nothing per wavelength. It is always safe
//! with uniform weights (per-element weights would not factor through D̃D̃ᵀ); dropping
//! directions of D̃ above rounding level would not be safe and is not done. Masked points
//! (e.g. saturated absorbances) cannot be left out one by one either: the fit leaves out every
//! wavelength at which any sample is masked (`n_data` counts what was used), and the spectra
//! there are estimated afterwards from the unmasked samples only. When that would leave no
//! wavelength (a sample masked throughout), the fit takes the columnwise path below.
//!
//! ## Known spectra
//! Species with a known ε(λ) ([`FixedSpectrum`], [`HardFitParams::known_spectra`]) are held
//! fixed: their part diag(b)·C_k(θ)·E_kᵀ is subtracted inside the projection,
//! R = Q_X·(D − diag(b)·C_k·E_kᵀ)·(I − P_W). The known spectra are reduced together with the
//! data (pivoted Cholesky of the Gram matrix of the stacked rows [D̃; Ẽ_kᵀ] gives [G; H]), so the
//! target in reduced coordinates is Y(θ) = G − diag(b)·C_k(θ)·H, still exact.
//!
//! ## Non-negative spectra and weights
//! Two settings do not factor through D̃D̃ᵀ and take the columnwise path instead
//! ([`columnwise`]): non-negative pure spectra ([`SpectraSign::NonNegative`], NNLS at each
//! wavelength) and weights that grow with the absorbance ([`Weighting::Absorbance`]). There the
//! linear part is solved wavelength by wavelength, masked points simply weigh nothing, and
//! baselines are not available. Starting points are still ranked on the reduced problem. A data
//! set with a masked point at every wavelength takes this path too (its reduced problem, built
//! from D with the masked points set to zero, then serves only to rank the starts).
//!
//! ## Normal equations
//! The solver ([`lm::minimise_normal_equations`]) receives the cost ½‖R‖² and, at accepted points,
//! Jᵀr and JᵀJ of the full Golub–Pereyra Jacobian (both of its terms), formed from R = Q_X G and
//! GᵀX⁺ᵀ without the samples·r × p Jacobian itself (see `problem.rs`).
//!
//! ## Baselines and spectra
//! An offset common to all samples in proportion to one species' concentration cannot be told
//! apart from a flat component of that species' spectrum. The fit takes baseline coefficients
//! orthogonal to the concentration profiles (A = Q_X D W (WᵀW)⁻¹), which makes S = (X⁺ D)ᵀ: any
//! such common part is attributed to the spectra.
//!
//! ## Uncertainties
//! Cov(θ) = σ²(JᵀJ)⁻¹ with σ² = RSS/ν, ν = (samples × wavelengths) − (number of θ) −
//! (number of linear parameters), or σ from a known noise level. For Gaussian noise this is the
//! Cramér–Rao bound with the spectra profiled out. Standard errors of ε are conditional on θ:
//! σ²·diag((XᵀX)⁻¹) at each wavelength.

pub mod bootstrap;
pub mod columnwise;
mod known;
mod problem;
mod small_svd;

pub use columnwise::{SpectraSign, Weighting};
pub use known::FixedSpectrum;
use known::KnownSpectra;

use super::lm::{self, LmParams, LmTermination};
use crate::data::SpectraSet;
use crate::speciation::{
    Derivatives, FormationLaw, Medium, SpeciationBatch, SpeciationError, SpeciesRole, StandardQuantities,
    ValidModel,
};
use crate::thermo::{ActivityCorrection, ConcentrationScale, SolventDensity};
use columnwise::FitProblem;
use ndarray::{Array1, Array2};
use ndarray_linalg::{Eigh, Inverse, JobSvd, LeastSquaresSvd, SVDDC, UPLO};
use problem::{Projection, VarproProblem};
use serde::{Deserialize, Serialize};
use std::sync::Mutex;
use thiserror::Error;

/// Why a global fit could not be run.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum HardFitError {
    /// The model does not fit the data set (missing totals, …).
    #[error(transparent)]
    Model(#[from] SpeciationError),
    /// No parameter is free.
    #[error("the model has no free parameter to fit (every law parameter is fixed)")]
    NoFreeParameters,
    /// No species has a spectrum to fit.
    #[error("no absorbing species with an unknown spectrum: nothing to resolve")]
    NoAbsorbingSpecies,
    /// More unknowns than data.
    #[error("too few data: {data} values for {unknowns} unknowns")]
    TooFewData {
        /// Number of data values used.
        data: usize,
        /// Number of unknowns (θ, spectra, baselines).
        unknowns: usize,
    },
    /// Invalid settings.
    #[error("invalid fit settings: {0}")]
    Settings(String),
    /// A known spectrum that cannot be used.
    #[error("known spectrum of species '{species}'{}: {reason}", wavelength_nm.map(|w| format!(" at {w} nm")).unwrap_or_default())]
    KnownSpectrum {
        /// The species.
        species: String,
        /// The wavelength concerned, nm, if one is.
        wavelength_nm: Option<f64>,
        /// What is wrong.
        reason: String,
    },
    /// The solver failed (e.g. speciation did not converge at some trial θ).
    #[error("the fit failed: {0}")]
    Solver(String),
}

/// How pure spectra depend on temperature.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "order")]
pub enum SpectraTemperature {
    /// ε(λ) independent of T.
    Constant,
    /// ε₀ + (T − T_ε)·ε₁.
    Linear {
        /// T_ε, K.
        reference_k: f64,
    },
    /// ε₀ + (T − T_ε)·ε₁ + (T − T_ε)²·ε₂; needed when bands shift with T.
    Quadratic {
        /// T_ε, K.
        reference_k: f64,
    },
}

impl SpectraTemperature {
    /// Polynomial order (0, 1, 2).
    pub fn order(self) -> usize {
        match self {
            Self::Constant => 0,
            Self::Linear { .. } => 1,
            Self::Quadratic { .. } => 2,
        }
    }

    /// T_ε, K (298.15 for constant spectra, where it is unused).
    pub fn reference_k(self) -> f64 {
        match self {
            Self::Constant => 298.15,
            Self::Linear { reference_k } | Self::Quadratic { reference_k } => reference_k,
        }
    }
}

/// Per-spectrum baseline terms eliminated with the spectra.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Baseline {
    /// No baseline terms.
    #[default]
    None,
    /// A constant offset per spectrum.
    Offset,
    /// Offset and slope in λ per spectrum.
    OffsetAndSlope,
}

/// How the totals at the measurement temperature are obtained from those prepared.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ConcentrationBasis {
    /// Use the totals as given (already at the measurement temperature, or expansion ignored).
    #[default]
    AsGiven,
    /// Scale by the solvent density ratio ρ(T)/ρ(T_prep) (thermal expansion of the solution).
    ThermalExpansion(crate::thermo::SolventDensity),
    /// Scale by the ratio of explicit factors given per sample (same order as the set).
    Factors(Vec<f64>),
}

/// Settings of the global fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct HardFitParams {
    /// Temperature dependence of the pure spectra.
    pub spectra_temperature: SpectraTemperature,
    /// Baseline terms per spectrum.
    pub baseline: Baseline,
    /// Concentration basis (thermal expansion).
    pub concentrations: ConcentrationBasis,
    /// Concentration scale of the formation constants: molar (default) or molal. On the molal
    /// scale the speciation runs in mol/kg, with kg of solvent per litre = ρ(T)·w/1000 from the
    /// thermal-expansion density source (water by Kell's equation when the totals are used as
    /// given); concentrations stay mol/L for Beer–Lambert.
    pub concentration_scale: ConcentrationScale,
    /// Activity corrections. Off by default: a constant ionic medium, and the fitted constants
    /// are conditional constants for that medium. When on, the fitted log β are thermodynamic
    /// (infinite dilution) and every species needs a charge.
    pub activity: ActivityCorrection,
    /// Ionic strength of the inert background electrolyte, mol/L as prepared (scaled like the
    /// totals); used only with `activity`.
    pub medium_ionic_strength: f64,
    /// Known noise σ (absorbance units): fixes the scale of the covariance instead of RSS/ν.
    pub known_noise: Option<f64>,
    /// Pure spectra known beforehand, held fixed (not fitted). Every species whose model entry
    /// names a `known_spectrum` file must have its values here
    /// ([`FixedSpectrum::read_for_model`] reads them).
    pub known_spectra: Vec<FixedSpectrum>,
    /// Number of starting points tried per free log β (odd; 1 = start from the model values).
    pub start_grid: usize,
    /// Half-width of the start grid in log β units.
    pub start_span: f64,
    /// Solver settings.
    pub solver: LmParams,
    /// Sign of the pure spectra: free (default) or non-negative (per-wavelength NNLS, the
    /// columnwise path of [`columnwise`]).
    pub spectra_sign: SpectraSign,
    /// Weights of the data points: uniform (default) or growing with the absorbance (the
    /// columnwise path of [`columnwise`]).
    pub weighting: Weighting,
    /// Compute [`HardFit::residual_singular_values`] (the residual-structure diagnostic: an
    /// SVD of the samples × rank residual matrix, about as costly as the rest of a fit on 100
    /// spectra). On by default; refits that only want the parameters (bootstrap replicates)
    /// turn it off, and the list is then empty.
    pub residual_svd: bool,
}

impl Default for HardFitParams {
    fn default() -> Self {
        Self {
            spectra_temperature: SpectraTemperature::Constant,
            baseline: Baseline::None,
            concentrations: ConcentrationBasis::AsGiven,
            concentration_scale: ConcentrationScale::Molar,
            activity: ActivityCorrection::None,
            medium_ionic_strength: 0.0,
            known_noise: None,
            known_spectra: Vec::new(),
            start_grid: 5,
            start_span: 2.0,
            solver: LmParams::default(),
            spectra_sign: SpectraSign::Free,
            weighting: Weighting::Uniform,
            residual_svd: true,
        }
    }
}

/// One free parameter of the fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FreeParameter {
    /// Model species index.
    pub species: usize,
    /// Index of the parameter in the species' law.
    pub parameter: usize,
    /// Species name.
    pub species_name: String,
    /// Parameter name (e.g. `log_beta_ref`, `dh_ref`).
    pub name: String,
    /// Unit.
    pub unit: String,
}

/// A fitted parameter with its standard error.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FittedParameter {
    /// Which parameter.
    pub parameter: FreeParameter,
    /// Fitted value.
    pub value: f64,
    /// Standard error √Cov_pp.
    pub standard_error: f64,
}

/// ΔG°, ΔH°, ΔS°, ΔCp° of one species at its reference temperature, with covariance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciesThermodynamics {
    /// Species name.
    pub species: String,
    /// The standard quantities with covariance.
    pub standard: StandardQuantities,
}

/// The result of a global fit. Returned for every run that got as far as the solver, converged
/// or not: check [`HardFit::termination`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HardFit {
    /// Fitted parameters with standard errors.
    pub parameters: Vec<FittedParameter>,
    /// Covariance of the free parameters.
    pub covariance: Array2<f64>,
    /// Correlation matrix of the free parameters.
    pub correlation: Array2<f64>,
    /// Standard thermodynamic quantities of every species with a free law parameter.
    pub thermodynamics: Vec<SpeciesThermodynamics>,
    /// Names of the species whose spectra were fitted (columns of `spectra`, per order block).
    pub absorbing_species: Vec<String>,
    /// Names of the species whose spectra were known and held fixed.
    pub known_species: Vec<String>,
    /// Pure spectra ε (wavelengths × absorbing species × (order + 1) blocks: ε₀ block first).
    pub spectra: Array2<f64>,
    /// Standard errors of `spectra`, conditional on θ.
    pub spectra_standard_errors: Array2<f64>,
    /// Concentrations of every model species, samples × species, mol/L.
    pub concentrations: Array2<f64>,
    /// Model species names (columns of `concentrations`).
    pub species: Vec<String>,
    /// Residual sum of squares.
    pub rss: f64,
    /// Degrees of freedom ν.
    pub degrees_of_freedom: usize,
    /// Residual standard deviation √(RSS/ν), absorbance units.
    pub residual_sd: f64,
    /// σ used for the covariance (known noise or the residual standard deviation).
    pub sigma: f64,
    /// Singular values of the design X at the solution (condition of the concentrations).
    pub design_singular_values: Vec<f64>,
    /// Numerical rank of X; below the number of columns, some spectra are not determined.
    pub design_rank: usize,
    /// Singular values of the residual matrix (samples × wavelengths), largest first. Equal to
    /// those of the reduced residual, since the reduction is an orthogonal change of basis. A
    /// first value well above the noise edge σ(√samples + √wavelengths) means structure the
    /// model misses.
    /// Empty when [`HardFitParams::residual_svd`] is off.
    pub residual_singular_values: Vec<f64>,
    /// Number of data values (samples × wavelengths).
    pub n_data: usize,
    /// Number of fitted parameters, linear and nonlinear (for model comparison).
    pub n_parameters_total: usize,
    /// Solver iterations.
    pub iterations: u64,
    /// Why the solver stopped.
    pub termination: LmTermination,
    /// Starting points scored before the solver runs.
    pub starts_tried: usize,
    /// Parameters that ended on a bound (the fit is then constrained, and their standard errors
    /// are not meaningful).
    pub at_bounds: Vec<String>,
    /// Species whose fitted spectrum breaks its declared ε ceiling (`max_absorptivity`).
    pub ceiling_violations: Vec<String>,
    /// Distinct solutions found from the other side (ΔH° signs flipped) that fit almost as well
    /// (|Δχ²| < [`MIRROR_DELTA_CHI2`]: the data alone cannot choose between them), or that fit
    /// better but break a declared ε ceiling (the ceiling decides whatever the Δχ²).
    pub alternatives: Vec<AlternativeSolution>,
    /// Wavelengths (nm) at which the non-negative spectra solve stopped at its iteration limit
    /// (ε there are feasible, ≥ 0, but may not be optimal); empty otherwise.
    #[serde(default)]
    pub nnls_unconverged_nm: Vec<f64>,
    /// Whether the fit used absorbance-dependent weights: `rss`, `residual_sd` and `sigma` are
    /// then weighted, unitless (σ̂ ≈ 1 when the stated noise model is right), not AU.
    #[serde(default)]
    pub weighted: bool,
    /// Δχ² = (RSS_other − RSS)/σ² of the solution reached from the best start with the other
    /// ΔH° signs (the mirror side), when such a run was made (≈ 0 when it came back to the
    /// reported solution); that solution is listed in `alternatives` only when it is distinct
    /// and within [`MIRROR_DELTA_CHI2`], or fits better but lost to a declared ε ceiling. Of two
    /// distinct solutions the fit keeps the one that breaks no ceiling, else the lower χ².
    pub mirror_delta_chi2: Option<f64>,
}

/// log₁₀ β of one species at one temperature with its standard error and confidence band.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LogBetaAt {
    /// Temperature, K.
    pub temperature_k: f64,
    /// log₁₀ β.
    pub log_beta: f64,
    /// Standard error, from the covariance of the law's free parameters.
    pub standard_error: f64,
    /// Lower end of the band.
    pub lower: f64,
    /// Upper end of the band.
    pub upper: f64,
}

impl HardFit {
    /// log₁₀ β of `species` at each temperature with a two-sided `level` confidence band
    /// (Student t with the fit's degrees of freedom): σ² = gᵀ Cov g with g = ∂ log₁₀ β/∂θ.
    ///
    /// `None` if the species is not in the model. The model must be the one that was fitted.
    pub fn log_beta_at(
        &self,
        model: &ValidModel,
        species: &str,
        temperatures_k: &[f64],
        level: f64,
    ) -> Option<Vec<LogBetaAt>> {
        let k = model.species_index(species)?;
        let law = &model.species()[k].law;
        let mut values: Vec<f64> = law.parameters().iter().map(|p| p.value).collect();
        let idx: Vec<(usize, usize)> = self
            .parameters
            .iter()
            .enumerate()
            .filter(|(_, p)| p.parameter.species == k)
            .map(|(q, p)| (q, p.parameter.parameter))
            .collect();
        for &(q, j) in &idx {
            values[j] = self.parameters[q].value;
        }
        let t = crate::stats::student_t_quantile(0.5 + level / 2.0, self.degrees_of_freedom.max(1) as f64);
        let mut g = vec![0.0; law.n_parameters()];
        Some(
            temperatures_k
                .iter()
                .map(|&temperature_k| {
                    let log_beta = law.log10_beta_gradient_with(&values, temperature_k, &mut g);
                    let var: f64 = idx
                        .iter()
                        .flat_map(|&(a, ja)| idx.iter().map(move |&(b, jb)| (a, ja, b, jb)))
                        .map(|(a, ja, b, jb)| g[ja] * self.covariance[[a, b]] * g[jb])
                        .sum();
                    let standard_error = if var.is_nan() {
                        f64::NAN
                    } else {
                        var.max(0.0).sqrt()
                    };
                    LogBetaAt {
                        temperature_k,
                        log_beta,
                        standard_error,
                        lower: log_beta - t * standard_error,
                        upper: log_beta + t * standard_error,
                    }
                })
                .collect(),
        )
    }

    /// The unit of `residual_sd` and `sigma`: AU, or the weighted scale factor.
    pub fn residual_unit(&self) -> &'static str {
        if self.weighted {
            "× stated noise (weighted)"
        } else {
            "AU"
        }
    }

    /// Value and standard error of a parameter by species and parameter name.
    pub fn parameter(&self, species: &str, name: &str) -> Option<&FittedParameter> {
        self.parameters
            .iter()
            .find(|p| p.parameter.species_name == species && p.parameter.name == name)
    }
}

/// A second, distinct solution that fits almost as well as the reported one (or better, but
/// breaks a declared ε ceiling).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlternativeSolution {
    /// Its parameter values (order of [`HardFit::parameters`]).
    pub parameters: Vec<f64>,
    /// Its residual sum of squares.
    pub rss: f64,
    /// (RSS_alternative − RSS_reported)/σ².
    pub delta_chi2: f64,
    /// ε ceilings it breaks.
    pub ceiling_violations: Vec<String>,
    /// True when the reported solution was chosen over this one because this one breaks an ε
    /// ceiling (prior knowledge), not because it fits better.
    pub chosen_by_prior: bool,
}

/// One candidate model's fit in a comparison.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CandidateScore {
    /// Candidate name.
    pub name: String,
    /// Residual sum of squares.
    pub rss: f64,
    /// Parameters fitted (nonlinear + linear).
    pub parameters: usize,
    /// Akaike's information criterion for Gaussian errors, n·ln(RSS/n) + 2k.
    pub aic: f64,
    /// Schwarz's Bayesian information criterion, n·ln(RSS/n) + k·ln n.
    pub bic: f64,
    /// AIC minus the best AIC (0 for the best).
    pub delta_aic: f64,
}

/// An F-test of a model against a nested, simpler one fitted to the same data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NestedTest {
    /// The simpler model.
    pub simpler: String,
    /// The richer model.
    pub richer: String,
    /// F = ((RSS₀ − RSS₁)/(k₁ − k₀)) / (RSS₁/(n − k₁)).
    pub f: f64,
    /// P(F' > F) under the simpler model.
    pub p_value: f64,
}

/// Ranks candidate fits of the same data by AIC (Akaike, IEEE Trans. Autom. Control 19 (1974)
/// 716) and BIC (Schwarz, Ann. Stat. 6 (1978) 461), best first.
///
/// # Examples
/// ```
/// use isosbestic::resolve::hard::rank_candidates;
/// // (name, RSS, parameters, data values)
/// let r = rank_candidates(&[("small", 2.0, 10, 1000), ("large", 1.0, 12, 1000)]);
/// assert_eq!(r[0].name, "large"); // halving RSS is worth two parameters
/// approx::assert_abs_diff_eq!(r[0].delta_aic, 0.0);
/// ```
pub fn rank_candidates(candidates: &[(&str, f64, usize, usize)]) -> Vec<CandidateScore> {
    let mut out: Vec<CandidateScore> = candidates
        .iter()
        .map(|&(name, rss, k, n)| {
            let nf = n as f64;
            let base = nf * (rss / nf).ln();
            CandidateScore {
                name: name.to_string(),
                rss,
                parameters: k,
                aic: base + 2.0 * k as f64,
                bic: base + k as f64 * nf.ln(),
                delta_aic: 0.0,
            }
        })
        .collect();
    out.sort_by(|a, b| a.aic.total_cmp(&b.aic));
    let best = out.first().map_or(0.0, |c| c.aic);
    for c in &mut out {
        c.delta_aic = c.aic - best;
    }
    out
}

/// F-test of a richer model against a simpler, nested one (the simpler is the richer with some
/// parameters fixed, e.g. without ΔCp° or with constant spectra), both fitted to the same data.
///
/// # Examples
/// ```
/// use isosbestic::resolve::hard::nested_f_test;
/// let t = nested_f_test(("vant_hoff", 1.10, 4), ("heat_capacity", 1.00, 6), 1000);
/// approx::assert_relative_eq!(t.f, (0.10 / 2.0) / (1.00 / 994.0), max_relative = 1e-12);
/// assert!(t.p_value < 1e-10);
/// ```
pub fn nested_f_test(simpler: (&str, f64, usize), richer: (&str, f64, usize), n_data: usize) -> NestedTest {
    let (dk, dof) = (
        (richer.2 as f64 - simpler.2 as f64).max(1.0),
        n_data as f64 - richer.2 as f64,
    );
    let f = ((simpler.1 - richer.1) / dk) / (richer.1 / dof);
    NestedTest {
        simpler: simpler.0.to_string(),
        richer: richer.0.to_string(),
        f,
        p_value: crate::stats::f_sf(f, dk, dof),
    }
}

/// Free parameters of a model, in a fixed order (species order, then law parameter order).
pub fn free_parameters(model: &ValidModel) -> Vec<FreeParameter> {
    let mut out = Vec::new();
    for (k, sp) in model.species().iter().enumerate() {
        let names = sp.law.parameter_names();
        let units = sp.law.parameter_units();
        for (j, p) in sp.law.parameters().iter().enumerate() {
            if !p.fixed {
                out.push(FreeParameter {
                    species: k,
                    parameter: j,
                    species_name: sp.name.clone(),
                    name: names[j].to_string(),
                    unit: units[j].to_string(),
                });
            }
        }
    }
    out
}

/// Totals at the measurement temperature (samples × model components), and each sample's
/// factor from prepared to measured concentrations.
fn measurement_totals(
    set: &SpectraSet,
    model: &ValidModel,
    basis: &ConcentrationBasis,
) -> Result<(Array2<f64>, Vec<f64>), HardFitError> {
    model.check_totals(set.components())?;
    let ns = set.n_samples();
    let mut totals = Array2::zeros((ns, model.n_components()));
    let mut factors = Vec::with_capacity(ns);
    for (i, sample) in set.samples().iter().enumerate() {
        let factor = match basis {
            ConcentrationBasis::AsGiven => 1.0,
            ConcentrationBasis::ThermalExpansion(density) => density
                .concentration_factor(sample.temperature_k, sample.preparation_temperature_k)
                .map_err(|e| HardFitError::Settings(format!("sample '{}': {e}", sample.id)))?,
            ConcentrationBasis::Factors(f) => *f
                .get(i)
                .ok_or_else(|| HardFitError::Settings(format!("{} factors for {ns} samples", f.len())))?,
        };
        for (c, name) in model.component_names().iter().enumerate() {
            totals[[i, c]] = sample.totals_m[name] * factor;
        }
        factors.push(factor);
    }
    Ok((totals, factors))
}

/// The solution medium of the speciation: activity model with each sample's temperature and
/// background ionic strength (scaled like the totals), and on the molal scale each sample's
/// kg of solvent per litre, ρ(T)·w/1000, with ρ from the thermal-expansion density source
/// (water when the totals are used as given or scaled by explicit factors).
fn speciation_medium(
    set: &SpectraSet,
    params: &HardFitParams,
    factors: &[f64],
) -> Result<Medium, HardFitError> {
    let i_bg = params.medium_ionic_strength;
    if !(i_bg.is_finite() && i_bg >= 0.0) {
        return Err(HardFitError::Settings(format!(
            "medium_ionic_strength must be non-negative and finite (got {i_bg})"
        )));
    }
    let kg_solvent_per_litre = match params.concentration_scale {
        ConcentrationScale::Molar => None,
        scale => {
            let density = match &params.concentrations {
                ConcentrationBasis::ThermalExpansion(d) => d.clone(),
                _ => SolventDensity::Water,
            };
            let mut per_sample = Vec::with_capacity(set.n_samples());
            for sample in set.samples() {
                let m_per_c = density
                    .density_kg_m3(sample.temperature_k)
                    .and_then(|rho| scale.from_molar(1.0, rho))
                    .map_err(|e| {
                        HardFitError::Settings(format!("sample '{}': molal scale: {e}", sample.id))
                    })?;
                per_sample.push(1.0 / m_per_c);
            }
            Some(per_sample)
        }
    };
    Ok(Medium {
        activity: params.activity,
        temperatures_k: set.temperatures_k().to_vec(),
        background_ionic_strength: factors.iter().map(|f| f * i_bg).collect(),
        kg_solvent_per_litre,
        ..Medium::default()
    })
}

/// Orthonormal basis Q_W (wavelengths × 1 or 2) of the baseline shapes W = [1, λ]: the
/// normalised constant and the normalised centred λ (orthogonal to each other by construction).
/// `None` without baseline terms.
pub(crate) fn baseline_basis(wavelengths_nm: &Array1<f64>, baseline: Baseline) -> Option<Array2<f64>> {
    (baseline != Baseline::None).then(|| baseline_shapes(wavelengths_nm, wavelengths_nm, baseline))
}

/// The columns of [`baseline_basis`]`(fitted_on, baseline)` as functions of λ, evaluated at
/// `at` (wavelengths × terms): the constant 1/√n and the centred, normalised λ of the fitted
/// grid, extended to other wavelengths. Empty without baseline terms.
pub(crate) fn baseline_shapes(at: &Array1<f64>, fitted_on: &Array1<f64>, baseline: Baseline) -> Array2<f64> {
    let ncol = match baseline {
        Baseline::None => 0,
        Baseline::Offset => 1,
        Baseline::OffsetAndSlope => 2,
    };
    let n = fitted_on.len().max(1) as f64;
    let mean = fitted_on.mean().unwrap_or(0.0);
    let norm = fitted_on
        .iter()
        .map(|l| (l - mean) * (l - mean))
        .sum::<f64>()
        .sqrt();
    Array2::from_shape_fn((at.len(), ncol), |(j, c)| {
        if c == 0 {
            1.0 / n.sqrt()
        } else if norm > 0.0 {
            (at[j] - mean) / norm
        } else {
            0.0
        }
    })
}

/// The reduction G (samples × r) with G·Gᵀ = D̃·D̃ᵀ, D̃ = D(I − P_W): the Gram matrix
/// D̃D̃ᵀ = DDᵀ − (DQ_W)(DQ_W)ᵀ from one pass over D, then its Cholesky factor with diagonal
/// pivoting, G = Πᵀ·L (Higham, "Accuracy and Stability of Numerical Algorithms", 2nd ed., SIAM
/// (2002), §10.3). No copy of D is made.
///
/// Every quantity of the fit (‖Q_X D̃‖, JᵀJ, Jᵀr) depends on D̃ only through D̃D̃ᵀ, so the
/// reduction is exact in exact arithmetic. The factorisation stops when the largest remaining
/// pivot falls below samples·ε times the largest diagonal entry; what is dropped then has a trace
/// below samples²·ε·‖D̃‖²_max — the rounding level of the Gram matrix itself, far below any
/// noise a spectrometer records. It costs samples³/3 operations, a small fraction of the pass
/// over D.
fn reduce(d: &Array2<f64>, q_w: Option<&Array2<f64>>) -> Result<Array2<f64>, HardFitError> {
    let mut gram = gram_matrix(d);
    if let Some(q) = q_w {
        let dq = d.dot(q);
        gram -= &dq.dot(&dq.t());
    }
    let g = pivoted_cholesky(gram);
    if g.iter().any(|v| !v.is_finite()) {
        return Err(HardFitError::Solver(
            "the data hold values that are not finite".into(),
        ));
    }
    Ok(g)
}

/// D·Dᵀ by the symmetric rank-k update of OpenBLAS (`dsyrk`: half the operations of a general
/// product), the lower triangle mirrored; a general product when D is not a contiguous
/// row-major array or too large for BLAS integer sizes.
fn gram_matrix(d: &Array2<f64>) -> Array2<f64> {
    let (n, k) = d.dim();
    let (Ok(ni), Ok(ki)) = (i32::try_from(n), i32::try_from(k)) else {
        return d.dot(&d.t());
    };
    let Some(a) = d.as_slice() else {
        return d.dot(&d.t());
    };
    if n == 0 || k == 0 {
        return Array2::zeros((n, n));
    }
    let mut c = Array2::<f64>::zeros((n, n));
    let Some(out) = c.as_slice_mut() else {
        return d.dot(&d.t());
    };
    // SAFETY: `a` is the contiguous row-major n × k array D (lda = k), `out` the contiguous
    // row-major n × n output (ldc = n); both outlive the call, n and k fit in i32 and are
    // positive, and dsyrk writes only the upper triangle of `out`.
    unsafe {
        cblas_sys::cblas_dsyrk(
            cblas_sys::CBLAS_LAYOUT::CblasRowMajor,
            cblas_sys::CBLAS_UPLO::CblasUpper,
            cblas_sys::CBLAS_TRANSPOSE::CblasNoTrans,
            ni,
            ki,
            1.0,
            a.as_ptr(),
            ki,
            0.0,
            out.as_mut_ptr(),
            ni,
        );
    }
    for i in 0..n {
        for j in 0..i {
            c[[i, j]] = c[[j, i]];
        }
    }
    c
}

/// Cholesky factorisation with diagonal pivoting of a symmetric positive semi-definite matrix:
/// returns G (n × r) with G·Gᵀ = A up to the dropped trailing block (pivots at or below
/// n·ε·max diagonal). At least one column is returned.
///
/// LAPACK's blocked `dpstrf` (Higham's algorithm; its default tolerance is exactly this one):
/// Πᵀ·A·Π = L·Lᵀ, so G = Π·L restricted to the first r columns.
fn pivoted_cholesky(mut a: Array2<f64>) -> Array2<f64> {
    let n = a.nrows();
    let Ok(ni) = i32::try_from(n) else {
        return pivoted_cholesky_unblocked(a);
    };
    if n == 0 || !a.is_standard_layout() || a.iter().any(|v| !v.is_finite()) {
        return pivoted_cholesky_unblocked(a);
    }
    let Some(buf) = a.as_slice_mut() else {
        return pivoted_cholesky_unblocked(a);
    };
    let mut piv = vec![0i32; n];
    let mut rank = 0i32;
    let mut info = 0i32;
    let mut work = vec![0.0f64; 2 * n];
    let tol = -1.0f64; // LAPACK's default: n·ε·max(diag A)
    // SAFETY: `buf` is the contiguous n × n matrix (lda = n; symmetric, so the row-major array
    // is its own column-major transpose), `piv` has n entries and `work` 2n as dpstrf requires;
    // all outlive the call. uplo "U" in column-major storage is the lower triangle of the
    // row-major array: it receives L row by row.
    unsafe {
        lapack_sys::dpstrf_(
            c"U".as_ptr(),
            &ni,
            buf.as_mut_ptr(),
            &ni,
            piv.as_mut_ptr(),
            &mut rank,
            &tol,
            work.as_mut_ptr(),
            &mut info,
        );
    }
    // info 0: full rank; 1: rank-deficient (rank < n) — both are answers; < 0: a bad argument
    if info < 0 {
        return pivoted_cholesky_unblocked(a);
    }
    let rank = usize::try_from(rank).unwrap_or(0).min(n);
    let mut g = Array2::zeros((n, rank.max(1)));
    for (k, &p) in piv.iter().enumerate() {
        let row = usize::try_from(p - 1).unwrap_or(0);
        for c in 0..rank.min(k + 1) {
            g[[row, c]] = a[[k, c]];
        }
    }
    g
}

/// The same factorisation written out (rank-one updates of the trailing block): the fallback
/// when LAPACK cannot take the array, and the check of the LAPACK path in the tests.
fn pivoted_cholesky_unblocked(mut a: Array2<f64>) -> Array2<f64> {
    use ndarray::{Axis, s};
    let n = a.nrows();
    let mut perm: Vec<usize> = (0..n).collect();
    let dmax = a.diag().iter().fold(0.0f64, |m, v| m.max(*v));
    let tol = dmax * n as f64 * f64::EPSILON;
    // Row k of `a` becomes row k of U = Lᵀ (pivoted order); the trailing block is kept whole
    // (both triangles) so rows stay contiguous in the rank-one updates.
    let mut rank = 0;
    for k in 0..n {
        let (p, piv) = (k..n).fold((k, f64::NEG_INFINITY), |(bi, bv), i| {
            if a[[i, i]] > bv { (i, a[[i, i]]) } else { (bi, bv) }
        });
        if !(piv > tol) {
            break;
        }
        if p != k {
            for j in 0..n {
                a.swap([k, j], [p, j]);
            }
            for i in 0..n {
                a.swap([i, k], [i, p]);
            }
            perm.swap(k, p);
        }
        let ukk = piv.sqrt();
        a[[k, k]] = ukk;
        a.slice_mut(s![k, k + 1..]).mapv_inplace(|v| v / ukk);
        rank = k + 1;
        let (head, mut tail) = a.view_mut().split_at(Axis(0), k + 1);
        let u = head.slice(s![k, k + 1..]);
        for (i, mut row) in tail.rows_mut().into_iter().enumerate() {
            let ui = u[i];
            row.slice_mut(s![k + 1..]).scaled_add(-ui, &u);
        }
    }
    let mut g = Array2::zeros((n, rank.max(1)));
    for (i, &row) in perm.iter().enumerate() {
        for c in 0..rank.min(i + 1) {
            g[[row, c]] = a[[c, i]];
        }
    }
    g
}

/// Sets up the variable-projection problem: totals, baseline removal, exact reduction.
/// Returns the problem, the number of linear parameters eliminated and the number of wavelengths
/// used (those without a masked point).
fn build_problem<'a>(
    set: &SpectraSet,
    model: &'a ValidModel,
    free: &'a [FreeParameter],
    params: &HardFitParams,
) -> Result<(VarproProblem<'a>, usize, usize), HardFitError> {
    if params.start_grid == 0 || params.start_grid.is_multiple_of(2) {
        return Err(HardFitError::Settings(format!(
            "start_grid must be odd (got {})",
            params.start_grid
        )));
    }
    if let Some(n) = params.known_noise
        && !(n.is_finite() && n > 0.0)
    {
        return Err(HardFitError::Settings(format!(
            "known_noise must be positive (got {n})"
        )));
    }
    if free.is_empty() {
        return Err(HardFitError::NoFreeParameters);
    }
    let known = KnownSpectra::resolve(model, &params.known_spectra, set.wavelengths_nm())?;
    let absorbing: Vec<usize> = model
        .species()
        .iter()
        .enumerate()
        .filter(|(k, s)| s.optics == crate::speciation::Optics::Absorbing && !known.species.contains(k))
        .map(|(k, _)| k)
        .collect();
    if absorbing.is_empty() {
        return Err(HardFitError::NoAbsorbingSpecies);
    }
    let (totals, factors) = measurement_totals(set, model, &params.concentrations)?;
    let medium = speciation_medium(set, params, &factors)?;
    if !params.activity.is_none() {
        model.charges()?;
    }
    // Masked points (e.g. saturated absorbances) cannot enter the exact reduction one by one:
    // the fit leaves out every wavelength at which any sample is masked.
    let used = set.unmasked_wavelength_indices();
    let masked = used.len() < set.n_wavelengths();
    // Every wavelength masked somewhere (e.g. one sample saturated throughout): the fit runs on
    // the columnwise path, where masked points weigh nothing, and the reduced problem (which
    // then only ranks the starts) is built from the data with its masked points set to zero.
    let every_wavelength_masked = used.is_empty();
    if every_wavelength_masked && params.baseline != Baseline::None {
        return Err(HardFitError::Settings(format!(
            "every wavelength has a masked point in some sample, and baseline {:?} couples the \
             wavelengths: leave out the samples masked throughout, or fit with baseline None",
            params.baseline
        )));
    }
    let selected;
    let (d, wavelengths) = if every_wavelength_masked {
        selected = (
            Array2::from_shape_fn(set.absorbance().dim(), |(i, j)| {
                if set.mask()[[i, j]] {
                    0.0
                } else {
                    set.absorbance()[[i, j]]
                }
            }),
            set.wavelengths_nm().clone(),
        );
        (&selected.0, &selected.1)
    } else if masked {
        selected = (
            set.absorbance().select(ndarray::Axis(1), &used),
            set.wavelengths_nm().select(ndarray::Axis(0), &used),
        );
        (&selected.0, &selected.1)
    } else {
        (set.absorbance(), set.wavelengths_nm())
    };
    let (ns, nw) = d.dim();
    let q_w = baseline_basis(wavelengths, params.baseline);
    let nb = q_w.as_ref().map_or(0, |q| q.ncols());
    // With known spectra, the reduction factors the stacked rows [D; E_kᵀ] (one extra row per
    // known spectrum): rows of G for the samples, H for the known spectra.
    let (reduced, known_reduced) = if known.species.is_empty() {
        (reduce(d, q_w.as_ref())?, Array2::zeros((0, 1)))
    } else {
        let e = if masked && !every_wavelength_masked {
            known.values.select(ndarray::Axis(1), &used)
        } else {
            known.values.clone()
        };
        let stacked = ndarray::concatenate![ndarray::Axis(0), d.view(), e.view()];
        let g = reduce(&stacked, q_w.as_ref())?;
        (
            g.slice(ndarray::s![..ns, ..]).to_owned(),
            g.slice(ndarray::s![ns.., ..]).to_owned(),
        )
    };
    let m = absorbing.len() * (params.spectra_temperature.order() + 1);
    let n_linear = m * nw + nb * ns - m * nb;
    let unknowns = free.len() + n_linear;
    let n_data = ns * nw;
    if unknowns >= n_data {
        return Err(HardFitError::TooFewData {
            data: n_data,
            unknowns,
        });
    }
    let problem = VarproProblem {
        model,
        free,
        temperatures_k: set.temperatures_k(),
        totals,
        sample_ids: set.samples().iter().map(|s| s.id.clone()).collect(),
        path_cm: set.path_lengths_cm(),
        absorbing,
        spectra_temperature: params.spectra_temperature,
        reduced,
        known: known.species,
        known_reduced,
        known_values: known.values,
        batch: Mutex::new(problem::WarmBatch::new(SpeciationBatch::new(
            model,
            ns,
            Derivatives::LogBeta,
        ))),
        recent: Mutex::new(problem::SpeciationCache::default()),
        derivatives_with_cost: true,
        every_wavelength_masked,
        medium,
    };
    Ok((problem, n_linear, nw))
}

/// Fits the free parameters of `model` to all samples of `set`.
///
/// # Errors
/// [`HardFitError`] when the fit cannot be set up (missing totals, nothing free, too few data)
/// or when the solver fails outright. A fit that runs but does not converge is returned as
/// `Ok` with its [`HardFit::termination`] saying so.
pub fn fit(set: &SpectraSet, model: &ValidModel, params: &HardFitParams) -> Result<HardFit, HardFitError> {
    fit_with_progress(set, model, params, &|_| {})
}

/// What a running fit is doing, for progress displays ([`fit_with_progress`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum FitProgress {
    /// `done` of `total` starting points scored.
    StartsScored {
        /// Points scored so far.
        done: usize,
        /// Points to score.
        total: usize,
    },
    /// A Levenberg–Marquardt run began (`run` counts from 1; the last may be the mirror side).
    SolverRun {
        /// Which run.
        run: usize,
    },
    /// The fit is summarising (covariance, spectra, alternatives).
    Summarising,
}

/// [`fit`] with a progress callback, called from the fitting thread (the library never prints;
/// the binary draws a bar from these events).
///
/// ```
/// use isosbestic::resolve::hard::{self, FitProgress, HardFitParams};
/// use isosbestic::simulate::simulate;
/// use isosbestic::testing::{metal_ligand_model, small_plan};
/// use std::sync::Mutex;
/// let model = metal_ligand_model("M", "X", &[(1, 1.0, 20e3)], None);
/// let sim = simulate(&model, &small_plan("M", "X", &["MX"]))?;
/// let events = Mutex::new(Vec::new());
/// let fit = hard::fit_with_progress(&sim.set, &model, &HardFitParams::default(), &|e| {
///     events.lock().unwrap().push(e)
/// })?;
/// let events = events.into_inner().unwrap();
/// assert!(matches!(events.first(), Some(FitProgress::StartsScored { done: 1, .. })));
/// assert!(events.contains(&FitProgress::SolverRun { run: 1 }));
/// assert_eq!(events.last(), Some(&FitProgress::Summarising));
/// assert!(fit.termination.converged());
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
///
/// # Errors
/// As [`fit`].
pub fn fit_with_progress(
    set: &SpectraSet,
    model: &ValidModel,
    params: &HardFitParams,
    progress: &dyn Fn(FitProgress),
) -> Result<HardFit, HardFitError> {
    let free = free_parameters(model);
    // nw: the wavelengths the fit uses (all but those with a masked point)
    let (problem, n_linear, nw) = build_problem(set, model, &free, params)?;
    // non-negative spectra or absorbance weights: the columnwise path (starts are still ranked
    // on the reduced problem, which is cheap and ranks them well enough)
    let problem = FitProblem::new(problem, set, params)?;
    let start0: Array1<f64> = free
        .iter()
        .map(|fp| model.species()[fp.species].law.parameters()[fp.parameter].value)
        .collect();
    let (lower, upper) = bounds(&free, params);
    let (starts, subset) = start_points(problem.varpro(), &free, &start0, params, progress)?;
    if let (Some(sub), Some(best)) = (&subset, starts.first()) {
        sub.seed(problem.varpro(), best);
    }
    let starts_tried = starts.len();
    let solver = LmParams {
        lower: lower.clone(),
        upper: upper.clone(),
        ..params.solver.clone()
    };
    // The solver runs from the best start; the next two are tried only if it does not converge
    // or converges to a degenerate solution (a species driven out of existence: a plateau of
    // the cost, not the answer to the model as posed).
    let mut best: Option<lm::LmOutcome> = None;
    let mut last_error = None;
    let mut runs = 0;
    for start in starts.iter().take(3) {
        runs += 1;
        progress(FitProgress::SolverRun { run: runs });
        match lm::minimise_normal_equations(&problem, start.clone(), solver.clone()) {
            Ok(out) => {
                if best.as_ref().is_none_or(|b| out.cost < b.cost) {
                    best = Some(out);
                }
            }
            Err(e) => last_error = Some(e.to_string()),
        }
        if best
            .as_ref()
            .is_some_and(|b| b.termination.converged() && !has_vanished_species(problem.varpro(), &b.param))
        {
            break;
        }
    }
    let out =
        best.ok_or_else(|| HardFitError::Solver(last_error.unwrap_or_else(|| "no start converged".into())))?;
    // The other side: the best start whose ΔH° signs differ from the solution's. With one series
    // and the ligand in excess, metal and complex can swap (ΔH° → −ΔH°) and fit almost as well.
    let dh_idx: Vec<usize> = (0..free.len()).filter(|&p| free[p].name == "dh_ref").collect();
    let signs = |x: &Array1<f64>| -> Vec<bool> { dh_idx.iter().map(|&p| x[p] >= 0.0).collect() };
    let mirror_out = if dh_idx.is_empty() {
        None
    } else {
        let best_signs = signs(&out.param);
        let grid = starts.iter().find(|x| signs(x) != best_signs);
        // For one complex, the mirror image of the solution (`mirror_image`) is usually much
        // closer to the other side's minimum than the best grid point there: the lower cost of
        // the two wins, and a run from the image starts with little damping.
        let image = grid
            .and(mirror_image(problem.varpro(), &out.param))
            .filter(|x| signs(x) != best_signs);
        // compared as the starts were ranked: on the scoring subset when there is one
        let cost = |x: &Array1<f64>| {
            use crate::resolve::lm::GaussNewtonProblem;
            let c = match &subset {
                Some(sub) => sub.problem.cost(x),
                None => problem.cost(x),
            };
            c.ok().filter(|c| c.is_finite()).unwrap_or(f64::INFINITY)
        };
        let start = match (grid, image) {
            (Some(g), Some(i)) if cost(&i) <= cost(g) => Some((
                i,
                LmParams {
                    initial_damping: 1e-4,
                    ..solver.clone()
                },
            )),
            (g, _) => g.map(|g| (g.clone(), solver.clone())),
        };
        start
            .inspect(|_| progress(FitProgress::SolverRun { run: runs + 1 }))
            .and_then(|(x, settings)| lm::minimise_normal_equations(&problem, x, settings).ok())
            // a run that drove a species out of the model is a plateau, not a mirror solution
            .filter(|o| !has_vanished_species(problem.varpro(), &o.param))
    };
    progress(FitProgress::Summarising);
    // Both sides are summarised before their spectra are formed: one pass over D for both.
    let mut fit_pending = summarise(
        set,
        model,
        &problem,
        &free,
        out,
        params,
        nw,
        n_linear,
        starts_tried,
    )?;
    let mut mirror_pending = mirror_out
        .map(|m| summarise(set, model, &problem, &free, m, params, nw, n_linear, starts_tried))
        .transpose()?;
    {
        let mut pending: Vec<(&mut HardFit, PendingSpectra)> = Vec::new();
        for (fit, p) in std::iter::once(&mut fit_pending).chain(mirror_pending.as_mut()) {
            if let Some(p) = p.take() {
                pending.push((fit, p));
            }
        }
        projected_spectra(set, problem.varpro(), &mut pending, nw < set.n_wavelengths());
    }
    let finish = |mut fit: HardFit| -> HardFit {
        fit.at_bounds = free
            .iter()
            .zip(&fit.parameters)
            .enumerate()
            .filter(|(p, (_, fp))| {
                let tol = 1e-9 * (upper[*p] - lower[*p]).abs().min(1e9);
                fp.value <= lower[*p] + tol || fp.value >= upper[*p] - tol
            })
            .map(|(_, (f, _))| format!("{} {}", f.species_name, f.name))
            .collect();
        fit.ceiling_violations = ceiling_violations(model, &fit);
        fit
    };
    let mut fit = finish(fit_pending.0);
    if let Some((m, _)) = mirror_pending {
        let mirror = finish(m);
        let distinct = fit.parameters.iter().zip(&mirror.parameters).any(|(a, b)| {
            (a.value - b.value).abs() > 5.0 * a.standard_error.max(b.standard_error).max(1e-12)
        });
        let delta_chi2 = (mirror.rss - fit.rss) / (fit.sigma * fit.sigma);
        fit.mirror_delta_chi2 = Some(if distinct { delta_chi2 } else { 0.0 });
        let breaks = |f: &HardFit| !f.ceiling_violations.is_empty();
        let choice = choose_side(distinct, delta_chi2, breaks(&fit), breaks(&mirror));
        let (mut keep, other) = if choice.take_mirror {
            (mirror, fit)
        } else {
            (fit, mirror)
        };
        let delta_chi2 = (other.rss - keep.rss) / (keep.sigma * keep.sigma);
        if distinct {
            keep.mirror_delta_chi2 = Some(delta_chi2);
        }
        if choice.report_other {
            keep.alternatives.push(AlternativeSolution {
                parameters: other.parameters.iter().map(|p| p.value).collect(),
                rss: other.rss,
                delta_chi2,
                ceiling_violations: other.ceiling_violations.clone(),
                chosen_by_prior: choice.chosen_by_prior,
            });
        }
        fit = keep;
    }
    if params.residual_svd {
        let theta: Array1<f64> = fit.parameters.iter().map(|p| p.value).collect();
        fit.residual_singular_values = residual_singular_values(&problem, &theta)?;
    }
    Ok(fit)
}

/// The mirror image of θ for one complex M + nL ⇌ MLₙ whose log β_ref and ΔH° are the free
/// parameters: the free metal and the complex swap roles. In sample i the complex fraction f
/// becomes 1 − f, so K′ = 1/(K·L·L′)ⁿ with L the free ligand at θ and L′ = L_t − n·M_t·(1 − f)
/// the one after the swap; log K′ is then fitted by the law's own linear form in (log β_ref,
/// ΔH°) (least squares over the samples, with ∂log β/∂ΔH° from the law). The ligand is the
/// component with the larger totals; the metal must enter the complex once. `None` for any
/// other model: a start candidate only, compared by its cost.
fn mirror_image(problem: &VarproProblem<'_>, theta: &Array1<f64>) -> Option<Array1<f64>> {
    let (model, free) = (problem.model, problem.free);
    let [a, b] = free else {
        return None;
    };
    let k = a.species;
    let sp = &model.species()[k];
    if model.n_components() != 2 || b.species != k || !matches!(sp.role, SpeciesRole::Formed) {
        return None;
    }
    let (lb, dh) = match (a.name.as_str(), b.name.as_str()) {
        ("log_beta_ref", "dh_ref") => (0, 1),
        ("dh_ref", "log_beta_ref") => (1, 0),
        _ => return None,
    };
    let totals = &problem.totals;
    let sum = |j: usize| totals.column(j).sum();
    let (metal, ligand) = if sum(0) < sum(1) { (0, 1) } else { (1, 0) };
    let n = *sp.stoichiometry.get(ligand)?;
    if sp.stoichiometry.get(metal) != Some(&1) || n < 1 {
        return None;
    }
    let free_species = |j: usize| {
        model
            .species()
            .iter()
            .position(|s| matches!(s.role, SpeciesRole::FreeComponent(c) if c == j))
    };
    let (m_free, l_free) = (free_species(metal)?, free_species(ligand)?);
    let (c, _) = problem.speciate(theta, false).ok()?;
    let (log_beta, grad) = problem.log_betas(theta, true);
    let grad = grad?;
    let nf = f64::from(n);
    // (x, y) = (∂log β/∂ΔH°, log K′) per sample
    let mut points = Vec::with_capacity(c.nrows());
    for i in 0..c.nrows() {
        let (ml, m, l) = (c[[i, k]], c[[i, m_free]], c[[i, l_free]]);
        let f = ml / (ml + m);
        let l_swapped = totals[[i, ligand]] - nf * totals[[i, metal]] * (1.0 - f);
        if !(l > 0.0 && l_swapped > 0.0 && f.is_finite()) {
            return None;
        }
        let y = -log_beta[[i, k]] - nf * (l.log10() + l_swapped.log10());
        points.push((grad[[i, dh]], y));
    }
    // least squares y = β₀ + ΔH°·x
    let np = points.len() as f64;
    let (mx, my) = points
        .iter()
        .fold((0.0, 0.0), |(sx, sy), (x, y)| (sx + x / np, sy + y / np));
    let (sxx, sxy) = points.iter().fold((0.0, 0.0), |(a, b), (x, y)| {
        (a + (x - mx) * (x - mx), b + (x - mx) * (y - my))
    });
    if !(sxx > 0.0) {
        return None;
    }
    let slope = sxy / sxx;
    let mut image = theta.clone();
    image[dh] = slope;
    image[lb] = my - slope * mx;
    image.iter().all(|v| v.is_finite()).then_some(image)
}

/// Which of two distinct solutions a fit keeps ([`choose_side`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct SideChoice {
    /// Keep the mirror-side run's solution.
    take_mirror: bool,
    /// A declared ε ceiling made the choice (exactly one of the two breaks one).
    chosen_by_prior: bool,
    /// List the other as an alternative: the data cannot tell them apart (|Δχ²| below
    /// [`MIRROR_DELTA_CHI2`]), or the prior kept the one that fits worse.
    report_other: bool,
}

/// Chooses between the solution and the mirror-side solution, `delta_chi2` = (RSS_mirror −
/// RSS_fit)/σ². Prior knowledge decides first: a solution that breaks a declared ε ceiling
/// loses to one that does not, whatever the Δχ² (the ceiling is a constraint, not a
/// preference); otherwise the lower χ² wins. Two solutions that are not distinct are one.
fn choose_side(distinct: bool, delta_chi2: f64, fit_breaks: bool, mirror_breaks: bool) -> SideChoice {
    if !distinct {
        return SideChoice {
            take_mirror: false,
            chosen_by_prior: false,
            report_other: false,
        };
    }
    let chosen_by_prior = fit_breaks != mirror_breaks;
    let take_mirror = if chosen_by_prior {
        fit_breaks
    } else {
        delta_chi2 < 0.0
    };
    // Δχ² of the other against the kept one
    let other_minus_kept = if take_mirror { -delta_chi2 } else { delta_chi2 };
    SideChoice {
        take_mirror,
        chosen_by_prior,
        report_other: other_minus_kept.abs() < MIRROR_DELTA_CHI2 || other_minus_kept < 0.0,
    }
}

/// Whether a fitted-spectrum species has a negligible concentration in every sample at θ
/// (below 1e-9 of the largest concentration of any species): the solver has driven it out of
/// the model.
fn has_vanished_species(problem: &VarproProblem<'_>, theta: &Array1<f64>) -> bool {
    let Ok((c, _)) = problem.speciate(theta, false) else {
        return false;
    };
    let cmax = c.iter().fold(0.0f64, |m, v| m.max(*v));
    problem
        .absorbing
        .iter()
        .any(|&k| c.column(k).iter().all(|&v| v <= 1e-9 * cmax))
}

/// Singular values of the reduced residual Q_X·G at θ (those of the full residual matrix, since
/// G·Gᵀ = D̃·D̃ᵀ); on the columnwise path, those of the weighted residual matrix.
fn residual_singular_values(fitted: &FitProblem<'_>, theta: &Array1<f64>) -> Result<Vec<f64>, HardFitError> {
    let problem = match fitted {
        FitProblem::Reduced(p) => p,
        FitProblem::Columnwise(cw) => {
            let sol = cw
                .solution(theta)
                .map_err(|e| HardFitError::Solver(e.to_string()))?;
            return Ok(sol
                .weighted_residuals
                .svddc(JobSvd::None)
                .map(|(_, sv, _)| sv.to_vec())
                .unwrap_or_default());
        }
    };
    let (c, _) = problem
        .speciate(theta, false)
        .map_err(|e| HardFitError::Solver(e.to_string()))?;
    let proj = problem
        .project(problem.design(c.view()))
        .map_err(|e| HardFitError::Solver(e.to_string()))?;
    let r = problem.residual_matrix(&proj, &problem.target(c.view()));
    Ok(r.svddc(JobSvd::None)
        .map(|(_, sv, _)| sv.to_vec())
        .unwrap_or_default())
}

/// The residual matrix (samples × wavelengths) of a fit: D − D̂ = Q_X·D·(I − P_W), the data
/// minus the fitted spectra contributions and baselines (D̂ from [`bootstrap::fitted_values`]);
/// for a fit with non-negative spectra or absorbance weights ([`columnwise`]), D − X·Sᵀ with
/// the fit's own spectra (unweighted).
///
/// `params` must be the settings the fit was made with (spectra temperature form, baseline,
/// spectra sign, weighting).
///
/// # Errors
/// [`HardFitError::Settings`] if the fit does not belong to `set`.
pub fn residual_matrix(
    set: &SpectraSet,
    fit: &HardFit,
    params: &HardFitParams,
) -> Result<Array2<f64>, HardFitError> {
    Ok(set.absorbance() - &bootstrap::fitted_values(set, params, fit)?)
}

/// σ²(JᵀJ)⁻¹ with undetermined directions marked (see `summarise`); all NaN when JᵀJ is empty
/// or its eigen-decomposition fails.
fn covariance_from_gauss_newton(jtj: &Array2<f64>, sigma: f64) -> Array2<f64> {
    let np = jtj.nrows();
    let mut cov = Array2::from_elem((np, np), f64::NAN);
    if np == 0 || jtj.ncols() != np {
        return cov;
    }
    let scale: Vec<f64> = (0..np).map(|a| jtj[[a, a]].max(0.0).sqrt()).collect();
    let mut undetermined = vec![false; np];
    let scaled = Array2::from_shape_fn((np, np), |(a, b)| {
        if scale[a] > 0.0 && scale[b] > 0.0 {
            jtj[[a, b]] / (scale[a] * scale[b])
        } else {
            0.0
        }
    });
    let Ok((lambda, vecs)) = scaled.eigh(UPLO::Lower) else {
        return cov;
    };
    cov.fill(0.0);
    let lmax = lambda.iter().fold(0.0f64, |m, v| m.max(*v));
    for k in 0..np {
        let vk = vecs.column(k);
        if lambda[k] > lmax * 1e-14 {
            for a in 0..np {
                for b in 0..np {
                    cov[[a, b]] += sigma * sigma * vk[a] * vk[b] / (lambda[k] * scale[a] * scale[b]);
                }
            }
        } else {
            for a in 0..np {
                if vk[a].abs() > 1e-8 {
                    undetermined[a] = true;
                }
            }
        }
    }
    for a in 0..np {
        if !(scale[a] > 0.0) {
            undetermined[a] = true;
        }
    }
    for a in 0..np {
        if undetermined[a] {
            for b in 0..np {
                cov[[a, b]] = f64::NAN;
                cov[[b, a]] = f64::NAN;
            }
            cov[[a, a]] = f64::INFINITY;
        }
    }
    cov
}

/// Largest Δχ² at which a distinct second solution is reported as an alternative.
pub const MIRROR_DELTA_CHI2: f64 = 25.0;

/// Species whose fitted spectrum exceeds its declared `max_absorptivity`.
fn ceiling_violations(model: &ValidModel, fit: &HardFit) -> Vec<String> {
    fit.absorbing_species
        .iter()
        .enumerate()
        .filter_map(|(c, name)| {
            let ceiling = model
                .species()
                .iter()
                .find(|s| &s.name == name)?
                .max_absorptivity?;
            let peak = (0..fit.spectra.nrows())
                .map(|j| fit.spectra[[j, c]])
                .fold(f64::NEG_INFINITY, f64::max);
            (peak > ceiling).then(|| format!("{name}: peak ε {peak:.1} > ceiling {ceiling}"))
        })
        .collect()
}

/// The `code`-th point of a mixed-radix grid (first digit fastest) in reflected order — the
/// mixed-radix Gray code: a digit runs backwards while the (reflected) digits above it sum to an
/// odd number, so consecutive points differ by one step in one coordinate. Returns the point's
/// plain code (first digit fastest).
///
/// "Above" counts the digits already reflected (the Gray digits), not the counter's: a 2 × 2 × 2
/// counter step (1, 1, 0) → (0, 0, 1) must land on the point next to (1, 1, 0)'s image.
fn snake_code(code: usize, radices: &[usize]) -> usize {
    let mut digits: Vec<usize> = Vec::with_capacity(radices.len());
    let mut rest = code;
    for &r in radices {
        digits.push(rest % r.max(1));
        rest /= r.max(1);
    }
    let mut above = 0;
    for i in (0..digits.len()).rev() {
        if above % 2 == 1 {
            digits[i] = radices[i].max(1) - 1 - digits[i];
        }
        above += digits[i];
    }
    digits
        .iter()
        .zip(radices)
        .rev()
        .fold(0, |acc, (&d, &r)| acc * r.max(1) + d)
}

/// Bounds: the user's when given, otherwise the physically sensible range of each kind of
/// parameter — log β within the range the speciation solver supports (−30 … 40), |ΔH°| ≤ 1000
/// kJ/mol, |ΔCp°| ≤ 10⁵ J K⁻¹ mol⁻¹, |dΔCp°/dT| ≤ 10⁴ J K⁻² mol⁻¹.
fn bounds(free: &[FreeParameter], params: &HardFitParams) -> (Vec<f64>, Vec<f64>) {
    let default = |fp: &FreeParameter| -> (f64, f64) {
        match fp.name.as_str() {
            n if n.starts_with("log_beta") => (-30.0, 40.0),
            "dh_ref" => (-1e6, 1e6),
            "dcp" => (-1e5, 1e5),
            "dcp_slope" => (-1e4, 1e4),
            _ => (f64::NEG_INFINITY, f64::INFINITY),
        }
    };
    let lower = free
        .iter()
        .enumerate()
        .map(|(p, fp)| params.solver.lower.get(p).copied().unwrap_or(default(fp).0))
        .collect();
    let upper = free
        .iter()
        .enumerate()
        .map(|(p, fp)| params.solver.upper.get(p).copied().unwrap_or(default(fp).1))
        .collect();
    (lower, upper)
}

/// Spectra used to rank the starting points when there are more (evenly spread over the
/// samples' order, which covers every series and temperature range).
const START_SCORING_SAMPLES: usize = 24;

/// Largest number of grid points scored when choosing starting points.
const MAX_START_POINTS: usize = 2000;

/// Candidate starts, best first: a grid around the model's values over every free log β
/// (`start_grid` points spanning ± `start_span`) and every free ΔH° (the model value and
/// ± 15, ± 40 kJ/mol). ΔH° must be part of the grid: at ΔH° = 0 all samples of one series have
/// the same composition, and with fewer series than absorbing species the residual does not
/// depend on log β at all. Grids larger than [`MAX_START_POINTS`] are subsampled with a fixed
/// seed. Points are ranked by the cost (no Jacobian needed), on at most
/// [`START_SCORING_SAMPLES`] spectra.
///
/// Also returns the scoring subset (with the rows of `problem` it holds) when one was used: the
/// fit compares the mirror side's candidate starts on it too, and seeds the full problem's
/// first speciation from its solution.
fn start_points<'a>(
    problem: &VarproProblem<'a>,
    free: &[FreeParameter],
    start0: &Array1<f64>,
    params: &HardFitParams,
    progress: &dyn Fn(FitProgress),
) -> Result<(Vec<Array1<f64>>, Option<ScoringSubset<'a>>), HardFitError> {
    use crate::resolve::lm::GaussNewtonProblem;
    use rand::Rng;
    let g = params.start_grid;
    let axes: Vec<Vec<f64>> = free
        .iter()
        .enumerate()
        .map(|(p, fp)| {
            let x0 = start0[p];
            if g > 1 && fp.name.starts_with("log_beta") {
                (0..g)
                    .map(|k| x0 - params.start_span + 2.0 * params.start_span * k as f64 / (g - 1) as f64)
                    .collect()
            } else if g > 1 && fp.name == "dh_ref" {
                vec![x0 - 40e3, x0 - 15e3, x0, x0 + 15e3, x0 + 40e3]
            } else {
                vec![x0]
            }
        })
        .collect();
    let total = axes
        .iter()
        .try_fold(1usize, |acc, a| acc.checked_mul(a.len()))
        .unwrap_or(usize::MAX);
    // Digit order of a grid code: ΔH° (and other non-log β) axes vary fastest. A ΔH° step
    // moves each sample's log β by ΔΔH°·|1/T − 1/T_ref|/(R ln 10), a fraction of a unit over
    // the usual temperature range, where a log β step moves every sample's by a whole unit
    // (more Newton steps from the neighbour's solution).
    let mut order: Vec<usize> = (0..axes.len()).collect();
    order.sort_by_key(|&p| free[p].name.starts_with("log_beta"));
    let point = |mut code: usize| -> Array1<f64> {
        let mut x = start0.clone();
        for &p in &order {
            let a = &axes[p];
            x[p] = a[code % a.len()];
            code /= a.len();
        }
        x
    };
    let mut candidates = vec![start0.clone()];
    if total <= MAX_START_POINTS {
        // in reflected (snake) order, each point one grid step from the last: the speciation
        // of each starts warm from a neighbour's
        let radices: Vec<usize> = order.iter().map(|&p| axes[p].len()).collect();
        candidates.extend((0..total).map(|code| point(snake_code(code, &radices))));
    } else {
        let mut rng = crate::testing::rng(0x5EED);
        candidates.extend((0..MAX_START_POINTS).map(|_| point(rng.random_range(0..total))));
    }
    // Scoring only ranks the starts: with many spectra, a spread subset of them (its rows of G,
    // exact for that subset) ranks them as well at a fraction of the cost.
    let ns = problem.temperatures_k.len();
    let n_score =
        START_SCORING_SAMPLES.max(4 * problem.absorbing.len() * (problem.spectra_temperature.order() + 1));
    let subset = (ns > n_score).then(|| {
        let rows: Vec<usize> = (0..n_score).map(|k| k * (ns - 1) / (n_score - 1)).collect();
        ScoringSubset {
            problem: problem.restricted(&rows),
            rows,
        }
    });
    let scorer = subset.as_ref().map_or(problem, |s| &s.problem);
    let total_points = candidates.len();
    let mut scored: Vec<(f64, Array1<f64>)> = candidates
        .into_iter()
        .enumerate()
        .filter_map(|(k, x)| {
            progress(FitProgress::StartsScored {
                done: k + 1,
                total: total_points,
            });
            let c = scorer.cost(&x).ok()?;
            c.is_finite().then_some((c, x))
        })
        .collect();
    if scored.is_empty() {
        return Err(HardFitError::Solver(
            "the speciation failed at every starting point".into(),
        ));
    }
    scored.sort_by(|a, b| a.0.total_cmp(&b.0));
    scored.dedup_by(|a, b| a.1 == b.1);
    Ok((scored.into_iter().map(|(_, x)| x).collect(), subset))
}

/// The spread subset of samples the starts were scored on ([`VarproProblem::restricted`]).
struct ScoringSubset<'a> {
    problem: VarproProblem<'a>,
    /// Which samples of the full problem, in order.
    rows: Vec<usize>,
}

impl ScoringSubset<'_> {
    /// Seeds the free concentrations of `full`'s (fresh) speciation buffer from the subset's
    /// solution at θ: each sample takes those of the nearest subset sample in the data's order
    /// whose totals are within a factor of two of its own (a neighbour in temperature within
    /// its series); samples without one keep a cold start. Only a start: every sample is still
    /// solved to the tolerance.
    fn seed(&self, full: &VarproProblem<'_>, theta: &Array1<f64>) {
        // C at θ (possibly from the subset's cache, so not read off its speciation buffer,
        // which holds the last point solved); the free components are its first columns
        let Ok((c, _)) = self.problem.speciate(theta, false) else {
            return;
        };
        let nc = full.model.n_components();
        let Ok(mut main) = full.batch.lock() else {
            return;
        };
        if main.log_betas.is_some() {
            return; // already solved once: its own solution is the better start
        }
        let close = |i: usize, k: usize| {
            full.totals
                .row(i)
                .iter()
                .zip(self.problem.totals.row(k))
                .all(|(&a, &b)| {
                    (a == 0.0 && b == 0.0)
                        || (a > 0.0 && b > 0.0 && (a / b).ln().abs() <= std::f64::consts::LN_2)
                })
        };
        for i in 0..full.totals.nrows() {
            let nearest = (0..self.rows.len())
                .filter(|&k| close(i, k))
                .min_by_key(|&k| self.rows[k].abs_diff(i));
            if let Some(k) = nearest {
                main.batch.free.row_mut(i).assign(&c.slice(ndarray::s![k, ..nc]));
            }
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn summarise(
    set: &SpectraSet,
    model: &ValidModel,
    fitted: &FitProblem<'_>,
    free: &[FreeParameter],
    out: lm::LmOutcome,
    params: &HardFitParams,
    nw: usize,
    n_linear: usize,
    starts_tried: usize,
) -> Result<(HardFit, Option<PendingSpectra>), HardFitError> {
    let ns = set.n_samples();
    let theta = out.param.clone();
    let problem = fitted.varpro();
    let (c, _) = problem
        .speciate(&theta, false)
        .map_err(|e| HardFitError::Solver(e.to_string()))?;
    let proj: Projection = problem
        .project(problem.design(c.view()))
        .map_err(|e| HardFitError::Solver(e.to_string()))?;
    // The columnwise path: weighted RSS, the points that carry weight, and the free ε (clipped
    // ones are held on their bound) from the per-wavelength solves.
    let columns = match fitted {
        FitProblem::Reduced(_) => None,
        FitProblem::Columnwise(cw) => Some((
            cw.solution(&theta)
                .map_err(|e| HardFitError::Solver(e.to_string()))?,
            cw.n_data(),
        )),
    };
    let (rss, n_data, n_linear) = match &columns {
        None => (
            problem.residual_sum_of_squares(&proj, &problem.target(c.view())),
            ns * nw,
            n_linear,
        ),
        Some((sol, n_data)) => (sol.rss, *n_data, sol.passive),
    };
    // filled in by `fit` for the solution it keeps (an SVD per alternative is not needed)
    let residual_singular_values = Vec::new();
    let dof = n_data.saturating_sub(free.len() + n_linear).max(1);
    let residual_sd = (rss / dof as f64).sqrt();
    let sigma = params.known_noise.unwrap_or(residual_sd);
    // Cov = σ² (JᵀJ)⁻¹ from the eigen-decomposition of JᵀJ scaled to unit diagonal
    // (H = S·C·S, S = diag(JᵀJ)^½, so the threshold does not depend on the parameters' units).
    // Directions of the parameter space the data do not determine (eigenvalues of C below
    // 1e-14 of the largest, i.e. singular values of the scaled J below 1e-7 of the largest —
    // the level at which JᵀJ formed in floating point no longer resolves them) get infinite
    // variance: every parameter with a component along such a direction has an infinite
    // variance and undefined (NaN) covariances. They are never reported as precise.
    let np = free.len();
    let cov = covariance_from_gauss_newton(&out.gauss_newton, sigma);
    let se: Vec<f64> = (0..np)
        .map(|p| {
            if cov[[p, p]].is_nan() {
                f64::NAN
            } else {
                cov[[p, p]].max(0.0).sqrt()
            }
        })
        .collect();
    let correlation = Array2::from_shape_fn((np, np), |(a, b)| {
        let denom = se[a] * se[b];
        if denom > 0.0 && denom.is_finite() {
            cov[[a, b]] / denom
        } else if a == b {
            1.0
        } else {
            0.0
        }
    });
    let parameters = free
        .iter()
        .zip(theta.iter())
        .zip(se.iter())
        .map(|((fp, &v), &e)| FittedParameter {
            parameter: fp.clone(),
            value: v,
            standard_error: e,
        })
        .collect();
    // Thermodynamics per species with a free parameter.
    let mut thermodynamics = Vec::new();
    let values = problem.law_values(&theta);
    for (k, sp) in model.species().iter().enumerate() {
        let idx: Vec<usize> = (0..np).filter(|&p| free[p].species == k).collect();
        if idx.is_empty() {
            continue;
        }
        // [ΔG°, ΔH°, ΔS°, ΔCp°] at θ and their covariance J_q Cov J_qᵀ over this species' free θ.
        let (q, jac) = sp.law.standard_with(&values[k]);
        let nlaw = sp.law.n_parameters();
        let mut qcov = [[0.0; 4]; 4];
        for (a, row) in qcov.iter_mut().enumerate() {
            for (b, out) in row.iter_mut().enumerate() {
                *out = idx
                    .iter()
                    .flat_map(|&i| idx.iter().map(move |&j| (i, j)))
                    .map(|(i, j)| {
                        jac[a * nlaw + free[i].parameter] * cov[[i, j]] * jac[b * nlaw + free[j].parameter]
                    })
                    .sum();
            }
        }
        let standard = StandardQuantities {
            t_ref_k: sp.law.reference_temperature_k(),
            dg_j_mol: q[0],
            dh_j_mol: q[1],
            ds_j_k_mol: q[2],
            dcp_j_k_mol: q[3],
            covariance: qcov,
        };
        thermodynamics.push(SpeciesThermodynamics {
            species: sp.name.clone(),
            standard,
        });
    }
    // Spectra and their standard errors: from the per-wavelength solves on the columnwise path
    // (σ√diag((X_PᵀW_jX_P)⁻¹) on the passive set, 0 where clipped), else from the projection.
    // (on the reduced path they are filled in by `projected_spectra`, one pass over D for every
    // solution summarised)
    let mut nnls_unconverged_nm = Vec::new();
    let ((spectra, spectra_standard_errors), pending) = match columns {
        Some((sol, _)) => {
            nnls_unconverged_nm = sol
                .nnls_unconverged
                .iter()
                .map(|&j| set.wavelengths_nm()[j])
                .collect();
            ((sol.spectra, sol.se_factors.mapv(|f| sigma * f)), None)
        }
        None => (
            (Array2::zeros((0, 0)), Array2::zeros((0, 0))),
            Some(PendingSpectra {
                pinv: proj.pinv,
                x: proj.x,
                c: c.clone(),
            }),
        ),
    };
    let fit = HardFit {
        parameters,
        covariance: cov,
        correlation,
        thermodynamics,
        absorbing_species: problem
            .absorbing
            .iter()
            .map(|&k| model.species()[k].name.clone())
            .collect(),
        known_species: problem
            .known
            .iter()
            .map(|&k| model.species()[k].name.clone())
            .collect(),
        spectra,
        spectra_standard_errors,
        concentrations: c,
        species: model.species().iter().map(|s| s.name.clone()).collect(),
        rss,
        degrees_of_freedom: dof,
        residual_sd,
        sigma,
        design_singular_values: proj.singular_values.to_vec(),
        residual_singular_values,
        n_data,
        n_parameters_total: free.len() + n_linear,
        design_rank: {
            // determined directions: singular values above 1e-9 of the largest
            let smax = proj.singular_values.iter().fold(0.0f64, |m, v| m.max(*v));
            proj.singular_values.iter().filter(|&&v| v > 1e-9 * smax).count()
        },
        iterations: out.iterations,
        termination: out.termination,
        starts_tried,
        at_bounds: Vec::new(),
        ceiling_violations: Vec::new(),
        alternatives: Vec::new(),
        nnls_unconverged_nm,
        weighted: !params.weighting.is_uniform(),
        mirror_delta_chi2: None,
    };
    Ok((fit, pending))
}

/// What a reduced-path summary still needs for its spectra: X, X⁺ and the concentrations.
struct PendingSpectra {
    x: Array2<f64>,
    pinv: Array2<f64>,
    c: Array2<f64>,
}

/// Spectra S = (X⁺ (D − K))ᵀ from the full data less the known spectra's part
/// K = diag(b)·C_k·E_kᵀ, with standard errors σ √diag((XᵀX)⁻¹), for every fit in `fits` from
/// one pass over D: X⁺(D − K) = X⁺D − (X⁺·diag(b)·C_k)·E_kᵀ, so D is neither copied nor read
/// twice. At a wavelength the fit left out (a masked point there) the spectrum is estimated
/// from the unmasked samples only, with its own σ√diag((X_uᵀX_u)⁻¹), NaN when they cannot
/// determine it.
fn projected_spectra(
    set: &SpectraSet,
    problem: &VarproProblem<'_>,
    fits: &mut [(&mut HardFit, PendingSpectra)],
    any_masked: bool,
) {
    let d = set.absorbance();
    let ns = set.n_samples();
    // X⁺·D for all fits in one product (BLAS; measured twice as fast as a pass row by row of
    // D at 2–4 rows × 100 samples × 3000 wavelengths): block f of `st` holds fit f's m rows
    let sizes: Vec<usize> = fits.iter().map(|(_, p)| p.pinv.nrows()).collect();
    let offsets: Vec<usize> = sizes
        .iter()
        .scan(0, |acc, &m| {
            let o = *acc;
            *acc += m;
            Some(o)
        })
        .collect();
    let mut coefficients = Array2::<f64>::zeros((sizes.iter().sum(), ns));
    for ((_, p), &o) in fits.iter().zip(&offsets) {
        coefficients
            .slice_mut(ndarray::s![o..o + p.pinv.nrows(), ..])
            .assign(&p.pinv);
    }
    let st = coefficients.dot(d);
    let masked_columns: Vec<usize> = if !any_masked {
        Vec::new()
    } else {
        (0..set.n_wavelengths())
            .filter(|&j| set.mask().column(j).iter().any(|m| *m))
            .collect()
    };
    for ((fit, p), &o) in fits.iter_mut().zip(&offsets) {
        let m = p.pinv.nrows();
        let mut spectra = st.slice(ndarray::s![o..o + m, ..]).t().to_owned();
        // less the known spectra's part: (X⁺·diag(b)·C_k)·E_kᵀ
        if !problem.known.is_empty() {
            let bc = Array2::from_shape_fn((ns, problem.known.len()), |(i, a)| {
                problem.path_cm[i] * p.c[[i, problem.known[a]]]
            });
            spectra -= &p.pinv.dot(&bc).dot(&problem.known_values).t();
        }
        let sigma = fit.sigma;
        let mut excluded_se: Vec<(usize, Vec<f64>)> = Vec::new();
        for &j in &masked_columns {
            let rows: Vec<usize> = (0..ns).filter(|&i| !set.mask()[[i, j]]).collect();
            let x = p.x.select(ndarray::Axis(0), &rows);
            let y: Array1<f64> = rows
                .iter()
                .map(|&i| {
                    d[[i, j]]
                        - problem
                            .known
                            .iter()
                            .enumerate()
                            .map(|(a, &k)| problem.path_cm[i] * p.c[[i, k]] * problem.known_values[[a, j]])
                            .sum::<f64>()
                })
                .collect();
            let solved = (rows.len() >= x.ncols())
                .then(|| x.least_squares(&y).ok())
                .flatten()
                .filter(|ls| ls.rank as usize == x.ncols());
            let inverse_diag = solved
                .as_ref()
                .and_then(|_| x.t().dot(&x).inv().ok())
                .map(|inv| inv.diag().to_vec());
            match (solved, inverse_diag) {
                (Some(ls), Some(diag)) => {
                    spectra.row_mut(j).assign(&ls.solution);
                    excluded_se.push((j, diag.iter().map(|v| sigma * v.max(0.0).sqrt()).collect()));
                }
                _ => {
                    spectra.row_mut(j).fill(f64::NAN);
                    excluded_se.push((j, vec![f64::NAN; x.ncols()]));
                }
            }
        }
        let xtx_inv_diag: Vec<f64> = (0..m).map(|a| p.pinv.row(a).dot(&p.pinv.row(a))).collect();
        let mut spectra_standard_errors =
            Array2::from_shape_fn((set.n_wavelengths(), m), |(_, a)| sigma * xtx_inv_diag[a].sqrt());
        for (j, se) in excluded_se {
            spectra_standard_errors.row_mut(j).assign(&Array1::from(se));
        }
        fit.spectra = spectra;
        fit.spectra_standard_errors = spectra_standard_errors;
    }
}

/// The totals at the measurement temperature (samples × model components, mol/L) and the
/// speciation [`Medium`] of `set`, from the concentration basis, scale, activity model and
/// background ionic strength of `params`, exactly as the global fit sets them up. Used by the
/// hybrid option of the soft resolution so that both resolutions share one definition.
///
/// # Errors
/// Missing totals, a bad density source or ionic strength, and (activity corrections on) a
/// species without a charge.
pub(crate) fn speciation_conditions(
    set: &SpectraSet,
    model: &ValidModel,
    params: &HardFitParams,
) -> Result<(Array2<f64>, Medium), HardFitError> {
    let (totals, factors) = measurement_totals(set, model, &params.concentrations)?;
    let medium = speciation_medium(set, params, &factors)?;
    if !params.activity.is_none() {
        model.charges()?;
    }
    Ok((totals, medium))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simulate::{Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
    use argmin::core::{Jacobian, Operator};
    use problem::sum_sq;

    /// The rule for the mirror-side solution (the issue's: report both with their Δχ² and let
    /// prior knowledge decide), case by case: (distinct, Δχ² = (RSS_mirror − RSS_fit)/σ², fit
    /// breaks a ceiling, mirror breaks one) → (take mirror, chosen by prior, report the other).
    #[test]
    fn a_declared_ceiling_decides_before_the_chi_square_and_a_better_mirror_wins_otherwise() {
        let cases = [
            // the same solution twice
            ((false, -40.0, true, false), (false, false, false)),
            // no prior: the lower χ² wins; listed when the data cannot tell them apart
            ((true, 3.0, false, false), (false, false, true)),
            ((true, 40.0, false, false), (false, false, false)),
            ((true, -3.0, false, false), (true, false, true)),
            // a mirror that fits clearly better is taken (it was once ignored beyond Δχ² 25)
            ((true, -40.0, false, false), (true, false, false)),
            ((true, -40.0, true, true), (true, false, false)),
            // the ceiling decides whatever the Δχ²; the worse-fitting choice lists the other
            ((true, 3.0, true, false), (true, true, true)),
            ((true, 29.0, true, false), (true, true, true)),
            ((true, -29.0, false, true), (false, true, true)),
            ((true, 40.0, false, true), (false, true, false)),
        ];
        for ((distinct, delta, fit_breaks, mirror_breaks), (take, prior, report)) in cases {
            let expected = SideChoice {
                take_mirror: take,
                chosen_by_prior: prior,
                report_other: report,
            };
            assert_eq!(
                choose_side(distinct, delta, fit_breaks, mirror_breaks),
                expected,
                "distinct {distinct}, Δχ² {delta}, fit breaks {fit_breaks}, mirror breaks {mirror_breaks}"
            );
        }
    }

    pub(crate) fn two_complex_model(lb1: f64, dh1: f64, lb2: f64, dh2: f64) -> ValidModel {
        crate::testing::metal_ligand_model("M", "X", &[(1, lb1, dh1), (2, lb2, dh2)], None)
    }

    /// [`small_plan`] with noise 2e-3 AU and per-spectrum offsets (sd 5e-3 AU), simulated.
    fn noisy_with_offsets(model: &ValidModel) -> crate::simulate::Simulation {
        let mut plan = small_plan();
        plan.noise = Noise::Absorbance { sd_au: 2e-3 };
        plan.offset_sd_au = 5e-3;
        simulate(model, &plan).unwrap()
    }

    pub(crate) fn small_plan() -> SimulationPlan {
        use crate::testing::band;
        SimulationPlan {
            seed: 1,
            first_nm: 400.0,
            last_nm: 700.0,
            step_nm: 10.0,
            temperatures_c: vec![10.0, 30.0, 50.0, 70.0],
            path_cm: 1.0,
            preparation_temperature_c: 25.0,
            thermal_expansion: false,
            noise: Noise::None,
            offset_sd_au: 0.0,
            slope_sd_au_per_100nm: 0.0,
            series: [0.3, 3.0]
                .iter()
                .map(|&x| SeriesPlan {
                    label: format!("X{x}"),
                    totals_m: [("M".into(), 0.02), ("X".into(), x)].into(),
                })
                .collect(),
            spectra: vec![
                PureSpectrum {
                    species: "M".into(),
                    bands: vec![band(420.0, 30.0, 6.0)],
                },
                PureSpectrum {
                    species: "MX".into(),
                    bands: vec![band(500.0, 35.0, 18.0)],
                },
                PureSpectrum {
                    species: "MX2".into(),
                    bands: vec![band(600.0, 40.0, 40.0)],
                },
            ],
        }
    }

    #[test]
    fn the_residual_vanishes_at_the_truth_and_the_jacobian_matches_finite_differences() {
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = simulate(&model, &small_plan()).unwrap();
        let free = free_parameters(&model);
        let (problem, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
        let truth = ndarray::array![0.4, 12_000.0, -0.2, 35_000.0];
        let r = problem.apply(&truth).unwrap();
        assert!(
            r.dot(&r).sqrt() < 1e-10,
            "residual norm at the truth: {}",
            r.dot(&r).sqrt()
        );
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let j = problem.jacobian(&theta).unwrap();
        for p in 0..theta.len() {
            let h = 1e-6 * theta[p].abs().max(1.0);
            let mut tp = theta.clone();
            tp[p] += h;
            let mut tm = theta.clone();
            tm[p] -= h;
            let fd = (problem.apply(&tp).unwrap() - problem.apply(&tm).unwrap()) / (2.0 * h);
            let err = (&fd - &j.column(p)).iter().fold(0.0f64, |m, v| m.max(v.abs()));
            let scale = fd.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            assert!(
                err <= 1e-5 * scale + 1e-14,
                "parameter {p}: max |J − FD| = {err}, scale {scale}"
            );
        }
    }

    #[test]
    fn residual_singular_values_are_those_of_the_full_residual_matrix_and_can_be_skipped() {
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let mut plan = small_plan();
        plan.noise = Noise::Absorbance { sd_au: 1e-3 };
        let sim = simulate(&model, &plan).unwrap();
        let params = HardFitParams::default();
        let with = fit(&sim.set, &model, &params).unwrap();
        // Reference: LAPACK's SVD (dgesdd) of D − D̂ formed on the full wavelength grid
        let d_hat = bootstrap::fitted_values(&sim.set, &params, &with).unwrap();
        let (_, s, _) = (sim.set.absorbance() - &d_hat).svddc(JobSvd::None).unwrap();
        assert!(!with.residual_singular_values.is_empty());
        for (ours, full) in with.residual_singular_values.iter().zip(&s) {
            assert!((ours - full).abs() <= 1e-9 * s[0], "{ours} vs {full}");
        }
        let without = fit(
            &sim.set,
            &model,
            &HardFitParams {
                residual_svd: false,
                ..params
            },
        )
        .unwrap();
        assert!(without.residual_singular_values.is_empty());
        for (a, b) in with.parameters.iter().zip(&without.parameters) {
            assert!((a.value - b.value).abs() <= 1e-12 * a.value.abs().max(1.0));
        }
    }

    #[test]
    fn the_mirror_image_swaps_the_free_metal_and_complex_fractions() {
        // M + 4L ⇌ ML4 with the ligand in excess; defining property of the image θ′ (checked by
        // speciating at θ′): in every sample the complex fraction becomes 1 − f
        let model = crate::testing::metal_ligand_model("M", "L", &[(4, 4.0, 30e3)], None);
        let mut plan = crate::testing::small_plan("M", "L", &["ML4"]);
        plan.series.truncate(1);
        plan.series[0].totals_m = [("M".to_string(), 0.004), ("L".to_string(), 0.1)].into();
        let sim = simulate(&model, &plan).unwrap();
        let free = free_parameters(&model);
        let (problem, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
        let theta = ndarray::array![4.0, 30e3];
        let image = mirror_image(&problem, &theta).expect("one complex: an image");
        assert!(image[1] < 0.0, "ΔH° changes sign: {image}");
        let fraction = |c: &Array2<f64>, i: usize| c[[i, 2]] / (c[[i, 2]] + c[[i, 0]]);
        let (c, _) = problem.speciate(&theta, false).unwrap();
        let (c_image, _) = problem.speciate(&image, false).unwrap();
        for i in 0..c.nrows() {
            let (f, f_image) = (fraction(&c, i), fraction(&c_image, i));
            assert!(
                (f_image - (1.0 - f)).abs() < 0.02,
                "sample {i}: f {f}, image {f_image}"
            );
        }
        // two complexes: no image
        let two = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim2 = simulate(&two, &small_plan()).unwrap();
        let free2 = free_parameters(&two);
        let (p2, _, _) = build_problem(&sim2.set, &two, &free2, &HardFitParams::default()).unwrap();
        assert!(mirror_image(&p2, &ndarray::array![0.4, 12_000.0, -0.2, 35_000.0]).is_none());
    }

    #[test]
    fn a_restricted_problem_costs_what_its_samples_cost_fitted_alone() {
        use crate::resolve::lm::GaussNewtonProblem;
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = noisy_with_offsets(&model);
        let free = free_parameters(&model);
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        for known_spectra in [Vec::new(), vec![known_from(&sim, &model, 0)]] {
            let params = HardFitParams {
                baseline: Baseline::Offset,
                known_spectra,
                ..HardFitParams::default()
            };
            let (problem, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
            let rows = [0usize, 2, 3, 5, 7];
            let ids: Vec<&str> = rows.iter().map(|&i| sim.set.samples()[i].id.as_str()).collect();
            let alone = sim.set.select_samples(&ids).unwrap();
            let (direct, _, _) = build_problem(&alone, &model, &free, &params).unwrap();
            let restricted = problem.restricted(&rows);
            assert!(restricted.reduced.ncols() <= rows.len() + restricted.known.len());
            // solved to the scoring tolerance: close enough to rank starts
            let exact = direct.cost(&theta).unwrap();
            approx::assert_relative_eq!(restricted.cost(&theta).unwrap(), exact, max_relative = 1e-4);
            // asking for derivatives changes the batch's shape, not its tolerance
            restricted.normal_equations(&theta).unwrap();
            let tolerance = restricted.batch.lock().unwrap().batch.tolerance;
            assert_eq!(tolerance.to_bits(), problem::SCORING_TOLERANCE.to_bits());
            // solved to rounding, the reduction itself is exact
            *restricted.recent.lock().unwrap() = problem::SpeciationCache::default();
            restricted.batch.lock().unwrap().batch.tolerance = crate::speciation::RESIDUAL_TOLERANCE;
            approx::assert_relative_eq!(restricted.cost(&theta).unwrap(), exact, max_relative = 1e-9);
        }
    }

    #[test]
    fn the_first_order_prediction_of_the_free_concentrations_beats_the_last_solution() {
        // From a speciation with derivatives at log β, the free concentrations moved along
        // them to log β + Δ are much closer to the solution at log β + Δ than the old ones
        // (first order: the error shrinks with Δ², the old one with Δ).
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = simulate(&model, &small_plan()).unwrap();
        let free = free_parameters(&model);
        let (problem, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        problem.speciate(&theta, true).unwrap();
        let moved = ndarray::array![0.75, 5_500.0, 0.28, 20_500.0];
        let (target, _) = problem.log_betas(&moved, false);
        let (old_free, predicted) = {
            let mut warm = problem.batch.lock().unwrap();
            let old = warm.batch.free.clone();
            assert!(warm.extrapolate_to(&target));
            (old, warm.batch.free.clone())
        };
        // the exact answer at the new constants, from a fresh (cold) problem
        let (fresh, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
        fresh.speciate(&moved, false).unwrap();
        let exact = fresh.batch.lock().unwrap().batch.free.clone();
        let worst = |a: &Array2<f64>| {
            a.iter()
                .zip(&exact)
                .map(|(x, e)| (x / e).ln().abs())
                .fold(0.0f64, f64::max)
        };
        let (before, after) = (worst(&old_free), worst(&predicted));
        assert!(before > 1e-3, "the move must matter: {before}");
        assert!(after < 0.1 * before, "ln error {before} → {after}");
    }

    #[test]
    fn the_scoring_subset_seeds_only_samples_of_its_own_composition_and_the_answer_is_unchanged() {
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = simulate(&model, &small_plan()).unwrap(); // samples 0–3: X 0.3 M, 4–7: X 3 M
        let free = free_parameters(&model);
        let params = HardFitParams::default();
        let (problem, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let rows = vec![0usize, 2];
        let sub = ScoringSubset {
            problem: problem.restricted(&rows),
            rows,
        };
        sub.seed(&problem, &theta);
        let (c_sub, _) = sub.problem.speciate(&theta, false).unwrap();
        let seeded = problem.batch.lock().unwrap().batch.free.clone();
        // nearest subset sample of the same composition: 0, 1 ← 0; 2, 3 ← 2
        for (i, k) in [(0, 0), (1, 0), (2, 1), (3, 1)] {
            assert_eq!(seeded.row(i), c_sub.slice(ndarray::s![k, ..2]), "sample {i}");
        }
        assert!(
            seeded.slice(ndarray::s![4.., ..]).iter().all(|v| *v == 0.0),
            "{seeded}"
        );
        // a start only: the solution equals a fresh problem's
        let (c, _) = problem.speciate(&theta, true).unwrap();
        let (fresh, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
        let (c0, _) = fresh.speciate(&theta, true).unwrap();
        for (a, b) in c.iter().zip(&c0) {
            approx::assert_relative_eq!(*a, *b, max_relative = 1e-10);
        }
    }

    #[test]
    fn the_snake_order_visits_every_grid_point_once_in_single_steps() {
        for radices in [vec![5usize, 5], vec![3, 4, 2], vec![7], vec![1, 3], vec![2, 1, 3]] {
            let total: usize = radices.iter().product();
            let digits = |mut c: usize| -> Vec<usize> {
                radices
                    .iter()
                    .map(|&r| {
                        let d = c % r;
                        c /= r;
                        d
                    })
                    .collect()
            };
            let codes: Vec<usize> = (0..total).map(|c| snake_code(c, &radices)).collect();
            let mut sorted = codes.clone();
            sorted.sort_unstable();
            assert_eq!(
                sorted,
                (0..total).collect::<Vec<_>>(),
                "{radices:?}: a permutation"
            );
            for w in codes.windows(2) {
                let steps: usize = digits(w[0])
                    .iter()
                    .zip(digits(w[1]))
                    .map(|(a, b)| a.abs_diff(b))
                    .sum();
                assert_eq!(steps, 1, "{radices:?}: {} → {}", w[0], w[1]);
            }
        }
    }

    #[test]
    fn the_pivoted_cholesky_factor_reproduces_full_and_rank_deficient_gram_matrices() {
        let mut rng = crate::testing::rng(11);
        use rand::Rng;
        // (beyond 64 rows dpstrf takes its blocked path)
        for (n, k) in [(6usize, 6usize), (7, 3), (30, 12), (5, 1), (100, 100), (130, 70)] {
            // A = B·Bᵀ with B n × k: rank k
            let b = Array2::from_shape_fn((n, k), |_| rng.random_range(-1.0..1.0));
            let a = b.dot(&b.t());
            for factor in [pivoted_cholesky, pivoted_cholesky_unblocked] {
                let g = factor(a.clone());
                assert_eq!(g.ncols(), k, "rank of an {n} × {n} Gram matrix of rank {k}");
                let err = (&g.dot(&g.t()) - &a).iter().fold(0.0f64, |m, v| m.max(v.abs()));
                assert!(err < 1e-12, "n {n}, k {k}: max |GGᵀ − A| = {err}");
            }
        }
        // the zero matrix: one zero column
        for factor in [pivoted_cholesky, pivoted_cholesky_unblocked] {
            let g = factor(Array2::zeros((4, 4)));
            assert_eq!(g.dim(), (4, 1));
        }
    }

    #[test]
    fn the_normal_equations_equal_those_formed_from_the_explicit_jacobian() {
        use crate::resolve::lm::GaussNewtonProblem;
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = noisy_with_offsets(&model);
        let free = free_parameters(&model);
        for order in [0usize, 1] {
            let params = HardFitParams {
                baseline: Baseline::Offset,
                spectra_temperature: match order {
                    0 => SpectraTemperature::Constant,
                    1 => SpectraTemperature::Linear { reference_k: 310.0 },
                    _ => SpectraTemperature::Quadratic { reference_k: 310.0 },
                },
                ..HardFitParams::default()
            };
            let (problem, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
            let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
            let r = problem.apply(&theta).unwrap();
            let j = problem.jacobian(&theta).unwrap();
            let ne = problem.normal_equations(&theta).unwrap();
            approx::assert_relative_eq!(ne.cost, 0.5 * r.dot(&r), max_relative = 1e-12);
            approx::assert_relative_eq!(problem.cost(&theta).unwrap(), ne.cost, max_relative = 1e-12);
            let g = j.t().dot(&r);
            let h = j.t().dot(&j);
            for a in 0..theta.len() {
                let gs = g.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                assert!(
                    (ne.gradient[a] - g[a]).abs() <= 1e-9 * gs,
                    "order {order}, gradient {a}"
                );
                for b in 0..theta.len() {
                    let hs = (h[[a, a]] * h[[b, b]]).sqrt();
                    assert!(
                        (ne.gauss_newton[[a, b]] - h[[a, b]]).abs() <= 1e-9 * hs,
                        "order {order}, JᵀJ[{a},{b}]: {} vs {}",
                        ne.gauss_newton[[a, b]],
                        h[[a, b]]
                    );
                }
            }
        }
    }

    /// The known spectrum of species `k` of a simulation as a [`FixedSpectrum`] on its grid.
    fn known_from(sim: &crate::simulate::Simulation, model: &ValidModel, k: usize) -> FixedSpectrum {
        FixedSpectrum {
            species: model.species()[k].name.clone(),
            wavelengths_nm: sim.set.wavelengths_nm().to_vec(),
            absorptivity: sim.spectra.column(k).to_vec(),
        }
    }

    #[test]
    fn with_a_known_spectrum_the_jacobian_and_normal_equations_match_finite_differences() {
        use crate::resolve::lm::GaussNewtonProblem;
        let model = two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = noisy_with_offsets(&model);
        let free = free_parameters(&model);
        let params = HardFitParams {
            baseline: Baseline::Offset,
            known_spectra: vec![known_from(&sim, &model, 0)], // the free metal M
            ..HardFitParams::default()
        };
        let (problem, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
        assert_eq!(problem.absorbing, vec![2, 3], "MX and MX2 fitted, M held");
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let r = problem.apply(&theta).unwrap();
        let j = problem.jacobian(&theta).unwrap();
        // Central differences of the residual (no outside value: the definition of J).
        for p in 0..theta.len() {
            let h = 1e-6 * theta[p].abs().max(1.0);
            let mut tp = theta.clone();
            tp[p] += h;
            let mut tm = theta.clone();
            tm[p] -= h;
            let fd = (problem.apply(&tp).unwrap() - problem.apply(&tm).unwrap()) / (2.0 * h);
            let err = (&fd - &j.column(p)).iter().fold(0.0f64, |m, v| m.max(v.abs()));
            let scale = fd.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            assert!(
                err <= 1e-5 * scale + 1e-14,
                "parameter {p}: max |J − FD| = {err}, scale {scale}"
            );
        }
        let ne = problem.normal_equations(&theta).unwrap();
        approx::assert_relative_eq!(ne.cost, 0.5 * r.dot(&r), max_relative = 1e-12);
        let g = j.t().dot(&r);
        let h = j.t().dot(&j);
        let gs = g.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for a in 0..theta.len() {
            assert!((ne.gradient[a] - g[a]).abs() <= 1e-9 * gs, "gradient {a}");
            for b in 0..theta.len() {
                let hs = (h[[a, a]] * h[[b, b]]).sqrt();
                assert!(
                    (ne.gauss_newton[[a, b]] - h[[a, b]]).abs() <= 1e-9 * hs,
                    "JᵀJ[{a},{b}]"
                );
            }
        }
        // The reduced residual has the norm of the full one, (D − diag(b)·C_M·ε_Mᵀ − X·Sᵀ)(I − P_W)
        // with S the least-squares spectra: the reduction with known spectra is exact.
        let (c, _) = problem.speciate(&theta, false).unwrap();
        let x = problem.design(c.view());
        let less = problem.less_known(sim.set.absorbance(), c.view());
        let q_w = baseline_basis(sim.set.wavelengths_nm(), Baseline::Offset).unwrap();
        let dt = &*less - &less.dot(&q_w).dot(&q_w.t());
        let s = x.least_squares(&dt).unwrap().solution;
        let full = &dt - &x.dot(&s);
        approx::assert_relative_eq!(sum_sq(full.view()), r.dot(&r), max_relative = 1e-9);
    }

    #[test]
    fn the_rank_k_update_gives_the_gram_matrix_of_contiguous_and_strided_data() {
        use rand::Rng;
        let mut rng = crate::testing::rng(5);
        let d = Array2::from_shape_fn((7, 40), |_| rng.random_range(-1.0..1.0));
        let want = d.dot(&d.t());
        let got = gram_matrix(&d);
        approx::assert_abs_diff_eq!(got, want, epsilon = 1e-12);
        // a transposed (column-major) array takes the general product
        let t = d.t().to_owned().reversed_axes();
        approx::assert_abs_diff_eq!(gram_matrix(&t), want, epsilon = 1e-12);
        assert_eq!(gram_matrix(&Array2::zeros((3, 0))).dim(), (3, 3));
    }
}
