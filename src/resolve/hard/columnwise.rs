//! The global fit solved wavelength by wavelength ("columnwise"): non-negative pure spectra and
//! weights that grow with the absorbance.
//!
//! The exact reduction of the main path (see [`super`]) needs every wavelength to share one
//! projection Q_X, which holds only for uniform weights and unconstrained spectra. Two options
//! break that, and this path serves them by solving the linear part column by column:
//!
//! - [`SpectraSign::NonNegative`]: at each wavelength j the spectra are the non-negative least
//!   squares solution, s_j = argmin ‖W_j^½(d_j − X s)‖ subject to s ≥ 0 (fast NNLS of Bro & de
//!   Jong, J. Chemom. 11 (1997) 393, after Lawson & Hanson, *Solving Least Squares Problems*,
//!   1974). Which ε are clipped at 0 (the active set) differs from wavelength to wavelength.
//! - [`Weighting::Absorbance`]: each point gets the weight
//!
//!   ```text
//!   w_ij = 1 / (floor² + (relative·|A_ij|)²)
//!   ```
//!
//!   from the **measured** absorbance A_ij, so the objective is fixed during the fit. Noise made
//!   of a constant floor and a part proportional to the absorbance (stray light, lamp flicker,
//!   pipetting) is common practice in spectrophotometry; weighting by the inverse variance is
//!   the usual answer to such heteroscedastic noise. Taking the weights from the data rather
//!   than from the model keeps the problem an ordinary weighted least-squares problem.
//!
//! Masked points (e.g. saturated absorbances) get weight zero here, point by point: the other
//! samples at that wavelength still count (the reduced path has to leave the whole wavelength
//! out).
//!
//! ## Residual and Jacobian
//! With X(θ) the design of [`super`] (samples × m), √W_j = diag(√w_·j), y_j = √W_j d_j,
//! X_j = √W_j X and P the passive (free) set of wavelength j (all columns without the sign
//! constraint), the weighted residual is
//!
//! ```text
//! r_j = y_j − X_{j,P} s_P = Q_P y_j,   Q_P = I − X_{j,P} X_{j,P}⁺
//! ```
//!
//! and its Jacobian follows Golub & Pereyra (SIAM J. Numer. Anal. 10 (1973) 413) on the passive
//! columns, the active set being locally constant:
//!
//! ```text
//! ∂r_j/∂θ_p = −(Q_P ∂X_{j,P} X_{j,P}⁺ y_j + X_{j,P}⁺ᵀ ∂X_{j,P}ᵀ r_j)
//! ```
//!
//! The solver receives ½Σ_j‖r_j‖², Σ_j J_jᵀr_j and Σ_j J_jᵀJ_j, accumulated over wavelengths
//! without forming the stacked Jacobian: each wavelength holds only a samples × (number of θ)
//! block. Wavelengths are processed in fixed chunks on rayon's pool and the partial sums added
//! in chunk order, so the result does not depend on the number of threads.
//!
//! ## Restrictions
//! Per-spectrum baselines ([`super::Baseline::Offset`], [`super::Baseline::OffsetAndSlope`])
//! couple the wavelengths and are not supported here; non-negativity needs constant spectra
//! ([`super::SpectraTemperature::Constant`]): ε(T) = ε₀ + x·ε₁ is not sign-constrained by
//! constraining its coefficients. Both are refused with [`HardFitError::Settings`].
//!
//! ## Uncertainties
//! Standard errors of the spectra are σ√diag((X_PᵀW_jX_P)⁻¹) on the passive set and **0** for
//! an ε clipped at zero (it is held on its bound, as the active-set solution treats it); NaN
//! where the weighted design does not determine them. The degrees of freedom count the points
//! that carry weight minus θ minus the free (passive) ε. With weights the residuals are in units
//! of the assumed noise, so σ̂ = √(RSS_w/ν) is a dimensionless scale factor (≈ 1 when the noise
//! model is right).
//!
//! **Caveat for non-negative spectra under noise.** Where a true ε is zero, the noise decides at
//! which wavelengths it is clipped, and that choice is correlated with the noise: θ is then
//! biased, and its standard errors (conditional on the active set, like those of the spectra)
//! do not cover the bias. In a simulated 1:2 system with one spectrum zero over half the range
//! (2 series × 6 temperatures × 31 wavelengths, noise 2e-3 AU, 300 realisations) the
//! non-negative fit had a spread of log β one third that of the free fit but a bias of about
//! two of its standard deviations, and its nominal 95 % intervals covered the truth in 59–75 %
//! of the realisations (free fit: 96 %). Use the constraint to keep spectra physical when the
//! data leave them poorly determined, and compare θ with the free fit.

use super::problem::VarproProblem;
use super::small_svd::SmallSvd;
use super::{Baseline, HardFitError, HardFitParams, SpectraTemperature};
use crate::resolve::linear::{NnlsParams, NnlsStatus, nnls_normal};
use crate::resolve::lm::{GaussNewtonProblem, NormalEquations};
use argmin::core::Error as ArgminError;
use ndarray::{Array1, Array2, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Sign constraint on the fitted pure spectra ε (S ≥ 0 or free).
///
/// # Examples
/// ```
/// use isosbestic::resolve::hard::SpectraSign;
/// assert_eq!(SpectraSign::default(), SpectraSign::Free);
/// let s: SpectraSign = serde_json::from_str("\"non_negative\"")?;
/// assert_eq!(s, SpectraSign::NonNegative);
/// # Ok::<(), serde_json::Error>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SpectraSign {
    /// ε of any sign (ordinary least squares at each wavelength).
    #[default]
    Free,
    /// ε ≥ 0 at every wavelength (non-negative least squares at each wavelength); needs
    /// constant spectra and no baseline terms.
    NonNegative,
}

