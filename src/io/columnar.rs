//! Columnar files (Parquet, Arrow IPC / Feather): which format a path holds, and reading
//! a file's stored parts (Parquet row groups, Arrow record batches) with only the columns
//! a job needs. What the columns mean is the callers' business
//! ([`super::table_arrow`], [`super::probs_arrow`]).

use std::fs::File;
use std::io::BufReader;
use std::path::{Path, PathBuf};

use arrow_array::RecordBatch;
use arrow_schema::SchemaRef;
use parquet::arrow::arrow_reader::{
    ArrowReaderMetadata, ArrowReaderOptions, ParquetRecordBatchReaderBuilder,
};
use parquet::arrow::ProjectionMask;

use super::ipc_check::check_ipc_layout;
use super::table_merge::PartMap;
use crate::error::{Error, Location, Problem, Result};

/// Rows decoded at a time: large enough to amortise per-batch work, small enough that a
/// batch of 32 f64 columns stays near 16 MiB.
pub(crate) const BATCH_ROWS: usize = 64 * 1024;

/// How a table or probability file is stored, chosen by its extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Format {
    /// Delimited text (CSV, TSV); also `.npy` for probabilities.
    Text,
    /// Apache Parquet (`.parquet`, `.pq`).
    Parquet,
    /// Arrow IPC file format, which Feather v2 is (`.arrow`, `.feather`, `.ipc`).
    ArrowIpc,
}

impl Format {
    /// The format a path's extension names; anything else is text.
    pub fn of(path: &Path) -> Format {
        let extension = path
            .extension()
            .and_then(|e| e.to_str())
            .map(str::to_ascii_lowercase);
        match extension.as_deref() {
            Some("parquet" | "pq") => Format::Parquet,
            Some("arrow" | "feather" | "ipc") => Format::ArrowIpc,
            _ => Format::Text,
        }
    }

    /// The format's name in messages.
    pub fn name(self) -> &'static str {
        match self {
            Format::Text => "CSV",
            Format::Parquet => "Parquet",
            Format::ArrowIpc => "Arrow IPC",
        }
    }

    /// True for Parquet and Arrow IPC.
    pub fn is_columnar(self) -> bool {
        self != Format::Text
    }
}

/// A columnar file opened for reading: its schema and where its parts start.
pub(crate) struct ColumnarFile {
    path: PathBuf,
    format: Format,
    /// Column names and types.
    pub(crate) schema: SchemaRef,
    /// Rows of each part (known up front for Parquet, from its footer).
    pub(crate) parts: PartMap,
    rows: usize,
    parquet: Option<ArrowReaderMetadata>,
}

impl ColumnarFile {
    /// Opens `path` as `format` (Parquet or Arrow IPC) and reads its footer.
    pub(crate) fn open(path: &Path, format: Format) -> Result<Self> {
        let file = open_file(path)?;
        match format {
            Format::Parquet => {
                let meta = ArrowReaderMetadata::load(&file, ArrowReaderOptions::new())
                    .map_err(|e| unreadable(path, format, e))?;
                let mut starts = Vec::new();
                let mut rows = 0usize;
                for group in meta.metadata().row_groups() {
                    starts.push(rows);
                    rows += usize::try_from(group.num_rows()).unwrap_or(0);
                }
                Ok(ColumnarFile {
                    path: path.to_path_buf(),
                    format,
                    schema: meta.schema().clone(),
                    parts: PartMap {
                        kind: "row group",
                        starts,
                    },
                    rows,
                    parquet: Some(meta),
                })
            }
            _ => {
                let mut file = file;
                // Unknown free memory: a bound no real buffer reaches on this kind of machine.
                let limit = crate::data::footprint::available_bytes().unwrap_or(1 << 40);
                check_ipc_layout(&mut file, limit)
                    .map_err(|detail| unreadable(path, Format::ArrowIpc, detail))?;
                let reader = arrow_ipc::reader::FileReader::try_new(BufReader::new(file), None)
                    .map_err(|e| unreadable(path, Format::ArrowIpc, e))?;
                Ok(ColumnarFile {
                    path: path.to_path_buf(),
                    format: Format::ArrowIpc,
                    schema: reader.schema(),
                    parts: PartMap {
                        kind: "record batch",
                        starts: Vec::new(),
                    },
                    rows: 0,
                    parquet: None,
                })
            }
        }
    }

