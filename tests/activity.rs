//! Activity corrections in the speciation and the global fit, and the molal scale: checks
//! against published activity-coefficient values, closed forms, finite differences and
//! ground truth (data simulated from known parameters, fitted back).

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::resolve::hard::{self, ConcentrationBasis, HardFitError, HardFitParams};
use isosbestic::simulate::{SimulationMedium, SimulationPlan, simulate_in_medium};
use isosbestic::speciation::{
    Derivatives, EquilibriumModel, Medium, SpeciationBatch, SpeciationError, Start, ValidModel,
    speciate_all_in_medium, speciate_all_into,
};
use isosbestic::thermo::{
    ActivityCorrection, ActivityModel, ConcentrationScale, Davies, DebyeHuckelSize, ExtendedDebyeHuckel,
    SolventDensity, debye_huckel_a,
};
use ndarray::{Array2, array};
use proptest::prelude::*;

const DAVIES: ActivityCorrection = ActivityCorrection::Davies(Davies {
    linear_coefficient: 0.3,
});

/// M²⁺ + L⁻ ⇌ ML⁺ (and ML₂ when `two`), fixed log β (thermodynamic when activity is on).
fn charged_model(log_beta1: f64, log_beta2: Option<f64>) -> ValidModel {
    let mut text = String::from(
        r#"components = [{ name = "M", absorbs = true, charge = 2 }, { name = "L", absorbs = false, charge = -1 }]
[[species]]
name = "ML"
stoichiometry = { M = 1, L = 1 }
absorbs = true
"#,
    );
    text.push_str(&format!(
        "law = {{ kind = \"fixed\", log_beta = {{ value = {log_beta1} }} }}\n"
    ));
    if let Some(lb2) = log_beta2 {
        text.push_str(&format!(
            "[[species]]\nname = \"ML2\"\nstoichiometry = {{ M = 1, L = 2 }}\nabsorbs = true\n\
             law = {{ kind = \"fixed\", log_beta = {{ value = {lb2} }} }}\n"
        ));
    }
    EquilibriumModel::from_toml_str(&text).unwrap().check().unwrap()
}

fn medium(activity: ActivityCorrection, temperatures_k: Vec<f64>, background: Vec<f64>) -> Medium {
    Medium {
        activity,
        temperatures_k,
        background_ionic_strength: background,
        ..Medium::default()
    }
}

fn solve(
    model: &ValidModel,
    log_betas: &Array2<f64>,
    totals: &Array2<f64>,
    medium: &Medium,
    derivatives: Derivatives,
) -> Result<SpeciationBatch, SpeciationError> {
    let ids: Vec<String> = (0..totals.nrows()).map(|i| format!("s{i}")).collect();
    let mut batch = SpeciationBatch::new(model, totals.nrows(), derivatives);
    speciate_all_in_medium(
        model,
        log_betas.view(),
        totals.view(),
        &ids,
        Start::Cold,
        medium,
        &mut batch,
    )?;
    Ok(batch)
}

// ---------------------------------------------------------------------------------------------
// activity-coefficient models against published values

#[test]
fn debye_huckel_a_follows_the_reference_values_from_0_to_95_celsius() {
    // A (log₁₀, molal): 0.4904, 0.5098, 0.5341, 0.5638, 0.5915 at 0, 25, 50, 75, 95 °C
    // (isosbestic REFERENCES.md [C]: CODATA constants, IAPWS-95 density, IAPWS R8-97
    // permittivity); this A(T) uses Malmberg & Maryott's permittivity: within 0.5 %.
    for (t_c, a) in [
        (0.0, 0.4904),
        (25.0, 0.5098),
        (50.0, 0.5341),
        (75.0, 0.5638),
        (95.0, 0.5915),
    ] {
        assert_relative_eq!(debye_huckel_a(273.15 + t_c).unwrap(), a, max_relative = 5e-3);
    }
}

#[test]
fn davies_reproduces_the_reference_values_at_25_celsius() {
    // Davies with A = 0.5098 at 25 °C (isosbestic REFERENCES.md [C]): z = 2, I = 0.1 → −0.4287;
    // z = 1, I = 0.01 → −0.0448; z = 1, I = 0.5 → −0.1347. This A(T) is within 0.5 % of 0.5098.
    for (z, i, lg) in [(2, 0.1, -0.4287), (1, 0.01, -0.0448), (-1, 0.5, -0.1347)] {
        assert_relative_eq!(DAVIES.log10_gamma(z, i, 298.15).unwrap(), lg, max_relative = 6e-3);
    }
}

