//! Global model fit timings: fit + standard errors of the 1:4 model M + 4L ⇌ ML4 (one series,
//! free metal weakly absorbing), group `hard`, ids `hard/nwl<wavelengths>-nT<temperatures>-nsp2`
//! (nsp = absorbing species). Data (noise 1e-3 AU, fixed seed) are simulated outside the timed
//! closure.
//!
//! `ISOSBESTIC_REPEAT=<folder>:<n>` does the same on one of the peer's data folders (subtract
//! the run with n = 0, which only loads the files).
//!
//! Side-by-side mode for `scripts/compare_peer.py`: with `ISOSBESTIC_PEER_DATA=DIR` the bench
//! also loads every data set folder in DIR (spectra.csv + samples.csv with `Mt_M`, `Lt_M`),
//! times the same fit on it and prints `PEER_COMPARE <folder> <median seconds> <ΔH° kJ/mol> <its standard error>` lines.
//! `ISOSBESTIC_RESIDUAL_SVD=0` turns [`HardFitParams::residual_svd`] off for the timed fits
//! (the fit and its standard errors only, as the peer times itself).
//! `ISOSBESTIC_PHASES=<folder>:<n>` prints the median time of each phase of a fit (set-up,
//! start search, solver runs, summaries) over n fits on one of the peer's data folders.
//! `ISOSBESTIC_PEER_START_GRID=n` sets [`HardFitParams::start_grid`] for the timed fits (to
//! measure what the start search costs).
//!
//! Memory: `ISOSBESTIC_MEMORY=build|fit` simulates a 3000-wavelength × 751-spectrum set and
//! exits after building it, or after building it and fitting once: run both under
//! `/usr/bin/time -v`; the difference of the peak resident sizes is what the fit adds.

use criterion::{BenchmarkId, Criterion, criterion_group};
use isosbestic::data::{DataFiles, SpectraSet, load};
use isosbestic::resolve::hard::{self, HardFitParams};
use isosbestic::simulate::{Band, Noise, PureSpectrum, SeriesPlan, SimulationPlan, simulate};
use isosbestic::speciation::{EquilibriumModel, ValidModel};
use std::hint::black_box;
use std::path::Path;
use std::time::Instant;

/// M + 4L ⇌ ML4 with the given component names (the peer's files call them Mt and Lt). The
/// free metal is declared a weak absorber (ε ceiling 20 L mol⁻¹ cm⁻¹), the same prior the peer
/// uses to break the tie between the solution and its mirror.
fn ml4_model(metal: &str, ligand: &str, log_beta: f64, dh: f64) -> ValidModel {
    EquilibriumModel::from_toml_str(&format!(
        r#"
        components = [{{ name = "{metal}", absorbs = true, max_absorptivity = 20.0 }}, {{ name = "{ligand}", absorbs = false }}]
        [[species]]
        name = "ML4"
        stoichiometry = {{ {metal} = 1, {ligand} = 4 }}
        absorbs = true
        law = {{ kind = "van_t_hoff", log_beta_ref = {{ value = {log_beta} }}, dh_ref = {{ value = {dh} }} }}
        "#
    ))
    .expect("valid model")
    .check()
    .expect("valid model")
}

fn band(centre_nm: f64, width_nm: f64, height: f64) -> Band {
    Band {
        centre_nm,
        width_nm,
        height,
        shift_nm_per_k: 0.0,
    }
}

