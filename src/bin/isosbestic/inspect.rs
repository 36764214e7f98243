//! `isosbestic inspect`.

use crate::input::DataArgs;
use clap::Args;
use isosbestic::data::load;
use isosbestic::report::inspect::{InspectParams, inspect};
use std::process::ExitCode;

#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
    isosbestic inspect --spectra data/demo/spectra.csv --samples data/demo/samples.csv\n  \
    isosbestic inspect --jcamp data/demo/jcamp/*.jdx --samples data/demo/samples_jcamp.csv --json")]
pub struct InspectArgs {
    #[command(flatten)]
    data: DataArgs,
    /// Keep only wavelengths in this window (nm).
    #[arg(long, num_args = 2, value_names = ["MIN_NM", "MAX_NM"])]
    window: Option<Vec<f64>>,
    /// Mask absorbances above this limit (default 2).
    #[arg(long, value_name = "A")]
    saturation_limit: Option<f64>,
    /// Known photometric noise (standard deviation, absorbance units) for the noise-based rank.
    #[arg(long, value_name = "AU")]
    noise: Option<f64>,
    /// Largest rank considered.
    #[arg(long, value_name = "N")]
    max_rank: Option<usize>,
    /// Skip evolving factor analysis.
    #[arg(long)]
    no_evolving: bool,
    /// Print the report as JSON instead of a table.
    #[arg(long)]
    json: bool,
    /// Also write the report (inspect.json) and its CSV tables into this folder.
    #[arg(long, value_name = "DIR")]
    out: Option<std::path::PathBuf>,
    /// Overwrite outputs of an earlier run in --out.
    #[arg(long)]
    force: bool,
}

pub fn run(args: &InspectArgs) -> isosbestic::Result<ExitCode> {
    let set = load(&args.data.files()?)?;
    let mut params = InspectParams::default();
    if let Some(w) = &args.window {
        params.preprocess.window = Some([w[0], w[1]]);
    }
    if let Some(limit) = args.saturation_limit {
        params.preprocess.saturation_limit = Some(limit);
    }
    if let Some(noise) = args.noise {
        params.factor.known_noise = Some(noise);
    }
    if let Some(k) = args.max_rank {
        params.factor.max_rank = k;
    }
    if args.no_evolving {
        params.factor.evolving = false;
    }
    let report = inspect(&set, &params)?;
    if let Some(dir) = &args.out {
        isosbestic::report::inspect::write_inspect_outputs(dir, &report, args.force)?;
    }
    if args.json {
        let doc = isosbestic::report::tables::to_json_document("inspect", &report);
        println!("{}", serde_json::to_string_pretty(&doc).unwrap_or_default());
    } else {
        print!("{report}");
    }
    Ok(ExitCode::SUCCESS)
}
