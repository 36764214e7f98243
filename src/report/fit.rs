//! A complete global-fit run: configuration, the report (everything needed to reproduce and
//! judge the fit) and its files.

use crate::data::{DataFiles, SpectraSet, load};
use crate::preprocess::{PreprocessParams, PreprocessSummary};
use crate::report::tables::{Table, format_float, write_json};
use crate::resolve::hard::{self, HardFit, HardFitParams};
use crate::speciation::{EquilibriumModel, ValidModel};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::fmt;
use std::path::{Path, PathBuf};

mod candidates;
mod vant_hoff;
pub use candidates::{
    CandidateResult, FailedCandidate, FittedCandidate, ModelComparison, candidate_names, compare_candidates,
    is_nested_in,
};
pub use vant_hoff::{
    CURVE_POINTS, ClassicComparison, ClassicThermo, LnKCurve, VANT_HOFF_LEVEL, VantHoffPoint, VantHoffTable,
    vant_hoff_table,
};

/// Everything a fit run needs, as one serde structure (a run configuration file in TOML).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitRunConfig {
    /// The data files.
    pub data: DataFiles,
    /// The equilibrium model file (TOML or JSON, by extension).
    pub model: PathBuf,
    /// Preprocessing applied before the fit.
    #[serde(default)]
    pub preprocess: PreprocessParams,
    /// Fit settings.
    #[serde(default)]
    pub fit: HardFitParams,
    /// Further candidate model files fitted to the same data and ranked against `model`
    /// (see [`ModelComparison`]).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub candidates: Vec<PathBuf>,
    /// Density of the solvent or brine (CSV: `temperature_C` or `temperature_K`,
    /// `density_kg_m3`): when given, the totals scale with it between preparation and
    /// measurement (thermal expansion), whatever `fit.concentrations` says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub density_table: Option<PathBuf>,
}

/// One input file with its SHA-256 checksum, so a report names exactly what it was made from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct InputFile {
    /// Path as given.
    pub path: PathBuf,
    /// SHA-256 of the contents, lower-case hex.
    pub sha256: String,
    /// Size in bytes.
    pub bytes: u64,
}

/// Reads a file and computes its checksum.
///
/// # Errors
/// [`Error::Input`] naming the file.
pub fn checksum(path: &Path) -> Result<InputFile> {
    let bytes = std::fs::read(path).map_err(|source| Error::Input {
        path: path.to_path_buf(),
        source,
    })?;
    let digest = Sha256::digest(&bytes);
    Ok(InputFile {
        path: path.to_path_buf(),
        sha256: digest.iter().map(|b| format!("{b:02x}")).collect(),
        bytes: bytes.len() as u64,
    })
}

/// Reads and checks an equilibrium model file (`.json` as JSON, anything else as TOML).
///
/// # Errors
/// [`Error::Input`] if unreadable; [`Error::Speciation`] with the parser's line and column or
/// the validation problem.
pub fn read_model(path: &Path) -> Result<ValidModel> {
    let text = std::fs::read_to_string(path).map_err(|source| Error::Input {
        path: path.to_path_buf(),
        source,
    })?;
    let model = if path.extension().is_some_and(|e| e.eq_ignore_ascii_case("json")) {
        EquilibriumModel::from_json_str(&text)
    } else {
        EquilibriumModel::from_toml_str(&text)
    }
    .map_err(|e| Error::InModel {
        path: path.to_path_buf(),
        source: e,
    })?;
    model.check().map_err(|e| Error::InModel {
        path: path.to_path_buf(),
        source: e,
    })
}

/// The fit settings with the known spectra the model names (`known_spectrum = "…"`, relative to
/// the model file's folder) read and added, unless the settings already hold that species'
/// spectrum; each file read is checksummed into `inputs`.
///
/// # Errors
/// [`Error::Input`] or [`Error::Csv`] naming the spectrum file, line and column.
pub fn with_model_spectra(
    params: &HardFitParams,
    model: &ValidModel,
    model_path: &Path,
    inputs: &mut Vec<InputFile>,
) -> Result<HardFitParams> {
    let mut out = params.clone();
    for (name, path) in model_spectrum_files(model, model_path) {
        if !params.known_spectra.iter().any(|k| k.species == name) {
            inputs.push(checksum(&path)?);
            out.known_spectra.push(hard::FixedSpectrum::read(&path, &name)?);
        }
    }
    Ok(out)
}

/// The known-spectrum files a model names (`known_spectrum = "…"`), as (species, path) with
/// relative paths resolved against the model file's folder.
pub fn model_spectrum_files(model: &ValidModel, model_path: &Path) -> Vec<(String, PathBuf)> {
    let dir = model_path.parent().unwrap_or_else(|| Path::new(""));
    model
        .species()
        .iter()
        .filter_map(|s| s.known_spectrum.as_ref().map(|f| (s.name.clone(), dir.join(f))))
        .collect()
}

