//! Parses one block of CSV records into column-role buffers. Blocks are independent, so
//! they parse in parallel; [`super::table`] merges their outputs in file order.

use std::collections::HashMap;

use crate::error::{shorten, Problem};

use super::roles::ColumnPlan;

/// Code of "no trusted label" in [`ChunkOut::trusted`].
pub(crate) const NONE: u32 = u32::MAX;

/// What one numeric (or candidate numeric) column looked like in a block.
#[derive(Debug, Clone, Default)]
pub(crate) struct SlotStats {
    /// Cells that parsed as numbers.
    pub values: usize,
    /// Empty cells.
    pub missing: usize,
    /// Line of the first empty cell.
    pub first_missing: Option<u64>,
    /// Line and text of the first cell that is not a number.
    pub first_bad: Option<(u64, String)>,
    /// Line and text of the first NaN or infinity.
    pub first_nonfinite: Option<(u64, String)>,
}

impl SlotStats {
    /// Folds a later block's statistics into this one; `base` turns its block-local line
    /// numbers into file lines.
    pub(crate) fn absorb(&mut self, later: &SlotStats, base: u64) {
        self.values += later.values;
        self.missing += later.missing;
        let shift = |line: u64| line + base;
        self.first_missing = self.first_missing.or(later.first_missing.map(shift));
        if self.first_bad.is_none() {
            self.first_bad = later.first_bad.clone().map(|(l, t)| (shift(l), t));
        }
        if self.first_nonfinite.is_none() {
            self.first_nonfinite = later.first_nonfinite.clone().map(|(l, t)| (shift(l), t));
        }
    }
}

/// A problem that stops loading: the block-local line, the field index, and what.
pub(crate) type Fatal = (u64, Option<usize>, Problem);

/// One parsed block. Line numbers inside are 1-based within the block.
#[derive(Debug, Default)]
pub(crate) struct ChunkOut {
    /// Newlines in the block, to place the next block's lines.
    pub newlines: u64,
    /// Size of the block in bytes.
    pub bytes: usize,
    /// Data rows parsed.
    pub rows: usize,
    /// Row-major `rows × plan.numeric.len()` values; NaN where a cell was not a number.
    pub values: Vec<f64>,
    /// Observed label per row, as a code into `names`.
    pub labels: Vec<u32>,
    /// Trusted label per row as a code into `names`, or [`NONE`].
    pub trusted: Vec<u32>,
    /// The block's label strings, in order of first appearance.
    pub names: Vec<String>,
    /// Concatenated ids.
    pub ids: String,
    /// End offset in `ids` of each row's id.
    pub id_ends: Vec<usize>,
    /// Line of each row (only kept when there is an id column, to report duplicates).
    pub row_lines: Vec<u64>,
    /// Per numeric column.
    pub slots: Vec<SlotStats>,
    /// The first problem that stops loading.
    pub fatal: Option<Fatal>,
}

/// Parses `block` (whole records, no header) under `plan`.
pub(crate) fn parse_block(block: &[u8], delimiter: u8, plan: &ColumnPlan) -> ChunkOut {
    let mut parser = BlockParser::new(plan, block);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .delimiter(delimiter)
        .from_reader(block);
    let mut record = csv::ByteRecord::new();
    loop {
        match reader.read_byte_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {
                let line = record.position().map_or(0, |p| p.line());
                if let Err(fatal) = parser.row(&record, line) {
                    parser.out.fatal = Some(fatal);
                    break;
                }
            }
            Err(e) => {
                let line = e.position().map_or(0, |p| p.line());
                parser.out.fatal = Some((
                    line,
                    None,
                    Problem::Syntax {
                        detail: e.to_string(),
                    },
                ));
                break;
            }
        }
    }
    parser.out
}

struct BlockParser<'a> {
    plan: &'a ColumnPlan,
    codes: HashMap<Vec<u8>, u32>,
    out: ChunkOut,
}

impl<'a> BlockParser<'a> {
    fn new(plan: &'a ColumnPlan, block: &[u8]) -> Self {
        let rough_rows = block.len() / (plan.header.len() * 4).max(8) + 1;
        let out = ChunkOut {
            newlines: memchr::memchr_iter(b'\n', block).count() as u64,
            bytes: block.len(),
            values: Vec::with_capacity(rough_rows * plan.numeric.len()),
            labels: Vec::with_capacity(rough_rows),
            slots: vec![SlotStats::default(); plan.numeric.len()],
            ..Default::default()
        };
        BlockParser {
            plan,
            codes: HashMap::new(),
            out,
        }
    }

