//! Simulation of a measurement: a [`SpectraSet`] from an equilibrium model, its parameter
//! values, pure spectra, a temperature programme and the series' totals — for planning
//! experiments (what precision will this design give?) and for tests.
//!
//! For each sample i (series s at temperature Tᵢ):
//!
//! ```text
//! totals at Tᵢ = totals_s · ρ(Tᵢ)/ρ(T_prep)            (thermal expansion, optional)
//! cᵢ = speciation(log β(Tᵢ), totals at Tᵢ)
//! dᵢ(λ) = bᵢ Σ_k c_ik ε_k(λ) + offsetᵢ + slopeᵢ·(λ − λ_mid) + noise
//! ```
//!
//! Noise is either constant in absorbance, or constant in transmittance (σ_T), which in
//! absorbance units grows as σ_A = σ_T·10^A / ln 10 (first-order propagation of A = −log₁₀ T;
//! common practice). Everything random comes from one seeded ChaCha8 generator, so a seed gives
//! the same data on every platform.

use crate::data::{Sample, SpectraSet, ZERO_CELSIUS_K};
use crate::speciation::{
    Derivatives, Medium, Optics, SpeciationBatch, Start, ValidModel, speciate_all_in_medium,
};
use crate::testing::{gaussian_band, rng};
use crate::thermo::{ActivityCorrection, ConcentrationScale, SolventDensity};
use ndarray::{Array1, Array2};
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use thiserror::Error;

/// Why a simulation could not be run.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SimulationError {
    /// Invalid settings, with the field named.
    #[error("invalid simulation setting '{field}': {reason}")]
    Settings {
        /// The field.
        field: String,
        /// Why.
        reason: String,
    },
    /// An absorbing species has no spectrum, or a spectrum names an unknown species.
    #[error("pure spectra: {0}")]
    Spectra(String),
    /// Speciation failed.
    #[error(transparent)]
    Speciation(#[from] crate::speciation::SpeciationError),
    /// The solvent density is not defined at a temperature.
    #[error(transparent)]
    Density(#[from] crate::thermo::ThermoError),
    /// The simulated set failed validation.
    #[error(transparent)]
    Set(#[from] crate::data::SpectraSetError),
}

/// One Gaussian absorption band, ε(λ) = height·exp(−½((λ − centre)/width)²).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Band {
    /// Band centre, nm.
    pub centre_nm: f64,
    /// Standard deviation width, nm.
    pub width_nm: f64,
    /// Peak molar absorptivity, L mol⁻¹ cm⁻¹.
    pub height: f64,
    /// Shift of the centre with temperature, nm/K (from 25 °C).
    #[serde(default)]
    pub shift_nm_per_k: f64,
}

/// The pure spectrum of one species.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PureSpectrum {
    /// Species name (as in the model).
    pub species: String,
    /// Bands summed into ε(λ).
    pub bands: Vec<Band>,
}

/// Noise model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum Noise {
    /// No noise.
    None,
    /// Constant absorbance noise σ_A.
    Absorbance {
        /// σ_A, absorbance units.
        sd_au: f64,
    },
    /// Constant transmittance noise σ_T (absorbance noise grows as 10^A).
    Transmittance {
        /// σ_T, fraction of transmittance.
        sd_t: f64,
    },
}

/// One series: a preparation measured at every temperature of the programme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SeriesPlan {
    /// Series label.
    pub label: String,
    /// Totals as prepared, mol/L, per component.
    pub totals_m: BTreeMap<String, f64>,
}

