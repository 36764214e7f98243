//! Bootstrap uncertainties of the global fit (Efron, Ann. Stat. 7 (1979) 1): the data are
//! rebuilt many times from the fitted model plus resampled residuals, each copy is fitted
//! again, and the spread of the refitted parameters is the uncertainty.
//!
//! ## What is resampled
//! The fitted values D̂ and residuals E = D − D̂ are those of the full model of the fit
//! (see [`super`]): D̂ = X(θ̂)·Ŝᵀ + A·Wᵀ with Ŝᵀ = X⁺D, rebuilt from the [`HardFit`]
//! (concentrations of the absorbing species, path lengths and the ε(T) order of the settings
//! give X) as D̂ = P_X·D + Q_X·D·P_W — the projection of D onto the range of X, plus, with
//! baselines, the projection of the rest onto the baseline shapes (the same elimination the fit
//! uses). Any order of [`super::SpectraTemperature`] and any [`super::Baseline`] is supported.
//!
//! Residuals of a least-squares fit are smaller than the noise: N entries carry only ν = N − p
//! degrees of freedom (p = θ plus every linear parameter). Both schemes therefore inflate the
//! residuals by √(N/ν) (common practice, e.g. Davison & Hinkley, *Bootstrap Methods and their
//! Application*, 1997, §6.2.3, with the leverage averaged), so the bootstrap noise has the
//! variance RSS/ν that the fit reports.
//!
//! - [`BootstrapKind::Residual`]: the **entries** of the residual matrix (all samples × all
//!   wavelengths), centred on their mean and inflated, are drawn independently with replacement,
//!   one per entry of D*. Appropriate for independent, identically distributed noise.
//! - [`BootstrapKind::Wild`]: every entry keeps its own (inflated) residual with a random sign,
//!   D*ᵢⱼ = D̂ᵢⱼ + vᵢⱼ·√(N/ν)·Eᵢⱼ with Rademacher vᵢⱼ = ±1 (Wu, Ann. Stat. 14 (1986) 1261; Liu,
//!   Ann. Stat. 16 (1988) 1696). Keeps noise that changes from entry to entry (e.g. noise that
//!   grows with absorbance).
//!
//! Each replicate is fitted from the original estimate θ̂ (one start, no grid) with the same
//! settings otherwise. A replicate whose fit fails or does not converge is counted in
//! [`BootstrapResult::failed`] and left out of the statistics.
//!
//! ## Reproducibility
//! Replicate k draws from a ChaCha8 stream seeded with `seed` on stream k, so the result for a
//! seed is the same whatever the number of threads and the order in which replicates finish.

use super::small_svd::SmallSvd;
use super::{Baseline, HardFit, HardFitError, HardFitParams, fit};
use crate::data::SpectraSet;
use crate::speciation::{Law, SpeciesRole, ValidModel};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::sync::atomic::{AtomicUsize, Ordering};

/// Which bootstrap scheme.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum BootstrapKind {
    /// Residual entries drawn with replacement (iid noise).
    #[default]
    Residual,
    /// Each residual entry with a random sign (Rademacher weights).
    Wild,
}

/// Settings of a bootstrap run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct BootstrapOptions {
    /// Number of bootstrap replicates (≥ 2).
    pub replicates: usize,
    /// Resampling scheme.
    pub kind: BootstrapKind,
    /// Seed of the random streams.
    pub seed: u64,
    /// Number of worker threads (a local pool); `None` uses rayon's global pool.
    pub threads: Option<usize>,
}

impl Default for BootstrapOptions {
    fn default() -> Self {
        Self {
            replicates: 200,
            kind: BootstrapKind::Residual,
            seed: 0,
            threads: None,
        }
    }
}

/// Summary of the bootstrap distribution of one quantity.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BootstrapSummary {
    /// Mean over the successful replicates.
    pub mean: f64,
    /// Standard deviation (n − 1 denominator).
    pub standard_deviation: f64,
    /// 2.5th percentile (linear interpolation between order statistics).
    pub percentile_2_5: f64,
    /// 97.5th percentile.
    pub percentile_97_5: f64,
}

/// Bootstrap distribution of one fitted parameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BootstrapParameter {
    /// Species name.
    pub species: String,
    /// Parameter name (as in [`super::FreeParameter::name`]).
    pub name: String,
    /// Value of the original fit.
    pub estimate: f64,
    /// The bootstrap distribution.
    pub summary: BootstrapSummary,
}