/// Weights of the data points in the global fit.
///
/// # Examples
/// ```
/// use isosbestic::resolve::hard::Weighting;
/// let w = Weighting::Absorbance { floor_au: 1e-3, relative: 0.01 };
/// w.check()?;
/// // w = 1/(floor² + (relative·A)²): at A = 0.1 both parts are equal
/// approx::assert_relative_eq!(w.weight(0.1), 1.0 / 2e-6, max_relative = 1e-12);
/// approx::assert_relative_eq!(Weighting::Uniform.weight(2.5), 1.0);
/// assert!(Weighting::Absorbance { floor_au: 0.0, relative: 0.01 }.check().is_err());
/// # Ok::<(), isosbestic::resolve::hard::HardFitError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "kind", deny_unknown_fields)]
pub enum Weighting {
    /// Every point weighs 1 (constant noise).
    #[default]
    Uniform,
    /// w_ij = 1/(floor² + (relative·|A_ij|)²) from the measured absorbance A_ij: noise with a
    /// constant floor and a part proportional to the absorbance.
    Absorbance {
        /// Noise floor σ₀, absorbance units (> 0).
        floor_au: f64,
        /// Noise per unit absorbance (≥ 0; e.g. 0.01 for 1 %).
        relative: f64,
    },
}

impl Weighting {
    /// The weight of a point with measured absorbance `absorbance_au` (1 for uniform weights).
    pub fn weight(self, absorbance_au: f64) -> f64 {
        match self {
            Self::Uniform => 1.0,
            Self::Absorbance { floor_au, relative } => {
                let s = relative * absorbance_au.abs();
                1.0 / (floor_au * floor_au + s * s)
            }
        }
    }

    /// True for [`Weighting::Uniform`].
    pub fn is_uniform(self) -> bool {
        matches!(self, Self::Uniform)
    }

    /// Checks the settings.
    ///
    /// # Errors
    /// [`HardFitError::Settings`] unless `floor_au` is positive and finite and `relative` is
    /// non-negative and finite.
    pub fn check(self) -> Result<(), HardFitError> {
        match self {
            Self::Uniform => Ok(()),
            Self::Absorbance { floor_au, relative } => {
                if !(floor_au.is_finite() && floor_au > 0.0) {
                    return Err(HardFitError::Settings(format!(
                        "absorbance weights: floor_au must be positive and finite (got {floor_au})"
                    )));
                }
                if !(relative.is_finite() && relative >= 0.0) {
                    return Err(HardFitError::Settings(format!(
                        "absorbance weights: relative must be non-negative and finite (got {relative})"
                    )));
                }
                Ok(())
            }
        }
    }
}

/// Refuses the combinations the columnwise path cannot fit (see the module docs).
pub(super) fn check_settings(
    sign: SpectraSign,
    weighting: Weighting,
    baseline: Baseline,
    spectra_temperature: SpectraTemperature,
) -> Result<(), HardFitError> {
    weighting.check()?;
    if baseline != Baseline::None {
        return Err(HardFitError::Settings(format!(
            "baseline {baseline:?} couples the wavelengths and cannot be combined with non-negative \
             spectra or absorbance weights (use baseline None, or correct baselines beforehand)"
        )));
    }
    if sign == SpectraSign::NonNegative && spectra_temperature != SpectraTemperature::Constant {
        return Err(HardFitError::Settings(
            "non-negative spectra need temperature-independent spectra (spectra_temperature \
             constant): ε(T) = ε₀ + (T − T_ε)·ε₁ cannot be kept non-negative through its coefficients"
                .into(),
        ));
    }
    Ok(())
}

/// Wavelengths per parallel work item.
const CHUNK: usize = 32;

/// The global fit with the linear part solved wavelength by wavelength (module docs).
pub(super) struct ColumnwiseProblem<'a> {
    /// Speciation and design (its reduced data are not used here).
    pub base: VarproProblem<'a>,
    /// √W ∘ D, samples × wavelengths (zero at masked points).
    weighted_data: Array2<f64>,
    /// √w, samples × wavelengths (zero at masked points); `None`: all ones.
    sqrt_weights: Option<Array2<f64>>,
    /// Sign constraint on ε.
    sign: SpectraSign,
    /// NNLS settings.
    nnls: NnlsParams,
}

/// One wavelength solved at θ.
struct ColumnFit {
    /// Weighted residual r_j (samples).
    residual: Array1<f64>,
    /// ε at this wavelength (m; 0 for clipped entries, NaN when undetermined).
    spectrum: Array1<f64>,
    /// √diag((X_PᵀW_jX_P)⁻¹) (m; 0 for clipped entries, NaN when undetermined).
    se_factor: Array1<f64>,
    /// Number of passive (free) ε.
    passive: usize,
    /// NNLS status (non-negative spectra only).
    status: Option<NnlsStatus>,
    /// ∂r_j/∂θ, samples × parameters (when asked for).
    jacobian: Option<Array2<f64>>,
}

/// The solution of the linear part at θ, for the summary of a fit.
pub(super) struct ColumnwiseSolution {
    /// ε, wavelengths × m (0 where clipped, NaN where undetermined).
    pub spectra: Array2<f64>,
    /// √diag((X_PᵀW_jX_P)⁻¹), wavelengths × m (0 where clipped, NaN where undetermined).
    pub se_factors: Array2<f64>,
    /// Weighted residuals √W ∘ (D − X Sᵀ), samples × wavelengths (0 at masked points).
    pub weighted_residuals: Array2<f64>,
    /// Weighted residual sum of squares.
    pub rss: f64,
    /// Number of free ε over all wavelengths (clipped ones not counted).
    pub passive: usize,
    /// Wavelength indices whose NNLS stopped at its iteration limit.
    pub nnls_unconverged: Vec<usize>,
}

