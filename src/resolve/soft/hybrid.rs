//! The hybrid hard–soft option (de Juan, Maeder, Martínez, Tauler, Chemom. Intell. Lab. Syst.
//! 54 (2000) 123): at every iteration, after the constrained C step, the profiles of selected
//! species are replaced by those of an equilibrium model whose free law parameters θ are
//! refitted to the current soft profiles.
//!
//! The fit minimises, over θ (warm-started from the previous iteration's θ),
//!
//! ```text
//! Σ_k ‖c_k^soft − α_k·c_m(k)(θ)‖² / ‖c_k^soft‖²
//! ```
//!
//! where c_m(θ) is the model species' concentration from
//! [`crate::speciation::speciate_all_in_medium`] at each sample's temperature and totals, and
//! α_k is the least-squares scale of that column, α_k = c·t/c·c (eliminated in closed form;
//! α_k = 1 when closure fixes the scale of C). Levenberg–Marquardt ([`crate::resolve::lm`]) does
//! the fit with the exact Jacobian
//!
//! ```text
//! ∂(α c)/∂θ_p = α ∂c/∂θ_p + c (t·∂c/∂θ_p − 2α c·∂c/∂θ_p)/(c·c),
//! ∂c_i/∂θ_p = (∂c_i/∂log₁₀ β_s) · (∂log₁₀ β_s(T_i)/∂θ_p)     (s the species of θ_p)
//! ```
//!
//! from the speciation's derivatives ([`crate::speciation::Derivatives::LogBeta`]; exact also
//! with activity corrections, where they include the change of the ionic strength) and the
//! formation law's gradient. The selected columns of C are then set to α_k·c_m(k)(θ).
//!
//! ## The solution medium
//! The speciation is that of the global fit ([`crate::resolve::hard`]) with the same settings
//! ([`super::Hybrid`]): totals as given or scaled for thermal expansion, the molar or molal
//! scale, and optionally activity corrections with a background electrolyte, the ionic
//! strength iterated to self-consistency in each sample. By default the medium is ideal
//! (constant ionic medium, conditional constants, totals as given).
//!
//! This is a simpler variant of the published method: the model is fitted to the soft profiles
//! (not to D), and the spectra are not part of that fit (they follow in the S step).

use super::SoftError;
use crate::resolve::hard::{FreeParameter, free_parameters};
use crate::resolve::lm::{self, GaussNewtonProblem, LmParams, LmTermination, NormalEquations};
use crate::speciation::{
    Derivatives, FormationLaw, Medium, SpeciationBatch, Start, ValidModel, speciate_all_in_medium,
};
use argmin::core::{Error as ArgminError, Jacobian, Operator};
use ndarray::{Array1, Array2, Array3};
use serde::{Deserialize, Serialize};

/// A fitted model parameter of the hybrid option.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HybridParameter {
    /// Model species name.
    pub species: String,
    /// Law parameter name (e.g. `log_beta_ref`, `dh_ref`).
    pub name: String,
    /// Value at the end of the run.
    pub value: f64,
}

/// The model part of a hybrid run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HybridResult {
    /// The free law parameters at the end of the run.
    pub parameters: Vec<HybridParameter>,
    /// How the last parameter fit ended.
    pub last_fit: LmTermination,
}

/// What the model's speciation needs about each sample: temperature, totals at the
/// measurement temperature (mol/L), id, and the solution medium.
pub(crate) struct Conditions {
    pub(crate) temperatures_k: Vec<f64>,
    /// Samples × model components, mol/L.
    pub(crate) totals: Array2<f64>,
    pub(crate) ids: Vec<String>,
    pub(crate) medium: Medium,
}

pub(crate) struct HybridState {
    model: ValidModel,
    free: Vec<FreeParameter>,
    /// (resolved column, model species index)
    pairs: Vec<(usize, usize)>,
    conditions: Conditions,
    theta: Array1<f64>,
    solver: LmParams,
    fixed_scale: bool,
    last: LmTermination,
}

struct Problem<'a> {
    state: &'a HybridState,
    targets: Vec<Array1<f64>>,
}

