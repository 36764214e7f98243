//! `isosbestic compare`.

use clap::Args;
use isosbestic::report::compare::{
    CompareParams, SpeciesMap, Uncomparable, compare_files, write_comparison_outputs,
};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
    isosbestic compare --fit results/demo --reference data/reference/absorptivities.csv \\\n      \
    --map '[Ni(H2O)6]2+=Ni' --out results/demo/compare\n  \
    isosbestic compare --fit results/demo/pure_spectra.csv --reference my_refs.csv --strict\n\n\
    The reference table (CSV) has the columns species, wavelength_nm, epsilon_L_mol_cm,\n\
    tolerance ('20%' relative or '1.5' absolute, L mol⁻¹ cm⁻¹), source and optionally\n\
    from_memory (true/false). A row passes when |ε fitted − ε reference| ≤ tolerance; Δ/σ is the\n\
    difference over √(SE² + tolerance²). The fitted ε is interpolated linearly between grid\n\
    points. Rows naming species that were not fitted, or wavelengths outside the fitted range,\n\
    are listed as not comparable (with --strict they are errors).\n\n\
    Exit codes: 0 every compared row passed; 1 a row failed; 2 bad input or nothing comparable.")]
pub struct CompareArgs {
    /// Fit output folder (its pure_spectra.csv is used) or a pure_spectra.csv file.
    #[arg(long, value_name = "DIR|CSV")]
    fit: PathBuf,
    /// Reference absorptivity table (CSV).
    #[arg(long, value_name = "CSV")]
    reference: PathBuf,
    /// Compare the reference species REF as the fitted species MODEL (repeatable).
    #[arg(long = "map", value_name = "REF=MODEL")]
    map: Vec<String>,
    /// Refuse reference rows that cannot be compared instead of listing them.
    #[arg(long)]
    strict: bool,
    /// Write comparison.csv and comparison.json into this folder.
    #[arg(long, value_name = "DIR")]
    out: Option<PathBuf>,
    /// Overwrite outputs of an earlier comparison in --out.
    #[arg(long)]
    force: bool,
    /// Print the comparison as JSON instead of a table.
    #[arg(long)]
    json: bool,
    /// Print nothing but errors.
    #[arg(long)]
    quiet: bool,
}

pub fn run(args: &CompareArgs) -> isosbestic::Result<ExitCode> {
    let mut map = SpeciesMap::new();
    for entry in &args.map {
        map = map.with_entry(entry)?;
    }
    let params = CompareParams::default().map(map).uncomparable(if args.strict {
        Uncomparable::Refuse
    } else {
        Uncomparable::Skip
    });
    let comparison = compare_files(&args.fit, &args.reference, &params)?;
    if let Some(out) = &args.out {
        write_comparison_outputs(out, &comparison, args.force)?;
    }
    if args.json {
        let doc = isosbestic::report::tables::to_json_document("comparison", &comparison);
        println!("{}", serde_json::to_string_pretty(&doc).unwrap_or_default());
    } else if !args.quiet {
        println!("{comparison}");
        if let Some(out) = &args.out {
            println!("wrote {}", out.display());
        }
    }
    Ok(if comparison.all_passed() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(crate::EXIT_CHECK_FAILED)
    })
}
