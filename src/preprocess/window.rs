//! Wavelength window: keep only the part of the axis inside `[min_nm, max_nm]`.

use super::PreprocessError;
use crate::data::{ProcessingStep, SpectraSet};
use ndarray::Axis;

/// Keeps the wavelengths λ with `min_nm ≤ λ ≤ max_nm` (bounds included) and records the step.
///
/// The exclusion mask is kept for the kept columns. Windowing twice is the same as windowing once
/// with the intersection of the two windows.
///
/// # Errors
/// - [`PreprocessError::InvalidWindow`] when a bound is not finite or `min_nm > max_nm`;
/// - [`PreprocessError::WindowTooNarrow`] when fewer than two wavelengths fall inside the window
///   (the error names the window and the data range).
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::preprocess::window;
/// use ndarray::array;
/// let set = SpectraSet::new(array![400.0, 450.0, 500.0, 550.0], array![[0.1, 0.2, 0.3, 0.4]],
///     vec![Sample::new("a", "s", 298.15, 1.0)], vec![])?;
/// let out = window(&set, 420.0, 500.0)?;
/// assert_eq!(out.wavelengths_nm(), &array![450.0, 500.0]);
/// assert_eq!(out.absorbance(), &array![[0.2, 0.3]]);
/// assert_eq!(out.history().len(), 1);
/// assert!(window(&set, 460.0, 490.0).is_err()); // nothing inside
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn window(set: &SpectraSet, min_nm: f64, max_nm: f64) -> Result<SpectraSet, PreprocessError> {
    check_window(min_nm, max_nm)?;
    let axis = set.wavelengths_nm();
    let kept = indices_inside(&axis.to_vec(), min_nm, max_nm);
    if kept.len() < 2 {
        let (first_nm, last_nm) = data_range(set);
        return Err(PreprocessError::WindowTooNarrow {
            min_nm,
            max_nm,
            kept: kept.len(),
            first_nm,
            last_nm,
        });
    }
    let wavelengths = axis.select(Axis(0), &kept);
    let absorbance = set.absorbance().select(Axis(1), &kept);
    let mask = set.mask().select(Axis(1), &kept);
    let mut out = set.with_data(wavelengths, absorbance)?;
    out.set_mask(mask)?;
    out.push_history(ProcessingStep::Window { min_nm, max_nm });
    Ok(out)
}

/// A window is usable when both bounds are finite and `min_nm ≤ max_nm`.
pub(crate) fn check_window(min_nm: f64, max_nm: f64) -> Result<(), PreprocessError> {
    if min_nm.is_finite() && max_nm.is_finite() && min_nm <= max_nm {
        Ok(())
    } else {
        Err(PreprocessError::InvalidWindow { min_nm, max_nm })
    }
}

/// Indices of the axis values inside `[min_nm, max_nm]`.
pub(crate) fn indices_inside(axis: &[f64], min_nm: f64, max_nm: f64) -> Vec<usize> {
    axis.iter()
        .enumerate()
        .filter(|&(_, &l)| l >= min_nm && l <= max_nm)
        .map(|(j, _)| j)
        .collect()
}

/// First and last wavelength of a set (a set is never empty).
pub(crate) fn data_range(set: &SpectraSet) -> (f64, f64) {
    let axis = set.wavelengths_nm();
    (
        axis.first().copied().unwrap_or(f64::NAN),
        axis.last().copied().unwrap_or(f64::NAN),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Sample;
    use ndarray::array;

    fn set() -> SpectraSet {
        SpectraSet::new(
            array![400.0, 410.0, 420.0, 430.0, 440.0],
            array![[1.0, 2.0, 3.0, 4.0, 5.0], [6.0, 7.0, 8.0, 9.0, 10.0]],
            vec![
                Sample::new("a", "s", 298.15, 1.0),
                Sample::new("b", "s", 308.15, 1.0),
            ],
            vec![],
        )
        .unwrap()
    }

    #[test]
    fn bounds_are_included() {
        let out = window(&set(), 410.0, 430.0).unwrap();
        assert_eq!(out.wavelengths_nm(), &array![410.0, 420.0, 430.0]);
        assert_eq!(out.absorbance(), &array![[2.0, 3.0, 4.0], [7.0, 8.0, 9.0]]);
        assert_eq!(
            out.history(),
            &[ProcessingStep::Window {
                min_nm: 410.0,
                max_nm: 430.0
            }]
        );
    }

    #[test]
    fn the_mask_follows_the_kept_columns() {
        let mut s = set();
        s.set_mask(array![
            [false, true, false, false, true],
            [false, false, false, true, false]
        ])
        .unwrap();
        let out = window(&s, 405.0, 435.0).unwrap();
        assert_eq!(out.mask(), &array![[true, false, false], [false, false, true]]);
    }

    #[test]
    fn a_window_covering_everything_changes_nothing_but_the_history() {
        let s = set();
        let out = window(&s, 0.0, 1e4).unwrap();
        assert_eq!(out.absorbance(), s.absorbance());
        assert_eq!(out.wavelengths_nm(), s.wavelengths_nm());
    }
}
