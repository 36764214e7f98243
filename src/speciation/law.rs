//! Formation laws: log₁₀ β as a function of temperature, with analytic derivatives.
//!
//! Every law is parametrised at a reference temperature θ (`t_ref_k`, default 298.15 K) so that
//! its parameters are nearly uncorrelated when θ lies inside the measured range. With
//! K = β, ln K = ln 10 · log₁₀ β and R = 8.314462618 J mol⁻¹ K⁻¹ (CODATA 2018):
//!
//! | law | parameters | ln β(T) |
//! |---|---|---|
//! | [`FixedLaw`] | log₁₀ β | ln 10 · log₁₀ β (independent of T) |
//! | [`VanTHoffLaw`] | log₁₀ β(θ), ΔH°(θ) | ln β(θ) − (ΔH°/R)(1/T − 1/θ) |
//! | [`HeatCapacityLaw`] | log₁₀ β(θ), ΔH°(θ), ΔCp°(θ), dΔCp°/dT | see below |
//!
//! The heat-capacity form (Clarke & Glew, Trans. Faraday Soc. 62 (1966) 539) integrates the van 't
//! Hoff equation d ln K/dT = ΔH°(T)/(RT²) with ΔCp°(T) = ΔCp°(θ) + s·(T − θ), so that
//! ΔH°(T) = ΔH°(θ) + ΔCp°(θ)(T − θ) + ½ s (T − θ)²:
//!
//! ```text
//! ln β(T) = ln β(θ) + (1/R)·[ ΔH°(θ)(1/θ − 1/T)
//!                            + ΔCp°(θ)(ln(T/θ) + θ/T − 1)
//!                            + ½ s ((T² − θ²)/T − 2θ ln(T/θ)) ]
//! ```
//!
//! Standard quantities at θ follow from ΔG° = −Rθ ln β(θ) and ΔS° = (ΔH° − ΔG°)/θ
//! ([`FormationLaw::to_standard`], with the covariance carried through the Jacobian of this
//! linear map).

use super::SpeciationError;
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;

/// Molar gas constant R, J mol⁻¹ K⁻¹ (CODATA 2018, exact since the 2019 SI redefinition).
pub const GAS_CONSTANT: f64 = 8.314462618;

/// Default reference temperature θ of the formation laws, K (25 °C).
pub const DEFAULT_REFERENCE_K: f64 = 298.15;

fn default_reference_k() -> f64 {
    DEFAULT_REFERENCE_K
}

/// One parameter of a formation law: its value and whether a fit may change it.
///
/// In a model file: `{ value = 2.5 }` (free) or `{ value = 2.5, fixed = true }`.
///
/// # Examples
/// ```
/// use isosbestic::speciation::Parameter;
/// let p: Parameter = toml::from_str("value = 2.5\nfixed = true").unwrap();
/// assert_eq!(p, Parameter::fixed(2.5));
/// assert!(!Parameter::free(1.0).fixed);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Parameter {
    /// The value, in the unit [`FormationLaw::parameter_units`] states.
    pub value: f64,
    /// `true`: held at `value` by a fit; `false` (default): fitted.
    #[serde(default)]
    pub fixed: bool,
}

impl Parameter {
    /// A parameter a fit may change.
    pub fn free(value: f64) -> Self {
        Self { value, fixed: false }
    }

    /// A parameter held constant.
    pub fn fixed(value: f64) -> Self {
        Self { value, fixed: true }
    }
}

/// Standard thermodynamic quantities of formation at the reference temperature θ, with their
/// covariance propagated from the covariance of a law's free parameters.
///
/// The order of [`StandardQuantities::covariance`] rows and columns is
/// [ΔG°, ΔH°, ΔS°, ΔCp°].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StandardQuantities {
    /// Reference temperature θ, K.
    pub t_ref_k: f64,
    /// ΔG°(θ) = −Rθ ln β(θ), J/mol.
    pub dg_j_mol: f64,
    /// ΔH°(θ), J/mol.
    pub dh_j_mol: f64,
    /// ΔS°(θ) = (ΔH° − ΔG°)/θ, J K⁻¹ mol⁻¹.
    pub ds_j_k_mol: f64,
    /// ΔCp°(θ), J K⁻¹ mol⁻¹.
    pub dcp_j_k_mol: f64,
    /// Covariance of [ΔG°, ΔH°, ΔS°, ΔCp°] (J/mol and J K⁻¹ mol⁻¹ units squared / multiplied).
    pub covariance: [[f64; 4]; 4],
}

