//! The unbalanced engine (Hartley's synthesis over the design matrices) against published
//! formulas, and against the balanced engine where the layout is balanced.
//!
//! Sources, named beside each check:
//! - Searle, Casella and McCulloch (1992), Variance Components, chapter on the one-way
//!   classification: for a random factor with n_i observations in level i,
//!   E(MS_A) = σ² + n₀ σ²_A with n₀ = (N - Σ n_i² / N) / (a - 1).
//! - Sokal and Rohlf, Biometry, the unbalanced two-level nested anova (B within A, b_i
//!   subgroups in group i, n_ij observations in subgroup ij, n_i. = Σ_j n_ij):
//!   E(MS_B(A)) = σ² + n₀ σ²_B, n₀ = (N - Σ_i Σ_j n_ij² / n_i.) / (Σ b_i - a);
//!   E(MS_A) = σ² + n₀' σ²_B + n₀'' σ²_A, with
//!   n₀' = (Σ_i Σ_j n_ij² / n_i. - Σ_ij n_ij² / N) / (a - 1) and
//!   n₀'' = (N - Σ_i n_i.² / N) / (a - 1);
//!   A is then tested over (n₀'/n₀) MS_B(A) + (1 - n₀'/n₀) MS_residual, a synthetic mean
//!   square with Satterthwaite's df. (These formulas are written from memory; they are
//!   also in Searle, Casella and McCulloch 1992 for the two-way nested classification.)
//! - Searle (1971), Linear Models: in the unbalanced one-way fixed model
//!   E(MS_A) = σ² + Σ n_i (α_i - ᾱ)² / (a - 1) with ᾱ = Σ n_i α_i / N (from memory).
//! - The balanced engine (`ems::Model` under the unrestricted convention), whose rules are
//!   held against textbook tables in tests/textbook.rs: on a balanced layout the synthesis
//!   must give the same df and coefficients to 1e-9.

use emsplan::ems::Model;
use emsplan::errorterm::Verdict;
use emsplan::layout::{Convention, Factor, Kind, Layout, Levels, Structure, SumsOfSquares};
use emsplan::planning::{PlanningValues, to_f64};
use emsplan::unbalanced::{Design, Fit};

#[path = "common/synthesis.rs"]
mod synthesis;
use proptest::prelude::*;
use synthesis::Analysis;

const TOLERANCE: f64 = 1e-9;

fn layout(text: &str) -> Layout {
    let spec = emsplan::spec::parse(text).expect("the layout parses");
    Layout::from_spec(&spec, text).expect("the layout is valid")
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= TOLERANCE * a.abs().max(b.abs()).max(1.0)
}

/// Coefficient of component `c` in E(MS[t]), by term labels.
fn coefficient(a: &Analysis, layout: &Layout, t: &str, c: &str) -> f64 {
    let s = &layout.structure;
    let find = |label: &str| {
        a.design
            .model
            .terms
            .iter()
            .position(|u| u.label(s) == label)
            .unwrap_or_else(|| panic!("no term {label}"))
    };
    a.ems.coefficient(find(t), find(c))
}

fn df(a: &Analysis, layout: &Layout, t: &str) -> u64 {
    let s = &layout.structure;
    let i = a
        .design
        .model
        .terms
        .iter()
        .position(|u| u.label(s) == t)
        .unwrap();
    a.fit.df[i]
}

/// Asserts that the synthesis reproduces the balanced engine (unrestricted) on a
/// balanced layout, for both kinds of sums of squares.
fn assert_reproduces_balanced(layout: &Layout, what: &str) {
    let mut l = layout.clone();
    l.structure.convention = Convention::Unrestricted;
    let model = Model::new(&l.structure);
    let bal_df = model.df(&l.levels);
    let bal = model.ems(&l.levels).expect("no overflow");
    let design = Design::new(&l).expect("within the engine's size");
    for kind in [SumsOfSquares::Sequential, SumsOfSquares::Type3] {
        let fit = Fit::new(&design, kind);
        let ems = fit.ems(&design);
        assert_eq!(fit.df, bal_df, "{what} {kind:?}: df");
        for (t, &d) in bal_df.iter().enumerate() {
            if d == 0 {
                assert!(
                    ems.rows[t].is_empty(),
                    "{what}: a 0-df term has no mean square"
                );
                continue;
            }
            let label = model.terms[t].label(&l.structure);
            for c in 0..model.terms.len() {
                let want = to_f64(&bal.coefficient(t, c));
                let got = ems.coefficient(t, c);
                assert!(
                    close(want, got),
                    "{what} {kind:?}: coefficient of {} in E(MS[{label}]): balanced {want}, synthesis {got}",
                    model.terms[c].label(&l.structure)
                );
            }
        }
    }
}

