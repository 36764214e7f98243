//! Many data sets in one run: find every data set under a root folder, fit each one (in
//! parallel, on a bounded number of threads), write one report per set and a summary table.
//!
//! ## Folder layout
//! A **data set** is a folder that holds either
//! - a run configuration [`RUN_CONFIG_FILE`] (`fit.toml`, the [`FitRunConfig`] format), in
//!   which every key is optional here: `data` defaults to the conventional files below, `model`
//!   to the model found as described next; relative paths inside it are taken relative to the
//!   data-set folder (not to the folder the command runs from); or
//! - the conventional files [`SPECTRA_FILE`] (`spectra.csv`) and [`SAMPLES_FILE`]
//!   (`samples.csv`). A folder holding only one of the two is still a data set: it fails, naming
//!   the missing file, instead of being passed over in silence.
//!
//! The equilibrium model of a set without one named in its `fit.toml` is the nearest
//! [`MODEL_FILE`] (`model.toml`): first in the set's own folder, then in each parent folder up
//! to and including the root; without any, the shared model of [`BatchParams::shared_model`].
//! A set with neither fails, naming what is missing. Sets without a `fit.toml` use the shared
//! settings of [`BatchParams::settings`] (preprocessing and fit), or the defaults.
//!
//! The search descends into every sub-folder except hidden ones (name starting with `.`), the
//! output folder, and the sub-folders of a data set (a data set is a leaf: its sub-folders may
//! hold JCAMP-DX files).
//!
//! ## Outputs and resuming
//! Each set writes into `<out>/<its path relative to the root>/` the files a single fit writes
//! ([`FIT_OUTPUTS`], [`FIT_PAGE_OUTPUTS`])
//! and a state file [`STATE_FILE`] (`batch_state.json`, a [`SetState`]). The state file is
//! written atomically before the fit (state `running`) and again after it: `complete` (written
//! last, after every output) only when the fit converged, otherwise `failed`. It holds the
//! SHA-256 checksums of every input (data files, model, `fit.toml` or shared settings).
//!
//! A rerun skips a set whose state is `complete`, whose inputs still have the recorded
//! checksums (compared by content, not path) and whose outputs are all present ([`SetState::is_complete_for`]); every other
//! set (new, interrupted, failed, or with a changed input) is done again, replacing the outputs
//! of the earlier batch run. Outputs in a set's folder that carry no batch state file (e.g. from
//! a single `fit`) are never replaced without [`Redo::All`].
//!
//! At the end, `<out>/`[`SUMMARY_FILE`] (`batch_summary.csv`) gets one row per data set, written
//! atomically: path, status (`ok`, `failed`, `skipped`), the error message, the solver's
//! termination, residual standard deviation, seconds, then ΔH° and ΔS° with standard errors for
//! every species met in any set (columns `<species>_dH_J_mol`, `<species>_se_dH`,
//! `<species>_dS_J_K_mol`, `<species>_se_dS`; empty where a set has no such species).
//!
//! ## Failures
//! A failing set (unreadable or invalid input, a fit that cannot be set up or does not
//! converge, even a panic inside the library) is recorded as `failed` with its message and the
//! batch goes on. Only problems of the batch as a whole are errors ([`BatchError`]).

use crate::data::{DataFiles, SpectraSource};
use crate::preprocess::PreprocessParams;
use crate::report::fit::{
    FIT_OUTPUTS, FIT_PAGE_OUTPUTS, FitRunConfig, InputFile, checksum, read_model, run_fit, write_fit_outputs,
    write_fit_page,
};
use crate::report::tables::{Table, format_float, read_json, write_json};
use crate::resolve::hard::HardFitParams;
use crate::{Error, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use std::fmt;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;
use thiserror::Error;

/// Name of a data set's run configuration file.
pub const RUN_CONFIG_FILE: &str = "fit.toml";
/// Name of a data set's conventional spectra table.
pub const SPECTRA_FILE: &str = "spectra.csv";
/// Name of a data set's conventional samples table.
pub const SAMPLES_FILE: &str = "samples.csv";
/// Name of the equilibrium model file looked for in a set's folder and its parents.
pub const MODEL_FILE: &str = "model.toml";
/// Name of the per-set state file (the completion marker) in the set's output folder.
pub const STATE_FILE: &str = "batch_state.json";
/// Name of the summary table in the output folder.
pub const SUMMARY_FILE: &str = "batch_summary.csv";
/// `kind` of the JSON document of [`STATE_FILE`].
pub const STATE_KIND: &str = "batch-state";

/// Errors of a batch as a whole (a failing data set is a result, not an error).
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum BatchError {
    /// The root folder cannot be read.
    #[error("cannot read the batch root {path}: {source}", path = .path.display())]
    Root {
        /// The root folder.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A folder below the root cannot be listed.
    #[error("cannot list folder {path}: {source}", path = .path.display())]
    Folder {
        /// The folder.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// No data set was found below the root.
    #[error(
        "no data set found under {root}: a data set is a folder holding {RUN_CONFIG_FILE}, or {SPECTRA_FILE} and {SAMPLES_FILE}",
        root = .root.display()
    )]
    NoDataSets {
        /// The root folder.
        root: PathBuf,
    },
    /// Zero worker threads were asked for.
    #[error("the number of worker threads must be at least 1")]
    NoThreads,
    /// The worker pool could not be started.
    #[error("cannot start {threads} worker threads: {message}")]
    ThreadPool {
        /// Threads asked for.
        threads: usize,
        /// The pool builder's message.
        message: String,
    },
}

/// How a data set's files are given.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum DataSetSource {
    /// A run configuration file (`fit.toml`) in the set's folder.
    RunConfig(PathBuf),
    /// The conventional `spectra.csv` and `samples.csv` (either may be missing: the set then
    /// fails naming it).
    Conventional,
}

