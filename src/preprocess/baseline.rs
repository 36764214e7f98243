//! Baseline correction from non-absorbing wavelength windows: a constant offset or a straight
//! line in λ per sample, estimated where the species do not absorb and subtracted everywhere.

use super::PreprocessError;
use super::window::{check_window, data_range, indices_inside};
use crate::data::{ProcessingStep, SpectraSet};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

/// The shape of the baseline subtracted from each sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum BaselineModel {
    /// A constant: the mean absorbance in the window(s).
    Offset,
    /// A straight line in λ, fitted by least squares in the window(s).
    Linear,
}

/// One sample's fitted baseline: `A_base(λ) = offset + slope_per_nm · (λ − reference_nm)`.
///
/// `reference_nm` is the mean wavelength of the points used, so `offset` is the mean absorbance
/// of those points for both models (the least-squares line passes through the centroid).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SampleBaseline {
    /// Sample id.
    pub sample: String,
    /// Baseline absorbance at `reference_nm`.
    pub offset: f64,
    /// Slope, absorbance per nm (0 for [`BaselineModel::Offset`]).
    pub slope_per_nm: f64,
    /// Wavelength the offset refers to, nm.
    pub reference_nm: f64,
    /// Number of (unmasked) points the baseline was estimated from.
    pub points: usize,
}

impl SampleBaseline {
    /// The baseline absorbance at `wavelength_nm`.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::SampleBaseline;
    /// let b = SampleBaseline { sample: "a".into(), offset: 0.1, slope_per_nm: 1e-3,
    ///     reference_nm: 500.0, points: 20 };
    /// approx::assert_abs_diff_eq!(b.at(600.0), 0.2, epsilon = 1e-12);
    /// ```
    pub fn at(&self, wavelength_nm: f64) -> f64 {
        self.offset + self.slope_per_nm * (wavelength_nm - self.reference_nm)
    }
}

/// What a baseline correction did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BaselineReport {
    /// Constant or straight line.
    pub model: BaselineModel,
    /// The non-absorbing windows `(min_nm, max_nm)` used.
    pub windows: Vec<(f64, f64)>,
    /// One fitted baseline per sample, in row order.
    pub samples: Vec<SampleBaseline>,
}

/// Subtracts from each sample its mean absorbance in the non-absorbing window
/// `[min_nm, max_nm]`:
///
/// ```text
/// D'ᵢ(λ) = Dᵢ(λ) − mean_{λ_j ∈ window, unmasked} Dᵢ(λ_j)
/// ```
///
/// Masked points are not used for the estimate; the mask is kept. Recorded as
/// [`ProcessingStep::BaselineOffset`].
///
/// # Errors
/// - [`PreprocessError::InvalidWindow`] for non-finite bounds or `min_nm > max_nm`;
/// - [`PreprocessError::EmptyBaselineWindow`] when no wavelength of the data lies in the window
///   (names the window and the data range);
/// - [`PreprocessError::TooFewBaselinePoints`] when every point of a sample in the window is masked.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::preprocess::baseline_offset;
/// use ndarray::array;
/// let set = SpectraSet::new(array![400.0, 500.0, 700.0, 710.0], array![[0.9, 0.6, 0.11, 0.13]],
///     vec![Sample::new("a", "s", 298.15, 1.0)], vec![])?;
/// let (out, report) = baseline_offset(&set, 690.0, 720.0)?;
/// approx::assert_abs_diff_eq!(report.samples[0].offset, 0.12, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.78, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 3]], 0.01, epsilon = 1e-12);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn baseline_offset(
    set: &SpectraSet,
    min_nm: f64,
    max_nm: f64,
) -> Result<(SpectraSet, BaselineReport), PreprocessError> {
    let (mut out, report) = fit_and_subtract(set, &[(min_nm, max_nm)], BaselineModel::Offset)?;
    out.push_history(ProcessingStep::BaselineOffset { min_nm, max_nm });
    Ok((out, report))
}

