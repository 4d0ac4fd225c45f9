//! The files a streamed run reads part by part, whatever their format: a columnar file's
//! stored parts (Parquet row groups, Arrow IPC record batches) or a delimited text file's
//! blocks of records. [`super::stream`] reads both through this one face.

use std::path::Path;

use arrow_array::RecordBatch;

use super::columnar::{ColumnarFile, Format};
use super::csv_stream::CsvFile;
use crate::error::{Error, Location, Result};

/// A table or probability file opened for streaming.
pub(crate) enum StreamFile {
    Columnar(ColumnarFile),
    Csv(CsvFile),
}

impl StreamFile {
    /// Opens `path` by its extension (Parquet, Arrow IPC, else delimited text with
    /// `delimiter`). A `.npy` array is refused: its rows can be read in parts, but it
    /// holds no class names to check the columns by.
    pub(crate) fn open(path: &Path, delimiter: u8) -> Result<Self> {
        let format = Format::of(path);
        if format.is_columnar() {
            return Ok(StreamFile::Columnar(ColumnarFile::open(path, format)?));
        }
        let npy = path
            .extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("npy"));
        if npy {
            return Err(Error::Usage(format!(
                "a streamed run reads probabilities from CSV, Parquet or Arrow IPC, and {} is \
                 a .npy array (write them with class names, e.g. as Parquet, or give the run \
                 enough memory to load the table whole)",
                path.display()
            )));
        }
        Ok(StreamFile::Csv(CsvFile::open(path, delimiter)?))
    }

    /// Column names in file order.
    pub(crate) fn header(&self) -> Vec<String> {
        match self {
            StreamFile::Columnar(f) => f.header(),
            StreamFile::Csv(f) => f.header().to_vec(),
        }
    }

    /// The row count, when the file says it before it is read (a Parquet footer).
    pub(crate) fn known_rows(&self) -> Option<usize> {
        match self {
            StreamFile::Columnar(f) => f.known_parts().map(|_| f.rows()),
            StreamFile::Csv(_) => None,
        }
    }

    /// Every row in order as record batches holding the columns `fields` (ascending);
    /// in a text file, `text` fields are read as strings and the others as numbers.
    pub(crate) fn batches<'s>(
        &'s self,
        fields: &'s [usize],
        text: &'s [usize],
    ) -> Result<Box<dyn Iterator<Item = Result<RecordBatch>> + 's>> {
        match self {
            StreamFile::Columnar(f) => f.batches(fields),
            StreamFile::Csv(f) => Ok(Box::new(f.batches(fields, text)?)),
        }
    }

    /// Where data row `row` of the file at `path` is: its line in a text file (when
    /// known), its row group and offset in a Parquet file, else its row number.
    pub(crate) fn locate(&self, path: &Path, row: usize) -> Location {
        match self {
            StreamFile::Columnar(f) if f.known_parts().is_some() => {
                Location::row_in_part(path, row, f.parts.part_of(row))
            }
            StreamFile::Columnar(_) => Location::row(path, row),
            StreamFile::Csv(f) => f.locate(row),
        }
    }
}
