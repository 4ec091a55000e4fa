//! Removed cells: which observations of the full layout are missing.
//!
//! A removal names a (partial) cell by 1-based level indices, counted within nests: `light
//! = 2, bench = 3` is the third bench of the second light level, `chamber = 3` alone is the
//! third chamber under every light. Factors it does not name range over all their levels;
//! `replicate = k` narrows it to the k-th observation of each matching cell.
//!
//! Everything here is pure: the layout stage parses removals and validates them with
//! `validate`, and the engine reads the counts per cell with `cell_counts`.

use crate::layout::{Kind, Layout, Levels, Structure};

/// The most observations (before removal) an unbalanced layout may hold: the engine works
/// with dense matrices over the layout's cells.
pub const MAX_OBSERVATIONS: u64 = 200_000;
/// The most cells of the full layout (every combination of every factor's levels) an
/// unbalanced layout may hold; the synthesis grows with the cube of this number.
pub const MAX_CELLS: u64 = 3_000;

/// One removal: named factors with 0-based level indices within their nests, and an
/// optional 0-based replicate.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Removal {
    /// (factor index, level index from 0), sorted by factor.
    pub at: Vec<(usize, u64)>,
    /// Replicate index from 0, when a single observation of each matching cell goes.
    pub replicate: Option<u64>,
    /// Line of the layout file it was read from, for messages.
    pub line: Option<usize>,
}

impl Removal {
    /// Parses the entries of one removal, `(key, value, line)`, as written (1-based).
    /// Errors carry the line of the offending entry.
    pub fn parse(
        structure: &Structure,
        levels: &Levels,
        entries: &[(String, i64, Option<usize>)],
        line: Option<usize>,
    ) -> Result<Removal, (Option<usize>, String)> {
        if entries.is_empty() {
            return Err((
                line,
                "a removal names no factor, so it would remove every observation: name the cell, e.g. light = 2 and chamber = 3".into(),
            ));
        }
        let mut at: Vec<(usize, u64)> = Vec::new();
        let mut replicate = None;
        for (key, value, key_line) in entries {
            let key = key.trim();
            let index = |count: u64, what: String| -> Result<u64, (Option<usize>, String)> {
                if *value < 1 {
                    return Err((
                        *key_line,
                        format!(
                            "remove: {key} = {value}: level indices start at 1 (the first {key} is 1)"
                        ),
                    ));
                }
                if *value as u64 > count {
                    return Err((
                        *key_line,
                        format!(
                            "remove: {key} = {value} is beyond the {count} {what}: indices run from 1 to {count}"
                        ),
                    ));
                }
                Ok(*value as u64 - 1)
            };
            if key == "replicate" {
                if replicate.is_some() {
                    return Err((*key_line, "remove: names replicate twice".into()));
                }
                replicate = Some(index(
                    levels.replicates,
                    "replicates in each cell".to_string(),
                )?);
                continue;
            }
            let f = structure.factor_index(key).ok_or_else(|| {
                (
                    *key_line,
                    format!(
                        "remove: \"{key}\" is not a factor (known: {}; or replicate)",
                        structure.known_names()
                    ),
                )
            })?;
            if at.iter().any(|(g, _)| *g == f) {
                return Err((*key_line, format!("remove: names {key} twice")));
            }
            let factor = &structure.factors[f];
            let what = if factor.within == 0 {
                format!("levels of {key}")
            } else {
                let nests: Vec<&str> = structure
                    .factors
                    .iter()
                    .enumerate()
                    .filter(|(j, _)| factor.within & (1 << j) != 0)
                    .map(|(_, g)| g.name.as_str())
                    .collect();
                format!("levels of {key} in each {}", nests.join(" and "))
            };
            at.push((f, index(levels.per_factor[f], what)?));
        }
        at.sort();
        Ok(Removal {
            at,
            replicate,
            line,
        })
    }