/// A finding about a fit that a user should read (not an error: the fit ran).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
#[non_exhaustive]
pub enum Diagnostic {
    /// The solver did not converge.
    NotConverged {
        /// Why it stopped.
        termination: String,
    },
    /// A parameter ended on its bound.
    AtBound {
        /// Which parameter.
        parameter: String,
    },
    /// Two parameters are almost fully correlated: the data cannot separate them.
    HighCorrelation {
        /// First parameter.
        first: String,
        /// Second parameter.
        second: String,
        /// Correlation coefficient.
        correlation: f64,
    },
    /// The concentration design is rank deficient: some spectra are not determined.
    RankDeficientDesign {
        /// Numerical rank.
        rank: usize,
        /// Columns (absorbing species × spectra temperature terms).
        columns: usize,
    },
    /// A distinct second solution fits almost as well (e.g. metal and complex swapped), or
    /// fits better but breaks a declared ε ceiling.
    Ambiguous {
        /// Its parameter values.
        parameters: Vec<f64>,
        /// Its Δχ² against the reported solution.
        delta_chi2: f64,
        /// Whether a declared ε ceiling chose the reported solution.
        chosen_by_prior: bool,
    },
    /// Known spectra held fixed ruled out the mirror solution (metal and complex swapped): the
    /// run started with the other ΔH° signs came back to the reported solution or fits worse.
    KnownSpectraDecide {
        /// The species whose spectra were held fixed.
        species: Vec<String>,
        /// Δχ² of the mirror-side solution against the reported one (0 when it came back).
        delta_chi2: f64,
    },
    /// The non-negative spectra solve stopped at its iteration limit at some wavelengths (ε
    /// there are feasible but may not be optimal).
    NnlsIterationLimit {
        /// The wavelengths concerned, nm.
        wavelengths_nm: Vec<f64>,
    },
    /// A fitted spectrum breaks a declared ε ceiling.
    CeilingBroken {
        /// Which species and by how much.
        detail: String,
    },
    /// The residuals have structure: their largest singular value stands above the noise edge.
    StructuredResiduals {
        /// Largest singular value of the residual matrix.
        first_singular_value: f64,
        /// σ(√samples + √wavelengths) with σ the residual standard deviation.
        noise_edge: f64,
    },
    /// The residual standard deviation is well above the noise level estimated from the data
    /// alone: the model misses something (a species, ΔCp°, band changes with T, baselines).
    LackOfFit {
        /// Residual standard deviation of the fit, AU.
        residual_sd: f64,
        /// Noise estimated by factor analysis at the rank the model implies, AU.
        noise_estimate: f64,
    },
}

impl fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NotConverged { termination } => write!(f, "the fit did not converge ({termination})"),
            Self::AtBound { parameter } => {
                write!(
                    f,
                    "{parameter} ended on its bound; its standard error is not meaningful"
                )
            }
            Self::HighCorrelation {
                first,
                second,
                correlation,
            } => write!(
                f,
                "{first} and {second} are correlated ({correlation:+.4}): the data barely separate them"
            ),
            Self::RankDeficientDesign { rank, columns } => write!(
                f,
                "the concentration profiles span only {rank} of {columns} dimensions: some pure spectra are not determined"
            ),
            Self::Ambiguous {
                parameters,
                delta_chi2,
                chosen_by_prior,
            } => {
                if *delta_chi2 < -hard::MIRROR_DELTA_CHI2 {
                    write!(
                        f,
                        "a second solution {parameters:?} fits better (Δχ² = {delta_chi2:.3}); "
                    )?;
                } else {
                    write!(
                        f,
                        "a second solution {parameters:?} fits almost as well (Δχ² = {delta_chi2:.3}); "
                    )?;
                }
                if *chosen_by_prior && *delta_chi2 < -hard::MIRROR_DELTA_CHI2 {
                    write!(
                        f,
                        "the reported one was chosen because the other breaks a declared ε ceiling — the data alone clearly prefer the other: check the ceiling and the model"
                    )
                } else if *chosen_by_prior {
                    write!(
                        f,
                        "the reported one was chosen because the other breaks a declared ε ceiling"
                    )
                } else {
                    write!(
                        f,
                        "the data cannot decide: declare a weak absorber's ε ceiling (max_absorptivity), a known spectrum, or measure several ligand levels"
                    )
                }
            }
            Self::KnownSpectraDecide { species, delta_chi2 } => {
                if *delta_chi2 > 0.0 {
                    write!(
                        f,
                        "the swapped (mirror) solution fits worse by Δχ² = {delta_chi2:.1}: "
                    )?;
                } else {
                    write!(f, "a start with the other ΔH° signs came back to this solution: ")?;
                }
                write!(f, "the known spectra of {} decide", species.join(", "))
            }
            Self::NnlsIterationLimit { wavelengths_nm } => write!(
                f,
                "the non-negative spectra solve reached its iteration limit at {} wavelength(s) (first {:?} nm): ε there may not be optimal",
                wavelengths_nm.len(),
                wavelengths_nm.first().copied().unwrap_or(f64::NAN)
            ),
            Self::CeilingBroken { detail } => {
                write!(f, "fitted spectrum breaks its declared ceiling: {detail}")
            }
            Self::StructuredResiduals {
                first_singular_value,
                noise_edge,
            } => write!(
                f,
                "the residuals have structure: their first singular value {first_singular_value:.3e} exceeds the noise edge {noise_edge:.3e} (a missing species, baseline or band change with T?)"
            ),
            Self::LackOfFit {
                residual_sd,
                noise_estimate,
            } => write!(
                f,
                "residual sd {residual_sd:.3e} AU is {:.1}× the noise level {noise_estimate:.3e} AU found by factor analysis: the model misses something",
                residual_sd / noise_estimate
            ),
        }
    }
}

