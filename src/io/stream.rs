//! A table and its probabilities read part by part (Parquet row groups, Arrow IPC record
//! batches, blocks of CSV records), for runs over tables too large to hold: only the role
//! columns (label, id, trusted label and its origin) and the probability columns asked
//! for are decoded, and a part is dropped once its consumer is done with it.
//!
//! The probabilities are taken by position: row r of the probability file belongs to
//! row r of the table (they may be the same file). When both files have ids, every row's
//! ids must agree; a join by id would need an index of every id, which is what a
//! streamed run cannot hold.
//!
//! A reader thread decodes the next part (role cells and probabilities side by side on
//! the rayon pool) while the caller works on the current one; two parts at most wait
//! between them.

use std::path::Path;
use std::sync::mpsc::sync_channel;

use arrow_array::cast::AsArray;
use arrow_array::types::Float32Type;
use arrow_array::{Array, ArrayRef, RecordBatch};
use ndarray::Array2;

use super::arrow_cells::{for_each_number, type_words, Text};
use super::columnar::ColumnarFile;
use super::csv_stream::ids_of;
use super::stream_file::StreamFile;
use super::table_arrow::{roles_at, text_fields};
use super::table_chunk::{RowParser, SlotStats, NONE};
use super::table_merge::{Merger, PartMap, Places};
use crate::data::origin::Origin;
use crate::data::probs::{checked, ROW_SUM_TOLERANCE};
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::error::{Error, Location, Problem, Result};

/// One part of the table, with its probabilities.
#[derive(Debug, Default)]
pub struct StreamPart {
    /// Row number of the part's first row in the table.
    pub first_row: usize,
    /// Observed label of each row: a code into `names`.
    pub labels: Vec<u32>,
    /// Trusted label of each row (a code into `names`, or `u32::MAX` where none); empty
    /// when the table has no trusted column.
    pub trusted: Vec<u32>,
    /// How each trusted label was obtained; empty without an origin column.
    pub origins: Vec<Origin>,
    /// The id column as read (its text is made only for the rows a run keeps).
    pub ids: Option<ArrayRef>,
    /// Every label name seen so far, in order of first appearance (codes index it).
    pub names: Vec<String>,
    /// `rows × fields` probabilities of the fields asked for, in that order; with a
    /// selection, one row per selected row.
    pub probs: Array2<f32>,
    /// The part's selected rows (offsets from `first_row`), when the pass selected rows.
    pub selected: Option<Vec<usize>>,
}

impl StreamPart {
    /// Rows in the part.
    pub fn rows(&self) -> usize {
        self.labels.len()
    }

    /// The id column's text reader, made once per part ([`StreamPart::id`] reads it).
    pub(crate) fn id_text(&self) -> Option<Text<'_>> {
        self.ids.as_deref().and_then(Text::of)
    }

    /// The id of row `i` of the part, through `text` (from [`StreamPart::id_text`]); empty
    /// without an id column.
    pub(crate) fn id(text: &Option<Text>, i: usize) -> String {
        let mut cell = Vec::new();
        if let Some(text) = text {
            text.cell(i, &mut cell);
        }
        String::from_utf8_lossy(&cell).into_owned()
    }

    /// The trusted label of row `i` of the part, as a code.
    pub fn trusted_at(&self, i: usize) -> Option<u32> {
        self.trusted.get(i).copied().filter(|&c| c != NONE)
    }
}

/// A table and its probability file, opened for streaming.
pub struct TableStream<'a> {
    table_path: &'a Path,
    table: StreamFile,
    plan: ColumnPlan,
    /// `plan` without its id: ids are not parsed for every row, only for rows kept.
    role_plan: ColumnPlan,
    probs_path: &'a Path,
    probs: StreamFile,
    probs_header: Vec<String>,
    /// The probability file's id column.
    probs_id: Option<usize>,
    renormalize: bool,
}

