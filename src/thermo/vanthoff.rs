//! van 't Hoff fitting of equilibrium constants measured at several temperatures.
//!
//! ## Model
//! With ΔG° = −RT ln K = ΔH° − TΔS° and constant ΔH°, ΔS°:
//!
//! ```text
//! ln K(T) = −ΔH°/(RT) + ΔS°/R
//! ```
//!
//! With a heat-capacity change about a reference temperature θ (Clarke & Glew, Trans. Faraday
//! Soc. 62 (1966) 539), ΔCp°(T) = ΔCp°(θ) + (T − θ)·dΔCp°/dT, integrating the van 't Hoff
//! equation gives, with ΔH°, ΔS° at θ,
//!
//! ```text
//! ln K(T) = ΔS°/R − ΔH°/(RT) + (ΔCp°/R)·f(T) + (dΔCp°/dT / R)·g(T)
//! f(T) = θ/T − 1 + ln(T/θ)
//! g(T) = (T² − θ²)/(2T) − θ ln(T/θ)
//! ```
//!
//! All forms are linear in the parameters, so the fit is a (weighted) linear least-squares
//! problem: weights 1/σ²(ln K) when uncertainties are given, otherwise unweighted with the
//! covariance scaled by the residual variance. It is solved by Householder QR on a centred,
//! column-equilibrated design (1/T minus its weighted mean), never by forming normal equations.
//!
//! ## ΔH°–ΔS° correlation
//! Over a narrow temperature range ΔH° and ΔS° from the same fit are almost perfectly
//! correlated (an artefact of the extrapolation to 1/T = 0; Krug, Hunter & Grieger, Nature 261
//! (1976) 566). Reparametrising at the harmonic-mean temperature T_hm = n / Σ(1/Tᵢ) as
//! (ln K(T_hm), ΔH°) removes that correlation for equally weighted data; both parametrisations
//! are reported ([`VanThoffFit::centred`]).

use super::{GAS_CONSTANT, ThermoError};
use crate::stats::{normal_quantile, student_t_quantile};
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;

/// Version of the serialised [`VanThoffFit`] layout.
pub const VANTHOFF_FORMAT_VERSION: u32 = 1;

/// How the equilibrium constants (and their uncertainties) are given.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ConstantScale {
    /// Natural logarithm ln K; σ is σ(ln K).
    #[default]
    Ln,
    /// Decadic logarithm log₁₀ K; σ is σ(log₁₀ K).
    Log10,
    /// K itself (must be positive); σ is σ(K), converted to σ(ln K) = σ(K)/K.
    Linear,
}

/// K(T) points: temperatures (K), values on an explicit [`ConstantScale`], optional
/// uncertainties (one standard deviation, same scale as the values).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KData {
    /// Temperatures T, K.
    pub temperatures_k: Vec<f64>,
    /// The constants, on `scale`.
    pub values: Vec<f64>,
    /// The scale of `values` and `sigmas`.
    pub scale: ConstantScale,
    /// Standard uncertainties of `values`, if known.
    pub sigmas: Option<Vec<f64>>,
}

impl KData {
    /// Points without uncertainties.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{ConstantScale, KData};
    /// let d = KData::new(vec![290.0, 300.0], vec![1.0, 0.9], ConstantScale::Log10);
    /// assert!(d.sigmas.is_none());
    /// ```
    pub fn new(temperatures_k: Vec<f64>, values: Vec<f64>, scale: ConstantScale) -> Self {
        Self {
            temperatures_k,
            values,
            scale,
            sigmas: None,
        }
    }

    /// The same points with standard uncertainties (same scale as the values).
    #[must_use]
    pub fn with_sigmas(mut self, sigmas: Vec<f64>) -> Self {
        self.sigmas = Some(sigmas);
        self
    }

    /// Validated ln K and σ(ln K) (None when no σ given).
    fn to_ln(&self) -> Result<(Vec<f64>, Option<Vec<f64>>), ThermoError> {
        let n = self.temperatures_k.len();
        if self.values.len() != n {
            return Err(ThermoError::LengthMismatch {
                what: "K values (one per temperature)",
                expected: n,
                found: self.values.len(),
            });
        }
        if let Some(s) = &self.sigmas
            && s.len() != n
        {
            return Err(ThermoError::LengthMismatch {
                what: "uncertainties (one per temperature)",
                expected: n,
                found: s.len(),
            });
        }
        let mut ln_k = Vec::with_capacity(n);
        for (index, (&t, &v)) in self.temperatures_k.iter().zip(&self.values).enumerate() {
            if !(t.is_finite() && t > 0.0) {
                return Err(ThermoError::NonPositiveTemperature {
                    index,
                    temperature_k: t,
                });
            }
            let bad = |reason| ThermoError::InvalidConstant {
                index,
                temperature_k: t,
                value: v,
                reason,
            };
            if !v.is_finite() {
                return Err(bad("not a finite number"));
            }
            ln_k.push(match self.scale {
                ConstantScale::Ln => v,
                ConstantScale::Log10 => v * LN_10,
                ConstantScale::Linear => {
                    if v <= 0.0 {
                        return Err(bad("K must be positive"));
                    }
                    v.ln()
                }
            });
        }
        let sig = match &self.sigmas {
            None => None,
            Some(s) => {
                let mut out = Vec::with_capacity(n);
                for (index, (&sg, (&t, &v))) in s
                    .iter()
                    .zip(self.temperatures_k.iter().zip(&self.values))
                    .enumerate()
                {
                    if !(sg.is_finite() && sg > 0.0) {
                        return Err(ThermoError::NonPositiveSigma {
                            index,
                            temperature_k: t,
                            sigma: sg,
                        });
                    }
                    out.push(match self.scale {
                        ConstantScale::Ln => sg,
                        ConstantScale::Log10 => sg * LN_10,
                        ConstantScale::Linear => sg / v,
                    });
                }
                Some(out)
            }
        };
        Ok((ln_k, sig))
    }
}

