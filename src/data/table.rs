//! The labelled table: features, observed labels, optional ids and trusted labels.

use rustc_hash::FxHashMap as HashMap;
use std::borrow::Cow;
use std::fs::File;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{Receiver, Sender};

use ndarray::Array2;
use rayon::prelude::*;

use super::blocks::{BlockError, Blocks};
use super::chunk::{parse_block, ChunkOut, SlotStats, NONE};
use super::natural::natural_cmp;
use super::origin::Origin;
use super::roles::{ColumnPlan, TableOptions};
use crate::error::{Error, Location, Problem, Result};
use crate::io::csv_source::{strip_bom, CsvFormat};

/// Target size of one parsed block. Large enough to amortise thread hand-off, small
/// enough that a batch of blocks is a few tens of MiB at most.
const BLOCK_BYTES: usize = 4 << 20;
/// A single record larger than this is refused instead of growing memory without bound.
const MAX_RECORD_BYTES: usize = 64 << 20;

/// Strings stored back to back, so a million ids cost one allocation, not a million.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct StringColumn {
    text: String,
    ends: Vec<usize>,
}

impl StringColumn {
    /// The `i`-th string.
    pub fn get(&self, i: usize) -> &str {
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        &self.text[start..self.ends[i]]
    }

    /// Number of strings.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// True when there are no strings.
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    fn append(&mut self, text: &str, ends: &[usize]) {
        let base = self.text.len();
        self.text.push_str(text);
        self.ends.extend(ends.iter().map(|e| e + base));
    }
}

/// A column that no role uses, and why.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct IgnoredColumn {
    /// Header name.
    pub name: String,
    /// Why it is not a feature.
    pub reason: String,
}

/// Empty cells in a column that may have them (the trusted column, ignored columns).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct MissingCount {
    /// Header name.
    pub column: String,
    /// Empty cells.
    pub count: usize,
}

/// A loaded, validated labelled table.
#[derive(Debug, Clone)]
pub struct Dataset {
    /// The file it came from, as the user named it.
    pub path: PathBuf,
    /// All header names in file order.
    pub header: Vec<String>,
    /// Name of the observed-label column (`None` only for tables loaded for prediction,
    /// whose `labels` are then empty).
    pub label_column: Option<String>,
    /// Name of the id column, when there is one.
    pub id_column: Option<String>,
    /// Name of the trusted-label column, when there is one.
    pub trusted_column: Option<String>,
    /// Name of the column that says how each trusted label was obtained, when there is
    /// one (the trusted column's name + `_origin`).
    pub origin_column: Option<String>,
    /// Names of the feature columns, in the order of `features`' columns.
    pub feature_names: Vec<String>,
    /// Row-major `rows × features`, all finite.
    pub features: Array2<f64>,
    /// Class names in natural order; labels index into this.
    pub classes: Vec<String>,
    /// Observed label of each row.
    pub labels: Vec<usize>,
    /// Trusted (audited) label of each row, `None` where not audited; `None` as a whole
    /// when the table has no trusted column.
    pub trusted: Option<Vec<Option<usize>>>,
    /// How each row's trusted label was obtained; `None` when the table has no origin
    /// column (every trusted label then counts as a random audit).
    pub trusted_origins: Option<Vec<Origin>>,
    /// Ids from the id column; rows are identified by 0-based row number when absent.
    pub ids: Option<StringColumn>,
    /// Columns no role uses.
    pub ignored: Vec<IgnoredColumn>,
    /// Empty cells in columns where they are allowed.
    pub missing: Vec<MissingCount>,
    /// Things the user should know that do not stop the work.
    pub warnings: Vec<String>,
}

