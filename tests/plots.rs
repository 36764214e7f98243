//! Every plot is a well-formed SVG document carrying its axis labels and one drawn element per
//! series; bad inputs give a typed error, never a panic.

mod support;

use isosbestic::factor::{FactorParams, analyse};
use isosbestic::report::plots::{
    LnKBand, LnKPoints, MAX_HEAT_COLUMNS, Palette, PlotError, ProfileSeries, concentration_profiles,
    concentration_profiles_of, evolving_factors, evolving_factors_of, measured_spectra, measured_spectra_of,
    pure_spectra, pure_spectra_of, residual_map, singular_values, singular_values_of, vant_hoff,
    vant_hoff_of, write_svg,
};
use isosbestic::resolve::hard::{HardFitParams, fit};
use isosbestic::simulate::simulate;
use isosbestic::thermo::{ConstantScale, KData, VanThoffParams, fit_vant_hoff};
use ndarray::Array2;

/// A small XML sanity check: tags balance and nest, attribute quotes pair up, every `&` starts
/// a character reference, and the document is one `<svg>` element.
fn assert_well_formed_svg(svg: &str) {
    assert!(
        svg.starts_with("<svg"),
        "does not start with <svg: {}",
        &svg[..svg.len().min(60)]
    );
    assert!(svg.trim_end().ends_with("</svg>"), "does not end with </svg>");
    let mut stack: Vec<String> = Vec::new();
    let mut rest = svg;
    let mut roots = 0;
    while let Some(open) = rest.find('<') {
        check_text(&rest[..open]);
        let after = &rest[open..];
        let close = after.find('>').expect("unterminated tag");
        let tag = &after[1..close];
        assert_eq!(tag.matches('"').count() % 2, 0, "unpaired quote in <{tag}>");
        if let Some(name) = tag.strip_prefix('/') {
            let top = stack
                .pop()
                .unwrap_or_else(|| panic!("closing </{name}> without opening"));
            assert_eq!(top, name.trim(), "</{name}> closes <{top}>");
        } else if !tag.starts_with('?') && !tag.starts_with('!') {
            let name: String = tag
                .chars()
                .take_while(|c| !c.is_whitespace() && *c != '/')
                .collect();
            assert!(!name.is_empty(), "empty tag name");
            if stack.is_empty() {
                roots += 1;
            }
            if !tag.ends_with('/') {
                stack.push(name);
            }
        }
        rest = &after[close + 1..];
    }
    check_text(rest);
    assert!(stack.is_empty(), "unclosed tags: {stack:?}");
    assert_eq!(roots, 1, "more than one root element");
}

fn check_text(text: &str) {
    assert!(!text.contains('>'), "raw > in text: {text}");
    for (i, _) in text.match_indices('&') {
        let entity: String = text[i + 1..].chars().take_while(|&c| c != ';').collect();
        let ok = ["amp", "lt", "gt", "quot", "apos", "#39"].contains(&entity.as_str())
            || entity.starts_with("#x")
            || entity.starts_with('#');
        assert!(ok, "bad character reference &{entity}; in {text}");
    }
}

fn count(svg: &str, tag: &str) -> usize {
    svg.matches(&format!("<{tag} ")).count() + svg.matches(&format!("<{tag}>")).count()
}

fn wavelengths(n: usize) -> Vec<f64> {
    (0..n).map(|i| 400.0 + 5.0 * i as f64).collect()
}

fn bands(n_samples: usize, wl: &[f64]) -> Array2<f64> {
    Array2::from_shape_fn((n_samples, wl.len()), |(i, j)| {
        let x = (wl[j] - 480.0 - 4.0 * i as f64) / 40.0;
        0.2 + 0.6 * (-x * x).exp()
    })
}

#[test]
fn the_xml_checker_rejects_broken_documents() {
    for bad in [
        "<svg><g></svg>",
        "<svg><g></g>",
        "<svg a=\"1></svg>",
        "<svg>a & b</svg>",
        "<svg></svg><svg></svg>",
        "<div></div>",
    ] {
        assert!(
            std::panic::catch_unwind(|| assert_well_formed_svg(bad)).is_err(),
            "{bad}"
        );
    }
    assert_well_formed_svg("<svg a=\"1\"><g><text>x &amp; y</text><line/></g></svg>");
}

