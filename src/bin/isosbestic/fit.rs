//! `isosbestic fit`.

use crate::input::DataArgs;
use crate::medium::{ExpansionArgs, MediumArgs};
use clap::{Args, ValueEnum};
use isosbestic::report::fit::{FitRunConfig, write_fit_outputs, write_fit_page};
use isosbestic::resolve::hard::{Baseline, SpectraSign, SpectraTemperature, Weighting};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

#[derive(Debug, Clone, Copy, ValueEnum)]
enum BaselineArg {
    None,
    Offset,
    OffsetAndSlope,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum SpectraTArg {
    Constant,
    Linear,
    Quadratic,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum BootstrapKindArg {
    Residual,
    Wild,
}

#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
    isosbestic fit --config data/demo/fit.toml --out results/demo\n  \
    isosbestic fit --spectra s.csv --samples t.csv --model m.toml --baseline offset --expansion water --out results\n  \
    isosbestic fit --config run.toml --candidate with_dcp.toml --candidate three_species.toml --out ranked\n  \
    isosbestic fit --config fit.toml --density-table brine.csv --out results\n\n\
    A configuration file holds every option (see data/demo/fit.toml); flags given on the command\n\
    line override it. Outputs go to --out; existing outputs are kept unless --force is given,\n\
    and inputs are never overwritten. Exit code 1 when the fit did not converge.\n\n\
    With --candidate, every candidate model is fitted to the same data with the same settings and\n\
    ranked with the main model by AIC (model_comparison.csv); a candidate that is the other with\n\
    some parameters held (same species, a law that is a special case) is F-tested against it.")]
pub struct FitArgs {
    /// Run configuration file (TOML) with data, model, preprocessing and fit settings.
    #[arg(long, value_name = "TOML")]
    config: Option<PathBuf>,
    /// Spectra, samples table (required unless given in --config).
    #[command(flatten)]
    data: DataArgs,
    /// Equilibrium model file (TOML or JSON).
    #[arg(long, value_name = "FILE")]
    model: Option<PathBuf>,
    /// Output folder.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Overwrite outputs of an earlier run in the same folder.
    #[arg(long)]
    force: bool,
    /// Per-spectrum baseline terms eliminated with the spectra.
    #[arg(long, value_enum)]
    baseline: Option<BaselineArg>,
    /// Temperature dependence of the pure spectra (polynomial in T − reference).
    #[arg(long, value_enum)]
    spectra_temperature: Option<SpectraTArg>,
    /// Reference temperature of the spectra polynomial, °C (default 25).
    #[arg(long, value_name = "CELSIUS")]
    spectra_reference_c: Option<f64>,
    /// Thermal expansion (--expansion, --density-table).
    #[command(flatten)]
    expansion: ExpansionArgs,
    /// Activity corrections, background electrolyte, scale.
    #[command(flatten)]
    medium: MediumArgs,
    /// Known noise (AU): fixes the scale of the standard errors instead of the residuals.
    #[arg(long, value_name = "AU")]
    noise: Option<f64>,
    /// Keep every fitted ε ≥ 0 (non-negative least squares at each wavelength). Needs constant
    /// spectra and no baseline terms. Also `spectra_sign = "non_negative"` under [fit].
    #[arg(long)]
    non_negative_spectra: bool,
    /// Weigh each point by 1/(FLOOR_AU² + (RELATIVE·A)²) from its measured absorbance A, for
    /// noise that grows with the absorbance (e.g. 0.001,0.01). No baseline terms, no --noise.
    /// Also `weighting = { kind = "absorbance", floor_au = …, relative = … }` under [fit].
    #[arg(long, value_name = "FLOOR_AU,RELATIVE", value_parser = parse_absorbance_weights)]
    absorbance_weights: Option<Weighting>,
    /// Keep only wavelengths in this window (nm).
    #[arg(long, num_args = 2, value_names = ["MIN_NM", "MAX_NM"])]
    window: Option<Vec<f64>>,
    /// Also run a bootstrap with this many replicates (writes bootstrap.json).
    #[arg(long, value_name = "N")]
    bootstrap: Option<usize>,
    /// Bootstrap scheme: resample residuals, or flip their signs (wild).
    #[arg(long, value_enum, default_value = "residual")]
    bootstrap_kind: BootstrapKindArg,
    /// Seed of the bootstrap.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Worker threads for the bootstrap (default: all cores).
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
    /// A further candidate model file fitted to the same data and ranked with --model by AIC and
    /// BIC, with F-tests of nested pairs (repeatable; adds to `candidates` in --config).
    #[arg(long = "candidate", value_name = "FILE")]
    candidates: Vec<PathBuf>,
    /// Print the report as JSON instead of a summary.
    #[arg(long)]
    json: bool,
    /// Print nothing but errors.
    #[arg(long)]
    quiet: bool,
}

fn config_from(args: &FitArgs) -> isosbestic::Result<FitRunConfig> {
    let mut config = match &args.config {
        Some(path) => {
            let text = std::fs::read_to_string(path).map_err(|source| isosbestic::Error::Input {
                path: path.clone(),
                source,
            })?;
            parse_config(path, &text)?
        }
        None => {
            let model = args
                .model
                .clone()
                .ok_or_else(|| crate::usage("--model is required without --config"))?;
            FitRunConfig {
                data: args.data.files()?,
                model,
                preprocess: Default::default(),
                fit: Default::default(),
                candidates: Vec::new(),
                density_table: None,
            }
        }
    };
    if args.data.given() {
        config.data = args.data.files()?;
    }
    if let Some(m) = &args.model {
        config.model = m.clone();
    }
    if let Some(b) = args.baseline {
        config.fit.baseline = match b {
            BaselineArg::None => Baseline::None,
            BaselineArg::Offset => Baseline::Offset,
            BaselineArg::OffsetAndSlope => Baseline::OffsetAndSlope,
        };
    }
    let reference_k = args.spectra_reference_c.map_or(298.15, |c| c + 273.15);
    if let Some(o) = args.spectra_temperature {
        config.fit.spectra_temperature = match o {
            SpectraTArg::Constant => SpectraTemperature::Constant,
            SpectraTArg::Linear => SpectraTemperature::Linear { reference_k },
            SpectraTArg::Quadratic => SpectraTemperature::Quadratic { reference_k },
        };
    }
    let expansion = args.expansion.expansion();
    if let Some(basis) = &expansion {
        config.fit.concentrations = basis.clone();
    }
    if let Some(path) = &args.expansion.density_table {
        config.density_table = Some(path.clone());
    } else if expansion.is_some() {
        // an explicit --expansion replaces a density table from the configuration file
        config.density_table = None;
    }
    if let Some(a) = args.medium.activity() {
        config.fit.activity = a;
    }
    if let Some(i) = args.medium.medium_ionic_strength() {
        config.fit.medium_ionic_strength = i;
    }
    if let Some(s) = args.medium.scale() {
        config.fit.concentration_scale = s;
    }
    if let Some(n) = args.noise {
        config.fit.known_noise = Some(n);
    }
    if args.non_negative_spectra {
        config.fit.spectra_sign = SpectraSign::NonNegative;
    }
    if let Some(w) = args.absorbance_weights {
        config.fit.weighting = w;
    }
    if let Some(w) = &args.window {
        config.preprocess.window = Some([w[0], w[1]]);
    }
    // candidate models: the flags add to those of the configuration file
    config.candidates.extend(args.candidates.iter().cloned());
    Ok(config)
}

/// `FLOOR_AU,RELATIVE` → absorbance weights (a usage error, exit code 2, otherwise).
fn parse_absorbance_weights(text: &str) -> Result<Weighting, String> {
    let bad = || format!("expected FLOOR_AU,RELATIVE (two numbers, e.g. 0.001,0.01), got '{text}'");
    let (floor, relative) = text.split_once(',').ok_or_else(bad)?;
    let floor_au: f64 = floor.trim().parse().map_err(|_| bad())?;
    let relative: f64 = relative.trim().parse().map_err(|_| bad())?;
    let w = Weighting::Absorbance { floor_au, relative };
    w.check().map_err(|e| e.to_string())?;
    Ok(w)
}

/// Parses a run configuration (messages keep the file's line numbers).
fn parse_config(path: &Path, text: &str) -> isosbestic::Result<FitRunConfig> {
    toml::from_str::<FitRunConfig>(text).map_err(|e| crate::usage(format!("{}: {e}", path.display())))
}

pub fn run(args: &FitArgs) -> isosbestic::Result<ExitCode> {
    let config = config_from(args)?;
    let (report, set) = run_fit_with_bar(args, &config)?;
    write_fit_outputs(&args.out, &report, args.force)?;
    write_fit_page(&args.out, &report, &set, &crate::utc_timestamp(), args.force)?;
    if args.json {
        let doc = isosbestic::report::tables::to_json_document("fit-report", &report);
        println!("{}", serde_json::to_string_pretty(&doc).unwrap_or_default());
    } else if !args.quiet {
        print!("{report}");
        println!("\nwrote {}", args.out.display());
    }
    if let Some(replicates) = args.bootstrap {
        run_bootstrap(args, &config, &report, &set, replicates)?;
    }
    Ok(if report.fit.termination.converged() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(crate::EXIT_CHECK_FAILED)
    })
}

/// The fit (and its candidate models) with a progress bar on stderr for the start search and
/// the solver runs (hidden when stderr is not a terminal or with --quiet/--json).
fn run_fit_with_bar(
    args: &FitArgs,
    config: &FitRunConfig,
) -> isosbestic::Result<(isosbestic::report::fit::FitReport, isosbestic::data::SpectraSet)> {
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use isosbestic::report::fit::{RunProgress, run_fit_with_progress};
    use isosbestic::resolve::hard::FitProgress;
    use std::io::IsTerminal;
    let bar = ProgressBar::new(0);
    if args.quiet || args.json || !std::io::stderr().is_terminal() {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    } else if let Ok(style) = ProgressStyle::with_template("fit {prefix} {bar:30} {pos}/{len} {msg}") {
        bar.set_style(style);
    }
    let progress = |p: RunProgress| {
        bar.set_prefix(format!("model {}/{}", p.model + 1, p.models));
        match p.fit {
            FitProgress::StartsScored { done, total } => {
                bar.set_length(total as u64);
                bar.set_position(done as u64);
                bar.set_message("starting points scored");
            }
            FitProgress::SolverRun { run } => bar.set_message(format!("solver run {run}")),
            _ => bar.set_message("summarising"),
        }
    };
    let result = run_fit_with_progress(config, &progress);
    bar.finish_and_clear();
    result
}

/// Bootstrap of a finished fit, with a progress bar on stderr (hidden when stderr is not a
/// terminal or with --quiet/--json).
fn run_bootstrap(
    args: &FitArgs,
    config: &FitRunConfig,
    report: &isosbestic::report::fit::FitReport,
    set: &isosbestic::data::SpectraSet,
    replicates: usize,
) -> isosbestic::Result<()> {
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use isosbestic::resolve::hard::bootstrap::{BootstrapKind, BootstrapOptions, bootstrap};
    use std::io::IsTerminal;
    let model = isosbestic::report::fit::read_model(&config.model)?;
    let target = args.out.join("bootstrap.json");
    isosbestic::report::fit::guard_outputs(std::slice::from_ref(&target), &report.inputs, args.force)?;
    let bar = ProgressBar::new(replicates as u64);
    if args.quiet || args.json || !std::io::stderr().is_terminal() {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    } else if let Ok(style) =
        ProgressStyle::with_template("bootstrap {bar:40} {pos}/{len} replicates, {eta} left")
    {
        bar.set_style(style);
    }
    let options = BootstrapOptions {
        replicates,
        kind: match args.bootstrap_kind {
            BootstrapKindArg::Residual => BootstrapKind::Residual,
            BootstrapKindArg::Wild => BootstrapKind::Wild,
        },
        seed: args.seed,
        threads: args.threads,
    };
    let progress = |done: usize, _total: usize| bar.set_position(done as u64);
    let result = bootstrap(set, &model, &config.fit, &report.fit, options, &progress)?;
    bar.finish_and_clear();
    isosbestic::report::tables::write_json(&target, "bootstrap", &result)?;
    if !args.quiet && !args.json {
        println!("\nbootstrap ({replicates} replicates, {} failed):", result.failed);
        for t in &result.thermodynamics {
            println!(
                "  {:<10} ΔH° sd {:.3} kJ/mol (95 % {:.3} … {:.3}),  ΔS° sd {:.2} J/(K mol)",
                t.species,
                t.dh_j_mol.standard_deviation / 1e3,
                t.dh_j_mol.percentile_2_5 / 1e3,
                t.dh_j_mol.percentile_97_5 / 1e3,
                t.ds_j_k_mol.standard_deviation
            );
        }
    }
    Ok(())
}
