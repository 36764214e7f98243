//! Classic two-wavelength estimates of a two-absorber equilibrium M + nL ⇌ MLₙ.
//!
//! The textbook route, kept to compare with the full-spectrum fits: read the absorbance at one
//! wavelength λ₁ where the free metal M absorbs and at one wavelength λ₂ where the complex MLₙ
//! absorbs, turn them into concentrations with Beer–Lambert (A = ε b c), form
//!
//! ```text
//! K = [MLₙ] / ([M] [L]ⁿ)       for every sample,
//! ```
//!
//! and fit ln K against 1/T ([`crate::thermo::fit_vant_hoff`]) for ΔH° and ΔS°. The ligand is
//! taken as transparent; its free concentration always comes from its mass balance,
//! \[L\] = L_total − n\[MLₙ\].
//!
//! ## The two estimates ([`ClassicMethod`])
//! - **Direct** (each species from its own band):
//!   \[M\] = A(λ₁)/(ε_M(λ₁) b), \[MLₙ\] = A(λ₂)/(ε_MLₙ(λ₂) b).
//! - **Mass balance** (the strong absorber from its band, the weak one by difference):
//!   \[MLₙ\] = A(λ₂)/(ε_MLₙ(λ₂) b), \[M\] = M_total − \[MLₙ\].
//!
//! With [`CrossAbsorption::Correct`] each species' absorbance at the *other* wavelength is
//! accounted for: the direct estimate solves the 2×2 Beer–Lambert system
//!
//! ```text
//! A(λ₁)/b = ε_M(λ₁)[M] + ε_MLₙ(λ₁)[MLₙ]
//! A(λ₂)/b = ε_M(λ₂)[M] + ε_MLₙ(λ₂)[MLₙ]
//! ```
//!
//! and the mass-balance estimate solves A(λ₂)/b = ε_M(λ₂)(M_total − \[MLₙ\]) + ε_MLₙ(λ₂)\[MLₙ\].
//! With [`CrossAbsorption::Neglect`] (the textbook form) the cross terms are dropped.
//!
//! ## When each estimate is biased
//! - **Direct, weak absorber.** The free metal of a weak d–d band has ε of a few L mol⁻¹ cm⁻¹,
//!   so σ(\[M\]) = σ(A)/(ε_M b): with σ(A) = 1e-3, ε_M = 5 and b = 1 cm that is 2e-4 mol/L, 20 % of
//!   a 1 mmol/L free metal. K ∝ 1/\[M\] is convex in \[M\], so noise alone biases K upwards
//!   (E(1/x) > 1/E(x)), and a small \[M\] can come out zero or negative (reported as a
//!   [`SampleProblem`], never used).
//! - **Overlapping bands.** If the complex also absorbs at λ₁ (a strong band's tail usually
//!   does) and this is neglected, \[M\]_est = \[M\] + (ε_MLₙ(λ₁)/ε_M(λ₁))\[MLₙ\]: the ratio of a strong
//!   to a weak ε multiplies the complex concentration, so \[M\] is grossly over-estimated and K
//!   under-estimated; likewise \[MLₙ\]_est = \[MLₙ\] + (ε_M(λ₂)/ε_MLₙ(λ₂))\[M\] over-estimates the
//!   complex and, through the mass balance, under-estimates \[L\]. Both concentrations are biased,
//!   and because the fraction complexed changes with T the bias in K changes with T and biases
//!   ΔH° and ΔS° too. [`CrossAbsorption::Correct`] removes this bias when all four ε are known
//!   and independent of T.
//! - **Mass balance, error in the strong absorber's ε.** A relative error δ in ε_MLₙ(λ₂) gives
//!   \[MLₙ\]_est = \[MLₙ\]/(1 + δ) and an error \[MLₙ\]·δ/(1 + δ) in \[M\], i.e. a relative error in
//!   \[M\] of (\[MLₙ\]/\[M\])·δ/(1 + δ): amplified by the ratio complexed/free, so it is worst exactly
//!   where the complex dominates. A temperature dependence of ε_MLₙ (band broadening and shift
//!   with T, common for charge-transfer and d–d bands) becomes a spurious temperature dependence
//!   of K, i.e. a bias in ΔH°.
//!
//! The full-spectrum fits avoid all three by using every wavelength and estimating the pure
//! spectra together with the constants.