#[test]
fn measured_spectra_draw_one_curve_per_sample_with_labels_and_a_temperature_bar() {
    let wl = wavelengths(40);
    let p = Palette::default();
    let one = measured_spectra("Measured", &wl, bands(1, &wl).view(), &[20.0], &p).unwrap();
    let t = [5.0, 20.0, 35.0, 50.0, 65.0, 90.0];
    let six = measured_spectra("Measured", &wl, bands(6, &wl).view(), &t, &p).unwrap();
    for svg in [&one, &six] {
        assert_well_formed_svg(svg);
        assert!(svg.contains("wavelength / nm") && svg.contains("absorbance"));
        assert!(svg.contains("temperature / °C"));
    }
    assert_eq!(count(&six, "polyline") - count(&one, "polyline"), 5);
    // the colour bar ends give the temperature range
    assert!(
        six.contains(">\n5.0\n<") || six.contains(">5.0<"),
        "lowest temperature shown"
    );
    assert!(six.contains("90.0"));
    // coldest and hottest curves use the two ends of the scale
    let hex = |c: isosbestic::report::plots::Rgb| format!("#{:02X}{:02X}{:02X}", c.0, c.1, c.2);
    let cold = hex(p.temperature_colour(0.0));
    let hot = hex(p.temperature_colour(1.0));
    assert!(
        six.contains(&cold) || six.contains(&cold.to_lowercase()),
        "{cold}"
    );
    assert!(six.contains(&hot) || six.contains(&hot.to_lowercase()), "{hot}");
}

#[test]
fn pure_spectra_draw_one_band_and_one_curve_per_species() {
    let wl = wavelengths(30);
    let s = bands(3, &wl).reversed_axes();
    let se = s.mapv(|v| 0.02 * v);
    let names = ["M", "MX", "MX2"];
    let p = Palette::default();
    let with = pure_spectra("Pure spectra", &wl, s.view(), Some(se.view()), &names, &p).unwrap();
    let without = pure_spectra("Pure spectra", &wl, s.view(), None, &names, &p).unwrap();
    assert_well_formed_svg(&with);
    assert_well_formed_svg(&without);
    assert!(with.contains("molar absorptivity ε / (L mol⁻¹ cm⁻¹)"));
    assert_eq!(count(&with, "polygon"), 3);
    assert_eq!(count(&without, "polygon"), 0);
    for n in names {
        assert!(
            with.contains(&format!(">\n{n}\n<")) || with.contains(&format!(">{n}<")),
            "legend {n}"
        );
    }
    assert!(with.contains("±2 standard errors"));
}

#[test]
fn concentration_profiles_mark_each_series_and_join_each_species() {
    let t = [10.0, 30.0, 50.0, 70.0];
    let c1 = Array2::from_shape_fn((4, 3), |(i, k)| 1e-3 * (1.0 + i as f64 + k as f64));
    let c2 = c1.mapv(|v| 0.5 * v);
    let s1 = ProfileSeries {
        label: "low X",
        temperatures_c: &t,
        concentrations: c1.view(),
    };
    let s2 = ProfileSeries {
        label: "high X",
        temperatures_c: &t,
        concentrations: c2.view(),
    };
    let p = Palette::default();
    let one = concentration_profiles("Profiles", std::slice::from_ref(&s1), &["M", "MX", "MX2"], &p).unwrap();
    let two = concentration_profiles("Profiles", &[s1, s2], &["M", "MX", "MX2"], &p).unwrap();
    assert_well_formed_svg(&two);
    assert!(two.contains("temperature / °C") && two.contains("concentration / (mol/L)"));
    assert!(two.contains("series low X") && two.contains("series high X"));
    // one more series: three more lines (one per species)
    assert_eq!(count(&two, "polyline") - count(&one, "polyline"), 3);
    // the first series uses circles: 4 temperatures × 3 species, plus its legend mark
    assert_eq!(count(&two, "circle"), 4 * 3 + 1);
}

