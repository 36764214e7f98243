//! Levenberg–Marquardt for nonlinear least squares, as an argmin [`Solver`].
//!
//! Minimises ½‖r(θ)‖². Each iteration solves the damped normal equations
//!
//! ```text
//! (JᵀJ + λ·diag(JᵀJ)) δ = −Jᵀr
//! ```
//!
//! by Cholesky factorisation of the small p × p matrix, with D = diag(JᵀJ)^½ (Marquardt's
//! scaling; Moré, "The Levenberg–Marquardt algorithm: implementation and theory", in G. A.
//! Watson (ed.), Numerical Analysis, Springer (1978) 105). Steps are accepted when the gain ratio
//! ρ = actual / predicted reduction is positive; λ is updated by Nielsen's rule
//! (λ ← λ·max(⅓, 1 − (2ρ − 1)³) on success, λ ← λ·ν, ν ← 2ν on failure). Bounds are honoured by
//! projecting each trial point onto the box. A trial point where the problem cannot be evaluated
//! (it returns an error) is treated as a rejected step.
//!
//! The solver needs only the cost and, at accepted points, the gradient Jᵀr and the
//! Gauss–Newton matrix JᵀJ ([`GaussNewtonProblem`]). Problems that can form these without the
//! residual vector and its Jacobian (the global fit does, see `resolve::hard`) implement the
//! trait directly; any problem with argmin's [`Operator`] (θ ↦ r) and [`Jacobian`] (θ ↦ J) is
//! adapted by [`Residuals`], which [`minimise`] applies for you.
//!
//! Termination is reported as a [`LmTermination`]: which convergence test fired, the iteration
//! limit, or a stall (no decrease possible). The final state is returned in every case.

use argmin::core::IterState;
use argmin::core::{
    Error as ArgminError, Executor, Jacobian, KV, Operator, Problem, Solver, State, TerminationReason,
    TerminationStatus,
};
use ndarray::{Array1, Array2};
use ndarray_linalg::SolveH;
use serde::{Deserialize, Serialize};

/// The state type the solver runs on: parameters θ, gradient Jᵀr and Gauss–Newton matrix JᵀJ
/// (argmin's gradient and Hessian slots) as ndarray arrays, cost ½‖r‖².
pub type LmState = IterState<Array1<f64>, Array1<f64>, (), Array2<f64>, (), f64>;

/// Cost, gradient and Gauss–Newton matrix of a least-squares problem at one point.
#[derive(Debug, Clone)]
pub struct NormalEquations {
    /// ½‖r‖².
    pub cost: f64,
    /// Jᵀr (the gradient of the cost).
    pub gradient: Array1<f64>,
    /// JᵀJ.
    pub gauss_newton: Array2<f64>,
}

/// A nonlinear least-squares problem as the solver sees it: the cost ½‖r(θ)‖² at trial points
/// and the normal equations at accepted points.
pub trait GaussNewtonProblem {
    /// ½‖r(θ)‖².
    ///
    /// # Errors
    /// When the problem cannot be evaluated at θ (the step is then rejected).
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError>;
    /// Cost, Jᵀr and JᵀJ at θ.
    ///
    /// # Errors
    /// When the problem cannot be evaluated at θ.
    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError>;
}

impl<T: GaussNewtonProblem + ?Sized> GaussNewtonProblem for &T {
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        (**self).cost(theta)
    }
    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        (**self).normal_equations(theta)
    }
}

/// Adapts a problem given as residuals (argmin [`Operator`]) and their Jacobian (argmin
/// [`Jacobian`]) to [`GaussNewtonProblem`] by forming Jᵀr and JᵀJ.
#[derive(Debug, Clone)]
pub struct Residuals<P>(pub P);

