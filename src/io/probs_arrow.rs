//! Probabilities from a columnar file (Parquet, Arrow IPC), in either of two layouts:
//! one column per class, named by class (with an optional id column), as the CSV has and
//! as `--probs-out` writes; or one list column of K numbers per row, in the data's class
//! order (natural order of the class names), with an optional id column. Rows join the
//! data by id when there is an id column, else they are taken in order.

use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::{Array, RecordBatch};
use ndarray::Array2;
use rustc_hash::FxHashMap as HashMap;

use super::arrow_cells::{for_each_number, type_words, Text};
use super::columnar::{ColumnarFile, Format};
use super::probs_csv::{check_coverage, csv_columns, id_index, join_row};
use super::table_merge::PartMap;
use crate::data::probs::{checked, Loaded};
use crate::data::Dataset;
use crate::error::{Error, Location, Problem, Result};

/// Reads the probabilities of `data` from `path`; rows are not yet checked to sum to 1.
pub(crate) fn read_probs_columnar<'a>(
    path: &'a Path,
    data: &Dataset,
    format: Format,
) -> Result<Loaded<'a>> {
    let file = ColumnarFile::open(path, format)?;
    let header = file.header();
    let layout = Layout::of(path, &file, &header, data)?;
    let mut fill = Fill::new(path, data, &layout, file.parts.clone());
    let fields = layout.fields();
    // Arrow IPC batch sizes are learnt as the batches come (Parquet's are in the footer).
    let learn_parts = file.known_parts().is_none();
    for batch in file.batches(&fields)? {
        let batch = batch?;
        if learn_parts {
            fill.parts.starts.push(fill.count);
        }
        fill.batch(&Projected(&batch, &fields), &header)?;
    }
    check_coverage(path, data, &fill.places, fill.count, layout.id.is_some())?;
    Ok(Loaded {
        path,
        values: fill.values,
        lines: None,
        warnings: Vec::new(),
    })
}

/// Where the classes are in the file.
struct Layout {
    /// Field of the id column.
    id: Option<usize>,
    /// Either the field of each class, or one list field.
    classes: Classes,
}

impl Layout {
    /// The fields read, in file order: the id and the classes, none of the table's own
    /// columns when the probabilities share its file.
    fn fields(&self) -> Vec<usize> {
        let classes: Vec<usize> = match &self.classes {
            Classes::Columns(class_of_field) => (0..class_of_field.len())
                .filter(|&f| class_of_field[f].is_some())
                .collect(),
            Classes::List(field) => vec![*field],
        };
        let mut fields: Vec<usize> = self.id.into_iter().chain(classes).collect();
        fields.sort_unstable();
        fields
    }
}

enum Classes {
    /// Class of each field (`None` for the id).
    Columns(Vec<Option<usize>>),
    /// One list column holding every class, in the data's order.
    List(usize),
}

impl Layout {
    fn of(path: &Path, file: &ColumnarFile, header: &[String], data: &Dataset) -> Result<Self> {
        let schema = &file.schema;
        let list = schema.fields().iter().position(|f| {
            matches!(
                f.data_type(),
                arrow_schema::DataType::FixedSizeList(..)
                    | arrow_schema::DataType::List(..)
                    | arrow_schema::DataType::LargeList(..)
            )
        });
        let Some(list) = list else {
            // The table's own columns are skipped, so the probabilities may sit in the
            // table's file (one Parquet file with the label and a column per class).
            let table_columns: Vec<&str> = data.header.iter().map(String::as_str).collect();
            let columns = csv_columns(header, data, Location::file(path), &table_columns)?;
            return Ok(Layout {
                id: columns.id_field,
                classes: Classes::Columns(columns.class_of_field),
            });
        };
        let id_names = [
            data.id_column.as_deref(),
            Some(crate::data::roles::DEFAULT_ID),
        ];
        let id = header
            .iter()
            .position(|h| id_names.contains(&Some(h.as_str())));
        let extra: Vec<&str> = header
            .iter()
            .enumerate()
            .filter(|&(i, _)| i != list && Some(i) != id)
            .map(|(_, h)| h.as_str())
            .collect();
        if !extra.is_empty() {
            let problem = Problem::ProbExtraColumns {
                extra: extra.join(", "),
                classes: format!("one list column of {} numbers", data.classes.len()),
            };
            return Err(Error::input(Location::file(path), problem));
        }
        Ok(Layout {
            id,
            classes: Classes::List(list),
        })
    }
}

