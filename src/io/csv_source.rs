//! How every CSV input is opened: one delimiter rule, one byte-order-mark rule and one
//! set of reader settings, so the table, the probabilities, the matrix, worklists, keys
//! and single columns cannot drift apart in what they accept.

use std::fs::File;
use std::io::Read;
use std::path::Path;

use crate::error::{Error, Location, Problem, Result};

/// The UTF-8 byte-order mark some spreadsheet programs put at the start of a CSV file.
pub const BOM: &[u8] = b"\xEF\xBB\xBF";

/// The delimiter of `path`: `explicit` when given, else tab for a `.tsv` extension (in any
/// case: Windows tools write `.TSV`), else comma.
pub fn delimiter_for(path: &Path, explicit: Option<u8>) -> u8 {
    explicit.unwrap_or_else(|| {
        let tsv = path
            .extension()
            .and_then(|e| e.to_str())
            .is_some_and(|e| e.eq_ignore_ascii_case("tsv"));
        if tsv {
            b'\t'
        } else {
            b','
        }
    })
}

/// The byte-order-mark rule: one mark at the very start of a file is not data and is
/// dropped; anywhere else it is kept as part of a cell.
pub fn strip_bom(file_start: &[u8]) -> &[u8] {
    file_start.strip_prefix(BOM).unwrap_or(file_start)
}

/// A reader that applies [`strip_bom`] to a stream: the mark is dropped when the stream
/// opens with it. The first bytes are looked at once, before any is passed on.
pub struct SkipBom<R> {
    inner: R,
    /// The first bytes of the stream, read while looking for the mark.
    start: [u8; 3],
    /// The part of `start` still to pass on: `start[next..end]`.
    next: usize,
    end: usize,
    looked: bool,
}

impl<R: Read> SkipBom<R> {
    /// Wraps `inner`, which must be at the start of its file.
    pub fn new(inner: R) -> Self {
        SkipBom {
            inner,
            start: [0; 3],
            next: 0,
            end: 0,
            looked: false,
        }
    }

    fn look_at_start(&mut self) -> std::io::Result<()> {
        let mut filled = 0;
        while filled < self.start.len() {
            match self.inner.read(&mut self.start[filled..]) {
                Ok(0) => break,
                Ok(n) => filled += n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        }
        self.next = filled - strip_bom(&self.start[..filled]).len();
        self.end = filled;
        self.looked = true;
        Ok(())
    }
}

impl<R: Read> Read for SkipBom<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        if !self.looked {
            self.look_at_start()?;
        }
        if self.next < self.end && !buf.is_empty() {
            let n = (self.end - self.next).min(buf.len());
            buf[..n].copy_from_slice(&self.start[self.next..self.next + n]);
            self.next += n;
            return Ok(n);
        }
        self.inner.read(buf)
    }
}

/// The settings every CSV reader shares: no header handling by the `csv` crate (each
/// caller reads the header as the first record, so its errors are located like any
/// other), rows of any length (each caller reports a ragged row in its own terms) and the
/// given delimiter. Cells are not trimmed here: callers trim where their format says so.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CsvFormat {
    /// The field delimiter.
    pub delimiter: u8,
}

impl CsvFormat {
    /// Comma-separated, whatever the file is called: for files flipmend itself writes
    /// with commas (matrix, worklists, keys), so they read back under any name.
    pub const COMMA: CsvFormat = CsvFormat { delimiter: b',' };

    /// The format of `path` (see [`delimiter_for`]).
    pub fn for_path(path: &Path, explicit: Option<u8>) -> Self {
        CsvFormat {
            delimiter: delimiter_for(path, explicit),
        }
    }

    fn builder(self) -> csv::ReaderBuilder {
        let mut builder = csv::ReaderBuilder::new();
        builder
            .has_headers(false)
            .flexible(true)
            .delimiter(self.delimiter);
        builder
    }

    /// A reader over a whole file's bytes, from its start (the mark rule applies).
    pub fn reader<R: Read>(self, file: R) -> csv::Reader<SkipBom<R>> {
        self.builder().from_reader(SkipBom::new(file))
    }

