//! The mass-balance solver: damped Newton on the convex potential in ln(free concentrations),
//! a coordinate-wise bracketed fallback, and implicit derivatives.

// Dense small-matrix kernels read best with explicit indices.
#![allow(clippy::needless_range_loop)]

use super::SpeciationError;
use super::model::ValidModel;
use crate::thermo::{ActivityCorrection, ActivityModel};
use ndarray::{Array2, Array3, ArrayView2};
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;

/// Convergence tolerance on the relative mass-balance residual (see [`Speciation::residual`]).
pub const RESIDUAL_TOLERANCE: f64 = 1e-12;

/// The loosest [`SpeciationBatch::tolerance`] accepted: concentrations to about 0.1 %, enough to
/// rank candidate constants by cost.
pub const LOOSEST_TOLERANCE: f64 = 1e-3;

fn default_tolerance() -> f64 {
    RESIDUAL_TOLERANCE
}

/// A residual below this is accepted when rounding stops further progress.
const ROUNDING_FLOOR: f64 = 1e-10;
const MAX_NEWTON: usize = 200;
const MAX_SWEEPS: usize = 200;
/// Largest change of any ln(free concentration) in one Newton step.
const MAX_STEP: f64 = 30.0;

/// Which path produced a solution.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SolveRoute {
    /// Nothing to solve: every component total is zero.
    Trivial,
    /// Damped Newton converged directly.
    Newton,
    /// Newton stalled; coordinate-wise bracketed solves brought it close, then Newton finished.
    Fallback,
}

/// Where the solver starts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Start {
    /// From the totals, refined by a few diagonal (one component at a time) log updates.
    Cold,
    /// From the free concentrations already in the batch (e.g. the previous iteration of a fit)
    /// when every component present in the sample has a positive value there; cold otherwise.
    Warm,
    /// As [`Start::Warm`], from free concentrations the caller has already moved towards the
    /// new constants (e.g. to first order along the last solve's derivatives), and with at
    /// least one Newton step even when the start already meets the tolerance: the result is
    /// then polished to the rounding level and does not depend on how good the prediction was
    /// (a fit comparing costs at nearby points needs them smooth in the constants).
    Extrapolated,
}

/// Whether [`speciate_all`] also returns ∂c/∂ log₁₀ β.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Derivatives {
    /// Concentrations only.
    Skip,
    /// Also ∂cᵢ/∂ log₁₀ βₖ for all species i, k.
    LogBeta,
}

/// The speciation of one sample.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Speciation {
    /// Concentration of every species (model order, free components first), mol/L. Row of C.
    pub concentrations: Vec<f64>,
    /// Free concentration of each component, mol/L (equal to the first entries of
    /// `concentrations`).
    pub free: Vec<f64>,
    /// Work done: Newton iterations plus start-up and fallback sweeps.
    pub iterations: usize,
    /// Largest relative mass-balance residual max_j |Σᵢ aᵢⱼ cᵢ − T_j| / max(|T_j|, Σᵢ |aᵢⱼ| cᵢ).
    pub residual: f64,
    /// How the solution was found.
    pub route: SolveRoute,
}

/// Speciation of many samples at once: rows are samples in input order.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciationBatch {
    /// C: samples × species, mol/L.
    pub concentrations: Array2<f64>,
    /// Free component concentrations: samples × components, mol/L.
    pub free: Array2<f64>,
    /// Iterations per sample.
    pub iterations: Vec<usize>,
    /// Relative mass-balance residual per sample.
    pub residuals: Vec<f64>,
    /// ∂cᵢ/∂ log₁₀ βₖ as `[sample, i, k]` (samples × species × species), when asked for.
    /// With activity corrections ([`speciate_all_in_medium`]) βₖ is the thermodynamic
    /// constant and the derivative includes the change of the ionic strength.
    pub derivatives: Option<Array3<f64>>,
    /// Self-consistent ionic strength I of each sample (on the speciation's scale: mol/L, or
    /// mol/kg on the molal scale) when activity corrections are on; NaN otherwise.
    pub ionic_strength: Vec<f64>,
    /// The species k whose ∂c/∂ log₁₀ βₖ are wanted (one flag per species; `None`: all). The
    /// other columns of [`SpeciationBatch::derivatives`] are left at zero — a fit needs only
    /// the constants it varies.
    pub derivative_species: Option<Vec<bool>>,
    /// The relative mass-balance residual at which a sample counts as solved: by default
    /// [`RESIDUAL_TOLERANCE`] (rounding level); up to [`LOOSEST_TOLERANCE`] where a quick,
    /// less precise answer serves (e.g. only ranking candidate constants by cost — Newton's
    /// quadratic convergence makes the last step, from ~10⁻⁶ to rounding, the one saved).
    #[serde(default = "default_tolerance")]
    pub tolerance: f64,
}

impl SpeciationBatch {
    /// A zeroed batch of the right shape (to be filled by [`speciate_all_into`]).
    pub fn new(model: &ValidModel, n_samples: usize, derivatives: Derivatives) -> Self {
        let nsp = model.n_species();
        Self {
            concentrations: Array2::zeros((n_samples, nsp)),
            free: Array2::zeros((n_samples, model.n_components())),
            iterations: vec![0; n_samples],
            residuals: vec![0.0; n_samples],
            ionic_strength: vec![f64::NAN; n_samples],
            derivative_species: None,
            tolerance: RESIDUAL_TOLERANCE,
            derivatives: match derivatives {
                Derivatives::Skip => None,
                Derivatives::LogBeta => Some(Array3::zeros((n_samples, nsp, nsp))),
            },
        }
    }
}

/// Solver state with all buffers allocated once per model (no allocation per iteration or per
/// sample).
struct Workspace<'m> {
    nc: usize,
    nsp: usize,
    a: &'m [f64],
    signed: &'m [bool],
    active_c: Vec<bool>,
    active_s: Vec<bool>,
    ln_beta: Vec<f64>,
    totals: Vec<f64>,
    u: Vec<f64>,
    u_try: Vec<f64>,
    du: Vec<f64>,
    c: Vec<f64>,
    c_try: Vec<f64>,
    g: Vec<f64>,
    g_try: Vec<f64>,
    h: Vec<f64>,
    l: Vec<f64>,
    d: Vec<f64>,
    rhs: Vec<f64>,
    order: Vec<usize>,
    /// Thermodynamic ln β (activity corrections turn `ln_beta` into conditional values).
    ln_beta0: Vec<f64>,
    /// ψᵢ = ∂ ln βᵢ(conditional)/∂I.
    psi: Vec<f64>,
    /// zᵢ² per species.
    z2: Vec<f64>,
    /// log₁₀ γ and its slope per species.
    lg: Vec<f64>,
    dlg: Vec<f64>,
    /// w = H⁻¹ Aᵀ diag(c) ψ, and a copy of u.
    w: Vec<f64>,
    u_keep: Vec<f64>,
    /// H⁻¹ (entries 00, 01, 11) when [`Workspace::factor_jacobian`] took the closed form for two
    /// active components; `None` when `l`/`d` hold the general factor.
    inverse_2x2: Option<[f64; 3]>,
    /// Two components: (i, k, (aᵢ₀aₖ₁ − aᵢ₁aₖ₀)²) for every pair of species i < k with a
    /// non-zero minor, for det H by Cauchy–Binet.
    minors_2x2: Vec<(usize, usize, f64)>,
    /// Relative mass-balance residual at which Newton stops ([`SpeciationBatch::tolerance`]).
    tolerance: f64,
    /// At least one Newton step from any start ([`Start::Extrapolated`]).
    polish: bool,
    /// Species whose derivative columns are wanted (empty: all).
    wanted: Vec<bool>,
}

impl<'m> Workspace<'m> {
    fn new(model: &'m ValidModel) -> Self {
        let nc = model.n_components();
        let nsp = model.n_species();
        Self {
            nc,
            nsp,
            a: model.stoichiometry(),
            signed: model.signed_components(),
            active_c: vec![false; nc],
            active_s: vec![false; nsp],
            ln_beta: vec![0.0; nsp],
            totals: vec![0.0; nc],
            u: vec![0.0; nc],
            u_try: vec![0.0; nc],
            du: vec![0.0; nc],
            c: vec![0.0; nsp],
            c_try: vec![0.0; nsp],
            g: vec![0.0; nc],
            g_try: vec![0.0; nc],
            h: vec![0.0; nc * nc],
            l: vec![0.0; nc * nc],
            d: vec![0.0; nc],
            rhs: vec![0.0; nc],
            order: Vec::with_capacity(nc),
            ln_beta0: vec![0.0; nsp],
            psi: vec![0.0; nsp],
            z2: vec![0.0; nsp],
            lg: vec![0.0; nsp],
            dlg: vec![0.0; nsp],
            w: vec![0.0; nc],
            u_keep: vec![0.0; nc],
            inverse_2x2: None,
            tolerance: RESIDUAL_TOLERANCE,
            minors_2x2: if nc == 2 {
                let a = model.stoichiometry();
                (0..nsp)
                    .flat_map(|i| (i + 1..nsp).map(move |k| (i, k)))
                    .map(|(i, k)| (i, k, (a[2 * i] * a[2 * k + 1] - a[2 * i + 1] * a[2 * k]).powi(2)))
                    .filter(|&(_, _, m2)| m2 > 0.0)
                    .collect()
            } else {
                Vec::new()
            },
            polish: false,
            wanted: Vec::new(),
        }
    }

