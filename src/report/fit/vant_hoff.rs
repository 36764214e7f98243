//! The van 't Hoff view of a global fit: ln K of every formed species against 1/T with the
//! fit's 95 % band, and — for a two-absorber system M + nL ⇌ MLₙ — the classic two-wavelength
//! estimates ([`crate::resolve::classic`]) at the same samples, with their ΔH° and ΔS°.
//!
//! ## When the classic estimates are made
//! Only when the model is exactly one complex MLₙ of one absorbing metal M with one transparent
//! ligand L: two components, one formed species with stoichiometry {M: 1, L: n ≥ 1}, M and MLₙ
//! absorbing, L transparent. With more species (e.g. stepwise complexes ML and ML₂) the
//! absorbance at two wavelengths cannot separate them, so the classic points are left out and
//! [`VantHoffTable::notes`] says why.
//!
//! ## How the two wavelengths are chosen
//! From the fitted pure spectra at the reference temperature (the ε₀ block of
//! [`HardFit::spectra`]), each scaled to its own maximum, n_M(λ) = ε_M(λ)/max ε_M and
//! n_C(λ) = ε_MLₙ(λ)/max ε_MLₙ:
//!
//! ```text
//! λ₁ (free metal) = argmax over λ of n_M(λ) − n_C(λ)
//! λ₂ (complex)    = argmax over λ of n_C(λ) − n_M(λ)
//! ```
//!
//! i.e. each species near its own band maximum where the other absorbs least, on each
//! species' own scale (a weak d–d band of ε ≈ 5 would never win on an absolute scale against a
//! charge-transfer band of ε ≈ 500). The four ε at λ₁ and λ₂ are the fitted ones; the estimate
//! is the textbook form (cross absorption neglected, [`CrossAbsorption::Neglect`]), so the
//! comparison shows what the hand analysis would have given with the same spectra. The totals
//! are those the fit used (thermal expansion included), recovered from its concentrations.

use crate::data::{SampleRole, SpectraSet};
use crate::report::tables::{Table, format_float};
use crate::resolve::classic::{
    ClassicInput, ClassicMethod, ClassicParams, CrossAbsorption, ExcludedSample, TwoWavelengthAbsorptivities,
    classic_estimate,
};
use crate::resolve::hard::HardFit;
use crate::speciation::{Optics, SpeciesRole, ValidModel};
use crate::thermo::VanThoffParams;
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;
use std::path::Path;

/// Confidence level of the bands in the van 't Hoff table and plot.
pub const VANT_HOFF_LEVEL: f64 = 0.95;

/// Number of temperatures on which the fitted ln K curves are tabulated for the plot.
pub const CURVE_POINTS: usize = 60;

/// One row of `vant_hoff_points.csv`: one formed species at one sample.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VantHoffPoint {
    /// Sample id.
    pub sample_id: String,
    /// Series label.
    pub series: String,
    /// Formed species.
    pub species: String,
    /// T, K.
    pub temperature_k: f64,
    /// 1/T, K⁻¹.
    pub inverse_temperature_per_k: f64,
    /// ln β of the global fit at T (natural log; β on the fit's concentration scale, mol/L or mol/kg).
    pub ln_k_global: f64,
    /// Lower end of its 95 % band (None when the standard error is undefined, e.g. a parameter
    /// of the species ended on its bound).
    pub ln_k_lower: Option<f64>,
    /// Upper end of its 95 % band.
    pub ln_k_upper: Option<f64>,
    /// ln K of the classic direct estimate at this sample (None: not made, or no K here).
    pub ln_k_classic_direct: Option<f64>,
    /// ln K of the classic mass-balance estimate at this sample.
    pub ln_k_classic_mass_balance: Option<f64>,
}

/// The global fit's ln β(T) of one species on a temperature grid, with its band.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LnKCurve {
    /// Formed species.
    pub species: String,
    /// Confidence level of the band.
    pub level: f64,
    /// Temperatures, K, increasing.
    pub temperatures_k: Vec<f64>,
    /// ln β.
    pub ln_k: Vec<f64>,
    /// Lower band limit (None when the standard error is undefined anywhere on the grid).
    pub lower: Option<Vec<f64>>,
    /// Upper band limit.
    pub upper: Option<Vec<f64>>,
}

