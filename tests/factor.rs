//! Factor analysis against outside references and on synthetic data of known rank.
//!
//! Reference values: numpy.linalg.svd / numpy.linalg.matrix_rank, stored in
//! tests/fixtures/factor/reference.json by tests/fixtures/factor/gen.py (numpy version in the file).
//! Synthetic data: Beer–Lambert mixtures of Gaussian bands with white noise of known σ, fixed seeds.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::data::{Sample, SampleRole, SpectraSet};
use isosbestic::factor::{
    FactorError, FactorParams, analyse, decompose, estimate_rank, evolving_factors, temperature_order,
};
use isosbestic::testing::{gaussian_band, rng};
use ndarray::{Array1, Array2, Axis};
use ndarray_linalg::SVD;
use proptest::prelude::*;
use rand::Rng;
use rand_distr::Normal;
use serde_json::Value;

fn fixture() -> Value {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/factor/reference.json"
    ))
    .expect("fixture present");
    serde_json::from_str(&text).expect("fixture is JSON")
}

fn matrix(v: &Value) -> Array2<f64> {
    let rows: Vec<Vec<f64>> = v
        .as_array()
        .expect("rows")
        .iter()
        .map(|r| {
            r.as_array()
                .expect("row")
                .iter()
                .map(|x| x.as_f64().expect("number"))
                .collect()
        })
        .collect();
    let (n, m) = (rows.len(), rows[0].len());
    Array2::from_shape_vec((n, m), rows.into_iter().flatten().collect()).expect("rectangular")
}

