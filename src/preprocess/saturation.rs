//! Saturation mask: exclude absorbances too high to be photometrically trustworthy.

use super::PreprocessError;
use crate::data::{ProcessingStep, SpectraSet};
use serde::{Deserialize, Serialize};
use std::fmt;

/// Default absorbance limit above which points are masked.
///
/// European Pharmacopoeia 2.2.25 (absorption spectrophotometry, ultraviolet and visible) advises
/// against measuring at absorbances above 2: little light reaches the detector, so stray light
/// and noise dominate and Beer–Lambert linearity fails.
pub const DEFAULT_SATURATION_LIMIT: f64 = 2.0;

/// A contiguous run of masked wavelengths in one sample.
///
/// # Examples
/// ```
/// use isosbestic::preprocess::MaskedRun;
/// let run = MaskedRun { sample: "X".into(), first_nm: 412.0, last_nm: 416.0, count: 3 };
/// assert_eq!(run.to_string(), "sample X: 3 points 412–416 nm");
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MaskedRun {
    /// Sample id.
    pub sample: String,
    /// First masked wavelength of the run, nm.
    pub first_nm: f64,
    /// Last masked wavelength of the run, nm.
    pub last_nm: f64,
    /// Number of points in the run.
    pub count: usize,
}

impl fmt::Display for MaskedRun {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let unit = if self.count == 1 { "point" } else { "points" };
        if self.count == 1 {
            write!(f, "sample {}: 1 {unit} at {} nm", self.sample, self.first_nm)
        } else {
            write!(
                f,
                "sample {}: {} {unit} {}–{} nm",
                self.sample, self.count, self.first_nm, self.last_nm
            )
        }
    }
}

/// What [`mask_saturation`] masked.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SaturationReport {
    /// The absorbance limit used.
    pub limit: f64,
    /// Runs of points above the limit, by sample (row order) then wavelength.
    pub masked: Vec<MaskedRun>,
}

impl SaturationReport {
    /// Total number of points above the limit.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{MaskedRun, SaturationReport};
    /// let r = SaturationReport { limit: 2.0, masked: vec![
    ///     MaskedRun { sample: "a".into(), first_nm: 400.0, last_nm: 402.0, count: 3 },
    ///     MaskedRun { sample: "b".into(), first_nm: 410.0, last_nm: 410.0, count: 1 },
    /// ] };
    /// assert_eq!(r.points(), 4);
    /// ```
    pub fn points(&self) -> usize {
        self.masked.iter().map(|r| r.count).sum()
    }
}

impl fmt::Display for SaturationReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{} points above A = {}", self.points(), self.limit)?;
        for run in &self.masked {
            write!(f, "\n  {run}")?;
        }
        Ok(())
    }
}

/// Masks every point with absorbance `A > limit` and records the step.
///
/// The new mask is the OR of the existing mask and the saturated points, so nothing already
/// excluded is re-admitted. The report lists, per sample, the contiguous runs of points above
/// the limit (whether or not they were masked before); the history records
/// [`ProcessingStep::SaturationMasked`] with the limit and the number of such points. Use
/// [`DEFAULT_SATURATION_LIMIT`] unless there is reason to trust higher absorbances.
///
/// # Errors
/// [`PreprocessError::InvalidSaturationLimit`] when `limit` is not positive and finite.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use isosbestic::preprocess::{mask_saturation, DEFAULT_SATURATION_LIMIT};
/// use ndarray::array;
/// let set = SpectraSet::new(array![410.0, 412.0, 414.0, 416.0, 418.0],
///     array![[1.2, 2.3, 2.8, 2.1, 1.9]],
///     vec![Sample::new("X", "s", 298.15, 1.0)], vec![])?;
/// let (out, report) = mask_saturation(&set, DEFAULT_SATURATION_LIMIT)?;
/// assert_eq!(out.masked_count(), 3);
/// assert_eq!(report.masked[0].to_string(), "sample X: 3 points 412–416 nm");
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn mask_saturation(
    set: &SpectraSet,
    limit: f64,
) -> Result<(SpectraSet, SaturationReport), PreprocessError> {
    check_limit(limit)?;
    let d = set.absorbance();
    let axis = set.wavelengths_nm();
    let above = d.mapv(|a| a > limit);
    let mut masked = Vec::new();
    for (i, sample) in set.samples().iter().enumerate() {
        let mut run: Option<(usize, usize)> = None;
        for j in 0..=axis.len() {
            let hit = j < axis.len() && above[[i, j]];
            run = match (run, hit) {
                (None, true) => Some((j, j)),
                (Some((a, _)), true) => Some((a, j)),
                (Some((a, b)), false) => {
                    masked.push(MaskedRun {
                        sample: sample.id.clone(),
                        first_nm: axis[a],
                        last_nm: axis[b],
                        count: b - a + 1,
                    });
                    None
                }
                (None, false) => None,
            };
        }
    }
    let points = above.iter().filter(|a| **a).count();
    let mut mask = set.mask().clone();
    mask.zip_mut_with(&above, |m, &a| *m |= a);
    let mut out = set.clone();
    out.set_mask(mask)?;
    out.push_history(ProcessingStep::SaturationMasked { limit, points });
    Ok((out, SaturationReport { limit, masked }))
}

/// A saturation limit must be positive and finite.
pub(crate) fn check_limit(limit: f64) -> Result<(), PreprocessError> {
    if limit.is_finite() && limit > 0.0 {
        Ok(())
    } else {
        Err(PreprocessError::InvalidSaturationLimit { limit })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Sample;
    use ndarray::array;

    fn set() -> SpectraSet {
        SpectraSet::new(
            array![400.0, 401.0, 402.0, 403.0, 404.0, 405.0],
            array![[2.5, 2.1, 1.0, 3.0, 1.0, 2.2], [0.1, 0.2, 2.0, 0.4, 0.5, 0.6]],
            vec![
                Sample::new("a", "s", 298.15, 1.0),
                Sample::new("b", "s", 308.15, 1.0),
            ],
            vec![],
        )
        .unwrap()
    }

    #[test]
    fn runs_are_split_at_unsaturated_points_and_close_at_the_axis_end() {
        let (out, r) = mask_saturation(&set(), 2.0).unwrap();
        let runs: Vec<String> = r.masked.iter().map(ToString::to_string).collect();
        assert_eq!(
            runs,
            [
                "sample a: 2 points 400–401 nm",
                "sample a: 1 point at 403 nm",
                "sample a: 1 point at 405 nm"
            ]
        );
        // exactly 2.0 (sample b, 402 nm) is not above the limit
        assert_eq!(out.masked_count(), 4);
        assert_eq!(r.points(), 4);
        assert_eq!(
            out.history(),
            &[ProcessingStep::SaturationMasked {
                limit: 2.0,
                points: 4
            }]
        );
    }

    #[test]
    fn the_existing_mask_is_kept() {
        let mut s = set();
        let mut m = ndarray::Array2::from_elem((2, 6), false);
        m[[1, 0]] = true;
        m[[0, 0]] = true; // also saturated
        s.set_mask(m).unwrap();
        let (out, r) = mask_saturation(&s, 2.0).unwrap();
        assert!(out.mask()[[1, 0]]);
        assert_eq!(out.masked_count(), 5);
        assert_eq!(r.points(), 4);
    }

    #[test]
    fn the_report_prints_one_line_per_run() {
        let (_, r) = mask_saturation(&set(), 2.4).unwrap();
        assert_eq!(
            r.to_string(),
            "2 points above A = 2.4\n  sample a: 1 point at 400 nm\n  sample a: 1 point at 403 nm"
        );
    }
}
