//! SVG plots of spectra, resolved results and diagnostics.
//!
//! Every plot function returns the SVG document as a `String`; nothing is printed or written
//! implicitly. [`write_svg`] stores a document atomically. The inputs are plain data (slices,
//! ndarray views and labels), so a plot does not depend on how its numbers were produced; thin
//! `*_of` functions take the crate's result types ([`SpectraSet`], [`FactorSummary`],
//! [`HardFit`], [`VanThoffFit`]).
//!
//! | plot | function | axes |
//! |---|---|---|
//! | measured spectra coloured by temperature | [`measured_spectra`] | wavelength / nm, absorbance |
//! | pure spectra ε(λ) with ±2σ bands | [`pure_spectra`] | wavelength / nm, ε / (L mol⁻¹ cm⁻¹) |
//! | concentration profiles per series | [`concentration_profiles`] | temperature / °C, concentration / (mol/L) |
//! | van 't Hoff plot with 95 % band | [`vant_hoff`], [`vant_hoff_bands`] | 10³ K / T, ln K |
//! | residual map | [`residual_map`] | wavelength / nm, sample |
//! | singular values | [`singular_values`] | factor number, log₁₀ singular value |
//! | evolving factors | [`evolving_factors`] | sample (temperature order), log₁₀ singular value |
//!
//! Text is drawn as SVG `<text>` elements with a generic font family (no font files are read;
//! the viewer picks a sans-serif face). All colours, font sizes and the figure size come from one
//! [`Palette`].
//!
//! # Examples
//! ```
//! use isosbestic::report::plots::{measured_spectra, Palette};
//! use ndarray::array;
//! let wl = [400.0, 450.0, 500.0];
//! let a = array![[0.1, 0.5, 0.2], [0.2, 0.4, 0.3]]; // samples × wavelengths
//! let svg = measured_spectra("Measured spectra", &wl, a.view(), &[25.0, 60.0], &Palette::default())?;
//! assert!(svg.starts_with("<svg"));
//! assert!(svg.contains("wavelength / nm"));
//! # Ok::<(), isosbestic::report::plots::PlotError>(())
//! ```

use std::collections::BTreeMap;
use std::ops::Range;
use std::path::{Path, PathBuf};

use ndarray::{Array2, ArrayView2};
use plotters::chart::{ChartBuilder, ChartContext, SeriesLabelPosition};
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::{
    Cartesian2d, Circle, Color, Cross, DashedLineSeries, DrawingArea, EmptyElement, IntoDrawingArea,
    IntoFont, LineSeries, PathElement, Polygon, RGBColor, Rectangle, SVGBackend, ShapeStyle, Text, TextStyle,
    TriangleMarker,
};
use plotters::style::text_anchor::{HPos, Pos, VPos};
use thiserror::Error;

use crate::data::{SampleRole, SpectraSet};
use crate::factor::FactorSummary;
use crate::report::fit::VantHoffTable;
use crate::resolve::classic::ClassicMethod;
use crate::resolve::hard::HardFit;
use crate::thermo::VanThoffFit;

/// Largest number of wavelength columns drawn in a residual map; wider data are averaged over
/// contiguous wavelength bins (keeps the SVG small enough to embed in a report).
pub const MAX_HEAT_COLUMNS: usize = 160;
/// Largest number of sample rows drawn in a residual map; more samples are averaged in bins.
pub const MAX_HEAT_ROWS: usize = 120;

/// Why a plot could not be drawn or written.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum PlotError {
    /// An input that must hold data is empty.
    #[error("{plot}: nothing to plot, {what} is empty")]
    Empty {
        /// The plot being drawn.
        plot: &'static str,
        /// The empty input.
        what: &'static str,
    },
    /// Two inputs that must agree in length do not.
    #[error("{plot}: {what} has {found} entries, expected {expected}")]
    LengthMismatch {
        /// The plot being drawn.
        plot: &'static str,
        /// The input with the wrong length.
        what: &'static str,
        /// The length required by the other inputs.
        expected: usize,
        /// The length found.
        found: usize,
    },
    /// A value is NaN or infinite.
    #[error("{plot}: {what} is not finite ({value}) at row {row}, column {column}")]
    NonFinite {
        /// The plot being drawn.
        plot: &'static str,
        /// The input holding the value.
        what: &'static str,
        /// Row (sample, point or wavelength, as the input is laid out; 0 for a 1-D input).
        row: usize,
        /// Column (wavelength, species or factor; the index for a 1-D input).
        column: usize,
        /// The offending value.
        value: f64,
    },
    /// A value that must be positive (a temperature in kelvin, a singular value) is not.
    #[error("{plot}: {what} must be positive, found {value} at index {index}")]
    NonPositive {
        /// The plot being drawn.
        plot: &'static str,
        /// The input holding the value.
        what: &'static str,
        /// Index of the value.
        index: usize,
        /// The offending value.
        value: f64,
    },
    /// An index in the input points outside the data it refers to.
    #[error("{plot}: {what} refers to index {index}, but only {len} exist")]
    IndexOutOfRange {
        /// The plot being drawn.
        plot: &'static str,
        /// The input holding the index.
        what: &'static str,
        /// The index.
        index: usize,
        /// Number of valid entries.
        len: usize,
    },
    /// The result type lacks what the plot needs (e.g. a factor summary without evolving factors).
    #[error("{plot}: {reason}")]
    Missing {
        /// The plot being drawn.
        plot: &'static str,
        /// What is missing.
        reason: &'static str,
    },
    /// The confidence band of a van 't Hoff fit could not be computed.
    #[error("{plot}: cannot compute the confidence band: {source}")]
    Band {
        /// The plot being drawn.
        plot: &'static str,
        /// The error from the van 't Hoff fit.
        source: crate::thermo::ThermoError,
    },
    /// The drawing library reported an error.
    #[error("{plot}: drawing failed: {message}")]
    Drawing {
        /// The plot being drawn.
        plot: &'static str,
        /// The drawing library's message.
        message: String,
    },
    /// Writing the SVG file failed.
    #[error("cannot write {path}: {source}")]
    Write {
        /// The file being written.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
}

/// A colour as 8-bit red, green, blue.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rgb(pub u8, pub u8, pub u8);

impl Rgb {
    fn to_plotters(self) -> RGBColor {
        RGBColor(self.0, self.1, self.2)
    }

    /// Linear blend: `self` at t = 0, `other` at t = 1 (t clamped to [0, 1]).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::plots::Rgb;
    /// assert_eq!(Rgb(0, 0, 0).mix(Rgb(200, 100, 50), 0.5), Rgb(100, 50, 25));
    /// ```
    pub fn mix(self, other: Rgb, t: f64) -> Rgb {
        let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
        let c = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
        Rgb(c(self.0, other.0), c(self.1, other.1), c(self.2, other.2))
    }
}

/// The visual style of every plot, defined in one place: colours, scales, fonts and sizes.
#[derive(Debug, Clone, PartialEq)]
pub struct Palette {
    /// Figure background.
    pub background: Rgb,
    /// Titles, labels and tick text.
    pub text: Rgb,
    /// Axis lines.
    pub axis: Rgb,
    /// Major grid lines.
    pub grid: Rgb,
    /// Minor grid lines.
    pub grid_light: Rgb,
    /// Colours for categories (species, factors, point sets), used in turn.
    pub categories: Vec<Rgb>,
    /// Temperature scale: coldest, middle, hottest.
    pub temperature_scale: [Rgb; 3],
    /// Diverging scale for signed values: most negative, zero, most positive.
    pub diverging_scale: [Rgb; 3],
    /// Opacity of uncertainty bands (0 … 1).
    pub band_opacity: f64,
    /// Generic font family name written into the SVG (e.g. "sans-serif").
    pub font_family: String,
    /// Title font size, px.
    pub title_size: u32,
    /// Axis-label font size, px.
    pub label_size: u32,
    /// Tick-label and legend font size, px.
    pub tick_size: u32,
    /// Line width of data curves, px.
    pub line_width: u32,
    /// Marker size, px.
    pub marker_size: u32,
    /// Figure width and height, px.
    pub size: (u32, u32),
}

