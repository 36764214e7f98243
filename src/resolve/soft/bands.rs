//! Rotational ambiguity by band boundaries (Tauler, J. Chemom. 15 (2001) 627).
//!
//! Any invertible k × k matrix T turns a resolution (C, S) into (C·T, S·T⁻ᵀ) with the same
//! product C·Sᵀ, hence the same fit. For each species k the share of the signal
//!
//! ```text
//! f_k(T) = ‖c'_k s'_kᵀ‖_F / ‖C·Sᵀ‖_F = ‖c'_k‖·‖s'_k‖ / ‖C·Sᵀ‖_F,   C' = C·T,  S' = S·T⁻ᵀ
//! ```
//!
//! is minimised and maximised over T subject to the run's constraints, imposed as a penalty
//! ρ·g(T) added to ±f:
//!
//! - non-negativity (when requested for C or S): Σ max(0, −x/‖x_col‖_∞ − τ)² over every entry
//!   of every column of C' and S' (τ the tolerance);
//! - absences: Σ max(0, |c'_ik|/‖c'_k‖_∞ − τ)² over the absent entries;
//! - known spectra: ‖s'_k − s_known‖² / ‖s_known‖²;
//! - closure: ‖A·C'ᵀ − Tᵀ‖² / ‖T_totals‖².
//!
//! C is first scaled to unit column norms so that the entries of T are dimensionless; when no
//! closure or known spectrum fixes the scales, each column of T is normalised inside the
//! objective (f does not depend on it). The optimiser is a Nelder–Mead simplex over the k²
//! entries of T (Nelder & Mead, Comput. J. 7 (1965) 308; standard coefficients 1, 2, ½, ½),
//! started from T = I and restarted from its best point.
//!
//! This is an approximation of the feasible band: the optimiser is local (a disconnected
//! feasible region may hold more extreme solutions), and a quadratic penalty lets constraints
//! be violated by an amount of order 1/ρ at the optimum. The worst violation g is reported with
//! each boundary so the user can judge.

use super::{Prepared, SampleLayout, SoftError, SoftResolution, ValidSoftParams, invalid};
use crate::resolve::linear::Constraint;
use ndarray::{Array1, Array2, ArrayView2, Axis};
use ndarray_linalg::Inverse;
use serde::{Deserialize, Serialize};

/// Settings of [`band_boundaries`] (unchecked; see [`BandParams::check`]).
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::BandParams;
/// assert!(BandParams::default().check().is_ok());
/// assert!(BandParams { penalty: 0.0, ..BandParams::default() }.check().is_err());
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct BandParams {
    /// τ: negative values down to −τ times the column's largest magnitude are tolerated
    /// (default 0).
    pub tolerance: f64,
    /// ρ: weight of the constraint penalty (default 1e6).
    pub penalty: f64,
    /// Objective evaluations per Nelder–Mead run (default 3000).
    pub max_evaluations: usize,
    /// Restarts from the best point (default 3).
    pub restarts: usize,
}

impl Default for BandParams {
    fn default() -> Self {
        Self {
            tolerance: 0.0,
            penalty: 1e6,
            max_evaluations: 3000,
            restarts: 3,
        }
    }
}

/// Checked band settings.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidBandParams(BandParams);

impl BandParams {
    /// Validates the settings.
    ///
    /// # Errors
    /// [`SoftError::InvalidParameter`] naming the setting.
    pub fn check(self) -> Result<ValidBandParams, SoftError> {
        if !(self.tolerance.is_finite() && self.tolerance >= 0.0) {
            return Err(invalid(
                "bands.tolerance",
                format!("{} is not ≥ 0", self.tolerance),
            ));
        }
        if !(self.penalty.is_finite() && self.penalty > 0.0) {
            return Err(invalid(
                "bands.penalty",
                format!("{} is not positive", self.penalty),
            ));
        }
        if self.max_evaluations < 10 {
            return Err(invalid("bands.max_evaluations", "at least 10 are needed"));
        }
        Ok(ValidBandParams(self))
    }
}

