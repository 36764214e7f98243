//! Speciation: model validation, formation laws, the mass-balance solver and its derivatives.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::speciation::{
    ComponentSpec, Derivatives, EquilibriumModel, FixedLaw, FormationLaw, GAS_CONSTANT, HeatCapacityLaw, Law,
    Optics, Parameter, SpeciationBatch, SpeciationError, SpeciesSpec, Start, ValidModel, VanTHoffLaw,
    concentration_derivatives, speciate, speciate_all, speciate_all_into,
};
use ndarray::Array2;
use proptest::prelude::*;
use rand::Rng;
use std::f64::consts::LN_10;

// ---------------------------------------------------------------------------------------------
// helpers

fn component(name: &str, optics: Optics) -> ComponentSpec {
    ComponentSpec {
        name: name.to_string(),
        optics,
        known_spectrum: None,
        max_absorptivity: None,
        charge: None,
    }
}

fn formed(name: &str, stoich: &[(&str, i32)], log_beta: f64) -> SpeciesSpec {
    SpeciesSpec {
        name: name.to_string(),
        stoichiometry: stoich.iter().map(|(c, a)| (c.to_string(), *a)).collect(),
        optics: Optics::Absorbing,
        known_spectrum: None,
        max_absorptivity: None,
        law: Law::Fixed(FixedLaw {
            log_beta: Parameter::free(log_beta),
        }),
        charge: None,
    }
}

fn model(components: &[&str], species: Vec<SpeciesSpec>) -> EquilibriumModel {
    EquilibriumModel {
        components: components
            .iter()
            .map(|c| component(c, Optics::Absorbing))
            .collect(),
        species,
    }
}

/// log β of all species at 298.15 K (the laws used here are all `fixed`).
fn betas(m: &ValidModel) -> Vec<f64> {
    let mut lb = vec![0.0; m.n_species()];
    m.log10_betas_at(298.15, &mut lb);
    lb
}

/// The stoichiometries a random system draws from, over components M, L, H:
/// ML … ML6, the dimers M2 and M2L2, M2L, protonated ligand HL, H2L, and MHL.
const POOL: [(&str, [i32; 3]); 13] = [
    ("ML", [1, 1, 0]),
    ("ML2", [1, 2, 0]),
    ("ML3", [1, 3, 0]),
    ("ML4", [1, 4, 0]),
    ("ML5", [1, 5, 0]),
    ("ML6", [1, 6, 0]),
    ("M2", [2, 0, 0]),
    ("M2L2", [2, 2, 0]),
    ("M2L", [2, 1, 0]),
    ("HL", [0, 1, 1]),
    ("H2L", [0, 1, 2]),
    ("MHL", [1, 1, 1]),
    ("H2L2", [0, 2, 2]),
];

/// A random valid system: 1–10 formed species from [`POOL`], log β in [−30, 40], totals
/// log-uniform in [1e-9, 10] mol/L.
fn random_system(rng: &mut impl Rng) -> (ValidModel, Vec<f64>, Vec<f64>) {
    let n = rng.random_range(1..=10usize);
    let mut idx: Vec<usize> = (0..POOL.len()).collect();
    for i in 0..n {
        let j = rng.random_range(i..idx.len());
        idx.swap(i, j);
    }
    let names = ["M", "L", "H"];
    let species = idx[..n]
        .iter()
        .map(|&k| {
            let (name, row) = POOL[k];
            let st: Vec<(&str, i32)> = names
                .iter()
                .zip(row)
                .filter(|(_, a)| *a != 0)
                .map(|(c, a)| (*c, a))
                .collect();
            formed(name, &st, rng.random_range(-30.0..40.0))
        })
        .collect();
    let m = model(&names, species).check().unwrap();
    let totals = (0..3).map(|_| 10f64.powf(rng.random_range(-9.0..1.0))).collect();
    let lb = betas(&m);
    (m, lb, totals)
}

/// Largest relative mass-balance residual |Σ aᵢⱼ cᵢ − Tⱼ| / |Tⱼ|, computed here independently.
fn mass_balance_residual(m: &ValidModel, c: &[f64], totals: &[f64]) -> f64 {
    let mut worst: f64 = 0.0;
    for (j, &t) in totals.iter().enumerate() {
        let s: f64 = m
            .species()
            .iter()
            .zip(c)
            .map(|(sp, &ci)| f64::from(sp.stoichiometry[j]) * ci)
            .sum();
        let scale = t.abs().max(
            m.species()
                .iter()
                .zip(c)
                .map(|(sp, &ci)| f64::from(sp.stoichiometry[j].abs()) * ci)
                .sum(),
        );
        if scale > 0.0 {
            worst = worst.max((s - t).abs() / scale);
        }
    }
    worst
}