impl Default for Palette {
    /// A quiet neutral style: off-white background, dark slate text, light grid, muted
    /// category colours, a blue → violet → red temperature scale and a teal → ivory → rust
    /// diverging scale.
    fn default() -> Self {
        Palette {
            background: Rgb(255, 255, 253),
            text: Rgb(38, 44, 52),
            axis: Rgb(90, 96, 104),
            grid: Rgb(222, 224, 228),
            grid_light: Rgb(240, 241, 243),
            categories: vec![
                Rgb(31, 95, 153),
                Rgb(208, 120, 42),
                Rgb(47, 138, 91),
                Rgb(168, 50, 74),
                Rgb(107, 85, 163),
                Rgb(122, 106, 79),
                Rgb(42, 155, 179),
                Rgb(150, 140, 40),
            ],
            temperature_scale: [Rgb(46, 94, 170), Rgb(140, 95, 163), Rgb(200, 65, 58)],
            diverging_scale: [Rgb(35, 120, 140), Rgb(246, 245, 239), Rgb(190, 86, 46)],
            band_opacity: 0.22,
            font_family: "sans-serif".to_string(),
            title_size: 24,
            label_size: 19,
            tick_size: 16,
            line_width: 2,
            marker_size: 4,
            size: (960, 560),
        }
    }
}

impl Palette {
    /// The i-th category colour (cycling).
    pub fn category(&self, i: usize) -> Rgb {
        if self.categories.is_empty() {
            return self.text;
        }
        self.categories[i % self.categories.len()]
    }

    /// Colour of position `t` ∈ [0, 1] on the temperature scale (0 coldest).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::report::plots::Palette;
    /// let p = Palette::default();
    /// assert_eq!(p.temperature_colour(0.0), p.temperature_scale[0]);
    /// assert_eq!(p.temperature_colour(1.0), p.temperature_scale[2]);
    /// ```
    pub fn temperature_colour(&self, t: f64) -> Rgb {
        three_stop(&self.temperature_scale, t)
    }

    /// Colour of position `t` ∈ [−1, 1] on the diverging scale (0 the neutral middle).
    pub fn diverging_colour(&self, t: f64) -> Rgb {
        three_stop(&self.diverging_scale, 0.5 * (t + 1.0))
    }

    fn font(&self, size: u32) -> TextStyle<'_> {
        (self.font_family.as_str(), f64::from(size))
            .into_font()
            .color(&self.text.to_plotters())
    }
}

fn three_stop(stops: &[Rgb; 3], t: f64) -> Rgb {
    let t = if t.is_nan() { 0.5 } else { t.clamp(0.0, 1.0) };
    if t <= 0.5 {
        stops[0].mix(stops[1], 2.0 * t)
    } else {
        stops[1].mix(stops[2], 2.0 * t - 1.0)
    }
}

/// Marker shapes used to tell series or point sets apart.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum Marker {
    /// Filled circle.
    Circle,
    /// Filled triangle.
    Triangle,
    /// Open square.
    Square,
    /// Diagonal cross.
    Cross,
}

impl Marker {
    /// The i-th marker shape (cycling).
    pub fn nth(i: usize) -> Marker {
        [Marker::Circle, Marker::Triangle, Marker::Square, Marker::Cross][i % 4]
    }
}

/// Writes an SVG document to `path` atomically ([`crate::report::atomic::write_atomic`]).
///
/// # Errors
/// [`PlotError::Write`] with the path and the I/O error.
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{singular_values, write_svg, Palette};
/// let svg = singular_values("Singular values", &[10.0, 1.0, 0.01], Some(2), &Palette::default())?;
/// let dir = tempfile::tempdir().unwrap();
/// let p = dir.path().join("sv.svg");
/// write_svg(&p, &svg)?;
/// assert_eq!(std::fs::read_to_string(&p).unwrap(), svg);
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn write_svg(path: &Path, svg: &str) -> Result<(), PlotError> {
    crate::report::atomic::write_atomic(path, svg.as_bytes()).map_err(|source| PlotError::Write {
        path: path.to_path_buf(),
        source,
    })
}

// ---------------------------------------------------------------------------------------------
// validation helpers

fn check_1d(plot: &'static str, what: &'static str, v: &[f64]) -> Result<(), PlotError> {
    if v.is_empty() {
        return Err(PlotError::Empty { plot, what });
    }
    match v.iter().position(|x| !x.is_finite()) {
        Some(i) => Err(PlotError::NonFinite {
            plot,
            what,
            row: 0,
            column: i,
            value: v[i],
        }),
        None => Ok(()),
    }
}

fn check_2d(plot: &'static str, what: &'static str, m: ArrayView2<f64>) -> Result<(), PlotError> {
    if m.is_empty() {
        return Err(PlotError::Empty { plot, what });
    }
    match m.indexed_iter().find(|(_, x)| !x.is_finite()) {
        Some(((row, column), &value)) => Err(PlotError::NonFinite {
            plot,
            what,
            row,
            column,
            value,
        }),
        None => Ok(()),
    }
}

fn check_len(plot: &'static str, what: &'static str, expected: usize, found: usize) -> Result<(), PlotError> {
    if expected == found {
        Ok(())
    } else {
        Err(PlotError::LengthMismatch {
            plot,
            what,
            expected,
            found,
        })
    }
}

fn draw_err<E: std::fmt::Display>(plot: &'static str) -> impl Fn(E) -> PlotError {
    move |e| PlotError::Drawing {
        plot,
        message: e.to_string(),
    }
}

/// min and max of the values, widened so that a flat range still has a height, with a margin
/// of `pad` of the span on each side.
fn padded_range(values: impl Iterator<Item = f64>, pad: f64) -> Range<f64> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !(lo.is_finite() && hi.is_finite()) {
        return 0.0..1.0;
    }
    let span = hi - lo;
    if span <= f64::EPSILON * hi.abs().max(lo.abs()).max(1e-300) {
        let half = if lo.abs() > 0.0 { 0.05 * lo.abs() } else { 0.5 };
        return (lo - half)..(hi + half);
    }
    (lo - pad * span)..(hi + pad * span)
}

/// Extends the top of `y` so that a legend of `entries` lines (or a colour bar of the same
/// height) in the upper corner of the plotting area does not cover the data.
fn with_headroom(y: Range<f64>, entries: usize, palette: &Palette) -> Range<f64> {
    // plotting-area height: figure height less caption, tick labels and axis description
    let plot_px = f64::from(palette.size.1.saturating_sub(140).max(100));
    let legend_px = 14.0 + 1.45 * f64::from(palette.tick_size) * entries as f64;
    let f = (legend_px / plot_px).min(0.6);
    let span = y.end - y.start;
    y.start..(y.end + f * span / (1.0 - f))
}

/// Compact tick text: up to four significant digits, scientific for very small or large values,
/// and exact "0" for values that are zero up to rounding in the axis range.
fn tick_text(v: f64, span: f64) -> String {
    let a = v.abs();
    if a <= span.abs() * 1e-9 || a == 0.0 {
        return "0".to_string();
    }
    if !(1e-3..1e5).contains(&a) {
        let s = format!("{v:.1e}");
        return s.replace("e-", "e−").replace('-', "−");
    }
    let decimals = (3 - a.log10().floor() as i32).clamp(0, 6) as usize;
    fixed_trimmed(v, decimals).replace('-', "−")
}

/// `v` with `decimals` decimals, trailing zeros (and a bare decimal point) removed.
pub(crate) fn fixed_trimmed(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;
type Root<'b> = DrawingArea<SVGBackend<'b>, plotters::coord::Shift>;

/// Axis description of one chart: ranges, titles, label areas, tick text and whether a legend
/// is drawn. Ticks are numbers ([`tick_text`] over the axis span) unless a formatter is given.
struct Axes<'s> {
    x: Range<f64>,
    y: Range<f64>,
    x_desc: &'s str,
    y_desc: &'s str,
    right_margin: u32,
    y_label_area: u32,
    x_ticks: Option<&'s dyn Fn(&f64) -> String>,
    y_ticks: Option<&'s dyn Fn(&f64) -> String>,
    legend: bool,
}