/// A species' profile and spectrum at one boundary of its band (the profile is c'_k, without
/// the path lengths).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BoundaryProfiles {
    /// f at this boundary.
    pub contribution: f64,
    /// c'_k, samples (scale as transformed; arbitrary when nothing fixes it).
    pub concentrations: Array1<f64>,
    /// s'_k, wavelengths.
    pub spectrum: Array1<f64>,
    /// The penalty g (constraint violation measure) at this boundary.
    pub violation: f64,
}

/// The band of feasible solutions of one species.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciesBand {
    /// Species index.
    pub species: usize,
    /// f of the resolution itself (T = I).
    pub contribution: f64,
    /// Lower boundary.
    pub minimum: BoundaryProfiles,
    /// Upper boundary.
    pub maximum: BoundaryProfiles,
}

impl SpeciesBand {
    /// f_min.
    pub fn f_min(&self) -> f64 {
        self.minimum.contribution
    }
    /// f_max.
    pub fn f_max(&self) -> f64 {
        self.maximum.contribution
    }
}

struct Objective<'a> {
    prep: &'a Prepared,
    c: Array2<f64>,
    s: Array2<f64>,
    norm_cs: f64,
    path_col: Array2<f64>,
    normalise_columns: bool,
    tolerance: f64,
    penalty: f64,
}

struct Evaluation {
    f: Vec<f64>,
    violation: f64,
    c: Array2<f64>,
    s: Array2<f64>,
}

fn column_max(x: ArrayView2<f64>, j: usize) -> f64 {
    x.column(j)
        .iter()
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE)
}

impl Objective<'_> {
    fn evaluate(&self, t: &[f64]) -> Option<Evaluation> {
        let k = self.c.ncols();
        let mut tm = Array2::from_shape_vec((k, k), t.to_vec()).ok()?;
        if self.normalise_columns {
            for j in 0..k {
                let n = tm.column(j).dot(&tm.column(j)).sqrt();
                if !(n > 1e-12) {
                    return None;
                }
                tm.column_mut(j).mapv_inplace(|v| v / n);
            }
        }
        let inv = tm.inv().ok()?;
        if inv.iter().any(|v| !v.is_finite() || v.abs() > 1e12) {
            return None;
        }
        let c = self.c.dot(&tm);
        let s = self.s.dot(&inv.t());
        let f = (0..k)
            .map(|j| {
                c.column(j).dot(&c.column(j)).sqrt() * s.column(j).dot(&s.column(j)).sqrt() / self.norm_cs
            })
            .collect();
        let tau = self.tolerance;
        let mut g = 0.0;
        let neg = |x: ArrayView2<f64>| {
            let mut acc = 0.0;
            for j in 0..x.ncols() {
                let m = column_max(x, j);
                acc += x
                    .column(j)
                    .iter()
                    .map(|v| (-v / m - tau).max(0.0).powi(2))
                    .sum::<f64>();
            }
            acc
        };
        if self.prep.c_constraint == Constraint::NonNegative {
            g += neg(c.view());
        }
        if self.prep.s_constraint == Constraint::NonNegative {
            g += neg(s.view());
        }
        for ((i, j), &absent) in self.prep.absent.indexed_iter() {
            if absent {
                let m = column_max(c.view(), j);
                g += (c[[i, j]].abs() / m - tau).max(0.0).powi(2);
            }
        }
        for (j, known) in self.prep.known.iter().enumerate() {
            if let Some(sk) = known {
                let diff = &s.column(j) - sk;
                g += diff.dot(&diff) / sk.dot(sk).max(f64::MIN_POSITIVE);
            }
        }
        if let Some((a, totals, _)) = &self.prep.closure {
            let conc = &c / &self.path_col;
            let r = &conc.dot(&a.t()) - totals;
            g += r.iter().map(|v| v * v).sum::<f64>()
                / totals.iter().map(|v| v * v).sum::<f64>().max(f64::MIN_POSITIVE);
        }
        Some(Evaluation {
            f,
            violation: g,
            c,
            s,
        })
    }

    fn cost(&self, t: &[f64], species: usize, sign: f64) -> f64 {
        match self.evaluate(t) {
            Some(e) => sign * e.f[species] + self.penalty * e.violation,
            None => 1e30,
        }
    }
}