/// Bootstrap distribution of ΔH° and ΔS° of one species at its reference temperature.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BootstrapThermodynamics {
    /// Species name.
    pub species: String,
    /// ΔH°, J/mol.
    pub dh_j_mol: BootstrapSummary,
    /// ΔS°, J K⁻¹ mol⁻¹.
    pub ds_j_k_mol: BootstrapSummary,
}

/// The result of a bootstrap run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BootstrapResult {
    /// The settings used.
    pub options: BootstrapOptions,
    /// One entry per free parameter, in the order of [`HardFit::parameters`].
    pub parameters: Vec<BootstrapParameter>,
    /// ΔH°, ΔS° per species, in the order of [`HardFit::thermodynamics`].
    pub thermodynamics: Vec<BootstrapThermodynamics>,
    /// Replicates whose fit failed or did not converge (left out of the statistics).
    pub failed: usize,
}

/// The fitted values D̂ of a global fit (samples × wavelengths), rebuilt from the fit as
/// described in the [module docs](self).
///
/// # Errors
/// [`HardFitError::Settings`] when `fit` does not belong to `set` (shapes or species differ).
pub fn fitted_values(
    set: &SpectraSet,
    params: &HardFitParams,
    fit: &HardFit,
) -> Result<Array2<f64>, HardFitError> {
    if super::columnwise::requested(params) {
        return super::columnwise::fitted_values(set, params, fit);
    }
    let x = fit_design(set, params, fit)?;
    let (ns, m) = x.dim();
    let known_part = known_part(set, params, fit)?;
    let less_known;
    let d = match &known_part {
        None => set.absorbance(),
        Some(part) => {
            less_known = set.absorbance() - part;
            &less_known
        }
    };
    // D̂ = P_X·D + Q_X·D·P_W: the projection onto the range of X (with the fit's rank rule),
    // which is X·Ŝᵀ without the amplification of X⁺ when X is nearly rank-deficient, plus
    // the baseline terms (the projection of the rest onto span{1, λ} or {1}).
    // (the same one-sided Jacobi SVD and rank rule as the fit's projection)
    let svd = SmallSvd::of_transposed(x.t().iter().copied().collect(), m, ns);
    let ur = Array2::from_shape_vec((svd.rank, ns), svd.ut)
        .map_err(|e| HardFitError::Solver(format!("SVD of the design: {e}")))?
        .reversed_axes();
    let mut fitted = ur.dot(&ur.t().dot(d));
    // The baselines are fitted where the global fit was (wavelengths without a masked point)
    // and evaluated at every wavelength.
    if params.baseline != Baseline::None {
        let wl = set.wavelengths_nm();
        let rest = d - &fitted;
        let (fitted_on, coefficients) = if set.masked_count() == 0 {
            (
                wl.clone(),
                rest.dot(&super::baseline_shapes(wl, wl, params.baseline)),
            )
        } else {
            let used = set.unmasked_wavelength_indices();
            let wl_used = wl.select(ndarray::Axis(0), &used);
            let q = super::baseline_shapes(&wl_used, &wl_used, params.baseline);
            let coefficients = rest.select(ndarray::Axis(1), &used).dot(&q);
            (wl_used, coefficients)
        }; // coefficients: samples × baseline terms
        fitted += &coefficients.dot(&super::baseline_shapes(wl, &fitted_on, params.baseline).t());
    }
    if let Some(part) = &known_part {
        fitted += part;
    }
    Ok(fitted)
}

/// The design X (samples × spectra columns) of a fit rebuilt from its concentrations, with the
/// shapes checked against `set`.
///
/// # Errors
/// [`HardFitError::Settings`] when `fit` does not belong to `set` (shapes or species differ).
pub(super) fn fit_design(
    set: &SpectraSet,
    params: &HardFitParams,
    fit: &HardFit,
) -> Result<Array2<f64>, HardFitError> {
    let (ns, nw) = set.absorbance().dim();
    let na = fit.absorbing_species.len();
    let order = params.spectra_temperature.order();
    let m = na * (order + 1);
    if fit.concentrations.nrows() != ns || fit.spectra.dim() != (nw, m) {
        return Err(HardFitError::Settings(format!(
            "the fit ({} samples, spectra {:?}) does not belong to this data set ({ns} samples × {nw} \
             wavelengths, {m} spectra)",
            fit.concentrations.nrows(),
            fit.spectra.dim()
        )));
    }
    let cols: Vec<usize> = fit
        .absorbing_species
        .iter()
        .map(|name| species_column(fit, name))
        .collect::<Result<_, _>>()?;
    let t_eps = params.spectra_temperature.reference_k();
    let mut x = Array2::zeros((ns, m));
    for (i, sample) in set.samples().iter().enumerate() {
        let dt = sample.temperature_k - t_eps;
        let mut w = sample.path_cm;
        for o in 0..=order {
            for (a, &k) in cols.iter().enumerate() {
                x[[i, o * na + a]] = w * fit.concentrations[[i, k]];
            }
            w *= dt;
        }
    }
    Ok(x)
}

