//! Preprocessing: invariants (property tests), every error variant, and a whole plan run on an
//! invented two-band data set with blanks, drifting baselines and one saturated band.

use approx::assert_abs_diff_eq;
use isosbestic::data::{ProcessingStep, Sample, SampleRole, SpectraSet};
use isosbestic::preprocess::{
    BaselineSpec, BlankMatching, GridSpec, Interpolation, PreprocessError, PreprocessParams,
    PreprocessSummary, baseline_linear, baseline_offset, mask_saturation, subtract_blanks, window,
};
use isosbestic::testing::gaussian_band;
use ndarray::{Array1, Array2};
use proptest::prelude::*;

/// Measurements "m0", "m1", … in one series, 2 nm apart from 400 nm.
fn set_from_rows(rows: &[Vec<f64>]) -> SpectraSet {
    let n = rows[0].len();
    let axis: Array1<f64> = (0..n).map(|j| 400.0 + 2.0 * j as f64).collect();
    let d = Array2::from_shape_fn((rows.len(), n), |(i, j)| rows[i][j]);
    let samples = (0..rows.len())
        .map(|i| Sample::new(format!("m{i}"), "s", 298.15 + i as f64, 1.0))
        .collect();
    SpectraSet::new(axis, d, samples, vec![]).unwrap()
}

fn blank(id: &str, series: &str, t: f64) -> Sample {
    Sample::new(id, series, t, 1.0).with_role(SampleRole::Blank)
}

/// Random spectra that are exactly zero on the first and last `edge` points (the non-absorbing
/// windows).
fn spectra_zero_at_edges(edge: usize) -> impl Strategy<Value = Vec<Vec<f64>>> {
    (1usize..4, (2 * edge + 1)..(2 * edge + 40)).prop_flat_map(move |(samples, n)| {
        proptest::collection::vec(proptest::collection::vec(-1.0f64..3.0, n), samples).prop_map(
            move |mut rows| {
                for r in &mut rows {
                    let len = r.len();
                    for v in r.iter_mut().take(edge) {
                        *v = 0.0;
                    }
                    for v in r.iter_mut().skip(len - edge) {
                        *v = 0.0;
                    }
                }
                rows
            },
        )
    })
}

