//! Reports: result types, CSV/JSON writers, SVG plots and the HTML page. Writers never print;
//! they write files atomically (temporary file, then rename).

pub mod atomic;
pub mod batch;
pub mod compare;
pub mod fit;
pub mod html;
pub mod inspect;
pub mod plots;
pub mod tables;