/// Whether and how a heat-capacity change is fitted.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum HeatCapacityModel {
    /// ΔH°, ΔS° independent of T (2 parameters).
    #[default]
    None,
    /// Constant ΔCp° about θ (3 parameters: ΔH°(θ), ΔS°(θ), ΔCp°).
    Constant {
        /// θ, K.
        reference_temperature_k: f64,
    },
    /// ΔCp°(T) = ΔCp°(θ) + (T − θ)·dΔCp°/dT (4 parameters).
    Linear {
        /// θ, K.
        reference_temperature_k: f64,
    },
}

impl HeatCapacityModel {
    fn n_params(self) -> usize {
        match self {
            Self::None => 2,
            Self::Constant { .. } => 3,
            Self::Linear { .. } => 4,
        }
    }

    fn reference_k(self) -> Option<f64> {
        match self {
            Self::None => None,
            Self::Constant {
                reference_temperature_k,
            }
            | Self::Linear {
                reference_temperature_k,
            } => Some(reference_temperature_k),
        }
    }
}

/// How the points are weighted and the errors scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Weighting {
    /// σ given: weights 1/σ², errors from σ ([`ErrorScale::Known`]); no σ: unweighted with
    /// residual-based errors.
    #[default]
    Auto,
    /// Ignore any σ: unweighted, residual-based errors.
    Unweighted,
    /// Weights 1/σ², errors from σ (σ required).
    KnownSigma,
    /// Weights 1/σ², covariance scaled by the reduced χ² (σ known only up to a common factor).
    RelativeSigma,
}

/// Unchecked settings of a van 't Hoff fit (see [`VanThoffParams::check`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
pub struct VanThoffParams {
    /// Heat-capacity term.
    pub heat_capacity: HeatCapacityModel,
    /// Weighting and error scale.
    pub weighting: Weighting,
}

impl VanThoffParams {
    /// Sets the heat-capacity model.
    #[must_use]
    pub fn heat_capacity(mut self, m: HeatCapacityModel) -> Self {
        self.heat_capacity = m;
        self
    }

    /// Sets the weighting.
    #[must_use]
    pub fn weighting(mut self, w: Weighting) -> Self {
        self.weighting = w;
        self
    }

    /// Validates the settings.
    ///
    /// # Errors
    /// [`ThermoError::InvalidParameter`] for a reference temperature that is not positive and
    /// finite.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{HeatCapacityModel, VanThoffParams};
    /// let p = VanThoffParams::default()
    ///     .heat_capacity(HeatCapacityModel::Constant { reference_temperature_k: -1.0 });
    /// assert!(p.check().is_err());
    /// ```
    pub fn check(self) -> Result<ValidVanThoffParams, ThermoError> {
        if let Some(theta) = self.heat_capacity.reference_k()
            && !(theta.is_finite() && theta > 0.0)
        {
            return Err(ThermoError::InvalidParameter {
                name: "reference_temperature_k",
                value: theta,
                reason: "must be above absolute zero and finite",
            });
        }
        Ok(ValidVanThoffParams(self))
    }
}

/// Checked settings, made by [`VanThoffParams::check`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValidVanThoffParams(VanThoffParams);

impl ValidVanThoffParams {
    /// The settings.
    pub fn params(&self) -> &VanThoffParams {
        &self.0
    }
}

/// Where the reported standard errors come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ErrorScale {
    /// From the given σ (scale fixed at 1); bands use the normal quantile.
    Known,
    /// Scaled by the reduced χ² of the residuals; bands use Student's t with the residual
    /// degrees of freedom.
    Residual,
}

/// A value with its standard error.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Estimate {
    /// The value.
    pub value: f64,
    /// Its standard error (one standard deviation).
    pub std_error: f64,
}

/// The fit re-expressed at the harmonic-mean temperature.
///
/// For equal weights ln K(T_hm) and ΔH° are uncorrelated exactly (T_hm is then the point where
/// the centred 1/T column is orthogonal to the constant). With unequal σ the decorrelating
/// temperature is 1/(Σwᵢ/Tᵢ / Σwᵢ) instead, and `correlation` shows how much remains at T_hm.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CentredParameters {
    /// T_hm = n / Σ(1/Tᵢ), K.
    pub temperature_k: f64,
    /// ln K(T_hm).
    pub ln_k: Estimate,
    /// ΔH°(T_hm), J/mol.
    pub delta_h_j_per_mol: Estimate,
    /// Correlation coefficient of ln K(T_hm) and ΔH°(T_hm) (≈ 0 for equal weights; 0 for
    /// exact data).
    pub correlation: f64,
}

/// One point of a confidence band of ln K.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BandPoint {
    /// T, K.
    pub temperature_k: f64,
    /// Fitted ln K(T).
    pub ln_k: f64,
    /// Its standard error.
    pub std_error: f64,
    /// Lower limit.
    pub lower: f64,
    /// Upper limit.
    pub upper: f64,
}

