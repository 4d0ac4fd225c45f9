//! Rows of a table handed over as Arrow record batches by an engine that reads the
//! files itself (a distributed run's workers), read by the rules of a streamed run: the
//! role cells through the CSV rules ([`RowParser`], as a Parquet part's are), the
//! probabilities through [`put_prob_columns`] and [`check_row_sums`]. Every row carries its
//! table row, since a worker's batches are pieces of the table in no particular order.
//!
//! The plan travels to the workers with the job ([`BatchSpec`] is serde), so every
//! worker reads the cells as the driver and the single-machine run do.

use std::path::PathBuf;

use arrow_array::cast::AsArray;
use arrow_array::types::{Int64Type, UInt64Type};
use arrow_array::{Array, ArrayRef, RecordBatch};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::arrow_cells::Text;
use super::stream::{check_row_sums, put_prob_columns};
use super::table_arrow::{roles_at, text_fields};
use super::table_chunk::{ChunkOut, RowParser, SlotStats, NONE};
use crate::data::origin::Origin;
use crate::data::roles::ColumnPlan;
use crate::error::{Error, Location, Problem, Result};

/// Which columns of the batches hold what, and the classes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BatchSpec {
    /// The table (for messages).
    pub table: PathBuf,
    /// Names of the batch's columns, in order.
    pub header: Vec<String>,
    /// Column of each row's table row (unsigned or signed 64-bit integers).
    pub row: usize,
    /// Column of the observed label.
    pub label: usize,
    /// Column of the trusted label, if any.
    pub trusted: Option<usize>,
    /// Column of the trusted labels' origin, if any.
    pub origin: Option<usize>,
    /// Column of the id, if any.
    pub id: Option<usize>,
    /// Column of each class's probability, in class order.
    pub probs: Vec<usize>,
    /// The classes, in their order.
    pub classes: Vec<String>,
    /// Rescale probability rows that do not sum to 1.
    pub renormalize: bool,
}

/// A batch's rows in class terms.
#[derive(Debug, Clone, Default)]
pub struct ClassRows {
    /// Table row of each row.
    pub rows: Vec<usize>,
    /// Observed class.
    pub labels: Vec<usize>,
    /// Trusted class, where audited; `None` without a trusted column.
    pub trusted: Option<Vec<Option<usize>>>,
    /// Whether each trusted label came from a random audit; `None` without an origin
    /// column.
    pub origins: Option<Vec<Origin>>,
    /// The ids as text (only when asked for and the table has an id column).
    pub ids: Option<Vec<String>>,
    /// `rows × classes` probabilities.
    pub probs: Array2<f32>,
}

impl BatchSpec {
    /// The plan of the role columns, as [`ColumnPlan::resolve`] would give it.
    fn role_plan(&self) -> ColumnPlan {
        ColumnPlan {
            header: self.header.clone(),
            label: Some(self.label),
            id: None,
            trusted: self.trusted,
            origin: self.origin,
            source: None,
            annotators: Vec::new(),
            numeric: Vec::new(),
            explicit: false,
        }
    }

    /// Where row `i` of a batch whose rows are `rows` is.
    fn row_at(&self, rows: &[usize], i: usize) -> Location {
        Location::row(&self.table, rows.get(i).copied().unwrap_or(0))
    }

    /// Reads `batch`; `with_ids` makes the ids' text (only rows that are kept need it).
    pub fn read(&self, batch: &RecordBatch, with_ids: bool) -> Result<ClassRows> {
        let rows = self.rows_of(batch)?;
        let (labels, trusted, origins) = self.roles(batch, &rows)?;
        let mut probs = Array2::zeros((batch.num_rows(), self.probs.len()));
        let columns: Vec<ArrayRef> = self
            .probs
            .iter()
            .map(|&c| batch.column(c).clone())
            .collect();
        put_prob_columns(
            &columns,
            &mut probs,
            0,
            &|i, j| {
                self.row_at(&rows, i)
                    .at_column(self.probs[j], &self.header[self.probs[j]])
            },
            &|j| Location::file(&self.table).at_column(self.probs[j], &self.header[self.probs[j]]),
        )?;
        check_row_sums(&mut probs, self.renormalize, &|i| self.row_at(&rows, i))?;
        let ids = match (with_ids, self.id) {
            (true, Some(c)) => Some(id_texts(batch.column(c).as_ref())),
            _ => None,
        };
        Ok(ClassRows {
            rows,
            labels,
            trusted,
            origins,
            ids,
            probs,
        })
    }

