//! Analyze speed: 100,000 rows of CSV read, checked, analysed and rendered.
//!
//! Target: under one second, balanced or not. The data are a dummy data set from `simulate`, rendered to CSV
//! in memory, so the benchmark measures parsing, the balance checks, the sums of squares,
//! the tests, the variance components, the means and the text rendering. The unbalanced
//! case (about 83,000 rows, a block lost and one plant in seven) goes through the
//! synthesis engine instead.
//!
//! `cargo bench --bench analyze`

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use emsplan::analyze::{analyze, parse_data};
use emsplan::layout::Layout;
use emsplan::planning::PlanningValues;
use emsplan::render::{Format, Width, analyze::render, simulate::data_csv};
use emsplan::simulate::{Simulator, data_set};

/// Four sites (fixed), five blocks in each (random), ten varieties (fixed), 500 plants
/// per plot: 4 x 5 x 10 x 500 = 100,000 rows.
const LAYOUT: &str = r#"
[layout]
name = "Varieties in blocks at four sites"
replicates = 500
[[factor]]
name = "site"
kind = "fixed"
levels = 4
[[factor]]
name = "block"
kind = "random"
levels = 5
within = ["site"]
[[factor]]
name = "variety"
kind = "fixed"
levels = 10
[sd]
residual = 2.0
block = 1.0
"block x variety" = 0.5
[effect]
site = 1.0
variety = 0.5
"#;

fn bench(c: &mut Criterion) {
    let spec = emsplan::spec::parse(LAYOUT).unwrap();
    let layout = Layout::from_spec(&spec, LAYOUT).unwrap();
    let plan = PlanningValues::from_spec(&spec, LAYOUT, &layout).unwrap();
    let sim = Simulator::new(&layout, &plan).unwrap();
    let y = sim.data_set(3, 50.0);
    let csv = data_csv(&data_set(&layout, &sim, &y, 3, false));
    assert_eq!(csv.lines().count(), 100_001);
    let mut group = c.benchmark_group("analyze");
    group.sample_size(10);
    group.throughput(Throughput::Elements(100_000));
    group.bench_function("csv_100k_rows_to_text", |b| {
        b.iter(|| {
            let obs = parse_data("bench.csv", csv.as_bytes(), &layout, None).unwrap();
            let report = analyze(&layout, &obs, 0.05).unwrap();
            render(&report, Format::Text, Width::DEFAULT)
        })
    });
    // The same data, unbalanced: the fifth block of the fourth site lost, and every
    // seventh remaining row (a missing plant) taken out.
    let mut kept = 0usize;
    let unbalanced: String = csv
        .lines()
        .enumerate()
        .filter(|(i, line)| *i == 0 || !line.starts_with("site4,block5,"))
        .filter(|(i, _)| {
            kept += 1;
            *i == 0 || !kept.is_multiple_of(7)
        })
        .map(|(_, line)| format!("{line}\n"))
        .collect();
    let rows = unbalanced.lines().count() as u64 - 1;
    group.throughput(Throughput::Elements(rows));
    group.bench_function("csv_unbalanced_rows_to_text", |b| {
        b.iter(|| {
            let obs = parse_data("bench.csv", unbalanced.as_bytes(), &layout, None).unwrap();
            let report = analyze(&layout, &obs, 0.05).unwrap();
            assert!(report.imbalance.is_some());
            render(&report, Format::Text, Width::DEFAULT)
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