impl StandardQuantities {
    /// Standard errors √diag(covariance) of [ΔG°, ΔH°, ΔS°, ΔCp°]. A quantity the data do not
    /// determine has a NaN or infinite variance and gets a NaN or infinite standard error, never 0.
    pub fn standard_errors(&self) -> [f64; 4] {
        std::array::from_fn(|i| {
            let v = self.covariance[i][i];
            if v.is_nan() { f64::NAN } else { v.max(0.0).sqrt() }
        })
    }
}

/// The extension point for log β(T): a law maps its parameter values and a temperature to
/// log₁₀ β, with the analytic gradient with respect to the parameters.
///
/// Methods taking `values` evaluate the law at those parameter values (as a fit does, without
/// copying the law); the `*_at` conveniences use the law's stored values.
pub trait FormationLaw {
    /// Parameter names, in the order of `values`.
    fn parameter_names(&self) -> &'static [&'static str];
    /// Parameter units, in the same order.
    fn parameter_units(&self) -> &'static [&'static str];
    /// The stored parameters (values and fixed flags).
    fn parameters(&self) -> Vec<Parameter>;
    /// Reference temperature θ, K.
    fn reference_temperature_k(&self) -> f64;
    /// log₁₀ β at temperature `t_k` for the parameter values `values`.
    ///
    /// # Panics
    /// If `values` is shorter than the number of parameters.
    fn log10_beta_with(&self, values: &[f64], t_k: f64) -> f64;
    /// log₁₀ β at `t_k` and its gradient ∂ log₁₀ β/∂ values written to `gradient`.
    ///
    /// # Panics
    /// If `values` or `gradient` is shorter than the number of parameters.
    fn log10_beta_gradient_with(&self, values: &[f64], t_k: f64, gradient: &mut [f64]) -> f64;
    /// [ΔG°, ΔH°, ΔS°, ΔCp°] at θ for `values` and the Jacobian of that map (4 rows × number of
    /// parameters, row-major).
    fn standard_with(&self, values: &[f64]) -> ([f64; 4], Vec<f64>);

    /// Number of parameters.
    fn n_parameters(&self) -> usize {
        self.parameter_names().len()
    }

    /// log₁₀ β at `t_k` with the stored parameter values.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::speciation::{FormationLaw, Parameter, VanTHoffLaw};
    /// // ΔH° = 0: log β does not change with T
    /// let law = VanTHoffLaw::new(Parameter::free(3.0), Parameter::fixed(0.0));
    /// approx::assert_relative_eq!(law.log10_beta_at(350.0), 3.0);
    /// ```
    fn log10_beta_at(&self, t_k: f64) -> f64 {
        let v: Vec<f64> = self.parameters().iter().map(|p| p.value).collect();
        self.log10_beta_with(&v, t_k)
    }

    /// ΔG°, ΔH°, ΔS°, ΔCp° at θ with their covariance, from the covariance of the law's FREE
    /// parameters (row-major, free parameters in the order of [`FormationLaw::parameters`]).
    /// Fixed parameters contribute no variance.
    ///
    /// # Errors
    /// [`SpeciationError::CovarianceShape`] when the covariance is not (number of free
    /// parameters)².
    ///
    /// # Examples
    /// ```
    /// use isosbestic::speciation::{FormationLaw, Parameter, VanTHoffLaw, GAS_CONSTANT};
    /// let law = VanTHoffLaw::new(Parameter::free(2.0), Parameter::free(-10_000.0));
    /// // σ(log β) = 0.01, σ(ΔH°) = 500 J/mol, uncorrelated
    /// let s = law.to_standard(&[1e-4, 0.0, 0.0, 250_000.0]).unwrap();
    /// let theta = 298.15;
    /// let ln10 = std::f64::consts::LN_10;
    /// approx::assert_relative_eq!(s.dg_j_mol, -GAS_CONSTANT * theta * ln10 * 2.0);
    /// approx::assert_relative_eq!(s.ds_j_k_mol, (-10_000.0 - s.dg_j_mol) / theta);
    /// // σ(ΔG°) = Rθ ln10 · σ(log β)
    /// approx::assert_relative_eq!(s.standard_errors()[0], GAS_CONSTANT * theta * ln10 * 0.01);
    /// ```
    fn to_standard(&self, covariance_of_free: &[f64]) -> Result<StandardQuantities, SpeciationError> {
        let params = self.parameters();
        let values: Vec<f64> = params.iter().map(|p| p.value).collect();
        let free: Vec<usize> = (0..params.len()).filter(|&i| !params[i].fixed).collect();
        let nf = free.len();
        if covariance_of_free.len() != nf * nf {
            return Err(SpeciationError::CovarianceShape {
                free: nf,
                found: covariance_of_free.len(),
            });
        }
        let (q, jac) = self.standard_with(&values);
        let np = params.len();
        let mut cov = [[0.0; 4]; 4];
        for (a, row) in cov.iter_mut().enumerate() {
            for (b, out) in row.iter_mut().enumerate() {
                let mut s = 0.0;
                for (i, &pi) in free.iter().enumerate() {
                    for (j, &pj) in free.iter().enumerate() {
                        s += jac[a * np + pi] * covariance_of_free[i * nf + j] * jac[b * np + pj];
                    }
                }
                *out = s;
            }
        }
        Ok(StandardQuantities {
            t_ref_k: self.reference_temperature_k(),
            dg_j_mol: q[0],
            dh_j_mol: q[1],
            ds_j_k_mol: q[2],
            dcp_j_k_mol: q[3],
            covariance: cov,
        })
    }
}