impl<'a> TableStream<'a> {
    /// Opens both files (Parquet, Arrow IPC or CSV, by extension) and resolves the table's
    /// roles; feature columns are not read.
    pub fn open(
        table_path: &'a Path,
        options: &TableOptions,
        probs_path: &'a Path,
        renormalize: bool,
    ) -> Result<Self> {
        let table = StreamFile::open(table_path, options.delimiter_for(table_path))?;
        let mut plan = ColumnPlan::resolve(table_path, &table.header(), options)?;
        if !plan.annotators.is_empty() {
            return Err(Error::Usage(
                "a streamed run takes one label column, not annotators' columns".into(),
            ));
        }
        plan.numeric.clear();
        let probs = StreamFile::open(probs_path, options.delimiter_for(probs_path))?;
        let probs_header = probs.header();
        let id_names = [plan.id.map(|i| plan.header[i].as_str()), Some("id")];
        // In the table's own file the probabilities are the table's rows: no id to check.
        let probs_id = probs_header
            .iter()
            .position(|h| id_names.contains(&Some(h.as_str())))
            .filter(|_| !same_file(table_path, probs_path));
        let role_plan = ColumnPlan {
            id: None,
            ..plan.clone()
        };
        Ok(TableStream {
            table_path,
            table,
            plan,
            role_plan,
            probs_path,
            probs,
            probs_header,
            probs_id,
            renormalize,
        })
    }

    /// The table's row count, when its footer says (Parquet); a text file's is learnt
    /// by reading it.
    pub fn known_rows(&self) -> Option<usize> {
        self.table.known_rows()
    }

    /// The table's role columns.
    pub fn plan(&self) -> &ColumnPlan {
        &self.plan
    }

    /// The table's file.
    pub fn table_path(&self) -> &Path {
        self.table_path
    }

    /// The probability file.
    pub fn probs_path(&self) -> &Path {
        self.probs_path
    }

    /// The probability file's column names.
    pub fn probs_header(&self) -> &[String] {
        &self.probs_header
    }

    /// The probability file's columns that may hold a class: all but its id and, when it
    /// is the table's own file, the table's role columns.
    pub fn class_candidates(&self) -> Vec<usize> {
        let same_file = same_file(self.table_path, self.probs_path);
        let roles = text_fields(&self.plan);
        (0..self.probs_header.len())
            .filter(|&f| Some(f) != self.probs_id && !(same_file && roles.contains(&f)))
            .collect()
    }

    /// Reads every part in order with the probability columns `fields` (fields of the
    /// probability file) and gives each to `consume`; stops at the first error of either.
    ///
    /// With `select` (ascending table rows) a part's probabilities are those of its
    /// selected rows only ([`StreamPart::selected`]): a pass that needs a few rows'
    /// probabilities does not copy or check the others.
    pub fn for_each_part(
        &self,
        fields: &[usize],
        select: Option<&[usize]>,
        mut consume: impl FnMut(StreamPart) -> Result<()>,
    ) -> Result<()> {
        let (send, receive) = sync_channel::<Result<StreamPart>>(1);
        std::thread::scope(|scope| {
            let reader = scope.spawn(move || {
                let deliver = &mut |part| send.send(Ok(part)).is_ok();
                let outcome = self.produce(fields, select, deliver);
                if let Err(e) = outcome {
                    let _ = send.send(Err(e));
                }
            });
            let mut outcome = Ok(());
            for part in receive.iter() {
                outcome = part.and_then(&mut consume);
                if outcome.is_err() {
                    break;
                }
            }
            // Dropping the receiver stops the reader at its next part.
            drop(receive);
            let _ = reader.join();
            outcome
        })
    }

