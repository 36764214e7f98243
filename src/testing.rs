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