impl<'s> Axes<'s> {
    /// Numeric ticks, a 64-pixel y label area, no extra right margin, a legend.
    fn new(x: Range<f64>, y: Range<f64>, x_desc: &'s str, y_desc: &'s str) -> Self {
        Self {
            x,
            y,
            x_desc,
            y_desc,
            right_margin: 0,
            y_label_area: 64,
            x_ticks: None,
            y_ticks: None,
            legend: true,
        }
    }
}

/// Draws one chart as an SVG document of the palette's size: the frame (background, title,
/// mesh, axis titles and ticks), then `draw` on the chart (with the root area, for colour bars
/// outside the plotting area), then the legend of the labelled series.
fn chart_svg(
    plot: &'static str,
    title: &str,
    axes: &Axes<'_>,
    palette: &Palette,
    draw: impl for<'a, 'b> FnOnce(&'a Root<'b>, &mut Chart<'a, 'b>) -> Result<(), PlotError>,
) -> Result<String, PlotError> {
    let (xs, ys) = (axes.x.end - axes.x.start, axes.y.end - axes.y.start);
    let x_numbers = move |v: &f64| tick_text(*v, xs);
    let y_numbers = move |v: &f64| tick_text(*v, ys);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, palette.size).into_drawing_area();
        root.fill(&palette.background.to_plotters())
            .map_err(draw_err(plot))?;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, palette.font(palette.title_size))
            .margin(14)
            .margin_right(14 + axes.right_margin)
            .x_label_area_size(52)
            .y_label_area_size(axes.y_label_area)
            .build_cartesian_2d(axes.x.clone(), axes.y.clone())
            .map_err(draw_err(plot))?;
        chart
            .configure_mesh()
            .x_desc(axes.x_desc)
            .y_desc(axes.y_desc)
            .axis_desc_style(palette.font(palette.label_size))
            .label_style(palette.font(palette.tick_size))
            .bold_line_style(palette.grid.to_plotters())
            .light_line_style(palette.grid_light.to_plotters())
            .axis_style(palette.axis.to_plotters())
            .x_labels(8)
            .y_labels(8)
            .x_label_formatter(axes.x_ticks.unwrap_or(&x_numbers))
            .y_label_formatter(axes.y_ticks.unwrap_or(&y_numbers))
            .draw()
            .map_err(draw_err(plot))?;
        draw(&root, &mut chart)?;
        if axes.legend {
            draw_legend(plot, &mut chart, palette)?;
        }
        root.present().map_err(draw_err(plot))?;
    }
    Ok(buf)
}

fn draw_legend<'a, 'b: 'a>(
    plot: &'static str,
    chart: &mut Chart<'a, 'b>,
    palette: &Palette,
) -> Result<(), PlotError> {
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .background_style(palette.background.to_plotters().mix(0.9))
        .border_style(palette.grid.to_plotters())
        .label_font(palette.font(palette.tick_size))
        .draw()
        .map_err(draw_err(plot))
}

/// Legend key of a line series: a short stroke.
fn line_key(style: ShapeStyle) -> impl Fn((i32, i32)) -> PathElement<(i32, i32)> {
    move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], style)
}

/// Legend key of a shaded band: a small filled rectangle.
fn swatch_key(shade: ShapeStyle) -> impl Fn((i32, i32)) -> Rectangle<(i32, i32)> {
    move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], shade)
}

/// A shaded band between `lower` and `upper` over `x` (in drawing order): the upper edge out,
/// the lower edge back; with a legend swatch when `label` is given.
fn draw_band(
    plot: &'static str,
    chart: &mut Chart<'_, '_>,
    x: &[f64],
    lower: &[f64],
    upper: &[f64],
    shade: ShapeStyle,
    label: Option<&str>,
) -> Result<(), PlotError> {
    let outline: Vec<(f64, f64)> = x
        .iter()
        .zip(upper)
        .map(|(&x, &u)| (x, u))
        .chain(x.iter().zip(lower).rev().map(|(&x, &l)| (x, l)))
        .collect();
    let ann = chart
        .draw_series(std::iter::once(Polygon::new(outline, shade)))
        .map_err(draw_err(plot))?;
    if let Some(l) = label {
        ann.label(l).legend(swatch_key(shade));
    }
    Ok(())
}

fn line_style(c: Rgb, palette: &Palette) -> ShapeStyle {
    c.to_plotters().stroke_width(palette.line_width)
}

fn draw_markers<'a, 'b: 'a>(
    plot: &'static str,
    chart: &mut Chart<'a, 'b>,
    points: &[(f64, f64)],
    marker: Marker,
    colour: Rgb,
    label: Option<&str>,
    palette: &Palette,
) -> Result<(), PlotError> {
    let c = colour.to_plotters();
    let s = palette.marker_size as i32;
    let filled = c.filled();
    let open = c.stroke_width(2);
    macro_rules! series {
        ($make:expr) => {{
            let ann = chart
                .draw_series(points.iter().map(|&p| $make(p)))
                .map_err(draw_err(plot))?;
            if let Some(l) = label {
                ann.label(l).legend(move |(x, y)| $make((x + 8, y)));
            }
        }};
    }
    match marker {
        Marker::Circle => series!(|p| Circle::new(p, s, filled)),
        Marker::Triangle => series!(|p| TriangleMarker::new(p, s + 1, filled)),
        Marker::Square => series!(|p| EmptyElement::at(p) + Rectangle::new([(-s, -s), (s, s)], open)),
        Marker::Cross => series!(|p| Cross::new(p, s, open)),
    }
    Ok(())
}

