//! Interpolation of spectra onto a new wavelength grid.
//!
//! Two methods ([`Interpolation`]): piecewise linear, and the monotone piecewise cubic Hermite
//! interpolant of Fritsch & Carlson (SIAM J. Numer. Anal. 17 (1980) 238), which is C¹, exact on
//! straight lines and never overshoots between two data points (no spurious negative absorbance
//! next to a sharp band). Neither method extrapolates: every grid point must lie inside the data.

use super::PreprocessError;
pub use crate::data::Interpolation;
use crate::data::{ProcessingStep, SpectraSet};
use ndarray::{Array1, Array2};

/// Interpolates `(x, y)` (x strictly increasing) at the points `grid`.
///
/// # Errors
/// [`PreprocessError::OutsideRange`] when a grid point lies outside `[x₀, x_last]`;
/// [`PreprocessError::TooFewPoints`] with fewer than two data points.
///
/// # Examples
/// ```
/// use isosbestic::preprocess::{interpolate, Interpolation};
/// let x = [400.0, 410.0, 420.0];
/// let y = [0.0, 1.0, 2.0]; // a straight line: both methods are exact
/// for m in [Interpolation::Linear, Interpolation::MonotoneCubic] {
///     let v = interpolate(&x, &y, &[405.0, 417.5], m)?;
///     approx::assert_abs_diff_eq!(v[0], 0.5, epsilon = 1e-12);
///     approx::assert_abs_diff_eq!(v[1], 1.75, epsilon = 1e-12);
/// }
/// # Ok::<(), isosbestic::preprocess::PreprocessError>(())
/// ```
pub fn interpolate(
    x: &[f64],
    y: &[f64],
    grid: &[f64],
    method: Interpolation,
) -> Result<Vec<f64>, PreprocessError> {
    let n = x.len();
    if n < 2 || y.len() != n {
        return Err(PreprocessError::TooFewPoints {
            points: n.min(y.len()),
        });
    }
    // Tolerance for grid ends that equal the data ends up to rounding (e.g. after unit conversion).
    let span = x[n - 1] - x[0];
    let tol = 1e-9 * span.abs().max(1.0);
    let slopes = match method {
        Interpolation::Linear => None,
        Interpolation::MonotoneCubic => Some(fritsch_carlson_slopes(x, y)),
    };
    grid.iter()
        .map(|&g| {
            if !(g >= x[0] - tol && g <= x[n - 1] + tol) {
                return Err(PreprocessError::OutsideRange {
                    wavelength_nm: g,
                    first_nm: x[0],
                    last_nm: x[n - 1],
                });
            }
            let g = g.clamp(x[0], x[n - 1]);
            // index of the interval [x[k], x[k+1]] holding g
            let k = match x.partition_point(|&xi| xi <= g) {
                0 => 0,
                p if p >= n => n - 2,
                p => p - 1,
            };
            let h = x[k + 1] - x[k];
            let t = (g - x[k]) / h;
            Ok(match &slopes {
                None => y[k] + t * (y[k + 1] - y[k]),
                Some(m) => {
                    let t2 = t * t;
                    let t3 = t2 * t;
                    let h00 = 2.0 * t3 - 3.0 * t2 + 1.0;
                    let h10 = t3 - 2.0 * t2 + t;
                    let h01 = -2.0 * t3 + 3.0 * t2;
                    let h11 = t3 - t2;
                    h00 * y[k] + h10 * h * m[k] + h01 * y[k + 1] + h11 * h * m[k + 1]
                }
            })
        })
        .collect()
}

