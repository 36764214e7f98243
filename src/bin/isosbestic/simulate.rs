//! `isosbestic simulate`.

use crate::medium::MediumArgs;
use clap::Args;
use isosbestic::report::fit::{checksum, guard_outputs, read_model};
use isosbestic::report::tables::{write_json, write_samples_table, write_spectra_table};
use isosbestic::simulate::{SimulationMedium, SimulationPlan, simulate_in_medium};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
    isosbestic simulate --model data/demo/model_truth.toml --plan data/demo/plan.toml --out planned\n  \
    isosbestic simulate --model charged.toml --plan plan.toml --activity davies --medium-ionic-strength 0.1 --out planned\n\n\
    Writes spectra.csv and samples.csv (readable by inspect and fit) and truth.json (true\n\
    concentrations and pure spectra). The model's parameter values are the truth simulated;\n\
    with --activity they are thermodynamic constants, and each sample's speciation is solved\n\
    at its self-consistent ionic strength (the model's components need charges).")]
pub struct SimulateArgs {
    /// Equilibrium model with the parameter values to simulate (TOML or JSON).
    #[arg(long, value_name = "FILE")]
    model: PathBuf,
    /// Simulation plan (TOML): wavelengths, temperatures, series, spectra, noise, seed.
    #[arg(long, value_name = "TOML")]
    plan: PathBuf,
    /// Activity corrections, background electrolyte, scale of the model's constants.
    #[command(flatten)]
    medium: MediumArgs,
    /// Output folder.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Overwrite outputs of an earlier run in the same folder.
    #[arg(long)]
    force: bool,
    /// Print nothing but errors.
    #[arg(long)]
    quiet: bool,
}

pub fn run(args: &SimulateArgs) -> isosbestic::Result<ExitCode> {
    let model = read_model(&args.model)?;
    let text = std::fs::read_to_string(&args.plan).map_err(|source| isosbestic::Error::Input {
        path: args.plan.clone(),
        source,
    })?;
    let plan: SimulationPlan =
        toml::from_str(&text).map_err(|e| crate::usage(format!("{}: {e}", args.plan.display())))?;
    let medium = SimulationMedium {
        activity: args.medium.activity().unwrap_or_default(),
        medium_ionic_strength: args.medium.medium_ionic_strength().unwrap_or(0.0),
        concentration_scale: args.medium.scale().unwrap_or_default(),
    };
    let sim = simulate_in_medium(&model, &plan, &medium)?;
    std::fs::create_dir_all(&args.out).map_err(|source| isosbestic::Error::Output {
        path: args.out.clone(),
        source,
    })?;
    let targets: Vec<PathBuf> = ["spectra.csv", "samples.csv", "truth.json"]
        .iter()
        .map(|n| args.out.join(n))
        .collect();
    let inputs = vec![checksum(&args.model)?, checksum(&args.plan)?];
    guard_outputs(&targets, &inputs, args.force)?;
    write_spectra_table(&sim.set, &targets[0])?;
    write_samples_table(&sim.set, &targets[1])?;
    write_json(&targets[2], "simulation-truth", &sim)?;
    if !args.quiet {
        println!(
            "simulated {} samples × {} wavelengths into {}",
            sim.set.n_samples(),
            sim.set.n_wavelengths(),
            args.out.display()
        );
    }
    Ok(ExitCode::SUCCESS)
}
