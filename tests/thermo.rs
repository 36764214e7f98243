//! Solvent density, activity coefficients and van 't Hoff fitting against outside values.
//!
//! Sources: statsmodels/scipy results stored in tests/fixtures/thermo/reference.json by
//! tests/fixtures/thermo/gen.py (versions in the file); IAPWS-95 densities, Debye–Hückel A, B,
//! Davies examples and the Clarke–Glew and ΔH°–ΔS° correlation examples from the project's
//! REFERENCES.md (sources named beside each check).

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::thermo::{
    ActivityModel, ConstantScale, Davies, ErrorScale, GAS_CONSTANT, HeatCapacityModel, KData, SolventDensity,
    VanThoffFit, VanThoffParams, Weighting, debye_huckel_a, debye_huckel_b_per_angstrom, fit_vant_hoff,
    kell_water_density_kg_m3, ln_k_clarke_glew,
};
use proptest::prelude::*;
use serde_json::Value;

fn fixture() -> Value {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/thermo/reference.json"
    ))
    .expect("fixture present");
    serde_json::from_str(&text).expect("fixture is JSON")
}

fn vec_of(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

fn mat_of(v: &Value) -> Vec<Vec<f64>> {
    v.as_array().expect("array").iter().map(vec_of).collect()
}

/// Compares a fit with a statsmodels summary written by gen.py's `summary()`.
fn assert_matches_statsmodels(fit: &VanThoffFit, s: &Value) {
    let params = vec_of(&s["params"]);
    let se = vec_of(&s["std_errors"]);
    for (i, (p, e)) in params.iter().zip(&se).enumerate() {
        assert_relative_eq!(fit.parameters[i], *p, max_relative = 1e-9);
        assert_relative_eq!(fit.covariance[i][i].sqrt(), *e, max_relative = 1e-7);
    }
    for (row, srow) in fit.covariance.iter().zip(mat_of(&s["covariance"])) {
        for (c, sc) in row.iter().zip(&srow) {
            assert_relative_eq!(*c, *sc, max_relative = 1e-6);
        }
    }
    for (row, srow) in fit.correlation.iter().zip(mat_of(&s["correlation"])) {
        for (c, sc) in row.iter().zip(&srow) {
            assert_abs_diff_eq!(*c, *sc, epsilon = 1e-9);
        }
    }
    for (r, sr) in fit.residuals_ln_k.iter().zip(vec_of(&s["residuals"])) {
        assert_abs_diff_eq!(*r, sr, epsilon = 1e-10);
    }
    assert_relative_eq!(
        fit.r_squared.expect("R²"),
        s["r_squared"].as_f64().unwrap(),
        max_relative = 1e-10
    );
    assert_abs_diff_eq!(fit.degrees_of_freedom as f64, s["dof"].as_f64().unwrap());
    let band = fit.band(&vec_of(&s["band_temperatures_k"]), 0.95).unwrap();
    let (m, e, lo, hi) = (
        vec_of(&s["band_ln_k"]),
        vec_of(&s["band_se"]),
        vec_of(&s["band_lower_95"]),
        vec_of(&s["band_upper_95"]),
    );
    for (i, b) in band.iter().enumerate() {
        assert_abs_diff_eq!(b.ln_k, m[i], epsilon = 1e-9);
        assert_relative_eq!(b.std_error, e[i], max_relative = 1e-7);
        assert_abs_diff_eq!(b.lower, lo[i], epsilon = 1e-7);
        assert_abs_diff_eq!(b.upper, hi[i], epsilon = 1e-7);
    }
}

fn exothermic_data(f: &Value) -> KData {
    let c = &f["exothermic"];
    KData::new(
        vec_of(&c["temperatures_k"]),
        vec_of(&c["ln_k"]),
        ConstantScale::Ln,
    )
    .with_sigmas(vec_of(&c["sigma_ln_k"]))
}

#[test]
fn weighted_fit_with_known_sigma_matches_statsmodels_wls_with_fixed_scale() {
    let f = fixture();
    let fit = fit_vant_hoff(&exothermic_data(&f), &VanThoffParams::default().check().unwrap()).unwrap();
    assert_eq!(fit.error_scale, ErrorScale::Known);
    // statsmodels WLS(weights = 1/σ²).fit(cov_type="fixed scale", use_t=False), gen.py
    assert_matches_statsmodels(&fit, &f["exothermic"]["known_sigma"]);
    // harmonic mean computed by numpy in gen.py
    assert_relative_eq!(
        fit.harmonic_mean_temperature_k,
        f["exothermic"]["harmonic_mean_temperature_k"].as_f64().unwrap(),
        max_relative = 1e-14
    );
}

#[test]
fn weighted_fit_with_relative_sigma_matches_statsmodels_wls_default() {
    let f = fixture();
    let p = VanThoffParams::default()
        .weighting(Weighting::RelativeSigma)
        .check()
        .unwrap();
    let fit = fit_vant_hoff(&exothermic_data(&f), &p).unwrap();
    assert_eq!(fit.error_scale, ErrorScale::Residual);
    // statsmodels WLS(weights = 1/σ²).fit() (covariance scaled by the residual variance), gen.py
    assert_matches_statsmodels(&fit, &f["exothermic"]["relative_sigma"]);
}

#[test]
fn unweighted_fit_matches_statsmodels_ols() {
    let f = fixture();
    let p = VanThoffParams::default()
        .weighting(Weighting::Unweighted)
        .check()
        .unwrap();
    let fit = fit_vant_hoff(&exothermic_data(&f), &p).unwrap();
    // statsmodels OLS, gen.py
    assert_matches_statsmodels(&fit, &f["exothermic"]["unweighted"]);
}

#[test]
fn heat_capacity_fit_matches_statsmodels_ols() {
    let f = fixture();
    let c = &f["heat_capacity"];
    let theta = c["reference_temperature_k"].as_f64().unwrap();
    let data = KData::new(
        vec_of(&c["temperatures_k"]),
        vec_of(&c["ln_k"]),
        ConstantScale::Ln,
    );
    let p = VanThoffParams::default()
        .heat_capacity(HeatCapacityModel::Constant {
            reference_temperature_k: theta,
        })
        .check()
        .unwrap();
    let fit = fit_vant_hoff(&data, &p).unwrap();
    // statsmodels OLS on the Clarke–Glew design, gen.py
    assert_matches_statsmodels(&fit, &c["unweighted"]);
    assert!(fit.delta_cp_j_per_k_mol.is_some());
}

#[test]
fn the_correlation_example_reproduces_reference_values() {
    let f = fixture();
    let c = &f["correlation_example"];
    let t = vec_of(&c["temperatures_k"]);
    // any ln K values: the covariance with known σ does not depend on them
    let lnk: Vec<f64> = t.iter().map(|&t| 4000.0 / t - 3.0).collect();
    let data = KData::new(t.clone(), lnk, ConstantScale::Ln).with_sigmas(vec![0.02; t.len()]);
    let fit = fit_vant_hoff(&data, &VanThoffParams::default().check().unwrap()).unwrap();
    let se_h = fit.delta_h_j_per_mol.std_error;
    let se_s = fit.delta_s_j_per_k_mol.std_error;
    // numpy (XᵀWX)⁻¹ in gen.py
    assert_relative_eq!(
        se_h,
        c["se_delta_h_j_per_mol"].as_f64().unwrap(),
        max_relative = 1e-9
    );
    assert_relative_eq!(
        se_s,
        c["se_delta_s_j_per_k_mol"].as_f64().unwrap(),
        max_relative = 1e-9
    );
    assert_relative_eq!(
        fit.correlation[0][1],
        c["correlation"].as_f64().unwrap(),
        max_relative = 1e-9
    );
    assert_abs_diff_eq!(
        fit.centred.correlation,
        c["centred_correlation"].as_f64().unwrap(),
        epsilon = 1e-9
    );
    assert_relative_eq!(
        fit.centred.ln_k.std_error,
        c["se_ln_k_at_thm"].as_f64().unwrap(),
        max_relative = 1e-9
    );
    // REFERENCES.md [C]: σ(ΔH°) ≈ 0.35 kJ/mol, σ(ΔS°) ≈ 1.12 J/(K mol), correlation ≈ 0.9986,
    // T_hm ≈ 312.3 K, centred correlation ≈ 0
    assert_abs_diff_eq!(se_h / 1000.0, 0.35, epsilon = 0.005);
    assert_abs_diff_eq!(se_s, 1.12, epsilon = 0.005);
    assert_abs_diff_eq!(fit.correlation[0][1], 0.9986, epsilon = 5e-5);
    assert_abs_diff_eq!(fit.harmonic_mean_temperature_k, 312.3, epsilon = 0.05);
    assert_abs_diff_eq!(fit.centred.correlation, 0.0, epsilon = 1e-9);
}

#[test]
fn clarke_glew_forward_form_matches_references_and_numerical_integration() {
    let f = fixture();
    let c = &f["clarke_glew"];
    // REFERENCES.md [C] values at 278.15, 323.15, 363.15 K
    let reference = [0.79439743, 3.19405491, 4.53551029];
    for (row, expected) in mat_of(&c["ln_k"]).iter().zip(reference) {
        let v = ln_k_clarke_glew(row[0], 298.15, -5000.0, 40000.0, -200.0, 1.5);
        assert_abs_diff_eq!(v, expected, epsilon = 1e-8); // REFERENCES.md
        assert_abs_diff_eq!(v, row[1], epsilon = 1e-9); // scipy.integrate.quad, gen.py
    }
}

#[test]
fn clarke_glew_fit_with_a_linear_heat_capacity_recovers_its_generating_parameters() {
    // exact data from the forward function; the fit must return ΔG°, ΔH°, ΔCp°, dΔCp°/dT at θ
    let t: Vec<f64> = (0..10).map(|k| 278.15 + 9.0 * f64::from(k)).collect();
    let lnk = t
        .iter()
        .map(|&t| ln_k_clarke_glew(t, 298.15, -5000.0, 40000.0, -200.0, 1.5))
        .collect();
    let p = VanThoffParams::default()
        .heat_capacity(HeatCapacityModel::Linear {
            reference_temperature_k: 298.15,
        })
        .check()
        .unwrap();
    let fit = fit_vant_hoff(&KData::new(t, lnk, ConstantScale::Ln), &p).unwrap();
    assert_relative_eq!(fit.delta_h_j_per_mol.value, 40000.0, max_relative = 1e-8);
    assert_relative_eq!(fit.delta_g_at(298.15).value, -5000.0, max_relative = 1e-8);
    assert_relative_eq!(
        fit.delta_cp_j_per_k_mol.unwrap().value,
        -200.0,
        max_relative = 1e-6
    );
    assert_relative_eq!(
        fit.delta_cp_slope_j_per_k2_mol.unwrap().value,
        1.5,
        max_relative = 1e-5
    );
}

#[test]
fn kell_density_agrees_with_iapws95_within_0_02_kg_per_m3() {
    // IAPWS-95 (Wagner & Pruß, J. Phys. Chem. Ref. Data 31 (2002) 387) at 0.101325 MPa, values in
    // REFERENCES.md [C] from a general-purpose IAPWS implementation
    for (t_c, rho) in [
        (5.0, 999.9666),
        (25.0, 997.0476),
        (50.0, 988.0350),
        (75.0, 974.8429),
        (95.0, 961.8879),
    ] {
        assert_abs_diff_eq!(kell_water_density_kg_m3(273.15 + t_c), rho, epsilon = 0.02);
    }
}

#[test]
fn water_made_up_at_25_c_is_diluted_by_thermal_expansion_as_referenced() {
    // REFERENCES.md: 0.9777× at 75 °C and 0.9647× at 95 °C (from the IAPWS-95 densities)
    let f75 = SolventDensity::Water
        .concentration_factor(348.15, 298.15)
        .unwrap();
    let f95 = SolventDensity::Water
        .concentration_factor(368.15, 298.15)
        .unwrap();
    assert_abs_diff_eq!(f75, 0.9777, epsilon = 1e-4);
    assert_abs_diff_eq!(f95, 0.9647, epsilon = 1e-4);
}

#[test]
fn debye_huckel_a_and_b_agree_with_reference_values_within_half_a_percent() {
    // REFERENCES.md [C] (CODATA, IAPWS density and IAPWS R8-97 permittivity). Our A(T) uses the
    // Malmberg–Maryott permittivity (0.1–0.5 % lower than IAPWS R8-97 at 25–95 °C), hence 0.5 %.
    for (t_c, a) in [
        (0.0, 0.4904),
        (25.0, 0.5098),
        (50.0, 0.5341),
        (75.0, 0.5638),
        (95.0, 0.5915),
    ] {
        assert_relative_eq!(debye_huckel_a(273.15 + t_c).unwrap(), a, max_relative = 5e-3);
    }
    // B(25 °C) = 0.3284 Å⁻¹, REFERENCES.md [C]; B ∝ ε^{-1/2}, so a quarter of A's deviation
    assert_relative_eq!(
        debye_huckel_b_per_angstrom(298.15).unwrap(),
        0.3284,
        max_relative = 2e-3
    );
}

#[test]
fn davies_examples_agree_with_reference_values() {
    // REFERENCES.md [C], 25 °C, computed with A = 0.5098; tolerance 0.5 % from our A(T)
    let d = Davies::default();
    for (z, i, lg) in [(2, 0.1, -0.4287), (1, 0.01, -0.0448), (1, 0.5, -0.1347)] {
        assert_relative_eq!(d.log10_gamma(z, i, 298.15).unwrap(), lg, max_relative = 5e-3);
    }
}

proptest! {
    #[test]
    fn exact_ln_k_recovers_the_generating_enthalpy_and_entropy(
        dh in prop_oneof![-1.0e5..-5.0e3f64, 5.0e3..1.0e5f64],
        ds in prop_oneof![-200.0..-5.0f64, 5.0..200.0f64],
        n in 4usize..15,
        t0 in 275.0..300.0f64,
        span in 20.0..80.0f64,
    ) {
        let t: Vec<f64> = (0..n).map(|k| t0 + span * k as f64 / (n - 1) as f64).collect();
        let lnk = t.iter().map(|&t| -dh / (GAS_CONSTANT * t) + ds / GAS_CONSTANT).collect();
        let fit = fit_vant_hoff(&KData::new(t, lnk, ConstantScale::Ln), &VanThoffParams::default().check().unwrap()).unwrap();
        prop_assert!(((fit.delta_h_j_per_mol.value - dh) / dh).abs() < 1e-8);
        prop_assert!(((fit.delta_s_j_per_k_mol.value - ds) / ds).abs() < 1e-8);
    }

    #[test]
    fn exact_ln_k_with_a_heat_capacity_recovers_all_three_parameters(
        dh in prop_oneof![-1.0e5..-5.0e3f64, 5.0e3..1.0e5f64],
        ds in prop_oneof![-200.0..-5.0f64, 5.0..200.0f64],
        dcp in prop_oneof![-1000.0..-50.0f64, 50.0..1000.0f64],
        n in 5usize..15,
    ) {
        let theta = 298.15;
        let t: Vec<f64> = (0..n).map(|k| 278.15 + 80.0 * k as f64 / (n - 1) as f64).collect();
        let dg = dh - theta * ds;
        let lnk = t.iter().map(|&t| ln_k_clarke_glew(t, theta, dg, dh, dcp, 0.0)).collect();
        let p = VanThoffParams::default()
            .heat_capacity(HeatCapacityModel::Constant { reference_temperature_k: theta })
            .check()
            .unwrap();
        let fit = fit_vant_hoff(&KData::new(t, lnk, ConstantScale::Ln), &p).unwrap();
        prop_assert!(((fit.delta_h_j_per_mol.value - dh) / dh).abs() < 1e-8);
        prop_assert!(((fit.delta_s_j_per_k_mol.value - ds) / ds).abs() < 1e-8);
        prop_assert!(((fit.delta_cp_j_per_k_mol.unwrap().value - dcp) / dcp).abs() < 1e-8);
    }
}