    /// The table rows of the batch's rows.
    fn rows_of(&self, batch: &RecordBatch) -> Result<Vec<usize>> {
        let column = batch.column(self.row);
        let bad = || {
            Error::Internal(format!(
                "the row column of a batch of {} is not a non-null integer",
                self.table.display()
            ))
        };
        if column.null_count() > 0 {
            return Err(bad());
        }
        if let Some(a) = column.as_primitive_opt::<UInt64Type>() {
            return Ok(a.values().iter().map(|&r| r as usize).collect());
        }
        if let Some(a) = column.as_primitive_opt::<Int64Type>() {
            return Ok(a.values().iter().map(|&r| r.max(0) as usize).collect());
        }
        Err(bad())
    }

    /// The label names (observed and trusted) in the batch, in order of first appearance;
    /// the classes of the spec are not read.
    pub fn names(&self, batch: &RecordBatch) -> Result<Vec<String>> {
        let rows = self.rows_of(batch)?;
        Ok(self.role_cells(batch, &rows)?.names)
    }

    /// The role cells through the CSV rules; the first problem located at its table row.
    fn role_cells(&self, batch: &RecordBatch, rows: &[usize]) -> Result<ChunkOut> {
        let plan = self.role_plan();
        let mut parser = RowParser::new(&plan);
        let fields = text_fields(&plan);
        let fatal = roles_at(batch, &fields, &fields, &mut parser, 0).err();
        let out = parser.finish(Vec::new(), Vec::<SlotStats>::new(), 0, fatal);
        if let Some((at, field, problem)) = out.fatal {
            let mut location = self.row_at(rows, at as usize);
            if let Some(field) = field {
                location = location.at_column(field, &self.header[field]);
            }
            return Err(Error::input(location, problem));
        }
        Ok(out)
    }

    /// Labels, trusted labels and origins, in class terms.
    #[allow(clippy::type_complexity)]
    fn roles(
        &self,
        batch: &RecordBatch,
        rows: &[usize],
    ) -> Result<(Vec<usize>, Option<Vec<Option<usize>>>, Option<Vec<Origin>>)> {
        let out = self.role_cells(batch, rows)?;
        let class_of: Vec<Option<usize>> = out
            .names
            .iter()
            .map(|name| self.classes.iter().position(|c| c == name))
            .collect();
        let class = |code: u32, i: usize, field: usize| {
            class_of[code as usize].ok_or_else(|| {
                Error::input(
                    self.row_at(rows, i).at_column(field, &self.header[field]),
                    Problem::StreamRows {
                        detail: format!(
                            "the label '{}' is not one of the classes the run found ({})",
                            out.names[code as usize],
                            self.classes.join(", ")
                        ),
                    },
                )
            })
        };
        let labels = out
            .labels
            .iter()
            .enumerate()
            .map(|(i, &c)| class(c, i, self.label))
            .collect::<Result<Vec<usize>>>()?;
        let trusted = match self.trusted {
            Some(field) => Some(
                out.trusted
                    .iter()
                    .enumerate()
                    .map(|(i, &c)| (c != NONE).then(|| class(c, i, field)).transpose())
                    .collect::<Result<Vec<Option<usize>>>>()?,
            ),
            None => None,
        };
        let origins = self.origin.map(|_| out.origins);
        Ok((labels, trusted, origins))
    }
}

/// Every cell of an id column as text.
fn id_texts(array: &dyn Array) -> Vec<String> {
    let text = Text::of(array);
    let mut cell = Vec::new();
    (0..array.len())
        .map(|i| {
            cell.clear();
            if let Some(text) = &text {
                text.cell(i, &mut cell);
            }
            String::from_utf8_lossy(&cell).into_owned()
        })
        .collect()
}

#[cfg(test)]
mod tests;