/// A horizontal colour bar inside the upper-left corner of the plotting area.
fn colour_bar_horizontal(
    plot: &'static str,
    root: &Root<'_>,
    chart: &Chart<'_, '_>,
    caption: &str,
    ends: (String, String),
    colour_at: impl Fn(f64) -> Rgb,
    palette: &Palette,
) -> Result<(), PlotError> {
    let (xr, yr) = chart.plotting_area().get_pixel_range();
    let (w, h, steps) = (150, 10, 30);
    let x0 = xr.start + 14;
    let y0 = yr.start + 30;
    root.draw(&Rectangle::new(
        [(x0 - 8, y0 - 24), (x0 + w + 8, y0 + h + 22)],
        palette.background.to_plotters().mix(0.9).filled(),
    ))
    .map_err(draw_err(plot))?;
    for i in 0..steps {
        let a = x0 + w * i / steps;
        let b = x0 + w * (i + 1) / steps;
        let t = (f64::from(i) + 0.5) / f64::from(steps);
        root.draw(&Rectangle::new(
            [(a, y0), (b, y0 + h)],
            colour_at(t).to_plotters().filled(),
        ))
        .map_err(draw_err(plot))?;
    }
    let small = palette.font(palette.tick_size);
    root.draw(&Text::new(caption.to_string(), (x0, y0 - 18), small.clone()))
        .map_err(draw_err(plot))?;
    root.draw(&Text::new(ends.0, (x0, y0 + h + 4), small.clone()))
        .map_err(draw_err(plot))?;
    let right = small.pos(Pos::new(HPos::Right, VPos::Top));
    root.draw(&Text::new(ends.1, (x0 + w, y0 + h + 4), right))
        .map_err(draw_err(plot))?;
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// (a) measured spectra

/// Measured spectra, one curve per sample, coloured by temperature on the palette's
/// temperature scale, with a colour bar giving the temperature range in °C.
///
/// `absorbance` is samples × wavelengths (D); `temperatures_c` has one entry per sample.
///
/// # Errors
/// [`PlotError::Empty`] for no wavelengths or samples; [`PlotError::LengthMismatch`] when the
/// shapes disagree; [`PlotError::NonFinite`] naming the sample (row) and wavelength index
/// (column) of a NaN or infinite value.
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{measured_spectra, Palette, PlotError};
/// use ndarray::array;
/// let a = array![[0.1, f64::NAN]];
/// let e = measured_spectra("t", &[400.0, 410.0], a.view(), &[25.0], &Palette::default());
/// assert!(matches!(e, Err(PlotError::NonFinite { row: 0, column: 1, .. })));
/// ```
pub fn measured_spectra(
    title: &str,
    wavelengths_nm: &[f64],
    absorbance: ArrayView2<f64>,
    temperatures_c: &[f64],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "measured spectra";
    check_1d(PLOT, "wavelengths", wavelengths_nm)?;
    check_1d(PLOT, "temperatures", temperatures_c)?;
    check_len(
        PLOT,
        "absorbance columns",
        wavelengths_nm.len(),
        absorbance.ncols(),
    )?;
    check_len(PLOT, "temperatures", absorbance.nrows(), temperatures_c.len())?;
    check_2d(PLOT, "absorbance", absorbance)?;
    let t_lo = temperatures_c.iter().copied().fold(f64::INFINITY, f64::min);
    let t_hi = temperatures_c.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let t_pos = |t: f64| {
        if t_hi > t_lo {
            (t - t_lo) / (t_hi - t_lo)
        } else {
            0.5
        }
    };
    let x = padded_range(wavelengths_nm.iter().copied(), 0.0);
    let y = with_headroom(padded_range(absorbance.iter().copied(), 0.05), 3, palette);
    let axes = Axes {
        y_label_area: 70,
        legend: false,
        ..Axes::new(x, y, "wavelength / nm", "absorbance")
    };
    chart_svg(PLOT, title, &axes, palette, |root, chart| {
        // hottest last so that warm curves sit on top; ties keep input order
        let mut order: Vec<usize> = (0..temperatures_c.len()).collect();
        order.sort_by(|&a, &b| temperatures_c[a].total_cmp(&temperatures_c[b]));
        for &i in &order {
            let colour = palette.temperature_colour(t_pos(temperatures_c[i]));
            let row = absorbance.row(i);
            let pts = wavelengths_nm.iter().copied().zip(row.iter().copied());
            chart
                .draw_series(LineSeries::new(pts, colour.to_plotters().stroke_width(1)))
                .map_err(draw_err(PLOT))?;
        }
        colour_bar_horizontal(
            PLOT,
            root,
            chart,
            "temperature / °C",
            (format!("{t_lo:.1}"), format!("{t_hi:.1}")),
            |t| palette.temperature_colour(t),
            palette,
        )
    })
}

/// [`measured_spectra`] of the measurement samples of a spectra set (blanks left out).
///
/// # Errors
/// As [`measured_spectra`]; [`PlotError::Empty`] when the set holds only blanks.
pub fn measured_spectra_of(set: &SpectraSet, palette: &Palette) -> Result<String, PlotError> {
    let rows: Vec<usize> = (0..set.n_samples())
        .filter(|&i| set.samples()[i].role == SampleRole::Measurement)
        .collect();
    let d = set.absorbance().select(ndarray::Axis(0), &rows);
    let t: Vec<f64> = rows.iter().map(|&i| set.samples()[i].temperature_c()).collect();
    let wl = set.wavelengths_nm().to_vec();
    measured_spectra("Measured spectra", &wl, d.view(), &t, palette)
}

// ---------------------------------------------------------------------------------------------
// (b) pure spectra

/// Resolved pure spectra ε(λ), one colour per species, each with a ±2σ band when standard
/// errors are given.
///
/// `spectra` and `standard_errors` are wavelengths × species (S), L mol⁻¹ cm⁻¹; `species`
/// names the columns.
///
/// # Errors
/// [`PlotError::Empty`], [`PlotError::LengthMismatch`] for disagreeing shapes,
/// [`PlotError::NonFinite`] naming the wavelength index (row) and species (column).
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{pure_spectra, Palette};
/// use ndarray::array;
/// let s = array![[100.0, 10.0], [300.0, 50.0], [120.0, 400.0]];
/// let se = array![[5.0, 2.0], [6.0, 2.0], [5.0, 8.0]];
/// let svg = pure_spectra("Pure spectra", &[400.0, 450.0, 500.0], s.view(), Some(se.view()),
///                        &["M", "ML"], &Palette::default())?;
/// assert_eq!(svg.matches("<polygon").count(), 2); // one band per species
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn pure_spectra(
    title: &str,
    wavelengths_nm: &[f64],
    spectra: ArrayView2<f64>,
    standard_errors: Option<ArrayView2<f64>>,
    species: &[&str],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "pure spectra";
    check_1d(PLOT, "wavelengths", wavelengths_nm)?;
    check_len(PLOT, "spectra rows", wavelengths_nm.len(), spectra.nrows())?;
    check_len(PLOT, "species names", spectra.ncols(), species.len())?;
    check_2d(PLOT, "spectra", spectra)?;
    if let Some(se) = standard_errors {
        check_len(PLOT, "standard-error rows", spectra.nrows(), se.nrows())?;
        check_len(PLOT, "standard-error columns", spectra.ncols(), se.ncols())?;
        check_2d(PLOT, "standard errors", se)?;
    }
    let band = |i: usize, k: usize| standard_errors.map_or(0.0, |se| 2.0 * se[[i, k]].abs());
    let mut extremes = Vec::with_capacity(2 * spectra.len());
    for ((i, k), &v) in spectra.indexed_iter() {
        extremes.push(v - band(i, k));
        extremes.push(v + band(i, k));
    }
    let x = padded_range(wavelengths_nm.iter().copied(), 0.0);
    let entries = species.len() + usize::from(standard_errors.is_some());
    let y = with_headroom(padded_range(extremes.into_iter(), 0.05), entries, palette);
    let axes = Axes {
        y_label_area: 76,
        ..Axes::new(x, y, "wavelength / nm", "molar absorptivity ε / (L mol⁻¹ cm⁻¹)")
    };
    chart_svg(PLOT, title, &axes, palette, |_, chart| {
        for (k, name) in species.iter().enumerate() {
            let colour = palette.category(k);
            if standard_errors.is_some() {
                let n = wavelengths_nm.len();
                let lower: Vec<f64> = (0..n).map(|i| spectra[[i, k]] - band(i, k)).collect();
                let upper: Vec<f64> = (0..n).map(|i| spectra[[i, k]] + band(i, k)).collect();
                let shade = colour.to_plotters().mix(palette.band_opacity).filled();
                draw_band(PLOT, chart, wavelengths_nm, &lower, &upper, shade, None)?;
            }
            let column = spectra.column(k);
            let pts = wavelengths_nm.iter().copied().zip(column.iter().copied());
            let style = line_style(colour, palette);
            chart
                .draw_series(LineSeries::new(pts, style))
                .map_err(draw_err(PLOT))?
                .label(*name)
                .legend(line_key(style));
        }
        if standard_errors.is_some() {
            let shade = palette.text.to_plotters().mix(palette.band_opacity).filled();
            chart
                .draw_series(std::iter::empty::<Polygon<(f64, f64)>>())
                .map_err(draw_err(PLOT))?
                .label("band: ±2 standard errors")
                .legend(swatch_key(shade));
        }
        Ok(())
    })
}

/// [`pure_spectra`] of a global fit: the ε₀ block (spectra at the fit's reference temperature)
/// of every absorbing species with its standard errors.
///
/// # Errors
/// As [`pure_spectra`]; [`PlotError::LengthMismatch`] when the fit's spectra do not have one
/// row per wavelength.
pub fn pure_spectra_of(
    fit: &HardFit,
    wavelengths_nm: &[f64],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "pure spectra";
    let m = fit.absorbing_species.len();
    if m == 0 || fit.spectra.ncols() < m {
        return Err(PlotError::Empty {
            plot: PLOT,
            what: "absorbing species",
        });
    }
    check_len(
        PLOT,
        "standard-error columns",
        fit.spectra.ncols(),
        fit.spectra_standard_errors.ncols(),
    )?;
    let names: Vec<&str> = fit.absorbing_species.iter().map(String::as_str).collect();
    pure_spectra(
        "Resolved pure spectra",
        wavelengths_nm,
        fit.spectra.slice(ndarray::s![.., ..m]),
        Some(fit.spectra_standard_errors.slice(ndarray::s![.., ..m])),
        &names,
        palette,
    )
}

// ---------------------------------------------------------------------------------------------
// (c) concentration profiles

/// One series' concentrations for [`concentration_profiles`].
#[derive(Debug, Clone)]
pub struct ProfileSeries<'a> {
    /// Series label shown in the legend.
    pub label: &'a str,
    /// Temperature of each sample, °C.
    pub temperatures_c: &'a [f64],
    /// Concentrations, samples × species (C), mol/L.
    pub concentrations: ArrayView2<'a, f64>,
}

