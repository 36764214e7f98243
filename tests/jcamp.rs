//! JCAMP-DX reading, writing and assembly into a spectra set.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use isosbestic::data::jcamp::{
    JcampError, JcampSpectrum, assemble_set, parse_jcamp, read_jcamp, sample_id_for, to_jcamp_string,
    write_jcamp,
};
use isosbestic::data::{Interpolation, ProcessingStep, Sample};
use proptest::prelude::*;
use std::path::{Path, PathBuf};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/jcamp")
        .join(name)
}

fn read(name: &str) -> Vec<JcampSpectrum> {
    read_jcamp(&fixture(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

// ---------------------------------------------------------------------------------------------
// The compressed forms
// ---------------------------------------------------------------------------------------------

#[test]
fn the_specification_s_example_line_decodes_identically_in_every_form() {
    // Source: the table of ASDF forms in the JCAMP-DX specification (McDonald & Wilks,
    // Appl. Spectrosc. 42 (1988) 151; JCAMP-DX 4.24), which writes the ordinates
    // 1 2 3 3 2 1 0 -1 -2 -3 as AFFN "1 2 3 3 2 1 0 -1 -2 -3", PAC "1+2+3+3+2+1+0-1-2-3",
    // SQZ "1BCCBA@abc", DIF "1JJ%jjjjjj" and DIFDUP "1JT%jX". The same five lines appear in the
    // test suite of the open-source format library devrosch/sciformats (JdxDataParser tests).
    // Each fixture tests/data/jcamp/spec_<form>.jdx holds one of them after the X value 100.
    let expected = [1.0, 2.0, 3.0, 3.0, 2.0, 1.0, 0.0, -1.0, -2.0, -3.0];
    for form in ["affn", "pac", "sqz", "dif", "difdup"] {
        let s = read(&format!("spec_{form}.jdx"));
        assert_eq!(s.len(), 1, "{form}");
        assert_eq!(s[0].absorbance, expected, "{form}");
        let x: Vec<f64> = (100..110).map(f64::from).collect();
        assert_eq!(s[0].wavelengths_nm, x, "{form}");
        assert!(s[0].conversions.is_empty());
    }
}

#[test]
fn a_link_file_gives_one_spectrum_per_block_in_every_form() {
    // Constructed from the encoding rules of McDonald & Wilks 1988 (the values are invented):
    // block 1 AFFN, block 2 DIF with check values at line starts, DUP after DIF and a final
    // check line, block 3 SQZ mixed with PAC.
    let s = read("link_three_temperatures.jdx");
    assert_eq!(s.len(), 3);
    let titles: Vec<&str> = s.iter().map(|b| b.title.as_str()).collect();
    assert_eq!(titles, ["T25", "T45", "T65"]);
    let x: Vec<f64> = (0..8).map(|k| 400.0 + 2.0 * f64::from(k)).collect();
    let expected: [[f64; 8]; 3] = [
        [100., 150., 200., 250., 300., 350., 400., 450.],
        [110., 120., 130., 140., 150., 160., 170., 180.],
        [120., 270., 220., 170., 320., 370., 420., 470.],
    ];
    for (b, want) in s.iter().zip(expected) {
        assert_eq!(b.wavelengths_nm, x);
        for (a, w) in b.absorbance.iter().zip(want) {
            assert_relative_eq!(*a, w * 0.001, max_relative = 1e-12); // YFACTOR=0.001
        }
    }
    assert_eq!(s[1].labels["TEMPERATURE"], "45");
    assert_eq!(s[1].labels["BLOCK_ID"], "2");
    assert_eq!(s[1].location.line, Some(23));
    // sample ids in a multi-block file come from the titles
    let p = fixture("link_three_temperatures.jdx");
    assert_eq!(sample_id_for(&p, &s[2], 2, 3), "T65");
}

#[test]
fn wavenumbers_and_percent_transmittance_are_converted_and_the_axis_reversed() {
    // Common practice: λ/nm = 10⁷ / (ν̃/cm⁻¹) and A = −log10(%T/100).
    let s = &read("wavenumber_percent_t.jdx")[0];
    assert_relative_eq!(s.wavelengths_nm[0], 400.0, max_relative = 1e-12); // 1e7/25000
    assert_relative_eq!(s.wavelengths_nm[1], 1e7 / 22500.0, max_relative = 1e-12); // 444.44 nm
    assert_relative_eq!(s.wavelengths_nm[2], 500.0, max_relative = 1e-12); // 1e7/20000
    assert_abs_diff_eq!(s.absorbance[0], 1.0, epsilon = 1e-12); // 10 %T
    assert_abs_diff_eq!(s.absorbance[1], 2f64.log10(), epsilon = 1e-12); // 50 %T → 0.30103
    assert_abs_diff_eq!(s.absorbance[2], 0.0, epsilon = 1e-12); // 100 %T
    assert_eq!(s.conversions.len(), 2);
    assert!(s.conversions.iter().any(|c| c.contains("1/CM")));
    assert!(s.conversions.iter().any(|c| c.contains("percent transmittance")));
}

#[test]
fn increasing_wavenumbers_come_out_as_increasing_wavelengths() {
    let text = "##TITLE=up\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##FIRSTX=20000\n##LASTX=25000\n\
                ##NPOINTS=3\n##XYDATA=(X++(Y..Y))\n20000 0.1 0.2 0.3\n##END=\n";
    let s = &parse_jcamp(text, None).unwrap()[0];
    // 25000 cm⁻¹ = 400 nm comes first (common practice: λ/nm = 1e7/ν̃)
    assert_relative_eq!(s.wavelengths_nm[0], 400.0, max_relative = 1e-12);
    assert_relative_eq!(s.wavelengths_nm[2], 500.0, max_relative = 1e-12);
    assert_eq!(s.absorbance, vec![0.3, 0.2, 0.1]);
}

#[test]
fn micrometres_and_transmittance_fraction_in_unordered_xy_pairs() {
    let s = &read("micrometres_transmittance_points.jdx")[0];
    for (a, b) in s.wavelengths_nm.iter().zip([400.0, 450.0, 500.0]) {
        assert_relative_eq!(*a, b, max_relative = 1e-12); // µm × 1000
    }
    assert_abs_diff_eq!(s.absorbance[0], 1.0, epsilon = 1e-12); // T = 0.1
    assert_abs_diff_eq!(s.absorbance[1], 2f64.log10(), epsilon = 1e-12); // T = 0.5
    assert_abs_diff_eq!(s.absorbance[2], 0.0, epsilon = 1e-12); // T = 1
}

#[test]
fn xfactor_and_yfactor_scale_the_data() {
    let s = &read("factors.jdx")[0];
    let x = [400.0, 400.5, 401.0, 401.5, 402.0, 402.5];
    let y = [0.125, 0.25, 0.5, 0.75, 0.875, 0.9999];
    for k in 0..6 {
        assert_relative_eq!(s.wavelengths_nm[k], x[k], max_relative = 1e-12);
        assert_relative_eq!(s.absorbance[k], y[k], max_relative = 1e-12);
    }
}

#[test]
fn labels_are_matched_whatever_their_spelling_and_comments_are_ignored() {
    let text = "$$ leading comment\n##title=spelled $$ a comment\n##X Units=NANOMETERS\n\
                ##y-units=ABSORBANCE\n##First_X=1\n##last/x=3\n##N POINTS=3\n\
                ##XY DATA=(X++(Y..Y)) $$ data follow\n1 5 6 7 $$ end of line\n##END=\n";
    let s = &parse_jcamp(text, None).unwrap()[0];
    assert_eq!(s.title, "spelled");
    assert_eq!(s.absorbance, vec![5.0, 6.0, 7.0]);
    assert_eq!(s.labels["X Units"], "NANOMETERS");
}

#[test]
fn non_utf8_bytes_are_read_as_latin1() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("latin1.jdx");
    let mut bytes = std::fs::read(fixture("spec_sqz.jdx")).unwrap();
    bytes.splice(0..0, b"$$ caf\xe9 \xff\xfe\n".iter().copied());
    std::fs::write(&p, bytes).unwrap();
    assert_eq!(read_jcamp(&p).unwrap()[0].absorbance.len(), 10);
}

// ---------------------------------------------------------------------------------------------
// Errors: each variant, with the place named in the message
// ---------------------------------------------------------------------------------------------

/// A valid file; lines: 1 TITLE, 2 JCAMP-DX, 3 XUNITS, 4 YUNITS, 5 FIRSTX, 6 LASTX, 7 NPOINTS,
/// 8 XYDATA, 9 data, 10 data, 11 END.
const BASE: &str = "##TITLE=base\n##JCAMP-DX=4.24\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n\
                    ##FIRSTX=400\n##LASTX=407\n##NPOINTS=8\n##XYDATA=(X++(Y..Y))\n\
                    400 1 2 3 4\n404 5 6 7 8\n##END=\n";

fn error_of(text: &str) -> JcampError {
    let e = parse_jcamp(text, Some(Path::new("bad.jdx"))).expect_err("must fail");
    assert!(e.to_string().contains("bad.jdx"), "message names the file: {e}");
    e
}

fn assert_line(e: &JcampError, line: u64) {
    assert!(
        e.to_string().contains(&format!("line {line}")),
        "message names line {line}: {e}"
    );
    assert_eq!(e.location().and_then(|l| l.line), Some(line));
}

#[test]
fn the_base_file_is_valid() {
    assert_eq!(parse_jcamp(BASE, None).unwrap()[0].absorbance.len(), 8);
}

#[test]
fn an_unreadable_file_is_an_io_error_naming_it() {
    let e = read_jcamp(Path::new("/nonexistent/dir/spectrum.jdx")).unwrap_err();
    assert!(matches!(e, JcampError::Io { .. }));
    assert!(e.to_string().contains("spectrum.jdx"), "{e}");
}

#[test]
fn an_unknown_compression_character_names_line_and_column() {
    let e = error_of(&BASE.replace("404 5 6 7 8", "404 5 6 # 8"));
    assert!(matches!(e, JcampError::UnknownCompression { character: '#', .. }));
    assert_line(&e, 10);
    assert!(e.to_string().contains("column 9"), "{e}");
}

#[test]
fn an_npoints_mismatch_is_an_error() {
    let e = error_of(&BASE.replace("##NPOINTS=8", "##NPOINTS=9"));
    assert!(matches!(
        e,
        JcampError::NpointsMismatch {
            declared: 9,
            decoded: 8,
            ..
        }
    ));
    assert_line(&e, 7);
}

#[test]
fn a_failed_dif_check_value_is_an_error() {
    // DIF line ends at 4; the next line must start with the check value 4 (D), here 5 (E).
    let e = error_of(&BASE.replace("400 1 2 3 4\n404 5 6 7 8", "400 AJJJ\n403 EJJJJ"));
    assert!(matches!(e, JcampError::DifCheckFailed { .. }));
    assert_line(&e, 10);
    // and the correct check value passes
    let ok = parse_jcamp(
        &BASE.replace("400 1 2 3 4\n404 5 6 7 8", "400 AJJJ\n403 DJJJJ"),
        None,
    )
    .unwrap();
    assert_eq!(ok[0].absorbance, vec![1., 2., 3., 4., 5., 6., 7., 8.]);
}

#[test]
fn a_file_without_end_is_truncated() {
    let e = error_of(BASE.trim_end_matches("##END=\n"));
    assert!(matches!(e, JcampError::Truncated { .. }));
    assert_line(&e, 10);
}

#[test]
fn xy_pairs_ending_mid_pair_are_truncated() {
    let text = "##TITLE=p\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##XYPOINTS=(XY..XY)\n\
                400,1 401,2\n402\n##END=\n";
    let e = error_of(text);
    assert!(matches!(e, JcampError::Truncated { .. }));
    assert_line(&e, 6);
}

#[test]
fn missing_required_labels_are_named() {
    let e = error_of(&BASE.replace("##FIRSTX=400\n", ""));
    assert!(matches!(&e, JcampError::MissingLabel { label, .. } if label == "FIRSTX"));
    assert_line(&e, 7); // the XYDATA record, one line up without FIRSTX
    let e = error_of(&BASE.replace("##LASTX=407\n", ""));
    assert!(matches!(&e, JcampError::MissingLabel { label, .. } if label.contains("LASTX")));
    let e = error_of(&BASE.replace("##XUNITS=NANOMETERS\n", ""));
    assert!(matches!(&e, JcampError::MissingLabel { label, .. } if label == "XUNITS"));
    // DELTAX may stand in for LASTX
    let ok = parse_jcamp(&BASE.replace("##LASTX=407", "##DELTAX=1"), None).unwrap();
    assert_relative_eq!(ok[0].wavelengths_nm[7], 407.0);
}

#[test]
fn unsupported_units_are_named() {
    let e = error_of(&BASE.replace("##XUNITS=NANOMETERS", "##XUNITS=SECONDS"));
    assert!(matches!(&e, JcampError::UnsupportedUnits { value, .. } if value == "SECONDS"));
    assert_line(&e, 3);
    let e = error_of(&BASE.replace("##YUNITS=ABSORBANCE", "##YUNITS=KUBELKA-MUNK"));
    assert!(matches!(e, JcampError::UnsupportedUnits { .. }));
    assert_line(&e, 4);
}

#[test]
fn bad_numbers_are_named() {
    let e = error_of(&BASE.replace("##FIRSTX=400", "##FIRSTX=four hundred"));
    assert!(matches!(e, JcampError::BadNumber { .. }));
    assert_line(&e, 5);
    let e = error_of(&BASE.replace("404 5 6 7 8", "404 5 6.1.2 7 8"));
    assert!(matches!(e, JcampError::BadNumber { .. }));
    assert_line(&e, 10);
}

#[test]
fn zero_transmittance_names_the_point() {
    let text = BASE
        .replace("##YUNITS=ABSORBANCE", "##YUNITS=%T")
        .replace("404 5 6 7 8", "404 5 0 7 8");
    let e = error_of(&text);
    assert!(matches!(e, JcampError::NonPositiveTransmittance { x, .. } if (x - 405.0).abs() < 1e-12));
    assert_line(&e, 10);
    assert!(e.to_string().contains("405"), "{e}");
}

#[test]
fn empty_data_is_an_error() {
    let e = error_of(&BASE.replace("400 1 2 3 4\n404 5 6 7 8\n", ""));
    assert!(matches!(e, JcampError::EmptyData { .. }));
    assert_line(&e, 8);
    let e = error_of("##TITLE=nothing\n##JCAMP-DX=4.24\n##END=\n");
    assert!(matches!(e, JcampError::EmptyData { .. }));
}

#[test]
fn firstx_or_lastx_disagreeing_with_the_data_is_an_error() {
    let e = error_of(&BASE.replace("##FIRSTX=400", "##FIRSTX=300"));
    assert!(matches!(&e, JcampError::XMismatch { label, .. } if label == "FIRSTX"));
    assert_line(&e, 9);
    let e = error_of(&BASE.replace("##LASTX=407", "##LASTX=414"));
    assert!(matches!(&e, JcampError::XMismatch { label, .. } if label == "LASTX"));
    assert_line(&e, 10);
}

#[test]
fn other_data_problems_are_typed_errors() {
    let e = error_of(&BASE.replace("(X++(Y..Y))", "(X++(R..R))"));
    assert!(matches!(e, JcampError::UnsupportedForm { .. }));
    assert_line(&e, 8);
    let text = "##TITLE=w\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##XYPOINTS=(XY..XY)\n10,1\n0,2\n##END=\n";
    let e = error_of(text);
    assert!(matches!(e, JcampError::NonPositiveWavenumber { .. }));
    assert_line(&e, 6);
    let text =
        "##TITLE=d\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##XYPOINTS=(XY..XY)\n400,1\n400,2\n##END=\n";
    let e = error_of(text);
    assert!(matches!(e, JcampError::DuplicateWavelength { .. }));
    assert_line(&e, 6);
    let e = error_of(&BASE.replace("404 5 6 7 8", "404 5 6 7 8s9999999"));
    assert!(matches!(e, JcampError::TooManyPoints { .. }));
    assert_line(&e, 10);
}

// ---------------------------------------------------------------------------------------------
// Assembly
// ---------------------------------------------------------------------------------------------

fn spectrum(title: &str, first: f64, step: f64, n: usize, f: impl Fn(f64) -> f64) -> JcampSpectrum {
    let x: Vec<f64> = (0..n).map(|k| first + step * k as f64).collect();
    let y: Vec<f64> = x.iter().map(|&v| f(v)).collect();
    let text = to_jcamp_string(title, &x, &y, "ABSORBANCE", &[]).unwrap();
    parse_jcamp(&text, Some(Path::new(&format!("{title}.jdx"))))
        .unwrap()
        .remove(0)
}

fn samples(ids: &[&str]) -> Vec<Sample> {
    ids.iter()
        .enumerate()
        .map(|(k, id)| Sample::new(*id, "s", 298.15 + 10.0 * k as f64, 1.0))
        .collect()
}

#[test]
fn spectra_on_one_grid_are_assembled_without_resampling() {
    let blocks = read("link_three_temperatures.jdx");
    let p = fixture("link_three_temperatures.jdx");
    let n = blocks.len();
    let spectra: Vec<(String, JcampSpectrum)> = blocks
        .into_iter()
        .enumerate()
        .map(|(k, b)| (sample_id_for(&p, &b, k, n), b))
        .collect();
    let set = assemble_set(
        spectra,
        samples(&["T65", "T25", "T45"]),
        vec![],
        Interpolation::Linear,
        vec![p.clone()],
    )
    .unwrap();
    assert_eq!(set.n_wavelengths(), 8);
    let ids: Vec<&str> = set.samples().iter().map(|s| s.id.as_str()).collect();
    assert_eq!(ids, ["T65", "T25", "T45"]);
    assert_relative_eq!(set.absorbance()[[0, 1]], 0.270, max_relative = 1e-12);
    assert_relative_eq!(set.absorbance()[[1, 1]], 0.150, max_relative = 1e-12);
    assert!(
        matches!(&set.history()[0], ProcessingStep::Imported { format, files } if format == "jcamp-dx" && files == &vec![p])
    );
    assert!(
        !set.history()
            .iter()
            .any(|h| matches!(h, ProcessingStep::Resampled { .. }))
    );
}

#[test]
fn spectra_on_different_grids_are_resampled_onto_the_overlap_at_the_finest_spacing() {
    let line = |x: f64| 0.002 * x - 0.5; // linear interpolation is exact on a straight line
    let a = spectrum("a", 400.0, 10.0, 11, line); // 400..500, 10 nm
    let b = spectrum("b", 420.0, 5.0, 21, line); // 420..520, 5 nm
    let c = spectrum("c", 420.0, 5.0, 17, line); // 420..500, 5 nm: already the common grid
    let set = assemble_set(
        vec![("a".into(), a), ("b".into(), b), ("c".into(), c)],
        samples(&["a", "b", "c"]),
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap();
    assert_eq!(set.n_wavelengths(), 17);
    assert_relative_eq!(set.wavelengths_nm()[0], 420.0);
    assert_relative_eq!(set.wavelengths_nm()[16], 500.0, max_relative = 1e-12);
    for i in 0..3 {
        for (j, &x) in set.wavelengths_nm().iter().enumerate() {
            assert_abs_diff_eq!(set.absorbance()[[i, j]], line(x), epsilon = 1e-12);
        }
    }
    let resampled = set.history().iter().find_map(|h| match h {
        ProcessingStep::Resampled { samples, points, .. } => Some((samples.clone(), *points)),
        _ => None,
    });
    assert_eq!(resampled, Some((vec!["a".to_string(), "b".to_string()], 17)));
}

#[test]
fn conversions_are_recorded_in_the_history() {
    let s = read("wavenumber_percent_t.jdx").remove(0);
    let set = assemble_set(
        vec![("w".into(), s)],
        samples(&["w"]),
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap();
    let n = set
        .history()
        .iter()
        .filter(|h| matches!(h, ProcessingStep::UnitsConverted { sample, .. } if sample == "w"))
        .count();
    assert_eq!(n, 2);
}

#[test]
fn assembly_errors_name_the_sample_and_the_file() {
    let a = || spectrum("a", 400.0, 1.0, 5, |x| x * 1e-3);
    let e = assemble_set(
        vec![("zz".into(), a())],
        samples(&["a"]),
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::UnknownSample { .. }));
    assert!(
        e.to_string().contains("zz") && e.to_string().contains("a.jdx"),
        "{e}"
    );

    let e = assemble_set(
        vec![("a".into(), a())],
        samples(&["a", "b"]),
        vec![],
        Interpolation::Linear,
        vec![PathBuf::from("run1.jdx")],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::MissingSpectrum { .. }));
    assert!(
        e.to_string().contains("'b'") && e.to_string().contains("run1.jdx"),
        "{e}"
    );

    let e = assemble_set(
        vec![("a".into(), a()), ("a".into(), a())],
        samples(&["a"]),
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::DuplicateSpectrum { .. }));

    let far = spectrum("far", 600.0, 1.0, 5, |x| x * 1e-3);
    let e = assemble_set(
        vec![("a".into(), a()), ("far".into(), far)],
        samples(&["a", "far"]),
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::NoOverlap { .. }));
    assert!(e.to_string().contains("far"), "{e}");

    let mut bad = samples(&["a"]);
    bad[0].path_cm = -1.0;
    let e = assemble_set(
        vec![("a".into(), a())],
        bad,
        vec![],
        Interpolation::Linear,
        vec![],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::Set(_)));
}

