//! Putting spectra read from JCAMP-DX files together with the sample conditions into a
//! [`SpectraSet`], on one wavelength grid.

use super::{JcampError, JcampSpectrum};
use crate::data::{Interpolation, ProcessingStep, Sample, SpectraSet};
use crate::preprocess::interpolate;
use ndarray::{Array1, Array2};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Relative tolerance under which two wavelength grids count as the same.
const SAME_GRID_RTOL: f64 = 1e-9;

/// The sample id for a block of a JCAMP-DX file.
///
/// Rule: a file holding one spectrum block names its sample by the file stem (`T25.jdx` →
/// `T25`); in a file holding several blocks (a LINK file) each block is named by its trimmed
/// `##TITLE=`, or, when the title is empty, by the file stem followed by `-` and the 1-based
/// block number.
///
/// # Examples
/// ```
/// use isosbestic::data::jcamp::{parse_jcamp, sample_id_for};
/// use std::path::Path;
/// let s = parse_jcamp("##TITLE= run 7 \n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\
///     \n##XYPOINTS=(XY..XY)\n400,0.5\n##END=\n", None)?;
/// assert_eq!(sample_id_for(Path::new("data/T25.jdx"), &s[0], 0, 1), "T25");
/// assert_eq!(sample_id_for(Path::new("data/all.jdx"), &s[0], 0, 3), "run 7");
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn sample_id_for(path: &Path, block: &JcampSpectrum, block_index: usize, n_blocks: usize) -> String {
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    if n_blocks <= 1 {
        return stem;
    }
    let title = block.title.trim();
    if title.is_empty() {
        format!("{stem}-{}", block_index + 1)
    } else {
        title.to_string()
    }
}

fn same_grid(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len()
        && a.iter()
            .zip(b)
            .all(|(x, y)| (x - y).abs() <= SAME_GRID_RTOL * x.abs().max(y.abs()))
}

/// Median spacing of an increasing axis (None with fewer than two points).
fn median_spacing(x: &[f64]) -> Option<f64> {
    let mut d: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
    if d.is_empty() {
        return None;
    }
    d.sort_by(f64::total_cmp);
    let m = d.len() / 2;
    Some(if d.len() % 2 == 1 {
        d[m]
    } else {
        0.5 * (d[m - 1] + d[m])
    })
}