impl<P> GaussNewtonProblem for Residuals<P>
where
    P: Operator<Param = Array1<f64>, Output = Array1<f64>>
        + Jacobian<Param = Array1<f64>, Jacobian = Array2<f64>>,
{
    fn cost(&self, theta: &Array1<f64>) -> Result<f64, ArgminError> {
        let r = self.0.apply(theta)?;
        Ok(if r.iter().all(|v| v.is_finite()) {
            0.5 * r.dot(&r)
        } else {
            f64::INFINITY
        })
    }
    fn normal_equations(&self, theta: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
        let r = self.0.apply(theta)?;
        let j = self.0.jacobian(theta)?;
        Ok(NormalEquations {
            cost: 0.5 * r.dot(&r),
            gradient: j.t().dot(&r),
            gauss_newton: j.t().dot(&j),
        })
    }
}

/// Which convergence test ended the fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ConvergenceTest {
    /// The relative decrease of the cost in an accepted step fell below `cost_tolerance`.
    CostReduction,
    /// The step fell below `step_tolerance` relative to the parameters.
    StepSize,
    /// The gradient ‖Jᵀr‖∞ fell below `gradient_tolerance` (scaled by the cost).
    Gradient,
    /// The Gauss–Newton decrement ½ gᵀ(JᵀJ)⁻¹g, the largest decrease of the cost the local
    /// quadratic model allows, fell below `cost_tolerance` · cost: no step can gain more than an
    /// accepted step that ends the run by [`ConvergenceTest::CostReduction`].
    PredictedReduction,
}

/// Why the solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", tag = "reason", content = "test")]
pub enum LmTermination {
    /// Converged by the named test.
    Converged(ConvergenceTest),
    /// Reached the iteration limit before converging.
    IterationLimit,
    /// No step reduced the cost even with very strong damping.
    Stalled,
    /// Still running (never returned by a finished run).
    Running,
}

impl LmTermination {
    /// True for [`LmTermination::Converged`].
    pub fn converged(self) -> bool {
        matches!(self, Self::Converged(_))
    }
}

/// Settings of the Levenberg–Marquardt solver.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct LmParams {
    /// Maximum iterations (accepted or rejected steps count once each).
    pub max_iterations: u64,
    /// Relative cost decrease below which an accepted step means convergence (default 1e-12).
    ///
    /// For a least-squares fit with ν degrees of freedom at its noise level the cost is about
    /// νσ²/2, so a relative decrease ε is a change of χ² by about ε·ν: with ν up to 10⁶ the
    /// default stops within Δχ² ≈ 1e-6, i.e. within about 1e-3 standard errors of the minimum
    /// (noise-free problems, whose cost falls by orders of magnitude per step, stop on the step
    /// size instead).
    pub cost_tolerance: f64,
    /// Relative step size below which the fit has converged.
    pub step_tolerance: f64,
    /// Scaled gradient below which the fit has converged.
    pub gradient_tolerance: f64,
    /// Initial damping λ₀.
    pub initial_damping: f64,
    /// Lower bounds for θ (empty: none).
    pub lower: Vec<f64>,
    /// Upper bounds for θ (empty: none).
    pub upper: Vec<f64>,
}

impl Default for LmParams {
    fn default() -> Self {
        Self {
            max_iterations: 200,
            cost_tolerance: 1e-12,
            step_tolerance: 1e-10,
            gradient_tolerance: 1e-12,
            initial_damping: 1e-1,
            lower: Vec::new(),
            upper: Vec::new(),
        }
    }
}

/// The Levenberg–Marquardt solver.
#[derive(Debug, Clone)]
pub struct LevenbergMarquardt {
    params: LmParams,
    damping: f64,
    nu: f64,
    termination: LmTermination,
}

impl LevenbergMarquardt {
    /// A solver with the given settings.
    pub fn new(params: LmParams) -> Self {
        Self {
            damping: params.initial_damping,
            params,
            nu: 2.0,
            termination: LmTermination::Running,
        }
    }

    /// Why the solver stopped (after a run).
    pub fn termination(&self) -> LmTermination {
        self.termination
    }

    /// Clips x onto the bounds; true when some coordinate was moved.
    fn project(&self, x: &mut Array1<f64>) -> bool {
        let mut moved = false;
        for (i, v) in x.iter_mut().enumerate() {
            let inside = self.params.lower.get(i).map_or(*v, |&lo| v.max(lo));
            let inside = self.params.upper.get(i).map_or(inside, |&hi| inside.min(hi));
            moved |= inside.to_bits() != v.to_bits(); // clipped: the value itself changed
            *v = inside;
        }
        moved
    }
}

