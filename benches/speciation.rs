//! Speciation throughput: samples × species sweep, cold start, warm start (a fit's next
//! iteration) and with derivatives. Bench ids `speciation/nS<samples>-nsp<formed species>`.

use criterion::{BenchmarkId, Criterion, criterion_group, criterion_main};
use isosbestic::speciation::{
    ComponentSpec, Derivatives, EquilibriumModel, FixedLaw, Law, Optics, Parameter, SpeciationBatch,
    SpeciesSpec, Start, ValidModel, speciate_all, speciate_all_into,
};
use ndarray::Array2;
use rand::Rng;
use std::hint::black_box;

/// Metal M and ligand L with `n` formed species: ML … MLk (k ≤ 6), then the dimers M2, M2L2.
fn model(n: usize) -> ValidModel {
    let pool: [(&str, i32, i32); 8] = [
        ("ML", 1, 1),
        ("ML2", 1, 2),
        ("ML3", 1, 3),
        ("ML4", 1, 4),
        ("ML5", 1, 5),
        ("ML6", 1, 6),
        ("M2", 2, 0),
        ("M2L2", 2, 2),
    ];
    let species = pool[..n]
        .iter()
        .map(|&(name, m, l)| SpeciesSpec {
            name: name.into(),
            stoichiometry: [("M".to_string(), m), ("L".to_string(), l)]
                .into_iter()
                .filter(|(_, a)| *a != 0)
                .collect(),
            optics: Optics::Absorbing,
            known_spectrum: None,
            max_absorptivity: None,
            law: Law::Fixed(FixedLaw {
                log_beta: Parameter::free(0.0),
            }),
            charge: None,
        })
        .collect();
    let comp = |n: &str| ComponentSpec {
        name: n.into(),
        optics: Optics::Absorbing,
        known_spectrum: None,
        max_absorptivity: None,
        charge: None,
    };
    EquilibriumModel {
        components: vec![comp("M"), comp("L")],
        species,
    }
    .check()
    .expect("valid bench model")
}

/// log β (cumulative, stepwise constants 10^(3 … 0.5)) varying by ±0.5 between samples, and
/// totals M 1e-4 … 1e-2, L 1e-4 … 1 mol/L (log-uniform), fixed seed.
fn data(m: &ValidModel, n_samples: usize) -> (Array2<f64>, Array2<f64>, Vec<String>) {
    let mut rng = isosbestic::testing::rng(42);
    let nsp = m.n_species();
    let lb = Array2::from_shape_fn((n_samples, nsp), |(_, k)| {
        let sp = &m.species()[k];
        let (a_m, a_l) = (sp.stoichiometry[0], sp.stoichiometry[1]);
        if k < 2 {
            0.0
        } else if a_m == 1 {
            (1..=a_l).map(|s| 3.0 - 0.4 * f64::from(s - 1)).sum::<f64>() + rng.random_range(-0.5..0.5)
        } else {
            2.0 + 3.0 * f64::from(a_l) + rng.random_range(-0.5..0.5)
        }
    });
    let totals = Array2::from_shape_fn((n_samples, 2), |(_, j)| {
        if j == 0 {
            10f64.powf(rng.random_range(-4.0..-2.0))
        } else {
            10f64.powf(rng.random_range(-4.0..0.0))
        }
    });
    let ids = (0..n_samples).map(|s| format!("s{s}")).collect();
    (lb, totals, ids)
}

fn bench(c: &mut Criterion) {
    for (group_name, mode) in [
        ("speciation", 0),
        ("speciation-warm", 1),
        ("speciation-derivatives", 2),
    ] {
        let mut group = c.benchmark_group(group_name);
        group.sample_size(20);
        group.measurement_time(std::time::Duration::from_secs(2));
        group.warm_up_time(std::time::Duration::from_millis(500));
        for ns in [10usize, 100, 1000] {
            for nsp in [2usize, 4, 8] {
                let m = model(nsp);
                let (lb, totals, ids) = data(&m, ns);
                let id = BenchmarkId::from_parameter(format!("nS{ns}-nsp{nsp}"));
                match mode {
                    0 => group.bench_function(id, |b| {
                        b.iter(|| {
                            speciate_all(&m, lb.view(), totals.view(), &ids, Derivatives::Skip)
                                .expect("converges")
                        })
                    }),
                    1 => {
                        // a fit's next iteration: log β moved by 0.01 from the last solution
                        let mut batch = speciate_all(&m, lb.view(), totals.view(), &ids, Derivatives::Skip)
                            .expect("converges");
                        let lb2 = lb.mapv(|v| if v.abs() > 0.0 { v + 0.01 } else { v });
                        let start: SpeciationBatch = batch.clone();
                        group.bench_function(id, |b| {
                            b.iter(|| {
                                batch.free.assign(&start.free);
                                speciate_all_into(
                                    &m,
                                    lb2.view(),
                                    totals.view(),
                                    &ids,
                                    Start::Warm,
                                    &mut batch,
                                )
                                .expect("converges");
                                black_box(&batch);
                            })
                        })
                    }
                    _ => group.bench_function(id, |b| {
                        b.iter(|| {
                            speciate_all(&m, lb.view(), totals.view(), &ids, Derivatives::LogBeta)
                                .expect("converges")
                        })
                    }),
                };
            }
        }
        group.finish();
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