/// Node slopes of the Fritsch–Carlson monotone cubic.
fn fritsch_carlson_slopes(x: &[f64], y: &[f64]) -> Vec<f64> {
    let n = x.len();
    let delta: Vec<f64> = (0..n - 1)
        .map(|k| (y[k + 1] - y[k]) / (x[k + 1] - x[k]))
        .collect();
    let mut m = vec![0.0; n];
    m[0] = delta[0];
    m[n - 1] = delta[n - 2];
    for k in 1..n - 1 {
        m[k] = if delta[k - 1] * delta[k] <= 0.0 {
            0.0
        } else {
            (delta[k - 1] + delta[k]) / 2.0
        };
    }
    for k in 0..n - 1 {
        if delta[k] == 0.0 {
            m[k] = 0.0;
            m[k + 1] = 0.0;
            continue;
        }
        let a = m[k] / delta[k];
        let b = m[k + 1] / delta[k];
        let s = a * a + b * b;
        if s > 9.0 {
            let tau = 3.0 / s.sqrt();
            m[k] = tau * a * delta[k];
            m[k + 1] = tau * b * delta[k];
        }
    }
    m
}

/// Resamples every spectrum of a set onto `grid_nm` and records the step.
///
/// The mask is not carried over (the points no longer correspond); apply the saturation mask
/// after resampling.
///
/// # Errors
/// [`PreprocessError::OutsideRange`] if the grid leaves the measured range;
/// [`PreprocessError::InvalidGrid`] if the grid is not strictly increasing.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::preprocess::{resample, Interpolation};
/// use ndarray::array;
/// let set = SpectraSet::new(array![400.0, 500.0], array![[0.0, 1.0]],
///     vec![Sample::new("a", "s", 298.15, 1.0)], vec![])?;
/// let out = resample(&set, &[400.0, 450.0, 500.0], Interpolation::Linear, "common grid")?;
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 1]], 0.5);
/// assert_eq!(out.history().len(), 1);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn resample(
    set: &SpectraSet,
    grid_nm: &[f64],
    method: Interpolation,
    reason: &str,
) -> Result<SpectraSet, PreprocessError> {
    check_grid(grid_nm)?;
    let x = set.wavelengths_nm().to_vec();
    let mut d = Array2::zeros((set.n_samples(), grid_nm.len()));
    for (i, row) in set.absorbance().rows().into_iter().enumerate() {
        let y = row.to_vec();
        let v = interpolate(&x, &y, grid_nm, method)?;
        d.row_mut(i).assign(&Array1::from(v));
    }
    let mut out = set.with_data(Array1::from(grid_nm.to_vec()), d)?;
    out.push_history(ProcessingStep::Resampled {
        method,
        first_nm: grid_nm[0],
        last_nm: grid_nm[grid_nm.len() - 1],
        points: grid_nm.len(),
        samples: set.samples().iter().map(|s| s.id.clone()).collect(),
        reason: reason.to_string(),
    });
    Ok(out)
}

/// An evenly spaced grid from `first_nm` to `last_nm` with step `step_nm` (last point included
/// when it falls on the grid within rounding).
///
/// # Errors
/// [`PreprocessError::InvalidGrid`] for a non-positive step or `last_nm <= first_nm`.
///
/// # Examples
/// ```
/// let g = isosbestic::preprocess::even_grid(400.0, 410.0, 2.5)?;
/// assert_eq!(g, vec![400.0, 402.5, 405.0, 407.5, 410.0]);
/// # Ok::<(), isosbestic::preprocess::PreprocessError>(())
/// ```
pub fn even_grid(first_nm: f64, last_nm: f64, step_nm: f64) -> Result<Vec<f64>, PreprocessError> {
    if !(step_nm.is_finite()
        && step_nm > 0.0
        && first_nm.is_finite()
        && last_nm.is_finite()
        && last_nm > first_nm)
    {
        return Err(PreprocessError::InvalidGrid {
            reason: format!("need first < last and a positive step (got {first_nm}, {last_nm}, {step_nm})"),
        });
    }
    let n = ((last_nm - first_nm) / step_nm + 1e-9).floor() as usize + 1;
    Ok((0..n).map(|k| first_nm + step_nm * k as f64).collect())
}

