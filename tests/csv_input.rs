//! CSV input and output end to end: the fixtures in `tests/data/csv/` (hand-written, one mistake
//! per error file, see its README), round trips through the writers, and robustness against
//! arbitrary text.
//!
//! Expected values below are read off the fixture files themselves (written by hand); the
//! Celsius–kelvin offset 273.15 K is the definition of the Celsius scale (SI Brochure, 9th ed.).

use approx::assert_relative_eq;
use isosbestic::data::csv_io::{
    CsvError, load_csv_set, parse_samples_table, parse_spectra_table, read_samples_table, read_spectra_table,
};
use isosbestic::data::{ProcessingStep, Sample, SampleRole, SpectraSet};
use isosbestic::report::tables::{
    DocumentError, Table, read_json, samples_table, write_json, write_samples_table, write_spectra_table,
};
use ndarray::{Array1, Array2};
use proptest::prelude::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/csv")
        .join(name)
}

/// Asserts that the error sits at `file`, `line`, `column` and that its message says so.
fn assert_located(e: &CsvError, file: &str, line: Option<u64>, column: Option<u64>) {
    let location = e.location().unwrap_or_else(|| panic!("no location in {e:?}"));
    assert_eq!(location.file.as_deref(), Some(fixture(file).as_path()), "{e}");
    assert_eq!((location.line, location.column), (line, column), "{e}");
    let mut expected = fixture(file).display().to_string();
    if let Some(l) = line {
        expected.push_str(&format!(", line {l}"));
    }
    if let Some(c) = column {
        expected.push_str(&format!(", column {c}"));
    }
    let message = e.to_string();
    assert!(
        message.contains(&expected),
        "message '{message}' does not name '{expected}'"
    );
}

fn spectra_error(name: &str) -> CsvError {
    read_spectra_table(&fixture(name)).expect_err(name)
}

fn samples_error(name: &str) -> CsvError {
    read_samples_table(&fixture(name)).expect_err(name)
}

// ---------------------------------------------------------------- valid input

#[test]
fn the_three_delimiters_give_the_same_spectra() {
    let comma = read_spectra_table(&fixture("spectra_comma.csv")).unwrap();
    let semicolon = read_spectra_table(&fixture("spectra_semicolon.csv")).unwrap();
    let tab = read_spectra_table(&fixture("spectra_tab.csv")).unwrap();
    // spectra_comma.csv: BOM + two comment lines, header on line 3
    assert_eq!(comma.header_line, 3);
    assert_eq!(semicolon.header_line, 1);
    for other in [&semicolon, &tab] {
        assert_eq!(other.sample_ids, comma.sample_ids);
        assert_eq!(other.wavelengths_nm, comma.wavelengths_nm);
        assert_eq!(other.absorbance, comma.absorbance);
    }
    // values as written in the fixtures; rows out of order in the comma file come back sorted
    assert_eq!(comma.sample_ids, ["lo-15", "lo-45", "hi-15", "blank-1"]);
    assert_eq!(comma.wavelengths_nm, [400.0, 410.0, 420.0]);
    assert_relative_eq!(comma.absorbance[[2, 2]], 0.301); // hi-15 at 420 nm
    assert_relative_eq!(comma.absorbance[[3, 1]], 0.0015); // blank-1 at 410 nm
}

#[test]
fn the_three_delimiters_give_the_same_samples() {
    let comma = read_samples_table(&fixture("samples.csv")).unwrap();
    let semicolon = read_samples_table(&fixture("samples_semicolon.csv")).unwrap();
    let tab = read_samples_table(&fixture("samples_tab.csv")).unwrap();
    for other in [&semicolon, &tab] {
        assert_eq!(other.components, comma.components);
        for (a, b) in other.samples.iter().zip(&comma.samples) {
            assert_eq!(a.id, b.id);
            assert_eq!(a.series, b.series);
            // °C in samples.csv, K in the others: 273.15 K offset by definition of the Celsius scale
            assert_relative_eq!(a.temperature_k, b.temperature_k, max_relative = 1e-12);
            assert_relative_eq!(a.path_cm, b.path_cm);
            assert_eq!(a.totals_m, b.totals_m);
        }
    }
    assert_eq!(semicolon.lines, [2, 3, 4, 5]);
}

