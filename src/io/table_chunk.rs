//! Parses one block of CSV records into column-role buffers. Blocks are independent, so
//! they parse in parallel; [`super::table_csv`] merges their outputs in file order.

use rustc_hash::FxHashMap as HashMap;

use crate::data::origin::Origin;
use crate::data::roles::ColumnPlan;
use crate::error::{shorten, Problem};
use crate::io::csv_source::CsvFormat;
use crate::io::number::{parse_f64, parse_short_prefix};
use crate::io::placed_values::RowValues;

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
    /// The stored type, in words, when a columnar file's column is not numeric.
    pub wrong_type: Option<String>,
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
        if self.wrong_type.is_none() {
            self.wrong_type.clone_from(&later.wrong_type);
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
    /// Data rows parsed.
    pub rows: usize,
    /// Row-major `rows × plan.numeric.len()` values; NaN where a cell was not a number.
    /// From [`parse_block_into`], only the rows beyond the caller's slice.
    pub values: Vec<f64>,
    /// Observed label per row, as a code into `names`.
    pub labels: Vec<u32>,
    /// Trusted label per row as a code into `names`, or [`NONE`].
    pub trusted: Vec<u32>,
    /// Origin of each row's trusted label (only when the plan has an origin column).
    pub origins: Vec<Origin>,
    /// The block's label strings, in order of first appearance.
    pub names: Vec<String>,
    /// Rows × annotators label codes (into `names`) or [`NONE`], row-major (only with
    /// annotator columns).
    pub annotations: Vec<u32>,
    /// Label source per row, as a code into `source_names` (only with a source column).
    pub sources: Vec<u32>,
    /// The block's source strings, in order of first appearance.
    pub source_names: Vec<String>,
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
///
/// Blocks are split on newlines and delimiters directly, which is several times faster
/// than a general CSV state machine; simple quotes around whole fields are removed on the
/// way ([`unquote_simple`]), and a block with any other use of quotes goes through the
/// `csv` crate. Both give the same rows.
pub(crate) fn parse_block(block: &[u8], delimiter: u8, plan: &ColumnPlan) -> ChunkOut {
    parse_block_into(block, newlines(block), delimiter, plan, &mut [])
}

/// Newlines in `block`.
pub(crate) fn newlines(block: &[u8]) -> u64 {
    memchr::memchr_iter(b'\n', block).count() as u64
}

/// The most rows the plain split can find in a block of `newlines` newlines: one a line,
/// the last line counting only when no newline ends the block.
pub(crate) fn row_capacity(block: &[u8], newlines: u64) -> usize {
    newlines as usize + usize::from(!block.is_empty() && !block.ends_with(b"\n"))
}

/// [`parse_block`] with the numeric values written into `dest` (row-major, from its
/// start) while it has room, and only the rows beyond it kept in the output's `values`;
/// `newlines` is the block's newline count.
pub(crate) fn parse_block_into(
    block: &[u8],
    newlines: u64,
    delimiter: u8,
    plan: &ColumnPlan,
    dest: &mut [f64],
) -> ChunkOut {
    let mut parser = BlockParser::new(plan, block, newlines, RowValues::new(dest));
    let quoted = memchr::memchr(b'"', block).is_some();
    let outcome = match parse_plain(block, delimiter, &mut parser, quoted) {
        Ok(true) => Ok(()),
        Err(fatal) => Err(fatal),
        Ok(false) => {
            let mut values = parser.values;
            values.restart();
            parser = BlockParser::new(plan, block, newlines, values);
            parse_quoted(block, delimiter, &mut parser)
        }
    };
    parser.out.fatal = outcome.err();
    parser.out.values = parser.values.into_spill();
    parser.out
}

/// Splits `block` on newlines and delimiters. With `dequote`, a line with quotes is read
/// through [`unquote_simple`]; false (nothing to keep) at the first line that is not
/// simply quoted, for the caller to take the `csv` crate's path instead.
fn parse_plain(
    block: &[u8],
    delimiter: u8,
    parser: &mut BlockParser,
    dequote: bool,
) -> Result<bool, Fatal> {
    plain_lines(block, delimiter, dequote, |line, line_no| {
        parser.plain_row(line, line_no, delimiter)
    })
}

/// Gives `row` each line of `block` a plain split reads, with its 1-based line number in
/// the block: a trailing carriage return dropped, blank lines skipped (as the `csv`
/// crate skips them) and, with `dequote`, simple quotes removed ([`unquote_simple`]).
/// False at the first line whose quotes the plain split cannot read.
pub(crate) fn plain_lines<E>(
    block: &[u8],
    delimiter: u8,
    dequote: bool,
    mut row: impl FnMut(&[u8], u64) -> Result<(), E>,
) -> Result<bool, E> {
    let mut start = 0;
    let mut line_no = 0u64;
    let mut unquoted = Vec::new();
    for end in memchr::memchr_iter(b'\n', block).chain(std::iter::once(block.len())) {
        line_no += 1;
        let mut line = &block[start..end];
        start = end + 1;
        if let Some(stripped) = line.strip_suffix(b"\r") {
            line = stripped;
        }
        if line.is_empty() {
            continue;
        }
        if dequote && memchr::memchr(b'"', line).is_some() {
            if !unquote_simple(line, delimiter, &mut unquoted) {
                return Ok(false);
            }
            line = &unquoted;
        }
        row(line, line_no)?;
    }
    Ok(true)
}

/// Writes `line` into `out` without the quotes around whole fields, when every quote in
/// it opens a field and the next one closes that field at the delimiter or the line's
/// end, with nothing quoted in between that needs quoting (no quote, delimiter or line
/// break). The `csv` crate reads such a field as the text between its quotes, so the
/// plain split then reads the same cells. False for any other use of quotes (an escaped
/// quote, a delimiter or a line break inside quotes, a quote inside an unquoted field).
///
/// A block's first line starts a record (blocks are cut on record boundaries), and a
/// line that opens a quoted field without closing it is never simple, so reading lines
/// until the first one that is not simple never reads inside a quoted field. Measured
/// with `benches/stream_100m.sh 10000000 DIR csv` (every label quoted, as pyarrow and R
/// write them): the `csv` crate's path was a quarter of the run's cycles.
pub(crate) fn unquote_simple(line: &[u8], delimiter: u8, out: &mut Vec<u8>) -> bool {
    out.clear();
    let mut copied = 0;
    let mut quotes = memchr::memchr_iter(b'"', line);
    while let Some(open) = quotes.next() {
        let Some(close) = quotes.next() else {
            return false;
        };
        let at_start = open == 0 || line[open - 1] == delimiter;
        let at_end = close + 1 == line.len() || line[close + 1] == delimiter;
        let inner = &line[open + 1..close];
        if !(at_start && at_end) || memchr::memchr(delimiter, inner).is_some() {
            return false;
        }
        out.extend_from_slice(&line[copied..open]);
        out.extend_from_slice(inner);
        copied = close + 1;
    }
    out.extend_from_slice(&line[copied..]);
    true
}

fn parse_quoted(block: &[u8], delimiter: u8, parser: &mut BlockParser) -> Result<(), Fatal> {
    let mut reader = CsvFormat { delimiter }.slice_reader(block);
    let mut record = csv::ByteRecord::new();
    let mut lines = LineCounter::default();
    loop {
        match reader.read_byte_record(&mut record) {
            Ok(false) => return Ok(()),
            Ok(true) => {
                let line = lines.line_at(block, record.position().map_or(0, |p| p.byte()));
                parser.row(&record, line)?;
            }
            Err(e) => {
                let line = lines.line_at(block, e.position().map_or(0, |p| p.byte()));
                return Err((
                    line,
                    None,
                    Problem::Syntax {
                        detail: e.to_string(),
                    },
                ));
            }
        }
    }
}

/// Turns the `csv` crate's record byte offsets into line numbers. Its own line numbers
/// (and offsets) point at the blank lines before a record rather than the record itself,
/// so the blank lines are skipped here and newlines counted up to the record's first byte.
#[derive(Default)]
pub(crate) struct LineCounter {
    counted_to: usize,
    newlines: u64,
}

impl LineCounter {
    pub(crate) fn line_at(&mut self, block: &[u8], offset: u64) -> u64 {
        let mut start = (offset as usize).min(block.len());
        while start < block.len() && matches!(block[start], b'\r' | b'\n') {
            start += 1;
        }
        if start >= self.counted_to {
            self.newlines +=
                memchr::memchr_iter(b'\n', &block[self.counted_to..start]).count() as u64;
            self.counted_to = start;
        }
        self.newlines + 1
    }
}

/// The ragged-row problem, with a hint when the row has too many fields.
pub(crate) fn ragged(expected: usize, found: usize) -> Problem {
    let hint = if found > expected {
        "; a value containing the delimiter must be quoted"
    } else {
        ""
    };
    Problem::Ragged {
        expected,
        found,
        hint: hint.to_string(),
    }
}

/// Field access by index: the `csv` crate's records, or a columnar row's role cells.
pub(crate) trait Fields {
    fn count(&self) -> usize;
    fn field(&self, i: usize) -> &[u8];
}

impl Fields for csv::ByteRecord {
    fn count(&self) -> usize {
        self.len()
    }
    fn field(&self, i: usize) -> &[u8] {
        &self[i]
    }
}

/// What a field is for, by field index.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    Label,
    Trusted,
    Origin,
    Source,
    Annotator(usize),
    Id,
    Numeric(usize),
    Unused,
}