/// Settings of a simulation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimulationPlan {
    /// Seed of the random generator.
    #[serde(default)]
    pub seed: u64,
    /// First wavelength, nm.
    pub first_nm: f64,
    /// Last wavelength, nm.
    pub last_nm: f64,
    /// Wavelength step, nm.
    pub step_nm: f64,
    /// Measurement temperatures, °C.
    pub temperatures_c: Vec<f64>,
    /// Path length, cm.
    #[serde(default = "one")]
    pub path_cm: f64,
    /// Temperature at which the solutions are made up, °C.
    #[serde(default = "twenty_five")]
    pub preparation_temperature_c: f64,
    /// Scale totals with the density of water (Kell 1975) between preparation and measurement.
    #[serde(default)]
    pub thermal_expansion: bool,
    /// Noise.
    pub noise: Noise,
    /// Standard deviation of a random per-spectrum offset, AU.
    #[serde(default)]
    pub offset_sd_au: f64,
    /// Standard deviation of a random per-spectrum slope, AU per 100 nm.
    #[serde(default)]
    pub slope_sd_au_per_100nm: f64,
    /// The series.
    pub series: Vec<SeriesPlan>,
    /// Pure spectra of the absorbing species.
    pub spectra: Vec<PureSpectrum>,
}

fn one() -> f64 {
    1.0
}
fn twenty_five() -> f64 {
    25.0
}

/// The solution medium of a simulation (ideal and molar by default, as in [`simulate`]): the
/// same settings as the global fit's `activity`, `medium_ionic_strength` and
/// `concentration_scale` (molal conversion with the density of water, Kell 1975).
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SimulationMedium {
    /// Activity corrections (the model's log β are then thermodynamic constants).
    pub activity: ActivityCorrection,
    /// Ionic strength of the inert background electrolyte, mol/L as prepared.
    pub medium_ionic_strength: f64,
    /// Concentration scale of the model's constants.
    pub concentration_scale: ConcentrationScale,
}

/// A simulated data set and the truth behind it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Simulation {
    /// The simulated measurements.
    pub set: SpectraSet,
    /// True concentrations, samples × model species, mol/L.
    pub concentrations: Array2<f64>,
    /// True pure spectra at 25 °C, wavelengths × model species (zero for transparent species).
    pub spectra: Array2<f64>,
}

fn check(plan: &SimulationPlan) -> Result<(), SimulationError> {
    let bad = |field: &str, reason: String| {
        Err(SimulationError::Settings {
            field: field.into(),
            reason,
        })
    };
    if !(plan.step_nm.is_finite()
        && plan.step_nm > 0.0
        && plan.first_nm > 0.0
        && plan.last_nm > plan.first_nm)
    {
        return bad(
            "first_nm/last_nm/step_nm",
            "need 0 < first_nm < last_nm and step_nm > 0".into(),
        );
    }
    if plan.temperatures_c.is_empty()
        || plan
            .temperatures_c
            .iter()
            .any(|t| !(t.is_finite() && *t > -ZERO_CELSIUS_K))
    {
        return bad(
            "temperatures_c",
            "need at least one temperature above absolute zero".into(),
        );
    }
    if !(plan.path_cm.is_finite() && plan.path_cm > 0.0) {
        return bad("path_cm", format!("{} is not a positive length", plan.path_cm));
    }
    if plan.series.is_empty() {
        return bad("series", "need at least one series".into());
    }
    let sd_ok = |v: f64| v.is_finite() && v >= 0.0;
    let noise_ok = match plan.noise {
        Noise::None => true,
        Noise::Absorbance { sd_au } => sd_ok(sd_au),
        Noise::Transmittance { sd_t } => sd_ok(sd_t),
    };
    if !noise_ok || !sd_ok(plan.offset_sd_au) || !sd_ok(plan.slope_sd_au_per_100nm) {
        return bad(
            "noise",
            "standard deviations must be finite and not negative".into(),
        );
    }
    Ok(())
}