/// Everything a wavelength's solve needs from the speciation at one θ.
struct Designs {
    /// The design X, samples × m.
    x: Array2<f64>,
    /// ∂X/∂θ_p (empty without derivatives).
    dx: Vec<Array2<f64>>,
    /// diag(b)·C_known, samples × known spectra (`None` without known spectra): the known
    /// spectra's part of wavelength j is this times their ε at j.
    known: Option<Array2<f64>>,
    /// ∂(diag(b)·C_known)/∂θ_p (empty without derivatives or known spectra).
    dknown: Vec<Array2<f64>>,
}

/// Partial sums over a chunk of wavelengths.
struct Partial {
    rss: f64,
    gradient: Array1<f64>,
    gauss_newton: Array2<f64>,
}

impl<'a> ColumnwiseProblem<'a> {
    /// The problem for `absorbance` (samples × wavelengths, the wavelengths the fit uses) with
    /// masked points `mask` (same shape) given weight zero.
    ///
    /// # Errors
    /// [`HardFitError::Settings`] for invalid weights or shapes; [`HardFitError::Solver`] for a
    /// value that is not finite at an unmasked point (naming sample and wavelength index).
    pub fn new(
        base: VarproProblem<'a>,
        absorbance: ArrayView2<f64>,
        mask: ArrayView2<bool>,
        sign: SpectraSign,
        weighting: Weighting,
    ) -> Result<Self, HardFitError> {
        weighting.check()?;
        let ns = base.temperatures_k.len();
        if absorbance.nrows() != ns || mask.dim() != absorbance.dim() {
            return Err(HardFitError::Settings(format!(
                "columnwise fit: data {:?}, mask {:?} for {ns} samples",
                absorbance.dim(),
                mask.dim()
            )));
        }
        let masked = mask.iter().any(|m| *m);
        let mut weighted_data = Array2::zeros(absorbance.dim());
        let mut sqrt_weights = (masked || !weighting.is_uniform()).then(|| Array2::zeros(absorbance.dim()));
        for ((i, j), &a) in absorbance.indexed_iter() {
            if mask[[i, j]] {
                continue; // weight 0: the value (possibly garbage) never enters
            }
            if !a.is_finite() {
                return Err(HardFitError::Solver(format!(
                    "sample '{}', wavelength index {j}: absorbance {a} is not finite (mask it to leave \
                     it out)",
                    base.sample_ids.get(i).map_or("?", String::as_str)
                )));
            }
            let sw = weighting.weight(a).sqrt();
            weighted_data[[i, j]] = sw * a;
            if let Some(w) = sqrt_weights.as_mut() {
                w[[i, j]] = sw;
            }
        }
        Ok(Self {
            base,
            weighted_data,
            sqrt_weights,
            sign,
            nnls: NnlsParams::default(),
        })
    }

    /// Number of wavelengths.
    pub fn n_wavelengths(&self) -> usize {
        self.weighted_data.ncols()
    }

    /// Number of data points with a non-zero weight.
    pub fn n_data(&self) -> usize {
        match &self.sqrt_weights {
            None => self.weighted_data.len(),
            Some(w) => w.iter().filter(|&&v| v > 0.0).count(),
        }
    }

    /// Design X, the known spectra's concentrations and their θ-derivatives at θ.
    fn designs(&self, theta: &Array1<f64>, derivatives: bool) -> Result<Designs, ArgminError> {
        let (c, dc) = self.base.speciate(theta, derivatives)?;
        let known_of = |c: &Array2<f64>| {
            Array2::from_shape_fn((c.nrows(), self.base.known.len()), |(i, a)| {
                self.base.path_cm[i] * c[[i, self.base.known[a]]]
            })
        };
        let has_known = !self.base.known.is_empty();
        Ok(Designs {
            x: self.base.design(c.view()),
            dx: dc.iter().map(|d| self.base.design(d.view())).collect(),
            known: has_known.then(|| known_of(&c)),
            dknown: if has_known {
                dc.iter().map(known_of).collect()
            } else {
                Vec::new()
            },
        })
    }

    /// Rows of `m` scaled by the weights of wavelength j.
    #[cfg(test)]
    fn weigh(&self, m: ArrayView2<f64>, j: usize) -> Array2<f64> {
        let mut out = m.to_owned();
        if let Some(w) = &self.sqrt_weights {
            for (mut row, &sw) in out.rows_mut().into_iter().zip(w.column(j)) {
                row *= sw;
            }
        }
        out
    }

    /// The passive set of the NNLS at one wavelength (Bro & de Jong on XᵀWX and XᵀW d).
    fn nnls_passive(&self, x: &Array2<f64>, sw: &[f64], y: &[f64]) -> (Vec<usize>, Option<NnlsStatus>) {
        let m = x.ncols();
        let mut xtx = Array2::zeros((m, m));
        let mut xty = Array1::zeros(m);
        for (i, row) in x.rows().into_iter().enumerate() {
            let w = sw[i] * sw[i];
            for a in 0..m {
                xty[a] += sw[i] * row[a] * y[i];
                for b in 0..=a {
                    xtx[[a, b]] += w * row[a] * row[b];
                }
            }
        }
        for a in 0..m {
            for b in 0..a {
                xtx[[b, a]] = xtx[[a, b]];
            }
        }
        let (s, status) = nnls_normal(xtx.view(), xty.view(), &self.nnls);
        ((0..m).filter(|&a| s[a] > 0.0).collect(), Some(status))
    }

