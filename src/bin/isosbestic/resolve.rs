//! `isosbestic resolve`.

use crate::input::DataArgs;
use crate::medium::{ExpansionArgs, MediumArgs};
use clap::{Args, ValueEnum};
use isosbestic::data::load;
use isosbestic::report::fit::{checksum, guard_outputs, read_model};
use isosbestic::report::tables::{Table, format_float, write_json};
use isosbestic::resolve::soft::{
    Hybrid, HybridSpecies, InitialEstimate, SoftParams, SoftTermination, Unimodality, resolve,
};
use isosbestic::speciation::{Optics, ValidModel};
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
#[command(after_help = "Examples:\n  \
    isosbestic resolve --spectra data/demo/spectra.csv --samples data/demo/samples.csv --species 3 --out results/soft\n  \
    isosbestic resolve --spectra s.csv --samples t.csv --species 2 --hybrid-model m.toml --hybrid-species 1=M,2=MX \\\n    \
    --activity davies --medium-ionic-strength 0.1 --out results/hybrid\n\n\
    Soft resolution (MCR-ALS) without an equilibrium model: concentration profiles and pure\n\
    spectra under non-negativity (NNLS), optionally unimodal profiles along temperature.\n\
    Outputs: soft_resolution.json, soft_concentrations.csv, soft_spectra.csv. The profiles and\n\
    spectra are determined only up to the rotational ambiguity the constraints leave.\n\n\
    With --hybrid-model, the profiles of the mapped species follow the equilibrium model, whose\n\
    free parameters are refitted at every iteration (reported in soft_resolution.json). The\n\
    model's speciation takes the same medium flags as `fit`: --activity, --medium-ionic-strength,\n\
    --scale, --expansion, --density-table; they are refused without --hybrid-model.")]
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
    /// Hybrid hard–soft option: an equilibrium model (TOML or JSON) that the profiles of the
    /// mapped species follow; its free parameters are refitted at every iteration.
    #[arg(long, value_name = "FILE")]
    hybrid_model: Option<PathBuf>,
    /// Resolved species K (1-based, as the species_K output columns) follows model species
    /// NAME; repeatable or comma-separated. Default: the model's absorbing species in model
    /// order, one per resolved species.
    #[arg(long, value_name = "K=NAME", value_delimiter = ',', requires = "hybrid_model")]
    hybrid_species: Vec<String>,
    /// Thermal expansion of the hybrid model's totals (--expansion, --density-table).
    #[command(flatten)]
    expansion: ExpansionArgs,
    /// Activity corrections, background electrolyte, scale of the hybrid model's constants.
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

/// Parses `K=NAME` (K 1-based) into a hybrid species mapping.
fn parse_mapping(text: &str, n_species: usize) -> isosbestic::Result<HybridSpecies> {
    let bad = || {
        crate::usage(format!(
            "--hybrid-species {text:?}: expected K=NAME with K a resolved species 1…{n_species} and NAME a model species"
        ))
    };
    let (k, name) = text.split_once('=').ok_or_else(bad)?;
    let k: usize = k.trim().parse().map_err(|_| bad())?;
    let name = name.trim();
    if k == 0 || k > n_species || name.is_empty() {
        return Err(bad());
    }
    Ok(HybridSpecies {
        resolved: k - 1,
        model_species: name.to_string(),
    })
}

/// The hybrid option from the flags (`None` without --hybrid-model, when every medium flag
/// is refused).
fn hybrid_from(args: &ResolveArgs) -> isosbestic::Result<Option<Hybrid>> {
    let Some(path) = &args.hybrid_model else {
        let given: Vec<&str> = args
            .expansion
            .given()
            .into_iter()
            .chain(args.medium.given())
            .collect();
        if !given.is_empty() {
            return Err(crate::usage(format!(
                "{} only applies to the hybrid option's equilibrium model: give --hybrid-model \
                 (a soft resolution without a model has no speciation to correct)",
                given.join(", ")
            )));
        }
        return Ok(None);
    };
    let model: ValidModel = read_model(path)?;
    let species = if args.hybrid_species.is_empty() {
        let absorbing: Vec<&str> = model
            .species()
            .iter()
            .filter(|s| s.optics == Optics::Absorbing)
            .map(|s| s.name.as_str())
            .collect();
        if absorbing.len() != args.species {
            return Err(crate::usage(format!(
                "{}: the model has {} absorbing species ({}) for --species {}; map them with \
                 --hybrid-species K=NAME",
                path.display(),
                absorbing.len(),
                absorbing.join(", "),
                args.species
            )));
        }
        absorbing
            .iter()
            .enumerate()
            .map(|(k, name)| HybridSpecies {
                resolved: k,
                model_species: (*name).to_string(),
            })
            .collect()
    } else {
        args.hybrid_species
            .iter()
            .map(|t| parse_mapping(t, args.species))
            .collect::<isosbestic::Result<Vec<_>>>()?
    };
    let mut hybrid = Hybrid::new(model.as_model().clone(), species);
    if let Some(basis) = args.expansion.basis()? {
        hybrid.concentrations = basis;
    }
    if let Some(a) = args.medium.activity() {
        hybrid.activity = a;
    }
    if let Some(i) = args.medium.medium_ionic_strength() {
        hybrid.medium_ionic_strength = i;
    }
    if let Some(s) = args.medium.scale() {
        hybrid.concentration_scale = s;
    }
    Ok(Some(hybrid))
}

pub fn run(args: &ResolveArgs) -> isosbestic::Result<ExitCode> {
    let files = args.data.files()?;
    let hybrid = hybrid_from(args)?;
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
        hybrid,
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
        .chain(&args.hybrid_model)
        .chain(&args.expansion.density_table)
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
        if let Some(h) = &soft.hybrid {
            println!("hybrid model parameters (last fit: {:?}):", h.last_fit);
            for p in &h.parameters {
                println!("  {:<10} {:<14} {}", p.species, p.name, format_float(p.value));
            }
        }
        println!("wrote {}", args.out.display());
    }
    Ok(if matches!(soft.termination, SoftTermination::Converged) {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(crate::EXIT_CHECK_FAILED)
    })
}
