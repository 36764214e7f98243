//! Blank subtraction: remove the solvent/medium absorbance measured in blank samples.

use super::PreprocessError;
use crate::data::{ProcessingStep, SampleRole, SpectraSet};
use ndarray::{Array1, Array2};
use serde::{Deserialize, Serialize};
use std::fmt::Write as _;

/// Temperatures closer than this (K) count as equal when matching blanks by temperature.
const SAME_TEMPERATURE_K: f64 = 1e-9;

/// How each measurement is paired with the blank spectrum subtracted from it.
///
/// When several blanks qualify, their spectra are averaged point by point.
///
/// # Examples
/// ```
/// use isosbestic::preprocess::BlankMatching;
/// assert_eq!(BlankMatching::default(), BlankMatching::PerSeries);
/// let m: BlankMatching = serde_json::from_str("\"nearest_temperature\"")?;
/// assert_eq!(m, BlankMatching::NearestTemperature);
/// # Ok::<(), serde_json::Error>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum BlankMatching {
    /// The blank(s) of the measurement's own series (averaged when there are several); every
    /// series must have at least one blank.
    #[default]
    PerSeries,
    /// The blank closest in temperature, from any series; when a lower and a higher blank are
    /// equally close the lower one is used; blanks at the same temperature are averaged.
    NearestTemperature,
    /// The mean of all blanks.
    Global,
}

impl BlankMatching {
    /// A short description, as written in the processing history.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::BlankMatching;
    /// assert_eq!(BlankMatching::Global.describe(), "mean of all blanks");
    /// ```
    pub fn describe(self) -> &'static str {
        match self {
            Self::PerSeries => "per series (mean of the series' blanks)",
            Self::NearestTemperature => "nearest temperature (ties to the lower)",
            Self::Global => "mean of all blanks",
        }
    }
}

/// Which blanks were subtracted from one measurement.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BlankUse {
    /// Measurement sample id.
    pub sample: String,
    /// Ids of the blanks whose mean was subtracted.
    pub blanks: Vec<String>,
}

/// What [`subtract_blanks`] did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BlankReport {
    /// How blanks were matched.
    pub matching: BlankMatching,
    /// One entry per measurement, in output row order.
    pub used: Vec<BlankUse>,
    /// Ids of the blank samples removed from the set.
    pub removed: Vec<String>,
}

/// Subtracts blank spectra from the measurements and removes the blanks from the set.
///
/// Samples with [`SampleRole::Blank`] are blanks; for each measurement i the blanks chosen by
/// `matching` (set B(i)) are averaged and subtracted:
///
/// ```text
/// D'ᵢ(λ) = Dᵢ(λ) − (1/|B(i)|) Σ_{k ∈ B(i)} D_k(λ)
/// ```
///
/// Blanks are subtracted as measured (no path-length scaling: a blank is assumed to be measured
/// in the same cell as the samples it serves). The output holds only measurements, in their
/// original order; a measurement's mask is OR-ed with the masks of the blanks subtracted from
/// it. The step is recorded as [`ProcessingStep::BlankSubtracted`] naming the blanks used and
/// the pairing.
///
/// # Errors
/// - [`PreprocessError::NoBlanks`] when no sample is a blank;
/// - [`PreprocessError::NoMeasurements`] when every sample is a blank;
/// - [`PreprocessError::NoBlankInSeries`] (with [`BlankMatching::PerSeries`]) naming the series
///   without a blank and one of its samples.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SampleRole, SpectraSet};
/// use isosbestic::preprocess::{subtract_blanks, BlankMatching};
/// use ndarray::array;
/// let set = SpectraSet::new(
///     array![400.0, 500.0],
///     array![[0.50, 0.80], [0.10, 0.20], [0.55, 0.90]],
///     vec![
///         Sample::new("m25", "s", 298.15, 1.0),
///         Sample::new("blank", "s", 298.15, 1.0).with_role(SampleRole::Blank),
///         Sample::new("m50", "s", 323.15, 1.0),
///     ],
///     vec![],
/// )?;
/// let (out, report) = subtract_blanks(&set, BlankMatching::PerSeries)?;
/// assert_eq!(out.n_samples(), 2); // the blank is gone
/// approx::assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.40, epsilon = 1e-12);
/// approx::assert_abs_diff_eq!(out.absorbance()[[1, 1]], 0.70, epsilon = 1e-12);
/// assert_eq!(report.removed, vec!["blank".to_string()]);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn subtract_blanks(
    set: &SpectraSet,
    matching: BlankMatching,
) -> Result<(SpectraSet, BlankReport), PreprocessError> {
    let samples = set.samples();
    let (blank_rows, meas_rows): (Vec<usize>, Vec<usize>) =
        (0..samples.len()).partition(|&i| samples[i].role == SampleRole::Blank);
    if blank_rows.is_empty() {
        return Err(PreprocessError::NoBlanks {
            samples: samples.len(),
        });
    }
    if meas_rows.is_empty() {
        return Err(PreprocessError::NoMeasurements {
            blanks: blank_rows.len(),
        });
    }

    let d = set.absorbance();
    let mask = set.mask();
    let mut out_d = Array2::zeros((meas_rows.len(), set.n_wavelengths()));
    let mut out_mask = Array2::from_elem(out_d.raw_dim(), false);
    let mut used = Vec::with_capacity(meas_rows.len());
    for (r, &i) in meas_rows.iter().enumerate() {
        let chosen = choose_blanks(set, i, &blank_rows, matching)?;
        let mut mean = Array1::<f64>::zeros(set.n_wavelengths());
        for &k in &chosen {
            mean += &d.row(k);
        }
        mean /= chosen.len() as f64;
        out_d.row_mut(r).assign(&(&d.row(i) - &mean));
        let mut m = mask.row(i).to_owned();
        for &k in &chosen {
            m.zip_mut_with(&mask.row(k), |a, &b| *a |= b);
        }
        out_mask.row_mut(r).assign(&m);
        used.push(BlankUse {
            sample: samples[i].id.clone(),
            blanks: chosen.iter().map(|&k| samples[k].id.clone()).collect(),
        });
    }

    let mut out = SpectraSet::new(
        set.wavelengths_nm().clone(),
        out_d,
        meas_rows.iter().map(|&i| samples[i].clone()).collect(),
        set.components().to_vec(),
    )?;
    out.set_mask(out_mask)?;
    for step in set.history() {
        out.push_history(step.clone());
    }
    let blanks_used: Vec<String> = blank_rows
        .iter()
        .map(|&k| samples[k].id.clone())
        .filter(|id| used.iter().any(|u| u.blanks.contains(id)))
        .collect();
    out.push_history(ProcessingStep::BlankSubtracted {
        blanks: blanks_used,
        matching: describe_pairing(matching, &used),
    });
    let report = BlankReport {
        matching,
        used,
        removed: blank_rows.iter().map(|&k| samples[k].id.clone()).collect(),
    };
    Ok((out, report))
}

