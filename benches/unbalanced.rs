//! Speed of the unbalanced engine: synthesis of the expected mean squares for a layout of
//! 2,000 observations (less a few removed) and 12 terms, 1,000 non-empty cells.
//!
//! `cargo bench --bench unbalanced`. Target: either synthesis under a second. The sums of
//! squares of one response through a fitted layout are timed too (what `simulate` does
//! for every data set of a Monte Carlo run, and `analyze` once), with the response around
//! 10,000,000 as a measured quantity often is.

use std::hint::black_box;

use criterion::{Criterion, criterion_group, criterion_main};
use emsplan::check::check;
use emsplan::engine::Analysis;
use emsplan::layout::{Convention, Layout, SumsOfSquares};
use emsplan::planning::PlanningValues;
use emsplan::unbalanced::{Design, Fit};

/// Four feeds (fixed) on five farms (random), five breeds (fixed), ten pens per breed
/// (random, nested), two animals per cell: 4 x 5 x 5 x 10 x 2 = 2,000 observations. The
/// model has 11 terms and the residual: feed, farm, breed, pen(breed), the four two-way
/// interactions that are terms, the two three-way ones. A pen, a cell and an animal are
/// lost.
const LAYOUT: &str = r#"
[layout]
name = "Feeds on farms, breeds in pens"
replicates = 2
[[layout.remove]]
breed = 2
pen = 10
[[layout.remove]]
feed = 1
farm = 1
breed = 1
pen = 1
[[layout.remove]]
feed = 4
farm = 5
breed = 5
pen = 3
replicate = 2
[[factor]]
name = "feed"
kind = "fixed"
levels = 4
[[factor]]
name = "farm"
kind = "random"
levels = 5
[[factor]]
name = "breed"
kind = "fixed"
levels = 5
[[factor]]
name = "pen"
kind = "random"
levels = 10
within = ["breed"]
[sd]
residual = 1.0
farm = 0.5
pen = 0.4
"feed x farm" = 0.3
[effect]
feed = 0.3
breed = 0.3
"#;

fn layout() -> Layout {
    let spec = emsplan::spec::parse(LAYOUT).expect("parses");
    Layout::from_spec(&spec, LAYOUT).expect("valid")
}

fn bench(c: &mut Criterion) {
    let l = layout();
    let design = Design::new(&l).expect("within size");
    assert_eq!(design.model.terms.len(), 12);
    assert_eq!(design.len(), 2000 - 40 - 2 - 1);
    let mut group = c.benchmark_group("unbalanced");
    group.sample_size(10);
    group.bench_function("design (2,000 observations, 12 terms)", |b| {
        b.iter(|| Design::new(black_box(&l)).unwrap())
    });
    group.bench_function("sequential synthesis (fit + EMS)", |b| {
        b.iter(|| {
            let fit = Fit::new(black_box(&design), SumsOfSquares::Sequential);
            fit.ems(&design)
        })
    });
    group.bench_function("type III synthesis (fit + EMS)", |b| {
        b.iter(|| {
            let fit = Fit::new(black_box(&design), SumsOfSquares::Type3);
            fit.ems(&design)
        })
    });
    group.bench_function("analysis: design, synthesis, error terms", |b| {
        b.iter(|| Analysis::new(black_box(&l)).unwrap())
    });
    // A response of the design's size around 1e7: a pattern over the cells plus a
    // deterministic spread within them (no generator needed).
    let y: Vec<f64> = (0..design.len())
        .map(|i| 1e7 + ((i * 7919) % 101) as f64 / 37.0 + (i % 13) as f64)
        .collect();
    for kind in [SumsOfSquares::Sequential, SumsOfSquares::Type3] {
        let fit = Fit::new(&design, kind);
        let name = match kind {
            SumsOfSquares::Sequential => "sums of squares of one response (sequential)",
            SumsOfSquares::Type3 => "sums of squares of one response (type III)",
        };
        group.bench_function(name, |b| {
            b.iter(|| fit.sums_of_squares(&design, black_box(&y)))
        });
    }
    let spec = emsplan::spec::parse(LAYOUT).unwrap();
    let plan = PlanningValues::from_spec(&spec, LAYOUT, &l).unwrap();
    group.bench_function("check with power", |b| {
        b.iter(|| check(black_box(&l), Convention::Unrestricted, &plan).unwrap())
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
