//! Thin singular value decomposition of the data matrix D and the quantities read off it.

use super::FactorError;
use crate::data::{SampleRole, SpectraSet};
use ndarray::{Array1, Array2, ArrayView2, Axis};
use ndarray_linalg::{JobSvd, SVDDC};
use serde::Serialize;

/// The thin SVD D = U·diag(s)·Vᵀ of a data matrix D (samples × wavelengths).
///
/// With p = min(samples, wavelengths): `singular_values` s (length p, non-negative, descending),
/// `u` U (samples × p, orthonormal columns: the abstract concentration profiles), `vt` Vᵀ
/// (p × wavelengths, orthonormal rows: the abstract spectra). The eigenvalues of DᵀD used by
/// Malinowski's factor analysis are λⱼ = sⱼ². D is not mean-centred: Beer–Lambert data are
/// linear in the concentrations, so every absorbing species is one factor of the raw D.
///
/// # Examples
/// ```
/// use isosbestic::factor::decompose;
/// use ndarray::array;
/// // rank 1: every row is a multiple of [1, 2, 2], whose norm is 3
/// let d = array![[1.0, 2.0, 2.0], [2.0, 4.0, 4.0]];
/// let dec = decompose(d.view())?;
/// approx::assert_relative_eq!(dec.singular_values()[0], 3.0 * 5f64.sqrt(), max_relative = 1e-12);
/// approx::assert_abs_diff_eq!(dec.singular_values()[1], 0.0, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(dec.reconstruct(1), d, epsilon = 1e-12);
/// # Ok::<(), isosbestic::factor::FactorError>(())
/// ```
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Decomposition {
    singular_values: Array1<f64>,
    u: Array2<f64>,
    vt: Array2<f64>,
}

impl Decomposition {
    /// Singular values s, descending, non-negative (length min(rows, columns)).
    pub fn singular_values(&self) -> &Array1<f64> {
        &self.singular_values
    }

    /// Left singular vectors U (rows × p).
    pub fn u(&self) -> &Array2<f64> {
        &self.u
    }

    /// Right singular vectors, transposed: Vᵀ (p × columns).
    pub fn vt(&self) -> &Array2<f64> {
        &self.vt
    }

    /// Number of rows of D (samples).
    pub fn n_rows(&self) -> usize {
        self.u.nrows()
    }

    /// Number of columns of D (wavelengths).
    pub fn n_cols(&self) -> usize {
        self.vt.ncols()
    }

    /// Eigenvalues λⱼ = sⱼ² of DᵀD (equivalently DDᵀ), descending.
    pub fn eigenvalues(&self) -> Array1<f64> {
        self.singular_values.mapv(|s| s * s)
    }

    /// The rank-`k` approximation U₍ₖ₎·diag(s₍ₖ₎)·Vᵀ₍ₖ₎ (all of D when `k` ≥ p).
    pub fn reconstruct(&self, k: usize) -> Array2<f64> {
        let k = k.min(self.singular_values.len());
        let us = &self.u.slice(ndarray::s![.., ..k]) * &self.singular_values.slice(ndarray::s![..k]);
        us.dot(&self.vt.slice(ndarray::s![..k, ..]))
    }

    /// The numerical zero level of the singular values, s₁·ε·max(r, c) with ε the machine
    /// epsilon: values at or below it cannot be told from zero in double precision. This is the
    /// default tolerance of `numpy.linalg.matrix_rank` (after Press et al., Numerical Recipes,
    /// 2nd ed., §2.6 — from memory).
    pub fn zero_level(&self) -> f64 {
        let s1 = self.singular_values.first().copied().unwrap_or(0.0);
        s1 * f64::EPSILON * self.n_rows().max(self.n_cols()) as f64
    }

    /// Numerical rank: the number of singular values above [`Decomposition::zero_level`]. This is
    /// the rank of D as stored, noise included — the chemical rank is [`crate::factor::estimate_rank`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::factor::decompose;
    /// use ndarray::array;
    /// let dec = decompose(array![[1.0, 2.0, 3.0], [2.0, 4.0, 6.0], [1.0, 0.0, 1.0]].view())?;
    /// assert_eq!(dec.numerical_rank(), 2);
    /// # Ok::<(), isosbestic::factor::FactorError>(())
    /// ```
    pub fn numerical_rank(&self) -> usize {
        let tol = self.zero_level();
        self.singular_values.iter().filter(|&&s| s > tol).count()
    }

