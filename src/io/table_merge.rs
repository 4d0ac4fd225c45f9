//! Merging parsed parts of a table in file order. CSV blocks and columnar row groups are
//! parsed apart (in parallel) into [`ChunkOut`]s, each with its own label codes; the
//! [`Merger`] joins them into one [`Merged`] set of cells with table-wide codes.

use rustc_hash::FxHashMap as HashMap;
use std::path::Path;

use super::table_chunk::{ChunkOut, SlotStats, NONE};
use crate::data::origin::Origin;
use crate::data::roles::ColumnPlan;
use crate::data::table::StringColumn;
use crate::error::{Error, Location, Part, Problem, Result};

/// The cells of a table as read, merged in file order; not yet checked as a whole.
#[derive(Debug, Default)]
pub(crate) struct Merged {
    /// Data rows read.
    pub(crate) rows: usize,
    /// Row-major `rows × plan.numeric.len()`; NaN where a cell was not a number.
    pub(crate) values: Vec<f64>,
    /// Observed label per row, as a code into `names`.
    pub(crate) labels: Vec<u32>,
    /// Trusted label per row as a code into `names`, or [`NONE`].
    pub(crate) trusted: Vec<u32>,
    /// Origin of each row's trusted label (only when the plan has an origin column).
    pub(crate) origins: Vec<Origin>,
    /// Label strings in order of first appearance.
    pub(crate) names: Vec<String>,
    /// Rows × annotators label codes into `names` or [`NONE`] (only with annotators).
    pub(crate) annotations: Vec<u32>,
    /// Label source per row as a code into `source_names` (only with a source column).
    pub(crate) sources: Vec<u32>,
    /// Source strings in order of first appearance.
    pub(crate) source_names: Vec<String>,
    /// Ids, when the plan has an id column.
    pub(crate) ids: StringColumn,
    /// Place of each row (only kept when there is an id column): see `places`.
    pub(crate) row_lines: Vec<u64>,
    /// What each numeric column looked like.
    pub(crate) slots: Vec<SlotStats>,
    /// What the place numbers above (`row_lines`, the slots' first cells) count.
    pub(crate) places: Places,
}

/// What the place numbers of a [`Merged`] table count.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub(crate) enum Places {
    /// 1-based physical lines of a text file.
    #[default]
    Lines,
    /// 0-based data rows of a columnar file, stored in parts.
    Rows(PartMap),
}

/// The parts (row groups, record batches) of a columnar file, by their first rows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct PartMap {
    /// "row group" or "record batch".
    pub(crate) kind: &'static str,
    /// First data row of each part, ascending; the first is 0.
    pub(crate) starts: Vec<usize>,
}

impl PartMap {
    /// Rows of part `index` in a file of `total` rows.
    pub(crate) fn rows_of(&self, index: usize, total: usize) -> usize {
        let end = self.starts.get(index + 1).copied().unwrap_or(total);
        end.saturating_sub(self.starts.get(index).copied().unwrap_or(total))
    }

    /// The part holding `row` and the row's offset in it.
    pub(crate) fn part_of(&self, row: usize) -> Part {
        let index = self.starts.partition_point(|&s| s <= row).saturating_sub(1);
        let start = self.starts.get(index).copied().unwrap_or(0);
        Part {
            kind: self.kind,
            index,
            offset: row - start.min(row),
        }
    }
}

impl Places {
    /// The location of place number `at` in `path`.
    pub(crate) fn locate(&self, path: &Path, at: u64) -> Location {
        match self {
            Places::Lines => Location::line(path, at),
            Places::Rows(parts) => {
                let row = at as usize;
                Location::row_in_part(path, row, parts.part_of(row))
            }
        }
    }

    /// Place number `at` in words: "line 9" or "row 8".
    pub(crate) fn words(&self, at: u64) -> String {
        match self {
            Places::Lines => format!("line {at}"),
            Places::Rows(_) => format!("row {at}"),
        }
    }

    /// The problem of empty feature cells, worded for the file kind (a columnar file
    /// has nulls, not empty cells).
    pub(crate) fn missing_values(&self, count: usize) -> Problem {
        match self {
            Places::Lines => Problem::MissingValues { count },
            Places::Rows(_) => Problem::NullValues { count },
        }
    }
}