fn simulated(n_wl: usize, n_t: usize) -> SpectraSet {
    let truth = ml4_model("M", "L", 4.0, 30_000.0);
    let plan = SimulationPlan {
        seed: 2026,
        first_nm: 400.0,
        last_nm: 700.0,
        step_nm: 300.0 / (n_wl - 1) as f64,
        temperatures_c: (0..n_t)
            .map(|k| 5.0 + 75.0 * k as f64 / (n_t - 1) as f64)
            .collect(),
        path_cm: 1.0,
        preparation_temperature_c: 25.0,
        thermal_expansion: false,
        noise: Noise::Absorbance { sd_au: 1e-3 },
        offset_sd_au: 0.0,
        slope_sd_au_per_100nm: 0.0,
        series: vec![SeriesPlan {
            label: "L0.1".into(),
            totals_m: [("M".into(), 0.004), ("L".into(), 0.1)].into(),
        }],
        spectra: vec![
            PureSpectrum {
                species: "M".into(),
                bands: vec![band(520.0, 50.0, 8.0)],
            },
            PureSpectrum {
                species: "ML4".into(),
                bands: vec![band(600.0, 45.0, 120.0), band(470.0, 30.0, 40.0)],
            },
        ],
    };
    let set = simulate(&truth, &plan).expect("simulation").set;
    assert_eq!(set.n_wavelengths(), n_wl);
    set
}

/// The fit both benches time: default settings (start grid included), from log β = 3, ΔH° = 0.
/// Returns ΔH° and its standard error, kJ/mol.
fn fit_once(set: &SpectraSet, model: &ValidModel) -> (f64, f64) {
    let mut params = HardFitParams::default();
    // ISOSBESTIC_RESIDUAL_SVD=0: the fit and its standard errors only (what the peer times)
    if std::env::var("ISOSBESTIC_RESIDUAL_SVD").is_ok_and(|v| v == "0") {
        params.residual_svd = false;
    }
    if let Some(g) = std::env::var("ISOSBESTIC_PEER_START_GRID")
        .ok()
        .and_then(|g| g.parse().ok())
    {
        params.start_grid = g;
    }
    let fit = hard::fit(set, model, &params).expect("fit");
    let th = &fit.thermodynamics[0].standard;
    (th.dh_j_mol / 1e3, th.standard_errors()[1] / 1e3)
}

fn bench_hard(c: &mut Criterion) {
    let start = ml4_model("M", "L", 3.0, 0.0);
    let mut group = c.benchmark_group("hard");
    group
        .sample_size(10)
        .warm_up_time(std::time::Duration::from_millis(500))
        .measurement_time(std::time::Duration::from_secs(2));
    for &n_wl in &[100usize, 300, 1000, 3000] {
        for &n_t in &[10usize, 30, 100] {
            let set = simulated(n_wl, n_t);
            group.bench_with_input(
                BenchmarkId::from_parameter(format!("nwl{n_wl}-nT{n_t}-nsp2")),
                &set,
                |b, set| b.iter(|| black_box(fit_once(set, &start))),
            );
        }
    }
    group.finish();
}

fn load_peer(dir: &Path) -> SpectraSet {
    load(&DataFiles::csv(dir.join("spectra.csv"), dir.join("samples.csv"))).expect("peer data set")
}

/// Where the time of one fit goes: the progress events split it into set-up (totals, baseline
/// removal, reduction), start search, each solver run and the summaries (including the mirror
/// comparison and the optional residual SVD). Prints the median of each phase over `count` fits
/// on stderr.
fn phases(set: &SpectraSet, count: usize) {
    use isosbestic::resolve::hard::FitProgress;
    use std::cell::RefCell;
    let start = ml4_model("Mt", "Lt", 3.0, 0.0);
    let params = HardFitParams {
        residual_svd: !std::env::var("ISOSBESTIC_RESIDUAL_SVD").is_ok_and(|v| v == "0"),
        ..Default::default()
    };
    let mut rows: Vec<Vec<(String, f64)>> = Vec::new();
    for _ in 0..count.max(1) {
        let marks: RefCell<Vec<(String, Instant)>> = RefCell::new(vec![("set-up".into(), Instant::now())]);
        let fit = hard::fit_with_progress(set, &start, &params, &|e| {
            let label = match e {
                FitProgress::StartsScored { done: 1, .. } => "start search".to_string(),
                FitProgress::SolverRun { run } => format!("solver run {run}"),
                FitProgress::Summarising => "summaries".to_string(),
                _ => return,
            };
            marks.borrow_mut().push((label, Instant::now()));
        });
        black_box(fit.expect("fit"));
        let end = Instant::now();
        let marks = marks.into_inner();
        let row = marks
            .iter()
            .enumerate()
            .map(|(i, (label, t))| {
                let next = marks.get(i + 1).map_or(end, |m| m.1);
                (label.clone(), (next - *t).as_secs_f64() * 1e3)
            })
            .collect();
        rows.push(row);
    }
    let labels: Vec<String> = rows[0].iter().map(|(l, _)| l.clone()).collect();
    for label in labels {
        let mut v: Vec<f64> = rows
            .iter()
            .filter_map(|r| r.iter().find(|(l, _)| *l == label).map(|x| x.1))
            .collect();
        v.sort_by(f64::total_cmp);
        eprintln!("{label:>14}: {:.3} ms (median of {})", v[v.len() / 2], v.len());
    }
}