    /// Whether the removal covers a cell (by its level tuple), whatever the replicate.
    pub fn covers_cell(&self, cell: &[u64]) -> bool {
        self.at.iter().all(|&(f, i)| cell[f] == i)
    }

    /// `light=2,chamber=3` (1-based, as written).
    pub fn describe(&self, structure: &Structure) -> String {
        let mut parts: Vec<String> = self
            .at
            .iter()
            .map(|&(f, i)| format!("{}={}", structure.factors[f].name, i + 1))
            .collect();
        if let Some(r) = self.replicate {
            parts.push(format!("replicate={}", r + 1));
        }
        parts.join(",")
    }
}

/// Parses the `--remove` grammar: `light=2,chamber=3[,replicate=1]`.
pub fn parse_cell(structure: &Structure, levels: &Levels, text: &str) -> Result<Removal, String> {
    let mut entries = Vec::new();
    for part in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let (key, value) = part
            .split_once('=')
            .ok_or_else(|| format!("\"{part}\" is not FACTOR=INDEX, e.g. chamber=3"))?;
        let value: i64 = value.trim().parse().map_err(|_| {
            format!(
                "\"{}\" is not a whole-number level index (indices start at 1)",
                value.trim()
            )
        })?;
        entries.push((key.trim().to_string(), value, None));
    }
    Removal::parse(structure, levels, &entries, None)
        .map_err(|(_, m)| m.trim_start_matches("remove: ").to_string())
}

/// Mixed-radix strides of the full cells: factor 0 varies slowest.
pub fn strides(levels: &Levels) -> Vec<u64> {
    let n = levels.per_factor.len();
    let mut strides = vec![1u64; n];
    for f in (0..n.saturating_sub(1)).rev() {
        strides[f] = strides[f + 1] * levels.per_factor[f + 1];
    }
    strides
}

/// The level tuple of full cell `c`.
pub fn cell_tuple(levels: &Levels, strides: &[u64], c: u64) -> Vec<u64> {
    strides
        .iter()
        .zip(&levels.per_factor)
        .map(|(&s, &n)| (c / s) % n)
        .collect()
}

/// The observations removed from each cell: every replicate, or a set of replicates.
#[derive(Debug, Clone, PartialEq, Eq)]
enum Gone {
    All,
    Some(Vec<u64>),
}

/// Observations left in every full cell (in mixed-radix order, factor 0 slowest), after
/// the first `upto` removals. The caller has checked the layout's size.
fn counts_after(layout: &Layout, upto: usize) -> Vec<u64> {
    let levels = &layout.levels;
    let strides = strides(levels);
    let mut gone: Vec<Option<Gone>> = vec![None; levels.cells() as usize];
    for r in &layout.removed[..upto] {
        apply(&mut gone, r, levels, &strides);
    }
    remaining(&gone, levels)
}

/// Marks what one removal takes from every cell it covers; returns how many observations
/// it removed that were still there.
fn apply(gone: &mut [Option<Gone>], r: &Removal, levels: &Levels, strides: &[u64]) -> u64 {
    // Enumerate only the cells the removal covers: the unnamed factors range freely.
    let free: Vec<usize> = (0..levels.per_factor.len())
        .filter(|f| !r.at.iter().any(|(g, _)| g == f))
        .collect();
    let base: u64 = r.at.iter().map(|&(f, i)| i * strides[f]).sum();
    let count: u64 = free.iter().map(|&f| levels.per_factor[f]).product();
    let mut removed = 0;
    for k in 0..count {
        let mut rest = k;
        let mut c = base;
        for &f in free.iter().rev() {
            let n = levels.per_factor[f];
            c += (rest % n) * strides[f];
            rest /= n;
        }
        let slot = &mut gone[c as usize];
        match (r.replicate, slot.as_mut()) {
            (None, None) => {
                removed += levels.replicates;
                *slot = Some(Gone::All);
            }
            (None, Some(Gone::Some(v))) => {
                removed += levels.replicates - v.len() as u64;
                *slot = Some(Gone::All);
            }
            (_, Some(Gone::All)) => {}
            (Some(x), Some(Gone::Some(v))) => {
                if !v.contains(&x) {
                    v.push(x);
                    removed += 1;
                }
            }
            (Some(x), None) => {
                removed += 1;
                *slot = Some(Gone::Some(vec![x]));
            }
        }
    }
    removed
}

