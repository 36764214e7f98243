//! Known pure spectra held fixed inside the global fit (issue 4 §1–2): ground truth, the mirror
//! ambiguity decided by a known spectrum, refused inputs, and the `fit` command reading the
//! model's `known_spectrum` file.

mod support;

use isosbestic::report::fit::{Diagnostic, diagnose};
use isosbestic::resolve::hard::{self, Baseline, FixedSpectrum, HardFitError, HardFitParams};
use isosbestic::simulate::{Noise, PureSpectrum, SeriesPlan, Simulation, simulate};
use isosbestic::speciation::ValidModel;
use std::process::Command;
use support::{TWO_COMPLEXES, band, model, plan};

/// The model with every free parameter moved away from the truth (the fit must find it).
const START: &str = r#"
components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
[[species]]
name = "MX"
stoichiometry = { M = 1, X = 1 }
absorbs = true
law = { kind = "van_t_hoff", log_beta_ref = { value = 0.0 }, dh_ref = { value = 0.0 } }
[[species]]
name = "MX2"
stoichiometry = { M = 1, X = 2 }
absorbs = true
law = { kind = "van_t_hoff", log_beta_ref = { value = 0.0 }, dh_ref = { value = 0.0 } }
"#;

/// Species `name`'s true spectrum of a simulation.
fn truth_of(sim: &Simulation, m: &ValidModel, name: &str) -> FixedSpectrum {
    let k = m.species().iter().position(|s| s.name == name).unwrap();
    FixedSpectrum {
        species: name.into(),
        wavelengths_nm: sim.set.wavelengths_nm().to_vec(),
        absorptivity: sim.spectra.column(k).to_vec(),
    }
}

fn value(fit: &hard::HardFit, species: &str, name: &str) -> f64 {
    fit.parameter(species, name).unwrap().value
}

#[test]
fn noise_free_data_give_back_the_truth_with_the_metal_spectrum_held_fixed() {
    // Ground truth (issue 4 §6): data simulated from known parameters, recovered to 1e-6.
    let truth = model(TWO_COMPLEXES); // log β 0.4 / 0.2, ΔH° 12 / 20 kJ/mol
    for baseline in [Baseline::None, Baseline::Offset] {
        let mut p = plan(&["M", "MX", "MX2"]);
        if baseline == Baseline::Offset {
            p.offset_sd_au = 5e-3;
        }
        let sim = simulate(&truth, &p).unwrap();
        let params = HardFitParams {
            baseline,
            known_spectra: vec![truth_of(&sim, &truth, "M")],
            ..HardFitParams::default()
        };
        let fit = hard::fit(&sim.set, &model(START), &params).unwrap();
        assert!(fit.termination.converged(), "{:?}", fit.termination);
        assert_eq!(fit.known_species, vec!["M".to_string()]);
        assert_eq!(fit.absorbing_species, vec!["MX".to_string(), "MX2".to_string()]);
        for (sp, name, t) in [
            ("MX", "log_beta_ref", 0.4),
            ("MX", "dh_ref", 12_000.0),
            ("MX2", "log_beta_ref", 0.2),
            ("MX2", "dh_ref", 20_000.0),
        ] {
            approx::assert_relative_eq!(value(&fit, sp, name), t, max_relative = 1e-6);
        }
        // the fitted values rebuild the data, known part included
        let resid = hard::residual_matrix(&sim.set, &fit, &params).unwrap();
        let worst = resid.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        assert!(worst < 1e-9, "{baseline:?}: max |D − D̂| = {worst}");
        if baseline == Baseline::None {
            for (a, name) in ["MX", "MX2"].iter().enumerate() {
                let want = truth_of(&sim, &truth, name).absorptivity;
                let peak = want.iter().fold(0.0f64, |m, v| m.max(*v));
                for (j, w) in want.iter().enumerate() {
                    approx::assert_abs_diff_eq!(fit.spectra[[j, a]], *w, epsilon = 1e-6 * peak);
                }
            }
        }
    }
}

