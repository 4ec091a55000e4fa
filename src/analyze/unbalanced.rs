//! `analyze` for unbalanced data: cells with fewer observations than the layout's
//! replicates, or with none (a lost unit, a dead plant, a missing value).
//!
//! What is missing is read off the data, not the layout file: every cell of the full
//! layout holds what the data give it. The layout with those observations removed goes
//! through the unbalanced engine (`crate::unbalanced`): the sums of squares the layout
//! asks for (sequential by default, or type III) as projections, their expected mean
//! squares by Hartley's (1967) synthesis under the unrestricted model, and the error
//! terms, usually synthetic, from them. The tests are then made on the data as in the
//! balanced case: F, or the quasi-F with Satterthwaite's df from the observed mean squares.
//!
//! Variance components by the method of moments: the mean squares of the random terms and
//! the residual are set equal to their synthesised expectations and the square system
//! solved, MS = C θ. With sequential sums of squares and the fixed terms fitted first this
//! is Henderson's (1953) fitting-constants method (method III) in the form of Searle,
//! Casella and McCulloch (1992, Variance Components, ch. 5; citation from memory); unlike
//! the balanced case the system is not triangular, since a random term's sum of squares
//! adjusted only for the terms before it carries the components of those after it.
//!
//! Means are the raw means of the observations present, with their counts: with unequal
//! counts they are not the least-squares (adjusted) means, and a note says so.

use super::{
    AnalyzeReport, AnovaRow, Imbalance, LostUnit, MeanRow, MeansTable, Note, Numbers, Observations,
    component_estimates, describe, level_pairs, planned_test,
};
use crate::balanced::{Balanced, index_in};
use crate::ems::Model;
use crate::engine::Analysis;
use crate::error::Error;
use crate::layout::{Convention, Kind, Layout};
use crate::unbalanced::removal::{self, Removal};

pub fn analyze(layout: &Layout, data: &Observations, alpha: f64) -> Result<AnalyzeReport, Error> {
    let s = &layout.structure;
    let r = layout.levels.replicates as usize;
    let shape = Balanced::new(&Model::new(s), &layout.levels)?;
    let shaped = data_layout(layout, data, &shape)?;
    let a = Analysis::new(&shaped)?;
    let Some(syn) = &a.synthesis else {
        return Err(Error::invalid(
            None,
            "the data hold every observation of the layout: they are balanced",
        ));
    };
    let model = &a.model;
    let labels: Vec<String> = model.terms.iter().map(|t| t.label(s)).collect();

    // The responses in the design's order: by cell, then the cell's observations as read
    // (the removals take a cell's last replicates, so the kept ones are the first).
    let offsets = data.offsets();
    let y: Vec<f64> = syn
        .design
        .observations()
        .iter()
        .map(|o| {
            let at: Vec<usize> = o.levels.iter().map(|&l| l as usize).collect();
            data.y[offsets[shape.cell(&at)] + o.replicate as usize]
        })
        .collect();
    let ss = syn.fit.sums_of_squares(&syn.design, &y);
    let df = &a.df;
    let ms: Vec<f64> = ss
        .iter()
        .zip(df)
        .map(|(s, &d)| if d > 0 { s / d as f64 } else { f64::NAN })
        .collect();
    let grand_mean = y.iter().sum::<f64>() / y.len() as f64;

    let mut notes = super::data_notes(data);
    if s.convention == Convention::Restricted {
        notes.push(Note::RestrictedAsUnrestricted);
    }
    notes.extend(lost_units(layout, data, &shape));
    if !layout.removed.is_empty() {
        let declared = removal::cell_counts(layout);
        if let Some(c) = (0..declared.len()).find(|&c| data.counts[c] as u64 > declared[c]) {
            let mut at = vec![0usize; s.factors.len()];
            shape.levels_of_cell(c, &mut at);
            notes.push(Note::ExtraObservations {
                at: level_pairs(layout, &data.labels, s.all_factors(), &at),
            });
        }
    }

    let terms: Vec<AnovaRow> = model
        .terms
        .iter()
        .enumerate()
        .map(|(t, term)| {
            let test = a.tests[t].as_ref().map(|e| {
                let denominator = super::denominator_parts(&a, &e.denominator);
                let parts: Vec<(usize, f64)> =
                    e.denominator.iter().map(|(v, w)| (*v, w.value())).collect();
                planned_test(
                    e.verdict,
                    denominator,
                    &parts,
                    Numbers { ms: &ms, df },
                    t,
                    &labels[t],
                    &mut notes,
                )
            });
            AnovaRow {
                label: labels[t].clone(),
                kind: model.kinds[t],
                residual: term.is_residual(),
                df: df[t],
                ss: ss[t],
                ms: (df[t] > 0).then_some(ms[t]),
                test,
            }
        })
        .collect();
    if terms.iter().any(|row| {
        row.test.as_ref().is_some_and(|x| {
            x.verdict.is_testable()
                && x.denominator
                    .iter()
                    .any(|d| d.term != labels[model.residual()])
        })
    }) {
        notes.push(Note::ApproximateTests);
    }

    let theta = super::moment_estimates(&a, &ms);
    let components = component_estimates(model, &labels, &theta, &mut notes);
    let means = raw_means(layout, model, data, &shape);
    if !means.is_empty() {
        notes.push(Note::RawMeans);
    }

    let full = layout.levels.observations();
    let empty_cells = data.counts.iter().filter(|&&n| n == 0).count() as u64;
    let lost = data
        .counts
        .iter()
        .filter(|&&n| n > 0)
        .map(|&n| (r - n) as u64)
        .sum();
    Ok(AnalyzeReport {
        name: layout.name.clone(),
        convention: Convention::Unrestricted,
        data: data.path.clone(),
        response: data.response.clone(),
        observations: y.len() as u64,
        alpha,
        grand_mean,
        imbalance: Some(Imbalance {
            full_observations: full,
            empty_cells,
            lost_observations: lost,
            sums_of_squares: shaped.sums_of_squares,
            fit_order: syn.fit.order.iter().map(|&t| labels[t].clone()).collect(),
        }),
        terms,
        components,
        means,
        notes,
    })
}