/// ΔH°, ΔS° from one classic estimate (van 't Hoff fit of its ln K values).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicThermo {
    /// Direct or mass balance.
    pub method: ClassicMethod,
    /// ΔH°, J/mol, with its standard error (None when the van 't Hoff fit failed).
    pub dh_j_mol: Option<[f64; 2]>,
    /// ΔS°, J K⁻¹ mol⁻¹, with its standard error.
    pub ds_j_k_mol: Option<[f64; 2]>,
    /// Samples with a K.
    pub samples_used: usize,
    /// Samples without a K and why.
    pub excluded: Vec<ExcludedSample>,
    /// Why the van 't Hoff fit failed, when it did.
    pub failure: Option<String>,
}

/// The classic two-wavelength comparison of a two-absorber fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicComparison {
    /// The free metal M.
    pub free_species: String,
    /// The complex MLₙ.
    pub complex_species: String,
    /// The ligand L.
    pub ligand: String,
    /// n.
    pub ligand_number: u32,
    /// λ₁, the free metal's wavelength, nm.
    pub free_wavelength_nm: f64,
    /// λ₂, the complex's wavelength, nm.
    pub complex_wavelength_nm: f64,
    /// The fitted ε at λ₁ and λ₂.
    pub absorptivities: TwoWavelengthAbsorptivities,
    /// The direct estimate.
    pub direct: ClassicThermo,
    /// The mass-balance estimate.
    pub mass_balance: ClassicThermo,
    /// ΔH° of the complex from the global fit, J/mol, with standard error.
    pub global_dh_j_mol: [f64; 2],
    /// ΔS° of the complex from the global fit, J K⁻¹ mol⁻¹, with standard error.
    pub global_ds_j_k_mol: [f64; 2],
}

/// The van 't Hoff section of a fit report (`report.json` field `vant_hoff`).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct VantHoffTable {
    /// One row per formed species and measurement sample.
    pub points: Vec<VantHoffPoint>,
    /// The fitted curve of each formed species over the measured temperature range.
    pub curves: Vec<LnKCurve>,
    /// The classic comparison, when the model allows it.
    pub classic: Option<ClassicComparison>,
    /// Why the classic estimates were left out, or caveats about them.
    pub notes: Vec<String>,
}

/// The species and components of a two-absorber model M + nL ⇌ MLₙ.
struct TwoAbsorbers {
    free: usize,
    complex: usize,
    metal: usize,
    ligand: usize,
    n: u32,
}

/// Checks the rule of the module docs; `Err` holds the reason the classic estimates are left
/// out.
fn two_absorbers(model: &ValidModel) -> Result<TwoAbsorbers, String> {
    let formed: Vec<usize> = (0..model.n_species())
        .filter(|&k| model.species()[k].role == SpeciesRole::Formed)
        .collect();
    let [complex] = formed[..] else {
        return Err(format!(
            "the model has {} formed species; the two-wavelength estimates need exactly one complex M + nL ⇌ MLₙ",
            formed.len()
        ));
    };
    if model.n_components() != 2 {
        return Err(format!(
            "the model has {} components; the two-wavelength estimates need a metal and a ligand",
            model.n_components()
        ));
    }
    let sp = &model.species()[complex];
    if sp.optics != Optics::Absorbing {
        return Err(format!("the complex {} does not absorb", sp.name));
    }
    let absorbing: Vec<usize> = (0..2)
        .filter(|&c| model.species()[c].optics == Optics::Absorbing)
        .collect();
    let [metal] = absorbing[..] else {
        return Err(
            "the two-wavelength estimates need exactly one absorbing component (the metal) and a transparent ligand"
                .to_string(),
        );
    };
    let ligand = 1 - metal;
    let (nm, nl) = (sp.stoichiometry[metal], sp.stoichiometry[ligand]);
    if nm != 1 || nl < 1 {
        return Err(format!(
            "the complex {} is not M L_n (metal coefficient {nm}, ligand coefficient {nl})",
            sp.name
        ));
    }
    Ok(TwoAbsorbers {
        free: metal,
        complex,
        metal,
        ligand,
        n: nl.unsigned_abs(),
    })
}

