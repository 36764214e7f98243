//! Factor analysis of the data matrix D: SVD, noise level, rank (how many species absorb) and
//! evolving factor analysis.
//!
//! By Beer–Lambert, D = diag(b)·C·Sᵀ + E has, without noise, the rank of C·Sᵀ: the number of
//! species with independent concentration profiles and distinct spectra. The singular values of D
//! separate into that many primary values and a floor set by the noise E.
//!
//! - [`decompose`] / [`decompose_set`]: the thin SVD D = U·diag(s)·Vᵀ ([`Decomposition`]).
//! - [`Decomposition::noise_estimate`], [`Decomposition::real_error`],
//!   [`Decomposition::indicator`], [`Decomposition::f_test`]: Malinowski's error functions.
//! - [`estimate_rank`]: rank by the indicator function, the F-test and (given σ) the noise edge
//!   ([`RankEstimate`]).
//! - [`evolving_factors`]: forward and backward EFA ([`EvolvingFactors`]).
//! - [`analyse`]: all of it for a [`SpectraSet`], as a serialisable [`FactorSummary`] whose
//!   `Display` is a compact table.

mod efa;
mod rank;
mod svd;

pub use efa::{EvolvingFactors, evolving_factors, evolving_factors_of, temperature_order};
pub use rank::{FTestRow, NOISE_EDGE_FACTOR, RankEstimate, estimate_rank};
pub use svd::{Decomposition, SetDecomposition, decompose, decompose_set};

use crate::data::SpectraSet;
use ndarray::Array1;
use serde::{Deserialize, Serialize};
use std::fmt;
use thiserror::Error;

/// Errors in factor analysis.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum FactorError {
    /// D has no rows or no columns.
    #[error("cannot decompose an empty matrix ({rows} × {cols})")]
    EmptyMatrix {
        /// Rows of D.
        rows: usize,
        /// Columns of D.
        cols: usize,
    },
    /// An entry of D is NaN or infinite.
    #[error("D at row {row}, column {column} is not a finite number ({value})")]
    NonFinite {
        /// Row (sample) index, 0-based.
        row: usize,
        /// Column (wavelength) index, 0-based.
        column: usize,
        /// The value.
        value: f64,
    },
    /// LAPACK failed (e.g. the SVD did not converge).
    #[error("the singular value decomposition failed in LAPACK: {message}")]
    Lapack {
        /// LAPACK's message.
        message: String,
    },
    /// Every sample of the set is a blank.
    #[error("the spectra set has no measurement samples (all are blanks)")]
    NoMeasurementSamples,
    /// Every wavelength has at least one masked point.
    #[error("no wavelength is free of masked points; relax the saturation limit or the window")]
    NoUsableWavelengths,
    /// Too few samples or wavelengths to compare factors with a noise pool.
    #[error("rank estimation needs at least 3 samples and 3 wavelengths, D is {rows} × {cols}")]
    TooSmallForRank {
        /// Rows of D.
        rows: usize,
        /// Columns of D.
        cols: usize,
    },
    /// A parameter has a nonsense value.
    #[error("parameter {name} = {value} is invalid: {reason}")]
    InvalidParameter {
        /// Parameter name.
        name: &'static str,
        /// The value, as given.
        value: String,
        /// What is required.
        reason: &'static str,
    },
    /// A sample order for evolving factor analysis is not a permutation of the samples.
    #[error("invalid sample order for evolving factor analysis: {reason}")]
    InvalidOrder {
        /// What is wrong.
        reason: String,
    },
}

/// Settings of [`analyse`] (unchecked; [`FactorParams::check`] validates them).
///
/// # Examples
/// ```
/// use isosbestic::factor::FactorParams;
/// let p = FactorParams::default().max_rank(5).known_noise(Some(2e-4));
/// assert!(p.check().is_ok());
/// assert!(FactorParams::default().significance(1.5).check().is_err());
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct FactorParams {
    /// Largest rank considered (default 8).
    pub max_rank: usize,
    /// Significance level of the F-test (default 0.05).
    pub significance: f64,
    /// Known noise standard deviation σ of the absorbance, AU (default none).
    pub known_noise: Option<f64>,
    /// Whether to run evolving factor analysis along the temperature order (default true).
    pub evolving: bool,
}

impl Default for FactorParams {
    fn default() -> Self {
        Self {
            max_rank: 8,
            significance: 0.05,
            known_noise: None,
            evolving: true,
        }
    }
}

impl FactorParams {
    /// Sets `max_rank`.
    #[must_use]
    pub fn max_rank(mut self, max_rank: usize) -> Self {
        self.max_rank = max_rank;
        self
    }