impl<O: GaussNewtonProblem> Solver<O, LmState> for LevenbergMarquardt {
    fn name(&self) -> &str {
        "Levenberg-Marquardt"
    }

    fn init(
        &mut self,
        problem: &mut Problem<O>,
        mut state: LmState,
    ) -> Result<(LmState, Option<KV>), ArgminError> {
        let mut x = state.take_param().ok_or_else(argmin::argmin_error_closure!(
            NotInitialized,
            "initial parameters are required"
        ))?;
        self.project(&mut x);
        let ne = problem.problem("normal_equations_count", |p| p.normal_equations(&x))?;
        Ok((
            state
                .param(x)
                .gradient(ne.gradient)
                .hessian(ne.gauss_newton)
                .cost(ne.cost),
            None,
        ))
    }

    fn next_iter(
        &mut self,
        problem: &mut Problem<O>,
        mut state: LmState,
    ) -> Result<(LmState, Option<KV>), ArgminError> {
        let x = state
            .take_param()
            .ok_or_else(argmin::argmin_error_closure!(NotInitialized, "no parameters"))?;
        let g = state
            .take_gradient()
            .ok_or_else(argmin::argmin_error_closure!(NotInitialized, "no gradient"))?;
        let jtj = state.take_hessian().ok_or_else(argmin::argmin_error_closure!(
            NotInitialized,
            "no Gauss-Newton matrix"
        ))?;
        let cost = state.get_cost();
        let keep = |state: LmState, x, g, jtj| state.param(x).gradient(g).hessian(jtj).cost(cost);
        let gnorm = g.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if gnorm <= self.params.gradient_tolerance * (2.0 * cost).sqrt().max(f64::MIN_POSITIVE)
            || gnorm == 0.0
        {
            self.termination = LmTermination::Converged(ConvergenceTest::Gradient);
            return Ok((keep(state, x, g, jtj), None));
        }
        // The Gauss–Newton decrement: the undamped step's predicted gain, an upper bound on every
        // damped or bound-cut step's. Below the gain that ends a run after an accepted step
        // (`cost_tolerance` · cost) nothing is left to gain, so no trial cost is evaluated to
        // find that out. Skipped when JᵀJ is singular (then the steps below decide).
        let tolerance = self.params.cost_tolerance * cost.max(f64::MIN_POSITIVE);
        if let Ok(newton) = jtj.solveh(&g) {
            let decrement = 0.5 * g.dot(&newton);
            if decrement.is_finite() && (0.0..=tolerance).contains(&decrement) {
                self.termination = LmTermination::Converged(ConvergenceTest::PredictedReduction);
                return Ok((keep(state, x, g, jtj), None));
            }
        }
        // a rejected step's predicted gain below this ends the run too (rounding-level changes)
        let negligible = 1e3 * tolerance;
        // Marquardt scaling, kept away from zero for columns that vanish.
        let mut diag: Array1<f64> = jtj.diag().mapv(|v| v.max(0.0).sqrt());
        let dmax = diag.iter().fold(0.0f64, |m, v| m.max(*v));
        diag.mapv_inplace(|d| d.max(1e-12 * dmax.max(f64::MIN_POSITIVE)));
        let n = x.len();
        // predicted reduction of the quadratic model: −(gᵀδ + ½ δᵀJᵀJδ)
        let predicted_reduction = |step: &Array1<f64>| -(g.dot(step) + 0.5 * step.dot(&jtj.dot(step)));
        for attempt in 0..60 {
            // (JᵀJ + λ D²) δ = −Jᵀr, solved by Cholesky on the p × p system; the scaled,
            // damped matrix is positive definite for λ > 0.
            let mut a = jtj.clone();
            for k in 0..n {
                a[[k, k]] += self.damping * diag[k] * diag[k];
            }
            let step = match a.solveh(&(-&g)) {
                Ok(sol) if sol.iter().all(|v| v.is_finite()) => sol,
                _ => {
                    self.damping *= self.nu;
                    self.nu *= 2.0;
                    continue;
                }
            };
            let mut trial = &x + &step;
            let on_bound = self.project(&mut trial);
            let step = &trial - &x;
            let xnorm = x.dot(&x).sqrt();
            let snorm = step.dot(&step).sqrt();
            if snorm <= self.params.step_tolerance * (xnorm + self.params.step_tolerance) {
                // A tiny first step is convergence; a step made tiny by damping after rejections
                // is convergence only if the model predicts no further decrease worth having.
                let predicted = predicted_reduction(&step);
                self.termination = if attempt == 0 {
                    LmTermination::Converged(ConvergenceTest::StepSize)
                } else if predicted <= negligible {
                    LmTermination::Converged(ConvergenceTest::CostReduction)
                } else {
                    LmTermination::Stalled
                };
                return Ok((keep(state, x, g, jtj), None));
            }
            let cost_trial = problem
                .problem("cost_count", |p| p.cost(&trial))
                .ok()
                .filter(|c| c.is_finite())
                .unwrap_or(f64::INFINITY);
            let predicted = predicted_reduction(&step);
            let actual = cost - cost_trial;
            let rho = if predicted > 0.0 { actual / predicted } else { -1.0 };
            if rho > 1e-4 && actual > 0.0 {
                let Ok(ne) = problem.problem("normal_equations_count", |p| p.normal_equations(&trial)) else {
                    self.damping *= self.nu;
                    self.nu *= 2.0;
                    continue;
                };
                self.damping *= (1.0f64 / 3.0).max(1.0 - (2.0 * rho - 1.0).powi(3));
                self.nu = 2.0;
                if actual <= self.params.cost_tolerance * cost {
                    self.termination = LmTermination::Converged(ConvergenceTest::CostReduction);
                }
                let kv = argmin::kv!("damping" => self.damping; "gain_ratio" => rho;);
                return Ok((
                    state
                        .param(trial)
                        .gradient(ne.gradient)
                        .hessian(ne.gauss_newton)
                        .cost(ne.cost),
                    Some(kv),
                ));
            }
            // A rejected step whose predicted gain is already below the level at which a
            // step made tiny by damping counts as converged (above): more damping only shrinks
            // the prediction, so the same conclusion is reached here without the further cost
            // evaluations (near the minimum the actual change is rounding, often ≤ 0). Not for
            // a step cut by a bound: a shorter one may then predict, and make, more progress.
            if !on_bound && predicted <= negligible {
                self.termination = LmTermination::Converged(ConvergenceTest::CostReduction);
                return Ok((keep(state, x, g, jtj), None));
            }
            self.damping *= self.nu;
            self.nu *= 2.0;
            if self.damping > 1e20 {
                break;
            }
        }
        self.termination = LmTermination::Stalled;
        Ok((keep(state, x, g, jtj), None))
    }

