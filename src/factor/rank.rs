//! Noise level and rank (number of absorbing species) from the singular values of D.
//!
//! Notation (Malinowski, *Factor Analysis in Chemistry*, 3rd ed., Wiley 2002): D has r rows and
//! c columns; λⱼ = sⱼ² are the eigenvalues of DᵀD, j = 1 … s with s = min(r, c); k is an assumed
//! rank (number of primary factors). Malinowski states his error functions for r ≥ c; here
//! `r_big` = max(rows, columns) and `c_small` = min(rows, columns), so the formulas hold for
//! either orientation of D.

use super::FactorError;
use super::svd::Decomposition;
use crate::stats::f_sf;
use serde::{Deserialize, Serialize};

/// Safety factor on the noise edge σ·(√r + √c) used by the known-noise criterion.
///
/// The largest singular value of an r × c matrix of independent N(0, σ²) entries lies close to
/// σ·(√r + √c) (Geman, Ann. Probab. 8 (1980) 252; Davidson & Szarek, Handbook of the Geometry of
/// Banach Spaces I (2001), Thm II.13 — references from memory); its fluctuations above that edge
/// are of Tracy–Widom size, a few per cent at the sizes of UV–Vis data. A singular value counts as
/// signal when it exceeds 1.1·σ·(√r + √c): our choice, common practice rather than a published rule.
pub const NOISE_EDGE_FACTOR: f64 = 1.1;

impl Decomposition {
    fn dims(&self) -> (f64, f64, usize) {
        let (r, c) = (self.n_rows(), self.n_cols());
        (r.max(c) as f64, r.min(c) as f64, r.min(c))
    }

    fn residual_sum(&self, k: usize) -> f64 {
        self.singular_values().iter().skip(k).map(|s| s * s).sum()
    }

    /// Noise estimate σ̂(k) in absorbance units for an assumed rank `k`:
    ///
    /// ```text
    /// σ̂(k) = √( Σⱼ₌ₖ₊₁ˢ λⱼ / ((r − k)(c − k)) )
    /// ```
    ///
    /// the residual sum of squares of the rank-k approximation divided by its degrees of freedom
    /// (the residual lies in the (r − k)(c − k)-dimensional space orthogonal to the k row and k
    /// column factors), so that at the true rank it estimates the standard deviation of white
    /// noise. Malinowski's real error [`Decomposition::real_error`] divides by r(c − k) instead and
    /// is smaller by √((r − k)/r). `None` when k ≥ min(r, c) (no residual left).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::factor::decompose;
    /// use ndarray::array;
    /// let dec = decompose(array![[4.0, 0.0, 0.0], [0.0, 2.0, 0.0]].view())?;
    /// // rank 1 leaves λ₂ = 4 over (3 − 1)(2 − 1) = 2 degrees of freedom
    /// approx::assert_relative_eq!(dec.noise_estimate(1).unwrap(), 2f64.sqrt(), max_relative = 1e-12);
    /// assert!(dec.noise_estimate(2).is_none());
    /// # Ok::<(), isosbestic::factor::FactorError>(())
    /// ```
    pub fn noise_estimate(&self, k: usize) -> Option<f64> {
        let (r, c, s) = self.dims();
        (k < s).then(|| (self.residual_sum(k) / ((r - k as f64) * (c - k as f64))).sqrt())
    }

    /// Malinowski's real error RE(k) (Anal. Chem. 49 (1977) 612; *Factor Analysis in Chemistry*,
    /// ch. 4 — details from memory), in absorbance units:
    ///
    /// ```text
    /// RE(k) = √( Σⱼ₌ₖ₊₁ᶜ λⱼ / (r (c − k)) ),   r ≥ c
    /// ```
    ///
    /// `None` when k ≥ min(r, c).
    pub fn real_error(&self, k: usize) -> Option<f64> {
        let (r, c, s) = self.dims();
        (k < s).then(|| (self.residual_sum(k) / (r * (c - k as f64))).sqrt())
    }

    /// Malinowski's indicator function IND(k) = RE(k) / (c − k)² (same sources as
    /// [`Decomposition::real_error`]); it reaches its minimum at the number of primary factors.
    /// `None` when k ≥ min(r, c).
    pub fn indicator(&self, k: usize) -> Option<f64> {
        let (_, c, _) = self.dims();
        self.real_error(k).map(|re| re / (c - k as f64).powi(2))
    }

