//! Speed of the design search.
//!
//! - `million`: a problem of 1,056,000 candidates (benches/search-million.toml: four
//!   structures, five searched dimensions, a power target and a budget), by pruned
//!   enumeration and by the integer program, and by enumeration with the budget removed
//!   (nothing pruned: every candidate screened). The target: under 10 s on a 2-core
//!   machine.
//! - `growing`: the optimizer against enumeration (the searches alone, without the
//!   report) on spaces that grow with the width k of every level range, with linear
//!   constraints only (min_df, no budget to prune by), to find where the optimizer
//!   starts to win. The benchmark id is the size of the space.
//!
//! Run: cargo bench --bench search -- --warm-up-time 1 --measurement-time 5

use criterion::{BenchmarkId, Criterion, criterion_group, criterion_main};
use emsplan::layout::Layout;
use emsplan::planning::PlanningValues;
use emsplan::search::enumerate::enumerate;
use emsplan::search::optimize::optimize;
use emsplan::search::{Method, Options, Problem, Quiet, Search};

fn search(text: &str) -> Search {
    let spec = emsplan::spec::parse(text).expect("parses");
    let layout = Layout::from_spec(&spec, text).expect("layout");
    let plan = PlanningValues::from_spec(&spec, text, &layout).expect("planning values");
    let problem = Problem::from_spec(&spec, text, layout, plan, None).expect("problem");
    Search::new(problem).expect("structures")
}

fn options(method: Method) -> Options {
    Options {
        method,
        max_candidates: u64::MAX,
        ..Options::default()
    }
}

/// Doses on pens within farms, breeds crossed with both; every range k values wide.
fn growing(k: u64) -> String {
    format!(
        r#"[layout]
replicates = 2
[[factor]]
name = "dose"
kind = "fixed"
levels = 3
[[factor]]
name = "farm"
kind = "random"
levels = 2
[[factor]]
name = "pen"
kind = "random"
levels = 2
within = ["farm"]
[[factor]]
name = "breed"
kind = "fixed"
levels = 2
[cost]
overhead = 500
[cost.per_unit]
farm = 900
pen = 60
"pen x dose" = 10
residual = 4
[search]
must_test = ["dose", "dose x breed"]
min_df = 6
[search.levels]
farm = [1, {}]
pen = [1, {k}]
breed = [2, {}]
replicates = [1, {k}]
"#,
        k + 1,
        k + 1
    )
}

fn million(c: &mut Criterion) {
    let text = include_str!("search-million.toml");
    let s = search(text);
    assert_eq!(s.space(), 1_056_000);
    let mut g = c.benchmark_group("million");
    g.sample_size(10);
    for method in [Method::Enumerate, Method::Optimize] {
        g.bench_function(format!("{method:?}").to_lowercase(), |b| {
            b.iter(|| s.run(&options(method), &Quiet).expect("runs"))
        });
    }
    // The same problem with no budget: nothing is pruned, every candidate is screened
    // (error terms, df and two powers each).
    let unbudgeted = search(&text.replace("budget = 60000\n", ""));
    assert!(unbudgeted.problem.budget.is_none());
    g.bench_function("enumerate_no_budget", |b| {
        b.iter(|| {
            unbudgeted
                .run(&options(Method::Enumerate), &Quiet)
                .expect("runs")
        })
    });
    g.finish();
}

fn growing_spaces(c: &mut Criterion) {
    let mut g = c.benchmark_group("growing");
    g.sample_size(10);
    for k in [3u64, 6, 12, 24, 48] {
        let s = search(&growing(k));
        let space = s.space();
        // The searches alone, without building the report.
        g.bench_with_input(BenchmarkId::new("enumerate", space), &s, |b, s| {
            b.iter(|| enumerate(&s.screens, 1, true, &Quiet))
        });
        g.bench_with_input(BenchmarkId::new("optimize", space), &s, |b, s| {
            b.iter(|| optimize(&s.screens, &s.problem, 1, u64::MAX).expect("bounded"))
        });
    }
    g.finish();
}

criterion_group!(benches, million, growing_spaces);
criterion_main!(benches);
