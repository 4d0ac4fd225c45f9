//! The merged review copy of a columnar table: every column copied as stored, the
//! verdicts put into the trusted column and their origins into the origin column (both
//! added as text columns when the table has none), written as Parquet. The rules are
//! those of the CSV copy ([`super::review::write_merged`]): a row that already had a
//! trusted label keeps its origin.

use std::io::Write;
use std::path::Path;
use std::sync::Arc;

use arrow_array::builder::StringBuilder;
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use rustc_hash::FxHashMap as HashMap;

use super::arrow_cells::Text;
use super::columnar::{guarded, ColumnarFile, Format};
use super::review::{merged_cells, merged_column_names, Review};
use super::table_out::parquet_writer;
use crate::data::origin::Origin;
use crate::error::{Error, Location, Problem, Result};
use crate::io::review_table::ReviewTable;

/// Refuses a merged copy whose name promises another format than the table's: a copy
/// keeps every column as stored, so a CSV table's copy is CSV and a Parquet or Feather
/// table's copy is Parquet.
pub fn check_merged_target(data: &dyn ReviewTable, out: &Path) -> Result<()> {
    let columnar = Format::of(data.path()).is_columnar();
    let wants = Format::of(out);
    if columnar == (wants == Format::Parquet) && wants != Format::ArrowIpc {
        return Ok(());
    }
    let detail = if columnar {
        "the merged copy of a columnar table is Parquet; name it with .parquet".to_string()
    } else {
        "the merged copy of a CSV table is CSV; name it with .csv or .tsv".to_string()
    };
    Err(Error::input(
        Location::file(out),
        Problem::Review { detail },
    ))
}

/// Writes the merged copy of `data` (a Parquet or Arrow IPC table) to `out` as Parquet.
pub fn write_merged_columnar(
    out: &mut (dyn Write + Send),
    data: &dyn ReviewTable,
    review: &Review,
) -> std::io::Result<()> {
    let format = Format::of(data.path());
    let copy = || copy_merged(out, data, review).map_err(|e| Error::Internal(e.to_string()));
    guarded(data.path(), format, copy).map_err(std::io::Error::other)
}

fn copy_merged(
    out: &mut (dyn Write + Send),
    data: &dyn ReviewTable,
    review: &Review,
) -> std::io::Result<()> {
    let file =
        ColumnarFile::open(data.path(), Format::of(data.path())).map_err(std::io::Error::other)?;
    let plan = Plan::new(data, &file.schema);
    let mut writer = parquet_writer(out, plan.schema.clone())?;
    let verdicts = merged_cells(data, review);
    let fields: Vec<usize> = (0..file.schema.fields().len()).collect();
    let mut first_row = 0;
    for batch in file.batches(&fields).map_err(std::io::Error::other)? {
        let batch = batch.map_err(std::io::Error::other)?;
        let merged = plan.merge(&batch, first_row, data, &verdicts)?;
        first_row += batch.num_rows();
        writer.write(&merged).map_err(std::io::Error::other)?;
    }
    writer.close().map_err(std::io::Error::other)?;
    Ok(())
}

/// Where the trusted and origin columns are (or go) in the copy.
struct Plan {
    schema: SchemaRef,
    trusted: usize,
    origin: usize,
    /// Columns of the table as stored.
    stored: usize,
}

impl Plan {
    fn new(data: &dyn ReviewTable, stored: &SchemaRef) -> Self {
        let (trusted_name, origin_name) = merged_column_names(data);
        let mut fields: Vec<Field> = stored.fields().iter().map(|f| f.as_ref().clone()).collect();
        let mut place = |name: &str| match fields.iter().position(|f| f.name() == name) {
            Some(i) => {
                fields[i] = Field::new(name, DataType::Utf8, true);
                i
            }
            None => {
                fields.push(Field::new(name, DataType::Utf8, true));
                fields.len() - 1
            }
        };
        let trusted = place(&trusted_name);
        let origin = place(&origin_name);
        Plan {
            schema: Arc::new(Schema::new(fields)),
            trusted,
            origin,
            stored: stored.fields().len(),
        }
    }