/// λ₁ and λ₂ indices by the selectivity rule of the module docs; `None` if a spectrum has no
/// positive maximum.
pub(crate) fn pick_wavelengths(eps_free: &[f64], eps_complex: &[f64]) -> Option<(usize, usize)> {
    let max = |v: &[f64]| v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (mf, mc) = (max(eps_free), max(eps_complex));
    if !(mf > 0.0 && mc > 0.0 && mf.is_finite() && mc.is_finite()) {
        return None;
    }
    let argmax =
        |score: &dyn Fn(usize) -> f64| (0..eps_free.len()).max_by(|&a, &b| score(a).total_cmp(&score(b)));
    let l1 = argmax(&|j| eps_free[j] / mf - eps_complex[j] / mc)?;
    let l2 = argmax(&|j| eps_complex[j] / mc - eps_free[j] / mf)?;
    Some((l1, l2))
}

/// `Some(v)` when every value is finite.
fn finite(v: Vec<f64>) -> Option<Vec<f64>> {
    v.iter().all(|x| x.is_finite()).then_some(v)
}

fn global_curves(fit: &HardFit, model: &ValidModel, set: &SpectraSet) -> Vec<LnKCurve> {
    let t = set.temperatures_k();
    let lo = t.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = t.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(lo.is_finite() && hi.is_finite()) {
        return Vec::new();
    }
    let grid: Vec<f64> = (0..CURVE_POINTS)
        .map(|i| lo + (hi - lo) * i as f64 / (CURVE_POINTS - 1) as f64)
        .collect();
    model
        .species()
        .iter()
        .filter(|s| s.role == SpeciesRole::Formed)
        .filter_map(|s| {
            let b = fit.log_beta_at(model, &s.name, &grid, VANT_HOFF_LEVEL)?;
            Some(LnKCurve {
                species: s.name.clone(),
                level: VANT_HOFF_LEVEL,
                temperatures_k: grid.clone(),
                ln_k: b.iter().map(|x| LN_10 * x.log_beta).collect(),
                lower: finite(b.iter().map(|x| LN_10 * x.lower).collect()),
                upper: finite(b.iter().map(|x| LN_10 * x.upper).collect()),
            })
        })
        .collect()
}

/// Builds the van 't Hoff table of a global fit of `model` to `set` (the preprocessed set the
/// fit was made on). Never fails: what cannot be computed is left out with a note.
pub fn vant_hoff_table(fit: &HardFit, model: &ValidModel, set: &SpectraSet) -> VantHoffTable {
    let rows: Vec<usize> = (0..set.n_samples())
        .filter(|&i| set.samples()[i].role == SampleRole::Measurement)
        .collect();
    let mut table = VantHoffTable {
        curves: global_curves(fit, model, set),
        ..VantHoffTable::default()
    };
    for c in table
        .curves
        .iter()
        .filter(|c| c.lower.is_none() || c.upper.is_none())
    {
        table.notes.push(format!(
            "ln β of {} has no confidence band: the standard errors of its parameters are undefined \
             (a parameter on its bound, or the data do not determine it)",
            c.species
        ));
    }
    let temps: Vec<f64> = rows.iter().map(|&i| set.samples()[i].temperature_k).collect();
    for s in model.species().iter().filter(|s| s.role == SpeciesRole::Formed) {
        let Some(b) = fit.log_beta_at(model, &s.name, &temps, VANT_HOFF_LEVEL) else {
            continue;
        };
        for (&i, x) in rows.iter().zip(b) {
            let sample = &set.samples()[i];
            table.points.push(VantHoffPoint {
                sample_id: sample.id.clone(),
                series: sample.series.clone(),
                species: s.name.clone(),
                temperature_k: x.temperature_k,
                inverse_temperature_per_k: 1.0 / x.temperature_k,
                ln_k_global: LN_10 * x.log_beta,
                ln_k_lower: Some(LN_10 * x.lower).filter(|v| v.is_finite()),
                ln_k_upper: Some(LN_10 * x.upper).filter(|v| v.is_finite()),
                ln_k_classic_direct: None,
                ln_k_classic_mass_balance: None,
            });
        }
    }
    match classic_comparison(fit, model, set, &rows) {
        Ok((cmp, direct, mass_balance)) => {
            for p in table
                .points
                .iter_mut()
                .filter(|p| p.species == cmp.complex_species)
            {
                p.ln_k_classic_direct = direct.get(&p.sample_id).copied().flatten();
                p.ln_k_classic_mass_balance = mass_balance.get(&p.sample_id).copied().flatten();
            }
            if fit.spectra.ncols() > fit.absorbing_species.len() {
                table.notes.push(
                    "the classic estimates use the fitted spectra at the reference temperature (the textbook \
                     assumption of ε independent of T)"
                        .to_string(),
                );
            }
            table.classic = Some(cmp);
        }
        Err(reason) => table
            .notes
            .push(format!("classic two-wavelength estimates left out: {reason}")),
    }
    table
}

