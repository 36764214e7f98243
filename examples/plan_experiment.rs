//! Plan an experiment before measuring: simulate the planned design with the expected noise,
//! fit it, and read off the precision ΔH° would have. Compares two designs: one bromide level
//! against two.
//!
//! Run: `cargo run --example plan_experiment`

use isosbestic::report::fit::read_model;
use isosbestic::resolve::hard::{self, ConcentrationBasis, HardFitParams};
use isosbestic::simulate::{SimulationPlan, simulate};
use isosbestic::thermo::SolventDensity;
use std::path::Path;

fn run() -> Result<(), Box<dyn std::error::Error>> {
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo");
    let truth = read_model(&demo.join("model_truth.toml"))?;
    let start = read_model(&demo.join("model.toml"))?;
    let plan: SimulationPlan = toml::from_str(&std::fs::read_to_string(demo.join("plan.toml"))?)?;
    let params = HardFitParams {
        concentrations: ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        ..HardFitParams::default()
    };
    let mut one_level = plan.clone();
    one_level.series.truncate(1);
    for (name, p) in [("two bromide levels", &plan), ("one bromide level", &one_level)] {
        let sim = simulate(&truth, p)?;
        let fit = hard::fit(&sim.set, &start, &params)?;
        println!("{name} ({} spectra):", sim.set.n_samples());
        for t in &fit.thermodynamics {
            let se = t.standard.standard_errors()[1];
            if se.is_finite() {
                println!("  σ(ΔH°) of {:<6} = {:8.3} kJ/mol", t.species, se / 1e3);
            } else {
                println!("  σ(ΔH°) of {:<6}: not determined by this design", t.species);
            }
        }
        if fit.design_rank < fit.design_singular_values.len() {
            println!(
                "  the concentration profiles span only {} of {} dimensions",
                fit.design_rank,
                fit.design_singular_values.len()
            );
        }
    }
    Ok(())
}

fn main() {
    if let Err(e) = run() {
        eprintln!("error: {e}");
        std::process::exit(2);
    }
}
