//! The observations of a layout, balanced or not, and the cells of every term.
//!
//! Every design matrix of the linear model is constant within a cell of the full layout
//! (a combination of every factor's levels), so the engine works over the non-empty cells
//! with their counts n_c instead of over the observations: a column z over observations
//! is W z_c over cells (W the observation-to-cell incidence), and z'z = z_c' D z_c with
//! D = diag(n_c). The rows here are those cells.

use crate::ems::Model;
use crate::layout::{Kind, Layout};
use crate::term::Term;

use super::removal::{self, MAX_CELLS, MAX_OBSERVATIONS};

/// One observation: the level of every factor (from 0, within its nests) and its replicate.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Observation {
    pub levels: Vec<u64>,
    pub replicate: u64,
}

/// The cells of one term: its subscripts (factor indices, ascending) and their level
/// counts; cell index = mixed radix over them, the first slowest.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TermGrid {
    pub subscripts: Vec<usize>,
    pub sizes: Vec<usize>,
    /// Which subscripts are live (the others are nesting).
    pub live: Vec<bool>,
}

impl TermGrid {
    fn new(term: &Term, levels: &[u64]) -> TermGrid {
        let subscripts: Vec<usize> = (0..levels.len())
            .filter(|&f| term.subscripts() & (1 << f) != 0)
            .collect();
        TermGrid {
            sizes: subscripts.iter().map(|&f| levels[f] as usize).collect(),
            live: subscripts
                .iter()
                .map(|&f| term.live & (1 << f) != 0)
                .collect(),
            subscripts,
        }
    }

    pub fn cells(&self) -> usize {
        self.sizes.iter().product()
    }

    /// The term's cell holding a full cell given by its level tuple.
    pub fn cell_of(&self, tuple: &[u64]) -> usize {
        self.subscripts
            .iter()
            .zip(&self.sizes)
            .fold(0, |acc, (&f, &n)| acc * n + tuple[f] as usize)
    }
}

/// A layout's observations, its non-empty cells and the cells of every model term.
#[derive(Debug, Clone)]
pub struct Design {
    pub layout: Layout,
    /// Terms, kinds and (for balanced layouts) the symbolic expected mean squares; the
    /// residual is last.
    pub model: Model,
    observations: Vec<Observation>,
    /// Row (non-empty full cell) of every observation.
    observation_row: Vec<usize>,
    /// Level tuple and count of every row.
    row_tuple: Vec<Vec<u64>>,
    row_count: Vec<f64>,
    /// For every model term but the residual: its grid and the cell of every row.
    grids: Vec<TermGrid>,
    row_cell: Vec<Vec<usize>>,
}

impl Design {
    /// The observations left after the layout's removals. Fails only when the layout is
    /// beyond the engine's size (validated layouts with removals never are).
    pub fn new(layout: &Layout) -> Result<Design, String> {
        let levels = &layout.levels;
        if levels.observations() > MAX_OBSERVATIONS || levels.cells() > MAX_CELLS {
            return Err(format!(
                "the unbalanced engine handles up to {MAX_OBSERVATIONS} observations in up to {MAX_CELLS} cells; this layout has {} in {}",
                levels.observations(),
                levels.cells()
            ));
        }
        let model = Model::new(&layout.structure);
        let kept_by_cell = removal::kept_replicates(layout);
        let strides = removal::strides(levels);
        let mut observations = Vec::new();
        let mut observation_row = Vec::new();
        let mut row_tuple = Vec::new();
        let mut row_count = Vec::new();
        for (c, kept) in kept_by_cell.into_iter().enumerate() {
            if kept.is_empty() {
                continue;
            }
            let n = kept.len();
            let tuple = removal::cell_tuple(levels, &strides, c as u64);
            for k in kept {
                observations.push(Observation {
                    levels: tuple.clone(),
                    replicate: k,
                });
                observation_row.push(row_tuple.len());
            }
            row_tuple.push(tuple);
            row_count.push(n as f64);
        }
        let residual = model.residual();
        let grids: Vec<TermGrid> = model.terms[..residual]
            .iter()
            .map(|t| TermGrid::new(t, &levels.per_factor))
            .collect();
        let row_cell = grids
            .iter()
            .map(|g| row_tuple.iter().map(|t| g.cell_of(t)).collect())
            .collect();
        Ok(Design {
            layout: layout.clone(),
            model,
            observations,
            observation_row,
            row_tuple,
            row_count,
            grids,
            row_cell,
        })
    }

    /// Every observation, in the order responses are given to `Fit::sums_of_squares`:
    /// by cell (factor 0 slowest), then by replicate.
    pub fn observations(&self) -> &[Observation] {
        &self.observations
    }

    pub fn len(&self) -> usize {
        self.observations.len()
    }

    pub fn is_empty(&self) -> bool {
        self.observations.is_empty()
    }

    /// Non-empty cells of the full layout.
    pub fn rows(&self) -> usize {
        self.row_count.len()
    }

    pub fn row_count(&self, row: usize) -> f64 {
        self.row_count[row]
    }

    pub fn row_tuple(&self, row: usize) -> &[u64] {
        &self.row_tuple[row]
    }

    /// Row (non-empty full cell) of observation `i`.
    pub fn observation_row(&self, i: usize) -> usize {
        self.observation_row[i]
    }

    /// The grid of model term `t` (not the residual).
    pub fn grid(&self, t: usize) -> &TermGrid {
        &self.grids[t]
    }

    /// The cell of model term `t` that row `row` belongs to.
    pub fn cell(&self, t: usize, row: usize) -> usize {
        self.row_cell[t][row]
    }

    /// Cells of term `t` that hold at least one observation.
    pub fn occupied_cells(&self, t: usize) -> usize {
        let mut seen = vec![false; self.grids[t].cells()];
        for &c in &self.row_cell[t] {
            seen[c] = true;
        }
        seen.iter().filter(|&&x| x).count()
    }

    /// Observations in every cell of term `t`.
    pub fn term_counts(&self, t: usize) -> Vec<f64> {
        let mut n = vec![0.0; self.grids[t].cells()];
        for (row, &c) in self.row_cell[t].iter().enumerate() {
            n[c] += self.row_count[row];
        }
        n
    }

    pub fn kind(&self, t: usize) -> Kind {
        self.model.kinds[t]
    }

    /// The term whose subscripts are every factor (the cells of the full layout), when it
    /// is in the model.
    pub fn cell_term(&self) -> Option<usize> {
        let all = self.layout.structure.all_factors();
        let residual = self.model.residual();
        self.model.terms[..residual]
            .iter()
            .position(|t| t.subscripts() == all)
    }
}
