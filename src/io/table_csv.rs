//! The table CSV read in one pass: a reader thread cuts the file into blocks on record
//! boundaries ([`super::csv_blocks`]), the blocks parse on the rayon pool
//! ([`super::table_chunk`]) and their outputs merge in file order, the three stages
//! overlapping. What comes out is the table's cells as read; [`crate::data::table`] makes
//! the checked `Dataset` of them.

use std::io::Read;
use std::path::Path;
use std::sync::mpsc::{Receiver, Sender};

use rayon::prelude::*;

use super::csv_blocks::{BlockError, Blocks};
use super::csv_source::{header_names, strip_bom, CsvFormat};
use super::table_chunk::{parse_block, ChunkOut};
use super::table_merge::{Merged, Merger, Places};
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::error::{Error, Location, Problem, Result};

/// Target size of one parsed block. Large enough to amortise thread hand-off, small
/// enough that a batch of blocks is a few tens of MiB at most.
pub(crate) const BLOCK_BYTES: usize = 4 << 20;
/// A single record larger than this is refused instead of growing memory without bound.
pub(crate) const MAX_RECORD_BYTES: usize = 64 << 20;

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

/// The rows a file of `size` bytes holds, from the first block's density (plus 2 %).
/// The size is only a hint (the file may change while it is read).
fn estimated_rows(size: u64, first: &ChunkOut) -> usize {
    let bytes_per_row = (first.bytes as f64 / first.rows as f64).max(2.0);
    (size as f64 / bytes_per_row * 1.02) as usize + 16
}

fn no_header() -> Error {
    Error::Internal("a CSV block was merged before the header was read".into())
}

/// Accumulates parsed blocks in file order.
struct TableReader<'a> {
    path: &'a Path,
    options: &'a TableOptions,
    delimiter: u8,
    size_hint: Option<u64>,
    block_bytes: usize,
    /// Lines up to the end of the header.
    header_lines: u64,
    /// Set once the header is read (it knows the numeric columns).
    merger: Option<Merger<'a>>,
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
            header_lines: 0,
            merger: None,
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
        let mut merger = Merger::new(self.path, Places::Lines, plan.numeric.len());
        merger.skip(self.header_lines);
        self.merger = Some(merger);
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
        let merger = self.merger.ok_or_else(no_header)?;
        Ok((plan, merger.cells))
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
        let done = self.merger.as_ref().map_or(self.header_lines, Merger::done);
        error.located(self.path, done + 1)
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
        let header = header_names(&record, self.path)?;
        let plan = ColumnPlan::resolve(self.path, &header, self.options)?;
        let next = reader.position().clone();
        self.header_lines = next.line() - 1;
        let rest = first[next.byte() as usize..].to_vec();
        Ok((plan, rest))
    }

    fn absorb(&mut self, out: ChunkOut, plan: &ColumnPlan) -> Result<()> {
        let merger = self.merger.as_mut().ok_or_else(no_header)?;
        if merger.cells.values.capacity() == 0 {
            if let (Some(size), true) = (self.size_hint, out.rows > 0) {
                merger.reserve_rows(estimated_rows(size, &out), plan);
            }
        }
        merger.absorb(out, plan)
    }

    fn whole_file(&self, problem: Problem) -> Error {
        Error::input(Location::file(self.path), problem)
    }

    fn at_line(&self, line: u64, problem: Problem) -> Error {
        Error::input(Location::line(self.path, line), problem)
    }
}