/// Simulates a data set.
///
/// # Errors
/// [`SimulationError`] naming the bad setting, a species without a spectrum, or the sample
/// whose speciation failed.
///
/// # Examples
/// ```
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
/// let plan = SimulationPlan {
///     seed: 1, first_nm: 400.0, last_nm: 700.0, step_nm: 5.0,
///     temperatures_c: vec![10.0, 40.0, 70.0], path_cm: 1.0, preparation_temperature_c: 25.0,
///     thermal_expansion: false, noise: Noise::None, offset_sd_au: 0.0, slope_sd_au_per_100nm: 0.0,
///     series: vec![SeriesPlan { label: "a".into(), totals_m: [("M".into(), 0.01), ("X".into(), 0.1)].into() }],
///     spectra: vec![
///         PureSpectrum { species: "M".into(), bands: vec![Band { centre_nm: 450.0, width_nm: 30.0, height: 10.0, shift_nm_per_k: 0.0 }] },
///         PureSpectrum { species: "MX".into(), bands: vec![Band { centre_nm: 600.0, width_nm: 40.0, height: 80.0, shift_nm_per_k: 0.0 }] },
///     ],
/// };
/// let sim = simulate(&model, &plan)?;
/// assert_eq!(sim.set.n_samples(), 3);
/// // endothermic complexation: more MX when warmer
/// assert!(sim.concentrations[[2, 2]] > sim.concentrations[[0, 2]]);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn simulate(model: &ValidModel, plan: &SimulationPlan) -> Result<Simulation, SimulationError> {
    simulate_in_medium(model, plan, &SimulationMedium::default())
}

