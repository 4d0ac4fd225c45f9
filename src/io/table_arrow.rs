//! The labelled table from a columnar file (Parquet, Arrow IPC). Columns take the same
//! roles as in CSV ([`ColumnPlan`]); role cells are read as text and go through the CSV
//! rules ([`RowParser`]), feature columns are read as numbers of their stored type.
//!
//! Parquet row groups convert in parallel, each straight into its rows of the final
//! value array (no per-part buffer to copy, and no fresh pages per part), and each in
//! passes of at most [`COLUMNS_PER_PASS`] columns: the reader holds a whole row group's
//! compressed column chunks while it decodes them, so a file written as one big row group
//! (pyarrow's default up to 1,048,576 rows) would otherwise need about its own size again
//! in memory. Measured on 1,000,000 × 32 f64 in one row group
//! (`benches/vs_pyarrow_parquet.sh`): see the README's speed table.

use std::path::Path;
use std::sync::Mutex;

use arrow_array::{Array, RecordBatch};
use rayon::prelude::*;

use super::arrow_cells::{dense, type_words, Text};
use super::columnar::{ColumnarFile, Format, BATCH_ROWS};
use super::table_chunk::{ChunkOut, Fatal, Fields, RowParser, SlotStats};
use super::table_merge::{Merged, Merger, Places};
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::error::{Error, Problem, Result};

/// Feature columns decoded per pass over a row group.
const COLUMNS_PER_PASS: usize = 4;

/// Reads a Parquet or Arrow IPC table: the column plan resolved from its schema and the
/// cells as read.
pub(crate) fn read_columnar_table(
    path: &Path,
    options: &TableOptions,
    format: Format,
) -> Result<(ColumnPlan, Merged)> {
    let file = ColumnarFile::open(path, format)?;
    let plan = ColumnPlan::resolve(path, &file.header(), options)?;
    let mut merger = Merger::new(path, Places::Rows(file.parts.clone()), plan.numeric.len());
    match file.known_parts() {
        Some(groups) => read_row_groups(&file, groups, &plan, &mut merger)?,
        None => read_ipc(&file, &plan, &mut merger)?,
    }
    Ok((plan, merger.cells))
}

/// Parquet: row groups convert on the rayon pool into their rows of one value array,
/// then their role cells merge in file order.
fn read_row_groups(
    file: &ColumnarFile,
    groups: usize,
    plan: &ColumnPlan,
    merger: &mut Merger,
) -> Result<()> {
    let width = plan.numeric.len();
    // Zeroed memory comes from the allocator untouched; every cell is written below.
    let mut values = vec![0.0f64; file.rows() * width];
    let mut slices = Vec::with_capacity(groups);
    let mut rest = values.as_mut_slice();
    for group in 0..groups {
        let rows = file.parts.rows_of(group, file.rows());
        let (mine, after) = rest.split_at_mut(rows * width);
        slices.push((group, rows, mine));
        rest = after;
    }
    let outs: Vec<Result<ChunkOut>> = slices
        .into_par_iter()
        .map(|(group, rows, out)| convert_group(file, group, rows, plan, out))
        .collect();
    for out in outs {
        merger.absorb(out?, plan)?;
    }
    merger.cells.values = values;
    Ok(())
}

/// One row group: its role cells (one pass) and its features (passes of a few columns).
fn convert_group(
    file: &ColumnarFile,
    group: usize,
    rows: usize,
    plan: &ColumnPlan,
    out: &mut [f64],
) -> Result<ChunkOut> {
    let width = plan.numeric.len();
    let mut by_field: Vec<(usize, usize)> = plan
        .numeric
        .iter()
        .enumerate()
        .map(|(slot, &field)| (field, slot))
        .collect();
    by_field.sort_unstable();
    // The passes run on the pool at once; each locks the rows of one batch while it puts
    // its columns there, so two passes only wait for each other on the same batch.
    let blocks: Vec<Mutex<&mut [f64]>> = out
        .chunks_mut((BATCH_ROWS * width).max(1))
        .map(Mutex::new)
        .collect();
    // The role cells (one pass, text) go beside the feature passes, not before them.
    let (roles, passes) = rayon::join(
        || role_pass(file, group, plan),
        || {
            by_field
                .par_chunks(COLUMNS_PER_PASS)
                .map(|pass| numeric_pass(file, group, pass, &blocks, width))
                .collect::<Vec<Result<Vec<SlotStats>>>>()
        },
    );
    let (parser, fatal) = roles?;
    let mut slots = vec![SlotStats::default(); width];
    for pass in passes {
        for (mine, theirs) in slots.iter_mut().zip(pass?) {
            mine.absorb(&theirs, 0);
        }
    }
    Ok(parser.finish(Vec::new(), slots, rows as u64, fatal))
}