#[test]
fn a_known_metal_spectrum_rules_out_the_mirror_solution() {
    // One series with the ligand in large excess: free metal and complex can swap (ΔH° → −ΔH°)
    // and fit almost equally well (tests/hard_fit.rs shows the ambiguity without prior
    // knowledge). Holding the weak metal spectrum (peak ε 5) fixed decides it.
    let truth = isosbestic::testing::metal_ligand_model("M", "X", &[(1, 0.0, 30_000.0)], None);
    let mut p = plan(&[]);
    p.noise = Noise::Absorbance { sd_au: 5e-4 };
    p.series = vec![SeriesPlan {
        label: "x".into(),
        totals_m: [("M".into(), 0.02), ("X".into(), 2.0)].into(),
    }];
    p.spectra = vec![
        PureSpectrum {
            species: "M".into(),
            bands: vec![band(520.0, 40.0, 5.0)],
        },
        PureSpectrum {
            species: "MX".into(),
            bands: vec![band(600.0, 50.0, 60.0)],
        },
    ];
    let sim = simulate(&truth, &p).unwrap();
    let start = isosbestic::testing::metal_ligand_model("M", "X", &[(1, 0.5, 0.0)], None);
    let params = HardFitParams {
        known_spectra: vec![truth_of(&sim, &truth, "M")],
        ..HardFitParams::default()
    };
    let fit = hard::fit(&sim.set, &start, &params).unwrap();
    let dh = fit.parameter("MX", "dh_ref").unwrap();
    assert!(
        ((dh.value - 30_000.0) / dh.standard_error).abs() < 3.0,
        "{} ± {}",
        dh.value,
        dh.standard_error
    );
    assert!(fit.alternatives.is_empty(), "{:?}", fit.alternatives);
    let d = diagnose(&sim.set, &fit, &params);
    let decided = d
        .iter()
        .find(|x| matches!(x, Diagnostic::KnownSpectraDecide { .. }))
        .unwrap_or_else(|| {
            panic!(
                "no KnownSpectraDecide in {d:?} (mirror Δχ² {:?})",
                fit.mirror_delta_chi2
            )
        });
    assert!(decided.to_string().contains("known spectra of M"), "{decided}");
}

#[test]
fn unusable_known_spectra_are_refused_naming_the_species() {
    let truth = model(TWO_COMPLEXES);
    let sim = simulate(&truth, &plan(&["M", "MX", "MX2"])).unwrap();
    let fit_with = |k: FixedSpectrum| {
        hard::fit(
            &sim.set,
            &truth,
            &HardFitParams {
                known_spectra: vec![k],
                ..HardFitParams::default()
            },
        )
    };
    let mut k = truth_of(&sim, &truth, "M");
    k.species = "MY".into();
    let e = fit_with(k).unwrap_err();
    assert!(
        matches!(&e, HardFitError::KnownSpectrum { species, .. } if species == "MY"),
        "{e}"
    );
    // X is declared transparent
    let mut k = truth_of(&sim, &truth, "M");
    k.species = "X".into();
    let e = fit_with(k).unwrap_err();
    assert!(e.to_string().contains("transparent"), "{e}");
    // the data (380–700 nm) extend beyond the known range
    let mut k = truth_of(&sim, &truth, "M");
    k.wavelengths_nm.truncate(10);
    k.absorptivity.truncate(10);
    let e = fit_with(k).unwrap_err();
    assert!(e.to_string().contains("outside the known spectrum"), "{e}");
    // a model naming a spectrum file whose values were not read
    let named = model(&TWO_COMPLEXES.replace(
        r#"{ name = "M", absorbs = true }"#,
        r#"{ name = "M", absorbs = true, known_spectrum = "m.csv" }"#,
    ));
    let e = hard::fit(&sim.set, &named, &HardFitParams::default()).unwrap_err();
    assert!(
        e.to_string().contains("m.csv") && e.to_string().contains("'M'"),
        "{e}"
    );
}

