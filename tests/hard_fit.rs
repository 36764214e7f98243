//! Ground truth for the global model fit: data simulated from known parameters are fitted back.
//! The truth is the simulation's input (not an output of the fit), so these tests can fail.

use isosbestic::resolve::hard::{self, Baseline, ConcentrationBasis, HardFitParams, SpectraTemperature};
use isosbestic::simulate::{Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
use isosbestic::thermo::SolventDensity;

/// M + X ⇌ MX and M + 2X ⇌ MX2, van 't Hoff laws; `truth` chooses the parameter values.
fn model(lb1: f64, dh1: f64, lb2: f64, dh2: f64) -> isosbestic::speciation::ValidModel {
    isosbestic::testing::metal_ligand_model("M", "X", &[(1, lb1, dh1), (2, lb2, dh2)], None)
}

fn plan(noise: Noise, seed: u64) -> SimulationPlan {
    SimulationPlan {
        seed,
        first_nm: 350.0,
        last_nm: 800.0,
        step_nm: 3.0,
        temperatures_c: (0..12).map(|k| 5.0 + 7.5 * f64::from(k)).collect(),
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: true,
        noise,
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: isosbestic::testing::ligand_series("M", 0.02, "X", &[0.3, 1.0, 3.0]),
        spectra: isosbestic::testing::stepwise_spectra(),
    }
}

fn fit_params() -> HardFitParams {
    HardFitParams {
        concentrations: ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        ..HardFitParams::default()
    }
}

#[test]
fn noise_free_data_give_back_the_simulated_parameters() {
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let sim = simulate(&truth, &plan(Noise::None, 1)).unwrap();
    // Start away from the truth: the fit must find it.
    let start = model(1.0, 0.0, 1.0, 0.0);
    let fit = hard::fit(&sim.set, &start, &fit_params()).unwrap();
    assert!(fit.termination.converged(), "{:?}", fit.termination);
    for (species, name, expected) in [
        ("MX", "log_beta_ref", 0.4),
        ("MX", "dh_ref", 12_000.0),
        ("MX2", "log_beta_ref", -0.2),
        ("MX2", "dh_ref", 35_000.0),
    ] {
        let p = fit.parameter(species, name).unwrap();
        approx::assert_relative_eq!(p.value, expected, max_relative = 1e-6);
    }
    // spectra come back too (ε of MX2 at its 650 nm band: 55 plus the tail of its 480 nm band)
    approx::assert_relative_eq!(fit.rss, 0.0, epsilon = 1e-18);
}

#[test]
fn noisy_fits_land_within_three_standard_errors() {
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let start = model(1.0, 0.0, 1.0, 0.0);
    for seed in 1..=5 {
        let sim = simulate(&truth, &plan(Noise::Absorbance { sd_au: 5e-4 }, seed)).unwrap();
        let fit = hard::fit(&sim.set, &start, &fit_params()).unwrap();
        assert!(fit.termination.converged());
        // residual sd estimates the simulated noise
        approx::assert_relative_eq!(fit.residual_sd, 5e-4, max_relative = 0.05);
        for (species, name, expected) in [
            ("MX", "log_beta_ref", 0.4),
            ("MX", "dh_ref", 12_000.0),
            ("MX2", "log_beta_ref", -0.2),
            ("MX2", "dh_ref", 35_000.0),
        ] {
            let p = fit.parameter(species, name).unwrap();
            let z = (p.value - expected) / p.standard_error;
            assert!(
                z.abs() < 3.0,
                "seed {seed}: {species} {name} = {} ± {} (z = {z})",
                p.value,
                p.standard_error
            );
        }
    }
}

#[test]
fn baselines_are_eliminated_with_the_spectra() {
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let mut p = plan(Noise::None, 3);
    p.offset_sd_au = 5e-3;
    p.slope_sd_au_per_100nm = 2e-3;
    let sim = simulate(&truth, &p).unwrap();
    let params = HardFitParams {
        baseline: Baseline::OffsetAndSlope,
        ..fit_params()
    };
    let fit = hard::fit(&sim.set, &model(1.0, 0.0, 1.0, 0.0), &params).unwrap();
    assert!(fit.termination.converged());
    approx::assert_relative_eq!(
        fit.parameter("MX2", "dh_ref").unwrap().value,
        35_000.0,
        max_relative = 1e-6
    );
    let _ = SpectraTemperature::Constant;
}

#[test]
fn a_parameter_the_design_cannot_determine_never_gets_a_finite_standard_error() {
    // One series at a low ligand level: MX2 barely forms, so its parameters are not determined.
    // Whatever the optimiser does with them, their standard errors must not look precise.
    let truth = model(0.4, 12_000.0, -3.0, 35_000.0);
    let mut p = plan(Noise::Absorbance { sd_au: 1e-3 }, 11);
    p.series.truncate(1);
    p.series[0].totals_m.insert("X".into(), 0.05);
    let sim = simulate(&truth, &p).unwrap();
    let fit = hard::fit(&sim.set, &model(1.0, 0.0, 1.0, 0.0), &fit_params()).unwrap();
    for t in &fit.thermodynamics {
        let se = t.standard.standard_errors();
        assert!(
            se[1].is_nan() || se[1] > 0.0,
            "{}: σ(ΔH°) = {} looks precise",
            t.species,
            se[1]
        );
    }
    for p in &fit.parameters {
        assert!(p.standard_error.is_nan() || p.standard_error > 0.0, "{:?}", p);
    }
}

#[test]
fn band_shifts_need_temperature_dependent_spectra() {
    // Bands of MX2 shift by 0.08 nm/K. Constant spectra cannot follow; the quadratic ε(T) form
    // can (issue 4: "band shifts need the quadratic term"). The residual-structure diagnostic
    // must notice what the constant-spectra fit misses.
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let mut p = plan(Noise::Absorbance { sd_au: 5e-4 }, 21);
    for b in &mut p.spectra[2].bands {
        b.shift_nm_per_k = 0.08;
    }
    let sim = simulate(&truth, &p).unwrap();
    let start = model(1.0, 0.0, 1.0, 0.0);
    let z = |fit: &hard::HardFit| {
        let q = fit.parameter("MX2", "dh_ref").unwrap();
        (q.value - 35_000.0) / q.standard_error
    };
    let constant = hard::fit(&sim.set, &start, &fit_params()).unwrap();
    let quadratic = hard::fit(
        &sim.set,
        &start,
        &HardFitParams {
            spectra_temperature: SpectraTemperature::Quadratic { reference_k: 318.15 },
            ..fit_params()
        },
    )
    .unwrap();
    assert!(quadratic.termination.converged());
    assert!(
        z(&constant).abs() > 3.0,
        "constant spectra should be biased, z = {}",
        z(&constant)
    );
    assert!(
        z(&quadratic).abs() < 3.0,
        "quadratic spectra should not be, z = {}",
        z(&quadratic)
    );
    let diags = isosbestic::report::fit::diagnose(&sim.set, &constant, &fit_params());
    assert!(
        diags
            .iter()
            .any(|d| matches!(d, isosbestic::report::fit::Diagnostic::StructuredResiduals { .. })),
        "{diags:?}"
    );
    // The nested F-test prefers the quadratic form decisively.
    let t = hard::nested_f_test(
        ("constant", constant.rss, constant.n_parameters_total),
        ("quadratic", quadratic.rss, quadratic.n_parameters_total),
        constant.n_data,
    );
    assert!(t.p_value < 1e-6, "{t:?}");
}

/// M + X ⇌ MX with an optional ε ceiling on the free metal.
fn one_to_one(lb: f64, dh: f64, ceiling: Option<f64>) -> isosbestic::speciation::ValidModel {
    isosbestic::testing::metal_ligand_model("M", "X", &[(1, lb, dh)], ceiling)
}

#[test]
fn a_mirror_solution_is_found_and_the_weak_absorber_ceiling_decides() {
    // One series, ligand in large excess: the free metal and the complex can swap roles
    // (ΔH° → −ΔH°, spectra swapped) and fit almost equally well (issue 4 §2). The truth has a
    // weakly absorbing metal (peak ε 5); declaring a ceiling of 20 must select the truth.
    let truth = one_to_one(0.0, 30_000.0, None);
    use isosbestic::testing::band;
    let mut p = plan(Noise::Absorbance { sd_au: 5e-4 }, 5);
    p.series = vec![SeriesPlan {
        label: "x".into(),
        totals_m: [("M".into(), 0.02), ("X".into(), 2.0)].into(),
    }];
    p.thermal_expansion = false;
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
    let params = HardFitParams::default();
    let with_prior = hard::fit(&sim.set, &one_to_one(0.5, 0.0, Some(20.0)), &params).unwrap();
    let dh = with_prior.parameter("MX", "dh_ref").unwrap();
    assert!(
        ((dh.value - 30_000.0) / dh.standard_error).abs() < 3.0,
        "{} ± {}",
        dh.value,
        dh.standard_error
    );
    assert!(
        with_prior.ceiling_violations.is_empty(),
        "{:?}",
        with_prior.ceiling_violations
    );
    let without = hard::fit(&sim.set, &one_to_one(0.5, 0.0, None), &params).unwrap();
    eprintln!("alternatives without prior: {:?}", without.alternatives);
    assert!(
        !without.alternatives.is_empty(),
        "the mirror solution should be reported"
    );
}

#[test]
fn log_beta_at_the_reference_temperature_carries_the_parameter_error() {
    // At T_ref, log β = log_beta_ref exactly, so its standard error is that parameter's.
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let sim = simulate(&truth, &plan(Noise::Absorbance { sd_au: 5e-4 }, 2)).unwrap();
    let start = model(1.0, 0.0, 1.0, 0.0);
    let fit = hard::fit(&sim.set, &start, &fit_params()).unwrap();
    let at = fit.log_beta_at(&start, "MX", &[298.15, 350.0], 0.95).unwrap();
    let p = fit.parameter("MX", "log_beta_ref").unwrap();
    approx::assert_relative_eq!(at[0].log_beta, p.value, max_relative = 1e-12);
    approx::assert_relative_eq!(at[0].standard_error, p.standard_error, max_relative = 1e-9);
    // away from T_ref the error includes the ΔH° uncertainty; the 95 % band holds the truth
    assert!(at[1].standard_error.is_finite() && at[1].standard_error > 0.0);
    let truth_350 = 0.4
        - 12_000.0 / (isosbestic::speciation::GAS_CONSTANT * std::f64::consts::LN_10)
            * (1.0 / 350.0 - 1.0 / 298.15);
    assert!(
        at[1].lower < truth_350 && truth_350 < at[1].upper,
        "{:?} vs {truth_350}",
        at[1]
    );
    assert!(fit.log_beta_at(&start, "nope", &[300.0], 0.95).is_none());
}

/// Masked points (saturated absorbances) leave the fit: a set with masked points at some
/// wavelengths fits exactly as the same set without those wavelengths, whatever values the
/// masked points hold; the spectra there come from the unmasked samples. (The reference is the
/// same fit on the reduced wavelength grid: an exact identity, no outside value.)
#[test]
fn masked_wavelengths_leave_the_fit_and_their_values_do_not_matter() {
    let truth = model(0.4, 12_000.0, -0.2, 35_000.0);
    let mut sim = simulate(&truth, &plan(Noise::Absorbance { sd_au: 1e-3 }, 5)).unwrap();
    let params = HardFitParams {
        baseline: Baseline::OffsetAndSlope,
        ..HardFitParams::default()
    };
    let (ns, nw) = sim.set.absorbance().dim();
    let masked_columns = [3usize, 4, nw - 2];
    // mask two samples at those wavelengths and give them absurd ("saturated") values
    let mut mask = ndarray::Array2::from_elem((ns, nw), false);
    let mut d = sim.set.absorbance().clone();
    for &j in &masked_columns {
        for i in [0usize, ns / 2] {
            mask[[i, j]] = true;
            d[[i, j]] = 4.0;
        }
    }
    let mut corrupted = sim.set.with_data(sim.set.wavelengths_nm().clone(), d).unwrap();
    corrupted.set_mask(mask.clone()).unwrap();
    sim.set.set_mask(mask).unwrap();
    let keep: Vec<usize> = (0..nw).filter(|j| !masked_columns.contains(j)).collect();
    let reduced = sim
        .set
        .with_data(
            sim.set.wavelengths_nm().select(ndarray::Axis(0), &keep),
            sim.set.absorbance().select(ndarray::Axis(1), &keep),
        )
        .unwrap();
    let a = hard::fit(&sim.set, &truth, &params).unwrap();
    let b = hard::fit(&corrupted, &truth, &params).unwrap();
    let c = hard::fit(&reduced, &truth, &params).unwrap();
    assert_eq!(a.n_data, ns * keep.len());
    for ((pa, pb), pc) in a.parameters.iter().zip(&b.parameters).zip(&c.parameters) {
        approx::assert_relative_eq!(pa.value, pc.value, max_relative = 1e-9);
        approx::assert_relative_eq!(pb.value, pc.value, max_relative = 1e-9);
        approx::assert_relative_eq!(pa.standard_error, pc.standard_error, max_relative = 1e-7);
    }
    approx::assert_relative_eq!(a.rss, c.rss, max_relative = 1e-9);
    // spectra at a masked wavelength: from the unmasked samples, close to those of its
    // neighbours' scale and finite, and the same whatever the masked values were
    for &j in &masked_columns {
        for k in 0..a.spectra.ncols() {
            assert!(a.spectra[[j, k]].is_finite() && a.spectra_standard_errors[[j, k]].is_finite());
            approx::assert_relative_eq!(
                a.spectra[[j, k]],
                b.spectra[[j, k]],
                max_relative = 1e-9,
                epsilon = 1e-9
            );
        }
    }
}
