//! Load a data set, fit the equilibrium model globally and print ΔH°, ΔS° with uncertainties.
//!
//! Run: `cargo run --example fit_demo` (uses data/demo/, an invented Ni(II)–bromide scenario).

use isosbestic::data::{DataFiles, load};
use isosbestic::report::fit::read_model;
use isosbestic::resolve::hard::{self, Baseline, ConcentrationBasis, HardFitParams};
use isosbestic::thermo::SolventDensity;
use std::path::Path;

fn run() -> isosbestic::Result<()> {
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo");
    let set = load(&DataFiles::csv(
        demo.join("spectra.csv"),
        demo.join("samples.csv"),
    ))?;
    let model = read_model(&demo.join("model.toml"))?;
    let params = HardFitParams {
        baseline: Baseline::Offset,
        concentrations: ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        ..HardFitParams::default()
    };
    let fit = hard::fit(&set, &model, &params)?;
    println!(
        "{:?} after {} iterations, residual sd {:.2e} AU",
        fit.termination, fit.iterations, fit.residual_sd
    );
    for t in &fit.thermodynamics {
        let se = t.standard.standard_errors();
        println!(
            "{:<6} ΔH° = {:7.3} ± {:.3} kJ/mol   ΔS° = {:7.2} ± {:.2} J/(K mol)",
            t.species,
            t.standard.dh_j_mol / 1e3,
            se[1] / 1e3,
            t.standard.ds_j_k_mol,
            se[2]
        );
    }
    Ok(())
}

fn main() {
    if let Err(e) = run() {
        eprintln!("error: {e}");
        std::process::exit(2);
    }
}
