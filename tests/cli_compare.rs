//! End-to-end tests of `isosbestic compare`, run on the built binary in temporary folders.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_isosbestic"))
}

fn repo(file: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(file)
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

/// Fits the demo into `dir` (run from the repository root, as data/demo/fit.toml expects).
fn fit_demo(dir: &Path) {
    let (code, _, err) = run(bin()
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(["fit", "--config", "data/demo/fit.toml", "--quiet", "--out"])
        .arg(dir));
    assert_eq!(code, 0, "{err}");
}

/// The cells of the comparison.csv row whose species is `species`, by header name.
fn csv_row(path: &Path, species: &str) -> std::collections::HashMap<String, String> {
    let mut rdr = csv::Reader::from_path(path).unwrap();
    let headers = rdr.headers().unwrap().clone();
    let row = rdr
        .records()
        .map(Result::unwrap)
        .find(|r| r.get(1) == Some(species))
        .unwrap_or_else(|| panic!("no row for {species}"));
    headers
        .iter()
        .map(str::to_string)
        .zip(row.iter().map(str::to_string))
        .collect()
}

#[test]
fn the_demo_aqua_ion_passes_the_shipped_table_and_a_wrong_reference_fails() {
    let dir = tempfile::tempdir().unwrap();
    let fit = dir.path().join("fit");
    fit_demo(&fit);
    let out = dir.path().join("cmp");
    let reference = repo("data/reference/absorptivities.csv");
    let compare = |extra: &[&str]| {
        let mut cmd = bin();
        cmd.arg("compare")
            .arg("--fit")
            .arg(&fit)
            .arg("--reference")
            .arg(&reference)
            .args(["--map", "[Ni(H2O)6]2+=Ni", "--out"])
            .arg(&out)
            .args(extra);
        run(&mut cmd)
    };
    let (code, stdout, err) = compare(&[]);
    assert_eq!(code, 0, "{stdout}{err}");
    assert!(
        stdout.contains("PASS") && stdout.contains("passed 1, failed 0, not comparable 5"),
        "{stdout}"
    );
    let row = csv_row(&out.join("comparison.csv"), "[Ni(H2O)6]2+");
    assert_eq!(row["verdict"], "pass");
    assert_eq!(row["model_species"], "Ni");
    assert_eq!(row["from_memory"], "true");
    let fitted: f64 = row["fitted_epsilon_L_mol_cm"].parse().unwrap();
    // [Ni(H2O)6]2+ ≈ 5.2 L/(mol cm) at 395 nm: from memory (REFERENCES.md, ±20 %); the demo's
    // invented aqua-ion band is 5.2 high at 395 nm (data/demo/make_demo.py).
    assert!((fitted - 5.2).abs() <= 0.2 * 5.2, "{fitted}");
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("comparison.json")).unwrap()).unwrap();
    assert_eq!(doc["kind"], "comparison");
    assert_eq!(doc["data"]["passed"], 1);
    assert_eq!(doc["data"]["not_comparable"], 5);
    assert_eq!(doc["data"]["inputs"].as_array().unwrap().len(), 2);

    // earlier outputs are kept unless --force
    let (code, _, err) = compare(&[]);
    assert_eq!(code, 2);
    assert!(err.contains("comparison.csv") && err.contains("--force"), "{err}");
    let (code, _, err) = compare(&["--force", "--quiet"]);
    assert_eq!(code, 0, "{err}");

    // --strict refuses the rows for species the demo does not have, naming file and line
    let (code, _, err) = compare(&["--force", "--strict"]);
    assert_eq!(code, 2);
    assert!(
        err.contains("absorptivities.csv, line 5") && err.contains("[Co(H2O)6]2+"),
        "{err}"
    );

    // a deliberately wrong reference value (7.0 ± 5 % at 395 nm; the demo's band is 5.2)
    // fails the check: exit code 1. The fitted spectra are given as the file itself.
    let wrong = dir.path().join("wrong.csv");
    std::fs::write(
        &wrong,
        "species,wavelength_nm,epsilon_L_mol_cm,tolerance,source\n\
         Ni,395,7.0,5%,deliberately wrong value for this test\n\
         NiBr2,430,32,8,invented demo truth (data/demo/make_demo.py: NiBr2 band 32 at 430 nm)\n",
    )
    .unwrap();
    let (code, stdout, err) = run(bin()
        .arg("compare")
        .arg("--fit")
        .arg(fit.join("pure_spectra.csv"))
        .arg("--reference")
        .arg(&wrong)
        .arg("--json"));
    assert_eq!(code, 1, "{stdout}{err}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    assert_eq!(doc["data"]["rows"][0]["verdict"], "fail");
    assert_eq!(doc["data"]["rows"][1]["verdict"], "pass"); // |ε_fit − 32| ≤ 8 (invented truth)
    assert_eq!(doc["data"]["failed"], 1);
    let z = doc["data"]["rows"][0]["difference_sigma"].as_f64().unwrap();
    assert!(z < 0.0, "the fit is below the wrong value: {z}");
}