/// Everything a fit run produced, serialisable as `report.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitReport {
    /// Software name and version.
    pub software: String,
    /// The inputs with checksums.
    pub inputs: Vec<InputFile>,
    /// The full configuration of the run.
    pub config: FitRunConfig,
    /// Sample ids (rows of the concentration table).
    pub sample_ids: Vec<String>,
    /// Sample series labels.
    pub series: Vec<String>,
    /// Sample temperatures, K.
    pub temperatures_k: Vec<f64>,
    /// Wavelengths of the fitted data, nm.
    pub wavelengths_nm: Vec<f64>,
    /// What preprocessing did.
    pub preprocessing: PreprocessSummary,
    /// The fit.
    pub fit: HardFit,
    /// Findings to read.
    pub diagnostics: Vec<Diagnostic>,
    /// ln K against 1/T: the global fit's curves and, for a two-absorber model, the classic
    /// two-wavelength estimates beside them.
    #[serde(default)]
    pub vant_hoff: VantHoffTable,
    /// The ranking of the candidate models, when the run has candidates.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub model_comparison: Option<ModelComparison>,
}

/// Runs a fit from a configuration: read, preprocess, fit, diagnose.
///
/// # Errors
/// Unreadable or invalid inputs, invalid settings, or a fit that cannot be set up. A fit that
/// runs but does not converge is returned with a [`Diagnostic::NotConverged`].
pub fn run_fit(config: &FitRunConfig) -> Result<(FitReport, SpectraSet)> {
    run_fit_with_progress(config, &|_| {})
}

/// Progress of [`run_fit_with_progress`]: which model is being fitted (0 is the main model,
/// 1… the candidates) and what its fit is doing.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RunProgress {
    /// Index of the model being fitted (0: the main model).
    pub model: usize,
    /// Number of models in the run (1 + candidates).
    pub models: usize,
    /// The fit's own progress.
    pub fit: hard::FitProgress,
}

/// [`run_fit`] with a progress callback (the binary draws a bar from it).
///
/// # Errors
/// As [`run_fit`].
pub fn run_fit_with_progress(
    config: &FitRunConfig,
    progress: &dyn Fn(RunProgress),
) -> Result<(FitReport, SpectraSet)> {
    let models = 1 + config.candidates.len();
    let mut inputs = config
        .data
        .paths()
        .iter()
        .map(|p| checksum(p))
        .collect::<Result<Vec<_>>>()?;
    inputs.push(checksum(&config.model)?);
    let mut config = config.clone();
    if let Some(path) = &config.density_table {
        inputs.push(checksum(path)?);
        let table = crate::thermo::DensityTable::read_csv(path)?;
        config.fit.concentrations =
            hard::ConcentrationBasis::ThermalExpansion(crate::thermo::SolventDensity::Table(table));
    }
    let model = read_model(&config.model)?;
    config.fit = with_model_spectra(&config.fit, &model, &config.model, &mut inputs)?;
    let config = &config;
    let set = load(&config.data)?;
    let (set, preprocessing) = config.preprocess.clone().check()?.apply(&set)?;
    let fit = hard::fit_with_progress(&set, &model, &config.fit, &|fit| {
        progress(RunProgress {
            model: 0,
            models,
            fit,
        })
    })?;
    let diagnostics = diagnose(&set, &fit, &config.fit);
    let vant_hoff = vant_hoff_table(&fit, &model, &set);
    let model_comparison = fit_candidates(config, &set, &model, &fit, &mut inputs, progress)?;
    let report = FitReport {
        software: format!("isosbestic {}", env!("CARGO_PKG_VERSION")),
        inputs,
        config: config.clone(),
        sample_ids: set.samples().iter().map(|s| s.id.clone()).collect(),
        series: set.samples().iter().map(|s| s.series.clone()).collect(),
        temperatures_k: set.temperatures_k().to_vec(),
        wavelengths_nm: set.wavelengths_nm().to_vec(),
        preprocessing,
        fit,
        diagnostics,
        vant_hoff,
        model_comparison,
    };
    Ok((report, set))
}

