//! A CSV or TSV table (or probability file) read block by block for runs over tables too
//! large to hold. The table's role columns go through the in-memory reader's own block
//! parser ([`super::table_chunk`]), so a streamed run reads every cell by the same rules
//! and reports problems at the same lines; a probability file's class columns become
//! Arrow record batches of numbers, so the streamed pass checks them exactly as it checks
//! a columnar file's ([`super::stream`]).

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use arrow_array::builder::{Float64Builder, StringBuilder};
use arrow_array::{ArrayRef, RecordBatch, RecordBatchOptions, StringArray};
use arrow_schema::{DataType, Field, Schema};

use super::csv_blocks::Blocks;
use super::csv_source::{header_names, open, strip_bom, CsvFormat};
use super::number::parse_f64;
use super::table_chunk::{parse_block, plain_lines, ragged, ChunkOut, LineCounter};
use super::table_csv::MAX_RECORD_BYTES;
use crate::data::roles::ColumnPlan;
use crate::error::{shorten, Error, Location, Problem, Result};

/// Block size of the streaming passes: kept at the size the streaming benches were
/// measured with when the in-memory reader's blocks shrank to 1 MiB (not re-measured).
const BLOCK_BYTES: usize = 4 << 20;

/// Irregular places (blank lines, records over several lines) remembered to turn a row
/// number back into its line; past this many a file's rows are reported by number, so
/// the memory a pathological file takes stays bounded.
const MAX_JUMPS: usize = 1 << 20;

/// A data row and its line, where the rows stop following the lines one to one.
type Jump = (usize, u64);

/// The breaks learnt so far, shared with the thread that makes the batches; `None` once
/// there were too many.
type Jumps = Arc<Mutex<Option<Vec<Jump>>>>;

/// A delimited text file opened for streaming: its header, and where its data starts.
#[derive(Clone)]
pub(crate) struct CsvFile {
    path: PathBuf,
    delimiter: u8,
    /// Column names as read, trimmed.
    header: Vec<String>,
    /// Byte offset of the first data record (after the byte-order mark and the header).
    data_start: u64,
    /// Physical lines up to the end of the header.
    header_lines: u64,
    /// Where rows stop following lines one to one: (first row, its line) at each break,
    /// learnt as the probability batches are made; `None` once there were too many.
    jumps: Jumps,
}

impl CsvFile {
    /// Opens `path` and reads its header.
    pub(crate) fn open(path: &Path, delimiter: u8) -> Result<Self> {
        let mut start = Vec::with_capacity(3);
        let mut file = open(path)?;
        (&mut file)
            .take(3)
            .read_to_end(&mut start)
            .map_err(|e| read_error(path, e))?;
        let bom = (start.len() - strip_bom(&start).len()) as u64;
        file.seek(SeekFrom::Start(0))
            .map_err(|e| read_error(path, e))?;
        let mut reader = CsvFormat { delimiter }.reader(std::io::BufReader::new(file));
        let mut record = csv::ByteRecord::new();
        match reader.read_byte_record(&mut record) {
            Ok(true) => {}
            Ok(false) => return Err(Error::input(Location::file(path), Problem::Empty)),
            Err(e) => {
                let detail = e.to_string();
                return Err(Error::input(
                    Location::line(path, 1),
                    Problem::Syntax { detail },
                ));
            }
        }
        let header = header_names(&record, path)?;
        let next = reader.position();
        Ok(CsvFile {
            path: path.to_path_buf(),
            delimiter,
            header,
            data_start: bom + next.byte(),
            header_lines: next.line() - 1,
            jumps: Arc::new(Mutex::new(Some(Vec::new()))),
        })
    }

    /// Column names in file order.
    pub(crate) fn header(&self) -> &[String] {
        &self.header
    }

    /// Physical lines before the first data record.
    pub(crate) fn header_lines(&self) -> u64 {
        self.header_lines
    }

