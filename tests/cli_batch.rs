//! End-to-end tests of `isosbestic batch`, run on small simulated data sets in temporary folders.

use std::collections::HashMap;
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

/// A small plan (invented, like data/demo/plan.toml but 41 wavelengths × 12 samples) so each fit
/// takes a moment. Two bromide levels do not pin down both species well: used only where the
/// values do not matter.
const SMALL_PLAN: &str = r#"
seed = 11
first_nm = 380.0
last_nm = 780.0
step_nm = 10.0
temperatures_c = [10.0, 25.0, 40.0, 55.0, 70.0, 85.0]
path_cm = 1.0
preparation_temperature_c = 25.0
thermal_expansion = false
noise = { kind = "absorbance", sd_au = 1e-3 }
offset_sd_au = 0.0

[[series]]
label = "Br-1.0"
totals_m = { Ni = 0.04, Br = 1.0 }

[[series]]
label = "Br-3.0"
totals_m = { Ni = 0.04, Br = 3.0 }

[[spectra]]
species = "Ni"
bands = [{ centre_nm = 395.0, width_nm = 28.0, height = 5.2 }, { centre_nm = 720.0, width_nm = 60.0, height = 2.1 }]

[[spectra]]
species = "NiBr"
bands = [{ centre_nm = 410.0, width_nm = 32.0, height = 14.0 }, { centre_nm = 745.0, width_nm = 65.0, height = 6.5 }]

[[spectra]]
species = "NiBr2"
bands = [{ centre_nm = 430.0, width_nm = 35.0, height = 32.0 }, { centre_nm = 660.0, width_nm = 45.0, height = 48.0 }]
"#;

/// Simulates the small plan from the demo's true model into `dir`.
fn simulate_into(dir: &Path) {
    let plan = dir.join("plan.toml");
    std::fs::create_dir_all(dir).unwrap();
    std::fs::write(&plan, SMALL_PLAN).unwrap();
    let (code, _, err) = run(bin()
        .args(["simulate", "--quiet", "--model"])
        .arg(demo("model_truth.toml"))
        .arg("--plan")
        .arg(&plan)
        .arg("--out")
        .arg(dir));
    assert_eq!(code, 0, "{err}");
}

/// Replaces the temperature on the given 1-based line of a samples table with `text`.
fn corrupt_temperature(samples: &Path, line: usize, text: &str) {
    let original = std::fs::read_to_string(samples).unwrap();
    let mut lines: Vec<String> = original.lines().map(String::from).collect();
    let column = lines[0]
        .split(',')
        .position(|h| h.starts_with("temperature"))
        .expect("a temperature column");
    let mut fields: Vec<String> = lines[line - 1].split(',').map(String::from).collect();
    fields[column] = text.to_string();
    lines[line - 1] = fields.join(",");
    std::fs::write(samples, lines.join("\n") + "\n").unwrap();
}

/// The summary table as one map (column → cell) per data set name.
fn summary(out: &Path) -> HashMap<String, HashMap<String, String>> {
    let mut reader = csv::Reader::from_path(out.join("batch_summary.csv")).unwrap();
    let headers = reader.headers().unwrap().clone();
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            let row: HashMap<String, String> = headers
                .iter()
                .zip(r.iter())
                .map(|(h, c)| (h.to_string(), c.to_string()))
                .collect();
            (row["data_set"].clone(), row)
        })
        .collect()
}

fn state_of(dir: &Path) -> String {
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("batch_state.json")).unwrap()).unwrap();
    doc["data"]["progress"].as_str().unwrap_or_default().to_string()
}

/// Settings under which the demo data are fitted (as in data/demo/fit.toml).
const DEMO_SETTINGS: &str = "[preprocess]\nsaturation_limit = 2.0\n[fit]\nbaseline = \"offset\"\n\
    concentrations = { thermal_expansion = { kind = \"water\" } }\n";