    /// Solves wavelength j at the design `x`; with `dx`, also its Jacobian block. Plain loops
    /// over small slices: at a few samples × a few columns per wavelength, library calls and
    /// allocations would cost more than the arithmetic.
    fn solve_column(&self, designs: &Designs, derivatives: bool, j: usize) -> Result<ColumnFit, ArgminError> {
        let x = &designs.x;
        let dx = derivatives.then_some(designs.dx.as_slice());
        let (ns, m) = x.dim();
        let mut y: Vec<f64> = self.weighted_data.column(j).to_vec();
        let sw: Vec<f64> = match &self.sqrt_weights {
            Some(w) => w.column(j).to_vec(),
            None => vec![1.0; ns],
        };
        // the known spectra's part, held fixed: y = √W (d_j − diag(b)·C_known·E_j)
        let known_eps = self.base.known_values.column(j);
        if let Some(kc) = &designs.known {
            for (i, row) in kc.rows().into_iter().enumerate() {
                y[i] -= sw[i] * row.dot(&known_eps);
            }
        }
        let has_data = sw.iter().any(|&v| v > 0.0);
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
        // SVD of (√W X_P), built from its transpose (k × ns)
        let factor = |passive: &[usize]| {
            let mut at = vec![0.0; passive.len() * ns];
            for (i, row) in x.rows().into_iter().enumerate() {
                for (c, &a) in passive.iter().enumerate() {
                    at[c * ns + i] = sw[i] * row[a];
                }
            }
            SmallSvd::of_transposed(at, passive.len(), ns)
        };
        let all: Vec<usize> = (0..m).collect();
        let mut unconstrained = None;
        let (passive, status): (Vec<usize>, Option<NnlsStatus>) = match self.sign {
            SpectraSign::Free => (all, None),
            SpectraSign::NonNegative => {
                // An unconstrained solution that is already positive is the NNLS optimum (the
                // problem is convex): most wavelengths need no active-set search.
                let svd = factor(&all);
                let positive = svd.pinv.chunks_exact(ns).all(|row| dot(row, &y) > 0.0);
                if positive {
                    unconstrained = Some(svd);
                    (all, Some(NnlsStatus::Converged { iterations: 0 }))
                } else {
                    self.nnls_passive(x, &sw, &y)
                }
            }
        };

        let k = passive.len();
        let np = dx.map_or(0, <[_]>::len);
        let mut spectrum = Array1::zeros(m);
        let mut se_factor = Array1::zeros(m);
        if !has_data {
            spectrum.fill(f64::NAN);
            se_factor.fill(f64::NAN);
        }
        if k == 0 {
            return Ok(ColumnFit {
                residual: Array1::from(y),
                spectrum,
                se_factor,
                passive: 0,
                status,
                jacobian: dx.map(|_| Array2::zeros((ns, np))),
            });
        }
        let svd = unconstrained.unwrap_or_else(|| factor(&passive));
        let s_p: Vec<f64> = svd.pinv.chunks_exact(ns).map(|row| dot(row, &y)).collect();
        let mut residual = y;
        svd.project_out(&mut residual);
        if has_data {
            for (c, &a) in passive.iter().enumerate() {
                // Rounding can leave a just-positive NNLS value a hair below zero here.
                spectrum[a] = match self.sign {
                    SpectraSign::Free => s_p[c],
                    SpectraSign::NonNegative => s_p[c].max(0.0),
                };
                let row = &svd.pinv[c * ns..(c + 1) * ns];
                se_factor[a] = if svd.rank == k {
                    dot(row, row).sqrt()
                } else {
                    f64::NAN
                };
            }
        }
        let jacobian = dx.map(|dx| {
            let mut jac = Array2::zeros((ns, dx.len()));
            let mut e = vec![0.0; ns];
            let mut v = vec![0.0; k];
            for (p, dxp) in dx.iter().enumerate() {
                // a = Q_P (∂X_P s_P + ∂K e_j), b = X_P⁺ᵀ ∂X_Pᵀ r (all with the weights), where
                // ∂K e_j is the θ-derivative of the known spectra's part (y depends on θ too)
                v.fill(0.0);
                for (i, row) in dxp.rows().into_iter().enumerate() {
                    let mut ei = 0.0;
                    for (c, &a) in passive.iter().enumerate() {
                        let d = sw[i] * row[a];
                        ei += d * s_p[c];
                        v[c] += d * residual[i];
                    }
                    if let Some(dk) = designs.dknown.get(p) {
                        ei += sw[i] * dk.row(i).dot(&known_eps);
                    }
                    e[i] = ei;
                }
                svd.project_out(&mut e);
                for (i, ei) in e.iter().enumerate() {
                    let bi: f64 = (0..k).map(|c| svd.pinv[c * ns + i] * v[c]).sum();
                    jac[[i, p]] = -(ei + bi);
                }
            }
            jac
        });
        Ok(ColumnFit {
            residual: Array1::from(residual),
            spectrum,
            se_factor,
            passive: k,
            status,
            jacobian,
        })
    }