fn kinds(plan: &ColumnPlan) -> Vec<Kind> {
    let mut kinds = vec![Kind::Unused; plan.header.len()];
    if let Some(l) = plan.label {
        kinds[l] = Kind::Label;
    }
    if let Some(t) = plan.trusted {
        kinds[t] = Kind::Trusted;
    }
    if let Some(o) = plan.origin {
        kinds[o] = Kind::Origin;
    }
    if let Some(s) = plan.source {
        kinds[s] = Kind::Source;
    }
    for (a, &field) in plan.annotators.iter().enumerate() {
        kinds[field] = Kind::Annotator(a);
    }
    if let Some(i) = plan.id {
        kinds[i] = Kind::Id;
    }
    for (slot, &field) in plan.numeric.iter().enumerate() {
        kinds[field] = Kind::Numeric(slot);
    }
    kinds
}

/// End of the field starting at `start`: the next delimiter, or the end of the line.
/// Fields are short, so a plain byte loop beats a vectorised search per field.
#[inline]
fn field_end(line: &[u8], start: usize, delimiter: u8) -> usize {
    let mut i = start;
    while i < line.len() && line[i] != delimiter {
        i += 1;
    }
    i
}

/// Parses rows handed over cell by cell (columnar files). Role cells come as text, so
/// they follow exactly the CSV rules (empty labels, origins, sources, ids); the numeric
/// columns are filled by the caller, who reads them as numbers.
pub(crate) struct RowParser<'a>(BlockParser<'a, 'static>);