    /// Decodes the parts in order; `deliver` returns false when no one listens.
    fn produce(
        &self,
        fields: &[usize],
        select: Option<&[usize]>,
        deliver: &mut dyn FnMut(StreamPart) -> bool,
    ) -> Result<()> {
        let mut probs_fields: Vec<usize> = fields.to_vec();
        probs_fields.extend(self.probs_id);
        probs_fields.sort_unstable();
        probs_fields.dedup();
        let id_field: Vec<usize> = self.probs_id.into_iter().collect();
        let mut cursor = ProbCursor {
            stream: self,
            batches: self.probs.batches(&probs_fields, &id_field)?,
            fields: &probs_fields,
            wanted: fields,
            current: None,
            offset: 0,
            file_row: 0,
        };
        let mut parts = Parts {
            stream: self,
            select,
            first_row: 0,
            merger: Merger::new(self.table_path, Places::Lines, 0),
        };
        let rows = match &self.table {
            StreamFile::Columnar(table) => {
                self.produce_columnar(table, &mut parts, &mut cursor, deliver)?
            }
            StreamFile::Csv(table) => {
                parts.merger.skip(table.header_lines());
                for out in table.role_blocks(&self.plan)? {
                    let mut out = out?;
                    let ids = self.plan.id.map(|_| ids_of(&mut out));
                    let selected = parts.selected(out.rows);
                    // The table's own problems first: they are found before any
                    // probability of the block is read.
                    let rows = out.rows;
                    parts.merger.absorb(out, &self.plan)?;
                    let probs = cursor.take(rows, selected.as_deref())?;
                    let part = parts.part(rows, ids, probs, selected)?;
                    if !deliver(part) {
                        return Ok(());
                    }
                }
                Some(parts.first_row)
            }
        };
        match rows {
            Some(rows) => cursor.finish(rows),
            None => Ok(()),
        }
    }

    /// The parts of a columnar table: each part's role cells are decoded on a thread of
    /// their own while this one decodes its probabilities. The rows read, or `None` when
    /// the listener left.
    fn produce_columnar(
        &self,
        table: &ColumnarFile,
        parts: &mut Parts,
        cursor: &mut ProbCursor,
        deliver: &mut dyn FnMut(StreamPart) -> bool,
    ) -> Result<Option<usize>> {
        let mut role_fields = text_fields(&self.role_plan);
        role_fields.extend(self.plan.id);
        role_fields.sort_unstable();
        let id_column = self
            .plan
            .id
            .map(|f| role_fields.binary_search(&f).unwrap_or(0));
        // Parquet row groups are in the footer; Arrow IPC batches are learnt as they come.
        let learn = table.known_parts().is_none();
        parts.merger.cells.places = Places::Rows(if learn {
            PartMap {
                kind: table.parts.kind,
                starts: Vec::new(),
            }
        } else {
            table.parts.clone()
        });
        for batch in table.batches(&role_fields)? {
            let batch = batch?;
            if let (true, Places::Rows(map)) = (learn, &mut parts.merger.cells.places) {
                map.starts.push(parts.first_row);
            }
            let rows = batch.num_rows();
            let selected = parts.selected(rows);
            // The cursor's batch iterator cannot move between threads: the role cells go.
            let (roles, probs) = std::thread::scope(|scope| {
                let roles = scope.spawn(|| self.role_cells(&batch, &role_fields));
                let probs = cursor.take(rows, selected.as_deref());
                let roles = roles
                    .join()
                    .map_err(|_| Error::Internal("reading the role columns panicked".into()));
                (roles, probs)
            });
            let (roles, probs) = (roles?, probs?);
            parts.merger.absorb(roles, &self.role_plan)?;
            let ids = id_column.map(|c| batch.column(c).clone());
            let part = parts.part(rows, ids, probs, selected)?;
            if !deliver(part) {
                return Ok(None);
            }
        }
        Ok(Some(parts.first_row))
    }

    /// One batch's role cells through the CSV rules.
    fn role_cells(&self, batch: &RecordBatch, fields: &[usize]) -> super::table_chunk::ChunkOut {
        let mut parser = RowParser::new(&self.role_plan);
        // Only the roles' own columns become text: the batch also holds the id column.
        let roles = text_fields(&self.role_plan);
        let columns: Vec<usize> = roles
            .iter()
            .map(|f| fields.binary_search(f).unwrap_or(0))
            .collect();
        let fatal = roles_at(batch, &roles, &columns, &mut parser, 0).err();
        parser.finish(
            Vec::new(),
            Vec::<SlotStats>::new(),
            batch.num_rows() as u64,
            fatal,
        )
    }

