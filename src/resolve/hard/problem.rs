//! The variable-projection problem: residuals and Jacobian of the global fit as functions of the
//! thermodynamic parameters θ only (argmin [`Operator`] and [`Jacobian`]).

use super::small_svd::SmallSvd;
use super::{FreeParameter, SpectraTemperature};
use crate::resolve::lm::{GaussNewtonProblem, NormalEquations};
use crate::speciation::{
    Derivatives, FormationLaw, Medium, SpeciationBatch, Start, ValidModel, speciate_all_in_medium,
};
use argmin::core::{Error as ArgminError, Jacobian, Operator};
use ndarray::{Array1, Array2, ArrayView2};
use std::borrow::Cow;
use std::sync::Mutex;

/// Speciation tolerance of a [`VarproProblem::restricted`] problem (relative mass-balance
/// residual): concentrations to ~10⁻⁶, which moves a cost by far less than the differences
/// between the candidate starts it ranks, and saves the last Newton step of most samples.
pub const SCORING_TOLERANCE: f64 = 1e-6;

/// Everything fixed during a fit, and a warm-start speciation cache.
pub(crate) struct VarproProblem<'a> {
    pub model: &'a ValidModel,
    /// Free parameters θ: which species and which law parameter each one is.
    pub free: &'a [FreeParameter],
    /// Sample temperatures, K.
    pub temperatures_k: Array1<f64>,
    /// Totals at the measurement temperature, samples × model components, mol/L.
    pub totals: Array2<f64>,
    /// Sample ids (for speciation errors).
    pub sample_ids: Vec<String>,
    /// Path lengths b, cm.
    pub path_cm: Array1<f64>,
    /// Model species indices whose spectra are fitted (absorbing, no known spectrum).
    pub absorbing: Vec<usize>,
    /// Polynomial order of ε(T) and its reference temperature.
    pub spectra_temperature: SpectraTemperature,
    /// The reduced data G (samples × r) with G·Gᵀ = D̃·D̃ᵀ, D̃ = D(I − P_W) (exact).
    pub reduced: Array2<f64>,
    /// Model species whose spectra are known and held fixed (absorbing, not fitted).
    pub known: Vec<usize>,
    /// Their spectra in the reduced coordinates, H (known × r): [G; H] is the factor of the
    /// Gram matrix of the stacked rows [D̃; Ẽᵀ], Ẽ = (I − P_W)·E the known spectra, so
    /// ‖D̃ − diag(b)·C_known·Ẽᵀ‖ is ‖G − diag(b)·C_known·H‖ row by row (exact).
    pub known_reduced: Array2<f64>,
    /// The known spectra on the data set's full wavelength grid (known × wavelengths), ε.
    pub known_values: Array2<f64>,
    /// Warm-start speciation buffer.
    pub batch: Mutex<WarmBatch>,
    /// Activity corrections and concentration scale of the speciation (ideal by default).
    pub medium: Medium,
    /// The last few speciations ([`SpeciationCache`]).
    pub recent: Mutex<SpeciationCache>,
    /// Whether [`GaussNewtonProblem::cost`] also computes ∂C/∂θ: the solver asks for the normal
    /// equations at every point whose cost it accepts, which then reuse that speciation (false
    /// where only costs are wanted, e.g. when ranking starts).
    pub derivatives_with_cost: bool,
    /// Every wavelength has a masked point in some sample: `reduced` was built from the data
    /// with those points zeroed, so it only ranks starts and the fit runs columnwise.
    pub every_wavelength_masked: bool,
}

/// The speciation buffer of the last solve (the warm start of the next) and the log₁₀ β
/// (samples × species) it was solved at.
pub(crate) struct WarmBatch {
    pub batch: SpeciationBatch,
    pub log_betas: Option<Array2<f64>>,
}

impl WarmBatch {
    pub fn new(batch: SpeciationBatch) -> Self {
        Self {
            batch,
            log_betas: None,
        }
    }

