//! `inspect`: what a data set holds and how many species absorb, before any model is fitted.

use crate::Result;
use crate::data::{ProcessingStep, SampleRole, SpectraSet};
use crate::factor::{self, FactorParams, FactorSummary};
use crate::preprocess::{PreprocessParams, PreprocessSummary};
use serde::{Deserialize, Serialize};
use std::fmt;

/// Settings of an inspection: the preprocessing to apply first and the factor analysis.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct InspectParams {
    /// Preprocessing applied before the analysis (default: saturation mask at A = 2 only).
    pub preprocess: PreprocessParams,
    /// Factor analysis settings.
    pub factor: FactorParams,
}

/// One series in the summary.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SeriesSummary {
    /// Series label.
    pub label: String,
    /// Number of measurement samples.
    pub samples: usize,
    /// Lowest temperature, °C.
    pub min_temperature_c: f64,
    /// Highest temperature, °C.
    pub max_temperature_c: f64,
}

/// Everything `inspect` reports.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InspectReport {
    /// Number of samples read (measurements and blanks).
    pub samples: usize,
    /// Number of blank samples read.
    pub blanks: usize,
    /// Component names.
    pub components: Vec<String>,
    /// Per series.
    pub series: Vec<SeriesSummary>,
    /// Number of wavelengths after preprocessing.
    pub wavelengths: usize,
    /// First and last wavelength after preprocessing, nm.
    pub wavelength_range_nm: [f64; 2],
    /// Lowest and highest absorbance after preprocessing.
    pub absorbance_range: [f64; 2],
    /// What preprocessing did, including which points were masked as saturated.
    pub preprocessing: PreprocessSummary,
    /// Number of masked points.
    pub masked_points: usize,
    /// Singular values, noise estimate, rank estimate with reasoning, evolving factors.
    pub factor: FactorSummary,
    /// The processing history of the analysed set.
    pub history: Vec<ProcessingStep>,
}

/// Preprocesses a set and runs the factor analysis on it.
///
/// # Errors
/// Invalid settings, a preprocessing step that cannot be applied, or a factor-analysis failure.
///
/// # Examples
/// ```
/// use isosbestic::data::{load, DataFiles};
/// use isosbestic::report::inspect::{inspect, InspectParams};
/// let root = env!("CARGO_MANIFEST_DIR");
/// let set = load(&DataFiles::csv(format!("{root}/data/demo/spectra.csv"), format!("{root}/data/demo/samples.csv")))?;
/// let report = inspect(&set, &InspectParams::default())?;
/// assert_eq!(report.series.len(), 3);
/// // Three absorbing species plus the random per-spectrum offsets built into the demo data
/// // (data/README.md): an offset that varies from sample to sample is one more factor.
/// assert_eq!(report.factor.rank.chosen, 4);
/// # Ok::<(), isosbestic::Error>(())
/// ```
pub fn inspect(set: &SpectraSet, params: &InspectParams) -> Result<InspectReport> {
    let valid = params.preprocess.clone().check()?;
    let (processed, preprocessing) = valid.apply(set)?;
    params.factor.check()?;
    let factor = factor::analyse(&processed, &params.factor)?;
    let mut series = Vec::new();
    for label in set.series() {
        let temps: Vec<f64> = set
            .samples()
            .iter()
            .filter(|s| s.series == label && s.role == SampleRole::Measurement)
            .map(|s| s.temperature_c())
            .collect();
        if temps.is_empty() {
            continue;
        }
        series.push(SeriesSummary {
            label,
            samples: temps.len(),
            min_temperature_c: temps.iter().copied().fold(f64::INFINITY, f64::min),
            max_temperature_c: temps.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        });
    }
    let w = processed.wavelengths_nm();
    let a = processed.absorbance();
    Ok(InspectReport {
        samples: set.n_samples(),
        blanks: set
            .samples()
            .iter()
            .filter(|s| s.role == SampleRole::Blank)
            .count(),
        components: set.components().to_vec(),
        series,
        wavelengths: w.len(),
        wavelength_range_nm: [w[0], w[w.len() - 1]],
        absorbance_range: [
            a.iter().copied().fold(f64::INFINITY, f64::min),
            a.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        ],
        masked_points: processed.masked_count(),
        preprocessing,
        factor,
        history: processed.history().to_vec(),
    })
}

