//! Invariants of expected mean squares in balanced layouts, over random layouts.
//!
//! Each property is a fact of balanced ANOVA found in the standard texts, named beside it:
//! Cornfield and Tukey (1956), "Average values of mean squares in factorials", Annals of
//! Mathematical Statistics 27:907-949; Bennett and Franklin (1954), Statistical Analysis in
//! Chemistry and the Chemical Industry, the rules for EMS; Montgomery, Design and Analysis
//! of Experiments, the chapter on random and mixed models (its rules for expected mean
//! squares, and its treatment of the restricted and unrestricted mixed models); Searle,
//! Casella and McCulloch (1992), Variance Components, for the unrestricted model.
//! Section numbers are not given because they vary between editions; the citations are
//! from memory. The rules themselves are common practice in the trade.
//!
//! The layouts: 1 to 5 factors, each fixed or random; factor i may be nested in any subset
//! of factors 0..i, so nesting is acyclic; 1 to 5 levels (fixed factors at least 2);
//! 1 to 4 replicates; now and then a finite population for a random factor (from its
//! levels up to 10 more) and an omitted two-factor interaction; either convention.

use std::collections::BTreeMap;

use emsplan::check::check;
use emsplan::ems::{Ems, Model, Rational};
use emsplan::errorterm::{Verdict, error_terms, reproduces};
use emsplan::layout::{Convention, Factor, Kind, Layout, Levels, Structure};
use emsplan::term::{Mask, REPLICATE, Term};
use num_traits::{One, Zero};
use proptest::prelude::*;
use serde_json::Value;

const NAMES: [&str; 5] = ["greenhouse", "bench", "tray", "cultivar", "dose"];

/// What the strategy draws for one factor.
#[derive(Debug, Clone)]
struct FactorDraw {
    random: bool,
    nested: bool,
    within_bits: u32,
    levels: u64,
    population_extra: Option<u64>,
}

#[derive(Debug, Clone)]
struct LayoutDraw {
    factors: Vec<FactorDraw>,
    replicates: u64,
    omit_pick: Option<usize>,
    unrestricted: bool,
}

fn factor_draw() -> impl Strategy<Value = FactorDraw> {
    (
        any::<bool>(),
        prop::bool::weighted(0.35),
        any::<u32>(),
        1u64..=5,
        prop::option::weighted(0.25, 0u64..=10),
    )
        .prop_map(
            |(random, nested, within_bits, levels, population_extra)| FactorDraw {
                random,
                nested,
                within_bits,
                levels,
                population_extra,
            },
        )
}

fn layout_draw() -> impl Strategy<Value = LayoutDraw> {
    (
        prop::collection::vec(factor_draw(), 1..=5),
        1u64..=4,
        prop::option::weighted(0.3, any::<usize>()),
        any::<bool>(),
    )
        .prop_map(
            |(factors, replicates, omit_pick, unrestricted)| LayoutDraw {
                factors,
                replicates,
                omit_pick,
                unrestricted,
            },
        )
}

/// Builds the layout the draw describes; the draw is valid by construction.
fn build(d: &LayoutDraw) -> Layout {
    let factors: Vec<Factor> = d
        .factors
        .iter()
        .enumerate()
        .map(|(i, f)| Factor {
            name: NAMES[i].to_string(),
            kind: if f.random { Kind::Random } else { Kind::Fixed },
            within: if f.nested {
                f.within_bits & ((1u32 << i) - 1)
            } else {
                0
            },
            ancestors: 0,
            population: match (f.random, f.population_extra) {
                (true, Some(extra)) => Some(f.levels + extra),
                _ => None,
            },
        })
        .collect();
    let per_factor: Vec<u64> = d
        .factors
        .iter()
        .map(|f| if f.random { f.levels } else { f.levels.max(2) })
        .collect();
    let convention = if d.unrestricted {
        Convention::Unrestricted
    } else {
        Convention::Restricted
    };
    let mut structure = Structure::new(factors, Vec::new(), convention).expect("acyclic");
    if let Some(pick) = d.omit_pick {
        // Two-factor interactions that are terms: neither factor nested in the other.
        let n = structure.factors.len();
        let pairs: Vec<Mask> = (0..n)
            .flat_map(|i| (i + 1..n).map(move |j| (i, j)))
            .filter(|&(i, j)| {
                structure.factors[i].ancestors & (1 << j) == 0
                    && structure.factors[j].ancestors & (1 << i) == 0
            })
            .map(|(i, j)| (1 << i) | (1 << j))
            .collect();
        if !pairs.is_empty() {
            structure.omitted = vec![pairs[pick % pairs.len()]];
        }
    }
    let levels = Levels {
        per_factor,
        replicates: d.replicates,
    };
    Layout::new("drawn layout".into(), structure, levels).expect("valid by construction")
}

