//! The F distribution numerics against values computed outside this project.
//!
//! Source of every value in `tests/reference/noncentral_f.json`: scipy (version
//! recorded in the file's `source` field), `scipy.stats.f` and `scipy.stats.ncf`,
//! written by the committed script `tests/reference/noncentral_f.py`. The grid
//! covers df1 = 1 … 50, df2 = 1 … 1e6 (including the non-integer 2.5 and 7.43),
//! and noncentrality 0 … 2000.
//!
//! Tolerances: probabilities to 1e-8 absolute, and those below 1e-4 also to 1e-6
//! relative (the far-tail cases reach 1e-11); quantiles to 1e-8 relative
//! (absolute below 1).

use emsplan::dist::{
    CriticalValue, f_cdf, f_quantile, f_sf, f_upper_quantile, fixed_power, noncentral_f_cdf,
    noncentral_f_quantile, noncentral_f_sf, random_power,
};
use serde::Deserialize;

const ABS_TOL: f64 = 1e-8;
const REL_TOL_TAIL: f64 = 1e-6;
const TAIL: f64 = 1e-4;
const QUANTILE_TOL: f64 = 1e-8;

#[derive(Deserialize)]
struct Reference {
    source: String,
    central: Vec<Central>,
    central_tail: Vec<CentralTail>,
    central_quantile: Vec<CentralQuantile>,
    central_upper_quantile: Vec<CentralUpperQuantile>,
    noncentral: Vec<Noncentral>,
    noncentral_tail: Vec<NoncentralTail>,
    noncentral_quantile: Vec<NoncentralQuantile>,
    power: Vec<Power>,
    random_power: Vec<RandomPower>,
}

#[derive(Deserialize)]
struct Central {
    x: f64,
    df1: f64,
    df2: f64,
    cdf: f64,
    sf: f64,
}

#[derive(Deserialize)]
struct CentralTail {
    x: f64,
    df1: f64,
    df2: f64,
    sf: f64,
}

#[derive(Deserialize)]
struct CentralQuantile {
    p: f64,
    df1: f64,
    df2: f64,
    x: f64,
}

#[derive(Deserialize)]
struct CentralUpperQuantile {
    q: f64,
    df1: f64,
    df2: f64,
    x: f64,
}

#[derive(Deserialize)]
struct Noncentral {
    x: f64,
    df1: f64,
    df2: f64,
    nc: f64,
    cdf: f64,
    sf: f64,
}

#[derive(Deserialize)]
struct NoncentralTail {
    x: f64,
    df1: f64,
    df2: f64,
    nc: f64,
    tail: String,
    value: f64,
}

#[derive(Deserialize)]
struct NoncentralQuantile {
    p: f64,
    df1: f64,
    df2: f64,
    nc: f64,
    x: f64,
}

#[derive(Deserialize)]
struct Power {
    alpha: f64,
    df1: f64,
    df2: f64,
    nc: f64,
    power: f64,
}

#[derive(Deserialize)]
struct RandomPower {
    alpha: f64,
    df1: f64,
    df2: f64,
    ratio: f64,
    power: f64,
}

fn reference() -> Reference {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/noncentral_f.json"
    );
    let text = std::fs::read_to_string(path).expect("reference file is committed");
    let reference: Reference = serde_json::from_str(&text).expect("reference file parses");
    assert!(
        reference.source.starts_with("scipy "),
        "{}",
        reference.source
    );
    reference
}

/// The worst errors of one group of checks, and the checks that failed.
struct Group {
    name: &'static str,
    count: usize,
    max_abs: f64,
    max_rel: f64,
    worst: String,
    failures: Vec<String>,
}

impl Group {
    fn new(name: &'static str) -> Self {
        Group {
            name,
            count: 0,
            max_abs: 0.0,
            max_rel: 0.0,
            worst: String::new(),
            failures: Vec::new(),
        }
    }

    /// A probability: 1e-8 absolute, and 1e-6 relative when below 1e-4.
    fn probability(&mut self, case: String, got: f64, want: f64) {
        let abs = (got - want).abs();
        let rel = if want > 0.0 { abs / want } else { abs };
        self.count += 1;
        // A NaN fails too.
        let within = abs <= ABS_TOL && (want >= TAIL || rel <= REL_TOL_TAIL);
        if !within {
            self.failures.push(format!(
                "{case}: got {got:e}, scipy {want:e}, abs {abs:e}, rel {rel:e}"
            ));
        }
        if abs > self.max_abs {
            self.max_abs = abs;
            self.worst = format!("{case}: got {got:e}, scipy {want:e}");
        }
        if want < TAIL {
            self.max_rel = self.max_rel.max(rel);
        }
    }

