//! The table CSV read in one pass: a reader thread cuts the file into blocks on record
//! boundaries ([`super::csv_blocks`]), the blocks parse on the rayon pool
//! ([`super::table_chunk`]) and their outputs merge in file order, the three stages
//! overlapping. What comes out is the table's cells as read; [`crate::data::table`] makes
//! the checked `Dataset` of them.

use rustc_hash::FxHashMap as HashMap;
use std::io::Read;
use std::path::Path;
use std::sync::mpsc::{Receiver, Sender};

use rayon::prelude::*;

use super::csv_blocks::{BlockError, Blocks};
use super::csv_source::{strip_bom, CsvFormat};
use super::table_chunk::{parse_block, ChunkOut, SlotStats, NONE};
use crate::data::origin::Origin;
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::data::table::StringColumn;
use crate::error::{Error, Location, Problem, Result};

/// Target size of one parsed block. Large enough to amortise thread hand-off, small
/// enough that a batch of blocks is a few tens of MiB at most.
pub(crate) const BLOCK_BYTES: usize = 4 << 20;
/// A single record larger than this is refused instead of growing memory without bound.
const MAX_RECORD_BYTES: usize = 64 << 20;

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
    /// File line of each row (only kept when there is an id column).
    pub(crate) row_lines: Vec<u64>,
    /// What each numeric column looked like.
    pub(crate) slots: Vec<SlotStats>,
}

/// Reads the whole table from `reader` in blocks of about `block_bytes`; `size_hint` (the
/// file's length, when known) sizes the value buffer once. Returns the column plan
/// resolved from the header and the cells.
pub(crate) fn read_table<R: Read + Send>(
    reader: R,
    path: &Path,
    options: &TableOptions,
    size_hint: Option<u64>,
    block_bytes: usize,
) -> Result<(ColumnPlan, Merged)> {
    TableReader::new(path, options, size_hint, block_bytes).run(reader)
}

/// Accumulates parsed blocks in file order.
struct TableReader<'a> {
    path: &'a Path,
    options: &'a TableOptions,
    delimiter: u8,
    size_hint: Option<u64>,
    block_bytes: usize,
    lines_done: u64,
    /// Label name → its code in `cells.names`.
    codes: HashMap<String, u32>,
    /// Source name → its code in `cells.source_names`.
    source_codes: HashMap<String, u32>,
    cells: Merged,
}

impl<'a> TableReader<'a> {
    fn new(
        path: &'a Path,
        options: &'a TableOptions,
        size_hint: Option<u64>,
        block_bytes: usize,
    ) -> Self {
        TableReader {
            block_bytes,
            path,
            options,
            delimiter: options.delimiter_for(path),
            size_hint,
            lines_done: 0,
            codes: HashMap::default(),
            source_codes: HashMap::default(),
            cells: Merged::default(),
        }
    }

    /// Reads blocks on a helper thread while the blocks already read are parsed on the
    /// rayon pool, and merges each batch while the next one parses: three stages that
    /// overlap, so the one pass over the file keeps both cores busy.
    fn run<R: Read + Send>(mut self, reader: R) -> Result<(ColumnPlan, Merged)> {
        let mut blocks = Blocks::new(reader, self.delimiter, self.block_bytes, MAX_RECORD_BYTES);
        let Some(first) = self.next_block(&mut blocks)? else {
            return Err(self.whole_file(Problem::Empty));
        };
        let (plan, first_data) = self.header(&first)?;
        drop(first);
        self.cells.slots = vec![SlotStats::default(); plan.numeric.len()];
        let per_batch = 2 * rayon::current_num_threads().max(1);
        let (sender, receiver) = std::sync::mpsc::sync_channel(per_batch);
        let (spare_sender, spares) = std::sync::mpsc::channel::<Vec<u8>>();
        std::thread::scope(|scope| {
            scope.spawn(move || {
                while let Some(block) = blocks.next_block().transpose() {
                    let stop = block.is_err();
                    if sender.send(block).is_err() || stop {
                        break;
                    }
                    spares.try_iter().for_each(|spare| blocks.recycle(spare));
                }
            });
            self.parse_batches(&plan, first_data, &receiver, &spare_sender)
        })?;
        Ok((plan, self.cells))
    }

    fn parse_batches(
        &mut self,
        plan: &ColumnPlan,
        first_data: Vec<u8>,
        receiver: &Receiver<Result<Vec<u8>, BlockError>>,
        spares: &Sender<Vec<u8>>,
    ) -> Result<()> {
        let per_batch = 2 * rayon::current_num_threads().max(1);
        let delimiter = self.delimiter;
        let mut batch = vec![first_data];
        let mut parsed: Vec<ChunkOut> = Vec::new();
        loop {
            let mut ended = None;
            while batch.len() < per_batch {
                match receiver.recv() {
                    Ok(Ok(block)) => batch.push(block),
                    Ok(Err(e)) => {
                        ended = Some(e);
                        break;
                    }
                    Err(_) => break,
                }
            }
            if batch.is_empty() && parsed.is_empty() {
                return ended.map_or(Ok(()), |e| Err(self.block_error(e)));
            }
            let (outs, merged) = rayon::join(
                || {
                    batch
                        .par_iter()
                        .map(|b| parse_block(b, delimiter, plan))
                        .collect::<Vec<_>>()
                },
                || parsed.drain(..).try_for_each(|out| self.absorb(out, plan)),
            );
            merged?;
            for block in batch.drain(..) {
                let _ = spares.send(block); // The reader may have finished; then the block is freed.
            }
            parsed = outs;
            if let Some(e) = ended {
                parsed
                    .drain(..)
                    .try_for_each(|out| self.absorb(out, plan))?;
                return Err(self.block_error(e));
            }
        }
    }

