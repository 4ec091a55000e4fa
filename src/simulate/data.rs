//! The dummy data set: one data set drawn at the planning values, for rehearsing the
//! analysis.

use super::*;

/// Decimals the responses are written with: four significant digits of the smallest
/// standard deviation in the planning values (three decimals when there is none).
pub fn decimals(plan: &PlanningValues) -> usize {
    let smallest = plan
        .priors
        .values()
        .copied()
        .filter(|v| *v > 0.0)
        .fold(f64::INFINITY, f64::min);
    if smallest.is_finite() {
        (3 - smallest.log10().floor() as i64).clamp(0, 12) as usize
    } else {
        3
    }
}

/// Labels the cells' observations: `bench2`, numbered within the nest or globally. `y` is
/// what `Simulator::data_set` gives: every observation of a balanced layout, the kept ones
/// of a layout with removals.
pub fn data_set(
    layout: &Layout,
    sim: &Simulator,
    y: &[f64],
    decimals: usize,
    unique_labels: bool,
) -> DataSet {
    let s = &layout.structure;
    let b = sim.balanced();
    let lv = b.levels();
    let mut header: Vec<String> = s.factors.iter().map(|f| f.name.clone()).collect();
    header.push("response".into());
    let mut rows = Vec::with_capacity(y.len());
    let mut written = Vec::with_capacity(y.len());
    let mut at = vec![0usize; lv.len()];
    let labels_of = |at: &[usize]| -> Vec<String> {
        s.factors
            .iter()
            .enumerate()
            .map(|(j, f)| {
                let number = if unique_labels {
                    index_in(lv, f.ancestors, at) * lv[j] + at[j] + 1
                } else {
                    at[j] + 1
                };
                format!("{}{number}", f.name)
            })
            .collect()
    };
    let mut push = |labels: &[String], v: f64| {
        let text = format!("{v:.decimals$}");
        // The value as the file holds it, so the report's mean squares are the file's.
        written.push(text.parse::<f64>().unwrap_or(v));
        let mut row = labels.to_vec();
        row.push(text);
        rows.push(row);
    };
    match &sim.kept {
        None => {
            for (c, cell) in y.chunks_exact(b.replicates()).enumerate() {
                b.levels_of_cell(c, &mut at);
                let labels = labels_of(&at);
                for &v in cell {
                    push(&labels, v);
                }
            }
        }
        Some(kept) => {
            let mut last = usize::MAX;
            let mut labels = Vec::new();
            for (&c, &v) in kept.cell.iter().zip(y) {
                if c != last {
                    b.levels_of_cell(c, &mut at);
                    labels = labels_of(&at);
                    last = c;
                }
                push(&labels, v);
            }
        }
    }
    DataSet {
        header,
        rows,
        y: written,
        decimals,
    }
}
