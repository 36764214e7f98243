//! The linear core: given concentrations C, the molar absorptivities S (and vice versa) by least
//! squares over all wavelengths at once, unconstrained or non-negative.
//!
//! Beer–Lambert with path lengths b: D ≈ diag(b)·C·Sᵀ. With X = diag(b)·C (samples × species)
//! every wavelength j is an independent regression d_j ≈ X s_j, sharing one matrix X. Both
//! solvers therefore factor or form XᵀX once and reuse it for all wavelengths:
//!
//! - unconstrained: s_j = argmin ‖X s − d_j‖ by one QR/SVD least-squares solve with many
//!   right-hand sides;
//! - non-negative: the fast active-set NNLS of Bro & de Jong (J. Chemom. 11 (1997) 393), a
//!   reformulation of Lawson & Hanson's NNLS (Solving Least Squares Problems, 1974) on the
//!   cross-products XᵀX and Xᵀd_j, with an iteration limit and a returned status.
//!
//! Known spectra are held fixed by subtracting their contribution before solving for the others.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use ndarray_linalg::{LeastSquaresSvd, Solve};
use serde::{Deserialize, Serialize};
use thiserror::Error;

/// Why a linear solve failed.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum LinearError {
    /// Dimensions do not agree.
    #[error("shape mismatch: {what}")]
    Shape {
        /// What disagrees.
        what: String,
    },
    /// A non-finite number in the inputs.
    #[error("non-finite value in {what} at row {row}, column {column}")]
    NonFinite {
        /// Which matrix.
        what: &'static str,
        /// Row.
        row: usize,
        /// Column.
        column: usize,
    },
    /// LAPACK reported a failure.
    #[error("linear algebra failure: {0}")]
    Lapack(String),
}

/// How an NNLS solve ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "status")]
pub enum NnlsStatus {
    /// The Karush–Kuhn–Tucker conditions hold within tolerance.
    Converged {
        /// Outer (active-set) iterations used.
        iterations: usize,
    },
    /// Stopped at the iteration limit; the returned x is feasible (x ≥ 0) but may not be optimal.
    IterationLimit {
        /// Outer iterations used.
        iterations: usize,
    },
}

impl NnlsStatus {
    /// True if the solve converged.
    pub fn converged(self) -> bool {
        matches!(self, Self::Converged { .. })
    }
}

/// Settings of the NNLS solver.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct NnlsParams {
    /// Maximum number of outer iterations (default 3 × number of unknowns + 30).
    pub max_iterations: Option<usize>,
    /// Relative tolerance on the gradient for the optimality test (default 1e-12).
    pub tolerance: f64,
}

impl Default for NnlsParams {
    fn default() -> Self {
        Self {
            max_iterations: None,
            tolerance: 1e-12,
        }
    }
}

/// Fast NNLS (Bro & de Jong 1997): min ‖X x − y‖ subject to x ≥ 0, given XᵀX and Xᵀy.
///
/// Returns the solution and how the solve ended. Never panics: on a singular passive-set
/// system the offending variable is kept at zero.
///
/// # Examples
/// ```
/// use isosbestic::resolve::linear::{nnls_normal, NnlsParams};
/// use ndarray::array;
/// // X = I, y = (1, −2): the non-negative solution clips the second entry to 0.
/// let xtx = array![[1.0, 0.0], [0.0, 1.0]];
/// let xty = array![1.0, -2.0];
/// let (x, status) = nnls_normal(xtx.view(), xty.view(), &NnlsParams::default());
/// assert!(status.converged());
/// approx::assert_abs_diff_eq!(x[0], 1.0, epsilon = 1e-14);
/// approx::assert_abs_diff_eq!(x[1], 0.0, epsilon = 1e-14);
/// ```
pub fn nnls_normal(
    xtx: ArrayView2<f64>,
    xty: ArrayView1<f64>,
    params: &NnlsParams,
) -> (Array1<f64>, NnlsStatus) {
    let n = xty.len();
    let max_iter = params.max_iterations.unwrap_or(3 * n + 30);
    let scale = xtx
        .diag()
        .iter()
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    let tol = params.tolerance * scale * (n as f64).max(1.0) * 10.0;
    let mut x = Array1::<f64>::zeros(n);
    let mut passive = vec![false; n];
    let mut w = &xty - &xtx.dot(&x);
    let mut iterations = 0;
    loop {
        // Optimality: no active variable with a positive gradient component.
        let candidate = (0..n)
            .filter(|&i| !passive[i] && w[i] > tol)
            .max_by(|&a, &b| w[a].total_cmp(&w[b]));
        let Some(t) = candidate else {
            return (x, NnlsStatus::Converged { iterations });
        };
        if iterations >= max_iter {
            return (x, NnlsStatus::IterationLimit { iterations });
        }
        iterations += 1;
        passive[t] = true;
        // Inner loop: solve on the passive set, step back to feasibility if needed.
        loop {
            let p: Vec<usize> = (0..n).filter(|&i| passive[i]).collect();
            let z = solve_subset(xtx, xty, &p);
            let Some(z) = z else {
                // singular: drop the variable just added
                passive[t] = false;
                break;
            };
            if p.iter().zip(z.iter()).all(|(_, &zi)| zi > 0.0) {
                for (&i, &zi) in p.iter().zip(z.iter()) {
                    x[i] = zi;
                }
                break;
            }
            // step length to the first variable that hits zero
            let mut alpha = f64::INFINITY;
            for (&i, &zi) in p.iter().zip(z.iter()) {
                if zi <= 0.0 {
                    let a = x[i] / (x[i] - zi);
                    if a < alpha {
                        alpha = a;
                    }
                }
            }
            for (&i, &zi) in p.iter().zip(z.iter()) {
                x[i] += alpha * (zi - x[i]);
                if x[i] <= 0.0 || (passive[i] && zi <= 0.0 && x[i] <= f64::EPSILON * scale) {
                    x[i] = 0.0;
                    passive[i] = false;
                }
            }
            if !p.iter().any(|&i| passive[i]) {
                break;
            }
        }
        w = &xty - &xtx.dot(&x);
    }
}