    fn next_block<R: Read>(&self, blocks: &mut Blocks<R>) -> Result<Option<Vec<u8>>> {
        blocks.next_block().map_err(|e| self.block_error(e))
    }

    fn block_error(&self, error: BlockError) -> Error {
        match error {
            BlockError::Io(source) => Error::Read {
                path: self.path.to_path_buf(),
                source,
            },
            BlockError::RecordTooLarge(limit) => {
                let detail = format!(
                    "a single row is longer than {} MiB (a quote that never closes?)",
                    limit >> 20
                );
                self.at_line(self.lines_done + 1, Problem::Syntax { detail })
            }
        }
    }

    /// Reads the header from the first block and returns the plan and the rest of it.
    fn header(&mut self, first: &[u8]) -> Result<(ColumnPlan, Vec<u8>)> {
        let first = strip_bom(first);
        let mut reader = CsvFormat {
            delimiter: self.delimiter,
        }
        .slice_reader(first);
        let mut record = csv::ByteRecord::new();
        match reader.read_byte_record(&mut record) {
            Ok(true) => {}
            Ok(false) => return Err(self.whole_file(Problem::Empty)),
            Err(e) => {
                return Err(self.at_line(
                    1,
                    Problem::Syntax {
                        detail: e.to_string(),
                    },
                ))
            }
        }
        let mut header = Vec::with_capacity(record.len());
        for (i, cell) in record.iter().enumerate() {
            let name = std::str::from_utf8(cell).map_err(|_| {
                Error::input(
                    Location::line(self.path, 1).at_column(i, &format!("#{}", i + 1)),
                    Problem::InvalidUtf8,
                )
            })?;
            header.push(name.trim().to_string());
        }
        let plan = ColumnPlan::resolve(self.path, &header, self.options)?;
        let next = reader.position().clone();
        self.lines_done = next.line() - 1;
        let rest = first[next.byte() as usize..].to_vec();
        Ok((plan, rest))
    }

    fn absorb(&mut self, out: ChunkOut, plan: &ColumnPlan) -> Result<()> {
        let base = self.lines_done;
        if let Some((line, field, problem)) = out.fatal {
            let mut location = Location::line(self.path, base + line);
            if let Some(field) = field {
                location = location.at_column(field, &plan.header[field]);
            }
            return Err(Error::input(location, problem));
        }
        if self.cells.values.capacity() == 0 {
            self.reserve(&out, plan);
        }
        let remap: Vec<u32> = out
            .names
            .into_iter()
            .map(|name| self.global_code(name))
            .collect();
        self.cells
            .labels
            .extend(out.labels.iter().map(|&c| remap[c as usize]));
        let optional = |c: u32| if c == NONE { NONE } else { remap[c as usize] };
        self.cells
            .trusted
            .extend(out.trusted.iter().map(|&c| optional(c)));
        self.cells
            .annotations
            .extend(out.annotations.iter().map(|&c| optional(c)));
        self.cells.origins.extend_from_slice(&out.origins);
        let source_remap: Vec<u32> = out
            .source_names
            .into_iter()
            .map(|name| self.global_source_code(name))
            .collect();
        self.cells
            .sources
            .extend(out.sources.iter().map(|&c| source_remap[c as usize]));
        self.cells.ids.append(&out.ids, &out.id_ends);
        self.cells
            .row_lines
            .extend(out.row_lines.iter().map(|l| l + base));
        self.cells.values.extend_from_slice(&out.values);
        for (mine, theirs) in self.cells.slots.iter_mut().zip(&out.slots) {
            mine.absorb(theirs, base);
        }
        self.cells.rows += out.rows;
        self.lines_done += out.newlines;
        Ok(())
    }

    /// Reserves the value buffer from the first block's density and the file size, so the
    /// big array grows once instead of doubling (which would briefly need 1.5–2× memory).
    /// The size is only a hint (the file may change while it is read, a stream may not
    /// know its length): when the reservation fails the buffer just grows as it fills.
    fn reserve(&mut self, out: &ChunkOut, plan: &ColumnPlan) {
        let (Some(size), true) = (self.size_hint, out.rows > 0) else {
            return;
        };
        let bytes_per_row = (out.bytes as f64 / out.rows as f64).max(2.0);
        let est_rows = (size as f64 / bytes_per_row * 1.02) as usize + 16;
        let _ = self
            .cells
            .values
            .try_reserve_exact(est_rows.saturating_mul(plan.numeric.len()));
    }

    fn global_code(&mut self, name: String) -> u32 {
        if let Some(&code) = self.codes.get(&name) {
            return code;
        }
        let code = self.cells.names.len() as u32;
        self.codes.insert(name.clone(), code);
        self.cells.names.push(name);
        code
    }

    fn global_source_code(&mut self, name: String) -> u32 {
        if let Some(&code) = self.source_codes.get(&name) {
            return code;
        }
        let code = self.cells.source_names.len() as u32;
        self.source_codes.insert(name.clone(), code);
        self.cells.source_names.push(name);
        code
    }

    fn whole_file(&self, problem: Problem) -> Error {
        Error::input(Location::file(self.path), problem)
    }

    fn at_line(&self, line: u64, problem: Problem) -> Error {
        Error::input(Location::line(self.path, line), problem)
    }
}