impl<'a> RowParser<'a> {
    pub(crate) fn new(plan: &'a ColumnPlan) -> Self {
        RowParser(BlockParser::new(plan, &[], 0, RowValues::new(&mut [])))
    }

    /// Fields of the header: a row handed over needs this many cells.
    pub(crate) fn fields(&self) -> usize {
        self.0.plan.header.len()
    }

    /// One row's role cells; `at` is its place number within the part.
    pub(crate) fn row(&mut self, record: &impl Fields, at: u64) -> Result<(), Fatal> {
        self.0.roles(record, at)?;
        self.0.out.rows += 1;
        Ok(())
    }

    /// The part as parsed, with its numeric columns (row-major values and per-column
    /// statistics) and the place numbers it spans.
    pub(crate) fn finish(
        self,
        values: Vec<f64>,
        slots: Vec<SlotStats>,
        places: u64,
        fatal: Option<Fatal>,
    ) -> ChunkOut {
        ChunkOut {
            values,
            slots,
            newlines: places,
            fatal,
            ..self.0.out
        }
    }
}

struct BlockParser<'a, 'v> {
    plan: &'a ColumnPlan,
    /// Where the numeric values go.
    values: RowValues<'v>,
    kinds: Vec<Kind>,
    codes: HashMap<Vec<u8>, u32>,
    source_codes: HashMap<Vec<u8>, u32>,
    out: ChunkOut,
}