/// Column of `name` in the fit's concentrations.
fn species_column(fit: &HardFit, name: &str) -> Result<usize, HardFitError> {
    fit.species
        .iter()
        .position(|s| s == name)
        .ok_or_else(|| HardFitError::Settings(format!("species '{name}' missing from the fit")))
}

/// The known spectra's part K = diag(b)·C_k·E_kᵀ of a fit (samples × wavelengths), None when
/// no spectrum was held fixed.
///
/// # Errors
/// [`HardFitError::Settings`] when a known species' spectrum is not in `params`, or
/// [`HardFitError::KnownSpectrum`] when it cannot be placed on the set's wavelengths.
pub(super) fn known_part(
    set: &SpectraSet,
    params: &HardFitParams,
    fit: &HardFit,
) -> Result<Option<Array2<f64>>, HardFitError> {
    if fit.known_species.is_empty() {
        return Ok(None);
    }
    let mut part = Array2::<f64>::zeros(set.absorbance().dim());
    for name in &fit.known_species {
        let spectrum = params
            .known_spectra
            .iter()
            .find(|s| &s.species == name)
            .ok_or_else(|| HardFitError::Settings(format!("no known spectrum of '{name}' in the settings")))?
            .on_grid(set.wavelengths_nm())?;
        let k = species_column(fit, name)?;
        for (i, mut row) in part.rows_mut().into_iter().enumerate() {
            row.scaled_add(set.samples()[i].path_cm * fit.concentrations[[i, k]], &spectrum);
        }
    }
    Ok(Some(part))
}

/// The model with the law parameters set to the fitted values (the refits start there).
fn model_at_estimate(model: &ValidModel, fit: &HardFit) -> Result<ValidModel, HardFitError> {
    let mut spec = model.as_model().clone();
    let nc = model.n_components();
    for fp in &fit.parameters {
        let p = &fp.parameter;
        let bad = || {
            HardFitError::Settings(format!(
                "parameter {} {} is not in the model",
                p.species_name, p.name
            ))
        };
        let species = model.species().get(p.species).ok_or_else(bad)?;
        if species.role != SpeciesRole::Formed || species.name != p.species_name {
            return Err(bad());
        }
        let law = &mut spec.species.get_mut(p.species - nc).ok_or_else(bad)?.law;
        let slot = match (law, p.parameter) {
            (Law::Fixed(l), 0) => &mut l.log_beta,
            (Law::VanTHoff(l), 0) => &mut l.log_beta_ref,
            (Law::VanTHoff(l), 1) => &mut l.dh_ref,
            (Law::HeatCapacity(l), 0) => &mut l.log_beta_ref,
            (Law::HeatCapacity(l), 1) => &mut l.dh_ref,
            (Law::HeatCapacity(l), 2) => &mut l.dcp,
            (Law::HeatCapacity(l), 3) => l.dcp_slope.as_mut().ok_or_else(bad)?,
            _ => return Err(bad()),
        };
        slot.value = fp.value;
    }
    Ok(spec.check()?)
}

/// The values of one replicate: free parameters, then (ΔH°, ΔS°) per species.
struct Replicate {
    parameters: Vec<f64>,
    thermo: Vec<(f64, f64)>,
}

/// Linear-interpolation percentile of sorted values (`q` in 0…1).
fn percentile(sorted: &[f64], q: f64) -> f64 {
    match sorted.len() {
        0 => f64::NAN,
        1 => sorted[0],
        n => {
            let h = q * (n - 1) as f64;
            let lo = h.floor() as usize;
            let hi = (lo + 1).min(n - 1);
            sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
        }
    }
}

fn summarise(values: &mut [f64]) -> BootstrapSummary {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
    values.sort_by(f64::total_cmp);
    BootstrapSummary {
        mean,
        standard_deviation: var.sqrt(),
        percentile_2_5: percentile(values, 0.025),
        percentile_97_5: percentile(values, 0.975),
    }
}