    /// Validates and loads one sample's inputs; marks absent components and species.
    fn load<I, J>(
        &mut self,
        model: &ValidModel,
        log_betas: I,
        totals: J,
        sample: &str,
    ) -> Result<(), SpeciationError>
    where
        I: IntoIterator<Item = f64>,
        J: IntoIterator<Item = f64>,
    {
        for (k, lb) in log_betas.into_iter().enumerate().take(self.nsp) {
            if !lb.is_finite() {
                return Err(SpeciationError::InvalidLogBeta {
                    sample: sample.to_string(),
                    species: model.species()[k].name.clone(),
                    value: lb,
                });
            }
            if k < self.nc && lb.abs() > 0.0 {
                return Err(SpeciationError::FreeComponentLogBeta {
                    sample: sample.to_string(),
                    component: model.component_names()[k].clone(),
                    value: lb,
                });
            }
            self.ln_beta[k] = LN_10 * lb;
        }
        for (j, t) in totals.into_iter().enumerate().take(self.nc) {
            let ok = t.is_finite() && (t >= 0.0 || self.signed[j]);
            if !ok {
                return Err(SpeciationError::InvalidTotal {
                    sample: sample.to_string(),
                    component: model.component_names()[j].clone(),
                    value: t,
                });
            }
            self.totals[j] = t;
            // A component that only ever enters with positive coefficients and has total 0 is
            // absent: its free concentration and every species containing it are exactly 0.
            self.active_c[j] = t > 0.0 || self.signed[j];
        }
        for i in 0..self.nsp {
            let row = &self.a[i * self.nc..(i + 1) * self.nc];
            self.active_s[i] = row
                .iter()
                .zip(&self.active_c)
                .all(|(&aij, &on)| on || aij.abs() == 0.0);
        }
        Ok(())
    }

    /// cᵢ = βᵢ exp(Σⱼ aᵢⱼ uⱼ) for active species, 0 otherwise.
    fn species_from(&self, u: &[f64], c: &mut [f64]) {
        for i in 0..self.nsp {
            c[i] = if self.active_s[i] {
                let row = &self.a[i * self.nc..(i + 1) * self.nc];
                let mut e = self.ln_beta[i];
                for (j, &aij) in row.iter().enumerate() {
                    if self.active_c[j] {
                        e += aij * u[j];
                    }
                }
                e.exp()
            } else {
                0.0
            };
        }
    }

    /// g = Aᵀc − T (zero for absent components); returns (relative residual, potential
    /// f = Σ cᵢ − Σ Tⱼ uⱼ, whose gradient is g).
    fn residual(&self, u: &[f64], c: &[f64], g: &mut [f64]) -> (f64, f64) {
        let mut rel: f64 = 0.0;
        let mut f: f64 = c.iter().sum();
        for j in 0..self.nc {
            if !self.active_c[j] {
                g[j] = 0.0;
                continue;
            }
            let mut s = 0.0;
            let mut scale = self.totals[j].abs();
            for i in 0..self.nsp {
                let aij = self.a[i * self.nc + j];
                s += aij * c[i];
                scale += aij.abs() * c[i];
            }
            g[j] = s - self.totals[j];
            f -= self.totals[j] * u[j];
            // scale ≥ the larger of |T| and Σ|a|c (their sum, within a factor of 2)
            let r = if scale > 0.0 {
                2.0 * g[j].abs() / scale
            } else {
                0.0
            };
            rel = rel.max(if r.is_nan() { f64::INFINITY } else { r });
        }
        if f.is_nan() {
            f = f64::INFINITY;
        }
        (rel, f)
    }

    /// H = Aᵀ diag(c) A (identity rows for absent components), factorised with Jacobi scaling
    /// into `l`/`d`. Returns false when not positive definite even after regularisation.
    ///
    /// Two active components (a metal and a ligand: the common case) take H⁻¹ in closed form
    /// ([`Workspace::factor_2x2`]) when it is well conditioned.
    fn factor_jacobian(&mut self, c: &[f64]) -> bool {
        if self.nc == 2 && self.active_c[0] && self.active_c[1] && self.factor_2x2(c) {
            return true;
        }
        self.inverse_2x2 = None;
        let nc = self.nc;
        for j in 0..nc {
            for k in 0..=j {
                let v = if self.active_c[j] && self.active_c[k] {
                    let mut s = 0.0;
                    for i in 0..self.nsp {
                        s += self.a[i * nc + j] * self.a[i * nc + k] * c[i];
                    }
                    s
                } else if j == k {
                    1.0
                } else {
                    0.0
                };
                self.h[j * nc + k] = v;
                self.h[k * nc + j] = v;
            }
        }
        for j in 0..nc {
            let hjj = self.h[j * nc + j];
            self.d[j] = if hjj > 0.0 && hjj.is_finite() {
                1.0 / hjj.sqrt()
            } else {
                1.0
            };
        }
        let mut mu = 0.0;
        for _ in 0..8 {
            if cholesky_scaled(&self.h, &self.d, nc, mu, &mut self.l) {
                return true;
            }
            mu = if mu > 0.0 { mu * 100.0 } else { 1e-12 };
        }
        false
    }

    /// Two active components: H⁻¹ in closed form, H⁻¹ = [h₁₁ −h₀₁; −h₀₁ h₀₀]/det, one division
    /// and no square roots (the scaled Cholesky's chain of square roots and divisions is what
    /// the solver waits on most). Refused, for the regularised general path, where the scaled
    /// factor would fail too: det ≤ 10⁻¹⁴·h₀₀h₁₁ (i.e. 1 − ρ² ≤ 10⁻¹⁴ with ρ the correlation
    /// h₀₁/√(h₀₀h₁₁), exactly the scaled Cholesky's pivot test) or entries outside the normal
    /// range. x = H⁻¹b then has the same error bound as the factored solve, ε·κ(H)·‖x‖.
    fn factor_2x2(&mut self, c: &[f64]) -> bool {
        let (mut h00, mut h01, mut h11) = (0.0, 0.0, 0.0);
        for (row, &ci) in self.a.chunks_exact(2).zip(c) {
            h00 += row[0] * row[0] * ci;
            h01 += row[0] * row[1] * ci;
            h11 += row[1] * row[1] * ci;
        }
        let q = h00 * h11;
        // det H = Σ_{i<k} cᵢcₖ(aᵢ₀aₖ₁ − aᵢ₁aₖ₀)² (Cauchy–Binet): a sum of non-negative terms,
        // accurate to a few ε where h₀₀h₁₁ − h₀₁² would cancel
        let det: f64 = self.minors_2x2.iter().map(|&(i, k, m2)| m2 * c[i] * c[k]).sum();
        if !(q.is_normal() && det.is_normal() && det > 1e-14 * q && h00 > 0.0) {
            return false;
        }
        let inv = 1.0 / det;
        self.inverse_2x2 = Some([h11 * inv, -h01 * inv, h00 * inv]);
        true
    }

    /// Solves H x = b with the factor from [`Workspace::factor_jacobian`]; `x` overwrites `b`.
    fn solve_factored(&self, b: &mut [f64]) {
        if let (Some([i00, i01, i11]), [b0, b1]) = (self.inverse_2x2, &mut *b) {
            let (x0, x1) = (i00 * *b0 + i01 * *b1, i01 * *b0 + i11 * *b1);
            *b0 = x0;
            *b1 = x1;
            return;
        }
        let nc = self.nc;
        for j in 0..nc {
            b[j] *= self.d[j];
        }
        for j in 0..nc {
            let mut s = b[j];
            for k in 0..j {
                s -= self.l[j * nc + k] * b[k];
            }
            b[j] = s / self.l[j * nc + j];
        }
        for j in (0..nc).rev() {
            let mut s = b[j];
            for k in j + 1..nc {
                s -= self.l[k * nc + j] * b[k];
            }
            b[j] = s / self.l[j * nc + j];
        }
        for j in 0..nc {
            b[j] *= self.d[j];
        }
    }