    /// Sets `significance`.
    #[must_use]
    pub fn significance(mut self, significance: f64) -> Self {
        self.significance = significance;
        self
    }

    /// Sets `known_noise`.
    #[must_use]
    pub fn known_noise(mut self, known_noise: Option<f64>) -> Self {
        self.known_noise = known_noise;
        self
    }

    /// Sets `evolving`.
    #[must_use]
    pub fn evolving(mut self, evolving: bool) -> Self {
        self.evolving = evolving;
        self
    }

    /// Validates the settings.
    ///
    /// # Errors
    /// [`FactorError::InvalidParameter`] for `max_rank` = 0, `significance` outside (0, 1), or a
    /// `known_noise` that is not positive and finite.
    pub fn check(&self) -> Result<(), FactorError> {
        check_rank_params(self.max_rank, self.significance, self.known_noise)
    }
}

pub(crate) fn check_rank_params(
    max_rank: usize,
    significance: f64,
    known_noise: Option<f64>,
) -> Result<(), FactorError> {
    if max_rank == 0 {
        return Err(FactorError::InvalidParameter {
            name: "max_rank",
            value: "0".to_string(),
            reason: "must be at least 1",
        });
    }
    if !(significance > 0.0 && significance < 1.0) {
        return Err(FactorError::InvalidParameter {
            name: "significance",
            value: significance.to_string(),
            reason: "must lie strictly between 0 and 1",
        });
    }
    if let Some(sigma) = known_noise
        && !(sigma.is_finite() && sigma > 0.0)
    {
        return Err(FactorError::InvalidParameter {
            name: "known_noise",
            value: sigma.to_string(),
            reason: "must be a positive, finite absorbance",
        });
    }
    Ok(())
}

/// Result of [`analyse`]: what factor analysis says about a spectra set.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FactorSummary {
    /// Samples used (measurement samples), rows of the analysed D.
    pub n_samples: usize,
    /// Wavelengths used (unmasked), columns of the analysed D.
    pub n_wavelengths: usize,
    /// Singular values of D, descending.
    pub singular_values: Array1<f64>,
    /// Noise estimate σ̂ at the chosen rank, AU ([`Decomposition::noise_estimate`]); `None` when
    /// the chosen rank leaves no residual.
    pub noise_estimate_at_rank: Option<f64>,
    /// The rank estimate with its reasoning.
    pub rank: RankEstimate,
    /// Cumulative fraction of Σs² explained by the first 1, 2, … factors.
    pub explained_variance: Vec<f64>,
    /// Evolving factor analysis along increasing temperature (order = set row indices), when asked.
    pub efa: Option<EvolvingFactors>,
}

/// Factor analysis of a spectra set: SVD, noise, rank and (optionally) EFA.
///
/// Uses the measurement samples and the unmasked wavelengths only ([`decompose_set`]). The EFA
/// order is increasing temperature, ties in input order ([`temperature_order`]); its `order`
/// holds row indices of the whole set, and it keeps min(`max_rank`, min(n, m)) factors.
///
/// # Errors
/// Invalid parameters ([`FactorParams::check`]); as [`decompose_set`] and [`estimate_rank`].
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::factor::{analyse, FactorParams};
/// use isosbestic::testing::gaussian_band;
/// use ndarray::Array2;
/// let wl: Vec<f64> = (0..60).map(|i| 400.0 + 5.0 * i as f64).collect();
/// let (a, b) = (gaussian_band(&wl, 480.0, 25.0, 1.0), gaussian_band(&wl, 600.0, 30.0, 0.8));
/// let n = 10;
/// let d = Array2::from_shape_fn((n, wl.len()), |(i, j)| {
///     let x = i as f64 / (n - 1) as f64;
///     (1.0 - x) * a[j] + x * b[j] + 1e-4 * (((i * 37 + j * 11) % 17) as f64 / 8.0 - 1.0)
/// });
/// let samples = (0..n).map(|i| Sample::new(format!("s{i}"), "A", 290.0 + 5.0 * i as f64, 1.0)).collect();
/// let set = SpectraSet::new(wl.into(), d, samples, vec![])?;
/// let summary = analyse(&set, &FactorParams::default())?;
/// assert_eq!(summary.rank.chosen, 2);
/// assert!(summary.to_string().contains("rank 2"));
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn analyse(set: &SpectraSet, params: &FactorParams) -> Result<FactorSummary, FactorError> {
    params.check()?;
    let sd = decompose_set(set)?;
    let dec = &sd.decomposition;
    let rank = estimate_rank(dec, params.max_rank, params.significance, params.known_noise)?;
    let efa = if params.evolving {
        let temps: Vec<f64> = sd
            .sample_indices
            .iter()
            .map(|&i| set.samples()[i].temperature_k)
            .collect();
        let local = temperature_order(&temps);
        let n_factors = params.max_rank.min(dec.singular_values().len());
        let mut efa = evolving_factors_of(dec, &local, n_factors)?;
        efa.order = local.iter().map(|&i| sd.sample_indices[i]).collect();
        Some(efa)
    } else {
        None
    };
    Ok(FactorSummary {
        n_samples: dec.n_rows(),
        n_wavelengths: dec.n_cols(),
        singular_values: dec.singular_values().clone(),
        noise_estimate_at_rank: dec.noise_estimate(rank.chosen),
        explained_variance: dec.explained_variance(),
        rank,
        efa,
    })
}