/// Fits every candidate model of `config` to the same preprocessed data with the same settings
/// and ranks them together with the main model (`None` without candidates). A candidate file
/// that cannot be read is an error; a candidate whose fit cannot be run is listed as failed.
fn fit_candidates(
    config: &FitRunConfig,
    set: &SpectraSet,
    model: &ValidModel,
    fit: &HardFit,
    inputs: &mut Vec<InputFile>,
    progress: &dyn Fn(RunProgress),
) -> Result<Option<ModelComparison>> {
    if config.candidates.is_empty() {
        return Ok(None);
    }
    let paths: Vec<PathBuf> = std::iter::once(config.model.clone())
        .chain(config.candidates.iter().cloned())
        .collect();
    let names = candidate_names(&paths);
    let mut models = Vec::with_capacity(config.candidates.len());
    let mut settings = Vec::with_capacity(config.candidates.len());
    for path in &config.candidates {
        inputs.push(checksum(path)?);
        let candidate = read_model(path)?;
        // Known spectra of species the candidate does not have do not apply to it.
        let own = HardFitParams {
            known_spectra: config
                .fit
                .known_spectra
                .iter()
                .filter(|k| candidate.species().iter().any(|s| s.name == k.species))
                .cloned()
                .collect(),
            ..config.fit.clone()
        };
        settings.push(with_model_spectra(&own, &candidate, path, inputs)?);
        models.push(candidate);
    }
    let n_models = 1 + models.len();
    let results: Vec<std::result::Result<HardFit, String>> = models
        .iter()
        .enumerate()
        .map(|(k, m)| {
            hard::fit_with_progress(set, m, &settings[k], &|fit| {
                progress(RunProgress {
                    model: k + 1,
                    models: n_models,
                    fit,
                })
            })
            .map_err(|e| e.to_string())
        })
        .collect();
    let mut fitted = vec![FittedCandidate {
        name: &names[0],
        path: &paths[0],
        primary: true,
        model,
        fit,
    }];
    let mut failed = Vec::new();
    for (i, r) in results.iter().enumerate() {
        match r {
            Ok(f) => fitted.push(FittedCandidate {
                name: &names[i + 1],
                path: &paths[i + 1],
                primary: false,
                model: &models[i],
                fit: f,
            }),
            Err(reason) => failed.push(FailedCandidate {
                name: names[i + 1].clone(),
                model: paths[i + 1].clone(),
                reason: reason.clone(),
            }),
        }
    }
    Ok(Some(compare_candidates(&fitted, failed)))
}

/// Diagnostics of a finished fit.
pub fn diagnose(set: &SpectraSet, fit: &HardFit, params: &HardFitParams) -> Vec<Diagnostic> {
    let mut out = Vec::new();
    if !fit.termination.converged() {
        out.push(Diagnostic::NotConverged {
            termination: format!("{:?}", fit.termination),
        });
    }
    for p in &fit.at_bounds {
        out.push(Diagnostic::AtBound { parameter: p.clone() });
    }
    for a in &fit.alternatives {
        out.push(Diagnostic::Ambiguous {
            parameters: a.parameters.clone(),
            delta_chi2: a.delta_chi2,
            chosen_by_prior: a.chosen_by_prior,
        });
    }
    for c in &fit.ceiling_violations {
        out.push(Diagnostic::CeilingBroken { detail: c.clone() });
    }
    let n = fit.parameters.len();
    for a in 0..n {
        for b in a + 1..n {
            let r = fit.correlation[[a, b]];
            if r.abs() > 0.99 {
                let name = |k: usize| {
                    format!(
                        "{} {}",
                        fit.parameters[k].parameter.species_name, fit.parameters[k].parameter.name
                    )
                };
                out.push(Diagnostic::HighCorrelation {
                    first: name(a),
                    second: name(b),
                    correlation: r,
                });
            }
        }
    }
    if !fit.known_species.is_empty()
        && fit.alternatives.is_empty()
        && let Some(delta_chi2) = fit.mirror_delta_chi2
    {
        out.push(Diagnostic::KnownSpectraDecide {
            species: fit.known_species.clone(),
            delta_chi2,
        });
    }
    let columns = fit.design_singular_values.len();
    if fit.design_rank < columns {
        out.push(Diagnostic::RankDeficientDesign {
            rank: fit.design_rank,
            columns,
        });
    }
    // Residual structure: with white noise the largest singular value of the residual matrix
    // stays near σ(√rows + √columns) (edge of the noise spectrum; common practice, a 1.5 margin).
    let (ns, nw) = (set.n_samples() as f64, set.n_wavelengths() as f64);
    let edge = fit.residual_sd * (ns.sqrt() + nw.sqrt());
    if let Some(&s1) = fit.residual_singular_values.first()
        && s1 > 1.5 * edge
    {
        out.push(Diagnostic::StructuredResiduals {
            first_singular_value: s1,
            noise_edge: edge,
        });
    }
    // Noise from the data alone: factor analysis at the rank the model implies
    // (absorbing spectra × temperature terms + baseline terms).
    let baseline_terms = match params.baseline {
        hard::Baseline::None => 0,
        hard::Baseline::Offset => 1,
        hard::Baseline::OffsetAndSlope => 2,
    };
    if !fit.nnls_unconverged_nm.is_empty() {
        out.push(Diagnostic::NnlsIterationLimit {
            wavelengths_nm: fit.nnls_unconverged_nm.clone(),
        });
    }
    // (A weighted fit's residual sd is a unitless scale factor: nothing to compare in AU.)
    if !fit.weighted
        && let Ok(dec) = crate::factor::decompose(set.absorbance().view())
        && let Some(noise) = dec.noise_estimate(columns + fit.known_species.len() + baseline_terms)
        && noise > 0.0
        && fit.residual_sd > 1.5 * noise
    {
        out.push(Diagnostic::LackOfFit {
            residual_sd: fit.residual_sd,
            noise_estimate: noise,
        });
    }
    out
}