type ClassicLnK = std::collections::HashMap<String, Option<f64>>;

fn classic_comparison(
    fit: &HardFit,
    model: &ValidModel,
    set: &SpectraSet,
    rows: &[usize],
) -> Result<(ClassicComparison, ClassicLnK, ClassicLnK), String> {
    let sys = two_absorbers(model)?;
    let names = model.species();
    let col = |k: usize| {
        fit.absorbing_species
            .iter()
            .position(|a| *a == names[k].name)
            .ok_or_else(|| format!("{} has no fitted spectrum", names[k].name))
    };
    let (cf, cc) = (col(sys.free)?, col(sys.complex)?);
    let ef = fit.spectra.column(cf).to_vec();
    let ec = fit.spectra.column(cc).to_vec();
    let (j1, j2) = pick_wavelengths(&ef, &ec)
        .ok_or("a fitted pure spectrum has no positive maximum, so no band to read")?;
    if j1 == j2 {
        return Err("the two fitted spectra have the same shape: no wavelength separates them".into());
    }
    let wl = set.wavelengths_nm();
    let eps = TwoWavelengthAbsorptivities {
        free_at_free_nm: ef[j1],
        free_at_complex_nm: ef[j2],
        complex_at_free_nm: ec[j1],
        complex_at_complex_nm: ec[j2],
    };
    // Totals as the fit used them: Σ_k A[k, c]·C[i, k] over the fit's species.
    let a = model.stoichiometry();
    let nc = model.n_components();
    let total = |i: usize, c: usize| -> f64 {
        fit.species
            .iter()
            .enumerate()
            .filter_map(|(q, name)| {
                model
                    .species_index(name)
                    .map(|k| a[k * nc + c] * fit.concentrations[[i, q]])
            })
            .sum()
    };
    let d = set.absorbance();
    let samples = set.samples();
    let input = ClassicInput {
        sample_ids: rows.iter().map(|&i| samples[i].id.clone()).collect(),
        temperatures_k: rows.iter().map(|&i| samples[i].temperature_k).collect(),
        path_cm: rows.iter().map(|&i| samples[i].path_cm).collect(),
        absorbance_at_free_nm: rows.iter().map(|&i| d[[i, j1]]).collect(),
        absorbance_at_complex_nm: rows.iter().map(|&i| d[[i, j2]]).collect(),
        metal_total_m: rows.iter().map(|&i| total(i, sys.metal)).collect(),
        ligand_total_m: rows.iter().map(|&i| total(i, sys.ligand)).collect(),
    };
    let vh_params = VanThoffParams::default().check().map_err(|e| e.to_string())?;
    let run = |method: ClassicMethod| -> Result<(ClassicThermo, ClassicLnK), String> {
        let params = ClassicParams {
            ligand_number: sys.n,
            method,
            cross_absorption: CrossAbsorption::Neglect,
        };
        let est = classic_estimate(&input, &eps, &params).map_err(|e| e.to_string())?;
        let ln_k: ClassicLnK = est
            .samples
            .iter()
            .map(|s| (s.id.clone(), s.k.filter(|k| *k > 0.0).map(f64::ln)))
            .collect();
        let used = est.samples.iter().filter(|s| s.k.is_some()).count();
        let thermo = match est.vant_hoff(&vh_params) {
            Ok(v) => ClassicThermo {
                method,
                dh_j_mol: Some([v.fit.delta_h_j_per_mol.value, v.fit.delta_h_j_per_mol.std_error]),
                ds_j_k_mol: Some([
                    v.fit.delta_s_j_per_k_mol.value,
                    v.fit.delta_s_j_per_k_mol.std_error,
                ]),
                samples_used: used,
                excluded: v.excluded,
                failure: None,
            },
            Err(e) => ClassicThermo {
                method,
                dh_j_mol: None,
                ds_j_k_mol: None,
                samples_used: used,
                excluded: est.excluded(),
                failure: Some(e.to_string()),
            },
        };
        Ok((thermo, ln_k))
    };
    let (direct, ln_direct) = run(ClassicMethod::Direct)?;
    let (mass_balance, ln_mb) = run(ClassicMethod::MassBalance)?;
    let complex_name = &names[sys.complex].name;
    let (gdh, gds) = fit
        .thermodynamics
        .iter()
        .find(|t| t.species == *complex_name)
        .map(|t| {
            let se = t.standard.standard_errors();
            ([t.standard.dh_j_mol, se[1]], [t.standard.ds_j_k_mol, se[2]])
        })
        .ok_or("the fit has no thermodynamic quantities for the complex")?;
    Ok((
        ClassicComparison {
            free_species: names[sys.free].name.clone(),
            complex_species: complex_name.clone(),
            ligand: model.component_names()[sys.ligand].clone(),
            ligand_number: sys.n,
            free_wavelength_nm: wl[j1],
            complex_wavelength_nm: wl[j2],
            absorptivities: eps,
            direct,
            mass_balance,
            global_dh_j_mol: gdh,
            global_ds_j_k_mol: gds,
        },
        ln_direct,
        ln_mb,
    ))
}

