//! Sums of squares of balanced data, computed from cell totals by marginal sums.
//!
//! Shared by `simulate` (thousands of data sets, so the work is precomputed and the inner
//! loop allocates nothing) and `analyze` (one data set read from a file).
//!
//! # Cells
//!
//! A cell is one combination of the factors' level indices, each index counted within its
//! nest (bench 0, 1, 2 under every light). Cells are numbered in mixed radix with the first
//! declared factor most significant; every cell holds `replicates` observations.
//!
//! # Sums of squares
//!
//! With Q(X) = Σ over the cells of the marginal table of the factor set X of
//! (total in the cell)² / (observations per cell), and Q(∅) = (grand total)² / N, the sum of
//! squares of a term with live factors L nested in M is the inclusion–exclusion
//!
//! SS_T = Σ_{S ⊆ L} (-1)^{|L| - |S|} Q(S ∪ M),
//!
//! which gives the familiar SS_A = Q(A) - Q(∅), SS_AB = Q(AB) - Q(A) - Q(B) + Q(∅) and
//! SS_B(A) = Q(AB) - Q(A) (Bennett and Franklin 1954, Statistical Analysis in Chemistry and
//! the Chemical Industry, from memory; the rule is common practice for balanced data). The
//! residual is the variation within cells, Σ (y - cell mean)², plus the sums of squares of
//! the interactions assumed absent, whose df pool into it.
//!
//! Callers pass data centred on (roughly) the grand mean, so that the Q values do not
//! cancel in the subtraction.

use crate::ems::Model;
use crate::error::Error;
use crate::layout::Levels;
use crate::term::{Mask, Term};

/// Most entries of the cell-to-margin index maps, so that a very large layout is refused
/// with a message rather than exhausting memory.
const MAX_MAP_ENTRIES: usize = 1 << 27;

/// One marginal table: the factor set, its number of cells, the observations in each of
/// its cells, and the map from full cells to its cells.
#[derive(Debug, Clone)]
struct Margin {
    mask: Mask,
    size: usize,
    per_cell: f64,
    map: Vec<u32>,
}

/// The precomputed shape of a balanced layout: cell numbering, marginal tables and the
/// inclusion–exclusion of every term.
#[derive(Debug, Clone)]
pub struct Balanced {
    levels: Vec<usize>,
    replicates: usize,
    cells: usize,
    strides: Vec<usize>,
    margins: Vec<Margin>,
    /// For each model term (residual last, with an empty list): (margin, sign) pairs.
    terms: Vec<Vec<(usize, f64)>>,
    /// The same for the interactions assumed absent, which pool into the residual.
    omitted: Vec<Vec<(usize, f64)>>,
    /// The term each omitted term's sum of squares joins.
    pooled_into: Vec<usize>,
    df: Vec<u64>,
    largest_margin: usize,
}

/// Working memory for `Balanced::sums_of_squares`, allocated once per thread.
#[derive(Debug, Clone)]
pub struct Scratch {
    totals: Vec<f64>,
    q: Vec<f64>,
}