/// Solves (XᵀX)_pp z = (Xᵀy)_p on the index set `p`; `None` if singular.
fn solve_subset(xtx: ArrayView2<f64>, xty: ArrayView1<f64>, p: &[usize]) -> Option<Array1<f64>> {
    let a = xtx.select(Axis(0), p).select(Axis(1), p);
    let b = xty.select(Axis(0), p);
    let z = a.solve(&b).ok()?;
    z.iter().all(|v| v.is_finite()).then_some(z)
}

/// Whether a solve is constrained to non-negative values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Constraint {
    /// Ordinary least squares.
    #[default]
    Unconstrained,
    /// Non-negative least squares.
    NonNegative,
}

/// Spectra S solved from concentrations, with the solve status.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpectraSolution {
    /// S, wavelengths × species (fixed spectra copied in).
    pub spectra: Array2<f64>,
    /// Residual sum of squares ‖D − diag(b)·C·Sᵀ‖².
    pub residual_ss: f64,
    /// Wavelengths whose NNLS hit the iteration limit (empty when unconstrained).
    pub unconverged_wavelengths: Vec<usize>,
}

/// Solves S (wavelengths × species) from D ≈ diag(b)·C·Sᵀ over all wavelengths at once.
///
/// `known` holds, per species, `Some(spectrum)` to keep that species' spectrum fixed.
///
/// # Errors
/// [`LinearError::Shape`] for inconsistent sizes, [`LinearError::NonFinite`] for NaN/inf
/// inputs, [`LinearError::Lapack`] when the least-squares solve fails.
///
/// # Examples
/// ```
/// use isosbestic::resolve::linear::{solve_spectra, Constraint};
/// use ndarray::array;
/// let c = array![[1.0, 0.0], [0.5, 0.5], [0.0, 1.0]];
/// let s_true = array![[2.0, 1.0], [0.0, 3.0]]; // 2 wavelengths × 2 species
/// let d = c.dot(&s_true.t());
/// let path = array![1.0, 1.0, 1.0];
/// let sol = solve_spectra(d.view(), c.view(), path.view(), &[None, None], Constraint::Unconstrained)?;
/// for (a, b) in sol.spectra.iter().zip(s_true.iter()) {
///     approx::assert_abs_diff_eq!(a, b, epsilon = 1e-12);
/// }
/// # Ok::<(), isosbestic::resolve::linear::LinearError>(())
/// ```
pub fn solve_spectra(
    d: ArrayView2<f64>,
    c: ArrayView2<f64>,
    path_cm: ArrayView1<f64>,
    known: &[Option<Array1<f64>>],
    constraint: Constraint,
) -> Result<SpectraSolution, LinearError> {
    let (ns, nw) = d.dim();
    let nsp = c.ncols();
    if c.nrows() != ns || path_cm.len() != ns || known.len() != nsp {
        return Err(LinearError::Shape {
            what: format!(
                "D is {ns}×{nw}, C is {}×{}, {} path lengths, {} known-spectrum slots",
                c.nrows(),
                nsp,
                path_cm.len(),
                known.len()
            ),
        });
    }
    check_finite("D", d)?;
    check_finite("C", c)?;
    let x_full = &c * &path_cm.insert_axis(Axis(1));
    let mut target = d.to_owned();
    let mut spectra = Array2::zeros((nw, nsp));
    for (k, kn) in known.iter().enumerate() {
        if let Some(spec) = kn {
            if spec.len() != nw {
                return Err(LinearError::Shape {
                    what: format!(
                        "known spectrum of species {k} has {} points, D has {nw} wavelengths",
                        spec.len()
                    ),
                });
            }
            // D ← D − x_k s_kᵀ
            let xk = x_full.column(k);
            for i in 0..ns {
                target.row_mut(i).scaled_add(-xk[i], spec);
            }
            spectra.column_mut(k).assign(spec);
        }
    }
    let free: Vec<usize> = (0..nsp).filter(|&k| known[k].is_none()).collect();
    let mut unconverged = Vec::new();
    if !free.is_empty() {
        let x = x_full.select(Axis(1), &free);
        let s_free = match constraint {
            Constraint::Unconstrained => {
                let sol = x
                    .least_squares(&target)
                    .map_err(|e| LinearError::Lapack(e.to_string()))?;
                sol.solution.t().to_owned()
            }
            Constraint::NonNegative => {
                let xtx = x.t().dot(&x);
                let xtd = x.t().dot(&target);
                let mut out = Array2::zeros((nw, free.len()));
                for j in 0..nw {
                    let (sol, status) = nnls_normal(xtx.view(), xtd.column(j), &NnlsParams::default());
                    if !status.converged() {
                        unconverged.push(j);
                    }
                    out.row_mut(j).assign(&sol);
                }
                out
            }
        };
        for (col, &k) in free.iter().enumerate() {
            spectra.column_mut(k).assign(&s_free.column(col));
        }
    }
    let fitted = x_full.dot(&spectra.t());
    let residual_ss = (&d - &fitted).iter().map(|v| v * v).sum();
    Ok(SpectraSolution {
        spectra,
        residual_ss,
        unconverged_wavelengths: unconverged,
    })
}