impl HybridState {
    pub(crate) fn new(
        model: ValidModel,
        pairs: Vec<(usize, usize)>,
        conditions: Conditions,
        solver: LmParams,
        fixed_scale: bool,
    ) -> Self {
        let free = free_parameters(&model);
        let theta = free
            .iter()
            .map(|p| model.species()[p.species].law.parameters()[p.parameter].value)
            .collect();
        Self {
            model,
            free,
            pairs,
            conditions,
            theta,
            solver,
            fixed_scale,
            last: LmTermination::Running,
        }
    }

    /// Law parameter values of every species with θ put in.
    fn law_values(&self, theta: &Array1<f64>) -> Vec<Vec<f64>> {
        let mut values: Vec<Vec<f64>> = self
            .model
            .species()
            .iter()
            .map(|s| s.law.parameters().iter().map(|p| p.value).collect())
            .collect();
        for (p, &v) in self.free.iter().zip(theta.iter()) {
            values[p.species][p.parameter] = v;
        }
        values
    }

    /// Model concentrations C (samples × model species) at θ and, when asked for,
    /// ∂C/∂θ as `[sample, species, parameter]`.
    fn concentrations(
        &self,
        theta: &Array1<f64>,
        with_jacobian: bool,
    ) -> Result<(Array2<f64>, Option<Array3<f64>>), SoftError> {
        let values = self.law_values(theta);
        let nsp = self.model.n_species();
        let temps = &self.conditions.temperatures_k;
        let ns = temps.len();
        let mut lb = Array2::zeros((ns, nsp));
        for (i, &t) in temps.iter().enumerate() {
            for (s, sp) in self.model.species().iter().enumerate() {
                lb[[i, s]] = sp.law.log10_beta_with(&values[s], t);
            }
        }
        let derivatives = if with_jacobian {
            Derivatives::LogBeta
        } else {
            Derivatives::Skip
        };
        let mut batch = SpeciationBatch::new(&self.model, ns, derivatives);
        speciate_all_in_medium(
            &self.model,
            lb.view(),
            self.conditions.totals.view(),
            &self.conditions.ids,
            Start::Cold,
            &self.conditions.medium,
            &mut batch,
        )
        .map_err(SoftError::Model)?;
        let jacobian = match (with_jacobian, &batch.derivatives) {
            (false, _) => None,
            (true, None) => {
                return Err(SoftError::Numerical {
                    what: "hybrid model fit: the speciation returned no derivatives".into(),
                });
            }
            (true, Some(dc_dlb)) => {
                let np = self.free.len();
                let mut out = Array3::zeros((ns, nsp, np));
                let mut g = Vec::new();
                for (p, fp) in self.free.iter().enumerate() {
                    let law = &self.model.species()[fp.species].law;
                    g.resize(law.n_parameters(), 0.0);
                    for (i, &t) in temps.iter().enumerate() {
                        law.log10_beta_gradient_with(&values[fp.species], t, &mut g);
                        let dlb = g[fp.parameter];
                        for m in 0..nsp {
                            out[[i, m, p]] = dc_dlb[[i, m, fp.species]] * dlb;
                        }
                    }
                }
                Some(out)
            }
        };
        Ok((batch.concentrations, jacobian))
    }

    /// The closed-form scale α of `col` against `target` (1 with a fixed scale).
    fn scale(&self, col: &Array1<f64>, target: &Array1<f64>) -> f64 {
        if self.fixed_scale {
            1.0
        } else {
            let cc = col.dot(col);
            if cc > 0.0 { col.dot(target) / cc } else { 0.0 }
        }
    }

    /// Scaled model columns α_k·c_m(k)(θ) matching `targets`.
    fn fitted_columns(
        &self,
        theta: &Array1<f64>,
        targets: &[Array1<f64>],
    ) -> Result<Vec<Array1<f64>>, SoftError> {
        let (c, _) = self.concentrations(theta, false)?;
        Ok(self
            .pairs
            .iter()
            .zip(targets)
            .map(|(&(_, m), target)| {
                let col = c.column(m).to_owned();
                let alpha = self.scale(&col, target);
                col * alpha
            })
            .collect())
    }

