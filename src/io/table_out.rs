//! The tables flipmend writes (worklists and their keys, probabilities, predictions), as
//! CSV or as Parquet by the target's extension. A writer names its columns and their
//! kinds once, then hands over rows of text cells, so one function serves both formats;
//! the Parquet sink stores each column in its declared type (integers as Int64, numbers
//! as Float64, an empty cell as null), in row groups of [`ROW_GROUP_ROWS`].

use std::io::Write;
use std::sync::Arc;

use arrow_array::builder::{Float64Builder, Int64Builder, StringBuilder};
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;

use super::columnar::Format;

/// Rows per Parquet row group written: big enough for good compression and few
/// footers, small enough that a reader can split a million-row file across cores.
pub const ROW_GROUP_ROWS: usize = 128 * 1024;

/// What a column holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CellKind {
    /// Any text (names, ids).
    Text,
    /// Whole numbers (ranks, row numbers).
    Int,
    /// Real numbers (scores, probabilities, features).
    Float,
}

/// One output column.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OutColumn {
    /// Header name.
    pub name: String,
    /// What its cells hold.
    pub kind: CellKind,
}

impl OutColumn {
    /// A column named `name` holding `kind`.
    pub fn new(name: impl Into<String>, kind: CellKind) -> Self {
        OutColumn {
            name: name.into(),
            kind,
        }
    }
}

/// Writes one table as CSV or Parquet.
pub enum TableWriter<'w> {
    /// Comma-separated text.
    Csv(Box<csv::Writer<&'w mut (dyn Write + Send)>>),
    /// Parquet.
    Parquet(Box<ParquetSink<'w>>),
}

impl<'w> TableWriter<'w> {
    /// Starts a table of `columns` in `format` (anything but Parquet is comma-separated
    /// text).
    pub fn new(
        out: &'w mut (dyn Write + Send),
        format: Format,
        columns: &[OutColumn],
    ) -> std::io::Result<Self> {
        if format == Format::Parquet {
            return Ok(TableWriter::Parquet(Box::new(ParquetSink::new(
                out, columns,
            )?)));
        }
        let mut csv = csv::Writer::from_writer(out);
        csv.write_record(columns.iter().map(|c| c.name.as_str()))?;
        Ok(TableWriter::Csv(Box::new(csv)))
    }

    /// Appends one row; `cells` line up with the columns.
    pub fn row<S: AsRef<str>>(&mut self, cells: &[S]) -> std::io::Result<()> {
        match self {
            TableWriter::Csv(csv) => Ok(csv.write_record(cells.iter().map(|c| c.as_ref()))?),
            TableWriter::Parquet(sink) => sink.row(cells),
        }
    }

    /// Writes what is buffered and the file's footer.
    pub fn finish(self) -> std::io::Result<()> {
        match self {
            TableWriter::Csv(mut csv) => csv.flush(),
            TableWriter::Parquet(sink) => sink.finish(),
        }
    }
}

/// A column being filled.
enum Builder {
    Text(StringBuilder),
    Int(Int64Builder),
    Float(Float64Builder),
}

/// Buffers rows by column and writes a row group every [`ROW_GROUP_ROWS`] rows.
pub struct ParquetSink<'w> {
    writer: ArrowWriter<&'w mut (dyn Write + Send)>,
    schema: SchemaRef,
    builders: Vec<Builder>,
    names: Vec<String>,
    rows: usize,
}

impl<'w> ParquetSink<'w> {
    fn new(out: &'w mut (dyn Write + Send), columns: &[OutColumn]) -> std::io::Result<Self> {
        let fields: Vec<Field> = columns
            .iter()
            .map(|c| {
                let data_type = match c.kind {
                    CellKind::Text => DataType::Utf8,
                    CellKind::Int => DataType::Int64,
                    CellKind::Float => DataType::Float64,
                };
                Field::new(&c.name, data_type, true)
            })
            .collect();
        let schema = Arc::new(Schema::new(fields));
        let writer = parquet_writer(out, schema.clone())?;
        let mut sink = ParquetSink {
            writer,
            schema,
            builders: Vec::new(),
            names: columns.iter().map(|c| c.name.clone()).collect(),
            rows: 0,
        };
        sink.builders = columns.iter().map(|c| new_builder(c.kind)).collect();
        Ok(sink)
    }

    fn row<S: AsRef<str>>(&mut self, cells: &[S]) -> std::io::Result<()> {
        for ((builder, cell), name) in self.builders.iter_mut().zip(cells).zip(&self.names) {
            let cell = cell.as_ref();
            match builder {
                Builder::Text(b) => b.append_value(cell),
                Builder::Int(b) if cell.is_empty() => b.append_null(),
                Builder::Int(b) => b.append_value(cell.parse().map_err(|_| bad_cell(name, cell))?),
                Builder::Float(b) if cell.is_empty() => b.append_null(),
                Builder::Float(b) => {
                    b.append_value(cell.parse().map_err(|_| bad_cell(name, cell))?)
                }
            }
        }
        self.rows += 1;
        if self.rows == ROW_GROUP_ROWS {
            self.flush_rows()?;
        }
        Ok(())
    }

    fn flush_rows(&mut self) -> std::io::Result<()> {
        let arrays: Vec<ArrayRef> = self
            .builders
            .iter_mut()
            .map(|b| match b {
                Builder::Text(b) => Arc::new(b.finish()) as ArrayRef,
                Builder::Int(b) => Arc::new(b.finish()) as ArrayRef,
                Builder::Float(b) => Arc::new(b.finish()) as ArrayRef,
            })
            .collect();
        let batch =
            RecordBatch::try_new(self.schema.clone(), arrays).map_err(std::io::Error::other)?;
        self.writer.write(&batch).map_err(std::io::Error::other)?;
        self.rows = 0;
        Ok(())
    }

    fn finish(mut self) -> std::io::Result<()> {
        if self.rows > 0 {
            self.flush_rows()?;
        }
        self.writer.close().map_err(std::io::Error::other)?;
        Ok(())
    }
}

/// The Parquet writer of every table flipmend writes (this module's tables and the
/// merged review copy): snappy, row groups of [`ROW_GROUP_ROWS`].
pub(crate) fn parquet_writer(
    out: &mut (dyn Write + Send),
    schema: SchemaRef,
) -> std::io::Result<ArrowWriter<&mut (dyn Write + Send)>> {
    let props = WriterProperties::builder()
        .set_compression(Compression::SNAPPY)
        .set_max_row_group_row_count(Some(ROW_GROUP_ROWS))
        .build();
    ArrowWriter::try_new(out, schema, Some(props)).map_err(std::io::Error::other)
}

fn new_builder(kind: CellKind) -> Builder {
    match kind {
        CellKind::Text => Builder::Text(StringBuilder::new()),
        CellKind::Int => Builder::Int(Int64Builder::new()),
        CellKind::Float => Builder::Float(Float64Builder::new()),
    }
}

/// A cell that does not fit its declared kind: a bug in the writer, not the user's input.
fn bad_cell(column: &str, cell: &str) -> std::io::Error {
    std::io::Error::other(format!(
        "internal: the cell '{cell}' does not fit the column '{column}'"
    ))
}