#[test]
fn the_samples_table_reads_units_flags_defaults_and_metadata() {
    let t = read_samples_table(&fixture("samples.csv")).unwrap();
    assert_eq!(t.components, ["metal", "ligand"]);
    assert_eq!(t.lines, [3, 4, 5, 6]); // one comment line before the header
    let [lo15, lo45, hi15, blank] = t.samples.as_slice() else {
        panic!("four samples expected")
    };
    // 15 °C and 20 °C, +273.15 K (definition of the Celsius scale)
    assert_relative_eq!(lo15.temperature_k, 288.15, max_relative = 1e-12);
    assert_relative_eq!(lo15.preparation_temperature_k, 293.15, max_relative = 1e-12);
    // empty prep_temperature_C cell: the documented default, 25 °C
    assert_relative_eq!(blank.preparation_temperature_k, 298.15, max_relative = 1e-12);
    assert_eq!(blank.role, SampleRole::Blank); // "yes"
    assert_eq!(hi15.role, SampleRole::Measurement); // "false"
    assert_relative_eq!(hi15.path_cm, 0.5);
    assert_relative_eq!(hi15.totals_m["ligand"], 0.020);
    assert_eq!(lo45.metadata["note"], "warm, re-zeroed"); // quoted comma kept
    assert_eq!(lo15.metadata["cuvette"], "Q1");
    assert!(!lo15.metadata.contains_key("note")); // empty cell left out
}

#[test]
fn pairing_orders_rows_as_the_samples_table_and_records_the_import() {
    let spectra = fixture("spectra_comma.csv");
    let samples = fixture("samples.csv");
    let set = load_csv_set(&spectra, &samples).unwrap();
    let ids: Vec<&str> = set.samples().iter().map(|s| s.id.as_str()).collect();
    assert_eq!(ids, ["lo-15", "lo-45", "hi-15", "blank-1"]);
    assert_eq!(set.components(), ["metal", "ligand"]);
    // hi-15 column of the fixture, sorted by wavelength
    let row = set.absorbance().row(2);
    for (a, b) in row.iter().zip([0.205, 0.250, 0.301]) {
        assert_relative_eq!(*a, b);
    }
    assert_eq!(
        set.history(),
        [ProcessingStep::Imported {
            format: "csv".into(),
            files: vec![spectra, samples]
        }]
    );
}

#[test]
fn samples_rows_may_be_in_another_order_than_spectra_columns() {
    let dir = tempfile::tempdir().unwrap();
    let spectra = dir.path().join("s.csv");
    let samples = dir.path().join("m.csv");
    std::fs::write(&spectra, "wavelength_nm,x,y\n500,1,2\n").unwrap();
    std::fs::write(
        &samples,
        "id,series,temperature_K,path_cm\ny,a,300,1\nx,a,310,1\n",
    )
    .unwrap();
    let set = load_csv_set(&spectra, &samples).unwrap();
    assert_eq!(set.samples()[0].id, "y");
    assert_relative_eq!(set.absorbance()[[0, 0]], 2.0);
    assert!(set.components().is_empty()); // no <component>_M column: no components
}

// ---------------------------------------------------------------- errors, one per class

#[test]
fn an_unreadable_file_is_named() {
    let missing = fixture("does_not_exist.csv");
    let e = read_spectra_table(&missing).unwrap_err();
    assert!(matches!(&e, CsvError::Unreadable { file, .. } if *file == missing));
    assert!(e.to_string().contains(&missing.display().to_string()));
    let e = load_csv_set(&fixture("spectra_comma.csv"), &missing).unwrap_err();
    assert!(matches!(e, CsvError::Unreadable { .. }));
}

#[test]
fn a_file_that_is_not_utf8_names_the_line() {
    // samples_latin1.csv has a Latin-1 degree sign (byte 0xB0) on line 2
    let e = samples_error("samples_latin1.csv");
    assert!(matches!(e, CsvError::NotUtf8 { .. }));
    assert_located(&e, "samples_latin1.csv", Some(2), None);
}

