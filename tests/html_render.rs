//! The HTML report: self-contained (no outside resources), escaped, embedding the SVGs, and
//! rendered by headless Chromium (issue 5: "report.html renders in headless Chromium").
//!
//! The browser test needs `/usr/bin/chromium` (Debian package `chromium`). Without it the test
//! fails, unless `ISOSBESTIC_SKIP_BROWSER=1` is set, in which case it notes the skip and passes.

mod support;

use std::path::Path;
use std::process::Command;

use isosbestic::report::html::{Generation, Section, SummaryRow, escape, render_report};
use isosbestic::report::plots::{
    LnKBand, LnKPoints, Palette, ProfileSeries, concentration_profiles, evolving_factors, measured_spectra,
    pure_spectra, residual_map, singular_values, vant_hoff,
};
use ndarray::Array2;

const CHROMIUM: &str = "/usr/bin/chromium";

/// An invented scenario: a metal ion with one bromide complex in brine, two series, 5–85 °C.
fn sample_report() -> String {
    let p = Palette::default();
    let wl: Vec<f64> = (0..61).map(|i| 350.0 + 5.0 * i as f64).collect();
    let t_c: Vec<f64> = (0..9).map(|i| 5.0 + 10.0 * i as f64).collect();
    let gauss = |x: f64, c: f64, w: f64| (-((x - c) / w).powi(2)).exp();
    let frac: Vec<f64> = t_c.iter().map(|t| 0.2 + 0.6 * t / 85.0).collect();
    let eps = Array2::from_shape_fn((wl.len(), 2), |(j, k)| {
        if k == 0 {
            30.0 * gauss(wl[j], 420.0, 40.0)
        } else {
            90.0 * gauss(wl[j], 520.0, 45.0)
        }
    });
    let se = eps.mapv(|e| 0.5 + 0.03 * e);
    let d = Array2::from_shape_fn((t_c.len(), wl.len()), |(i, j)| {
        0.01 * ((1.0 - frac[i]) * eps[[j, 0]] + frac[i] * eps[[j, 1]])
    });
    let c = Array2::from_shape_fn((t_c.len(), 2), |(i, k)| {
        0.01 * if k == 0 { 1.0 - frac[i] } else { frac[i] }
    });
    let c2 = c.mapv(|v| 0.8 * v);
    let r = Array2::from_shape_fn((t_c.len(), wl.len()), |(i, j)| {
        4e-4 * ((i * 7 + j * 3) as f64).sin()
    });
    let labels: Vec<String> = t_c.iter().map(|t| format!("A-{t:.0}C")).collect();
    let lab: Vec<&str> = labels.iter().map(String::as_str).collect();
    let tk: Vec<f64> = t_c.iter().map(|t| t + 273.15).collect();
    let lnk: Vec<f64> = tk.iter().map(|t| -1800.0 / t + 7.0).collect();
    let lo: Vec<f64> = lnk.iter().map(|l| l - 0.08).collect();
    let hi: Vec<f64> = lnk.iter().map(|l| l + 0.08).collect();
    let noisy: Vec<f64> = lnk
        .iter()
        .enumerate()
        .map(|(i, l)| l + 0.05 * (i as f64).cos())
        .collect();
    let band = LnKBand {
        label: "global fit",
        level: 0.95,
        temperatures_k: &tk,
        ln_k: &lnk,
        lower: &lo,
        upper: &hi,
    };
    let classic = LnKPoints {
        label: "classic estimates",
        temperatures_k: &tk,
        ln_k: &noisy,
    };
    let series = [
        ProfileSeries {
            label: "0.5 M bromide",
            temperatures_c: &t_c,
            concentrations: c.view(),
        },
        ProfileSeries {
            label: "1.5 M bromide",
            temperatures_c: &t_c,
            concentrations: c2.view(),
        },
    ];
    // evolving factors: one species throughout, a second rising from the third sample on
    let forward = Array2::from_shape_fn((t_c.len(), 3), |(i, k)| match k {
        0 => 0.5 + 0.02 * i as f64,
        1 if i >= 2 => -1.5 + 0.1 * i as f64,
        _ => -3.4 + 0.01 * i as f64,
    });
    let backward = Array2::from_shape_fn((t_c.len(), 3), |(i, k)| forward[[t_c.len() - 1 - i, k]]);
    let data = Section::new("Measured data")
        .with_note("Nine spectra of series A between 5 and 85 °C.")
        .with_row(SummaryRow::new("samples", "9", None, ""))
        .with_row(SummaryRow::new("wavelength range", "350 – 650", None, "nm"))
        .with_figure(
            "Measured spectra coloured by temperature.",
            measured_spectra("Measured spectra", &wl, d.view(), &t_c, &p).unwrap(),
        )
        .with_figure(
            "Singular values; two species absorb.",
            singular_values("Singular values", &[9.1, 1.3, 0.004, 0.0035, 0.003], Some(2), &p).unwrap(),
        )
        .with_figure(
            "Evolving factors along temperature.",
            evolving_factors("Evolving factors", &t_c, forward.view(), backward.view(), &p).unwrap(),
        );
    let fit = Section::new("Global fit")
        .with_row(SummaryRow::new("ΔH° of MBr⁺", "15.0", Some("0.6"), "kJ/mol"))
        .with_row(SummaryRow::new("ΔS° of MBr⁺", "58.2", Some("2.1"), "J/(K mol)"))
        .with_row(SummaryRow::new(
            "note with <b>markup</b> & \"quotes\"",
            "'1'",
            None,
            "",
        ))
        .with_figure(
            "Resolved pure spectra with ±2σ bands.",
            pure_spectra(
                "Resolved pure spectra",
                &wl,
                eps.view(),
                Some(se.view()),
                &["M²⁺", "MBr⁺"],
                &p,
            )
            .unwrap(),
        )
        .with_figure(
            "Concentration profiles.",
            concentration_profiles("Concentration profiles", &series, &["M²⁺", "MBr⁺"], &p).unwrap(),
        )
        .with_figure(
            "van 't Hoff plot.",
            vant_hoff("van 't Hoff plot", Some(&band), &[classic], &p).unwrap(),
        )
        .with_figure(
            "Residuals of the global fit.",
            residual_map("Residual map", &wl, &lab, r.view(), &p).unwrap(),
        );
    let generation = Generation::new("2026-12-01T23:59:00Z")
        .with_detail("spectra", "data/demo/spectra.csv")
        .with_detail("command", "isosbestic fit --model model.toml <script>");
    render_report("Demo report: metal bromide in brine", &generation, &[data, fit])
}