/// Largest |ln cᵢ − ln βᵢ − Σⱼ aᵢⱼ ln xⱼ| over species that did not underflow.
fn mass_action_error(m: &ValidModel, lb: &[f64], c: &[f64]) -> f64 {
    let nc = m.n_components();
    let mut worst: f64 = 0.0;
    for (i, sp) in m.species().iter().enumerate() {
        if c[i] < 1e-290 || c[..nc].iter().any(|&x| x < 1e-290) {
            continue;
        }
        let pred: f64 = LN_10 * lb[i]
            + sp.stoichiometry
                .iter()
                .zip(&c[..nc])
                .map(|(&a, &x)| f64::from(a) * x.ln())
                .sum::<f64>();
        worst = worst.max((c[i].ln() - pred).abs() / pred.abs().max(1.0));
    }
    worst
}

// ---------------------------------------------------------------------------------------------
// solver: properties

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn mass_balance_holds_to_1e_10_for_random_valid_systems(seed in any::<u64>()) {
        let mut rng = isosbestic::testing::rng(seed);
        let (m, lb, totals) = random_system(&mut rng);
        let s = speciate(&m, &lb, &totals, "p").unwrap();
        let r = mass_balance_residual(&m, &s.concentrations, &totals);
        prop_assert!(r < 1e-10, "residual {r}");
        // mass action: c_i = β_i Π x_j^a_ij (relative to the size of ln c_i)
        let e = mass_action_error(&m, &lb, &s.concentrations);
        prop_assert!(e < 1e-12, "mass action error {e}");
        prop_assert!(s.concentrations.iter().all(|&c| c >= 0.0 && c.is_finite()));
        prop_assert!(s.residual < 1e-10);
    }

    #[test]
    fn one_to_one_complex_matches_the_stable_quadratic_formula(
        log_k in -30.0..40.0f64, lm in -9.0..1.0f64, ll in -9.0..1.0f64,
    ) {
        let m = model(&["M", "L"], vec![formed("ML", &[("M", 1), ("L", 1)], log_k)]).check().unwrap();
        let (tm, tl) = (10f64.powf(lm), 10f64.powf(ll));
        let s = speciate(&m, &[0.0, 0.0, log_k], &[tm, tl], "q").unwrap();
        // Closed form (from x_M + K x_M x_L = T_M, x_L + K x_M x_L = T_L): each free
        // concentration solves K x² + p x − T = 0, p = 1 + K(T_other − T_own); the root is
        // taken in the form free of cancellation.
        let k = 10f64.powf(log_k);
        let free = |own: f64, other: f64| {
            let p = 1.0 + k * (other - own);
            let d = (p * p + 4.0 * k * own).sqrt();
            if p >= 0.0 { 2.0 * own / (p + d) } else { (d - p) / (2.0 * k) }
        };
        let (xm, xl) = (free(tm, tl), free(tl, tm));
        prop_assert!((s.free[0] - xm).abs() <= 1e-9 * xm, "{} vs {xm}", s.free[0]);
        prop_assert!((s.free[1] - xl).abs() <= 1e-9 * xl, "{} vs {xl}", s.free[1]);
        let ml = k * xm * xl;
        prop_assert!((s.concentrations[2] - ml).abs() <= 1e-9 * ml.max(1e-300));
    }

    #[test]
    fn stepwise_complexes_match_a_slow_nested_bisection(
        n in 1usize..=6, seed in any::<u64>(), lm in -9.0..1.0f64, ll in -9.0..1.0f64,
    ) {
        let mut rng = isosbestic::testing::rng(seed);
        let lbs: Vec<f64> = (0..n).map(|_| rng.random_range(-30.0..40.0)).collect();
        let species = (1..=n)
            .map(|k| formed(&format!("ML{k}"), &[("M", 1), ("L", k as i32)], lbs[k - 1]))
            .collect();
        let m = model(&["M", "L"], species).check().unwrap();
        let (tm, tl) = (10f64.powf(lm), 10f64.powf(ll));
        let mut lb = vec![0.0, 0.0];
        lb.extend(&lbs);
        let s = speciate(&m, &lb, &[tm, tl], "b").unwrap();
        let x_l = bisection_free_ligand(&lbs, tm, tl);
        prop_assert!((s.free[1] - x_l).abs() <= 1e-8 * x_l, "{} vs {x_l}", s.free[1]);
    }

    #[test]
    fn analytic_derivatives_match_central_differences(seed in any::<u64>()) {
        let mut rng = isosbestic::testing::rng(seed);
        let (m, lb, totals) = random_system(&mut rng);
        let nsp = m.n_species();
        let d = concentration_derivatives(&m, &lb, &totals, "d").unwrap();
        let c0 = speciate(&m, &lb, &totals, "d").unwrap().concentrations;
        let h = 1e-4;
        for k in m.n_components()..nsp {
            let mut up = lb.clone();
            let mut dn = lb.clone();
            up[k] += h;
            dn[k] -= h;
            let cu = speciate(&m, &up, &totals, "u").unwrap().concentrations;
            let cd = speciate(&m, &dn, &totals, "d").unwrap().concentrations;
            for i in 0..nsp {
                let fd = (cu[i] - cd[i]) / (2.0 * h);
                // truncation O(h²) and rounding ~1e-13 c/h, both far below this tolerance
                let tol = 1e-6 * c0[i] + 1e-5 * fd.abs();
                prop_assert!((d[[i, k]] - fd).abs() <= tol, "d c{i}/d logβ{k}: {} vs {fd}", d[[i, k]]);
            }
        }
    }
}