#[test]
fn every_shipped_balanced_problem_is_reproduced() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("problems");
    let mut checked = 0;
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_none_or(|x| x != "toml") {
            continue;
        }
        let (l, _, _) = Layout::from_file(&path).expect("shipped problems are valid");
        // The synthesis pools omitted terms into the residual only; a layout that pools
        // into a stratum above it is checked by the exact engine alone.
        if !l.is_balanced() || Model::new(&l.structure).pools_above_residual() {
            continue;
        }
        assert_reproduces_balanced(&l, &path.display().to_string());
        checked += 1;
    }
    assert!(checked >= 5, "only {checked} balanced problems found");
}

// Random balanced layouts: 1 to 4 factors, fixed or random, factor i nested in any
// subset of 0..i, 1 to 4 levels (fixed at least 2), 1 to 3 replicates, sometimes an
// omitted two-factor interaction; no finite populations (the synthesis assumes large ones).
fn layout_draw() -> impl Strategy<Value = Layout> {
    (
        prop::collection::vec(
            (
                any::<bool>(),
                prop::bool::weighted(0.35),
                any::<u32>(),
                1u64..=4,
            ),
            1..=4,
        ),
        1u64..=3,
        prop::option::weighted(0.3, any::<usize>()),
    )
        .prop_map(|(draws, replicates, omit)| {
            const NAMES: [&str; 4] = ["site", "plot", "dose", "strain"];
            let factors: Vec<Factor> = draws
                .iter()
                .enumerate()
                .map(|(i, &(random, nested, bits, _))| Factor {
                    name: NAMES[i].into(),
                    kind: if random { Kind::Random } else { Kind::Fixed },
                    within: if nested { bits & ((1 << i) - 1) } else { 0 },
                    ancestors: 0,
                    population: None,
                })
                .collect();
            let per_factor = draws
                .iter()
                .map(|&(random, _, _, n)| if random { n } else { n.max(2) })
                .collect();
            let mut s = Structure::new(factors, Vec::new(), Convention::Unrestricted).unwrap();
            if let Some(pick) = omit {
                let n = s.factors.len();
                let pairs: Vec<u32> = (0..n)
                    .flat_map(|i| (i + 1..n).map(move |j| (i, j)))
                    .filter(|&(i, j)| {
                        s.factors[i].ancestors & (1 << j) == 0
                            && s.factors[j].ancestors & (1 << i) == 0
                    })
                    .map(|(i, j)| (1 << i) | (1 << j))
                    .collect();
                // Only an interaction that no random term of the model contains: the
                // incidence columns of a random term above an omitted interaction span
                // its space, so under the unrestricted model the pooled residual really
                // carries that random term's variance, which the balanced engine's pooling
                // rule leaves out (the classical rule pools an interaction only when
                // nothing random above it remains). Such layouts are not comparable.
                let pairs: Vec<u32> = pairs
                    .into_iter()
                    .filter(|&o| {
                        let omitted = emsplan::layout::term_of(&s, o);
                        !emsplan::term::model_terms(&s).iter().any(|u| {
                            u.live != o
                                && u.kind(&s) == Kind::Random
                                && omitted.subscripts() & !u.subscripts() == 0
                        })
                    })
                    .collect();
                if !pairs.is_empty() {
                    s.omitted = vec![pairs[pick % pairs.len()]];
                }
            }
            Layout::new(
                "random".into(),
                s,
                Levels {
                    per_factor,
                    replicates,
                },
            )
            .unwrap()
        })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 96, .. ProptestConfig::default() })]

    /// On a balanced layout, Hartley's synthesis gives the balanced engine's df and
    /// expected mean squares (unrestricted convention), for either kind of sums of squares.
    #[test]
    fn random_balanced_layouts_are_reproduced(l in layout_draw()) {
        // Pooling into a stratum above the residual is the exact engine's alone.
        prop_assume!(!Model::new(&l.structure).pools_above_residual());
        assert_reproduces_balanced(&l, &format!("{:?}", l.levels));
    }
}