/// Names of the files [`write_fit_outputs`] writes.
pub const FIT_OUTPUTS: [&str; 6] = [
    "report.json",
    "parameters.csv",
    "thermodynamics.csv",
    "concentrations.csv",
    "pure_spectra.csv",
    "vant_hoff_points.csv",
];

/// The table [`write_fit_outputs`] writes besides [`FIT_OUTPUTS`] when the run ranked
/// candidate models.
pub const MODEL_COMPARISON_CSV: &str = "model_comparison.csv";

/// Writes the report and its tables into `dir` (created if needed), atomically.
///
/// Refuses to overwrite any input file, and refuses to overwrite earlier outputs unless
/// `force` is set.
///
/// # Errors
/// [`Error::WouldOverwrite`] naming the file; [`Error::Output`] for I/O failures.
pub fn write_fit_outputs(dir: &Path, report: &FitReport, force: bool) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).map_err(|source| Error::Output {
        path: dir.to_path_buf(),
        source,
    })?;
    let mut targets: Vec<PathBuf> = FIT_OUTPUTS.iter().map(|n| dir.join(n)).collect();
    if report.model_comparison.is_some() {
        targets.push(dir.join(MODEL_COMPARISON_CSV));
    }
    guard_outputs(&targets, &report.inputs, force)?;
    write_json(&targets[0], "fit-report", report)?;
    let fit = &report.fit;
    let mut params = Table::new(["species", "parameter", "value", "standard_error", "unit"]);
    for p in &fit.parameters {
        params.push_row([
            p.parameter.species_name.clone(),
            p.parameter.name.clone(),
            format_float(p.value),
            format_float(p.standard_error),
            p.parameter.unit.clone(),
        ]);
    }
    params.write_csv(&targets[1])?;
    let mut thermo = Table::new([
        "species",
        "t_ref_K",
        "dG_J_mol",
        "se_dG",
        "dH_J_mol",
        "se_dH",
        "dS_J_K_mol",
        "se_dS",
        "dCp_J_K_mol",
        "se_dCp",
    ]);
    for t in &fit.thermodynamics {
        let q = &t.standard;
        let se = q.standard_errors();
        thermo.push_row([
            t.species.clone(),
            format_float(q.t_ref_k),
            format_float(q.dg_j_mol),
            format_float(se[0]),
            format_float(q.dh_j_mol),
            format_float(se[1]),
            format_float(q.ds_j_k_mol),
            format_float(se[2]),
            format_float(q.dcp_j_k_mol),
            format_float(se[3]),
        ]);
    }
    thermo.write_csv(&targets[2])?;
    let mut conc = Table::new(
        ["sample_id".to_string(), "series".into(), "temperature_K".into()]
            .into_iter()
            .chain(fit.species.iter().map(|s| format!("{s}_M"))),
    );
    for (i, id) in report.sample_ids.iter().enumerate() {
        conc.push_row(
            [
                id.clone(),
                report.series[i].clone(),
                format_float(report.temperatures_k[i]),
            ]
            .into_iter()
            .chain(fit.concentrations.row(i).iter().map(|v| format_float(*v))),
        );
    }
    conc.write_csv(&targets[3])?;
    let order_names = ["", "_dT", "_dT2"];
    let columns: Vec<String> = (0..fit.spectra.ncols())
        .map(|c| {
            let na = fit.absorbing_species.len().max(1);
            format!(
                "{}{}",
                fit.absorbing_species[c % na],
                order_names[(c / na).min(2)]
            )
        })
        .collect();
    let mut spectra = Table::new(
        std::iter::once("wavelength_nm".to_string()).chain(
            columns
                .iter()
                .flat_map(|c| [format!("eps_{c}"), format!("se_{c}")]),
        ),
    );
    for (j, w) in report.wavelengths_nm.iter().enumerate() {
        spectra.push_row(
            std::iter::once(format_float(*w)).chain((0..fit.spectra.ncols()).flat_map(|c| {
                [
                    format_float(fit.spectra[[j, c]]),
                    format_float(fit.spectra_standard_errors[[j, c]]),
                ]
            })),
        );
    }
    spectra.write_csv(&targets[4])?;
    report.vant_hoff.write_csv(&targets[5])?;
    if let (Some(c), Some(t)) = (&report.model_comparison, targets.get(FIT_OUTPUTS.len())) {
        c.write_csv(t)?;
    }
    Ok(targets)
}