/// The layout less the observations the data do not have (a cell's last replicates, as
/// many as it lacks), under the unrestricted model.
fn data_layout(layout: &Layout, data: &Observations, shape: &Balanced) -> Result<Layout, Error> {
    let s = &layout.structure;
    let r = layout.levels.replicates as usize;
    let fail = |message: String| Error::Data {
        path: data.path.clone(),
        line: None,
        message,
    };
    if let Some(f) = s.factors.iter().find(|f| f.population.is_some()) {
        return Err(fail(format!(
            "the data are unbalanced (some cells hold fewer than {r} observations), and the factor \"{}\" has a finite population, which emsplan's unbalanced engine does not model (it assumes random factors drawn from large populations): remove `population` from the layout to analyse these data",
            f.name
        )));
    }
    let counts: Vec<u64> = data.counts.iter().map(|&n| n as u64).collect();
    if let Some((f, key)) = removal::unobserved_fixed_level(layout, &counts) {
        let at: Vec<usize> = key
            .iter()
            .map(|&l| if l == u64::MAX { 0 } else { l as usize })
            .collect();
        let factor = &s.factors[f];
        let levels: Vec<usize> = layout
            .levels
            .per_factor
            .iter()
            .map(|&n| n as usize)
            .collect();
        let nest = index_in(&levels, factor.ancestors, &at);
        // Labels exist only for the levels observed, so the missing one is counted.
        let present = data.labels[f].get(nest).cloned().unwrap_or_default();
        let within = if factor.ancestors == 0 {
            String::new()
        } else {
            format!(
                " within {}",
                describe(layout, &data.labels, factor.ancestors, &at)
            )
        };
        return Err(fail(format!(
            "the data hold observations of only {} of the {} levels of the fixed factor \"{}\"{within} ({}): a fixed level that is never observed cannot be compared with the others; give {} {} levels in the layout, or add the missing level's rows",
            present.len(),
            levels[f],
            factor.name,
            present.join(", "),
            factor.name,
            present.len()
        )));
    }
    let mut removed = Vec::new();
    let mut at = vec![0usize; s.factors.len()];
    for (c, &n) in data.counts.iter().enumerate() {
        if n == r {
            continue;
        }
        shape.levels_of_cell(c, &mut at);
        let cell: Vec<(usize, u64)> = at.iter().enumerate().map(|(f, &l)| (f, l as u64)).collect();
        if n == 0 {
            removed.push(Removal {
                at: cell,
                replicate: None,
                line: None,
            });
        } else {
            removed.extend((n..r).map(|k| Removal {
                at: cell.clone(),
                replicate: Some(k as u64),
                line: None,
            }));
        }
    }
    let mut base = layout.clone();
    base.removed = Vec::new();
    base.structure.convention = Convention::Unrestricted;
    base.with_removals(removed)
        .map_err(|(_, m)| fail(format!("the data are unbalanced, and {m}")))
}

