//! The demo's dilute-bromide step end to end (built binary, temporary folder): simulate the
//! one-complex experiment of `data/demo/dilute/`, fit it, and check that the report puts the
//! classic two-wavelength estimates beside the global fit, with the global ΔH° near the truth
//! and the classic ones further from it.
//!
//! Truth: ΔH° = 14 000 J/mol, log β(298.15 K) = 0.35 — invented demo values
//! (`data/demo/dilute/model_truth.toml`, the NiBr entry of `data/demo/truth.json`).

use std::path::{Path, PathBuf};
use std::process::Command;

fn repo(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

fn run(args: &[&std::ffi::OsStr]) {
    let out = Command::new(env!("CARGO_BIN_EXE_isosbestic"))
        .args(args)
        .output()
        .expect("binary runs");
    assert!(
        out.status.success(),
        "{:?} failed: {}",
        args,
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn the_dilute_demo_shows_the_classic_estimates_beside_the_global_fit() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("data");
    let fit = dir.path().join("fit");
    run(&[
        "simulate".as_ref(),
        "--quiet".as_ref(),
        "--model".as_ref(),
        repo("data/demo/dilute/model_truth.toml").as_os_str(),
        "--plan".as_ref(),
        repo("data/demo/dilute/plan.toml").as_os_str(),
        "--out".as_ref(),
        data.as_os_str(),
    ]);
    run(&[
        "fit".as_ref(),
        "--quiet".as_ref(),
        "--spectra".as_ref(),
        data.join("spectra.csv").as_os_str(),
        "--samples".as_ref(),
        data.join("samples.csv").as_os_str(),
        "--model".as_ref(),
        repo("data/demo/dilute/model.toml").as_os_str(),
        "--expansion".as_ref(),
        "water".as_ref(),
        "--out".as_ref(),
        fit.as_os_str(),
    ]);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(fit.join("report.json")).unwrap()).unwrap();
    let classic = &report["data"]["vant_hoff"]["classic"];
    let global = classic["global_dh_j_mol"].as_array().unwrap();
    let (dh, se) = (global[0].as_f64().unwrap(), global[1].as_f64().unwrap());
    assert!((dh - 14_000.0).abs() <= 4.0 * se, "global ΔH° {dh} ± {se}");
    for method in ["direct", "mass_balance"] {
        let c = classic[method]["dh_j_mol"][0].as_f64().unwrap();
        assert!(
            (c - 14_000.0).abs() > 10.0 * (dh - 14_000.0).abs(),
            "{method}: classic ΔH° {c} vs global {dh}"
        );
    }
    assert!(fit.join("vant_hoff.svg").exists());
}