impl Dataset {
    /// Loads a CSV file (see [`TableOptions`] for the role rules).
    pub fn load(path: &Path, options: &TableOptions) -> Result<Self> {
        let file = File::open(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let size_hint = file.metadata().map(|m| m.len()).ok();
        Self::from_reader(file, path, size_hint, options)
    }

    /// Loads CSV from any reader; `path` names the source in messages.
    pub fn from_reader<R: Read + Send>(
        reader: R,
        path: &Path,
        size_hint: Option<u64>,
        options: &TableOptions,
    ) -> Result<Self> {
        Loader::new(path, options, size_hint, BLOCK_BYTES).run(reader)
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.features.nrows()
    }

    /// The id of `row`: its id cell, or its 0-based row number when there is no id column.
    pub fn id(&self, row: usize) -> Cow<'_, str> {
        match &self.ids {
            Some(ids) => Cow::Borrowed(ids.get(row)),
            None => Cow::Owned(row.to_string()),
        }
    }

    /// Observed rows per class.
    pub fn class_counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.classes.len()];
        for &label in &self.labels {
            counts[label] += 1;
        }
        counts
    }

    /// How `row`'s trusted label was obtained (meaningful where it has one).
    pub fn origin(&self, row: usize) -> Origin {
        self.trusted_origins
            .as_ref()
            .map_or(Origin::Audit, |o| o[row])
    }

    /// The trusted labels that came from a random audit ([`Origin::is_random_sample`]),
    /// the others removed; `None` when the table has no trusted column.
    pub fn randomly_audited(&self) -> Option<Vec<Option<usize>>> {
        let trusted = self.trusted.as_ref()?;
        Some(
            trusted
                .iter()
                .enumerate()
                .map(|(r, &t)| t.filter(|_| self.origin(r).is_random_sample()))
                .collect(),
        )
    }

    /// Trusted rows of each origin, in the order of [`Origin::ALL`].
    pub fn trusted_by_origin(&self) -> [usize; 3] {
        let mut counts = [0; 3];
        for (r, t) in self.trusted.iter().flatten().enumerate() {
            if t.is_some() {
                let origin = self.origin(r);
                counts[Origin::ALL.iter().position(|&o| o == origin).unwrap_or(0)] += 1;
            }
        }
        counts
    }

    /// Trusted rows per class (zeros when there is no trusted column).
    pub fn trusted_counts(&self) -> Vec<usize> {
        let mut counts = vec![0; self.classes.len()];
        for label in self.trusted.iter().flatten().flatten() {
            counts[*label] += 1;
        }
        counts
    }
}

/// Accumulates parsed blocks in file order.
struct Loader<'a> {
    path: &'a Path,
    options: &'a TableOptions,
    delimiter: u8,
    size_hint: Option<u64>,
    block_bytes: usize,
    lines_done: u64,
    rows: usize,
    values: Vec<f64>,
    labels: Vec<u32>,
    trusted: Vec<u32>,
    origins: Vec<Origin>,
    names: Vec<String>,
    codes: HashMap<String, u32>,
    ids: StringColumn,
    row_lines: Vec<u64>,
    slots: Vec<SlotStats>,
}

impl<'a> Loader<'a> {
    fn new(
        path: &'a Path,
        options: &'a TableOptions,
        size_hint: Option<u64>,
        block_bytes: usize,
    ) -> Self {
        Loader {
            block_bytes,
            path,
            options,
            delimiter: options.delimiter_for(path),
            size_hint,
            lines_done: 0,
            rows: 0,
            values: Vec::new(),
            labels: Vec::new(),
            trusted: Vec::new(),
            origins: Vec::new(),
            names: Vec::new(),
            codes: HashMap::default(),
            ids: StringColumn::default(),
            row_lines: Vec::new(),
            slots: Vec::new(),
        }
    }