/// Times the fit on the peer's data folders (median of at least 5 runs and ~1 s).
fn peer_compare(root: &Path) {
    let start = ml4_model("Mt", "Lt", 3.0, 0.0);
    let mut dirs: Vec<_> = std::fs::read_dir(root)
        .expect("ISOSBESTIC_PEER_DATA is a folder")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.join("spectra.csv").exists())
        .collect();
    dirs.sort();
    for dir in dirs {
        let set = load_peer(&dir);
        let (dh, se) = fit_once(&set, &start); // warm-up
        let mut times = Vec::new();
        let begin = Instant::now();
        while times.len() < 5 || (begin.elapsed().as_secs_f64() < 1.0 && times.len() < 200) {
            let t = Instant::now();
            black_box(fit_once(&set, &start));
            times.push(t.elapsed().as_secs_f64());
        }
        times.sort_by(f64::total_cmp);
        let name = dir
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        // the fastest run: the least disturbed by other load on a shared machine
        eprintln!("PEER_FASTEST {name} {:.6e} ({} runs)", times[0], times.len());
        println!(
            "PEER_COMPARE {name} {:.6e} {dh:.4} {se:.4}",
            times[times.len() / 2]
        );
    }
}

criterion_group!(benches, bench_hard);

fn main() {
    if let Ok(mode) = std::env::var("ISOSBESTIC_MEMORY") {
        let set = simulated(3000, 751); // 0.1 °C apart: sample ids stay distinct
        if mode == "fit" {
            black_box(fit_once(&set, &ml4_model("M", "L", 3.0, 0.0)));
        }
        black_box(set);
        return;
    }
    if let Ok(spec) = std::env::var("ISOSBESTIC_REPEAT") {
        // "<wavelengths>x<temperatures>x<fits>": fit the simulated set that many times (for
        // profilers and CPU-time counters, which are steadier than wall time on a busy machine).
        // "<folder>:<fits>": the same on one of the peer's data folders
        if let Some((dir, count)) = spec.rsplit_once(':') {
            let set = load_peer(Path::new(dir));
            let start = ml4_model("Mt", "Lt", 3.0, 0.0);
            for _ in 0..count.parse().unwrap_or(0) {
                black_box(fit_once(&set, &start));
            }
            return;
        }
        let n: Vec<usize> = spec.split('x').filter_map(|v| v.parse().ok()).collect();
        if let [n_wl, n_t, count] = n[..] {
            let set = simulated(n_wl, n_t);
            let start = ml4_model("M", "L", 3.0, 0.0);
            for _ in 0..count {
                black_box(fit_once(&set, &start));
            }
        }
        return;
    }
    if let Ok(spec) = std::env::var("ISOSBESTIC_PHASES") {
        if let Some((dir, count)) = spec.rsplit_once(':') {
            phases(&load_peer(Path::new(dir)), count.parse().unwrap_or(1));
        }
        return;
    }
    if let Ok(dir) = std::env::var("ISOSBESTIC_PEER_DATA") {
        let dir = Path::new(&dir);
        peer_compare(dir);
        return;
    }
    benches();
    Criterion::default().configure_from_args().final_summary();
}