#[test]
fn vant_hoff_plot_shows_band_line_and_each_point_set_in_its_own_marker() {
    let tk = [283.15, 298.15, 313.15, 328.15, 343.15];
    let lnk: Vec<f64> = tk.iter().map(|t| 1500.0 / t - 2.0).collect();
    let lower: Vec<f64> = lnk.iter().map(|l| l - 0.1).collect();
    let upper: Vec<f64> = lnk.iter().map(|l| l + 0.1).collect();
    let band = LnKBand {
        label: "global fit",
        level: 0.95,
        temperatures_k: &tk,
        ln_k: &lnk,
        lower: &lower,
        upper: &upper,
    };
    let a = LnKPoints {
        label: "per-temperature estimates",
        temperatures_k: &tk,
        ln_k: &lnk,
    };
    let b = LnKPoints {
        label: "classic estimates",
        temperatures_k: &tk[..4],
        ln_k: &lnk[..4],
    };
    let svg = vant_hoff("van 't Hoff", Some(&band), &[a, b], &Palette::default()).unwrap();
    assert_well_formed_svg(&svg);
    assert!(svg.contains("ln K") && svg.contains("10³ K / T"));
    assert!(svg.contains("95 % confidence band") && svg.contains("classic estimates"));
    // circles: 5 points + legend; polygons: the band + 4 triangles + legend triangle
    assert_eq!(count(&svg, "circle"), 6);
    assert_eq!(count(&svg, "polygon"), 1 + 4 + 1);
}

#[test]
fn residual_map_has_one_cell_per_point_and_bins_wide_data() {
    let p = Palette::default();
    let labels: Vec<String> = (0..6).map(|i| format!("s{i}")).collect();
    let l: Vec<&str> = labels.iter().map(String::as_str).collect();
    let map = |nw: usize| {
        let wl = wavelengths(nw);
        let r = Array2::from_shape_fn((6, nw), |(i, j)| 1e-3 * ((i + 2 * j) as f64).sin());
        residual_map("Residuals", &wl, &l, r.view(), &p).unwrap()
    };
    let (m10, m11) = (map(10), map(11));
    assert_well_formed_svg(&m10);
    assert!(m10.contains("wavelength / nm") && m10.contains("residual / AU") && m10.contains(">\ns3\n<"));
    assert_eq!(count(&m11, "rect") - count(&m10, "rect"), 6);
    // 1000 wavelengths are averaged into MAX_HEAT_COLUMNS bins
    assert_eq!(count(&map(1000), "rect"), count(&map(MAX_HEAT_COLUMNS), "rect"));
}

#[test]
fn singular_values_and_evolving_factors_are_labelled() {
    let p = Palette::default();
    let sv = singular_values("SV", &[30.0, 4.0, 0.02, 0.018, 0.0], Some(2), &p).unwrap();
    assert_well_formed_svg(&sv);
    assert!(
        sv.contains("factor number") && sv.contains("log₁₀ (singular value / AU)") && sv.contains("rank 2")
    );
    let f = Array2::from_shape_fn((5, 3), |(i, k)| -(k as f64) * 4.0 + i as f64 * 0.5);
    let b = f.mapv(|v| v - 0.3);
    let ef = evolving_factors("EFA", &[5.0, 20.0, 35.0, 50.0, 65.0], f.view(), b.view(), &p).unwrap();
    assert_well_formed_svg(&ef);
    assert!(ef.contains("temperature / °C"));
    for k in 1..=3 {
        assert!(
            ef.contains(&format!("forward, factor {k}")) && ef.contains(&format!("backward, factor {k}"))
        );
    }
}