    /// Reduced eigenvalue REVₖ = λₖ / ((r − k + 1)(c − k + 1)) for 1 ≤ k ≤ min(r, c)
    /// (Malinowski, J. Chemom. 3 (1988) 49). Error eigenvalues have about equal reduced
    /// eigenvalues. `None` outside 1 ≤ k ≤ min(r, c).
    pub fn reduced_eigenvalue(&self, k: usize) -> Option<f64> {
        let (r, c) = (self.n_rows() as f64, self.n_cols() as f64);
        let s = self.singular_values().get(k.checked_sub(1)?)?;
        Some(s * s / ((r - k as f64 + 1.0) * (c - k as f64 + 1.0)))
    }

    /// Malinowski's F-test of factor `k` (J. Chemom. 3 (1988) 49): the reduced eigenvalue of the
    /// smallest primary factor k against the pooled reduced eigenvalue of the factors k+1 … s
    /// that are presumed to be noise,
    ///
    /// ```text
    /// F(1, s − k) = REVₖ / ( Σⱼ₌ₖ₊₁ˢ λⱼ / Σⱼ₌ₖ₊₁ˢ (r − j + 1)(c − j + 1) )
    /// ```
    ///
    /// with the one-sided p-value P(F(1, s − k) > F) (`crate::stats::f_sf`). A small p-value
    /// means factor k stands out of the noise. `None` unless 1 ≤ k < s.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::factor::decompose;
    /// use ndarray::Array2;
    /// // one strong factor over small alternating "noise": factor 1 is significant, factor 2 is not
    /// let d = Array2::from_shape_fn((6, 8), |(i, j)| {
    ///     (i + 1) as f64 * (j + 1) as f64 + 1e-3 * (((i * 7 + j * 3) % 5) as f64 - 2.0)
    /// });
    /// let dec = decompose(d.view())?;
    /// assert!(dec.f_test(1).unwrap().p_value < 1e-6);
    /// assert!(dec.f_test(2).unwrap().p_value > 0.05);
    /// # Ok::<(), isosbestic::factor::FactorError>(())
    /// ```
    pub fn f_test(&self, k: usize) -> Option<FTestRow> {
        let (r, c, s) = (self.n_rows() as f64, self.n_cols() as f64, self.dims().2);
        if k == 0 || k >= s {
            return None;
        }
        let reduced_eigenvalue = self.reduced_eigenvalue(k)?;
        let weights: f64 = (k + 1..=s)
            .map(|j| (r - j as f64 + 1.0) * (c - j as f64 + 1.0))
            .sum();
        let pool = self.residual_sum(k) / weights;
        let f = if pool > 0.0 {
            reduced_eigenvalue / pool
        } else if reduced_eigenvalue > 0.0 {
            f64::INFINITY
        } else {
            0.0
        };
        let p_value = if f.is_infinite() {
            0.0
        } else {
            f_sf(f, 1.0, (s - k) as f64)
        };
        Some(FTestRow {
            k,
            reduced_eigenvalue,
            f,
            p_value,
        })
    }

    /// Number of singular values above [`NOISE_EDGE_FACTOR`]·σ·(√r + √c) for a known noise level
    /// σ (absorbance units, standard deviation of white noise).
    pub fn count_above_noise(&self, sigma: f64) -> usize {
        let (r, c) = (self.n_rows() as f64, self.n_cols() as f64);
        let threshold = NOISE_EDGE_FACTOR * sigma * (r.sqrt() + c.sqrt());
        self.singular_values().iter().filter(|&&s| s > threshold).count()
    }
}

/// One row of Malinowski's F-test table ([`Decomposition::f_test`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FTestRow {
    /// The factor tested (1-based): the smallest of k assumed primary factors.
    pub k: usize,
    /// Its reduced eigenvalue REVₖ.
    pub reduced_eigenvalue: f64,
    /// The F statistic with (1, s − k) degrees of freedom (may be +∞ for noise-free data).
    pub f: f64,
    /// One-sided p-value P(F > f).
    pub p_value: f64,
}

