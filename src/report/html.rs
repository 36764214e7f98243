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
    fn a_missing_uncertainty_shows_a_dash() {
        let s = Section::new("x").with_row(SummaryRow::new("n", "3", None, ""));
        let page = render_report("t", &Generation::new("now"), &[s]);
        assert!(page.contains("<td class=\"num\">3</td><td class=\"num\">—</td>"));
    }
}
