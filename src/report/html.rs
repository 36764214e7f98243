//! The self-contained HTML report: one page with inline CSS, summary tables and the SVG plots
//! embedded inline. It loads nothing from outside (no scripts, style sheets, fonts or images
//! by address), so it reads the same offline, from a mail attachment or an archive.
//!
//! The library reads no clock: the caller passes the generation details (time stamp, input
//! names, command) in a [`Generation`].
//!
//! # Examples
//! ```
//! use isosbestic::report::html::{render_report, Generation, Section, SummaryRow};
//! let generation = Generation::new("2026-01-01T12:00:00Z");
//! let section = Section::new("Global fit")
//!     .with_row(SummaryRow::new("ΔH°", "-12.3", Some("0.4"), "kJ/mol"));
//! let page = render_report("Demo <run>", &generation, &[section]);
//! assert!(page.starts_with("<!DOCTYPE html>"));
//! assert!(page.contains("<h2>Global fit</h2>"));
//! assert!(page.contains("Demo &lt;run&gt;"));
//! ```

use std::fmt::Write as _;

use crate::report::inspect::InspectReport;
use crate::resolve::hard::HardFit;
use crate::thermo::VanThoffFit;

/// Escapes text for HTML element content and quoted attribute values: `&`, `<`, `>`, `"` and
/// `'` become character references.
///
/// # Examples
/// ```
/// use isosbestic::report::html::escape;
/// assert_eq!(escape(r#"<script>alert("x & 'y'")</script>"#),
///            "&lt;script&gt;alert(&quot;x &amp; &#39;y&#39;&quot;)&lt;/script&gt;");
/// ```
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + text.len() / 8);
    for ch in text.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// One row of a summary table: a quantity, its value, its uncertainty and unit, all as text
/// already formatted by the caller.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SummaryRow {
    /// What the row is (e.g. "ΔH° of ML").
    pub label: String,
    /// The value.
    pub value: String,
    /// Its uncertainty (standard error), when there is one.
    pub uncertainty: Option<String>,
    /// The unit ("" for dimensionless).
    pub unit: String,
}

impl SummaryRow {
    /// A row from its four parts.
    pub fn new(
        label: impl Into<String>,
        value: impl Into<String>,
        uncertainty: Option<&str>,
        unit: impl Into<String>,
    ) -> Self {
        SummaryRow {
            label: label.into(),
            value: value.into(),
            uncertainty: uncertainty.map(str::to_string),
            unit: unit.into(),
        }
    }
}

/// Formats a value and its standard error for a table: the standard error to two significant
/// digits and the value to the same decimal place (the GUM, JCGM 100:2008 §7.2.6, advises at
/// most two significant digits for a standard uncertainty). Very large or small magnitudes use
/// a shared-style exponent notation. A standard error that is zero, negative or not finite
/// gives the value to six significant digits and no uncertainty.
///
/// # Examples
/// ```
/// use isosbestic::report::html::format_with_uncertainty;
/// assert_eq!(format_with_uncertainty(-12345.678, 432.1), ("-12350".into(), Some("430".into())));
/// assert_eq!(format_with_uncertainty(1.23456, 0.01234), ("1.235".into(), Some("0.012".into())));
/// assert_eq!(format_with_uncertainty(2.5, f64::NAN), ("2.5".into(), None));
/// ```
pub fn format_with_uncertainty(value: f64, standard_error: f64) -> (String, Option<String>) {
    if !value.is_finite() {
        return (format!("{value}"), None);
    }
    let sci = |v: f64| v != 0.0 && !(1e-4..1e7).contains(&v.abs());
    if !(standard_error.is_finite() && standard_error > 0.0) {
        return (six_significant(value), None);
    }
    // position of the second significant digit of the standard error
    let d = standard_error.log10().floor() as i32 - 1;
    if sci(value) || sci(standard_error) {
        let e = if value == 0.0 {
            d + 1
        } else {
            value.abs().log10().floor() as i32
        };
        let digits = (e - d).clamp(1, 15) as usize;
        return (
            format!("{value:.digits$e}"),
            Some(format!("{standard_error:.1e}")),
        );
    }
    if d >= 0 {
        let q = 10f64.powi(d);
        let r = |v: f64| format!("{:.0}", (v / q).round() * q);
        (r(value), Some(r(standard_error)))
    } else {
        let decimals = (-d) as usize;
        (
            format!("{value:.decimals$}"),
            Some(format!("{standard_error:.decimals$}")),
        )
    }
}