    /// A reader over bytes already cut from a file: a later block, or a first block that
    /// went through [`strip_bom`]. No mark rule: a block may start with any cell.
    pub fn slice_reader(self, bytes: &[u8]) -> csv::Reader<&[u8]> {
        self.builder().from_reader(bytes)
    }

    /// Opens `path` and returns a reader over it (see [`CsvFormat::reader`]).
    pub fn open(self, path: &Path) -> Result<csv::Reader<SkipBom<std::io::BufReader<File>>>> {
        Ok(self.reader(std::io::BufReader::new(open(path)?)))
    }
}

/// A header record's column names, trimmed; a name that is not UTF-8 is refused at line
/// 1 with its column's number.
pub(crate) fn header_names(record: &csv::ByteRecord, path: &Path) -> Result<Vec<String>> {
    record
        .iter()
        .enumerate()
        .map(|(i, cell)| {
            let name = std::str::from_utf8(cell).map_err(|_| {
                Error::input(
                    Location::line(path, 1).at_column(i, &format!("#{}", i + 1)),
                    Problem::InvalidUtf8,
                )
            })?;
            Ok(name.trim().to_string())
        })
        .collect()
}

/// Opens `path` for reading; the error names the file.
pub fn open(path: &Path) -> Result<File> {
    File::open(path).map_err(|source| Error::Read {
        path: path.to_path_buf(),
        source,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn first_record(format: CsvFormat, bytes: &[u8]) -> Vec<String> {
        let mut rdr = format.reader(bytes);
        let mut record = csv::StringRecord::new();
        assert!(rdr.read_record(&mut record).unwrap());
        record.iter().map(str::to_string).collect()
    }

    #[test]
    fn the_byte_order_mark_is_stripped_at_the_start_only() {
        let cells = first_record(CsvFormat::COMMA, b"\xEF\xBB\xBFid,x\n1,2\n");
        assert_eq!(cells, ["id", "x"]);
        let cells = first_record(CsvFormat::COMMA, "a,\u{feff}b\n".as_bytes());
        assert_eq!(cells, ["a", "\u{feff}b"], "a mark inside a row is data");
        assert_eq!(strip_bom(b"\xEF\xBB\xBF"), b"");
        assert_eq!(strip_bom(b"\xEF\xBB"), b"\xEF\xBB");
    }

    #[test]
    fn short_streams_and_tiny_buffers_lose_no_byte() {
        for text in [&b""[..], b"a", b"ab", b"abc", b"abcd", b"\xEF\xBB\xBFa"] {
            let mut reader = SkipBom::new(text);
            let mut out = Vec::new();
            let mut one = [0u8; 1];
            while reader.read(&mut one).unwrap() == 1 {
                out.push(one[0]);
            }
            assert_eq!(out, strip_bom(text));
        }
    }

    #[test]
    fn tsv_in_any_case_gives_tab() {
        assert_eq!(delimiter_for(Path::new("x.tsv"), None), b'\t');
        assert_eq!(delimiter_for(Path::new("x.TSV"), None), b'\t');
        assert_eq!(delimiter_for(Path::new("x.Tsv"), None), b'\t');
        assert_eq!(delimiter_for(Path::new("x.csv"), None), b',');
        assert_eq!(delimiter_for(Path::new("tsv"), None), b',');
        let cells = first_record(CsvFormat::for_path(Path::new("p.TSV"), None), b"a\tb\n");
        assert_eq!(cells, ["a", "b"]);
    }

    #[test]
    fn an_explicit_delimiter_wins() {
        assert_eq!(delimiter_for(Path::new("x.tsv"), Some(b';')), b';');
        assert_eq!(delimiter_for(Path::new("x.csv"), Some(b'\t')), b'\t');
        let format = CsvFormat::for_path(Path::new("x.tsv"), Some(b';'));
        assert_eq!(first_record(format, b"a;b\tc\n"), ["a", "b\tc"]);
    }
}