proptest! {
    #[test]
    fn a_constant_offset_added_to_spectra_is_removed_exactly(
        rows in spectra_zero_at_edges(4),
        offsets in proptest::collection::vec(-1.0f64..1.0, 4),
    ) {
        let clean = set_from_rows(&rows);
        let shifted: Vec<Vec<f64>> = rows.iter().zip(&offsets)
            .map(|(r, c)| r.iter().map(|v| v + c).collect()).collect();
        let set = set_from_rows(&shifted);
        // window = the first 4 points (400–406 nm), where the spectra are zero
        let (out, report) = baseline_offset(&set, 400.0, 406.0).unwrap();
        for (b, c) in report.samples.iter().zip(&offsets) {
            prop_assert!((b.offset - c).abs() < 1e-12);
        }
        for (a, e) in out.absorbance().iter().zip(clean.absorbance()) {
            prop_assert!((a - e).abs() < 1e-12, "{a} vs {e}");
        }
    }

    #[test]
    fn a_linear_baseline_added_to_spectra_is_removed_exactly(
        rows in spectra_zero_at_edges(3),
        lines in proptest::collection::vec((-1.0f64..1.0, -0.01f64..0.01), 4),
    ) {
        let clean = set_from_rows(&rows);
        let n = rows[0].len();
        let axis = clean.wavelengths_nm().to_vec();
        let drifted: Vec<Vec<f64>> = rows.iter().zip(&lines)
            .map(|(r, (c, m))| r.iter().zip(&axis).map(|(v, l)| v + c + m * l).collect()).collect();
        let set = set_from_rows(&drifted);
        let last = axis[n - 1];
        let (out, report) = baseline_linear(&set, &[(400.0, 404.0), (last - 4.0, last)]).unwrap();
        for (b, (c, m)) in report.samples.iter().zip(&lines) {
            prop_assert!((b.slope_per_nm - m).abs() < 1e-12);
            prop_assert!((b.at(0.0) - c).abs() < 1e-10);
        }
        for (a, e) in out.absorbance().iter().zip(clean.absorbance()) {
            prop_assert!((a - e).abs() < 1e-12, "{a} vs {e}");
        }
    }

    #[test]
    fn windowing_twice_equals_windowing_once_with_the_intersection(
        n in 2usize..40,
        a in 390.0f64..490.0, b in 390.0f64..490.0, c in 390.0f64..490.0, d in 390.0f64..490.0,
        mask_bits in proptest::collection::vec(any::<bool>(), 80),
    ) {
        let rows: Vec<Vec<f64>> = (0..2).map(|i| (0..n).map(|j| (i * 100 + j) as f64).collect()).collect();
        let mut set = set_from_rows(&rows);
        set.set_mask(Array2::from_shape_fn((2, n), |(i, j)| mask_bits[i * n + j])).unwrap();
        let (w1, w2) = ((a.min(b), a.max(b)), (c.min(d), c.max(d)));
        let twice = window(&set, w1.0, w1.1).and_then(|s| window(&s, w2.0, w2.1));
        let once = window(&set, w1.0.max(w2.0), w1.1.min(w2.1));
        match (twice, once) {
            (Ok(t), Ok(o)) => {
                prop_assert_eq!(t.wavelengths_nm(), o.wavelengths_nm());
                prop_assert_eq!(t.absorbance(), o.absorbance());
                prop_assert_eq!(t.mask(), o.mask());
            }
            (Err(_), Err(_)) => {}
            (t, o) => prop_assert!(false, "twice {:?} vs once {:?}", t.map(|_| ()), o.map(|_| ())),
        }
    }

    #[test]
    fn the_saturation_mask_counts_exactly_the_entries_above_the_limit(
        rows in (1usize..5, 1usize..30).prop_flat_map(|(s, n)|
            proptest::collection::vec(proptest::collection::vec(0.0f64..4.0, n), s)),
        limit in 0.1f64..3.5,
    ) {
        let set = set_from_rows(&rows);
        let above = rows.iter().flatten().filter(|&&a| a > limit).count();
        let (out, report) = mask_saturation(&set, limit).unwrap();
        prop_assert_eq!(out.masked_count(), above);
        prop_assert_eq!(report.points(), above);
        for run in &report.masked {
            let i = out.sample_index(&run.sample).unwrap();
            let cols: Vec<usize> = (0..out.n_wavelengths())
                .filter(|&j| {
                    let l = out.wavelengths_nm()[j];
                    l >= run.first_nm && l <= run.last_nm
                })
                .collect();
            prop_assert_eq!(cols.len(), run.count);
            prop_assert!(cols.iter().all(|&j| out.mask()[[i, j]]));
        }
    }

    #[test]
    fn subtracting_a_blank_from_itself_gives_zero(
        spectrum in proptest::collection::vec(-0.5f64..3.0, 2..30),
        series in 1usize..4,
    ) {
        // In every series a measurement and a blank with the same spectrum and temperature.
        let n = spectrum.len();
        let axis: Array1<f64> = (0..n).map(|j| 400.0 + j as f64).collect();
        let mut samples = Vec::new();
        for k in 0..series {
            let t = 290.0 + 10.0 * k as f64;
            samples.push(Sample::new(format!("m{k}"), format!("s{k}"), t, 1.0));
            samples.push(blank(&format!("b{k}"), &format!("s{k}"), t));
        }
        let d = Array2::from_shape_fn((2 * series, n), |(_, j)| spectrum[j]);
        let set = SpectraSet::new(axis, d, samples, vec![]).unwrap();
        for matching in [BlankMatching::PerSeries, BlankMatching::NearestTemperature, BlankMatching::Global] {
            let (out, report) = subtract_blanks(&set, matching).unwrap();
            prop_assert_eq!(out.n_samples(), series);
            prop_assert_eq!(report.removed.len(), series);
            prop_assert!(out.absorbance().iter().all(|v| v.abs() < 1e-12));
        }
    }
}

// ---- every error variant, with its message ----

fn small() -> SpectraSet {
    set_from_rows(&[vec![0.1, 0.2, 0.3, 0.4]]) // 400, 402, 404, 406 nm
}

#[test]
fn a_reversed_or_non_finite_window_is_invalid() {
    let e = window(&small(), 406.0, 400.0).unwrap_err();
    assert!(matches!(e, PreprocessError::InvalidWindow { .. }));
    assert_eq!(
        e.to_string(),
        "window 406–400 nm is not valid: both bounds must be finite and min ≤ max"
    );
    assert!(matches!(
        baseline_offset(&small(), f64::NAN, 402.0),
        Err(PreprocessError::InvalidWindow { .. })
    ));
}