impl fmt::Display for FactorSummary {
    /// A compact table: one line per factor up to k_max + 1, then the rank and its reasons.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "factor analysis of {} samples × {} wavelengths (not mean-centred)",
            self.n_samples, self.n_wavelengths
        )?;
        writeln!(
            f,
            "{:>3} {:>13} {:>10} {:>11} {:>10} {:>8}",
            "k", "singular val", "cum. var.", "IND(k)", "F", "p"
        )?;
        let rows = (self.rank.ind.len() + 1).min(self.singular_values.len());
        for k in 1..=rows {
            let s = self.singular_values[k - 1];
            let ev = self.explained_variance.get(k - 1).copied().unwrap_or(f64::NAN);
            let ind = self
                .rank
                .ind
                .get(k - 1)
                .map_or_else(|| "-".to_string(), |v| format!("{v:.3e}"));
            let (fs, ps) = self.rank.f_test.get(k - 1).map_or_else(
                || ("-".to_string(), "-".to_string()),
                |r| {
                    (
                        compact(r.f),
                        if r.p_value < 1e-3 {
                            format!("{:.1e}", r.p_value)
                        } else {
                            format!("{:.4}", r.p_value)
                        },
                    )
                },
            );
            let mark = if k == self.rank.chosen { " <" } else { "" };
            writeln!(f, "{k:>3} {s:>13.6e} {ev:>10.6} {ind:>11} {fs:>10} {ps:>8}{mark}")?;
        }
        let by_noise = self
            .rank
            .by_noise
            .map_or_else(|| "-".to_string(), |n| n.to_string());
        writeln!(
            f,
            "rank {} (indicator {}, F-test {}, noise edge {})",
            self.rank.chosen, self.rank.by_indicator, self.rank.by_f_test, by_noise
        )?;
        match self.noise_estimate_at_rank {
            Some(n) => writeln!(f, "noise estimate at rank {}: {n:.3e} AU", self.rank.chosen)?,
            None => writeln!(
                f,
                "noise estimate at rank {}: none (no residual)",
                self.rank.chosen
            )?,
        }
        for line in &self.rank.reasoning {
            writeln!(f, "  - {line}")?;
        }
        if let Some(efa) = &self.efa {
            writeln!(
                f,
                "evolving factor analysis: {} windows × {} factors, samples in temperature order",
                efa.forward.nrows(),
                efa.forward.ncols()
            )?;
        }
        Ok(())
    }
}

/// A number in at most 10 characters: fixed point when moderate, scientific otherwise.
fn compact(x: f64) -> String {
    if x.is_finite() && (1e-3..1e5).contains(&x.abs()) {
        format!("{x:.3}")
    } else {
        format!("{x:.3e}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nonsense_parameters_are_rejected_by_name() {
        for (p, name) in [
            (FactorParams::default().max_rank(0), "max_rank"),
            (FactorParams::default().significance(0.0), "significance"),
            (FactorParams::default().significance(f64::NAN), "significance"),
            (FactorParams::default().known_noise(Some(-1e-3)), "known_noise"),
            (
                FactorParams::default().known_noise(Some(f64::INFINITY)),
                "known_noise",
            ),
        ] {
            match p.check() {
                Err(FactorError::InvalidParameter { name: n, .. }) => assert_eq!(n, name),
                other => panic!("{p:?}: {other:?}"),
            }
        }
    }

    #[test]
    fn params_deserialise_with_defaults_for_missing_fields() {
        let p: FactorParams = serde_json::from_str(r#"{"max_rank": 4}"#).unwrap();
        assert_eq!(p, FactorParams::default().max_rank(4));
    }
}