    fn terminate(&mut self, _state: &LmState) -> TerminationStatus {
        match self.termination {
            LmTermination::Converged(_) => TerminationStatus::Terminated(TerminationReason::SolverConverged),
            LmTermination::Stalled => {
                TerminationStatus::Terminated(TerminationReason::SolverExit("stalled".into()))
            }
            _ => TerminationStatus::NotTerminated,
        }
    }
}

/// The outcome of a Levenberg–Marquardt run: the last state, always, and why it stopped.
#[derive(Debug, Clone)]
pub struct LmOutcome {
    /// Final parameters θ.
    pub param: Array1<f64>,
    /// Gradient Jᵀr at θ.
    pub gradient: Array1<f64>,
    /// Gauss–Newton matrix JᵀJ at θ (the covariance is σ² times its inverse).
    pub gauss_newton: Array2<f64>,
    /// Final cost ½‖r‖².
    pub cost: f64,
    /// Iterations run.
    pub iterations: u64,
    /// Why it stopped.
    pub termination: LmTermination,
}

/// Runs Levenberg–Marquardt on a problem given as residuals and their Jacobian (argmin
/// [`Operator`] and [`Jacobian`]) from `start`; see [`minimise_normal_equations`] for problems
/// that form Jᵀr and JᵀJ themselves.
///
/// # Errors
/// Whatever the problem's `apply`/`jacobian` return (e.g. a speciation failure), wrapped by
/// argmin.
///
/// # Examples
/// Fitting y = a·exp(−k·t) to exact data recovers a and k:
/// ```
/// use argmin::core::{Error, Jacobian, Operator};
/// use isosbestic::resolve::lm::{minimise, LmParams};
/// use ndarray::{array, Array1, Array2};
/// struct Decay { t: Array1<f64>, y: Array1<f64> }
/// impl Operator for Decay {
///     type Param = Array1<f64>;
///     type Output = Array1<f64>;
///     fn apply(&self, p: &Array1<f64>) -> Result<Array1<f64>, Error> {
///         Ok(self.t.mapv(|t| p[0] * (-p[1] * t).exp()) - &self.y)
///     }
/// }
/// impl Jacobian for Decay {
///     type Param = Array1<f64>;
///     type Jacobian = Array2<f64>;
///     fn jacobian(&self, p: &Array1<f64>) -> Result<Array2<f64>, Error> {
///         Ok(Array2::from_shape_fn((self.t.len(), 2), |(i, k)| {
///             let e = (-p[1] * self.t[i]).exp();
///             if k == 0 { e } else { -p[0] * self.t[i] * e }
///         }))
///     }
/// }
/// let t = Array1::linspace(0.0, 4.0, 20);
/// let y = t.mapv(|t: f64| 2.5 * (-0.7 * t).exp());
/// let out = minimise(Decay { t, y }, array![1.0, 0.1], LmParams::default())?;
/// assert!(out.termination.converged());
/// approx::assert_relative_eq!(out.param[0], 2.5, max_relative = 1e-9);
/// approx::assert_relative_eq!(out.param[1], 0.7, max_relative = 1e-9);
/// # Ok::<(), argmin::core::Error>(())
/// ```
pub fn minimise<O>(problem: O, start: Array1<f64>, params: LmParams) -> Result<LmOutcome, ArgminError>
where
    O: Operator<Param = Array1<f64>, Output = Array1<f64>>
        + Jacobian<Param = Array1<f64>, Jacobian = Array2<f64>>,
{
    minimise_normal_equations(Residuals(problem), start, params)
}