/// The number of absorbing species the data support, by several criteria, with the reasons.
///
/// How `chosen` is decided:
/// - without a known noise level: the smaller of the indicator-function and F-test ranks. A
///   factor is kept only when both criteria support it — the F-test's rank unless the indicator
///   function does not support that many factors, and the indicator's rank unless the F-test
///   finds the extra factors insignificant;
/// - with a known noise level: the median of the three criteria (the majority when two agree).
///
/// Meloun, Čapek, Mikšík, Brereton, Anal. Chim. Acta 423 (2000) 51 find such indices reliable
/// for signal-to-noise ratios above about 10; below that every criterion tends to under-count
/// minor species, and the `reasoning` says so when the last chosen factor is weak.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RankEstimate {
    /// Rank at the minimum of Malinowski's indicator function over k = 1 … k_max.
    pub by_indicator: usize,
    /// Largest k ≤ k_max whose factor is significant in Malinowski's F-test (0 if none).
    pub by_f_test: usize,
    /// Number of singular values above the known-noise edge, when a noise level was given
    /// (capped at k_max).
    pub by_noise: Option<usize>,
    /// The rank adopted (see the type's documentation for the rule).
    pub chosen: usize,
    /// Sentences saying what each criterion gave and why `chosen` was adopted.
    pub reasoning: Vec<String>,
    /// IND(k) for k = 1 … k_max (element k − 1; shorter when the data are exact in fewer
    /// factors, see [`estimate_rank`]).
    pub ind: Vec<f64>,
    /// F-test rows for k = 1 … k_max (as `ind`).
    pub f_test: Vec<FTestRow>,
}