/// Concentration profiles versus temperature: one colour per species, one marker shape per
/// series, points joined in order of temperature.
///
/// # Errors
/// [`PlotError::Empty`] for no series or species; [`PlotError::LengthMismatch`] when a series'
/// rows and temperatures or its columns and the species names disagree;
/// [`PlotError::NonFinite`] naming the sample (row) and species (column).
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{concentration_profiles, Palette, ProfileSeries};
/// use ndarray::array;
/// let c = array![[1e-3, 0.0], [6e-4, 4e-4], [2e-4, 8e-4]];
/// let s = ProfileSeries { label: "low ligand", temperatures_c: &[10.0, 40.0, 70.0], concentrations: c.view() };
/// let svg = concentration_profiles("Profiles", &[s], &["M", "ML"], &Palette::default())?;
/// assert!(svg.contains("temperature / °C") && svg.contains("low ligand"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn concentration_profiles(
    title: &str,
    series: &[ProfileSeries<'_>],
    species: &[&str],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "concentration profiles";
    if series.is_empty() {
        return Err(PlotError::Empty {
            plot: PLOT,
            what: "series",
        });
    }
    if species.is_empty() {
        return Err(PlotError::Empty {
            plot: PLOT,
            what: "species",
        });
    }
    for s in series {
        check_1d(PLOT, "temperatures", s.temperatures_c)?;
        check_len(
            PLOT,
            "concentration rows",
            s.temperatures_c.len(),
            s.concentrations.nrows(),
        )?;
        check_len(PLOT, "species names", s.concentrations.ncols(), species.len())?;
        check_2d(PLOT, "concentrations", s.concentrations)?;
    }
    let x = padded_range(series.iter().flat_map(|s| s.temperatures_c.iter().copied()), 0.04);
    let y = with_headroom(
        padded_range(
            series
                .iter()
                .flat_map(|s| s.concentrations.iter().copied())
                .chain(std::iter::once(0.0)),
            0.05,
        ),
        species.len() + series.len(),
        palette,
    );
    let axes = Axes {
        y_label_area: 80,
        ..Axes::new(x, y, "temperature / °C", "concentration / (mol/L)")
    };
    chart_svg(PLOT, title, &axes, palette, |_, chart| {
        for (si, s) in series.iter().enumerate() {
            let mut order: Vec<usize> = (0..s.temperatures_c.len()).collect();
            order.sort_by(|&a, &b| s.temperatures_c[a].total_cmp(&s.temperatures_c[b]));
            for (k, name) in species.iter().enumerate() {
                let colour = palette.category(k);
                let pts: Vec<(f64, f64)> = order
                    .iter()
                    .map(|&i| (s.temperatures_c[i], s.concentrations[[i, k]]))
                    .collect();
                let ann = chart
                    .draw_series(LineSeries::new(pts.iter().copied(), line_style(colour, palette)))
                    .map_err(draw_err(PLOT))?;
                if si == 0 {
                    let style = line_style(colour, palette);
                    ann.label(*name).legend(line_key(style));
                }
                draw_markers(PLOT, chart, &pts, Marker::nth(si), colour, None, palette)?;
            }
            // legend entry for the series' marker, in a neutral colour
            let label = format!("series {}", s.label);
            draw_markers(
                PLOT,
                chart,
                &[],
                Marker::nth(si),
                palette.axis,
                Some(&label),
                palette,
            )?;
        }
        Ok(())
    })
}

/// [`concentration_profiles`] of a global fit, one profile set per series of the spectra set
/// the fit was made on.
///
/// # Errors
/// As [`concentration_profiles`]; [`PlotError::LengthMismatch`] when the fit's concentrations
/// do not have one row per sample of `set`.
pub fn concentration_profiles_of(
    fit: &HardFit,
    set: &SpectraSet,
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "concentration profiles";
    check_len(
        PLOT,
        "concentration rows",
        set.n_samples(),
        fit.concentrations.nrows(),
    )?;
    let mut groups: BTreeMap<&str, Vec<usize>> = BTreeMap::new();
    for (i, s) in set.samples().iter().enumerate() {
        if s.role == SampleRole::Measurement {
            groups.entry(s.series.as_str()).or_default().push(i);
        }
    }
    // Absorbing species only: a ligand in large excess would flatten every other profile.
    let cols: Vec<usize> = fit
        .absorbing_species
        .iter()
        .filter_map(|name| fit.species.iter().position(|s| s == name))
        .collect();
    let data: Vec<(&str, Vec<f64>, Array2<f64>)> = groups
        .into_iter()
        .map(|(label, rows)| {
            let t = rows.iter().map(|&i| set.samples()[i].temperature_c()).collect();
            let c = fit
                .concentrations
                .select(ndarray::Axis(0), &rows)
                .select(ndarray::Axis(1), &cols);
            (label, t, c)
        })
        .collect();
    let series: Vec<ProfileSeries<'_>> = data
        .iter()
        .map(|(label, t, c)| ProfileSeries {
            label,
            temperatures_c: t,
            concentrations: c.view(),
        })
        .collect();
    let names: Vec<&str> = fit.absorbing_species.iter().map(String::as_str).collect();
    concentration_profiles(
        "Concentration profiles of the absorbing species",
        &series,
        &names,
        palette,
    )
}

// ---------------------------------------------------------------------------------------------
// (d) van 't Hoff

/// A set of ln K points for [`vant_hoff`].
#[derive(Debug, Clone)]
pub struct LnKPoints<'a> {
    /// Legend label.
    pub label: &'a str,
    /// Temperatures, K.
    pub temperatures_k: &'a [f64],
    /// ln K at each temperature.
    pub ln_k: &'a [f64],
}

/// A fitted ln K curve with its confidence band for [`vant_hoff`].
#[derive(Debug, Clone)]
pub struct LnKBand<'a> {
    /// Legend label of the line.
    pub label: &'a str,
    /// Confidence level of the band, e.g. 0.95 (for the legend).
    pub level: f64,
    /// Temperatures, K (any order).
    pub temperatures_k: &'a [f64],
    /// Fitted ln K.
    pub ln_k: &'a [f64],
    /// Lower band limit.
    pub lower: &'a [f64],
    /// Upper band limit.
    pub upper: &'a [f64],
}

/// The van 't Hoff plot: ln K against 10³ K / T, with a fitted line and its confidence band
/// (when given) and any number of point sets, each in its own marker and colour.
///
/// # Errors
/// [`PlotError::Empty`] when there is neither a band nor points; [`PlotError::LengthMismatch`];
/// [`PlotError::NonFinite`]; [`PlotError::NonPositive`] for a temperature ≤ 0 K.
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{vant_hoff, LnKPoints, Palette};
/// let pts = LnKPoints { label: "classic estimates", temperatures_k: &[290.0, 310.0, 330.0], ln_k: &[3.1, 2.6, 2.2] };
/// let svg = vant_hoff("van 't Hoff plot", None, &[pts], &Palette::default())?;
/// assert!(svg.contains("ln K") && svg.contains("10³ K / T"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn vant_hoff(
    title: &str,
    band: Option<&LnKBand<'_>>,
    points: &[LnKPoints<'_>],
    palette: &Palette,
) -> Result<String, PlotError> {
    vant_hoff_bands(
        title,
        band.map(std::slice::from_ref).unwrap_or_default(),
        points,
        palette,
    )
}