    /// Moves the free concentrations of the last solve to first order towards the log β
    /// `to`: ln xⱼ += Σₖ (∂xⱼ/∂log βₖ)/xⱼ · Δlog βₖ, each change capped at ±2 (a factor e²),
    /// so the Newton solve from there needs fewer steps (the solve checks its own convergence:
    /// the prediction only moves the start). Returns whether it did: not when the last solve
    /// had no derivatives or a different shape.
    pub fn extrapolate_to(&mut self, to: &Array2<f64>) -> bool {
        let (Some(from), Some(d)) = (self.log_betas.as_ref(), self.batch.derivatives.as_ref()) else {
            return false;
        };
        if from.dim() != to.dim() || d.dim().0 != to.nrows() {
            return false;
        }
        let nsp = to.ncols();
        for (s, mut free) in self.batch.free.rows_mut().into_iter().enumerate() {
            for (j, x) in free.iter_mut().enumerate() {
                if !(*x > 0.0) {
                    continue;
                }
                let dln: f64 = (0..nsp)
                    .map(|k| d[[s, j, k]] * (to[[s, k]] - from[[s, k]]))
                    .sum::<f64>()
                    / *x;
                if dln.is_finite() {
                    *x *= dln.clamp(-2.0, 2.0).exp();
                }
            }
        }
        true
    }
}

/// Concentrations (and ∂C/∂θ when computed) at the last few θ, newest first: the solver's
/// cost and normal equations at an accepted point, and the summary of a finished run, ask for
/// the same θ again (the same bits: only exact repeats hit). The capacity covers the few
/// points of the mirror-side run, which comes between the first run's end and its summary.
#[derive(Debug, Default)]
pub struct SpeciationCache {
    entries: Vec<CachedSpeciation>,
}

/// θ, C at θ, and ∂C/∂θ_p (empty when not computed).
type CachedSpeciation = (Array1<f64>, Array2<f64>, Vec<Array2<f64>>);

impl SpeciationCache {
    /// Entries kept.
    const CAPACITY: usize = 16;

    fn get(&self, theta: &Array1<f64>, derivatives: bool) -> Option<(Array2<f64>, Vec<Array2<f64>>)> {
        self.entries
            .iter()
            .find(|(t, _, dc)| {
                t.len() == theta.len()
                    && t.iter().zip(theta).all(|(a, b)| a.to_bits() == b.to_bits())
                    && (!derivatives || !dc.is_empty() || t.is_empty())
            })
            .map(|(_, c, dc)| (c.clone(), if derivatives { dc.clone() } else { Vec::new() }))
    }

    fn put(&mut self, theta: &Array1<f64>, c: &Array2<f64>, dc: &[Array2<f64>]) {
        self.entries.insert(0, (theta.clone(), c.clone(), dc.to_vec()));
        self.entries.truncate(Self::CAPACITY);
    }
}

/// The linear design X = [diag(b)·C_abs, diag(b·x)·C_abs, diag(b·x²)·C_abs] and the pieces of
/// its pseudo-inverse needed by the projection.
pub(crate) struct Projection {
    /// X, samples × m.
    pub x: Array2<f64>,
    /// Left singular vectors of X spanning its range, samples × rank.
    pub u: Array2<f64>,
    /// X⁺ (m × samples).
    pub pinv: Array2<f64>,
    /// Singular values of X (all).
    pub singular_values: Array1<f64>,
}

impl<'a> VarproProblem<'a> {
    /// Law parameter values per species with θ substituted.
    pub fn law_values(&self, theta: &Array1<f64>) -> Vec<Vec<f64>> {
        let mut values: Vec<Vec<f64>> = self
            .model
            .species()
            .iter()
            .map(|s| s.law.parameters().iter().map(|p| p.value).collect())
            .collect();
        for (p, fp) in self.free.iter().enumerate() {
            values[fp.species][fp.parameter] = theta[p];
        }
        values
    }

