//! Evolving factor analysis (EFA): singular values of growing windows of samples.
//!
//! Gampp, Maeder, Meyer, Zuberbühler, Talanta 32 (1985) 1133; Maeder, Anal. Chem. 59 (1987) 527.
//! With the samples in a meaningful order (here usually increasing temperature), the forward
//! analysis takes the SVD of the first 1, 2, …, n samples and the backward analysis that of the
//! last n, n − 1, …, 1 samples. A new singular value rising out of the noise marks where a species
//! appears (forward) or disappears (backward).
//!
//! Efficiency: with the thin SVD D = U·diag(s)·Vᵀ computed once, any set of rows satisfies
//! D[rows] = U[rows]·diag(s)·Vᵀ, and because Vᵀ has orthonormal rows the singular values of
//! D[rows] are exactly those of the small matrix U[rows]·diag(s) (rows × p, p = min(n, m)).
//! Each window SVD therefore costs O(n·p²) instead of O(n·p·m).

use super::FactorError;
use super::svd::{Decomposition, decompose, singular_values_only};
use ndarray::{Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

/// Forward and backward evolving factor analysis of D along a sample order.
///
/// `forward[[i, j]]` is log₁₀ of the (j+1)-th singular value of the window of the first i + 1
/// samples in `order`; `backward[[i, j]]` that of the window from position i to the end. Both
/// are n × `n_factors`. Singular values at or below the numerical zero level
/// s₁(D)·ε·max(n, m) (ε the machine epsilon) — in particular the (j+1)-th value of a window with
/// fewer than j + 1 samples — are reported at that level, so every entry is finite.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvolvingFactors {
    /// The sample order used: `order[i]` is the row of D at position i.
    pub order: Vec<usize>,
    /// log₁₀ singular values of the growing windows D[order[0..=i]], n × n_factors.
    pub forward: Array2<f64>,
    /// log₁₀ singular values of the shrinking windows D[order[i..n]], n × n_factors.
    pub backward: Array2<f64>,
}

/// Evolving factor analysis of `d` (samples × wavelengths) in the sample order `order`
/// (a permutation of 0 … n − 1), keeping the first `n_factors` singular values per window.
///
/// # Errors
/// As [`decompose`]; [`FactorError::InvalidOrder`] when `order` is not a permutation of the rows;
/// [`FactorError::InvalidParameter`] when `n_factors` is 0.
///
/// # Examples
/// ```
/// use isosbestic::factor::evolving_factors;
/// use ndarray::Array2;
/// // species 1 everywhere, species 2 from the fourth sample on
/// let d = Array2::from_shape_fn((8, 30), |(i, j)| {
///     let x = j as f64;
///     (-((x - 10.0) / 3.0).powi(2)).exp() + if i >= 3 { (-((x - 20.0) / 3.0).powi(2)).exp() } else { 0.0 }
/// });
/// let efa = evolving_factors(d.view(), &(0..8).collect::<Vec<_>>(), 3)?;
/// assert!(efa.forward[[2, 1]] < -10.0); // three samples: one species
/// assert!(efa.forward[[3, 1]] > -2.0); // the fourth brings the second
/// # Ok::<(), isosbestic::factor::FactorError>(())
/// ```
pub fn evolving_factors(
    d: ArrayView2<f64>,
    order: &[usize],
    n_factors: usize,
) -> Result<EvolvingFactors, FactorError> {
    let dec = decompose(d)?;
    evolving_factors_of(&dec, order, n_factors)
}