    /// Cost and (optionally) Jᵀr, JᵀJ summed over all wavelengths, chunk by chunk in parallel,
    /// added in chunk order.
    fn accumulate(&self, theta: &Array1<f64>, with_normal_equations: bool) -> Result<Partial, ArgminError> {
        let designs = self.designs(theta, with_normal_equations)?;
        let np = designs.dx.len();
        let nw = self.n_wavelengths();
        let partials: Vec<Partial> = (0..nw.div_ceil(CHUNK))
            .into_par_iter()
            .map(|chunk| {
                let mut part = Partial {
                    rss: 0.0,
                    gradient: Array1::zeros(np),
                    gauss_newton: Array2::zeros((np, np)),
                };
                for j in chunk * CHUNK..((chunk + 1) * CHUNK).min(nw) {
                    let col = self.solve_column(&designs, with_normal_equations, j)?;
                    part.rss += col.residual.dot(&col.residual);
                    if let Some(jac) = col.jacobian {
                        for (row, &ri) in jac.rows().into_iter().zip(col.residual.iter()) {
                            for a in 0..np {
                                part.gradient[a] += row[a] * ri;
                                for b in 0..=a {
                                    part.gauss_newton[[a, b]] += row[a] * row[b];
                                }
                            }
                        }
                    }
                }
                Ok(part)
            })
            .collect::<Result<_, ArgminError>>()?;
        let mut total = Partial {
            rss: 0.0,
            gradient: Array1::zeros(np),
            gauss_newton: Array2::zeros((np, np)),
        };
        for p in partials {
            total.rss += p.rss;
            total.gradient += &p.gradient;
            total.gauss_newton += &p.gauss_newton;
        }
        for a in 0..np {
            for b in 0..a {
                total.gauss_newton[[b, a]] = total.gauss_newton[[a, b]];
            }
        }
        Ok(total)
    }

    /// The linear part solved at θ: spectra, their standard-error factors, weighted residuals.
    ///
    /// # Errors
    /// When the speciation or a solve fails at θ.
    pub fn solution(&self, theta: &Array1<f64>) -> Result<ColumnwiseSolution, ArgminError> {
        let designs = self.designs(theta, false)?;
        let (ns, m) = designs.x.dim();
        let nw = self.n_wavelengths();
        let columns: Vec<ColumnFit> = (0..nw)
            .into_par_iter()
            .map(|j| self.solve_column(&designs, false, j))
            .collect::<Result<_, ArgminError>>()?;
        let mut spectra = Array2::zeros((nw, m));
        let mut se_factors = Array2::zeros((nw, m));
        let mut weighted_residuals = Array2::zeros((ns, nw));
        let mut rss = 0.0;
        let mut passive = 0;
        let mut nnls_unconverged = Vec::new();
        for (j, col) in columns.into_iter().enumerate() {
            spectra.row_mut(j).assign(&col.spectrum);
            se_factors.row_mut(j).assign(&col.se_factor);
            rss += col.residual.dot(&col.residual);
            weighted_residuals.column_mut(j).assign(&col.residual);
            passive += col.passive;
            if col.status.is_some_and(|s| !s.converged()) {
                nnls_unconverged.push(j);
            }
        }
        Ok(ColumnwiseSolution {
            spectra,
            se_factors,
            weighted_residuals,
            rss,
            passive,
            nnls_unconverged,
        })
    }

    /// The stacked weighted residual (wavelength by wavelength) and its Jacobian, for tests.
    #[cfg(test)]
    fn stacked(&self, theta: &Array1<f64>) -> Result<(Array1<f64>, Array2<f64>), ArgminError> {
        let designs = self.designs(theta, true)?;
        let (ns, nw, np) = (designs.x.nrows(), self.n_wavelengths(), designs.dx.len());
        let mut r = Array1::zeros(ns * nw);
        let mut jac = Array2::zeros((ns * nw, np));
        for j in 0..nw {
            let col = self.solve_column(&designs, true, j)?;
            r.slice_mut(ndarray::s![j * ns..(j + 1) * ns])
                .assign(&col.residual);
            if let Some(jj) = col.jacobian {
                jac.slice_mut(ndarray::s![j * ns..(j + 1) * ns, ..]).assign(&jj);
            }
        }
        Ok((r, jac))
    }

    /// The stacked weighted residual only (no derivatives), for finite differences in tests.
    #[cfg(test)]
    fn stacked_residual(&self, theta: &Array1<f64>) -> Result<Array1<f64>, ArgminError> {
        let designs = self.designs(theta, false)?;
        let (ns, nw) = (designs.x.nrows(), self.n_wavelengths());
        let mut r = Array1::zeros(ns * nw);
        for j in 0..nw {
            let col = self.solve_column(&designs, false, j)?;
            r.slice_mut(ndarray::s![j * ns..(j + 1) * ns])
                .assign(&col.residual);
        }
        Ok(r)
    }
}

impl GaussNewtonProblem for ColumnwiseProblem<'_> {
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        let cost = 0.5 * self.accumulate(theta, false)?.rss;
        Ok(if cost.is_finite() { cost } else { f64::INFINITY })
    }

    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        let total = self.accumulate(theta, true)?;
        Ok(NormalEquations {
            cost: 0.5 * total.rss,
            gradient: total.gradient,
            gauss_newton: total.gauss_newton,
        })
    }
}

/// True when the settings need the columnwise path (non-negative spectra or non-uniform
/// weights).
pub(super) fn requested(params: &HardFitParams) -> bool {
    params.spectra_sign != SpectraSign::Free || !params.weighting.is_uniform()
}

