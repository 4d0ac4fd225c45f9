//! The table's numeric values written where they finally live. Before a batch of CSV
//! blocks parses, each block gets its own slice of the final row-major array, sized by
//! the block's line count (a row needs a line); the blocks parse into their slices on
//! the pool, and only when a block holds fewer rows than lines (blank lines) or more
//! (a quoted path whose records the line count did not bound) do the rows move together.
//!
//! Why, measured (2026-12-05, 2 cores): each block used to parse into a fresh vector
//! that was then appended to the array, so every value was written twice and every page
//! faulted in twice; the profile of `flipmend inspect` on the 1,000,000 × 32 file of
//! `benches/vs_pandas_load.sh` had page faults and the append's copy at about 15 % of
//! the cycles. Written in place (with 1 MiB blocks, see `table_csv::BLOCK_BYTES`), the
//! load (with the parser's sign-bit change beside it) went from a median of 0.53 s to
//! 0.42 s and its peak from 412 to 329 MiB (7 runs each, old and new binaries
//! alternated; the numeric arrays are 244 MiB).

/// A block's share of the final array, then a spill vector for rows beyond it.
pub(crate) struct RowValues<'v> {
    dest: &'v mut [f64],
    /// Values written: the first `dest.len()` in `dest`, the rest in `spill`.
    len: usize,
    spill: Vec<f64>,
}

impl<'v> RowValues<'v> {
    /// Writes into `dest` first.
    pub(crate) fn new(dest: &'v mut [f64]) -> Self {
        RowValues {
            dest,
            len: 0,
            spill: Vec::new(),
        }
    }

    /// Starts over (a block parsed again by another path).
    pub(crate) fn restart(&mut self) {
        self.len = 0;
        self.spill.clear();
    }

    /// Starts a row of `width` values and returns the index of its first. Every value of
    /// the row must then be [`set`](Self::set); until then it holds whatever was there.
    #[inline]
    pub(crate) fn start_row(&mut self, width: usize) -> usize {
        let base = self.len;
        self.len += width;
        if self.len > self.dest.len() {
            self.spill.resize(self.len - self.dest.len(), f64::NAN);
        }
        base
    }

    /// Sets value `index` of those started.
    #[inline]
    pub(crate) fn set(&mut self, index: usize, value: f64) {
        let placed = self.dest.len();
        match self.dest.get_mut(index) {
            Some(slot) => *slot = value,
            None => {
                if let Some(slot) = self.spill.get_mut(index - placed) {
                    *slot = value;
                }
            }
        }
    }

    /// The values beyond the slice, in order.
    pub(crate) fn into_spill(self) -> Vec<f64> {
        self.spill
    }
}

/// The final row-major array, filled a batch of blocks at a time.
pub(crate) struct PlacedValues {
    values: Vec<f64>,
    /// Values settled so far (whole rows of earlier batches).
    filled: usize,
    width: usize,
}

impl PlacedValues {
    /// An empty array of rows of `width` values.
    pub(crate) fn new(width: usize) -> Self {
        PlacedValues {
            values: Vec::new(),
            filled: 0,
            width,
        }
    }

    /// Allocates room for `rows` rows at once, zeroed: the allocator maps fresh zero
    /// pages without writing them, so the pages are first touched by the threads that
    /// parse into them (sharing the page faults) and a generous estimate costs no
    /// memory. Only before the first batch; later growth is by [`Self::slices`].
    ///
    /// The estimate comes from the file's size, which may be far from the truth (a file
    /// that shrank while it was read), and `vec![0.0; n]` aborts the process when the
    /// allocation fails; so a fallible reservation of the same size is tried first, and
    /// when it fails the array just grows as it fills.
    pub(crate) fn reserve_rows(&mut self, rows: usize) {
        if !self.values.is_empty() {
            return;
        }
        let len = rows.saturating_mul(self.width);
        let mut probe: Vec<f64> = Vec::new();
        if probe.try_reserve_exact(len).is_ok() {
            drop(probe);
            self.values = vec![0.0; len];
        }
    }