    /// Refits θ to the soft columns of `c` and overwrites those columns with the model's.
    pub(crate) fn apply(&mut self, c: &mut Array2<f64>) -> Result<(), SoftError> {
        let targets: Vec<Array1<f64>> = self.pairs.iter().map(|&(k, _)| c.column(k).to_owned()).collect();
        if !self.theta.is_empty() {
            let problem = Problem {
                state: self,
                targets: targets.clone(),
            };
            let out = lm::minimise_normal_equations(problem, self.theta.clone(), self.solver.clone())
                .map_err(|e| SoftError::Numerical {
                    what: format!("hybrid model fit: {e}"),
                })?;
            self.theta = out.param;
            self.last = out.termination;
        }
        let cols = self.fitted_columns(&self.theta, &targets)?;
        for (&(k, _), col) in self.pairs.iter().zip(cols) {
            c.column_mut(k).assign(&col);
        }
        Ok(())
    }

    pub(crate) fn result(&self) -> HybridResult {
        HybridResult {
            parameters: self
                .free
                .iter()
                .zip(self.theta.iter())
                .map(|(p, &value)| HybridParameter {
                    species: p.species_name.clone(),
                    name: p.name.clone(),
                    value,
                })
                .collect(),
            last_fit: self.last,
        }
    }
}

impl Problem<'_> {
    fn residuals(&self, theta: &Array1<f64>) -> Result<Array1<f64>, SoftError> {
        let cols = self.state.fitted_columns(theta, &self.targets)?;
        let mut r = Vec::new();
        for (col, target) in cols.iter().zip(&self.targets) {
            let scale = target.dot(target).sqrt().max(f64::MIN_POSITIVE);
            r.extend(target.iter().zip(col.iter()).map(|(t, m)| (t - m) / scale));
        }
        Ok(Array1::from(r))
    }

    /// Residuals and their exact Jacobian (rows: pairs × samples, columns: θ).
    fn residuals_and_jacobian(&self, theta: &Array1<f64>) -> Result<(Array1<f64>, Array2<f64>), SoftError> {
        let st = self.state;
        let (c, dc) = st.concentrations(theta, true)?;
        let dc = dc.ok_or_else(|| SoftError::Numerical {
            what: "hybrid model fit: no derivatives".into(),
        })?;
        let (ns, np) = (c.nrows(), st.free.len());
        let mut r = Array1::zeros(st.pairs.len() * ns);
        let mut j = Array2::zeros((st.pairs.len() * ns, np));
        for (q, (&(_, m), target)) in st.pairs.iter().zip(&self.targets).enumerate() {
            let col = c.column(m).to_owned();
            let norm = target.dot(target).sqrt().max(f64::MIN_POSITIVE);
            let alpha = st.scale(&col, target);
            let cc = col.dot(&col);
            for i in 0..ns {
                r[q * ns + i] = (target[i] - alpha * col[i]) / norm;
            }
            for p in 0..np {
                let dcol = dc.slice(ndarray::s![.., m, p]);
                let dalpha = if st.fixed_scale || !(cc > 0.0) {
                    0.0
                } else {
                    (dcol.dot(target) - 2.0 * alpha * col.dot(&dcol)) / cc
                };
                for i in 0..ns {
                    j[[q * ns + i, p]] = -(dalpha * col[i] + alpha * dcol[i]) / norm;
                }
            }
        }
        Ok((r, j))
    }
}

fn to_argmin(e: SoftError) -> ArgminError {
    argmin::argmin_error!(InvalidParameter, e.to_string())
}

impl Operator for Problem<'_> {
    type Param = Array1<f64>;
    type Output = Array1<f64>;
    fn apply(&self, p: &Array1<f64>) -> Result<Array1<f64>, ArgminError> {
        self.residuals(p).map_err(to_argmin)
    }
}