/// One-way random layout with n = (2, 3, 5, 6): n₀ = (N - Σ n²/N)/(a - 1)
/// (Searle, Casella and McCulloch 1992).
#[test]
fn one_way_random_coefficient_is_n0() {
    let text = r#"
[layout]
replicates = 6
[[layout.remove]]
batch = 1
replicate = 3
[[layout.remove]]
batch = 1
replicate = 4
[[layout.remove]]
batch = 1
replicate = 5
[[layout.remove]]
batch = 1
replicate = 6
[[layout.remove]]
batch = 2
replicate = 4
[[layout.remove]]
batch = 2
replicate = 5
[[layout.remove]]
batch = 2
replicate = 6
[[layout.remove]]
batch = 3
replicate = 6
[[factor]]
name = "batch"
kind = "random"
levels = 4
"#;
    let l = layout(text);
    let a = Analysis::new(&l).unwrap();
    let n = [2.0, 3.0, 5.0, 6.0];
    let big_n: f64 = n.iter().sum();
    let n0 = (big_n - n.iter().map(|x| x * x).sum::<f64>() / big_n) / 3.0;
    assert_eq!(l.observations(), 16);
    assert_eq!(df(&a, &l, "batch"), 3);
    assert_eq!(df(&a, &l, "residual"), 12);
    assert!(close(coefficient(&a, &l, "batch", "batch"), n0));
    assert!(close(coefficient(&a, &l, "batch", "residual"), 1.0));
    let batch = &a.tests[0].as_ref().unwrap();
    assert_eq!(batch.verdict, Verdict::Exact);
    // The same counts as a fixed factor: the κ² coefficient averages Searle's
    // Σ n_i (α_i - ᾱ)² / (a - 1) over patterns of unit size in every contrast direction,
    // computed here over the orthonormal Helmert contrasts; it too equals n₀.
    let fixed = layout(&text.replace("kind = \"random\"", "kind = \"fixed\""));
    let f = Analysis::new(&fixed).unwrap();
    let a_levels = 4;
    let mut average = 0.0;
    for k in 0..a_levels - 1 {
        let mut c = vec![0.0; a_levels];
        let norm = (((k + 1) * (k + 2)) as f64).sqrt();
        for item in c.iter_mut().take(k + 1) {
            *item = 1.0 / norm;
        }
        c[k + 1] = -((k + 1) as f64) / norm;
        let mean = c.iter().zip(&n).map(|(x, m)| x * m).sum::<f64>() / big_n;
        // Pattern α = c: Σα² = 1, κ² = 1/(a - 1), E(MS) - σ² = Q(c)/(a - 1), so its
        // coefficient of κ² is Q(c).
        let q: f64 = c.iter().zip(&n).map(|(x, m)| m * (x - mean).powi(2)).sum();
        average += q / (a_levels - 1) as f64;
    }
    let got = coefficient(&f, &fixed, "batch", "batch");
    assert!(close(got, average), "{got} vs {average}");
    assert!(close(got, n0), "{got} vs {n0}");
}

const NESTED: &str = r#"
[layout]
replicates = 4
[[layout.remove]]
pen = 3
farm = 1
[[layout.remove]]
farm = 2
pen = 1
replicate = 4
[[layout.remove]]
farm = 2
pen = 2
replicate = 3
[[layout.remove]]
farm = 2
pen = 2
replicate = 4
[[layout.remove]]
farm = 3
pen = 3
replicate = 1
[[factor]]
name = "farm"
kind = "random"
levels = 3
[[factor]]
name = "pen"
kind = "random"
levels = 3
within = ["farm"]
"#;