    /// Refuses probabilities whose ids differ from the table's at the same row.
    fn check_ids(&self, part: &StreamPart, ids: &Option<ArrayRef>, first_row: usize) -> Result<()> {
        let (Some(mine), Some(theirs)) = (part.id_text(), ids.as_deref().and_then(Text::of)) else {
            return Ok(());
        };
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for i in 0..part.rows() {
            mine.cell(i, &mut a);
            theirs.cell(i, &mut b);
            if a != b {
                let row = first_row + i;
                let field = self.probs_id.unwrap_or(0);
                let location = self.probs_cell(row, field);
                return Err(Error::input(
                    location,
                    Problem::StreamRows {
                        detail: format!(
                            "a streamed run takes the probabilities in the table's row order, \
                             but this row's id is '{}' where the table's row {row} has '{}'",
                            String::from_utf8_lossy(&b),
                            String::from_utf8_lossy(&a)
                        ),
                    },
                ));
            }
        }
        Ok(())
    }
}

/// The parts handed out so far: where the next starts, and the label codes met.
struct Parts<'s, 'a> {
    stream: &'s TableStream<'a>,
    select: Option<&'s [usize]>,
    first_row: usize,
    merger: Merger<'s>,
}

impl Parts<'_, '_> {
    /// The selected rows among the next `rows` (offsets from the part's first row).
    fn selected(&self, rows: usize) -> Option<Vec<usize>> {
        let first_row = self.first_row;
        self.select.map(|all| {
            let from = all.partition_point(|&r| r < first_row);
            let to = all.partition_point(|&r| r < first_row + rows);
            all[from..to].iter().map(|&r| r - first_row).collect()
        })
    }

    /// The next part, of `rows` rows whose role cells the merger has just absorbed.
    fn part(
        &mut self,
        rows: usize,
        ids: Option<ArrayRef>,
        probs: ProbRows,
        selected: Option<Vec<usize>>,
    ) -> Result<StreamPart> {
        let cells = &mut self.merger.cells;
        let part = StreamPart {
            first_row: self.first_row,
            labels: std::mem::take(&mut cells.labels),
            trusted: std::mem::take(&mut cells.trusted),
            origins: std::mem::take(&mut cells.origins),
            ids,
            names: cells.names.clone(),
            probs: probs.values,
            selected,
        };
        cells.row_lines.clear();
        cells.sources.clear();
        cells.annotations.clear();
        self.stream.check_ids(&part, &probs.ids, self.first_row)?;
        self.first_row += rows;
        Ok(part)
    }
}

/// Probability rows of one part, with their ids when the file has an id column.
struct ProbRows {
    values: Array2<f32>,
    /// The id column's slices over the part, joined.
    ids: Option<ArrayRef>,
}

/// The probability file read forward, a part's rows at a time, across its own batches.
struct ProbCursor<'s, 'a> {
    stream: &'s TableStream<'a>,
    batches: Box<dyn Iterator<Item = Result<RecordBatch>> + 's>,
    /// The fields read (ascending): the classes asked for and the id.
    fields: &'s [usize],
    /// The class fields asked for, in the order the caller wants them.
    wanted: &'s [usize],
    current: Option<RecordBatch>,
    /// Rows of `current` already taken.
    offset: usize,
    /// File rows taken so far.
    file_row: usize,
}