    /// Cold start: uⱼ = ln Tⱼ (or ln 1e-7 M for a signed component with T ≤ 0), then a few
    /// sweeps (scarcest component first) of the diagonal log update uⱼ += ln(Tⱼ/Sⱼ)/āⱼ, Sⱼ = Σ aᵢⱼcᵢ,
    /// āⱼ = Σ aᵢⱼ²cᵢ/Sⱼ, on positive components: this removes the huge excesses a strong
    /// complex produces at the start.
    fn cold_start(&mut self) -> usize {
        for j in 0..self.nc {
            self.u[j] = if !self.active_c[j] {
                0.0
            } else if self.signed[j] {
                self.totals[j].abs().max(1e-7).ln()
            } else {
                self.totals[j].ln()
            };
        }
        let mut sweeps = 0;
        // scarcest component first: its free concentration moves by many decades while an
        // abundant component stays near its total (the reverse order would wrongly starve it)
        let mut order = std::mem::take(&mut self.order);
        order.clear();
        order.extend(0..self.nc);
        order.sort_by(|&a, &b| self.totals[a].total_cmp(&self.totals[b]));
        for _ in 0..4 {
            sweeps += 1;
            let mut worst: f64 = 0.0;
            for &j in &order {
                if !self.active_c[j] || self.signed[j] {
                    continue;
                }
                let u = std::mem::take(&mut self.u);
                let mut c = std::mem::take(&mut self.c);
                self.species_from(&u, &mut c);
                self.u = u;
                self.c = c;
                let (mut s, mut s2) = (0.0, 0.0);
                for i in 0..self.nsp {
                    let aij = self.a[i * self.nc + j];
                    s += aij * self.c[i];
                    s2 += aij * aij * self.c[i];
                }
                if s > 0.0 && s.is_finite() && s2.is_finite() {
                    let ratio = (self.totals[j] / s).ln();
                    worst = worst.max(ratio.abs());
                    self.u[j] += ratio / (s2 / s);
                }
            }
            if worst < std::f64::consts::LN_2 {
                break;
            }
        }
        self.order = order;
        sweeps
    }

    /// Damped Newton from `self.u`. Returns (converged, iterations, residual).
    fn newton(&mut self, budget: usize) -> (bool, usize, f64) {
        let nc = self.nc;
        let mut u = std::mem::take(&mut self.u);
        let mut c = std::mem::take(&mut self.c);
        let mut g = std::mem::take(&mut self.g);
        self.species_from(&u, &mut c);
        let (mut rel, mut f) = self.residual(&u, &c, &mut g);
        let mut it = 0;
        let mut converged = false;
        while it < budget {
            if rel <= self.tolerance && (it > 0 || !self.polish) {
                converged = true;
                break;
            }
            it += 1;
            if !self.factor_jacobian(&c) {
                break;
            }
            let mut du = std::mem::take(&mut self.du);
            let mut u_try = std::mem::take(&mut self.u_try);
            let mut c_try = std::mem::take(&mut self.c_try);
            let mut g_try = std::mem::take(&mut self.g_try);
            let mut accepted = false;
            // Direction 1: Newton on ln Sⱼ = ln Tⱼ for positive components (J δu = −S∘ln(S/T)),
            // which takes long steps when a species is in huge excess and equals Newton's step
            // to second order near the solution. Direction 2: plain Newton, J δu = −g.
            for log_form in [true, false] {
                let mut used_log = false;
                for j in 0..nc {
                    let t = self.totals[j];
                    du[j] = if log_form && self.active_c[j] && !self.signed[j] && t > 0.0 {
                        used_log = true;
                        -(g[j] + t) * ln_1p_near_zero(g[j] / t)
                    } else {
                        -g[j]
                    };
                }
                if log_form && !used_log {
                    continue;
                }
                self.solve_factored(&mut du);
                let big = du.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                if !big.is_finite() {
                    continue;
                }
                if big > MAX_STEP {
                    let s = MAX_STEP / big;
                    du.iter_mut().for_each(|v| *v *= s);
                }
                let slope: f64 = g.iter().zip(&du).map(|(a, b)| a * b).sum();
                if log_form && (slope >= 0.0 || slope.is_nan()) {
                    continue;
                }
                let mut t = 1.0;
                // the log form is only worth a mildly damped step; otherwise use plain Newton
                for _ in 0..if log_form { 4 } else { 60 } {
                    for j in 0..nc {
                        u_try[j] = u[j] + t * du[j];
                    }
                    self.species_from(&u_try, &mut c_try);
                    let (rel_t, f_t) = self.residual(&u_try, &c_try, &mut g_try);
                    // Armijo on the convex potential, or a clear drop of the residual (near the
                    // solution the potential's decrease is below its rounding).
                    if f_t.is_finite() && (f_t <= f + 1e-4 * t * slope || rel_t <= 0.5 * rel) {
                        std::mem::swap(&mut u, &mut u_try);
                        std::mem::swap(&mut c, &mut c_try);
                        std::mem::swap(&mut g, &mut g_try);
                        rel = rel_t;
                        f = f_t;
                        accepted = true;
                        break;
                    }
                    t *= 0.5;
                }
                if accepted {
                    break;
                }
            }
            self.u_try = u_try;
            self.c_try = c_try;
            self.g_try = g_try;
            self.du = du;
            if !accepted {
                break;
            }
        }
        if !converged && rel <= ROUNDING_FLOOR {
            converged = true;
        }
        self.u = u;
        self.c = c;
        self.g = g;
        (converged, it, rel)
    }

    /// Fallback: Gauss–Seidel sweeps, each component solved exactly (bracketed safeguarded
    /// Newton/bisection on the monotone 1-D mass balance) with the others held. For one
    /// component this is the whole solution. Returns sweeps used.
    fn coordinate_sweeps(&mut self, target: f64) -> usize {
        let mut u = std::mem::take(&mut self.u);
        let mut c = std::mem::take(&mut self.c);
        let mut g = std::mem::take(&mut self.g);
        let mut sweeps = 0;
        for _ in 0..MAX_SWEEPS {
            sweeps += 1;
            for j in 0..self.nc {
                if !self.active_c[j] {
                    continue;
                }
                self.species_from(&u, &mut c);
                u[j] = self.solve_one(j, u[j], &c);
            }
            self.species_from(&u, &mut c);
            let (rel, _) = self.residual(&u, &c, &mut g);
            if rel <= target {
                break;
            }
        }
        self.u = u;
        self.c = c;
        self.g = g;
        sweeps
    }

    /// φ(v) = Σᵢ aᵢⱼ cᵢ exp(aᵢⱼ (v − u₀)) − Tⱼ and φ'(v).
    fn phi(&self, j: usize, u0: f64, c: &[f64], v: f64) -> (f64, f64) {
        let (mut s, mut ds) = (0.0, 0.0);
        for i in 0..self.nsp {
            let aij = self.a[i * self.nc + j];
            if aij.abs() > 0.0 && c[i] > 0.0 {
                let ci = c[i] * (aij * (v - u0)).exp();
                s += aij * ci;
                ds += aij * aij * ci;
            }
        }
        (s - self.totals[j], ds)
    }

    fn solve_one(&self, j: usize, u0: f64, c: &[f64]) -> f64 {
        let sign = |v: f64| {
            let p = self.phi(j, u0, c, v).0;
            if p.is_nan() { 1.0 } else { p }
        };
        let (mut lo, mut hi) = (u0, u0);
        let mut step = 1.0;
        while sign(hi) < 0.0 && step < 4096.0 {
            hi += step;
            step *= 2.0;
        }
        step = 1.0;
        while sign(lo) > 0.0 && step < 4096.0 {
            lo -= step;
            step *= 2.0;
        }
        let mut v = 0.5 * (lo + hi);
        for _ in 0..200 {
            let (p, dp) = self.phi(j, u0, c, v);
            if p.abs() <= 0.0 {
                return v;
            }
            if p > 0.0 || p.is_nan() {
                hi = v;
            } else {
                lo = v;
            }
            let newton = v - p / dp;
            v = if newton.is_finite() && newton > lo && newton < hi {
                newton
            } else {
                0.5 * (lo + hi)
            };
            if hi - lo <= 4.0 * f64::EPSILON * v.abs().max(1.0) {
                break;
            }
        }
        v
    }

    /// Solves the loaded sample. `start`: optional ln free concentrations.
    fn solve(
        &mut self,
        start: Option<&[f64]>,
        sample: &str,
    ) -> Result<(usize, f64, SolveRoute), SpeciationError> {
        if !self.active_c.iter().any(|&on| on) {
            self.c.iter_mut().for_each(|c| *c = 0.0);
            return Ok((0, 0.0, SolveRoute::Trivial));
        }
        let warm = start.filter(|s| (0..self.nc).all(|j| !self.active_c[j] || s[j].is_finite()));
        let sweeps0 = match warm {
            Some(s) => {
                for j in 0..self.nc {
                    self.u[j] = if self.active_c[j] { s[j] } else { 0.0 };
                }
                0
            }
            None => self.cold_start(),
        };
        let (ok, it, rel) = self.newton(MAX_NEWTON);
        let it = it + sweeps0;
        if ok {
            return Ok((it, rel, SolveRoute::Newton));
        }
        let sweeps = self.coordinate_sweeps(1e-6);
        let (ok2, it2, rel2) = self.newton(MAX_NEWTON);
        let total = it + sweeps + it2;
        if ok2 {
            return Ok((total, rel2, SolveRoute::Fallback));
        }
        Err(SpeciationError::NotConverged {
            sample: sample.to_string(),
            residual: rel.min(rel2),
            iterations: total,
        })
    }