#[test]
fn semicolons_with_decimal_commas_give_the_decimal_comma_error() {
    let e = spectra_error("spectra_decimal_comma.csv");
    assert!(matches!(&e, CsvError::DecimalComma { cell, .. } if cell == "0,123"));
    assert_located(&e, "spectra_decimal_comma.csv", Some(2), Some(2));
    let message = e.to_string();
    assert!(
        message.contains("decimal comma") && message.contains("'.'"),
        "{message}"
    );

    let e = samples_error("samples_decimal_comma.csv");
    assert!(matches!(&e, CsvError::DecimalComma { cell, .. } if cell == "298,15"));
    assert_located(&e, "samples_decimal_comma.csv", Some(2), Some(3));
}

#[test]
fn a_header_with_one_column_gives_the_delimiter_error() {
    let e = spectra_error("spectra_one_column.csv");
    assert!(matches!(&e, CsvError::DelimiterGuess { header, .. } if header == "wavelength_nm a b"));
    assert_located(&e, "spectra_one_column.csv", Some(1), None);
    assert!(e.to_string().contains("',', ';' or a tab"));
}

#[test]
fn a_short_row_gives_the_ragged_error() {
    let e = spectra_error("spectra_ragged.csv");
    assert!(matches!(
        e,
        CsvError::Ragged {
            expected: 3,
            found: 2,
            ..
        }
    ));
    assert_located(&e, "spectra_ragged.csv", Some(3), None);
    let e = samples_error("samples_ragged.csv");
    assert!(matches!(
        e,
        CsvError::Ragged {
            expected: 6,
            found: 5,
            ..
        }
    ));
    assert_located(&e, "samples_ragged.csv", Some(2), None);
}

#[test]
fn text_in_a_number_cell_gives_the_non_numeric_error() {
    let e = spectra_error("spectra_non_numeric.csv");
    assert!(matches!(&e, CsvError::NonNumeric { text, what, .. } if text == "high" && what.contains("'b'")));
    assert_located(&e, "spectra_non_numeric.csv", Some(3), Some(3));
    let e = samples_error("samples_non_numeric.csv");
    assert!(matches!(&e, CsvError::NonNumeric { text, what, .. } if text == "1e-2 mol" && what == "metal_M"));
    assert_located(&e, "samples_non_numeric.csv", Some(2), Some(5));
}

#[test]
fn nan_and_infinity_give_the_non_finite_error() {
    let e = spectra_error("spectra_nan.csv");
    assert!(matches!(&e, CsvError::NonFinite { text, .. } if text == "NaN"));
    assert_located(&e, "spectra_nan.csv", Some(3), Some(2));
    let e = samples_error("samples_infinite.csv");
    assert!(matches!(&e, CsvError::NonFinite { text, .. } if text == "inf"));
    assert_located(&e, "samples_infinite.csv", Some(3), Some(3));
}

#[test]
fn a_repeated_wavelength_names_both_lines() {
    let e = spectra_error("spectra_duplicate_wavelength.csv");
    assert!(matches!(e, CsvError::DuplicateWavelength { first_line: 2, .. }));
    assert_located(&e, "spectra_duplicate_wavelength.csv", Some(4), Some(1));
    assert!(e.to_string().contains("400 nm already appears on line 2"));
}

#[test]
fn a_repeated_sample_id_is_refused_in_either_table() {
    let e = spectra_error("spectra_duplicate_id.csv");
    assert!(
        matches!(&e, CsvError::DuplicateSampleId { id, first_seen, .. } if id == "a" && first_seen == "column 2")
    );
    assert_located(&e, "spectra_duplicate_id.csv", Some(2), Some(4));
    let e = samples_error("samples_duplicate_id.csv");
    assert!(matches!(&e, CsvError::DuplicateSampleId { first_seen, .. } if first_seen == "line 2"));
    assert_located(&e, "samples_duplicate_id.csv", Some(4), Some(1));
}

#[test]
fn a_missing_required_column_is_named() {
    let e = samples_error("samples_missing_series.csv");
    assert!(matches!(&e, CsvError::MissingColumn { column, .. } if column == "series"));
    assert_located(&e, "samples_missing_series.csv", Some(1), None);
}

#[test]
fn a_temperature_column_without_unit_is_refused() {
    let e = samples_error("samples_bare_temperature.csv");
    assert!(matches!(&e, CsvError::MissingTemperatureUnit { column, .. } if column == "temperature"));
    assert_located(&e, "samples_bare_temperature.csv", Some(1), Some(3));
    let message = e.to_string();
    assert!(
        message.contains("temperature_K") && message.contains("temperature_C"),
        "{message}"
    );
    for bare in ["T", "Temperature_K", "prep_temperature"] {
        let text = format!("sample_id,series,temperature_K,path_cm,{bare}\na,s,300,1,300\n");
        let e = parse_samples_table(&text, None).unwrap_err();
        assert!(matches!(&e, CsvError::MissingTemperatureUnit { column, .. } if column == bare));
    }
}