#[test]
fn davies_and_extended_debye_huckel_tend_to_the_limiting_law_at_low_ionic_strength() {
    // Debye–Hückel limiting law log γ = −A z² √I (Debye & Hückel, Phys. Z. 24 (1923) 185):
    // both models differ from it by a factor 1 − O(√I).
    let edh = ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel {
        size: DebyeHuckelSize::IonSizeAngstrom { value: 4.5 },
    });
    for t in [278.15, 298.15, 348.15] {
        let a = debye_huckel_a(t).unwrap();
        for i in [1e-10, 1e-8, 1e-6] {
            let limiting = -a * 4.0 * f64::sqrt(i);
            for m in [DAVIES, edh] {
                let ratio = m.log10_gamma(2, i, t).unwrap() / limiting;
                // |ratio − 1| ≤ √I·max(1, Bå) + 0.3 I (first-order terms of both models)
                assert_abs_diff_eq!(ratio, 1.0, epsilon = 2.0 * f64::sqrt(i));
            }
        }
    }
    // and γ of a neutral species is 1 at any ionic strength (z² = 0 in every model)
    assert_abs_diff_eq!(DAVIES.log10_gamma(0, 0.7, 300.0).unwrap(), 0.0);
}

// ---------------------------------------------------------------------------------------------
// speciation with activity corrections

#[test]
fn a_one_to_one_complex_matches_the_closed_form_at_the_converged_ionic_strength() {
    // Closed form (mass action + mass balance of M + L ⇌ ML with the conditional constant βc):
    // βc (Tm − x)(Tl − x) = x  ⇒  x = 2 βc Tm Tl / (b + √(b² − 4 βc² Tm Tl)),  b = βc (Tm + Tl) + 1.
    let model = charged_model(2.5, None);
    let (tm, tl, bg, t) = (2e-3, 5e-3, 0.02, 310.0);
    let b = solve(
        &model,
        &array![[0.0, 0.0, 2.5]],
        &array![[tm, tl]],
        &medium(DAVIES, vec![t], vec![bg]),
        Derivatives::Skip,
    )
    .unwrap();
    let i = b.ionic_strength[0];
    let c = b.concentrations.row(0);
    // self-consistent ionic strength: I = I_bg + ½ Σ cᵢ zᵢ² (z = 2, −1, +1)
    assert_relative_eq!(i, bg + 0.5 * (4.0 * c[0] + c[1] + c[2]), max_relative = 1e-9);
    let lg = |z| DAVIES.log10_gamma(z, i, t).unwrap();
    let beta_c = 10f64.powf(2.5 + lg(2) + lg(-1) - lg(1));
    let bb = beta_c * (tm + tl) + 1.0;
    let x = 2.0 * beta_c * tm * tl / (bb + (bb * bb - 4.0 * beta_c * beta_c * tm * tl).sqrt());
    assert_relative_eq!(c[2], x, max_relative = 1e-9);
    assert_relative_eq!(c[0], tm - x, max_relative = 1e-9);
    assert_relative_eq!(c[1], tl - x, max_relative = 1e-9);
    // the activity correction matters here: less complex than with the thermodynamic constant
    let ideal = solve(
        &model,
        &array![[0.0, 0.0, 2.5]],
        &array![[tm, tl]],
        &Medium::default(),
        Derivatives::Skip,
    )
    .unwrap();
    assert!(c[2] < 0.9 * ideal.concentrations[[0, 2]]);
}

