//! Reports: result types, CSV/JSON writers and SVG plots. Writers never print; they write files
//! atomically (temporary file, then rename).

pub mod atomic;
pub mod html;
pub mod inspect;
pub mod plots;
pub mod tables;