/// As [`evolving_factors`], reusing a decomposition of D already at hand.
///
/// # Errors
/// [`FactorError::InvalidOrder`], [`FactorError::InvalidParameter`], [`FactorError::Lapack`].
pub fn evolving_factors_of(
    dec: &Decomposition,
    order: &[usize],
    n_factors: usize,
) -> Result<EvolvingFactors, FactorError> {
    let n = dec.n_rows();
    check_order(order, n)?;
    if n_factors == 0 {
        return Err(FactorError::InvalidParameter {
            name: "n_factors",
            value: "0".to_string(),
            reason: "at least one factor is needed",
        });
    }
    let floor = zero_level(dec);
    // Rows of U·diag(s) in the requested order: the reduced data.
    let reduced = (dec.u() * dec.singular_values()).select(Axis(0), order);
    let mut forward = Array2::from_elem((n, n_factors), floor.log10());
    let mut backward = forward.clone();
    for i in 0..n {
        fill_row(&mut forward, i, reduced.slice(ndarray::s![..=i, ..]), floor)?;
        fill_row(&mut backward, i, reduced.slice(ndarray::s![i.., ..]), floor)?;
    }
    Ok(EvolvingFactors {
        order: order.to_vec(),
        forward,
        backward,
    })
}

/// [`Decomposition::zero_level`], or the smallest positive number if D is zero.
fn zero_level(dec: &Decomposition) -> f64 {
    let level = dec.zero_level();
    if level > 0.0 { level } else { f64::MIN_POSITIVE }
}

fn fill_row(out: &mut Array2<f64>, i: usize, window: ArrayView2<f64>, floor: f64) -> Result<(), FactorError> {
    let s = singular_values_only(window)?;
    for (slot, v) in out.row_mut(i).iter_mut().zip(s.iter()) {
        *slot = v.max(floor).log10();
    }
    Ok(())
}

fn check_order(order: &[usize], n: usize) -> Result<(), FactorError> {
    if order.len() != n {
        return Err(FactorError::InvalidOrder {
            reason: format!("the order lists {} samples, D has {n}", order.len()),
        });
    }
    let mut seen = vec![false; n];
    for (position, &row) in order.iter().enumerate() {
        match seen.get_mut(row) {
            None => {
                return Err(FactorError::InvalidOrder {
                    reason: format!("position {position} names row {row}, but D has {n} rows"),
                });
            }
            Some(true) => {
                return Err(FactorError::InvalidOrder {
                    reason: format!("row {row} appears twice (again at position {position})"),
                });
            }
            Some(flag) => *flag = true,
        }
    }
    Ok(())
}

/// The order of samples by increasing temperature, ties kept in input order (a stable sort).
///
/// # Examples
/// ```
/// use isosbestic::factor::temperature_order;
/// assert_eq!(temperature_order(&[310.0, 298.15, 310.0, 300.0]), vec![1, 3, 0, 2]);
/// ```
pub fn temperature_order(temperatures_k: &[f64]) -> Vec<usize> {
    let mut order: Vec<usize> = (0..temperatures_k.len()).collect();
    order.sort_by(|&a, &b| temperatures_k[a].total_cmp(&temperatures_k[b]));
    order
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn an_order_that_is_not_a_permutation_is_rejected() {
        let d = array![[1.0, 2.0], [3.0, 4.0], [5.0, 7.0]];
        for bad in [vec![0, 1], vec![0, 1, 3], vec![0, 1, 1]] {
            let e = evolving_factors(d.view(), &bad, 2).unwrap_err();
            assert!(matches!(e, FactorError::InvalidOrder { .. }), "{bad:?}: {e}");
        }
    }

    #[test]
    fn the_full_window_equals_the_whole_matrix() {
        let d = array![
            [1.0, 2.0, 0.5],
            [3.0, 4.0, 1.0],
            [5.0, 7.0, -2.0],
            [0.0, 1.0, 1.0]
        ];
        let efa = evolving_factors(d.view(), &[2, 0, 3, 1], 3).unwrap();
        let s = decompose(d.view()).unwrap();
        for j in 0..3 {
            approx::assert_relative_eq!(
                efa.forward[[3, j]],
                s.singular_values()[j].log10(),
                max_relative = 1e-12
            );
            approx::assert_relative_eq!(
                efa.backward[[0, j]],
                s.singular_values()[j].log10(),
                max_relative = 1e-12
            );
        }
    }
}