#[test]
fn no_activity_model_gives_exactly_the_ideal_speciation() {
    let model = charged_model(3.0, Some(5.0));
    let lb = array![[0.0, 0.0, 3.0, 5.0], [0.0, 0.0, 3.1, 4.8]];
    let totals = array![[1e-3, 3e-3], [2e-3, 1e-2]];
    let a = solve(&model, &lb, &totals, &Medium::default(), Derivatives::LogBeta).unwrap();
    let mut b = SpeciationBatch::new(&model, 2, Derivatives::LogBeta);
    speciate_all_into(
        &model,
        lb.view(),
        totals.view(),
        &["s0", "s1"],
        Start::Cold,
        &mut b,
    )
    .unwrap();
    assert_eq!(a.concentrations, b.concentrations);
    assert_eq!(a.derivatives, b.derivatives);
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Mass balance and self-consistency of I hold at convergence for random valid inputs.
    #[test]
    fn mass_balance_and_ionic_strength_are_self_consistent(
        lb1 in -1.0f64..7.0,
        lb2 in -1.0f64..11.0,
        log_tm in -6.0f64..-1.0,
        log_tl in -6.0f64..0.5,
        bg in 0.0f64..3.0,
        t_c in 1.0f64..99.0,
        davies in any::<bool>(),
    ) {
        let model = charged_model(lb1, Some(lb2));
        let (tm, tl, t) = (10f64.powf(log_tm), 10f64.powf(log_tl), 273.15 + t_c);
        let activity = if davies { DAVIES } else {
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel::default())
        };
        let b = solve(&model, &array![[0.0, 0.0, lb1, lb2]], &array![[tm, tl]],
            &medium(activity, vec![t], vec![bg]), Derivatives::Skip).unwrap();
        let c = b.concentrations.row(0);
        prop_assert!(c.iter().all(|&v| v >= 0.0));
        // mass balance, relative to the total
        prop_assert!(((c[0] + c[2] + c[3]) - tm).abs() <= 1e-10 * tm);
        prop_assert!(((c[1] + c[2] + 2.0 * c[3]) - tl).abs() <= 1e-10 * tl);
        // I = I_bg + ½ Σ cᵢ zᵢ² (ML⁺: z = 1; ML₂: z = 0)
        let i_sol = bg + 0.5 * (4.0 * c[0] + c[1] + c[2]);
        prop_assert!((b.ionic_strength[0] - i_sol).abs() <= 1e-9 * i_sol);
        // mass action with the conditional constants at that I
        let i = b.ionic_strength[0];
        let lg = |z| activity.log10_gamma(z, i, t).unwrap();
        if c[2] > 1e-250 && c[0] > 1e-250 && c[1] > 1e-250 {
            let lhs = (c[2] / (c[0] * c[1])).log10();
            prop_assert!((lhs - (lb1 + lg(2) + lg(-1) - lg(1))).abs() <= 1e-8);
        }
    }
}

#[test]
fn derivatives_with_activity_match_central_differences() {
    // exact implicit derivatives (mass balance coupled with the ionic-strength equation) vs a
    // central difference of the full self-consistent solution, on the molar and molal scales
    let model = charged_model(2.0, Some(3.5));
    let lb = array![[0.0, 0.0, 2.0, 3.5], [0.0, 0.0, 1.4, 3.0], [0.0, 0.0, 2.6, 4.4]];
    let totals = array![[5e-3, 2e-2], [1e-2, 0.3], [1e-3, 1e-3]];
    let temps = vec![285.0, 310.0, 350.0];
    for scale in [None, Some(vec![0.9985, 0.9931, 0.9734])] {
        for activity in [
            DAVIES,
            ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel::default()),
        ] {
            let mut m = medium(activity, temps.clone(), vec![0.1, 0.0, 0.5]);
            m.kg_solvent_per_litre = scale.clone();
            let b = solve(&model, &lb, &totals, &m, Derivatives::LogBeta).unwrap();
            let d = b.derivatives.unwrap();
            let h = 1e-6;
            for k in 2..4 {
                let mut up = lb.clone();
                let mut down = lb.clone();
                up.column_mut(k).mapv_inplace(|v| v + h);
                down.column_mut(k).mapv_inplace(|v| v - h);
                let cu = solve(&model, &up, &totals, &m, Derivatives::Skip)
                    .unwrap()
                    .concentrations;
                let cd = solve(&model, &down, &totals, &m, Derivatives::Skip)
                    .unwrap()
                    .concentrations;
                for s in 0..3 {
                    let scale_s = d
                        .slice(ndarray::s![s, .., k])
                        .iter()
                        .fold(0.0f64, |a, v| a.max(v.abs()));
                    for i in 0..4 {
                        let fd = (cu[[s, i]] - cd[[s, i]]) / (2.0 * h);
                        assert_abs_diff_eq!(d[[s, i, k]], fd, epsilon = 1e-6 * scale_s);
                    }
                }
            }
            if scale.is_none() {
                // the fixed-γ derivative (ideal derivative at the conditional constants of the
                // converged I) misses the ionic-strength term, which is not negligible here
                let i = b.ionic_strength[0];
                let lg = |z| activity.log10_gamma(z, i, temps[0]).unwrap();
                let lb_c = array![[0.0, 0.0, 2.0 + lg(2) + lg(-1) - lg(1), 3.5 + lg(2) + 2.0 * lg(-1)]];
                let mut fixed = SpeciationBatch::new(&model, 1, Derivatives::LogBeta);
                let t0 = totals.slice(ndarray::s![0..1, ..]);
                speciate_all_into(&model, lb_c.view(), t0, &["s0"], Start::Cold, &mut fixed).unwrap();
                let df = fixed.derivatives.unwrap();
                let gap = (0..4).fold(0.0f64, |g, i| g.max((df[[0, i, 2]] - d[[0, i, 2]]).abs()));
                assert!(gap > 1e-3 * d[[0, 2, 2]].abs(), "gap {gap}");
            }
        }
    }
}