#[test]
fn a_window_keeping_one_wavelength_names_the_window_and_the_data_range() {
    let e = window(&small(), 401.0, 403.0).unwrap_err();
    assert!(matches!(e, PreprocessError::WindowTooNarrow { kept: 1, .. }));
    assert_eq!(
        e.to_string(),
        "window 401–403 nm keeps 1 wavelength(s) of the data range 400–406 nm; at least 2 are needed"
    );
}

#[test]
fn blank_subtraction_without_blanks_or_without_measurements_is_an_error() {
    let e = subtract_blanks(&small(), BlankMatching::Global).unwrap_err();
    assert!(matches!(e, PreprocessError::NoBlanks { samples: 1 }));
    assert!(e.to_string().contains("none of the 1 samples is a blank"), "{e}");

    let only_blanks = SpectraSet::new(
        Array1::from(vec![400.0, 410.0]),
        Array2::zeros((2, 2)),
        vec![blank("b1", "s", 300.0), blank("b2", "s", 310.0)],
        vec![],
    )
    .unwrap();
    let e = subtract_blanks(&only_blanks, BlankMatching::Global).unwrap_err();
    assert!(matches!(e, PreprocessError::NoMeasurements { blanks: 2 }));
    assert!(e.to_string().contains("all 2 samples are blanks"), "{e}");
}

#[test]
fn a_series_without_blank_is_named() {
    let set = SpectraSet::new(
        Array1::from(vec![400.0, 410.0]),
        Array2::zeros((3, 2)),
        vec![
            Sample::new("a1", "acid", 300.0, 1.0),
            blank("ba", "acid", 300.0),
            Sample::new("n1", "neutral", 300.0, 1.0),
        ],
        vec![],
    )
    .unwrap();
    let e = subtract_blanks(&set, BlankMatching::PerSeries).unwrap_err();
    assert!(
        matches!(&e, PreprocessError::NoBlankInSeries { series, sample } if series == "neutral" && sample == "n1")
    );
    assert!(
        e.to_string()
            .starts_with("series 'neutral' (sample 'n1') has no blank"),
        "{e}"
    );
    // the other rules do not need a blank in every series
    assert!(subtract_blanks(&set, BlankMatching::NearestTemperature).is_ok());
}

#[test]
fn baseline_windows_that_miss_the_data_name_the_window_and_range() {
    let e = baseline_offset(&small(), 500.0, 510.0).unwrap_err();
    assert!(matches!(e, PreprocessError::EmptyBaselineWindow { .. }));
    assert_eq!(
        e.to_string(),
        "baseline window 500–510 nm holds no wavelength of the data range 400–406 nm"
    );
    let e = baseline_linear(&small(), &[(400.0, 402.0), (401.0, 401.5)]).unwrap_err();
    assert!(e.to_string().starts_with("baseline window 401–401.5 nm"), "{e}");
    let e = baseline_linear(&small(), &[]).unwrap_err();
    assert!(matches!(e, PreprocessError::NoBaselineWindows));
    assert!(e.to_string().contains("at least one non-absorbing window"), "{e}");
}

#[test]
fn a_line_through_one_wavelength_is_refused_naming_sample_and_windows() {
    let e = baseline_linear(&small(), &[(399.0, 401.0), (399.5, 400.5)]).unwrap_err();
    assert!(matches!(
        &e,
        PreprocessError::TooFewBaselinePoints { sample, found: 1, needed: 2, .. } if sample == "m0"
    ));
    assert_eq!(
        e.to_string(),
        "sample 'm0': the baseline window(s) 399–401, 399.5–400.5 nm hold unmasked points at 1 distinct \
         wavelength(s); at least 2 needed"
    );
}

#[test]
fn an_offset_window_whose_points_are_all_masked_is_refused() {
    let mut set = small();
    set.set_mask(ndarray::array![[true, true, false, false]]).unwrap();
    let e = baseline_offset(&set, 400.0, 402.0).unwrap_err();
    assert!(matches!(
        e,
        PreprocessError::TooFewBaselinePoints {
            found: 0,
            needed: 1,
            ..
        }
    ));
}