/// One data set found by [`discover`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DataSet {
    /// The data set's folder.
    pub folder: PathBuf,
    /// Its path relative to the root (empty for the root itself); also its output sub-folder.
    pub relative: PathBuf,
    /// How its files are given.
    pub source: DataSetSource,
}

impl DataSet {
    /// The set's name in reports: its relative path with `/` separators, `.` for the root.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::batch::{DataSet, DataSetSource};
    /// let set = DataSet {
    ///     folder: "runs/lab1/a".into(),
    ///     relative: std::path::Path::new("lab1").join("a"),
    ///     source: DataSetSource::Conventional,
    /// };
    /// assert_eq!(set.name(), "lab1/a");
    /// ```
    pub fn name(&self) -> String {
        let parts: Vec<String> = self
            .relative
            .components()
            .map(|c| c.as_os_str().to_string_lossy().into_owned())
            .collect();
        if parts.is_empty() {
            ".".to_string()
        } else {
            parts.join("/")
        }
    }
}

/// Finds the data sets under `root` (see the [module docs](self) for what counts as one),
/// sorted by relative path. Folders in `exclude` (compared after resolving links) are not
/// searched.
///
/// # Errors
/// [`BatchError::Root`] if `root` cannot be listed, [`BatchError::Folder`] for a sub-folder that
/// cannot be listed. Finding no set is not an error here (an empty list).
///
/// # Examples
/// ```
/// use isosbestic::report::batch::{discover, DataSetSource};
/// let root = tempfile::tempdir()?;
/// std::fs::create_dir_all(root.path().join("b"))?;
/// std::fs::write(root.path().join("b/fit.toml"), "")?;
/// std::fs::create_dir_all(root.path().join("a/x"))?;
/// std::fs::write(root.path().join("a/x/spectra.csv"), "")?;
/// std::fs::write(root.path().join("a/x/samples.csv"), "")?;
/// let sets = discover(root.path(), &[])?;
/// let names: Vec<String> = sets.iter().map(|s| s.name()).collect();
/// assert_eq!(names, ["a/x", "b"]);
/// assert_eq!(sets[0].source, DataSetSource::Conventional);
/// assert!(matches!(sets[1].source, DataSetSource::RunConfig(_)));
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn discover(root: &Path, exclude: &[PathBuf]) -> Result<Vec<DataSet>, BatchError> {
    let excluded: HashSet<PathBuf> = exclude
        .iter()
        .filter_map(|p| std::fs::canonicalize(p).ok())
        .collect();
    let mut visited = HashSet::new();
    let mut out = Vec::new();
    let entries = std::fs::read_dir(root).map_err(|source| BatchError::Root {
        path: root.to_path_buf(),
        source,
    })?;
    walk(root, root, entries, &excluded, &mut visited, &mut out)?;
    out.sort_by(|a, b| a.relative.cmp(&b.relative));
    Ok(out)
}

fn walk(
    root: &Path,
    folder: &Path,
    entries: std::fs::ReadDir,
    excluded: &HashSet<PathBuf>,
    visited: &mut HashSet<PathBuf>,
    out: &mut Vec<DataSet>,
) -> Result<(), BatchError> {
    if let Ok(canon) = std::fs::canonicalize(folder)
        && (!visited.insert(canon.clone()) || excluded.contains(&canon))
    {
        return Ok(());
    }
    let folder_error = |source| BatchError::Folder {
        path: folder.to_path_buf(),
        source,
    };
    let mut subfolders = Vec::new();
    let (mut config, mut conventional) = (None, false);
    for entry in entries {
        let entry = entry.map_err(folder_error)?;
        let path = entry.path();
        let name = entry.file_name();
        // metadata follows links, so linked folders and files count as what they point to
        let Ok(meta) = std::fs::metadata(&path) else {
            continue;
        };
        if meta.is_dir() {
            if !name.to_string_lossy().starts_with('.') {
                subfolders.push(path);
            }
        } else if name == RUN_CONFIG_FILE {
            config = Some(path);
        } else if name == SPECTRA_FILE || name == SAMPLES_FILE {
            conventional = true;
        }
    }
    let source = match config {
        Some(path) => Some(DataSetSource::RunConfig(path)),
        None if conventional => Some(DataSetSource::Conventional),
        None => None,
    };
    if let Some(source) = source {
        out.push(DataSet {
            folder: folder.to_path_buf(),
            relative: folder.strip_prefix(root).unwrap_or(Path::new("")).to_path_buf(),
            source,
        });
        return Ok(());
    }
    for sub in subfolders {
        let entries = std::fs::read_dir(&sub).map_err(|source| BatchError::Folder {
            path: sub.clone(),
            source,
        })?;
        walk(root, &sub, entries, excluded, visited, out)?;
    }
    Ok(())
}

/// Which data sets a run does again.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub enum Redo {
    /// Skip sets that are complete with unchanged inputs; do every other set.
    #[default]
    Incomplete,
    /// Do every set, replacing any outputs already in its folder.
    All,
}

/// Preprocessing and fit settings shared by the sets that have no `fit.toml` (a TOML file with
/// optional `[preprocess]` and `[fit]` tables, as in a run configuration).
///
/// # Examples
/// ```
/// use isosbestic::report::batch::SharedSettings;
/// let s: SharedSettings = toml::from_str("[fit]\nbaseline = \"offset\"")?;
/// assert_eq!(s.preprocess, Default::default());
/// assert!(toml::from_str::<SharedSettings>("model = \"m.toml\"").is_err());
/// # Ok::<(), toml::de::Error>(())
/// ```
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SharedSettings {
    /// Preprocessing applied before each fit.
    #[serde(default)]
    pub preprocess: PreprocessParams,
    /// Fit settings.
    #[serde(default)]
    pub fit: HardFitParams,
}