/// A batch read with the columns `.1` (header fields, ascending), addressed by field.
struct Projected<'b>(&'b RecordBatch, &'b [usize]);

impl Projected<'_> {
    fn column(&self, field: usize) -> &dyn Array {
        // Every field asked for is one the layout read.
        let column = self.1.binary_search(&field).unwrap_or(0);
        self.0.column(column).as_ref()
    }

    fn num_rows(&self) -> usize {
        self.0.num_rows()
    }
}

/// The probability rows read so far, placed in data-row order.
struct Fill<'a> {
    path: &'a Path,
    data: &'a Dataset,
    layout: &'a Layout,
    /// Id → data row, built at the first row whose id is not the data's id of the same
    /// row: probabilities written in table order (or kept in the table's own file) join
    /// without one. Outer `None`: not joined by id; inner `None`: the data has no ids.
    ids: Option<Option<HashMap<&'a str, usize>>>,
    /// Whether `ids` has been built yet.
    indexed: bool,
    values: Array2<f32>,
    /// 1 + the file row that filled each data row; 0 while none has.
    places: Vec<u64>,
    /// File rows read.
    count: usize,
    parts: PartMap,
}

impl<'a> Fill<'a> {
    fn new(path: &'a Path, data: &'a Dataset, layout: &'a Layout, parts: PartMap) -> Self {
        Fill {
            path,
            data,
            layout,
            ids: layout.id.map(|_| None),
            indexed: false,
            values: Array2::zeros((data.rows(), data.classes.len())),
            places: vec![0; data.rows()],
            count: 0,
            parts,
        }
    }

    fn at(&self, file_row: usize, field: usize, header: &[String]) -> Location {
        Location::row_in_part(self.path, file_row, self.parts.part_of(file_row))
            .at_column(field, &header[field])
    }

    /// Places one batch's rows in their data rows (rows past the data's end, when not
    /// joined by id, are only counted).
    fn batch(&mut self, batch: &Projected, header: &[String]) -> Result<()> {
        let targets = self.targets(batch, header)?;
        match &self.layout.classes {
            Classes::Columns(class_of_field) => {
                for (field, class) in class_of_field.iter().enumerate() {
                    let Some(class) = *class else { continue };
                    let array = batch.column(field);
                    self.numbers(array, &targets, |i| (i, class), field, header)?;
                }
            }
            Classes::List(field) => {
                let field = *field;
                let array = batch.column(field);
                let k = self.data.classes.len();
                let (child, start) = list_values(array, k).ok_or_else(|| {
                    let problem = Problem::ColumnType {
                        found: type_words(array),
                        expected: format!(
                            "a list of {k} numbers per row (one per class) is needed"
                        ),
                    };
                    Error::input(
                        Location::file(self.path).at_column(field, &header[field]),
                        problem,
                    )
                })?;
                let needed = batch.num_rows() * k;
                let flat = child.slice(
                    start.min(child.len()),
                    needed.min(child.len().saturating_sub(start)),
                );
                self.numbers(flat.as_ref(), &targets, |j| (j / k, j % k), field, header)?;
            }
        }
        self.count += batch.num_rows();
        Ok(())
    }

