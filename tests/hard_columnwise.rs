//! The columnwise global fit (non-negative spectra, absorbance weights, point masks) against
//! simulated ground truth, and the `fit` flags that select it, end to end.

use isosbestic::data::SpectraSet;
use isosbestic::resolve::hard::{self, HardFit, HardFitParams, SpectraSign, Weighting};
use isosbestic::simulate::{Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
use isosbestic::speciation::ValidModel;
use isosbestic::testing::{metal_ligand_model, rng};
use ndarray::{Array2, Axis};
use rand_distr::{Distribution, Normal};
use std::path::Path;
use std::process::{Command, Output};

/// Truth of the invented 1:2 system: log β₁, ΔH°₁, log β₂, ΔH°₂ (J/mol) at 298.15 K.
const TRUTH: [f64; 4] = [0.4, 12_000.0, -0.2, 35_000.0];

fn truth_model() -> ValidModel {
    metal_ligand_model(
        "M",
        "X",
        &[(1, TRUTH[0], TRUTH[1]), (2, TRUTH[2], TRUTH[3])],
        None,
    )
}

/// A plan of two series (ligand 0.3 and 3 mol/L) over `temperatures` (°C), 400–700 nm every
/// `step_nm`. The free metal's band at 420 nm is gone beyond ≈ 520 nm (ε < 1e-6 there), so
/// noise pushes its unconstrained ε below zero over part of the range.
fn plan(temperatures_c: Vec<f64>, step_nm: f64) -> SimulationPlan {
    let band = |centre_nm: f64, width_nm: f64, height: f64| Band {
        centre_nm,
        width_nm,
        height,
        shift_nm_per_k: 0.0,
    };
    SimulationPlan {
        seed: 3,
        first_nm: 400.0,
        last_nm: 700.0,
        step_nm,
        temperatures_c,
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
                totals_m: [("M".into(), 0.03), ("X".into(), x)].into(),
            })
            .collect(),
        spectra: vec![
            PureSpectrum {
                species: "M".into(),
                bands: vec![band(420.0, 20.0, 8.0)],
            },
            PureSpectrum {
                species: "MX".into(),
                bands: vec![band(500.0, 35.0, 20.0)],
            },
            PureSpectrum {
                species: "MX2".into(),
                bands: vec![band(600.0, 40.0, 50.0)],
            },
        ],
    }
}

fn temperatures(n: usize) -> Vec<f64> {
    (0..n).map(|k| 10.0 + 60.0 * k as f64 / (n - 1) as f64).collect()
}

/// The same data with Gaussian noise of σ_ij = √(floor² + (relative·A_ij)²) (A the exact
/// absorbance): a constant floor plus a part proportional to the absorbance.
fn with_noise(set: &SpectraSet, floor: f64, relative: f64, seed: u64) -> SpectraSet {
    let mut g = rng(seed);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let d = set
        .absorbance()
        .mapv(|a| a + (floor * floor + (relative * a).powi(2)).sqrt() * normal.sample(&mut g));
    set.with_data(set.wavelengths_nm().clone(), d).unwrap()
}

fn value(fit: &HardFit, k: usize) -> (f64, f64) {
    (fit.parameters[k].value, fit.parameters[k].standard_error)
}

fn one_start() -> HardFitParams {
    HardFitParams {
        start_grid: 1,
        ..HardFitParams::default()
    }
}