/// Settings of a batch run.
#[derive(Debug, Clone, PartialEq)]
pub struct BatchParams {
    /// Folder searched for data sets.
    pub root: PathBuf,
    /// Output folder (one sub-folder per set, plus the summary).
    pub out: PathBuf,
    /// Model used by sets that find no `model.toml` in their folder or a parent folder.
    pub shared_model: Option<PathBuf>,
    /// Shared settings file ([`SharedSettings`]) for sets without a `fit.toml`.
    pub settings: Option<PathBuf>,
    /// Worker threads (each set runs on one); `None` uses one per available core.
    pub threads: Option<usize>,
    /// Which sets to do again.
    pub redo: Redo,
    /// Shown in each report page's header (the library reads no clock).
    pub timestamp: String,
}

impl BatchParams {
    /// Settings with defaults: no shared model or settings, one thread per core, skip complete
    /// sets, no timestamp.
    pub fn new(root: impl Into<PathBuf>, out: impl Into<PathBuf>) -> Self {
        Self {
            root: root.into(),
            out: out.into(),
            shared_model: None,
            settings: None,
            threads: None,
            redo: Redo::Incomplete,
            timestamp: String::new(),
        }
    }
}

/// What happened to one data set.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SetStatus {
    /// Fitted now, converged, outputs written.
    Ok,
    /// Could not be fitted (bad input, no convergence, a panic): see the message.
    Failed,
    /// Complete from an earlier run with unchanged inputs: not done again.
    Skipped,
}

impl fmt::Display for SetStatus {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Ok => "ok",
            Self::Failed => "failed",
            Self::Skipped => "skipped",
        })
    }
}

/// ΔH° and ΔS° of one species at its reference temperature, as kept in the summary. Values that
/// are not finite (an undetermined standard error) are `None`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpeciesSummary {
    /// Species name.
    pub species: String,
    /// ΔH°, J/mol.
    pub dh_j_mol: Option<f64>,
    /// Standard error of ΔH°, J/mol.
    pub se_dh_j_mol: Option<f64>,
    /// ΔS°, J K⁻¹ mol⁻¹.
    pub ds_j_k_mol: Option<f64>,
    /// Standard error of ΔS°, J K⁻¹ mol⁻¹.
    pub se_ds_j_k_mol: Option<f64>,
}

/// The headline numbers of one fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SetResult {
    /// Why the solver stopped.
    pub termination: String,
    /// Whether it converged.
    pub converged: bool,
    /// Residual standard deviation, AU (`None` if not finite).
    pub residual_sd: Option<f64>,
    /// ΔH°, ΔS° per species with a free law parameter.
    pub thermodynamics: Vec<SpeciesSummary>,
}

impl SetResult {
    fn of(report: &crate::report::fit::FitReport) -> Self {
        let finite = |x: f64| x.is_finite().then_some(x);
        let fit = &report.fit;
        Self {
            termination: format!("{:?}", fit.termination),
            converged: fit.termination.converged(),
            residual_sd: finite(fit.residual_sd),
            thermodynamics: fit
                .thermodynamics
                .iter()
                .map(|t| {
                    let q = &t.standard;
                    let se = q.standard_errors();
                    SpeciesSummary {
                        species: t.species.clone(),
                        dh_j_mol: finite(q.dh_j_mol),
                        se_dh_j_mol: finite(se[1]),
                        ds_j_k_mol: finite(q.ds_j_k_mol),
                        se_ds_j_k_mol: finite(se[2]),
                    }
                })
                .collect(),
        }
    }
}

/// Progress of a set's output folder, as recorded in its state file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SetProgress {
    /// The set was started and has not finished (or the run was interrupted).
    Running,
    /// The set finished without a usable result.
    Failed,
    /// Every output was written and the fit converged.
    Complete,
}

/// One output file as recorded in the state file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct OutputFile {
    /// File name inside the set's output folder.
    pub name: String,
    /// Size in bytes when written.
    pub bytes: u64,
}

/// Contents of a set's state file [`STATE_FILE`]: the completion marker.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SetState {
    /// Where the set got to.
    pub progress: SetProgress,
    /// Software name and version.
    pub software: String,
    /// Every input with its checksum.
    pub inputs: Vec<InputFile>,
    /// Outputs written (empty unless complete).
    pub outputs: Vec<OutputFile>,
    /// Headline numbers of the fit, when there is one.
    pub result: Option<SetResult>,
    /// Why the set failed, when it did.
    pub message: Option<String>,
}

impl SetState {
    /// True when this state says the set is complete for exactly these `inputs` and every
    /// recorded output is still in `dir` with its recorded size.
    ///
    /// Inputs are compared by content, in order (spectra, samples, model, then `fit.toml` or the
    /// shared settings): the same number of files with the same checksums and sizes. Paths are
    /// not compared, so a rerun from another working folder, or with the root spelled
    /// differently (relative, absolute, on another machine's mount point), still skips complete
    /// sets; the order keeps each file's role (a spectra table swapped with the samples table
    /// does not match).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::batch::{OutputFile, SetProgress, SetState};
    /// use isosbestic::report::fit::InputFile;
    /// let dir = tempfile::tempdir()?;
    /// std::fs::write(dir.path().join("report.json"), "{}")?;
    /// let input = InputFile { path: "s.csv".into(), sha256: "ab".into(), bytes: 1 };
    /// let state = SetState {
    ///     progress: SetProgress::Complete,
    ///     software: "test".into(),
    ///     inputs: vec![input.clone()],
    ///     outputs: vec![OutputFile { name: "report.json".into(), bytes: 2 }],
    ///     result: None,
    ///     message: None,
    /// };
    /// assert!(state.is_complete_for(&[input.clone()], dir.path()));
    /// let moved = InputFile { path: "/elsewhere/s.csv".into(), ..input.clone() };
    /// assert!(state.is_complete_for(&[moved], dir.path()));
    /// let changed = InputFile { sha256: "cd".into(), ..input };
    /// assert!(!state.is_complete_for(&[changed], dir.path()));
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn is_complete_for(&self, inputs: &[InputFile], dir: &Path) -> bool {
        self.progress == SetProgress::Complete
            && self.inputs.len() == inputs.len()
            && self
                .inputs
                .iter()
                .zip(inputs)
                .all(|(a, b)| a.sha256 == b.sha256 && a.bytes == b.bytes)
            && self.outputs.iter().all(|o| {
                std::fs::metadata(dir.join(&o.name)).is_ok_and(|m| m.is_file() && m.len() == o.bytes)
            })
    }
}