/// Temperature-independent log β (ΔH° = 0). Its one parameter may still be fitted.
/// [`FormationLaw::to_standard`] reports ΔG° and ΔS° = −ΔG°/θ at θ = 298.15 K.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FixedLaw {
    /// log₁₀ β (dimensionless; β in the molar standard state).
    pub log_beta: Parameter,
}

/// van 't Hoff law with constant ΔH°: ln β(T) = ln β(θ) − (ΔH°/R)(1/T − 1/θ).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VanTHoffLaw {
    /// log₁₀ β at θ.
    pub log_beta_ref: Parameter,
    /// ΔH°, J/mol.
    pub dh_ref: Parameter,
    /// Reference temperature θ, K (default 298.15).
    #[serde(default = "default_reference_k")]
    pub t_ref_k: f64,
}

impl VanTHoffLaw {
    /// A van 't Hoff law at θ = 298.15 K.
    pub fn new(log_beta_ref: Parameter, dh_ref: Parameter) -> Self {
        Self {
            log_beta_ref,
            dh_ref,
            t_ref_k: DEFAULT_REFERENCE_K,
        }
    }
}

/// Heat-capacity (Clarke–Glew) law: ΔCp°(T) = ΔCp°(θ) + s·(T − θ) (see the module docs).
///
/// # Examples
/// ```
/// use isosbestic::speciation::{FormationLaw, HeatCapacityLaw, Parameter, GAS_CONSTANT};
/// // Clarke–Glew check values of /work/shared/REFERENCES.md [C]:
/// // ΔG°(θ) = −5 kJ/mol, ΔH°(θ) = 40 kJ/mol, ΔCp° = −200 J/(K mol), s = 1.5 J/(K² mol)
/// let theta = 298.15;
/// let log_beta_ref = 5000.0 / (GAS_CONSTANT * theta * std::f64::consts::LN_10);
/// let law = HeatCapacityLaw {
///     log_beta_ref: Parameter::free(log_beta_ref),
///     dh_ref: Parameter::free(40_000.0),
///     dcp: Parameter::free(-200.0),
///     dcp_slope: Some(Parameter::free(1.5)),
///     t_ref_k: theta,
/// };
/// let ln_k = law.log10_beta_at(323.15) * std::f64::consts::LN_10;
/// approx::assert_abs_diff_eq!(ln_k, 3.19405491, epsilon = 1e-7);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HeatCapacityLaw {
    /// log₁₀ β at θ.
    pub log_beta_ref: Parameter,
    /// ΔH°(θ), J/mol.
    pub dh_ref: Parameter,
    /// ΔCp°(θ), J K⁻¹ mol⁻¹.
    pub dcp: Parameter,
    /// Optional dΔCp°/dT, J K⁻² mol⁻¹ (absent: ΔCp° constant).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dcp_slope: Option<Parameter>,
    /// Reference temperature θ, K (default 298.15).
    #[serde(default = "default_reference_k")]
    pub t_ref_k: f64,
}