#[test]
fn the_molal_scale_solves_in_mol_per_kg_and_returns_mol_per_litre() {
    // With kg of solvent per litre f, molal totals are T/f; mass action holds for the molal
    // concentrations m = c/f with the molal β; returned c are mol/L (mass balance in mol/L).
    let model = charged_model(3.0, None);
    let f = 0.97;
    let m = Medium {
        kg_solvent_per_litre: Some(vec![f]),
        ..Medium::default()
    };
    let b = solve(
        &model,
        &array![[0.0, 0.0, 3.0]],
        &array![[1e-3, 2e-3]],
        &m,
        Derivatives::Skip,
    )
    .unwrap();
    let c = b.concentrations.row(0);
    assert_relative_eq!(c[0] + c[2], 1e-3, max_relative = 1e-12);
    assert_relative_eq!(c[1] + c[2], 2e-3, max_relative = 1e-12);
    assert_relative_eq!((c[2] / f) / ((c[0] / f) * (c[1] / f)), 1e3, max_relative = 1e-9);
}

#[test]
fn errors_name_the_species_or_the_sample() {
    // a species charge that breaks charge conservation
    let bad = EquilibriumModel::from_toml_str(
        r#"components = [{ name = "M", absorbs = true, charge = 2 }, { name = "L", absorbs = false, charge = -1 }]
[[species]]
name = "ML"
stoichiometry = { M = 1, L = 1 }
absorbs = true
charge = 2
law = { kind = "fixed", log_beta = { value = 1.0 } }
"#,
    )
    .unwrap()
    .check()
    .unwrap_err();
    assert_eq!(
        bad,
        SpeciationError::ChargeMismatch {
            species: "ML".into(),
            given: 2,
            from_components: 1
        }
    );
    // activity corrections without charges
    let uncharged = isosbestic::testing::metal_ligand_model("M", "X", &[(1, 1.0, 0.0)], None);
    let e = solve(
        &uncharged,
        &array![[0.0, 0.0, 1.0]],
        &array![[1e-3, 1e-3]],
        &medium(DAVIES, vec![298.15], vec![]),
        Derivatives::Skip,
    )
    .unwrap_err();
    assert_eq!(e, SpeciationError::UnknownCharge { species: "M".into() });
    // a temperature outside the water properties behind A(T)
    let e = solve(
        &charged_model(1.0, None),
        &array![[0.0, 0.0, 1.0], [0.0, 0.0, 1.0]],
        &array![[1e-3, 1e-3], [1e-3, 1e-3]],
        &medium(DAVIES, vec![298.15, 390.0], vec![]),
        Derivatives::Skip,
    )
    .unwrap_err();
    assert!(
        matches!(&e, SpeciationError::Activity { sample, .. } if sample == "s1"),
        "{e}"
    );
    // an ionic strength that is not self-consistent within the iterations allowed
    let mut m = medium(DAVIES, vec![298.15, 298.15], vec![0.0, 0.0]);
    m.ionic_strength_iterations = 1;
    let e = solve(
        &charged_model(3.0, None),
        &array![[0.0, 0.0, 3.0], [0.0, 0.0, 3.0]],
        &array![[0.0, 0.0], [0.05, 0.1]], // s0: nothing dissolved, nothing to iterate
        &m,
        Derivatives::Skip,
    )
    .unwrap_err();
    assert!(
        matches!(&e, SpeciationError::IonicStrengthNotConverged { sample, iterations: 1, .. } if sample == "s1"),
        "{e}"
    );
}

