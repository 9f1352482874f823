//! The sampling structure of one test: which design the values of a characteristic x factor
//! support, decided from the data (the subgroup of every value and the factor's levels).
//!
//! Parts of one subgroup (a shot, a CMM sample, a batch) share its deviation, so they are not
//! independent replicates of their group. The rule, per test:
//! - **nested**: the factor is constant within every subgroup (machine, supplier, lot, shift,
//!   operator). The subgroup is the unit of replication: the factor is tested on the subgroup
//!   means, against the variation between subgroups within its levels;
//! - **blocked**: the factor varies within the subgroups (cavity within shot, spindle, nozzle):
//!   every subgroup with two or more values holds two or more levels. The subgroups are blocks
//!   of an additive two-way model, so shot-to-shot noise is taken out and small offsets show;
//! - **cell_means**: neither (some subgroups hold one level with several values, others several
//!   levels: a level appears in part of a subgroup). Tested on the mean of each level within
//!   each subgroup, each such cell one unit, with the reason said;
//! - **independent**: no subgroup is known (or some values lack one): every value is a unit,
//!   and the serial-dependence check says whether that is safe.

use super::NO_SUBGROUP;

pub use crate::results::DesignKind;

/// One (subgroup, level) cell: its values are `Arranged::values[start..end]`.
#[derive(Debug, Clone, Copy)]
pub struct Cell {
    /// Dense subgroup number (0..n_subgroups) in order of first appearance.
    pub subgroup: u32,
    /// The level's slot among the test's groups.
    pub slot: u32,
    /// First value.
    pub start: usize,
    /// One past the last value.
    pub end: usize,
}

/// The values of a test arranged by subgroup and level, with the design they support.
#[derive(Debug, Clone)]
pub struct Arranged {
    /// The design.
    pub kind: DesignKind,
    /// Values sorted by (subgroup, level), time order kept within a cell.
    pub values: Vec<f64>,
    /// The cells, in the order of `values`.
    pub cells: Vec<Cell>,
    /// Subgroups in the test.
    pub n_subgroups: usize,
    /// For `CellMeans`: why neither nested nor blocked (counts of the two kinds of subgroup).
    pub reason: Option<String>,
}

impl Arranged {
    /// `cell`'s values.
    pub fn cell_values(&self, cell: &Cell) -> &[f64] {
        &self.values[cell.start..cell.end]
    }

    /// Per slot, the means of its cells (the units of a nested or cell-means test), in order
    /// of the subgroups' first appearance (time order).
    pub fn cell_means(&self, n_slots: usize) -> Vec<Vec<f64>> {
        let mut means = vec![Vec::new(); n_slots];
        for cell in &self.cells {
            let v = self.cell_values(cell);
            // Values are offsets near zero (exactly centred on the decimal origin), so the
            // plain sum keeps the digits a mean needs.
            means[cell.slot as usize].push(v.iter().sum::<f64>() / v.len() as f64);
        }
        means
    }

    /// Per slot, the values of each of its cells (a nested design's levels x subgroups).
    pub fn nested_groups(&self, n_slots: usize) -> Vec<Vec<&[f64]>> {
        let mut out = vec![Vec::new(); n_slots];
        for cell in &self.cells {
            out[cell.slot as usize].push(self.cell_values(cell));
        }
        out
    }

    /// Values per subgroup, by dense subgroup number.
    pub fn block_sizes(&self) -> Vec<usize> {
        let mut sizes = vec![0usize; self.n_subgroups];
        for cell in &self.cells {
            sizes[cell.subgroup as usize] += cell.end - cell.start;
        }
        sizes
    }

    /// Per value (in the order of `values`): its level slot and its dense subgroup number.
    pub fn labels(&self) -> (Vec<u32>, Vec<u32>) {
        let mut slots = Vec::with_capacity(self.values.len());
        let mut blocks = Vec::with_capacity(self.values.len());
        for cell in &self.cells {
            let n = cell.end - cell.start;
            slots.extend(std::iter::repeat_n(cell.slot, n));
            blocks.extend(std::iter::repeat_n(cell.subgroup, n));
        }
        (slots, blocks)
    }
}

/// Why a test with subgroups in its frame still treats its values as independent.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum NoStructure {
    /// No value of the test has a subgroup.
    NoSubgroups,
    /// Some values have one and some do not (the reason names the counts).
    Incomplete(String),
}