/// Rows of the blanks to average for measurement row `i`.
fn choose_blanks(
    set: &SpectraSet,
    i: usize,
    blank_rows: &[usize],
    matching: BlankMatching,
) -> Result<Vec<usize>, PreprocessError> {
    let samples = set.samples();
    let sample = &samples[i];
    match matching {
        BlankMatching::Global => Ok(blank_rows.to_vec()),
        BlankMatching::PerSeries => {
            let rows: Vec<usize> = blank_rows
                .iter()
                .copied()
                .filter(|&k| samples[k].series == sample.series)
                .collect();
            if rows.is_empty() {
                Err(PreprocessError::NoBlankInSeries {
                    series: sample.series.clone(),
                    sample: sample.id.clone(),
                })
            } else {
                Ok(rows)
            }
        }
        BlankMatching::NearestTemperature => {
            let t = sample.temperature_k;
            let distance = |k: usize| (samples[k].temperature_k - t).abs();
            let best = blank_rows
                .iter()
                .map(|&k| distance(k))
                .fold(f64::INFINITY, f64::min);
            // The lowest temperature among the equally close blanks (ties go to the lower).
            let t_pick = blank_rows
                .iter()
                .filter(|&&k| distance(k) <= best + SAME_TEMPERATURE_K)
                .map(|&k| samples[k].temperature_k)
                .fold(f64::INFINITY, f64::min);
            Ok(blank_rows
                .iter()
                .copied()
                .filter(|&k| (samples[k].temperature_k - t_pick).abs() <= SAME_TEMPERATURE_K)
                .collect())
        }
    }
}

