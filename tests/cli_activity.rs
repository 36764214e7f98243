//! End-to-end tests of `isosbestic fit` with a density table (`--density-table`, or
//! `density_table` in the run configuration), the molal scale (`--scale`) and activity
//! corrections (`--activity`), run in temporary folders.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_isosbestic"))
}

fn demo(file: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo").join(file)
}

fn run(cmd: &mut Command) -> (i32, String, String) {
    let Output {
        status,
        stdout,
        stderr,
    } = cmd.output().expect("binary runs");
    (
        status.code().unwrap_or(-1),
        String::from_utf8_lossy(&stdout).into_owned(),
        String::from_utf8_lossy(&stderr).into_owned(),
    )
}

/// `fit` of the demo data with extra flags; returns (exit code, stderr, report JSON if any).
fn fit_demo(out: &Path, extra: &[&str]) -> (i32, String, Option<serde_json::Value>) {
    let (code, _, err) = run(bin()
        .args(["fit", "--quiet", "--baseline", "offset", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(demo("samples.csv"))
        .arg("--model")
        .arg(demo("model.toml"))
        .args(extra)
        .arg("--out")
        .arg(out));
    let report = std::fs::read_to_string(out.join("report.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok());
    (code, err, report)
}

/// The fitted value of `species`' `name` parameter.
fn parameter(report: &serde_json::Value, species: &str, name: &str) -> f64 {
    report["data"]["fit"]["parameters"]
        .as_array()
        .expect("parameters")
        .iter()
        .find(|p| p["parameter"]["species_name"] == species && p["parameter"]["name"] == name)
        .and_then(|p| p["value"].as_f64())
        .unwrap_or_else(|| panic!("no {species} {name} in {report}"))
}

/// Water densities by Kell's equation (J. Chem. Eng. Data 20 (1975) 97, Eq. 16) every 5 °C
/// from 0 to 100 °C, as a density table file.
fn kell_table(path: &Path) {
    let mut text = String::from("# water, Kell (1975) Eq. 16\ntemperature_C,density_kg_m3\n");
    for k in 0..=20 {
        let t = 5.0 * f64::from(k);
        let rho = isosbestic::thermo::kell_water_density_kg_m3(273.15 + t);
        text.push_str(&format!("{t},{rho:.6}\n"));
    }
    std::fs::write(path, text).unwrap();
}

#[test]
fn a_density_table_of_water_gives_the_fit_of_the_built_in_water_density() {
    let dir = tempfile::tempdir().unwrap();
    let table = dir.path().join("water.csv");
    kell_table(&table);
    let (code, err, water) = fit_demo(&dir.path().join("water"), &["--expansion", "water"]);
    assert_eq!(code, 0, "{err}");
    let table_arg = table.to_str().unwrap();
    let (code, err, tabled) = fit_demo(&dir.path().join("table"), &["--density-table", table_arg]);
    assert_eq!(code, 0, "{err}");
    let (water, tabled) = (water.unwrap(), tabled.unwrap());
    // the table interpolates Kell within 0.01 kg/m³ (1e-5 relative) between 10 and 90 °C (unit
    // test in src/thermo/density.rs), far below what moves ΔH° by 1e-4 relative
    for (species, name) in [("NiBr", "dh_ref"), ("NiBr2", "dh_ref"), ("NiBr2", "log_beta_ref")] {
        let (a, b) = (
            parameter(&water, species, name),
            parameter(&tabled, species, name),
        );
        assert!(
            (a - b).abs() <= 1e-4 * a.abs().max(1.0),
            "{species} {name}: {a} vs {b}"
        );
    }
    // the report records the table itself, so the run can be reproduced from it
    let basis = &tabled["data"]["config"]["fit"]["concentrations"]["thermal_expansion"];
    assert_eq!(basis["kind"], "table", "{basis}");
    assert_eq!(basis["name"], "water.csv");
    // ... and lists it among the checksummed inputs
    let inputs = tabled["data"]["inputs"].as_array().unwrap();
    assert!(
        inputs
            .iter()
            .any(|i| i["path"].as_str().is_some_and(|p| p.ends_with("water.csv"))
                && i["sha256"].as_str().is_some_and(|h| h.len() == 64)),
        "{inputs:?}"
    );

    // the same through the run configuration file
    let config = dir.path().join("fit.toml");
    std::fs::write(
        &config,
        format!(
            "model = {:?}\ndensity_table = {:?}\n[data]\nspectra = {{ csv = {:?} }}\nsamples = {:?}\n\
             [fit]\nbaseline = \"offset\"\n",
            demo("model.toml"),
            table,
            demo("spectra.csv"),
            demo("samples.csv")
        ),
    )
    .unwrap();
    let out = dir.path().join("config");
    let (code, _, err) = run(bin()
        .args(["fit", "--quiet", "--config"])
        .arg(&config)
        .arg("--out")
        .arg(&out));
    assert_eq!(code, 0, "{err}");
    let from_config: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    let a = parameter(&tabled, "NiBr2", "dh_ref");
    let b = parameter(&from_config, "NiBr2", "dh_ref");
    assert!((a - b).abs() <= 1e-9 * a.abs(), "{a} vs {b}");
}

#[test]
fn a_bad_density_table_exits_with_code_2_naming_file_line_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let table = dir.path().join("brine.csv");
    std::fs::write(
        &table,
        "temperature_C,density_kg_m3\n0,1070.2\n50,10x5\n100,1040\n",
    )
    .unwrap();
    let (code, err, report) = fit_demo(
        &dir.path().join("out"),
        &["--density-table", table.to_str().unwrap()],
    );
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("brine.csv") && err.contains("line 3") && err.contains("column 2"),
        "{err}"
    );
    assert!(report.is_none());
    // a table that does not cover the measured temperatures (demo: 5–90 °C) is refused too
    std::fs::write(&table, "temperature_C,density_kg_m3\n20,1060\n60,1045\n").unwrap();
    let (code, err, _) = fit_demo(
        &dir.path().join("out2"),
        &["--density-table", table.to_str().unwrap()],
    );
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("brine.csv") && err.contains("no extrapolation"),
        "{err}"
    );
    // --density-table is the thermal-expansion density: it cannot be combined with --expansion
    let (code, err, _) = fit_demo(
        &dir.path().join("out3"),
        &["--density-table", table.to_str().unwrap(), "--expansion", "none"],
    );
    assert_eq!(code, 2, "{err}");
}

/// A charged version of a metal–halide model: M²⁺ + X⁻ ⇌ MX⁺, M²⁺ + 2X⁻ ⇌ MX₂ (van 't Hoff).
fn charged_model_text(lb1: f64, dh1: f64, lb2: f64, dh2: f64) -> String {
    format!(
        r#"components = [{{ name = "M", absorbs = true, charge = 2 }}, {{ name = "X", absorbs = false, charge = -1 }}]
[[species]]
name = "MX"
stoichiometry = {{ M = 1, X = 1 }}
absorbs = true
law = {{ kind = "van_t_hoff", log_beta_ref = {{ value = {lb1} }}, dh_ref = {{ value = {dh1} }} }}
[[species]]
name = "MX2"
stoichiometry = {{ M = 1, X = 2 }}
absorbs = true
law = {{ kind = "van_t_hoff", log_beta_ref = {{ value = {lb2} }}, dh_ref = {{ value = {dh2} }} }}
"#
    )
}

/// Noise-free data simulated with Davies activity coefficients and a 0.1 mol/L background
/// electrolyte, written as spectra.csv and samples.csv into `dir`.
fn simulate_with_activity(dir: &Path) {
    use isosbestic::simulate::{SimulationMedium, simulate_in_medium};
    let truth = isosbestic::speciation::EquilibriumModel::from_toml_str(&charged_model_text(
        1.2, 12_000.0, 1.9, 30_000.0,
    ))
    .unwrap()
    .check()
    .unwrap();

    let plan = isosbestic::testing::stepwise_activity_plan();
    let medium = SimulationMedium {
        activity: isosbestic::thermo::ActivityCorrection::Davies(isosbestic::thermo::Davies::default()),
        medium_ionic_strength: 0.1,
        ..SimulationMedium::default()
    };
    let sim = simulate_in_medium(&truth, &plan, &medium).unwrap();
    isosbestic::report::tables::write_spectra_table(&sim.set, &dir.join("spectra.csv")).unwrap();
    isosbestic::report::tables::write_samples_table(&sim.set, &dir.join("samples.csv")).unwrap();
}

#[test]
fn activity_from_the_command_line_and_the_configuration_recovers_thermodynamic_constants() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path();
    simulate_with_activity(data);
    let model = data.join("model.toml");
    std::fs::write(&model, charged_model_text(0.5, 0.0, 1.0, 0.0)).unwrap();
    let fit = |out: &str, extra: &[&str]| {
        let out = data.join(out);
        let (code, _, err) = run(bin()
            .args(["fit", "--quiet", "--expansion", "water", "--spectra"])
            .arg(data.join("spectra.csv"))
            .arg("--samples")
            .arg(data.join("samples.csv"))
            .arg("--model")
            .arg(&model)
            .args(extra)
            .arg("--out")
            .arg(&out));
        assert_eq!(code, 0, "{extra:?}: {err}");
        serde_json::from_str::<serde_json::Value>(&std::fs::read_to_string(out.join("report.json")).unwrap())
            .unwrap()
    };
    let with = fit(
        "davies",
        &["--activity", "davies", "--medium-ionic-strength", "0.1"],
    );
    // truth of the simulation above; the CSV files carry the absorbances rounded, hence 1e-4
    for (species, name, expected) in [
        ("MX", "log_beta_ref", 1.2),
        ("MX", "dh_ref", 12_000.0),
        ("MX2", "log_beta_ref", 1.9),
        ("MX2", "dh_ref", 30_000.0),
    ] {
        let v = parameter(&with, species, name);
        assert!(
            (v - expected).abs() <= 1e-4 * expected.abs(),
            "{species} {name}: {v}"
        );
    }
    assert_eq!(with["data"]["config"]["fit"]["activity"]["model"], "davies");
    // without the correction the constants are conditional ones, clearly different
    let without = fit("none", &["--activity", "none"]);
    assert!((parameter(&without, "MX", "log_beta_ref") - 1.2).abs() > 0.1);
    // the molal scale is accepted and recorded
    let molal = fit(
        "molal",
        &[
            "--activity",
            "extended-debye-huckel",
            "--medium-ionic-strength",
            "0.1",
            "--scale",
            "molal",
        ],
    );
    assert_eq!(
        molal["data"]["config"]["fit"]["concentration_scale"]["scale"],
        "molal"
    );
    assert_eq!(
        molal["data"]["config"]["fit"]["activity"]["model"],
        "extended_debye_huckel"
    );

    // the same keys in the run configuration
    let config = data.join("fit.toml");
    std::fs::write(
        &config,
        format!(
            "model = {:?}\n[data]\nspectra = {{ csv = {:?} }}\nsamples = {:?}\n[fit]\n\
             concentrations = {{ thermal_expansion = {{ kind = \"water\" }} }}\n\
             activity = {{ model = \"davies\" }}\nmedium_ionic_strength = 0.1\n\
             concentration_scale = {{ scale = \"molar\" }}\n",
            model,
            data.join("spectra.csv"),
            data.join("samples.csv")
        ),
    )
    .unwrap();
    let out = data.join("config");
    let (code, _, err) = run(bin()
        .args(["fit", "--quiet", "--config"])
        .arg(&config)
        .arg("--out")
        .arg(&out));
    assert_eq!(code, 0, "{err}");
    let from_config: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    let (a, b) = (
        parameter(&with, "MX2", "dh_ref"),
        parameter(&from_config, "MX2", "dh_ref"),
    );
    assert!((a - b).abs() <= 1e-9 * a.abs(), "{a} vs {b}");
}

#[test]
fn activity_with_a_model_without_charges_exits_with_code_2_naming_the_species() {
    let dir = tempfile::tempdir().unwrap();
    // the demo model gives no charges
    let (code, err, _) = fit_demo(&dir.path().join("out"), &["--activity", "davies"]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("'Ni'") && err.contains("charge"), "{err}");
    let (code, err, _) = fit_demo(&dir.path().join("out2"), &["--activity", "debye"]);
    assert_eq!(code, 2, "{err}");
}