/// Names of the figures, page and residual table [`write_fit_page`] writes.
pub const FIT_PAGE_OUTPUTS: [&str; 9] = [
    "report.html",
    "measured_spectra.svg",
    "pure_spectra.svg",
    "concentration_profiles.svg",
    "residual_map.svg",
    "singular_values.svg",
    "vant_hoff.svg",
    "evolving_factors.svg",
    "residuals.csv",
];

/// Writes the SVG figures, the self-contained `report.html` and `residuals.csv` (measured −
/// fitted, one row per wavelength, one column per sample) of a fit into `dir`.
///
/// `set` is the preprocessed set the fit was made on; `timestamp` is shown in the page header
/// (the library reads no clock).
///
/// # Errors
/// [`Error::WouldOverwrite`], [`Error::Plot`] or [`Error::Output`].
pub fn write_fit_page(
    dir: &Path,
    report: &FitReport,
    set: &SpectraSet,
    timestamp: &str,
    force: bool,
) -> Result<Vec<PathBuf>> {
    use crate::report::html::{Generation, Section, hard_fit_rows, render_report};
    use crate::report::plots::{self, Palette};
    let targets: Vec<PathBuf> = FIT_PAGE_OUTPUTS.iter().map(|n| dir.join(n)).collect();
    guard_outputs(&targets, &report.inputs, force)?;
    let palette = Palette::default();
    let measured = plots::measured_spectra_of(set, &palette)?;
    let pure = plots::pure_spectra_of(&report.fit, &report.wavelengths_nm, &palette)?;
    let profiles = plots::concentration_profiles_of(&report.fit, set, &palette)?;
    let residuals = hard::residual_matrix(set, &report.fit, &report.config.fit)?;
    let labels: Vec<&str> = report.sample_ids.iter().map(String::as_str).collect();
    let residual_map = plots::residual_map(
        "Residuals (measured − fitted)",
        &report.wavelengths_nm,
        &labels,
        residuals.view(),
        &palette,
    )?;
    let sv = plots::singular_values(
        "Singular values of the residual matrix",
        &report.fit.residual_singular_values,
        None,
        &palette,
    )?;
    let vant_hoff = plots::vant_hoff_of_table(&report.vant_hoff, &palette)?;
    // EFA along increasing temperature, one factor beyond the model's rank (the noise level)
    let n_factors = (report.fit.design_singular_values.len() + 1).clamp(2, 8);
    let summary = crate::factor::analyse(set, &crate::factor::FactorParams::default().max_rank(n_factors))?;
    let efa = plots::evolving_factors_of(&summary, set, &palette)?;
    let figures = [&measured, &pure, &profiles, &residual_map, &sv, &vant_hoff, &efa];
    for (t, svg) in targets[1..].iter().zip(figures) {
        plots::write_svg(t, svg)?;
    }
    // residuals (measured − fitted), laid out like a spectra CSV: one row per wavelength, one
    // column per sample
    let mut table =
        Table::new(std::iter::once("wavelength_nm".to_string()).chain(report.sample_ids.iter().cloned()));
    for (j, w) in report.wavelengths_nm.iter().enumerate() {
        table.push_row(
            std::iter::once(format_float(*w)).chain(residuals.column(j).iter().map(|r| format_float(*r))),
        );
    }
    table.write_csv(&targets[8])?;
    let mut generation = Generation::new(timestamp).with_detail("software", report.software.clone());
    for i in &report.inputs {
        generation = generation.with_detail(i.path.display().to_string(), format!("sha256 {}", i.sha256));
    }
    let mut fit_section = Section::new("Global fit");
    for row in hard_fit_rows(&report.fit) {
        fit_section = fit_section.with_row(row);
    }
    fit_section = fit_section.with_note(format!(
        "{} samples × {} wavelengths; residual sd {:.3e} {} (ν = {}); solver: {:?} after {} iterations.",
        report.sample_ids.len(),
        report.wavelengths_nm.len(),
        report.fit.residual_sd,
        report.fit.residual_unit(),
        report.fit.degrees_of_freedom,
        report.fit.termination,
        report.fit.iterations
    ));
    for d in &report.diagnostics {
        fit_section = fit_section.with_note(format!("Note: {d}"));
    }
    let mut sections = vec![
        Section::new("Measured spectra")
            .with_figure("Measured spectra coloured by temperature", measured)
            .with_figure(
                "Evolving factor analysis: singular values of growing (forward, solid) and shrinking \
                 (backward, dashed) windows of samples in order of temperature",
                efa,
            ),
        fit_section
            .with_figure("Resolved pure spectra with ±2σ bands", pure)
            .with_figure("Concentration profiles against temperature, per series", profiles),
        Section::new("Residuals")
            .with_figure("Residual map (wavelength × sample)", residual_map)
            .with_figure(
                "Singular values of the residual matrix: structure stands out above the noise floor",
                sv,
            ),
        vant_hoff_section(&report.vant_hoff).with_figure(
            "van 't Hoff plot: ln K against 1/T with the global fit's 95 % band and the classic estimates",
            vant_hoff,
        ),
    ];
    if let Some(c) = &report.model_comparison {
        sections.push(comparison_section(c));
    }
    let page = render_report("isosbestic global fit", &generation, &sections);
    crate::report::atomic::write_atomic(&targets[0], page.as_bytes()).map_err(|source| Error::Output {
        path: targets[0].clone(),
        source,
    })?;
    Ok(targets)
}