/// Nelder–Mead minimisation of `f` from `x0` with initial step `step`; returns the best point.
fn nelder_mead(f: &dyn Fn(&[f64]) -> f64, x0: &[f64], step: f64, max_eval: usize) -> (Vec<f64>, f64) {
    let n = x0.len();
    let mut simplex: Vec<(Vec<f64>, f64)> = Vec::with_capacity(n + 1);
    simplex.push((x0.to_vec(), f(x0)));
    for i in 0..n {
        let mut x = x0.to_vec();
        x[i] += step;
        let fx = f(&x);
        simplex.push((x, fx));
    }
    let mut evals = n + 1;
    while evals < max_eval {
        simplex.sort_by(|a, b| a.1.total_cmp(&b.1));
        let best = simplex[0].1;
        let worst = simplex[n].1;
        if (worst - best).abs() <= 1e-13 * (best.abs() + 1e-13) {
            break;
        }
        let centroid: Vec<f64> = (0..n)
            .map(|j| simplex[..n].iter().map(|p| p.0[j]).sum::<f64>() / n as f64)
            .collect();
        let along = |coef: f64| -> Vec<f64> {
            (0..n)
                .map(|j| centroid[j] + coef * (simplex[n].0[j] - centroid[j]))
                .collect()
        };
        let xr = along(-1.0);
        let fr = f(&xr);
        evals += 1;
        if fr < simplex[0].1 {
            let xe = along(-2.0);
            let fe = f(&xe);
            evals += 1;
            simplex[n] = if fe < fr { (xe, fe) } else { (xr, fr) };
        } else if fr < simplex[n - 1].1 {
            simplex[n] = (xr, fr);
        } else {
            let (xc, fc) = if fr < simplex[n].1 {
                let x = along(-0.5);
                let fx = f(&x);
                (x, fx)
            } else {
                let x = along(0.5);
                let fx = f(&x);
                (x, fx)
            };
            evals += 1;
            if fc < simplex[n].1.min(fr) {
                simplex[n] = (xc, fc);
            } else {
                // shrink towards the best point
                let x0 = simplex[0].0.clone();
                for p in simplex.iter_mut().skip(1) {
                    for (pj, x0j) in p.0.iter_mut().zip(&x0) {
                        *pj = x0j + 0.5 * (*pj - x0j);
                    }
                    p.1 = f(&p.0);
                }
                evals += n;
            }
        }
    }
    simplex.sort_by(|a, b| a.1.total_cmp(&b.1));
    let (x, fx) = simplex.swap_remove(0);
    (x, fx)
}