fn count(levels: &Levels, j: usize) -> u64 {
    levels.per_factor[j]
}

fn factor_bits(mask: Mask, n: usize) -> impl Iterator<Item = usize> {
    (0..n).filter(move |&j| mask & (1 << j) != 0)
}

/// Cells of a term counted from its definition: the product of the level counts of its
/// live and nesting factors, times the replicates for the residual.
fn cells_of(t: &Term, levels: &Levels) -> u64 {
    let n = levels.per_factor.len();
    let base: u64 = factor_bits(t.live | t.nest, n)
        .map(|j| count(levels, j))
        .product();
    if t.live & REPLICATE != 0 {
        base * levels.replicates
    } else {
        base
    }
}

fn observations(levels: &Levels) -> u64 {
    levels.per_factor.iter().product::<u64>() * levels.replicates
}

/// A term is random when any factor among its subscripts is random (a fixed factor nested
/// in a random one gives random effects): common practice, e.g. Montgomery's nested and
/// split-plot examples. The residual is random.
fn is_random(s: &Structure, t: &Term) -> bool {
    t.live & REPLICATE != 0
        || factor_bits(t.live | t.nest, s.factors.len()).any(|j| s.factors[j].kind == Kind::Random)
}

/// The coefficient of component U in E(MS_T) by the tableau rule, written out here
/// independently of the engine:
///
/// - U appears only when its subscripts (live and nesting) include all of T's;
/// - its coefficient is the product, over the subscripts not live in T, of U's entries:
///   n_j where j is not a subscript of U, 1 where j nests U, and for j live in U:
///   1 for a random factor of infinite population, 1 - n_j/N_j for one of finite
///   population N_j (Cornfield and Tukey 1956; Bennett and Franklin 1954), and 0 for a
///   fixed factor;
/// - under the unrestricted convention a random U is not constrained over its fixed
///   subscripts, so the fixed entries of a random U are 1 instead of 0 (Searle, Casella
///   and McCulloch 1992; Montgomery's unrestricted mixed model). A fixed U still appears
///   only in its own mean square.
///
/// The replicate is a random live subscript of the residual only.
fn tableau_coefficient(s: &Structure, levels: &Levels, t: &Term, u: &Term) -> Rational {
    let n = s.factors.len();
    let subs = |x: &Term| x.live | x.nest;
    if subs(t) & !subs(u) != 0 {
        return Rational::zero();
    }
    let u_random = is_random(s, u);
    let mut c = Rational::one();
    // Replicate column: not a subscript of any term but the residual.
    if u.live & REPLICATE == 0 {
        c *= Rational::from_integer(levels.replicates as i128);
    }
    for j in 0..n {
        if t.live & (1 << j) != 0 {
            continue;
        }
        let nj = count(levels, j) as i128;
        let f = &s.factors[j];
        if subs(u) & (1 << j) == 0 {
            c *= Rational::from_integer(nj);
        } else if u.nest & (1 << j) != 0 {
            // entry 1
        } else {
            // live in U, not live in T
            match f.kind {
                Kind::Fixed => {
                    let free = u_random && s.convention == Convention::Unrestricted;
                    if !free {
                        return Rational::zero();
                    }
                }
                Kind::Random => {
                    if let Some(big) = f.population {
                        c *= Rational::new(big as i128 - nj, big as i128);
                    }
                }
            }
        }
    }
    c
}

fn ems_of(layout: &Layout) -> (Model, Ems, Vec<u64>) {
    let model = Model::new(&layout.structure);
    let ems = model
        .ems(&layout.levels)
        .expect("small counts do not overflow");
    let df = model.df(&layout.levels);
    (model, ems, df)
}

/// Every term of the layout, omitted ones included: the sets of factors that contain no
/// factor together with one it is nested in (Montgomery's rule that a nested factor does
/// not interact with its nest).
fn all_structural_terms(s: &Structure) -> Vec<Term> {
    let n = s.factors.len();
    (1..(1u32 << n))
        .filter(|&live| factor_bits(live, n).all(|j| s.factors[j].ancestors & live == 0))
        .map(|live| Term {
            live,
            nest: factor_bits(live, n).fold(0, |m, j| m | s.factors[j].ancestors),
        })
        .collect()
}