    /// The data records in blocks of whole records.
    fn blocks(&self) -> Result<Blocks<File>> {
        let mut file = open(&self.path)?;
        file.seek(SeekFrom::Start(self.data_start))
            .map_err(|e| read_error(&self.path, e))?;
        Ok(Blocks::new(
            file,
            self.delimiter,
            BLOCK_BYTES,
            MAX_RECORD_BYTES,
        ))
    }

    /// The table's role cells block by block, parsed under `plan` by the in-memory
    /// reader's parser; line numbers inside are block-local, as that reader's are.
    pub(crate) fn role_blocks<'s>(
        &'s self,
        plan: &'s ColumnPlan,
    ) -> Result<impl Iterator<Item = Result<ChunkOut>> + 's> {
        let mut blocks = self.blocks()?;
        let mut lines_before = self.header_lines;
        Ok(std::iter::from_fn(move || {
            let block = match blocks.next_block() {
                Ok(block) => block?,
                Err(e) => return Some(Err(e.located(&self.path, lines_before + 1))),
            };
            let out = parse_block(&block, self.delimiter, plan);
            lines_before += out.newlines;
            blocks.recycle(block);
            Some(Ok(out))
        }))
    }

    /// Every data record in order as record batches holding the columns `fields`
    /// (ascending): `text` fields as strings, the others as numbers, a cell that is not
    /// one refused at its line and column (as the in-memory probability reader does).
    ///
    /// The batches are made on a thread of their own, one block ahead, so that parsing
    /// them overlaps the caller's work on the table's blocks (both cores busy); the thread
    /// stops when the iterator is dropped.
    pub(crate) fn batches(
        &self,
        fields: &[usize],
        text: &[usize],
    ) -> Result<impl Iterator<Item = Result<RecordBatch>>> {
        let mut blocks = self.blocks()?;
        let me = self.clone();
        let (fields, text) = (fields.to_vec(), text.to_vec());
        let (send, receive) = std::sync::mpsc::sync_channel(1);
        std::thread::spawn(move || {
            let schema = me.schema(&fields, &text);
            let mut cursor = Cursor {
                line: me.header_lines,
                row: 0,
                regular_to: (0, me.header_lines + 1),
            };
            loop {
                let batch = match blocks.next_block() {
                    Ok(None) => return,
                    Ok(Some(block)) => {
                        let batch = me.batch(&block, &fields, &text, &schema, &mut cursor);
                        blocks.recycle(block);
                        batch
                    }
                    Err(e) => Err(e.located(&me.path, cursor.line + 1)),
                };
                let failed = batch.is_err();
                if send.send(batch).is_err() || failed {
                    return;
                }
            }
        });
        Ok(receive.into_iter())
    }

    /// The batches' schema: `text` fields as strings, the other `fields` as numbers.
    fn schema(&self, fields: &[usize], text: &[usize]) -> Arc<Schema> {
        let field = |f: usize| {
            let kind = if text.contains(&f) {
                DataType::Utf8
            } else {
                DataType::Float64
            };
            Field::new(self.header[f].clone(), kind, false)
        };
        Arc::new(Schema::new(
            fields.iter().map(|&f| field(f)).collect::<Vec<_>>(),
        ))
    }

    /// One block's records as a batch. The block is split on newlines and delimiters
    /// directly ([`plain_lines`], as the table's block parser does); a block with quotes
    /// the plain split cannot read goes through the `csv` crate. Both skip blank lines,
    /// as the in-memory reader does.
    fn batch(
        &self,
        block: &[u8],
        fields: &[usize],
        text: &[usize],
        schema: &Arc<Schema>,
        cursor: &mut Cursor,
    ) -> Result<RecordBatch> {
        let (before, jumps_before) = (cursor.clone(), self.jump_count());
        let quoted = memchr::memchr(b'"', block).is_some();
        let mut rows = BatchRows::new(self, fields, text, cursor);
        if !rows.plain(block, quoted)? {
            // A quote the plain split cannot read: the block again, by the `csv` crate.
            drop(rows);
            *cursor = before;
            self.forget_jumps(jumps_before);
            rows = BatchRows::new(self, fields, text, cursor);
            rows.quoted(block)?;
        }
        let count = rows.count;
        let arrays: Vec<ArrayRef> = rows.columns.into_iter().map(Column::finish).collect();
        cursor.line += memchr::memchr_iter(b'\n', block).count() as u64;
        let options = RecordBatchOptions::new().with_row_count(Some(count));
        RecordBatch::try_new_with_options(schema.clone(), arrays, &options)
            .map_err(|e| Error::Internal(format!("a CSV block as a record batch: {e}")))
    }

    /// Breaks remembered so far.
    fn jump_count(&self) -> usize {
        let jumps = self.jumps.lock();
        jumps.map_or(0, |j| j.as_ref().map_or(0, Vec::len))
    }

    /// Forgets the breaks after the first `keep` (those of a block read again).
    fn forget_jumps(&self, keep: usize) {
        if let Ok(mut jumps) = self.jumps.lock() {
            if let Some(j) = jumps.as_mut() {
                j.truncate(keep);
            }
        }
    }

    /// Records that row `cursor.row` sits on `line`, remembering a break in the rows'
    /// one-line-each run.
    fn note_line(&self, cursor: &mut Cursor, line: u64) {
        let (row0, line0) = cursor.regular_to;
        if line != line0 + (cursor.row - row0) as u64 {
            cursor.regular_to = (cursor.row, line);
            if let Ok(mut jumps) = self.jumps.lock() {
                let full = jumps.as_ref().is_some_and(|j| j.len() >= MAX_JUMPS);
                match jumps.as_mut() {
                    Some(_) if full => *jumps = None,
                    Some(j) => j.push((cursor.row, line)),
                    None => {}
                }
            }
        }
        cursor.row += 1;
    }

    /// Where data row `row` (0-based) is: its line, when the batches read so far place it.
    pub(crate) fn locate(&self, row: usize) -> Location {
        let Ok(jumps) = self.jumps.lock() else {
            return Location::row(&self.path, row);
        };
        let Some(jumps) = jumps.as_ref() else {
            return Location::row(&self.path, row);
        };
        let at = jumps.partition_point(|&(r, _)| r <= row);
        let (row0, line0) = match at {
            0 => (0, self.header_lines + 1),
            i => jumps[i - 1],
        };
        Location::line(&self.path, line0 + (row - row0) as u64)
    }

    fn cell(&self, line: u64, field: usize) -> Location {
        Location::line(&self.path, line).at_column(field, &self.header[field])
    }
}