/// The result of a van 't Hoff fit (serialisable; `format_version` = [`VANTHOFF_FORMAT_VERSION`]).
///
/// Parameters are ordered ΔH° (J/mol), ΔS° (J K⁻¹ mol⁻¹), then ΔCp° (J K⁻¹ mol⁻¹) and dΔCp°/dT
/// (J K⁻² mol⁻¹) when fitted; with a heat-capacity term ΔH°, ΔS°, ΔCp° are values at the
/// reference temperature θ.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VanThoffFit {
    /// Layout version.
    pub format_version: u32,
    /// The heat-capacity model fitted.
    pub heat_capacity: HeatCapacityModel,
    /// Origin of the standard errors.
    pub error_scale: ErrorScale,
    /// Parameter names, in order.
    pub parameter_names: Vec<String>,
    /// Parameter values, in order.
    pub parameters: Vec<f64>,
    /// Covariance matrix of the parameters.
    pub covariance: Vec<Vec<f64>>,
    /// Correlation matrix of the parameters (off-diagonal 0 where a standard error is zero,
    /// i.e. for exact data).
    pub correlation: Vec<Vec<f64>>,
    /// ΔH° (at θ with a heat-capacity term), J/mol.
    pub delta_h_j_per_mol: Estimate,
    /// ΔS° (at θ with a heat-capacity term), J K⁻¹ mol⁻¹.
    pub delta_s_j_per_k_mol: Estimate,
    /// ΔCp° at θ, J K⁻¹ mol⁻¹, when fitted.
    pub delta_cp_j_per_k_mol: Option<Estimate>,
    /// dΔCp°/dT, J K⁻² mol⁻¹, when fitted.
    pub delta_cp_slope_j_per_k2_mol: Option<Estimate>,
    /// Harmonic-mean temperature n / Σ(1/Tᵢ), K.
    pub harmonic_mean_temperature_k: f64,
    /// The centred parametrisation at the harmonic-mean temperature.
    pub centred: CentredParameters,
    /// The temperatures, K.
    pub temperatures_k: Vec<f64>,
    /// The data as ln K.
    pub ln_k: Vec<f64>,
    /// σ(ln K) used for weighting (None: unweighted).
    pub sigmas_ln_k: Option<Vec<f64>>,
    /// Residuals ln K(data) − ln K(fit).
    pub residuals_ln_k: Vec<f64>,
    /// Points.
    pub n_points: usize,
    /// Residual degrees of freedom n − p.
    pub degrees_of_freedom: usize,
    /// Weighted sum of squared residuals Σ wᵢ rᵢ² (wᵢ = 1 unweighted).
    pub chi_squared: f64,
    /// χ² / (n − p) (None with no degrees of freedom).
    pub reduced_chi_squared: Option<f64>,
    /// Weighted coefficient of determination 1 − Σw r² / Σw (y − ȳ_w)² (None when all ln K
    /// are equal).
    pub r_squared: Option<f64>,
}

/// The heat-capacity basis functions f(T), g(T) about θ.
fn cp_basis(t: f64, theta: f64) -> (f64, f64) {
    let l = (t / theta).ln();
    (
        theta / t - 1.0 + l,
        (t * t - theta * theta) / (2.0 * t) - theta * l,
    )
}

/// ln K at T by the Clarke–Glew form with ΔG°, ΔH°, ΔCp° at θ and a constant dΔCp°/dT
/// (energies J/mol, ΔCp° J K⁻¹ mol⁻¹, dΔCp°/dT J K⁻² mol⁻¹):
///
/// ```text
/// ln K(T) = ΔS°(θ)/R − ΔH°(θ)/(RT) + (ΔCp°/R)(θ/T − 1 + ln(T/θ))
///           + (dΔCp°/dT / R)((T² − θ²)/(2T) − θ ln(T/θ)),   ΔS°(θ) = (ΔH° − ΔG°)/θ
/// ```
///
/// # Examples
/// ```
/// use isosbestic::thermo::ln_k_clarke_glew;
/// // isosbestic REFERENCES.md (Clarke–Glew closed form checked against numerical integration):
/// // θ = 298.15 K, ΔG° = −5 kJ/mol, ΔH° = 40 kJ/mol, ΔCp° = −200, dΔCp°/dT = 1.5 → 3.19405491 at 323.15 K
/// let v = ln_k_clarke_glew(323.15, 298.15, -5000.0, 40000.0, -200.0, 1.5);
/// approx::assert_abs_diff_eq!(v, 3.19405491, epsilon = 1e-7);
/// ```
pub fn ln_k_clarke_glew(
    temperature_k: f64,
    reference_temperature_k: f64,
    delta_g_ref_j_per_mol: f64,
    delta_h_ref_j_per_mol: f64,
    delta_cp_j_per_k_mol: f64,
    delta_cp_slope_j_per_k2_mol: f64,
) -> f64 {
    let theta = reference_temperature_k;
    let ds = (delta_h_ref_j_per_mol - delta_g_ref_j_per_mol) / theta;
    let (f, g) = cp_basis(temperature_k, theta);
    (ds - delta_h_ref_j_per_mol / temperature_k + delta_cp_j_per_k_mol * f + delta_cp_slope_j_per_k2_mol * g)
        / GAS_CONSTANT
}