fn remaining(gone: &[Option<Gone>], levels: &Levels) -> Vec<u64> {
    gone.iter()
        .map(|g| match g {
            None => levels.replicates,
            Some(Gone::All) => 0,
            Some(Gone::Some(v)) => levels.replicates - v.len() as u64,
        })
        .collect()
}

/// A level of a fixed factor (within a combination of its ancestors' levels that still
/// has observations) with no observation among `counts` (by full cell): the factor and
/// the level tuple (`u64::MAX` for the factors that do not index it). A lost unit of a
/// random nest takes its fixed levels with it, and that is no fault.
pub fn unobserved_fixed_level(layout: &Layout, counts: &[u64]) -> Option<(usize, Vec<u64>)> {
    use std::collections::BTreeMap;
    let s = &layout.structure;
    let levels = &layout.levels;
    let strides = strides(levels);
    for (f, factor) in s.factors.iter().enumerate() {
        if factor.kind != Kind::Fixed {
            continue;
        }
        let keep = factor.ancestors | (1 << f);
        let mut seen: BTreeMap<Vec<u64>, u64> = BTreeMap::new();
        for (c, &n) in counts.iter().enumerate() {
            let t = cell_tuple(levels, &strides, c as u64);
            let key: Vec<u64> = (0..t.len())
                .map(|g| if keep & (1 << g) != 0 { t[g] } else { u64::MAX })
                .collect();
            *seen.entry(key).or_insert(0) += n;
        }
        let mut nest_total: BTreeMap<Vec<u64>, u64> = BTreeMap::new();
        for (key, n) in &seen {
            let mut k = key.clone();
            k[f] = u64::MAX;
            *nest_total.entry(k).or_insert(0) += n;
        }
        let empty = seen.iter().find(|(key, n)| {
            let mut k = (*key).clone();
            k[f] = u64::MAX;
            **n == 0 && nest_total[&k] > 0
        });
        if let Some((key, _)) = empty {
            return Some((f, key.clone()));
        }
    }
    None
}

/// `cultivar = 4 within light = 2` for factor f at a level tuple (1-based, as written).
fn describe_level(s: &Structure, f: usize, key: &[u64]) -> String {
    let factor = &s.factors[f];
    let mut at = format!("{} = {}", factor.name, key[f] + 1);
    let nests: Vec<String> = (0..key.len())
        .filter(|&g| factor.ancestors & (1 << g) != 0)
        .map(|g| format!("{} = {}", s.factors[g].name, key[g] + 1))
        .collect();
    if !nests.is_empty() {
        at.push_str(&format!(" within {}", nests.join(", ")));
    }
    at
}

/// Observations left in every full cell after all removals.
pub fn cell_counts(layout: &Layout) -> Vec<u64> {
    counts_after(layout, layout.removed.len())
}

/// Which replicates (0-based) are left in every full cell (in the order of
/// `cell_counts`), after all removals.
pub fn kept_replicates(layout: &Layout) -> Vec<Vec<u64>> {
    let levels = &layout.levels;
    let strides = strides(levels);
    let mut gone: Vec<Option<Gone>> = vec![None; levels.cells() as usize];
    for r in &layout.removed {
        apply(&mut gone, r, levels, &strides);
    }
    gone.iter()
        .map(|g| match g {
            None => (0..levels.replicates).collect(),
            Some(Gone::All) => Vec::new(),
            Some(Gone::Some(v)) => (0..levels.replicates).filter(|k| !v.contains(k)).collect(),
        })
        .collect()
}