/// Arranges the values of one test (`values[row]` with the level slot `slot_of(row)`,
/// `None` for rows left out of the test) by their subgroups `subgroup[row]`, and decides
/// the design. `subgroup` empty: no subgroups at all.
pub fn arrange(
    values: &[f64],
    subgroup: &[u32],
    slot_of: impl Fn(usize) -> Option<u32>,
) -> Result<Arranged, NoStructure> {
    if subgroup.is_empty() {
        return Err(NoStructure::NoSubgroups);
    }
    // (subgroup, slot, row) of the rows in the test; rows stay in time order within a key.
    let mut rows: Vec<(u32, u32, u32)> = Vec::with_capacity(values.len());
    let mut missing = 0usize;
    for (row, &sg) in subgroup.iter().enumerate() {
        let Some(slot) = slot_of(row) else { continue };
        if sg == NO_SUBGROUP {
            missing += 1;
        } else {
            rows.push((sg, slot, row as u32));
        }
    }
    if rows.is_empty() {
        return Err(NoStructure::NoSubgroups);
    }
    if missing > 0 {
        return Err(NoStructure::Incomplete(format!(
            "{missing} of {} values have no subgroup, so the values are tested as independent",
            missing + rows.len()
        )));
    }
    rows.sort_by_key(|&(sg, slot, _)| (sg, slot));
    // Dense subgroup numbers and the cells.
    let mut arranged_values = Vec::with_capacity(rows.len());
    let mut cells: Vec<Cell> = Vec::new();
    let mut n_subgroups = 0usize;
    let mut last_sg = u32::MAX;
    for &(sg, slot, row) in &rows {
        if sg != last_sg {
            n_subgroups += 1;
            last_sg = sg;
        }
        let dense = (n_subgroups - 1) as u32;
        let i = arranged_values.len();
        match cells.last_mut() {
            Some(c) if c.subgroup == dense && c.slot == slot => c.end = i + 1,
            _ => cells.push(Cell {
                subgroup: dense,
                slot,
                start: i,
                end: i + 1,
            }),
        }
        arranged_values.push(values[row as usize]);
    }
    // Per subgroup: how many levels (cells) and how many values.
    let mut one_level_replicated = 0usize;
    let mut several_levels = 0usize;
    let mut i = 0;
    while i < cells.len() {
        let sg = cells[i].subgroup;
        let mut j = i;
        let mut n = 0;
        while j < cells.len() && cells[j].subgroup == sg {
            n += cells[j].end - cells[j].start;
            j += 1;
        }
        match j - i {
            1 if n >= 2 => one_level_replicated += 1,
            1 => {}
            _ => several_levels += 1,
        }
        i = j;
    }
    let (kind, reason) = if several_levels == 0 {
        (DesignKind::Nested, None)
    } else if one_level_replicated == 0 {
        (DesignKind::Blocked, None)
    } else {
        (
            DesignKind::CellMeans,
            Some(format!(
                "{several_levels} of {n_subgroups} subgroups hold several levels and {one_level_replicated} hold several values of one level only (a level appears in part of a subgroup)"
            )),
        )
    };
    Ok(Arranged {
        kind,
        values: arranged_values,
        cells,
        n_subgroups,
        reason,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_design_follows_the_data() {
        // Machine constant within each shot: nested.
        let values = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
        let a = arrange(&values, &[0, 0, 1, 1, 2, 2], |r| {
            Some([0, 0, 1, 1, 0, 0][r])
        })
        .unwrap();
        assert_eq!(a.kind, DesignKind::Nested);
        assert_eq!(a.n_subgroups, 3);
        assert_eq!(a.cell_means(2), vec![vec![1.5, 5.5], vec![3.5]]);
        // Cavity varies within each shot: blocked (a shot of one part is fine).
        let a = arrange(&values, &[0, 0, 1, 1, 2, 0], |r| {
            Some([0, 1, 0, 1, 0, 0][r])
        })
        .unwrap();
        assert_eq!(a.kind, DesignKind::Blocked);
        let (slots, blocks) = a.labels();
        assert_eq!(slots.len(), 6);
        assert_eq!(blocks.iter().filter(|&&b| b == 0).count(), 3);
        // Shot 0 holds two levels, shot 1 two values of one level: mixed.
        let a = arrange(&values[..4], &[0, 0, 1, 1], |r| Some([0, 1, 0, 0][r])).unwrap();
        assert_eq!(a.kind, DesignKind::CellMeans);
        assert!(a
            .reason
            .unwrap()
            .contains("1 of 2 subgroups hold several levels"));
        // Rows left out of the test do not count; a value without a subgroup makes it
        // independent, with the counts said.
        let err = arrange(&values[..3], &[0, NO_SUBGROUP, 1], |r| {
            (r != 0).then_some(0)
        })
        .unwrap_err();
        assert_eq!(
            err,
            NoStructure::Incomplete(
                "1 of 2 values have no subgroup, so the values are tested as independent".into()
            )
        );
        assert_eq!(
            arrange(&values, &[], |_| Some(0)).unwrap_err(),
            NoStructure::NoSubgroups
        );
    }
}