    /// log₁₀ β (samples × species) at θ and, optionally, ∂ log₁₀ β_k(T_i)/∂θ_p as
    /// samples × parameters (each θ belongs to one species).
    pub fn log_betas(&self, theta: &Array1<f64>, with_gradient: bool) -> (Array2<f64>, Option<Array2<f64>>) {
        let values = self.law_values(theta);
        let ns = self.temperatures_k.len();
        let nsp = self.model.n_species();
        let mut lb = Array2::zeros((ns, nsp));
        let mut grad = with_gradient.then(|| Array2::zeros((ns, self.free.len())));
        let mut g = Vec::new();
        for (k, sp) in self.model.species().iter().enumerate() {
            let np = sp.law.n_parameters();
            g.resize(np, 0.0);
            for (i, &t) in self.temperatures_k.iter().enumerate() {
                lb[[i, k]] = if grad.is_some() {
                    sp.law.log10_beta_gradient_with(&values[k], t, &mut g)
                } else {
                    sp.law.log10_beta_with(&values[k], t)
                };
                if let Some(grad) = grad.as_mut() {
                    for (p, fp) in self.free.iter().enumerate() {
                        if fp.species == k {
                            grad[[i, p]] = g[fp.parameter];
                        }
                    }
                }
            }
        }
        (lb, grad)
    }

    /// Speciation at θ (concentrations, and ∂C/∂θ as one samples × species matrix per θ).
    pub fn speciate(
        &self,
        theta: &Array1<f64>,
        derivatives: bool,
    ) -> Result<(Array2<f64>, Vec<Array2<f64>>), ArgminError> {
        if let Some(hit) = self.recent.lock().ok().and_then(|r| r.get(theta, derivatives)) {
            return Ok(hit);
        }
        let (lb, grad) = self.log_betas(theta, derivatives);
        let mut warm_batch = self.batch.lock().map_err(|_| -> ArgminError {
            argmin::argmin_error!(PotentialBug, "speciation cache poisoned")
        })?;
        let predicted = warm_batch.extrapolate_to(&lb);
        warm_batch.log_betas = None;
        let batch = &mut warm_batch.batch;
        let want = if derivatives {
            Derivatives::LogBeta
        } else {
            Derivatives::Skip
        };
        if batch.derivatives.is_some() != derivatives {
            // a batch of the other shape, keeping the warm start and the settings (tolerance,
            // which derivatives)
            let old = std::mem::replace(batch, SpeciationBatch::new(self.model, lb.nrows(), want));
            batch.free.assign(&old.free);
            batch.ionic_strength.clone_from(&old.ionic_strength);
            batch.tolerance = old.tolerance;
            batch.derivative_species = old.derivative_species;
        }
        // ∂C/∂ log β only for the species whose constants θ moves (the others stay zero and
        // their Δlog β is zero in the prediction too); set once, the free parameters are fixed
        if batch.derivative_species.is_none() {
            batch.derivative_species = Some(
                (0..self.model.n_species())
                    .map(|k| self.free.iter().any(|f| f.species == k))
                    .collect(),
            );
        }
        // Warm start from the previous θ (moved to first order when its derivatives are there);
        // if that fails, cold; if that fails too, clear the cache so a failed trial point cannot
        // poison later evaluations.
        let warm = speciate_all_in_medium(
            self.model,
            lb.view(),
            self.totals.view(),
            &self.sample_ids,
            if predicted {
                Start::Extrapolated
            } else {
                Start::Warm
            },
            &self.medium,
            batch,
        );
        if warm.is_err() {
            batch.free.fill(0.0);
            if let Err(e) = speciate_all_in_medium(
                self.model,
                lb.view(),
                self.totals.view(),
                &self.sample_ids,
                Start::Cold,
                &self.medium,
                batch,
            ) {
                batch.free.fill(0.0);
                return Err(argmin::argmin_error!(InvalidParameter, e.to_string()));
            }
        }
        let c = batch.concentrations.clone();
        let mut dc = Vec::new();
        if let (Some(grad), Some(d)) = (grad, batch.derivatives.as_ref()) {
            let (ns, nsp) = c.dim();
            for p in 0..self.free.len() {
                let k = self.free[p].species;
                let mut m = Array2::zeros((ns, nsp));
                for i in 0..ns {
                    let gik = grad[[i, p]];
                    for s in 0..nsp {
                        m[[i, s]] = d[[i, s, k]] * gik;
                    }
                }
                dc.push(m);
            }
        }
        warm_batch.log_betas = Some(lb);
        drop(warm_batch);
        if let Ok(mut recent) = self.recent.lock() {
            recent.put(theta, &c, &dc);
        }
        Ok((c, dc))
    }