/// As [`vant_hoff`] with any number of fitted curves (e.g. one per species of a model with
/// stepwise complexes), each with its band in its own colour; the point sets follow in the
/// next colours.
///
/// # Errors
/// As [`vant_hoff`].
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{vant_hoff_bands, LnKBand, Palette};
/// let t = [290.0, 330.0];
/// let b1 = LnKBand { label: "ln β ML", level: 0.95, temperatures_k: &t, ln_k: &[3.0, 2.0], lower: &[2.9, 1.9], upper: &[3.1, 2.1] };
/// let b2 = LnKBand { label: "ln β ML2", ln_k: &[5.0, 3.5], lower: &[4.8, 3.3], upper: &[5.2, 3.7], ..b1.clone() };
/// let svg = vant_hoff_bands("van 't Hoff plot", &[b1, b2], &[], &Palette::default())?;
/// assert_eq!(svg.matches("<polygon").count(), 2);
/// assert!(svg.contains("ln β ML2"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn vant_hoff_bands(
    title: &str,
    bands: &[LnKBand<'_>],
    points: &[LnKPoints<'_>],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "van 't Hoff";
    let check_t = |what: &'static str, t: &[f64]| -> Result<(), PlotError> {
        check_1d(PLOT, what, t)?;
        match t.iter().position(|&v| v <= 0.0) {
            Some(index) => Err(PlotError::NonPositive {
                plot: PLOT,
                what,
                index,
                value: t[index],
            }),
            None => Ok(()),
        }
    };
    if bands.is_empty() && points.is_empty() {
        return Err(PlotError::Empty {
            plot: PLOT,
            what: "band and points",
        });
    }
    let mut xs_all = Vec::new();
    let mut ys_all = Vec::new();
    for b in bands {
        check_t("band temperatures", b.temperatures_k)?;
        let n = b.temperatures_k.len();
        for (what, v) in [
            ("band ln K", b.ln_k),
            ("band lower limit", b.lower),
            ("band upper limit", b.upper),
        ] {
            check_len(PLOT, what, n, v.len())?;
            check_1d(PLOT, what, v)?;
            ys_all.extend_from_slice(v);
        }
        xs_all.extend(b.temperatures_k.iter().map(|t| 1e3 / t));
    }
    for p in points {
        check_t("point temperatures", p.temperatures_k)?;
        check_len(PLOT, "point ln K", p.temperatures_k.len(), p.ln_k.len())?;
        check_1d(PLOT, "point ln K", p.ln_k)?;
        xs_all.extend(p.temperatures_k.iter().map(|t| 1e3 / t));
        ys_all.extend_from_slice(p.ln_k);
    }
    let x = padded_range(xs_all.into_iter(), 0.04);
    let entries = points.len() + 2 * bands.len();
    let y = with_headroom(padded_range(ys_all.into_iter(), 0.06), entries, palette);
    let axes = Axes::new(x, y, "10³ K / T  (inverse temperature)", "ln K");
    chart_svg(PLOT, title, &axes, palette, |_, chart| {
        for (k, b) in bands.iter().enumerate() {
            // a single curve is drawn in the text colour over a shaded band, several in their own colours
            let colour = if bands.len() == 1 {
                palette.text
            } else {
                palette.category(k)
            };
            let mut order: Vec<usize> = (0..b.temperatures_k.len()).collect();
            order.sort_by(|&i, &j| b.temperatures_k[j].total_cmp(&b.temperatures_k[i]));
            let inverse_t: Vec<f64> = order.iter().map(|&i| 1e3 / b.temperatures_k[i]).collect();
            let lower: Vec<f64> = order.iter().map(|&i| b.lower[i]).collect();
            let upper: Vec<f64> = order.iter().map(|&i| b.upper[i]).collect();
            let shade = palette
                .category(k)
                .to_plotters()
                .mix(palette.band_opacity)
                .filled();
            let band_label = if bands.len() == 1 {
                format!("{:.0} % confidence band", 100.0 * b.level)
            } else {
                format!("{:.0} % band, {}", 100.0 * b.level, b.label)
            };
            draw_band(PLOT, chart, &inverse_t, &lower, &upper, shade, Some(&band_label))?;
            let style = line_style(colour, palette);
            chart
                .draw_series(LineSeries::new(
                    order.iter().map(|&i| (1e3 / b.temperatures_k[i], b.ln_k[i])),
                    style,
                ))
                .map_err(draw_err(PLOT))?
                .label(b.label)
                .legend(line_key(style));
        }
        let first_point_colour = bands.len().max(1);
        for (k, p) in points.iter().enumerate() {
            let pts: Vec<(f64, f64)> = p
                .temperatures_k
                .iter()
                .zip(p.ln_k)
                .map(|(t, l)| (1e3 / t, *l))
                .collect();
            draw_markers(
                PLOT,
                chart,
                &pts,
                Marker::nth(k),
                palette.category(k + first_point_colour),
                Some(p.label),
                palette,
            )?;
        }
        Ok(())
    })
}

/// [`vant_hoff`] of a van 't Hoff fit: its points (labelled `points_label`), the fitted line and
/// 95 % band ([`VanThoffFit::band`]) over the fitted temperature range, plus `extra` point sets
/// (e.g. classic estimates).
///
/// # Errors
/// As [`vant_hoff`]; [`PlotError::Band`] if the band cannot be computed.
pub fn vant_hoff_of(
    fit: &VanThoffFit,
    points_label: &str,
    extra: &[LnKPoints<'_>],
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "van 't Hoff";
    check_1d(PLOT, "fit temperatures", &fit.temperatures_k)?;
    let lo = fit.temperatures_k.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = fit
        .temperatures_k
        .iter()
        .copied()
        .fold(f64::NEG_INFINITY, f64::max);
    let n = 60;
    let grid: Vec<f64> = (0..n)
        .map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64)
        .collect();
    let band = fit
        .band(&grid, 0.95)
        .map_err(|source| PlotError::Band { plot: PLOT, source })?;
    let t: Vec<f64> = band.iter().map(|b| b.temperature_k).collect();
    let l: Vec<f64> = band.iter().map(|b| b.ln_k).collect();
    let lower: Vec<f64> = band.iter().map(|b| b.lower).collect();
    let upper: Vec<f64> = band.iter().map(|b| b.upper).collect();
    let b = LnKBand {
        label: "fitted ln K",
        level: 0.95,
        temperatures_k: &t,
        ln_k: &l,
        lower: &lower,
        upper: &upper,
    };
    let mut sets = vec![LnKPoints {
        label: points_label,
        temperatures_k: &fit.temperatures_k,
        ln_k: &fit.ln_k,
    }];
    sets.extend(extra.iter().cloned());
    vant_hoff("van 't Hoff plot", Some(&b), &sets, palette)
}

/// [`vant_hoff_bands`] of a global fit's van 't Hoff table: the fitted ln β(T) of every formed
/// species with its 95 % band, and the classic direct and mass-balance ln K points when the
/// table holds them.
///
/// # Errors
/// As [`vant_hoff_bands`]; [`PlotError::Empty`] when the table holds no curve and no point.
pub fn vant_hoff_of_table(table: &VantHoffTable, palette: &Palette) -> Result<String, PlotError> {
    // a curve without a band (undefined standard errors) gets a zero-width band and says so
    let labels: Vec<String> = table
        .curves
        .iter()
        .map(|c| match (&c.lower, &c.upper) {
            (Some(_), Some(_)) => format!("ln β {}, global fit", c.species),
            _ => format!("ln β {}, global fit (no band)", c.species),
        })
        .collect();
    let bands: Vec<LnKBand<'_>> = table
        .curves
        .iter()
        .zip(&labels)
        .map(|(c, label)| LnKBand {
            label,
            level: c.level,
            temperatures_k: &c.temperatures_k,
            ln_k: &c.ln_k,
            lower: c.lower.as_deref().unwrap_or(&c.ln_k),
            upper: c.upper.as_deref().unwrap_or(&c.ln_k),
        })
        .collect();
    let (td, ld) = table.classic_points(ClassicMethod::Direct);
    let (tm, lm) = table.classic_points(ClassicMethod::MassBalance);
    let (direct_label, mb_label) = match &table.classic {
        Some(c) => (
            format!(
                "classic direct ({:.0} nm, {:.0} nm)",
                c.free_wavelength_nm, c.complex_wavelength_nm
            ),
            format!("classic mass balance ({:.0} nm)", c.complex_wavelength_nm),
        ),
        None => (String::new(), String::new()),
    };
    let mut points = Vec::new();
    if !td.is_empty() {
        points.push(LnKPoints {
            label: &direct_label,
            temperatures_k: &td,
            ln_k: &ld,
        });
    }
    if !tm.is_empty() {
        points.push(LnKPoints {
            label: &mb_label,
            temperatures_k: &tm,
            ln_k: &lm,
        });
    }
    vant_hoff_bands("van 't Hoff plot", &bands, &points, palette)
}