#[test]
fn non_negative_spectra_recover_exact_data_and_stay_non_negative_where_free_ones_do_not() {
    let truth = truth_model();
    let sim = simulate(&truth, &plan(temperatures(6), 10.0)).unwrap();
    // start away from the truth: the grid search and the solver have to find it
    let start = metal_ligand_model("M", "X", &[(1, 0.0, 0.0), (2, 0.0, 20_000.0)], None);
    let nn = HardFitParams {
        spectra_sign: SpectraSign::NonNegative,
        ..HardFitParams::default()
    };
    let fit = hard::fit(&sim.set, &start, &nn).unwrap();
    assert!(fit.termination.converged(), "{:?}", fit.termination);
    for (k, want) in TRUTH.iter().enumerate() {
        // simulation truth (noise-free data)
        approx::assert_relative_eq!(fit.parameters[k].value, *want, max_relative = 1e-6);
    }
    assert!(fit.spectra.iter().all(|&e| e >= 0.0));
    assert!(fit.nnls_unconverged_nm.is_empty());
    // the truth's spectra (simulation input) are recovered too
    let m = fit.absorbing_species.iter().position(|s| s == "MX2").unwrap();
    let k = sim.set.n_wavelengths() / 2;
    approx::assert_relative_eq!(fit.spectra[[k, m]], sim.spectra[[k, 3]], max_relative = 1e-6);

    // the same with the metal's spectrum known and held fixed (weights too): still exact
    let known = HardFitParams {
        known_spectra: vec![hard::FixedSpectrum {
            species: "M".into(),
            wavelengths_nm: sim.set.wavelengths_nm().to_vec(),
            absorptivity: sim.spectra.column(0).to_vec(),
        }],
        weighting: Weighting::Absorbance {
            floor_au: 1e-3,
            relative: 0.01,
        },
        ..nn.clone()
    };
    let fit = hard::fit(&sim.set, &start, &known).unwrap();
    assert!(fit.termination.converged(), "{:?}", fit.termination);
    assert_eq!(fit.known_species, ["M"]);
    for (k, want) in TRUTH.iter().enumerate() {
        // simulation truth (noise-free data)
        approx::assert_relative_eq!(fit.parameters[k].value, *want, max_relative = 1e-6);
    }
    // the residual matrix of the fit (measured − fitted, known part included) vanishes
    let r = hard::residual_matrix(&sim.set, &fit, &known).unwrap();
    assert!(
        r.iter().all(|v| v.abs() < 1e-9),
        "max |residual| {}",
        r.iter().fold(0.0f64, |m, v| m.max(v.abs()))
    );

    // under noise the free fit drives the metal's vanished band below zero; the constrained fit
    // does not, and stays within its uncertainty of the truth
    let noisy = with_noise(&sim.set, 2e-3, 0.0, 5);
    let free = hard::fit(&noisy, &truth, &one_start()).unwrap();
    let metal = free.absorbing_species.iter().position(|s| s == "M").unwrap();
    assert!(
        free.spectra.column(metal).iter().any(|&e| e < 0.0),
        "the check needs negative free ε"
    );
    let nn_one = HardFitParams { start_grid: 1, ..nn };
    let fit = hard::fit(&noisy, &truth, &nn_one).unwrap();
    assert!(fit.termination.converged());
    assert!(fit.spectra.iter().all(|&e| e >= 0.0));
    // clipped ε are held on their bound: standard error 0
    let clipped = fit.spectra.iter().filter(|&&e| e == 0.0).count();
    assert!(clipped > 0);
    assert!(
        fit.spectra
            .iter()
            .zip(fit.spectra_standard_errors.iter())
            .all(|(&e, &se)| e > 0.0 || se == 0.0)
    );
    assert!(fit.n_parameters_total < 4 + 3 * sim.set.n_wavelengths());
    for (k, want) in TRUTH.iter().enumerate() {
        let (v, se) = value(&fit, k);
        // simulation truth, within 4 standard errors (common practice)
        assert!(
            ((v - want) / se).abs() < 4.0,
            "parameter {k}: {v} ± {se}, truth {want}"
        );
    }
}