/// The outcome of one data set.
#[derive(Debug, Clone, PartialEq)]
pub struct SetOutcome {
    /// The set's name (relative path, see [`DataSet::name`]).
    pub data_set: String,
    /// Its output folder.
    pub out_dir: PathBuf,
    /// What happened.
    pub status: SetStatus,
    /// Why it failed (empty otherwise).
    pub message: String,
    /// Headline numbers of its fit (for a skipped set, those recorded by the earlier run).
    pub result: Option<SetResult>,
    /// Wall time spent on the set in this run, s.
    pub seconds: f64,
}

/// Progress of a batch, reported through the callback of [`run_batch`].
#[derive(Debug, Clone, Copy)]
#[non_exhaustive]
pub enum BatchEvent<'a> {
    /// The search is done: this many sets will be handled.
    Discovered {
        /// Number of data sets.
        total: usize,
    },
    /// A worker started on a set.
    Started {
        /// The set's name.
        data_set: &'a str,
    },
    /// A set is finished (ok, failed or skipped).
    Finished {
        /// Its outcome.
        outcome: &'a SetOutcome,
        /// Sets finished so far, this one included.
        done: usize,
        /// All sets.
        total: usize,
    },
}

/// Everything a batch run produced.
#[derive(Debug, Clone, PartialEq)]
pub struct BatchReport {
    /// One outcome per data set, in the order of [`discover`].
    pub outcomes: Vec<SetOutcome>,
    /// The summary table written.
    pub summary_path: PathBuf,
}

impl BatchReport {
    /// Number of sets with the given status.
    pub fn count(&self, status: SetStatus) -> usize {
        self.outcomes.iter().filter(|o| o.status == status).count()
    }

    /// True when no set failed.
    pub fn all_succeeded(&self) -> bool {
        self.count(SetStatus::Failed) == 0
    }

    /// The summary table (see the [module docs](self) for its columns).
    pub fn summary_table(&self) -> Table {
        let mut species: Vec<String> = Vec::new();
        for o in &self.outcomes {
            for t in o.result.iter().flat_map(|r| &r.thermodynamics) {
                if !species.contains(&t.species) {
                    species.push(t.species.clone());
                }
            }
        }
        let fixed = [
            "data_set",
            "status",
            "message",
            "termination",
            "residual_sd_AU",
            "seconds",
        ]
        .map(String::from);
        let mut table = Table::new(fixed.into_iter().chain(species.iter().flat_map(|s| {
            [
                format!("{s}_dH_J_mol"),
                format!("{s}_se_dH"),
                format!("{s}_dS_J_K_mol"),
                format!("{s}_se_dS"),
            ]
        })));
        let cell = |x: Option<f64>| x.map(format_float).unwrap_or_default();
        for o in &self.outcomes {
            let r = o.result.as_ref();
            let mut row = vec![
                o.data_set.clone(),
                o.status.to_string(),
                o.message.clone(),
                r.map(|r| r.termination.clone()).unwrap_or_default(),
                cell(r.and_then(|r| r.residual_sd)),
                format!("{:.3}", o.seconds),
            ];
            for s in &species {
                let t = r.and_then(|r| r.thermodynamics.iter().find(|t| &t.species == s));
                row.extend([
                    cell(t.and_then(|t| t.dh_j_mol)),
                    cell(t.and_then(|t| t.se_dh_j_mol)),
                    cell(t.and_then(|t| t.ds_j_k_mol)),
                    cell(t.and_then(|t| t.se_ds_j_k_mol)),
                ]);
            }
            table.push_row(row);
        }
        table
    }
}

impl fmt::Display for BatchReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} data sets: {} ok, {} failed, {} skipped (complete from an earlier run); summary in {}",
            self.outcomes.len(),
            self.count(SetStatus::Ok),
            self.count(SetStatus::Failed),
            self.count(SetStatus::Skipped),
            self.summary_path.display()
        )
    }
}