impl ProbCursor<'_, '_> {
    /// The next `rows` rows; with `keep` (ascending offsets into them) only those rows,
    /// unchecked for ids (a pass over every row checks them).
    fn take(&mut self, rows: usize, keep: Option<&[usize]>) -> Result<ProbRows> {
        let width = self.wanted.len();
        let out_rows = keep.map_or(rows, <[usize]>::len);
        let mut out = ProbRows {
            values: Array2::zeros((out_rows, width)),
            ids: None,
        };
        let mut id_pieces: Vec<ArrayRef> = Vec::new();
        let mut placed = 0;
        let mut done = 0;
        while done < rows {
            let batch = match &self.current {
                Some(b) if self.offset < b.num_rows() => b.clone(),
                _ => match self.batches.next() {
                    Some(b) => {
                        self.current = Some(b?);
                        self.offset = 0;
                        continue;
                    }
                    None => return Err(self.too_short(self.file_row)),
                },
            };
            let n = (batch.num_rows() - self.offset).min(rows - done);
            let slice = batch.slice(self.offset, n);
            let first = self.file_row;
            match keep {
                None => {
                    self.put(&slice, &mut out, placed, &|i| first + i)?;
                    placed += n;
                    if let Some(field) = self.stream.probs_id {
                        let c = self.fields.binary_search(&field).unwrap_or(0);
                        id_pieces.push(slice.column(c).clone());
                    }
                }
                Some(keep) => {
                    let from = keep.partition_point(|&r| r < done);
                    let to = keep.partition_point(|&r| r < done + n);
                    // A pass that reads no probability column (a review's lookup)
                    // has nothing to take.
                    if from < to && slice.num_columns() == 0 {
                        placed += to - from;
                    } else if from < to {
                        let offsets: Vec<u32> =
                            keep[from..to].iter().map(|&r| (r - done) as u32).collect();
                        let taken = arrow_select::take::take_record_batch(
                            &slice,
                            &arrow_array::UInt32Array::from(offsets.clone()),
                        )
                        .map_err(|e| Error::Internal(format!("taking sampled rows: {e}")))?;
                        let row_of = |i: usize| first + offsets[i] as usize;
                        self.put(&taken, &mut out, placed, &row_of)?;
                        placed += to - from;
                    }
                }
            }
            self.offset += n;
            self.file_row += n;
            done += n;
        }
        let first = self.file_row - rows;
        if out.values.ncols() == 0 {
            return Ok(out);
        }
        match keep {
            None => self.check_sums(&mut out.values, &|i| first + i)?,
            Some(keep) => self.check_sums(&mut out.values, &|i| first + keep[i])?,
        }
        if !id_pieces.is_empty() {
            let pieces: Vec<&dyn Array> = id_pieces.iter().map(|a| a.as_ref()).collect();
            out.ids = Some(arrow_select::concat::concat(&pieces).map_err(|e| {
                Error::Internal(format!("joining the probabilities' id slices: {e}"))
            })?);
        }
        Ok(out)
    }

    /// Copies `slice` into rows `at..` of `out`.
    fn put(
        &self,
        slice: &RecordBatch,
        out: &mut ProbRows,
        at: usize,
        row_of: &dyn Fn(usize) -> usize,
    ) -> Result<()> {
        let stream = self.stream;
        let columns: Vec<ArrayRef> = self
            .wanted
            .iter()
            .map(|&field| {
                let c = self.fields.binary_search(&field).unwrap_or(0);
                slice.column(c).clone()
            })
            .collect();
        let wanted = self.wanted;
        put_prob_columns(
            &columns,
            &mut out.values,
            at,
            &|i, j| stream.probs_cell(row_of(i), wanted[j]),
            &|j| {
                Location::file(stream.probs_path)
                    .at_column(wanted[j], &stream.probs_header[wanted[j]])
            },
        )
    }

    /// Refuses (or, with `--renormalize`, rescales) rows that do not sum to 1.
    fn check_sums(&self, values: &mut Array2<f32>, row_of: &dyn Fn(usize) -> usize) -> Result<()> {
        let stream = self.stream;
        check_row_sums(values, stream.renormalize, &|i| stream.probs_row(row_of(i)))
    }

    /// Refuses a probability file with rows left over after the table's last row.
    fn finish(mut self, table_rows: usize) -> Result<()> {
        let left = self
            .current
            .as_ref()
            .map_or(0, |b| b.num_rows() - self.offset.min(b.num_rows()));
        let more = self.batches.next().transpose()?.map_or(0, |b| b.num_rows());
        if left + more > 0 {
            return Err(Error::input(
                self.stream.probs_row(table_rows),
                Problem::StreamRows {
                    detail: format!(
                        "the probabilities have more rows than the table's {table_rows}"
                    ),
                },
            ));
        }
        Ok(())
    }