    /// ∂cᵢ/∂log₁₀βₖ into `out` (species × species, row-major) at the current solution:
    /// H ∂u/∂ln βₖ = −cₖ aₖ, ∂cᵢ/∂ln βₖ = cᵢ (δᵢₖ + aᵢ·∂u/∂ln βₖ).
    fn derivatives_into(&mut self, out: &mut [f64], sample: &str) -> Result<(), SpeciationError> {
        let (nc, nsp) = (self.nc, self.nsp);
        out.iter_mut().for_each(|v| *v = 0.0);
        let c = std::mem::take(&mut self.c);
        let ok = self.factor_jacobian(&c);
        self.c = c;
        if !ok {
            return Err(SpeciationError::SingularJacobian {
                sample: sample.to_string(),
            });
        }
        let mut rhs = std::mem::take(&mut self.rhs);
        for k in 0..nsp {
            if !self.wanted.get(k).copied().unwrap_or(true) || !self.du_dln_beta(k, &mut rhs) {
                continue;
            }
            for i in 0..nsp {
                if !self.active_s[i] {
                    continue;
                }
                let mut s = if i == k { 1.0 } else { 0.0 };
                for j in 0..nc {
                    s += self.a[i * nc + j] * rhs[j];
                }
                out[i * nsp + k] = LN_10 * self.c[i] * s;
            }
        }
        self.rhs = rhs;
        Ok(())
    }
}

impl Workspace<'_> {
    /// ∂u/∂ln βₖ at fixed activity coefficients into `rhs` (H ∂u/∂ln βₖ = −cₖ aₖ, with the
    /// factor from [`Workspace::factor_jacobian`]); false when species k is absent or zero.
    fn du_dln_beta(&self, k: usize, rhs: &mut [f64]) -> bool {
        let (nc, ck) = (self.nc, self.c[k]);
        if !self.active_s[k] || ck <= 0.0 {
            return false;
        }
        for j in 0..nc {
            rhs[j] = if self.active_c[j] {
                -ck * self.a[k * nc + j]
            } else {
                0.0
            };
        }
        self.solve_factored(rhs);
        true
    }

    /// Ionic strength of the current solution: I_bg + ½ Σ zᵢ² cᵢ.
    fn ionic_strength_of(&self, background: f64) -> f64 {
        background + 0.5 * self.c.iter().zip(&self.z2).map(|(c, z2)| c * z2).sum::<f64>()
    }

    /// Conditional ln β at ionic strength `i` (from `ln_beta0`), and ψ = ∂ ln β_cond/∂I:
    /// ln βᵢ,c = ln βᵢ + ln 10 (Σⱼ aᵢⱼ log γⱼ − log γᵢ).
    fn condition(
        &mut self,
        activity: &ActivityCorrection,
        charges: &[i32],
        i: f64,
        t_k: f64,
        sample: &str,
    ) -> Result<(), SpeciationError> {
        let err = |source| SpeciationError::Activity {
            sample: sample.to_string(),
            source,
        };
        for k in 0..self.nsp {
            self.lg[k] = activity.log10_gamma(charges[k], i, t_k).map_err(err)?;
            self.dlg[k] = activity
                .d_log10_gamma_d_ionic_strength(charges[k], i, t_k)
                .map_err(err)?;
        }
        for k in 0..self.nsp {
            if k < self.nc {
                // a free component: its own γ cancels (β = 1 on every scale)
                self.ln_beta[k] = self.ln_beta0[k];
                self.psi[k] = 0.0;
                continue;
            }
            let row = &self.a[k * self.nc..(k + 1) * self.nc];
            let (mut s, mut ds) = (-self.lg[k], -self.dlg[k]);
            for (j, &akj) in row.iter().enumerate() {
                s += akj * self.lg[j];
                ds += akj * self.dlg[j];
            }
            self.ln_beta[k] = self.ln_beta0[k] + LN_10 * s;
            self.psi[k] = LN_10 * ds;
        }
        Ok(())
    }

    /// At the current solution (H factorised at c): w = H⁻¹ q with q = Aᵀ diag(c) ψ, and
    /// dI_map/dI = s − p·w, where p = ½ Aᵀ diag(c) z², s = ½ Σ zᵢ² cᵢ ψᵢ: the slope of the
    /// ionic strength the speciation gives with respect to the ionic strength assumed.
    fn ionic_slope(&mut self) -> f64 {
        let nc = self.nc;
        let (mut s, mut pw) = (0.0, 0.0);
        for j in 0..nc {
            self.w[j] = 0.0;
        }
        for i in 0..self.nsp {
            let ci = self.c[i];
            if ci <= 0.0 {
                continue;
            }
            s += 0.5 * self.z2[i] * ci * self.psi[i];
            for j in 0..nc {
                if self.active_c[j] {
                    self.w[j] += self.a[i * nc + j] * ci * self.psi[i];
                }
            }
        }
        let mut w = std::mem::take(&mut self.w);
        self.solve_factored(&mut w);
        for j in 0..nc {
            if !self.active_c[j] {
                w[j] = 0.0;
                continue;
            }
            let mut pj = 0.0;
            for i in 0..self.nsp {
                pj += 0.5 * self.a[i * nc + j] * self.c[i] * self.z2[i];
            }
            pw += pj * w[j];
        }
        self.w = w;
        s - pw
    }

    /// Solves the loaded sample (thermodynamic ln β in `ln_beta0`) with activity coefficients
    /// at a self-consistent ionic strength: an outer Newton iteration on
    /// F(I) = I_bg + ½ Σ zᵢ² cᵢ(I) − I, with the exact slope from [`Workspace::ionic_slope`],
    /// falling back to the damped fixed-point step I ← I + ½ F when Newton's step would leave
    /// I ≥ 0 or the slope is 1. Returns (iterations, residual, I).
    #[allow(clippy::too_many_arguments)]
    fn solve_with_activity(
        &mut self,
        activity: &ActivityCorrection,
        charges: &[i32],
        t_k: f64,
        background: f64,
        (tolerance, max_outer): (f64, usize),
        start: Option<&[f64]>,
        start_i: Option<f64>,
        sample: &str,
    ) -> Result<(usize, f64, f64), SpeciationError> {
        let mut i = match start_i {
            Some(v) if v.is_finite() && v >= 0.0 => v,
            _ => {
                // free components at their totals
                background
                    + 0.5
                        * (0..self.nc)
                            .map(|j| self.totals[j].abs() * self.z2[j])
                            .sum::<f64>()
            }
        };
        let mut total_it = 0;
        let mut warm = start.map(<[f64]>::to_vec);
        let mut change = f64::INFINITY;
        for outer in 0..max_outer {
            self.condition(activity, charges, i, t_k, sample)?;
            let (it, rel, _) = self.solve(warm.as_deref(), sample)?;
            total_it += it;
            let i_map = self.ionic_strength_of(background);
            let f = i_map - i;
            change = f.abs();
            if change <= tolerance * i_map.max(i).max(f64::MIN_POSITIVE) {
                return Ok((total_it + outer, rel, i));
            }
            self.u_keep.copy_from_slice(&self.u);
            let slope = {
                let c = std::mem::take(&mut self.c);
                let ok = self.factor_jacobian(&c);
                self.c = c;
                if ok { self.ionic_slope() } else { f64::NAN }
            };
            // Newton on F(I) (F' = slope − 1); the damped step ½(I + I_map) stays ≥ 0
            let newton = i - f / (slope - 1.0);
            i = if slope.is_finite() && (slope - 1.0).abs() > 1e-6 && newton.is_finite() && newton >= 0.0 {
                newton
            } else {
                i + 0.5 * f
            };
            warm = Some(self.u_keep.clone());
        }
        Err(SpeciationError::IonicStrengthNotConverged {
            sample: sample.to_string(),
            ionic_strength: i,
            change,
            iterations: max_outer,
        })
    }

    /// ∂cᵢ/∂log₁₀βₖ (thermodynamic β) with activity corrections, by implicit differentiation
    /// of the coupled system g(u, I) = Aᵀc − T = 0, I − I_bg − ½ Σ zᵢ² cᵢ = 0:
    ///
    /// ```text
    /// [ H    q   ] [∂u/∂ln βₖ]   [ −cₖ aₖ   ]
    /// [ −pᵀ  1−s ] [∂I/∂ln βₖ] = [ ½ zₖ² cₖ ]
    /// ```
    ///
    /// solved by the Schur complement: u₀ = −H⁻¹cₖaₖ, ∂I = (½zₖ²cₖ + p·u₀)/(1 − s + p·w),
    /// ∂u = u₀ − w ∂I, ∂cᵢ = cᵢ(δᵢₖ + aᵢ·∂u + ψᵢ ∂I).
    fn derivatives_with_activity_into(
        &mut self,
        out: &mut [f64],
        sample: &str,
    ) -> Result<(), SpeciationError> {
        let (nc, nsp) = (self.nc, self.nsp);
        out.iter_mut().for_each(|v| *v = 0.0);
        let c = std::mem::take(&mut self.c);
        let ok = self.factor_jacobian(&c);
        self.c = c;
        if !ok {
            return Err(SpeciationError::SingularJacobian {
                sample: sample.to_string(),
            });
        }
        let slope = self.ionic_slope();
        let den = 1.0 - slope;
        let mut p = vec![0.0; nc];
        for j in 0..nc {
            if self.active_c[j] {
                for i in 0..nsp {
                    p[j] += 0.5 * self.a[i * nc + j] * self.c[i] * self.z2[i];
                }
            }
        }
        let mut rhs = std::mem::take(&mut self.rhs);
        for k in 0..nsp {
            if !self.wanted.get(k).copied().unwrap_or(true) || !self.du_dln_beta(k, &mut rhs) {
                continue;
            }
            let ck = self.c[k];
            let pu: f64 = p.iter().zip(rhs.iter()).map(|(a, b)| a * b).sum();
            let di = (0.5 * self.z2[k] * ck + pu) / den;
            for j in 0..nc {
                rhs[j] -= self.w[j] * di;
            }
            for i in 0..nsp {
                if !self.active_s[i] {
                    continue;
                }
                let mut s = if i == k { 1.0 } else { 0.0 };
                for j in 0..nc {
                    s += self.a[i * nc + j] * rhs[j];
                }
                s += self.psi[i] * di;
                out[i * nsp + k] = LN_10 * self.c[i] * s;
            }
        }
        self.rhs = rhs;
        Ok(())
    }
}

