//! Classic two-wavelength estimates on synthetic data from a known equilibrium
//! M + nL ⇌ MLₙ with ΔH° = −30 kJ/mol, ΔS° = −50 J/(K mol) (invented; a hypothetical
//! exothermic complexation). Ground truth is exact speciation (closed-form quadratic for n = 1,
//! bisection for n = 2), so every expected value below follows from the model and Beer–Lambert
//! algebra, derived in the comments.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::resolve::classic::{
    ClassicInput, ClassicMethod, ClassicParams, ClassicSpecies, CrossAbsorption, SampleProblem,
    TwoWavelengthAbsorptivities, classic_estimate,
};
use isosbestic::thermo::{GAS_CONSTANT, VanThoffParams};
use rand_distr::{Distribution, Normal};

const DH: f64 = -30_000.0;
const DS: f64 = -50.0;
const M_TOTAL: f64 = 2.0e-3;
const L_TOTAL: f64 = 5.0e-3;

fn k_true(t: f64) -> f64 {
    (-DH / (GAS_CONSTANT * t) + DS / GAS_CONSTANT).exp()
}

/// [MLₙ] from K, M_total, L_total.
fn complex_conc(k: f64, n: u32) -> f64 {
    if n == 1 {
        // K c² − (K(M+L) + 1) c + K M L = 0, smaller root in the cancellation-free form
        let b = k * (M_TOTAL + L_TOTAL) + 1.0;
        2.0 * k * M_TOTAL * L_TOTAL / (b + (b * b - 4.0 * k * k * M_TOTAL * L_TOTAL).sqrt())
    } else {
        // c − K (M − c)(L − n c)ⁿ is increasing in c on (0, min(M, L/n)): bisection
        let nf = f64::from(n);
        let (mut lo, mut hi) = (0.0, M_TOTAL.min(L_TOTAL / nf));
        for _ in 0..200 {
            let c = 0.5 * (lo + hi);
            if c - k * (M_TOTAL - c) * (L_TOTAL - nf * c).powi(n as i32) > 0.0 {
                hi = c;
            } else {
                lo = c;
            }
        }
        0.5 * (lo + hi)
    }
}

struct Truth {
    t: Vec<f64>,
    m: Vec<f64>,
    c: Vec<f64>,
    input: ClassicInput,
}

fn synthetic(n: u32, eps: &TwoWavelengthAbsorptivities) -> Truth {
    let t: Vec<f64> = (0..8).map(|k| 288.15 + 10.0 * f64::from(k)).collect();
    let c: Vec<f64> = t.iter().map(|&t| complex_conc(k_true(t), n)).collect();
    let m: Vec<f64> = c.iter().map(|c| M_TOTAL - c).collect();
    let input = ClassicInput {
        sample_ids: (0..8).map(|i| format!("s{i}")).collect(),
        temperatures_k: t.clone(),
        path_cm: vec![1.0; 8],
        absorbance_at_free_nm: m
            .iter()
            .zip(&c)
            .map(|(m, c)| eps.free_at_free_nm * m + eps.complex_at_free_nm * c)
            .collect(),
        absorbance_at_complex_nm: m
            .iter()
            .zip(&c)
            .map(|(m, c)| eps.free_at_complex_nm * m + eps.complex_at_complex_nm * c)
            .collect(),
        metal_total_m: vec![M_TOTAL; 8],
        ligand_total_m: vec![L_TOTAL; 8],
    };
    Truth { t, m, c, input }
}

const SEPARATE: TwoWavelengthAbsorptivities = TwoWavelengthAbsorptivities {
    free_at_free_nm: 5.0,
    free_at_complex_nm: 0.0,
    complex_at_free_nm: 0.0,
    complex_at_complex_nm: 600.0,
};

/// The complex's band reaches the free metal's wavelength (10× the weak metal ε there).
const OVERLAP: TwoWavelengthAbsorptivities = TwoWavelengthAbsorptivities {
    free_at_free_nm: 5.0,
    free_at_complex_nm: 0.0,
    complex_at_free_nm: 50.0,
    complex_at_complex_nm: 600.0,
};

fn params(method: ClassicMethod, cross: CrossAbsorption, n: u32) -> ClassicParams {
    ClassicParams {
        ligand_number: n,
        method,
        cross_absorption: cross,
    }
}

#[test]
fn both_estimates_recover_k_and_the_thermodynamics_exactly_without_band_overlap() {
    let truth = synthetic(1, &SEPARATE);
    for method in [ClassicMethod::Direct, ClassicMethod::MassBalance] {
        let est = classic_estimate(
            &truth.input,
            &SEPARATE,
            &params(method, CrossAbsorption::Neglect, 1),
        )
        .unwrap();
        for (s, &t) in est.samples.iter().zip(&truth.t) {
            assert_relative_eq!(s.k.unwrap(), k_true(t), max_relative = 1e-9);
        }
        let vh = est
            .vant_hoff(&VanThoffParams::default().check().unwrap())
            .unwrap();
        assert!(vh.excluded.is_empty());
        assert_relative_eq!(vh.fit.delta_h_j_per_mol.value, DH, max_relative = 1e-8);
        assert_relative_eq!(vh.fit.delta_s_j_per_k_mol.value, DS, max_relative = 1e-8);
    }
}