/// Runs the binary; (exit code, stderr).
fn run(cmd: &mut Command) -> (i32, String) {
    let out = cmd.output().expect("binary runs");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn the_fit_command_reads_the_known_spectrum_the_model_names() {
    let dir = tempfile::tempdir().unwrap();
    let species = ["M", "MX", "MX2"];
    let config = support::write_inputs(dir.path(), TWO_COMPLEXES, &species);
    let truth = model(TWO_COMPLEXES);
    let sim = simulate(&truth, &plan(&species)).unwrap();
    // the metal's spectrum as a two-column file, on a coarser grid than the data's (5 nm steps
    // from 380 nm; a linear interpolation of a Gaussian band: the fit is then not exact, but
    // close); the model names it relative to its own folder
    let m = truth_of(&sim, &truth, "M");
    let mut text = String::from("wavelength_nm,epsilon\n");
    for (w, e) in m.wavelengths_nm.iter().zip(&m.absorptivity).step_by(2) {
        text.push_str(&format!("{w},{e}\n"));
    }
    std::fs::create_dir(dir.path().join("ref")).unwrap();
    std::fs::write(dir.path().join("ref/m.csv"), &text).unwrap();
    let with_file = TWO_COMPLEXES.replace(
        r#"{ name = "M", absorbs = true }"#,
        r#"{ name = "M", absorbs = true, known_spectrum = "ref/m.csv" }"#,
    );
    std::fs::write(&config.model, &with_file).unwrap();
    // `fit` on the configuration's files into `out` (the caller adds --quiet or not)
    let fit_command = |out: &str| {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_isosbestic"));
        cmd.args(["fit", "--spectra"])
            .arg(&config.data.paths()[0])
            .arg("--samples")
            .arg(&config.data.paths()[1])
            .arg("--model")
            .arg(&config.model)
            .arg("--out")
            .arg(dir.path().join(out));
        cmd
    };
    let fit = |out: &str| run(fit_command(out).arg("--quiet"));
    let (code, err) = fit("out");
    assert_eq!(code, 0, "{err}");
    let (code, stdout) = {
        let out = fit_command("printed").output().unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).into_owned(),
        )
    };
    assert_eq!(code, Some(0));
    assert!(stdout.contains("spectra held fixed (known): M"), "{stdout}");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("out/report.json")).unwrap()).unwrap();
    assert_eq!(report["data"]["fit"]["known_species"], serde_json::json!(["M"]));
    let inputs = report["data"]["inputs"].to_string();
    assert!(
        inputs.contains("m.csv"),
        "the spectrum file is a checksummed input: {inputs}"
    );
    let dh = report["data"]["fit"]["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["parameter"]["species_name"] == "MX" && p["parameter"]["name"] == "dh_ref")
        .and_then(|p| p["value"].as_f64())
        .unwrap();
    assert!((dh - 12_000.0).abs() < 300.0, "ΔH°(MX) = {dh}");
    // a damaged spectrum file: exit 2 naming the file, line and column
    std::fs::write(
        dir.path().join("ref/m.csv"),
        text.replacen("\n390,", "\n390x,", 1),
    )
    .unwrap();
    let (code, err) = fit("bad");
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("m.csv") && err.contains("line 3") && err.contains("column 1"),
        "{err}"
    );
}

#[test]
fn a_batch_redoes_a_set_whose_known_spectrum_file_changed() {
    let tmp = tempfile::tempdir().unwrap();
    let set = tmp.path().join("runs/a");
    std::fs::create_dir_all(&set).unwrap();
    let species = ["M", "MX", "MX2"];
    let config = support::write_inputs(&set, TWO_COMPLEXES, &species);
    let truth = model(TWO_COMPLEXES);
    let sim = simulate(&truth, &plan(&species)).unwrap();
    let m = truth_of(&sim, &truth, "M");
    let spectrum_file = |scale: f64| {
        let mut text = String::from("wavelength_nm,epsilon\n");
        for (w, e) in m.wavelengths_nm.iter().zip(&m.absorptivity) {
            text.push_str(&format!("{w},{}\n", scale * e));
        }
        std::fs::write(set.join("m.csv"), text).unwrap();
    };
    spectrum_file(1.0);
    std::fs::write(
        &config.model,
        TWO_COMPLEXES.replace(
            r#"{ name = "M", absorbs = true }"#,
            r#"{ name = "M", absorbs = true, known_spectrum = "m.csv" }"#,
        ),
    )
    .unwrap();
    let out = tmp.path().join("results");
    let batch = || {
        let (code, err) = run(Command::new(env!("CARGO_BIN_EXE_isosbestic"))
            .arg("batch")
            .arg(tmp.path().join("runs"))
            .arg("--out")
            .arg(&out)
            .arg("--quiet"));
        assert_eq!(code, 0, "{err}");
        std::fs::read_to_string(out.join("batch_summary.csv")).unwrap()
    };
    let first = batch();
    assert!(first.contains(",ok,"), "first run fits the set: {first}");
    let second = batch();
    assert!(
        second.contains(",skipped,"),
        "nothing changed, the set is skipped: {second}"
    );
    spectrum_file(1.01);
    let third = batch();
    assert!(
        third.contains(",ok,"),
        "the edited spectrum file redoes the set: {third}"
    );
}