/// Two-stage nested, unbalanced in subgroups and in observations (Sokal and Rohlf's n₀,
/// n₀', n₀''): farm 1 keeps pens of (4, 4), farm 2 (3, 2, 4), farm 3 (4, 4, 3).
#[test]
fn two_stage_nested_coefficients_are_sokal_and_rohlfs() {
    let l = layout(NESTED);
    let a = Analysis::new(&l).unwrap();
    let n: Vec<Vec<f64>> = vec![vec![4.0, 4.0], vec![3.0, 2.0, 4.0], vec![4.0, 4.0, 3.0]];
    let groups = n.len() as f64;
    let subgroups: f64 = n.iter().map(|g| g.len() as f64).sum();
    let big_n: f64 = n.iter().flatten().sum();
    let ni: Vec<f64> = n.iter().map(|g| g.iter().sum()).collect();
    let within: f64 = n
        .iter()
        .zip(&ni)
        .map(|(g, t)| g.iter().map(|x| x * x).sum::<f64>() / t)
        .sum();
    let all: f64 = n.iter().flatten().map(|x| x * x).sum::<f64>() / big_n;
    let n0 = (big_n - within) / (subgroups - groups);
    let n0p = (within - all) / (groups - 1.0);
    let n0pp = (big_n - ni.iter().map(|x| x * x).sum::<f64>() / big_n) / (groups - 1.0);
    assert_eq!(df(&a, &l, "farm"), 2);
    assert_eq!(df(&a, &l, "pen(farm)"), 5);
    assert_eq!(df(&a, &l, "residual"), 20);
    assert!(close(coefficient(&a, &l, "pen(farm)", "pen(farm)"), n0));
    assert!(close(coefficient(&a, &l, "pen(farm)", "residual"), 1.0));
    assert!(close(coefficient(&a, &l, "farm", "pen(farm)"), n0p));
    assert!(close(coefficient(&a, &l, "farm", "farm"), n0pp));
    assert!(close(coefficient(&a, &l, "farm", "residual"), 1.0));
    // farm is tested over (n₀'/n₀) MS[pen(farm)] + (1 - n₀'/n₀) MS[residual].
    let test = a.tests[0].as_ref().unwrap();
    assert_eq!(test.verdict, Verdict::QuasiF);
    let w: Vec<f64> = test.denominator.iter().map(|d| d.1).collect();
    assert_eq!(test.denominator.len(), 2);
    assert!(close(w[0], n0p / n0), "{w:?}");
    assert!(close(w[1], 1.0 - n0p / n0), "{w:?}");
    // Satterthwaite (1946): df = (Σ wᵢ E(MSᵢ))² / Σ (wᵢ E(MSᵢ))² / dfᵢ, with E(MS) from
    // the planning values σ = 1 (residual), 0.5 (pen), 0.8 (farm).
    let text = format!("{NESTED}\n[sd]\nresidual = 1.0\npen = 0.5\nfarm = 0.8\n");
    let l = layout(&text);
    let spec = emsplan::spec::parse(&text).unwrap();
    let plan = PlanningValues::from_spec(&spec, &text, &l).unwrap();
    let report = emsplan::check::check(&l, Convention::Unrestricted, &plan).unwrap();
    let e_pen = 1.0 + n0 * 0.25;
    let e_res = 1.0;
    let (a1, a2) = (n0p / n0 * e_pen, (1.0 - n0p / n0) * e_res);
    let satterthwaite = (a1 + a2).powi(2) / (a1 * a1 / 5.0 + a2 * a2 / 20.0);
    let got = report.terms[0]
        .test
        .as_ref()
        .unwrap()
        .denominator_df
        .unwrap();
    assert!(close(got, satterthwaite), "{got} vs {satterthwaite}");
}

/// The same nested layout with the farms fixed: the coefficient of σ²(pen) in E(MS[farm])
/// is still n₀', and κ²(farm)'s is n₀'' (the one-way average above, with n_i. = 8, 9, 11
/// observations per farm).
#[test]
fn nested_with_fixed_groups() {
    let random = layout(NESTED);
    let r = Analysis::new(&random).unwrap();
    let l = layout(&NESTED.replacen("kind = \"random\"", "kind = \"fixed\"", 1));
    let a = Analysis::new(&l).unwrap();
    let ni = [8.0, 9.0, 11.0];
    let n: f64 = ni.iter().sum();
    let n0pp = (n - ni.iter().map(|x| x * x).sum::<f64>() / n) / 2.0;
    assert!(close(coefficient(&a, &l, "farm", "farm"), n0pp));
    assert!(close(
        coefficient(&a, &l, "farm", "pen(farm)"),
        coefficient(&r, &random, "farm", "pen(farm)")
    ));
}