/// Householder QR least squares on a dense n×p matrix stored by columns. Returns the
/// coefficients and R⁻¹ (upper triangular, p×p, row-major), or the index of a negligible
/// diagonal element.
fn qr_least_squares(mut cols: Vec<Vec<f64>>, mut y: Vec<f64>) -> Result<(Vec<f64>, Vec<Vec<f64>>), usize> {
    let p = cols.len();
    let n = y.len();
    for k in 0..p {
        let norm = cols[k][k..].iter().map(|v| v * v).sum::<f64>().sqrt();
        if norm == 0.0 {
            return Err(k);
        }
        let alpha = if cols[k][k] > 0.0 { -norm } else { norm };
        let mut v: Vec<f64> = cols[k][k..].to_vec();
        v[0] -= alpha;
        let vnorm2: f64 = v.iter().map(|x| x * x).sum();
        let apply = |x: &mut [f64]| {
            if vnorm2 > 0.0 {
                let d: f64 = v.iter().zip(x.iter()).map(|(a, b)| a * b).sum();
                let s = 2.0 * d / vnorm2;
                for (xi, vi) in x.iter_mut().zip(&v) {
                    *xi -= s * vi;
                }
            }
        };
        for col in cols.iter_mut().skip(k) {
            apply(&mut col[k..n]);
        }
        apply(&mut y[k..n]);
    }
    let rmax = (0..p).map(|k| cols[k][k].abs()).fold(0.0, f64::max);
    if let Some(k) = (0..p).find(|&k| !(cols[k][k].abs() > 1e-10 * rmax)) {
        return Err(k);
    }
    // R⁻¹ by back substitution, column by column of the identity.
    let mut rinv = vec![vec![0.0; p]; p];
    for j in 0..p {
        for i in (0..=j).rev() {
            let mut s = if i == j { 1.0 } else { 0.0 };
            for (k, rk) in rinv.iter().enumerate().take(j + 1).skip(i + 1) {
                s -= cols[k][i] * rk[j];
            }
            rinv[i][j] = s / cols[i][i];
        }
    }
    let coef = (0..p).map(|i| (i..p).map(|k| rinv[i][k] * y[k]).sum()).collect();
    Ok((coef, rinv))
}