/// Joins parsed parts in file order.
pub(crate) struct Merger<'a> {
    path: &'a Path,
    /// Place numbers consumed by the parts merged so far (lines, or rows).
    done: u64,
    /// Label name → its code in `cells.names`.
    codes: HashMap<String, u32>,
    /// Source name → its code in `cells.source_names`.
    source_codes: HashMap<String, u32>,
    pub(crate) cells: Merged,
}

impl<'a> Merger<'a> {
    pub(crate) fn new(path: &'a Path, places: Places, numeric_columns: usize) -> Self {
        Merger {
            path,
            done: 0,
            codes: HashMap::default(),
            source_codes: HashMap::default(),
            cells: Merged {
                places,
                slots: vec![SlotStats::default(); numeric_columns],
                ..Merged::default()
            },
        }
    }

    /// Place numbers consumed so far (the lines before the next part, in a text file).
    pub(crate) fn done(&self) -> u64 {
        self.done
    }

    /// Counts place numbers that no part carries (the header line).
    pub(crate) fn skip(&mut self, places: u64) {
        self.done += places;
    }

    /// Appends the next part, or returns its fatal problem located in the file.
    pub(crate) fn absorb(&mut self, out: ChunkOut, plan: &ColumnPlan) -> Result<()> {
        let base = self.done;
        if let Some((at, field, problem)) = out.fatal {
            let mut location = self.cells.places.locate(self.path, base + at);
            if let Some(field) = field {
                location = location.at_column(field, &plan.header[field]);
            }
            return Err(Error::input(location, problem));
        }
        let remap: Vec<u32> = out
            .names
            .into_iter()
            .map(|name| self.global_code(name))
            .collect();
        let cells = &mut self.cells;
        cells
            .labels
            .extend(out.labels.iter().map(|&c| remap[c as usize]));
        let optional = |c: u32| if c == NONE { NONE } else { remap[c as usize] };
        cells
            .trusted
            .extend(out.trusted.iter().map(|&c| optional(c)));
        cells
            .annotations
            .extend(out.annotations.iter().map(|&c| optional(c)));
        cells.origins.extend_from_slice(&out.origins);
        let source_remap: Vec<u32> = out
            .source_names
            .into_iter()
            .map(|name| self.global_source_code(name))
            .collect();
        let cells = &mut self.cells;
        cells
            .sources
            .extend(out.sources.iter().map(|&c| source_remap[c as usize]));
        cells.ids.append(&out.ids, &out.id_ends);
        cells
            .row_lines
            .extend(out.row_lines.iter().map(|l| l + base));
        cells.values.extend_from_slice(&out.values);
        for (mine, theirs) in cells.slots.iter_mut().zip(&out.slots) {
            mine.absorb(theirs, base);
        }
        cells.rows += out.rows;
        self.done += out.newlines;
        Ok(())
    }

    fn global_code(&mut self, name: String) -> u32 {
        intern(&mut self.codes, &mut self.cells.names, name)
    }

    fn global_source_code(&mut self, name: String) -> u32 {
        intern(&mut self.source_codes, &mut self.cells.source_names, name)
    }
}

/// The code of `name` in `names` (by `codes`), added at the end when new.
fn intern(codes: &mut HashMap<String, u32>, names: &mut Vec<String>, name: String) -> u32 {
    if let Some(&code) = codes.get(&name) {
        return code;
    }
    let code = names.len() as u32;
    codes.insert(name.clone(), code);
    names.push(name);
    code
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_are_placed_in_their_parts() {
        let parts = PartMap {
            kind: "row group",
            starts: vec![0, 100, 250],
        };
        assert_eq!(parts.part_of(0).index, 0);
        assert_eq!((parts.part_of(99).index, parts.part_of(99).offset), (0, 99));
        assert_eq!(
            (parts.part_of(100).index, parts.part_of(100).offset),
            (1, 0)
        );
        assert_eq!(
            (parts.part_of(300).index, parts.part_of(300).offset),
            (2, 50)
        );
        let places = Places::Rows(parts);
        assert_eq!(
            places.locate(Path::new("t.parquet"), 260).to_string(),
            "t.parquet, row 260 (row group 2, offset 10)"
        );
        assert_eq!(places.words(7), "row 7");
        assert_eq!(Places::Lines.words(7), "line 7");
    }
}