#[test]
fn a_saturation_limit_must_be_a_positive_finite_absorbance() {
    for limit in [0.0, -2.0, f64::NAN, f64::INFINITY] {
        let e = mask_saturation(&small(), limit).unwrap_err();
        assert!(matches!(e, PreprocessError::InvalidSaturationLimit { .. }));
        assert!(
            e.to_string().starts_with(&format!("saturation limit {limit} ")),
            "{e}"
        );
    }
}

#[test]
fn a_plan_grid_outside_the_windowed_range_fails_at_the_grid_point() {
    let plan = PreprocessParams::default()
        .window([400.0, 404.0])
        .grid(GridSpec::Even {
            first_nm: 400.0,
            last_nm: 406.0,
            step_nm: 1.0,
            method: Interpolation::Linear,
        })
        .check()
        .unwrap();
    let e = plan.apply(&small()).unwrap_err();
    assert!(matches!(e, PreprocessError::OutsideRange { .. }));
    assert!(
        e.to_string()
            .starts_with("405 nm lies outside the measured range 400–404 nm"),
        "{e}"
    );
}

// ---- a whole plan on invented data ----

/// Invented data set: a dye whose two forms (bands at 480 and 600 nm, width 15 nm) interconvert
/// with temperature; two series (pH 4 and pH 9 buffers), each with its own blank (a buffer
/// absorbance rising towards the UV), four temperatures; each measurement also carries its own
/// straight-line drift. One sample's band exceeds A = 2. Measured every 0.5 nm, 350–750 nm.
struct Invented {
    raw: SpectraSet,
    /// Blank-, drift-free spectra on the measured axis, measurements only, in row order.
    clean: Array2<f64>,
}

fn invented() -> Invented {
    let axis: Vec<f64> = (0..=800).map(|k| 350.0 + 0.5 * f64::from(k)).collect();
    let buffer = |scale: f64| -> Vec<f64> { axis.iter().map(|l| scale * (350.0 / l).powi(4)).collect() };
    let mut rows = Vec::new();
    let mut clean = Vec::new();
    let mut samples = Vec::new();
    for (s, (series, scale)) in [("ph4", 0.05), ("ph9", 0.08)].into_iter().enumerate() {
        samples.push(blank(&format!("blank-{series}"), series, 298.15));
        rows.push(buffer(scale));
        for k in 0..4 {
            let t = 288.15 + 15.0 * f64::from(k);
            let fraction = 0.2 + 0.2 * f64::from(k);
            let height = if s == 1 && k == 3 { 2.6 } else { 1.2 };
            let a = gaussian_band(&axis, 480.0, 15.0, height * (1.0 - fraction));
            let b = gaussian_band(&axis, 600.0, 15.0, height * fraction);
            let pure: Vec<f64> = a.iter().zip(&b).map(|(x, y)| x + y).collect();
            let (c0, m) = (0.01 * f64::from(k + 1), -2e-5 * f64::from(k + s as u32));
            let measured: Vec<f64> = pure
                .iter()
                .zip(buffer(scale))
                .zip(&axis)
                .map(|((p, bl), l)| p + bl + c0 + m * (l - 350.0))
                .collect();
            samples.push(Sample::new(format!("{series}-{k}"), series, t, 1.0));
            rows.push(measured);
            clean.push(pure);
        }
    }
    let n = axis.len();
    let d = Array2::from_shape_fn((rows.len(), n), |(i, j)| rows[i][j]);
    let clean = Array2::from_shape_fn((clean.len(), n), |(i, j)| clean[i][j]);
    Invented {
        raw: SpectraSet::new(Array1::from(axis), d, samples, vec![]).unwrap(),
        clean,
    }
}

fn full_plan() -> PreprocessParams {
    PreprocessParams::default()
        .window([360.0, 740.0])
        .grid(GridSpec::Even {
            first_nm: 360.0,
            last_nm: 740.0,
            step_nm: 2.0,
            method: Interpolation::MonotoneCubic,
        })
        .blanks(BlankMatching::PerSeries)
        .baseline(BaselineSpec::Linear {
            windows: vec![[360.0, 380.0], [720.0, 740.0]],
        })
}

