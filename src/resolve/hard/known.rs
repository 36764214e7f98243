//! Known pure spectra held fixed inside the global fit.
//!
//! A species whose ε(λ) is known (a measured reference solution, an earlier fit) contributes
//! diag(b)·c_k(θ)·ε_kᵀ to the data and has no spectrum to fit: the fit subtracts that
//! contribution, θ-dependent, inside the projection. In the exact reduction the known spectra are
//! factored together with the data (the Gram matrix of the stacked rows [D̃; Ẽᵀ]), so the fit
//! stays exact and no wavelength loop enters the iterations. Known spectra are taken as
//! independent of temperature.
//!
//! Holding a spectrum fixed is also prior knowledge that removes the mirror ambiguity of one
//! series with the ligand in excess (free metal and complex swapped, ΔH° → −ΔH°): the swapped
//! solution no longer fits.

use super::HardFitError;
use crate::data::csv_io::{CsvError, read_known_spectrum};
use crate::speciation::{Optics, ValidModel};
use ndarray::{Array1, Array2};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// A pure spectrum known beforehand, held fixed in the global fit
/// ([`super::HardFitParams::known_spectra`]).
///
/// The values are interpolated linearly onto the data set's wavelengths when the fit is set up;
/// the data may not extend beyond the known range.
///
/// ```
/// use isosbestic::resolve::hard::FixedSpectrum;
/// let s = FixedSpectrum {
///     species: "MX".into(),
///     wavelengths_nm: vec![400.0, 420.0],
///     absorptivity: vec![10.0, 30.0],
/// };
/// let on = s.on_grid(&ndarray::array![400.0, 405.0, 420.0])?;
/// approx::assert_abs_diff_eq!(on, ndarray::array![10.0, 15.0, 30.0], epsilon = 1e-12);
/// assert!(s.on_grid(&ndarray::array![430.0]).is_err()); // no extrapolation
/// # Ok::<(), isosbestic::resolve::hard::HardFitError>(())
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FixedSpectrum {
    /// Species name, as in the model.
    pub species: String,
    /// Wavelengths of the values, nm, strictly increasing.
    pub wavelengths_nm: Vec<f64>,
    /// ε at those wavelengths, L mol⁻¹ cm⁻¹.
    pub absorptivity: Vec<f64>,
}

impl FixedSpectrum {
    /// Reads the known spectrum of `species` from a CSV file
    /// ([`crate::data::csv_io::parse_known_spectrum`] describes the columns).
    ///
    /// # Errors
    /// [`CsvError`] naming the file, line and column.
    pub fn read(path: &Path, species: &str) -> Result<Self, CsvError> {
        let t = read_known_spectrum(path, species)?;
        Ok(Self {
            species: species.to_string(),
            wavelengths_nm: t.wavelengths_nm,
            absorptivity: t.absorptivity,
        })
    }

    /// Reads every known spectrum the model names (`known_spectrum = "…"` of a component or
    /// species), resolving relative paths against `model_dir` (the model file's folder).
    ///
    /// # Errors
    /// [`CsvError`] naming the file, line and column.
    pub fn read_for_model(model: &ValidModel, model_dir: &Path) -> Result<Vec<Self>, CsvError> {
        model
            .species()
            .iter()
            .filter_map(|s| s.known_spectrum.as_ref().map(|p| (s, p)))
            .map(|(s, p)| Self::read(&model_dir.join(p), &s.name))
            .collect()
    }

    /// ε at each wavelength of `grid` (nm), by linear interpolation.
    ///
    /// # Errors
    /// [`HardFitError::KnownSpectrum`] naming the species and wavelength: lengths that differ,
    /// values that are not finite, wavelengths not strictly increasing, or a grid wavelength
    /// outside the known range.
    pub fn on_grid(&self, grid: &Array1<f64>) -> Result<Array1<f64>, HardFitError> {
        let bad = |wavelength_nm: Option<f64>, reason: &str| HardFitError::KnownSpectrum {
            species: self.species.clone(),
            wavelength_nm,
            reason: reason.to_string(),
        };
        let (wl, eps) = (&self.wavelengths_nm, &self.absorptivity);
        if wl.len() != eps.len() || wl.is_empty() {
            return Err(bad(
                None,
                &format!("{} wavelengths but {} values", wl.len(), eps.len()),
            ));
        }
        for (k, (&w, &e)) in wl.iter().zip(eps).enumerate() {
            if !(w.is_finite() && e.is_finite()) {
                return Err(bad(Some(w), "the value is not a finite number"));
            }
            if k > 0 && w <= wl[k - 1] {
                return Err(bad(Some(w), "wavelengths must increase strictly"));
            }
        }
        grid.iter()
            .map(|&x| {
                let hi = wl.partition_point(|&w| w < x);
                match (wl.get(hi), hi.checked_sub(1).and_then(|lo| wl.get(lo))) {
                    (Some(&w), _) if (w - x).abs() <= 1e-9 * w.abs() => Ok(eps[hi]),
                    (Some(&w1), Some(&w0)) => {
                        let f = (x - w0) / (w1 - w0);
                        Ok(eps[hi - 1] + f * (eps[hi] - eps[hi - 1]))
                    }
                    _ => Err(bad(
                        Some(x),
                        &format!(
                            "the data's wavelength lies outside the known spectrum ({} – {} nm)",
                            wl[0],
                            wl[wl.len() - 1]
                        ),
                    )),
                }
            })
            .collect()
    }
}