/// Checks a layout's removals: in range, within the engine's size, each one removing
/// something, no fixed level left without observations, something left at all. Errors
/// carry the line of the removal at fault where it is known.
pub fn validate(layout: &Layout) -> Result<(), (Option<usize>, String)> {
    let s = &layout.structure;
    let levels = &layout.levels;
    if layout.removed.is_empty() {
        return Ok(());
    }
    let first_line = layout.removed[0].line;
    if let Some(f) = s.factors.iter().find(|f| f.population.is_some()) {
        return Err((
            first_line,
            format!(
                "factor \"{}\" has a finite population, and emsplan's unbalanced engine assumes random factors drawn from large populations: remove `population`, or the removals",
                f.name
            ),
        ));
    }
    for r in &layout.removed {
        for &(f, i) in &r.at {
            if i >= levels.per_factor[f] {
                return Err((
                    r.line,
                    format!(
                        "the removal {} names {} level {}, beyond its {} levels",
                        r.describe(s),
                        s.factors[f].name,
                        i + 1,
                        levels.per_factor[f]
                    ),
                ));
            }
        }
        if let Some(k) = r.replicate
            && k >= levels.replicates
        {
            return Err((
                r.line,
                format!(
                    "the removal {} names replicate {}, beyond the {} replicates per cell",
                    r.describe(s),
                    k + 1,
                    levels.replicates
                ),
            ));
        }
    }
    let observations = levels.observations();
    if observations > MAX_OBSERVATIONS || levels.cells() > MAX_CELLS {
        return Err((
            first_line,
            format!(
                "with removals the layout is unbalanced, and emsplan's unbalanced engine handles up to {MAX_OBSERVATIONS} observations in up to {MAX_CELLS} cells (this one has {observations} in {}): plan the balanced layout first, or a smaller one",
                levels.cells()
            ),
        ));
    }
    // Each removal must remove something new, and something must be left.
    let strides = strides(levels);
    let mut gone: Vec<Option<Gone>> = vec![None; levels.cells() as usize];
    let mut left: u64 = observations;
    for r in &layout.removed {
        let removed = apply(&mut gone, r, levels, &strides);
        if removed == 0 {
            return Err((
                r.line,
                format!(
                    "the removal {} removes nothing that the removals before it had not removed already: delete it or correct its indices",
                    r.describe(s)
                ),
            ));
        }
        left -= removed;
        if left == 0 {
            return Err((
                r.line,
                "the removals leave no observation at all".to_string(),
            ));
        }
    }
    // A fixed level left without observations: more removals only empty more levels, so
    // the first removal at fault is found by bisection over the removals.
    if unobserved_fixed_level(layout, &remaining(&gone, levels)).is_some() {
        let (mut fine, mut fails) = (0, layout.removed.len());
        while fails - fine > 1 {
            let mid = (fine + fails) / 2;
            if unobserved_fixed_level(layout, &counts_after(layout, mid)).is_some() {
                fails = mid;
            } else {
                fine = mid;
            }
        }
        let r = &layout.removed[fails - 1];
        // `fails` only ever holds a prefix that fails, so this finds the level.
        let Some((f, key)) = unobserved_fixed_level(layout, &counts_after(layout, fails)) else {
            return Err((
                r.line,
                "the removals leave a fixed level with no observation: a fixed level that is never observed cannot be compared".to_string(),
            ));
        };
        let factor = &s.factors[f];
        return Err((
            r.line,
            format!(
                "the removal {} leaves no observation at {}: a fixed level that is never observed cannot be compared, so {} could not be tested there; give {} one level fewer instead, or keep part of that level",
                r.describe(s),
                describe_level(s, f, &key),
                factor.name,
                factor.name
            ),
        ));
    }
    Ok(())
}
