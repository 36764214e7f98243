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