/// The page section of the van 't Hoff table: the ΔH°/ΔS° comparison rows and the notes.
fn vant_hoff_section(table: &VantHoffTable) -> crate::report::html::Section {
    use crate::report::html::{Section, SummaryRow, format_with_uncertainty};
    let mut section = Section::new("van 't Hoff plot");
    if let Some(c) = &table.classic {
        let mut row = |label: String, v: Option<[f64; 2]>, scale: f64, unit: &str| {
            section.summary.push(match v {
                Some([x, se]) => {
                    let (v, u) = format_with_uncertainty(x / scale, se / scale);
                    SummaryRow::new(label, v, u.as_deref(), unit)
                }
                None => SummaryRow::new(label, "not available", None, unit),
            });
        };
        for (quantity, scale, unit) in [("ΔH°", 1e3, "kJ/mol"), ("ΔS°", 1.0, "J/(K mol)")] {
            for (name, dh, ds) in c.estimates() {
                let value = if quantity == "ΔH°" { dh } else { ds };
                row(
                    format!("{quantity} of {}, {name}", c.complex_species),
                    value,
                    scale,
                    unit,
                );
            }
        }
        section = section.with_note(format!(
            "Classic estimates read {} at {:.1} nm and {} at {:.1} nm (each species' band where the other \
             absorbs least, on each spectrum's own scale), with the fitted ε and cross absorption neglected.",
            c.free_species, c.free_wavelength_nm, c.complex_species, c.complex_wavelength_nm
        ));
        for t in [&c.direct, &c.mass_balance] {
            if let Some(f) = &t.failure {
                section = section.with_note(format!("{:?} estimate: {f}", t.method));
            }
            if !t.excluded.is_empty() {
                section = section.with_note(format!(
                    "{:?} estimate: {} samples without a K (a concentration came out ≤ 0).",
                    t.method,
                    t.excluded.len()
                ));
            }
        }
    }
    for n in &table.notes {
        section = section.with_note(format!("Note: {n}"));
    }
    section
}

/// The page section ranking the candidate models.
fn comparison_section(c: &ModelComparison) -> crate::report::html::Section {
    use crate::report::html::{Section, SummaryRow};
    let mut section = Section::new("Model comparison").with_note(format!(
        "Candidates fitted to the same {} data values, ranked by AIC = n ln(RSS/n) + 2k (Akaike 1974); \
         BIC = n ln(RSS/n) + k ln n (Schwarz 1978). Rows give ΔAIC; k counts the thermodynamic \
         and the linear (spectra, baseline) parameters.",
        c.n_data
    ));
    for r in &c.candidates {
        section.summary.push(SummaryRow::new(
            format!(
                "{}. {}{} (k = {}, BIC {:.1})",
                r.rank,
                r.name,
                if r.primary { ", main model" } else { "" },
                r.n_parameters,
                r.bic
            ),
            format!("{:.2}", r.delta_aic),
            None,
            "ΔAIC",
        ));
    }
    for t in &c.nested_tests {
        section = section.with_note(format!(
            "F-test of {} within {}: F = {:.4}, p = {}.",
            t.simpler,
            t.richer,
            t.f,
            candidates::p_text(t.p_value)
        ));
    }
    for f in &c.failed {
        section = section.with_note(format!("{} could not be fitted: {}", f.name, f.reason));
    }
    section
}