/// Exact solution of Σ_k w_k a_k = b over the rationals, by Gauss-Jordan elimination
/// (written here, not the engine's). `None` when inconsistent.
fn solvable(columns: &[Vec<Rational>], b: &[Rational]) -> bool {
    let rows = b.len();
    let cols = columns.len();
    let mut m: Vec<Vec<Rational>> = (0..rows)
        .map(|r| {
            let mut row: Vec<Rational> = columns.iter().map(|c| c[r]).collect();
            row.push(b[r]);
            row
        })
        .collect();
    let mut rank = 0;
    for c in 0..cols {
        let Some(p) = (rank..rows).find(|&i| !m[i][c].is_zero()) else {
            continue;
        };
        m.swap(rank, p);
        let pivot = m[rank][c];
        for x in m[rank].iter_mut() {
            *x /= pivot;
        }
        for i in 0..rows {
            if i != rank && !m[i][c].is_zero() {
                let f = m[i][c];
                let pivot_row = m[rank].clone();
                for (x, y) in m[i].iter_mut().zip(pivot_row) {
                    *x -= f * y;
                }
            }
        }
        rank += 1;
        if rank == rows {
            break;
        }
    }
    (rank..rows).all(|i| m[i][cols].is_zero())
}

/// 200 cases a property, or `PROPTEST_CASES` when set (for a longer hunt).
fn config() -> ProptestConfig {
    let cases = std::env::var("PROPTEST_CASES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(200);
    ProptestConfig {
        cases,
        ..ProptestConfig::default()
    }
}

proptest! {
    #![proptest_config(config())]

    /// 1. A term's own component has coefficient N / cells(T): the observations behind
    /// each mean of the term (Montgomery's EMS rules: the product of the level counts of
    /// the subscripts not in the term; Cornfield and Tukey 1956). The residual's is 1.
    #[test]
    fn own_coefficient_is_observations_per_cell(d in layout_draw()) {
        let layout = build(&d);
        let (model, ems, _) = ems_of(&layout);
        let n = observations(&layout.levels);
        prop_assert_eq!(n, layout.observations());
        for (t, term) in model.terms.iter().enumerate() {
            // A mean square pooled with omitted terms is held by the tableau property.
            if model.pooled(t).next().is_some() && t != model.residual() {
                continue;
            }
            let cells = cells_of(term, &layout.levels);
            prop_assert_eq!(n % cells, 0);
            let expected = Rational::from_integer((n / cells) as i128);
            prop_assert_eq!(
                ems.coefficient(t, t), expected,
                "term {} of {:?}", term.label(&layout.structure), layout.structure
            );
        }
        let r = model.residual();
        prop_assert!(model.terms[r].is_residual());
        prop_assert_eq!(&ems.rows[r], &vec![(r, Rational::one())]);
    }

    /// 2. With every factor random there is no fixed subscript to sum to zero over, so the
    /// restricted and unrestricted models coincide (the conventions differ only in mixed
    /// interactions: Montgomery, restricted vs unrestricted mixed model; Hocking 1973,
    /// "A discussion of the two-way mixed model", The American Statistician). The same
    /// holds, trivially, with every factor fixed.
    #[test]
    fn conventions_agree_without_mixed_terms(d in layout_draw(), all_random in any::<bool>()) {
        let mut d = d;
        for f in &mut d.factors {
            f.random = all_random;
            f.population_extra = None;
        }
        let layout = build(&d);
        let mut r = layout.structure.clone();
        r.convention = Convention::Restricted;
        let mut u = layout.structure.clone();
        u.convention = Convention::Unrestricted;
        let (mr, mu) = (Model::new(&r), Model::new(&u));
        let er = mr.ems(&layout.levels).unwrap();
        let eu = mu.ems(&layout.levels).unwrap();
        prop_assert_eq!(&er, &eu);
        let df = mr.df(&layout.levels);
        prop_assert_eq!(error_terms(&mr, &er, &df), error_terms(&mu, &eu, &df));
    }

    /// 3. A denominator is valid when its expectation is E(MS_T) less T's own component,
    /// identically in the components (the definition of an F or quasi-F test, Satterthwaite
    /// 1946; Montgomery on approximate F tests). An exact test is one mean square with
    /// weight 1 and df > 0; a term is reported exact whenever such a mean square exists,
    /// untestable only when no combination of the other mean squares with df > 0 has the
    /// expectation it needs, and not estimable exactly when it has 0 df.
    #[test]
    fn denominators_reproduce_the_ems_they_claim(d in layout_draw()) {
        let layout = build(&d);
        let (model, ems, df) = ems_of(&layout);
        let tests = error_terms(&model, &ems, &df);
        let r = model.residual();
        prop_assert!(tests[r].is_none());
        for (t, test) in tests.iter().enumerate() {
            if t == r {
                continue;
            }
            let test = test.as_ref().expect("every non-residual term has a test");
            let label = model.terms[t].label(&layout.structure);
            let target: Vec<(usize, Rational)> =
                ems.rows[t].iter().filter(|(c, _)| *c != t).copied().collect();
            let single = (0..model.terms.len())
                .filter(|&v| v != t && df[v] > 0)
                .find(|&v| ems.rows[v] == target);
            prop_assert_eq!(test.verdict == Verdict::NotEstimable, df[t] == 0, "{}", &label);
            match test.verdict {
                Verdict::Exact => {
                    prop_assert_eq!(test.denominator.len(), 1, "{}", &label);
                    let (v, w) = test.denominator[0];
                    prop_assert_eq!(w, Rational::one());
                    prop_assert!(v != t && df[v] > 0, "{}", &label);
                    prop_assert!(reproduces(&ems, t, &test.denominator), "{}", &label);
                }
                Verdict::QuasiF => {
                    prop_assert!(single.is_none(), "{} has an exact test it did not report", &label);
                    prop_assert!(test.denominator.len() >= 2, "{}", &label);
                    for &(v, w) in &test.denominator {
                        prop_assert!(v != t && df[v] > 0 && !w.is_zero(), "{}", &label);
                    }
                    prop_assert!(reproduces(&ems, t, &test.denominator), "{}", &label);
                }
                Verdict::Untestable => {
                    prop_assert!(single.is_none(), "{} has an exact test it did not report", &label);
                    // No combination of the other estimable mean squares works, over
                    // every component of the model.
                    let others: Vec<usize> =
                        (0..model.terms.len()).filter(|&v| v != t && df[v] > 0).collect();
                    let comps = model.terms.len();
                    let columns: Vec<Vec<Rational>> = others
                        .iter()
                        .map(|&v| (0..comps).map(|c| ems.coefficient(v, c)).collect())
                        .collect();
                    let b: Vec<Rational> = (0..comps)
                        .map(|c| if c == t { Rational::zero() } else { ems.coefficient(t, c) })
                        .collect();
                    prop_assert!(
                        !solvable(&columns, &b),
                        "{} is called untestable but a combination of mean squares reproduces it", &label
                    );
                }
                Verdict::NotEstimable => {
                    prop_assert!(test.denominator.is_empty());
                }
            }
        }
    }

    /// 4. The df partition the total: Σ df over every term and the residual = N - 1
    /// (balanced ANOVA), with an omitted interaction's df pooled into the residual. And
    /// each term's marginal table has 1 + Σ df(U) cells over the terms U whose subscripts
    /// lie within the term's (the mean plus the effects that table resolves).
    #[test]
    fn df_add_up(d in layout_draw()) {
        let layout = build(&d);
        let model = Model::new(&layout.structure);
        let df = model.df(&layout.levels);
        let n = observations(&layout.levels);
        prop_assert_eq!(df.iter().sum::<u64>(), n - 1);
        // Each omitted term's df join the term it is pooled into: the smallest random
        // term containing it, else the residual.
        let mut expected: Vec<u64> = model.terms.iter().map(|t| t.df(&layout.levels)).collect();
        expected[model.residual()] = n / layout.levels.replicates * (layout.levels.replicates - 1);
        for (o, &into) in model.omitted.iter().zip(&model.pooled_into) {
            let o_subs = o.live | o.nest;
            let t = model.terms[into];
            prop_assert!(t.is_residual() || o_subs & !(t.live | t.nest) == 0);
            prop_assert!(t.is_residual() || model.kinds[into] == Kind::Random);
            expected[into] += o.df(&layout.levels);
        }
        prop_assert_eq!(&df, &expected);

        let all = all_structural_terms(&layout.structure);
        let mut df_of: BTreeMap<Mask, u64> = BTreeMap::new();
        for term in &model.terms {
            if !term.is_residual() {
                df_of.insert(term.live, term.df(&layout.levels));
            }
        }
        for o in &model.omitted {
            df_of.insert(o.live, o.df(&layout.levels));
        }
        prop_assert_eq!(df_of.len(), all.len(), "terms of the model, omitted included");
        for t in &all {
            let within: u64 = all
                .iter()
                .filter(|u| (u.live | u.nest) & !(t.live | t.nest) == 0)
                .map(|u| df_of[&u.live])
                .sum();
            prop_assert_eq!(1 + within, cells_of(t, &layout.levels));
        }
    }

    /// 5. Component U appears in E(MS_T) only if U's subscripts include all of T's, and
    /// every coefficient is the tableau rule's (see `tableau_coefficient`).
    #[test]
    fn components_follow_the_tableau_rule(d in layout_draw()) {
        let layout = build(&d);
        let (model, ems, _) = ems_of(&layout);
        let s = &layout.structure;
        let df = model.df(&layout.levels);
        for (t, term) in model.terms.iter().enumerate() {
            // A pooled mean square estimates the df-weighted mean of the expectations
            // of the terms pooled into it (the term's own, and each omitted one's).
            let mut pooled: Vec<(Term, u64)> = model
                .pooled(t)
                .map(|o| (model.omitted[o], model.omitted[o].df(&layout.levels)))
                .collect();
            let own = df[t] - pooled.iter().map(|(_, d)| d).sum::<u64>();
            pooled.push((*term, own));
            for &(c, _) in &ems.rows[t] {
                let u = model.terms[c];
                prop_assert!(
                    pooled.iter().any(|(p, _)| (p.live | p.nest) & !(u.live | u.nest) == 0),
                    "{} appears in E(MS[{}])", u.label(s), term.label(s)
                );
            }
            for (c, u) in model.terms.iter().enumerate() {
                let expected = if pooled.len() == 1 || df[t] == 0 {
                    tableau_coefficient(s, &layout.levels, term, u)
                } else {
                    let total = Rational::from_integer(df[t] as i128);
                    pooled
                        .iter()
                        .map(|(p, d)| {
                            let x = tableau_coefficient(s, &layout.levels, p, u);
                            x * Rational::from_integer(*d as i128) / total
                        })
                        .fold(Rational::zero(), |a, b| a + b)
                };
                prop_assert_eq!(
                    ems.coefficient(t, c), expected,
                    "coefficient of {} in E(MS[{}]) under {:?}", u.label(s), term.label(s), s.convention
                );
            }
            // Coefficients are never stored as zero.
            prop_assert!(ems.rows[t].iter().all(|(_, x)| !x.is_zero()));
        }
    }

    /// 6. The JSON of `check` carries the contract's keys, with values that agree with
    /// the library's own results.
    #[test]
    fn check_json_has_the_contract_keys(d in layout_draw()) {
        let layout = build(&d);
        let convention = layout.structure.convention;
        let report = check(&layout, convention, &no_planning()).unwrap();
        let text = emsplan::render::json(&report);
        let v: Value = serde_json::from_str(&text).expect("the JSON parses");
        let (model, ems, df) = ems_of(&layout);
        let tests = error_terms(&model, &ems, &df);
        let s = &layout.structure;

        prop_assert_eq!(v["convention"].as_str(), Some(convention.name()));
        prop_assert_eq!(v["observations"].as_u64(), Some(observations(&layout.levels)));
        let terms = v["terms"].as_array().expect("terms is an array");
        prop_assert_eq!(terms.len(), model.terms.len());
        for (i, (jt, term)) in terms.iter().zip(&model.terms).enumerate() {
            let label = term.label(s);
            prop_assert_eq!(jt["label"].as_str(), Some(label.as_str()));
            let names = |key: &str| -> Option<Vec<String>> {
                jt[key].as_array()?.iter().map(|x| x.as_str().map(str::to_string)).collect()
            };
            let live: Vec<String> = term.live_names(s).iter().map(|x| x.to_string()).collect();
            let nest: Vec<String> = term.nest_names(s).iter().map(|x| x.to_string()).collect();
            prop_assert_eq!(names("live"), Some(live));
            prop_assert_eq!(names("within"), Some(nest));
            prop_assert_eq!(jt["residual"].as_bool(), Some(term.is_residual()));
            let kind = if is_random(s, term) { "random" } else { "fixed" };
            prop_assert_eq!(jt["kind"].as_str(), Some(kind));
            prop_assert_eq!(jt["df"].as_u64(), Some(df[i]));

            let jems = jt["ems"].as_array().expect("ems is an array");
            prop_assert_eq!(jems.len(), ems.rows[i].len());
            for comp in jems {
                let cl = comp["component"].as_str().expect("component is a string");
                let c = model.terms.iter().position(|u| u.label(s) == cl)
                    .expect("component names a term");
                let x = ems.coefficient(i, c);
                prop_assert!(!x.is_zero(), "{} listed in E(MS[{}]) with no coefficient", cl, &label);
                let want = *x.numer() as f64 / *x.denom() as f64;
                let got = comp["coefficient"].as_f64().expect("coefficient is a number");
                prop_assert!((got - want).abs() <= 1e-12 * want.abs(), "{} vs {}", got, want);
            }

            let jtest = &jt["test"];
            if term.is_residual() {
                prop_assert!(jtest.is_null(), "the residual is not tested");
                continue;
            }
            let test = tests[i].as_ref().unwrap();
            prop_assert!(jtest.is_object(), "{}: test is an object", &label);
            prop_assert_eq!(jtest["verdict"].as_str(), Some(emsplan::render::check::code(test.verdict)));
            let den = jtest["denominator"].as_array().expect("denominator is an array");
            prop_assert_eq!(den.len(), test.denominator.len());
            for (jd, &(v, w)) in den.iter().zip(&test.denominator) {
                let vl = model.terms[v].label(s);
                prop_assert_eq!(jd["term"].as_str(), Some(vl.as_str()));
                let want = *w.numer() as f64 / *w.denom() as f64;
                let got = jd["coefficient"].as_f64().expect("coefficient is a number");
                // serde_json's default float parsing may be one ulp off.
                prop_assert!((got - want).abs() <= 1e-12 * want.abs(), "{} vs {}", got, want);
            }
            let ddf = &jtest["denominator_df"];
            prop_assert!(jtest.as_object().unwrap().contains_key("denominator_df"));
            match test.verdict {
                Verdict::Exact => {
                    let v = test.denominator[0].0;
                    prop_assert_eq!(ddf.as_f64(), Some(df[v] as f64));
                }
                _ => prop_assert!(ddf.is_null(), "{}: no df before planning values", &label),
            }
        }
    }
}

/// The properties above say little if the draws never reach the interesting cases, so
/// check, over a fixed run of draws, that every verdict occurs, that the conventions
/// sometimes give different EMS, and that finite populations and omitted interactions
/// occur.
#[test]
fn the_draws_reach_every_case() {
    use proptest::strategy::ValueTree;
    use proptest::test_runner::TestRunner;
    let mut runner = TestRunner::deterministic();
    let strategy = layout_draw();
    let mut verdicts: BTreeMap<&str, usize> = BTreeMap::new();
    let (mut differ, mut finite, mut omitted, mut nested) = (0, 0, 0, 0);
    for _ in 0..500 {
        let d = strategy.new_tree(&mut runner).unwrap().current();
        let layout = build(&d);
        let (model, ems, df) = ems_of(&layout);
        for test in error_terms(&model, &ems, &df).into_iter().flatten() {
            *verdicts
                .entry(emsplan::render::check::code(test.verdict))
                .or_default() += 1;
        }
        let mut other = layout.structure.clone();
        other.convention = match other.convention {
            Convention::Restricted => Convention::Unrestricted,
            Convention::Unrestricted => Convention::Restricted,
        };
        if Model::new(&other).ems(&layout.levels).unwrap() != ems {
            differ += 1;
        }
        let s = &layout.structure;
        finite += s.factors.iter().any(|f| f.population.is_some()) as usize;
        omitted += !s.omitted.is_empty() as usize;
        nested += s.factors.iter().any(|f| f.within != 0) as usize;
    }
    for v in ["exact", "quasi_f", "untestable", "not_estimable"] {
        assert!(
            verdicts.get(v).copied().unwrap_or(0) > 0,
            "no {v} verdict in {verdicts:?}"
        );
    }
    assert!(differ > 0 && finite > 0 && omitted > 0 && nested > 0);
    eprintln!(
        "verdicts {verdicts:?}; conventions differ in {differ}, finite {finite}, omitted {omitted}, nested {nested} of 500"
    );
}

/// No planning values: the check of structure alone.
fn no_planning() -> emsplan::planning::PlanningValues {
    emsplan::planning::PlanningValues {
        alpha: 0.05,
        power: 0.8,
        priors: Default::default(),
        effects: Default::default(),
        cost: None,
    }
}