#[test]
fn absorbance_weights_shrink_the_uncertainty_and_their_intervals_cover_the_truth() {
    let truth = truth_model();
    let (floor, relative) = (5e-4, 0.02);
    let weighted = HardFitParams {
        weighting: Weighting::Absorbance {
            floor_au: floor,
            relative,
        },
        ..one_start()
    };
    // one realisation: the weighted ΔH° are more precise than the uniform ones
    let sim = simulate(&truth, &plan(temperatures(6), 10.0)).unwrap();
    let peak = sim.set.absorbance().iter().fold(0.0f64, |m, v| m.max(*v));
    assert!(peak > 1.0, "the noise must vary widely (peak absorbance {peak})");
    let noisy = with_noise(&sim.set, floor, relative, 1);
    let uniform_fit = hard::fit(&noisy, &truth, &one_start()).unwrap();
    let weighted_fit = hard::fit(&noisy, &truth, &weighted).unwrap();
    assert!(weighted_fit.termination.converged());
    for k in [1, 3] {
        let (_, se_u) = value(&uniform_fit, k);
        let (_, se_w) = value(&weighted_fit, k);
        assert!(se_w < 0.7 * se_u, "ΔH° {k}: weighted SE {se_w} vs uniform {se_u}");
    }
    // σ̂ is a scale factor near 1 when the stated noise is the true one
    assert!(
        (0.8..1.2).contains(&weighted_fit.sigma),
        "σ̂ = {}",
        weighted_fit.sigma
    );
    // the residual sd of a weighted fit is a scale factor, not AU: the report says so and
    // draws no lack-of-fit comparison with a noise level in AU
    assert!(weighted_fit.weighted && !uniform_fit.weighted);
    assert_eq!(uniform_fit.residual_unit(), "AU");
    assert_ne!(weighted_fit.residual_unit(), "AU");
    let d = isosbestic::report::fit::diagnose(&noisy, &weighted_fit, &weighted);
    assert!(
        !d.iter()
            .any(|x| matches!(x, isosbestic::report::fit::Diagnostic::LackOfFit { .. })),
        "{d:?}"
    );

    // coverage over many realisations on a small grid
    let small = simulate(&truth, &plan(temperatures(5), 20.0)).unwrap();
    let n = 200;
    let mut covered = [0usize; 4];
    let mut estimates = vec![Vec::new(); 4];
    let mut standard_errors = vec![Vec::new(); 4];
    for seed in 0..n {
        let noisy = with_noise(&small.set, floor, relative, 1000 + seed);
        let fit = hard::fit(&noisy, &truth, &weighted).unwrap();
        assert!(fit.termination.converged(), "seed {seed}: {:?}", fit.termination);
        let t = isosbestic::stats::student_t_quantile(0.975, fit.degrees_of_freedom as f64);
        for (k, want) in TRUTH.iter().enumerate() {
            let (v, se) = value(&fit, k);
            estimates[k].push(v);
            standard_errors[k].push(se);
            if (v - want).abs() <= t * se {
                covered[k] += 1;
            }
        }
    }
    for (k, c) in covered.iter().enumerate() {
        let rate = *c as f64 / n as f64;
        // common practice: coverage of nominal 95 % intervals; for n = 200 the binomial spread
        // is ±1.5 %, so 90–99 % leaves more than 3 standard deviations either side
        assert!((0.90..=0.99).contains(&rate), "parameter {k}: coverage {rate}");
        // common practice: the reported standard errors match the spread of the estimates over
        // the realisations (the sample sd of n = 200 estimates is itself uncertain by ≈ 5 %)
        let nf = n as f64;
        let mean = estimates[k].iter().sum::<f64>() / nf;
        let sd = (estimates[k].iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0)).sqrt();
        let mean_se = standard_errors[k].iter().sum::<f64>() / nf;
        assert!(
            (mean_se / sd - 1.0).abs() < 0.2,
            "parameter {k}: mean SE {mean_se} vs spread {sd}"
        );
    }
}