fn six_significant(v: f64) -> String {
    if v == 0.0 {
        return "0".to_string();
    }
    if !(1e-4..1e7).contains(&v.abs()) {
        return format!("{v:.5e}");
    }
    let decimals = (5 - v.abs().log10().floor() as i32).max(0) as usize;
    crate::report::plots::fixed_trimmed(v, decimals)
}

/// Summary rows of a global fit: every fitted parameter with its standard error and unit, the
/// standard quantities ΔH°, ΔS° (and ΔCp° when fitted) per species at their reference
/// temperature, and the main diagnostics (residual standard deviation, degrees of freedom,
/// iterations, termination).
pub fn hard_fit_rows(fit: &HardFit) -> Vec<SummaryRow> {
    let mut rows = Vec::new();
    for p in &fit.parameters {
        let (v, u) = format_with_uncertainty(p.value, p.standard_error);
        rows.push(SummaryRow {
            label: format!("{} of {}", p.parameter.name, p.parameter.species_name),
            value: v,
            uncertainty: u,
            unit: p.parameter.unit.clone(),
        });
    }
    for t in &fit.thermodynamics {
        let q = &t.standard;
        let se = q.standard_errors();
        let at = format!("{} at {:.2} K", t.species, q.t_ref_k);
        let mut push = |name: &str, value: f64, se: f64, unit: &str| {
            let (v, u) = format_with_uncertainty(value, se);
            rows.push(SummaryRow {
                label: format!("{name} of {at}"),
                value: v,
                uncertainty: u,
                unit: unit.to_string(),
            });
        };
        push("ΔH°", q.dh_j_mol / 1e3, se[1] / 1e3, "kJ/mol");
        push("ΔS°", q.ds_j_k_mol, se[2], "J/(K mol)");
        if se[3] > 0.0 || q.dcp_j_k_mol != 0.0 {
            push("ΔCp°", q.dcp_j_k_mol, se[3], "J/(K mol)");
        }
    }
    let (sd, _) = format_with_uncertainty(fit.residual_sd, f64::NAN);
    rows.push(SummaryRow::new(
        "residual standard deviation",
        sd,
        None,
        fit.residual_unit(),
    ));
    rows.push(SummaryRow::new(
        "degrees of freedom",
        fit.degrees_of_freedom.to_string(),
        None,
        "",
    ));
    rows.push(SummaryRow::new(
        "iterations",
        fit.iterations.to_string(),
        None,
        "",
    ));
    rows.push(SummaryRow::new(
        "solver stopped",
        format!("{:?}", fit.termination),
        None,
        "",
    ));
    rows
}

/// Summary rows of a van 't Hoff fit: ΔH°, ΔS° (and ΔCp°) with standard errors, the number of
/// points and the reduced χ² when defined.
pub fn vant_hoff_rows(fit: &VanThoffFit) -> Vec<SummaryRow> {
    let mut rows = Vec::new();
    let mut push = |label: &str, value: f64, se: f64, unit: &str| {
        let (v, u) = format_with_uncertainty(value, se);
        rows.push(SummaryRow {
            label: label.to_string(),
            value: v,
            uncertainty: u,
            unit: unit.to_string(),
        });
    };
    push(
        "ΔH°",
        fit.delta_h_j_per_mol.value / 1e3,
        fit.delta_h_j_per_mol.std_error / 1e3,
        "kJ/mol",
    );
    push(
        "ΔS°",
        fit.delta_s_j_per_k_mol.value,
        fit.delta_s_j_per_k_mol.std_error,
        "J/(K mol)",
    );
    if let Some(cp) = fit.delta_cp_j_per_k_mol {
        push("ΔCp°", cp.value, cp.std_error, "J/(K mol)");
    }
    rows.push(SummaryRow::new("points", fit.n_points.to_string(), None, ""));
    if let Some(chi) = fit.reduced_chi_squared {
        rows.push(SummaryRow::new("reduced χ²", six_significant(chi), None, ""));
    }
    rows
}