    /// Column names in file order.
    pub(crate) fn header(&self) -> Vec<String> {
        self.schema
            .fields()
            .iter()
            .map(|f| f.name().clone())
            .collect()
    }

    /// Data rows, when the footer says (Parquet); 0 for Arrow IPC until read.
    pub(crate) fn rows(&self) -> usize {
        self.rows
    }

    /// Parts whose row counts are known up front (Parquet row groups), so they can be
    /// read in any order; `None` for Arrow IPC, read in order by [`Self::batches`].
    pub(crate) fn known_parts(&self) -> Option<usize> {
        self.parquet
            .as_ref()
            .map(|meta| meta.metadata().num_row_groups())
    }

    /// The batches of Parquet row group `index`, with the columns `fields` (file order).
    /// Each call opens the file anew, so parts read on several threads do not share a
    /// file offset.
    pub(crate) fn read_row_group(
        &self,
        index: usize,
        fields: &[usize],
    ) -> Result<Vec<RecordBatch>> {
        let meta = self
            .parquet
            .clone()
            .ok_or_else(|| Error::Internal("row groups of a file that is not Parquet".into()))?;
        let file = open_file(&self.path)?;
        let mask = ProjectionMask::roots(meta.parquet_schema(), fields.iter().copied());
        let at_part = |e: parquet::errors::ParquetError| self.part_error(index, e.to_string());
        let reader = ParquetRecordBatchReaderBuilder::new_with_metadata(file, meta)
            .with_projection(mask)
            .with_row_groups(vec![index])
            .with_batch_size(BATCH_ROWS)
            .build()
            .map_err(at_part)?;
        reader
            .map(|batch| batch.map_err(|e| self.part_error(index, e.to_string())))
            .collect()
    }

    /// Every batch of the file in order, with the columns `fields` (file order): the
    /// Parquet row groups one after another, or the Arrow IPC record batches. For readers
    /// that go through a file once; the table reader splits Parquet row groups across
    /// cores instead ([`Self::read_row_group`]).
    pub(crate) fn batches<'s>(
        &'s self,
        fields: &'s [usize],
    ) -> Result<Box<dyn Iterator<Item = Result<RecordBatch>> + 's>> {
        let Some(groups) = self.known_parts() else {
            return Ok(Box::new(self.ipc_batches(fields)?));
        };
        Ok(Box::new((0..groups).flat_map(move |group| {
            let (batches, failed) = match self.read_row_group(group, fields) {
                Ok(batches) => (batches, None),
                Err(e) => (Vec::new(), Some(e)),
            };
            batches.into_iter().map(Ok).chain(failed.map(Err))
        })))
    }

    /// The record batches of an Arrow IPC file in order, with the columns `fields`.
    fn ipc_batches(
        &self,
        fields: &[usize],
    ) -> Result<impl Iterator<Item = Result<RecordBatch>> + '_> {
        let file = open_file(&self.path)?;
        let reader =
            arrow_ipc::reader::FileReader::try_new(BufReader::new(file), Some(fields.to_vec()))
                .map_err(|e| unreadable(&self.path, self.format, e))?;
        Ok(reader
            .enumerate()
            .map(|(i, batch)| batch.map_err(|e| self.part_error(i, e.to_string()))))
    }

    fn part_error(&self, index: usize, detail: String) -> Error {
        let detail = format!("{} {index}: {detail}", self.parts.kind);
        unreadable(&self.path, self.format, detail)
    }
}

/// Runs `read`, a decode of `path`, turning a panic inside the arrow-rs decoders into the
/// file's "not readable" error: they assume well-formed bytes, and randomly mutated
/// Feather files made them panic in 38 of 300 tries (Parquet: 1 of 700).
pub(crate) fn guarded<T>(
    path: &Path,
    format: Format,
    read: impl FnOnce() -> Result<T>,
) -> Result<T> {
    match std::panic::catch_unwind(std::panic::AssertUnwindSafe(read)) {
        Ok(result) => result,
        Err(payload) => {
            let text = payload
                .downcast_ref::<String>()
                .map(String::as_str)
                .or_else(|| payload.downcast_ref::<&str>().copied())
                .unwrap_or("no message");
            let detail = format!("the decoder stopped on malformed data ({text})");
            Err(unreadable(path, format, detail))
        }
    }
}