    /// The data row each of the batch's rows fills (`usize::MAX` for rows past the data).
    fn targets(&mut self, batch: &Projected, header: &[String]) -> Result<Vec<usize>> {
        let rows = batch.num_rows();
        let mut targets = Vec::with_capacity(rows);
        let id_text = self.layout.id.map(|field| (field, batch.column(field)));
        let text = match id_text {
            Some((field, array)) => Some((
                field,
                Text::of(array).ok_or_else(|| {
                    let problem = Problem::ColumnType {
                        found: type_words(array),
                        expected: "ids must be text or integers".into(),
                    };
                    Error::input(
                        Location::file(self.path).at_column(field, &header[field]),
                        problem,
                    )
                })?,
            )),
            None => None,
        };
        let mut cell = Vec::new();
        for i in 0..rows {
            let file_row = self.count + i;
            let row = match &text {
                Some((field, text)) => {
                    text.cell(i, &mut cell);
                    self.join(&cell, file_row)
                        .map_err(|p| Error::input(self.at(file_row, *field, header), p))?
                }
                None => file_row,
            };
            if row < self.data.rows() {
                if self.places[row] != 0 {
                    let problem = Problem::DuplicateId {
                        id: self.data.id(row).to_string(),
                        first: format!("row {}", self.places[row] - 1),
                    };
                    let field = self.layout.id.unwrap_or(0);
                    return Err(Error::input(self.at(file_row, field, header), problem));
                }
                self.places[row] = file_row as u64 + 1;
                targets.push(row);
            } else {
                targets.push(usize::MAX);
            }
        }
        Ok(targets)
    }

    /// The data row of the file row `file_row` whose id is `cell`: the same row when the
    /// ids agree there, else by the id index (built on first need).
    fn join(&mut self, cell: &[u8], file_row: usize) -> Result<usize, Problem> {
        let same_row = self
            .data
            .ids
            .as_ref()
            .is_some_and(|ids| file_row < ids.len() && ids.get(file_row).as_bytes() == cell);
        if same_row {
            return Ok(file_row);
        }
        if !self.indexed {
            self.ids = Some(id_index(self.data));
            self.indexed = true;
        }
        let index = self.ids.as_ref().and_then(Option::as_ref);
        join_row(cell, index, self.data.rows())
    }

    /// Stores the numbers of `array`; `cell(i)` gives the batch row and class of its
    /// `i`-th value.
    fn numbers(
        &mut self,
        array: &dyn Array,
        targets: &[usize],
        cell: impl Fn(usize) -> (usize, usize),
        field: usize,
        header: &[String],
    ) -> Result<()> {
        let mut bad: Option<(usize, Problem)> = None;
        let values = &mut self.values;
        let read = for_each_number(array, |i, v| {
            let (row, class) = cell(i);
            let target = targets[row];
            if target == usize::MAX || bad.is_some() {
                return;
            }
            match checked(v, || v.to_string()) {
                Ok(p) => values[[target, class]] = p,
                Err(problem) => bad = Some((row, problem)),
            }
        });
        let nulls = read.ok_or_else(|| {
            let problem = Problem::ColumnType {
                found: type_words(array),
                expected: "probabilities must be numbers".into(),
            };
            Error::input(
                Location::file(self.path).at_column(field, &header[field]),
                problem,
            )
        })?;
        if let Some(first_null) = nulls.and_then(|n| n.iter().position(|valid| !valid)) {
            let row = cell(first_null).0;
            bad = bad.or(Some((
                row,
                Problem::ProbOutOfRange {
                    value: "null".into(),
                },
            )));
        }
        match bad {
            None => Ok(()),
            Some((row, problem)) => Err(Error::input(
                self.at(self.count + row, field, header),
                problem,
            )),
        }
    }
}

/// The flat values of a list column whose rows all hold `k` numbers, and the offset of
/// the first row's first value in them.
fn list_values(array: &dyn Array, k: usize) -> Option<(arrow_array::ArrayRef, usize)> {
    if let Some(list) = array.as_fixed_size_list_opt() {
        if list.value_length() as usize != k || list.null_count() > 0 {
            return None;
        }
        return Some((list.values().clone(), list.value_offset(0).max(0) as usize));
    }
    if let Some(list) = array.as_list_opt::<i32>() {
        let offsets = list.value_offsets();
        let even = offsets.windows(2).all(|w| (w[1] - w[0]) as usize == k);
        if !even || list.null_count() > 0 {
            return None;
        }
        return Some((list.values().clone(), offsets[0] as usize));
    }
    None
}
