//! Fuzz target: the JCAMP-DX reader must return `Ok` or `Err` for any input, never panic,
//! hang or exhaust memory.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // Decode as `read_jcamp` does: UTF-8 when valid, Latin-1 otherwise.
    let text = match std::str::from_utf8(data) {
        Ok(s) => s.to_owned(),
        Err(_) => data.iter().map(|&b| char::from(b)).collect(),
    };
    if let Ok(spectra) = isosbestic::data::jcamp::parse_jcamp(&text, None) {
        for s in spectra {
            assert_eq!(s.wavelengths_nm.len(), s.absorbance.len());
            assert!(s.wavelengths_nm.windows(2).all(|w| w[1] > w[0]));
            assert!(s.absorbance.iter().all(|v| v.is_finite()));
        }
    }
});