    fn row(&mut self, record: &csv::ByteRecord, line: u64) -> Result<(), Fatal> {
        let expected = self.plan.header.len();
        if record.len() != expected {
            let hint = if record.len() > expected {
                "; a value containing the delimiter must be quoted".to_string()
            } else {
                String::new()
            };
            return Err((
                line,
                None,
                Problem::Ragged {
                    expected,
                    found: record.len(),
                    hint,
                },
            ));
        }
        let label_field = self.plan.label;
        let label = &record[label_field];
        if label.is_empty() {
            return Err((line, Some(label_field), Problem::EmptyLabel));
        }
        let code = self.code(label).map_err(|p| (line, Some(label_field), p))?;
        self.out.labels.push(code);
        if let Some(field) = self.plan.trusted {
            let cell = &record[field];
            let code = if cell.is_empty() {
                NONE
            } else {
                self.code(cell).map_err(|p| (line, Some(field), p))?
            };
            self.out.trusted.push(code);
        }
        if let Some(field) = self.plan.id {
            let id = std::str::from_utf8(&record[field])
                .map_err(|_| (line, Some(field), Problem::InvalidUtf8))?;
            self.out.ids.push_str(id);
            self.out.id_ends.push(self.out.ids.len());
            self.out.row_lines.push(line);
        }
        for (slot, &field) in self.plan.numeric.iter().enumerate() {
            let value = parse_number(&record[field], line, &mut self.out.slots[slot]);
            self.out.values.push(value);
        }
        self.out.rows += 1;
        Ok(())
    }

    fn code(&mut self, text: &[u8]) -> Result<u32, Problem> {
        if let Some(&code) = self.codes.get(text) {
            return Ok(code);
        }
        let name = std::str::from_utf8(text).map_err(|_| Problem::InvalidUtf8)?;
        let code = self.out.names.len() as u32;
        self.out.names.push(name.to_string());
        self.codes.insert(text.to_vec(), code);
        Ok(code)
    }
}

/// Parses a numeric cell, recording empty, non-numeric and non-finite cells in `stats`.
/// Surrounding ASCII spaces are ignored. Returns NaN for any cell that is not a number.
fn parse_number(cell: &[u8], line: u64, stats: &mut SlotStats) -> f64 {
    let text = cell.trim_ascii();
    if text.is_empty() {
        stats.missing += 1;
        stats.first_missing.get_or_insert(line);
        return f64::NAN;
    }
    let parsed = std::str::from_utf8(text)
        .ok()
        .and_then(|s| s.parse::<f64>().ok());
    match parsed {
        Some(v) => {
            stats.values += 1;
            if !v.is_finite() && stats.first_nonfinite.is_none() {
                stats.first_nonfinite = Some((line, shorten(&String::from_utf8_lossy(text))));
            }
            v
        }
        None => {
            if stats.first_bad.is_none() {
                stats.first_bad = Some((line, shorten(&String::from_utf8_lossy(text))));
            }
            f64::NAN
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::roles::TableOptions;
    use std::path::Path;

    fn plan(header: &str) -> ColumnPlan {
        let names: Vec<String> = header.split(',').map(String::from).collect();
        ColumnPlan::resolve(Path::new("t.csv"), &names, &TableOptions::default()).unwrap()
    }

    #[test]
    fn parses_roles_and_numbers() {
        let p = plan("id,a,label,trusted,note");
        let out = parse_block(b"r1, 1.5,cat,,hello\nr2,-2e1,dog,cat,\n", b',', &p);
        assert!(out.fatal.is_none());
        assert_eq!(out.rows, 2);
        assert_eq!(out.names, ["cat", "dog"]);
        assert_eq!(out.labels, [0, 1]);
        assert_eq!(out.trusted, [NONE, 0]);
        assert_eq!(out.ids, "r1r2");
        assert_eq!(out.values[0], 1.5);
        assert_eq!(out.values[2], -20.0);
        assert_eq!(out.slots[1].first_bad, Some((1, "hello".into())));
        assert_eq!(out.slots[1].first_missing, Some(2));
        assert_eq!(out.newlines, 2);
    }

    #[test]
    fn ragged_row_is_fatal_with_its_line() {
        let p = plan("a,label");
        let out = parse_block(b"1,x\n2,y,extra\n", b',', &p);
        let (line, _, problem) = out.fatal.unwrap();
        assert_eq!(line, 2);
        assert!(matches!(
            problem,
            Problem::Ragged {
                expected: 2,
                found: 3,
                ..
            }
        ));
    }

    #[test]
    fn nan_and_inf_are_flagged() {
        let p = plan("a,label");
        let out = parse_block(b"NaN,x\ninf,y\n", b',', &p);
        assert_eq!(out.slots[0].first_nonfinite, Some((1, "NaN".into())));
        assert_eq!(out.slots[0].values, 2);
    }
}
