//! The EMS engine: whole layouts (model, expected mean squares, df, error terms) per
//! second, for a 4-factor and a 6-factor layout, and the numeric part alone (what the
//! design search repeats for every candidate of a structure).

use criterion::{Criterion, criterion_group, criterion_main};
use std::hint::black_box;

use emsplan::ems::Model;
use emsplan::errorterm::error_terms;
use emsplan::layout::Layout;

fn layout(text: &str) -> Layout {
    let spec = emsplan::spec::parse(text).expect("bench layout parses");
    Layout::from_spec(&spec, text).expect("bench layout is valid")
}

/// Four factors: light (fixed) / chamber (random, in light) x cultivar (fixed) x tray
/// (random, in chamber).
const FOUR: &str = r#"
[layout]
replicates = 3
[[factor]]
name = "light"
kind = "fixed"
levels = 3
[[factor]]
name = "chamber"
kind = "random"
levels = 3
within = ["light"]
[[factor]]
name = "cultivar"
kind = "fixed"
levels = 4
[[factor]]
name = "tray"
kind = "random"
levels = 2
within = ["chamber"]
"#;

/// Six factors, mixed, with nesting and a synthetic test.
const SIX: &str = r#"
[layout]
replicates = 2
[[factor]]
name = "site"
kind = "random"
levels = 4
[[factor]]
name = "irrigation"
kind = "fixed"
levels = 2
[[factor]]
name = "plot"
kind = "random"
levels = 3
within = ["site", "irrigation"]
[[factor]]
name = "cultivar"
kind = "fixed"
levels = 5
[[factor]]
name = "year"
kind = "random"
levels = 3
[[factor]]
name = "sampler"
kind = "random"
levels = 2
"#;

fn bench(c: &mut Criterion) {
    for (name, text) in [("4 factors", FOUR), ("6 factors", SIX)] {
        let l = layout(text);
        c.bench_function(&format!("whole layout, {name}"), |b| {
            b.iter(|| {
                let model = Model::new(black_box(&l.structure));
                let ems = model.ems(&l.levels).unwrap();
                let df = model.df(&l.levels);
                black_box(error_terms(&model, &ems, &df))
            })
        });
        let model = Model::new(&l.structure);
        c.bench_function(&format!("numbers only, {name}"), |b| {
            b.iter(|| {
                let ems = model.ems(black_box(&l.levels)).unwrap();
                let df = model.df(&l.levels);
                black_box(error_terms(&model, &ems, &df))
            })
        });
    }
}

criterion_group! {
    name = engine;
    config = Criterion::default().sample_size(30).measurement_time(std::time::Duration::from_secs(3));
    targets = bench
}
criterion_main!(engine);
