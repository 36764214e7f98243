//! `isosbestic resolve`.

use crate::input::DataArgs;
use clap::{Args, ValueEnum};
use isosbestic::data::load;
use isosbestic::report::fit::{checksum, guard_outputs};
use isosbestic::report::tables::{Table, format_float, write_json};
use isosbestic::resolve::soft::{InitialEstimate, SoftParams, SoftTermination, Unimodality, resolve};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Debug, Clone, Copy, ValueEnum)]
enum InitialArg {
    /// Evolving factor analysis along temperature within each series.
    Efa,
    /// Purest wavelengths.
    Purest,
}

#[derive(Debug, Args)]
#[command(after_help = "Example:\n  \
    isosbestic resolve --spectra data/demo/spectra.csv --samples data/demo/samples.csv --species 3 --out results/soft\n\n\
    Soft resolution (MCR-ALS) without an equilibrium model: concentration profiles and pure\n\
    spectra under non-negativity (NNLS), optionally unimodal profiles along temperature.\n\
    Outputs: soft_resolution.json, soft_concentrations.csv, soft_spectra.csv. The profiles and\n\
    spectra are determined only up to the rotational ambiguity the constraints leave.")]
pub struct ResolveArgs {
    #[command(flatten)]
    data: DataArgs,
    /// Number of species to resolve (see `inspect` for the rank estimate).
    #[arg(long, value_name = "N")]
    species: usize,
    /// Initial estimate.
    #[arg(long, value_enum, default_value = "efa")]
    initial: InitialArg,
    /// Constrain each concentration profile to be unimodal along temperature within a series.
    #[arg(long)]
    unimodal: bool,
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

pub fn run(args: &ResolveArgs) -> isosbestic::Result<ExitCode> {
    let files = args.data.files()?;
    let set = load(&files)?;
    let params = SoftParams {
        n_species: args.species,
        initial: match args.initial {
            InitialArg::Efa => InitialEstimate::EvolvingFactors,
            InitialArg::Purest => InitialEstimate::PurestVariables { noise_percent: 3.0 },
        },
        unimodality: if args.unimodal {
            Unimodality::AlongTemperature
        } else {
            Unimodality::Off
        },
        ..SoftParams::default()
    }
    .check()?;
    let soft = resolve(&set, &params)?;
    std::fs::create_dir_all(&args.out).map_err(|source| isosbestic::Error::Output {
        path: args.out.clone(),
        source,
    })?;
    let targets: Vec<PathBuf> = [
        "soft_resolution.json",
        "soft_concentrations.csv",
        "soft_spectra.csv",
    ]
    .iter()
    .map(|n| args.out.join(n))
    .collect();
    let inputs = files
        .paths()
        .iter()
        .map(|p| checksum(p))
        .collect::<isosbestic::Result<Vec<_>>>()?;
    guard_outputs(&targets, &inputs, args.force)?;
    write_json(&targets[0], "soft-resolution", &soft)?;
    let k = soft.concentrations.ncols();
    let mut conc =
        Table::new(std::iter::once("sample_id".to_string()).chain((1..=k).map(|c| format!("species_{c}"))));
    for (i, id) in soft.sample_ids.iter().enumerate() {
        conc.push_row(
            std::iter::once(id.clone()).chain(soft.concentrations.row(i).iter().map(|v| format_float(*v))),
        );
    }
    conc.write_csv(&targets[1])?;
    let mut spectra = Table::new(
        std::iter::once("wavelength_nm".to_string()).chain((1..=k).map(|c| format!("species_{c}"))),
    );
    for (r, &j) in soft.wavelength_indices.iter().enumerate() {
        spectra.push_row(
            std::iter::once(format_float(set.wavelengths_nm()[j]))
                .chain(soft.spectra.row(r).iter().map(|v| format_float(*v))),
        );
    }
    spectra.write_csv(&targets[2])?;
    if !args.quiet {
        println!(
            "soft resolution, {k} species: {:?} after {} iterations; lack of fit {:.4} % ({:.4} % against the PCA reconstruction); explained variance {:.5} %",
            soft.termination,
            soft.iterations,
            soft.lack_of_fit_percent,
            soft.lack_of_fit_pca_percent,
            soft.explained_variance_percent
        );
        println!("wrote {}", args.out.display());
    }
    Ok(if matches!(soft.termination, SoftTermination::Converged) {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(crate::EXIT_CHECK_FAILED)
    })
}