    /// Reads blocks on a helper thread while the blocks already read are parsed on the
    /// rayon pool, and merges each batch while the next one parses: three stages that
    /// overlap, so the one pass over the file keeps both cores busy.
    fn run<R: Read + Send>(mut self, reader: R) -> Result<Dataset> {
        let mut blocks = Blocks::new(reader, self.delimiter, self.block_bytes, MAX_RECORD_BYTES);
        let Some(first) = self.next_block(&mut blocks)? else {
            return Err(self.whole_file(Problem::Empty));
        };
        let (plan, first_data) = self.header(&first)?;
        drop(first);
        self.slots = vec![SlotStats::default(); plan.numeric.len()];
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
        self.finish(plan)
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
        if self.values.capacity() == 0 {
            self.reserve(&out, plan);
        }
        let remap: Vec<u32> = out
            .names
            .into_iter()
            .map(|name| self.global_code(name))
            .collect();
        self.labels
            .extend(out.labels.iter().map(|&c| remap[c as usize]));
        self.trusted.extend(out.trusted.iter().map(|&c| {
            if c == NONE {
                NONE
            } else {
                remap[c as usize]
            }
        }));
        self.origins.extend_from_slice(&out.origins);
        self.ids.append(&out.ids, &out.id_ends);
        self.row_lines
            .extend(out.row_lines.iter().map(|l| l + base));
        self.values.extend_from_slice(&out.values);
        for (mine, theirs) in self.slots.iter_mut().zip(&out.slots) {
            mine.absorb(theirs, base);
        }
        self.rows += out.rows;
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
            .values
            .try_reserve_exact(est_rows.saturating_mul(plan.numeric.len()));
    }

    fn global_code(&mut self, name: String) -> u32 {
        if let Some(&code) = self.codes.get(&name) {
            return code;
        }
        let code = self.names.len() as u32;
        self.codes.insert(name.clone(), code);
        self.names.push(name);
        code
    }

    fn finish(mut self, plan: ColumnPlan) -> Result<Dataset> {
        if self.rows == 0 {
            return Err(self.whole_file(Problem::HeaderOnly));
        }
        let (kept, ignored) = self.choose_features(&plan)?;
        let mut warnings = Vec::new();
        let missing = self.missing_counts(&plan, &kept);
        let values = compact(
            std::mem::take(&mut self.values),
            self.rows,
            plan.numeric.len(),
            &kept,
        );
        let features = Array2::from_shape_vec((self.rows, kept.len()), values)
            .map_err(|e| Error::Internal(format!("feature array shape: {e}")))?;
        let (classes, order) = self.class_order();
        let labels: Vec<usize> = self.labels.iter().map(|&c| order[c as usize]).collect();
        let trusted = plan.trusted.map(|_| {
            self.trusted
                .iter()
                .map(|&c| (c != NONE).then(|| order[c as usize]))
                .collect::<Vec<_>>()
        });
        let trusted_origins = plan
            .origin
            .filter(|_| trusted.is_some())
            .map(|_| std::mem::take(&mut self.origins));
        let plan_labeled = plan.label.is_some();
        let ids = plan.id.map(|_| std::mem::take(&mut self.ids));
        if let Some(ids) = &ids {
            self.check_unique_ids(ids, &plan)?;
        }
        let dataset = Dataset {
            path: self.path.to_path_buf(),
            label_column: plan.label.map(|l| plan.header[l].clone()),
            id_column: plan.id.map(|i| plan.header[i].clone()),
            trusted_column: plan.trusted.map(|i| plan.header[i].clone()),
            origin_column: plan.origin.map(|i| plan.header[i].clone()),
            feature_names: kept
                .iter()
                .map(|&s| plan.header[plan.numeric[s]].clone())
                .collect(),
            header: plan.header,
            features,
            classes,
            labels,
            trusted,
            trusted_origins,
            ids,
            ignored,
            missing,
            warnings: Vec::new(),
        };
        if plan_labeled {
            check_classes(self.path, &dataset, &mut warnings)?;
        }
        Ok(Dataset {
            warnings,
            ..dataset
        })
    }