use crate::thermo::{ConstantScale, KData, ThermoError, ValidVanThoffParams, VanThoffFit, fit_vant_hoff};
use serde::{Deserialize, Serialize};
use thiserror::Error;

/// Why the classic estimates could not be computed.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum ClassicError {
    /// No samples.
    #[error("no samples given")]
    Empty,
    /// An input array has the wrong length.
    #[error("{what}: expected {expected} values (one per sample), found {found}")]
    LengthMismatch {
        /// Which array.
        what: &'static str,
        /// Expected length (number of sample ids).
        expected: usize,
        /// Found length.
        found: usize,
    },
    /// A per-sample input is unusable.
    #[error("sample '{sample}': {what} = {value} is not usable ({reason})")]
    InvalidSampleValue {
        /// Sample id.
        sample: String,
        /// Which input.
        what: &'static str,
        /// The value.
        value: f64,
        /// What is required.
        reason: &'static str,
    },
    /// A molar absorptivity is unusable.
    #[error("molar absorptivity {which} = {value} L mol⁻¹ cm⁻¹ is not usable ({reason})")]
    InvalidAbsorptivity {
        /// Which ε.
        which: &'static str,
        /// The value.
        value: f64,
        /// What is required.
        reason: &'static str,
    },
    /// The ligand number n must be at least 1.
    #[error("the ligand number n must be at least 1")]
    ZeroLigandNumber,
    /// The cross-absorption correction is singular (the two species' absorptivities are
    /// proportional at the two wavelengths).
    #[error(
        "cannot separate the two absorbers: their absorptivities at the two wavelengths are proportional (determinant {determinant})"
    )]
    IndistinguishableAbsorbers {
        /// The determinant of the 2×2 absorptivity system (or ε_MLₙ(λ₂) − ε_M(λ₂)).
        determinant: f64,
    },
    /// The van 't Hoff fit of the usable samples failed.
    #[error("van 't Hoff fit of the classic K values: {0}")]
    VanThoff(#[from] ThermoError),
}

/// Per-sample inputs, all arrays in the order of `sample_ids`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicInput {
    /// Sample ids.
    pub sample_ids: Vec<String>,
    /// Temperatures T, K.
    pub temperatures_k: Vec<f64>,
    /// Path lengths b, cm.
    pub path_cm: Vec<f64>,
    /// A(λ₁), the free metal's wavelength.
    pub absorbance_at_free_nm: Vec<f64>,
    /// A(λ₂), the complex's wavelength.
    pub absorbance_at_complex_nm: Vec<f64>,
    /// Total metal M_total, mol/L (at the measurement temperature).
    pub metal_total_m: Vec<f64>,
    /// Total ligand L_total, mol/L (at the measurement temperature).
    pub ligand_total_m: Vec<f64>,
}

/// The four molar absorptivities (L mol⁻¹ cm⁻¹) at the two wavelengths.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TwoWavelengthAbsorptivities {
    /// ε_M(λ₁): the free metal at its own wavelength.
    pub free_at_free_nm: f64,
    /// ε_M(λ₂): the free metal at the complex's wavelength.
    pub free_at_complex_nm: f64,
    /// ε_MLₙ(λ₁): the complex at the free metal's wavelength.
    pub complex_at_free_nm: f64,
    /// ε_MLₙ(λ₂): the complex at its own wavelength.
    pub complex_at_complex_nm: f64,
}

/// Which classic estimate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ClassicMethod {
    /// Each species from the absorbance at its own wavelength.
    #[default]
    Direct,
    /// The complex from its band, the free metal as M_total − \[MLₙ\].
    MassBalance,
}