/// Fits, per sample, a least-squares straight line in λ through the points inside the
/// non-absorbing `windows` and subtracts it over the whole axis:
///
/// ```text
/// slope = Σ (λ_j − λ̄)(A_j − Ā) / Σ (λ_j − λ̄)²,   A_base(λ) = Ā + slope · (λ − λ̄)
/// ```
///
/// with the sums over the unmasked points in the union of the windows (overlapping windows do
/// not count a point twice). Recorded as [`ProcessingStep::BaselineLinear`].
///
/// # Errors
/// - [`PreprocessError::NoBaselineWindows`] for an empty list;
/// - [`PreprocessError::InvalidWindow`] for non-finite bounds or `min_nm > max_nm`;
/// - [`PreprocessError::EmptyBaselineWindow`] when a window holds no wavelength of the data;
/// - [`PreprocessError::TooFewBaselinePoints`] when a sample has unmasked points at fewer than two
///   distinct wavelengths in the windows (names the sample and the windows).
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::preprocess::baseline_linear;
/// use ndarray::array;
/// // baseline 0.01 + 0.001·(λ − 400) plus a band of height 0.5 at 500 nm
/// let set = SpectraSet::new(array![400.0, 410.0, 500.0, 590.0, 600.0],
///     array![[0.01, 0.02, 0.61, 0.20, 0.21]],
///     vec![Sample::new("a", "s", 298.15, 1.0)], vec![])?;
/// let (out, report) = baseline_linear(&set, &[(395.0, 415.0), (585.0, 605.0)])?;
/// approx::assert_abs_diff_eq!(report.samples[0].slope_per_nm, 0.001, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 2]], 0.5, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 4]], 0.0, epsilon = 1e-12);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn baseline_linear(
    set: &SpectraSet,
    windows: &[(f64, f64)],
) -> Result<(SpectraSet, BaselineReport), PreprocessError> {
    if windows.is_empty() {
        return Err(PreprocessError::NoBaselineWindows);
    }
    let (mut out, report) = fit_and_subtract(set, windows, BaselineModel::Linear)?;
    out.push_history(ProcessingStep::BaselineLinear {
        windows: windows.to_vec(),
    });
    Ok((out, report))
}