/// Estimates the rank of D from its decomposition.
///
/// k_max = min(`max_rank`, min(r, c) − 1): both criteria need at least one residual factor.
/// Factors whose singular values are at the rounding level (≤ max(r, c)·ε·σ₁) are not searched:
/// on exact data both criteria would otherwise compare rounding with rounding.
/// The F-test rank is the largest k ≤ k_max whose factor is significant (p < `significance`),
/// i.e. the scan runs from k_max downwards and stops at the first significant factor. Every factor
/// tested before it is then compared with a pool of presumed-noise factors only; scanning from
/// k = 1 upwards instead would pool real factors with the noise while testing the larger ones, and
/// with few samples (r ≈ k) then misses factors.
///
/// # Errors
/// [`FactorError::TooSmallForRank`] when min(r, c) < 3; [`FactorError::InvalidParameter`] for
/// `max_rank` = 0, `significance` outside (0, 1) or a `known_noise` that is not positive and finite.
///
/// # Examples
/// ```
/// use isosbestic::factor::{decompose, estimate_rank};
/// use ndarray::Array2;
/// // two bands, 12 samples, deterministic small perturbation
/// let d = Array2::from_shape_fn((12, 40), |(i, j)| {
///     let (x, t) = (j as f64, i as f64 / 11.0);
///     t * (-((x - 12.0) / 4.0).powi(2)).exp() + (1.0 - t) * (-((x - 25.0) / 5.0).powi(2)).exp()
///         + 1e-4 * ((i * 31 + j * 17) % 13) as f64 / 13.0
/// });
/// let est = estimate_rank(&decompose(d.view())?, 8, 0.05, None)?;
/// assert_eq!(est.by_f_test, est.chosen);
/// assert!(est.chosen >= 2);
/// # Ok::<(), isosbestic::factor::FactorError>(())
/// ```
pub fn estimate_rank(
    dec: &Decomposition,
    max_rank: usize,
    significance: f64,
    known_noise: Option<f64>,
) -> Result<RankEstimate, FactorError> {
    super::check_rank_params(max_rank, significance, known_noise)?;
    let (rows, cols) = (dec.n_rows(), dec.n_cols());
    let s = rows.min(cols);
    if s < 3 {
        return Err(FactorError::TooSmallForRank { rows, cols });
    }
    let k_max = max_rank.min(s - 1);
    let sv = dec.singular_values();
    if sv.iter().all(|&x| x <= 0.0) {
        return Ok(RankEstimate {
            by_indicator: 0,
            by_f_test: 0,
            by_noise: known_noise.map(|_| 0),
            chosen: 0,
            reasoning: vec!["D is zero: no factor.".to_string()],
            ind: vec![0.0; k_max],
            f_test: Vec::new(),
        });
    }

    // Singular values at the rounding level of the decomposition (max(r, c)·ε·σ₁, LAPACK's
    // numerical-rank convention) are zeros: beyond them the indicator function and the F-test
    // would compare rounding with rounding (exact, noise-free data).
    let rounding = rows.max(cols) as f64 * f64::EPSILON * sv[0];
    let numerical_rank = sv.iter().filter(|&&x| x > rounding).count();
    let k_searched = k_max.min(numerical_rank.max(1));
    let ind: Vec<f64> = (1..=k_searched).filter_map(|k| dec.indicator(k)).collect();
    let by_indicator = ind
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))
        .map_or(0, |(i, _)| i + 1);
    let f_test: Vec<FTestRow> = (1..=k_searched).filter_map(|k| dec.f_test(k)).collect();
    let by_f_test = f_test
        .iter()
        .rposition(|row| row.p_value < significance)
        .map_or(0, |i| i + 1);
    let by_noise = known_noise.map(|sigma| dec.count_above_noise(sigma).min(k_max));

    let mut reasoning = Vec::new();
    if k_searched < k_max {
        reasoning.push(format!(
            "Singular values beyond the first {numerical_rank} are at the rounding level \
             (≤ max(r, c)·ε·σ₁ = {rounding:.3e}): the data hold exactly {numerical_rank} factor(s) \
             and the search stops there."
        ));
    }
    reasoning.push(format!(
        "Malinowski's indicator function IND(k) = RE(k)/(c − k)² is smallest at k = {by_indicator} \
         (searched k = 1…{k_searched})."
    ));
    let level = 100.0 * significance;
    let f_sentence = match (by_f_test, f_test.get(by_f_test)) {
        (0, _) => format!(
            "Malinowski's F-test at the {level:.1} % level finds no significant factor among k = 1…{k_searched}."
        ),
        (_, Some(next)) => format!(
            "Malinowski's F-test at the {level:.1} % level: factor {by_f_test} is the last significant one \
             (p = {:.2e}); factor {} is not (F = {:.3}, p = {:.3}).",
            f_test[by_f_test - 1].p_value,
            next.k,
            next.f,
            next.p_value
        ),
        (_, None) if k_searched < k_max => format!(
            "Malinowski's F-test at the {level:.1} % level finds factor {by_f_test} significant, the \
             last one above the rounding level."
        ),
        (_, None) => format!(
            "Malinowski's F-test at the {level:.1} % level finds factor {by_f_test} significant, the \
             largest rank searched (k_max = {k_max}); the data may hold more factors."
        ),
    };
    reasoning.push(f_sentence);
    if let (Some(n), Some(sigma)) = (by_noise, known_noise) {
        let (r, c) = (rows as f64, cols as f64);
        reasoning.push(format!(
            "With the stated noise σ = {sigma:.3e} AU, {n} singular value(s) exceed \
             {NOISE_EDGE_FACTOR}·σ·(√r + √c) = {:.3e}.",
            NOISE_EDGE_FACTOR * sigma * (r.sqrt() + c.sqrt())
        ));
    }
    let chosen = match by_noise {
        None => {
            let chosen = by_indicator.min(by_f_test);
            reasoning.push(if by_indicator == by_f_test {
                format!("Both criteria agree: rank {chosen}.")
            } else if by_f_test > by_indicator {
                format!(
                    "The indicator function does not support the F-test's {by_f_test} factors; \
                     rank {chosen} is kept (a factor counts only when both criteria support it)."
                )
            } else {
                format!(
                    "The F-test finds the indicator function's factors beyond {by_f_test} \
                     insignificant; rank {chosen} is kept (a factor counts only when both \
                     criteria support it)."
                )
            });
            chosen
        }
        Some(n) => {
            let mut v = [by_indicator, by_f_test, n];
            v.sort_unstable();
            let chosen = v[1];
            reasoning.push(if by_indicator == by_f_test && by_f_test == n {
                format!("All three criteria agree: rank {chosen}.")
            } else {
                format!("The criteria disagree; rank {chosen} is their median (the majority when two agree).")
            });
            chosen
        }
    };
    if chosen > 0
        && let (Some(s_last), Some(noise)) = (sv.get(chosen - 1), dec.noise_estimate(chosen))
    {
        let (r, c) = ((rows - chosen + 1) as f64, (cols - chosen + 1) as f64);
        let ratio = s_last / (noise * (r.sqrt() + c.sqrt()));
        if ratio < 10.0 {
            reasoning.push(format!(
                "Caution: factor {chosen} is only {ratio:.1}× the noise edge σ̂·(√r + √c); \
                     rank criteria are reliable above a signal-to-noise ratio of about 10 \
                     (Meloun et al., Anal. Chim. Acta 423 (2000) 51)."
            ));
        }
    }
    Ok(RankEstimate {
        by_indicator,
        by_f_test,
        by_noise,
        chosen,
        reasoning,
        ind,
        f_test,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::factor::decompose;
    use approx::assert_relative_eq;
    use ndarray::{Array2, array};

    #[test]
    fn the_f_statistic_follows_malinowskis_formula_by_hand() {
        // diag(5, 3, 1) padded to 3×4: λ = 25, 9, 1; r = 3, c = 4, s = 3
        let d = array![[5.0, 0.0, 0.0, 0.0], [0.0, 3.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]];
        let dec = decompose(d.view()).unwrap();
        let row = dec.f_test(1).unwrap();
        // REV₁ = 25/(3·4); pool = (9 + 1)/((2·3) + (1·2)) = 10/8
        assert_relative_eq!(row.reduced_eigenvalue, 25.0 / 12.0, max_relative = 1e-12);
        assert_relative_eq!(row.f, (25.0 / 12.0) / (10.0 / 8.0), max_relative = 1e-12);
        let row2 = dec.f_test(2).unwrap();
        assert_relative_eq!(row2.f, (9.0 / 6.0) / (1.0 / 2.0), max_relative = 1e-12);
        assert!(dec.f_test(3).is_none());
        assert!(dec.f_test(0).is_none());
    }

    #[test]
    fn real_error_and_indicator_follow_their_formulas_by_hand() {
        let d = array![[5.0, 0.0, 0.0, 0.0], [0.0, 3.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]];
        let dec = decompose(d.view()).unwrap();
        // r = 4 (larger), c = 3: RE(1) = √(10/(4·2)), IND(1) = RE(1)/4
        assert_relative_eq!(
            dec.real_error(1).unwrap(),
            (10.0f64 / 8.0).sqrt(),
            max_relative = 1e-12
        );
        assert_relative_eq!(
            dec.indicator(1).unwrap(),
            (10.0f64 / 8.0).sqrt() / 4.0,
            max_relative = 1e-12
        );
        assert_relative_eq!(
            dec.noise_estimate(1).unwrap(),
            (10.0f64 / 6.0).sqrt(),
            max_relative = 1e-12
        );
    }

    #[test]
    fn a_zero_matrix_has_rank_zero() {
        let dec = decompose(Array2::zeros((5, 6)).view()).unwrap();
        let est = estimate_rank(&dec, 4, 0.05, None).unwrap();
        assert_eq!(est.chosen, 0);
    }

    #[test]
    fn noise_free_rank_two_data_give_rank_two() {
        let d = Array2::from_shape_fn((6, 9), |(i, j)| {
            let (i, j) = (i as f64, j as f64);
            (1.0 + i) * (j * 0.3).sin() + (6.0 - i) * (j * 0.2).cos()
        });
        let est = estimate_rank(&decompose(d.view()).unwrap(), 4, 0.05, None).unwrap();
        assert_eq!(est.by_f_test, 2);
        assert_eq!(est.by_indicator, 2);
        assert_eq!(est.chosen, 2);
    }

    #[test]
    fn too_small_a_matrix_is_a_typed_error() {
        let dec = decompose(array![[1.0, 2.0], [3.0, 4.0]].view()).unwrap();
        assert_eq!(
            estimate_rank(&dec, 4, 0.05, None),
            Err(FactorError::TooSmallForRank { rows: 2, cols: 2 })
        );
    }
}