/// Solves C (samples × species) from D ≈ diag(b)·C·Sᵀ given S, sample by sample.
///
/// # Errors
/// As [`solve_spectra`].
///
/// # Examples
/// ```
/// use isosbestic::resolve::linear::{solve_concentrations, Constraint};
/// use ndarray::array;
/// let s = array![[2.0, 1.0], [0.0, 3.0], [1.0, 1.0]]; // 3 wavelengths × 2 species
/// let c_true = array![[0.2, 0.1]];
/// let d = c_true.dot(&s.t()) * 2.0; // path 2 cm
/// let c = solve_concentrations(d.view(), s.view(), array![2.0].view(), Constraint::NonNegative)?;
/// approx::assert_abs_diff_eq!(c[[0, 0]], 0.2, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(c[[0, 1]], 0.1, epsilon = 1e-12);
/// # Ok::<(), isosbestic::resolve::linear::LinearError>(())
/// ```
pub fn solve_concentrations(
    d: ArrayView2<f64>,
    s: ArrayView2<f64>,
    path_cm: ArrayView1<f64>,
    constraint: Constraint,
) -> Result<Array2<f64>, LinearError> {
    let (ns, nw) = d.dim();
    if s.nrows() != nw || path_cm.len() != ns {
        return Err(LinearError::Shape {
            what: format!(
                "D is {ns}×{nw}, S is {}×{}, {} path lengths",
                s.nrows(),
                s.ncols(),
                path_cm.len()
            ),
        });
    }
    check_finite("D", d)?;
    check_finite("S", s)?;
    let nsp = s.ncols();
    let mut c = match constraint {
        Constraint::Unconstrained => {
            let sol = s
                .least_squares(&d.t().to_owned())
                .map_err(|e| LinearError::Lapack(e.to_string()))?;
            sol.solution.t().to_owned()
        }
        Constraint::NonNegative => {
            let sts = s.t().dot(&s);
            let std = s.t().dot(&d.t());
            let mut out = Array2::zeros((ns, nsp));
            for i in 0..ns {
                let (sol, _) = nnls_normal(sts.view(), std.column(i), &NnlsParams::default());
                out.row_mut(i).assign(&sol);
            }
            out
        }
    };
    for (i, mut row) in c.axis_iter_mut(Axis(0)).enumerate() {
        row /= path_cm[i];
    }
    Ok(c)
}