    /// The design matrix X from a concentration matrix C (or its derivative: X is linear in C).
    pub fn design(&self, c: ArrayView2<f64>) -> Array2<f64> {
        let ns = c.nrows();
        let na = self.absorbing.len();
        let order = self.spectra_temperature.order();
        let mut x = Array2::zeros((ns, na * (order + 1)));
        for i in 0..ns {
            let dt = self.temperatures_k[i] - self.spectra_temperature.reference_k();
            let mut w = self.path_cm[i];
            for o in 0..=order {
                for (a, &k) in self.absorbing.iter().enumerate() {
                    x[[i, o * na + a]] = w * c[[i, k]];
                }
                w *= dt;
            }
        }
        x
    }

    /// Thin SVD of X with a numerical rank and X⁺ (one-sided Jacobi: X has only a few columns,
    /// where a LAPACK call costs more in set-up than in arithmetic).
    pub fn project(&self, x: Array2<f64>) -> Result<Projection, ArgminError> {
        let (n, k) = x.dim();
        if x.iter().any(|v| !v.is_finite()) {
            return Err(argmin::argmin_error!(
                InvalidParameter,
                "design matrix is not finite"
            ));
        }
        let svd = SmallSvd::of_transposed(x.t().iter().copied().collect(), k, n);
        let u = Array2::from_shape_vec((svd.rank, n), svd.ut)
            .map_err(|e| -> ArgminError { argmin::argmin_error!(PotentialBug, e.to_string()) })?
            .reversed_axes();
        let pinv = Array2::from_shape_vec((k, n), svd.pinv)
            .map_err(|e| -> ArgminError { argmin::argmin_error!(PotentialBug, e.to_string()) })?;
        Ok(Projection {
            x,
            u,
            pinv,
            singular_values: Array1::from(svd.sigma),
        })
    }

    /// diag(b)·C_known·H (samples × r): the known spectra's part of the reduced data at the
    /// concentrations `c` (linear in `c`, so also its derivative from ∂C).
    pub fn known_part(&self, c: ArrayView2<f64>) -> Array2<f64> {
        let mut k = Array2::zeros((c.nrows(), self.known_reduced.ncols()));
        for (i, mut row) in k.rows_mut().into_iter().enumerate() {
            for (a, &sp) in self.known.iter().enumerate() {
                row.scaled_add(self.path_cm[i] * c[[i, sp]], &self.known_reduced.row(a));
            }
        }
        k
    }