/// Any of the built-in formation laws, as written in a model file (`kind = "fixed"`,
/// `"van_t_hoff"` or `"heat_capacity"`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Law {
    /// [`FixedLaw`].
    Fixed(FixedLaw),
    /// [`VanTHoffLaw`].
    VanTHoff(VanTHoffLaw),
    /// [`HeatCapacityLaw`].
    HeatCapacity(HeatCapacityLaw),
}

impl Law {
    /// A temperature-independent law with a fixed log β (used for free components, log β = 0).
    pub fn fixed_log_beta(log_beta: f64) -> Self {
        Law::Fixed(FixedLaw {
            log_beta: Parameter::fixed(log_beta),
        })
    }

    fn as_dyn(&self) -> &dyn FormationLaw {
        match self {
            Law::Fixed(l) => l,
            Law::VanTHoff(l) => l,
            Law::HeatCapacity(l) => l,
        }
    }
}

const R_LN10: f64 = GAS_CONSTANT * LN_10;

impl FormationLaw for FixedLaw {
    fn parameter_names(&self) -> &'static [&'static str] {
        &["log_beta"]
    }
    fn parameter_units(&self) -> &'static [&'static str] {
        &["1"]
    }
    fn parameters(&self) -> Vec<Parameter> {
        vec![self.log_beta]
    }
    fn reference_temperature_k(&self) -> f64 {
        DEFAULT_REFERENCE_K
    }
    fn log10_beta_with(&self, values: &[f64], _t_k: f64) -> f64 {
        values[0]
    }
    fn log10_beta_gradient_with(&self, values: &[f64], _t_k: f64, gradient: &mut [f64]) -> f64 {
        gradient[0] = 1.0;
        values[0]
    }
    fn standard_with(&self, values: &[f64]) -> ([f64; 4], Vec<f64>) {
        // ΔH° = ΔCp° = 0; ΔG° = −Rθ ln10 log β; ΔS° = −ΔG°/θ = R ln10 log β
        let theta = DEFAULT_REFERENCE_K;
        let dg = -R_LN10 * theta * values[0];
        (
            [dg, 0.0, -dg / theta, 0.0],
            vec![-R_LN10 * theta, 0.0, R_LN10, 0.0],
        )
    }
}

