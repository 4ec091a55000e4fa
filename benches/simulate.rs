//! Monte Carlo speed: data sets per second for a 4-factor, 200-observation layout.
//!
//! Target: at least 10,000 data sets per second. Each run draws one data set at the
//! planning values and analyses it, then analyses one null data set for every testable
//! term (the same draws less that term's effects); the throughput counts runs only, so the
//! figure is a floor on data sets analysed.
//!
//! The unbalanced case times the shipped growth-chamber layout with a chamber and a pot
//! lost (95 of 108 observations, every test but one synthetic), whose runs go through the
//! unbalanced fit's sums of squares.
//!
//! `cargo bench --bench simulate`

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use emsplan::layout::Layout;
use emsplan::planning::PlanningValues;
use emsplan::simulate::Simulator;

/// Two fertilisers (fixed) x five greenhouses (random) with two benches in each x five
/// varieties (fixed), two pots per cell: 2 x 5 x 2 x 5 x 2 = 200 observations.
pub const LAYOUT: &str = r#"
[layout]
name = "Fertiliser and variety on benches in greenhouses"
replicates = 2
[[factor]]
name = "fertiliser"
kind = "fixed"
levels = 2
[[factor]]
name = "greenhouse"
kind = "random"
levels = 5
[[factor]]
name = "bench"
kind = "random"
levels = 2
within = ["greenhouse"]
[[factor]]
name = "variety"
kind = "fixed"
levels = 5
[sd]
residual = 1.0
greenhouse = 0.8
bench = 0.5
"fertiliser x greenhouse" = 0.4
"greenhouse x variety" = 0.3
"fertiliser x bench" = 0.3
"bench x variety" = 0.3
"fertiliser x greenhouse x variety" = 0.2
"fertiliser x bench x variety" = 0.2
[effect]
fertiliser = 0.5
variety = 0.4
"fertiliser x variety" = 0.3
"#;

fn bench(c: &mut Criterion) {
    let spec = emsplan::spec::parse(LAYOUT).unwrap();
    let layout = Layout::from_spec(&spec, LAYOUT).unwrap();
    assert_eq!(layout.observations(), 200);
    let plan = PlanningValues::from_spec(&spec, LAYOUT, &layout).unwrap();
    let sim = Simulator::new(&layout, &plan).unwrap();
    let runs = 20_000;
    let mut group = c.benchmark_group("simulate");
    group.sample_size(10);
    group.throughput(Throughput::Elements(runs));
    group.bench_function("monte_carlo_200_obs_4_factors", |b| {
        b.iter(|| sim.monte_carlo(std::hint::black_box(7), runs))
    });
    let mut x = sim.scratch();
    group.throughput(Throughput::Elements(1));
    group.bench_function("one_run_one_thread", |b| {
        let mut tally = sim.monte_carlo(1, 0);
        let mut run = 0;
        b.iter(|| {
            run += 1;
            sim.run(7, run, &mut x, &mut tally)
        })
    });
    let text = include_str!("../problems/unbalanced-lost-chamber.toml");
    let spec = emsplan::spec::parse(text).unwrap();
    let layout = Layout::from_spec(&spec, text).unwrap();
    assert_eq!(layout.observations(), 95);
    let plan = PlanningValues::from_spec(&spec, text, &layout).unwrap();
    let sim = Simulator::new(&layout, &plan).unwrap();
    let runs = 4_000;
    group.throughput(Throughput::Elements(runs));
    group.bench_function("monte_carlo_unbalanced_95_of_108_obs", |b| {
        b.iter(|| sim.monte_carlo(std::hint::black_box(7), runs))
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