    /// The reduced target Y = G − diag(b)·C_known·H at the concentrations `c` (G itself when
    /// no spectrum is known).
    pub fn target(&self, c: ArrayView2<f64>) -> Cow<'_, Array2<f64>> {
        if self.known.is_empty() {
            Cow::Borrowed(&self.reduced)
        } else {
            Cow::Owned(&self.reduced - &self.known_part(c))
        }
    }

    /// D − diag(b)·C_known·E_knownᵀ on the full wavelength grid (D itself, borrowed, when no
    /// spectrum is known): the data the fitted spectra explain (the tests' check of the
    /// reduction; the fit itself never copies D).
    #[cfg(test)]
    pub fn less_known<'d>(&self, d: &'d Array2<f64>, c: ArrayView2<f64>) -> Cow<'d, Array2<f64>> {
        if self.known.is_empty() {
            return Cow::Borrowed(d);
        }
        let mut out = d.clone();
        for (i, mut row) in out.rows_mut().into_iter().enumerate() {
            for (a, &sp) in self.known.iter().enumerate() {
                row.scaled_add(-self.path_cm[i] * c[[i, sp]], &self.known_values.row(a));
            }
        }
        Cow::Owned(out)
    }

    /// Residual matrix R = Q_X Y (samples × r) of the target `y` ([`Self::target`]).
    pub fn residual_matrix(&self, p: &Projection, y: &Array2<f64>) -> Array2<f64> {
        let uty = p.u.t().dot(y);
        y - &p.u.dot(&uty)
    }

    /// ‖Q_X Y‖² without forming R: row by row, rᵢ = yᵢ − Σₐ Uᵢₐ (UᵀY)ₐ (subtract, then square:
    /// no cancellation against ‖Y‖²).
    pub fn residual_sum_of_squares(&self, p: &Projection, y: &Array2<f64>) -> f64 {
        let uty = p.u.t().dot(y);
        let (Some(w), Some(ys)) = (uty.as_slice(), y.as_slice()) else {
            return sum_sq(self.residual_matrix(p, y).view());
        };
        let width = y.ncols();
        let mut row = vec![0.0; width];
        let mut total = 0.0;
        for (i, g) in ys.chunks_exact(width.max(1)).enumerate() {
            row.copy_from_slice(g);
            for (a, wa) in w.chunks_exact(width.max(1)).enumerate() {
                let coef = p.u[[i, a]];
                for (r, &v) in row.iter_mut().zip(wa) {
                    *r -= coef * v;
                }
            }
            total += super::small_svd::dot(&row, &row);
        }
        total
    }

    /// The same problem restricted to the samples `rows`: the Gram matrix of a subset of
    /// samples is the corresponding block of D̃D̃ᵀ, so the restriction is exact. Their rows of G
    /// (with H when spectra are known) are factored again, which leaves at most as many
    /// columns as rows: every cost of the subset then works on a small square factor. Its
    /// speciation stops at [`SCORING_TOLERANCE`]: it only ranks candidate parameters.
    pub fn restricted(&self, rows: &[usize]) -> VarproProblem<'a> {
        let model = self.model;
        let selected = self.reduced.select(ndarray::Axis(0), rows);
        let stacked = if self.known.is_empty() {
            selected
        } else {
            ndarray::concatenate![ndarray::Axis(0), selected, self.known_reduced]
        };
        let g = super::pivoted_cholesky(stacked.dot(&stacked.t()));
        let n = rows.len();
        VarproProblem {
            model,
            free: self.free,
            temperatures_k: self.temperatures_k.select(ndarray::Axis(0), rows),
            totals: self.totals.select(ndarray::Axis(0), rows),
            sample_ids: rows.iter().map(|&i| self.sample_ids[i].clone()).collect(),
            path_cm: self.path_cm.select(ndarray::Axis(0), rows),
            absorbing: self.absorbing.clone(),
            spectra_temperature: self.spectra_temperature,
            reduced: g.slice(ndarray::s![..n, ..]).to_owned(),
            known: self.known.clone(),
            known_reduced: if self.known.is_empty() {
                Array2::zeros((0, 1))
            } else {
                g.slice(ndarray::s![n.., ..]).to_owned()
            },
            known_values: self.known_values.clone(),
            medium: self.medium.select(rows),
            batch: Mutex::new(WarmBatch::new(SpeciationBatch {
                tolerance: SCORING_TOLERANCE,
                ..SpeciationBatch::new(model, rows.len(), Derivatives::Skip)
            })),
            recent: Mutex::new(SpeciationCache::default()),
            derivatives_with_cost: false,
            every_wavelength_masked: self.every_wavelength_masked,
        }
    }
}

/// Row-major flattening (residual order: sample by sample), without a copy when the matrix is
/// in standard layout (as every product and difference here is).
fn flatten(m: Array2<f64>) -> Array1<f64> {
    if m.is_standard_layout() {
        Array1::from(m.into_raw_vec_and_offset().0)
    } else {
        m.iter().copied().collect()
    }
}