/// Where the batches stand: lines and rows read, and the start of the current run of
/// rows that take one line each.
#[derive(Clone)]
struct Cursor {
    line: u64,
    row: usize,
    regular_to: (usize, u64),
}

/// The rows of one block being turned into a batch's columns.
struct BatchRows<'a> {
    file: &'a CsvFile,
    fields: &'a [usize],
    columns: Vec<Column>,
    cursor: &'a mut Cursor,
    /// Lines before the block.
    base: u64,
    count: usize,
    /// Field starts and ends of the current plain line.
    cuts: Vec<(usize, usize)>,
}

impl<'a> BatchRows<'a> {
    fn new(file: &'a CsvFile, fields: &'a [usize], text: &[usize], cursor: &'a mut Cursor) -> Self {
        let columns = fields
            .iter()
            .map(|f| {
                if text.contains(f) {
                    Column::Text(StringBuilder::new())
                } else {
                    Column::Number(Float64Builder::new())
                }
            })
            .collect();
        BatchRows {
            file,
            fields,
            columns,
            base: cursor.line,
            cursor,
            count: 0,
            cuts: Vec::new(),
        }
    }

    /// A block line by line ([`plain_lines`]); false (the rows so far to be dropped) at
    /// the first line whose quotes the plain split cannot read.
    fn plain(&mut self, block: &[u8], dequote: bool) -> Result<bool> {
        let delimiter = self.file.delimiter;
        let base = self.base;
        plain_lines(block, delimiter, dequote, |line, line_no| {
            let mut cuts = std::mem::take(&mut self.cuts);
            cuts.clear();
            let mut from = 0;
            for at in memchr::memchr_iter(delimiter, line) {
                cuts.push((from, at));
                from = at + 1;
            }
            cuts.push((from, line.len()));
            let outcome = self.row(cuts.len(), |f| &line[cuts[f].0..cuts[f].1], base + line_no);
            self.cuts = cuts;
            outcome
        })
    }

