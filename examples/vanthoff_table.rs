//! van 't Hoff analysis of a K(T) table a lab already has: ΔH°, ΔS°, their correlation, and the
//! centred parametrisation that removes it.
//!
//! Run: `cargo run --example vanthoff_table`

use isosbestic::data::csv_io::read_k_table;
use isosbestic::thermo::{VanThoffParams, fit_vant_hoff};
use std::path::Path;

fn run() -> isosbestic::Result<()> {
    let table = read_k_table(&Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo/k_table.csv"))?;
    let fit = fit_vant_hoff(&table.data, &VanThoffParams::default().check()?)?;
    println!("{fit}");
    let band = fit.band(&[283.15, 318.15, 353.15], 0.95)?;
    for p in band {
        println!(
            "T = {:.2} K: ln K = {:.4} (95 % band {:.4} … {:.4})",
            p.temperature_k, p.ln_k, p.lower, p.upper
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