impl Operator for VarproProblem<'_> {
    type Param = Array1<f64>;
    type Output = Array1<f64>;

    fn apply(&self, theta: &Array1<f64>) -> Result<Array1<f64>, ArgminError> {
        let (c, _) = self.speciate(theta, false)?;
        let p = self.project(self.design(c.view()))?;
        let y = self.target(c.view());
        Ok(flatten(self.residual_matrix(&p, &y)))
    }
}

impl Jacobian for VarproProblem<'_> {
    type Param = Array1<f64>;
    type Jacobian = Array2<f64>;

    /// Golub–Pereyra: ∂R/∂θ_p = −[Q (∂X_p X⁺ Y + ∂K_p) + (X⁺)ᵀ ∂X_pᵀ R], R = Q Y,
    /// Y = G − K, K = diag(b)·C_known·H.
    fn jacobian(&self, theta: &Array1<f64>) -> Result<Array2<f64>, ArgminError> {
        let (c, dc) = self.speciate(theta, true)?;
        let p = self.project(self.design(c.view()))?;
        let y = self.target(c.view());
        let r = self.residual_matrix(&p, &y);
        let st = p.pinv.dot(&*y); // X⁺Y (m × r): spectra in the reduced basis
        let n = r.len();
        let mut jac = Array2::zeros((n, self.free.len()));
        for (q, dcq) in dc.iter().enumerate() {
            let dx = self.design(dcq.view());
            let mut a = dx.dot(&st);
            if !self.known.is_empty() {
                a += &self.known_part(dcq.view());
            }
            let qa = &a - &p.u.dot(&p.u.t().dot(&a));
            let b = p.pinv.t().dot(&dx.t().dot(&r));
            let col = -(qa + b);
            jac.column_mut(q).assign(&flatten(col));
        }
        Ok(jac)
    }
}

