//! Ranking candidate models fitted to the same data: AIC, BIC and F-tests of
//! nested pairs.
//!
//! Every candidate is fitted with the same data, preprocessing and fit settings; only the
//! model file differs. With n data values, RSS the residual sum of squares and k the number of
//! fitted parameters (nonlinear and linear, [`HardFit::n_parameters_total`]), the Gaussian
//! least-squares forms are (common practice; Akaike, IEEE Trans. Autom. Control 19 (1974) 716;
//! Schwarz, Ann. Stat. 6 (1978) 461)
//!
//! ```text
//! AIC = n ln(RSS/n) + 2k        BIC = n ln(RSS/n) + k ln n
//! ```
//!
//! and the candidates are ranked by AIC, lowest first ([`rank_candidates`]).
//!
//! ## When two candidates are nested
//! The F-test ([`nested_f_test`]) is only valid when the simpler model is the richer one with
//! some parameters held. The rule ([`is_nested_in`]): both models have the same components and
//! the same species (names, stoichiometry, absorbing or not, in the same order), the richer has
//! more fitted parameters, and for every species each log β(T) curve the simpler law can draw,
//! the richer law can draw too:
//! - the law kinds are ordered fixed ⊂ van 't Hoff ⊂ heat capacity ⊂ heat capacity with a ΔCp°
//!   slope, and their parameters line up as (log β at θ, ΔH°(θ), ΔCp°(θ), dΔCp°/dT); a
//!   parameter a kind lacks counts as held at 0 (a van 't Hoff law is the heat-capacity law with
//!   ΔCp° = 0);
//! - every parameter held in the richer law is held in the simpler one at the same value
//!   (a parameter free in the richer law may be anything in the simpler one);
//! - both laws use the same reference temperature θ (unless the simpler law is `fixed`, whose
//!   constant log β does not depend on θ).
//!
//! The rule is conservative: re-parametrisations it does not recognise (e.g. the same family
//! written at another θ) are not tested, never wrongly tested.

use crate::resolve::hard::{CandidateScore, HardFit, NestedTest, nested_f_test, rank_candidates};
use crate::speciation::{FormationLaw, Law, Parameter, ValidModel};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// One candidate's fit in a [`ModelComparison`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CandidateResult {
    /// Candidate name (the model file's stem, or its path when stems collide).
    pub name: String,
    /// The model file.
    pub model: PathBuf,
    /// Whether this is the run's main model (the one the rest of the report describes).
    pub primary: bool,
    /// Fitted parameters k, nonlinear and linear.
    pub n_parameters: usize,
    /// Free thermodynamic (nonlinear) parameters.
    pub n_thermodynamic_parameters: usize,
    /// Residual sum of squares, AU².
    pub rss: f64,
    /// n ln(RSS/n) + 2k.
    pub aic: f64,
    /// n ln(RSS/n) + k ln n.
    pub bic: f64,
    /// AIC minus the lowest AIC.
    pub delta_aic: f64,
    /// Rank by AIC, 1 = best.
    pub rank: usize,
    /// Whether its fit converged.
    pub converged: bool,
}

/// A candidate whose fit could not be run (it is left out of the ranking).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FailedCandidate {
    /// Candidate name.
    pub name: String,
    /// The model file.
    pub model: PathBuf,
    /// Why.
    pub reason: String,
}

/// The comparison of candidate models (`report.json` field `model_comparison`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelComparison {
    /// Number of data values n (samples × wavelengths).
    pub n_data: usize,
    /// The candidates, best (lowest AIC) first.
    pub candidates: Vec<CandidateResult>,
    /// F-tests of every nested pair (simpler, richer) by the rule of the module docs.
    pub nested_tests: Vec<NestedTest>,
    /// Candidates whose fit could not be run.
    pub failed: Vec<FailedCandidate>,
}

/// A fitted candidate handed to [`compare_candidates`].
#[derive(Debug, Clone, Copy)]
pub struct FittedCandidate<'a> {
    /// Name.
    pub name: &'a str,
    /// Model file.
    pub path: &'a Path,
    /// Whether it is the run's main model.
    pub primary: bool,
    /// The model.
    pub model: &'a ValidModel,
    /// Its fit.
    pub fit: &'a HardFit,
}

/// Names for candidate files: the file stem, or the whole path when two stems collide.
///
/// # Examples
/// ```
/// use isosbestic::report::fit::candidate_names;
/// use std::path::PathBuf;
/// let p = [PathBuf::from("a/vh.toml"), PathBuf::from("b/cp.toml"), PathBuf::from("c/vh.toml")];
/// assert_eq!(candidate_names(&p), ["a/vh.toml", "cp", "c/vh.toml"]);
/// ```
pub fn candidate_names(paths: &[PathBuf]) -> Vec<String> {
    let stem = |p: &PathBuf| {
        p.file_stem()
            .map_or_else(|| p.display().to_string(), |s| s.to_string_lossy().into_owned())
    };
    paths
        .iter()
        .map(|p| {
            let s = stem(p);
            if paths.iter().filter(|q| stem(q) == s).count() > 1 {
                p.display().to_string()
            } else {
                s
            }
        })
        .collect()
}