    /// A block with quotes, record by record through the `csv` crate.
    fn quoted(&mut self, block: &[u8]) -> Result<()> {
        let mut reader = CsvFormat {
            delimiter: self.file.delimiter,
        }
        .slice_reader(block);
        let mut record = csv::ByteRecord::new();
        let mut lines = LineCounter::default();
        loop {
            let outcome = reader.read_byte_record(&mut record);
            let at = |p: Option<&csv::Position>| p.map_or(0, csv::Position::byte);
            let line = self.base
                + match &outcome {
                    Ok(_) => lines.line_at(block, at(record.position())),
                    Err(e) => lines.line_at(block, at(e.position())),
                };
            match outcome {
                Ok(false) => return Ok(()),
                Ok(true) => self.row(record.len(), |f| &record[f], line)?,
                Err(e) => {
                    let detail = e.to_string();
                    return Err(Error::input(
                        Location::line(&self.file.path, line),
                        Problem::Syntax { detail },
                    ));
                }
            }
        }
    }

    /// One record of `count` fields (`cell(f)` is field `f`) on `line`.
    fn row<'c>(&mut self, count: usize, cell: impl Fn(usize) -> &'c [u8], line: u64) -> Result<()> {
        let file = self.file;
        if count != file.header.len() {
            let problem = ragged(file.header.len(), count);
            return Err(Error::input(Location::line(&file.path, line), problem));
        }
        for (column, &field) in self.columns.iter_mut().zip(self.fields) {
            column.push(cell(field), || file.cell(line, field))?;
        }
        file.note_line(self.cursor, line);
        self.count += 1;
        Ok(())
    }
}

/// A column of a batch being built.
enum Column {
    Text(StringBuilder),
    Number(Float64Builder),
}

impl Column {
    /// Appends one cell; a number column refuses a cell that is not one.
    fn push(&mut self, cell: &[u8], at: impl Fn() -> Location) -> Result<()> {
        match self {
            Column::Text(b) => b.append_value(String::from_utf8_lossy(cell)),
            Column::Number(b) => {
                let trimmed = cell.trim_ascii();
                match parse_f64(trimmed) {
                    Some(v) => b.append_value(v),
                    None => {
                        let value = shorten(&String::from_utf8_lossy(trimmed));
                        return Err(Error::input(at(), Problem::NotNumber { value }));
                    }
                }
            }
        }
        Ok(())
    }

    fn finish(self) -> ArrayRef {
        match self {
            Column::Text(mut b) => Arc::new(b.finish()),
            Column::Number(mut b) => Arc::new(b.finish()),
        }
    }
}

/// The ids a parsed block carries, as an Arrow column (what a columnar part gives).
pub(crate) fn ids_of(out: &mut ChunkOut) -> ArrayRef {
    let text = std::mem::take(&mut out.ids);
    let ends = std::mem::take(&mut out.id_ends);
    let mut start = 0;
    let ids = ends.iter().map(|&end| {
        let id = &text[start..end];
        start = end;
        id
    });
    Arc::new(StringArray::from_iter_values(ids))
}

fn read_error(path: &Path, source: std::io::Error) -> Error {
    Error::Read {
        path: path.to_path_buf(),
        source,
    }
}