    /// A quantile: 1e-8 relative, absolute below 1.
    fn quantile(&mut self, case: String, got: f64, want: f64) {
        let abs = (got - want).abs();
        let rel = abs / want.abs().max(1.0);
        self.count += 1;
        // A NaN fails too.
        let within = rel <= QUANTILE_TOL;
        if !within {
            self.failures
                .push(format!("{case}: got {got:e}, scipy {want:e}, rel {rel:e}"));
        }
        self.max_abs = self.max_abs.max(abs.min(rel));
        if rel > self.max_rel {
            self.max_rel = rel;
            self.worst = format!("{case}: got {got:e}, scipy {want:e}");
        }
    }

    fn finish(self) {
        println!(
            "{:<24} {:>5} checks  max abs {:.2e}  max rel (tail/quantile) {:.2e}",
            self.name, self.count, self.max_abs, self.max_rel
        );
        println!("    worst: {}", self.worst);
        assert!(self.count > 0, "{}: no cases", self.name);
        assert!(
            self.failures.is_empty(),
            "{}: {} of {} outside tolerance:\n{}",
            self.name,
            self.failures.len(),
            self.count,
            self.failures.join("\n")
        );
    }
}

// scipy.stats.f.cdf and f.sf.
#[test]
fn central_cdf_and_sf_match_scipy() {
    let mut group = Group::new("f_cdf / f_sf");
    for c in reference().central {
        let case = format!("F({}, {}) at {:e}", c.df1, c.df2, c.x);
        group.probability(format!("{case} cdf"), f_cdf(c.x, c.df1, c.df2), c.cdf);
        group.probability(format!("{case} sf"), f_sf(c.x, c.df1, c.df2), c.sf);
    }
    group.finish();
}

// scipy.stats.f.sf at the points f.isf(1e-10) and f.isf(1e-14).
#[test]
fn central_far_tail_matches_scipy() {
    let mut group = Group::new("f_sf far tail");
    for c in reference().central_tail {
        let case = format!("F({}, {}) at {:e}", c.df1, c.df2, c.x);
        group.probability(case, f_sf(c.x, c.df1, c.df2), c.sf);
    }
    group.finish();
}

// scipy.stats.f.ppf and f.isf.
#[test]
fn central_quantiles_match_scipy() {
    let mut group = Group::new("f_quantile");
    for c in reference().central_quantile {
        let case = format!("F({}, {}) p = {:e}", c.df1, c.df2, c.p);
        group.quantile(case, f_quantile(c.p, c.df1, c.df2), c.x);
    }
    group.finish();
    let mut group = Group::new("f_upper_quantile");
    for c in reference().central_upper_quantile {
        let case = format!("F({}, {}) q = {:e}", c.df1, c.df2, c.q);
        group.quantile(case, f_upper_quantile(c.q, c.df1, c.df2), c.x);
    }
    group.finish();
}

// scipy.stats.ncf.cdf and ncf.sf.
#[test]
fn noncentral_cdf_and_sf_match_scipy() {
    let mut group = Group::new("noncentral_f_cdf / sf");
    for c in reference().noncentral {
        let case = format!("F'({}, {}, {}) at {:e}", c.df1, c.df2, c.nc, c.x);
        group.probability(
            format!("{case} cdf"),
            noncentral_f_cdf(c.x, c.df1, c.df2, c.nc),
            c.cdf,
        );
        group.probability(
            format!("{case} sf"),
            noncentral_f_sf(c.x, c.df1, c.df2, c.nc),
            c.sf,
        );
    }
    group.finish();
}

// scipy.stats.ncf.sf at ncf.isf(q) and ncf.cdf at ncf.ppf(q), q = 1e-7 and 1e-11.
#[test]
fn noncentral_far_tails_match_scipy() {
    let mut group = Group::new("noncentral far tails");
    for c in reference().noncentral_tail {
        let case = format!(
            "F'({}, {}, {}) {} tail at {:e}",
            c.df1, c.df2, c.nc, c.tail, c.x
        );
        let got = match c.tail.as_str() {
            "upper" => noncentral_f_sf(c.x, c.df1, c.df2, c.nc),
            "lower" => noncentral_f_cdf(c.x, c.df1, c.df2, c.nc),
            other => panic!("unknown tail {other}"),
        };
        group.probability(case, got, c.value);
    }
    group.finish();
}

// scipy.stats.ncf.ppf.
#[test]
fn noncentral_quantiles_match_scipy() {
    let mut group = Group::new("noncentral_f_quantile");
    for c in reference().noncentral_quantile {
        let case = format!("F'({}, {}, {}) p = {}", c.df1, c.df2, c.nc, c.p);
        group.quantile(case, noncentral_f_quantile(c.p, c.df1, c.df2, c.nc), c.x);
    }
    group.finish();
}