impl Balanced {
    /// Precomputes the marginal tables a model's terms need. Fails only when the layout is
    /// too large to index (more cells than fit in memory for this purpose).
    pub fn new(model: &Model, levels: &Levels) -> Result<Balanced, Error> {
        let k = levels.per_factor.len();
        let too_large = || {
            Error::invalid(
                None,
                "the layout has too many cells to compute its sums of squares here: reduce the level counts",
            )
        };
        let lv: Vec<usize> = levels
            .per_factor
            .iter()
            .map(|&n| usize::try_from(n).map_err(|_| too_large()))
            .collect::<Result<_, _>>()?;
        let replicates = usize::try_from(levels.replicates).map_err(|_| too_large())?;
        let cells = lv
            .iter()
            .try_fold(1usize, |c, &n| c.checked_mul(n))
            .filter(|&c| c <= u32::MAX as usize)
            .ok_or_else(too_large)?;
        cells.checked_mul(replicates).ok_or_else(too_large)?;
        let mut strides = vec![0; k];
        let mut s = 1;
        for j in (0..k).rev() {
            strides[j] = s;
            s *= lv[j];
        }

        let mut margins: Vec<Margin> = Vec::new();
        let margin_of = |mask: Mask, margins: &mut Vec<Margin>| -> Result<usize, Error> {
            if let Some(i) = margins.iter().position(|m| m.mask == mask) {
                return Ok(i);
            }
            if (margins.len() + 1).saturating_mul(cells) > MAX_MAP_ENTRIES {
                return Err(too_large());
            }
            let size: usize = (0..k)
                .filter(|j| mask & (1 << j) != 0)
                .map(|j| lv[j])
                .product();
            let mut map = Vec::with_capacity(cells);
            let mut at = vec![0usize; k];
            for _ in 0..cells {
                map.push(index_in(&lv, mask, &at) as u32);
                odometer(&lv, &mut at);
            }
            margins.push(Margin {
                mask,
                size,
                per_cell: (cells / size * replicates) as f64,
                map,
            });
            Ok(margins.len() - 1)
        };
        let plan = |t: &Term, margins: &mut Vec<Margin>| -> Result<Vec<(usize, f64)>, Error> {
            let live: Vec<u32> = (0..k as u32).filter(|j| t.live & (1 << j) != 0).collect();
            let mut parts = Vec::new();
            for sub in 0..(1u32 << live.len()) {
                let s_mask: Mask = (0..live.len())
                    .filter(|b| sub & (1 << b) != 0)
                    .fold(0, |m, b| m | (1 << live[b]));
                let sign = if (live.len() as u32 - sub.count_ones()).is_multiple_of(2) {
                    1.0
                } else {
                    -1.0
                };
                parts.push((margin_of(s_mask | t.nest, margins)?, sign));
            }
            Ok(parts)
        };
        let mut terms = Vec::with_capacity(model.terms.len());
        for t in &model.terms {
            terms.push(if t.is_residual() {
                Vec::new()
            } else {
                plan(t, &mut margins)?
            });
        }
        let mut omitted = Vec::with_capacity(model.omitted.len());
        for t in &model.omitted {
            omitted.push(plan(t, &mut margins)?);
        }
        let largest_margin = margins.iter().map(|m| m.size).max().unwrap_or(1);
        Ok(Balanced {
            levels: lv,
            replicates,
            cells,
            strides,
            margins,
            terms,
            omitted,
            pooled_into: model.pooled_into.clone(),
            df: model.df(levels),
            largest_margin,
        })
    }

    pub fn cells(&self) -> usize {
        self.cells
    }

    pub fn replicates(&self) -> usize {
        self.replicates
    }

    pub fn observations(&self) -> usize {
        self.cells * self.replicates
    }

    /// Level count of each factor (within its nest).
    pub fn levels(&self) -> &[usize] {
        &self.levels
    }

    /// df of every model term, residual last.
    pub fn df(&self) -> &[u64] {
        &self.df
    }

    /// The cell of a combination of level indices.
    pub fn cell(&self, at: &[usize]) -> usize {
        at.iter().zip(&self.strides).map(|(a, s)| a * s).sum()
    }

    /// The level index of every factor in a cell.
    pub fn levels_of_cell(&self, mut cell: usize, at: &mut [usize]) {
        for j in (0..self.levels.len()).rev() {
            at[j] = cell % self.levels[j];
            cell /= self.levels[j];
        }
    }

    pub fn scratch(&self) -> Scratch {
        Scratch {
            totals: vec![0.0; self.largest_margin],
            q: vec![0.0; self.margins.len()],
        }
    }

    /// Sums of squares of every model term, residual last, from the total of each cell
    /// and the pooled sum of squares within cells. Allocates nothing.
    pub fn sums_of_squares(
        &self,
        cell_totals: &[f64],
        within: f64,
        scratch: &mut Scratch,
        out: &mut [f64],
    ) {
        debug_assert_eq!(cell_totals.len(), self.cells);
        for (m, q) in self.margins.iter().zip(scratch.q.iter_mut()) {
            *q = if m.size == self.cells {
                // The full table: every cell is its own margin cell.
                cell_totals.iter().map(|t| t * t).sum::<f64>() / m.per_cell
            } else if m.size == 1 {
                let t: f64 = cell_totals.iter().sum();
                t * t / m.per_cell
            } else {
                let buf = &mut scratch.totals[..m.size];
                buf.iter_mut().for_each(|x| *x = 0.0);
                for (&i, &t) in m.map.iter().zip(cell_totals) {
                    buf[i as usize] += t;
                }
                buf.iter().map(|t| t * t).sum::<f64>() / m.per_cell
            };
        }
        let combine = |parts: &[(usize, f64)], q: &[f64]| -> f64 {
            // Sums of squares are never negative; rounding can leave a tiny negative.
            parts.iter().map(|&(i, s)| s * q[i]).sum::<f64>().max(0.0)
        };
        let residual = self.terms.len() - 1;
        for (t, parts) in self.terms.iter().enumerate().take(residual) {
            out[t] = combine(parts, &scratch.q);
        }
        out[residual] = within;
        for (parts, &t) in self.omitted.iter().zip(&self.pooled_into) {
            out[t] += combine(parts, &scratch.q);
        }
    }