/// Builds a [`SpectraSet`] from spectra keyed by sample id and the samples' conditions.
///
/// Rules:
/// - every spectrum's id must be a sample id and every sample must have exactly one spectrum;
/// - the rows of D follow the order of `samples`;
/// - if all spectra share one grid (every wavelength within 1e-9 relative), it is used as is;
/// - otherwise all spectra are interpolated (with `method`, via
///   [`interpolate`](crate::preprocess::interpolate)) onto the common grid: from the latest
///   first wavelength to the earliest last wavelength, evenly spaced with the finest median
///   spacing found among the inputs (the last point is dropped if it does not fall on that
///   step); spectra already on that grid are copied, not interpolated.
///
/// History: [`ProcessingStep::Imported`] (format `jcamp-dx`, `sources`), one
/// [`ProcessingStep::UnitsConverted`] per recorded conversion of each spectrum, and
/// [`ProcessingStep::Resampled`] listing the samples that were actually interpolated.
///
/// # Errors
/// [`JcampError::UnknownSample`], [`JcampError::MissingSpectrum`],
/// [`JcampError::DuplicateSpectrum`], [`JcampError::NoOverlap`], [`JcampError::Resample`], or
/// [`JcampError::Set`] when the set fails validation (e.g. a bad path length).
///
/// # Examples
/// ```
/// use isosbestic::data::jcamp::{assemble_set, parse_jcamp};
/// use isosbestic::data::{Interpolation, Sample};
/// let block = |first: u32, last: u32, n: u32| format!(
///     "##TITLE=x\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##FIRSTX={first}\n##LASTX={last}\
///      \n##NPOINTS={n}\n##XYDATA=(X++(Y..Y))\n{first} {}\n##END=\n",
///     vec!["1"; n as usize].join(" "));
/// let a = parse_jcamp(&block(400, 500, 11), None)?.remove(0); // 10 nm steps
/// let b = parse_jcamp(&block(420, 520, 21), None)?.remove(0); //  5 nm steps
/// let set = assemble_set(
///     vec![("a".into(), a), ("b".into(), b)],
///     vec![Sample::new("b", "s", 298.15, 1.0), Sample::new("a", "s", 308.15, 1.0)],
///     vec![], Interpolation::Linear, vec![])?;
/// assert_eq!(set.samples()[0].id, "b"); // the order of the samples table
/// assert_eq!(set.n_wavelengths(), 17); // 420..=500 nm in 5 nm steps
/// # Ok::<(), isosbestic::data::jcamp::JcampError>(())
/// ```
pub fn assemble_set(
    spectra: Vec<(String, JcampSpectrum)>,
    samples: Vec<Sample>,
    components: Vec<String>,
    method: Interpolation,
    sources: Vec<PathBuf>,
) -> Result<SpectraSet, JcampError> {
    let mut by_id: HashMap<String, JcampSpectrum> = HashMap::new();
    for (id, spectrum) in spectra {
        if !samples.iter().any(|s| s.id == id) {
            return Err(JcampError::UnknownSample {
                id,
                location: spectrum.location.clone(),
            });
        }
        if let Some(first) = by_id.get(&id) {
            return Err(JcampError::DuplicateSpectrum {
                first: Box::new(first.location.clone()),
                location: spectrum.location.clone(),
                id,
            });
        }
        by_id.insert(id, spectrum);
    }
    let mut ordered: Vec<(&str, &JcampSpectrum)> = Vec::with_capacity(samples.len());
    for s in &samples {
        match by_id.get(&s.id) {
            Some(sp) => ordered.push((&s.id, sp)),
            None => {
                return Err(JcampError::MissingSpectrum {
                    id: s.id.clone(),
                    files: sources
                        .iter()
                        .map(|p| p.display().to_string())
                        .collect::<Vec<_>>()
                        .join(", "),
                });
            }
        }
    }
    let Some(&(_, reference)) = ordered.first() else {
        // no samples and no spectra: let the set report it
        return Ok(SpectraSet::new(
            Array1::zeros(0),
            Array2::zeros((0, 0)),
            samples,
            components,
        )?);
    };

    let mut history = vec![ProcessingStep::Imported {
        format: "jcamp-dx".into(),
        files: sources,
    }];
    for (id, sp) in &ordered {
        for c in &sp.conversions {
            history.push(ProcessingStep::UnitsConverted {
                sample: (*id).to_string(),
                detail: c.clone(),
            });
        }
    }

    let shared = ordered
        .iter()
        .all(|(_, sp)| same_grid(&sp.wavelengths_nm, &reference.wavelengths_nm));
    let (grid, rows) = if shared {
        let rows: Vec<Vec<f64>> = ordered.iter().map(|(_, sp)| sp.absorbance.clone()).collect();
        (reference.wavelengths_nm.clone(), rows)
    } else {
        let grid = common_grid(&ordered)?;
        let mut rows = Vec::with_capacity(ordered.len());
        let mut resampled = Vec::new();
        for (id, sp) in &ordered {
            if same_grid(&sp.wavelengths_nm, &grid) {
                rows.push(sp.absorbance.clone());
            } else {
                let v = interpolate(&sp.wavelengths_nm, &sp.absorbance, &grid, method).map_err(|source| {
                    JcampError::Resample {
                        sample: (*id).to_string(),
                        location: sp.location.clone(),
                        source: Box::new(source),
                    }
                })?;
                rows.push(v);
                resampled.push((*id).to_string());
            }
        }
        history.push(ProcessingStep::Resampled {
            method,
            first_nm: grid[0],
            last_nm: grid[grid.len() - 1],
            points: grid.len(),
            samples: resampled,
            reason: "JCAMP-DX spectra on different wavelength grids: common grid over their \
                     overlap at the finest median spacing"
                .into(),
        });
        (grid, rows)
    };

    let n_wl = grid.len();
    let mut d = Array2::zeros((rows.len(), n_wl));
    for (i, row) in rows.iter().enumerate() {
        if row.len() != n_wl {
            return Err(JcampError::Set(crate::data::SpectraSetError::Shape {
                what: "absorbance values of one spectrum",
                expected: n_wl,
                found: row.len(),
            }));
        }
        d.row_mut(i).assign(&Array1::from(row.clone()));
    }
    let mut set = SpectraSet::new(Array1::from(grid), d, samples, components)?;
    for step in history {
        set.push_history(step);
    }
    Ok(set)
}

/// The overlap of all spectra at the finest median spacing.
fn common_grid(ordered: &[(&str, &JcampSpectrum)]) -> Result<Vec<f64>, JcampError> {
    let mut start = (f64::NEG_INFINITY, "");
    let mut end = (f64::INFINITY, "");
    let mut step = f64::INFINITY;
    for (id, sp) in ordered {
        let (Some(&first), Some(&last)) = (sp.wavelengths_nm.first(), sp.wavelengths_nm.last()) else {
            return Err(JcampError::EmptyData {
                detail: format!("spectrum for sample '{id}' has no points"),
                location: sp.location.clone(),
            });
        };
        if first > start.0 {
            start = (first, id);
        }
        if last < end.0 {
            end = (last, id);
        }
        if let Some(h) = median_spacing(&sp.wavelengths_nm) {
            step = step.min(h);
        }
    }
    let no_overlap = || JcampError::NoOverlap {
        start_nm: start.0,
        start_sample: start.1.to_string(),
        end_nm: end.0,
        end_sample: end.1.to_string(),
    };
    if !(start.0 < end.0 && step.is_finite() && step > 0.0) {
        return Err(no_overlap());
    }
    crate::preprocess::even_grid(start.0, end.0, step).map_err(|_| no_overlap())
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn median_spacing_of_uneven_axis() {
        assert_abs_diff_eq!(median_spacing(&[0.0, 1.0, 3.0, 4.0]).unwrap(), 1.0);
        assert_abs_diff_eq!(median_spacing(&[0.0, 1.0, 3.0, 6.0, 7.0]).unwrap(), 1.5);
        assert!(median_spacing(&[1.0]).is_none());
    }

    #[test]
    fn grids_equal_within_tolerance() {
        assert!(same_grid(&[400.0, 500.0], &[400.0 * (1.0 + 1e-12), 500.0]));
        assert!(!same_grid(&[400.0, 500.0], &[400.001, 500.0]));
        assert!(!same_grid(&[400.0], &[400.0, 500.0]));
    }
}