#[test]
fn the_report_is_self_contained_escaped_and_embeds_every_figure() {
    let page = sample_report();
    assert!(page.starts_with("<!DOCTYPE html>"));
    assert_eq!(page.matches("<svg").count(), 7);
    assert_eq!(page.matches("</svg>").count(), 7);
    assert_eq!(page.matches("<figure>").count(), 7);
    assert!(page.contains("forward, factor 2") && page.contains("backward, factor 3"));
    assert!(page.contains("95 % confidence band") && page.contains("classic estimates"));
    let lower = page.to_ascii_lowercase();
    for outside in [
        "http:", "https:", "src=", "href=", "<script", "<link", "@import", "url(",
    ] {
        assert!(!lower.contains(outside), "page contains {outside}");
    }
    assert!(page.contains("note with &lt;b&gt;markup&lt;/b&gt; &amp; &quot;quotes&quot;"));
    assert!(page.contains("&lt;script&gt;"));
    assert!(page.contains(&format!("isosbestic {}", env!("CARGO_PKG_VERSION"))));
    assert!(page.contains("2026-12-01T23:59:00Z"));
    assert_eq!(escape("a<b>&\"'"), "a&lt;b&gt;&amp;&quot;&#39;");
}

fn run_chromium(args: &[&str]) -> std::process::Output {
    Command::new(CHROMIUM)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
        ])
        .args(args)
        .output()
        .unwrap_or_else(|e| panic!("cannot run {CHROMIUM}: {e}"))
}