fn check_finite(what: &'static str, a: ArrayView2<f64>) -> Result<(), LinearError> {
    match a.indexed_iter().find(|(_, v)| !v.is_finite()) {
        Some(((row, column), _)) => Err(LinearError::NonFinite { what, row, column }),
        None => Ok(()),
    }
}

/// Reference NNLS by brute force over all 2ⁿ passive sets, for tests (n ≤ 12).
#[doc(hidden)]
pub fn nnls_brute_force(x: ArrayView2<f64>, y: ArrayView1<f64>) -> Array1<f64> {
    let n = x.ncols();
    let mut best = Array1::zeros(n);
    let mut best_ss = y.dot(&y);
    for mask in 1u32..(1 << n) {
        let p: Vec<usize> = (0..n).filter(|&i| mask & (1 << i) != 0).collect();
        let xp = x.select(Axis(1), &p);
        let Ok(sol) = xp.least_squares(&y.to_owned()) else {
            continue;
        };
        if sol.solution.iter().any(|&v| v < 0.0) {
            continue;
        }
        let r = &y - &xp.dot(&sol.solution);
        let ss = r.dot(&r);
        if ss < best_ss {
            best_ss = ss;
            best.fill(0.0);
            for (&i, &v) in p.iter().zip(sol.solution.iter()) {
                best[i] = v;
            }
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array;
    use proptest::prelude::*;
    use rand::Rng;

    fn cost(x: ArrayView2<f64>, y: ArrayView1<f64>, b: &Array1<f64>) -> f64 {
        let r = &y - &x.dot(b);
        r.dot(&r)
    }

    proptest! {
        #[test]
        fn fast_nnls_matches_the_brute_force_optimum(seed in 0u64..10_000, n in 1usize..7, m in 8usize..30) {
            let mut rng = crate::testing::rng(seed);
            let x = Array::from_shape_fn((m, n), |_| rng.random_range(-1.0..1.0));
            let y = Array::from_shape_fn(m, |_| rng.random_range(-1.0..1.0));
            let (fast, status) = nnls_normal(x.t().dot(&x).view(), x.t().dot(&y).view(), &NnlsParams::default());
            prop_assert!(status.converged());
            prop_assert!(fast.iter().all(|&v| v >= 0.0));
            let slow = nnls_brute_force(x.view(), y.view());
            let (cf, cs) = (cost(x.view(), y.view(), &fast), cost(x.view(), y.view(), &slow));
            prop_assert!(cf <= cs * (1.0 + 1e-9) + 1e-12, "fast {cf} vs brute force {cs}");
        }
    }

    #[test]
    fn an_iteration_limit_of_zero_is_reported_not_hidden() {
        let xtx = ndarray::array![[1.0, 0.0], [0.0, 1.0]];
        let xty = ndarray::array![1.0, 1.0];
        let p = NnlsParams {
            max_iterations: Some(0),
            ..NnlsParams::default()
        };
        let (x, status) = nnls_normal(xtx.view(), xty.view(), &p);
        assert_eq!(status, NnlsStatus::IterationLimit { iterations: 0 });
        assert!(x.iter().all(|&v| v >= 0.0));
    }

    #[test]
    fn known_spectra_are_held_fixed_and_the_rest_is_solved() {
        let c = ndarray::array![[1.0, 0.2], [0.5, 0.7], [0.1, 1.0], [0.3, 0.3]];
        let s = ndarray::array![[2.0, 1.0], [0.5, 3.0], [1.0, 0.0]];
        let d = c.dot(&s.t());
        let path = Array1::ones(4);
        let known = vec![Some(s.column(0).to_owned()), None];
        let sol = solve_spectra(d.view(), c.view(), path.view(), &known, Constraint::NonNegative).unwrap();
        for (a, b) in sol.spectra.iter().zip(s.iter()) {
            approx::assert_abs_diff_eq!(a, b, epsilon = 1e-12);
        }
        approx::assert_abs_diff_eq!(sol.residual_ss, 0.0, epsilon = 1e-20);
    }

    #[test]
    fn non_finite_input_is_a_typed_error() {
        let c = ndarray::array![[1.0], [f64::NAN]];
        let d = ndarray::array![[1.0], [1.0]];
        let e = solve_spectra(
            d.view(),
            c.view(),
            Array1::ones(2).view(),
            &[None],
            Constraint::Unconstrained,
        )
        .unwrap_err();
        assert_eq!(
            e,
            LinearError::NonFinite {
                what: "C",
                row: 1,
                column: 0
            }
        );
    }
}