/// The parameters of a law on the common axis (log β, ΔH°, ΔCp°, slope), `None` where the kind
/// has none (held at 0), and its reference temperature (`None` for a fixed law).
fn aligned(law: &Law) -> ([Option<Parameter>; 4], Option<f64>) {
    let mut out = [None; 4];
    for (o, p) in out.iter_mut().zip(law.parameters()) {
        *o = Some(p);
    }
    let theta = match law {
        Law::Fixed(_) => None,
        _ => Some(law.reference_temperature_k()),
    };
    (out, theta)
}

fn law_nested_in(simpler: &Law, richer: &Law) -> bool {
    let (s, ts) = aligned(simpler);
    let (r, tr) = aligned(richer);
    if let (Some(a), Some(b)) = (ts, tr)
        && !approx::relative_eq!(a, b, max_relative = 1e-12)
    {
        return false;
    }
    s.iter().zip(&r).all(|(sp, rp)| {
        let held = |p: &Option<Parameter>| p.map_or(Some(0.0), |p| p.fixed.then_some(p.value));
        match held(rp) {
            None => true, // free in the richer law
            Some(v) => held(sp).is_some_and(|w| approx::relative_eq!(v, w, max_relative = 1e-12)),
        }
    })
}

fn free_count(model: &ValidModel) -> usize {
    model
        .species()
        .iter()
        .map(|s| s.law.parameters().iter().filter(|p| !p.fixed).count())
        .sum()
}

/// Whether `simpler` is nested in `richer` by the rule of the module docs.
///
/// # Examples
/// ```
/// use isosbestic::report::fit::is_nested_in;
/// use isosbestic::speciation::EquilibriumModel;
/// let model = |law: &str| {
///     let text = format!(r#"
///         components = [{{ name = "M", absorbs = true }}, {{ name = "L", absorbs = false }}]
///         [[species]]
///         name = "ML"
///         stoichiometry = {{ M = 1, L = 1 }}
///         absorbs = true
///         law = {law}"#);
///     EquilibriumModel::from_toml_str(&text).unwrap().check().unwrap()
/// };
/// let vh = model(r#"{ kind = "van_t_hoff", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 } }"#);
/// let cp = model(r#"{ kind = "heat_capacity", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 }, dcp = { value = 0.0 } }"#);
/// let cp_held = model(r#"{ kind = "heat_capacity", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 }, dcp = { value = 50.0, fixed = true } }"#);
/// assert!(is_nested_in(&vh, &cp));
/// assert!(!is_nested_in(&cp, &vh));
/// assert!(!is_nested_in(&vh, &cp_held)); // ΔCp° held at 50 cannot give ΔCp° = 0
/// ```
pub fn is_nested_in(simpler: &ValidModel, richer: &ValidModel) -> bool {
    if simpler.component_names() != richer.component_names()
        || simpler.n_species() != richer.n_species()
        || free_count(simpler) >= free_count(richer)
    {
        return false;
    }
    simpler.species().iter().zip(richer.species()).all(|(s, r)| {
        s.name == r.name
            && s.stoichiometry == r.stoichiometry
            && s.optics == r.optics
            && law_nested_in(&s.law, &r.law)
    })
}

