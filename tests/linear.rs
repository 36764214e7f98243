//! The linear core against scipy: `scipy.optimize.nnls` and `numpy.linalg.lstsq` results stored
//! in tests/fixtures/linear/reference.json by tests/fixtures/linear/gen.py (versions in the file).

use approx::assert_abs_diff_eq;
use isosbestic::resolve::linear::{Constraint, NnlsParams, nnls_normal, solve_spectra};
use ndarray::{Array1, Array2};
use serde_json::Value;

/// (X, y, scipy nnls solution, its residual norm, numpy lstsq solution)
type Case = (Array2<f64>, Array1<f64>, Array1<f64>, f64, Array1<f64>);

fn cases() -> Vec<Case> {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/linear/reference.json"
    ))
    .expect("fixture present");
    let v: Value = serde_json::from_str(&text).expect("JSON");
    let vec = |v: &Value| -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    };
    v["cases"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            let rows: Vec<Vec<f64>> = c["x"].as_array().unwrap().iter().map(vec).collect();
            let (m, n) = (rows.len(), rows[0].len());
            let x = Array2::from_shape_vec((m, n), rows.concat()).unwrap();
            (
                x,
                Array1::from(vec(&c["y"])),
                Array1::from(vec(&c["nnls"])),
                c["rnorm"].as_f64().unwrap(),
                Array1::from(vec(&c["lstsq"])),
            )
        })
        .collect()
}

#[test]
fn fast_nnls_agrees_with_scipy_nnls() {
    for (x, y, expected, rnorm, _) in cases() {
        let (sol, status) = nnls_normal(x.t().dot(&x).view(), x.t().dot(&y).view(), &NnlsParams::default());
        assert!(status.converged());
        for (a, b) in sol.iter().zip(expected.iter()) {
            assert_abs_diff_eq!(a, b, epsilon = 1e-10); // scipy.optimize.nnls
        }
        let r = &y - &x.dot(&sol);
        assert_abs_diff_eq!(r.dot(&r).sqrt(), rnorm, epsilon = 1e-10);
    }
}

#[test]
fn spectra_solve_agrees_with_numpy_lstsq_column_by_column() {
    // One wavelength per case: D is samples × 1, C = X, unit path lengths.
    for (x, y, nonneg, _, lstsq) in cases() {
        let d = y.clone().insert_axis(ndarray::Axis(1));
        let path = Array1::ones(x.nrows());
        let known = vec![None; x.ncols()];
        let free = solve_spectra(d.view(), x.view(), path.view(), &known, Constraint::Unconstrained).unwrap();
        for (a, b) in free.spectra.row(0).iter().zip(lstsq.iter()) {
            assert_abs_diff_eq!(a, b, epsilon = 1e-10); // numpy.linalg.lstsq
        }
        let nn = solve_spectra(d.view(), x.view(), path.view(), &known, Constraint::NonNegative).unwrap();
        for (a, b) in nn.spectra.row(0).iter().zip(nonneg.iter()) {
            assert_abs_diff_eq!(a, b, epsilon = 1e-10); // scipy.optimize.nnls
        }
    }
}