impl<'a, 'v> BlockParser<'a, 'v> {
    fn new(plan: &'a ColumnPlan, block: &[u8], newlines: u64, values: RowValues<'v>) -> Self {
        let rows = row_capacity(block, newlines);
        let out = ChunkOut {
            newlines,
            labels: Vec::with_capacity(rows),
            slots: vec![SlotStats::default(); plan.numeric.len()],
            ..Default::default()
        };
        BlockParser {
            plan,
            kinds: kinds(plan),
            codes: HashMap::default(),
            source_codes: HashMap::default(),
            values,
            out,
        }
    }

    /// One unquoted line, split and parsed in a single pass: numbers are read straight
    /// from the line, and only cells the fast path cannot take are cut out first.
    ///
    /// Finding the line's field ends first, eight bytes at a time, so that the cells
    /// would parse independently, measured slower (2026-12-05, `flipmend inspect` on the
    /// 1,000,000 × 32 file of `benches/vs_pandas_load.sh`, two binaries alternated, 5
    /// runs each: median 0.47 s against 0.45 s this way).
    fn plain_row(&mut self, line: &[u8], line_no: u64, delimiter: u8) -> Result<(), Fatal> {
        let fields = self.kinds.len();
        let mut pos = 0;
        let base = self.values.start_row(self.plan.numeric.len());
        let annotation_base = self.out.annotations.len();
        self.out
            .annotations
            .resize(annotation_base + self.plan.annotators.len(), NONE);
        for f in 0..fields {
            if pos > line.len() {
                return Err((line_no, None, ragged(fields, f)));
            }
            let kind = self.kinds[f];
            if let Kind::Numeric(slot) = kind {
                if let Some((value, used)) = parse_short_prefix(&line[pos..]) {
                    let next = pos + used;
                    if next == line.len() || line[next] == delimiter {
                        self.values.set(base + slot, value);
                        self.out.slots[slot].values += 1;
                        pos = next + 1;
                        continue;
                    }
                }
            }
            let end = field_end(line, pos, delimiter);
            let cell = &line[pos..end];
            pos = end + 1;
            match kind {
                Kind::Numeric(slot) => {
                    let value = parse_number(cell, line_no, &mut self.out.slots[slot]);
                    self.values.set(base + slot, value);
                }
                Kind::Label => self.label(cell, line_no, f)?,
                Kind::Trusted => self.trusted(cell, line_no, f)?,
                Kind::Origin => self.origin(cell, line_no, f)?,
                Kind::Source => self.source(cell, line_no, f)?,
                Kind::Annotator(a) => {
                    self.out.annotations[annotation_base + a] = self.annotation(cell, line_no, f)?
                }
                Kind::Id => self.id(cell, line_no, f)?,
                Kind::Unused => {}
            }
        }
        if pos <= line.len() {
            let extra = line[pos..].iter().filter(|&&b| b == delimiter).count() + 1;
            return Err((line_no, None, ragged(fields, fields + extra)));
        }
        self.check_annotated(annotation_base, line_no)?;
        self.out.rows += 1;
        Ok(())
    }

    /// An annotator's cell: a label code, or [`NONE`] when empty.
    fn annotation(&mut self, cell: &[u8], line: u64, field: usize) -> Result<u32, Fatal> {
        if cell.is_empty() {
            return Ok(NONE);
        }
        self.code(cell).map_err(|p| (line, Some(field), p))
    }

    /// Refuses a row whose annotator cells (from `base`) are all empty.
    fn check_annotated(&self, base: usize, line: u64) -> Result<(), Fatal> {
        let cells = &self.out.annotations[base..];
        if self.plan.annotators.is_empty() || cells.iter().any(|&c| c != NONE) {
            return Ok(());
        }
        let columns: Vec<&str> = self
            .plan
            .annotators
            .iter()
            .map(|&f| self.plan.header[f].as_str())
            .collect();
        let problem = Problem::NoAnnotation {
            columns: columns.join(", "),
        };
        Err((line, None, problem))
    }