/// The role cells of one row group, through the CSV rules; the first problem, if any.
fn role_pass<'p>(
    file: &ColumnarFile,
    group: usize,
    plan: &'p ColumnPlan,
) -> Result<(RowParser<'p>, Option<Fatal>)> {
    let text_fields = text_fields(plan);
    let mut parser = RowParser::new(plan);
    let mut fatal = None;
    if !text_fields.is_empty() {
        let mut first = 0;
        for batch in file.read_row_group(group, &text_fields)? {
            if fatal.is_none() {
                fatal = roles(&batch, &text_fields, &mut parser, first).err();
            }
            first += batch.num_rows();
        }
    }
    Ok((parser, fatal))
}

/// One pass over a row group: the feature columns `pass` ((field, slot) pairs, fields
/// ascending) put into `blocks` (the group's rows in blocks of [`BATCH_ROWS`]); returns
/// the statistics of those slots (the others stay empty).
fn numeric_pass(
    file: &ColumnarFile,
    group: usize,
    pass: &[(usize, usize)],
    blocks: &[Mutex<&mut [f64]>],
    width: usize,
) -> Result<Vec<SlotStats>> {
    let fields: Vec<usize> = pass.iter().map(|&(f, _)| f).collect();
    let slots: Vec<usize> = pass.iter().map(|&(_, s)| s).collect();
    let mut stats = vec![SlotStats::default(); width];
    let mut first = 0;
    for batch in file.read_row_group(group, &fields)? {
        // A batch that straddles two blocks (the reader need not cut where we do) is put
        // in two slices.
        let mut done = 0;
        while done < batch.num_rows() {
            let (index, offset) = (first / BATCH_ROWS, first % BATCH_ROWS);
            let n = (batch.num_rows() - done).min(BATCH_ROWS - offset);
            let mut block = blocks
                .get(index)
                .ok_or_else(|| Error::Internal("a row group longer than its footer says".into()))?
                .lock()
                .map_err(|_| Error::Internal("a column pass panicked".into()))?;
            let rows = &mut block[offset * width..(offset + n) * width];
            put_numbers(
                &batch.slice(done, n),
                &slots,
                rows,
                width,
                &mut stats,
                first as u64,
            );
            first += n;
            done += n;
        }
    }
    Ok(stats)
}

/// Arrow IPC: record batches in order; each one's start is recorded as it arrives.
fn read_ipc(file: &ColumnarFile, plan: &ColumnPlan, merger: &mut Merger) -> Result<()> {
    let text_fields = text_fields(plan);
    let mut fields: Vec<usize> = text_fields.iter().chain(&plan.numeric).copied().collect();
    fields.sort_unstable();
    fields.dedup();
    let width = plan.numeric.len();
    // Where each role and feature column sits in the projected batches.
    let column_of = |field: usize| fields.binary_search(&field).unwrap_or(0);
    let text_columns: Vec<usize> = text_fields.iter().map(|&f| column_of(f)).collect();
    let feature_columns: Vec<usize> = plan.numeric.iter().map(|&f| column_of(f)).collect();
    let all_slots: Vec<usize> = (0..width).collect();
    for batch in file.batches(&fields)? {
        let batch = batch?;
        let start = merger.done() as usize;
        if let Places::Rows(parts) = &mut merger.cells.places {
            parts.starts.push(start);
        }
        let mut parser = RowParser::new(plan);
        let fatal = roles_at(&batch, &text_fields, &text_columns, &mut parser, 0).err();
        let mut values = vec![0.0; batch.num_rows() * width];
        let mut slots = vec![SlotStats::default(); width];
        put_numbers_at(
            &batch,
            &feature_columns,
            &all_slots,
            &mut values,
            width,
            &mut slots,
            0,
        );
        let out = parser.finish(values, slots, batch.num_rows() as u64, fatal);
        merger.absorb(out, plan)?;
    }
    Ok(())
}