// ---------------------------------------------------------------------------------------------
// (e) residual map

/// Contiguous bins of 0 … n − 1, at most `max` of them.
fn bins(n: usize, max: usize) -> Vec<Range<usize>> {
    let k = n.min(max).max(1);
    (0..k).map(|b| (b * n / k)..((b + 1) * n / k)).collect()
}

/// Residual map: residuals (samples × wavelengths, absorbance units) as a heat map with the
/// palette's diverging scale, symmetric about zero (±max |residual|), with a colour bar.
///
/// Wide or tall data are averaged over contiguous bins to at most [`MAX_HEAT_COLUMNS`] ×
/// [`MAX_HEAT_ROWS`] cells; a binned row is labelled by its first sample.
///
/// # Errors
/// [`PlotError::Empty`], [`PlotError::LengthMismatch`], [`PlotError::NonFinite`] naming the
/// sample (row) and wavelength index (column).
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{residual_map, Palette};
/// use ndarray::array;
/// let r = array![[0.001, -0.002, 0.0], [0.0, 0.001, -0.001]];
/// let svg = residual_map("Residuals", &[400.0, 410.0, 420.0], &["s1", "s2"], r.view(), &Palette::default())?;
/// assert!(svg.contains("wavelength / nm"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn residual_map(
    title: &str,
    wavelengths_nm: &[f64],
    sample_labels: &[&str],
    residuals: ArrayView2<f64>,
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "residual map";
    check_1d(PLOT, "wavelengths", wavelengths_nm)?;
    if sample_labels.is_empty() {
        return Err(PlotError::Empty {
            plot: PLOT,
            what: "sample labels",
        });
    }
    check_len(PLOT, "residual columns", wavelengths_nm.len(), residuals.ncols())?;
    check_len(PLOT, "sample labels", residuals.nrows(), sample_labels.len())?;
    check_2d(PLOT, "residuals", residuals)?;
    let nw = wavelengths_nm.len();
    // cell edges in wavelength: midpoints between neighbours, extended by half a step at the ends
    let edge = |j: usize| -> f64 {
        if nw == 1 {
            return wavelengths_nm[0] + if j == 0 { -0.5 } else { 0.5 };
        }
        if j == 0 {
            wavelengths_nm[0] - 0.5 * (wavelengths_nm[1] - wavelengths_nm[0])
        } else if j == nw {
            wavelengths_nm[nw - 1] + 0.5 * (wavelengths_nm[nw - 1] - wavelengths_nm[nw - 2])
        } else {
            0.5 * (wavelengths_nm[j - 1] + wavelengths_nm[j])
        }
    };
    let cols = bins(nw, MAX_HEAT_COLUMNS);
    let rows = bins(residuals.nrows(), MAX_HEAT_ROWS);
    let cells = Array2::from_shape_fn((rows.len(), cols.len()), |(r, c)| {
        let block = residuals.slice(ndarray::s![rows[r].clone(), cols[c].clone()]);
        block.sum() / block.len() as f64
    });
    let limit = cells.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let scale = if limit > 0.0 { limit } else { 1.0 };
    let x = padded_range([edge(0), edge(nw)].into_iter(), 0.0);
    let y = -0.5..(rows.len() as f64 - 0.5);
    let row_label = |v: &f64| -> String {
        let r = v.round();
        if (v - r).abs() > 1e-6 || r < 0.0 || r as usize >= rows.len() {
            return String::new();
        }
        let name = sample_labels[rows[r as usize].start];
        if name.chars().count() > 12 {
            format!("{}…", name.chars().take(11).collect::<String>())
        } else {
            name.to_string()
        }
    };
    let axes = Axes {
        right_margin: 96,
        y_label_area: 96,
        y_ticks: Some(&row_label),
        legend: false,
        ..Axes::new(x, y, "wavelength / nm", "sample")
    };
    chart_svg(PLOT, title, &axes, palette, |root, chart| {
        let rects = cells.indexed_iter().map(|((r, c), &v)| {
            let x0 = edge(cols[c].start);
            let x1 = edge(cols[c].end);
            let colour = palette.diverging_colour(v / scale).to_plotters();
            Rectangle::new([(x0, r as f64 - 0.5), (x1, r as f64 + 0.5)], colour.filled())
        });
        chart.draw_series(rects).map_err(draw_err(PLOT))?;
        // vertical colour bar right of the plotting area
        let (xr, yr) = chart.plotting_area().get_pixel_range();
        let (x0, w, steps) = (xr.end + 22, 14, 40);
        let (top, bottom) = (yr.start + 34, yr.end - 4);
        for i in 0..steps {
            let a = top + (bottom - top) * i / steps;
            let b = top + (bottom - top) * (i + 1) / steps;
            let t = 1.0 - 2.0 * (f64::from(i) + 0.5) / f64::from(steps);
            root.draw(&Rectangle::new(
                [(x0, a), (x0 + w, b)],
                palette.diverging_colour(t).to_plotters().filled(),
            ))
            .map_err(draw_err(PLOT))?;
        }
        let small = palette.font(palette.tick_size);
        let at =
            |s: String, y: i32| Text::new(s, (x0 + w + 4, y), small.pos(Pos::new(HPos::Left, VPos::Center)));
        root.draw(&Text::new(
            "residual / AU".to_string(),
            (x0 - 10, top - 30),
            small.clone(),
        ))
        .map_err(draw_err(PLOT))?;
        root.draw(&at(tick_text(limit, limit), top))
            .map_err(draw_err(PLOT))?;
        root.draw(&at("0".to_string(), (top + bottom) / 2))
            .map_err(draw_err(PLOT))?;
        root.draw(&at(tick_text(-limit, limit), bottom))
            .map_err(draw_err(PLOT))?;
        Ok(())
    })
}

// ---------------------------------------------------------------------------------------------
// (f) singular values and evolving factors

/// Singular values on a log scale (log₁₀ s against factor number), with the chosen rank marked
/// when given. Zero singular values are drawn at s₁·10⁻¹⁶ (the numerical zero level).
///
/// # Errors
/// [`PlotError::Empty`]; [`PlotError::NonFinite`]; [`PlotError::NonPositive`] for a negative
/// singular value or when all are zero.
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{singular_values, Palette};
/// let svg = singular_values("Singular values", &[12.0, 3.0, 0.01, 0.009], Some(2), &Palette::default())?;
/// assert!(svg.contains("factor number") && svg.contains("rank 2"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn singular_values(
    title: &str,
    values: &[f64],
    rank: Option<usize>,
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "singular values";
    check_1d(PLOT, "singular values", values)?;
    if let Some(index) = values.iter().position(|&v| v < 0.0) {
        return Err(PlotError::NonPositive {
            plot: PLOT,
            what: "singular values",
            index,
            value: values[index],
        });
    }
    let top = values.iter().copied().fold(0.0_f64, f64::max);
    if top <= 0.0 {
        return Err(PlotError::NonPositive {
            plot: PLOT,
            what: "largest singular value",
            index: 0,
            value: top,
        });
    }
    let floor = top * 1e-16;
    let pts: Vec<(f64, f64)> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| ((i + 1) as f64, v.max(floor).log10()))
        .collect();
    let x = 0.5..(values.len() as f64 + 0.5);
    let y = with_headroom(padded_range(pts.iter().map(|p| p.1), 0.08), 2, palette);
    let int_tick = |v: &f64| {
        if (v - v.round()).abs() < 1e-9 && *v >= 1.0 {
            format!("{}", v.round() as i64)
        } else {
            String::new()
        }
    };
    let axes = Axes {
        x_ticks: Some(&int_tick),
        ..Axes::new(x, y, "factor number", "log₁₀ (singular value / AU)")
    };
    chart_svg(PLOT, title, &axes, palette, |_, chart| {
        let colour = palette.category(0);
        chart
            .draw_series(LineSeries::new(pts.iter().copied(), line_style(colour, palette)))
            .map_err(draw_err(PLOT))?;
        draw_markers(
            PLOT,
            chart,
            &pts,
            Marker::Circle,
            colour,
            Some("singular value"),
            palette,
        )?;
        if let Some(r) = rank.filter(|&r| r >= 1 && r < values.len()) {
            let xr = r as f64 + 0.5;
            let style = palette.category(1).to_plotters().stroke_width(2);
            chart
                .draw_series(DashedLineSeries::new(
                    [(xr, axes.y.start), (xr, axes.y.end)],
                    6,
                    4,
                    style,
                ))
                .map_err(draw_err(PLOT))?
                .label(format!("rank {r}"))
                .legend(line_key(style));
        }
        Ok(())
    })
}