// ncf.sf(f.ppf(1 - alpha, d1, d2), d1, d2, nc) in scipy, both through the free
// function and through a reused CriticalValue.
#[test]
fn fixed_power_matches_scipy() {
    let mut group = Group::new("fixed_power");
    let mut cached = Group::new("CriticalValue::fixed_power");
    for c in reference().power {
        let case = format!("alpha {} F'({}, {}, {})", c.alpha, c.df1, c.df2, c.nc);
        group.probability(
            case.clone(),
            fixed_power(c.alpha, c.df1, c.df2, c.nc),
            c.power,
        );
        let critical = CriticalValue::new(c.alpha, c.df1, c.df2);
        cached.probability(case, critical.fixed_power(c.nc), c.power);
    }
    group.finish();
    cached.finish();
}

// f.sf(f.ppf(1 - alpha, d1, d2) * ratio, d1, d2) in scipy.
#[test]
fn random_power_matches_scipy() {
    let mut group = Group::new("random_power");
    for c in reference().random_power {
        let case = format!(
            "alpha {} F({}, {}) ratio {}",
            c.alpha, c.df1, c.df2, c.ratio
        );
        group.probability(case, random_power(c.alpha, c.df1, c.df2, c.ratio), c.power);
    }
    group.finish();
}

// ---------------------------------------------------------------------------
// High precision: mpmath at 30 digits, from tests/reference/high_precision.py.
// ---------------------------------------------------------------------------

/// Relative tolerance against the 30-digit values, for every probability (both
/// tails, however small), quantile and power.
const HIGH_PRECISION_REL: f64 = 1e-12;

#[derive(Deserialize)]
struct HighPrecision {
    source: String,
    probabilities: Vec<Noncentral>,
    quantiles: Vec<HighPrecisionQuantile>,
    power: Vec<Power>,
}

#[derive(Deserialize)]
struct HighPrecisionQuantile {
    tail: String,
    p: f64,
    df1: f64,
    df2: f64,
    x: f64,
}

fn high_precision() -> HighPrecision {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/high_precision.json"
    );
    let text = std::fs::read_to_string(path).expect("reference file is committed");
    let reference: HighPrecision = serde_json::from_str(&text).expect("reference file parses");
    assert!(
        reference.source.starts_with("mpmath "),
        "{}",
        reference.source
    );
    reference
}

fn relative_error(got: f64, want: f64) -> f64 {
    if want == 0.0 {
        got.abs()
    } else {
        ((got - want) / want).abs()
    }
}

#[test]
fn high_precision_values() {
    let reference = high_precision();
    let mut worst: (f64, String) = (0.0, String::new());
    let mut failures = Vec::new();
    let mut check = |case: String, got: f64, want: f64| {
        let rel = relative_error(got, want);
        if rel.is_nan() || rel > HIGH_PRECISION_REL {
            failures.push(format!("{case}: got {got:e}, mpmath {want:e}, rel {rel:e}"));
        }
        if rel > worst.0 {
            worst = (rel, format!("{case}: got {got:e}, mpmath {want:e}"));
        }
    };
    for c in &reference.probabilities {
        let case = format!("F'({}, {}, {}) at {:e}", c.df1, c.df2, c.nc, c.x);
        check(
            format!("{case} cdf"),
            noncentral_f_cdf(c.x, c.df1, c.df2, c.nc),
            c.cdf,
        );
        check(
            format!("{case} sf"),
            noncentral_f_sf(c.x, c.df1, c.df2, c.nc),
            c.sf,
        );
    }
    for c in &reference.quantiles {
        let case = format!("F({}, {}) {} p = {:e}", c.df1, c.df2, c.tail, c.p);
        let got = match c.tail.as_str() {
            "upper" => f_upper_quantile(c.p, c.df1, c.df2),
            "lower" => f_quantile(c.p, c.df1, c.df2),
            other => panic!("unknown tail {other}"),
        };
        check(case, got, c.x);
    }
    for c in &reference.power {
        let case = format!("alpha {} F'({}, {}, {})", c.alpha, c.df1, c.df2, c.nc);
        check(case, fixed_power(c.alpha, c.df1, c.df2, c.nc), c.power);
    }
    println!(
        "high precision: worst relative error {:.2e}: {}",
        worst.0, worst.1
    );
    assert!(
        failures.is_empty(),
        "{} outside {HIGH_PRECISION_REL:e}:\n{}",
        failures.len(),
        failures.join("\n")
    );
}
