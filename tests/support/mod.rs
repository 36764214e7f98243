//! Shared by the fit-report tests: a one- and a two-complex model and a simulation plan
//! whose bands are far apart, written to files for `run_fit`.
#![allow(dead_code)] // each test crate uses part of it

use isosbestic::data::DataFiles;
use isosbestic::report::fit::FitRunConfig;
use isosbestic::report::tables::{write_samples_table, write_spectra_table};
use isosbestic::simulate::{Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
use isosbestic::speciation::{EquilibriumModel, ValidModel};
use std::path::Path;

pub const ONE_COMPLEX: &str = r#"
components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
[[species]]
name = "MX"
stoichiometry = { M = 1, X = 1 }
absorbs = true
law = { kind = "van_t_hoff", log_beta_ref = { value = 0.4 }, dh_ref = { value = 12000.0 } }
"#;

pub const TWO_COMPLEXES: &str = r#"
components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
[[species]]
name = "MX"
stoichiometry = { M = 1, X = 1 }
absorbs = true
law = { kind = "van_t_hoff", log_beta_ref = { value = 0.4 }, dh_ref = { value = 12000.0 } }
[[species]]
name = "MX2"
stoichiometry = { M = 1, X = 2 }
absorbs = true
law = { kind = "van_t_hoff", log_beta_ref = { value = 0.2 }, dh_ref = { value = 20000.0 } }
"#;

pub fn model(text: &str) -> ValidModel {
    EquilibriumModel::from_toml_str(text).unwrap().check().unwrap()
}

pub fn band(c: f64, w: f64, h: f64) -> Band {
    Band {
        centre_nm: c,
        width_nm: w,
        height: h,
        shift_nm_per_k: 0.0,
    }
}

/// Free metal at 420 nm (ε 6), MX at 560 nm (ε 20), MX₂ at 640 nm: the free metal and MX are
/// 140 nm apart (four band widths), so the cross absorption the textbook estimate neglects is
/// about 1e-3 of the free metal's own absorbance.
pub fn plan(species: &[&str]) -> SimulationPlan {
    let spectra = [
        ("M", band(420.0, 30.0, 6.0)),
        ("MX", band(560.0, 35.0, 20.0)),
        ("MX2", band(640.0, 35.0, 30.0)),
    ];
    SimulationPlan {
        seed: 3,
        first_nm: 380.0,
        last_nm: 700.0,
        step_nm: 5.0,
        temperatures_c: vec![10.0, 25.0, 40.0, 55.0, 70.0],
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: false,
        noise: Noise::None,
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: [0.3, 3.0]
            .iter()
            .map(|&x| SeriesPlan {
                label: format!("X{x}"),
                totals_m: [("M".into(), 0.02), ("X".into(), x)].into(),
            })
            .collect(),
        spectra: spectra
            .into_iter()
            .filter(|(s, _)| species.contains(s))
            .map(|(s, b)| PureSpectrum {
                species: s.into(),
                bands: vec![b],
            })
            .collect(),
    }
}

/// Simulates `model_text` into CSV files in `dir` and returns the run configuration.
pub fn write_inputs(dir: &Path, model_text: &str, species: &[&str]) -> FitRunConfig {
    write_inputs_with_noise(dir, model_text, species, Noise::None)
}

/// [`write_inputs`] with noise added to the simulated absorbances.
pub fn write_inputs_with_noise(dir: &Path, model_text: &str, species: &[&str], noise: Noise) -> FitRunConfig {
    let m = model(model_text);
    let sim = simulate(
        &m,
        &SimulationPlan {
            noise,
            ..plan(species)
        },
    )
    .unwrap();
    let (spectra, samples, model_path) = (
        dir.join("spectra.csv"),
        dir.join("samples.csv"),
        dir.join("model.toml"),
    );
    write_spectra_table(&sim.set, &spectra).unwrap();
    write_samples_table(&sim.set, &samples).unwrap();
    std::fs::write(&model_path, model_text).unwrap();
    FitRunConfig {
        data: DataFiles::csv(spectra, samples),
        model: model_path,
        preprocess: Default::default(),
        fit: Default::default(),
        candidates: Vec::new(),
        density_table: None,
    }
}