/// Bootstrap of a global fit: `options.replicates` resampled data sets, each refitted in
/// parallel (see the [module docs](self) for the schemes). `progress(done, total)` is called
/// after every replicate, from the worker threads.
///
/// # Errors
/// [`HardFitError::Settings`] for fewer than 2 replicates, zero threads, a fit that does not
/// belong to `set`, or when every replicate failed; [`HardFitError::Solver`] when the thread
/// pool cannot be built; [`HardFitError::Model`] when the model cannot be rebuilt at the
/// fitted values.
///
/// # Examples
/// ```
/// use isosbestic::resolve::hard::{self, HardFitParams, bootstrap::*};
/// use isosbestic::simulate::{simulate, Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan};
/// use isosbestic::speciation::EquilibriumModel;
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
///     [[species]]
///     name = "MX"
///     stoichiometry = { M = 1, X = 1 }
///     absorbs = true
///     law = { kind = "van_t_hoff", log_beta_ref = { value = 1.0 }, dh_ref = { value = 20000.0 } }
/// "#)?.check()?;
/// let band = |c, h| Band { centre_nm: c, width_nm: 30.0, height: h, shift_nm_per_k: 0.0 };
/// let plan = SimulationPlan {
///     seed: 1, first_nm: 400.0, last_nm: 700.0, step_nm: 10.0,
///     temperatures_c: (0..8).map(|k| 10.0 + 8.0 * k as f64).collect(), path_cm: 1.0,
///     preparation_temperature_c: 25.0, thermal_expansion: false,
///     noise: Noise::Absorbance { sd_au: 1e-3 }, offset_sd_au: 0.0, slope_sd_au_per_100nm: 0.0,
///     series: [0.03, 0.3].iter().map(|&x| SeriesPlan {
///         label: format!("X{x}"), totals_m: [("M".into(), 0.01), ("X".into(), x)].into() }).collect(),
///     spectra: vec![
///         PureSpectrum { species: "M".into(), bands: vec![band(450.0, 10.0)] },
///         PureSpectrum { species: "MX".into(), bands: vec![band(600.0, 80.0)] },
///     ],
/// };
/// let sim = simulate(&model, &plan)?;
/// let params = HardFitParams::default();
/// let fit = hard::fit(&sim.set, &model, &params)?;
/// let options = BootstrapOptions { replicates: 20, kind: BootstrapKind::Wild, seed: 7, threads: Some(1) };
/// let boot = bootstrap(&sim.set, &model, &params, &fit, options, &|_, _| {})?;
/// let dh = &boot.parameters[1];
/// assert_eq!(dh.name, "dh_ref");
/// // the bootstrap spread is of the order of the asymptotic standard error
/// let se = fit.parameters[1].standard_error;
/// assert!(dh.summary.standard_deviation > 0.3 * se && dh.summary.standard_deviation < 3.0 * se);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn bootstrap(
    set: &SpectraSet,
    model: &ValidModel,
    params: &HardFitParams,
    fit: &HardFit,
    options: BootstrapOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<BootstrapResult, HardFitError> {
    if options.replicates < 2 {
        return Err(HardFitError::Settings(format!(
            "the bootstrap needs at least 2 replicates (got {})",
            options.replicates
        )));
    }
    if options.threads == Some(0) {
        return Err(HardFitError::Settings(
            "the bootstrap needs at least one thread".into(),
        ));
    }
    let fitted = fitted_values(set, params, fit)?;
    let mut residuals = set.absorbance() - &fitted;
    let n_data = residuals.len();
    let inflate = (n_data as f64 / fit.degrees_of_freedom.max(1) as f64).sqrt();
    if options.kind == BootstrapKind::Residual {
        let mean = residuals.mean().unwrap_or(0.0);
        residuals.mapv_inplace(|e| e - mean);
    }
    residuals *= inflate;
    let start_model = model_at_estimate(model, fit)?;
    let refit_params = HardFitParams {
        start_grid: 1,
        ..params.clone()
    };
    let pool_entries: Vec<f64> = residuals.iter().copied().collect();
    let total = options.replicates;
    let done = AtomicUsize::new(0);
    let one = |k: usize| -> Option<Replicate> {
        let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
        rng.set_stream(k as u64);
        let mut d = fitted.clone();
        match options.kind {
            BootstrapKind::Residual => {
                for v in d.iter_mut() {
                    *v += pool_entries[rng.random_range(0..n_data)];
                }
            }
            BootstrapKind::Wild => {
                for (v, e) in d.iter_mut().zip(residuals.iter()) {
                    *v += if rng.random::<bool>() { *e } else { -*e };
                }
            }
        }
        let out = set
            .with_data(set.wavelengths_nm().clone(), d)
            .ok()
            .and_then(|s| fit_replicate(&s, &start_model, &refit_params));
        progress(done.fetch_add(1, Ordering::SeqCst) + 1, total);
        out
    };
    let replicates: Vec<Option<Replicate>> = match options.threads {
        Some(n) => rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build()
            .map_err(|e| HardFitError::Solver(format!("cannot start the bootstrap threads: {e}")))?
            .install(|| (0..total).into_par_iter().map(one).collect()),
        None => (0..total).into_par_iter().map(one).collect(),
    };
    let ok: Vec<&Replicate> = replicates.iter().flatten().collect();
    let failed = total - ok.len();
    if ok.len() < 2 {
        return Err(HardFitError::Settings(format!(
            "{failed} of {total} bootstrap refits failed: no distribution to summarise"
        )));
    }
    let column = |f: &dyn Fn(&Replicate) -> f64| -> Vec<f64> { ok.iter().map(|r| f(r)).collect() };
    let parameters = fit
        .parameters
        .iter()
        .enumerate()
        .map(|(p, fp)| BootstrapParameter {
            species: fp.parameter.species_name.clone(),
            name: fp.parameter.name.clone(),
            estimate: fp.value,
            summary: summarise(&mut column(&|r| r.parameters[p])),
        })
        .collect();
    let thermodynamics = fit
        .thermodynamics
        .iter()
        .enumerate()
        .map(|(s, th)| BootstrapThermodynamics {
            species: th.species.clone(),
            dh_j_mol: summarise(&mut column(&|r| r.thermo[s].0)),
            ds_j_k_mol: summarise(&mut column(&|r| r.thermo[s].1)),
        })
        .collect();
    Ok(BootstrapResult {
        options,
        parameters,
        thermodynamics,
        failed,
    })
}