/// [`singular_values`] of a factor summary, marking its rank estimate.
///
/// # Errors
/// As [`singular_values`].
pub fn singular_values_of(summary: &FactorSummary, palette: &Palette) -> Result<String, PlotError> {
    singular_values(
        "Singular values of the absorbance matrix",
        &summary.singular_values.to_vec(),
        Some(summary.rank.chosen),
        palette,
    )
}

/// Where [`evolving_factors`] draws entries at the numerical zero level (windows with fewer
/// samples than factors): one decade below the lowest value that stands more than a decade
/// above that level, so they do not stretch the axis far below the noise. With no such gap,
/// the lowest value itself.
fn zero_level_floor(values: impl Iterator<Item = f64> + Clone) -> f64 {
    let lowest = values.clone().fold(f64::INFINITY, f64::min);
    let real = values.filter(|&v| v > lowest + 1.0).fold(f64::INFINITY, f64::min);
    if real.is_finite() { real - 1.0 } else { lowest }
}

/// Evolving factor analysis: log₁₀ singular values of growing windows (forward, solid) and
/// shrinking windows (backward, dashed) against the sample position in temperature order; the
/// x tick labels give the temperature in °C. Entries at the numerical zero level (a window with
/// fewer samples than factors) are drawn one decade below the lowest real singular value.
///
/// `forward` and `backward` are positions × factors; `temperatures_c` gives the temperature at
/// each position (already in the analysis order).
///
/// # Errors
/// [`PlotError::Empty`]; [`PlotError::LengthMismatch`]; [`PlotError::NonFinite`] naming the
/// position (row) and factor (column).
///
/// # Examples
/// ```
/// use isosbestic::report::plots::{evolving_factors, Palette};
/// use ndarray::array;
/// let f = array![[1.0, -15.0], [1.1, -2.0], [1.2, -1.0]];
/// let b = array![[1.2, -1.0], [1.0, -2.5], [0.9, -15.0]];
/// let svg = evolving_factors("Evolving factors", &[10.0, 30.0, 50.0], f.view(), b.view(), &Palette::default())?;
/// assert!(svg.contains("forward, factor 1") && svg.contains("backward, factor 2"));
/// # Ok::<(), isosbestic::report::plots::PlotError>(())
/// ```
pub fn evolving_factors(
    title: &str,
    temperatures_c: &[f64],
    forward: ArrayView2<f64>,
    backward: ArrayView2<f64>,
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "evolving factors";
    check_1d(PLOT, "temperatures", temperatures_c)?;
    check_len(PLOT, "forward rows", temperatures_c.len(), forward.nrows())?;
    check_len(PLOT, "backward rows", temperatures_c.len(), backward.nrows())?;
    check_len(PLOT, "backward columns", forward.ncols(), backward.ncols())?;
    check_2d(PLOT, "forward", forward)?;
    check_2d(PLOT, "backward", backward)?;
    let n = temperatures_c.len();
    let floor = zero_level_floor(forward.iter().chain(backward.iter()).copied());
    let forward = forward.mapv(|v| v.max(floor));
    let backward = backward.mapv(|v| v.max(floor));
    let x = -0.3..(n as f64 - 0.7);
    let y = with_headroom(
        padded_range(forward.iter().chain(backward.iter()).copied(), 0.06),
        2 * forward.ncols(),
        palette,
    );
    let t_tick = |v: &f64| {
        let r = v.round();
        if (v - r).abs() < 1e-9 && r >= 0.0 && (r as usize) < n {
            format!("{:.0}", temperatures_c[r as usize])
        } else {
            String::new()
        }
    };
    let axes = Axes {
        x_ticks: Some(&t_tick),
        ..Axes::new(
            x,
            y,
            "temperature / °C (samples in order of temperature)",
            "log₁₀ (singular value / AU)",
        )
    };
    chart_svg(PLOT, title, &axes, palette, |_, chart| {
        for k in 0..forward.ncols() {
            let colour = palette.category(k);
            let style = line_style(colour, palette);
            chart
                .draw_series(LineSeries::new(
                    forward.column(k).iter().enumerate().map(|(i, &v)| (i as f64, v)),
                    style,
                ))
                .map_err(draw_err(PLOT))?
                .label(format!("forward, factor {}", k + 1))
                .legend(line_key(style));
            let pts: Vec<(f64, f64)> = backward
                .column(k)
                .iter()
                .enumerate()
                .map(|(i, &v)| (i as f64, v))
                .collect();
            chart
                .draw_series(DashedLineSeries::new(pts, 7, 4, style))
                .map_err(draw_err(PLOT))?
                .label(format!("backward, factor {}", k + 1))
                .legend(move |(x, y)| {
                    EmptyElement::at((x, y))
                        + PathElement::new(vec![(0, 0), (7, 0)], style)
                        + PathElement::new(vec![(11, 0), (18, 0)], style)
                });
        }
        Ok(())
    })
}

/// [`evolving_factors`] of a factor summary made from `set` (the summary's sample order indexes
/// the rows of `set`).
///
/// # Errors
/// [`PlotError::Missing`] when the summary holds no evolving factor analysis;
/// [`PlotError::IndexOutOfRange`] when its order does not fit `set`; otherwise as
/// [`evolving_factors`].
pub fn evolving_factors_of(
    summary: &FactorSummary,
    set: &SpectraSet,
    palette: &Palette,
) -> Result<String, PlotError> {
    const PLOT: &str = "evolving factors";
    let efa = summary.efa.as_ref().ok_or(PlotError::Missing {
        plot: PLOT,
        reason: "the factor summary holds no evolving factor analysis",
    })?;
    let t = efa
        .order
        .iter()
        .map(|&i| {
            set.samples()
                .get(i)
                .map(|s| s.temperature_c())
                .ok_or(PlotError::IndexOutOfRange {
                    plot: PLOT,
                    what: "evolving factor order",
                    index: i,
                    len: set.n_samples(),
                })
        })
        .collect::<Result<Vec<f64>, _>>()?;
    evolving_factors(
        "Evolving factors (increasing temperature)",
        &t,
        efa.forward.view(),
        efa.backward.view(),
        palette,
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_text_is_compact_and_shows_zero_exactly() {
        assert_eq!(tick_text(2.5e-17, 1.0), "0");
        assert_eq!(tick_text(0.25, 1.0), "0.25");
        assert_eq!(tick_text(450.0, 100.0), "450");
        assert_eq!(tick_text(-0.5, 1.0), "−0.5");
        assert_eq!(tick_text(2e-4, 1e-3), "2.0e−4");
    }

    #[test]
    fn bins_cover_every_index_once() {
        let b = bins(1000, 160);
        assert_eq!(b.len(), 160);
        assert_eq!(b[0].start, 0);
        assert_eq!(b[159].end, 1000);
        assert!(b.windows(2).all(|w| w[0].end == w[1].start));
        assert_eq!(bins(5, 160).len(), 5);
    }

    #[test]
    fn zero_level_entries_are_lifted_to_a_decade_below_the_lowest_real_value() {
        let v = [1.0, -2.5, -15.0, -15.0, 0.3];
        approx::assert_abs_diff_eq!(zero_level_floor(v.iter().copied()), -3.5);
        // no gap: nothing to lift
        let w = [1.0, 0.5, 0.2];
        approx::assert_abs_diff_eq!(zero_level_floor(w.iter().copied()), 0.2);
    }

    #[test]
    fn padded_range_gives_a_flat_series_a_height() {
        let r = padded_range([2.0, 2.0].into_iter(), 0.05);
        assert!(r.start < 2.0 && r.end > 2.0);
        let z = padded_range([0.0].into_iter(), 0.05);
        assert!(z.start < 0.0 && z.end > 0.0);
    }
}