#[test]
fn the_cross_term_correction_recovers_a_two_ligand_complex_exactly_despite_overlap() {
    let eps = TwoWavelengthAbsorptivities {
        free_at_free_nm: 5.0,
        free_at_complex_nm: 2.0,
        complex_at_free_nm: 80.0,
        complex_at_complex_nm: 600.0,
    };
    let truth = synthetic(2, &eps);
    for method in [ClassicMethod::Direct, ClassicMethod::MassBalance] {
        let est = classic_estimate(&truth.input, &eps, &params(method, CrossAbsorption::Correct, 2)).unwrap();
        for (i, s) in est.samples.iter().enumerate() {
            assert_relative_eq!(s.complex_m, truth.c[i], max_relative = 1e-9);
            assert_relative_eq!(s.free_metal_m, truth.m[i], max_relative = 1e-8);
            assert_relative_eq!(s.k.unwrap(), k_true(truth.t[i]), max_relative = 1e-7);
        }
    }
}

#[test]
fn neglecting_overlap_biases_the_direct_estimate_of_k_downwards_by_the_derived_amount() {
    // With ε_MLₙ(λ₁) = 50 neglected, A(λ₁)/(ε_M(λ₁) b) = [M] + (50/5)[ML] = [M] + 10[ML];
    // [ML] is exact (ε_M(λ₂) = 0) and so is [L]. Hence
    //   K_est/K = [M]/([M] + 10[ML]) = 1/(1 + 10 r),  r = [ML]/[M] = K[L] > 0,
    // a bias that is always negative and at least 10 r_min/(1 + 10 r_min) in magnitude.
    let truth = synthetic(1, &OVERLAP);
    let est = classic_estimate(
        &truth.input,
        &OVERLAP,
        &params(ClassicMethod::Direct, CrossAbsorption::Neglect, 1),
    )
    .unwrap();
    let r: Vec<f64> = truth.c.iter().zip(&truth.m).map(|(c, m)| c / m).collect();
    let r_min = r.iter().copied().fold(f64::INFINITY, f64::min);
    let threshold = 10.0 * r_min / (1.0 + 10.0 * r_min);
    assert!(threshold > 0.5, "design gives a large bias (r_min = {r_min})");
    for (i, s) in est.samples.iter().enumerate() {
        let bias = s.k.unwrap() / k_true(truth.t[i]) - 1.0;
        assert_relative_eq!(bias, -10.0 * r[i] / (1.0 + 10.0 * r[i]), max_relative = 1e-9);
        assert!(bias <= -threshold + 1e-12);
        // the complex is unaffected here
        assert_relative_eq!(s.complex_m, truth.c[i], max_relative = 1e-9);
    }
    // r = K[L] grows as T falls (exothermic), so the under-estimate deepens at low T and ln K_est
    // rises less steeply with 1/T: the apparent ΔH° is less negative than the true one.
    let vh = est
        .vant_hoff(&VanThoffParams::default().check().unwrap())
        .unwrap();
    assert!(vh.fit.delta_h_j_per_mol.value - DH > 0.1 * DH.abs());
    // the mass-balance estimate uses only the clean band at λ₂ and stays exact
    let mb = classic_estimate(
        &truth.input,
        &OVERLAP,
        &params(ClassicMethod::MassBalance, CrossAbsorption::Neglect, 1),
    )
    .unwrap();
    for (s, &t) in mb.samples.iter().zip(&truth.t) {
        assert_relative_eq!(s.k.unwrap(), k_true(t), max_relative = 1e-9);
    }
}

#[test]
fn the_mass_balance_estimate_amplifies_an_error_in_the_strong_absorbers_epsilon() {
    // Using ε' = (1 + δ) ε_ML(λ₂): [ML]_est = [ML]/(1 + δ), [M]_est = [M] + [ML] δ/(1 + δ), so the
    // relative error of [M] is r δ/(1 + δ) with r = [ML]/[M]: larger than δ itself when r > 1 + δ.
    let truth = synthetic(1, &SEPARATE);
    let delta = 0.05;
    let wrong = TwoWavelengthAbsorptivities {
        complex_at_complex_nm: SEPARATE.complex_at_complex_nm * (1.0 + delta),
        ..SEPARATE
    };
    let est = classic_estimate(
        &truth.input,
        &wrong,
        &params(ClassicMethod::MassBalance, CrossAbsorption::Neglect, 1),
    )
    .unwrap();
    let mut amplified = 0;
    for (i, s) in est.samples.iter().enumerate() {
        let r = truth.c[i] / truth.m[i];
        let rel = s.free_metal_m / truth.m[i] - 1.0;
        assert_relative_eq!(rel, r * delta / (1.0 + delta), max_relative = 1e-8);
        if r > 1.0 + delta {
            assert!(rel > delta);
            amplified += 1;
        }
    }
    assert!(
        amplified >= 2,
        "the design has samples with more complex than free metal"
    );
}