    /// One slice per block of the next batch, `capacities[i]` rows each, in order.
    pub(crate) fn slices(&mut self, capacities: &[usize]) -> Vec<&mut [f64]> {
        let needed = self.filled + capacities.iter().sum::<usize>() * self.width;
        self.ensure_len(needed);
        let mut rest = &mut self.values[self.filled..needed];
        capacities
            .iter()
            .map(|&rows| {
                let (head, tail) = std::mem::take(&mut rest).split_at_mut(rows * self.width);
                rest = tail;
                head
            })
            .collect()
    }

    /// Records what the batch's blocks parsed: `rows[i]` rows of block `i`, the first
    /// `capacities[i]` of them in its slice and the rest in `spills[i]`. When every block
    /// filled its slice exactly, nothing moves; otherwise the batch's rows are gathered
    /// in order and written back from the batch's start.
    pub(crate) fn settle(&mut self, capacities: &[usize], rows: &[usize], spills: Vec<Vec<f64>>) {
        let width = self.width;
        let exact = capacities == rows && spills.iter().all(Vec::is_empty);
        let settled: usize = rows.iter().sum::<usize>() * width;
        if !exact {
            let mut gathered = Vec::with_capacity(settled);
            let mut start = self.filled;
            for ((&capacity, &count), spill) in capacities.iter().zip(rows).zip(&spills) {
                let in_place = count.min(capacity) * width;
                gathered.extend_from_slice(&self.values[start..start + in_place]);
                gathered.extend_from_slice(spill);
                start += capacity * width;
            }
            gathered.truncate(settled);
            let end = self.filled + gathered.len();
            self.ensure_len(end);
            self.values[self.filled..end].copy_from_slice(&gathered);
        }
        self.filled += settled;
    }

    /// The array of the rows settled.
    pub(crate) fn finish(mut self) -> Vec<f64> {
        self.values.truncate(self.filled);
        self.values
    }

    /// Grows the array to at least `len` values, by half again at least so that an
    /// estimate that fell short grows a few times, not once a batch.
    fn ensure_len(&mut self, len: usize) {
        if self.values.len() < len {
            let grown = len.max(self.values.len() + self.values.len() / 2);
            self.values.resize(grown, 0.0);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rows `first..first + count` of a width-2 table, as the values a parser would write.
    fn write_rows(values: &mut RowValues, first: usize, count: usize) {
        for row in first..first + count {
            let base = values.start_row(2);
            values.set(base, row as f64);
            values.set(base + 1, -(row as f64));
        }
    }

    fn expected(rows: usize) -> Vec<f64> {
        (0..rows).flat_map(|r| [r as f64, -(r as f64)]).collect()
    }

    /// Three batches: blocks that fill their slices exactly, one with fewer rows than
    /// lines (blank lines) and one with more (spilled), and an estimate that falls short.
    #[test]
    fn rows_end_in_file_order_whatever_each_block_held() {
        let mut placed = PlacedValues::new(2);
        placed.reserve_rows(4);
        let batches: [&[(usize, usize)]; 3] = [
            &[(3, 3), (2, 2)],
            &[(4, 2), (1, 3), (2, 2)],
            &[(0, 0), (5, 5)],
        ];
        let mut next_row = 0;
        for batch in batches {
            let capacities: Vec<usize> = batch.iter().map(|&(c, _)| c).collect();
            let rows: Vec<usize> = batch.iter().map(|&(_, r)| r).collect();
            let mut spills = Vec::new();
            for (dest, &count) in placed.slices(&capacities).into_iter().zip(&rows) {
                let mut values = RowValues::new(dest);
                write_rows(&mut values, next_row, count);
                next_row += count;
                spills.push(values.into_spill());
            }
            placed.settle(&capacities, &rows, spills);
        }
        assert_eq!(placed.finish(), expected(next_row));
    }

    #[test]
    fn an_empty_slice_spills_every_row_and_restart_forgets_them() {
        let mut values = RowValues::new(&mut []);
        write_rows(&mut values, 0, 2);
        values.restart();
        write_rows(&mut values, 0, 3);
        assert_eq!(values.into_spill(), expected(3));
    }
}