/// The normal equations without the residual vector or its Jacobian (the solver's form).
///
/// With R = Q_X G, P = X⁺ᵀ (its columns span range X, so Q_X P = 0), M = GGᵀ and the
/// Golub–Pereyra columns J_p = −(A_p + B_p), A_p = Q_X ∂X_p X⁺ G (in range Q_X),
/// B_p = P ∂X_pᵀ R (in range X):
///
/// ```text
/// (Jᵀr)_p  = −⟨A_p, R⟩ = −Σ ∂X_p ∘ (R·GᵀP)
/// (JᵀJ)_pq = ⟨A_p, A_q⟩ + ⟨B_p, B_q⟩
///          = tr((Q_X ∂X_p)ᵀ(Q_X ∂X_q)·PᵀMP) + tr(PᵀP·(Rᵀ∂X_q)ᵀ(Rᵀ∂X_p))
/// ```
///
/// (the cross terms vanish because Q_X P = 0), so no array larger than samples × rank is formed
/// and the cost per evaluation is O(samples · rank · m · p).
///
/// With known spectra the target is Y(θ) = G − K(θ), K = diag(b)·C_known·H, G replaced by Y
/// above, and A_p gains Q_X ∂K_p (also in range Q_X): (Jᵀr)_p gains −⟨∂K_p, R⟩ and ⟨A_p, A_q⟩
/// is then formed from the A_p themselves (samples × r each).
impl GaussNewtonProblem for VarproProblem<'_> {
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        let (c, _) = self.speciate(theta, self.derivatives_with_cost)?;
        let p = self.project(self.design(c.view()))?;
        let y = self.target(c.view());
        let cost = 0.5 * self.residual_sum_of_squares(&p, &y);
        Ok(if cost.is_finite() { cost } else { f64::INFINITY })
    }

    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        let (c, dc) = self.speciate(theta, true)?;
        let proj = self.project(self.design(c.view()))?;
        let y = self.target(c.view());
        let uty = proj.u.t().dot(&*y); // UᵀY
        let r = &*y - &proj.u.dot(&uty); // R = Q_X Y
        let p_mat = proj.pinv.t(); // P = X⁺ᵀ, samples × m
        // YᵀP = (UᵀY)ᵀ·(UᵀP), rank × m: P = U·Σ⁻¹·Vᵀ lies in range(U) (no product with Y)
        let gtp = uty.t().dot(&proj.u.t().dot(&p_mat));
        let rgp = r.dot(&gtp); // R·YᵀP = Q_X M P, samples × m
        let k_mat = proj.pinv.dot(&p_mat); // PᵀP, m × m
        let dx: Vec<Array2<f64>> = dc.iter().map(|d| self.design(d.view())).collect();
        let np = dx.len();
        let m = proj.pinv.nrows();
        // Rᵀ·[∂X_1 … ∂X_p] in one product, then its blocks Rᵀ∂X_p
        let views: Vec<ArrayView2<f64>> = dx.iter().map(|d| d.view()).collect();
        let dx_all = ndarray::concatenate(ndarray::Axis(1), &views)
            .map_err(|e| -> ArgminError { argmin::argmin_error!(PotentialBug, e.to_string()) })?;
        let rtdx_all = r.t().dot(&dx_all);
        let rtdx: Vec<ArrayView2<f64>> = (0..np)
            .map(|q| rtdx_all.slice(ndarray::s![.., q * m..(q + 1) * m]))
            .collect();
        let mut gradient: Array1<f64> = dx.iter().map(|d| -(d * &rgp).sum()).collect();
        // ⟨A_p, A_q⟩: through PᵀMP without known spectra; from the A_p themselves with them.
        let a_inner: Box<dyn Fn(usize, usize) -> f64> = if self.known.is_empty() {
            let n_mat = gtp.t().dot(&gtp); // PᵀMP, m × m
            let qdx: Vec<Array2<f64>> = dx.iter().map(|d| d - &proj.u.dot(&proj.u.t().dot(d))).collect();
            Box::new(move |a, b| (qdx[a].t().dot(&qdx[b]) * &n_mat).sum())
        } else {
            let st = proj.pinv.dot(&*y); // X⁺Y
            let mut aps = Vec::with_capacity(np);
            for (q, dcq) in dc.iter().enumerate() {
                let dk = self.known_part(dcq.view());
                gradient[q] -= (&dk * &r).sum();
                let z = dx[q].dot(&st) + dk;
                aps.push(&z - &proj.u.dot(&proj.u.t().dot(&z)));
            }
            Box::new(move |a, b| (&aps[a] * &aps[b]).sum())
        };
        let mut gauss_newton = Array2::zeros((np, np));
        for a in 0..np {
            for b in 0..=a {
                let aa = a_inner(a, b);
                let bb = (rtdx[b].t().dot(&rtdx[a]) * &k_mat).sum();
                gauss_newton[[a, b]] = aa + bb;
                gauss_newton[[b, a]] = aa + bb;
            }
        }
        Ok(NormalEquations {
            cost: 0.5 * sum_sq(r.view()),
            gradient,
            gauss_newton,
        })
    }
}

// The solver borrows the problem so the fit can use it again after the run.
impl Operator for &VarproProblem<'_> {
    type Param = Array1<f64>;
    type Output = Array1<f64>;
    fn apply(&self, theta: &Array1<f64>) -> Result<Array1<f64>, ArgminError> {
        (**self).apply(theta)
    }
}

impl Jacobian for &VarproProblem<'_> {
    type Param = Array1<f64>;
    type Jacobian = Array2<f64>;
    fn jacobian(&self, theta: &Array1<f64>) -> Result<Array2<f64>, ArgminError> {
        (**self).jacobian(theta)
    }
}

/// Sum of squares of a matrix.
pub(crate) fn sum_sq(m: ArrayView2<f64>) -> f64 {
    match m.as_slice() {
        Some(flat) => super::small_svd::dot(flat, flat),
        None => m.iter().map(|v| v * v).sum(),
    }
}