#[test]
fn masked_points_weigh_nothing_and_a_masked_wavelength_equals_one_left_out() {
    let truth = truth_model();
    let sim = simulate(&truth, &plan(temperatures(6), 10.0)).unwrap();
    let noisy = with_noise(&sim.set, 1e-3, 0.01, 9);
    let params = HardFitParams {
        spectra_sign: SpectraSign::NonNegative,
        weighting: Weighting::Absorbance {
            floor_au: 1e-3,
            relative: 0.01,
        },
        ..one_start()
    };
    let (ns, nw) = noisy.absorbance().dim();
    // scattered points, and two whole wavelengths
    let mut mask = Array2::from_elem((ns, nw), false);
    for &(i, j) in &[(0, 3), (4, 10), (7, 10), (11, 25)] {
        mask[[i, j]] = true;
    }
    for j in [15, 28] {
        mask.column_mut(j).fill(true);
    }
    let mut real = noisy.clone();
    real.set_mask(mask.clone()).unwrap();
    let mut garbage_data = noisy.absorbance().clone();
    for ((i, j), m) in mask.indexed_iter() {
        if *m {
            garbage_data[[i, j]] = 50.0 + (i * j) as f64;
        }
    }
    let mut garbage = noisy
        .with_data(noisy.wavelengths_nm().clone(), garbage_data)
        .unwrap();
    garbage.set_mask(mask.clone()).unwrap();
    let a = hard::fit(&real, &truth, &params).unwrap();
    let b = hard::fit(&garbage, &truth, &params).unwrap();
    assert!(a.termination.converged());
    assert_eq!(a.n_data, ns * nw - 4 - 2 * ns);
    approx::assert_relative_eq!(a.rss, b.rss, max_relative = 1e-10);
    for k in 0..4 {
        approx::assert_relative_eq!(a.parameters[k].value, b.parameters[k].value, max_relative = 1e-9);
    }
    // the whole masked wavelengths: the same fit as with those wavelengths removed
    let kept: Vec<usize> = (0..nw).filter(|j| ![15, 28].contains(j)).collect();
    let mut removed = noisy
        .with_data(
            noisy.wavelengths_nm().select(Axis(0), &kept),
            noisy.absorbance().select(Axis(1), &kept),
        )
        .unwrap();
    removed.set_mask(mask.select(Axis(1), &kept)).unwrap();
    let c = hard::fit(&removed, &truth, &params).unwrap();
    assert_eq!(a.n_data, c.n_data);
    assert_eq!(a.degrees_of_freedom, c.degrees_of_freedom);
    approx::assert_relative_eq!(a.rss, c.rss, max_relative = 1e-9);
    for k in 0..4 {
        approx::assert_relative_eq!(a.parameters[k].value, c.parameters[k].value, max_relative = 1e-8);
        approx::assert_relative_eq!(
            a.parameters[k].standard_error,
            c.parameters[k].standard_error,
            max_relative = 1e-7
        );
    }
    // spectra at a wholly masked wavelength are not determined
    assert!(a.spectra.row(15).iter().all(|e| e.is_nan()));
}

#[test]
fn settings_the_columnwise_path_cannot_fit_are_refused() {
    let truth = truth_model();
    let sim = simulate(&truth, &plan(temperatures(4), 20.0)).unwrap();
    let refused = [
        HardFitParams {
            spectra_sign: SpectraSign::NonNegative,
            baseline: hard::Baseline::Offset,
            ..one_start()
        },
        HardFitParams {
            spectra_sign: SpectraSign::NonNegative,
            spectra_temperature: hard::SpectraTemperature::Linear { reference_k: 300.0 },
            ..one_start()
        },
        HardFitParams {
            weighting: Weighting::Absorbance {
                floor_au: -1.0,
                relative: 0.01,
            },
            ..one_start()
        },
        HardFitParams {
            weighting: Weighting::Absorbance {
                floor_au: 1e-3,
                relative: 0.01,
            },
            known_noise: Some(1e-3),
            ..one_start()
        },
    ];
    for (k, params) in refused.iter().enumerate() {
        let e = hard::fit(&sim.set, &truth, params).unwrap_err();
        assert!(matches!(e, hard::HardFitError::Settings(_)), "case {k}: {e}");
    }
}

#[test]
fn the_settings_round_trip_through_a_run_configuration() {
    let text = "spectra_sign = \"non_negative\"\nweighting = { kind = \"absorbance\", floor_au = 0.001, relative = 0.02 }\n";
    let params: HardFitParams = toml::from_str(text).unwrap();
    assert_eq!(params.spectra_sign, SpectraSign::NonNegative);
    assert_eq!(
        params.weighting,
        Weighting::Absorbance {
            floor_au: 0.001,
            relative: 0.02
        }
    );
    let back: HardFitParams = serde_json::from_str(&serde_json::to_string(&params).unwrap()).unwrap();
    assert_eq!(back, params);
    assert_eq!(HardFitParams::default().weighting, Weighting::Uniform);
}

// ---- the binary, end to end (helpers copied from tests/cli.rs) ----

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