/// Fits ln K(T) by (weighted) linear least squares.
///
/// # Errors
/// [`ThermoError::LengthMismatch`], [`ThermoError::NonPositiveTemperature`],
/// [`ThermoError::InvalidConstant`] (non-finite value, non-positive K),
/// [`ThermoError::NonPositiveSigma`], [`ThermoError::TooFewPoints`] (fewer points than
/// parameters), [`ThermoError::TooFewDistinctTemperatures`] (repeated temperatures leave the fit
/// singular), [`ThermoError::NoDegreesOfFreedom`] (residual-based errors with n = p),
/// [`ThermoError::InvalidParameter`] (σ required by [`Weighting::KnownSigma`] or
/// [`Weighting::RelativeSigma`] but missing), [`ThermoError::Singular`].
///
/// # Examples
/// ```
/// use isosbestic::thermo::{fit_vant_hoff, ConstantScale, KData, VanThoffParams, GAS_CONSTANT};
/// // exact data from ΔH° = −20 kJ/mol, ΔS° = −30 J/(K mol)
/// let t: Vec<f64> = (0..6).map(|k| 290.0 + 10.0 * k as f64).collect();
/// let lnk = t.iter().map(|&t| 20000.0 / (GAS_CONSTANT * t) - 30.0 / GAS_CONSTANT).collect();
/// let fit = fit_vant_hoff(&KData::new(t, lnk, ConstantScale::Ln), &VanThoffParams::default().check()?)?;
/// approx::assert_relative_eq!(fit.delta_h_j_per_mol.value, -20000.0, max_relative = 1e-9);
/// approx::assert_relative_eq!(fit.delta_s_j_per_k_mol.value, -30.0, max_relative = 1e-9);
/// # Ok::<(), isosbestic::thermo::ThermoError>(())
/// ```
pub fn fit_vant_hoff(data: &KData, params: &ValidVanThoffParams) -> Result<VanThoffFit, ThermoError> {
    let params = params.0;
    let (ln_k, sigmas_given) = data.to_ln()?;
    let t = &data.temperatures_k;
    let n = t.len();
    let p = params.heat_capacity.n_params();
    if n < p {
        return Err(ThermoError::TooFewPoints {
            points: n,
            parameters: p,
        });
    }
    let mut sorted = t.clone();
    sorted.sort_by(f64::total_cmp);
    let distinct = 1 + sorted.windows(2).filter(|w| w[1] - w[0] > 1e-9 * w[1]).count();
    if distinct < p {
        return Err(ThermoError::TooFewDistinctTemperatures {
            distinct,
            parameters: p,
        });
    }
    let need_sigma = |w| ThermoError::InvalidParameter {
        name: "weighting",
        value: f64::NAN,
        reason: if w == Weighting::KnownSigma {
            "known-sigma weighting needs an uncertainty for every point"
        } else {
            "relative-sigma weighting needs an uncertainty for every point"
        },
    };
    let (sigmas, error_scale) = match (params.weighting, sigmas_given) {
        (Weighting::Auto, Some(s)) | (Weighting::KnownSigma, Some(s)) => (Some(s), ErrorScale::Known),
        (Weighting::RelativeSigma, Some(s)) => (Some(s), ErrorScale::Residual),
        (Weighting::Auto, None) | (Weighting::Unweighted, _) => (None, ErrorScale::Residual),
        (w @ (Weighting::KnownSigma | Weighting::RelativeSigma), None) => return Err(need_sigma(w)),
    };
    if error_scale == ErrorScale::Residual && n == p {
        return Err(ThermoError::NoDegreesOfFreedom {
            points: n,
            parameters: p,
        });
    }
    let w: Vec<f64> = match &sigmas {
        Some(s) => s.iter().map(|s| 1.0 / (s * s)).collect(),
        None => vec![1.0; n],
    };
    let sw: f64 = w.iter().sum();
    let x: Vec<f64> = t.iter().map(|t| 1.0 / t).collect();
    let xbar = x.iter().zip(&w).map(|(x, w)| x * w).sum::<f64>() / sw;
    let theta = params.heat_capacity.reference_k().unwrap_or(1.0);
    // Design in the centred basis z = [1, x − x̄, f(T), g(T)], rows scaled by √w, then columns
    // equilibrated to unit norm.
    let mut cols: Vec<Vec<f64>> = vec![Vec::with_capacity(n); p];
    for i in 0..n {
        let sq = w[i].sqrt();
        let (f, g) = cp_basis(t[i], theta);
        let z = [1.0, x[i] - xbar, f, g];
        for (j, col) in cols.iter_mut().enumerate() {
            col.push(sq * z[j]);
        }
    }
    let norms: Vec<f64> = cols
        .iter()
        .map(|c| c.iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    for (c, &nm) in cols.iter_mut().zip(&norms) {
        if nm > 0.0 {
            c.iter_mut().for_each(|v| *v /= nm);
        }
    }
    let yw: Vec<f64> = ln_k.iter().zip(&w).map(|(y, w)| y * w.sqrt()).collect();
    let (gamma_hat, rinv) = qr_least_squares(cols, yw).map_err(|k| ThermoError::Singular {
        reason: format!(
            "design column {k} is (nearly) a combination of the others; the temperatures do not determine all {p} parameters"
        ),
    })?;
    if norms.iter().any(|&nm| !(nm > 0.0)) {
        return Err(ThermoError::Singular {
            reason: "a design column is zero".into(),
        });
    }
    let gamma: Vec<f64> = gamma_hat.iter().zip(&norms).map(|(g, nm)| g / nm).collect();
    // Unscaled covariance in the z basis: (RᵀR)⁻¹ = R⁻¹R⁻ᵀ, divided by the column norms.
    let mut cov_z = vec![vec![0.0; p]; p];
    for i in 0..p {
        for j in 0..p {
            let s: f64 = (0..p).map(|k| rinv[i][k] * rinv[j][k]).sum();
            cov_z[i][j] = s / (norms[i] * norms[j]);
        }
    }
    // Residuals and statistics.
    let fitted: Vec<f64> = (0..n)
        .map(|i| {
            let (f, g) = cp_basis(t[i], theta);
            let z = [1.0, x[i] - xbar, f, g];
            (0..p).map(|j| gamma[j] * z[j]).sum()
        })
        .collect();
    let residuals: Vec<f64> = ln_k.iter().zip(&fitted).map(|(y, f)| y - f).collect();
    let chi2: f64 = residuals.iter().zip(&w).map(|(r, w)| w * r * r).sum();
    let dof = n - p;
    let reduced = (dof > 0).then(|| chi2 / dof as f64);
    let ybar = ln_k.iter().zip(&w).map(|(y, w)| y * w).sum::<f64>() / sw;
    let tss: f64 = ln_k.iter().zip(&w).map(|(y, w)| w * (y - ybar).powi(2)).sum();
    let r_squared = (tss > 0.0).then(|| 1.0 - chi2 / tss);
    let scale = match error_scale {
        ErrorScale::Known => 1.0,
        ErrorScale::Residual => reduced.unwrap_or(f64::NAN), // n > p checked above
    };
    // Map z-basis coefficients to physical parameters q = M γ:
    // ln K = γ0 + γ1 (x − x̄) + γ2 f + γ3 g = −q0 x/R + q1/R + q2 f/R + q3 g/R.
    let r = GAS_CONSTANT;
    let mut m = vec![vec![0.0; p]; p];
    m[0][1] = -r;
    m[1][0] = r;
    m[1][1] = -r * xbar;
    for (j, row) in m.iter_mut().enumerate().skip(2) {
        row[j] = r;
    }
    let q: Vec<f64> = (0..p).map(|i| (0..p).map(|j| m[i][j] * gamma[j]).sum()).collect();
    let mut cov = vec![vec![0.0; p]; p];
    for i in 0..p {
        for j in 0..p {
            let mut s = 0.0;
            for a in 0..p {
                for b in 0..p {
                    s += m[i][a] * cov_z[a][b] * m[j][b];
                }
            }
            cov[i][j] = scale * s;
        }
    }
    let correlation: Vec<Vec<f64>> = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| correlation_coefficient(cov[i][j], cov[i][i], cov[j][j], i == j))
                .collect()
        })
        .collect();
    let est = |i: usize| Estimate {
        value: q[i],
        std_error: cov[i][i].sqrt(),
    };
    let mut names = vec!["delta_h_j_per_mol".to_string(), "delta_s_j_per_k_mol".to_string()];
    if p > 2 {
        names.push("delta_cp_j_per_k_mol".into());
    }
    if p > 3 {
        names.push("delta_cp_slope_j_per_k2_mol".into());
    }
    let t_hm = n as f64 / x.iter().sum::<f64>();
    let mut fit = VanThoffFit {
        format_version: VANTHOFF_FORMAT_VERSION,
        heat_capacity: params.heat_capacity,
        error_scale,
        parameter_names: names,
        delta_h_j_per_mol: est(0),
        delta_s_j_per_k_mol: est(1),
        delta_cp_j_per_k_mol: (p > 2).then(|| est(2)),
        delta_cp_slope_j_per_k2_mol: (p > 3).then(|| est(3)),
        parameters: q,
        covariance: cov,
        correlation,
        harmonic_mean_temperature_k: t_hm,
        centred: CentredParameters {
            temperature_k: t_hm,
            ln_k: Estimate {
                value: f64::NAN,
                std_error: f64::NAN,
            },
            delta_h_j_per_mol: Estimate {
                value: f64::NAN,
                std_error: f64::NAN,
            },
            correlation: f64::NAN,
        },
        temperatures_k: t.clone(),
        ln_k,
        sigmas_ln_k: sigmas,
        residuals_ln_k: residuals,
        n_points: n,
        degrees_of_freedom: dof,
        chi_squared: chi2,
        reduced_chi_squared: reduced,
        r_squared,
    };
    let a = fit.ln_k_gradient(t_hm);
    let h = fit.delta_h_gradient(t_hm);
    let (va, vh, cah) = (fit.quad(&a, &a), fit.quad(&h, &h), fit.quad(&a, &h));
    fit.centred.ln_k = Estimate {
        value: dot(&a, &fit.parameters),
        std_error: va.sqrt(),
    };
    fit.centred.delta_h_j_per_mol = Estimate {
        value: dot(&h, &fit.parameters),
        std_error: vh.sqrt(),
    };
    fit.centred.correlation = correlation_coefficient(cah, va, vh, false);
    Ok(fit)
}