/// runs/model.toml (found by ancestry), lab1/good-a (the conventional files, fitted with the
/// shared settings file), lab2/good-b (its own fit.toml with relative paths and its own model),
/// lab2/corrupt (a non-numeric temperature on line 3 of samples.csv). Returns the root and the
/// shared settings file.
fn build_tree(tmp: &Path) -> (PathBuf, PathBuf) {
    let root = tmp.join("runs");
    let a = root.join("lab1/good-a");
    let b = root.join("lab2/good-b");
    let bad = root.join("lab2/corrupt");
    for d in [&a, &b.join("raw"), &bad] {
        std::fs::create_dir_all(d).unwrap();
    }
    std::fs::copy(demo("model.toml"), root.join("model.toml")).unwrap();
    std::fs::copy(demo("model.toml"), b.join("model.toml")).unwrap();
    for (from, to) in [
        ("spectra.csv", a.join("spectra.csv")),
        ("samples.csv", a.join("samples.csv")),
        ("spectra.csv", b.join("raw/d.csv")),
        ("samples.csv", b.join("raw/t.csv")),
        ("spectra.csv", bad.join("spectra.csv")),
        ("samples.csv", bad.join("samples.csv")),
    ] {
        std::fs::copy(demo(from), to).unwrap();
    }
    std::fs::write(
        b.join("fit.toml"),
        format!("model = \"model.toml\"\n[data]\nspectra = {{ csv = \"raw/d.csv\" }}\nsamples = \"raw/t.csv\"\n{DEMO_SETTINGS}"),
    )
    .unwrap();
    corrupt_temperature(&bad.join("samples.csv"), 3, "warm");
    let settings = tmp.join("settings.toml");
    std::fs::write(&settings, DEMO_SETTINGS).unwrap();
    (root, settings)
}

#[test]
fn batch_finishes_the_good_sets_names_the_corrupt_one_and_resumes() {
    let tmp = tempfile::tempdir().unwrap();
    let (root, settings) = build_tree(tmp.path());
    let out = tmp.path().join("results");
    let batch = || {
        let mut c = bin();
        c.arg("batch")
            .arg(&root)
            .arg("--out")
            .arg(&out)
            .args(["--threads", "2"]);
        c.arg("--settings").arg(&settings);
        c
    };

    // first run: the two good sets are fitted, the corrupt one is reported and skipped
    let (code, stdout, stderr) = run(&mut batch());
    assert_eq!(code, 1, "{stdout}\n{stderr}");
    assert!(stderr.contains("lab2/corrupt"), "{stderr}");
    assert!(
        !stderr.contains("data sets,"),
        "no progress bar off a terminal: {stderr}"
    );
    assert!(
        stdout.contains("3 data sets: 2 ok, 1 failed, 0 skipped"),
        "{stdout}"
    );
    for set in ["lab1/good-a", "lab2/good-b"] {
        let dir = out.join(set);
        for f in [
            "report.json",
            "thermodynamics.csv",
            "report.html",
            "pure_spectra.svg",
        ] {
            assert!(dir.join(f).is_file(), "{set}/{f} missing");
        }
        assert_eq!(state_of(&dir), "complete", "{set}");
    }
    let rows = summary(&out);
    assert_eq!(rows.len(), 3);
    let bad = &rows["lab2/corrupt"];
    assert_eq!(bad["status"], "failed");
    // the message names the file and line of the bad cell (line 3 was corrupted above)
    assert!(
        bad["message"].contains("samples.csv")
            && bad["message"].contains("line 3")
            && bad["message"].contains("warm"),
        "{}",
        bad["message"]
    );
    for set in ["lab1/good-a", "lab2/good-b"] {
        assert_eq!(rows[set]["status"], "ok");
        // the demo data were made with ΔH°(NiBr) = 14 kJ/mol, ΔH°(NiBr2) = 38 kJ/mol
        // (data/demo/truth.json, written by data/demo/make_demo.py); 54 samples at 4e-4 AU
        // recover them to well under 0.5 kJ/mol
        for (species, truth) in [("NiBr", 14_000.0), ("NiBr2", 38_000.0)] {
            let dh: f64 = rows[set][&format!("{species}_dH_J_mol")].parse().unwrap();
            assert!((dh - truth).abs() < 500.0, "{set}: ΔH°({species}) {dh}");
        }
        assert!(rows[set]["NiBr_se_dH"].parse::<f64>().unwrap() > 0.0);
    }

    // rerun, from another working folder with the folders spelled relatively: complete sets
    // are skipped (their numbers kept), the corrupt one is tried again
    let (code, stdout, stderr) = run(bin().current_dir(tmp.path()).args([
        "batch",
        "runs",
        "--out",
        "results",
        "--settings",
        "settings.toml",
    ]));
    assert_eq!(code, 1, "{stdout}\n{stderr}");
    let rows2 = summary(&out);
    assert_eq!(rows2["lab1/good-a"]["status"], "skipped");
    assert_eq!(rows2["lab2/good-b"]["status"], "skipped");
    assert_eq!(rows2["lab2/corrupt"]["status"], "failed");
    assert_eq!(
        rows2["lab1/good-a"]["NiBr_dH_J_mol"],
        rows["lab1/good-a"]["NiBr_dH_J_mol"]
    );

    // a changed input is redone; repairing the corrupt set makes the whole batch succeed
    let fit_toml = root.join("lab2/good-b/fit.toml");
    let text = std::fs::read_to_string(&fit_toml).unwrap();
    std::fs::write(&fit_toml, text + "# edited\n").unwrap();
    std::fs::copy(
        root.join("lab1/good-a/samples.csv"),
        root.join("lab2/corrupt/samples.csv"),
    )
    .unwrap();
    let (code, stdout, stderr) = run(&mut batch());
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let rows3 = summary(&out);
    assert_eq!(rows3["lab1/good-a"]["status"], "skipped");
    assert_eq!(rows3["lab2/good-b"]["status"], "ok");
    assert_eq!(rows3["lab2/corrupt"]["status"], "ok");
    assert_eq!(state_of(&out.join("lab2/corrupt")), "complete");
}