#[test]
fn two_temperature_columns_are_refused() {
    let e = samples_error("samples_two_temperatures.csv");
    assert!(matches!(&e, CsvError::BadHeader { name, .. } if name == "temperature_C"));
    assert_located(&e, "samples_two_temperatures.csv", Some(1), Some(4));
}

#[test]
fn impossible_values_are_refused_with_their_cell() {
    let e = samples_error("samples_zero_path.csv");
    assert!(matches!(&e, CsvError::ImpossibleValue { what, .. } if what == "path_cm"));
    assert_located(&e, "samples_zero_path.csv", Some(3), Some(4));
    // -273.15 °C is 0 K (definition of the Celsius scale)
    let e = samples_error("samples_absolute_zero.csv");
    assert!(matches!(&e, CsvError::ImpossibleValue { what, .. } if what == "temperature_C"));
    assert_located(&e, "samples_absolute_zero.csv", Some(3), Some(3));
    let e = samples_error("samples_negative_total.csv");
    assert!(matches!(&e, CsvError::ImpossibleValue { what, .. } if what == "ligand_M"));
    assert_located(&e, "samples_negative_total.csv", Some(3), Some(6));
    let e = spectra_error("spectra_negative_wavelength.csv");
    assert!(matches!(&e, CsvError::ImpossibleValue { what, .. } if what == "wavelength"));
    assert_located(&e, "spectra_negative_wavelength.csv", Some(3), Some(1));
}

#[test]
fn an_empty_required_cell_is_named() {
    let e = samples_error("samples_empty_cell.csv");
    assert!(matches!(&e, CsvError::MissingValue { what, .. } if what == "path_cm"));
    assert_located(&e, "samples_empty_cell.csv", Some(2), Some(4));
}

#[test]
fn an_unknown_blank_flag_is_refused() {
    let e = samples_error("samples_bad_blank.csv");
    assert!(matches!(&e, CsvError::InvalidFlag { text, .. } if text == "maybe"));
    assert_located(&e, "samples_bad_blank.csv", Some(2), Some(6));
}

#[test]
fn empty_tables_are_refused() {
    let e = spectra_error("spectra_empty.csv");
    assert!(matches!(e, CsvError::Empty { .. }));
    assert_located(&e, "spectra_empty.csv", None, None);
    let e = spectra_error("spectra_header_only.csv");
    assert!(matches!(e, CsvError::Empty { .. }));
    assert_located(&e, "spectra_header_only.csv", Some(1), None);
    let e = samples_error("samples_header_only.csv");
    assert!(matches!(e, CsvError::Empty { .. }));
    assert_located(&e, "samples_header_only.csv", Some(1), None);
}

#[test]
fn a_spectrum_without_a_samples_row_names_its_column() {
    let e = load_csv_set(&fixture("spectra_extra_column.csv"), &fixture("samples.csv")).unwrap_err();
    assert!(
        matches!(&e, CsvError::SpectrumWithoutSample { id, samples_file, .. } if id == "stray" && *samples_file == fixture("samples.csv"))
    );
    assert_located(&e, "spectra_extra_column.csv", Some(1), Some(6));
    assert!(
        e.to_string()
            .contains(&fixture("samples.csv").display().to_string())
    );
}

#[test]
fn a_samples_row_without_a_spectrum_names_its_line() {
    let e = load_csv_set(&fixture("spectra_missing_column.csv"), &fixture("samples.csv")).unwrap_err();
    assert!(
        matches!(&e, CsvError::SampleWithoutSpectrum { id, spectra_file, .. } if id == "lo-45" && *spectra_file == fixture("spectra_missing_column.csv"))
    );
    assert_located(&e, "samples.csv", Some(4), None);
    assert!(
        e.to_string()
            .contains(&fixture("spectra_missing_column.csv").display().to_string())
    );
}

#[test]
fn errors_without_a_file_say_input() {
    let e = parse_spectra_table("wavelength_nm,a\n400,x\n", None).unwrap_err();
    // no file: the message starts with the position alone
    assert!(e.to_string().starts_with("line 2, column 2: "), "{e}");
}