/// c_ab / √(c_aa c_bb), defined as 1 (a = b) or 0 (a ≠ b) when a variance is zero (exact data).
fn correlation_coefficient(cab: f64, caa: f64, cbb: f64, same: bool) -> f64 {
    if same {
        1.0
    } else if caa > 0.0 && cbb > 0.0 {
        cab / (caa * cbb).sqrt()
    } else {
        0.0
    }
}

impl std::fmt::Display for VanThoffFit {
    /// A short human summary: ΔH°, ΔS° (and ΔCp°) with standard errors, the centred
    /// parametrisation and the fit statistics.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let h = self.delta_h_j_per_mol;
        let s = self.delta_s_j_per_k_mol;
        writeln!(
            f,
            "ΔH° = {:.3} ± {:.3} kJ/mol",
            h.value / 1000.0,
            h.std_error / 1000.0
        )?;
        writeln!(f, "ΔS° = {:.2} ± {:.2} J/(K mol)", s.value, s.std_error)?;
        if let Some(c) = self.delta_cp_j_per_k_mol {
            writeln!(f, "ΔCp° = {:.1} ± {:.1} J/(K mol)", c.value, c.std_error)?;
        }
        if let Some(c) = self.delta_cp_slope_j_per_k2_mol {
            writeln!(f, "dΔCp°/dT = {:.3} ± {:.3} J/(K² mol)", c.value, c.std_error)?;
        }
        if let Some(theta) = self.heat_capacity.reference_k() {
            writeln!(f, "(ΔH°, ΔS°, ΔCp° at θ = {theta:.2} K)")?;
        }
        let c = &self.centred;
        writeln!(
            f,
            "at T_hm = {:.2} K: ln K = {:.4} ± {:.4}, ΔH° = {:.3} ± {:.3} kJ/mol (correlation {:.3})",
            c.temperature_k,
            c.ln_k.value,
            c.ln_k.std_error,
            c.delta_h_j_per_mol.value / 1000.0,
            c.delta_h_j_per_mol.std_error / 1000.0,
            c.correlation
        )?;
        write!(
            f,
            "{} points, {} degrees of freedom, χ² = {:.4}, errors {}",
            self.n_points,
            self.degrees_of_freedom,
            self.chi_squared,
            match self.error_scale {
                ErrorScale::Known => "from the given uncertainties",
                ErrorScale::Residual => "from the residual scatter",
            }
        )
    }
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

impl VanThoffFit {
    fn theta(&self) -> f64 {
        self.heat_capacity.reference_k().unwrap_or(1.0)
    }

    /// aᵀ C b with the parameter covariance C.
    fn quad(&self, a: &[f64], b: &[f64]) -> f64 {
        let p = self.parameters.len();
        (0..p)
            .map(|i| (0..p).map(|j| a[i] * self.covariance[i][j] * b[j]).sum::<f64>())
            .sum()
    }

    /// ∂ ln K(T)/∂q.
    fn ln_k_gradient(&self, t: f64) -> Vec<f64> {
        let (f, g) = cp_basis(t, self.theta());
        let r = GAS_CONSTANT;
        let full = [-1.0 / (r * t), 1.0 / r, f / r, g / r];
        full[..self.parameters.len()].to_vec()
    }

    /// ∂ ΔH°(T)/∂q.
    fn delta_h_gradient(&self, t: f64) -> Vec<f64> {
        let d = t - self.theta();
        let full = [1.0, 0.0, d, 0.5 * d * d];
        full[..self.parameters.len()].to_vec()
    }

    /// ∂ ΔS°(T)/∂q.
    fn delta_s_gradient(&self, t: f64) -> Vec<f64> {
        let theta = self.theta();
        let l = (t / theta).ln();
        let full = [0.0, 1.0, l, t - theta - theta * l];
        full[..self.parameters.len()].to_vec()
    }