#[test]
fn bad_inputs_give_typed_errors_not_panics() {
    let p = Palette::default();
    let wl = wavelengths(4);
    let mut a = bands(2, &wl);
    a[[1, 2]] = f64::NAN;
    assert!(matches!(
        measured_spectra("x", &wl, a.view(), &[1.0, 2.0], &p),
        Err(PlotError::NonFinite {
            row: 1,
            column: 2,
            ..
        })
    ));
    assert!(matches!(
        measured_spectra("x", &[], Array2::zeros((0, 0)).view(), &[], &p),
        Err(PlotError::Empty { .. })
    ));
    assert!(matches!(
        measured_spectra("x", &wl, bands(2, &wl).view(), &[1.0], &p),
        Err(PlotError::LengthMismatch {
            expected: 2,
            found: 1,
            ..
        })
    ));
    let mut s = bands(2, &wl).reversed_axes();
    s[[0, 1]] = f64::INFINITY;
    assert!(matches!(
        pure_spectra("x", &wl, s.view(), None, &["a", "b"], &p),
        Err(PlotError::NonFinite {
            row: 0,
            column: 1,
            ..
        })
    ));
    assert!(matches!(
        pure_spectra("x", &wl, bands(2, &wl).reversed_axes().view(), None, &["a"], &p),
        Err(PlotError::LengthMismatch { .. })
    ));
    assert!(matches!(
        concentration_profiles("x", &[], &["a"], &p),
        Err(PlotError::Empty { .. })
    ));
    assert!(matches!(
        vant_hoff(
            "x",
            None,
            &[LnKPoints {
                label: "p",
                temperatures_k: &[300.0, -1.0],
                ln_k: &[1.0, 2.0]
            }],
            &p
        ),
        Err(PlotError::NonPositive { index: 1, .. })
    ));
    assert!(matches!(
        vant_hoff(
            "x",
            None,
            &[LnKPoints {
                label: "p",
                temperatures_k: &[300.0],
                ln_k: &[f64::NEG_INFINITY]
            }],
            &p
        ),
        Err(PlotError::NonFinite { .. })
    ));
    assert!(matches!(
        vant_hoff("x", None, &[], &p),
        Err(PlotError::Empty { .. })
    ));
    let r = Array2::from_elem((2, 4), f64::NAN);
    assert!(matches!(
        residual_map("x", &wl, &["a", "b"], r.view(), &p),
        Err(PlotError::NonFinite {
            row: 0,
            column: 0,
            ..
        })
    ));
    assert!(matches!(
        singular_values("x", &[1.0, -0.5], None, &p),
        Err(PlotError::NonPositive { index: 1, .. })
    ));
    assert!(matches!(
        singular_values("x", &[0.0, 0.0], None, &p),
        Err(PlotError::NonPositive { .. })
    ));
    assert!(matches!(
        singular_values("x", &[f64::NAN], None, &p),
        Err(PlotError::NonFinite { .. })
    ));
    assert!(matches!(
        singular_values("x", &[], None, &p),
        Err(PlotError::Empty { .. })
    ));
    let f = Array2::from_elem((3, 2), 0.0);
    assert!(matches!(
        evolving_factors("x", &[1.0, 2.0], f.view(), f.view(), &p),
        Err(PlotError::LengthMismatch { .. })
    ));
}

