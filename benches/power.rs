//! Throughput of the power calculations the planning search leans on.
//!
//! Each benchmark runs a fixed table of cases shaped like a sample-size search:
//! a handful of designs (df1, df2 growing with replication, one Satterthwaite df)
//! and noncentralities from barely detectable to overwhelming. Criterion reports
//! elements per second, one element being one power value.

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use emsplan::dist::{CriticalValue, f_upper_quantile, fixed_power, noncentral_f_sf, random_power};
use std::hint::black_box;

const ALPHA: f64 = 0.05;

/// (df1, df2) of the designs a search visits.
fn designs() -> Vec<(f64, f64)> {
    let mut designs = Vec::new();
    for df1 in [1.0, 2.0, 3.0, 5.0, 11.0] {
        for reps in [2.0, 3.0, 5.0, 8.0, 13.0, 21.0] {
            designs.push((df1, (df1 + 1.0) * (reps - 1.0)));
        }
        designs.push((df1, 7.43));
    }
    designs
}

/// Noncentralities of a search, from near zero power to near one.
fn noncentralities() -> Vec<f64> {
    (1..=16).map(|i| 0.75 * f64::from(i * i) / 4.0).collect()
}

fn bench_power(c: &mut Criterion) {
    let designs = designs();
    let ncs = noncentralities();
    let cases = (designs.len() * ncs.len()) as u64;

    let mut group = c.benchmark_group("power");
    group.throughput(Throughput::Elements(cases));
    group.bench_function("fixed_power from scratch", |b| {
        b.iter(|| {
            let mut total = 0.0;
            for &(df1, df2) in &designs {
                for &nc in &ncs {
                    total += fixed_power(black_box(ALPHA), df1, df2, black_box(nc));
                }
            }
            total
        })
    });
    group.bench_function("CriticalValue::fixed_power", |b| {
        let criticals: Vec<CriticalValue> = designs
            .iter()
            .map(|&(df1, df2)| CriticalValue::new(ALPHA, df1, df2))
            .collect();
        b.iter(|| {
            let mut total = 0.0;
            for critical in &criticals {
                for &nc in &ncs {
                    total += critical.fixed_power(black_box(nc));
                }
            }
            total
        })
    });
    group.bench_function("random_power from scratch", |b| {
        b.iter(|| {
            let mut total = 0.0;
            for &(df1, df2) in &designs {
                for &nc in &ncs {
                    total += random_power(black_box(ALPHA), df1, df2, black_box(1.0 / (1.0 + nc)));
                }
            }
            total
        })
    });
    group.finish();

    let mut group = c.benchmark_group("parts");
    group.throughput(Throughput::Elements(designs.len() as u64));
    group.bench_function("f_upper_quantile", |b| {
        b.iter(|| {
            let mut total = 0.0;
            for &(df1, df2) in &designs {
                total += f_upper_quantile(black_box(ALPHA), df1, df2);
            }
            total
        })
    });
    group.finish();

    // The far corner of the validated range: large noncentrality and df2.
    let mut group = c.benchmark_group("large");
    let large: Vec<(f64, f64, f64)> = [1.0, 5.0, 50.0]
        .into_iter()
        .flat_map(|df1| {
            [1e4, 1e6]
                .into_iter()
                .flat_map(move |df2| [150.0, 500.0, 2000.0].map(|nc| (df1, df2, nc)))
        })
        .collect();
    group.throughput(Throughput::Elements(large.len() as u64));
    group.bench_function("fixed_power nc 150..2000, df2 1e4..1e6", |b| {
        b.iter(|| {
            let mut total = 0.0;
            for &(df1, df2, nc) in &large {
                total += fixed_power(black_box(ALPHA), df1, df2, black_box(nc));
            }
            total
        })
    });
    group.bench_function("noncentral_f_sf nc 150..2000, df2 1e4..1e6", |b| {
        b.iter(|| {
            let mut total = 0.0;
            for &(df1, df2, nc) in &large {
                total += noncentral_f_sf(black_box(1.0 + nc / df1), df1, df2, black_box(nc));
            }
            total
        })
    });
    group.finish();
}

criterion_group!(benches, bench_power);
criterion_main!(benches);
