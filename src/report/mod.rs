//! Reports: result types, CSV/JSON writers and SVG plots. Writers never print; they write files
//! atomically (temporary file, then rename).

pub mod atomic;
pub mod fit;
pub mod inspect;
pub mod tables;