/// Notes on the units the data have no observation of: a factor with fewer levels
/// observed than the layout declares, within a nest that has observations (a lost chamber,
/// a missing bench). Labels exist only for levels observed, so the missing ones are
/// counted, not named.
fn lost_units(layout: &Layout, data: &Observations, shape: &Balanced) -> Vec<Note> {
    const SHOWN: usize = 8;
    let s = &layout.structure;
    let levels = shape.levels();
    let mut lost = Vec::new();
    for (f, factor) in s.factors.iter().enumerate() {
        for (nest, present) in data.labels[f].iter().enumerate() {
            if present.is_empty() || present.len() >= levels[f] {
                continue;
            }
            // The nest's level of every ancestor, from its index (last ancestor fastest).
            let mut at = vec![0usize; levels.len()];
            let mut rest = nest;
            for g in (0..levels.len()).rev() {
                if factor.ancestors & (1 << g) != 0 {
                    at[g] = rest % levels[g];
                    rest /= levels[g];
                }
            }
            lost.push(LostUnit {
                factor: factor.name.clone(),
                within: level_pairs(layout, &data.labels, factor.ancestors, &at),
                observed: present.clone(),
                levels: levels[f],
            });
        }
    }
    if lost.is_empty() {
        return Vec::new();
    }
    let more = lost.len().saturating_sub(SHOWN);
    lost.truncate(SHOWN);
    vec![Note::LostUnits { units: lost, more }]
}

/// Raw means of every fixed term's cells that hold observations, with their counts.
fn raw_means(
    layout: &Layout,
    model: &Model,
    data: &Observations,
    shape: &Balanced,
) -> Vec<MeansTable> {
    let s = &layout.structure;
    let levels = shape.levels();
    let offsets = data.offsets();
    let mut at = vec![0usize; levels.len()];
    model
        .terms
        .iter()
        .enumerate()
        .filter(|(t, term)| model.kinds[*t] == Kind::Fixed && !term.is_residual())
        .map(|(_, term)| {
            let mask = term.subscripts();
            let factors: Vec<usize> = (0..s.factors.len())
                .filter(|j| mask & (1 << j) != 0)
                .collect();
            let size: usize = factors.iter().map(|&j| levels[j]).product();
            let mut sum = vec![0.0; size];
            let mut count = vec![0u64; size];
            let mut example: Vec<Option<Vec<usize>>> = vec![None; size];
            for (c, &n) in data.counts.iter().enumerate() {
                shape.levels_of_cell(c, &mut at);
                let i = index_in(levels, mask, &at);
                sum[i] += data.y[offsets[c]..offsets[c] + n].iter().sum::<f64>();
                count[i] += n as u64;
                if example[i].is_none() {
                    example[i] = Some(at.clone());
                }
            }
            let rows = (0..size)
                .filter(|&i| count[i] > 0)
                .map(|i| {
                    let at = example[i].as_deref().unwrap_or(&[]);
                    MeanRow {
                        levels: factors
                            .iter()
                            .map(|&j| {
                                let nest = index_in(levels, s.factors[j].ancestors, at);
                                data.labels[j]
                                    .get(nest)
                                    .and_then(|l| l.get(at[j]))
                                    .cloned()
                                    .unwrap_or_else(|| format!("level {}", at[j] + 1))
                            })
                            .collect(),
                        mean: sum[i] / count[i] as f64,
                        observations: count[i],
                    }
                })
                .collect();
            MeansTable {
                term: term.label(s),
                factors: factors.iter().map(|&j| s.factors[j].name.clone()).collect(),
                per_mean: None,
                rows,
            }
        })
        .collect()
}