/// Runs a batch: find the data sets under `params.root`, handle each on a pool of
/// `params.threads` workers (skipping complete ones, see the [module docs](self)), write the
/// summary table, and report progress through `progress` (called from the worker threads).
///
/// # Errors
/// Only for the batch as a whole: [`BatchError`] (unreadable root, no data sets, no threads),
/// an unreadable or invalid shared model or settings file ([`Error::Input`],
/// [`Error::InModel`], [`Error::Usage`]), or an output folder or summary that cannot be written
/// ([`Error::Output`]). A failing data set is an outcome with [`SetStatus::Failed`].
///
/// # Examples
/// ```
/// use isosbestic::report::batch::{run_batch, BatchEvent, BatchParams, SetStatus};
/// use std::sync::atomic::{AtomicUsize, Ordering};
/// let demo = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo");
/// let root = tempfile::tempdir()?;
/// let out = tempfile::tempdir()?;
/// // "good": the demo data with its settings; "half": a samples table is missing
/// for set in ["good", "half"] {
///     std::fs::create_dir(root.path().join(set))?;
///     std::fs::copy(demo.join("spectra.csv"), root.path().join(set).join("spectra.csv"))?;
/// }
/// std::fs::copy(demo.join("samples.csv"), root.path().join("good/samples.csv"))?;
/// std::fs::write(
///     root.path().join("good/fit.toml"),
///     "[fit]\nbaseline = \"offset\"\nconcentrations = { thermal_expansion = { kind = \"water\" } }\n",
/// )?;
/// let params = BatchParams {
///     shared_model: Some(demo.join("model.toml")),
///     threads: Some(2),
///     ..BatchParams::new(root.path(), out.path())
/// };
/// let finished = AtomicUsize::new(0);
/// let progress = |e: BatchEvent<'_>| {
///     if let BatchEvent::Finished { .. } = e {
///         finished.fetch_add(1, Ordering::SeqCst);
///     }
/// };
/// let report = run_batch(&params, &progress)?;
/// assert_eq!(finished.load(Ordering::SeqCst), 2);
/// assert_eq!(report.outcomes[0].data_set, "good");
/// assert_eq!(report.outcomes[0].status, SetStatus::Ok);
/// assert!(out.path().join("good/report.html").is_file());
/// assert_eq!(report.outcomes[1].status, SetStatus::Failed);
/// assert!(report.outcomes[1].message.contains("samples.csv"));
/// assert!(out.path().join("batch_summary.csv").is_file());
/// // a second run skips the complete set
/// let again = run_batch(&params, &|_| {})?;
/// assert_eq!(again.count(SetStatus::Skipped), 1);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub fn run_batch(params: &BatchParams, progress: &(dyn Fn(BatchEvent<'_>) + Sync)) -> Result<BatchReport> {
    if params.threads == Some(0) {
        return Err(BatchError::NoThreads.into());
    }
    let shared = Shared::load(params)?;
    std::fs::create_dir_all(&params.out).map_err(|source| Error::Output {
        path: params.out.clone(),
        source,
    })?;
    let sets = discover(&params.root, std::slice::from_ref(&params.out))?;
    if sets.is_empty() {
        return Err(BatchError::NoDataSets {
            root: params.root.clone(),
        }
        .into());
    }
    let total = sets.len();
    progress(BatchEvent::Discovered { total });
    let threads = params
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()));
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| BatchError::ThreadPool {
            threads,
            message: e.to_string(),
        })?;
    let done = AtomicUsize::new(0);
    let outcomes: Vec<SetOutcome> = pool.install(|| {
        sets.par_iter()
            .map(|set| {
                let name = set.name();
                progress(BatchEvent::Started { data_set: &name });
                let outcome = guarded(set, &name, params, &shared);
                let finished = done.fetch_add(1, Ordering::SeqCst) + 1;
                progress(BatchEvent::Finished {
                    outcome: &outcome,
                    done: finished,
                    total,
                });
                outcome
            })
            .collect()
    });
    let report = BatchReport {
        outcomes,
        summary_path: params.out.join(SUMMARY_FILE),
    };
    report.summary_table().write_csv(&report.summary_path)?;
    Ok(report)
}

/// The batch-wide inputs, read once.
struct Shared {
    model: Option<PathBuf>,
    settings: SharedSettings,
    settings_file: Option<PathBuf>,
}

impl Shared {
    fn load(params: &BatchParams) -> Result<Self> {
        if let Some(m) = &params.shared_model {
            read_model(m)?;
        }
        let settings = match &params.settings {
            Some(path) => {
                let text = std::fs::read_to_string(path).map_err(|source| Error::Input {
                    path: path.clone(),
                    source,
                })?;
                toml::from_str(&text).map_err(|e| Error::Usage(format!("{}: {e}", path.display())))?
            }
            None => SharedSettings::default(),
        };
        Ok(Self {
            model: params.shared_model.clone(),
            settings,
            settings_file: params.settings.clone(),
        })
    }
}

/// Handles one set; a panic inside becomes a failed outcome naming the set.
fn guarded(set: &DataSet, name: &str, params: &BatchParams, shared: &Shared) -> SetOutcome {
    let started = Instant::now();
    let out_dir = params.out.join(&set.relative);
    let (status, message, result) = catching_panics(name, || process(set, &out_dir, params, shared));
    SetOutcome {
        data_set: name.to_string(),
        out_dir,
        status,
        message,
        result,
        seconds: started.elapsed().as_secs_f64(),
    }
}

/// Runs `work`, turning its error or a panic inside it into a failure naming the set `name`.
fn catching_panics(name: &str, work: impl FnOnce() -> Processed) -> (SetStatus, String, Option<SetResult>) {
    match catch_unwind(AssertUnwindSafe(work)) {
        Ok(Ok((status, result))) => (status, String::new(), result),
        Ok(Err((e, result))) => (SetStatus::Failed, e, result),
        Err(payload) => {
            let what = payload
                .downcast_ref::<&str>()
                .map(|s| (*s).to_string())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "unknown cause".to_string());
            (
                SetStatus::Failed,
                format!("internal error (panic) while fitting data set {name}: {what}"),
                None,
            )
        }
    }
}

type Processed = std::result::Result<(SetStatus, Option<SetResult>), (String, Option<SetResult>)>;