/// Whether absorbance of each species at the other species' wavelength is accounted for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum CrossAbsorption {
    /// Drop the cross terms (the textbook estimate; biased when bands overlap).
    #[default]
    Neglect,
    /// Solve with all four absorptivities.
    Correct,
}

/// Settings of the classic estimate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ClassicParams {
    /// Ligand number n in M + nL ⇌ MLₙ.
    pub ligand_number: u32,
    /// Direct or mass-balance estimate.
    pub method: ClassicMethod,
    /// Cross-absorption handling.
    pub cross_absorption: CrossAbsorption,
}

impl Default for ClassicParams {
    fn default() -> Self {
        Self {
            ligand_number: 1,
            method: ClassicMethod::Direct,
            cross_absorption: CrossAbsorption::Neglect,
        }
    }
}

/// The species of the two-absorber system.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ClassicSpecies {
    /// Free metal M.
    FreeMetal,
    /// Complex MLₙ.
    Complex,
    /// Free ligand L.
    FreeLigand,
}

/// Why a sample gives no K.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "problem", rename_all = "snake_case")]
#[non_exhaustive]
pub enum SampleProblem {
    /// A concentration came out zero or negative.
    NonPositiveConcentration {
        /// Which species.
        species: ClassicSpecies,
        /// The value, mol/L.
        value_m: f64,
    },
}

/// Concentrations and K of one sample.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicSample {
    /// Sample id.
    pub id: String,
    /// T, K.
    pub temperature_k: f64,
    /// \[M\], mol/L (as estimated; may be ≤ 0, see `problem`).
    pub free_metal_m: f64,
    /// \[MLₙ\], mol/L.
    pub complex_m: f64,
    /// \[L\] = L_total − n\[MLₙ\], mol/L.
    pub free_ligand_m: f64,
    /// K = \[MLₙ\]/(\[M\]\[L\]ⁿ), (mol/L)⁻ⁿ; None when a concentration is ≤ 0.
    pub k: Option<f64>,
    /// Why `k` is missing.
    pub problem: Option<SampleProblem>,
}

/// A sample left out of the van 't Hoff fit, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ExcludedSample {
    /// Sample id.
    pub id: String,
    /// Why.
    pub problem: SampleProblem,
}

/// The per-sample classic estimates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicEstimate {
    /// The settings used.
    pub params: ClassicParams,
    /// One entry per sample, in input order.
    pub samples: Vec<ClassicSample>,
}

/// ΔH°, ΔS° from the classic K values, with the samples left out.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassicVanThoff {
    /// The van 't Hoff fit of ln K over the usable samples.
    pub fit: VanThoffFit,
    /// Ids of the samples used, in the order of the fit's points.
    pub used: Vec<String>,
    /// Samples without a K, excluded from the fit.
    pub excluded: Vec<ExcludedSample>,
}

fn check_len(what: &'static str, expected: usize, v: &[f64]) -> Result<(), ClassicError> {
    if v.len() == expected {
        Ok(())
    } else {
        Err(ClassicError::LengthMismatch {
            what,
            expected,
            found: v.len(),
        })
    }
}

fn check_eps(which: &'static str, value: f64, own_band: bool) -> Result<(), ClassicError> {
    let ok = value.is_finite() && if own_band { value > 0.0 } else { value >= 0.0 };
    if ok {
        Ok(())
    } else {
        Err(ClassicError::InvalidAbsorptivity {
            which,
            value,
            reason: if own_band {
                "a species' absorptivity at its own wavelength must be positive and finite"
            } else {
                "must be non-negative and finite"
            },
        })
    }
}