/// The known spectra of a fit resolved against the model and the data set's wavelengths.
#[derive(Debug, Clone)]
pub(super) struct KnownSpectra {
    /// Model species indices, in the order given.
    pub species: Vec<usize>,
    /// ε on the data set's wavelengths, known species × wavelengths.
    pub values: Array2<f64>,
}

impl KnownSpectra {
    /// Checks the given spectra against the model and interpolates them onto `grid`.
    ///
    /// # Errors
    /// [`HardFitError::KnownSpectrum`] for a species that is not in the model, is declared
    /// transparent or is given twice, for a model species that names a known-spectrum file
    /// whose values were not given, or for values that cannot be placed on `grid`.
    pub fn resolve(
        model: &ValidModel,
        given: &[FixedSpectrum],
        grid: &Array1<f64>,
    ) -> Result<Self, HardFitError> {
        let bad = |species: &str, reason: String| HardFitError::KnownSpectrum {
            species: species.to_string(),
            wavelength_nm: None,
            reason,
        };
        let mut species = Vec::with_capacity(given.len());
        let mut values = Array2::zeros((given.len(), grid.len()));
        for (a, fs) in given.iter().enumerate() {
            let k = model
                .species()
                .iter()
                .position(|s| s.name == fs.species)
                .ok_or_else(|| bad(&fs.species, "is not a species of the model".into()))?;
            if model.species()[k].optics != Optics::Absorbing {
                return Err(bad(
                    &fs.species,
                    "is declared transparent in the model (absorbs = false); a known spectrum \
                     needs an absorbing species"
                        .into(),
                ));
            }
            if species.contains(&k) {
                return Err(bad(&fs.species, "is given more than once".into()));
            }
            species.push(k);
            values.row_mut(a).assign(&fs.on_grid(grid)?);
        }
        for s in model.species() {
            if let Some(path) = &s.known_spectrum
                && !given.iter().any(|g| g.species == s.name)
            {
                return Err(bad(
                    &s.name,
                    format!(
                        "the model names its known spectrum ({path}) but no values were given; read \
                         them with FixedSpectrum::read_for_model (the fit command does)"
                    ),
                ));
            }
        }
        Ok(Self { species, values })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spectrum(wl: Vec<f64>, eps: Vec<f64>) -> FixedSpectrum {
        FixedSpectrum {
            species: "MX".into(),
            wavelengths_nm: wl,
            absorptivity: eps,
        }
    }

    #[test]
    fn interpolation_is_exact_for_a_linear_spectrum_and_refuses_to_extrapolate() {
        let wl: Vec<f64> = (0..11).map(|k| 400.0 + 7.0 * f64::from(k)).collect();
        let eps: Vec<f64> = wl.iter().map(|w| 3.0 + 0.25 * (w - 400.0)).collect();
        let s = spectrum(wl, eps);
        let grid = Array1::linspace(400.0, 470.0, 29);
        let on = s.on_grid(&grid).unwrap();
        for (x, v) in grid.iter().zip(on.iter()) {
            approx::assert_abs_diff_eq!(*v, 3.0 + 0.25 * (x - 400.0), epsilon = 1e-12);
        }
        let e = s.on_grid(&ndarray::array![399.0]).unwrap_err();
        assert!(
            e.to_string().contains("399") && e.to_string().contains("MX"),
            "{e}"
        );
    }

    #[test]
    fn bad_values_are_refused_naming_the_wavelength() {
        let e = spectrum(vec![400.0, 401.0], vec![1.0, f64::NAN])
            .on_grid(&ndarray::array![400.0])
            .unwrap_err();
        assert!(e.to_string().contains("401"), "{e}");
        let e = spectrum(vec![401.0, 400.0], vec![1.0, 2.0])
            .on_grid(&ndarray::array![400.5])
            .unwrap_err();
        assert!(e.to_string().contains("increase"), "{e}");
        assert!(
            spectrum(vec![400.0], vec![1.0, 2.0])
                .on_grid(&ndarray::array![400.0])
                .is_err()
        );
    }
}