/// The fields read as text (every role but the features), in file order.
pub(crate) fn text_fields(plan: &ColumnPlan) -> Vec<usize> {
    let mut fields: Vec<usize> = [plan.label, plan.trusted, plan.origin, plan.source, plan.id]
        .into_iter()
        .flatten()
        .chain(plan.annotators.iter().copied())
        .collect();
    fields.sort_unstable();
    fields
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

/// The role columns of a batch that holds exactly `fields`, row by row through the CSV
/// rules; `first` is the batch's first row within its part.
pub(crate) fn roles(
    batch: &RecordBatch,
    fields: &[usize],
    parser: &mut RowParser,
    first: usize,
) -> Result<(), Fatal> {
    let columns: Vec<usize> = (0..fields.len()).collect();
    roles_at(batch, fields, &columns, parser, first)
}

/// [`roles`] with the batch column of each field given.
pub(crate) fn roles_at(
    batch: &RecordBatch,
    fields: &[usize],
    columns: &[usize],
    parser: &mut RowParser,
    first: usize,
) -> Result<(), Fatal> {
    let mut texts = Vec::with_capacity(fields.len());
    let width = fields.iter().max().map_or(0, |m| m + 1);
    for (&field, &column) in fields.iter().zip(columns) {
        let array = batch.column(column).as_ref();
        let text = Text::of(array).ok_or_else(|| {
            let problem = Problem::ColumnType {
                found: type_words(array),
                expected: "this role needs text or integer values".into(),
            };
            (first as u64, Some(field), problem)
        })?;
        texts.push((field, text));
    }
    let mut cells = RowCells(vec![Vec::new(); parser.fields().max(width)]);
    for row in 0..batch.num_rows() {
        for (field, text) in &texts {
            text.cell(row, &mut cells.0[*field]);
        }
        parser.row(&cells, (first + row) as u64)?;
    }
    Ok(())
}

/// Writes a batch holding the feature columns of `slots` (in that order) into `block`
/// (its rows × `width`, row-major) and records what they held in `stats`, with places
/// shifted by `first`.
fn put_numbers(
    batch: &RecordBatch,
    slots: &[usize],
    block: &mut [f64],
    width: usize,
    stats: &mut [SlotStats],
    first: u64,
) {
    let columns: Vec<usize> = (0..slots.len()).collect();
    put_numbers_at(batch, &columns, slots, block, width, stats, first);
}

/// [`put_numbers`] with the batch column of each slot given.
fn put_numbers_at(
    batch: &RecordBatch,
    columns: &[usize],
    slots: &[usize],
    block: &mut [f64],
    width: usize,
    stats: &mut [SlotStats],
    first: u64,
) {
    let rows = batch.num_rows();
    if width == 0 {
        return;
    }
    let mut buffers: Vec<Vec<f64>> = vec![Vec::new(); slots.len()];
    let mut dense_columns: Vec<(usize, &[f64])> = Vec::with_capacity(slots.len());
    let mut null_lists = Vec::new();
    for ((&column, &slot), buf) in columns.iter().zip(slots).zip(buffers.iter_mut()) {
        let array: &dyn Array = batch.column(column).as_ref();
        match dense(array, buf) {
            None => {
                stats[slot].wrong_type = Some(type_words(array));
                null_lists.push((slot, None, true));
            }
            Some((values, nulls)) => {
                record(&mut stats[slot], values, nulls.as_ref(), first);
                dense_columns.push((slot, values));
                null_lists.push((slot, nulls, false));
            }
        }
    }
    // Row by row, so the writes run forward through the block and each column is read
    // in order: a cache-friendly transposition.
    for (r, row) in block.chunks_exact_mut(width).enumerate().take(rows) {
        for &(slot, values) in &dense_columns {
            row[slot] = values[r];
        }
    }
    for (slot, nulls, wrong) in null_lists {
        let mut blank = |r: usize| block[r * width + slot] = f64::NAN;
        match (wrong, nulls) {
            (true, _) => (0..rows).for_each(blank),
            (false, Some(nulls)) => nulls
                .iter()
                .enumerate()
                .filter(|(_, valid)| !valid)
                .for_each(|(r, _)| blank(r)),
            (false, None) => {}
        }
    }
}

/// Adds one batch's column to its statistics: values, nulls (the first), the first
/// value that is not finite.
fn record(
    stats: &mut SlotStats,
    values: &[f64],
    nulls: Option<&arrow_buffer::NullBuffer>,
    first: u64,
) {
    let missing = nulls.map_or(0, |n| n.null_count());
    stats.values += values.len() - missing;
    stats.missing += missing;
    if stats.first_missing.is_none() {
        let at = nulls.and_then(|n| n.iter().position(|valid| !valid));
        stats.first_missing = at.map(|r| first + r as u64);
    }
    if stats.first_nonfinite.is_none() {
        let valid = |r: usize| nulls.is_none_or(|n| n.is_valid(r));
        let bad = values
            .iter()
            .enumerate()
            .position(|(r, v)| !v.is_finite() && valid(r));
        stats.first_nonfinite = bad.map(|r| (first + r as u64, values[r].to_string()));
    }
}
