//! Initial estimates for the alternating least squares.
//!
//! - [`efa_concentrations`]: evolving factor analysis (Gampp, Maeder, Meyer, Zuberbühler,
//!   Talanta 32 (1985) 1133; Maeder, Anal. Chem. 59 (1987) 527) within each series along
//!   temperature. Species k (0-based, in order of appearance) is taken to be the (k+1)-th factor
//!   to rise in the forward analysis and, first in first out, the (n_species − k)-th to fall in
//!   the backward one; its profile is the smaller of the two singular-value curves,
//!   min(s_f,k(i), s_b,n−1−k(i)), in absorbance units. Where all species are present everywhere
//!   (an equilibrium shifting with temperature) the curves still differ in shape and give usable
//!   distinct starting profiles.
//! - [`purest_variables`]: the purest-variable idea of Windig & Guilment (Anal. Chem. 63 (1991)
//!   1425), written from the published description: the purity of wavelength j is
//!   p_j = σ_j / (μ_j + α·max μ) (σ, μ the standard deviation and mean over samples, α the
//!   noise offset); the first purest wavelength maximises p; each next one maximises p_j·w_j,
//!   where w_j is the determinant of the matrix of cross-products (about the origin) of the
//!   length-scaled columns d_ij / √(μ_j² + (σ_j + α·max μ)²) of the wavelengths already chosen and
//!   of j — large when j is independent of those chosen. The columns of D at the chosen
//!   wavelengths are the initial concentration profiles (up to scale).

use super::SoftError;
use crate::factor::{FactorError, evolving_factors};
use ndarray::{Array2, ArrayView2, Axis};
use ndarray_linalg::Determinant;

/// EFA initial concentrations, samples × `n_species`, from the series `groups` (row indices of D
/// in increasing temperature, one list per series).
pub(crate) fn efa_concentrations(
    d: ArrayView2<f64>,
    groups: &[Vec<usize>],
    n_species: usize,
) -> Result<Array2<f64>, SoftError> {
    let mut c = Array2::zeros((d.nrows(), n_species));
    for rows in groups {
        let sub = d.select(Axis(0), rows);
        let local: Vec<usize> = (0..rows.len()).collect();
        let efa = evolving_factors(sub.view(), &local, n_species)?;
        for (pos, &row) in rows.iter().enumerate() {
            for k in 0..n_species {
                let f = 10f64.powf(efa.forward[[pos, k]]);
                let b = 10f64.powf(efa.backward[[pos, n_species - 1 - k]]);
                c[[row, k]] = f.min(b);
            }
        }
    }
    Ok(c)
}

/// Indices of the `n` purest wavelengths of `d` with noise offset `alpha` (fraction of max μ).
pub(crate) fn purest_variables(d: ArrayView2<f64>, n: usize, alpha: f64) -> Result<Vec<usize>, SoftError> {
    let (ns, nw) = d.dim();
    let mu = d
        .mean_axis(Axis(0))
        .ok_or(SoftError::Factor(FactorError::EmptyMatrix { rows: ns, cols: nw }))?;
    let sd = d.std_axis(Axis(0), 0.0);
    let offset = alpha * mu.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let purity: Vec<f64> = (0..nw)
        .map(|j| {
            let den = mu[j] + offset;
            if den > 0.0 { sd[j] / den } else { 0.0 }
        })
        .collect();
    // length-scaled data
    let mut scaled = d.to_owned();
    for j in 0..nw {
        let len = (mu[j] * mu[j] + (sd[j] + offset).powi(2)).sqrt();
        let mut col = scaled.column_mut(j);
        if len > 0.0 {
            col /= len;
        } else {
            col.fill(0.0);
        }
    }
    let cross = scaled.t().dot(&scaled) / ns as f64; // wavelengths × wavelengths
    let mut chosen: Vec<usize> = Vec::with_capacity(n);
    for _ in 0..n {
        let mut best: Option<(usize, f64)> = None;
        for (j, &pj) in purity.iter().enumerate() {
            if chosen.contains(&j) {
                continue;
            }
            let mut idx = chosen.clone();
            idx.push(j);
            let sub = cross.select(Axis(0), &idx).select(Axis(1), &idx);
            let w = sub.det().map_err(|e| SoftError::Numerical {
                what: format!("purest-variable weight: {e}"),
            })?;
            let score = pj * w.max(0.0);
            if best.is_none_or(|(_, s)| score > s) {
                best = Some((j, score));
            }
        }
        match best {
            Some((j, _)) => chosen.push(j),
            None => break,
        }
    }
    Ok(chosen)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn purest_variables_find_the_selective_wavelengths() {
        // species 0 alone at wavelength 0, species 1 alone at wavelength 3, overlap at 1, 2
        let s = ndarray::array![[1.0, 0.0], [0.7, 0.5], [0.4, 0.9], [0.0, 1.2]];
        let c = ndarray::array![[1.0, 0.1], [0.8, 0.3], [0.5, 0.5], [0.3, 0.8], [0.1, 1.0]];
        let d = c.dot(&s.t());
        let mut p = purest_variables(d.view(), 2, 0.01).unwrap();
        p.sort_unstable();
        assert_eq!(p, vec![0, 3]);
    }
}