#[test]
fn a_full_plan_recovers_the_blank_and_drift_free_spectra() {
    let data = invented();
    let (out, summary) = full_plan().check().unwrap().apply(&data.raw).unwrap();

    // The grid points fall on measured points, so interpolation reproduces them; the bands are
    // below 1e-9 in the baseline windows (|λ − centre| ≥ 100 nm = 6.7 widths), hence 1e-8.
    assert_eq!(out.n_wavelengths(), 191);
    assert_eq!(out.n_samples(), 8);
    let raw_axis = data.raw.wavelengths_nm();
    for (j, l) in out.wavelengths_nm().iter().enumerate() {
        let k = raw_axis.iter().position(|r| (r - l).abs() < 1e-9).unwrap();
        for i in 0..8 {
            assert_abs_diff_eq!(out.absorbance()[[i, j]], data.clean[[i, k]], epsilon = 1e-8);
        }
    }

    // Saturation is judged on the corrected absorbances: only "ph9-3" exceeds 2.
    let sat = summary.saturation.as_ref().unwrap();
    assert!(sat.masked.iter().all(|r| r.sample == "ph9-3"));
    let expected = out.absorbance().iter().filter(|&&a| a > 2.0).count();
    assert!(expected > 0);
    assert_eq!(out.masked_count(), expected);

    let steps: Vec<&str> = out
        .history()
        .iter()
        .map(|s| match s {
            ProcessingStep::Window { .. } => "window",
            ProcessingStep::Resampled { .. } => "resampled",
            ProcessingStep::BlankSubtracted { .. } => "blanks",
            ProcessingStep::BaselineLinear { .. } => "baseline",
            ProcessingStep::SaturationMasked { .. } => "saturation",
            _ => "other",
        })
        .collect();
    assert_eq!(steps, ["window", "resampled", "blanks", "baseline", "saturation"]);

    let w = summary.window.as_ref().unwrap();
    assert_eq!((w.points_before, w.points_after), (801, 761));
    assert_eq!(
        summary.blanks.as_ref().unwrap().removed,
        ["blank-ph4", "blank-ph9"]
    );
    assert_eq!(summary.baseline.as_ref().unwrap().samples.len(), 8);
}

#[test]
fn blanks_are_subtracted_before_the_saturation_test() {
    // raw 2.1 at 402 nm, blank 0.2: the corrected 1.9 is below the limit and stays unmasked.
    let set = SpectraSet::new(
        Array1::from(vec![400.0, 402.0, 404.0]),
        ndarray::array![[0.5, 2.1, 2.5], [0.2, 0.2, 0.2]],
        vec![Sample::new("m", "s", 300.0, 1.0), blank("b", "s", 300.0)],
        vec![],
    )
    .unwrap();
    let plan = PreprocessParams::default()
        .blanks(BlankMatching::Global)
        .check()
        .unwrap();
    let (out, summary) = plan.apply(&set).unwrap();
    assert_eq!(out.mask(), &ndarray::array![[false, false, true]]);
    assert_eq!(summary.saturation.unwrap().points(), 1);
}

#[test]
fn a_plan_with_every_step_off_only_clones_the_set() {
    let data = invented();
    let (out, summary) = PreprocessParams::default()
        .saturation_limit(None)
        .check()
        .unwrap()
        .apply(&data.raw)
        .unwrap();
    assert_eq!(out, data.raw);
    assert_eq!(summary, PreprocessSummary::default());
}

#[test]
fn the_summary_survives_a_json_round_trip() {
    let data = invented();
    let (_, summary) = full_plan().check().unwrap().apply(&data.raw).unwrap();
    let json = serde_json::to_string(&summary).unwrap();
    let back: PreprocessSummary = serde_json::from_str(&json).unwrap();
    // serde_json (without its `float_roundtrip` feature) may parse the last digit of a float
    // one unit in the last place off, so numbers are compared to 1e-14 relative.
    assert_json_close(
        &serde_json::to_value(&back).unwrap(),
        &serde_json::to_value(&summary).unwrap(),
    );
}

fn assert_json_close(a: &serde_json::Value, b: &serde_json::Value) {
    use serde_json::Value;
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => {
            let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
            approx::assert_relative_eq!(x, y, max_relative = 1e-14);
        }
        (Value::Array(x), Value::Array(y)) => {
            assert_eq!(x.len(), y.len());
            x.iter().zip(y).for_each(|(p, q)| assert_json_close(p, q));
        }
        (Value::Object(x), Value::Object(y)) => {
            assert_eq!(x.keys().collect::<Vec<_>>(), y.keys().collect::<Vec<_>>());
            x.values()
                .zip(y.values())
                .for_each(|(p, q)| assert_json_close(p, q));
        }
        _ => assert_eq!(a, b),
    }
}