/// As [`simulate`], with activity corrections, a background electrolyte and/or the molal scale
/// (see [`SimulationMedium`] and [`crate::speciation::Medium`]).
///
/// # Errors
/// As [`simulate`]; also a negative `medium_ionic_strength`, a species without a charge when
/// activity corrections are on, and a temperature outside 0–100 °C (water properties) for
/// activity corrections or the molal scale.
pub fn simulate_in_medium(
    model: &ValidModel,
    plan: &SimulationPlan,
    medium: &SimulationMedium,
) -> Result<Simulation, SimulationError> {
    check(plan)?;
    if !(medium.medium_ionic_strength.is_finite() && medium.medium_ionic_strength >= 0.0) {
        return Err(SimulationError::Settings {
            field: "medium_ionic_strength".into(),
            reason: format!(
                "{} is not a non-negative ionic strength",
                medium.medium_ionic_strength
            ),
        });
    }
    let n_wl = ((plan.last_nm - plan.first_nm) / plan.step_nm + 1e-9).floor() as usize + 1;
    let wl: Vec<f64> = (0..n_wl)
        .map(|j| plan.first_nm + plan.step_nm * j as f64)
        .collect();
    let nsp = model.n_species();
    for ps in &plan.spectra {
        if model.species_index(&ps.species).is_none() {
            return Err(SimulationError::Spectra(format!(
                "'{}' is not a species of the model",
                ps.species
            )));
        }
    }
    for sp in model.species() {
        if sp.optics == Optics::Absorbing && !plan.spectra.iter().any(|p| p.species == sp.name) {
            return Err(SimulationError::Spectra(format!(
                "absorbing species '{}' has no spectrum",
                sp.name
            )));
        }
    }
    let spectrum_at = |species: usize, t_k: f64| -> Vec<f64> {
        let name = &model.species()[species].name;
        let mut eps = vec![0.0; n_wl];
        if let Some(ps) = plan.spectra.iter().find(|p| &p.species == name) {
            for b in &ps.bands {
                let centre = b.centre_nm + b.shift_nm_per_k * (t_k - 298.15);
                for (e, v) in eps
                    .iter_mut()
                    .zip(gaussian_band(&wl, centre, b.width_nm, b.height))
                {
                    *e += v;
                }
            }
        }
        eps
    };
    let mut samples = Vec::new();
    let mut totals = Vec::new();
    let mut factors = Vec::new();
    let t_prep_k = plan.preparation_temperature_c + ZERO_CELSIUS_K;
    for s in &plan.series {
        for &t_c in &plan.temperatures_c {
            let t_k = t_c + ZERO_CELSIUS_K;
            let mut sample = Sample::new(
                format!("{}_{:.1}C", s.label, t_c),
                s.label.clone(),
                t_k,
                plan.path_cm,
            );
            sample.preparation_temperature_k = t_prep_k;
            for (c, v) in &s.totals_m {
                sample = sample.with_total(c.clone(), *v);
            }
            let factor = if plan.thermal_expansion {
                crate::thermo::SolventDensity::Water.concentration_factor(t_k, t_prep_k)?
            } else {
                1.0
            };
            let row: Vec<f64> = model
                .component_names()
                .iter()
                .map(|c| s.totals_m.get(c).copied().map(|v| v * factor))
                .collect::<Option<Vec<f64>>>()
                .ok_or_else(|| SimulationError::Settings {
                    field: format!("series '{}' totals_m", s.label),
                    reason: format!(
                        "needs a total for every component: {}",
                        model.component_names().join(", ")
                    ),
                })?;
            totals.push(row);
            samples.push(sample);
            factors.push(factor);
        }
    }
    let ns = samples.len();
    let totals = Array2::from_shape_vec((ns, model.n_components()), totals.concat())
        .map_err(|e| SimulationError::Spectra(e.to_string()))?;
    let temps: Vec<f64> = samples.iter().map(|s| s.temperature_k).collect();
    let lb = model.log10_betas(&temps);
    let ids: Vec<String> = samples.iter().map(|s| s.id.clone()).collect();
    let kg_solvent_per_litre = match medium.concentration_scale {
        ConcentrationScale::Molar => None,
        scale => Some(
            temps
                .iter()
                .map(|&t| Ok(1.0 / scale.from_molar(1.0, SolventDensity::Water.density_kg_m3(t)?)?))
                .collect::<Result<Vec<f64>, crate::thermo::ThermoError>>()?,
        ),
    };
    let speciation_medium = Medium {
        activity: medium.activity,
        temperatures_k: temps.clone(),
        background_ionic_strength: factors.iter().map(|f| f * medium.medium_ionic_strength).collect(),
        kg_solvent_per_litre,
        ..Medium::default()
    };
    let mut batch = SpeciationBatch::new(model, ns, Derivatives::Skip);
    speciate_all_in_medium(
        model,
        lb.view(),
        totals.view(),
        &ids,
        Start::Cold,
        &speciation_medium,
        &mut batch,
    )?;
    let c = batch.concentrations;
    let mut g = rng(plan.seed);
    let std_normal = Normal::new(0.0, 1.0).map_err(|e| SimulationError::Spectra(e.to_string()))?;
    let mid = 0.5 * (plan.first_nm + plan.last_nm);
    let mut d = Array2::zeros((ns, n_wl));
    for i in 0..ns {
        let mut row = vec![0.0; n_wl];
        for k in 0..nsp {
            if model.species()[k].optics != Optics::Absorbing || c[[i, k]] == 0.0 {
                continue;
            }
            let eps = spectrum_at(k, temps[i]);
            for (r, e) in row.iter_mut().zip(&eps) {
                *r += plan.path_cm * c[[i, k]] * e;
            }
        }
        let offset = plan.offset_sd_au * std_normal.sample(&mut g);
        let slope = plan.slope_sd_au_per_100nm * std_normal.sample(&mut g) / 100.0;
        for (j, r) in row.iter_mut().enumerate() {
            let noise = match plan.noise {
                Noise::None => 0.0,
                Noise::Absorbance { sd_au } => sd_au * std_normal.sample(&mut g),
                Noise::Transmittance { sd_t } => {
                    sd_t * 10f64.powf(*r) / std::f64::consts::LN_10 * std_normal.sample(&mut g)
                }
            };
            d[[i, j]] = *r + offset + slope * (wl[j] - mid) + noise;
        }
    }
    let components: Vec<String> = plan.series[0].totals_m.keys().cloned().collect();
    let set = SpectraSet::new(Array1::from(wl.clone()), d, samples, components)?;
    let mut spectra = Array2::zeros((n_wl, nsp));
    for k in 0..nsp {
        spectra
            .column_mut(k)
            .assign(&Array1::from(spectrum_at(k, 298.15)));
    }
    Ok(Simulation {
        set,
        concentrations: c,
        spectra,
    })
}