/// Identities of the sequential decomposition, from the definition of sums of squares
/// (common practice): the sequential sums of squares add up to the total about the mean,
/// so for σ² their coefficients in E(SS) add up to N - 1, and for a random term U to the
/// total sum of squares of its incidence columns, Σ_z Σ (z - z̄)² = N - Σ_cells n²/N.
#[test]
fn sequential_sums_of_squares_add_up() {
    let l = layout(LOST);
    let a = Analysis::new(&l).unwrap();
    let model = &a.design.model;
    let n = a.design.len() as f64;
    let residual = model.residual();
    let total_df: u64 = a.fit.df.iter().sum();
    assert_eq!(total_df as f64, n - 1.0);
    for u in 0..model.terms.len() {
        if model.kinds[u] == Kind::Fixed {
            continue;
        }
        let sum: f64 = (0..model.terms.len())
            .map(|t| a.ems.coefficient(t, u) * a.fit.df[t] as f64)
            .sum();
        let want = if u == residual {
            n - 1.0
        } else {
            let counts = a.design.term_counts(u);
            n - counts.iter().map(|c| c * c).sum::<f64>() / n
        };
        assert!(
            close(sum, want),
            "{}: {sum} vs {want}",
            model.terms[u].label(&l.structure)
        );
    }
}

/// Growth chambers with a chamber lost and a pot lost: 3 lights, chambers (3, 2, 3),
/// 4 cultivars, 3 pots less one. df from ranks: light a - 1 = 2; chamber(light)
/// Σ b_i - a = 5; cultivar 3; light x cultivar 6; chamber x cultivar(light): 32 occupied
/// cells less the 1 + 2 + 5 + 3 + 6 df before = 15; residual 95 - 32 = 63.
const LOST: &str = r#"
[layout]
replicates = 3
[[layout.remove]]
light = 2
chamber = 3
[[layout.remove]]
light = 1
chamber = 1
cultivar = 2
replicate = 3
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
"#;

#[test]
fn df_come_from_ranks() {
    let l = layout(LOST);
    for kind in [SumsOfSquares::Sequential, SumsOfSquares::Type3] {
        let mut l = l.clone();
        l.sums_of_squares = kind;
        let a = Analysis::new(&l).unwrap();
        for (t, want) in [
            ("light", 2),
            ("chamber(light)", 5),
            ("cultivar", 3),
            ("light x cultivar", 6),
            ("chamber x cultivar(light)", 15),
            ("residual", 63),
        ] {
            assert_eq!(df(&a, &l, t), want, "{kind:?} {t}");
        }
    }
}

/// A whole chamber lost, every chamber otherwise complete: the chambers differ in number
/// per light but not in size, so the balanced-looking coefficients hold with the
/// unbalanced df (two-stage nested formulas above with n_ij = 12: n₀ = n₀' = 12), and light
/// keeps an exact test over chamber(light) on Σ b_i - a = 5 df.
#[test]
fn a_lost_chamber_keeps_exact_tests() {
    let l = layout(&LOST.replace(
        "[[layout.remove]]\nlight = 1\nchamber = 1\ncultivar = 2\nreplicate = 3\n",
        "",
    ));
    let a = Analysis::new(&l).unwrap();
    assert_eq!(l.observations(), 96);
    assert!(close(coefficient(&a, &l, "light", "chamber(light)"), 12.0));
    assert!(close(
        coefficient(&a, &l, "chamber(light)", "chamber(light)"),
        12.0
    ));
    assert!(close(
        coefficient(&a, &l, "light", "chamber x cultivar(light)"),
        3.0
    ));
    let light = a.tests[0].as_ref().unwrap();
    assert_eq!(light.verdict, Verdict::Exact);
    assert_eq!(df(&a, &l, "chamber(light)"), 5);
    // With sequential sums of squares light comes first, and the lights differ in size
    // (36, 24, 36 pots) but every light has every cultivar in proportion, so no cultivar
    // effect enters E(MS[light]).
    assert_eq!(coefficient(&a, &l, "light", "cultivar"), 0.0);
}