// ---------------------------------------------------------------- writers

#[test]
fn a_spectra_set_survives_a_json_document_round_trip() {
    let set = load_csv_set(&fixture("spectra_comma.csv"), &fixture("samples.csv")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("set.json");
    write_json(&p, "spectra_set", &set).unwrap();
    let text = std::fs::read_to_string(&p).unwrap();
    assert!(text.contains("\"format\": \"isosbestic\"") && text.contains("\"format_version\": 1"));
    let back: SpectraSet = read_json(&p, "spectra_set").unwrap();
    assert_eq!(back, set);
    let e = read_json::<SpectraSet>(&p, "fit_report").unwrap_err();
    assert!(matches!(e, DocumentError::WrongKind { .. }));
    assert!(e.to_string().contains("set.json"));
}

#[test]
fn writing_into_a_missing_folder_names_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("no_such_folder").join("t.csv");
    let e = Table::new(["a"]).write_csv(&p).unwrap_err();
    assert!(matches!(&e, isosbestic::Error::Output { path, .. } if *path == p));
    assert!(e.to_string().contains("no_such_folder"));
}

#[test]
fn metadata_that_would_read_back_as_a_total_is_refused() {
    let mut s = Sample::new("a", "s", 300.0, 1.0);
    s.metadata.insert("note_M".into(), "x".into());
    let set = SpectraSet::new(Array1::from(vec![400.0]), Array2::zeros((1, 1)), vec![s], vec![]).unwrap();
    assert!(samples_table(&set).is_err());
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("samples.csv");
    assert!(matches!(
        write_samples_table(&set, &p),
        Err(isosbestic::Error::Output { .. })
    ));
    assert!(!p.exists());
}

// ---------------------------------------------------------------- properties

/// Sample ids and series labels: no surrounding spaces (cells are trimmed), but delimiters and
/// quotes inside, which the writer must quote.
const LABEL: &str = "[A-Za-z0-9_]([A-Za-z0-9_ ,;.'\"-]{0,5}[A-Za-z0-9_])?";
const META_VALUE: &str = "[A-Za-z0-9]([A-Za-z0-9 ,;\"]{0,5}[A-Za-z0-9])?";

fn finite_f64() -> impl Strategy<Value = f64> {
    use proptest::num::f64 as f;
    prop_oneof![
        -1.0f64..5.0,
        f::POSITIVE | f::NEGATIVE | f::NORMAL | f::SUBNORMAL | f::ZERO,
    ]
}

type Conditions = (f64, f64, f64, bool, Vec<f64>, BTreeMap<String, String>);

fn conditions(n_components: usize) -> impl Strategy<Value = Conditions> {
    let key = "[a-z]{1,6}".prop_filter("reserved column name", |k| {
        !["id", "series", "blank", "temp", "t"].contains(&k.as_str())
    });
    (
        1.0f64..600.0,
        1e-3f64..20.0,
        250.0f64..350.0,
        any::<bool>(),
        prop::collection::vec(prop_oneof![Just(0.0), 0.0f64..2.0, 1e-12f64..1e-6], n_components),
        prop::collection::btree_map(key, META_VALUE, 0..3),
    )
}

fn spectra_sets() -> impl Strategy<Value = SpectraSet> {
    (1usize..5, 1usize..7, 0usize..3)
        .prop_flat_map(|(ns, nw, nc)| {
            (
                prop::collection::hash_set(LABEL, ns),
                prop::collection::vec(LABEL, ns),
                0.5f64..900.0,
                prop::collection::vec(1e-3f64..25.0, nw),
                prop::collection::vec(finite_f64(), ns * nw),
                prop::collection::btree_set("[a-z][a-z0-9]{0,4}", nc),
                prop::collection::vec(conditions(nc), ns),
            )
        })
        .prop_map(|(ids, series, start, steps, values, components, conds)| {
            let components: Vec<String> = components.into_iter().collect();
            let samples = ids
                .into_iter()
                .zip(series)
                .zip(conds)
                .map(|((id, series), (t, path, prep, blank, totals, metadata))| {
                    let mut s = Sample::new(id, series, t, path);
                    s.preparation_temperature_k = prep;
                    if blank {
                        s.role = SampleRole::Blank;
                    }
                    s.totals_m = components.iter().cloned().zip(totals).collect();
                    s.metadata = metadata;
                    s
                })
                .collect::<Vec<_>>();
            let wavelengths: Array1<f64> = steps
                .iter()
                .scan(start, |w, step| {
                    *w += step;
                    Some(*w)
                })
                .collect();
            let absorbance = Array2::from_shape_vec((samples.len(), wavelengths.len()), values).unwrap();
            SpectraSet::new(wavelengths, absorbance, samples, components).unwrap()
        })
}

