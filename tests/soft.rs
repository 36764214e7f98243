//! Soft resolution (MCR-ALS): recovery of known profiles, constraints, errors, band boundaries.
//! The ground truth is the input of the simulations (hand-built Gaussian bands or
//! `isosbestic::simulate`), never an output of the resolution, so these tests can fail.

use isosbestic::resolve::linear::{Constraint, nnls_brute_force};
use isosbestic::resolve::soft::{
    Absence, BandParams, Closure, InitialEstimate, KnownSpectrum, SampleLayout, SoftError, SoftParams,
    SoftResolution, SoftTermination, Unimodality, band_boundaries, concentration_step, resolve,
    resolve_matrix,
};
use isosbestic::simulate::{Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
use isosbestic::speciation::EquilibriumModel;
use ndarray::{Array1, Array2, ArrayView1, Axis};
use proptest::prelude::*;
use rand::Rng;

fn gauss(x: f64, centre: f64, width: f64) -> f64 {
    (-0.5 * ((x - centre) / width).powi(2)).exp()
}

fn corr(a: ArrayView1<f64>, b: ArrayView1<f64>) -> f64 {
    let (ma, mb) = (a.mean().unwrap(), b.mean().unwrap());
    let (da, db) = (a.mapv(|v| v - ma), b.mapv(|v| v - mb));
    da.dot(&db) / (da.dot(&da) * db.dot(&db)).sqrt()
}

/// Best correlation of each true column with a resolved column (any permutation).
fn matched_correlations(truth: &Array2<f64>, found: &Array2<f64>) -> Vec<f64> {
    truth
        .axis_iter(Axis(1))
        .map(|t| {
            found
                .axis_iter(Axis(1))
                .map(|f| corr(t, f))
                .fold(f64::NEG_INFINITY, f64::max)
        })
        .collect()
}

/// Two species with selective regions: A → B along 15 samples (A alone in the first sample, B
/// alone in the last), bands at 20 and 60 overlapping in the middle.
fn selective_two() -> (Array2<f64>, Array2<f64>, Array2<f64>) {
    let n = 15;
    let c = Array2::from_shape_fn((n, 2), |(i, k)| {
        let x = i as f64 / (n - 1) as f64;
        if k == 0 { 1.0 - x * x } else { x * x }
    });
    let s = Array2::from_shape_fn((80, 2), |(j, k)| {
        let x = j as f64;
        if k == 0 {
            gauss(x, 20.0, 8.0) + 0.3 * gauss(x, 45.0, 10.0)
        } else {
            gauss(x, 60.0, 8.0) + 0.4 * gauss(x, 40.0, 10.0)
        }
    });
    let d = c.dot(&s.t());
    (c, s, d)
}

/// Three species with a selective wavelength and a selective sample each.
fn selective_three() -> (Array2<f64>, Array2<f64>, Array2<f64>) {
    let n = 21;
    let c = Array2::from_shape_fn((n, 3), |(i, k)| {
        let x = i as f64 / (n - 1) as f64;
        match k {
            0 => (1.0 - 2.0 * x).max(0.0),
            1 => 1.0 - (2.0 * x - 1.0).abs(),
            _ => (2.0 * x - 1.0).max(0.0),
        }
    });
    let s = Array2::from_shape_fn((90, 3), |(j, k)| {
        let x = j as f64;
        match k {
            0 => gauss(x, 15.0, 7.0),
            1 => gauss(x, 45.0, 9.0),
            _ => gauss(x, 75.0, 7.0),
        }
    });
    let d = c.dot(&s.t());
    (c, s, d)
}

#[test]
fn two_selective_species_are_recovered_from_either_initial_estimate() {
    let (c, s, d) = selective_two();
    for initial in [
        InitialEstimate::EvolvingFactors,
        InitialEstimate::PurestVariables { noise_percent: 1.0 },
    ] {
        let params = SoftParams {
            n_species: 2,
            initial: initial.clone(),
            max_iterations: 500,
            ..SoftParams::default()
        }
        .check()
        .unwrap();
        let out = resolve_matrix(d.view(), &SampleLayout::single_series(15), &params).unwrap();
        // noise-free data: the lack of fit creeps towards zero along the last directions, which
        // may take more than the 500 iterations allowed here; it must not rise.
        assert_ne!(out.termination, SoftTermination::Diverging, "{initial:?}");
        assert!(
            out.history.windows(2).all(|w| w[1] <= w[0] * (1.0 + 1e-9)),
            "{initial:?}"
        );
        // ground truth: the simulated C and S (up to scale and order)
        for r in matched_correlations(&c, &out.concentrations) {
            assert!(r > 0.999, "{initial:?}: C correlation {r}");
        }
        for r in matched_correlations(&s, &out.spectra) {
            assert!(r > 0.999, "{initial:?}: S correlation {r}");
        }
        assert!(
            out.lack_of_fit_percent < 0.1,
            "{initial:?}: {}",
            out.lack_of_fit_percent
        );
        assert!(out.explained_variance_percent > 99.99);
        assert_eq!(out.history.len(), out.iterations);
        eprintln!(
            "two species, {initial:?}: {} iterations, LOF {:.3e} %",
            out.iterations, out.lack_of_fit_percent
        );
    }
}

#[test]
fn three_selective_species_are_recovered_with_noise() {
    let (c, s, d0) = selective_three();
    let mut rng = isosbestic::testing::rng(7);
    let noise = 1e-3;
    let d = d0.mapv(|v| v + noise * (rng.random::<f64>() - 0.5) * 12f64.sqrt());
    let params = SoftParams {
        n_species: 3,
        initial: InitialEstimate::PurestVariables { noise_percent: 2.0 },
        tolerance: 1e-7,
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let out = resolve_matrix(d.view(), &SampleLayout::single_series(21), &params).unwrap();
    for r in matched_correlations(&c, &out.concentrations) {
        assert!(r > 0.999, "C correlation {r}");
    }
    for r in matched_correlations(&s, &out.spectra) {
        assert!(r > 0.999, "S correlation {r}");
    }
    // The resolution is a least-squares fit: it cannot fit worse than the truth does (the
    // truth's LOF against noisy D is set by the simulated noise).
    let truth_lof =
        100.0 * ((&d - &d0).iter().map(|v| v * v).sum::<f64>() / d.iter().map(|v| v * v).sum::<f64>()).sqrt();
    assert!(
        out.lack_of_fit_percent <= truth_lof * 1.0001,
        "{} vs {truth_lof}",
        out.lack_of_fit_percent
    );
    // against the rank-3 PCA reconstruction the noise outside the 3-factor space is gone
    assert!(out.lack_of_fit_pca_percent < out.lack_of_fit_percent);
    eprintln!(
        "three species + noise: {} iterations ({:?}), LOF {:.4} % (truth {truth_lof:.4} %), LOF vs PCA {:.4} %",
        out.iterations, out.termination, out.lack_of_fit_percent, out.lack_of_fit_pca_percent
    );
}

fn equilibrium_model() -> isosbestic::speciation::ValidModel {
    EquilibriumModel::from_toml_str(
        r#"
        components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
        [[species]]
        name = "MX"
        stoichiometry = { M = 1, X = 1 }
        absorbs = true
        law = { kind = "van_t_hoff", log_beta_ref = { value = 0.4 }, dh_ref = { value = 25000.0 } }
        "#,
    )
    .unwrap()
    .check()
    .unwrap()
}

fn equilibrium_plan(noise: Noise) -> SimulationPlan {
    use isosbestic::testing::band;
    SimulationPlan {
        seed: 3,
        first_nm: 350.0,
        last_nm: 800.0,
        step_nm: 5.0,
        temperatures_c: (0..10).map(|k| 5.0 + 8.0 * f64::from(k)).collect(),
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: true,
        noise,
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: [0.1, 1.0, 10.0]
            .iter()
            .map(|&x| SeriesPlan {
                label: format!("X{x}"),
                totals_m: [("M".into(), 0.01), ("X".into(), x)].into(),
            })
            .collect(),
        spectra: vec![
            PureSpectrum {
                species: "M".into(),
                bands: vec![band(420.0, 30.0, 20.0)],
            },
            PureSpectrum {
                species: "MX".into(),
                bands: vec![band(600.0, 40.0, 60.0)],
            },
        ],
    }
}

#[test]
fn closure_from_the_model_holds_to_rounding_and_fixes_the_scale() {
    let model = equilibrium_model();
    let sim = simulate(&model, &equilibrium_plan(Noise::Absorbance { sd_au: 1e-3 })).unwrap();
    let closure = Closure::from_model(&model, &["M", "MX"], &["M"]).unwrap();
    let params = SoftParams {
        n_species: 2,
        closure: Some(closure),
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let out = resolve(&sim.set, &params).unwrap();
    let totals = sim.set.totals_matrix();
    for (i, row) in out.concentrations.axis_iter(Axis(0)).enumerate() {
        // mass balance of M: [M] + [MX] = T_M (as prepared; the closure uses the set's totals)
        approx::assert_abs_diff_eq!(row.sum(), totals[[i, 0]], epsilon = 1e-10);
        assert!(row.iter().all(|&v| v >= 0.0));
    }
    // closure fixes the scale: C is in mol/L and close to the simulated truth (which differs
    // from the prepared totals by the thermal expansion, < 2 % over 5–77 °C for water).
    let truth = sim.concentrations.select(Axis(1), &[0, 2]);
    for r in matched_correlations(&truth, &out.concentrations) {
        assert!(r > 0.99, "C correlation {r}");
    }
    eprintln!(
        "closure: {} iterations ({:?}), LOF {:.4} %",
        out.iterations, out.termination, out.lack_of_fit_percent
    );
}

#[test]
fn known_spectra_stay_fixed_and_unimodality_holds_along_temperature() {
    let (c, s, d) = selective_two();
    let known = s.column(0).to_vec();
    let params = SoftParams {
        n_species: 2,
        known_spectra: vec![KnownSpectrum {
            species: 0,
            spectrum: known.clone(),
        }],
        unimodality: Unimodality::AlongTemperature,
        initial: InitialEstimate::Spectra {
            spectra: Array2::from_shape_fn((80, 2), |(j, k)| if k == 0 { known[j] } else { 1.0 }),
        },
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let out = resolve_matrix(d.view(), &SampleLayout::single_series(15), &params).unwrap();
    for (a, b) in out.spectra.column(0).iter().zip(known.iter()) {
        approx::assert_abs_diff_eq!(a, b, epsilon = 1e-15);
    }
    // with species 0's spectrum known in absolute units its profile comes back in those units
    for (a, b) in out.concentrations.column(0).iter().zip(c.column(0).iter()) {
        approx::assert_abs_diff_eq!(a, b, epsilon = 1e-6);
    }
    for k in 0..2 {
        let col = out.concentrations.column(k);
        let mut down = false;
        for w in col.windows(2) {
            if w[1] < w[0] - 1e-12 {
                down = true;
            }
            if down {
                assert!(w[1] <= w[0] + 1e-12, "species {k} is not unimodal");
            }
        }
    }
}

#[test]
fn the_iteration_limit_is_reported_with_the_last_state() {
    let (_, _, d) = selective_two();
    let params = SoftParams {
        n_species: 2,
        max_iterations: 1,
        tolerance: 1e-15,
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let out = resolve_matrix(d.view(), &SampleLayout::single_series(15), &params).unwrap();
    assert_eq!(out.termination, SoftTermination::IterationLimit);
    assert_eq!(out.iterations, 1);
    assert_eq!(out.history.len(), 1);
    assert_eq!(out.concentrations.dim(), (15, 2));
}

#[test]
fn settings_and_results_survive_a_serde_round_trip_and_unknown_fields_are_rejected() {
    let p = SoftParams {
        closure: Some(Closure {
            components: vec!["M".into()],
            counts: vec![vec![1.0], vec![1.0]],
            weight: 1e6,
        }),
        absent: vec![Absence {
            sample: "a".into(),
            species: 1,
        }],
        ..SoftParams::default()
    };
    let text = serde_json::to_string(&p).unwrap();
    let back: SoftParams = serde_json::from_str(&text).unwrap();
    assert_eq!(back, p);
    assert!(serde_json::from_str::<SoftParams>(r#"{"n_species": 2, "speed": 3}"#).is_err());
    let (_, _, d) = selective_two();
    let out = resolve_matrix(
        d.view(),
        &SampleLayout::single_series(15),
        &SoftParams::default().check().unwrap(),
    )
    .unwrap();
    let back: SoftResolution = serde_json::from_str(&serde_json::to_string(&out).unwrap()).unwrap();
    assert_eq!(back, out);
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn the_concentration_step_is_exact_nnls_not_clipping(seed in 0u64..10_000, k in 1usize..5) {
        let mut rng = isosbestic::testing::rng(seed);
        let (ns, nw) = (5, 8);
        let s = Array2::from_shape_fn((nw, k), |_| rng.random_range(-0.5..1.0));
        let d = Array2::from_shape_fn((ns, nw), |_| rng.random_range(-1.0..1.0));
        let mut layout = SampleLayout::single_series(ns);
        layout.path_cm = vec![1.0, 2.0, 0.5, 1.5, 3.0];
        let params = SoftParams { n_species: k, ..SoftParams::default() }.check().unwrap();
        let c = concentration_step(d.view(), s.view(), &layout, &params).unwrap();
        for i in 0..ns {
            // reference: brute-force NNLS (all passive sets) on X = b_i·S
            let x = &s * layout.path_cm[i];
            let reference = nnls_brute_force(x.view(), d.row(i));
            let cost = |v: ArrayView1<f64>| { let r = &d.row(i) - &x.dot(&v); r.dot(&r) };
            prop_assert!(c.row(i).iter().all(|&v| v >= 0.0));
            prop_assert!(cost(c.row(i)) <= cost(reference.view()) * (1.0 + 1e-9) + 1e-12);
            for (a, b) in c.row(i).iter().zip(reference.iter()) {
                prop_assert!((a - b).abs() < 1e-8, "sample {}: {} vs {}", i, a, b);
            }
        }
    }

    #[test]
    fn rotating_a_soft_solution_leaves_the_residual_unchanged(
        entries in proptest::collection::vec(-0.4f64..0.4, 4)
    ) {
        let (_, _, d) = selective_two();
        let mut layout = SampleLayout::single_series(15);
        layout.path_cm = (0..15).map(|i| 1.0 + 0.1 * i as f64).collect();
        let params = SoftParams { n_species: 2, max_iterations: 20, ..SoftParams::default() }.check().unwrap();
        let out = resolve_matrix(d.view(), &layout, &params).unwrap();
        let t = Array2::from_shape_fn((2, 2), |(i, j)| entries[2 * i + j] + if i == j { 1.0 } else { 0.0 });
        let det = t[[0, 0]] * t[[1, 1]] - t[[0, 1]] * t[[1, 0]];
        prop_assume!(det.abs() > 0.2);
        let t_inv = ndarray::array![[t[[1, 1]], -t[[0, 1]]], [-t[[1, 0]], t[[0, 0]]]] / det;
        let b = Array1::from(layout.path_cm.clone()).insert_axis(Axis(1));
        let resid = |c: &Array2<f64>, st: &Array2<f64>| {
            let e = &d - &(c * &b).dot(st);
            e.iter().map(|v| v * v).sum::<f64>()
        };
        let r0 = resid(&out.concentrations, &out.spectra.t().to_owned());
        let r1 = resid(&out.concentrations.dot(&t), &t_inv.dot(&out.spectra.t()));
        let scale = d.iter().map(|v| v * v).sum::<f64>();
        prop_assert!((r0 - r1).abs() <= 1e-10 * scale, "{} vs {}", r0, r1);
        // and the reported LOF is that residual
        prop_assert!((100.0 * (r0 / scale).sqrt() - out.lack_of_fit_percent).abs() < 1e-9);
    }
}

#[test]
fn a_perfectly_selective_system_has_a_band_of_zero_width() {
    let (_, _, d) = selective_three();
    let layout = SampleLayout::single_series(21);
    let params = SoftParams {
        n_species: 3,
        initial: InitialEstimate::PurestVariables { noise_percent: 1.0 },
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let fit = resolve_matrix(d.view(), &layout, &params).unwrap();
    let bands = band_boundaries(
        d.view(),
        &fit,
        &layout,
        &params,
        &BandParams::default().check().unwrap(),
    )
    .unwrap();
    for b in &bands {
        eprintln!(
            "selective species {}: f = {:.5}, [{:.5}, {:.5}]",
            b.species,
            b.contribution,
            b.f_min(),
            b.f_max()
        );
        assert!(b.f_max() - b.f_min() < 1e-3, "{b:?}");
        assert!(b.f_min() <= b.contribution + 1e-9 && b.contribution <= b.f_max() + 1e-9);
    }
}

#[test]
fn an_overlapping_system_has_a_band_of_finite_width() {
    // both species present in every sample and both absorbing at every wavelength
    let n = 12;
    let c = Array2::from_shape_fn((n, 2), |(i, k)| {
        let x = i as f64 / (n - 1) as f64;
        if k == 0 { 0.8 - 0.6 * x } else { 0.2 + 0.6 * x }
    });
    let s = Array2::from_shape_fn((60, 2), |(j, k)| {
        let x = j as f64;
        if k == 0 {
            0.2 + gauss(x, 20.0, 12.0)
        } else {
            0.2 + gauss(x, 40.0, 12.0)
        }
    });
    let d = c.dot(&s.t());
    let layout = SampleLayout::single_series(n);
    let params = SoftParams::default().check().unwrap();
    let fit = resolve_matrix(d.view(), &layout, &params).unwrap();
    let bands = band_boundaries(
        d.view(),
        &fit,
        &layout,
        &params,
        &BandParams::default().check().unwrap(),
    )
    .unwrap();
    for b in &bands {
        eprintln!(
            "overlapping species {}: f = {:.4}, [{:.4}, {:.4}], violations {:.1e} {:.1e}",
            b.species,
            b.contribution,
            b.f_min(),
            b.f_max(),
            b.minimum.violation,
            b.maximum.violation
        );
        assert!(b.f_max() - b.f_min() > 0.05, "{b:?}");
        assert!(b.minimum.violation < 1e-6 && b.maximum.violation < 1e-6);
    }
}

fn err(p: SoftParams) -> SoftError {
    p.check().unwrap_err()
}

#[test]
fn every_bad_setting_is_a_typed_error_naming_the_setting() {
    let name = |e: SoftError| match e {
        SoftError::InvalidParameter { name, .. } => name,
        other => panic!("unexpected {other:?}"),
    };
    let d = SoftParams::default;
    assert_eq!(name(err(SoftParams { n_species: 0, ..d() })), "n_species");
    assert_eq!(
        name(err(SoftParams {
            tolerance: f64::NAN,
            ..d()
        })),
        "tolerance"
    );
    assert_eq!(
        name(err(SoftParams {
            max_iterations: 0,
            ..d()
        })),
        "max_iterations"
    );
    assert_eq!(
        name(err(SoftParams {
            divergence_patience: 0,
            ..d()
        })),
        "divergence_patience"
    );
    let cl = |components: Vec<&str>, counts: Vec<Vec<f64>>, weight: f64| {
        Some(Closure {
            components: components.into_iter().map(String::from).collect(),
            counts,
            weight,
        })
    };
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec![], vec![vec![], vec![]], 1.0),
            ..d()
        })),
        "closure.components"
    );
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec!["M"], vec![vec![1.0]], 1.0),
            ..d()
        })),
        "closure.counts"
    );
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec!["M"], vec![vec![1.0], vec![]], 1.0),
            ..d()
        })),
        "closure.counts"
    );
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec!["M"], vec![vec![1.0], vec![-1.0]], 1.0),
            ..d()
        })),
        "closure.counts"
    );
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec!["M"], vec![vec![0.0], vec![0.0]], 1.0),
            ..d()
        })),
        "closure.counts"
    );
    assert_eq!(
        name(err(SoftParams {
            closure: cl(vec!["M"], vec![vec![1.0], vec![1.0]], 0.0),
            ..d()
        })),
        "closure.weight"
    );
    let ks = |species: usize, v: f64| KnownSpectrum {
        species,
        spectrum: vec![v; 3],
    };
    assert_eq!(
        name(err(SoftParams {
            known_spectra: vec![ks(2, 1.0)],
            ..d()
        })),
        "known_spectra"
    );
    assert_eq!(
        name(err(SoftParams {
            known_spectra: vec![ks(0, 1.0), ks(0, 1.0)],
            ..d()
        })),
        "known_spectra"
    );
    assert_eq!(
        name(err(SoftParams {
            known_spectra: vec![ks(0, f64::INFINITY)],
            ..d()
        })),
        "known_spectra"
    );
    assert_eq!(
        name(err(SoftParams {
            absent: vec![Absence {
                sample: "a".into(),
                species: 5
            }],
            ..d()
        })),
        "absent"
    );
    assert_eq!(
        name(err(SoftParams {
            initial: InitialEstimate::PurestVariables { noise_percent: 0.0 },
            ..d()
        })),
        "initial.noise_percent"
    );
    assert_eq!(
        name(err(SoftParams {
            initial: InitialEstimate::Spectra {
                spectra: Array2::zeros((4, 3))
            },
            ..d()
        })),
        "initial.spectra"
    );
    assert_eq!(
        name(err(SoftParams {
            initial: InitialEstimate::Spectra {
                spectra: Array2::from_elem((4, 2), f64::NAN)
            },
            ..d()
        })),
        "initial.spectra"
    );
    assert_eq!(
        name(
            BandParams {
                tolerance: -1.0,
                ..BandParams::default()
            }
            .check()
            .unwrap_err()
        ),
        "bands.tolerance"
    );
    assert_eq!(
        name(
            BandParams {
                penalty: f64::NAN,
                ..BandParams::default()
            }
            .check()
            .unwrap_err()
        ),
        "bands.penalty"
    );
    assert_eq!(
        name(
            BandParams {
                max_evaluations: 1,
                ..BandParams::default()
            }
            .check()
            .unwrap_err()
        ),
        "bands.max_evaluations"
    );
}