/// Type III: every fixed term's mean square holds its own fixed component alone (the
/// other terms' contrasts are adjusted away), unlike sequential sums of squares where a
/// lost pot puts later fixed terms into E(MS[light]).
#[test]
fn type3_frees_fixed_terms_of_each_other() {
    let l = layout(LOST);
    let a = Analysis::new(&l).unwrap();
    assert!(coefficient(&a, &l, "light", "cultivar") > 0.0);
    let mut l3 = l.clone();
    l3.sums_of_squares = SumsOfSquares::Type3;
    let b = Analysis::new(&l3).unwrap();
    for t in ["light", "cultivar", "light x cultivar"] {
        for c in ["light", "cultivar", "light x cultivar"] {
            if c != t {
                assert_eq!(coefficient(&b, &l3, t, c), 0.0, "κ²({c}) in E(MS[{t}])");
            }
        }
    }
    // Every denominator reproduces the expectation it claims, to the match tolerance.
    for analysis in [&a, &b] {
        for (t, test) in analysis.tests.iter().enumerate() {
            let Some(test) = test else { continue };
            if !test.verdict.is_testable() {
                continue;
            }
            let target =
                emsplan::unbalanced::denominator::target(&analysis.design.model, &analysis.ems, t);
            let size = analysis.design.model.terms.len();
            let mut sum = vec![0.0; size];
            for &(v, w) in &test.denominator {
                for &(c, x) in &analysis.ems.rows[v] {
                    sum[c] += w * x;
                }
            }
            for (c, x) in target {
                sum[c] -= x;
            }
            assert!(sum.iter().all(|x| x.abs() < 1e-8), "{t}: {sum:?}");
        }
    }
}

/// An empty cell (one chamber's whole cultivar lost) takes df from the type III
/// hypotheses that involve it: a type III hypothesis on the full cell means is estimable
/// only where it avoids the empty cells (common practice for type III with empty cells;
/// e.g. Searle 1987, Linear Models for Unbalanced Data, from memory). Sequential sums of
/// squares keep every df, and the check says which sums of squares would.
#[test]
fn type3_with_an_empty_cell_loses_df_and_says_so() {
    let text = format!(
        "{}\n",
        EMPTY_CELL.replace("[layout]\n", "[layout]\nsums_of_squares = \"type3\"\n")
    );
    let l3 = layout(&text);
    let l1 = layout(EMPTY_CELL);
    let a3 = Analysis::new(&l3).unwrap();
    let a1 = Analysis::new(&l1).unwrap();
    // Sequential: light 1 df (2 levels), cultivar 2, light x cultivar 2.
    assert_eq!(
        ["light", "cultivar", "light x cultivar"].map(|t| df(&a1, &l1, t)),
        [1, 2, 2]
    );
    assert_eq!(a3.fit.sequential_df, a1.fit.df);
    let light = df(&a3, &l3, "light");
    let cultivar = df(&a3, &l3, "cultivar");
    assert!(
        light < 1 && cultivar < 2,
        "type III loses df: light {light}, cultivar {cultivar}"
    );
    let spec = emsplan::spec::parse(&text).unwrap();
    let plan = PlanningValues::from_spec(&spec, &text, &l3).unwrap();
    let report = emsplan::check::check(&l3, Convention::Unrestricted, &plan).unwrap();
    let all = emsplan::render::words::findings(&report).join("\n");
    assert!(
        all.contains("the removals leave light with no df (it had 1)")
            && all.contains(
                "sequential sums of squares (sums_of_squares = \"sequential\") give it 1 df"
            ),
        "{all}"
    );
    assert!(
        all.contains("with type III sums of squares cultivar keeps 1 of its 2 df"),
        "{all}"
    );
}

/// Light (fixed, 2) with chambers (random, 3 per light), cultivars (fixed, 3), 2 pots: a
/// chamber lost, a pot lost, and one chamber's whole third cultivar lost.
const EMPTY_CELL: &str = include_str!("fixtures/layouts/chambers-empty-cell.toml");