    /// The batch with its trusted and origin columns rebuilt; `first_row` is the data row
    /// of its first row.
    fn merge(
        &self,
        batch: &RecordBatch,
        first_row: usize,
        data: &dyn ReviewTable,
        verdicts: &HashMap<usize, (usize, Origin)>,
    ) -> std::io::Result<RecordBatch> {
        let stored_text =
            |column: usize| (column < self.stored).then(|| batch.column(column).as_ref());
        let old_trusted = stored_text(self.trusted).and_then(Text::of);
        let old_origin = stored_text(self.origin).and_then(Text::of);
        let mut trusted = StringBuilder::new();
        let mut origin = StringBuilder::new();
        let mut cell = Vec::new();
        for i in 0..batch.num_rows() {
            let row = first_row + i;
            if let Some(&(label, kept)) = verdicts.get(&row) {
                trusted.append_value(&data.classes()[label]);
                origin.append_value(kept.name());
                continue;
            }
            copy_cell(old_trusted.as_ref(), i, &mut cell, &mut trusted);
            copy_cell(old_origin.as_ref(), i, &mut cell, &mut origin);
        }
        let mut columns: Vec<ArrayRef> = batch.columns().to_vec();
        for (at, built) in [(self.trusted, trusted), (self.origin, origin)] {
            let mut built = built;
            let array: ArrayRef = Arc::new(built.finish());
            if at < columns.len() {
                columns[at] = array;
            } else {
                columns.push(array);
            }
        }
        RecordBatch::try_new(self.schema.clone(), columns).map_err(std::io::Error::other)
    }
}

/// Appends a stored text cell (null stays null, and so does an absent column).
fn copy_cell(text: Option<&Text>, i: usize, cell: &mut Vec<u8>, to: &mut StringBuilder) {
    match text {
        Some(text) => {
            text.cell(i, cell);
            if cell.is_empty() {
                to.append_null();
            } else {
                to.append_value(String::from_utf8_lossy(cell));
            }
        }
        None => to.append_null(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Dataset;
    use crate::io::review::Verdict;
    use crate::io::table_out::{CellKind, OutColumn, TableWriter};
    use crate::workflow::review::with_verdicts;

    /// The table of the CSV copy's test (`workflow::review`), stored as Parquet.
    fn parquet_table(path: &Path, with_trusted: bool) {
        let mut columns = vec![
            OutColumn::new("id", CellKind::Text),
            OutColumn::new("x", CellKind::Float),
            OutColumn::new("label", CellKind::Text),
        ];
        if with_trusted {
            columns.push(OutColumn::new("trusted", CellKind::Text));
            columns.push(OutColumn::new("trusted_origin", CellKind::Text));
        }
        let rows = [
            ["r0", "0", "cat", "", ""],
            ["r1", "1", "dog", "cat", ""],
            ["r2", "2", "cat", "", ""],
            ["r3", "3", "dog", "dog", "review"],
            ["r4", "4", "cat", "", ""],
        ];
        let mut bytes = Vec::new();
        let mut writer = TableWriter::new(&mut bytes, Format::Parquet, &columns).unwrap();
        for row in rows {
            writer.row(&row[..columns.len()]).unwrap();
        }
        writer.finish().unwrap();
        std::fs::write(path, bytes).unwrap();
    }

    fn merged_back(with_trusted: bool) -> (Dataset, Dataset, Vec<Verdict>) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("d.parquet");
        parquet_table(&path, with_trusted);
        let options = crate::data::TableOptions::default();
        let data = Dataset::load(&path, &options).unwrap();
        let verdict = |row, label, origin| Verdict {
            row,
            label,
            line: 0,
            origin,
        };
        let verdicts = vec![
            verdict(0, 1, Origin::Review),
            verdict(2, 0, Origin::Control),
            verdict(1, 1, Origin::Review),
            verdict(3, 0, Origin::Control),
        ];
        let review = Review {
            verdicts: verdicts.clone(),
            not_reviewed: 0,
        };
        let merged = dir.path().join("m.parquet");
        check_merged_target(&data, &merged).unwrap();
        crate::io::write_atomic(&merged, |w| write_merged_columnar(w, &data, &review)).unwrap();
        let back = Dataset::load(&merged, &options).unwrap();
        (data, back, verdicts)
    }

    #[test]
    fn verdicts_added_in_memory_equal_the_parquet_copy_read_back() {
        for with_trusted in [true, false] {
            let (data, back, verdicts) = merged_back(with_trusted);
            let expected = with_verdicts(&data, &verdicts);
            assert_eq!(Some(&expected.labels), back.trusted.as_ref());
            let origins: Vec<Origin> = (0..back.rows()).map(|r| back.origin(r)).collect();
            assert_eq!(expected.origins, origins);
            assert_eq!(back.features, data.features, "other columns are copied");
            assert_eq!(back.ids, data.ids);
        }
    }

    #[test]
    fn the_copy_keeps_the_table_format() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("d.parquet");
        parquet_table(&path, false);
        let data = Dataset::load(&path, &crate::data::TableOptions::default()).unwrap();
        assert!(check_merged_target(&data, Path::new("m.csv")).is_err());
        assert!(check_merged_target(&data, Path::new("m.feather")).is_err());
        let csv = Dataset::from_csv_text("x,label\n1,a\n2,b\n");
        assert!(check_merged_target(&csv, Path::new("m.parquet")).is_err());
        assert!(check_merged_target(&csv, Path::new("m.csv")).is_ok());
    }
}