/// Computes the classic estimate for every sample.
///
/// # Errors
/// [`ClassicError::Empty`], [`ClassicError::LengthMismatch`],
/// [`ClassicError::InvalidSampleValue`] (non-positive path or temperature, negative totals,
/// non-finite absorbance — naming the sample), [`ClassicError::InvalidAbsorptivity`],
/// [`ClassicError::ZeroLigandNumber`], [`ClassicError::IndistinguishableAbsorbers`]. A sample
/// whose concentrations come out ≤ 0 is not an error: it carries a [`SampleProblem`].
///
/// # Examples
/// ```
/// use isosbestic::resolve::classic::*;
/// // one sample, 1:1, no band overlap: [M] = 0.005/(5·1), [ML] = 0.3/(600·1)
/// let input = ClassicInput {
///     sample_ids: vec!["s1".into()],
///     temperatures_k: vec![298.15],
///     path_cm: vec![1.0],
///     absorbance_at_free_nm: vec![0.005],
///     absorbance_at_complex_nm: vec![0.3],
///     metal_total_m: vec![1.5e-3],
///     ligand_total_m: vec![4.0e-3],
/// };
/// let eps = TwoWavelengthAbsorptivities {
///     free_at_free_nm: 5.0, free_at_complex_nm: 0.0,
///     complex_at_free_nm: 0.0, complex_at_complex_nm: 600.0,
/// };
/// let est = classic_estimate(&input, &eps, &ClassicParams::default())?;
/// let s = &est.samples[0];
/// approx::assert_relative_eq!(s.free_metal_m, 1.0e-3, max_relative = 1e-12);
/// approx::assert_relative_eq!(s.complex_m, 5.0e-4, max_relative = 1e-12);
/// approx::assert_relative_eq!(s.k.unwrap(), 5.0e-4 / (1.0e-3 * 3.5e-3), max_relative = 1e-12);
/// # Ok::<(), ClassicError>(())
/// ```
pub fn classic_estimate(
    input: &ClassicInput,
    eps: &TwoWavelengthAbsorptivities,
    params: &ClassicParams,
) -> Result<ClassicEstimate, ClassicError> {
    let n = input.sample_ids.len();
    if n == 0 {
        return Err(ClassicError::Empty);
    }
    if params.ligand_number == 0 {
        return Err(ClassicError::ZeroLigandNumber);
    }
    check_len("temperatures_k", n, &input.temperatures_k)?;
    check_len("path_cm", n, &input.path_cm)?;
    check_len("absorbance_at_free_nm", n, &input.absorbance_at_free_nm)?;
    check_len("absorbance_at_complex_nm", n, &input.absorbance_at_complex_nm)?;
    check_len("metal_total_m", n, &input.metal_total_m)?;
    check_len("ligand_total_m", n, &input.ligand_total_m)?;
    let correct = params.cross_absorption == CrossAbsorption::Correct;
    check_eps("complex_at_complex_nm", eps.complex_at_complex_nm, true)?;
    check_eps(
        "free_at_free_nm",
        eps.free_at_free_nm,
        params.method == ClassicMethod::Direct,
    )?;
    if correct {
        check_eps("free_at_complex_nm", eps.free_at_complex_nm, false)?;
        check_eps("complex_at_free_nm", eps.complex_at_free_nm, false)?;
    }
    let det = match (params.method, correct) {
        (ClassicMethod::Direct, true) => {
            eps.free_at_free_nm * eps.complex_at_complex_nm - eps.complex_at_free_nm * eps.free_at_complex_nm
        }
        (ClassicMethod::MassBalance, true) => eps.complex_at_complex_nm - eps.free_at_complex_nm,
        _ => 1.0,
    };
    let scale = eps.free_at_free_nm.abs().max(eps.complex_at_complex_nm.abs());
    let det_scale = match params.method {
        ClassicMethod::Direct => scale * scale,
        ClassicMethod::MassBalance => scale,
    };
    if !(det.abs() > 1e-12 * det_scale) {
        return Err(ClassicError::IndistinguishableAbsorbers { determinant: det });
    }
    let nl = f64::from(params.ligand_number);
    let mut samples = Vec::with_capacity(n);
    for i in 0..n {
        let id = &input.sample_ids[i];
        let bad = |what, value, reason| ClassicError::InvalidSampleValue {
            sample: id.clone(),
            what,
            value,
            reason,
        };
        let (t, b) = (input.temperatures_k[i], input.path_cm[i]);
        if !(t.is_finite() && t > 0.0) {
            return Err(bad("temperature_k", t, "must be above absolute zero and finite"));
        }
        if !(b.is_finite() && b > 0.0) {
            return Err(bad("path_cm", b, "must be positive and finite"));
        }
        let (a1, a2) = (
            input.absorbance_at_free_nm[i] / b,
            input.absorbance_at_complex_nm[i] / b,
        );
        if !input.absorbance_at_free_nm[i].is_finite() {
            return Err(bad(
                "absorbance_at_free_nm",
                input.absorbance_at_free_nm[i],
                "must be finite",
            ));
        }
        if !input.absorbance_at_complex_nm[i].is_finite() {
            return Err(bad(
                "absorbance_at_complex_nm",
                input.absorbance_at_complex_nm[i],
                "must be finite",
            ));
        }
        let (mt, lt) = (input.metal_total_m[i], input.ligand_total_m[i]);
        if !(mt.is_finite() && mt >= 0.0) {
            return Err(bad("metal_total_m", mt, "must be non-negative and finite"));
        }
        if !(lt.is_finite() && lt >= 0.0) {
            return Err(bad("ligand_total_m", lt, "must be non-negative and finite"));
        }
        let (m, c) = match (params.method, correct) {
            (ClassicMethod::Direct, false) => (a1 / eps.free_at_free_nm, a2 / eps.complex_at_complex_nm),
            (ClassicMethod::Direct, true) => (
                (eps.complex_at_complex_nm * a1 - eps.complex_at_free_nm * a2) / det,
                (eps.free_at_free_nm * a2 - eps.free_at_complex_nm * a1) / det,
            ),
            (ClassicMethod::MassBalance, false) => {
                let c = a2 / eps.complex_at_complex_nm;
                (mt - c, c)
            }
            (ClassicMethod::MassBalance, true) => {
                let c = (a2 - eps.free_at_complex_nm * mt) / det;
                (mt - c, c)
            }
        };
        let l = lt - nl * c;
        let problem = [
            (ClassicSpecies::FreeMetal, m),
            (ClassicSpecies::Complex, c),
            (ClassicSpecies::FreeLigand, l),
        ]
        .into_iter()
        .find(|&(_, v)| !(v > 0.0))
        .map(|(species, value_m)| SampleProblem::NonPositiveConcentration { species, value_m });
        let k = match problem {
            None => {
                // ln K first, so that [L]ⁿ cannot underflow for large n
                let ln_k = c.ln() - m.ln() - nl * l.ln();
                Some(ln_k.exp()).filter(|k| k.is_finite() && *k > 0.0)
            }
            Some(_) => None,
        };
        samples.push(ClassicSample {
            id: id.clone(),
            temperature_k: t,
            free_metal_m: m,
            complex_m: c,
            free_ligand_m: l,
            k,
            problem,
        });
    }
    Ok(ClassicEstimate {
        params: *params,
        samples,
    })
}