#[test]
fn every_data_problem_is_a_typed_error_naming_where_it_is() {
    let (_, _, d) = selective_two();
    let ok = SoftParams::default();
    let run = |d: &Array2<f64>, layout: &SampleLayout, p: SoftParams| {
        resolve_matrix(d.view(), layout, &p.check().unwrap()).unwrap_err()
    };
    let layout = SampleLayout::single_series(15);
    // layout with the wrong number of samples
    assert!(matches!(
        run(&d, &SampleLayout::single_series(14), ok.clone()),
        SoftError::Shape { .. }
    ));
    // a NaN absorbance, named by sample id and wavelength index
    let mut bad = d.clone();
    bad[[4, 7]] = f64::NAN;
    assert_eq!(
        run(&bad, &layout, ok.clone()),
        SoftError::NonFinite {
            sample: "4".into(),
            wavelength_index: 7
        }
    );
    // a zero path length
    let mut l0 = layout.clone();
    l0.path_cm[3] = 0.0;
    assert!(matches!(
        run(&d, &l0, ok.clone()),
        SoftError::InvalidParameter { name: "path_cm", .. }
    ));
    // too many species
    let small = d.slice(ndarray::s![..2, ..]).to_owned();
    assert_eq!(
        run(
            &small,
            &SampleLayout::single_series(2),
            SoftParams {
                n_species: 3,
                ..ok.clone()
            }
        ),
        SoftError::TooManySpecies {
            n_species: 3,
            samples: 2,
            wavelengths: 80
        }
    );
    // a known spectrum of the wrong length
    assert_eq!(
        run(
            &d,
            &layout,
            SoftParams {
                known_spectra: vec![KnownSpectrum {
                    species: 1,
                    spectrum: vec![1.0; 5]
                }],
                ..ok.clone()
            }
        ),
        SoftError::KnownSpectrumLength {
            species: 1,
            points: 5,
            wavelengths: 80
        }
    );
    // initial spectra of the wrong length
    assert!(matches!(
        run(
            &d,
            &layout,
            SoftParams {
                initial: InitialEstimate::Spectra {
                    spectra: Array2::ones((5, 2))
                },
                ..ok.clone()
            }
        ),
        SoftError::Shape { .. }
    ));
    // an absence in an unknown sample
    assert_eq!(
        run(
            &d,
            &layout,
            SoftParams {
                absent: vec![Absence {
                    sample: "x9".into(),
                    species: 0
                }],
                ..ok.clone()
            }
        ),
        SoftError::UnknownSample { id: "x9".into() }
    );
    // closure on a component without totals
    let closure = Closure {
        components: vec!["M".into()],
        counts: vec![vec![1.0], vec![1.0]],
        weight: 1e6,
    };
    assert_eq!(
        run(
            &d,
            &layout,
            SoftParams {
                closure: Some(closure.clone()),
                ..ok.clone()
            }
        ),
        SoftError::MissingTotal {
            component: "M".into()
        }
    );
    // closure impossible where both M-containing species are declared absent
    let mut lt = layout.clone();
    lt.components = vec!["M".into()];
    lt.totals_m = Array2::ones((15, 1));
    assert_eq!(
        run(
            &d,
            &lt,
            SoftParams {
                closure: Some(closure),
                absent: vec![
                    Absence {
                        sample: "2".into(),
                        species: 0
                    },
                    Absence {
                        sample: "2".into(),
                        species: 1
                    }
                ],
                ..ok.clone()
            }
        ),
        SoftError::ClosureInfeasible {
            sample: "2".into(),
            component: "M".into()
        }
    );
    // names missing from the equilibrium model
    let model = equilibrium_model();
    assert_eq!(
        Closure::from_model(&model, &["M", "MY"], &["M"]).unwrap_err(),
        SoftError::NotInModel {
            name: "MY".into(),
            kind: "species"
        }
    );
    assert_eq!(
        Closure::from_model(&model, &["M", "MX"], &["Z"]).unwrap_err(),
        SoftError::NotInModel {
            name: "Z".into(),
            kind: "component"
        }
    );
    // a resolution that does not match the data given to the band boundaries
    let fit = resolve_matrix(d.view(), &layout, &ok.clone().check().unwrap()).unwrap();
    let p3 = SoftParams { n_species: 3, ..ok }.check().unwrap();
    assert!(matches!(
        band_boundaries(
            d.view(),
            &fit,
            &layout,
            &p3,
            &BandParams::default().check().unwrap()
        )
        .unwrap_err(),
        SoftError::Shape { .. }
    ));
    let _ = Constraint::NonNegative;
}