#[test]
fn single_block_files_are_named_by_their_stem() {
    let s = read("factors.jdx");
    assert_eq!(sample_id_for(&fixture("factors.jdx"), &s[0], 0, 1), "factors");
    let mut untitled = s[0].clone();
    untitled.title = "  ".into();
    assert_eq!(sample_id_for(Path::new("x/run.jdx"), &untitled, 1, 2), "run-2");
}

// ---------------------------------------------------------------------------------------------
// Writer
// ---------------------------------------------------------------------------------------------

#[test]
fn write_jcamp_writes_a_file_that_reads_back() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("out.jdx");
    let x = [400.0, 400.5, 401.0];
    let y = [0.1, -0.2, 1e-9];
    write_jcamp(
        &p,
        "ε of HL",
        &x,
        &y,
        "ABSORBANCE",
        &[("$FIT".into(), "global".into())],
    )
    .unwrap();
    let back = read_jcamp(&p).unwrap().remove(0);
    assert_eq!(back.title, "ε of HL");
    assert_eq!(back.absorbance, y);
    assert_eq!(back.labels["$FIT"], "global");
    let e = write_jcamp(
        &dir.path().join("no/such/dir/x.jdx"),
        "t",
        &x,
        &y,
        "ABSORBANCE",
        &[],
    )
    .unwrap_err();
    assert!(matches!(e, JcampError::Io { .. }));
    assert!(to_jcamp_string("t", &x, &y[..2], "ABSORBANCE", &[]).is_err());
    assert!(to_jcamp_string("t", &[2.0, 1.0], &[0.0, 0.0], "ABSORBANCE", &[]).is_err());
}