/// Band boundaries of every species of a resolution made with `params` on data with `layout`.
///
/// # Errors
/// As [`super::resolve_matrix`] for a layout or settings that do not fit the resolution;
/// [`SoftError::Shape`] when the resolution's sizes disagree with the settings.
///
/// # Examples
/// ```
/// use isosbestic::resolve::soft::{band_boundaries, resolve_matrix, BandParams, SampleLayout, SoftParams};
/// // perfectly selective: wavelength 0 sees only species 0, wavelength 3 only species 1, and
/// // sample 0 holds only species 0, sample 4 only species 1 — no rotation is feasible.
/// let c = ndarray::array![[1.0, 0.0], [0.8, 0.2], [0.5, 0.5], [0.2, 0.8], [0.0, 1.0]];
/// let s = ndarray::array![[1.0, 0.0], [0.8, 0.4], [0.3, 0.9], [0.0, 1.0]];
/// let d = c.dot(&s.t());
/// let params = SoftParams::default().check()?;
/// let layout = SampleLayout::single_series(5);
/// let fit = resolve_matrix(d.view(), &layout, &params)?;
/// let bands = band_boundaries(d.view(), &fit, &layout, &params, &BandParams::default().check()?)?;
/// for b in &bands {
///     assert!(b.f_max() - b.f_min() < 1e-3);
/// }
/// # Ok::<(), isosbestic::resolve::soft::SoftError>(())
/// ```
pub fn band_boundaries(
    d: ArrayView2<f64>,
    resolution: &SoftResolution,
    layout: &SampleLayout,
    params: &ValidSoftParams,
    band: &ValidBandParams,
) -> Result<Vec<SpeciesBand>, SoftError> {
    let p = params.params();
    let band = &band.0;
    let k = p.n_species;
    let (ns, nw) = d.dim();
    if resolution.concentrations.dim() != (ns, k) || resolution.spectra.dim() != (nw, k) {
        return Err(SoftError::Shape {
            what: format!(
                "resolution has C {:?} and S {:?}; D is {ns}×{nw} with {k} species",
                resolution.concentrations.dim(),
                resolution.spectra.dim()
            ),
        });
    }
    let prep = Prepared::new(d, layout, p)?;
    // unit-norm columns of C, scale moved to S
    let mut c = resolution.concentrations.clone();
    let mut s = resolution.spectra.clone();
    for j in 0..k {
        let n = c.column(j).dot(&c.column(j)).sqrt();
        if n > 0.0 {
            c.column_mut(j).mapv_inplace(|v| v / n);
            s.column_mut(j).mapv_inplace(|v| v * n);
        }
    }
    // f is taken on the signal diag(b)·C·Sᵀ, so the objective works with diag(b)·C; the
    // closure penalty divides the path lengths out again.
    let path_col = prep.path.view().insert_axis(Axis(1)).to_owned();
    c = &c * &path_col;
    let cs = c.dot(&s.t());
    let norm_cs = cs
        .iter()
        .map(|v| v * v)
        .sum::<f64>()
        .sqrt()
        .max(f64::MIN_POSITIVE);
    let objective = Objective {
        prep: &prep,
        c,
        s,
        norm_cs,
        path_col,
        normalise_columns: prep.closure.is_none() && prep.known.iter().all(Option::is_none),
        tolerance: band.tolerance,
        penalty: band.penalty,
    };
    let identity: Vec<f64> = Array2::<f64>::eye(k).iter().copied().collect();
    let base = objective
        .evaluate(&identity)
        .ok_or_else(|| SoftError::Numerical {
            what: "the resolution's own transformation could not be evaluated".into(),
        })?;
    let mut out = Vec::with_capacity(k);
    for species in 0..k {
        let boundary = |sign: f64| -> BoundaryProfiles {
            let cost = |t: &[f64]| objective.cost(t, species, sign);
            let mut x = identity.clone();
            let mut step = 0.1;
            for _ in 0..=band.restarts {
                let (nx, _) = nelder_mead(&cost, &x, step, band.max_evaluations);
                x = nx;
                step *= 0.3;
            }
            match objective.evaluate(&x) {
                Some(e) => BoundaryProfiles {
                    contribution: e.f[species],
                    concentrations: &e.c.index_axis(Axis(1), species) / &objective.path_col.column(0),
                    spectrum: e.s.index_axis(Axis(1), species).to_owned(),
                    violation: e.violation,
                },
                None => BoundaryProfiles {
                    contribution: base.f[species],
                    concentrations: &base.c.column(species) / &objective.path_col.column(0),
                    spectrum: base.s.column(species).to_owned(),
                    violation: base.violation,
                },
            }
        };
        let minimum = boundary(1.0);
        let maximum = boundary(-1.0);
        out.push(SpeciesBand {
            species,
            contribution: base.f[species],
            minimum,
            maximum,
        });
    }
    Ok(out)
}
