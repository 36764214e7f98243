//! End to end: `isosbestic fit` with candidate models ranks them by AIC and F-tests the nested
//! pair (issue 4 §4). Data are simulated by the binary itself from a model whose ΔCp° is or is
//! not zero; the truth is the simulating model.

use std::path::Path;
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_isosbestic"))
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

fn model(law: &str) -> String {
    format!(
        r#"
components = [{{ name = "M", absorbs = true }}, {{ name = "X", absorbs = false }}]
[[species]]
name = "MX"
stoichiometry = {{ M = 1, X = 1 }}
absorbs = true
law = {law}
"#
    )
}

/// ΔCp° = 400 J/(K mol) bends ln K by ΔCp°/R·(θ/T − 1 + ln(T/θ)) ≈ 0.9 at 5 and 85 °C.
const TRUTH_WITH_DCP: &str = r#"{ kind = "heat_capacity", log_beta_ref = { value = 0.4 }, dh_ref = { value = 12000.0 }, dcp = { value = 400.0 } }"#;
const TRUTH_WITHOUT_DCP: &str =
    r#"{ kind = "van_t_hoff", log_beta_ref = { value = 0.4 }, dh_ref = { value = 12000.0 } }"#;
const CANDIDATE_VH: &str =
    r#"{ kind = "van_t_hoff", log_beta_ref = { value = 0.0 }, dh_ref = { value = 0.0 } }"#;
const CANDIDATE_CP: &str = r#"{ kind = "heat_capacity", log_beta_ref = { value = 0.0 }, dh_ref = { value = 0.0 }, dcp = { value = 0.0 } }"#;

const PLAN: &str = r#"
seed = 11
first_nm = 380.0
last_nm = 700.0
step_nm = 4.0
temperatures_c = [5.0, 15.0, 25.0, 35.0, 45.0, 55.0, 65.0, 75.0, 85.0]
path_cm = 1.0
preparation_temperature_c = 25.0
thermal_expansion = false
noise = { kind = "absorbance", sd_au = 1e-3 }
offset_sd_au = 0.0

[[series]]
label = "X0.3"
totals_m = { M = 0.02, X = 0.3 }

[[series]]
label = "X3"
totals_m = { M = 0.02, X = 3.0 }

[[spectra]]
species = "M"
bands = [{ centre_nm = 420.0, width_nm = 30.0, height = 6.0 }]

[[spectra]]
species = "MX"
bands = [{ centre_nm = 560.0, width_nm = 35.0, height = 20.0 }]
"#;

/// Simulates data from `truth` into `dir/sim` and writes the two candidate model files.
fn setup(dir: &Path, truth: &str) {
    std::fs::write(dir.join("truth.toml"), model(truth)).unwrap();
    std::fs::write(dir.join("plan.toml"), PLAN).unwrap();
    std::fs::write(dir.join("vh.toml"), model(CANDIDATE_VH)).unwrap();
    std::fs::write(dir.join("cp.toml"), model(CANDIDATE_CP)).unwrap();
    let (code, _, err) = run(bin().current_dir(dir).args([
        "simulate",
        "--model",
        "truth.toml",
        "--plan",
        "plan.toml",
        "--out",
        "sim",
        "--quiet",
    ]));
    assert_eq!(code, 0, "simulate failed: {err}");
}

/// Rows of model_comparison.csv as header → cell maps.
fn comparison_rows(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header: Vec<String> = lines.next().unwrap().split(',').map(str::to_string).collect();
    lines
        .map(|l| {
            header
                .iter()
                .cloned()
                .zip(l.split(',').map(str::to_string))
                .collect()
        })
        .collect()
}

fn num(row: &std::collections::HashMap<String, String>, key: &str) -> f64 {
    row[key]
        .parse()
        .unwrap_or_else(|e| panic!("{key} = {:?}: {e}", row[key]))
}