/// Handles one set: plan, check the state, fit, write outputs and state.
fn process(set: &DataSet, out_dir: &Path, params: &BatchParams, shared: &Shared) -> Processed {
    let fail = |e: Error| (e.to_string(), None);
    let (config, extra_inputs) = plan(set, &params.root, shared).map_err(fail)?;
    let mut inputs = Vec::new();
    for p in config
        .data
        .paths()
        .iter()
        .chain(std::iter::once(&config.model))
        .chain(&extra_inputs)
    {
        inputs.push(checksum(p).map_err(fail)?);
    }
    // the known spectra the model names are inputs too: an edited one redoes the set
    let model = read_model(&config.model).map_err(fail)?;
    for (_, p) in super::fit::model_spectrum_files(&model, &config.model) {
        inputs.push(checksum(&p).map_err(fail)?);
    }
    let state_path = out_dir.join(STATE_FILE);
    let earlier = read_json::<SetState>(&state_path, STATE_KIND).ok();
    if params.redo == Redo::Incomplete {
        if let Some(state) = &earlier
            && state.is_complete_for(&inputs, out_dir)
        {
            return Ok((SetStatus::Skipped, state.result.clone()));
        }
        if !state_path.exists()
            && let Some(existing) = FIT_OUTPUTS
                .iter()
                .chain(FIT_PAGE_OUTPUTS.iter())
                .map(|n| out_dir.join(n))
                .find(|p| p.exists())
        {
            return Err(fail(Error::WouldOverwrite {
                path: existing,
                reason: "it exists from a run that was not a batch (use --force)",
            }));
        }
    }
    std::fs::create_dir_all(out_dir).map_err(|source| {
        fail(Error::Output {
            path: out_dir.to_path_buf(),
            source,
        })
    })?;
    let mut state = SetState {
        progress: SetProgress::Running,
        software: format!("isosbestic {}", env!("CARGO_PKG_VERSION")),
        inputs,
        outputs: Vec::new(),
        result: None,
        message: None,
    };
    write_json(&state_path, STATE_KIND, &state).map_err(fail)?;
    let outcome = fit_and_write(&config, out_dir, &params.timestamp);
    match outcome {
        Ok((result, outputs)) if result.converged => {
            state.progress = SetProgress::Complete;
            state.outputs = outputs;
            state.result = Some(result.clone());
            write_json(&state_path, STATE_KIND, &state).map_err(fail)?;
            Ok((SetStatus::Ok, Some(result)))
        }
        Ok((result, _)) => {
            let message = format!(
                "the fit did not converge ({}); its outputs are in {}",
                result.termination,
                out_dir.display()
            );
            state.progress = SetProgress::Failed;
            state.result = Some(result.clone());
            state.message = Some(message.clone());
            // the set failed either way; a state file that cannot be written changes nothing
            let _ = write_json(&state_path, STATE_KIND, &state);
            Err((message, Some(result)))
        }
        Err(e) => {
            let message = e.to_string();
            state.progress = SetProgress::Failed;
            state.message = Some(message.clone());
            let _ = write_json(&state_path, STATE_KIND, &state);
            Err((message, None))
        }
    }
}

/// Fits one set and writes its outputs (replacing earlier batch outputs; inputs are never
/// overwritten). Returns the headline numbers and the outputs written with their sizes.
fn fit_and_write(
    config: &FitRunConfig,
    out_dir: &Path,
    timestamp: &str,
) -> Result<(SetResult, Vec<OutputFile>)> {
    let (report, set) = run_fit(config)?;
    let mut written = write_fit_outputs(out_dir, &report, true)?;
    written.extend(write_fit_page(out_dir, &report, &set, timestamp, true)?);
    let mut outputs = Vec::new();
    for path in written {
        let bytes = std::fs::metadata(&path)
            .map_err(|source| Error::Output {
                path: path.clone(),
                source,
            })?
            .len();
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        outputs.push(OutputFile { name, bytes });
    }
    Ok((SetResult::of(&report), outputs))
}

/// A set's run configuration as written in its `fit.toml`: every key optional.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct SetRunConfig {
    data: Option<DataFiles>,
    model: Option<PathBuf>,
    preprocess: Option<PreprocessParams>,
    fit: Option<HardFitParams>,
    /// Candidate models fitted beside the main one (relative to the set folder).
    #[serde(default)]
    candidates: Vec<PathBuf>,
    /// Density table for thermal expansion (relative to the set folder).
    density_table: Option<PathBuf>,
}

/// The run configuration of a set, with every path resolved, and the extra files it depends on
/// (its `fit.toml` or the shared settings file).
fn plan(set: &DataSet, root: &Path, shared: &Shared) -> Result<(FitRunConfig, Vec<PathBuf>)> {
    let conventional = || DataFiles::csv(set.folder.join(SPECTRA_FILE), set.folder.join(SAMPLES_FILE));
    let model = |named: Option<PathBuf>| -> Result<PathBuf> {
        match named {
            Some(m) => Ok(anchored(&set.folder, &m)),
            None => find_model(&set.folder, root, shared.model.as_deref()).ok_or_else(|| {
                Error::Usage(format!(
                    "data set {}: no equilibrium model: put {MODEL_FILE} in its folder or a parent folder, or give a shared model",
                    set.folder.display()
                ))
            }),
        }
    };
    match &set.source {
        DataSetSource::RunConfig(path) => {
            let text = std::fs::read_to_string(path).map_err(|source| Error::Input {
                path: path.clone(),
                source,
            })?;
            let c: SetRunConfig =
                toml::from_str(&text).map_err(|e| Error::Usage(format!("{}: {e}", path.display())))?;
            let data = match c.data {
                Some(mut d) => {
                    d.spectra = match d.spectra {
                        SpectraSource::Csv(p) => SpectraSource::Csv(anchored(&set.folder, &p)),
                        SpectraSource::Jcamp(ps) => {
                            SpectraSource::Jcamp(ps.iter().map(|p| anchored(&set.folder, p)).collect())
                        }
                    };
                    d.samples = anchored(&set.folder, &d.samples);
                    d
                }
                None => conventional(),
            };
            let candidates: Vec<PathBuf> = c.candidates.iter().map(|p| anchored(&set.folder, p)).collect();
            let density_table = c.density_table.map(|p| anchored(&set.folder, &p));
            let mut depends_on = vec![path.clone()];
            depends_on.extend(candidates.iter().cloned());
            depends_on.extend(density_table.iter().cloned());
            let config = FitRunConfig {
                data,
                model: model(c.model)?,
                preprocess: c.preprocess.unwrap_or_default(),
                fit: c.fit.unwrap_or_default(),
                candidates,
                density_table: density_table.clone(),
            };
            Ok((config, depends_on))
        }
        DataSetSource::Conventional => {
            let config = FitRunConfig {
                data: conventional(),
                model: model(None)?,
                preprocess: shared.settings.preprocess.clone(),
                fit: shared.settings.fit.clone(),
                candidates: Vec::new(),
                density_table: None,
            };
            Ok((config, shared.settings_file.iter().cloned().collect()))
        }
    }
}