/// Free ligand of M + n L ⇌ MLₙ by nested bisection: for a trial x_L the metal balance gives
/// x_M = T_M / (1 + Σ βₙ x_Lⁿ) in closed form; the ligand balance x_L + x_M Σ n βₙ x_Lⁿ = T_L is
/// increasing in x_L, so bisect on ln x_L (300 halvings, sums in log space).
fn bisection_free_ligand(log_betas: &[f64], tm: f64, tl: f64) -> f64 {
    let excess = |ln_x: f64| {
        // log-sum-exp of ln βₙ + n ln x over n = 0 … N (n = 0 is the free metal)
        let terms: Vec<f64> = std::iter::once(0.0)
            .chain(
                log_betas
                    .iter()
                    .enumerate()
                    .map(|(k, lb)| LN_10 * lb + (k + 1) as f64 * ln_x),
            )
            .collect();
        let top = terms.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        let z: f64 = terms.iter().map(|t| (t - top).exp()).sum();
        let nz: f64 = terms
            .iter()
            .enumerate()
            .map(|(n, t)| n as f64 * (t - top).exp())
            .sum();
        ln_x.exp() + tm * nz / z - tl
    };
    let (mut lo, mut hi) = (-700.0, tl.ln());
    for _ in 0..300 {
        let mid = 0.5 * (lo + hi);
        if excess(mid) > 0.0 {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    (0.5 * (lo + hi)).exp()
}

#[test]
fn ten_thousand_random_valid_systems_all_converge() {
    // acceptance criterion of issue 3
    let mut rng = isosbestic::testing::rng(20261201);
    let mut worst: f64 = 0.0;
    let mut max_iter = 0;
    for n in 0..10_000 {
        let (m, lb, totals) = random_system(&mut rng);
        let s = speciate(&m, &lb, &totals, &format!("r{n}"))
            .unwrap_or_else(|e| panic!("system {n} failed: {e}; totals {totals:?}, log β {lb:?}"));
        worst = worst.max(mass_balance_residual(&m, &s.concentrations, &totals));
        max_iter = max_iter.max(s.iterations);
    }
    assert!(worst < 1e-10, "worst residual {worst}");
    assert!(max_iter < 400, "max iterations {max_iter}");
}

#[test]
fn a_component_with_zero_total_and_everything_containing_it_are_exactly_zero() {
    let m = model(
        &["M", "L"],
        vec![
            formed("ML", &[("M", 1), ("L", 1)], 5.0),
            formed("ML2", &[("M", 1), ("L", 2)], 9.0),
            formed("L2", &[("L", 2)], 1.0),
        ],
    )
    .check()
    .unwrap();
    let lb = betas(&m);
    let s = speciate(&m, &lb, &[0.0, 1e-3], "z").unwrap();
    assert_abs_diff_eq!(s.concentrations[0], 0.0, epsilon = 0.0); // exactly zero
    assert_abs_diff_eq!(s.concentrations[2], 0.0, epsilon = 0.0); // exactly zero
    assert_abs_diff_eq!(s.concentrations[3], 0.0, epsilon = 0.0); // exactly zero
    // only L and L2 remain: x + 2·10 x² = 1e-3 → x = 2T/(1 + √(1 + 80T)) (stable quadratic root)
    let x = 2e-3 / (1.0 + (1.0f64 + 80.0 * 1e-3).sqrt());
    assert_relative_eq!(s.free[1], x, max_relative = 1e-12);
    let d = concentration_derivatives(&m, &lb, &[0.0, 1e-3], "z").unwrap();
    assert!(d.row(2).iter().chain(d.column(2)).all(|v| v.abs() <= 0.0));
    // all totals zero: trivially all zero
    let s = speciate(&m, &lb, &[0.0, 0.0], "zz").unwrap();
    assert!(s.concentrations.iter().all(|&c| c <= 0.0));
}

/// Metal hydrolysis with H⁺ as a signed component: OH⁻ = −1 H⁺, MOH = M − H⁺, M(OH)₂ = M − 2 H⁺.
fn hydrolysis() -> ValidModel {
    model(
        &["M", "H"],
        vec![
            formed("OH", &[("H", -1)], -14.0),
            formed("MOH", &[("M", 1), ("H", -1)], -8.0),
            formed("MOH2", &[("M", 1), ("H", -2)], -17.0),
        ],
    )
    .check()
    .unwrap()
}

#[test]
fn signed_components_accept_zero_and_negative_totals() {
    let m = hydrolysis();
    let lb = betas(&m);
    // T_H = 0 (a metal salt in pure water), excess acid, excess base
    for t_h in [0.0, 1e-3, -5e-4, -1e-9] {
        let totals = [1e-3, t_h];
        let s = speciate(&m, &lb, &totals, "h").unwrap();
        assert!(mass_balance_residual(&m, &s.concentrations, &totals) < 1e-10);
        // water: [H⁺][OH⁻] = Kw = 1e-14 (the model's own constant, checked through mass action)
        assert_relative_eq!(s.free[1] * s.concentrations[2], 1e-14, max_relative = 1e-9);
        assert!(s.concentrations.iter().all(|&c| c > 0.0));
    }
}

proptest! {
    #[test]
    fn hydrolysis_with_a_signed_proton_balance_holds_for_random_constants_and_totals(
        lw in -15.0..-13.0f64, l1 in -14.0..-2.0f64, l2 in -25.0..-8.0f64,
        lm in -9.0..0.0f64, t_h in -1e-2..1e-2f64,
    ) {
        // with OH⁻ present every real T_H has a solution (x_H − Kw/x_H spans all reals)
        let m = model(
            &["M", "H"],
            vec![
                formed("OH", &[("H", -1)], lw),
                formed("MOH", &[("M", 1), ("H", -1)], l1),
                formed("MOH2", &[("M", 1), ("H", -2)], l2),
            ],
        )
        .check()
        .unwrap();
        let lb = [0.0, 0.0, lw, l1, l2];
        let totals = [10f64.powf(lm), t_h];
        let s = speciate(&m, &lb, &totals, "h").unwrap();
        prop_assert!(mass_balance_residual(&m, &s.concentrations, &totals) < 1e-10);
        prop_assert!(mass_action_error(&m, &lb, &s.concentrations) < 1e-12);
        prop_assert!(s.concentrations.iter().all(|&c| c > 0.0 && c.is_finite()));
    }
}

#[test]
fn totals_that_admit_no_solution_give_not_converged_naming_the_sample() {
    // M + MOH only (no OH⁻): the H balance x_H − [MOH] = T_H needs T_H > −T_M
    let m = model(&["M", "H"], vec![formed("MOH", &[("M", 1), ("H", -1)], -8.0)])
        .check()
        .unwrap();
    let err = speciate(&m, &[0.0, 0.0, -8.0], &[1e-3, -2e-3], "impossible-7").unwrap_err();
    match err {
        SpeciationError::NotConverged { sample, .. } => assert_eq!(sample, "impossible-7"),
        e => panic!("unexpected {e}"),
    }
}

#[test]
fn batch_results_equal_single_sample_results_and_warm_start_agrees() {
    let mut rng = isosbestic::testing::rng(7);
    let m = model(
        &["M", "L", "H"],
        vec![
            formed("ML", &[("M", 1), ("L", 1)], 4.0),
            formed("ML2", &[("M", 1), ("L", 2)], 7.5),
            formed("ML3", &[("M", 1), ("L", 3)], 9.0),
            formed("HL", &[("H", 1), ("L", 1)], 6.0),
            formed("M2", &[("M", 2)], 2.0),
        ],
    )
    .check()
    .unwrap();
    let lb = betas(&m);
    let ns = 50;
    let totals = Array2::from_shape_fn((ns, 3), |_| 10f64.powf(rng.random_range(-9.0..1.0)));
    let lbs = Array2::from_shape_fn((ns, m.n_species()), |(_, k)| lb[k]);
    let ids: Vec<String> = (0..ns).map(|s| format!("s{s}")).collect();
    let b = speciate_all(&m, lbs.view(), totals.view(), &ids, Derivatives::LogBeta).unwrap();
    for s in 0..ns {
        let t = totals.row(s).to_vec();
        let one = speciate(&m, &lb, &t, "x").unwrap();
        for (a, e) in b.concentrations.row(s).iter().zip(&one.concentrations) {
            assert_relative_eq!(*a, *e, max_relative = 1e-12);
        }
        let d = concentration_derivatives(&m, &lb, &t, "x").unwrap();
        let bd = b.derivatives.as_ref().unwrap();
        for ((i, k), v) in d.indexed_iter() {
            assert_abs_diff_eq!(bd[[s, i, k]], *v, epsilon = 1e-12 * v.abs() + 1e-300);
        }
    }
    // a fit's next iteration: perturbed log β, warm start from the previous answer
    let mut warm: SpeciationBatch = b.clone();
    let lbs2 = lbs.mapv(|v| if v.abs() > 0.0 { v + 0.05 } else { v });
    speciate_all_into(&m, lbs2.view(), totals.view(), &ids, Start::Warm, &mut warm).unwrap();
    let cold = speciate_all(&m, lbs2.view(), totals.view(), &ids, Derivatives::Skip).unwrap();
    for (a, e) in warm.concentrations.iter().zip(&cold.concentrations) {
        assert_relative_eq!(*a, *e, max_relative = 1e-9);
    }
    // starting from the previous answer takes less work than starting from the totals
    assert!(warm.iterations.iter().sum::<usize>() < cold.iterations.iter().sum::<usize>());
    // at the same constants a warm start is already converged (no step), an extrapolated one
    // still takes one Newton step per sample, and both give the same answer
    let mut again = warm.clone();
    speciate_all_into(&m, lbs2.view(), totals.view(), &ids, Start::Warm, &mut again).unwrap();
    assert!(
        again.iterations.iter().all(|&it| it == 0),
        "{:?}",
        again.iterations
    );
    // derivatives for some constants only: those columns as before, the others zero
    let mut some = SpeciationBatch::new(&m, ns, Derivatives::LogBeta);
    let wanted: Vec<bool> = (0..m.n_species()).map(|k| k % 2 == 1).collect();
    some.derivative_species = Some(wanted.clone());
    speciate_all_into(&m, lbs.view(), totals.view(), &ids, Start::Cold, &mut some).unwrap();
    let (all, part) = (
        b.derivatives.as_ref().unwrap(),
        some.derivatives.as_ref().unwrap(),
    );
    for ((s, i, k), v) in part.indexed_iter() {
        let full = all[[s, i, k]];
        if wanted[k] {
            assert_abs_diff_eq!(*v, full, epsilon = 1e-12 * full.abs() + 1e-300);
        } else {
            assert_eq!(v.to_bits(), 0.0f64.to_bits(), "column {k} not wanted");
        }
    }
    assert!(
        all.iter().any(|v| *v != 0.0),
        "the full derivatives are not all zero"
    );
    let mut polished = warm.clone();
    speciate_all_into(
        &m,
        lbs2.view(),
        totals.view(),
        &ids,
        Start::Extrapolated,
        &mut polished,
    )
    .unwrap();
    assert!(
        polished.iterations.iter().all(|&it| it >= 1),
        "{:?}",
        polished.iterations
    );
    for (a, e) in polished.concentrations.iter().zip(&cold.concentrations) {
        assert_relative_eq!(*a, *e, max_relative = 1e-9);
    }
}

#[test]
fn batch_errors_name_the_failing_sample_and_check_shapes() {
    let m = model(&["M", "L"], vec![formed("ML", &[("M", 1), ("L", 1)], 3.0)])
        .check()
        .unwrap();
    let lbs = Array2::from_shape_vec((2, 3), vec![0.0, 0.0, 3.0, 0.0, 0.0, 3.0]).unwrap();
    let totals = Array2::from_shape_vec((2, 2), vec![1e-3, 1e-3, 1e-3, -1.0]).unwrap();
    let err = speciate_all(&m, lbs.view(), totals.view(), &["a", "b"], Derivatives::Skip).unwrap_err();
    assert_eq!(
        err,
        SpeciationError::InvalidTotal {
            sample: "b".into(),
            component: "L".into(),
            value: -1.0
        }
    );
    let err = speciate_all(&m, lbs.view(), totals.view(), &["a"], Derivatives::Skip).unwrap_err();
    assert!(matches!(
        err,
        SpeciationError::Shape {
            what: "sample ids",
            expected: 2,
            found: 1
        }
    ));
    let err = speciate(&m, &[0.0, 0.0], &[1e-3, 1e-3], "x").unwrap_err();
    assert!(matches!(
        err,
        SpeciationError::Shape {
            expected: 3,
            found: 2,
            ..
        }
    ));
    let err = speciate(&m, &[0.0, 0.0, f64::NAN], &[1e-3, 1e-3], "x").unwrap_err();
    assert!(matches!(err, SpeciationError::InvalidLogBeta { ref species, .. } if species == "ML"));
    let err = speciate(&m, &[0.5, 0.0, 3.0], &[1e-3, 1e-3], "x").unwrap_err();
    assert!(matches!(err, SpeciationError::FreeComponentLogBeta { ref component, .. } if component == "M"));
    let err = speciate(&m, &[0.0, 0.0, 3.0], &[f64::INFINITY, 1e-3], "x").unwrap_err();
    assert!(matches!(err, SpeciationError::InvalidTotal { ref component, .. } if component == "M"));
}

// ---------------------------------------------------------------------------------------------
// formation laws

#[derive(Deserialize)]
struct CgFixture {
    cases: Vec<CgCase>,
}

#[derive(Deserialize)]
struct CgCase {
    t_ref_k: f64,
    dg_ref_j_mol: f64,
    dh_ref_j_mol: f64,
    dcp_j_k_mol: f64,
    dcp_slope_j_k2_mol: f64,
    temperatures_k: Vec<f64>,
    ln_k: Vec<f64>,
}

use serde::Deserialize;

#[test]
fn heat_capacity_law_matches_numerical_integration_of_van_t_hoff() {
    // scipy 1.17 quad integration of d ln K/dT = ΔH°(T)/(RT²); fixture made by
    // tests/fixtures/speciation/clarke_glew.py
    let text = include_str!("fixtures/speciation/clarke_glew.json");
    let fx: CgFixture = serde_json::from_str(text).unwrap();
    assert_eq!(fx.cases.len(), 3);
    for case in &fx.cases {
        let law = HeatCapacityLaw {
            log_beta_ref: Parameter::free(-case.dg_ref_j_mol / (GAS_CONSTANT * case.t_ref_k * LN_10)),
            dh_ref: Parameter::free(case.dh_ref_j_mol),
            dcp: Parameter::free(case.dcp_j_k_mol),
            dcp_slope: Some(Parameter::free(case.dcp_slope_j_k2_mol)),
            t_ref_k: case.t_ref_k,
        };
        for (&t, &ln_k) in case.temperatures_k.iter().zip(&case.ln_k) {
            assert_abs_diff_eq!(law.log10_beta_at(t) * LN_10, ln_k, epsilon = 1e-10);
        }
    }
}

#[test]
fn heat_capacity_law_reproduces_the_clarke_glew_check_values() {
    // /work/shared/REFERENCES.md, "Clarke–Glew closed form" [C]: θ = 298.15 K,
    // ΔG°(θ) = −5 kJ/mol, ΔH°(θ) = 40 kJ/mol, ΔCp° = −200 J/(K mol), dΔCp°/dT = 1.5 J/(K² mol)
    let theta = 298.15;
    let law = HeatCapacityLaw {
        log_beta_ref: Parameter::free(5000.0 / (GAS_CONSTANT * theta * LN_10)),
        dh_ref: Parameter::free(40_000.0),
        dcp: Parameter::free(-200.0),
        dcp_slope: Some(Parameter::free(1.5)),
        t_ref_k: theta,
    };
    for (t, ln_k) in [(278.15, 0.79439743), (323.15, 3.19405491), (363.15, 4.53551029)] {
        assert_abs_diff_eq!(law.log10_beta_at(t) * LN_10, ln_k, epsilon = 1e-8);
    }
}

fn any_law() -> impl Strategy<Value = Law> {
    let p = |lo: f64, hi: f64| (lo..hi, any::<bool>()).prop_map(|(v, f)| Parameter { value: v, fixed: f });
    prop_oneof![
        p(-10.0, 30.0).prop_map(|log_beta| Law::Fixed(FixedLaw { log_beta })),
        (p(-10.0, 30.0), p(-2e5, 2e5), 250.0..400.0f64).prop_map(|(a, b, t)| Law::VanTHoff(VanTHoffLaw {
            log_beta_ref: a,
            dh_ref: b,
            t_ref_k: t
        })),
        (
            p(-10.0, 30.0),
            p(-2e5, 2e5),
            p(-1000.0, 1000.0),
            proptest::option::of(p(-10.0, 10.0)),
            250.0..400.0f64
        )
            .prop_map(|(a, b, c, s, t)| Law::HeatCapacity(HeatCapacityLaw {
                log_beta_ref: a,
                dh_ref: b,
                dcp: c,
                dcp_slope: s,
                t_ref_k: t
            })),
    ]
}

proptest! {
    #[test]
    fn law_gradients_match_central_differences(law in any_law(), t in 250.0..420.0f64) {
        let v: Vec<f64> = law.parameters().iter().map(|p| p.value).collect();
        let mut grad = vec![0.0; v.len()];
        let val = law.log10_beta_gradient_with(&v, t, &mut grad);
        prop_assert!((val - law.log10_beta_with(&v, t)).abs() <= 1e-12 * val.abs().max(1.0));
        for k in 0..v.len() {
            let h = 1e-4 * v[k].abs().max(1.0);
            let (mut up, mut dn) = (v.clone(), v.clone());
            up[k] += h;
            dn[k] -= h;
            let fd = (law.log10_beta_with(&up, t) - law.log10_beta_with(&dn, t)) / (2.0 * h);
            // log β is linear in every parameter: the central difference is exact up to rounding
            let tol = 1e-7 * fd.abs() + 1e-9 * val.abs().max(1.0) / h;
            prop_assert!((grad[k] - fd).abs() <= tol, "{}: {} vs {fd}", law.parameter_names()[k], grad[k]);
        }
    }

    #[test]
    fn van_t_hoff_recovers_dh_from_the_slope_of_ln_k_against_inverse_t(
        lb in -5.0..15.0f64, dh in -1e5..1e5f64, t1 in 260.0..330.0f64, dt in 5.0..60.0f64,
    ) {
        let law = VanTHoffLaw::new(Parameter::free(lb), Parameter::free(dh));
        let t2 = t1 + dt;
        let slope = LN_10 * (law.log10_beta_at(t2) - law.log10_beta_at(t1)) / (1.0 / t2 - 1.0 / t1);
        // van 't Hoff equation: d ln K / d(1/T) = −ΔH°/R
        prop_assert!((-slope * GAS_CONSTANT - dh).abs() <= 1e-6 * dh.abs().max(1.0));
    }
}

#[test]
fn to_standard_propagates_the_covariance_of_free_parameters_only() {
    let theta = 310.0;
    let law = HeatCapacityLaw {
        log_beta_ref: Parameter::free(2.0),
        dh_ref: Parameter::free(-25_000.0),
        dcp: Parameter::fixed(120.0),
        dcp_slope: None,
        t_ref_k: theta,
    };
    // free: log β (σ 0.02), ΔH° (σ 800 J/mol), correlation −0.5
    let (s1, s2, rho) = (0.02, 800.0, -0.5);
    let cov = [s1 * s1, rho * s1 * s2, rho * s1 * s2, s2 * s2];
    let q = law.to_standard(&cov).unwrap();
    let rl = GAS_CONSTANT * LN_10;
    // ΔG° = −Rθ ln10 logβ; ΔS° = (ΔH° − ΔG°)/θ = ΔH°/θ + R ln10 log β (definitions)
    assert_relative_eq!(q.dg_j_mol, -rl * theta * 2.0);
    assert_relative_eq!(q.ds_j_k_mol, -25_000.0 / theta + rl * 2.0);
    assert_relative_eq!(q.dcp_j_k_mol, 120.0);
    // var ΔS° = (R ln10)² σ₁² + σ₂²/θ² + 2 (R ln10/θ) ρσ₁σ₂, written out by hand
    let var_ds = rl * rl * s1 * s1 + s2 * s2 / (theta * theta) + 2.0 * rl / theta * rho * s1 * s2;
    assert_relative_eq!(q.covariance[2][2], var_ds, max_relative = 1e-12);
    // cov(ΔG°, ΔH°) = −Rθ ln10 · ρσ₁σ₂
    assert_relative_eq!(
        q.covariance[0][1],
        -rl * theta * rho * s1 * s2,
        max_relative = 1e-12
    );
    // ΔCp° is fixed: no variance
    assert_abs_diff_eq!(q.covariance[3][3], 0.0);
    assert_relative_eq!(q.standard_errors()[1], s2, max_relative = 1e-12);
}

// ---------------------------------------------------------------------------------------------
// model files

fn full_model() -> EquilibriumModel {
    let mut m = model(&["A", "B"], vec![]);
    m.components[1].optics = Optics::Transparent;
    m.components[0].max_absorptivity = Some(8.0);
    let mut ab = formed("AB", &[("A", 1), ("B", 1)], 2.0);
    ab.known_spectrum = Some("ab.csv".into());
    ab.law = Law::VanTHoff(VanTHoffLaw {
        log_beta_ref: Parameter::free(2.0),
        dh_ref: Parameter::fixed(-1.5e4),
        t_ref_k: 305.0,
    });
    let mut ab2 = formed("AB2", &[("A", 1), ("B", 2)], 3.0);
    ab2.max_absorptivity = Some(25.0);
    ab2.law = Law::HeatCapacity(HeatCapacityLaw {
        log_beta_ref: Parameter::free(3.0),
        dh_ref: Parameter::free(1e4),
        dcp: Parameter::free(-80.0),
        dcp_slope: Some(Parameter::fixed(0.4)),
        t_ref_k: 298.15,
    });
    let a2 = formed("A2", &[("A", 2)], 1.0);
    m.species = vec![ab, ab2, a2];
    m
}

#[test]
fn a_model_survives_a_toml_and_a_json_round_trip() {
    let m = full_model();
    let toml_text = m.to_toml_string().unwrap();
    assert_eq!(EquilibriumModel::from_toml_str(&toml_text).unwrap(), m);
    let json = serde_json::to_string_pretty(&m).unwrap();
    assert_eq!(EquilibriumModel::from_json_str(&json).unwrap(), m);
    let v = m.check().unwrap();
    assert_eq!(v.as_model(), &m);
    assert_eq!(v.species_index("AB2"), Some(3));
    assert_eq!(v.species()[1].optics, Optics::Transparent);
}

#[test]
fn the_laws_give_each_species_its_log_beta_at_temperature() {
    let v = full_model().check().unwrap();
    let lb = v.log10_betas(&[305.0, 298.15]);
    assert_abs_diff_eq!(lb[[0, 0]], 0.0);
    assert_relative_eq!(lb[[0, 2]], 2.0); // van 't Hoff at its own θ = 305 K
    assert_relative_eq!(lb[[1, 3]], 3.0); // heat capacity at θ = 298.15 K
    assert_relative_eq!(lb[[1, 4]], 1.0);
}

fn err(m: &EquilibriumModel) -> SpeciationError {
    m.check().unwrap_err()
}

#[test]
fn every_validation_error_names_what_is_wrong() {
    // parse errors, including unknown fields anywhere
    for bad in [
        "components = [{ name = \"M\", absorbs = true, colour = \"red\" }]",
        "components = [{ name = \"M\", absorbs = true }]\nextra = 1",
        "components = [{ name = \"M\" }]",
        "components = [{ name = \"M\", absorbs = true }]\n[[species]]\nname = \"M2\"\nstoichiometry = { M = 2 }\n\
         absorbs = true\nlaw = { kind = \"linear\", log_beta = { value = 1.0 } }",
    ] {
        assert!(matches!(
            EquilibriumModel::from_toml_str(bad),
            Err(SpeciationError::Parse { format: "TOML", .. })
        ));
    }
    assert!(matches!(
        EquilibriumModel::from_json_str("{\"components\": 3}"),
        Err(SpeciationError::Parse { format: "JSON", .. })
    ));

    assert_eq!(err(&model(&[], vec![])), SpeciationError::NoComponents);
    assert_eq!(
        err(&model(&["M", " "], vec![])),
        SpeciationError::EmptyName {
            what: "component",
            index: 1
        }
    );
    assert_eq!(
        err(&model(&["M"], vec![formed("", &[("M", 2)], 1.0)])),
        SpeciationError::EmptyName {
            what: "species",
            index: 0
        }
    );
    assert_eq!(
        err(&model(&["M", "M"], vec![])),
        SpeciationError::DuplicateComponent {
            component: "M".into()
        }
    );
    assert_eq!(
        err(&model(
            &["M", "L"],
            vec![
                formed("ML", &[("M", 1), ("L", 1)], 1.0),
                formed("ML", &[("M", 1), ("L", 2)], 1.0)
            ]
        )),
        SpeciationError::DuplicateSpecies { species: "ML".into() }
    );
    assert_eq!(
        err(&model(&["M", "L"], vec![formed("L", &[("M", 1), ("L", 1)], 1.0)])),
        SpeciationError::DuplicateSpecies { species: "L".into() }
    );
    assert_eq!(
        err(&model(
            &["M", "L"],
            vec![formed("MX", &[("M", 1), ("X", 1)], 1.0)]
        )),
        SpeciationError::UnknownComponent {
            species: "MX".into(),
            component: "X".into()
        }
    );
    assert_eq!(
        err(&model(&["M", "L"], vec![formed("nothing", &[("M", 0)], 1.0)])),
        SpeciationError::ZeroStoichiometry {
            species: "nothing".into()
        }
    );
    assert_eq!(
        err(&model(
            &["M", "L"],
            vec![
                formed("ML", &[("M", 1), ("L", 1)], 1.0),
                formed("LM", &[("L", 1), ("M", 1)], 2.0)
            ]
        )),
        SpeciationError::DuplicateStoichiometry {
            species: "LM".into(),
            same_as: "ML".into()
        }
    );
    assert_eq!(
        err(&model(&["M", "L"], vec![formed("M'", &[("M", 1)], 1.0)])),
        SpeciationError::DuplicateStoichiometry {
            species: "M'".into(),
            same_as: "M".into()
        }
    );
    // sums and multiples of other rows are NOT degenerate (mass action tells them apart)
    model(
        &["M", "L"],
        vec![
            formed("ML", &[("M", 1), ("L", 1)], 1.0),
            formed("ML2", &[("M", 1), ("L", 2)], 2.0),
            formed("M2L2", &[("M", 2), ("L", 2)], 3.0),
            formed("M2", &[("M", 2)], 0.5),
        ],
    )
    .check()
    .unwrap();

    let mut bad_law = model(&["M"], vec![formed("M2", &[("M", 2)], f64::NAN)]);
    assert!(matches!(
        err(&bad_law),
        SpeciationError::InvalidParameter { ref species, ref parameter, .. } if species == "M2" && parameter == "log_beta"
    ));
    bad_law.species[0].law = Law::VanTHoff(VanTHoffLaw {
        log_beta_ref: Parameter::free(1.0),
        dh_ref: Parameter::free(0.0),
        t_ref_k: 0.0,
    });
    assert!(matches!(
        err(&bad_law),
        SpeciationError::InvalidParameter { ref parameter, .. } if parameter == "t_ref_k"
    ));
    let mut weak = model(&["M"], vec![formed("M2", &[("M", 2)], 1.0)]);
    weak.species[0].max_absorptivity = Some(0.0);
    assert_eq!(
        err(&weak),
        SpeciationError::InvalidMaxAbsorptivity {
            species: "M2".into(),
            value: 0.0
        }
    );
    weak.species[0].max_absorptivity = None;
    weak.components[0].max_absorptivity = Some(-3.0);
    assert!(
        matches!(err(&weak), SpeciationError::InvalidMaxAbsorptivity { ref species, .. } if species == "M")
    );

    let v = full_model().check().unwrap();
    assert_eq!(
        v.check_totals(&["B".to_string(), "C".to_string()]),
        Err(SpeciationError::MissingTotals {
            components: vec!["A".into()]
        })
    );
    assert_eq!(v.check_totals(&["B".to_string(), "A".to_string()]), Ok(()));
}

#[test]
fn error_messages_name_the_culprit() {
    let e = SpeciationError::DuplicateStoichiometry {
        species: "LM".into(),
        same_as: "ML".into(),
    };
    assert!(e.to_string().contains("'LM'") && e.to_string().contains("'ML'"));
    let e = SpeciationError::NotConverged {
        sample: "s-12".into(),
        residual: 0.3,
        iterations: 400,
    };
    assert!(e.to_string().contains("s-12"));
}