    fn label(&mut self, cell: &[u8], line: u64, field: usize) -> Result<(), Fatal> {
        if cell.is_empty() {
            return Err((line, Some(field), Problem::EmptyLabel));
        }
        let code = self.code(cell).map_err(|p| (line, Some(field), p))?;
        self.out.labels.push(code);
        Ok(())
    }

    fn trusted(&mut self, cell: &[u8], line: u64, field: usize) -> Result<(), Fatal> {
        let code = if cell.is_empty() {
            NONE
        } else {
            self.code(cell).map_err(|p| (line, Some(field), p))?
        };
        self.out.trusted.push(code);
        Ok(())
    }

    fn origin(&mut self, cell: &[u8], line: u64, field: usize) -> Result<(), Fatal> {
        let text =
            std::str::from_utf8(cell).map_err(|_| (line, Some(field), Problem::InvalidUtf8))?;
        let origin = Origin::parse(text).ok_or_else(|| {
            (
                line,
                Some(field),
                Problem::UnknownOrigin {
                    found: shorten(text),
                },
            )
        })?;
        self.out.origins.push(origin);
        Ok(())
    }

    /// A source cell as a code; an empty cell is the source named "" (the table's
    /// assembly names it and warns).
    fn source(&mut self, cell: &[u8], line: u64, field: usize) -> Result<(), Fatal> {
        let code = match self.source_codes.get(cell) {
            Some(&code) => code,
            None => {
                let name = std::str::from_utf8(cell)
                    .map_err(|_| (line, Some(field), Problem::InvalidUtf8))?;
                let code = self.out.source_names.len() as u32;
                self.out.source_names.push(name.trim().to_string());
                self.source_codes.insert(cell.to_vec(), code);
                code
            }
        };
        self.out.sources.push(code);
        Ok(())
    }

    fn id(&mut self, cell: &[u8], line: u64, field: usize) -> Result<(), Fatal> {
        let id =
            std::str::from_utf8(cell).map_err(|_| (line, Some(field), Problem::InvalidUtf8))?;
        self.out.ids.push_str(id);
        self.out.id_ends.push(self.out.ids.len());
        self.out.row_lines.push(line);
        Ok(())
    }

    fn row(&mut self, record: &impl Fields, line: u64) -> Result<(), Fatal> {
        let expected = self.plan.header.len();
        if record.count() != expected {
            return Err((line, None, ragged(expected, record.count())));
        }
        self.roles(record, line)?;
        let base = self.values.start_row(self.plan.numeric.len());
        for (slot, &field) in self.plan.numeric.iter().enumerate() {
            let value = parse_number(record.field(field), line, &mut self.out.slots[slot]);
            self.values.set(base + slot, value);
        }
        self.out.rows += 1;
        Ok(())
    }