#[test]
fn temperature_dependent_spectra_are_compared_through_their_order_0_columns() {
    let dir = tempfile::tempdir().unwrap();
    let fit = dir.path().join("fit");
    let (code, _, err) = run(bin()
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(["fit", "--config", "data/demo/fit.toml", "--quiet"])
        .args(["--spectra-temperature", "linear", "--out"])
        .arg(&fit));
    assert_eq!(code, 0, "{err}");
    let header = std::fs::read_to_string(fit.join("pure_spectra.csv")).unwrap();
    assert!(header.lines().next().unwrap().contains("eps_Ni_dT"), "{header}");
    let (code, stdout, err) = run(bin()
        .arg("compare")
        .arg("--fit")
        .arg(&fit)
        .arg("--reference")
        .arg(repo("data/reference/absorptivities.csv"))
        .args(["--map", "[Ni(H2O)6]2+=Ni", "--json"]));
    assert_eq!(code, 0, "{stdout}{err}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let row = &doc["data"]["rows"][2];
    assert_eq!(row["model_species"], "Ni");
    // ε₀ is ε at T_ε = 25 °C; the demo's aqua-ion band does not change with T, so it is again
    // near 5.2 at 395 nm (data/demo/make_demo.py; REFERENCES.md from memory, ±20 %).
    let fitted = row["fitted_epsilon"].as_f64().unwrap();
    assert!((fitted - 5.2).abs() <= 0.2 * 5.2, "{fitted}");
}

#[test]
fn bad_reference_tables_and_maps_exit_with_code_2_naming_the_place() {
    let dir = tempfile::tempdir().unwrap();
    // a tiny pure-spectra table in the layout `isosbestic fit` writes
    let spectra = dir.path().join("pure_spectra.csv");
    std::fs::write(
        &spectra,
        "wavelength_nm,eps_M,se_M\n400,2,0.1\n410,4,0.3\n420,8,0.5\n",
    )
    .unwrap();
    let table = dir.path().join("ref.csv");
    let compare = |extra: &[&str]| {
        let mut cmd = bin();
        cmd.arg("compare")
            .arg("--fit")
            .arg(dir.path())
            .arg("--reference")
            .arg(&table)
            .args(extra);
        run(&mut cmd)
    };
    std::fs::write(
        &table,
        "species,wavelength_nm,epsilon_L_mol_cm,tolerance,source\nM,410,4.x,10%,test\n",
    )
    .unwrap();
    let (code, _, err) = compare(&[]);
    assert_eq!(code, 2);
    assert!(
        err.contains("ref.csv, line 2, column 3") && err.contains("4.x"),
        "{err}"
    );

    std::fs::write(
        &table,
        "species,wavelength_nm,epsilon_L_mol_cm,source\nM,410,4,test\n",
    )
    .unwrap();
    let (code, _, err) = compare(&[]);
    assert_eq!(code, 2);
    assert!(err.contains("tolerance"), "{err}");

    // between grid points: 413 nm → 0.7·4 + 0.3·8 = 5.2 (worked by hand), passes 5.0 ± 5 %
    std::fs::write(
        &table,
        "species,wavelength_nm,epsilon_L_mol_cm,tolerance,source\nmetal aqua,413,5.0,5%,test\n",
    )
    .unwrap();
    let (code, out, err) = compare(&["--map", "metal aqua=M"]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("5.2000 ± 0.3600"), "{out}");
    let (code, _, err) = compare(&["--map", "metal aqua=Q"]);
    assert_eq!(code, 2);
    assert!(err.contains("'Q'"), "{err}");
    let (code, _, err) = compare(&["--map", "metal aqua"]);
    assert_eq!(code, 2);
    assert!(err.contains("REFERENCE=MODEL"), "{err}");
    let (code, _, err) = compare(&[]);
    assert_eq!(code, 2);
    assert!(err.contains("nothing to compare"), "{err}");
}