impl fmt::Display for InspectReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "samples      {} ({} blank{}), components: {}",
            self.samples,
            self.blanks,
            if self.blanks == 1 { "" } else { "s" },
            self.components.join(", ")
        )?;
        writeln!(f, "series       {}", self.series.len())?;
        for s in &self.series {
            writeln!(
                f,
                "  {:<16} {:>3} samples, {:.1} to {:.1} °C",
                s.label, s.samples, s.min_temperature_c, s.max_temperature_c
            )?;
        }
        writeln!(
            f,
            "wavelengths  {} points, {:.1} to {:.1} nm",
            self.wavelengths, self.wavelength_range_nm[0], self.wavelength_range_nm[1]
        )?;
        writeln!(
            f,
            "absorbance   {:.4} to {:.4}",
            self.absorbance_range[0], self.absorbance_range[1]
        )?;
        writeln!(f, "masked       {} points", self.masked_points)?;
        if let Some(sat) = &self.preprocessing.saturation {
            for line in sat.to_string().lines() {
                writeln!(f, "  {line}")?;
            }
        }
        writeln!(f)?;
        write!(f, "{}", self.factor)
    }
}

/// Names of the files [`write_inspect_outputs`] writes.
pub const INSPECT_OUTPUTS: [&str; 4] = [
    "inspect.json",
    "singular_values.csv",
    "evolving_factors.csv",
    "masked_points.csv",
];

/// Writes an inspection as JSON (with format version) and CSV tables into `dir`, atomically:
/// `singular_values.csv` (k, singular value, cumulative explained variance, IND(k), F-test),
/// `evolving_factors.csv` (window in temperature order, sample row, forward and backward
/// log₁₀ singular values) and `masked_points.csv` (sample, first and last masked wavelength,
/// count).
///
/// # Errors
/// [`crate::Error::WouldOverwrite`] for existing files unless `force`; [`crate::Error::Output`].
pub fn write_inspect_outputs(
    dir: &std::path::Path,
    report: &InspectReport,
    force: bool,
) -> Result<Vec<std::path::PathBuf>> {
    use crate::report::tables::{Table, format_float, write_json};
    std::fs::create_dir_all(dir).map_err(|source| crate::Error::Output {
        path: dir.to_path_buf(),
        source,
    })?;
    let targets: Vec<std::path::PathBuf> = INSPECT_OUTPUTS.iter().map(|n| dir.join(n)).collect();
    crate::report::fit::guard_outputs(&targets, &[], force)?;
    write_json(&targets[0], "inspect", report)?;
    let f = &report.factor;
    let mut sv = Table::new([
        "k",
        "singular_value",
        "cumulative_variance",
        "indicator",
        "f",
        "p_value",
    ]);
    for (k, s) in f.singular_values.iter().enumerate() {
        let ind = f.rank.ind.get(k).map_or(String::new(), |v| format_float(*v));
        let ft = f.rank.f_test.iter().find(|r| r.k == k + 1);
        sv.push_row([
            (k + 1).to_string(),
            format_float(*s),
            f.explained_variance
                .get(k)
                .map_or(String::new(), |v| format_float(*v)),
            ind,
            ft.map_or(String::new(), |r| format_float(r.f)),
            ft.map_or(String::new(), |r| format_float(r.p_value)),
        ]);
    }
    sv.write_csv(&targets[1])?;
    let mut efa = Table::new(["window", "sample_row"]);
    if let Some(e) = &f.efa {
        let n = e.forward.ncols();
        efa = Table::new(
            ["window".to_string(), "sample_row".into()]
                .into_iter()
                .chain((1..=n).map(|k| format!("forward_log10_s{k}")))
                .chain((1..=n).map(|k| format!("backward_log10_s{k}"))),
        );
        for (w, &row) in e.order.iter().enumerate() {
            efa.push_row(
                [(w + 1).to_string(), row.to_string()]
                    .into_iter()
                    .chain(e.forward.row(w).iter().map(|v| format_float(*v)))
                    .chain(e.backward.row(w).iter().map(|v| format_float(*v))),
            );
        }
    }
    efa.write_csv(&targets[2])?;
    let mut masked = Table::new(["sample", "first_nm", "last_nm", "count"]);
    if let Some(sat) = &report.preprocessing.saturation {
        for run in &sat.masked {
            masked.push_row([
                run.sample.clone(),
                format_float(run.first_nm),
                format_float(run.last_nm),
                run.count.to_string(),
            ]);
        }
    }
    masked.write_csv(&targets[3])?;
    Ok(targets)
}