impl Jacobian for Problem<'_> {
    type Param = Array1<f64>;
    type Jacobian = Array2<f64>;
    fn jacobian(&self, p: &Array1<f64>) -> Result<Array2<f64>, ArgminError> {
        self.residuals_and_jacobian(p).map(|(_, j)| j).map_err(to_argmin)
    }
}

impl GaussNewtonProblem for Problem<'_> {
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        let r = self.residuals(theta).map_err(to_argmin)?;
        Ok(if r.iter().all(|v| v.is_finite()) {
            0.5 * r.dot(&r)
        } else {
            f64::INFINITY
        })
    }
    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        let (r, j) = self.residuals_and_jacobian(theta).map_err(to_argmin)?;
        Ok(NormalEquations {
            cost: 0.5 * r.dot(&r),
            gradient: j.t().dot(&r),
            gauss_newton: j.t().dot(&j),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::thermo::{ActivityCorrection, Davies};

    /// M²⁺ + X⁻ ⇌ MX⁺ with a van 't Hoff law.
    fn charged_model() -> ValidModel {
        crate::speciation::EquilibriumModel::from_toml_str(
            r#"
            components = [{ name = "M", absorbs = true, charge = 2 }, { name = "X", absorbs = false, charge = -1 }]
            [[species]]
            name = "MX"
            stoichiometry = { M = 1, X = 1 }
            absorbs = true
            law = { kind = "van_t_hoff", log_beta_ref = { value = 1.3 }, dh_ref = { value = 15000.0 } }
            "#,
        )
        .and_then(|m| m.check())
        .unwrap()
    }

    fn state(medium: Medium, fixed_scale: bool) -> HybridState {
        let temps = vec![285.0, 300.0, 315.0, 330.0, 285.0, 300.0, 315.0, 330.0];
        let totals = Array2::from_shape_fn((8, 2), |(i, c)| match (c, i < 4) {
            (0, _) => 0.01,
            (_, true) => 0.03,
            (_, false) => 0.3,
        });
        let medium = Medium {
            temperatures_k: temps.clone(),
            background_ionic_strength: vec![0.1; 8],
            ..medium
        };
        HybridState::new(
            charged_model(),
            vec![(0, 0), (1, 2)],
            Conditions {
                temperatures_k: temps,
                totals,
                ids: (0..8).map(|i| format!("s{i}")).collect(),
                medium,
            },
            LmParams::default(),
            fixed_scale,
        )
    }

    #[test]
    fn the_exact_jacobian_matches_central_differences_with_and_without_activity_corrections() {
        let davies = Medium {
            activity: ActivityCorrection::Davies(Davies::default()),
            ..Medium::default()
        };
        for (medium, fixed) in [
            (Medium::default(), false),
            (davies.clone(), false),
            (davies, true),
        ] {
            let st = state(medium, fixed);
            // targets: some profiles unlike the model's, so that α and r are not trivial
            let targets = vec![
                Array1::from_shape_fn(8, |i| 0.004 + 0.0003 * i as f64),
                Array1::from_shape_fn(8, |i| 0.002 + 0.0005 * (i % 4) as f64),
            ];
            let problem = Problem { state: &st, targets };
            let theta = ndarray::array![0.9, 22_000.0];
            let (r, j) = problem.residuals_and_jacobian(&theta).unwrap();
            let r_plain = problem.residuals(&theta).unwrap();
            let err = (&r - &r_plain).iter().fold(0.0f64, |m, v| m.max(v.abs()));
            assert!(err < 1e-14, "residuals differ by {err}");
            for p in 0..theta.len() {
                let h = 1e-6 * theta[p].abs().max(1.0);
                let (mut up, mut down) = (theta.clone(), theta.clone());
                up[p] += h;
                down[p] -= h;
                let fd = (problem.residuals(&up).unwrap() - problem.residuals(&down).unwrap()) / (2.0 * h);
                let err = (&fd - &j.column(p)).iter().fold(0.0f64, |m, v| m.max(v.abs()));
                let scale = fd.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                assert!(
                    err <= 1e-6 * scale,
                    "fixed {fixed}, parameter {p}: |J − FD| {err}, scale {scale}"
                );
            }
        }
    }
}