    /// Mean squares from sums of squares (NaN for a term with 0 df).
    pub fn mean_squares(&self, ss: &[f64], out: &mut [f64]) {
        for ((o, s), &df) in out.iter_mut().zip(ss).zip(&self.df) {
            *o = if df == 0 { f64::NAN } else { s / df as f64 };
        }
    }

    /// Totals of the marginal table of a factor set, in its mixed-radix order (first
    /// declared factor most significant), and the observations in each of its cells.
    pub fn margin_totals(&self, mask: Mask, cell_totals: &[f64]) -> (Vec<f64>, usize) {
        let size: usize = (0..self.levels.len())
            .filter(|j| mask & (1 << j) != 0)
            .map(|j| self.levels[j])
            .product();
        let mut out = vec![0.0; size];
        let mut at = vec![0usize; self.levels.len()];
        for &t in cell_totals {
            out[index_in(&self.levels, mask, &at)] += t;
            odometer(&self.levels, &mut at);
        }
        (out, self.cells / size * self.replicates)
    }
}

/// The index of a combination of level indices in the marginal table of `mask`.
pub fn index_in(levels: &[usize], mask: Mask, at: &[usize]) -> usize {
    let mut i = 0;
    for (j, &n) in levels.iter().enumerate() {
        if mask & (1 << j) != 0 {
            i = i * n + at[j];
        }
    }
    i
}

/// Steps a combination of level indices to the next cell (last factor fastest).
pub fn odometer(levels: &[usize], at: &mut [usize]) {
    for j in (0..levels.len()).rev() {
        at[j] += 1;
        if at[j] < levels[j] {
            return;
        }
        at[j] = 0;
    }
}

/// Mean squares and their parts for data in cell order: sums of squares, mean squares and
/// the grand mean. Shared by `analyze` and `simulate`, whose data sets go through the same numbers.
pub fn anova_numbers(b: &Balanced, y: &[f64]) -> (Vec<f64>, Vec<f64>, f64) {
    let n = y.len() as f64;
    let centre = y.iter().sum::<f64>() / n;
    let mut totals = vec![0.0; b.cells()];
    let within = cell_summaries(y, b.replicates(), centre, &mut totals);
    let terms = b.df().len();
    let mut ss = vec![0.0; terms];
    b.sums_of_squares(&totals, within, &mut b.scratch(), &mut ss);
    let mut ms = vec![0.0; terms];
    b.mean_squares(&ss, &mut ms);
    (ss, ms, centre)
}