impl FormationLaw for VanTHoffLaw {
    fn parameter_names(&self) -> &'static [&'static str] {
        &["log_beta_ref", "dh_ref"]
    }
    fn parameter_units(&self) -> &'static [&'static str] {
        &["1", "J/mol"]
    }
    fn parameters(&self) -> Vec<Parameter> {
        vec![self.log_beta_ref, self.dh_ref]
    }
    fn reference_temperature_k(&self) -> f64 {
        self.t_ref_k
    }
    fn log10_beta_with(&self, values: &[f64], t_k: f64) -> f64 {
        values[0] - values[1] * (1.0 / t_k - 1.0 / self.t_ref_k) / R_LN10
    }
    fn log10_beta_gradient_with(&self, values: &[f64], t_k: f64, gradient: &mut [f64]) -> f64 {
        let x = (1.0 / t_k - 1.0 / self.t_ref_k) / R_LN10;
        gradient[0] = 1.0;
        gradient[1] = -x;
        values[0] - values[1] * x
    }
    fn standard_with(&self, values: &[f64]) -> ([f64; 4], Vec<f64>) {
        let theta = self.t_ref_k;
        let dg = -R_LN10 * theta * values[0];
        let dh = values[1];
        (
            [dg, dh, (dh - dg) / theta, 0.0],
            vec![
                -R_LN10 * theta,
                0.0, // ΔG°
                0.0,
                1.0, // ΔH°
                R_LN10,
                1.0 / theta, // ΔS°
                0.0,
                0.0, // ΔCp°
            ],
        )
    }
}

impl HeatCapacityLaw {
    /// The three temperature functions multiplying ΔH°(θ), ΔCp°(θ) and s in ln β(T) − ln β(θ),
    /// already divided by R ln 10 (so they give log₁₀ β).
    fn basis(&self, t_k: f64) -> [f64; 3] {
        let th = self.t_ref_k;
        let l = (t_k / th).ln();
        [
            (1.0 / th - 1.0 / t_k) / R_LN10,
            (l + th / t_k - 1.0) / R_LN10,
            0.5 * ((t_k * t_k - th * th) / t_k - 2.0 * th * l) / R_LN10,
        ]
    }
}

impl FormationLaw for HeatCapacityLaw {
    fn parameter_names(&self) -> &'static [&'static str] {
        if self.dcp_slope.is_some() {
            &["log_beta_ref", "dh_ref", "dcp", "dcp_slope"]
        } else {
            &["log_beta_ref", "dh_ref", "dcp"]
        }
    }
    fn parameter_units(&self) -> &'static [&'static str] {
        if self.dcp_slope.is_some() {
            &["1", "J/mol", "J/(K mol)", "J/(K^2 mol)"]
        } else {
            &["1", "J/mol", "J/(K mol)"]
        }
    }
    fn parameters(&self) -> Vec<Parameter> {
        let mut p = vec![self.log_beta_ref, self.dh_ref, self.dcp];
        p.extend(self.dcp_slope);
        p
    }
    fn reference_temperature_k(&self) -> f64 {
        self.t_ref_k
    }
    fn log10_beta_with(&self, values: &[f64], t_k: f64) -> f64 {
        let b = self.basis(t_k);
        let s = if self.dcp_slope.is_some() {
            values[3] * b[2]
        } else {
            0.0
        };
        values[0] + values[1] * b[0] + values[2] * b[1] + s
    }
    fn log10_beta_gradient_with(&self, values: &[f64], t_k: f64, gradient: &mut [f64]) -> f64 {
        let b = self.basis(t_k);
        gradient[0] = 1.0;
        gradient[1] = b[0];
        gradient[2] = b[1];
        let s = if self.dcp_slope.is_some() {
            gradient[3] = b[2];
            values[3] * b[2]
        } else {
            0.0
        };
        values[0] + values[1] * b[0] + values[2] * b[1] + s
    }
    fn standard_with(&self, values: &[f64]) -> ([f64; 4], Vec<f64>) {
        let np = self.n_parameters();
        let theta = self.t_ref_k;
        let dg = -R_LN10 * theta * values[0];
        let dh = values[1];
        let mut jac = vec![0.0; 4 * np];
        jac[0] = -R_LN10 * theta; // ΔG°/log β
        jac[np + 1] = 1.0; // ΔH°/ΔH°
        jac[2 * np] = R_LN10; // ΔS°/log β
        jac[2 * np + 1] = 1.0 / theta; // ΔS°/ΔH°
        jac[3 * np + 2] = 1.0; // ΔCp°/ΔCp°
        ([dg, dh, (dh - dg) / theta, values[2]], jac)
    }
}