/// `path` if absolute, else `folder/path`.
fn anchored(folder: &Path, path: &Path) -> PathBuf {
    if path.is_absolute() {
        path.to_path_buf()
    } else {
        folder.join(path)
    }
}

/// The nearest `model.toml` from `folder` up to and including `root`, else `shared`.
fn find_model(folder: &Path, root: &Path, shared: Option<&Path>) -> Option<PathBuf> {
    let mut dir = Some(folder);
    while let Some(d) = dir {
        let candidate = d.join(MODEL_FILE);
        if candidate.is_file() {
            return Some(candidate);
        }
        if d == root || !d.starts_with(root) {
            break;
        }
        dir = d.parent();
    }
    shared.map(Path::to_path_buf)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::fs;

    fn touch(path: &Path) {
        if let Some(parent) = path.parent() {
            fs::create_dir_all(parent).unwrap();
        }
        fs::write(path, "x").unwrap();
    }

    #[test]
    fn discovery_finds_config_and_conventional_sets_and_treats_sets_as_leaves() {
        let root = tempfile::tempdir().unwrap();
        let r = root.path();
        touch(&r.join("lab1/run1/spectra.csv"));
        touch(&r.join("lab1/run1/samples.csv"));
        touch(&r.join("lab1/run1/nested/spectra.csv")); // inside a set: not a set of its own
        touch(&r.join("lab1/run2/fit.toml"));
        touch(&r.join("lab1/run2/spectra.csv")); // fit.toml wins over the conventional files
        touch(&r.join("lab2/half/samples.csv")); // one file only: still a set (it will fail)
        touch(&r.join("lab2/notes.txt"));
        touch(&r.join(".hidden/spectra.csv"));
        touch(&r.join("results/spectra.csv")); // the output folder is excluded
        let sets = discover(r, &[r.join("results")]).unwrap();
        let names: Vec<String> = sets.iter().map(DataSet::name).collect();
        assert_eq!(names, ["lab1/run1", "lab1/run2", "lab2/half"]);
        assert_eq!(sets[0].source, DataSetSource::Conventional);
        assert_eq!(
            sets[1].source,
            DataSetSource::RunConfig(r.join("lab1/run2/fit.toml"))
        );
        assert_eq!(sets[2].folder, r.join("lab2/half"));
    }

    #[test]
    fn the_root_itself_can_be_the_only_data_set() {
        let root = tempfile::tempdir().unwrap();
        touch(&root.path().join("fit.toml"));
        let sets = discover(root.path(), &[]).unwrap();
        assert_eq!(sets.len(), 1);
        assert_eq!(sets[0].name(), ".");
        assert_eq!(sets[0].relative, PathBuf::new());
    }

    #[test]
    fn an_unreadable_root_is_a_batch_error() {
        let root = tempfile::tempdir().unwrap();
        let missing = root.path().join("nope");
        assert!(matches!(discover(&missing, &[]), Err(BatchError::Root { .. })));
    }

    #[test]
    fn the_nearest_model_wins_over_parents_and_the_shared_model() {
        let root = tempfile::tempdir().unwrap();
        let r = root.path();
        touch(&r.join("model.toml"));
        touch(&r.join("a/b/model.toml"));
        fs::create_dir_all(r.join("a/b/c")).unwrap();
        fs::create_dir_all(r.join("d")).unwrap();
        let shared = Path::new("/elsewhere/shared.toml");
        assert_eq!(
            find_model(&r.join("a/b/c"), r, Some(shared)),
            Some(r.join("a/b/model.toml"))
        );
        assert_eq!(
            find_model(&r.join("d"), r, Some(shared)),
            Some(r.join("model.toml"))
        );
        fs::remove_file(r.join("model.toml")).unwrap();
        assert_eq!(
            find_model(&r.join("d"), r, Some(shared)),
            Some(shared.to_path_buf())
        );
        assert_eq!(find_model(&r.join("d"), r, None), None);
    }

    #[test]
    fn a_model_above_the_root_is_not_used() {
        let top = tempfile::tempdir().unwrap();
        touch(&top.path().join("model.toml"));
        let root = top.path().join("root");
        fs::create_dir_all(root.join("set")).unwrap();
        assert_eq!(find_model(&root.join("set"), &root, None), None);
    }

    #[test]
    fn paths_in_a_set_config_are_relative_to_the_set_folder() {
        let root = tempfile::tempdir().unwrap();
        let r = root.path();
        touch(&r.join("model.toml"));
        fs::create_dir_all(r.join("s")).unwrap();
        fs::write(
            r.join("s/fit.toml"),
            "[data]\nspectra = { csv = \"raw/d.csv\" }\nsamples = \"/abs/t.csv\"\n[fit]\nbaseline = \"offset\"\n",
        )
        .unwrap();
        let set = discover(r, &[]).unwrap().remove(0);
        let shared = Shared {
            model: None,
            settings: SharedSettings::default(),
            settings_file: None,
        };
        let (config, extra) = plan(&set, r, &shared).unwrap();
        assert_eq!(config.data.spectra, SpectraSource::Csv(r.join("s/raw/d.csv")));
        assert_eq!(config.data.samples, PathBuf::from("/abs/t.csv"));
        assert_eq!(config.model, r.join("model.toml"));
        assert_eq!(config.fit.baseline, crate::resolve::hard::Baseline::Offset);
        assert_eq!(extra, [r.join("s/fit.toml")]);
    }

    #[test]
    fn a_set_config_with_an_unknown_key_names_the_file() {
        let root = tempfile::tempdir().unwrap();
        fs::write(root.path().join("fit.toml"), "modle = \"m.toml\"\n").unwrap();
        let set = discover(root.path(), &[]).unwrap().remove(0);
        let shared = Shared {
            model: None,
            settings: SharedSettings::default(),
            settings_file: None,
        };
        let e = plan(&set, root.path(), &shared).unwrap_err().to_string();
        assert!(e.contains("fit.toml") && e.contains("modle"), "{e}");
    }

    #[test]
    fn a_panic_inside_a_set_becomes_a_failure_naming_the_set() {
        let (status, message, result) = catching_panics("lab/x", || {
            let cells: Vec<f64> = Vec::new();
            let i = cells.len() + 3;
            if i > 2 {
                panic!("index {i} out of range");
            }
            Ok((SetStatus::Ok, None))
        });
        assert_eq!(status, SetStatus::Failed);
        assert!(
            message.contains("lab/x") && message.contains("index 3 out of range"),
            "{message}"
        );
        assert_eq!(result, None);
        let (status, message, _) = catching_panics("y", || Err(("bad file".into(), None)));
        assert_eq!((status, message.as_str()), (SetStatus::Failed, "bad file"));
    }

    fn complete_state(dir: &Path, inputs: Vec<InputFile>) -> SetState {
        fs::write(dir.join("report.json"), "{\"a\": 1}").unwrap();
        SetState {
            progress: SetProgress::Complete,
            software: "test".into(),
            inputs,
            outputs: vec![OutputFile {
                name: "report.json".into(),
                bytes: 8,
            }],
            result: None,
            message: None,
        }
    }

    #[test]
    fn completion_needs_the_complete_state_the_same_inputs_and_every_output() {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        touch(&d.join("in/a.csv"));
        fs::write(d.join("in/b.csv"), "y").unwrap();
        let a = checksum(&d.join("in/a.csv")).unwrap();
        let b = checksum(&d.join("in/b.csv")).unwrap();
        let state = complete_state(d, vec![a.clone(), b.clone()]);
        assert!(state.is_complete_for(&[a.clone(), b.clone()], d));
        assert!(!state.is_complete_for(&[b.clone(), a.clone()], d)); // roles swapped
        assert!(!state.is_complete_for(std::slice::from_ref(&a), d)); // an input less
        fs::write(d.join("in/b.csv"), "changed").unwrap();
        let b2 = checksum(&d.join("in/b.csv")).unwrap();
        assert!(!state.is_complete_for(&[a.clone(), b2], d)); // an input changed
        let running = SetState {
            progress: SetProgress::Running,
            ..state.clone()
        };
        assert!(!running.is_complete_for(&[a.clone(), b.clone()], d));
        fs::write(d.join("report.json"), "{}").unwrap(); // output cut short
        assert!(!state.is_complete_for(&[a.clone(), b.clone()], d));
        fs::remove_file(d.join("report.json")).unwrap(); // output gone
        assert!(!state.is_complete_for(&[a, b], d));
    }

    #[test]
    fn the_state_file_round_trips_through_json_with_undetermined_errors() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join(STATE_FILE);
        let mut state = complete_state(dir.path(), vec![]);
        state.result = Some(SetResult {
            termination: "Converged(Cost)".into(),
            converged: true,
            residual_sd: Some(1e-3),
            thermodynamics: vec![SpeciesSummary {
                species: "ML".into(),
                dh_j_mol: Some(14_000.0),
                se_dh_j_mol: None, // an undetermined standard error is kept as "none", not NaN
                ds_j_k_mol: Some(50.0),
                se_ds_j_k_mol: Some(1.0),
            }],
        });
        write_json(&path, STATE_KIND, &state).unwrap();
        let back: SetState = read_json(&path, STATE_KIND).unwrap();
        assert_eq!(back, state);
    }

    #[test]
    fn the_summary_has_one_row_per_set_and_columns_for_every_species() {
        let result = |sp: &str, dh: f64| SetResult {
            termination: "Converged(Cost)".into(),
            converged: true,
            residual_sd: Some(1e-3),
            thermodynamics: vec![SpeciesSummary {
                species: sp.into(),
                dh_j_mol: Some(dh),
                se_dh_j_mol: Some(100.0),
                ds_j_k_mol: Some(20.0),
                se_ds_j_k_mol: Some(0.5),
            }],
        };
        let outcome = |name: &str, status, result| SetOutcome {
            data_set: name.into(),
            out_dir: PathBuf::from(name),
            status,
            message: if status == SetStatus::Failed {
                "samples.csv, line 3: bad".into()
            } else {
                String::new()
            },
            result,
            seconds: 0.5,
        };
        let report = BatchReport {
            outcomes: vec![
                outcome("a", SetStatus::Ok, Some(result("ML", 1000.0))),
                outcome("b", SetStatus::Failed, None),
                outcome("c", SetStatus::Skipped, Some(result("ML2", 2000.0))),
            ],
            summary_path: PathBuf::from(SUMMARY_FILE),
        };
        let t = report.summary_table();
        assert_eq!(t.headers.len(), 6 + 2 * 4);
        assert_eq!(t.headers[6], "ML_dH_J_mol");
        assert_eq!(t.headers[10], "ML2_dH_J_mol");
        assert_eq!(t.rows.len(), 3);
        assert_eq!(t.rows[0][6], "1000");
        assert_eq!(t.rows[0][10], "");
        assert_eq!(t.rows[1][1], "failed");
        assert_eq!(t.rows[1][2], "samples.csv, line 3: bad");
        assert_eq!(t.rows[2][10], "2000");
        assert!(!report.all_succeeded());
        assert_eq!(report.count(SetStatus::Skipped), 1);
    }
}