fn close(a: f64, b: f64, rtol: f64) -> bool {
    (a - b).abs() <= rtol * a.abs().max(b.abs())
}

proptest! {
    #[test]
    fn write_then_read_gives_back_the_input(
        first in 150.0f64..900.0,
        step in 0.01f64..5.0,
        jitter in proptest::collection::vec(-0.4f64..0.4, 1..80),
        uneven in any::<bool>(),
        ys in proptest::collection::vec(-4.0f64..4.0, 80),
    ) {
        let n = jitter.len();
        let x: Vec<f64> = (0..n)
            .map(|k| first + step * k as f64 + if uneven { jitter[k] * step } else { 0.0 })
            .collect();
        let y = &ys[..n];
        let text = to_jcamp_string("round trip", &x, y, "ABSORBANCE", &[]).unwrap();
        let back = parse_jcamp(&text, None).unwrap();
        prop_assert_eq!(back.len(), 1);
        prop_assert_eq!(back[0].wavelengths_nm.len(), n);
        for k in 0..n {
            prop_assert!(close(back[0].wavelengths_nm[k], x[k], 1e-12), "{} vs {}", back[0].wavelengths_nm[k], x[k]);
            prop_assert!(close(back[0].absorbance[k], y[k], 1e-12));
        }
    }

    #[test]
    fn random_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2000)) {
        let text = String::from_utf8_lossy(&bytes);
        let _ = parse_jcamp(&text, None);
    }

    #[test]
    fn random_text_made_of_jcamp_characters_never_panics(
        chars in proptest::collection::vec(
            proptest::sample::select("#=$\n \t,;+-.0123456789@AaJjSsTZz%?EeXY()/".chars().collect::<Vec<_>>()),
            0..600),
    ) {
        let text: String = chars.into_iter().collect();
        let _ = parse_jcamp(&format!("##TITLE=x\n##XUNITS=NANOMETERS\n##YUNITS=%T\n{text}"), None);
    }

    #[test]
    fn mutations_of_a_valid_file_never_panic(
        edits in proptest::collection::vec((any::<prop::sample::Index>(), 0u8..3, any::<char>()), 1..12),
        which in 0usize..4,
    ) {
        let name = ["link_three_temperatures.jdx", "wavenumber_percent_t.jdx", "factors.jdx", "spec_difdup.jdx"][which];
        let mut chars: Vec<char> = std::fs::read_to_string(fixture(name)).unwrap().chars().collect();
        for (at, op, c) in edits {
            if chars.is_empty() { break; }
            let k = at.index(chars.len());
            match op {
                0 => chars[k] = c,
                1 => { chars.remove(k); }
                _ => chars.insert(k, c),
            }
        }
        let text: String = chars.into_iter().collect();
        if let Ok(spectra) = parse_jcamp(&text, None) {
            for s in spectra {
                prop_assert_eq!(s.wavelengths_nm.len(), s.absorbance.len());
                prop_assert!(s.wavelengths_nm.windows(2).all(|w| w[1] > w[0]));
                prop_assert!(s.absorbance.iter().all(|v| v.is_finite()));
            }
        }
    }
}