impl FormationLaw for Law {
    fn parameter_names(&self) -> &'static [&'static str] {
        self.as_dyn().parameter_names()
    }
    fn parameter_units(&self) -> &'static [&'static str] {
        self.as_dyn().parameter_units()
    }
    fn parameters(&self) -> Vec<Parameter> {
        self.as_dyn().parameters()
    }
    fn reference_temperature_k(&self) -> f64 {
        self.as_dyn().reference_temperature_k()
    }
    fn log10_beta_with(&self, values: &[f64], t_k: f64) -> f64 {
        self.as_dyn().log10_beta_with(values, t_k)
    }
    fn log10_beta_gradient_with(&self, values: &[f64], t_k: f64, gradient: &mut [f64]) -> f64 {
        self.as_dyn().log10_beta_gradient_with(values, t_k, gradient)
    }
    fn standard_with(&self, values: &[f64]) -> ([f64; 4], Vec<f64>) {
        self.as_dyn().standard_with(values)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn cg(slope: Option<f64>) -> HeatCapacityLaw {
        HeatCapacityLaw {
            log_beta_ref: Parameter::free(1.2),
            dh_ref: Parameter::free(-30_000.0),
            dcp: Parameter::free(250.0),
            dcp_slope: slope.map(Parameter::free),
            t_ref_k: 310.0,
        }
    }

    #[test]
    fn every_law_returns_its_reference_value_at_the_reference_temperature() {
        assert_relative_eq!(cg(Some(2.0)).log10_beta_at(310.0), 1.2);
        let v = VanTHoffLaw::new(Parameter::free(4.0), Parameter::free(5e4));
        assert_relative_eq!(v.log10_beta_at(298.15), 4.0);
    }

    #[test]
    fn heat_capacity_law_without_dcp_reduces_to_van_t_hoff() {
        let mut h = cg(None);
        h.dcp = Parameter::fixed(0.0);
        let v = VanTHoffLaw {
            log_beta_ref: h.log_beta_ref,
            dh_ref: h.dh_ref,
            t_ref_k: 310.0,
        };
        for t in [273.15, 300.0, 350.0] {
            assert_relative_eq!(h.log10_beta_at(t), v.log10_beta_at(t), max_relative = 1e-13);
        }
    }

    #[test]
    fn van_t_hoff_slope_in_inverse_temperature_is_minus_dh_over_r_ln10() {
        // d log β / d(1/T) = −ΔH°/(R ln 10): the van 't Hoff equation itself
        let v = VanTHoffLaw::new(Parameter::free(1.0), Parameter::free(20_000.0));
        let (t1, t2) = (290.0, 340.0);
        let slope = (v.log10_beta_at(t2) - v.log10_beta_at(t1)) / (1.0 / t2 - 1.0 / t1);
        assert_relative_eq!(slope, -20_000.0 / (GAS_CONSTANT * LN_10), max_relative = 1e-12);
    }

    #[test]
    fn law_serde_uses_a_kind_tag_and_rejects_unknown_fields() {
        let l: Law = toml::from_str(
            "kind = \"van_t_hoff\"\nlog_beta_ref = { value = 2.0 }\ndh_ref = { value = -1e4, fixed = true }",
        )
        .unwrap();
        assert_eq!(
            l,
            Law::VanTHoff(VanTHoffLaw::new(Parameter::free(2.0), Parameter::fixed(-1e4)))
        );
        let bad = toml::from_str::<Law>("kind = \"fixed\"\nlog_beta = { value = 1.0 }\ndh = 3.0");
        assert!(bad.is_err());
    }

    #[test]
    fn to_standard_rejects_a_covariance_of_the_wrong_size() {
        let l = cg(Some(1.0));
        assert_eq!(
            l.to_standard(&[1.0; 9]),
            Err(SpeciationError::CovarianceShape { free: 4, found: 9 })
        );
    }
}