/// One refit; `None` when it fails or does not converge.
fn fit_replicate(set: &SpectraSet, model: &ValidModel, params: &HardFitParams) -> Option<Replicate> {
    let params = HardFitParams {
        residual_svd: false, // a replicate needs its parameters only
        ..params.clone()
    };
    let f = fit(set, model, &params).ok()?;
    if !f.termination.converged() {
        return None;
    }
    Some(Replicate {
        parameters: f.parameters.iter().map(|p| p.value).collect(),
        thermo: f
            .thermodynamics
            .iter()
            .map(|t| (t.standard.dh_j_mol, t.standard.ds_j_k_mol))
            .collect(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::resolve::hard::Baseline;
    use crate::simulate::{Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
    use ndarray::Array1;

    fn plan(noise: Noise, offsets: bool) -> SimulationPlan {
        let band = |c: f64, h: f64| Band {
            centre_nm: c,
            width_nm: 35.0,
            height: h,
            shift_nm_per_k: 0.0,
        };
        SimulationPlan {
            seed: 3,
            first_nm: 400.0,
            last_nm: 700.0,
            step_nm: 10.0,
            temperatures_c: vec![10.0, 25.0, 40.0, 55.0, 70.0],
            path_cm: 1.0,
            preparation_temperature_c: 25.0,
            thermal_expansion: false,
            noise,
            offset_sd_au: if offsets { 5e-3 } else { 0.0 },
            slope_sd_au_per_100nm: if offsets { 2e-3 } else { 0.0 },
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
                    bands: vec![band(420.0, 6.0)],
                },
                PureSpectrum {
                    species: "MX".into(),
                    bands: vec![band(500.0, 18.0)],
                },
                PureSpectrum {
                    species: "MX2".into(),
                    bands: vec![band(600.0, 40.0)],
                },
            ],
        }
    }

    #[test]
    fn fitted_values_reproduce_noise_free_data_with_and_without_baselines() {
        let model = super::super::tests::two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        for (baseline, offsets) in [(Baseline::None, false), (Baseline::OffsetAndSlope, true)] {
            let sim = simulate(&model, &plan(Noise::None, offsets)).unwrap();
            let params = HardFitParams {
                baseline,
                start_grid: 1,
                ..HardFitParams::default()
            };
            let f = fit(&sim.set, &model, &params).unwrap();
            let d_hat = fitted_values(&sim.set, &params, &f).unwrap();
            // exact data: D̂ = D up to rounding (the simulation is the outside truth)
            let err = (&d_hat - sim.set.absorbance())
                .iter()
                .fold(0.0f64, |m, v| m.max(v.abs()));
            assert!(err < 1e-9, "{baseline:?}: max |D̂ − D| = {err}");
        }
    }

    #[test]
    fn the_residual_of_the_rebuilt_fitted_values_is_the_fit_rss_for_every_spectra_order() {
        use super::super::SpectraTemperature;
        let model = super::super::tests::two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let mut p = plan(Noise::Absorbance { sd_au: 1e-3 }, true);
        // enough temperatures and different metal totals for a well-conditioned ε(T) design
        p.temperatures_c = (0..12).map(|k| 5.0 + 6.0 * f64::from(k)).collect();
        p.series[1].totals_m.insert("M".into(), 0.01);
        for s in &mut p.spectra {
            for b in &mut s.bands {
                b.shift_nm_per_k = 0.1;
            }
        }
        let sim = simulate(&model, &p).unwrap();
        for (spectra_temperature, baseline) in [
            (SpectraTemperature::Linear { reference_k: 310.0 }, Baseline::None),
            (
                SpectraTemperature::Quadratic { reference_k: 300.0 },
                Baseline::Offset,
            ),
            (SpectraTemperature::Constant, Baseline::OffsetAndSlope),
        ] {
            let params = HardFitParams {
                spectra_temperature,
                baseline,
                start_grid: 1,
                ..HardFitParams::default()
            };
            let f = fit(&sim.set, &model, &params).unwrap();
            let d_hat = fitted_values(&sim.set, &params, &f).unwrap();
            let rss: f64 = (sim.set.absorbance() - &d_hat).iter().map(|e| e * e).sum();
            // the fit's own RSS (computed in the reduced space) must equal ‖D − D̂‖²
            approx::assert_relative_eq!(rss, f.rss, max_relative = 1e-8);
        }
    }

    #[test]
    fn the_result_depends_on_the_seed_not_on_the_number_of_threads() {
        let model = super::super::tests::two_complex_model(0.4, 12_000.0, -0.2, 35_000.0);
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 1e-3 }, false)).unwrap();
        let params = HardFitParams::default();
        let f = fit(&sim.set, &model, &params).unwrap();
        let calls = AtomicUsize::new(0);
        let run = |threads, kind| {
            let options = BootstrapOptions {
                replicates: 8,
                kind,
                seed: 11,
                threads: Some(threads),
            };
            bootstrap(&sim.set, &model, &params, &f, options, &|_, total| {
                assert_eq!(total, 8);
                calls.fetch_add(1, Ordering::SeqCst);
            })
            .unwrap()
        };
        for kind in [BootstrapKind::Residual, BootstrapKind::Wild] {
            let a = run(1, kind);
            let b = run(2, kind);
            assert_eq!(a.parameters, b.parameters);
            assert_eq!(a.thermodynamics, b.thermodynamics);
            assert_eq!(a.failed, 0);
            assert!(a.parameters[1].summary.standard_deviation > 0.0);
        }
        assert_eq!(calls.load(Ordering::SeqCst), 32);
        let bad = BootstrapOptions {
            replicates: 1,
            ..BootstrapOptions::default()
        };
        assert!(matches!(
            bootstrap(&sim.set, &model, &params, &f, bad, &|_, _| {}),
            Err(HardFitError::Settings(_))
        ));
    }

    #[test]
    fn percentiles_interpolate_between_order_statistics() {
        // numpy.percentile's default ("linear") on 0..=10 gives q·10 (numpy docs, method 7).
        let v: Vec<f64> = (0..=10).map(f64::from).collect();
        approx::assert_relative_eq!(percentile(&v, 0.025), 0.25);
        approx::assert_relative_eq!(percentile(&v, 0.975), 9.75);
        let mut w = vec![3.0, 1.0, 2.0];
        let s = summarise(&mut w);
        approx::assert_relative_eq!(s.mean, 2.0);
        approx::assert_relative_eq!(s.standard_deviation, 1.0);
    }

    #[test]
    fn the_baseline_basis_is_orthonormal() {
        let wl = Array1::from(vec![400.0, 410.0, 430.0, 470.0]);
        let q = super::super::baseline_basis(&wl, Baseline::OffsetAndSlope).unwrap();
        let g = q.t().dot(&q);
        for ((a, b), v) in g.indexed_iter() {
            approx::assert_abs_diff_eq!(*v, if a == b { 1.0 } else { 0.0 }, epsilon = 1e-12);
        }
    }
}