/// Summary rows of an inspection: samples, blanks, series with their temperature ranges,
/// wavelength and absorbance ranges, masked points, the rank estimate and the noise level.
pub fn inspect_rows(report: &InspectReport) -> Vec<SummaryRow> {
    let mut rows = vec![
        SummaryRow::new("samples", report.samples.to_string(), None, ""),
        SummaryRow::new("blanks", report.blanks.to_string(), None, ""),
        SummaryRow::new("components", report.components.join(", "), None, ""),
    ];
    for s in &report.series {
        rows.push(SummaryRow::new(
            format!("series {}", s.label),
            format!(
                "{} samples, {:.1} to {:.1}",
                s.samples, s.min_temperature_c, s.max_temperature_c
            ),
            None,
            "°C",
        ));
    }
    rows.push(SummaryRow::new(
        "wavelengths",
        format!(
            "{} points, {:.1} to {:.1}",
            report.wavelengths, report.wavelength_range_nm[0], report.wavelength_range_nm[1]
        ),
        None,
        "nm",
    ));
    rows.push(SummaryRow::new(
        "absorbance range",
        format!(
            "{:.4} to {:.4}",
            report.absorbance_range[0], report.absorbance_range[1]
        ),
        None,
        "AU",
    ));
    rows.push(SummaryRow::new(
        "masked points",
        report.masked_points.to_string(),
        None,
        "",
    ));
    rows.push(SummaryRow::new(
        "rank estimate (absorbing species)",
        report.factor.rank.chosen.to_string(),
        None,
        "",
    ));
    if let Some(noise) = report.factor.noise_estimate_at_rank {
        rows.push(SummaryRow::new(
            "noise estimate at that rank",
            six_significant(noise),
            None,
            "AU",
        ));
    }
    rows
}

/// An SVG plot with a caption.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Figure {
    /// Caption shown under the plot.
    pub caption: String,
    /// The SVG document (as made by [`crate::report::plots`]).
    pub svg: String,
}

/// One section of the report: a heading, an optional summary table, notes and figures.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Section {
    /// Section heading.
    pub heading: String,
    /// Paragraphs of plain text shown under the heading.
    pub notes: Vec<String>,
    /// Summary table rows (no table when empty).
    pub summary: Vec<SummaryRow>,
    /// Figures, in order.
    pub figures: Vec<Figure>,
}

impl Section {
    /// An empty section with a heading.
    pub fn new(heading: impl Into<String>) -> Self {
        Section {
            heading: heading.into(),
            ..Section::default()
        }
    }

    /// Adds a paragraph of text.
    pub fn with_note(mut self, note: impl Into<String>) -> Self {
        self.notes.push(note.into());
        self
    }

    /// Adds a summary table row.
    pub fn with_row(mut self, row: SummaryRow) -> Self {
        self.summary.push(row);
        self
    }

    /// Adds a figure.
    pub fn with_figure(mut self, caption: impl Into<String>, svg: impl Into<String>) -> Self {
        self.figures.push(Figure {
            caption: caption.into(),
            svg: svg.into(),
        });
        self
    }
}

/// Generation details shown in the page header, supplied by the caller (the library reads no
/// clock).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Generation {
    /// When the report was made, as the caller wants it shown (e.g. RFC 3339).
    pub timestamp: String,
    /// Further label/value pairs (input files, command line, host…).
    pub details: Vec<(String, String)>,
}

impl Generation {
    /// Details with a time stamp and nothing else.
    pub fn new(timestamp: impl Into<String>) -> Self {
        Generation {
            timestamp: timestamp.into(),
            details: Vec::new(),
        }
    }

    /// Adds a label/value pair.
    pub fn with_detail(mut self, label: impl Into<String>, value: impl Into<String>) -> Self {
        self.details.push((label.into(), value.into()));
        self
    }
}

const STYLE: &str = "
:root { color-scheme: light; }
body { margin: 0; background: #f4f4f1; color: #262c34;
  font: 15px/1.5 system-ui, -apple-system, 'Segoe UI', 'DejaVu Sans', sans-serif; }
