//! The labelled table from a columnar file (Parquet, Arrow IPC). Columns take the same
//! roles as in CSV ([`ColumnPlan`]); role cells are read as text and go through the CSV
//! rules ([`RowParser`]), feature columns are read as numbers of their stored type.
//! Parquet row groups are read and converted on the rayon pool and merged in file order.

use std::path::Path;

use arrow_array::RecordBatch;
use rayon::prelude::*;

use super::arrow_cells::{for_each_number, type_words, Text};
use super::columnar::{ColumnarFile, Format};
use super::table_chunk::{ChunkOut, Fatal, Fields, RowParser, SlotStats};
use super::table_merge::{Merged, Merger, Places};
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::error::{Problem, Result};

/// Reads a Parquet or Arrow IPC table: the column plan resolved from its schema and the
/// cells as read.
pub(crate) fn read_columnar_table(
    path: &Path,
    options: &TableOptions,
    format: Format,
) -> Result<(ColumnPlan, Merged)> {
    let file = ColumnarFile::open(path, format)?;
    let plan = ColumnPlan::resolve(path, &file.header(), options)?;
    let columns = Columns::of(&plan);
    let mut merger = Merger::new(path, Places::Rows(file.parts.clone()), plan.numeric.len());
    match file.known_parts() {
        Some(groups) => {
            merger.reserve_rows(file.rows(), &plan);
            read_row_groups(&file, groups, &plan, &columns, &mut merger)?;
        }
        None => read_ipc(&file, &plan, &columns, &mut merger)?,
    }
    Ok((plan, merger.cells))
}

/// Parquet: windows of row groups convert in parallel, then merge in order.
fn read_row_groups(
    file: &ColumnarFile,
    groups: usize,
    plan: &ColumnPlan,
    columns: &Columns,
    merger: &mut Merger,
) -> Result<()> {
    let window = 2 * rayon::current_num_threads().max(1);
    let all: Vec<usize> = (0..groups).collect();
    for chunk in all.chunks(window) {
        let converted: Vec<Result<Vec<ChunkOut>>> = chunk
            .par_iter()
            .map(|&group| {
                let batches = file.read_row_group(group, &columns.fields)?;
                Ok(batches.iter().map(|b| convert(b, plan, columns)).collect())
            })
            .collect();
        for outs in converted {
            for out in outs? {
                merger.absorb(out, plan)?;
            }
        }
    }
    Ok(())
}

/// Arrow IPC: record batches in order; each one's start is recorded as it arrives.
fn read_ipc(
    file: &ColumnarFile,
    plan: &ColumnPlan,
    columns: &Columns,
    merger: &mut Merger,
) -> Result<()> {
    for batch in file.ipc_batches(&columns.fields)? {
        let batch = batch?;
        let start = merger.done() as usize;
        if let Places::Rows(parts) = &mut merger.cells.places {
            parts.starts.push(start);
        }
        merger.absorb(convert(&batch, plan, columns), plan)?;
    }
    Ok(())
}

/// The fields a plan reads, in file order, and where each sits in a read batch.
struct Columns {
    /// Field indexes read, ascending (the projection).
    fields: Vec<usize>,
    /// Header field → column of the projected batch.
    column_of: Vec<Option<usize>>,
    /// Fields whose cells are read as text (every role but the features).
    text_fields: Vec<usize>,
}

impl Columns {
    fn of(plan: &ColumnPlan) -> Self {
        let mut text_fields: Vec<usize> =
            [plan.label, plan.trusted, plan.origin, plan.source, plan.id]
                .into_iter()
                .flatten()
                .chain(plan.annotators.iter().copied())
                .collect();
        text_fields.sort_unstable();
        let mut fields: Vec<usize> = text_fields.iter().chain(&plan.numeric).copied().collect();
        fields.sort_unstable();
        fields.dedup();
        let mut column_of = vec![None; plan.header.len()];
        for (column, &field) in fields.iter().enumerate() {
            column_of[field] = Some(column);
        }
        Columns {
            fields,
            column_of,
            text_fields,
        }
    }

    fn array<'b>(&self, batch: &'b RecordBatch, field: usize) -> &'b dyn arrow_array::Array {
        // Every field in `fields` has a column; the projection read exactly those.
        batch.column(self.column_of[field].unwrap_or(0)).as_ref()
    }
}

/// One row's role cells as text, by header field (unused fields stay empty).
struct RowCells(Vec<Vec<u8>>);

impl Fields for RowCells {
    fn count(&self) -> usize {
        self.0.len()
    }
    fn field(&self, i: usize) -> &[u8] {
        &self.0[i]
    }
}

/// Converts one batch; place numbers inside are the batch's 0-based rows.
fn convert(batch: &RecordBatch, plan: &ColumnPlan, columns: &Columns) -> ChunkOut {
    let rows = batch.num_rows();
    let (values, slots) = numbers(batch, plan, columns);
    let mut parser = RowParser::new(plan);
    let fatal = roles(batch, columns, &mut parser).err();
    parser.finish(values, slots, rows as u64, fatal)
}

/// The role columns, row by row through the CSV rules.
fn roles(batch: &RecordBatch, columns: &Columns, parser: &mut RowParser) -> Result<(), Fatal> {
    let mut texts = Vec::with_capacity(columns.text_fields.len());
    for &field in &columns.text_fields {
        let array = columns.array(batch, field);
        let text = Text::of(array).ok_or_else(|| {
            let problem = Problem::ColumnType {
                found: type_words(array),
                expected: "this role needs text or integer values".into(),
            };
            (0, Some(field), problem)
        })?;
        texts.push((field, text));
    }
    let mut cells = RowCells(vec![Vec::new(); columns.column_of.len()]);
    for row in 0..batch.num_rows() {
        for (field, text) in &texts {
            text.cell(row, &mut cells.0[*field]);
        }
        parser.row(&cells, row as u64)?;
    }
    Ok(())
}

/// The candidate feature columns as row-major f64 (NaN where null) and what each held.
fn numbers(
    batch: &RecordBatch,
    plan: &ColumnPlan,
    columns: &Columns,
) -> (Vec<f64>, Vec<SlotStats>) {
    let rows = batch.num_rows();
    let width = plan.numeric.len();
    let mut values = vec![f64::NAN; rows * width];
    let mut slots = vec![SlotStats::default(); width];
    for (slot, &field) in plan.numeric.iter().enumerate() {
        let array = columns.array(batch, field);
        let stats = &mut slots[slot];
        let mut first_nonfinite = None;
        let read = for_each_number(array, |row, value| {
            values[row * width + slot] = value;
            if !value.is_finite() && first_nonfinite.is_none() {
                first_nonfinite = Some((row as u64, value.to_string()));
            }
        });
        match read {
            None => stats.wrong_type = Some(type_words(array)),
            Some(nulls) => {
                let missing = nulls.as_ref().map_or(0, |n| n.null_count());
                stats.values = rows - missing;
                stats.missing = missing;
                stats.first_missing = nulls
                    .as_ref()
                    .and_then(|n| n.iter().position(|valid| !valid))
                    .map(|row| row as u64);
                stats.first_nonfinite = first_nonfinite;
            }
        }
    }
    (values, slots)
}
