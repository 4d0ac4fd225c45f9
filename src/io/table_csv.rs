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
use super::placed_values::PlacedValues;
use super::table_chunk::{newlines, parse_block_into, row_capacity, ChunkOut};
use super::table_merge::{Merged, Merger, Places};
use crate::data::roles::{ColumnPlan, TableOptions};
use crate::error::{Error, Location, Problem, Result};

/// Target size of one parsed block. Small enough that a block and the values it parses
/// stay in a core's 2 MiB L2 cache while it parses, large enough to amortise the thread
/// hand-off. Measured (2026-12-05, 2 cores, `flipmend inspect` on the 1,000,000 × 32
/// file of `benches/vs_pandas_load.sh`, binaries alternated, 5 runs each, median wall
/// and peak RSS): 4 MiB 0.48 s 379 MB, 2 MiB 0.44 s 345 MB, 1 MiB 0.43 s 333 MB,
/// 512 KiB 0.44 s 326 MB, 256 KiB 0.43 s 323 MB.
pub(crate) const BLOCK_BYTES: usize = 1 << 20;
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
/// The size is only a hint (the file may change while it is read); an estimate that
/// falls short grows the array.
fn estimated_rows(size: u64, first_bytes: usize, first_rows: usize) -> usize {
    let bytes_per_row = (first_bytes as f64 / first_rows.max(1) as f64).max(2.0);
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
        })
        .and_then(|values| {
            let mut merger = self.merger.ok_or_else(no_header)?;
            merger.cells.values = values;
            Ok((plan, merger.cells))
        })
    }

    /// Parses the blocks a batch at a time, each straight into its slice of the final
    /// value array ([`PlacedValues`]), while the batch before is merged; returns the
    /// values.
    fn parse_batches(
        &mut self,
        plan: &ColumnPlan,
        first_data: Vec<u8>,
        receiver: &Receiver<Result<Vec<u8>, BlockError>>,
        spares: &Sender<Vec<u8>>,
    ) -> Result<Vec<f64>> {
        let per_batch = 2 * rayon::current_num_threads().max(1);
        let delimiter = self.delimiter;
        let mut batch = vec![first_data];
        let mut parsed: Vec<ChunkOut> = Vec::new();
        let mut placed = PlacedValues::new(plan.numeric.len());
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
                return match ended {
                    Some(e) => Err(self.block_error(e)),
                    None => Ok(placed.finish()),
                };
            }
            let lines: Vec<u64> = batch.par_iter().map(|b| newlines(b)).collect();
            let capacities: Vec<usize> = batch
                .iter()
                .zip(&lines)
                .map(|(b, &n)| row_capacity(b, n))
                .collect();
            if let (Some(size), Some(first)) = (self.size_hint, batch.first()) {
                placed.reserve_rows(estimated_rows(size, first.len(), capacities[0]));
            }
            let dests = placed.slices(&capacities);
            let (mut outs, merged) = rayon::join(
                || {
                    batch
                        .par_iter()
                        .zip(dests)
                        .zip(&lines)
                        .map(|((b, dest), &n)| parse_block_into(b, n, delimiter, plan, dest))
                        .collect::<Vec<_>>()
                },
                || parsed.drain(..).try_for_each(|out| self.absorb(out, plan)),
            );
            merged?;
            let rows: Vec<usize> = outs.iter().map(|out| out.rows).collect();
            let spills = outs.iter_mut().map(|out| std::mem::take(&mut out.values));
            placed.settle(&capacities, &rows, spills.collect());
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

    /// Merges a parsed block's cells but its values (which [`PlacedValues`] holds).
    fn absorb(&mut self, out: ChunkOut, plan: &ColumnPlan) -> Result<()> {
        let merger = self.merger.as_mut().ok_or_else(no_header)?;
        merger.absorb(out, plan)
    }

    fn whole_file(&self, problem: Problem) -> Error {
        Error::input(Location::file(self.path), problem)
    }

    fn at_line(&self, line: u64, problem: Problem) -> Error {
        Error::input(Location::line(self.path, line), problem)
    }
}
