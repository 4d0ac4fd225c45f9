//! The Parquet files of a table: which files (one, or a folder's in name order), their
//! row groups with the table row each starts at (from the footers), and how the runs of
//! row groups are cut into partitions.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use datafusion::arrow::datatypes::{DataType, Field, Schema, SchemaRef};
use datafusion::common::{DataFusionError, Result};
use datafusion::parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use serde::{Deserialize, Serialize};

/// The name of the table-row column.
pub const ROW_COLUMN: &str = "__row";

/// One row group of one file, and the table row of its first row.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Piece {
    /// The file.
    pub path: PathBuf,
    /// Its row group.
    pub row_group: usize,
    /// Table row of the row group's first row.
    pub first_row: u64,
    /// Rows in it.
    pub rows: u64,
}

/// The files of a table, their row groups and the schema they share.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Files {
    /// The table as given (a file or a folder), for messages.
    pub given: PathBuf,
    /// Every row group, in table order.
    pub pieces: Vec<Piece>,
    /// Rows in all files.
    pub rows: u64,
}

impl Files {
    /// The Parquet files at `path` (one file, or a folder's `*.parquet` in name order)
    /// and their row groups, from the footers.
    pub fn open(path: &Path) -> Result<(Self, SchemaRef)> {
        let paths = parquet_paths(path)?;
        let mut pieces = Vec::new();
        let mut schema: Option<SchemaRef> = None;
        let mut first_row = 0u64;
        for file in &paths {
            let builder = reader(file)?;
            let this = builder.schema().clone();
            match &schema {
                None => schema = Some(this),
                Some(s) if s.fields() != this.fields() => {
                    return Err(DataFusionError::Plan(format!(
                        "{}: its columns differ from those of {} (every file of a table needs \
                         the same columns)",
                        file.display(),
                        paths[0].display()
                    )))
                }
                Some(_) => {}
            }
            for (g, group) in builder.metadata().row_groups().iter().enumerate() {
                let rows = group.num_rows() as u64;
                pieces.push(Piece {
                    path: file.clone(),
                    row_group: g,
                    first_row,
                    rows,
                });
                first_row += rows;
            }
        }
        let schema = schema.ok_or_else(|| {
            DataFusionError::Plan(format!("{}: no Parquet file found", path.display()))
        })?;
        let files = Files {
            given: path.to_path_buf(),
            pieces,
            rows: first_row,
        };
        Ok((files, schema))
    }

    /// The pieces split into at most `parts` runs of about equal rows, in table order.
    pub(crate) fn partitions(&self, parts: usize) -> Vec<Vec<Piece>> {
        let parts = parts.clamp(1, self.pieces.len().max(1));
        let per_part = self.rows.div_ceil(parts as u64).max(1);
        let mut out: Vec<Vec<Piece>> = vec![Vec::new()];
        let mut in_part = 0;
        for piece in &self.pieces {
            if in_part >= per_part && out.len() < parts {
                out.push(Vec::new());
                in_part = 0;
            }
            in_part += piece.rows;
            out.last_mut()
                .expect("one part at least")
                .push(piece.clone());
        }
        out
    }
}

pub(crate) fn reader(file: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>> {
    let opened =
        File::open(file).map_err(|e| DataFusionError::Plan(format!("{}: {e}", file.display())))?;
    ParquetRecordBatchReaderBuilder::try_new(opened)
        .map_err(|e| DataFusionError::Plan(format!("{}: {e}", file.display())))
}

/// `path` itself, or the `.parquet` files in the folder `path`, sorted by name.
fn parquet_paths(path: &Path) -> Result<Vec<PathBuf>> {
    if !path.is_dir() {
        return Ok(vec![path.to_path_buf()]);
    }
    let listing = std::fs::read_dir(path)
        .map_err(|e| DataFusionError::Plan(format!("{}: {e}", path.display())))?;
    let mut paths = Vec::new();
    for entry in listing {
        let entry = entry.map_err(|e| DataFusionError::Plan(format!("{}: {e}", path.display())))?;
        let p = entry.path();
        if p.extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("parquet"))
            && p.is_file()
        {
            paths.push(p);
        }
    }
    paths.sort();
    Ok(paths)
}

/// The table's schema: the files' columns, then `__row`.
pub fn with_row_column(file_schema: &Schema) -> SchemaRef {
    let mut fields: Vec<Field> = file_schema
        .fields()
        .iter()
        .map(|f| f.as_ref().clone())
        .collect();
    fields.push(Field::new(ROW_COLUMN, DataType::UInt64, false));
    Arc::new(Schema::new(fields))
}

/// The schema of the Parquet file `path`.
pub fn file_schema(path: &Path) -> Result<SchemaRef> {
    Ok(reader(path)?.schema().clone())
}
