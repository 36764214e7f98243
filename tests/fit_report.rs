//! The fit report's van 't Hoff table (global fit beside the classic two-wavelength estimates)
//! and its page figures, on simulated data whose truth is the simulating model.

mod support;

use isosbestic::report::fit::{
    FIT_OUTPUTS, FIT_PAGE_OUTPUTS, run_fit, vant_hoff_table, write_fit_outputs, write_fit_page,
};
use isosbestic::resolve::hard::{HardFitParams, fit};
use isosbestic::simulate::Noise;
use isosbestic::simulate::simulate;
use std::f64::consts::LN_10;
use support::{ONE_COMPLEX, TWO_COMPLEXES, model, plan, write_inputs_with_noise};

#[test]
fn a_one_complex_fit_shows_the_classic_estimates_beside_the_global_curve() {
    let m = model(ONE_COMPLEX);
    let sim = simulate(&m, &plan(&["M", "MX"])).unwrap();
    let hard = fit(&sim.set, &m, &HardFitParams::default()).unwrap();
    let table = vant_hoff_table(&hard, &m, &sim.set);
    assert!(table.notes.is_empty(), "{:?}", table.notes);
    let c = table
        .classic
        .as_ref()
        .expect("a two-absorber model gets the classic estimates");
    // the selectivity rule lands on the simulated band centres (support::plan)
    approx::assert_abs_diff_eq!(c.free_wavelength_nm, 420.0, epsilon = 5.1);
    approx::assert_abs_diff_eq!(c.complex_wavelength_nm, 560.0, epsilon = 5.1);
    assert_eq!(
        (c.free_species.as_str(), c.ligand.as_str(), c.ligand_number),
        ("M", "X", 1)
    );
    assert_eq!(table.points.len(), sim.set.n_samples());
    assert_eq!(table.curves.len(), 1);
    // truth: the simulating model, ln β(T) = ln10·(0.4 − ΔH°/(R ln10)·(1/T − 1/298.15))
    let truth = |t: f64| LN_10 * 0.4 - 12000.0 / 8.314_462_618 * (1.0 / t - 1.0 / 298.15);
    for p in &table.points {
        let lt = truth(p.temperature_k);
        approx::assert_abs_diff_eq!(p.ln_k_global, lt, epsilon = 1e-5);
        assert!(p.ln_k_lower.unwrap() <= p.ln_k_global && p.ln_k_global <= p.ln_k_upper.unwrap());
        approx::assert_relative_eq!(p.inverse_temperature_per_k, 1.0 / p.temperature_k);
        // noise-free, bands apart: both classic estimates close to the truth
        approx::assert_abs_diff_eq!(p.ln_k_classic_direct.unwrap(), lt, epsilon = 0.02);
        approx::assert_abs_diff_eq!(p.ln_k_classic_mass_balance.unwrap(), lt, epsilon = 0.02);
    }
    let dh = c.direct.dh_j_mol.unwrap();
    approx::assert_abs_diff_eq!(dh[0], 12000.0, epsilon = 300.0);
    approx::assert_abs_diff_eq!(c.global_dh_j_mol[0], 12000.0, epsilon = 1.0);
    approx::assert_abs_diff_eq!(c.mass_balance.dh_j_mol.unwrap()[0], 12000.0, epsilon = 300.0);
}

#[test]
fn a_two_complex_fit_plots_both_curves_and_says_why_the_classic_points_are_missing() {
    let m = model(TWO_COMPLEXES);
    let sim = simulate(&m, &plan(&["M", "MX", "MX2"])).unwrap();
    let hard = fit(&sim.set, &m, &HardFitParams::default()).unwrap();
    let table = vant_hoff_table(&hard, &m, &sim.set);
    assert!(table.classic.is_none());
    assert!(
        table.notes.iter().any(|n| n.contains("2 formed species")),
        "{:?}",
        table.notes
    );
    assert_eq!(table.curves.len(), 2);
    assert_eq!(table.points.len(), 2 * sim.set.n_samples());
    assert!(table.points.iter().all(|p| p.ln_k_classic_direct.is_none()));
    let svg = isosbestic::report::plots::vant_hoff_of_table(&table, &Default::default()).unwrap();
    assert!(svg.contains("ln β MX, global fit") && svg.contains("ln β MX2, global fit"));
    assert_eq!(svg.matches("<polygon").count(), 2);
}

#[test]
fn the_fit_outputs_hold_the_van_t_hoff_table_and_the_page_the_new_figures() {
    let dir = tempfile::tempdir().unwrap();
    // noisy data: the residuals' sum of squares below is then far above the rounding level
    let config = write_inputs_with_noise(
        dir.path(),
        ONE_COMPLEX,
        &["M", "MX"],
        Noise::Absorbance { sd_au: 1e-3 },
    );
    let (report, set) = run_fit(&config).unwrap();
    let out = dir.path().join("out");
    write_fit_outputs(&out, &report, false).unwrap();
    write_fit_page(&out, &report, &set, "2026-12-02T01:00:00Z", false).unwrap();
    for name in FIT_OUTPUTS.iter().chain(FIT_PAGE_OUTPUTS.iter()) {
        assert!(out.join(name).is_file(), "{name} missing");
    }
    let csv = std::fs::read_to_string(out.join("vant_hoff_points.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next().unwrap(),
        "sample_id,series,species,temperature_K,inverse_temperature_per_K,ln_K_global,\
         ln_K_global_lower95,ln_K_global_upper95,ln_K_classic_direct,ln_K_classic_mass_balance"
    );
    assert_eq!(lines.count(), set.n_samples());
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    let vh = json.pointer("/data/vant_hoff/classic/complex_species");
    assert_eq!(vh.and_then(|v| v.as_str()), Some("MX"), "report.json: {json}");
    let vh_svg = std::fs::read_to_string(out.join("vant_hoff.svg")).unwrap();
    assert!(vh_svg.contains("classic direct") && vh_svg.contains("classic mass balance"));
    assert!(vh_svg.contains("95 % confidence band"));
    let efa = std::fs::read_to_string(out.join("evolving_factors.svg")).unwrap();
    assert!(efa.contains("forward, factor 1") && efa.contains("backward, factor 2"));
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert_eq!(page.matches("<svg").count(), FIT_PAGE_OUTPUTS.len() - 2);
    assert!(page.contains("ΔH° of MX, classic direct"));
    // residuals.csv: one row per wavelength, one column per sample; its sum of squares is the
    // fit's RSS (computed in the reduced space) up to the CSV's rounding
    let residuals = std::fs::read_to_string(out.join("residuals.csv")).unwrap();
    let mut rows = residuals.lines();
    assert_eq!(rows.next().unwrap().split(',').count(), 1 + set.n_samples());
    let mut rss = 0.0;
    let mut n_rows = 0;
    for row in rows {
        n_rows += 1;
        rss += row
            .split(',')
            .skip(1)
            .map(|v| v.parse::<f64>().unwrap().powi(2))
            .sum::<f64>();
    }
    assert_eq!(n_rows, set.n_wavelengths());
    approx::assert_relative_eq!(rss, report.fit.rss, max_relative = 1e-6);
    let summary = report.to_string();
    assert!(summary.contains("van 't Hoff comparison for MX"), "{summary}");
    assert!(summary.contains("classic mass balance"));
}
