//! The special functions and distributions of `isosbestic::stats` against scipy.
//! Source of every expected value: scipy.special / scipy.stats, stored in
//! tests/fixtures/stats/reference.json by tests/fixtures/stats/gen.py (version in the file).

use approx::assert_relative_eq;
use isosbestic::stats;
use serde_json::Value;

fn fixture() -> Value {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/stats/reference.json"
    ))
    .expect("fixture present");
    serde_json::from_str(&text).expect("fixture is JSON")
}

fn rows(v: &Value, key: &str) -> Vec<Vec<f64>> {
    v[key]
        .as_array()
        .expect("array")
        .iter()
        .map(|r| {
            r.as_array()
                .expect("row")
                .iter()
                .map(|x| x.as_f64().expect("number"))
                .collect()
        })
        .collect()
}

#[test]
fn ln_gamma_matches_scipy_gammaln() {
    for r in rows(&fixture(), "ln_gamma") {
        assert_relative_eq!(stats::ln_gamma(r[0]), r[1], max_relative = 1e-13, epsilon = 1e-14);
    }
}

#[test]
fn incomplete_beta_matches_scipy_betainc() {
    for r in rows(&fixture(), "incomplete_beta") {
        assert_relative_eq!(
            stats::incomplete_beta(r[0], r[1], r[2]),
            r[3],
            max_relative = 1e-11
        );
    }
}

#[test]
fn incomplete_gamma_matches_scipy_gammainc() {
    for r in rows(&fixture(), "incomplete_gamma_p") {
        assert_relative_eq!(stats::incomplete_gamma_p(r[0], r[1]), r[2], max_relative = 1e-11);
    }
}

#[test]
fn f_survival_function_matches_scipy() {
    for r in rows(&fixture(), "f_sf") {
        assert_relative_eq!(stats::f_sf(r[0], r[1], r[2]), r[3], max_relative = 1e-10);
    }
}

#[test]
fn student_t_matches_scipy() {
    let f = fixture();
    for r in rows(&f, "t_sf") {
        // 1e-9: at 1e5 degrees of freedom ln Γ(a + b) − ln Γ(a) loses ~6 digits to cancellation
        // (documented accuracy of stats::student_t_sf); ample for confidence intervals.
        assert_relative_eq!(stats::student_t_sf(r[0], r[1]), r[2], max_relative = 1e-9);
    }
    for r in rows(&f, "t_quantile") {
        assert_relative_eq!(stats::student_t_quantile(r[0], r[1]), r[2], max_relative = 1e-10);
    }
}

#[test]
fn normal_and_chi_squared_match_scipy() {
    let f = fixture();
    for r in rows(&f, "normal_quantile") {
        assert_relative_eq!(
            stats::normal_quantile(r[0]),
            r[1],
            max_relative = 1e-10,
            epsilon = 1e-12
        );
    }
    for r in rows(&f, "chi2_sf") {
        assert_relative_eq!(stats::chi_squared_sf(r[0], r[1]), r[2], max_relative = 1e-10);
    }
}
