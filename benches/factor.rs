//! Factor analysis timings: SVD + rank estimate + forward/backward EFA of a simulated data set
//! (group `factor`), and SVD + rank alone (group `factor-svd-rank`).
//!
//! Bench ids `factor/nS<samples>-nwl<wavelengths>`; data (three Gaussian-band species, noise
//! 5e-4 AU, fixed seed) are built outside the timed closure.

use criterion::{BenchmarkId, Criterion, criterion_group, criterion_main};
use isosbestic::factor::{decompose, estimate_rank, evolving_factors_of};
use isosbestic::testing::{gaussian_band, rng};
use ndarray::{Array1, Array2};
use rand::Rng;
use rand_distr::Normal;
use std::hint::black_box;

fn simulated(n_samples: usize, n_wl: usize) -> Array2<f64> {
    let wl: Vec<f64> = (0..n_wl)
        .map(|j| 350.0 + 400.0 * j as f64 / (n_wl - 1) as f64)
        .collect();
    let spectra = [(450.0, 30.0, 0.9), (550.0, 35.0, 0.7), (650.0, 25.0, 0.5)]
        .map(|(c, w, h)| Array1::from(gaussian_band(&wl, c, w, h)));
    let mut r = rng(2026);
    let noise = Normal::new(0.0, 5e-4).expect("valid σ");
    let mut d = Array2::zeros((n_samples, n_wl));
    for (i, mut row) in d.rows_mut().into_iter().enumerate() {
        let t = i as f64 / (n_samples - 1) as f64;
        let c = [1.0 - t, 4.0 * t * (1.0 - t), t * t];
        for (k, s) in spectra.iter().enumerate() {
            row.scaled_add(c[k], s);
        }
        row.mapv_inplace(|x| x + r.sample(noise));
    }
    d
}

fn bench_factor(c: &mut Criterion) {
    let mut group = c.benchmark_group("factor");
    group.sample_size(10);
    for &(n, m) in &[(20usize, 300usize), (20, 3000), (100, 300), (100, 3000)] {
        let d = simulated(n, m);
        let order: Vec<usize> = (0..n).collect();
        group.bench_with_input(
            BenchmarkId::from_parameter(format!("nS{n}-nwl{m}")),
            &d,
            |b, d| {
                b.iter(|| {
                    let dec = decompose(d.view()).expect("finite data");
                    let rank = estimate_rank(&dec, 8, 0.05, None).expect("valid params");
                    let efa = evolving_factors_of(&dec, &order, 8).expect("valid order");
                    black_box((rank.chosen, efa.forward[[n - 1, 0]]))
                });
            },
        );
    }
    group.finish();

    // the same without EFA, to show its share of the time
    let mut group = c.benchmark_group("factor-svd-rank");
    group.sample_size(10);
    for &(n, m) in &[(20usize, 300usize), (20, 3000), (100, 300), (100, 3000)] {
        let d = simulated(n, m);
        group.bench_with_input(
            BenchmarkId::from_parameter(format!("nS{n}-nwl{m}")),
            &d,
            |b, d| {
                b.iter(|| {
                    let dec = decompose(d.view()).expect("finite data");
                    black_box(estimate_rank(&dec, 8, 0.05, None).expect("valid params").chosen)
                });
            },
        );
    }
    group.finish();
}

criterion_group!(benches, bench_factor);
criterion_main!(benches);