    /// Cumulative fraction of Σλ explained by the first 1, 2, …, p factors (the last is 1).
    /// All zeros for a zero matrix.
    pub fn explained_variance(&self) -> Vec<f64> {
        let lambda = self.eigenvalues();
        let total: f64 = lambda.sum();
        let mut acc = 0.0;
        lambda
            .iter()
            .map(|l| {
                acc += l;
                if total > 0.0 { acc / total } else { 0.0 }
            })
            .collect()
    }
}

/// Thin SVD of `d` (samples × wavelengths), by LAPACK's divide-and-conquer `dgesdd` (OpenBLAS).
///
/// # Errors
/// [`FactorError::EmptyMatrix`] when `d` has no rows or no columns;
/// [`FactorError::NonFinite`] naming the first NaN/∞ entry (row, column);
/// [`FactorError::Lapack`] when LAPACK reports a failure (e.g. no convergence).
///
/// # Examples
/// ```
/// use isosbestic::factor::{decompose, FactorError};
/// use ndarray::array;
/// let dec = decompose(array![[3.0, 0.0], [0.0, -4.0], [0.0, 0.0]].view())?;
/// approx::assert_abs_diff_eq!(dec.singular_values(), &array![4.0, 3.0], epsilon = 1e-12);
/// let bad = decompose(array![[1.0, f64::NAN]].view());
/// assert!(matches!(bad, Err(FactorError::NonFinite { row: 0, column: 1, .. })));
/// # Ok::<(), FactorError>(())
/// ```
pub fn decompose(d: ArrayView2<f64>) -> Result<Decomposition, FactorError> {
    let (rows, cols) = d.dim();
    if rows == 0 || cols == 0 {
        return Err(FactorError::EmptyMatrix { rows, cols });
    }
    if let Some(((row, column), &value)) = d.indexed_iter().find(|(_, v)| !v.is_finite()) {
        return Err(FactorError::NonFinite { row, column, value });
    }
    // LAPACK wants a standard layout; `to_owned` of a view gives one.
    let (u, s, vt) = d
        .to_owned()
        .svddc(JobSvd::Some)
        .map_err(|e| FactorError::Lapack {
            message: e.to_string(),
        })?;
    let (Some(u), Some(vt)) = (u, vt) else {
        return Err(FactorError::Lapack {
            message: "dgesdd returned no singular vectors".to_string(),
        });
    };
    Ok(Decomposition {
        singular_values: s,
        u,
        vt,
    })
}

/// Singular values only (no vectors), descending; used for the many small windows of
/// evolving factor analysis. Assumes finite, non-empty input.
pub(crate) fn singular_values_only(m: ArrayView2<f64>) -> Result<Array1<f64>, FactorError> {
    let (_, s, _) = m
        .to_owned()
        .svddc(JobSvd::None)
        .map_err(|e| FactorError::Lapack {
            message: e.to_string(),
        })?;
    Ok(s)
}

/// The SVD of the usable part of a spectra set, with the rows and columns it was taken from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SetDecomposition {
    /// The thin SVD of the selected submatrix.
    pub decomposition: Decomposition,
    /// Row indices of D (samples) used, in order: the measurement samples.
    pub sample_indices: Vec<usize>,
    /// Column indices of D (wavelengths) used, in order: the unmasked wavelengths.
    pub wavelength_indices: Vec<usize>,
}