    fn estimate(&self, g: &[f64]) -> Estimate {
        Estimate {
            value: dot(g, &self.parameters),
            std_error: self.quad(g, g).sqrt(),
        }
    }

    /// Fitted ln K at `temperature_k`, with its standard error.
    pub fn ln_k_at(&self, temperature_k: f64) -> Estimate {
        self.estimate(&self.ln_k_gradient(temperature_k))
    }

    /// ΔH°(T), J/mol, with its standard error (constant without a heat-capacity term).
    pub fn delta_h_at(&self, temperature_k: f64) -> Estimate {
        self.estimate(&self.delta_h_gradient(temperature_k))
    }

    /// ΔS°(T), J K⁻¹ mol⁻¹, with its standard error.
    pub fn delta_s_at(&self, temperature_k: f64) -> Estimate {
        self.estimate(&self.delta_s_gradient(temperature_k))
    }

    /// ΔG°(T) = −RT ln K(T), J/mol, with its standard error (RT · se(ln K)).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{fit_vant_hoff, ConstantScale, KData, VanThoffParams, GAS_CONSTANT};
    /// let t = vec![280.0, 300.0, 320.0];
    /// let lnk = t.iter().map(|&t| 10000.0 / (GAS_CONSTANT * t) + 5.0 / GAS_CONSTANT).collect();
    /// let fit = fit_vant_hoff(&KData::new(t, lnk, ConstantScale::Ln), &VanThoffParams::default().check()?)?;
    /// // ΔG° = ΔH° − TΔS° = −10000 − 310·5
    /// approx::assert_relative_eq!(fit.delta_g_at(310.0).value, -11550.0, max_relative = 1e-9);
    /// # Ok::<(), isosbestic::thermo::ThermoError>(())
    /// ```
    pub fn delta_g_at(&self, temperature_k: f64) -> Estimate {
        let l = self.ln_k_at(temperature_k);
        let rt = GAS_CONSTANT * temperature_k;
        Estimate {
            value: -rt * l.value,
            std_error: rt * l.std_error,
        }
    }