/// Runs Levenberg–Marquardt on a [`GaussNewtonProblem`] from `start`.
///
/// # Errors
/// Whatever the problem returns at the start point, wrapped by argmin (failures at trial points
/// are rejected steps, not errors).
///
/// # Examples
/// The Gauss–Newton form of r = (θ₀ − 3, 2(θ₁ + 1)): cost ½‖r‖², Jᵀr, JᵀJ = diag(1, 4).
/// ```
/// use argmin::core::Error;
/// use isosbestic::resolve::lm::{minimise_normal_equations, GaussNewtonProblem, LmParams, NormalEquations};
/// use ndarray::{array, Array1};
/// struct Shifted;
/// impl GaussNewtonProblem for Shifted {
///     fn cost(&self, p: &Array1<f64>) -> Result<f64, Error> {
///         Ok(0.5 * ((p[0] - 3.0).powi(2) + 4.0 * (p[1] + 1.0).powi(2)))
///     }
///     fn normal_equations(&self, p: &Array1<f64>) -> Result<NormalEquations, Error> {
///         Ok(NormalEquations {
///             cost: self.cost(p)?,
///             gradient: array![p[0] - 3.0, 4.0 * (p[1] + 1.0)],
///             gauss_newton: array![[1.0, 0.0], [0.0, 4.0]],
///         })
///     }
/// }
/// let out = minimise_normal_equations(Shifted, array![0.0, 0.0], LmParams::default())?;
/// assert!(out.termination.converged());
/// approx::assert_abs_diff_eq!(out.param[0], 3.0, epsilon = 1e-8);
/// approx::assert_abs_diff_eq!(out.param[1], -1.0, epsilon = 1e-8);
/// # Ok::<(), argmin::core::Error>(())
/// ```
pub fn minimise_normal_equations<O: GaussNewtonProblem>(
    problem: O,
    start: Array1<f64>,
    params: LmParams,
) -> Result<LmOutcome, ArgminError> {
    let max_iter = params.max_iterations;
    let solver = LevenbergMarquardt::new(params);
    let result = Executor::new(problem, solver)
        .configure(|s| s.param(start).max_iters(max_iter))
        .timer(false)
        .run()?;
    let mut termination = result.solver().termination();
    let mut state = result.state().clone();
    if termination == LmTermination::Running {
        termination = LmTermination::IterationLimit;
    }
    let iterations = state.get_iter();
    let cost = state.get_cost();
    Ok(LmOutcome {
        param: state.take_param().unwrap_or_default(),
        gradient: state.take_gradient().unwrap_or_default(),
        gauss_newton: state.take_hessian().unwrap_or_else(|| Array2::zeros((0, 0))),
        cost,
        iterations,
        termination,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rosenbrock's function as residuals r = (10(y − x²), 1 − x): minimum at (1, 1).
    struct Rosenbrock;
    impl Operator for Rosenbrock {
        type Param = Array1<f64>;
        type Output = Array1<f64>;
        fn apply(&self, p: &Array1<f64>) -> Result<Array1<f64>, ArgminError> {
            Ok(ndarray::array![10.0 * (p[1] - p[0] * p[0]), 1.0 - p[0]])
        }
    }
    impl Jacobian for Rosenbrock {
        type Param = Array1<f64>;
        type Jacobian = Array2<f64>;
        fn jacobian(&self, p: &Array1<f64>) -> Result<Array2<f64>, ArgminError> {
            Ok(ndarray::array![[-20.0 * p[0], 10.0], [-1.0, 0.0]])
        }
    }

    #[test]
    fn rosenbrock_residuals_converge_to_the_known_minimum() {
        // Known minimum (1, 1): Rosenbrock, Comput. J. 3 (1960) 175.
        let out = minimise(Rosenbrock, ndarray::array![-1.2, 1.0], LmParams::default()).unwrap();
        assert!(out.termination.converged(), "{:?}", out.termination);
        approx::assert_abs_diff_eq!(out.param[0], 1.0, epsilon = 1e-8);
        approx::assert_abs_diff_eq!(out.param[1], 1.0, epsilon = 1e-8);
    }

    #[test]
    fn bounds_hold_the_solution_on_the_box() {
        let params = LmParams {
            upper: vec![0.5, f64::INFINITY],
            ..LmParams::default()
        };
        let out = minimise(Rosenbrock, ndarray::array![-1.2, 1.0], params).unwrap();
        assert!(out.param[0] <= 0.5);
        approx::assert_abs_diff_eq!(out.param[0], 0.5, epsilon = 1e-6);
    }

    /// r(θ) = θ − (1, 2) plus a constant residual of norm 1, whose cost carries a rounding-like
    /// error of 1e-13 relative (deterministic in θ), counting cost evaluations.
    struct NoisyBowl {
        costs: std::cell::Cell<usize>,
    }
    impl NoisyBowl {
        fn value(t: &Array1<f64>) -> f64 {
            let exact = 0.5 * ((t[0] - 1.0).powi(2) + (t[1] - 2.0).powi(2) + 1.0);
            let wobble = ((t[0] * 1e9).sin() + (t[1] * 1e9).cos()) * 1e-13;
            exact * (1.0 + wobble)
        }
    }
    impl GaussNewtonProblem for NoisyBowl {
        fn cost(&self, t: &Array1<f64>) -> Result<f64, ArgminError> {
            self.costs.set(self.costs.get() + 1);
            Ok(Self::value(t))
        }
        fn normal_equations(&self, t: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
            Ok(NormalEquations {
                cost: Self::value(t),
                gradient: ndarray::array![t[0] - 1.0, t[1] - 2.0],
                gauss_newton: Array2::eye(2),
            })
        }
    }

    #[test]
    fn at_the_minimum_a_rejected_step_with_a_negligible_predicted_gain_ends_the_run() {
        // From next to the minimum the Gauss–Newton step is exact; the next one predicts a gain
        // far below the cost tolerance and its trial cost is rounding: the run stops there,
        // converged, rather than damping the step down through many more cost evaluations.
        let problem = NoisyBowl {
            costs: std::cell::Cell::new(0),
        };
        let out =
            minimise_normal_equations(&problem, ndarray::array![1.3, 1.6], LmParams::default()).unwrap();
        assert!(out.termination.converged(), "{:?}", out.termination);
        approx::assert_abs_diff_eq!(out.param[0], 1.0, epsilon = 1e-6);
        approx::assert_abs_diff_eq!(out.param[1], 2.0, epsilon = 1e-6);
        // (5 here; 10 when every rejected step is damped down to the step tolerance)
        assert!(
            problem.costs.get() <= 6,
            "{} cost evaluations",
            problem.costs.get()
        );
    }

    /// Linear residuals r = Aθ − b (a quadratic cost with a non-zero minimum), counting cost
    /// evaluations.
    struct LinearResiduals {
        costs: std::cell::Cell<usize>,
    }
    impl LinearResiduals {
        const A: [[f64; 2]; 3] = [[1.0, 0.5], [0.2, 3.0], [2.0, -1.0]];
        const B: [f64; 3] = [1.0, -2.0, 0.5];
        fn residual(t: &Array1<f64>) -> Array1<f64> {
            Self::A
                .iter()
                .zip(Self::B)
                .map(|(row, b)| row[0] * t[0] + row[1] * t[1] - b)
                .collect()
        }
    }
    impl GaussNewtonProblem for LinearResiduals {
        fn cost(&self, t: &Array1<f64>) -> Result<f64, ArgminError> {
            self.costs.set(self.costs.get() + 1);
            let r = Self::residual(t);
            Ok(0.5 * r.dot(&r))
        }
        fn normal_equations(&self, t: &Array1<f64>) -> Result<NormalEquations, ArgminError> {
            let a = Array2::from_shape_fn((3, 2), |(i, j)| Self::A[i][j]);
            let r = Self::residual(t);
            Ok(NormalEquations {
                cost: 0.5 * r.dot(&r),
                gradient: a.t().dot(&r),
                gauss_newton: a.t().dot(&a),
            })
        }
    }

    #[test]
    fn a_negligible_gauss_newton_decrement_ends_the_run_without_another_trial() {
        // On a quadratic cost the decrement ½gᵀ(JᵀJ)⁻¹g is exactly cost(θ) − min cost, so the
        // test's promise can be checked: the run ends within cost_tolerance · cost of the
        // minimum (normal equations solved by hand: AᵀA θ* = Aᵀb).
        let problem = LinearResiduals {
            costs: std::cell::Cell::new(0),
        };
        let params = LmParams::default();
        let tol = params.cost_tolerance;
        let out = minimise_normal_equations(&problem, ndarray::array![-5.0, 7.0], params).unwrap();
        assert_eq!(
            out.termination,
            LmTermination::Converged(ConvergenceTest::PredictedReduction)
        );
        let a = Array2::from_shape_fn((3, 2), |(i, j)| LinearResiduals::A[i][j]);
        let b = Array1::from(LinearResiduals::B.to_vec());
        let best = a.t().dot(&a).solveh(&a.t().dot(&b)).unwrap();
        let r = LinearResiduals::residual(&best);
        let min_cost = 0.5 * r.dot(&r);
        assert!(min_cost > 0.1, "a non-zero minimum ({min_cost})");
        assert!(
            out.cost - min_cost <= tol * out.cost,
            "{} above {min_cost}",
            out.cost
        );
        // one trial cost per iteration but the last, which stops on the decrement alone
        assert_eq!(problem.costs.get() as u64 + 1, out.iterations);
    }

    #[test]
    fn an_iteration_limit_is_reported_with_the_last_state() {
        let params = LmParams {
            max_iterations: 2,
            ..LmParams::default()
        };
        let out = minimise(Rosenbrock, ndarray::array![-1.2, 1.0], params).unwrap();
        assert_eq!(out.termination, LmTermination::IterationLimit);
        assert_eq!(out.param.len(), 2);
        assert!(out.cost.is_finite());
    }
}