fn render(rows: &[Vec<String>], delimiter: char) -> String {
    rows.iter()
        .map(|r| r.join(&delimiter.to_string()))
        .collect::<Vec<_>>()
        .join("\n")
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(96))]

    #[test]
    fn written_tables_read_back_to_an_equal_set(set in spectra_sets()) {
        let dir = tempfile::tempdir().unwrap();
        let spectra = dir.path().join("spectra.csv");
        let samples = dir.path().join("samples.csv");
        write_spectra_table(&set, &spectra).unwrap();
        write_samples_table(&set, &samples).unwrap();
        let back = load_csv_set(&spectra, &samples).unwrap();
        prop_assert_eq!(back.wavelengths_nm(), set.wavelengths_nm());
        prop_assert_eq!(back.absorbance(), set.absorbance());
        prop_assert_eq!(back.components(), set.components());
        for (a, b) in back.samples().iter().zip(set.samples()) {
            prop_assert_eq!(&a.id, &b.id);
            prop_assert_eq!(&a.series, &b.series);
            prop_assert!((a.temperature_k - b.temperature_k).abs() <= 1e-12 * b.temperature_k);
            prop_assert!((a.preparation_temperature_k - b.preparation_temperature_k).abs()
                <= 1e-12 * b.preparation_temperature_k);
        }
        // shortest round-trip digits: not just close, identical
        prop_assert_eq!(back.samples(), set.samples());
    }

    #[test]
    fn any_delimiter_gives_the_same_spectra(
        ids in prop::collection::hash_set("[a-z]{1,4}", 1..5),
        rows in prop::collection::vec((1.0f64..2000.0, prop::collection::vec(-1.0f64..4.0, 4)), 1..6),
    ) {
        let ids: Vec<String> = ids.into_iter().collect();
        let mut table = vec![std::iter::once("wavelength_nm".to_string()).chain(ids.iter().cloned()).collect()];
        for (w, values) in &rows {
            table.push(std::iter::once(w.to_string()).chain(values.iter().take(ids.len()).map(f64::to_string)).collect());
        }
        let reference = parse_spectra_table(&render(&table, ','), None);
        for d in [';', '\t'] {
            let other = parse_spectra_table(&render(&table, d), None);
            match (&reference, &other) {
                (Ok(a), Ok(b)) => prop_assert_eq!(a, b),
                // duplicate wavelengths in the random rows: same error either way
                (Err(CsvError::DuplicateWavelength { .. }), Err(CsvError::DuplicateWavelength { .. })) => {}
                _ => prop_assert!(false, "{:?} vs {:?}", reference, other),
            }
        }
    }

    #[test]
    fn arbitrary_text_never_panics_either_parser(text in any::<String>()) {
        let _ = parse_spectra_table(&text, None);
        let _ = parse_samples_table(&text, None);
    }

    #[test]
    fn csv_like_noise_never_panics_either_parser(
        noise in "[,;\t\r\n\"# a-zA-Z0-9._+-]{0,300}",
    ) {
        let _ = parse_spectra_table(&noise, None);
        let _ = parse_spectra_table(&format!("wavelength_nm,a,b\n{noise}"), None);
        let _ = parse_samples_table(&noise, None);
        let _ = parse_samples_table(&format!("sample_id,series,temperature_K,path_cm,m_M,blank\n{noise}"), None);
    }

    #[test]
    fn arbitrary_bytes_in_files_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("x.csv");
        std::fs::write(&p, &bytes).unwrap();
        let _ = read_spectra_table(&p);
        let _ = read_samples_table(&p);
        let _ = load_csv_set(&p, &p);
        let text = String::from_utf8_lossy(&bytes);
        let _ = parse_spectra_table(&text, None);
        let _ = parse_samples_table(&text, None);
    }
}