    /// Confidence band of ln K over `temperatures_k` at confidence `level` (e.g. 0.95):
    /// ln K ± q·se, with q the two-sided quantile of Student's t (residual-based errors,
    /// n − p degrees of freedom) or of the normal distribution (known σ).
    ///
    /// # Errors
    /// [`ThermoError::InvalidParameter`] unless 0 < level < 1;
    /// [`ThermoError::NonPositiveTemperature`] for a bad temperature (naming its index).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::thermo::{fit_vant_hoff, ConstantScale, KData, VanThoffParams};
    /// let t = vec![290.0, 300.0, 310.0, 320.0];
    /// let lnk = vec![2.00, 1.81, 1.59, 1.42];
    /// let data = KData::new(t, lnk, ConstantScale::Ln).with_sigmas(vec![0.02; 4]);
    /// let fit = fit_vant_hoff(&data, &VanThoffParams::default().check()?)?;
    /// let b = fit.band(&[305.0], 0.95)?;
    /// // known σ: the normal quantile 1.95996 (common practice)
    /// approx::assert_relative_eq!(b[0].upper - b[0].ln_k, 1.959964 * b[0].std_error, max_relative = 1e-6);
    /// # Ok::<(), isosbestic::thermo::ThermoError>(())
    /// ```
    pub fn band(&self, temperatures_k: &[f64], level: f64) -> Result<Vec<BandPoint>, ThermoError> {
        if !(level > 0.0 && level < 1.0) {
            return Err(ThermoError::InvalidParameter {
                name: "level",
                value: level,
                reason: "a confidence level must lie strictly between 0 and 1",
            });
        }
        let p = 0.5 * (1.0 + level);
        let q = match self.error_scale {
            ErrorScale::Known => normal_quantile(p),
            ErrorScale::Residual => student_t_quantile(p, self.degrees_of_freedom as f64),
        };
        temperatures_k
            .iter()
            .enumerate()
            .map(|(index, &t)| {
                if !(t.is_finite() && t > 0.0) {
                    return Err(ThermoError::NonPositiveTemperature {
                        index,
                        temperature_k: t,
                    });
                }
                let e = self.ln_k_at(t);
                Ok(BandPoint {
                    temperature_k: t,
                    ln_k: e.value,
                    std_error: e.std_error,
                    lower: e.value - q * e.std_error,
                    upper: e.value + q * e.std_error,
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::{assert_abs_diff_eq, assert_relative_eq};

    fn exact(dh: f64, ds: f64, t: &[f64]) -> Vec<f64> {
        t.iter()
            .map(|&t| -dh / (GAS_CONSTANT * t) + ds / GAS_CONSTANT)
            .collect()
    }

    #[test]
    fn log10_and_linear_inputs_give_the_same_fit_as_ln() {
        let t = vec![285.0, 295.0, 305.0, 315.0];
        let mut l = exact(-15000.0, 12.0, &t);
        l[1] += 0.01; // some scatter
        let p = VanThoffParams::default().check().unwrap();
        let a = fit_vant_hoff(&KData::new(t.clone(), l.clone(), ConstantScale::Ln), &p).unwrap();
        let b = fit_vant_hoff(
            &KData::new(
                t.clone(),
                l.iter().map(|v| v / LN_10).collect(),
                ConstantScale::Log10,
            ),
            &p,
        )
        .unwrap();
        let c = fit_vant_hoff(
            &KData::new(t, l.iter().map(|v| v.exp()).collect(), ConstantScale::Linear),
            &p,
        )
        .unwrap();
        for f in [&b, &c] {
            assert_relative_eq!(
                f.delta_h_j_per_mol.value,
                a.delta_h_j_per_mol.value,
                max_relative = 1e-10
            );
            assert_relative_eq!(
                f.delta_h_j_per_mol.std_error,
                a.delta_h_j_per_mol.std_error,
                max_relative = 1e-8
            );
        }
    }

    #[test]
    fn bad_points_are_typed_errors_naming_the_point() {
        let p = VanThoffParams::default().check().unwrap();
        let e = fit_vant_hoff(
            &KData::new(vec![300.0, -1.0, 320.0], vec![1.0; 3], ConstantScale::Ln),
            &p,
        );
        assert!(matches!(
            e,
            Err(ThermoError::NonPositiveTemperature { index: 1, .. })
        ));
        let e = fit_vant_hoff(
            &KData::new(
                vec![300.0, 310.0, 320.0],
                vec![1.0, 0.0, 2.0],
                ConstantScale::Linear,
            ),
            &p,
        );
        assert!(matches!(e, Err(ThermoError::InvalidConstant { index: 1, .. })));
        let e = fit_vant_hoff(
            &KData::new(
                vec![300.0, 310.0, 320.0],
                vec![1.0, f64::NAN, 2.0],
                ConstantScale::Ln,
            ),
            &p,
        );
        assert!(matches!(e, Err(ThermoError::InvalidConstant { index: 1, .. })));
        let e = fit_vant_hoff(
            &KData::new(vec![300.0, 310.0, 320.0], vec![1.0; 3], ConstantScale::Ln)
                .with_sigmas(vec![0.1, 0.0, 0.1]),
            &p,
        );
        assert!(matches!(e, Err(ThermoError::NonPositiveSigma { index: 1, .. })));
        let e = fit_vant_hoff(&KData::new(vec![300.0], vec![1.0], ConstantScale::Ln), &p);
        assert!(matches!(
            e,
            Err(ThermoError::TooFewPoints {
                points: 1,
                parameters: 2
            })
        ));
        let e = fit_vant_hoff(
            &KData::new(vec![300.0, 300.0, 300.0], vec![1.0, 1.1, 0.9], ConstantScale::Ln),
            &p,
        );
        assert!(matches!(
            e,
            Err(ThermoError::TooFewDistinctTemperatures { distinct: 1, .. })
        ));
        let e = fit_vant_hoff(
            &KData::new(vec![300.0, 310.0], vec![1.0, 1.1], ConstantScale::Ln),
            &p,
        );
        assert!(matches!(e, Err(ThermoError::NoDegreesOfFreedom { .. })));
        let pk = VanThoffParams::default()
            .weighting(Weighting::KnownSigma)
            .check()
            .unwrap();
        let e = fit_vant_hoff(
            &KData::new(vec![300.0, 310.0, 320.0], vec![1.0; 3], ConstantScale::Ln),
            &pk,
        );
        assert!(matches!(
            e,
            Err(ThermoError::InvalidParameter {
                name: "weighting",
                ..
            })
        ));
    }

    #[test]
    fn replicates_at_a_temperature_are_fine_when_enough_temperatures_remain() {
        let t = vec![300.0, 300.0, 320.0, 320.0];
        let l = vec![1.0, 1.02, 0.5, 0.52];
        let p = VanThoffParams::default().check().unwrap();
        let f = fit_vant_hoff(&KData::new(t, l, ConstantScale::Ln), &p).unwrap();
        assert_eq!(f.degrees_of_freedom, 2);
    }

    #[test]
    fn the_band_contains_the_fit_and_widens_away_from_the_data() {
        let t: Vec<f64> = (0..8).map(|k| 290.0 + 5.0 * f64::from(k)).collect();
        let mut l = exact(30000.0, 80.0, &t);
        for (i, v) in l.iter_mut().enumerate() {
            *v += if i % 2 == 0 { 0.02 } else { -0.02 };
        }
        let p = VanThoffParams::default().check().unwrap();
        let f = fit_vant_hoff(&KData::new(t, l, ConstantScale::Ln), &p).unwrap();
        let b = f.band(&[f.harmonic_mean_temperature_k, 360.0], 0.95).unwrap();
        assert!(b[0].lower < b[0].ln_k && b[0].ln_k < b[0].upper);
        assert!(b[1].upper - b[1].lower > b[0].upper - b[0].lower);
        assert!(f.band(&[300.0], 1.0).is_err());
    }

    #[test]
    fn fit_round_trips_through_json() {
        let t = vec![280.0, 300.0, 320.0];
        let p = VanThoffParams::default().check().unwrap();
        let f = fit_vant_hoff(
            &KData::new(t.clone(), exact(1000.0, 1.0, &t), ConstantScale::Ln),
            &p,
        )
        .unwrap();
        let s = serde_json::to_string(&f).unwrap();
        let g: VanThoffFit = serde_json::from_str(&s).unwrap();
        assert!(f.to_string().contains("kJ/mol"));
        assert_abs_diff_eq!(
            g.delta_h_j_per_mol.value,
            f.delta_h_j_per_mol.value,
            epsilon = 1e-9
        );
        assert_eq!(g.parameter_names, f.parameter_names);
    }
}