/// Writes an invented one-complex model and a small plan, and simulates the data with the
/// binary; returns the folder holding spectra.csv and samples.csv.
fn simulated_set(dir: &Path) -> std::path::PathBuf {
    let model = dir.join("model.toml");
    std::fs::write(
        &model,
        "components = [{ name = \"Q\", absorbs = true }, { name = \"Z\", absorbs = false }]\n\
         [[species]]\nname = \"QZ\"\nstoichiometry = { Q = 1, Z = 1 }\nabsorbs = true\n\
         law = { kind = \"van_t_hoff\", log_beta_ref = { value = 1.0 }, dh_ref = { value = 20000.0 } }\n",
    )
    .unwrap();
    let plan = dir.join("plan.toml");
    std::fs::write(
        &plan,
        "seed = 4\nfirst_nm = 400.0\nlast_nm = 700.0\nstep_nm = 10.0\n\
         temperatures_c = [10.0, 25.0, 40.0, 55.0, 70.0]\npath_cm = 1.0\n\
         preparation_temperature_c = 25.0\nthermal_expansion = false\n\
         noise = { kind = \"absorbance\", sd_au = 2e-3 }\n\
         [[series]]\nlabel = \"Z0.05\"\ntotals_m = { Q = 0.01, Z = 0.05 }\n\
         [[series]]\nlabel = \"Z0.5\"\ntotals_m = { Q = 0.01, Z = 0.5 }\n\
         [[spectra]]\nspecies = \"Q\"\nbands = [{ centre_nm = 430.0, width_nm = 20.0, height = 15.0 }]\n\
         [[spectra]]\nspecies = \"QZ\"\nbands = [{ centre_nm = 580.0, width_nm = 35.0, height = 60.0 }]\n",
    )
    .unwrap();
    let sim = dir.join("sim");
    let (code, _, err) = run(bin()
        .args(["simulate", "--quiet", "--model"])
        .arg(&model)
        .arg("--plan")
        .arg(&plan)
        .arg("--out")
        .arg(&sim));
    assert_eq!(code, 0, "{err}");
    sim
}

#[test]
fn fit_with_non_negative_spectra_writes_no_negative_absorptivity() {
    let dir = tempfile::tempdir().unwrap();
    let sim = simulated_set(dir.path());
    let fit = |extra: &[&str], out: &str| {
        run(bin()
            .args(["fit", "--quiet", "--spectra"])
            .arg(sim.join("spectra.csv"))
            .arg("--samples")
            .arg(sim.join("samples.csv"))
            .arg("--model")
            .arg(dir.path().join("model.toml"))
            .args(extra)
            .arg("--out")
            .arg(dir.path().join(out)))
    };
    let (code, _, err) = fit(&["--non-negative-spectra"], "nn");
    assert_eq!(code, 0, "{err}");
    let text = std::fs::read_to_string(dir.path().join("nn/pure_spectra.csv")).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    assert!(header.contains("QZ"), "{header}");
    let mut values = 0;
    for line in lines {
        // every column after the wavelength is an ε or its standard error
        for cell in line.split(',').skip(1) {
            let v: f64 = cell.parse().unwrap();
            assert!(v >= 0.0, "negative value {v} in: {line}");
            values += 1;
        }
    }
    assert!(values > 0);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("nn/report.json")).unwrap()).unwrap();
    assert_eq!(report["data"]["config"]["fit"]["spectra_sign"], "non_negative");
    // the weights flag reaches the settings; bad values are usage errors (exit code 2)
    let (code, _, err) = fit(&["--absorbance-weights", "0.002,0.01"], "w");
    assert_eq!(code, 0, "{err}");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("w/report.json")).unwrap()).unwrap();
    assert_eq!(report["data"]["config"]["fit"]["weighting"]["kind"], "absorbance");
    for bad in ["0.002", "0,0.01", "a,b", "0.002,-1"] {
        let (code, _, err) = fit(&["--absorbance-weights", bad], "bad");
        assert_eq!(code, 2, "{bad}: {err}");
    }
    // a combination the path cannot fit: exit code 2 with the reason
    let (code, _, err) = fit(&["--non-negative-spectra", "--baseline", "offset"], "refused");
    assert_eq!(code, 2);
    assert!(err.contains("baseline"), "{err}");
}
