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