#[test]
fn the_direct_estimate_of_a_weak_absorber_carries_noise_divided_by_its_epsilon() {
    // σ([M]) = σ(A)/(ε_M(λ₁) b) by linear propagation (Beer–Lambert); with σ(A) = 1e-3 AU and
    // ε = 5 L mol⁻¹ cm⁻¹ that is 2e-4 mol/L. Checked on 4000 noisy replicates of one sample
    // (sampling error of a standard deviation ≈ 1/√(2·4000) ≈ 1.1 %, tolerance 5 %).
    let truth = synthetic(1, &SEPARATE);
    let mut rng = isosbestic::testing::rng(7);
    let noise = Normal::new(0.0, 1e-3).unwrap();
    let reps = 4000;
    let a1 = truth.input.absorbance_at_free_nm[4];
    let input = ClassicInput {
        sample_ids: (0..reps).map(|i| format!("r{i}")).collect(),
        temperatures_k: vec![truth.t[4]; reps],
        path_cm: vec![1.0; reps],
        absorbance_at_free_nm: (0..reps).map(|_| a1 + noise.sample(&mut rng)).collect(),
        absorbance_at_complex_nm: vec![truth.input.absorbance_at_complex_nm[4]; reps],
        metal_total_m: vec![M_TOTAL; reps],
        ligand_total_m: vec![L_TOTAL; reps],
    };
    let est = classic_estimate(&input, &SEPARATE, &ClassicParams::default()).unwrap();
    let m: Vec<f64> = est.samples.iter().map(|s| s.free_metal_m).collect();
    let mean = m.iter().sum::<f64>() / reps as f64;
    let sd = (m.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (reps - 1) as f64).sqrt();
    assert_relative_eq!(sd, 1e-3 / 5.0, max_relative = 0.05);
    // relative to the free metal itself that is a large noise
    assert!(sd / truth.m[4] > 0.1);
}

#[test]
fn a_sample_with_a_non_positive_concentration_is_reported_and_left_out_of_the_fit() {
    let mut truth = synthetic(1, &SEPARATE);
    // a spike at λ₂ in sample s3: [ML] = 1.5/600 = 2.5e-3 > M_total → [M] < 0
    truth.input.absorbance_at_complex_nm[3] = 1.5;
    let est = classic_estimate(
        &truth.input,
        &SEPARATE,
        &params(ClassicMethod::MassBalance, CrossAbsorption::Neglect, 1),
    )
    .unwrap();
    let s3 = &est.samples[3];
    assert!(s3.k.is_none());
    match s3.problem {
        Some(SampleProblem::NonPositiveConcentration { species, value_m }) => {
            assert_eq!(species, ClassicSpecies::FreeMetal);
            assert_abs_diff_eq!(value_m, M_TOTAL - 2.5e-3, epsilon = 1e-15);
        }
        other => panic!("expected a per-sample problem, got {other:?}"),
    }
    let vh = est
        .vant_hoff(&VanThoffParams::default().check().unwrap())
        .unwrap();
    assert_eq!(vh.excluded.len(), 1);
    assert_eq!(vh.excluded[0].id, "s3");
    assert_eq!(vh.used.len(), 7);
    assert_relative_eq!(vh.fit.delta_h_j_per_mol.value, DH, max_relative = 1e-8);
}

proptest::proptest! {
    #[test]
    fn with_all_four_absorptivities_known_both_estimates_recover_any_one_to_one_constant(
        log_k in 1.0..5.0f64,
        eps_m1 in 1.0..50.0f64,
        eps_c1 in 0.0..300.0f64,
        eps_m2 in 0.0..5.0f64,
        eps_c2 in 100.0..2000.0f64,
    ) {
        let k = 10f64.powf(log_k);
        let c = complex_conc(k, 1);
        let m = M_TOTAL - c;
        let eps = TwoWavelengthAbsorptivities {
            free_at_free_nm: eps_m1,
            free_at_complex_nm: eps_m2,
            complex_at_free_nm: eps_c1,
            complex_at_complex_nm: eps_c2,
        };
        let input = ClassicInput {
            sample_ids: vec!["p".into()],
            temperatures_k: vec![298.15],
            path_cm: vec![0.5],
            absorbance_at_free_nm: vec![0.5 * (eps_m1 * m + eps_c1 * c)],
            absorbance_at_complex_nm: vec![0.5 * (eps_m2 * m + eps_c2 * c)],
            metal_total_m: vec![M_TOTAL],
            ligand_total_m: vec![L_TOTAL],
        };
        for method in [ClassicMethod::Direct, ClassicMethod::MassBalance] {
            let est = classic_estimate(&input, &eps, &params(method, CrossAbsorption::Correct, 1)).unwrap();
            let got = est.samples[0].k.unwrap();
            proptest::prop_assert!((got / k - 1.0).abs() < 1e-6, "{method:?}: {got} vs {k}");
        }
    }
}