/// Thin SVD of a spectra set's absorbance matrix, restricted to what factor analysis may use.
///
/// Rows: the measurement samples only (blanks, [`SampleRole::Blank`], are left out — they hold
/// no species of interest and would add a spurious factor if not yet subtracted). Columns: the
/// wavelengths where no sample is masked ([`SpectraSet::unmasked_wavelength_indices`]), so that
/// a saturated point never enters the decomposition and the submatrix stays rectangular.
///
/// # Errors
/// [`FactorError::NoMeasurementSamples`] when every sample is a blank;
/// [`FactorError::NoUsableWavelengths`] when every wavelength has a masked point;
/// otherwise as [`decompose`].
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SampleRole, SpectraSet};
/// use isosbestic::factor::decompose_set;
/// use ndarray::array;
/// let mut set = SpectraSet::new(
///     array![400.0, 500.0, 600.0],
///     array![[0.0, 0.0, 0.0], [0.1, 0.2, 3.0], [0.2, 0.4, 0.5]],
///     vec![
///         Sample::new("blank", "s", 298.15, 1.0).with_role(SampleRole::Blank),
///         Sample::new("a", "s", 298.15, 1.0),
///         Sample::new("b", "s", 308.15, 1.0),
///     ],
///     vec![],
/// )?;
/// let mut mask = ndarray::Array2::from_elem((3, 3), false);
/// mask[[1, 2]] = true; // saturated point: 600 nm is left out
/// set.set_mask(mask)?;
/// let sd = decompose_set(&set)?;
/// assert_eq!(sd.sample_indices, vec![1, 2]);
/// assert_eq!(sd.wavelength_indices, vec![0, 1]);
/// // the remaining 2×2 block has rank 1
/// approx::assert_abs_diff_eq!(sd.decomposition.singular_values()[1], 0.0, epsilon = 1e-12);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn decompose_set(set: &SpectraSet) -> Result<SetDecomposition, FactorError> {
    let (sample_indices, wavelength_indices) = usable_indices(set)?;
    let sub = set
        .absorbance()
        .select(Axis(0), &sample_indices)
        .select(Axis(1), &wavelength_indices);
    let decomposition = decompose(sub.view())?;
    Ok(SetDecomposition {
        decomposition,
        sample_indices,
        wavelength_indices,
    })
}

pub(crate) fn usable_indices(set: &SpectraSet) -> Result<(Vec<usize>, Vec<usize>), FactorError> {
    let samples: Vec<usize> = set
        .samples()
        .iter()
        .enumerate()
        .filter(|(_, s)| s.role == SampleRole::Measurement)
        .map(|(i, _)| i)
        .collect();
    if samples.is_empty() {
        return Err(FactorError::NoMeasurementSamples);
    }
    let wavelengths = set.unmasked_wavelength_indices();
    if wavelengths.is_empty() {
        return Err(FactorError::NoUsableWavelengths);
    }
    Ok((samples, wavelengths))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;
    use ndarray::array;

    #[test]
    fn an_empty_matrix_is_an_error_not_a_panic() {
        let d = Array2::<f64>::zeros((0, 3));
        assert_eq!(
            decompose(d.view()),
            Err(FactorError::EmptyMatrix { rows: 0, cols: 3 })
        );
    }

    #[test]
    fn an_infinite_entry_is_named_by_row_and_column() {
        let d = array![[1.0, 2.0], [3.0, f64::INFINITY]];
        let e = decompose(d.view()).unwrap_err();
        assert!(matches!(e, FactorError::NonFinite { row: 1, column: 1, value } if value.is_infinite()));
        assert!(e.to_string().contains("row 1"), "{e}");
    }

    #[test]
    fn a_wide_and_a_tall_matrix_give_thin_factors() {
        let d = array![[1.0, 2.0, 3.0, 4.0], [0.5, -1.0, 2.0, 0.0]];
        let dec = decompose(d.view()).unwrap();
        assert_eq!(dec.u().dim(), (2, 2));
        assert_eq!(dec.vt().dim(), (2, 4));
        assert_abs_diff_eq!(dec.reconstruct(2), d, epsilon = 1e-12);
        let t = decompose(d.t()).unwrap();
        assert_eq!(t.u().dim(), (4, 2));
        assert_abs_diff_eq!(t.singular_values(), dec.singular_values(), epsilon = 1e-12);
    }

    #[test]
    fn explained_variance_is_cumulative_and_ends_at_one() {
        let dec = decompose(array![[3.0, 0.0], [0.0, 4.0]].view()).unwrap();
        let ev = dec.explained_variance();
        assert_abs_diff_eq!(ev[0], 16.0 / 25.0, epsilon = 1e-12);
        assert_abs_diff_eq!(ev[1], 1.0, epsilon = 1e-12);
    }
}
