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
//! where c_m(θ) is the model species' concentration from [`crate::speciation::speciate_all`] at
//! each sample's temperature and totals (the layout's totals as given — no thermal-expansion
//! correction), and α_k is the least-squares scale of that column (eliminated in closed form;
//! α_k = 1 when closure fixes the scale of C). Levenberg–Marquardt ([`crate::resolve::lm`])
//! with a central-difference Jacobian does the fit. The selected columns of C are then set to
//! α_k·c_m(k)(θ).
//!
//! This is a simpler variant of the published method: the model is fitted to the soft profiles
//! (not to D), and the spectra are not part of that fit (they follow in the S step).

use super::SoftError;
use crate::resolve::hard::free_parameters;
use crate::resolve::lm::{self, LmParams, LmTermination};
use crate::speciation::{Derivatives, FormationLaw, ValidModel, speciate_all};
use argmin::core::{Error as ArgminError, Jacobian, Operator};
use ndarray::{Array1, Array2};
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

pub(crate) struct HybridState {
    model: ValidModel,
    /// (resolved column, model species index)
    pairs: Vec<(usize, usize)>,
    temperatures_k: Vec<f64>,
    totals: Array2<f64>,
    ids: Vec<String>,
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
        temperatures_k: Vec<f64>,
        totals: Array2<f64>,
        ids: Vec<String>,
        solver: LmParams,
        fixed_scale: bool,
    ) -> Self {
        let theta = free_parameters(&model)
            .iter()
            .map(|p| model.species()[p.species].law.parameters()[p.parameter].value)
            .collect();
        Self {
            model,
            pairs,
            temperatures_k,
            totals,
            ids,
            theta,
            solver,
            fixed_scale,
            last: LmTermination::Running,
        }
    }

    /// Model concentrations (samples × model species) at θ.
    fn concentrations(&self, theta: &Array1<f64>) -> Result<Array2<f64>, SoftError> {
        let free = free_parameters(&self.model);
        let nsp = self.model.n_species();
        let mut values: Vec<Vec<f64>> = self
            .model
            .species()
            .iter()
            .map(|s| s.law.parameters().iter().map(|p| p.value).collect())
            .collect();
        for (p, &v) in free.iter().zip(theta.iter()) {
            values[p.species][p.parameter] = v;
        }
        let ns = self.temperatures_k.len();
        let mut lb = Array2::zeros((ns, nsp));
        for (i, &t) in self.temperatures_k.iter().enumerate() {
            for (s, sp) in self.model.species().iter().enumerate() {
                lb[[i, s]] = sp.law.log10_beta_with(&values[s], t);
            }
        }
        let batch = speciate_all(
            &self.model,
            lb.view(),
            self.totals.view(),
            &self.ids,
            Derivatives::Skip,
        )
        .map_err(SoftError::Model)?;
        Ok(batch.concentrations)
    }

    /// Scaled model columns α_k·c_m(k)(θ) matching `targets`.
    fn fitted_columns(
        &self,
        theta: &Array1<f64>,
        targets: &[Array1<f64>],
    ) -> Result<Vec<Array1<f64>>, SoftError> {
        let c = self.concentrations(theta)?;
        Ok(self
            .pairs
            .iter()
            .zip(targets)
            .map(|(&(_, m), target)| {
                let col = c.column(m).to_owned();
                let alpha = if self.fixed_scale {
                    1.0
                } else {
                    let cc = col.dot(&col);
                    if cc > 0.0 { col.dot(target) / cc } else { 0.0 }
                };
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
            let out = lm::minimise(problem, self.theta.clone(), self.solver.clone()).map_err(|e| {
                SoftError::Numerical {
                    what: format!("hybrid model fit: {e}"),
                }
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
            parameters: free_parameters(&self.model)
                .into_iter()
                .zip(self.theta.iter())
                .map(|(p, &value)| HybridParameter {
                    species: p.species_name,
                    name: p.name,
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
        let n = p.len();
        let mut cols = Vec::with_capacity(n);
        for j in 0..n {
            let h = 1e-6 * p[j].abs().max(1.0);
            let mut up = p.clone();
            up[j] += h;
            let mut down = p.clone();
            down[j] -= h;
            let diff = (self.residuals(&up).map_err(to_argmin)?
                - self.residuals(&down).map_err(to_argmin)?)
                / (2.0 * h);
            cols.push(diff);
        }
        let m = cols.first().map_or(0, Array1::len);
        Ok(Array2::from_shape_fn((m, n), |(i, j)| cols[j][i]))
    }
}