/// Cell totals and the pooled within-cell sum of squares of data given cell by cell
/// (`replicates` observations per cell, cells in order), after subtracting `centre`.
/// Two passes per cell, so the within-cell sum of squares does not cancel.
pub fn cell_summaries(y: &[f64], replicates: usize, centre: f64, totals: &mut [f64]) -> f64 {
    let mut within = 0.0;
    for (cell, t) in y.chunks_exact(replicates).zip(totals.iter_mut()) {
        let sum: f64 = cell.iter().map(|v| v - centre).sum();
        let mean = sum / replicates as f64;
        within += cell
            .iter()
            .map(|v| (v - centre - mean).powi(2))
            .sum::<f64>();
        *t = sum;
    }
    within
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layout::Layout;

    fn layout(text: &str) -> Layout {
        let spec = crate::spec::parse(text).unwrap();
        Layout::from_spec(&spec, text).unwrap()
    }

    fn ss_of(text: &str, y: &[f64]) -> Vec<f64> {
        let l = layout(text);
        let model = Model::new(&l.structure);
        let b = Balanced::new(&model, &l.levels).unwrap();
        let mut totals = vec![0.0; b.cells()];
        let within = cell_summaries(y, b.replicates(), 0.0, &mut totals);
        let mut out = vec![0.0; model.terms.len()];
        b.sums_of_squares(&totals, within, &mut b.scratch(), &mut out);
        out
    }

    /// One factor at 2 levels, 2 replicates, y = (1, 3 | 4, 8): grand mean 4, level means
    /// 2 and 6, SS_A = 2((2-4)² + (6-4)²) = 16, SS_residual = 1 + 1 + 4 + 4 = 10 (by hand).
    #[test]
    fn one_way_by_hand() {
        let ss = ss_of(
            "[layout]\nreplicates = 2\n[[factor]]\nname = \"tank\"\nkind = \"fixed\"\nlevels = 2\n",
            &[1.0, 3.0, 4.0, 8.0],
        );
        assert_eq!(ss, vec![16.0, 10.0]);
    }

    /// A 2 x 2 with one observation per cell, y11 = 1, y12 = 2, y21 = 3, y22 = 6 (by hand):
    /// grand mean 3; row means 1.5, 4.5 give SS_A = 2(2.25 + 2.25) = 9; column means 2, 4
    /// give SS_B = 2(1 + 1) = 4; the interaction is the rest of the total SS
    /// (4 + 1 + 0 + 9 = 14), 14 - 9 - 4 = 1; no residual df.
    #[test]
    fn two_way_by_hand() {
        let text = "[layout]\nreplicates = 1\n[[factor]]\nname = \"a\"\nkind = \"fixed\"\nlevels = 2\n[[factor]]\nname = \"b\"\nkind = \"fixed\"\nlevels = 2\n";
        let ss = ss_of(text, &[1.0, 2.0, 3.0, 6.0]);
        assert_eq!(ss, vec![9.0, 4.0, 1.0, 0.0]);
    }

    /// Nested: b within a, 2 levels each, 1 replicate, y = (1, 3 | 5, 9) (by hand): a means
    /// 2 and 7 about 4.5 give SS_A = 2(6.25 + 6.25) = 25; b within a: (1-2)² + (3-2)² +
    /// (5-7)² + (9-7)² = 10.
    #[test]
    fn nested_by_hand() {
        let text = "[layout]\nreplicates = 1\n[[factor]]\nname = \"a\"\nkind = \"fixed\"\nlevels = 2\n[[factor]]\nname = \"b\"\nkind = \"random\"\nlevels = 2\nwithin = [\"a\"]\n";
        let ss = ss_of(text, &[1.0, 3.0, 5.0, 9.0]);
        assert_eq!(ss, vec![25.0, 10.0, 0.0]);
    }

    /// An omitted interaction pools into the residual: the 2 x 2 above without a x b has
    /// residual SS 1 on 1 df.
    #[test]
    fn omitted_interaction_pools() {
        let text = "[layout]\nreplicates = 1\nomit = [\"a x b\"]\n[[factor]]\nname = \"a\"\nkind = \"fixed\"\nlevels = 2\n[[factor]]\nname = \"b\"\nkind = \"fixed\"\nlevels = 2\n";
        let ss = ss_of(text, &[1.0, 2.0, 3.0, 6.0]);
        assert_eq!(ss, vec![9.0, 4.0, 1.0]);
    }

    #[test]
    fn margins_and_cells() {
        let text = "[layout]\nreplicates = 2\n[[factor]]\nname = \"a\"\nkind = \"fixed\"\nlevels = 2\n[[factor]]\nname = \"b\"\nkind = \"fixed\"\nlevels = 3\n";
        let l = layout(text);
        let b = Balanced::new(&Model::new(&l.structure), &l.levels).unwrap();
        assert_eq!(b.cell(&[1, 2]), 5);
        let mut at = [0, 0];
        b.levels_of_cell(4, &mut at);
        assert_eq!(at, [1, 1]);
        let totals: Vec<f64> = (0..6).map(|c| c as f64).collect();
        assert_eq!(b.margin_totals(0b01, &totals), (vec![3.0, 12.0], 6));
        assert_eq!(b.margin_totals(0b10, &totals), (vec![3.0, 5.0, 7.0], 4));
    }
}