#[test]
fn batch_redoes_an_interrupted_set_and_keeps_outputs_it_did_not_make() {
    let tmp = tempfile::tempdir().unwrap();
    let sim = tmp.path().join("sim");
    simulate_into(&sim);
    let root = tmp.path().join("runs");
    for set in ["one", "two", "three"] {
        std::fs::create_dir_all(root.join(set)).unwrap();
        for f in ["spectra.csv", "samples.csv"] {
            std::fs::copy(sim.join(f), root.join(set).join(f)).unwrap();
        }
    }
    // "three": a fit allowed a single iteration cannot converge
    std::fs::write(root.join("three/fit.toml"), "[fit.solver]\nmax_iterations = 1\n").unwrap();
    let model = demo("model.toml");
    let out = tmp.path().join("results");
    // "one": an interrupted batch run (state "running", a partial output)
    std::fs::create_dir_all(out.join("one")).unwrap();
    std::fs::write(out.join("one/report.json"), "partial").unwrap();
    std::fs::write(
        out.join("one/batch_state.json"),
        r#"{"format": "isosbestic", "kind": "batch-state", "format_version": 1, "crate_version": "0", "data": {"progress": "running", "software": "x", "inputs": [], "outputs": [], "result": null, "message": null}}"#,
    )
    .unwrap();
    // "two": outputs of a single fit run, not a batch: kept unless --force
    std::fs::create_dir_all(out.join("two")).unwrap();
    std::fs::write(out.join("two/report.json"), "from a single fit").unwrap();
    let (code, stdout, stderr) = run(bin()
        .arg("batch")
        .arg(&root)
        .arg("--out")
        .arg(&out)
        .arg("--model")
        .arg(&model)
        .arg("--quiet"));
    assert_eq!(code, 1, "{stdout}\n{stderr}");
    assert!(stdout.is_empty(), "--quiet prints nothing but failures: {stdout}");
    let rows = summary(&out);
    assert_eq!(rows["one"]["status"], "ok");
    assert_eq!(state_of(&out.join("one")), "complete");
    assert_eq!(rows["two"]["status"], "failed");
    assert!(
        rows["two"]["message"].contains("--force"),
        "{}",
        rows["two"]["message"]
    );
    assert_eq!(
        std::fs::read_to_string(out.join("two/report.json")).unwrap(),
        "from a single fit"
    );
    let (code, stdout, stderr) = run(bin()
        .arg("batch")
        .arg(&root)
        .arg("--out")
        .arg(&out)
        .arg("--model")
        .arg(&model)
        .args(["--force", "--threads", "1"]));
    assert_eq!(code, 1, "{stdout}\n{stderr}");
    let rows = summary(&out);
    assert_eq!(rows["one"]["status"], "ok"); // --force redoes complete sets too
    assert_eq!(rows["two"]["status"], "ok");
    assert_eq!(rows["three"]["status"], "failed");
}

#[test]
fn batch_usage_errors_exit_with_code_2() {
    let tmp = tempfile::tempdir().unwrap();
    let (code, _, err) = run(bin()
        .arg("batch")
        .arg(tmp.path().join("missing"))
        .arg("--out")
        .arg(tmp.path().join("o")));
    assert_eq!(code, 2);
    assert!(err.contains("missing"), "{err}");
    std::fs::create_dir_all(tmp.path().join("empty/sub")).unwrap();
    let (code, _, err) = run(bin()
        .arg("batch")
        .arg(tmp.path().join("empty"))
        .arg("--out")
        .arg(tmp.path().join("o")));
    assert_eq!(code, 2);
    assert!(err.contains("no data set found"), "{err}");
    let (code, _, _) = run(bin()
        .arg("batch")
        .arg(tmp.path())
        .args(["--out", "o", "--threads", "0"]));
    assert_eq!(code, 2);
    let (code, out, _) = run(bin().args(["batch", "--help"]));
    assert_eq!(code, 0);
    assert!(
        out.contains("Examples:") && out.contains("batch_summary.csv"),
        "{out}"
    );
}