/// Cholesky of (D H D + μI) into the lower triangle of `l`; false if a pivot is not positive.
/// ln(1 + x), by its series x − x²/2 + x³/3 − x⁴/4 for |x| < 10⁻⁴ (truncation below
/// x⁵/5, under 10⁻¹⁶ of the value: rounding level) and by the library function otherwise. Near
/// convergence every Newton step asks for it with a tiny x, where the call dominated the step.
fn ln_1p_near_zero(x: f64) -> f64 {
    if x.abs() < 1e-4 {
        x * (1.0 - x * (0.5 - x * (1.0 / 3.0 - 0.25 * x)))
    } else {
        x.ln_1p()
    }
}

fn cholesky_scaled(h: &[f64], d: &[f64], n: usize, mu: f64, l: &mut [f64]) -> bool {
    for j in 0..n {
        for k in 0..=j {
            let mut s = d[j] * h[j * n + k] * d[k];
            if j == k {
                s += mu;
            }
            for m in 0..k {
                s -= l[j * n + m] * l[k * n + m];
            }
            if j == k {
                if s <= 1e-14 || s.is_nan() {
                    return false;
                }
                l[j * n + j] = s.sqrt();
            } else {
                l[j * n + k] = s / l[k * n + k];
            }
        }
    }
    true
}

/// The shapes a batch speciation needs (samples from `log_betas`): (samples, species,
/// components).
fn check_shapes(
    model: &ValidModel,
    log_betas: ArrayView2<f64>,
    totals: ArrayView2<f64>,
    n_ids: usize,
    batch: &SpeciationBatch,
) -> Result<(usize, usize, usize), SpeciationError> {
    let (ns, nsp, nc) = (log_betas.nrows(), model.n_species(), model.n_components());
    check_len("log_betas columns (species)", nsp, log_betas.ncols())?;
    check_len("totals rows (samples)", ns, totals.nrows())?;
    check_len("totals columns (components)", nc, totals.ncols())?;
    check_len("sample ids", ns, n_ids)?;
    check_len("batch concentrations rows", ns, batch.concentrations.nrows())?;
    check_len("batch concentrations columns", nsp, batch.concentrations.ncols())?;
    check_len("batch free rows", ns, batch.free.nrows())?;
    check_len("batch free columns", nc, batch.free.ncols())?;
    if let Some(d) = &batch.derivatives {
        check_len("batch derivatives", ns * nsp * nsp, d.len())?;
    }
    if !(RESIDUAL_TOLERANCE..=LOOSEST_TOLERANCE).contains(&batch.tolerance) {
        return Err(SpeciationError::InvalidTolerance {
            value: batch.tolerance,
        });
    }
    Ok((ns, nsp, nc))
}

fn check_len(what: &'static str, expected: usize, found: usize) -> Result<(), SpeciationError> {
    if expected == found {
        Ok(())
    } else {
        Err(SpeciationError::Shape {
            what,
            expected,
            found,
        })
    }
}

/// Solves the mass balance of one sample.
///
/// `log_betas`: log₁₀ β of every species in model order (free components must be 0);
/// `totals`: total concentration of every component, mol/L.
///
/// # Errors
/// [`SpeciationError::Shape`] for wrong lengths; [`SpeciationError::InvalidLogBeta`],
/// [`SpeciationError::FreeComponentLogBeta`], [`SpeciationError::InvalidTotal`] for bad inputs;
/// [`SpeciationError::NotConverged`] naming `sample_id` if no solution was found (possible
/// only when a signed component's total admits none).
///
/// # Examples
/// ```
/// use isosbestic::speciation::{speciate, EquilibriumModel};
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true }, { name = "L", absorbs = false }]
///     [[species]]
///     name = "ML"
///     stoichiometry = { M = 1, L = 1 }
///     absorbs = true
///     law = { kind = "fixed", log_beta = { value = 3.0 } }
/// "#)?.check()?;
/// let s = speciate(&model, &[0.0, 0.0, 3.0], &[1e-3, 2e-3], "s1")?;
/// let (m, l, ml) = (s.concentrations[0], s.concentrations[1], s.concentrations[2]);
/// approx::assert_relative_eq!(m + ml, 1e-3, max_relative = 1e-12);
/// approx::assert_relative_eq!(l + ml, 2e-3, max_relative = 1e-12);
/// approx::assert_relative_eq!(ml / (m * l), 1e3, max_relative = 1e-10);
/// # Ok::<(), isosbestic::speciation::SpeciationError>(())
/// ```
pub fn speciate(
    model: &ValidModel,
    log_betas: &[f64],
    totals: &[f64],
    sample_id: &str,
) -> Result<Speciation, SpeciationError> {
    check_len("log_betas (species)", model.n_species(), log_betas.len())?;
    check_len("totals (components)", model.n_components(), totals.len())?;
    let mut ws = Workspace::new(model);
    ws.load(
        model,
        log_betas.iter().copied(),
        totals.iter().copied(),
        sample_id,
    )?;
    let (iterations, residual, route) = ws.solve(None, sample_id)?;
    let concentrations = ws.c.clone();
    Ok(Speciation {
        free: concentrations[..ws.nc].to_vec(),
        concentrations,
        iterations,
        residual,
        route,
    })
}

/// ∂cᵢ/∂ log₁₀ βₖ (species × species; row i, column k) at a solution from [`speciate`], by
/// implicit differentiation of the mass balance Aᵀc(u, β) = T:
///
/// ```text
/// (Aᵀ diag(c) A) ∂u/∂ln βₖ = −cₖ aₖ,   ∂cᵢ/∂log₁₀ βₖ = ln 10 · cᵢ (δᵢₖ + aᵢ · ∂u/∂ln βₖ)
/// ```
///
/// One factorisation per sample, one triangular solve per species. Absent species (a
/// component with total 0) have zero rows and columns.
///
/// # Errors
/// As [`speciate`], plus [`SpeciationError::SingularJacobian`] if the Jacobian cannot be factorised.
///
/// # Examples
/// ```
/// use isosbestic::speciation::{concentration_derivatives, EquilibriumModel};
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true }, { name = "L", absorbs = false }]
///     [[species]]
///     name = "ML"
///     stoichiometry = { M = 1, L = 1 }
///     absorbs = true
///     law = { kind = "fixed", log_beta = { value = 3.0 } }
/// "#)?.check()?;
/// let d = concentration_derivatives(&model, &[0.0, 0.0, 3.0], &[1e-3, 2e-3], "s1")?;
/// // mass balance of M holds whatever β: ∂[M]/∂logβ + ∂[ML]/∂logβ = 0
/// approx::assert_abs_diff_eq!(d[[0, 2]] + d[[2, 2]], 0.0, epsilon = 1e-18);
/// assert!(d[[2, 2]] > 0.0);
/// # Ok::<(), isosbestic::speciation::SpeciationError>(())
/// ```
pub fn concentration_derivatives(
    model: &ValidModel,
    log_betas: &[f64],
    totals: &[f64],
    sample_id: &str,
) -> Result<Array2<f64>, SpeciationError> {
    check_len("log_betas (species)", model.n_species(), log_betas.len())?;
    check_len("totals (components)", model.n_components(), totals.len())?;
    let mut ws = Workspace::new(model);
    ws.load(
        model,
        log_betas.iter().copied(),
        totals.iter().copied(),
        sample_id,
    )?;
    ws.solve(None, sample_id)?;
    let nsp = model.n_species();
    let mut out = Array2::zeros((nsp, nsp));
    if let Some(s) = out.as_slice_mut() {
        ws.derivatives_into(s, sample_id)?;
    }
    Ok(out)
}