impl ClassicComparison {
    /// (name, ΔH° ± se in J/mol, ΔS° ± se in J K⁻¹ mol⁻¹) of the global fit, the classic direct
    /// and the classic mass-balance estimate, in that order.
    #[allow(clippy::type_complexity)]
    pub fn estimates(&self) -> [(&'static str, Option<[f64; 2]>, Option<[f64; 2]>); 3] {
        [
            (
                "global fit",
                Some(self.global_dh_j_mol),
                Some(self.global_ds_j_k_mol),
            ),
            ("classic direct", self.direct.dh_j_mol, self.direct.ds_j_k_mol),
            (
                "classic mass balance",
                self.mass_balance.dh_j_mol,
                self.mass_balance.ds_j_k_mol,
            ),
        ]
    }
}

impl VantHoffTable {
    /// Writes `vant_hoff_points.csv`: sample, series, species, T, 1/T, ln K of the global fit
    /// with its 95 % band, and the classic direct and mass-balance ln K (empty when absent).
    ///
    /// # Errors
    /// [`crate::Error::Output`].
    pub fn write_csv(&self, path: &Path) -> crate::Result<()> {
        let mut t = Table::new([
            "sample_id",
            "series",
            "species",
            "temperature_K",
            "inverse_temperature_per_K",
            "ln_K_global",
            "ln_K_global_lower95",
            "ln_K_global_upper95",
            "ln_K_classic_direct",
            "ln_K_classic_mass_balance",
        ]);
        let opt = |v: Option<f64>| v.map(format_float).unwrap_or_default();
        for p in &self.points {
            t.push_row([
                p.sample_id.clone(),
                p.series.clone(),
                p.species.clone(),
                format_float(p.temperature_k),
                format_float(p.inverse_temperature_per_k),
                format_float(p.ln_k_global),
                opt(p.ln_k_lower),
                opt(p.ln_k_upper),
                opt(p.ln_k_classic_direct),
                opt(p.ln_k_classic_mass_balance),
            ]);
        }
        t.write_csv(path)
    }

    /// Classic ln K points of one method as (T, ln K) pairs, for the plot.
    pub fn classic_points(&self, method: ClassicMethod) -> (Vec<f64>, Vec<f64>) {
        self.points
            .iter()
            .filter_map(|p| {
                let v = match method {
                    ClassicMethod::Direct => p.ln_k_classic_direct,
                    ClassicMethod::MassBalance => p.ln_k_classic_mass_balance,
                };
                v.map(|v| (p.temperature_k, v))
            })
            .unzip()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_wavelength_is_where_its_species_dominates_on_its_own_scale() {
        // a weak free-metal band at index 1 and a strong complex band at index 4 whose tail
        // reaches index 1: on absolute ε the complex would win everywhere
        let free = [1.0, 5.0, 3.0, 1.0, 0.5, 0.2];
        let complex = [10.0, 40.0, 100.0, 300.0, 500.0, 200.0];
        assert_eq!(pick_wavelengths(&free, &complex), Some((1, 4)));
        assert_eq!(pick_wavelengths(&[0.0; 3], &[1.0, 2.0, 3.0]), None);
    }
}