#[test]
fn convenience_functions_plot_the_crates_result_types_and_files_are_written() {
    let p = Palette::default();
    let m = support::model(support::ONE_COMPLEX);
    let sim = simulate(&m, &support::plan(&["M", "MX"])).unwrap();
    let set = &sim.set;
    let spectra = measured_spectra_of(set, &p).unwrap();
    assert!(count(&spectra, "polyline") >= set.n_samples());
    let summary = analyse(set, &FactorParams::default()).unwrap();
    let sv = singular_values_of(&summary, &p).unwrap();
    let efa = evolving_factors_of(&summary, set, &p).unwrap();
    let hard = fit(set, &m, &HardFitParams::default()).unwrap();
    let wl = set.wavelengths_nm().to_vec();
    let pure = pure_spectra_of(&hard, &wl, &p).unwrap();
    assert!(pure.contains(">\nMX\n<"));
    let prof = concentration_profiles_of(&hard, set, &p).unwrap();
    assert!(prof.contains("series X0.3") && prof.contains("series X3"));
    let t: Vec<f64> = vec![283.15, 298.15, 313.15, 328.15];
    let lnk: Vec<f64> = t
        .iter()
        .map(|&x| 1400.0 / x - 1.5 + 0.01 * (x / 7.0).sin())
        .collect();
    let vf = fit_vant_hoff(
        &KData::new(t.clone(), lnk.clone(), ConstantScale::Ln),
        &VanThoffParams::default().check().unwrap(),
    )
    .unwrap();
    let classic = LnKPoints {
        label: "classic estimates",
        temperatures_k: &t,
        ln_k: &lnk,
    };
    let vh = vant_hoff_of(&vf, "ln K per temperature", &[classic], &p).unwrap();
    assert!(vh.contains("95 % confidence band") && vh.contains("classic estimates"));
    // summary rows for the HTML report carry the fit's numbers, rounded by the GUM rule
    let rows = isosbestic::report::html::hard_fit_rows(&hard);
    let dh = hard.parameter("MX", "dh_ref").unwrap();
    let row = rows.iter().find(|r| r.label == "dh_ref of MX").unwrap();
    let (v, u) = isosbestic::report::html::format_with_uncertainty(dh.value, dh.standard_error);
    assert_eq!((&row.value, &row.uncertainty), (&v, &u));
    assert!(rows.iter().any(|r| r.label.starts_with("ΔH° of MX at")));
    let report = isosbestic::report::inspect::inspect(set, &Default::default()).unwrap();
    let irows = isosbestic::report::html::inspect_rows(&report);
    let rank = irows
        .iter()
        .find(|r| r.label.starts_with("rank estimate"))
        .unwrap();
    assert_eq!(rank.value, report.factor.rank.chosen.to_string());
    assert!(
        irows
            .iter()
            .any(|r| r.label == "series X0.3" && r.value.starts_with("5 samples, 10.0 to 70.0"))
    );
    let vrows = isosbestic::report::html::vant_hoff_rows(&vf);
    assert_eq!(vrows[0].label, "ΔH°");
    assert_eq!(vrows[0].unit, "kJ/mol");
    let dir = tempfile::tempdir().unwrap();
    for (name, svg) in [
        ("spectra", &spectra),
        ("sv", &sv),
        ("efa", &efa),
        ("pure", &pure),
        ("profiles", &prof),
        ("vanthoff", &vh),
    ] {
        assert_well_formed_svg(svg);
        let path = dir.path().join(format!("{name}.svg"));
        write_svg(&path, svg).unwrap();
        assert_eq!(&std::fs::read_to_string(&path).unwrap(), svg);
    }
    let err = write_svg(&dir.path().join("no/such/folder/x.svg"), &sv).unwrap_err();
    assert!(matches!(err, PlotError::Write { .. }));
    // a summary without evolving factors says so
    let mut no_efa = summary.clone();
    no_efa.efa = None;
    assert!(matches!(
        evolving_factors_of(&no_efa, set, &p),
        Err(PlotError::Missing { .. })
    ));
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    fn magnitude() -> impl Strategy<Value = f64> {
        prop_oneof![-1e6..1e6_f64, -1e-9..1e-9_f64, Just(0.0), -1e300..1e300_f64]
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(24))]

        /// Any finite data, tiny, flat or huge, gives a well-formed SVG with finite coordinates.
        #[test]
        fn any_finite_spectra_give_a_well_formed_svg(
            n in 1usize..5,
            values in proptest::collection::vec(magnitude(), 12),
            temps in proptest::collection::vec(-20.0..150.0_f64, 5),
        ) {
            let wl = wavelengths(3);
            let a = Array2::from_shape_fn((n, 3), |(i, j)| values[(3 * i + j) % values.len()]);
            let p = Palette::default();
            let svg = measured_spectra("any", &wl, a.view(), &temps[..n], &p).unwrap();
            assert_well_formed_svg(&svg);
            prop_assert!(!svg.contains("NaN") && !svg.contains("inf"));
            let r = residual_map("any", &wl, &vec!["s"; n], a.view(), &p).unwrap();
            assert_well_formed_svg(&r);
            prop_assert!(!r.contains("NaN") && !r.contains("inf"));
            let sv: Vec<f64> = values.iter().map(|v| v.abs()).collect();
            if sv.iter().any(|&v| v > 0.0) {
                let s = singular_values("any", &sv, Some(1), &p).unwrap();
                assert_well_formed_svg(&s);
                prop_assert!(!s.contains("NaN"));
            }
        }

        /// Escaping leaves no markup characters and is undone by the five references.
        #[test]
        fn escaping_removes_markup_and_round_trips(text in "\\PC{0,40}") {
            let e = isosbestic::report::html::escape(&text);
            prop_assert!(!e.contains('<') && !e.contains('>') && !e.contains('"') && !e.contains('\''));
            let back = e
                .replace("&lt;", "<")
                .replace("&gt;", ">")
                .replace("&quot;", "\"")
                .replace("&#39;", "'")
                .replace("&amp;", "&");
            prop_assert_eq!(back, text);
        }
    }
}