/// Speciates every sample: `log_betas` is samples × species (e.g. from
/// [`ValidModel::log10_betas`]), `totals` samples × components, `sample_ids` one per sample
/// (used in errors). Allocates the result; see [`speciate_all_into`] to reuse one.
///
/// # Errors
/// [`SpeciationError::Shape`] on mismatched sizes; otherwise the first failing sample's error
/// (see [`speciate`]), which names that sample.
///
/// # Examples
/// ```
/// use isosbestic::speciation::{speciate_all, Derivatives, EquilibriumModel};
/// use ndarray::array;
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true }, { name = "L", absorbs = false }]
///     [[species]]
///     name = "ML"
///     stoichiometry = { M = 1, L = 1 }
///     absorbs = true
///     law = { kind = "van_t_hoff", log_beta_ref = { value = 3.0 }, dh_ref = { value = -20000.0 } }
/// "#)?.check()?;
/// let lb = model.log10_betas(&[288.15, 298.15, 318.15]);
/// let totals = array![[1e-3, 1e-3], [1e-3, 1e-3], [1e-3, 1e-3]];
/// let b = speciate_all(&model, lb.view(), totals.view(), &["a", "b", "c"], Derivatives::LogBeta)?;
/// // exothermic: less complex when warmer
/// assert!(b.concentrations[[0, 2]] > b.concentrations[[2, 2]]);
/// assert_eq!(b.derivatives.unwrap().dim(), (3, 3, 3));
/// # Ok::<(), isosbestic::speciation::SpeciationError>(())
/// ```
pub fn speciate_all<S: AsRef<str>>(
    model: &ValidModel,
    log_betas: ArrayView2<f64>,
    totals: ArrayView2<f64>,
    sample_ids: &[S],
    derivatives: Derivatives,
) -> Result<SpeciationBatch, SpeciationError> {
    let mut batch = SpeciationBatch::new(model, log_betas.nrows(), derivatives);
    speciate_all_into(model, log_betas, totals, sample_ids, Start::Cold, &mut batch)?;
    Ok(batch)
}

/// As [`speciate_all`], writing into an existing batch (no allocation beyond one small
/// workspace). With [`Start::Warm`] each sample starts from the free concentrations already in
/// `batch` (the previous call's answer): the natural choice inside a fit, where parameters
/// change little between iterations. Derivatives are computed if `batch.derivatives` is `Some`.
///
/// # Errors
/// As [`speciate_all`]; also [`SpeciationError::Shape`] if `batch` has the wrong shape.
pub fn speciate_all_into<S: AsRef<str>>(
    model: &ValidModel,
    log_betas: ArrayView2<f64>,
    totals: ArrayView2<f64>,
    sample_ids: &[S],
    start: Start,
    batch: &mut SpeciationBatch,
) -> Result<(), SpeciationError> {
    let (ns, nsp, nc) = check_shapes(model, log_betas, totals, sample_ids.len(), batch)?;
    batch.iterations.resize(ns, 0);
    batch.residuals.resize(ns, 0.0);
    batch.ionic_strength.resize(ns, f64::NAN);
    let mut ws = Workspace::new(model);
    ws.polish = start == Start::Extrapolated;
    ws.tolerance = batch.tolerance;
    ws.wanted = batch.derivative_species.clone().unwrap_or_default();
    let mut start_u = vec![0.0; nc];
    let mut dbuf = vec![0.0; if batch.derivatives.is_some() { nsp * nsp } else { 0 }];
    for (s, id) in sample_ids.iter().enumerate() {
        let id = id.as_ref();
        ws.load(
            model,
            log_betas.row(s).iter().copied(),
            totals.row(s).iter().copied(),
            id,
        )?;
        let warm = match start {
            Start::Warm | Start::Extrapolated => {
                for (u, &x) in start_u.iter_mut().zip(batch.free.row(s)) {
                    *u = if x > 0.0 { x.ln() } else { f64::NAN };
                }
                Some(start_u.as_slice())
            }
            Start::Cold => None,
        };
        let (it, rel, _) = ws.solve(warm, id)?;
        batch.iterations[s] = it;
        batch.residuals[s] = rel;
        for (o, &c) in batch.concentrations.row_mut(s).iter_mut().zip(&ws.c) {
            *o = c;
        }
        for (o, &c) in batch.free.row_mut(s).iter_mut().zip(&ws.c) {
            *o = c;
        }
        if let Some(d) = batch.derivatives.as_mut() {
            ws.derivatives_into(&mut dbuf, id)?;
            for (o, &v) in d.index_axis_mut(ndarray::Axis(0), s).iter_mut().zip(&dbuf) {
                *o = v;
            }
        }
    }
    Ok(())
}

/// Default relative tolerance on the self-consistency of the ionic strength, |ΔI| / I.
pub const IONIC_STRENGTH_TOLERANCE: f64 = 1e-10;

/// The solution medium of each sample of a batch: activity corrections, the inert background
/// electrolyte, and the concentration scale of the constants. [`Medium::default`] is the ideal
/// medium (no activity corrections, molar scale) of [`speciate_all_into`].
///
/// - **Activity** ([`Medium::activity`], off by default): with the charges zᵢ of every species
///   (see [`ValidModel::charges`]), the ionic strength I = I_bg + ½ Σ cᵢ zᵢ² is iterated with
///   the speciation to self-consistency, each pass solving the mass balance with the
///   conditional constants log βᵢ,c = log βᵢ + Σⱼ aᵢⱼ log γⱼ(I) − log γᵢ(I) (γ from the
///   activity model at I and the sample's temperature). The log β given are then
///   thermodynamic (infinite-dilution) constants.
/// - **Background electrolyte** ([`Medium::background_ionic_strength`]): the ionic strength of
///   inert ions not in the model (e.g. a LiClO₄ medium), per sample, in the unit of the totals;
///   it is converted with them to the molal scale.
/// - **Scale** ([`Medium::kg_solvent_per_litre`]): on the molal scale the totals (mol/L) are
///   divided by the kg of solvent per litre of solution, the speciation is solved in mol/kg
///   (so β are molal constants and I is molal), and concentrations and derivatives are
///   multiplied back to mol/L for Beer–Lambert.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Medium {
    /// The activity model ([`ActivityCorrection::None`]: constant ionic medium, conditional
    /// constants).
    pub activity: ActivityCorrection,
    /// Temperature of each sample, K (needed with activity corrections).
    pub temperatures_k: Vec<f64>,
    /// Ionic strength of the inert background electrolyte per sample, in the unit of the
    /// totals (empty: none).
    pub background_ionic_strength: Vec<f64>,
    /// Molal scale: kg of solvent per litre of solution for each sample (ρ·w/1000, see
    /// [`crate::thermo::ConcentrationScale`]); `None`: the molar scale.
    pub kg_solvent_per_litre: Option<Vec<f64>>,
    /// Relative tolerance on |ΔI| / I at self-consistency.
    pub ionic_strength_tolerance: f64,
    /// Outer (ionic-strength) iterations allowed per sample before
    /// [`SpeciationError::IonicStrengthNotConverged`].
    pub ionic_strength_iterations: usize,
}

impl Default for Medium {
    fn default() -> Self {
        Self {
            activity: ActivityCorrection::None,
            temperatures_k: Vec::new(),
            background_ionic_strength: Vec::new(),
            kg_solvent_per_litre: None,
            ionic_strength_tolerance: IONIC_STRENGTH_TOLERANCE,
            ionic_strength_iterations: 100,
        }
    }
}

impl Medium {
    /// `true` when the medium changes nothing (no activity corrections, molar scale).
    pub fn is_ideal(&self) -> bool {
        self.activity.is_none() && self.kg_solvent_per_litre.is_none()
    }

    /// The medium of the samples `rows` (per-sample entries picked in that order; empty
    /// per-sample lists stay empty).
    ///
    /// ```
    /// use isosbestic::speciation::Medium;
    /// let m = Medium { temperatures_k: vec![280.0, 300.0, 320.0], ..Medium::default() };
    /// assert_eq!(m.select(&[2, 0]).temperatures_k, vec![320.0, 280.0]);
    /// assert!(m.select(&[1]).background_ionic_strength.is_empty());
    /// ```
    pub fn select(&self, rows: &[usize]) -> Medium {
        let pick = |v: &[f64]| -> Vec<f64> {
            if v.is_empty() {
                Vec::new()
            } else {
                rows.iter().filter_map(|&i| v.get(i).copied()).collect()
            }
        };
        Medium {
            activity: self.activity,
            temperatures_k: pick(&self.temperatures_k),
            background_ionic_strength: pick(&self.background_ionic_strength),
            kg_solvent_per_litre: self.kg_solvent_per_litre.as_deref().map(pick),
            ionic_strength_tolerance: self.ionic_strength_tolerance,
            ionic_strength_iterations: self.ionic_strength_iterations,
        }
    }
}