    fn too_short(&self, rows: usize) -> Error {
        Error::input(
            Location::file(self.stream.probs_path),
            Problem::StreamRows {
                detail: format!("the probabilities end after {rows} rows, before the table does"),
            },
        )
    }
}

impl TableStream<'_> {
    /// The location of a cell of the probability file.
    fn probs_cell(&self, row: usize, field: usize) -> Location {
        self.probs_row(row)
            .at_column(field, &self.probs_header[field])
    }

    /// The location of a row of the probability file.
    fn probs_row(&self, row: usize) -> Location {
        self.probs.locate(self.probs_path, row)
    }
}

/// Copies probability columns (one per class, in class order) into rows `at..` of
/// `values`: the rules every streamed probability reader applies. `cell` locates row `i`
/// of the columns in column `j`, `column` a whole column.
pub(crate) fn put_prob_columns(
    columns: &[ArrayRef],
    values: &mut Array2<f32>,
    at: usize,
    cell: &dyn Fn(usize, usize) -> Location,
    column: &dyn Fn(usize) -> Location,
) -> Result<()> {
    let width = values.ncols();
    for (j, array) in columns.iter().enumerate() {
        if let Some(a) = array.as_primitive_opt::<Float32Type>() {
            if a.null_count() == 0 && put_f32(a.values(), values, at, j, width) {
                continue;
            }
        }
        let mut bad = None;
        let nulls = for_each_number(array.as_ref(), |i, v| match checked(v, || v.to_string()) {
            Ok(p) => values[(at + i, j)] = p,
            Err(problem) => {
                bad.get_or_insert((i, problem));
            }
        });
        match nulls {
            None => {
                let problem = Problem::ColumnType {
                    found: type_words(array.as_ref()),
                    expected: "probabilities must be numbers".into(),
                };
                return Err(Error::input(column(j), problem));
            }
            Some(Some(nulls)) if nulls.null_count() > 0 => {
                let i = (0..array.len()).find(|&i| nulls.is_null(i)).unwrap_or(0);
                let problem = Problem::NullProbabilities {
                    count: nulls.null_count(),
                };
                return Err(Error::input(cell(i, j), problem));
            }
            _ => {}
        }
        if let Some((i, problem)) = bad {
            return Err(Error::input(cell(i, j), problem));
        }
    }
    Ok(())
}

/// Refuses (or, with `renormalize`, rescales) rows that do not sum to 1; `row` locates
/// row `i` of `values`.
pub(crate) fn check_row_sums(
    values: &mut Array2<f32>,
    renormalize: bool,
    row: &dyn Fn(usize) -> Location,
) -> Result<()> {
    for (i, mut values) in values.rows_mut().into_iter().enumerate() {
        let sum: f64 = values.iter().map(|&v| v as f64).sum();
        if (sum - 1.0).abs() <= ROW_SUM_TOLERANCE {
            continue;
        }
        if !renormalize {
            return Err(Error::input(row(i), Problem::ProbRowSum { sum }));
        }
        if sum <= 0.0 {
            return Err(Error::input(row(i), Problem::ProbZeroRow));
        }
        values.mapv_inplace(|v| (v as f64 / sum) as f32);
    }
    Ok(())
}

/// Float32 probabilities without nulls into column `j` of `values` from row `at` on:
/// the common case, without a call per value. False (nothing to trust) when a value is
/// outside [0, 1 + 1e-6]: the general path then finds and reports it.
fn put_f32(column: &[f32], values: &mut Array2<f32>, at: usize, j: usize, width: usize) -> bool {
    if !column
        .iter()
        .all(|&v| (0.0..=1.0 + 1e-6).contains(&f64::from(v)))
    {
        return false;
    }
    let Some(flat) = values.as_slice_mut() else {
        return false;
    };
    for (out, &v) in flat[at * width + j..].iter_mut().step_by(width).zip(column) {
        *out = v.min(1.0);
    }
    true
}

/// True when both paths name one file.
fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}
