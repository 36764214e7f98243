//! Synthetic-data generators shared by doc-tests, benches and tests. Not part of the stable API.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// A seeded, portable random number generator (ChaCha8): the same seed gives the same numbers
/// on every platform.
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// A Gaussian band `height · exp(−½((λ − centre)/width)²)` evaluated on `wavelengths_nm`.
///
/// # Examples
/// ```
/// let b = isosbestic::testing::gaussian_band(&[500.0, 520.0], 500.0, 20.0, 2.0);
/// approx::assert_relative_eq!(b[0], 2.0);
/// approx::assert_relative_eq!(b[1], 2.0 * (-0.5f64).exp());
/// ```
pub fn gaussian_band(wavelengths_nm: &[f64], centre_nm: f64, width_nm: f64, height: f64) -> Vec<f64> {
    wavelengths_nm
        .iter()
        .map(|l| height * (-0.5 * ((l - centre_nm) / width_nm).powi(2)).exp())
        .collect()
}

/// An invented metal–ligand model for tests and benches: components `metal` (absorbing, with an
/// optional ε ceiling) and `ligand` (transparent), and one complex per `(n, log β_ref, ΔH° in
/// J/mol)` entry with a van 't Hoff law at 298.15 K, named `{metal}{ligand}` for n = 1 and
/// `{metal}{ligand}{n}` otherwise.
///
/// # Panics
/// Only if the generated model is invalid (e.g. repeated n), which is a bug in the caller.
///
/// # Examples
/// ```
/// let m = isosbestic::testing::metal_ligand_model("M", "X", &[(1, 0.4, 12e3), (2, -0.2, 35e3)], None);
/// assert_eq!(m.species_index("MX2"), Some(3));
/// ```
pub fn metal_ligand_model(
    metal: &str,
    ligand: &str,
    complexes: &[(u32, f64, f64)],
    metal_ceiling: Option<f64>,
) -> crate::speciation::ValidModel {
    let ceiling = metal_ceiling.map_or(String::new(), |c| format!(", max_absorptivity = {c}"));
    let mut text = format!(
        "components = [{{ name = \"{metal}\", absorbs = true{ceiling} }}, {{ name = \"{ligand}\", absorbs = false }}]\n"
    );
    for &(n, log_beta, dh) in complexes {
        let name = if n == 1 {
            format!("{metal}{ligand}")
        } else {
            format!("{metal}{ligand}{n}")
        };
        text.push_str(&format!(
            "[[species]]\nname = \"{name}\"\nstoichiometry = {{ {metal} = 1, {ligand} = {n} }}\nabsorbs = true\n\
             law = {{ kind = \"van_t_hoff\", log_beta_ref = {{ value = {log_beta} }}, dh_ref = {{ value = {dh} }} }}\n"
        ));
    }
    crate::speciation::EquilibriumModel::from_toml_str(&text)
        .and_then(|m| m.check())
        .expect("a valid generated model")
}

/// A small simulation plan for examples and tests: 8 temperatures from 10 to 66 °C, 400–700 nm
/// every 10 nm, two series (metal 0.01 mol/L with the ligand at 0.03 and 0.3 mol/L), noise
/// 1e-3 AU, and one Gaussian band per absorbing species (width 30 nm): the metal at 450 nm
/// (ε 10), the k-th complex of `complexes` at 520 + 80·k nm (ε 80).
///
/// # Examples
/// ```
/// use isosbestic::testing::{metal_ligand_model, small_plan};
/// let model = metal_ligand_model("M", "X", &[(1, 1.0, 20e3)], None);
/// let sim = isosbestic::simulate::simulate(&model, &small_plan("M", "X", &["MX"]))?;
/// assert_eq!(sim.set.n_samples(), 16);
/// assert_eq!(sim.set.n_wavelengths(), 31);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn small_plan(metal: &str, ligand: &str, complexes: &[&str]) -> crate::simulate::SimulationPlan {
    use crate::simulate::{Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan};
    let band = |centre_nm: f64, height: f64| Band {
        centre_nm,
        width_nm: 30.0,
        height,
        shift_nm_per_k: 0.0,
    };
    let mut spectra = vec![PureSpectrum {
        species: metal.into(),
        bands: vec![band(450.0, 10.0)],
    }];
    spectra.extend(complexes.iter().enumerate().map(|(k, name)| PureSpectrum {
        species: (*name).into(),
        bands: vec![band(520.0 + 80.0 * k as f64, 80.0)],
    }));
    SimulationPlan {
        seed: 1,
        first_nm: 400.0,
        last_nm: 700.0,
        step_nm: 10.0,
        temperatures_c: (0..8).map(|k| 10.0 + 8.0 * k as f64).collect(),
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: false,
        noise: Noise::Absorbance { sd_au: 1e-3 },
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: [0.03, 0.3]
            .iter()
            .map(|&x| SeriesPlan {
                label: format!("{ligand}{x}"),
                totals_m: [(metal.to_string(), 0.01), (ligand.to_string(), x)].into(),
            })
            .collect(),
        spectra,
    }
}

/// A Gaussian band (`centre_nm`, `width_nm`, `height` in L mol⁻¹ cm⁻¹) that does not shift with
/// temperature.
pub fn band(centre_nm: f64, width_nm: f64, height: f64) -> crate::simulate::Band {
    crate::simulate::Band {
        centre_nm,
        width_nm,
        height,
        shift_nm_per_k: 0.0,
    }
}

/// One series per ligand total, all with the same metal total, labelled `<ligand><total>`.
pub fn ligand_series(
    metal: &str,
    metal_m: f64,
    ligand: &str,
    ligand_m: &[f64],
) -> Vec<crate::simulate::SeriesPlan> {
    ligand_m
        .iter()
        .map(|&x| crate::simulate::SeriesPlan {
            label: format!("{ligand}{x}"),
            totals_m: [(metal.to_string(), metal_m), (ligand.to_string(), x)].into(),
        })
        .collect()
}

/// Invented two-band pure spectra of M (weak), MX and MX2 with overlapping bands, shared by the
/// integration tests of the stepwise M + X ⇌ MX, M + 2X ⇌ MX2 system.
pub fn stepwise_spectra() -> Vec<crate::simulate::PureSpectrum> {
    use crate::simulate::PureSpectrum;
    vec![
        PureSpectrum {
            species: "M".into(),
            bands: vec![band(420.0, 30.0, 6.0), band(700.0, 60.0, 2.5)],
        },
        PureSpectrum {
            species: "MX".into(),
            bands: vec![band(450.0, 35.0, 18.0), band(720.0, 55.0, 9.0)],
        },
        PureSpectrum {
            species: "MX2".into(),
            bands: vec![band(480.0, 40.0, 40.0), band(650.0, 45.0, 55.0)],
        },
    ]
}

/// The noise-free stepwise M/MX/MX2 plan of the activity-correction tests (library and command
/// line): 10 temperatures 5–86 °C with thermal expansion, 350–800 nm every 5 nm, metal 10 mM,
/// ligand 0.02, 0.1 and 0.4 M, [`stepwise_spectra`].
pub fn stepwise_activity_plan() -> crate::simulate::SimulationPlan {
    crate::simulate::SimulationPlan {
        seed: 1,
        first_nm: 350.0,
        last_nm: 800.0,
        step_nm: 5.0,
        temperatures_c: (0..10).map(|k| 5.0 + 9.0 * f64::from(k)).collect(),
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: true,
        noise: crate::simulate::Noise::None,
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: ligand_series("M", 0.01, "X", &[0.02, 0.1, 0.4]),
        spectra: stepwise_spectra(),
    }
}