/// Whether the browser is there; panics without it unless the skip is asked for.
fn browser_available() -> bool {
    if Path::new(CHROMIUM).exists() {
        return true;
    }
    if std::env::var("ISOSBESTIC_SKIP_BROWSER").as_deref() == Ok("1") {
        eprintln!("skipped: {CHROMIUM} not found and ISOSBESTIC_SKIP_BROWSER=1");
        return false;
    }
    panic!("{CHROMIUM} not found: install the Debian package `chromium`, or set ISOSBESTIC_SKIP_BROWSER=1");
}

/// The DOM Chromium builds from a page file.
fn rendered_dom(page: &Path) -> String {
    let profile = tempfile::tempdir().unwrap();
    let out = run_chromium(&[
        &format!("--user-data-dir={}", profile.path().display()),
        "--dump-dom",
        &format!("file://{}", page.display()),
    ]);
    String::from_utf8_lossy(&out.stdout).into_owned()
}

#[test]
fn the_report_renders_in_headless_chromium() {
    if !browser_available() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let report = dir.path().join("report.html");
    isosbestic::report::atomic::write_atomic(&report, sample_report().as_bytes()).unwrap();
    let url = format!("file://{}", report.display());
    let shot = dir.path().join("shot.png");
    let profile1 = tempfile::tempdir().unwrap();
    let out = run_chromium(&[
        &format!("--user-data-dir={}", profile1.path().display()),
        &format!("--screenshot={}", shot.display()),
        "--window-size=1200,2000",
        &url,
    ]);
    let size = std::fs::metadata(&shot).map(|m| m.len()).unwrap_or(0);
    assert!(
        size > 30_000,
        "screenshot missing or nearly empty ({size} bytes); chromium said: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    // for looking at the result by eye: copy the page and the screenshot out of the temp dir
    if let Ok(keep) = std::env::var("ISOSBESTIC_KEEP_SCREENSHOT") {
        std::fs::copy(&shot, &keep).unwrap();
        std::fs::copy(&report, format!("{keep}.html")).unwrap();
    }
    let dom = rendered_dom(&report);
    for heading in [
        "Demo report: metal bromide in brine",
        "Measured data",
        "Global fit",
    ] {
        assert!(dom.contains(heading), "rendered DOM lacks {heading}");
    }
    // the browser parsed all seven figures as SVG elements, the new ones among them
    assert_eq!(
        dom.matches("<svg").count(),
        7,
        "rendered DOM has a different number of SVGs"
    );
    for text in ["forward, factor 1", "95 % confidence band"] {
        assert!(dom.contains(text), "rendered DOM lacks {text}");
    }
}

/// A real fit page (simulated one-complex data through `run_fit` and `write_fit_page`) renders
/// with every figure, the van 't Hoff plot and the evolving factors among them.
#[test]
fn a_fit_page_renders_with_its_van_t_hoff_and_evolving_factor_figures() {
    use isosbestic::report::fit::{FIT_PAGE_OUTPUTS, run_fit, write_fit_page};
    if !browser_available() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let config = support::write_inputs(dir.path(), support::ONE_COMPLEX, &["M", "MX"]);
    let (report, set) = run_fit(&config).unwrap();
    let out = dir.path().join("out");
    std::fs::create_dir_all(&out).unwrap();
    write_fit_page(&out, &report, &set, "2026-12-02T02:00:00Z", false).unwrap();
    let dom = rendered_dom(&out.join("report.html"));
    assert_eq!(
        dom.matches("<svg").count(),
        FIT_PAGE_OUTPUTS.len() - 2, // every output but the page itself and residuals.csv
        "rendered fit page has a different number of SVGs"
    );
    for text in [
        "van 't Hoff plot",
        "classic direct",
        "classic mass balance",
        "ln β MX, global fit",
        "forward, factor 1",
        "backward, factor 2",
        "ΔH° of MX, global fit",
    ] {
        assert!(dom.contains(text), "rendered fit page lacks {text}");
    }
}