/// The pairing in words, for the history: the rule followed by who got which blank(s).
fn describe_pairing(matching: BlankMatching, used: &[BlankUse]) -> String {
    let mut s = matching.describe().to_string();
    if matching == BlankMatching::Global {
        return s;
    }
    s.push_str(": ");
    let parts: Vec<String> = used
        .iter()
        .map(|u| {
            let mut p = String::new();
            let _ = write!(p, "{} ← {}", u.sample, u.blanks.join(" + "));
            p
        })
        .collect();
    s.push_str(&parts.join("; "));
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Sample;
    use approx::assert_abs_diff_eq;
    use ndarray::{Axis, array};

    fn mean_rows(d: &Array2<f64>, rows: &[usize]) -> Array1<f64> {
        d.select(Axis(0), rows).mean_axis(Axis(0)).unwrap()
    }

    fn blank(id: &str, series: &str, t: f64) -> Sample {
        Sample::new(id, series, t, 1.0).with_role(SampleRole::Blank)
    }

    /// Two series; series "lo" has two blanks at 300 K and 320 K, "hi" one at 340 K.
    fn set() -> SpectraSet {
        SpectraSet::new(
            array![400.0, 500.0],
            array![
                [1.0, 2.0],   // m1 lo 310 K
                [0.1, 0.2],   // b300 lo
                [0.3, 0.4],   // b320 lo
                [5.0, 6.0],   // m2 hi 335 K
                [0.7, 0.9],   // b340 hi
                [10.0, 20.0], // m3 hi 300 K
            ],
            vec![
                Sample::new("m1", "lo", 310.0, 1.0),
                blank("b300", "lo", 300.0),
                blank("b320", "lo", 320.0),
                Sample::new("m2", "hi", 335.0, 1.0),
                blank("b340", "hi", 340.0),
                Sample::new("m3", "hi", 300.0, 1.0),
            ],
            vec![],
        )
        .unwrap()
    }

    #[test]
    fn per_series_averages_the_series_blanks() {
        let (out, report) = subtract_blanks(&set(), BlankMatching::PerSeries).unwrap();
        let ids: Vec<&str> = out.samples().iter().map(|s| s.id.as_str()).collect();
        assert_eq!(ids, ["m1", "m2", "m3"]);
        // m1 − mean(b300, b320) = [1 − 0.2, 2 − 0.3], by hand
        assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.8, epsilon = 1e-12);
        assert_abs_diff_eq!(out.absorbance()[[0, 1]], 1.7, epsilon = 1e-12);
        // m3 − b340 = [10 − 0.7, 20 − 0.9]
        assert_abs_diff_eq!(out.absorbance()[[2, 0]], 9.3, epsilon = 1e-12);
        assert_abs_diff_eq!(out.absorbance()[[2, 1]], 19.1, epsilon = 1e-12);
        assert_eq!(report.used[0].blanks, ["b300", "b320"]);
        assert_eq!(report.removed, ["b300", "b320", "b340"]);
    }

    #[test]
    fn nearest_temperature_breaks_ties_towards_the_lower_blank() {
        let (out, report) = subtract_blanks(&set(), BlankMatching::NearestTemperature).unwrap();
        // m1 at 310 K is 10 K from both b300 and b320: the lower (b300) wins.
        assert_eq!(report.used[0].blanks, ["b300"]);
        assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.9, epsilon = 1e-12);
        // m2 at 335 K: b340 (5 K away); m3 at 300 K: b300, across series.
        assert_eq!(report.used[1].blanks, ["b340"]);
        assert_eq!(report.used[2].blanks, ["b300"]);
        assert_abs_diff_eq!(out.absorbance()[[2, 1]], 19.8, epsilon = 1e-12);
    }

    #[test]
    fn blanks_at_the_same_temperature_are_averaged() {
        let s = SpectraSet::new(
            array![400.0],
            array![[1.0], [0.2], [0.4]],
            vec![
                Sample::new("m", "s", 298.15, 1.0),
                blank("b1", "s", 300.0),
                blank("b2", "t", 300.0),
            ],
            vec![],
        )
        .unwrap();
        let (out, report) = subtract_blanks(&s, BlankMatching::NearestTemperature).unwrap();
        assert_eq!(report.used[0].blanks, ["b1", "b2"]);
        assert_abs_diff_eq!(out.absorbance()[[0, 0]], 0.7, epsilon = 1e-12);
    }

    #[test]
    fn global_uses_the_mean_of_all_blanks() {
        let s = set();
        let (out, _) = subtract_blanks(&s, BlankMatching::Global).unwrap();
        let mean = mean_rows(s.absorbance(), &[1, 2, 4]);
        // (0.1 + 0.3 + 0.7)/3 and (0.2 + 0.4 + 0.9)/3, by hand
        assert_abs_diff_eq!(mean[0], 1.1 / 3.0, epsilon = 1e-12);
        assert_abs_diff_eq!(mean[1], 0.5, epsilon = 1e-12);
        assert_abs_diff_eq!(out.absorbance()[[1, 0]], 5.0 - 1.1 / 3.0, epsilon = 1e-12);
    }

    #[test]
    fn the_history_names_blanks_and_pairing() {
        let (out, _) = subtract_blanks(&set(), BlankMatching::NearestTemperature).unwrap();
        match out.history().last() {
            Some(ProcessingStep::BlankSubtracted { blanks, matching }) => {
                // b320 is never the chosen one (tie with b300 goes to the lower).
                assert_eq!(blanks, &["b300", "b340"]);
                assert!(matching.contains("m1 ← b300"), "{matching}");
                assert!(matching.starts_with("nearest temperature"), "{matching}");
            }
            other => panic!("unexpected history {other:?}"),
        }
    }

    #[test]
    fn masks_of_used_blanks_carry_over() {
        let mut s = set();
        let mut mask = Array2::from_elem((6, 2), false);
        mask[[4, 1]] = true; // b340 at 500 nm
        mask[[0, 0]] = true; // m1 at 400 nm
        s.set_mask(mask).unwrap();
        let (out, _) = subtract_blanks(&s, BlankMatching::PerSeries).unwrap();
        assert_eq!(out.mask(), &array![[true, false], [false, true], [false, true]]);
    }
}