fn open_file(path: &Path) -> Result<File> {
    File::open(path).map_err(|source| Error::Read {
        path: path.to_path_buf(),
        source,
    })
}

/// The file (or one of its parts) cannot be decoded: not this format, truncated, or
/// using something the reader lacks.
pub(crate) fn unreadable(path: &Path, format: Format, detail: impl ToString) -> Error {
    Error::input(
        Location::file(path),
        Problem::Columnar {
            format: format.name(),
            detail: detail.to_string(),
        },
    )
}

/// A columnar file's whole table as CSV text (every column, nulls empty, numbers in
/// their shortest round-trip form), for readers of small hand-edited files (a reviewed
/// worklist) that parse CSV records. Line `n` of the text is the file's row `n − 2`
/// ([`row_of_line`]).
pub(crate) fn as_csv_text(path: &Path, format: Format) -> Result<Vec<u8>> {
    let file = ColumnarFile::open(path, format)?;
    let header = file.header();
    let fields: Vec<usize> = (0..header.len()).collect();
    let mut out = csv::Writer::from_writer(Vec::new());
    let csv_error = |e: csv::Error| Error::Internal(format!("CSV text in memory: {e}"));
    out.write_record(&header).map_err(csv_error)?;
    for batch in file.batches(&fields)? {
        let batch = batch?;
        let cells: Vec<Vec<String>> = batch
            .columns()
            .iter()
            .map(|column| column_as_text(column.as_ref()))
            .collect();
        for row in 0..batch.num_rows() {
            out.write_record(cells.iter().map(|c| c[row].as_str()))
                .map_err(csv_error)?;
        }
    }
    out.into_inner()
        .map_err(|e| Error::Internal(format!("CSV text in memory: {e}")))
}

/// A column's cells as text: text-like columns as they read, numbers in shortest form.
fn column_as_text(array: &dyn arrow_array::Array) -> Vec<String> {
    if let Some(text) = super::arrow_cells::Text::of(array) {
        let mut buf = Vec::new();
        return (0..array.len())
            .map(|i| {
                text.cell(i, &mut buf);
                String::from_utf8_lossy(&buf).into_owned()
            })
            .collect();
    }
    let mut cells = vec![String::new(); array.len()];
    super::arrow_cells::for_each_number(array, |i, v| cells[i] = v.to_string());
    cells
}

/// Turns a location on a line of [`as_csv_text`]'s text back into the file's row.
pub(crate) fn row_of_line(error: Error) -> Error {
    match error {
        Error::Input(mut input) => {
            if let Some(line) = input.location.line.take() {
                let row = line.saturating_sub(2) as usize;
                input.location.row = Some(row);
            }
            Error::Input(input)
        }
        other => other,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats_follow_the_extension() {
        assert_eq!(Format::of(Path::new("a/b.parquet")), Format::Parquet);
        assert_eq!(Format::of(Path::new("b.PQ")), Format::Parquet);
        assert_eq!(Format::of(Path::new("b.feather")), Format::ArrowIpc);
        assert_eq!(Format::of(Path::new("b.arrow")), Format::ArrowIpc);
        assert_eq!(Format::of(Path::new("b.csv")), Format::Text);
        assert_eq!(Format::of(Path::new("b")), Format::Text);
    }

    #[test]
    fn a_file_that_is_not_parquet_is_refused_with_its_name() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.parquet");
        std::fs::write(&path, "x,label\n1,a\n").unwrap();
        let message = ColumnarFile::open(&path, Format::Parquet)
            .err()
            .unwrap()
            .to_string();
        assert!(
            message.contains("t.parquet: not a readable Parquet file"),
            "{message}"
        );
        let feather = dir.path().join("t.feather");
        std::fs::write(&feather, "x,label\n1,a\n").unwrap();
        let message = ColumnarFile::open(&feather, Format::ArrowIpc)
            .err()
            .unwrap()
            .to_string();
        assert!(
            message.contains("not a readable Arrow IPC file"),
            "{message}"
        );
    }
}
