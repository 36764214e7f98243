//! `isosbestic batch`.

use clap::Args;
use isosbestic::report::batch::{BatchEvent, BatchParams, Redo, SetOutcome, SetStatus, run_batch};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
    isosbestic batch runs/ --out results/\n  \
    isosbestic batch runs/ --out results/ --model shared_model.toml --settings fit_settings.toml --threads 4\n\n\
    A data set is a folder holding fit.toml (a run configuration; paths in it are relative to that\n\
    folder, and data/model may be left out), or spectra.csv and samples.csv. Its model is its own\n\
    or the nearest parent's model.toml, else --model. Each set's report goes to\n\
    <out>/<set path>/, and <out>/batch_summary.csv gets one row per set. A failing set is reported\n\
    and the batch goes on. Rerunning skips sets whose report is complete and whose inputs are\n\
    unchanged (--force redoes all). Exit code 1 when any set failed, 2 on bad usage.")]
pub struct BatchArgs {
    /// Folder searched (recursively) for data sets.
    #[arg(value_name = "ROOT")]
    root: PathBuf,
    /// Output folder: one sub-folder per data set, plus batch_summary.csv.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Equilibrium model for sets that find no model.toml in their folder or a parent folder.
    #[arg(long, value_name = "FILE")]
    model: Option<PathBuf>,
    /// Preprocessing and fit settings (TOML with [preprocess] and [fit]) for sets without fit.toml.
    #[arg(long, value_name = "TOML")]
    settings: Option<PathBuf>,
    /// Worker threads, one data set each (default: all cores).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    threads: Option<u32>,
    /// Redo every data set, replacing outputs already in the output folder.
    #[arg(long)]
    force: bool,
    /// Print nothing but errors and failed data sets.
    #[arg(long)]
    quiet: bool,
}

fn line(o: &SetOutcome) -> String {
    let detail = match o.status {
        SetStatus::Failed => format!(": {}", o.message),
        SetStatus::Skipped => " (complete from an earlier run)".to_string(),
        SetStatus::Ok => o
            .result
            .as_ref()
            .map(|r| {
                r.thermodynamics
                    .iter()
                    .map(|t| match (t.dh_j_mol, t.se_dh_j_mol) {
                        (Some(h), Some(se)) => {
                            format!("{} ΔH° {:.2} ± {:.2} kJ/mol", t.species, h / 1e3, se / 1e3)
                        }
                        (Some(h), None) => format!("{} ΔH° {:.2} kJ/mol", t.species, h / 1e3),
                        _ => format!("{} ΔH° undetermined", t.species),
                    })
                    .collect::<Vec<_>>()
                    .join(", ")
            })
            .map(|s| format!(": {s}"))
            .unwrap_or_default(),
    };
    format!(
        "{:<7} {} ({:.1} s){detail}",
        o.status.to_string(),
        o.data_set,
        o.seconds
    )
}

pub fn run(args: &BatchArgs) -> isosbestic::Result<ExitCode> {
    use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
    use std::io::IsTerminal;
    let params = BatchParams {
        shared_model: args.model.clone(),
        settings: args.settings.clone(),
        threads: args.threads.map(|n| n as usize),
        redo: if args.force { Redo::All } else { Redo::Incomplete },
        timestamp: crate::utc_timestamp(),
        ..BatchParams::new(&args.root, &args.out)
    };
    let bar = ProgressBar::new(0);
    if args.quiet || !std::io::stderr().is_terminal() {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    } else if let Ok(style) = ProgressStyle::with_template("batch {bar:40} {pos}/{len} data sets, {eta} left")
    {
        bar.set_style(style);
    }
    let progress = |event: BatchEvent<'_>| match event {
        BatchEvent::Discovered { total } => bar.set_length(total as u64),
        BatchEvent::Finished { outcome, .. } => {
            bar.suspend(|| {
                if outcome.status == SetStatus::Failed {
                    eprintln!("isosbestic: {}", line(outcome));
                } else if !args.quiet {
                    println!("{}", line(outcome));
                }
            });
            bar.inc(1);
        }
        _ => {}
    };
    let report = run_batch(&params, &progress)?;
    bar.finish_and_clear();
    if !args.quiet {
        println!("\n{report}");
    }
    Ok(if report.all_succeeded() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(crate::EXIT_CHECK_FAILED)
    })
}