fn vector(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

#[test]
fn singular_values_match_numpy_on_the_fixture_matrices() {
    let fx = fixture();
    let cases = fx["cases"].as_array().expect("cases");
    assert!(cases.len() >= 8);
    for case in cases {
        let name = case["name"].as_str().expect("name");
        let d = matrix(&case["d"]);
        let expected = vector(&case["singular_values"]);
        let dec = decompose(d.view()).expect("decomposes");
        assert_eq!(dec.singular_values().len(), expected.len(), "{name}");
        let s1 = expected[0];
        for (got, want) in dec.singular_values().iter().zip(&expected) {
            // numpy.linalg.svd, fixture made by tests/fixtures/factor/gen.py; values at rounding
            // level differ by O(ε·s₁) between LAPACK builds, hence the tolerance scaled by s₁
            assert_abs_diff_eq!(*got, *want, epsilon = 1e-12 * s1);
        }
    }
}

#[test]
fn numerical_rank_matches_numpy_matrix_rank() {
    for case in fixture()["cases"].as_array().expect("cases") {
        let dec = decompose(matrix(&case["d"]).view()).expect("decomposes");
        // numpy.linalg.matrix_rank with its default tolerance, fixture made by gen.py
        assert_eq!(
            dec.numerical_rank() as u64,
            case["matrix_rank"].as_u64().expect("rank"),
            "{}",
            case["name"]
        );
    }
}

#[test]
fn the_factors_reconstruct_d_to_1e_12() {
    for case in fixture()["cases"].as_array().expect("cases") {
        let d = matrix(&case["d"]);
        let dec = decompose(d.view()).expect("decomposes");
        // exact identity D = U·diag(s)·Vᵀ (closed form)
        assert_abs_diff_eq!(dec.reconstruct(usize::MAX), d, epsilon = 1e-12);
        // orthonormal columns of U and rows of Vᵀ (definition of the SVD)
        let p = dec.singular_values().len();
        assert_abs_diff_eq!(dec.u().t().dot(dec.u()), Array2::eye(p), epsilon = 1e-12);
        assert_abs_diff_eq!(dec.vt().dot(&dec.vt().t()), Array2::eye(p), epsilon = 1e-12);
    }
}

/// A synthetic data set of known rank: `n_species` Gaussian bands with random positive
/// concentrations, white noise σ. Returns (noisy D, noise-free D, wavelengths).
fn synthetic(
    seed: u64,
    n_species: usize,
    n_samples: usize,
    n_wl: usize,
    sigma: f64,
) -> (Array2<f64>, Array2<f64>, Vec<f64>) {
    let mut r = rng(seed);
    let wl: Vec<f64> = (0..n_wl)
        .map(|j| 350.0 + 400.0 * j as f64 / (n_wl - 1) as f64)
        .collect();
    let mut s = Array2::zeros((n_species, n_wl));
    for k in 0..n_species {
        let centre = 400.0 + 300.0 * (k as f64 + 0.5) / n_species as f64 + r.random_range(-10.0..10.0);
        let band = gaussian_band(&wl, centre, r.random_range(25.0..40.0), r.random_range(0.5..1.0));
        s.row_mut(k).assign(&Array1::from(band));
    }
    let c = Array2::from_shape_fn((n_samples, n_species), |_| r.random_range(0.1..1.0));
    let clean = c.dot(&s);
    let normal = Normal::new(0.0, sigma).expect("valid σ");
    let noisy = &clean + &Array2::from_shape_fn(clean.raw_dim(), |_| r.sample(normal));
    (noisy, clean, wl)
}

/// (species, samples, wavelengths, σ in AU) spanning the ranges of the design.
const DESIGNS: [(usize, usize, usize, f64); 6] = [
    (1, 20, 100, 1e-3),
    (2, 30, 200, 5e-4),
    (3, 40, 300, 1e-4),
    (3, 25, 150, 1e-3),
    (4, 60, 400, 1e-3),
    (5, 50, 250, 3e-4),
];

#[test]
fn every_criterion_recovers_the_true_rank_at_high_signal_to_noise() {
    for &(species, n, m, sigma) in &DESIGNS {
        for seed in 0..5u64 {
            let (d, clean, _) = synthetic(1000 * species as u64 + seed, species, n, m, sigma);
            // precondition: S/N > 10, the regime where Meloun et al., Anal. Chim. Acta 423 (2000) 51
            // find rank indices reliable; S/N here = smallest signal singular value over the noise edge
            let s_clean = decompose(clean.view()).expect("clean").singular_values()[species - 1];
            let edge = sigma * ((n as f64).sqrt() + (m as f64).sqrt());
            assert!(
                s_clean / edge > 10.0,
                "design too noisy: {species} {n}×{m} σ={sigma}"
            );

            let dec = decompose(d.view()).expect("decomposes");
            let est = estimate_rank(&dec, 8, 0.05, Some(sigma)).expect("estimates");
            let what = format!("{species} species, {n}×{m}, σ = {sigma}, seed {seed}: {est:?}");
            // true rank = number of simulated species (ground truth of the simulation)
            assert_eq!(est.by_indicator, species, "indicator: {what}");
            assert_eq!(est.by_f_test, species, "F-test: {what}");
            assert_eq!(est.by_noise, Some(species), "noise edge: {what}");
            assert_eq!(est.chosen, species, "chosen: {what}");
            let without_sigma = estimate_rank(&dec, 8, 0.05, None).expect("estimates");
            assert_eq!(without_sigma.chosen, species, "chosen without σ: {what}");
        }
    }
}

#[test]
fn the_f_test_keeps_every_factor_when_samples_are_barely_more_than_species() {
    // r ≈ k: testing from k = 1 upwards would pool the real factors 2…k into the noise
    for &(species, n, m, sigma) in &[
        (2usize, 5usize, 100usize, 1e-3),
        (3, 6, 300, 1e-3),
        (4, 7, 200, 5e-4),
    ] {
        for seed in 0..10u64 {
            let (d, _, _) = synthetic(300 + seed, species, n, m, sigma);
            let est = estimate_rank(&decompose(d.view()).expect("svd"), 8, 0.05, None).expect("rank");
            // true rank = number of simulated species (ground truth of the simulation)
            assert_eq!(
                est.by_f_test, species,
                "{species} species, {n}×{m}, seed {seed}: {est:?}"
            );
        }
    }
}

#[test]
fn the_noise_estimate_at_the_true_rank_is_within_20_percent_of_sigma() {
    for &(species, n, m, sigma) in &DESIGNS {
        for seed in 0..5u64 {
            let (d, _, _) = synthetic(7000 + 100 * species as u64 + seed, species, n, m, sigma);
            let dec = decompose(d.view()).expect("decomposes");
            let est = dec.noise_estimate(species).expect("residual left");
            // σ is the simulated noise level (ground truth); ±20 % is the design's tolerance
            assert_relative_eq!(est, sigma, max_relative = 0.2);
            // Malinowski's RE is smaller by √((r − k)/r) by construction
            let (big, small) = (n.max(m) as f64, n.min(m) as f64);
            let re = dec.real_error(species).expect("residual left");
            let ratio =
                ((big - species as f64) * (small - species as f64) / (big * (small - species as f64))).sqrt();
            assert_relative_eq!(re, est * ratio, max_relative = 1e-12);
        }
    }
}

/// Species A throughout; species B present only in samples `first..=last` (a hump), so forward
/// EFA must show a second factor from `first` on and backward EFA from `last` back.
fn hump(seed: u64, n: usize, m: usize, first: usize, last: usize, sigma: f64) -> Array2<f64> {
    let wl: Vec<f64> = (0..m).map(|j| 400.0 + j as f64).collect();
    let a = Array1::from(gaussian_band(&wl, 470.0, 30.0, 0.8));
    let b = Array1::from(gaussian_band(&wl, 540.0, 25.0, 0.6));
    let mut r = rng(seed);
    let normal = Normal::new(0.0, sigma).expect("valid σ");
    let mut d = Array2::zeros((n, m));
    for i in 0..n {
        let ca = 1.0 - 0.3 * i as f64 / n as f64;
        let cb = if (first..=last).contains(&i) {
            let mid = 0.5 * (first + last) as f64;
            0.3 + 0.7 * (1.0 - ((i as f64 - mid) / (mid - first as f64 + 1.0)).powi(2))
        } else {
            0.0
        };
        let row = &a * ca + &b * cb;
        d.row_mut(i).assign(&row.mapv(|x| x + r.sample(normal)));
    }
    d
}

#[test]
fn evolving_factors_show_the_second_species_where_it_appears_and_disappears() {
    let (n, m, first, last, sigma) = (40usize, 200usize, 15usize, 27usize, 1e-3);
    for seed in 0..4u64 {
        let d = hump(500 + seed, n, m, first, last, sigma);
        let order: Vec<usize> = (0..n).collect();
        let efa = evolving_factors(d.view(), &order, 3).expect("efa");
        let sigma_hat = decompose(d.view())
            .expect("svd")
            .noise_estimate(2)
            .expect("residual");
        // "above the noise": a window's singular value exceeds 1.5× the noise edge σ̂·(√rows + √m)
        // of that window (edge: largest singular value of white noise, Geman, Ann. Probab. 8 (1980)
        // 252 — from memory; the 1.5 margin is ours)
        let above = |log_s: f64, rows: usize| {
            10f64.powf(log_s) > 1.5 * sigma_hat * ((rows as f64).sqrt() + (m as f64).sqrt())
        };
        let rise = (0..n)
            .find(|&i| above(efa.forward[[i, 1]], i + 1))
            .expect("factor 2 appears");
        // backward row i is the window i..n; scanning from the end, factor 2 appears at `last`
        let fall = (0..n)
            .rev()
            .find(|&i| above(efa.backward[[i, 1]], n - i))
            .expect("factor 2 appears");
        // the simulated onset and end of species B (ground truth), ±2 samples per the design
        assert!(
            rise.abs_diff(first) <= 2,
            "seed {seed}: forward rise at {rise}, expected {first}"
        );
        assert!(
            fall.abs_diff(last) <= 2,
            "seed {seed}: backward rise at {fall}, expected {last}"
        );
        // and the third factor never leaves the noise (only two species)
        for i in 0..n {
            assert!(
                !above(efa.forward[[i, 2]], i + 1),
                "seed {seed}: 3rd factor at window {i}"
            );
        }
    }
}

/// log₁₀ singular values of each window by a direct SVD of the window of D (slow reference).
fn direct_efa(d: &Array2<f64>, order: &[usize], n_factors: usize, floor: f64) -> (Array2<f64>, Array2<f64>) {
    let n = order.len();
    let ordered = d.select(Axis(0), order);
    let mut fwd = Array2::from_elem((n, n_factors), floor.log10());
    let mut bwd = fwd.clone();
    for i in 0..n {
        for (out, window) in [
            (&mut fwd, ordered.slice(ndarray::s![..=i, ..])),
            (&mut bwd, ordered.slice(ndarray::s![i.., ..])),
        ] {
            let (_, s, _) = window.to_owned().svd(false, false).expect("svd");
            for (slot, v) in out.row_mut(i).iter_mut().zip(s.iter()) {
                *slot = v.max(floor).log10();
            }
        }
    }
    (fwd, bwd)
}

#[test]
fn efa_by_row_space_reduction_equals_direct_window_svds() {
    let (d, _, _) = synthetic(42, 3, 25, 120, 5e-4);
    let mut order: Vec<usize> = (0..25).collect();
    order.reverse();
    order.swap(3, 17);
    let efa = evolving_factors(d.view(), &order, 6).expect("efa");
    let floor = decompose(d.view()).expect("svd").zero_level();
    let (fwd, bwd) = direct_efa(&d, &order, 6, floor);
    // exact identity sv(D[rows]) = sv(U[rows]·diag(s)) (Vᵀ has orthonormal rows); reference:
    // LAPACK dgesvd on each window; 1e-10 in log₁₀ is a relative 2.3e-10 in s
    assert_abs_diff_eq!(efa.forward, fwd, epsilon = 1e-10);
    assert_abs_diff_eq!(efa.backward, bwd, epsilon = 1e-10);
    assert_eq!(efa.order, order);
}

fn set_with_blanks_and_mask() -> SpectraSet {
    let (d, _, wl) = synthetic(9, 2, 12, 80, 2e-4);
    // insert a blank row at position 0 and shuffle temperatures
    let mut rows = vec![Array1::zeros(80)];
    rows.extend(d.axis_iter(Axis(0)).map(|r| r.to_owned()));
    let views: Vec<_> = rows.iter().map(|r| r.view()).collect();
    let full = ndarray::stack(Axis(0), &views).expect("stack");
    let temps = [
        298.15, 330.0, 300.0, 310.0, 305.0, 300.0, 320.0, 315.0, 325.0, 290.0, 295.0, 335.0, 340.0,
    ];
    let mut samples: Vec<Sample> = temps
        .iter()
        .enumerate()
        .map(|(i, &t)| Sample::new(format!("x{i}"), "A", t, 1.0))
        .collect();
    samples[0] = samples[0].clone().with_role(SampleRole::Blank);
    let mut set = SpectraSet::new(Array1::from(wl), full, samples, vec![]).expect("valid set");
    let mut mask = Array2::from_elem((13, 80), false);
    mask[[5, 40]] = true;
    mask[[7, 41]] = true;
    set.set_mask(mask).expect("mask");
    set
}

#[test]
fn analyse_uses_measurements_and_unmasked_wavelengths_and_orders_efa_by_temperature() {
    let set = set_with_blanks_and_mask();
    let summary = analyse(&set, &FactorParams::default().max_rank(5)).expect("analyses");
    assert_eq!(summary.n_samples, 12);
    assert_eq!(summary.n_wavelengths, 78);
    // two simulated species (ground truth)
    assert_eq!(summary.rank.chosen, 2);
    let efa = summary.efa.as_ref().expect("efa on by default");
    // set rows of the measurements, by increasing temperature (ties in input order: 2 before 5)
    assert_eq!(efa.order, vec![9, 10, 2, 5, 4, 3, 7, 6, 8, 1, 11, 12]);
    assert_eq!(efa.forward.dim(), (12, 5));
    assert!(!efa.order.contains(&0), "the blank is left out");
    // the order is what temperature_order gives on the measurement temperatures
    let temps: Vec<f64> = (1..13).map(|i| set.samples()[i].temperature_k).collect();
    let local: Vec<usize> = temperature_order(&temps).iter().map(|i| i + 1).collect();
    assert_eq!(efa.order, local);

    let text = summary.to_string();
    assert!(text.contains("12 samples × 78 wavelengths"), "{text}");
    assert!(text.contains("rank 2"), "{text}");

    let json = serde_json::to_string(&summary).expect("serialises");
    let back: isosbestic::factor::FactorSummary = serde_json::from_str(&json).expect("deserialises");
    // serde_json parses floats to within 1 ulp unless its `float_roundtrip` feature is on
    assert_eq!(
        (back.rank.chosen, back.rank.by_f_test, back.rank.by_indicator),
        (2, summary.rank.by_f_test, summary.rank.by_indicator)
    );
    assert_eq!(back.rank.reasoning, summary.rank.reasoning);
    for (a, b) in back.rank.ind.iter().zip(&summary.rank.ind) {
        assert_relative_eq!(*a, *b, max_relative = 1e-15);
    }
    let back_efa = back.efa.expect("efa survives");
    assert_eq!(back_efa.order, efa.order);
    assert_abs_diff_eq!(back_efa.forward, efa.forward, epsilon = 1e-14);
    assert_abs_diff_eq!(back_efa.backward, efa.backward, epsilon = 1e-14);
}

#[test]
fn analyse_without_efa_and_with_bad_params() {
    let set = set_with_blanks_and_mask();
    let s = analyse(&set, &FactorParams::default().evolving(false)).expect("analyses");
    assert!(s.efa.is_none());
    let e = analyse(&set, &FactorParams::default().significance(-0.1)).unwrap_err();
    assert!(
        matches!(
            e,
            FactorError::InvalidParameter {
                name: "significance",
                ..
            }
        ),
        "{e}"
    );
    assert!(e.to_string().contains("significance"));
}

#[test]
fn a_set_of_only_blanks_is_a_typed_error() {
    let samples = vec![
        Sample::new("b1", "A", 298.15, 1.0).with_role(SampleRole::Blank),
        Sample::new("b2", "A", 298.15, 1.0).with_role(SampleRole::Blank),
    ];
    let set = SpectraSet::new(
        ndarray::array![400.0, 500.0],
        Array2::zeros((2, 2)),
        samples,
        vec![],
    )
    .expect("set");
    assert_eq!(
        analyse(&set, &FactorParams::default()),
        Err(FactorError::NoMeasurementSamples)
    );
}

#[test]
fn a_set_masked_at_every_wavelength_is_a_typed_error() {
    let samples = vec![
        Sample::new("a", "A", 298.15, 1.0),
        Sample::new("b", "A", 298.15, 1.0),
    ];
    let mut set = SpectraSet::new(
        ndarray::array![400.0, 500.0],
        Array2::ones((2, 2)),
        samples,
        vec![],
    )
    .expect("set");
    set.set_mask(ndarray::array![[true, false], [false, true]])
        .expect("mask");
    assert_eq!(
        analyse(&set, &FactorParams::default()),
        Err(FactorError::NoUsableWavelengths)
    );
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn singular_values_are_non_negative_descending_and_row_permutation_invariant(
        (rows, cols, values, perm) in (1usize..8, 1usize..8).prop_flat_map(|(r, c)| (
            Just(r),
            Just(c),
            proptest::collection::vec(-10.0f64..10.0, r * c),
            Just((0..r).collect::<Vec<usize>>()).prop_shuffle(),
        ))
    ) {
        let d = Array2::from_shape_vec((rows, cols), values).expect("shape");
        let s = decompose(d.view()).expect("finite").singular_values().clone();
        prop_assert_eq!(s.len(), rows.min(cols));
        prop_assert!(s.iter().all(|&x| x >= 0.0));
        prop_assert!(s.windows(2).into_iter().all(|w| w[0] >= w[1]));
        let permuted = d.select(Axis(0), &perm);
        let sp = decompose(permuted.view()).expect("finite").singular_values().clone();
        let scale = s.first().copied().unwrap_or(0.0).max(1.0);
        for (a, b) in s.iter().zip(sp.iter()) {
            // PᵀP = I, so PD has the singular values of D (definition of the SVD)
            prop_assert!((a - b).abs() <= 1e-12 * scale, "{} vs {}", a, b);
        }
    }
}