pub(crate) fn check_grid(grid_nm: &[f64]) -> Result<(), PreprocessError> {
    if grid_nm.len() < 2 {
        return Err(PreprocessError::InvalidGrid {
            reason: "a grid needs at least two points".into(),
        });
    }
    if let Some(w) = grid_nm
        .windows(2)
        .find(|w| !(w[1] > w[0]) || !w[0].is_finite() || !w[1].is_finite())
    {
        return Err(PreprocessError::InvalidGrid {
            reason: format!(
                "grid is not strictly increasing and finite at {} → {} nm",
                w[0], w[1]
            ),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;
    use proptest::prelude::*;

    #[test]
    fn linear_interpolation_is_exact_on_degree_one_polynomials() {
        // Exactness on polynomials: linear interpolation reproduces degree ≤ 1 exactly
        // (common practice, any numerical analysis text).
        let x: Vec<f64> = (0..11).map(|k| 300.0 + 7.3 * f64::from(k)).collect();
        let y: Vec<f64> = x.iter().map(|v| 0.3 - 0.002 * v).collect();
        let g: Vec<f64> = (0..50).map(|k| 300.0 + 1.43 * f64::from(k)).collect();
        let v = interpolate(&x, &y, &g, Interpolation::Linear).unwrap();
        for (gi, vi) in g.iter().zip(&v) {
            assert_abs_diff_eq!(*vi, 0.3 - 0.002 * gi, epsilon = 1e-12);
        }
    }

    #[test]
    fn monotone_cubic_does_not_overshoot_a_step() {
        let x = [0.0, 1.0, 2.0, 3.0, 4.0];
        let y = [0.0, 0.0, 1.0, 1.0, 1.0];
        let g: Vec<f64> = (0..=400).map(|k| f64::from(k) / 100.0).collect();
        let v = interpolate(&x, &y, &g, Interpolation::MonotoneCubic).unwrap();
        assert!(v.iter().all(|&t| (-1e-15..=1.0 + 1e-15).contains(&t)));
        assert!(v.windows(2).all(|w| w[1] >= w[0] - 1e-15));
    }

    #[test]
    fn a_grid_point_outside_the_data_is_an_error_naming_it() {
        let e = interpolate(&[1.0, 2.0], &[0.0, 1.0], &[2.5], Interpolation::Linear).unwrap_err();
        assert!(
            matches!(e, PreprocessError::OutsideRange { wavelength_nm, .. } if (wavelength_nm - 2.5).abs() < 1e-12)
        );
    }

    proptest! {
        #[test]
        fn both_methods_reproduce_the_data_at_the_nodes(ys in proptest::collection::vec(-2.0f64..2.0, 3..30)) {
            let x: Vec<f64> = (0..ys.len()).map(|k| 400.0 + 2.0 * k as f64).collect();
            for m in [Interpolation::Linear, Interpolation::MonotoneCubic] {
                let v = interpolate(&x, &ys, &x, m).unwrap();
                for (a, b) in v.iter().zip(&ys) {
                    prop_assert!((a - b).abs() < 1e-12);
                }
            }
        }

        #[test]
        fn monotone_cubic_stays_within_each_interval_s_data(ys in proptest::collection::vec(-2.0f64..2.0, 3..30)) {
            let x: Vec<f64> = (0..ys.len()).map(|k| k as f64).collect();
            let g: Vec<f64> = (0..(ys.len() - 1) * 10).map(|k| k as f64 / 10.0).collect();
            let v = interpolate(&x, &ys, &g, Interpolation::MonotoneCubic).unwrap();
            for (gi, vi) in g.iter().zip(&v) {
                let k = gi.floor() as usize;
                let (lo, hi) = if ys[k] < ys[k + 1] { (ys[k], ys[k + 1]) } else { (ys[k + 1], ys[k]) };
                prop_assert!(*vi >= lo - 1e-12 && *vi <= hi + 1e-12);
            }
        }
    }
}