    /// Decides which numeric slots are features, and reports the others.
    fn choose_features(&self, plan: &ColumnPlan) -> Result<(Vec<usize>, Vec<IgnoredColumn>)> {
        let mut kept = Vec::new();
        let mut ignored = Vec::new();
        for (slot, stats) in self.slots.iter().enumerate() {
            let name = &plan.header[plan.numeric[slot]];
            if plan.explicit {
                kept.push(slot);
            } else if let Some((line, text)) = &stats.first_bad {
                let reason = format!("not numeric ('{text}' on line {line})");
                ignored.push(IgnoredColumn {
                    name: name.clone(),
                    reason,
                });
            } else if stats.values == 0 {
                ignored.push(IgnoredColumn {
                    name: name.clone(),
                    reason: "no values".into(),
                });
            } else {
                kept.push(slot);
            }
        }
        if plan.explicit {
            let mut numeric = vec![false; plan.header.len()];
            plan.numeric.iter().for_each(|&i| numeric[i] = true);
            for (i, name) in plan.header.iter().enumerate() {
                let used = numeric[i]
                    || Some(i) == plan.label
                    || Some(i) == plan.id
                    || Some(i) == plan.trusted;
                if !used {
                    ignored.push(IgnoredColumn {
                        name: name.clone(),
                        reason: "not in --features".into(),
                    });
                }
            }
        }
        self.check_feature_cells(plan, &kept)?;
        if kept.is_empty() {
            let detail = if ignored.is_empty() {
                "; the table has only role columns".to_string()
            } else {
                format!(
                    "; ignored: {}",
                    ignored
                        .iter()
                        .map(|c| format!("{} ({})", c.name, c.reason))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            };
            return Err(self.whole_file(Problem::NoFeatures { detail }));
        }
        Ok((kept, ignored))
    }

    /// The earliest bad cell among the features, if any, as an error.
    fn check_feature_cells(&self, plan: &ColumnPlan, kept: &[usize]) -> Result<()> {
        let mut worst: Option<(u64, usize, Problem)> = None;
        for &slot in kept {
            let stats = &self.slots[slot];
            let candidates = [
                stats
                    .first_bad
                    .clone()
                    .map(|(l, value)| (l, Problem::NotNumber { value })),
                stats
                    .first_nonfinite
                    .clone()
                    .map(|(l, value)| (l, Problem::NotFinite { value })),
                stats.first_missing.map(|l| {
                    (
                        l,
                        Problem::MissingValues {
                            count: stats.missing,
                        },
                    )
                }),
            ];
            for (line, problem) in candidates.into_iter().flatten() {
                if worst.as_ref().is_none_or(|(l, _, _)| line < *l) {
                    worst = Some((line, slot, problem));
                }
            }
        }
        match worst {
            None => Ok(()),
            Some((line, slot, problem)) => {
                let field = plan.numeric[slot];
                Err(Error::input(
                    Location::line(self.path, line).at_column(field, &plan.header[field]),
                    problem,
                ))
            }
        }
    }

    fn missing_counts(&self, plan: &ColumnPlan, kept: &[usize]) -> Vec<MissingCount> {
        let mut missing = Vec::new();
        if let Some(field) = plan.trusted {
            let count = self.trusted.iter().filter(|&&c| c == NONE).count();
            missing.push(MissingCount {
                column: plan.header[field].clone(),
                count,
            });
        }
        let mut is_kept = vec![false; self.slots.len()];
        kept.iter().for_each(|&s| is_kept[s] = true);
        for (slot, stats) in self.slots.iter().enumerate() {
            if !is_kept[slot] && stats.missing > 0 {
                missing.push(MissingCount {
                    column: plan.header[plan.numeric[slot]].clone(),
                    count: stats.missing,
                });
            }
        }
        missing.retain(|m| m.count > 0);
        missing
    }

    /// Natural-sorted class names and the map from load order to sorted position.
    fn class_order(&self) -> (Vec<String>, Vec<usize>) {
        let mut sorted: Vec<usize> = (0..self.names.len()).collect();
        sorted.sort_by(|&a, &b| natural_cmp(&self.names[a], &self.names[b]));
        let mut order = vec![0; self.names.len()];
        for (position, &code) in sorted.iter().enumerate() {
            order[code] = position;
        }
        (
            sorted.iter().map(|&c| self.names[c].clone()).collect(),
            order,
        )
    }

    fn check_unique_ids(&self, ids: &StringColumn, plan: &ColumnPlan) -> Result<()> {
        let Some((row, first)) = first_duplicate(ids) else {
            return Ok(());
        };
        let field = plan.id.unwrap_or(0);
        let location =
            Location::line(self.path, self.row_lines[row]).at_column(field, &plan.header[field]);
        let problem = Problem::DuplicateId {
            id: crate::error::shorten(ids.get(row)),
            first_line: self.row_lines[first],
        };
        Err(Error::input(location, problem))
    }

    fn whole_file(&self, problem: Problem) -> Error {
        Error::input(Location::file(self.path), problem)
    }

    fn at_line(&self, line: u64, problem: Problem) -> Error {
        Error::input(Location::line(self.path, line), problem)
    }
}

/// Shards of the duplicate-id check: ids are split by hash, so equal ids meet in one
/// shard, and the shards are checked on every core with tables small enough for cache.
const ID_SHARDS: usize = 16;

/// The first row (in file order) whose id appeared before, with that earlier row: the
/// row a serial scan with one hash table would report. Each shard finds its own first
/// repeat; equal ids share a shard, so the smallest of those is the first overall.
fn first_duplicate(ids: &StringColumn) -> Option<(usize, usize)> {
    use std::hash::BuildHasher;
    let hasher = rustc_hash::FxBuildHasher;
    let shard_of: Vec<u8> = (0..ids.len())
        .into_par_iter()
        .with_min_len(4096)
        .map(|row| (hasher.hash_one(ids.get(row)) % ID_SHARDS as u64) as u8)
        .collect();
    (0..ID_SHARDS)
        .into_par_iter()
        .filter_map(|shard| {
            let mut seen: HashMap<&str, usize> =
                HashMap::with_capacity_and_hasher(ids.len() / ID_SHARDS + 16, Default::default());
            for (row, &s) in shard_of.iter().enumerate() {
                if s as usize == shard {
                    if let Some(first) = seen.insert(ids.get(row), row) {
                        return Some((row, first));
                    }
                }
            }
            None
        })
        .min()
}

/// Keeps the columns `kept` (sorted slot indices) of a row-major `rows × width` buffer,
/// in place: every kept value moves to an index no larger than its old one.
fn compact(mut values: Vec<f64>, rows: usize, width: usize, kept: &[usize]) -> Vec<f64> {
    if kept.len() == width {
        return values;
    }
    let new_width = kept.len();
    for row in 0..rows {
        for (k, &slot) in kept.iter().enumerate() {
            values[row * new_width + k] = values[row * width + slot];
        }
    }
    values.truncate(rows * new_width);
    values.shrink_to_fit();
    values
}

fn check_classes(path: &Path, data: &Dataset, warnings: &mut Vec<String>) -> Result<()> {
    let counts = data.class_counts();
    let observed: Vec<&str> = data
        .classes
        .iter()
        .zip(&counts)
        .filter(|(_, &n)| n > 0)
        .map(|(c, _)| c.as_str())
        .collect();
    if data.classes.len() < 2 {
        let problem = Problem::TooFewClasses {
            found: data.classes.len(),
            names: data.classes.join(", "),
        };
        return Err(Error::input(Location::file(path), problem));
    }
    for (class, &count) in data.classes.iter().zip(&counts) {
        match count {
            0 => warnings.push(format!(
                "class '{class}' occurs only as a trusted label, never as an observed one"
            )),
            1 => warnings.push(format!(
                "class '{class}' has a single row; estimates for it will be unreliable"
            )),
            _ => {}
        }
    }
    if observed.len() < 2 {
        warnings.push(format!(
            "only one observed class ({}); the flip matrix cannot be estimated",
            observed.join(", ")
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn load(text: &str, options: &TableOptions) -> Result<Dataset> {
        Dataset::from_reader(text.as_bytes(), Path::new("t.csv"), None, options)
    }

    fn err(text: &str) -> String {
        load(text, &TableOptions::default())
            .unwrap_err()
            .to_string()
    }

    #[test]
    fn loads_roles_features_and_natural_class_order() {
        let text = "id,x,label,trusted,note,y\na,1,c10,,n,2\nb,3,c2,c10,m,4\nc,5,c2,,,6\n";
        let d = load(text, &TableOptions::default()).unwrap();
        assert_eq!(d.classes, ["c2", "c10"]);
        assert_eq!(d.labels, [1, 0, 0]);
        assert_eq!(d.trusted, Some(vec![None, Some(1), None]));
        assert_eq!(d.feature_names, ["x", "y"]);
        assert_eq!(
            d.features.as_slice().unwrap(),
            &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
        );
        assert_eq!(d.id(1), "b");
        assert_eq!(d.ignored[0].name, "note");
        assert_eq!(
            d.missing,
            vec![
                MissingCount {
                    column: "trusted".into(),
                    count: 2
                },
                MissingCount {
                    column: "note".into(),
                    count: 1
                }
            ]
        );
    }

    #[test]
    fn the_origin_column_says_how_each_trusted_label_was_obtained() {
        let text = "x,label,trusted,trusted_origin\n1,a,a,review\n2,b,,\n3,b,a,\n4,a,b,control\n";
        let d = load(text, &TableOptions::default()).unwrap();
        assert_eq!(d.origin_column.as_deref(), Some("trusted_origin"));
        assert_eq!(d.feature_names, ["x"], "the origin column is not a feature");
        let origins: Vec<Origin> = (0..4).map(|r| d.origin(r)).collect();
        let expected = [
            Origin::Review,
            Origin::Audit,
            Origin::Audit,
            Origin::Control,
        ];
        assert_eq!(origins, expected);
        assert_eq!(d.randomly_audited(), Some(vec![None, None, Some(0), None]));
        assert_eq!(d.trusted_by_origin(), [1, 1, 1]);
        let plain = load("x,label,trusted\n1,a,a\n2,b,\n", &TableOptions::default()).unwrap();
        assert_eq!(plain.origin(0), Origin::Audit);
        assert_eq!(plain.trusted_by_origin(), [1, 0, 0]);
    }

    #[test]
    fn trusted_only_class_joins_the_class_list() {
        let d = load("x,label,trusted\n1,a,\n2,b,z\n", &TableOptions::default()).unwrap();
        assert_eq!(d.classes, ["a", "b", "z"]);
        assert!(d
            .warnings
            .iter()
            .any(|w| w.contains("'z' occurs only as a trusted label")));
    }

    #[test]
    fn row_numbers_serve_as_ids_without_an_id_column() {
        let d = load("x,label\n1,a\n2,b\n", &TableOptions::default()).unwrap();
        assert_eq!(d.id(1), "1");
        assert!(d.ids.is_none());
    }

    #[test]
    fn empty_and_header_only_files() {
        assert!(err("").contains("empty"));
        assert!(err("\u{feff}").contains("empty"));
        assert!(err("x,label\n").contains("no data rows"));
    }

    #[test]
    fn feature_errors_name_line_and_column() {
        let options = TableOptions {
            features: Some(vec!["x".into()]),
            ..Default::default()
        };
        let e = load("x,label\n1,a\nabc,b\n", &options)
            .unwrap_err()
            .to_string();
        assert_eq!(e, "t.csv, line 3, column 1 'x': 'abc' is not a number");
        assert!(err("x,label\n1,a\n,b\n").contains("line 3, column 1 'x': 1 empty cell"));
        assert!(
            err("x,label\n1,a\ninf,b\n").contains("line 3, column 1 'x': 'inf' is not a finite")
        );
    }

    #[test]
    fn structural_errors() {
        assert!(
            err("x,label\n1,a\n2\n").contains("line 3: this row has 1 fields but the header has 2")
        );
        assert!(
            err("x,label\n1,a\n2,\n").contains("line 3, column 2 'label': the label cell is empty")
        );
        assert!(err("x,label\n1,a\n2,a\n").contains("found 1 class"));
        assert!(err("id,x,label\nq,1,a\nq,2,b\n")
            .contains("line 3, column 1 'id': the id 'q' was already used on line 2"));
        assert!(err("label,note\na,x\nb,y\n").contains("no numeric feature columns"));
    }

    #[test]
    fn invalid_utf8_in_a_label_is_reported() {
        let bytes = b"x,label\n1,a\n2,\xff\xfe\n";
        let e = Dataset::from_reader(
            &bytes[..],
            Path::new("t.csv"),
            None,
            &TableOptions::default(),
        )
        .unwrap_err();
        assert!(
            e.to_string()
                .contains("line 3, column 2 'label': the text is not valid UTF-8"),
            "{e}"
        );
    }

    #[test]
    fn quoted_fields_with_newlines_keep_line_numbers_true() {
        let text = "x,label,note\n1,a,\"two\nlines\"\nbad,b,z\n";
        let options = TableOptions {
            features: Some(vec!["x".into()]),
            ..Default::default()
        };
        let e = load(text, &options).unwrap_err().to_string();
        assert!(e.contains("line 4, column 1 'x'"), "{e}");
    }

    #[test]
    fn many_blocks_give_the_same_table_as_one() {
        // Rows well beyond one block, so merging across blocks and threads is exercised.
        let mut text = String::from("id,a,b,label\n");
        let rows = 100_000;
        for i in 0..rows {
            text.push_str(&format!("r{i},{},{}.5,c{}\n", i % 97, i % 13, i % 11));
        }
        let block_bytes = 64 << 10;
        assert!(text.len() > 20 * block_bytes);
        let options = TableOptions::default();
        let d = Loader::new(
            Path::new("t.csv"),
            &options,
            Some(text.len() as u64),
            block_bytes,
        )
        .run(text.as_bytes())
        .unwrap();
        assert_eq!(d.rows(), rows);
        assert_eq!(d.features[[rows - 1, 0]], ((rows - 1) % 97) as f64);
        assert_eq!(d.features[[12345, 1]], (12345 % 13) as f64 + 0.5);
        assert_eq!(d.id(rows - 1), format!("r{}", rows - 1));
        assert_eq!(
            d.classes[d.labels[rows - 1]],
            format!("c{}", (rows - 1) % 11)
        );
        assert_eq!(d.classes.len(), 11);
    }

    #[test]
    fn compact_keeps_selected_columns_in_place() {
        let v = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
        assert_eq!(compact(v, 2, 3, &[0, 2]), vec![1.0, 3.0, 4.0, 6.0]);
    }

    #[test]
    fn the_first_repeated_id_in_file_order_is_reported() {
        // 40,000 ids (all shards busy); "id7" repeats at row 30,000 and "id5" at row
        // 35,000: a serial scan meets row 30,000 first, so that is the one named, with
        // the line of its first occurrence (row 7 is on line 9).
        let mut text = String::from("id,x,label\n");
        for row in 0..40_000 {
            let id = match row {
                30_000 => "id7".to_string(),
                35_000 => "id5".to_string(),
                _ => format!("id{row}"),
            };
            text.push_str(&format!("{id},{row},a\n"));
        }
        let message = err(&text);
        assert!(
            message.contains("line 30002")
                && message.contains("'id7'")
                && message.contains("line 9"),
            "{message}"
        );
    }
}