/// Checks the windows, fits one baseline per sample and subtracts it (history not yet recorded).
fn fit_and_subtract(
    set: &SpectraSet,
    windows: &[(f64, f64)],
    model: BaselineModel,
) -> Result<(SpectraSet, BaselineReport), PreprocessError> {
    let axis = set.wavelengths_nm().to_vec();
    let mut columns = Vec::new();
    for &(min_nm, max_nm) in windows {
        check_window(min_nm, max_nm)?;
        let inside = indices_inside(&axis, min_nm, max_nm);
        if inside.is_empty() {
            let (first_nm, last_nm) = data_range(set);
            return Err(PreprocessError::EmptyBaselineWindow {
                min_nm,
                max_nm,
                first_nm,
                last_nm,
            });
        }
        columns.extend(inside);
    }
    columns.sort_unstable();
    columns.dedup();

    let needed = match model {
        BaselineModel::Offset => 1,
        BaselineModel::Linear => 2,
    };
    let d = set.absorbance();
    let mut corrected = Array2::zeros(d.raw_dim());
    let mut fitted = Vec::with_capacity(set.n_samples());
    for (i, sample) in set.samples().iter().enumerate() {
        let (x, y): (Vec<f64>, Vec<f64>) = columns
            .iter()
            .filter(|&&j| !set.mask()[[i, j]])
            .map(|&j| (axis[j], d[[i, j]]))
            .unzip();
        if x.len() < needed {
            return Err(PreprocessError::TooFewBaselinePoints {
                sample: sample.id.clone(),
                windows: windows.to_vec(),
                found: x.len(),
                needed,
            });
        }
        let n = x.len() as f64;
        let x_mean = x.iter().sum::<f64>() / n;
        let y_mean = y.iter().sum::<f64>() / n;
        let slope = match model {
            BaselineModel::Offset => 0.0,
            BaselineModel::Linear => {
                let sxy: f64 = x.iter().zip(&y).map(|(a, b)| (a - x_mean) * (b - y_mean)).sum();
                let sxx: f64 = x.iter().map(|a| (a - x_mean).powi(2)).sum();
                sxy / sxx
            }
        };
        let b = SampleBaseline {
            sample: sample.id.clone(),
            offset: y_mean,
            slope_per_nm: slope,
            reference_nm: x_mean,
            points: x.len(),
        };
        for (j, &l) in axis.iter().enumerate() {
            corrected[[i, j]] = d[[i, j]] - b.at(l);
        }
        fitted.push(b);
    }
    let out = set.with_data(set.wavelengths_nm().clone(), corrected)?;
    Ok((
        out,
        BaselineReport {
            model,
            windows: windows.to_vec(),
            samples: fitted,
        },
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Sample;
    use approx::assert_abs_diff_eq;
    use ndarray::array;

    fn set() -> SpectraSet {
        SpectraSet::new(
            array![300.0, 310.0, 320.0, 400.0, 500.0, 510.0],
            array![
                [0.10, 0.12, 0.14, 1.00, 0.50, 0.52],
                [0.0, 0.0, 0.0, 0.5, 0.0, 0.0]
            ],
            vec![
                Sample::new("a", "s", 298.15, 1.0),
                Sample::new("b", "s", 308.15, 1.0),
            ],
            vec![],
        )
        .unwrap()
    }

    #[test]
    fn offset_is_the_window_mean() {
        let (out, report) = baseline_offset(&set(), 300.0, 320.0).unwrap();
        // mean(0.10, 0.12, 0.14) = 0.12, by hand
        assert_abs_diff_eq!(report.samples[0].offset, 0.12, epsilon = 1e-12);
        assert_abs_diff_eq!(report.samples[0].reference_nm, 310.0, epsilon = 1e-12);
        assert_eq!(report.samples[0].points, 3);
        assert_abs_diff_eq!(out.absorbance()[[0, 3]], 0.88, epsilon = 1e-12);
        assert_abs_diff_eq!(out.absorbance()[[1, 3]], 0.5, epsilon = 1e-12);
        assert_eq!(
            out.history(),
            &[ProcessingStep::BaselineOffset {
                min_nm: 300.0,
                max_nm: 320.0
            }]
        );
    }

    #[test]
    fn linear_fit_through_two_windows_matches_hand_least_squares() {
        // Points (300, 0.10), (310, 0.12), (320, 0.14), (500, 0.50), (510, 0.52), all on
        // 0.002·λ − 0.5, by hand: x̄ = 388, ȳ = 0.276; Sxx = 88² + 78² + 68² + 112² + 122² = 45 880,
        // Sxy = Σ (x − x̄)(y − ȳ) = 91.76 ⇒ slope = 0.002.
        let (out, report) = baseline_linear(&set(), &[(300.0, 320.0), (500.0, 510.0)]).unwrap();
        let b = &report.samples[0];
        assert_abs_diff_eq!(b.slope_per_nm, 0.002, epsilon = 1e-12);
        assert_abs_diff_eq!(b.reference_nm, 388.0, epsilon = 1e-12);
        assert_abs_diff_eq!(b.offset, 0.276, epsilon = 1e-12);
        // at 400 nm the line is 0.3; 1.00 − 0.3 = 0.7
        assert_abs_diff_eq!(out.absorbance()[[0, 3]], 0.7, epsilon = 1e-12);
        for j in [0, 1, 2, 4, 5] {
            assert_abs_diff_eq!(out.absorbance()[[0, j]], 0.0, epsilon = 1e-12);
        }
    }

    #[test]
    fn a_least_squares_line_through_scattered_points() {
        // (300, 0), (310, 1), (320, 0): x̄ = 310, ȳ = 1/3, slope 0 (symmetric), by hand.
        let s = SpectraSet::new(
            array![300.0, 310.0, 320.0, 330.0],
            array![[0.0, 1.0, 0.0, 5.0]],
            vec![Sample::new("a", "s", 298.15, 1.0)],
            vec![],
        )
        .unwrap();
        let (out, r) = baseline_linear(&s, &[(300.0, 320.0)]).unwrap();
        assert_abs_diff_eq!(r.samples[0].slope_per_nm, 0.0, epsilon = 1e-12);
        assert_abs_diff_eq!(out.absorbance()[[0, 3]], 5.0 - 1.0 / 3.0, epsilon = 1e-12);
    }

    #[test]
    fn overlapping_windows_count_each_point_once() {
        let (_, r) = baseline_linear(&set(), &[(300.0, 320.0), (305.0, 320.0)]).unwrap();
        assert_eq!(r.samples[0].points, 3);
    }

    #[test]
    fn masked_points_are_left_out_of_the_estimate_and_stay_masked() {
        let mut s = set();
        let mut mask = Array2::from_elem((2, 6), false);
        mask[[0, 2]] = true;
        s.set_mask(mask.clone()).unwrap();
        let (out, r) = baseline_offset(&s, 300.0, 320.0).unwrap();
        // mean(0.10, 0.12) = 0.11
        assert_abs_diff_eq!(r.samples[0].offset, 0.11, epsilon = 1e-12);
        assert_eq!(r.samples[0].points, 2);
        assert_eq!(out.mask(), &mask);
    }
}