header { background: #262c34; color: #f4f4f1; padding: 18px 32px 14px; }
header h1 { margin: 0 0 4px; font-size: 24px; font-weight: 600; }
header p { margin: 0; font-size: 13px; color: #c9ccd1; }
header dl { margin: 6px 0 0; font-size: 13px; color: #c9ccd1; display: grid;
  grid-template-columns: max-content 1fr; column-gap: 12px; }
header dt { font-weight: 600; } header dd { margin: 0; word-break: break-all; }
main { max-width: 1100px; margin: 0 auto; padding: 8px 24px 40px; }
section { background: #fffffd; border: 1px solid #dedfe3; border-radius: 6px;
  margin: 20px 0; padding: 8px 24px 20px; }
h2 { font-size: 19px; font-weight: 600; border-bottom: 2px solid #1f5f99; padding-bottom: 4px; }
table { border-collapse: collapse; margin: 8px 0 16px; font-variant-numeric: tabular-nums; }
th, td { padding: 4px 14px; border-bottom: 1px solid #e6e7ea; text-align: left; }
th { background: #eef0f3; font-weight: 600; }
td.num { text-align: right; font-family: 'DejaVu Sans Mono', ui-monospace, monospace; }
figure { margin: 16px 0; }
figure svg { max-width: 100%; height: auto; display: block; border: 1px solid #e6e7ea; }
figcaption { font-size: 13px; color: #5a6068; margin-top: 4px; }
p.bad { color: #a8324a; }
footer { text-align: center; font-size: 12px; color: #7a7f86; padding-bottom: 24px; }
";

/// Renders the report page: a header (title, software version, the caller's generation
/// details), then each section with its notes, summary table (label, value, ± uncertainty,
/// unit) and inline SVG figures.
///
/// All text is escaped with [`escape`]. Figures are embedded as inline `<svg>` elements (their
/// `xmlns` attribute is dropped, HTML does not need it); a figure that is not a plain SVG
/// document (does not start with `<svg`, or holds `<script`, `<foreignObject`, an `href` or an
/// event attribute) is replaced by a note, so the page never runs or loads anything.
///
/// # Examples
/// ```
/// use isosbestic::report::html::{render_report, Generation, Section};
/// let s = Section::new("Data").with_figure("a plot", "<svg width=\"10\" height=\"10\"></svg>");
/// let page = render_report("Run", &Generation::new("now"), &[s]);
/// assert!(page.contains("<svg width=\"10\""));
/// assert!(page.contains(env!("CARGO_PKG_VERSION")));
/// ```
pub fn render_report(title: &str, generation: &Generation, sections: &[Section]) -> String {
    let mut out = String::with_capacity(4096 + sections.iter().map(section_size).sum::<usize>());
    let t = escape(title);
    // `write!` into a String cannot fail.
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{t}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<header>\n<h1>{t}</h1>\n\
         <p>isosbestic {} · generated {}</p>\n",
        escape(env!("CARGO_PKG_VERSION")),
        escape(&generation.timestamp),
    );
    if !generation.details.is_empty() {
        out.push_str("<dl>\n");
        for (k, v) in &generation.details {
            let _ = writeln!(out, "<dt>{}</dt><dd>{}</dd>", escape(k), escape(v));
        }
        out.push_str("</dl>\n");
    }
    out.push_str("</header>\n<main>\n");
    for s in sections {
        render_section(&mut out, s);
    }
    let _ = write!(
        out,
        "</main>\n<footer>made by isosbestic {}; this page is self-contained and needs no network \
         access</footer>\n</body>\n</html>\n",
        escape(env!("CARGO_PKG_VERSION"))
    );
    out
}

fn section_size(s: &Section) -> usize {
    s.figures
        .iter()
        .map(|f| f.svg.len() + f.caption.len())
        .sum::<usize>()
        + 256 * (s.summary.len() + 4)
}

fn render_section(out: &mut String, s: &Section) {
    let _ = writeln!(out, "<section>\n<h2>{}</h2>", escape(&s.heading));
    for n in &s.notes {
        let _ = writeln!(out, "<p>{}</p>", escape(n));
    }
    if !s.summary.is_empty() {
        out.push_str(
            "<table>\n<thead><tr><th>quantity</th><th>value</th><th>± standard error</th>\
             <th>unit</th></tr></thead>\n<tbody>\n",
        );
        for r in &s.summary {
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                escape(&r.label),
                escape(&r.value),
                r.uncertainty.as_deref().map_or_else(|| "—".to_string(), escape),
                escape(&r.unit)
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    for f in &s.figures {
        out.push_str("<figure>\n");
        match inline_svg(&f.svg) {
            Some(svg) => out.push_str(&svg),
            None => out.push_str("<p class=\"bad\">(figure left out: not a plain SVG document)</p>"),
        }
        let _ = writeln!(
            out,
            "\n<figcaption>{}</figcaption>\n</figure>",
            escape(&f.caption)
        );
    }
    out.push_str("</section>\n");
}

/// The SVG ready to inline, or `None` when it is not a plain, passive SVG document.
fn inline_svg(svg: &str) -> Option<String> {
    let trimmed = svg.trim();
    if !trimmed.starts_with("<svg") || !trimmed.ends_with("</svg>") {
        return None;
    }
    let lower = trimmed.to_ascii_lowercase();
    let active = [
        "<script",
        "<foreignobject",
        "href",
        "<iframe",
        "<image",
        "javascript:",
        "url(",
    ];
    if active.iter().any(|a| lower.contains(a)) {
        return None;
    }
    // event-handler attributes such as onload=, onclick=
    let has_handler = lower.match_indices(" on").any(|(i, _)| {
        let rest = &lower[i + 3..];
        let name_len = rest.chars().take_while(|c| c.is_ascii_alphabetic()).count();
        name_len > 0 && rest[name_len..].trim_start().starts_with('=')
    });
    if has_handler {
        return None;
    }
    Some(trimmed.replace(" xmlns=\"http://www.w3.org/2000/svg\"", ""))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hostile_text_is_escaped_everywhere() {
        let evil = "<script>alert('x')</script>\"&";
        let s = Section::new(evil)
            .with_note(evil)
            .with_row(SummaryRow::new(evil, evil, Some(evil), evil))
            .with_figure(evil, "<svg></svg>");
        let generation = Generation::new(evil).with_detail(evil, evil);
        let page = render_report(evil, &generation, &[s]);
        assert!(!page.contains("<script"));
        assert!(!page.contains("alert('x')"));
        assert!(page.contains("&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt;&quot;&amp;"));
    }

    #[test]
    fn active_svg_content_is_left_out() {
        for bad in [
            "<svg><script>alert(1)</script></svg>",
            "<svg onload=\"alert(1)\"></svg>",
            "<svg><image href=\"http://example.org/x.png\"/></svg>",
            "<svg><foreignObject></foreignObject></svg>",
            "<div>not svg</div>",
        ] {
            assert!(inline_svg(bad).is_none(), "{bad}");
        }
        let ok = inline_svg("<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"3\"><text>one</text></svg>");
        assert_eq!(ok.as_deref(), Some("<svg width=\"3\"><text>one</text></svg>"));
    }

    #[test]
    fn uncertainties_round_to_two_significant_digits() {
        // GUM (JCGM 100:2008) §7.2.6: at most two significant digits for the uncertainty
        assert_eq!(
            format_with_uncertainty(0.0, 0.0034),
            ("0.0000".into(), Some("0.0034".into()))
        );
        assert_eq!(
            format_with_uncertainty(58.234, 2.1),
            ("58.2".into(), Some("2.1".into()))
        );
        assert_eq!(
            format_with_uncertainty(58.234, 21.0),
            ("58".into(), Some("21".into()))
        );
        assert_eq!(
            format_with_uncertainty(3.2e-6, 1.5e-7),
            ("3.20e-6".into(), Some("1.5e-7".into()))
        );
        assert_eq!(format_with_uncertainty(f64::INFINITY, 1.0).1, None);
        assert_eq!(six_significant(1234.5678), "1234.57");
        assert_eq!(six_significant(1.0), "1");
    }

    #[test]
    fn a_missing_uncertainty_shows_a_dash() {
        let s = Section::new("x").with_row(SummaryRow::new("n", "3", None, ""));
        let page = render_report("t", &Generation::new("now"), &[s]);
        assert!(page.contains("<td class=\"num\">3</td><td class=\"num\">—</td>"));
    }
}