// ---------------------------------------------------------------------------------------------
// the global fit

/// M²⁺ + X⁻ ⇌ MX⁺, M²⁺ + 2X⁻ ⇌ MX₂ with van 't Hoff laws.
fn fit_model(lb1: f64, dh1: f64, lb2: f64, dh2: f64) -> ValidModel {
    let text = format!(
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
    );
    EquilibriumModel::from_toml_str(&text).unwrap().check().unwrap()
}

fn plan() -> SimulationPlan {
    isosbestic::testing::stepwise_activity_plan()
}

const TRUTH: [(&str, &str, f64); 4] = [
    ("MX", "log_beta_ref", 1.2),
    ("MX", "dh_ref", 12_000.0),
    ("MX2", "log_beta_ref", 1.9),
    ("MX2", "dh_ref", 30_000.0),
];

fn truth() -> ValidModel {
    fit_model(TRUTH[0].2, TRUTH[1].2, TRUTH[2].2, TRUTH[3].2)
}

#[test]
fn noise_free_data_with_activity_give_back_the_thermodynamic_parameters() {
    let sim_medium = SimulationMedium {
        activity: DAVIES,
        medium_ionic_strength: 0.1,
        concentration_scale: ConcentrationScale::Molar,
    };
    let sim = simulate_in_medium(&truth(), &plan(), &sim_medium).unwrap();
    let params = HardFitParams {
        concentrations: ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        activity: DAVIES,
        medium_ionic_strength: 0.1,
        ..HardFitParams::default()
    };
    let start = fit_model(0.5, 0.0, 1.0, 0.0);
    let fit = hard::fit(&sim.set, &start, &params).unwrap();
    assert!(fit.termination.converged(), "{:?}", fit.termination);
    for (species, name, expected) in TRUTH {
        let p = fit.parameter(species, name).unwrap();
        assert_relative_eq!(p.value, expected, max_relative = 1e-6);
    }
    // the same data fitted as conditional constants (activity off) give other numbers
    let conditional = hard::fit(
        &sim.set,
        &start,
        &HardFitParams {
            activity: ActivityCorrection::None,
            ..params
        },
    )
    .unwrap();
    let lb1 = conditional.parameter("MX", "log_beta_ref").unwrap().value;
    assert!((lb1 - 1.2).abs() > 0.1, "conditional log β {lb1}");
}

#[test]
fn noise_free_molal_data_give_back_the_molal_parameters() {
    let sim_medium = SimulationMedium {
        concentration_scale: ConcentrationScale::molal_dilute(),
        ..SimulationMedium::default()
    };
    let sim = simulate_in_medium(&truth(), &plan(), &sim_medium).unwrap();
    let params = HardFitParams {
        concentrations: ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        concentration_scale: ConcentrationScale::molal_dilute(),
        ..HardFitParams::default()
    };
    let fit = hard::fit(&sim.set, &fit_model(0.5, 0.0, 1.0, 0.0), &params).unwrap();
    assert!(fit.termination.converged(), "{:?}", fit.termination);
    for (species, name, expected) in TRUTH {
        let p = fit.parameter(species, name).unwrap();
        assert_relative_eq!(p.value, expected, max_relative = 1e-6);
    }
}

#[test]
fn a_fit_with_activity_needs_the_charges() {
    let sim = simulate_in_medium(&truth(), &plan(), &SimulationMedium::default()).unwrap();
    let uncharged = isosbestic::testing::metal_ligand_model("M", "X", &[(1, 1.0, 0.0), (2, 1.0, 0.0)], None);
    let e = hard::fit(
        &sim.set,
        &uncharged,
        &HardFitParams {
            activity: DAVIES,
            ..HardFitParams::default()
        },
    )
    .unwrap_err();
    assert_eq!(
        e,
        HardFitError::Model(SpeciationError::UnknownCharge { species: "M".into() })
    );
}