/// The problem the solver runs on: the reduced variable projection, or the columnwise one when
/// the settings ask for it ([`requested`]).
pub(super) enum FitProblem<'a> {
    /// Exact reduction (uniform weights, free spectra).
    Reduced(VarproProblem<'a>),
    /// Wavelength by wavelength.
    Columnwise(ColumnwiseProblem<'a>),
}

impl<'a> FitProblem<'a> {
    /// Wraps the reduced problem, switching to the columnwise path when `params` ask for it or
    /// every wavelength has a masked point in some sample.
    /// `set` must be the data set the reduced problem was built from; the columnwise path uses
    /// all of its wavelengths, masked points weighing nothing.
    ///
    /// # Errors
    /// [`HardFitError::Settings`] for settings the columnwise path cannot fit (module docs) and
    /// for a known noise level together with absorbance weights (the weights already state
    /// the noise).
    pub fn new(
        reduced: VarproProblem<'a>,
        set: &crate::data::SpectraSet,
        params: &HardFitParams,
    ) -> Result<Self, HardFitError> {
        // (with every wavelength masked somewhere the reduced problem has nothing exact to fit)
        if !requested(params) && !reduced.every_wavelength_masked {
            return Ok(Self::Reduced(reduced));
        }
        check_settings(
            params.spectra_sign,
            params.weighting,
            params.baseline,
            params.spectra_temperature,
        )?;
        if params.known_noise.is_some() && !params.weighting.is_uniform() {
            return Err(HardFitError::Settings(
                "known_noise cannot be combined with absorbance weights: the weights already state the \
                 noise (floor_au, relative); leave known_noise out"
                    .into(),
            ));
        }
        Ok(Self::Columnwise(ColumnwiseProblem::new(
            reduced,
            set.absorbance().view(),
            set.mask().view(),
            params.spectra_sign,
            params.weighting,
        )?))
    }

    /// The variable-projection problem (speciation, design, and the reduced data used to rank
    /// starting points).
    pub fn varpro(&self) -> &VarproProblem<'a> {
        match self {
            Self::Reduced(p) => p,
            Self::Columnwise(p) => &p.base,
        }
    }
}

impl GaussNewtonProblem for FitProblem<'_> {
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        match self {
            Self::Reduced(p) => p.cost(theta),
            Self::Columnwise(p) => p.cost(theta),
        }
    }

    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        match self {
            Self::Reduced(p) => p.normal_equations(theta),
            Self::Columnwise(p) => p.normal_equations(theta),
        }
    }
}

/// D̂ = X·Sᵀ from a fit's concentrations and spectra (samples × wavelengths): the fitted values
/// of a columnwise fit, whose spectra are not a projection of the data.
///
/// # Errors
/// [`HardFitError::Settings`] if the fit does not belong to `set`.
pub(super) fn fitted_values(
    set: &crate::data::SpectraSet,
    params: &HardFitParams,
    fit: &super::HardFit,
) -> Result<Array2<f64>, HardFitError> {
    let x = super::bootstrap::fit_design(set, params, fit)?;
    // NaN spectra (wavelengths without data) give NaN fitted values there, as they should.
    let mut fitted = x.dot(&fit.spectra.t());
    // the known spectra's part diag(b)·C_k·E_kᵀ, held fixed in the fit
    if let Some(part) = super::bootstrap::known_part(set, params, fit)? {
        fitted += &part;
    }
    Ok(fitted)
}

#[cfg(test)]
mod tests {
    use super::super::tests::{small_plan, two_complex_model};
    use super::super::{HardFitParams, build_problem, free_parameters};
    use super::*;
    use crate::data::SpectraSet;
    use crate::simulate::{Noise, SimulationPlan, simulate};
    use crate::speciation::ValidModel;

    /// Two series, four temperatures, 400–700 nm. The free metal's band (420 nm) has died out
    /// beyond ≈ 520 nm, so with noise its unconstrained ε goes negative there.
    fn plan(noise: Noise) -> SimulationPlan {
        let mut plan = small_plan();
        plan.seed = 7;
        plan.noise = noise;
        // a narrower metal band than the shared plan's, so it dies out well inside the range
        plan.spectra[0].bands[0].width_nm = 20.0;
        plan
    }

    fn model() -> ValidModel {
        two_complex_model(0.4, 12_000.0, -0.2, 35_000.0)
    }