#[test]
fn with_a_heat_capacity_in_the_data_the_dcp_candidate_ranks_first_and_the_f_test_rejects_the_simpler() {
    let dir = tempfile::tempdir().unwrap();
    setup(dir.path(), TRUTH_WITH_DCP);
    let (code, out, err) = run(bin().current_dir(dir.path()).args([
        "fit",
        "--spectra",
        "sim/spectra.csv",
        "--samples",
        "sim/samples.csv",
        "--model",
        "vh.toml",
        "--candidate",
        "cp.toml",
        "--out",
        "ranked",
    ]));
    assert_eq!(code, 0, "fit failed: {err}\n{out}");
    assert!(out.contains("model comparison"), "{out}");
    assert!(out.contains("F-test vh within cp"), "{out}");
    let rows = comparison_rows(&dir.path().join("ranked/model_comparison.csv"));
    assert_eq!(rows.len(), 2);
    assert_eq!((rows[0]["rank"].as_str(), rows[0]["name"].as_str()), ("1", "cp"));
    assert_eq!(rows[0]["f_test_simpler"], "vh");
    let p = num(&rows[0], "p_value");
    assert!(p < 0.01, "F-test p = {p}");
    assert_eq!(rows[1]["primary"], "true");
    assert!(num(&rows[1], "delta_aic") > 0.0);
    // one more parameter (ΔCp°), the same linear ones
    approx::assert_abs_diff_eq!(num(&rows[0], "n_parameters") - num(&rows[1], "n_parameters"), 1.0);
    // AIC = n ln(RSS/n) + 2k (Akaike 1974, Gaussian least-squares form, common practice) from
    // the n in report.json and the RSS and k in the table
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("ranked/report.json")).unwrap())
            .unwrap();
    let n = json
        .pointer("/data/model_comparison/n_data")
        .and_then(serde_json::Value::as_f64)
        .unwrap();
    for r in &rows {
        let (rss, k) = (num(r, "rss"), num(r, "n_parameters"));
        approx::assert_relative_eq!(num(r, "aic"), n * (rss / n).ln() + 2.0 * k, max_relative = 1e-9);
        approx::assert_relative_eq!(
            num(r, "bic"),
            n * (rss / n).ln() + k * n.ln(),
            max_relative = 1e-9
        );
    }
    let tests = json.pointer("/data/model_comparison/nested_tests").unwrap();
    assert_eq!(tests.as_array().map(Vec::len), Some(1));
    let page = std::fs::read_to_string(dir.path().join("ranked/report.html")).unwrap();
    assert!(page.contains("Model comparison") && page.contains("F-test of vh within cp"));
}

#[test]
fn without_a_heat_capacity_the_f_test_finds_nothing_and_the_config_file_lists_the_candidates() {
    let dir = tempfile::tempdir().unwrap();
    setup(dir.path(), TRUTH_WITHOUT_DCP);
    std::fs::write(
        dir.path().join("run.toml"),
        r#"
model = "vh.toml"
candidates = ["cp.toml"]
[data]
spectra = { csv = "sim/spectra.csv" }
samples = "sim/samples.csv"
"#,
    )
    .unwrap();
    let (code, out, err) = run(bin()
        .current_dir(dir.path())
        .args(["fit", "--config", "run.toml", "--out", "ranked"]));
    assert_eq!(code, 0, "fit failed: {err}\n{out}");
    let rows = comparison_rows(&dir.path().join("ranked/model_comparison.csv"));
    let cp = rows.iter().find(|r| r["name"] == "cp").unwrap();
    assert_eq!(cp["f_test_simpler"], "vh");
    let p = num(cp, "p_value");
    assert!(p > 0.01, "F-test p = {p} although the data have no ΔCp°");
    // a second run refuses to overwrite the table
    let (code, _, err) = run(bin()
        .current_dir(dir.path())
        .args(["fit", "--config", "run.toml", "--out", "ranked"]));
    assert_eq!(code, 2, "{err}");
}
