//! End-to-end tests of the `isosbestic` binary, run in temporary folders.

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

#[test]
fn inspect_summarises_the_demo_csv_and_jcamp_data() {
    let (code, out, err) = run(bin()
        .args(["inspect", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(demo("samples.csv")));
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("Br-3.0") && out.contains("rank 4"), "{out}");
    let jdx: Vec<PathBuf> = std::fs::read_dir(demo("jcamp"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    let (code, out, err) = run(bin()
        .arg("inspect")
        .arg("--jcamp")
        .args(&jdx)
        .arg("--samples")
        .arg(demo("samples_jcamp.csv"))
        .arg("--json"));
    assert_eq!(code, 0, "{err}");
    let doc: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(doc["kind"], "inspect");
    assert_eq!(doc["data"]["samples"], 18);
    // the same as files: JSON and CSV tables
    let dir = tempfile::tempdir().unwrap();
    let (code, _, err) = run(bin()
        .args(["inspect", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(demo("samples.csv"))
        .arg("--out")
        .arg(dir.path()));
    assert_eq!(code, 0, "{err}");
    let sv = std::fs::read_to_string(dir.path().join("singular_values.csv")).unwrap();
    assert_eq!(sv.lines().count(), 1 + 54); // header + one row per singular value (54 samples)
    let efa = std::fs::read_to_string(dir.path().join("evolving_factors.csv")).unwrap();
    assert_eq!(efa.lines().count(), 1 + 54);
    assert!(dir.path().join("inspect.json").is_file() && dir.path().join("masked_points.csv").is_file());
}

#[test]
fn bad_input_exits_with_code_2_and_names_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("samples.csv");
    std::fs::write(&bad, "sample_id,series,temperature,path_cm,Ni_M\nx,a,25,1,0.1\n").unwrap();
    let (code, _, err) = run(bin()
        .args(["inspect", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(&bad));
    assert_eq!(code, 2);
    assert!(
        err.contains("samples.csv") && err.contains("temperature"),
        "{err}"
    );
    let (code, _, err) = run(bin().args(["inspect", "--samples"]).arg(&bad));
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("--spectra"), "{err}");
}

#[test]
fn fit_writes_its_outputs_and_refuses_to_overwrite_them_or_any_input() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("results");
    let (code, stdout, err) = run(bin()
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(["fit", "--config", "data/demo/fit.toml", "--out"])
        .arg(&out));
    assert_eq!(code, 0, "{err}");
    assert!(stdout.contains("NiBr2") && stdout.contains("ΔH°"), "{stdout}");
    for f in [
        "report.json",
        "parameters.csv",
        "thermodynamics.csv",
        "concentrations.csv",
        "pure_spectra.csv",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    assert_eq!(report["format_version"], 1);
    assert_eq!(report["data"]["inputs"].as_array().unwrap().len(), 3); // spectra, samples, model with checksums
    // a second run into the same folder is refused, with --force it is allowed
    let again = |force: bool| {
        let mut c = bin();
        c.current_dir(env!("CARGO_MANIFEST_DIR"))
            .args(["fit", "--config", "data/demo/fit.toml", "--quiet", "--out"])
            .arg(&out);
        if force {
            c.arg("--force");
        }
        run(&mut c)
    };
    let (code, _, err) = again(false);
    assert_eq!(code, 2);
    assert!(err.contains("--force"), "{err}");
    assert_eq!(again(true).0, 0);
    // an input that sits where an output would go is never overwritten, even with --force
    let trap = dir.path().join("trap");
    std::fs::create_dir_all(&trap).unwrap();
    let model_copy = trap.join("parameters.csv");
    std::fs::copy(demo("model.toml"), &model_copy).unwrap();
    let before = std::fs::read(&model_copy).unwrap();
    let (code, _, err) = run(bin()
        .args(["fit", "--force", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(demo("samples.csv"))
        .arg("--model")
        .arg(&model_copy)
        .arg("--out")
        .arg(&trap));
    assert_eq!(code, 2);
    assert!(err.contains("input"), "{err}");
    assert_eq!(std::fs::read(&model_copy).unwrap(), before);
}

#[test]
fn vanthoff_fits_the_demo_k_table() {
    let (code, out, err) = run(bin()
        .args(["vanthoff", "--k-table"])
        .arg(demo("k_table.csv"))
        .args(["--at-c", "25"]));
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("ΔH°") && out.contains("at 25.0 °C"), "{out}");
    let (code, out, _) = run(bin()
        .args(["vanthoff", "--json", "--k-table"])
        .arg(demo("k_table.csv")));
    assert_eq!(code, 0);
    let doc: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(doc["kind"], "vanthoff-fit");
}

#[test]
fn simulate_then_fit_recovers_the_planned_parameters() {
    let dir = tempfile::tempdir().unwrap();
    let sim = dir.path().join("sim");
    let (code, _, err) = run(bin()
        .args(["simulate", "--quiet", "--model"])
        .arg(demo("model_truth.toml"))
        .arg("--plan")
        .arg(demo("plan.toml"))
        .arg("--out")
        .arg(&sim));
    assert_eq!(code, 0, "{err}");
    let (code, _, err) = run(bin()
        .args(["fit", "--quiet", "--expansion", "water", "--spectra"])
        .arg(sim.join("spectra.csv"))
        .arg("--samples")
        .arg(sim.join("samples.csv"))
        .arg("--model")
        .arg(demo("model.toml"))
        .arg("--out")
        .arg(dir.path().join("fit")));
    assert_eq!(code, 0, "{err}");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("fit/report.json")).unwrap()).unwrap();
    let params = report["data"]["fit"]["parameters"].as_array().unwrap();
    // truth from data/demo/model_truth.toml: NiBr2 dh_ref = 38000 J/mol
    let dh2 = params
        .iter()
        .find(|p| p["parameter"]["species_name"] == "NiBr2" && p["parameter"]["name"] == "dh_ref")
        .unwrap();
    let (v, se) = (
        dh2["value"].as_f64().unwrap(),
        dh2["standard_error"].as_f64().unwrap(),
    );
    assert!(((v - 38_000.0) / se).abs() < 3.0, "{v} ± {se}");
}

#[test]
fn every_subcommand_has_help_with_examples() {
    for sub in [
        "inspect", "fit", "resolve", "vanthoff", "simulate", "compare", "batch",
    ] {
        let (code, out, _) = run(bin().args([sub, "--help"]));
        assert_eq!(code, 0);
        assert!(out.contains("Example"), "{sub}: {out}");
    }
}

#[test]
fn resolve_writes_soft_profiles_and_spectra() {
    let dir = tempfile::tempdir().unwrap();
    let (code, out, err) = run(bin()
        .args(["resolve", "--species", "3", "--spectra"])
        .arg(demo("spectra.csv"))
        .arg("--samples")
        .arg(demo("samples.csv"))
        .arg("--out")
        .arg(dir.path()));
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("lack of fit"), "{out}");
    let conc = std::fs::read_to_string(dir.path().join("soft_concentrations.csv")).unwrap();
    assert_eq!(conc.lines().count(), 1 + 54);
    let spectra = std::fs::read_to_string(dir.path().join("soft_spectra.csv")).unwrap();
    assert_eq!(
        spectra.lines().next().unwrap(),
        "wavelength_nm,species_1,species_2,species_3"
    );
    // non-negativity holds (NNLS, not clipping)
    assert!(
        spectra
            .lines()
            .skip(1)
            .flat_map(|l| l.split(',').skip(1))
            .all(|v| v.parse::<f64>().unwrap() >= 0.0)
    );
}

#[test]
fn fit_with_a_bootstrap_writes_its_summary_and_is_silent_without_a_terminal() {
    let dir = tempfile::tempdir().unwrap();
    let (code, out, err) = run(bin()
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args([
            "fit",
            "--config",
            "data/demo/fit.toml",
            "--bootstrap",
            "20",
            "--threads",
            "2",
            "--out",
        ])
        .arg(dir.path()));
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("bootstrap (20 replicates"), "{out}");
    // stderr is a pipe here: no progress bar drawn
    assert!(!err.contains("replicates,"), "{err}");
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("bootstrap.json")).unwrap()).unwrap();
    assert_eq!(doc["kind"], "bootstrap");
    // The bootstrap spread of ΔH° of NiBr agrees with the asymptotic standard error within a
    // factor of two (20 replicates; tests/calibration.rs checks it tightly).
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("report.json")).unwrap()).unwrap();
    let se = report["data"]["fit"]["thermodynamics"][0]["standard"]["covariance"][1][1]
        .as_f64()
        .unwrap()
        .sqrt();
    let sd = doc["data"]["thermodynamics"][0]["dh_j_mol"]["standard_deviation"]
        .as_f64()
        .unwrap();
    assert!(sd > se / 2.0 && sd < se * 2.0, "bootstrap sd {sd} vs se {se}");
}