/// Refuses outputs that would overwrite an input, or an earlier output without `force`.
///
/// # Errors
/// [`Error::WouldOverwrite`].
pub fn guard_outputs(targets: &[PathBuf], inputs: &[InputFile], force: bool) -> Result<()> {
    for t in targets {
        let t_canon = std::fs::canonicalize(t).ok();
        for i in inputs {
            let same = match (&t_canon, std::fs::canonicalize(&i.path).ok()) {
                (Some(a), Some(b)) => *a == b,
                _ => false,
            };
            if same {
                return Err(Error::WouldOverwrite {
                    path: t.clone(),
                    reason: "it is an input of this run",
                });
            }
        }
        if t.exists() && !force {
            return Err(Error::WouldOverwrite {
                path: t.clone(),
                reason: "it exists from an earlier run (use --force)",
            });
        }
    }
    Ok(())
}

impl fmt::Display for FitReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let fit = &self.fit;
        writeln!(
            f,
            "global fit: {} samples × {} wavelengths, {} free parameters, {:?} after {} iterations",
            self.sample_ids.len(),
            self.wavelengths_nm.len(),
            fit.parameters.len(),
            fit.termination,
            fit.iterations
        )?;
        writeln!(
            f,
            "residual sd {:.3e} {} (ν = {})",
            fit.residual_sd,
            fit.residual_unit(),
            fit.degrees_of_freedom
        )?;
        if !fit.known_species.is_empty() {
            writeln!(f, "spectra held fixed (known): {}", fit.known_species.join(", "))?;
        }
        writeln!(f)?;
        writeln!(
            f,
            "  {:<10} {:<14} {:>14} {:>12}  unit",
            "species", "parameter", "value", "std. error"
        )?;
        for p in &fit.parameters {
            writeln!(
                f,
                "  {:<10} {:<14} {:>14.6} {:>12.4}  {}",
                p.parameter.species_name, p.parameter.name, p.value, p.standard_error, p.parameter.unit
            )?;
        }
        writeln!(f)?;
        writeln!(
            f,
            "  {:<10} {:>8} {:>20} {:>22}",
            "species", "T_ref/K", "ΔH°/(kJ mol⁻¹)", "ΔS°/(J K⁻¹ mol⁻¹)"
        )?;
        for t in &fit.thermodynamics {
            let q = &t.standard;
            let se = q.standard_errors();
            writeln!(
                f,
                "  {:<10} {:>8.2} {:>11.3} ± {:<7.3} {:>12.2} ± {:<7.2}",
                t.species,
                q.t_ref_k,
                q.dh_j_mol / 1e3,
                se[1] / 1e3,
                q.ds_j_k_mol,
                se[2]
            )?;
        }
        write_vant_hoff_comparison(f, &self.vant_hoff)?;
        if let Some(c) = &self.model_comparison {
            writeln!(f)?;
            write!(f, "{c}")?;
        }
        if !self.diagnostics.is_empty() {
            writeln!(f)?;
            for d in &self.diagnostics {
                writeln!(f, "  note: {d}")?;
            }
        }
        Ok(())
    }
}

/// The terminal lines comparing ΔH° of the global fit with the classic estimates.
fn write_vant_hoff_comparison(f: &mut fmt::Formatter<'_>, table: &VantHoffTable) -> fmt::Result {
    if let Some(c) = &table.classic {
        writeln!(f)?;
        writeln!(
            f,
            "van 't Hoff comparison for {} (classic: {} at {:.1} nm, {} at {:.1} nm):",
            c.complex_species,
            c.free_species,
            c.free_wavelength_nm,
            c.complex_species,
            c.complex_wavelength_nm
        )?;
        for (name, dh, ds) in c.estimates() {
            match (dh, ds) {
                (Some([h, sh]), Some([s, ss])) => writeln!(
                    f,
                    "  {name:<22} ΔH° {:>10.3} ± {:<8.3} kJ/mol   ΔS° {:>9.2} ± {:<7.2} J/(K mol)",
                    h / 1e3,
                    sh / 1e3,
                    s,
                    ss
                )?,
                _ => writeln!(f, "  {name:<22} not available")?,
            }
        }
    }
    if !table.notes.is_empty() {
        writeln!(f)?;
        for n in &table.notes {
            writeln!(f, "  note: {n}")?;
        }
    }
    Ok(())
}