#[test]
fn the_hybrid_option_recovers_the_simulated_equilibrium_parameters() {
    use isosbestic::resolve::soft::{Hybrid, HybridSpecies};
    let truth = equilibrium_model();
    let mut plan = equilibrium_plan(Noise::None);
    plan.thermal_expansion = false; // the hybrid option uses the totals as given
    let sim = simulate(&truth, &plan).unwrap();
    // start the model away from the truth (log β 0.4, ΔH° 25 kJ/mol in the simulation)
    let start = EquilibriumModel::from_toml_str(
        r#"
        components = [{ name = "M", absorbs = true }, { name = "X", absorbs = false }]
        [[species]]
        name = "MX"
        stoichiometry = { M = 1, X = 1 }
        absorbs = true
        law = { kind = "van_t_hoff", log_beta_ref = { value = 1.0 }, dh_ref = { value = 0.0 } }
        "#,
    )
    .unwrap();
    let params = SoftParams {
        n_species: 2,
        hybrid: Some(Hybrid::new(
            start,
            vec![
                HybridSpecies {
                    resolved: 0,
                    model_species: "M".into(),
                },
                HybridSpecies {
                    resolved: 1,
                    model_species: "MX".into(),
                },
            ],
        )),
        tolerance: 1e-10,
        max_iterations: 300,
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    let out = resolve(&sim.set, &params).unwrap();
    let h = out.hybrid.as_ref().unwrap();
    eprintln!(
        "hybrid: {} iterations ({:?}), LOF {:.3e} %, parameters {:?}",
        out.iterations, out.termination, out.lack_of_fit_percent, h.parameters
    );
    let get = |name: &str| {
        h.parameters
            .iter()
            .find(|p| p.species == "MX" && p.name == name)
            .unwrap()
            .value
    };
    // truth: the simulation's input parameters
    approx::assert_relative_eq!(get("log_beta_ref"), 0.4, max_relative = 1e-6);
    approx::assert_relative_eq!(get("dh_ref"), 25_000.0, max_relative = 1e-6);
    assert!(out.lack_of_fit_percent < 1e-5);
}

#[test]
fn bad_hybrid_settings_are_typed_errors() {
    use isosbestic::resolve::soft::{Hybrid, HybridSpecies};
    let model = equilibrium_model().as_model().clone();
    let hybrid = |species: Vec<(usize, &str)>| {
        Some(Hybrid::new(
            model.clone(),
            species
                .into_iter()
                .map(|(resolved, name)| HybridSpecies {
                    resolved,
                    model_species: name.into(),
                })
                .collect(),
        ))
    };
    let check = |h| {
        SoftParams {
            hybrid: h,
            ..SoftParams::default()
        }
        .check()
        .unwrap_err()
    };
    assert!(matches!(
        check(hybrid(vec![])),
        SoftError::InvalidParameter {
            name: "hybrid.species",
            ..
        }
    ));
    assert!(matches!(
        check(hybrid(vec![(2, "M")])),
        SoftError::InvalidParameter {
            name: "hybrid.species",
            ..
        }
    ));
    assert!(matches!(
        check(hybrid(vec![(0, "M"), (0, "MX")])),
        SoftError::InvalidParameter {
            name: "hybrid.species",
            ..
        }
    ));
    assert_eq!(
        check(hybrid(vec![(0, "MQ")])),
        SoftError::NotInModel {
            name: "MQ".into(),
            kind: "species"
        }
    );
    // a model whose species names an unknown component
    let mut broken = model.clone();
    broken.species[0].stoichiometry.insert("Q".into(), 1);
    let e = SoftParams {
        hybrid: Some(Hybrid::new(
            broken,
            vec![HybridSpecies {
                resolved: 0,
                model_species: "M".into(),
            }],
        )),
        ..SoftParams::default()
    }
    .check()
    .unwrap_err();
    assert!(matches!(e, SoftError::Model(_)), "{e:?}");
    // the data give no totals for the model's components
    let (_, _, d) = selective_two();
    let p = SoftParams {
        hybrid: hybrid(vec![(1, "MX")]),
        ..SoftParams::default()
    }
    .check()
    .unwrap();
    assert_eq!(
        resolve_matrix(d.view(), &SampleLayout::single_series(15), &p).unwrap_err(),
        SoftError::MissingTotal {
            component: "M".into()
        }
    );
}

#[test]
fn a_rising_lack_of_fit_is_reported_as_diverging() {
    // Species 0 truly has two maxima along temperature; forcing unimodality makes the
    // constrained steps fight the data, and from a poor start the lack of fit rises.
    let n = 20;
    let c = Array2::from_shape_fn((n, 2), |(i, k)| {
        let x = i as f64;
        if k == 0 {
            gauss(x, 4.0, 2.0) + gauss(x, 15.0, 2.0)
        } else {
            gauss(x, 10.0, 3.0)
        }
    });
    let s = Array2::from_shape_fn((50, 2), |(j, k)| {
        gauss(j as f64, if k == 0 { 15.0 } else { 35.0 }, 8.0)
    });
    let d = c.dot(&s.t());
    let mut found = None;
    for seed in 0..20u64 {
        let mut rng = isosbestic::testing::rng(seed);
        let params = SoftParams {
            n_species: 2,
            unimodality: Unimodality::AlongTemperature,
            divergence_patience: 1,
            initial: InitialEstimate::Spectra {
                spectra: Array2::from_shape_fn((50, 2), |_| rng.random_range(0.0..1.0)),
            },
            ..SoftParams::default()
        }
        .check()
        .unwrap();
        let out = resolve_matrix(d.view(), &SampleLayout::single_series(n), &params).unwrap();
        if out.termination == SoftTermination::Diverging {
            found = Some(out);
            break;
        }
    }
    let out = found.expect("no start gave a rising lack of fit");
    let h = &out.history;
    // the run stopped right after the lack of fit rose, and returned that last state
    assert!(h[h.len() - 1] > h[h.len() - 2]);
    assert_eq!(h.len(), out.iterations);
    approx::assert_relative_eq!(out.lack_of_fit_percent, h[h.len() - 1], max_relative = 1e-12);
}
