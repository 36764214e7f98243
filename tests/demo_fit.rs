//! The demo data set (data/demo, made by data/demo/make_demo.py, an independent numpy/scipy
//! forward model) fitted with the shipped run configuration: the fit must recover the invented
//! parameters in data/demo/truth.json within three standard errors.

use isosbestic::report::fit::{FitRunConfig, run_fit};

#[test]
fn the_demo_fit_recovers_the_generating_parameters() {
    let root = env!("CARGO_MANIFEST_DIR");
    std::env::set_current_dir(root).unwrap();
    let config: FitRunConfig =
        toml::from_str(&std::fs::read_to_string("data/demo/fit.toml").unwrap()).unwrap();
    let (report, _) = run_fit(&config).unwrap();
    assert!(report.fit.termination.converged(), "{:?}", report.fit.termination);
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string("data/demo/truth.json").unwrap()).unwrap();
    for species in ["NiBr", "NiBr2"] {
        for name in ["log_beta_ref", "dh_ref"] {
            let expected = truth["parameters"][species][name].as_f64().unwrap();
            let p = report.fit.parameter(species, name).unwrap();
            let z = (p.value - expected) / p.standard_error;
            assert!(
                z.abs() < 3.0,
                "{species} {name}: {} ± {} vs {expected} (z = {z:.2})",
                p.value,
                p.standard_error
            );
        }
    }
    // the residual sd estimates the simulated noise, 4e-4 AU (truth.json)
    approx::assert_relative_eq!(report.fit.residual_sd, 4e-4, max_relative = 0.05);
}
