//! Structural variants of a layout: leave out a layer, nest a factor differently.
//!
//! Used by the design search (optional layers, nesting choices) and by `compare`
//! (`--drop`, `--set F.within=...`). Planning values are keyed by live sets of factor
//! indices, so leaving a factor out renumbers them too.

use crate::layout::{Layout, Levels, Structure};
use crate::planning::{CostModel, PlanningValues};
use crate::term::Mask;
pub use crate::term::remap_mask;

/// Leaves out factor `f`: the factors nested in it move up to its nests; priors, effects
/// and unit costs of terms that involve it go with it. Returns the new layout and
/// planning values, and the planning keys that were dropped (as term labels).
pub fn drop_factor(
    layout: &Layout,
    plan: &PlanningValues,
    f: usize,
) -> Result<(Layout, PlanningValues, Vec<String>), String> {
    let s = &layout.structure;
    if s.factors.len() == 1 {
        return Err(format!(
            "cannot leave out \"{}\": it is the layout's only factor",
            s.factors[f].name
        ));
    }
    let up = s.factors[f].within;
    let mut factors = Vec::new();
    for (i, factor) in s.factors.iter().enumerate() {
        if i == f {
            continue;
        }
        let mut factor = factor.clone();
        if factor.within & (1 << f) != 0 {
            factor.within = (factor.within & !(1 << f)) | up;
        }
        factor.within = remap_mask(factor.within, f).unwrap_or(0);
        factor.ancestors = 0;
        factors.push(factor);
    }
    let omitted = s
        .omitted
        .iter()
        .filter_map(|&m| remap_mask(m, f))
        .filter(|m| m.count_ones() >= 2)
        .collect();
    let mut structure = Structure::new(factors, omitted, s.convention)?;
    structure.units = s.units.without_factor(f);
    let mut per_factor = layout.levels.per_factor.clone();
    per_factor.remove(f);
    let levels = Levels {
        per_factor,
        replicates: layout.levels.replicates,
    };
    let dropped_label = |m: Mask| crate::layout::term_of(s, m).short_label(s);
    let mut gone = Vec::new();
    let mut remap = |m: Mask| -> Option<Mask> {
        let r = remap_mask(m, f);
        if r.is_none() {
            gone.push(dropped_label(m));
        }
        r
    };
    let priors = plan
        .priors
        .iter()
        .filter_map(|(&m, &v)| remap(m).map(|m| (m, v)))
        .collect();
    let effects = plan
        .effects
        .iter()
        .filter_map(|(&m, &v)| remap(m).map(|m| (m, v)))
        .collect();
    let cost = plan.cost.as_ref().map(|c| CostModel {
        overhead: c.overhead,
        per_unit: c
            .per_unit
            .iter()
            .filter_map(|&(m, v)| remap(m).map(|m| (m, v)))
            .collect(),
    });
    let new_plan = PlanningValues {
        alpha: plan.alpha,
        power: plan.power,
        priors,
        effects,
        cost,
    };
    let new_layout = Layout::new(layout.name.clone(), structure, levels)?;
    gone.sort();
    gone.dedup();
    Ok((new_layout, new_plan, gone))
}

/// Nests factor `f` directly in `within` (a set of factor indices) instead of its
/// current nests. Fails on a cycle, or when an omitted interaction is no longer a term.
pub fn set_within(layout: &Layout, f: usize, within: Mask) -> Result<Layout, String> {
    let s = &layout.structure;
    if within & (1 << f) != 0 {
        return Err(format!(
            "factor \"{}\" cannot be nested in itself",
            s.factors[f].name
        ));
    }
    let mut factors = s.factors.clone();
    factors[f].within = within;
    for factor in &mut factors {
        factor.ancestors = 0;
    }
    let mut structure = Structure::new(factors, s.omitted.clone(), s.convention)?;
    // A unit is a place in the nesting; nested differently, the file's units no longer
    // describe the layout, which is then one of factors.
    if s.units.declared() {
        structure.units = crate::layout::Units::default();
    }
    for &m in &structure.omitted {
        let ok = structure
            .factors
            .iter()
            .enumerate()
            .all(|(i, fac)| m & (1 << i) == 0 || fac.ancestors & m == 0);
        if !ok {
            let names: Vec<&str> = structure
                .factors
                .iter()
                .enumerate()
                .filter(|(i, _)| m & (1 << i) != 0)
                .map(|(_, fac)| fac.name.as_str())
                .collect();
            return Err(format!(
                "the omitted interaction {} is no longer a term once \"{}\" is nested this way",
                names.join(" x "),
                s.factors[f].name
            ));
        }
    }
    Layout::new(layout.name.clone(), structure, layout.levels.clone())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::term::REPLICATE;

    #[test]
    fn remap_shifts_higher_factors_down() {
        assert_eq!(remap_mask(0b1011, 2), Some(0b111));
        assert_eq!(remap_mask(0b1111, 2), None);
        assert_eq!(remap_mask(REPLICATE | 0b100, 1), Some(REPLICATE | 0b10));
    }
}