/// As [`speciate_all_into`], in a non-ideal [`Medium`]: activity corrections iterated to a
/// self-consistent ionic strength, and/or the molal scale. `log_betas` are then the
/// thermodynamic constants on the medium's scale; `totals` stay in mol/L, and the
/// concentrations, free concentrations and derivatives written to `batch` are in mol/L.
/// [`SpeciationBatch::ionic_strength`] receives I (and is the warm start of the next call
/// with [`Start::Warm`]).
///
/// Derivatives (when `batch.derivatives` is `Some`) are exact: implicit differentiation of the
/// mass balance coupled with the ionic-strength equation (see the crate's speciation docs).
///
/// # Errors
/// As [`speciate_all_into`]; also [`SpeciationError::UnknownCharge`] (activity on, a species
/// without charge), [`SpeciationError::Shape`] for per-sample vectors of the wrong length,
/// [`SpeciationError::InvalidMedium`] (a non-positive kg of solvent per litre, a negative
/// background ionic strength, a non-positive temperature), [`SpeciationError::Activity`]
/// (e.g. a temperature outside 0–100 °C for the water-based A(T), B(T)) and
/// [`SpeciationError::IonicStrengthNotConverged`], each naming the sample.
///
/// # Examples
/// ```
/// use isosbestic::speciation::{speciate_all_in_medium, EquilibriumModel, Medium, SpeciationBatch, Derivatives, Start};
/// use isosbestic::thermo::{ActivityCorrection, ActivityModel, Davies};
/// use ndarray::array;
/// let model = EquilibriumModel::from_toml_str(r#"
///     components = [{ name = "M", absorbs = true, charge = 2 }, { name = "L", absorbs = false, charge = -1 }]
///     [[species]]
///     name = "ML"
///     stoichiometry = { M = 1, L = 1 }
///     absorbs = true
///     law = { kind = "fixed", log_beta = { value = 3.0 } }
/// "#)?.check()?;
/// let davies = ActivityCorrection::Davies(Davies::default());
/// let medium = Medium {
///     activity: davies,
///     temperatures_k: vec![298.15],
///     background_ionic_strength: vec![0.05],
///     ..Medium::default()
/// };
/// let mut batch = SpeciationBatch::new(&model, 1, Derivatives::Skip);
/// speciate_all_in_medium(&model, array![[0.0, 0.0, 3.0]].view(), array![[1e-3, 4e-3]].view(),
///     &["s1"], Start::Cold, &medium, &mut batch)?;
/// let (c, i) = (batch.concentrations.row(0), batch.ionic_strength[0]);
/// // self-consistent: I = I_bg + ½ Σ cz²
/// approx::assert_relative_eq!(i, 0.05 + 0.5 * (4.0 * c[0] + c[1] + c[2]), max_relative = 1e-9);
/// // mass action holds with the conditional constant at that I
/// let lg = |z| davies.log10_gamma(z, i, 298.15).unwrap();
/// let log_beta_c = 3.0 + lg(2) + lg(-1) - lg(1);
/// approx::assert_relative_eq!((c[2] / (c[0] * c[1])).log10(), log_beta_c, max_relative = 1e-9);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn speciate_all_in_medium<S: AsRef<str>>(
    model: &ValidModel,
    log_betas: ArrayView2<f64>,
    totals: ArrayView2<f64>,
    sample_ids: &[S],
    start: Start,
    medium: &Medium,
    batch: &mut SpeciationBatch,
) -> Result<(), SpeciationError> {
    if medium.is_ideal() {
        return speciate_all_into(model, log_betas, totals, sample_ids, start, batch);
    }
    let (ns, nsp, nc) = check_shapes(model, log_betas, totals, sample_ids.len(), batch)?;
    let activity_on = !medium.activity.is_none();
    let charges = if activity_on {
        check_len("medium temperatures (samples)", ns, medium.temperatures_k.len())?;
        model.charges()?
    } else {
        vec![0; nsp]
    };
    if !medium.background_ionic_strength.is_empty() {
        check_len(
            "medium background ionic strengths (samples)",
            ns,
            medium.background_ionic_strength.len(),
        )?;
    }
    if let Some(f) = &medium.kg_solvent_per_litre {
        check_len("medium kg of solvent per litre (samples)", ns, f.len())?;
    }
    let tolerance = medium.ionic_strength_tolerance;
    if !(tolerance.is_finite() && tolerance > 0.0) {
        return Err(SpeciationError::InvalidMedium {
            sample: sample_ids
                .first()
                .map_or_else(String::new, |s| s.as_ref().to_string()),
            what: "ionic_strength_tolerance",
            value: tolerance,
            requirement: "positive and finite",
        });
    }
    batch.iterations.resize(ns, 0);
    batch.residuals.resize(ns, 0.0);
    batch.ionic_strength.resize(ns, f64::NAN);
    let mut ws = Workspace::new(model);
    ws.polish = start == Start::Extrapolated;
    ws.tolerance = batch.tolerance;
    ws.wanted = batch.derivative_species.clone().unwrap_or_default();
    for (z2, &z) in ws.z2.iter_mut().zip(&charges) {
        *z2 = f64::from(z * z);
    }
    let mut start_u = vec![0.0; nc];
    let mut scaled = vec![0.0; nc];
    let mut dbuf = vec![0.0; if batch.derivatives.is_some() { nsp * nsp } else { 0 }];
    for (s, id) in sample_ids.iter().enumerate() {
        let id = id.as_ref();
        let invalid = |what, value, requirement| SpeciationError::InvalidMedium {
            sample: id.to_string(),
            what,
            value,
            requirement,
        };
        let f = match &medium.kg_solvent_per_litre {
            Some(v) => {
                let f = v[s];
                if !(f.is_finite() && f > 0.0) {
                    return Err(invalid("kg of solvent per litre", f, "positive and finite"));
                }
                f
            }
            None => 1.0,
        };
        for (o, &t) in scaled.iter_mut().zip(totals.row(s)) {
            *o = t / f;
        }
        ws.load(
            model,
            log_betas.row(s).iter().copied(),
            scaled.iter().copied(),
            id,
        )?;
        let warm = match start {
            Start::Warm | Start::Extrapolated => {
                for (u, &x) in start_u.iter_mut().zip(batch.free.row(s)) {
                    *u = if x > 0.0 { (x / f).ln() } else { f64::NAN };
                }
                Some(start_u.as_slice())
            }
            Start::Cold => None,
        };
        let (it, rel) = if activity_on {
            let t_k = medium.temperatures_k[s];
            if !(t_k.is_finite() && t_k > 0.0) {
                return Err(invalid("temperature (K)", t_k, "positive and finite"));
            }
            let background = medium.background_ionic_strength.get(s).copied().unwrap_or(0.0);
            if !(background.is_finite() && background >= 0.0) {
                return Err(invalid(
                    "background ionic strength",
                    background,
                    "non-negative and finite",
                ));
            }
            ws.ln_beta0.copy_from_slice(&ws.ln_beta);
            let start_i = match start {
                Start::Warm | Start::Extrapolated => Some(batch.ionic_strength[s]),
                Start::Cold => None,
            };
            let (it, rel, i) = ws.solve_with_activity(
                &medium.activity,
                &charges,
                t_k,
                background / f,
                (tolerance, medium.ionic_strength_iterations),
                warm,
                start_i,
                id,
            )?;
            batch.ionic_strength[s] = i;
            (it, rel)
        } else {
            let (it, rel, _) = ws.solve(warm, id)?;
            (it, rel)
        };
        batch.iterations[s] = it;
        batch.residuals[s] = rel;
        for (o, &c) in batch.concentrations.row_mut(s).iter_mut().zip(&ws.c) {
            *o = c * f;
        }
        for (o, &c) in batch.free.row_mut(s).iter_mut().zip(&ws.c) {
            *o = c * f;
        }
        if let Some(d) = batch.derivatives.as_mut() {
            if activity_on {
                ws.derivatives_with_activity_into(&mut dbuf, id)?;
            } else {
                ws.derivatives_into(&mut dbuf, id)?;
            }
            for (o, &v) in d.index_axis_mut(ndarray::Axis(0), s).iter_mut().zip(&dbuf) {
                *o = v * f;
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::speciation::EquilibriumModel;
    use approx::assert_relative_eq;

    fn ml_model() -> ValidModel {
        EquilibriumModel::from_toml_str(
            r#"
            components = [{ name = "M", absorbs = true }, { name = "L", absorbs = false }]
            [[species]]
            name = "ML"
            stoichiometry = { M = 1, L = 1 }
            absorbs = true
            law = { kind = "fixed", log_beta = { value = 3.0 } }
            "#,
        )
        .unwrap()
        .check()
        .unwrap()
    }

    #[test]
    fn a_badly_scaled_two_component_system_is_solved_to_rounding() {
        let model = ml_model();
        let mut ws = Workspace::new(&model);
        ws.load(&model, [0.0, 0.0, 3.0], [1.0, 1.0], "s").unwrap();
        // c spanning 40 decades; species M (1,0), L (0,1), ML (1,1): H = [c₀+c₂, c₂; c₂, c₁+c₂],
        // det H = c₀c₁ + c₀c₂ + c₁c₂, so by Cramer's rule (worked out by hand, no cancellation
        // for b = (1, 2)): x₀ = (c₁ − c₂)/det, x₁ = (2c₀ + c₂)/det
        let c = [1e-30, 1.0, 1e10];
        assert!(ws.factor_jacobian(&c));
        let det = c[0] * c[1] + c[0] * c[2] + c[1] * c[2];
        let exact = [(c[1] - c[2]) / det, (2.0 * c[0] + c[2]) / det];
        let mut b = [1.0, 2.0];
        ws.solve_factored(&mut b);
        assert_relative_eq!(b[0], exact[0], max_relative = 1e-14);
        assert_relative_eq!(b[1], exact[1], max_relative = 1e-14);
        // the general (scaled Cholesky) path on the same system: forward error ε·κ, κ ≈ 4e10
        let mut h = [0.0; 4];
        for j in 0..2 {
            for k in 0..2 {
                h[j * 2 + k] = (0..3)
                    .map(|i| ws.a[i * 2 + j] * ws.a[i * 2 + k] * c[i])
                    .sum::<f64>();
            }
        }
        let d = [1.0 / h[0].sqrt(), 1.0 / h[3].sqrt()];
        let mut general = Workspace::new(&model);
        assert!(cholesky_scaled(&h, &d, 2, 0.0, &mut general.l));
        general.d.copy_from_slice(&d);
        let mut y = [1.0, 2.0];
        general.solve_factored(&mut y);
        assert_relative_eq!(y[0], exact[0], max_relative = 1e-5);
        assert_relative_eq!(y[1], exact[1], max_relative = 1e-5);
    }

    #[test]
    fn the_closed_form_two_component_solve_agrees_with_the_general_factor() {
        // Reference: the general path (H as the loops build it, Jacobi-scaled Cholesky) on the
        // same H and right-hand sides; agreement to a few ε·κ(H) (standard perturbation bound
        // of a backward-stable solve, common practice).
        let model = ml_model();
        let mut ws = Workspace::new(&model);
        ws.load(&model, [0.0, 0.0, 3.0], [1.0, 1.0], "s").unwrap();
        for c in [
            [1e-30, 1.0, 1e10],
            [0.3, 2e-3, 7e-5],
            [1.0, 1.0, 1.0],
            [5e-9, 0.1, 0.2],
            [1e-3, 1e-3, 1e-12],
        ] {
            assert!(ws.factor_jacobian(&c));
            assert!(ws.inverse_2x2.is_some(), "closed form taken at c = {c:?}");
            let (nc, nsp) = (2, 3);
            let mut h = vec![0.0; 4];
            for j in 0..nc {
                for k in 0..nc {
                    for i in 0..nsp {
                        h[j * nc + k] += ws.a[i * nc + j] * ws.a[i * nc + k] * c[i];
                    }
                }
            }
            let d: Vec<f64> = (0..nc).map(|j| 1.0 / h[j * nc + j].sqrt()).collect();
            let mut l = vec![0.0; 4];
            assert!(cholesky_scaled(&h, &d, nc, 0.0, &mut l));
            let mut general = Workspace::new(&model);
            general.l.copy_from_slice(&l);
            general.d.copy_from_slice(&d);
            // κ of the scaled H = (1 + |ρ|)/(1 − |ρ|)
            let rho = (h[1] / (h[0] * h[3]).sqrt()).abs();
            let kappa = (1.0 + rho) / (1.0 - rho);
            for rhs in [[1.0, 0.0], [0.0, 1.0], [0.3, -2.0]] {
                let (mut x, mut y) = (rhs, rhs);
                ws.solve_factored(&mut x);
                general.solve_factored(&mut y);
                for j in 0..2 {
                    // compared in the scaled variables d⁻¹x, where the bound is uniform
                    let scale = (0..2).map(|k| (y[k] / d[k]).abs()).fold(0.0, f64::max);
                    let err = ((x[j] - y[j]) / d[j]).abs();
                    assert!(
                        err <= 64.0 * f64::EPSILON * kappa * scale,
                        "c = {c:?}, rhs {rhs:?}: {x:?} vs {y:?}"
                    );
                }
            }
        }
        // a singular H (one species carrying both components only) falls back to the general,
        // regularised path
        assert!(!ws.factor_2x2(&[0.0, 0.0, 1.0]));
    }

    #[test]
    fn the_series_for_ln_1p_near_zero_matches_the_library_function() {
        // Reference: std's f64::ln_1p (correctly rounded to within an ulp or so).
        for k in 0..=400 {
            let x = 1e-4 * (k as f64 / 200.0 - 1.0) * 0.999_999;
            let (series, library) = (ln_1p_near_zero(x), x.ln_1p());
            assert!(
                (series - library).abs() <= 4.0 * f64::EPSILON * library.abs(),
                "x = {x:e}"
            );
        }
        for x in [1e-4, -0.5, 3.0, 1e6] {
            assert_eq!(ln_1p_near_zero(x).to_bits(), x.ln_1p().to_bits());
        }
    }

    #[test]
    fn coordinate_sweeps_alone_solve_a_one_component_problem() {
        let model = EquilibriumModel::from_toml_str(
            r#"
            components = [{ name = "A", absorbs = true }]
            [[species]]
            name = "A2"
            stoichiometry = { A = 2 }
            absorbs = true
            law = { kind = "fixed", log_beta = { value = 4.0 } }
            "#,
        )
        .unwrap()
        .check()
        .unwrap();
        let mut ws = Workspace::new(&model);
        ws.load(&model, [0.0, 4.0], [1e-2], "s").unwrap();
        ws.u[0] = 5.0; // far too high a start
        let sweeps = ws.coordinate_sweeps(1e-12);
        assert_eq!(sweeps, 1);
        // a + 2 K a² = T: a = (−1 + √(1 + 8KT)) / (4K), written stably as 2T/(1 + √(1 + 8KT))
        let k = 1e4;
        let a = 2.0 * 1e-2 / (1.0 + (1.0 + 8.0 * k * 1e-2f64).sqrt());
        assert_relative_eq!(ws.c[0], a, max_relative = 1e-12);
    }

    #[test]
    fn newton_from_an_absurd_start_still_converges() {
        let model = ml_model();
        let mut ws = Workspace::new(&model);
        ws.load(&model, [0.0, 0.0, 40.0], [1e-9, 10.0], "s").unwrap();
        ws.u = vec![300.0, -300.0];
        let (ok, _, rel) = ws.newton(MAX_NEWTON);
        assert!(ok, "residual {rel}");
    }

    #[test]
    fn a_looser_tolerance_is_met_in_fewer_steps_and_an_unsupported_one_refused() {
        let model = ml_model();
        let n = 12;
        let log_betas =
            Array2::from_shape_fn((n, 3), |(i, k)| if k == 2 { 1.0 + 0.5 * i as f64 } else { 0.0 });
        let totals =
            Array2::from_shape_fn((n, 2), |(i, j)| if j == 0 { 1e-3 } else { 1e-3 * (1 + i) as f64 });
        let ids: Vec<String> = (0..n).map(|i| format!("s{i}")).collect();
        let solve = |tolerance: f64| {
            let mut batch = SpeciationBatch {
                tolerance,
                ..SpeciationBatch::new(&model, n, Derivatives::Skip)
            };
            speciate_all_into(
                &model,
                log_betas.view(),
                totals.view(),
                &ids,
                Start::Cold,
                &mut batch,
            )
            .map(|()| batch)
        };
        let tight = solve(RESIDUAL_TOLERANCE).unwrap();
        let loose = solve(1e-6).unwrap();
        assert!(loose.residuals.iter().all(|&r| r <= 1e-6));
        let steps = |b: &SpeciationBatch| b.iterations.iter().sum::<usize>();
        assert!(
            steps(&loose) < steps(&tight),
            "{} vs {}",
            steps(&loose),
            steps(&tight)
        );
        for (a, b) in loose.concentrations.iter().zip(&tight.concentrations) {
            assert!((a - b).abs() <= 1e-5 * b.abs().max(1e-12), "{a} vs {b}");
        }
        for bad in [1e-13, 1e-2, f64::NAN] {
            assert!(
                matches!(solve(bad), Err(SpeciationError::InvalidTolerance { .. })),
                "{bad}"
            );
        }
    }
}