    /// The cells of every role but the numeric columns.
    fn roles(&mut self, record: &impl Fields, line: u64) -> Result<(), Fatal> {
        if let Some(label_field) = self.plan.label {
            self.label(record.field(label_field), line, label_field)?;
        }
        if let Some(field) = self.plan.trusted {
            self.trusted(record.field(field), line, field)?;
        }
        if let Some(field) = self.plan.origin {
            self.origin(record.field(field), line, field)?;
        }
        if let Some(field) = self.plan.source {
            self.source(record.field(field), line, field)?;
        }
        let annotation_base = self.out.annotations.len();
        for &field in &self.plan.annotators {
            let code = self.annotation(record.field(field), line, field)?;
            self.out.annotations.push(code);
        }
        self.check_annotated(annotation_base, line)?;
        if let Some(field) = self.plan.id {
            self.id(record.field(field), line, field)?;
        }
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
    let parsed = parse_f64(text);
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
    fn plain_and_quoted_paths_read_the_same_rows() {
        let p = plan("id,a,label");
        let plain = parse_block(b"r1,1,x\r\n\nr2,2.5,y\nr3,3,x", b',', &p);
        let quoted = parse_block(b"\"r1\",1,x\r\n\nr2,2.5,y\nr3,3,x", b',', &p);
        assert_eq!(
            (plain.rows, &plain.ids, &plain.labels),
            (3, &"r1r2r3".to_string(), &vec![0, 1, 0])
        );
        assert_eq!(
            (quoted.rows, &quoted.ids, &quoted.labels),
            (plain.rows, &plain.ids, &plain.labels)
        );
        assert_eq!(plain.values, quoted.values);
        assert_eq!(plain.row_lines, vec![1, 3, 4]);
        assert_eq!(quoted.row_lines, plain.row_lines);
    }

    #[test]
    fn simply_quoted_lines_read_as_the_csv_crate_reads_them() {
        // Seeded random blocks over the bytes that matter (a fixed congruential stream):
        // the plain split with simple quotes removed must give the `csv` crate's rows,
        // or hand the block to it.
        let p = plan("id,label,trusted");
        let mut seed = 11u64;
        let mut next = |n: usize| {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1);
            (seed >> 33) as usize % n
        };
        // Mostly fields a simple split reads; now and then one it must not.
        let simple: [&[u8]; 4] = [b"a", b"bb", b"\"a\"", b"\"\""];
        let hard: [&[u8]; 7] = [
            b" \"b\" ",
            b"\"a,b\"",
            b"\"a\"\"b\"",
            b"\"a\nb\"",
            b"a\"b",
            b"\"a\"b",
            b"",
        ];
        let mut dequoted = 0;
        for _ in 0..2000 {
            let mut block: Vec<u8> = Vec::new();
            for _ in 0..5 {
                let fields = if next(30) == 0 { 2 + 2 * next(2) } else { 3 };
                for f in 0..fields {
                    if f > 0 {
                        block.push(b',');
                    }
                    let field = match next(20) {
                        0 => hard[next(hard.len())],
                        _ => simple[next(simple.len())],
                    };
                    block.extend_from_slice(field);
                }
                block.extend_from_slice([&b"\n"[..], b"\r\n", b"\n\n"][next(3)]);
            }
            let lines = newlines(&block);
            let mut fast = BlockParser::new(&p, &block, lines, RowValues::new(&mut []));
            if parse_plain(&block, b',', &mut fast, true) != Ok(false) {
                dequoted += 1;
            }
            let mut reference = BlockParser::new(&p, &block, lines, RowValues::new(&mut []));
            let reference_outcome = parse_quoted(&block, b',', &mut reference);
            let mixed = parse_block(&block, b',', &p);
            let text = String::from_utf8_lossy(&block);
            // A block with a problem is refused at the same line (which problem is named
            // first, a ragged row or an empty label in it, may differ between the paths,
            // as it did before quotes were read on the plain one).
            let line = |fatal: Option<&Fatal>| fatal.map(|f| f.0);
            let reference_fatal = reference_outcome.err();
            assert_eq!(
                line(mixed.fatal.as_ref()),
                line(reference_fatal.as_ref()),
                "{text:?}"
            );
            if mixed.fatal.is_some() {
                continue;
            }
            let out = &reference.out;
            assert_eq!(
                (
                    mixed.rows,
                    &mixed.ids,
                    &mixed.labels,
                    &mixed.trusted,
                    &mixed.names
                ),
                (out.rows, &out.ids, &out.labels, &out.trusted, &out.names),
                "{text:?}"
            );
            assert_eq!(mixed.row_lines, out.row_lines, "{text:?}");
        }
        assert!(
            dequoted > 100,
            "the fast path must be exercised: {dequoted}"
        );
        let mut out = Vec::new();
        assert!(unquote_simple(b"\"a\",b,\"\"", b',', &mut out));
        assert_eq!(out, b"a,b,");
        for line in [&b"\"a,b\""[..], b"a\"b", b"\"a\"\"b\"", b"\"", b"\"a\" "] {
            assert!(!unquote_simple(line, b',', &mut out), "{line:?}");
        }
    }

    #[test]
    fn nan_and_inf_are_flagged() {
        let p = plan("a,label");
        let out = parse_block(b"NaN,x\ninf,y\n", b',', &p);
        assert_eq!(out.slots[0].first_nonfinite, Some((1, "NaN".into())));
        assert_eq!(out.slots[0].values, 2);
    }
}