/// Ranks fitted candidates by AIC and F-tests every nested pair.
///
/// All fits must be of the same data (same n); a fit with a different n is ranked on its own
/// numbers, which the caller must avoid.
pub fn compare_candidates(fits: &[FittedCandidate<'_>], failed: Vec<FailedCandidate>) -> ModelComparison {
    let n_data = fits.first().map_or(0, |c| c.fit.n_data);
    let input: Vec<(&str, f64, usize, usize)> = fits
        .iter()
        .map(|c| (c.name, c.fit.rss, c.fit.n_parameters_total, c.fit.n_data))
        .collect();
    let scores: Vec<CandidateScore> = rank_candidates(&input);
    let candidates = scores
        .into_iter()
        .enumerate()
        .filter_map(|(i, s)| {
            let c = fits.iter().find(|c| c.name == s.name)?;
            Some(CandidateResult {
                name: s.name,
                model: c.path.to_path_buf(),
                primary: c.primary,
                n_parameters: s.parameters,
                n_thermodynamic_parameters: c.fit.parameters.len(),
                rss: s.rss,
                aic: s.aic,
                bic: s.bic,
                delta_aic: s.delta_aic,
                rank: i + 1,
                converged: c.fit.termination.converged(),
            })
        })
        .collect();
    let mut nested_tests = Vec::new();
    for s in fits {
        for r in fits {
            if is_nested_in(s.model, r.model) && r.fit.n_parameters_total > s.fit.n_parameters_total {
                nested_tests.push(nested_f_test(
                    (s.name, s.fit.rss, s.fit.n_parameters_total),
                    (r.name, r.fit.rss, r.fit.n_parameters_total),
                    n_data,
                ));
            }
        }
    }
    ModelComparison {
        n_data,
        candidates,
        nested_tests,
        failed,
    }
}

impl ModelComparison {
    /// The F-test of `richer` against its closest nested simpler candidate (the one with the
    /// most parameters), if any.
    pub fn closest_test_for(&self, richer: &str) -> Option<&NestedTest> {
        let k = |name: &str| {
            self.candidates
                .iter()
                .find(|c| c.name == name)
                .map_or(0, |c| c.n_parameters)
        };
        self.nested_tests
            .iter()
            .filter(|t| t.richer == richer)
            .max_by_key(|t| k(&t.simpler))
    }

    /// Writes `model_comparison.csv`: one row per candidate, best first, with the F-test against
    /// its closest nested simpler candidate (empty cells when there is none); every nested pair
    /// is in `report.json`.
    ///
    /// # Errors
    /// [`crate::Error::Output`].
    pub fn write_csv(&self, path: &Path) -> crate::Result<()> {
        use crate::report::tables::{Table, format_float};
        let mut t = Table::new([
            "rank",
            "name",
            "model_file",
            "primary",
            "n_parameters",
            "n_thermodynamic_parameters",
            "rss",
            "aic",
            "bic",
            "delta_aic",
            "converged",
            "f_test_simpler",
            "f",
            "p_value",
        ]);
        for c in &self.candidates {
            let test = self.closest_test_for(&c.name);
            t.push_row([
                c.rank.to_string(),
                c.name.clone(),
                c.model.display().to_string(),
                c.primary.to_string(),
                c.n_parameters.to_string(),
                c.n_thermodynamic_parameters.to_string(),
                format_float(c.rss),
                format_float(c.aic),
                format_float(c.bic),
                format_float(c.delta_aic),
                c.converged.to_string(),
                test.map(|t| t.simpler.clone()).unwrap_or_default(),
                test.map(|t| format_float(t.f)).unwrap_or_default(),
                test.map(|t| format_float(t.p_value)).unwrap_or_default(),
            ]);
        }
        t.write_csv(path)
    }
}

/// A p-value for people: three significant digits, and "< 1e-16" below double precision's
/// resolution of 1 − p.
pub(crate) fn p_text(p: f64) -> String {
    if p < 1e-16 {
        "< 1e-16".to_string()
    } else {
        format!("{p:.3e}")
    }
}

impl std::fmt::Display for ModelComparison {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(
            f,
            "model comparison ({} data values, ranked by AIC = n ln(RSS/n) + 2k):",
            self.n_data
        )?;
        writeln!(
            f,
            "  {:>4}  {:<20} {:>7} {:>12} {:>14} {:>10} {:>14}",
            "rank", "model", "k", "RSS", "AIC", "ΔAIC", "BIC"
        )?;
        for c in &self.candidates {
            writeln!(
                f,
                "  {:>4}  {:<20} {:>7} {:>12.5e} {:>14.2} {:>10.2} {:>14.2}{}{}",
                c.rank,
                c.name,
                c.n_parameters,
                c.rss,
                c.aic,
                c.delta_aic,
                c.bic,
                if c.primary { "  (main model)" } else { "" },
                if c.converged { "" } else { "  not converged" }
            )?;
        }
        for t in &self.nested_tests {
            writeln!(
                f,
                "  F-test {} within {}: F = {:.4}, p = {}",
                t.simpler,
                t.richer,
                t.f,
                p_text(t.p_value)
            )?;
        }
        for c in &self.failed {
            writeln!(f, "  {} could not be fitted: {}", c.name, c.reason)?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn aic_and_bic_match_a_hand_computation() {
        // hand computation (Akaike 1974, Schwarz 1978, Gaussian least-squares form, common
        // practice): n = 1000, RSS = 2, k = 10:
        // ln(2/1000) = 0.693147 − 6.907755 = −6.214608, AIC = −6214.608 + 20 = −6194.608,
        // BIC = −6214.608 + 10·6.907755 = −6145.531
        let r = rank_candidates(&[("a", 2.0, 10, 1000)]);
        approx::assert_abs_diff_eq!(r[0].aic, -6194.608, epsilon = 1e-3);
        approx::assert_abs_diff_eq!(r[0].bic, -6145.531, epsilon = 1e-3);
    }

    #[test]
    fn names_fall_back_to_paths_only_where_stems_collide() {
        let p = [PathBuf::from("x/m.toml"), PathBuf::from("y/m.json")];
        assert_eq!(candidate_names(&p), ["x/m.toml", "y/m.json"]);
    }
}