    fn problem<'a>(
        set: &SpectraSet,
        model: &'a ValidModel,
        free: &'a [super::super::FreeParameter],
        sign: SpectraSign,
        weighting: Weighting,
    ) -> ColumnwiseProblem<'a> {
        let (base, _, _) = build_problem(set, model, free, &HardFitParams::default()).unwrap();
        ColumnwiseProblem::new(base, set.absorbance().view(), set.mask().view(), sign, weighting).unwrap()
    }

    fn max_abs<'b>(v: impl IntoIterator<Item = &'b f64>) -> f64 {
        v.into_iter().fold(0.0f64, |m, x| m.max(x.abs()))
    }

    #[test]
    fn the_jacobian_and_normal_equations_match_finite_differences_with_and_without_nnls() {
        let model = model();
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 3e-3 })).unwrap();
        let free = free_parameters(&model);
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let weights = Weighting::Absorbance {
            floor_au: 2e-3,
            relative: 0.02,
        };
        for (sign, weighting, known) in [
            (SpectraSign::Free, Weighting::Uniform, false),
            (SpectraSign::Free, weights, false),
            (SpectraSign::NonNegative, Weighting::Uniform, false),
            (SpectraSign::NonNegative, weights, false),
            (SpectraSign::NonNegative, weights, true),
        ] {
            let params = HardFitParams {
                known_spectra: if known {
                    vec![known_metal(&sim)]
                } else {
                    Vec::new()
                },
                ..HardFitParams::default()
            };
            let (base, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
            let pr = ColumnwiseProblem::new(
                base,
                sim.set.absorbance().view(),
                sim.set.mask().view(),
                sign,
                weighting,
            )
            .unwrap();
            if sign == SpectraSign::NonNegative {
                // the data must exercise the constraint: some ε clipped at this θ
                let sol = pr.solution(&theta).unwrap();
                let m = sol.spectra.ncols();
                assert!(
                    sol.passive < m * pr.n_wavelengths(),
                    "no ε clipped ({} of {})",
                    sol.passive,
                    m * pr.n_wavelengths()
                );
                assert!(sol.spectra.iter().all(|&v| v >= 0.0));
                assert!(sol.nnls_unconverged.is_empty());
            }
            let (r, jac) = pr.stacked(&theta).unwrap();
            for p in 0..theta.len() {
                let h = 1e-6 * theta[p].abs().max(1.0);
                let mut tp = theta.clone();
                tp[p] += h;
                let mut tm = theta.clone();
                tm[p] -= h;
                // central differences of the stacked weighted residual (the outside check of
                // the Golub–Pereyra column block)
                let fd = (pr.stacked_residual(&tp).unwrap() - pr.stacked_residual(&tm).unwrap()) / (2.0 * h);
                let err = max_abs((&fd - &jac.column(p)).iter());
                let scale = max_abs(fd.iter());
                assert!(
                    err <= 1e-6 * scale,
                    "{sign:?}/{weighting:?}/known {known}, parameter {p}: max |J − FD| = {err}, scale {scale}"
                );
            }
            // the accumulated normal equations are those of the stacked Jacobian
            let ne = pr.normal_equations(&theta).unwrap();
            approx::assert_relative_eq!(ne.cost, 0.5 * r.dot(&r), max_relative = 1e-12);
            approx::assert_relative_eq!(pr.cost(&theta).unwrap(), ne.cost, max_relative = 1e-12);
            let g = jac.t().dot(&r);
            let h = jac.t().dot(&jac);
            let gs = max_abs(g.iter());
            for a in 0..theta.len() {
                assert!(
                    (ne.gradient[a] - g[a]).abs() <= 1e-9 * gs,
                    "{sign:?}: gradient {a}"
                );
                for b in 0..theta.len() {
                    let hs = (h[[a, a]] * h[[b, b]]).sqrt();
                    assert!(
                        (ne.gauss_newton[[a, b]] - h[[a, b]]).abs() <= 1e-9 * hs,
                        "{sign:?}: JᵀJ[{a},{b}]"
                    );
                }
            }
        }
    }

    /// The simulation's true spectrum of the free metal M as a known spectrum.
    fn known_metal(sim: &crate::simulate::Simulation) -> super::super::FixedSpectrum {
        super::super::FixedSpectrum {
            species: "M".into(),
            wavelengths_nm: sim.set.wavelengths_nm().to_vec(),
            absorptivity: sim.spectra.column(0).to_vec(),
        }
    }

    #[test]
    fn uniform_free_columnwise_equals_the_reduced_variable_projection() {
        let model = model();
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 2e-3 })).unwrap();
        let free = free_parameters(&model);
        for known in [Vec::new(), vec![known_metal(&sim)]] {
            let params = HardFitParams {
                known_spectra: known,
                ..HardFitParams::default()
            };
            let (reduced, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
            let (base, _, _) = build_problem(&sim.set, &model, &free, &params).unwrap();
            let pr = ColumnwiseProblem::new(
                base,
                sim.set.absorbance().view(),
                sim.set.mask().view(),
                SpectraSign::Free,
                Weighting::Uniform,
            )
            .unwrap();
            compare_with_reduced(&reduced, &pr);
        }
    }

    fn compare_with_reduced(reduced: &VarproProblem<'_>, pr: &ColumnwiseProblem<'_>) {
        for theta in [
            ndarray::array![0.7, 5_000.0, 0.3, 20_000.0],
            ndarray::array![0.4, 12_000.0, -0.2, 35_000.0],
            ndarray::array![-0.5, -10_000.0, 1.0, 0.0],
        ] {
            // the reduced path (exact reduction G·Gᵀ = D·Dᵀ) is the outside check of the algebra
            let a = reduced.normal_equations(&theta).unwrap();
            let b = pr.normal_equations(&theta).unwrap();
            approx::assert_relative_eq!(a.cost, b.cost, max_relative = 1e-9);
            approx::assert_relative_eq!(
                reduced.cost(&theta).unwrap(),
                pr.cost(&theta).unwrap(),
                max_relative = 1e-9
            );
            let gs = max_abs(a.gradient.iter());
            for p in 0..theta.len() {
                assert!(
                    (a.gradient[p] - b.gradient[p]).abs() <= 1e-9 * gs,
                    "gradient {p}: {} vs {}",
                    a.gradient[p],
                    b.gradient[p]
                );
                for q in 0..theta.len() {
                    let hs = (a.gauss_newton[[p, p]] * a.gauss_newton[[q, q]]).sqrt();
                    assert!(
                        (a.gauss_newton[[p, q]] - b.gauss_newton[[p, q]]).abs() <= 1e-9 * hs,
                        "JᵀJ[{p},{q}]: {} vs {}",
                        a.gauss_newton[[p, q]],
                        b.gauss_newton[[p, q]]
                    );
                }
            }
        }
    }

    #[test]
    fn each_columns_nnls_is_the_brute_force_optimum() {
        let model = model();
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 3e-3 })).unwrap();
        let free = free_parameters(&model);
        let weighting = Weighting::Absorbance {
            floor_au: 2e-3,
            relative: 0.02,
        };
        let pr = problem(&sim.set, &model, &free, SpectraSign::NonNegative, weighting);
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let sol = pr.solution(&theta).unwrap();
        let x = pr.designs(&theta, false).unwrap().x;
        let mut clipped = 0;
        for j in 0..pr.n_wavelengths() {
            let xw = pr.weigh(x.view(), j);
            let y = pr.weighted_data.column(j);
            // brute force over all passive sets (linear.rs, Lawson & Hanson's definition of the
            // NNLS optimum) is the outside reference
            let reference = crate::resolve::linear::nnls_brute_force(xw.view(), y);
            for (a, (&got, &want)) in sol.spectra.row(j).iter().zip(reference.iter()).enumerate() {
                assert!(
                    (got - want).abs() <= 1e-9 * max_abs(reference.iter()),
                    "wavelength {j}, ε {a}: {got} vs brute force {want}"
                );
                if want == 0.0 {
                    clipped += 1;
                    approx::assert_abs_diff_eq!(sol.se_factors[[j, a]], 0.0);
                }
            }
            let r = &y - &xw.dot(&reference);
            approx::assert_relative_eq!(
                sol.weighted_residuals
                    .column(j)
                    .dot(&sol.weighted_residuals.column(j)),
                r.dot(&r),
                max_relative = 1e-9
            );
        }
        assert!(clipped > 0, "the check must include clipped ε");
    }

    #[test]
    fn settings_the_path_cannot_fit_are_refused_with_a_reason() {
        let refused = [
            check_settings(
                SpectraSign::Free,
                Weighting::Uniform,
                Baseline::Offset,
                SpectraTemperature::Constant,
            ),
            check_settings(
                SpectraSign::NonNegative,
                Weighting::Uniform,
                Baseline::None,
                SpectraTemperature::Linear { reference_k: 300.0 },
            ),
            check_settings(
                SpectraSign::Free,
                Weighting::Absorbance {
                    floor_au: 1e-3,
                    relative: -0.1,
                },
                Baseline::None,
                SpectraTemperature::Constant,
            ),
            check_settings(
                SpectraSign::Free,
                Weighting::Absorbance {
                    floor_au: f64::NAN,
                    relative: 0.1,
                },
                Baseline::None,
                SpectraTemperature::Constant,
            ),
        ];
        for (k, r) in refused.iter().enumerate() {
            assert!(matches!(r, Err(HardFitError::Settings(_))), "case {k}: {r:?}");
        }
        assert!(
            check_settings(
                SpectraSign::Free,
                Weighting::Uniform,
                Baseline::None,
                SpectraTemperature::Quadratic { reference_k: 300.0 }
            )
            .is_ok()
        );
    }

    #[test]
    fn masked_points_weigh_nothing_whatever_they_hold() {
        let model = model();
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 2e-3 })).unwrap();
        let free = free_parameters(&model);
        let mut mask = Array2::from_elem(sim.set.absorbance().dim(), false);
        mask[[1, 3]] = true;
        mask[[5, 20]] = true;
        let mut garbage = sim.set.absorbance().clone();
        garbage[[1, 3]] = f64::NAN;
        garbage[[5, 20]] = 1e6;
        let theta = ndarray::array![0.7, 5_000.0, 0.3, 20_000.0];
        let mut costs = Vec::new();
        for d in [sim.set.absorbance(), &garbage] {
            let (base, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
            let pr = ColumnwiseProblem::new(
                base,
                d.view(),
                mask.view(),
                SpectraSign::NonNegative,
                Weighting::Uniform,
            )
            .unwrap();
            assert_eq!(pr.n_data(), sim.set.absorbance().len() - 2);
            costs.push(pr.normal_equations(&theta).unwrap());
        }
        approx::assert_relative_eq!(costs[0].cost, costs[1].cost, max_relative = 1e-14);
        for (a, b) in costs[0].gauss_newton.iter().zip(costs[1].gauss_newton.iter()) {
            approx::assert_relative_eq!(a, b, max_relative = 1e-12);
        }
        // an unmasked value that is not finite is a typed error naming the sample
        let (base, _, _) = build_problem(&sim.set, &model, &free, &HardFitParams::default()).unwrap();
        let no_mask = Array2::from_elem(garbage.dim(), false);
        let e = ColumnwiseProblem::new(
            base,
            garbage.view(),
            no_mask.view(),
            SpectraSign::Free,
            Weighting::Uniform,
        )
        .err()
        .unwrap();
        assert!(e.to_string().contains(&sim.set.samples()[1].id), "{e}");
    }

    #[test]
    fn a_sample_masked_at_every_wavelength_is_left_out_of_the_fit() {
        // One sample saturated throughout: no wavelength is free of masked points, so the fit
        // runs columnwise with that sample weighing nothing — the same least-squares problem as
        // the data without it (reference: the reduced path on the set with the sample removed).
        let model = model();
        let sim = simulate(&model, &plan(Noise::Absorbance { sd_au: 1e-3 })).unwrap();
        let mut set = sim.set.clone();
        let mut mask = Array2::from_elem(set.absorbance().dim(), false);
        mask.row_mut(2).fill(true);
        set.set_mask(mask).unwrap();
        let fitted = super::super::fit(&set, &model, &HardFitParams::default()).unwrap();
        let ids: Vec<&str> = (0..set.n_samples())
            .filter(|&i| i != 2)
            .map(|i| set.samples()[i].id.as_str())
            .collect();
        let without = sim.set.select_samples(&ids).unwrap();
        let reference = super::super::fit(&without, &model, &HardFitParams::default()).unwrap();
        assert_eq!(fitted.n_data, without.absorbance().len());
        for (a, b) in fitted.parameters.iter().zip(&reference.parameters) {
            assert!(
                (a.value - b.value).abs() <= 1e-6 * b.value.abs().max(1.0),
                "{}: {} vs {}",
                b.parameter.name,
                a.value,
                b.value
            );
            approx::assert_relative_eq!(a.standard_error, b.standard_error, max_relative = 1e-4);
        }
        // a baseline couples the wavelengths: refused, saying what to do
        let e = super::super::fit(
            &set,
            &model,
            &HardFitParams {
                baseline: Baseline::Offset,
                ..HardFitParams::default()
            },
        )
        .unwrap_err();
        assert!(
            e.to_string().contains("leave out the samples masked throughout"),
            "{e}"
        );
    }
}