impl ClassicEstimate {
    /// Samples without a K and why.
    pub fn excluded(&self) -> Vec<ExcludedSample> {
        self.samples
            .iter()
            .filter_map(|s| {
                s.problem.map(|problem| ExcludedSample {
                    id: s.id.clone(),
                    problem,
                })
            })
            .collect()
    }

    /// Fits ln K against 1/T over the samples that have a K (unweighted unless the settings say
    /// otherwise; the classic estimates carry no per-sample uncertainty), listing the samples
    /// left out.
    ///
    /// # Errors
    /// [`ClassicError::VanThoff`] when the usable samples cannot support the fit (e.g. fewer
    /// than three, or fewer than two distinct temperatures).
    pub fn vant_hoff(&self, params: &ValidVanThoffParams) -> Result<ClassicVanThoff, ClassicError> {
        let usable: Vec<&ClassicSample> = self.samples.iter().filter(|s| s.k.is_some()).collect();
        let t = usable.iter().map(|s| s.temperature_k).collect();
        let ln_k = usable.iter().map(|s| s.k.map_or(f64::NAN, f64::ln)).collect();
        let fit = fit_vant_hoff(&KData::new(t, ln_k, ConstantScale::Ln), params)?;
        Ok(ClassicVanThoff {
            fit,
            used: usable.iter().map(|s| s.id.clone()).collect(),
            excluded: self.excluded(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn one(a1: f64, a2: f64) -> ClassicInput {
        ClassicInput {
            sample_ids: vec!["x".into()],
            temperatures_k: vec![300.0],
            path_cm: vec![1.0],
            absorbance_at_free_nm: vec![a1],
            absorbance_at_complex_nm: vec![a2],
            metal_total_m: vec![1e-3],
            ligand_total_m: vec![1e-2],
        }
    }

    const EPS: TwoWavelengthAbsorptivities = TwoWavelengthAbsorptivities {
        free_at_free_nm: 5.0,
        free_at_complex_nm: 1.0,
        complex_at_free_nm: 20.0,
        complex_at_complex_nm: 500.0,
    };

    #[test]
    fn a_complex_band_above_the_metal_total_is_a_per_sample_problem_not_an_error() {
        let p = ClassicParams {
            method: ClassicMethod::MassBalance,
            ..ClassicParams::default()
        };
        // [ML] = 1.0/500 = 2e-3 > M_total = 1e-3 → [M] < 0
        let e = classic_estimate(&one(0.01, 1.0), &EPS, &p).unwrap();
        assert!(e.samples[0].k.is_none());
        assert!(matches!(
            e.samples[0].problem,
            Some(SampleProblem::NonPositiveConcentration {
                species: ClassicSpecies::FreeMetal,
                ..
            })
        ));
        assert_eq!(e.excluded().len(), 1);
    }

    #[test]
    fn bad_inputs_are_typed_errors_naming_the_sample() {
        let mut i = one(0.01, 0.1);
        i.path_cm[0] = 0.0;
        let e = classic_estimate(&i, &EPS, &ClassicParams::default()).unwrap_err();
        assert!(
            matches!(e, ClassicError::InvalidSampleValue { ref sample, what: "path_cm", .. } if sample == "x")
        );
        let mut i = one(0.01, 0.1);
        i.metal_total_m.push(1.0);
        assert!(matches!(
            classic_estimate(&i, &EPS, &ClassicParams::default()),
            Err(ClassicError::LengthMismatch {
                what: "metal_total_m",
                ..
            })
        ));
        let eps = TwoWavelengthAbsorptivities {
            free_at_free_nm: 0.0,
            ..EPS
        };
        assert!(matches!(
            classic_estimate(&one(0.01, 0.1), &eps, &ClassicParams::default()),
            Err(ClassicError::InvalidAbsorptivity {
                which: "free_at_free_nm",
                ..
            })
        ));
        let proportional = TwoWavelengthAbsorptivities {
            free_at_free_nm: 5.0,
            free_at_complex_nm: 10.0,
            complex_at_free_nm: 50.0,
            complex_at_complex_nm: 100.0,
        };
        let p = ClassicParams {
            cross_absorption: CrossAbsorption::Correct,
            ..ClassicParams::default()
        };
        assert!(matches!(
            classic_estimate(&one(0.01, 0.1), &proportional, &p),
            Err(ClassicError::IndistinguishableAbsorbers { .. })
        ));
    }

    #[test]
    fn estimate_round_trips_through_json() {
        let e = classic_estimate(&one(0.004, 0.2), &EPS, &ClassicParams::default()).unwrap();
        let s = serde_json::to_string(&e).unwrap();
        let back: ClassicEstimate = serde_json::from_str(&s).unwrap();
        // serde_json parses floats to within one ulp (no float_roundtrip feature)
        assert_eq!(back.params, e.params);
        assert_eq!(back.samples[0].id, e.samples[0].id);
        approx::assert_relative_eq!(
            back.samples[0].free_ligand_m,
            e.samples[0].free_ligand_m,
            max_relative = 1e-15
        );
        approx::assert_relative_eq!(
            back.samples[0].k.unwrap(),
            e.samples[0].k.unwrap(),
            max_relative = 1e-15
        );
    }
}
