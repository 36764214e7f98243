//! `isosbestic vanthoff`.

use clap::{Args, ValueEnum};
use isosbestic::data::csv_io::read_k_table;
use isosbestic::thermo::{HeatCapacityModel, VanThoffParams, Weighting, fit_vant_hoff};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Debug, Clone, Copy, ValueEnum)]
enum HeatCapacityArg {
    /// ΔH° independent of T.
    None,
    /// Constant ΔCp° (Clarke–Glew form).
    Constant,
    /// ΔCp° linear in T.
    Linear,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum WeightingArg {
    /// Weights from the σ column when present, otherwise unweighted.
    Auto,
    /// Ignore σ; errors from the residuals.
    Unweighted,
    /// σ are absolute: errors from σ alone.
    Known,
    /// σ are relative weights; errors scaled by the residuals.
    Relative,
}

#[derive(Debug, Args)]
#[command(after_help = "Example:\n  \
    isosbestic vanthoff --k-table data/demo/k_table.csv --at-c 25 --at-c 60\n\n\
    The K(T) table has a temperature column (temperature_K or temperature_C), one of log10_K,\n\
    ln_K or K, and optionally sigma_log10_K / sigma_ln_K / sigma_K.")]
pub struct VanthoffArgs {
    /// K(T) table (CSV).
    #[arg(long, value_name = "CSV")]
    k_table: PathBuf,
    /// Heat-capacity term.
    #[arg(long, value_enum, default_value = "none")]
    heat_capacity: HeatCapacityArg,
    /// Reference temperature of the heat-capacity form, °C.
    #[arg(long, value_name = "CELSIUS", default_value_t = 25.0)]
    reference_c: f64,
    /// How σ are used.
    #[arg(long, value_enum, default_value = "auto")]
    weighting: WeightingArg,
    /// Also report ΔG°, ΔH°, ΔS° and ln K at these temperatures, °C.
    #[arg(long = "at-c", value_name = "CELSIUS")]
    at_c: Vec<f64>,
    /// Print the fit as JSON.
    #[arg(long)]
    json: bool,
}

pub fn run(args: &VanthoffArgs) -> isosbestic::Result<ExitCode> {
    let table = read_k_table(&args.k_table)?;
    let reference_temperature_k = args.reference_c + 273.15;
    let params = VanThoffParams::default()
        .heat_capacity(match args.heat_capacity {
            HeatCapacityArg::None => HeatCapacityModel::None,
            HeatCapacityArg::Constant => HeatCapacityModel::Constant {
                reference_temperature_k,
            },
            HeatCapacityArg::Linear => HeatCapacityModel::Linear {
                reference_temperature_k,
            },
        })
        .weighting(match args.weighting {
            WeightingArg::Auto => Weighting::Auto,
            WeightingArg::Unweighted => Weighting::Unweighted,
            WeightingArg::Known => Weighting::KnownSigma,
            WeightingArg::Relative => Weighting::RelativeSigma,
        })
        .check()?;
    let fit = fit_vant_hoff(&table.data, &params)?;
    if args.json {
        let doc = isosbestic::report::tables::to_json_document("vanthoff-fit", &fit);
        println!("{}", serde_json::to_string_pretty(&doc).unwrap_or_default());
        return Ok(ExitCode::SUCCESS);
    }
    println!("{fit}");
    for &t_c in &args.at_c {
        let t = t_c + 273.15;
        let (g, h, s, lnk) = (
            fit.delta_g_at(t),
            fit.delta_h_at(t),
            fit.delta_s_at(t),
            fit.ln_k_at(t),
        );
        println!(
            "at {t_c:.1} °C: ln K = {:.4} ± {:.4}, ΔG° = {:.3} ± {:.3} kJ/mol, ΔH° = {:.3} ± {:.3} kJ/mol, ΔS° = {:.2} ± {:.2} J/(K mol)",
            lnk.value,
            lnk.std_error,
            g.value / 1e3,
            g.std_error / 1e3,
            h.value / 1e3,
            h.std_error / 1e3,
            s.value,
            s.std_error
        );
    }
    Ok(ExitCode::SUCCESS)
}
