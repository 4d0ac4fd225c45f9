//! The probability CSV: `id` (optional), then one column per class, in any order. The
//! reader joins rows to the dataset by id (or takes them in order) and the writer
//! produces what the reader reads, so `--probs-out` feeds `--probs` unchanged.

use std::io::{Read, Write};
use std::path::Path;

use ndarray::Array2;
use rustc_hash::FxHashMap as HashMap;

use crate::data::probs::{checked, Loaded};
use crate::data::Dataset;
use crate::error::{csv_syntax, shorten, Error, Location, Problem, Result};
use crate::io::columnar::Format;
use crate::io::csv_source::CsvFormat;
use crate::io::table_out::{CellKind, OutColumn, TableWriter};

/// Writes probabilities as CSV, or as Parquet when `format` says: `id`, then one column
/// per class (shortest round-trip text in CSV, Float64 in Parquet).
pub fn write_probs(
    w: &mut (dyn Write + Send),
    format: Format,
    data: &Dataset,
    probs: &Array2<f32>,
) -> std::io::Result<()> {
    let mut columns = vec![OutColumn::new("id", CellKind::Text)];
    columns.extend(
        data.classes
            .iter()
            .map(|c| OutColumn::new(c, CellKind::Float)),
    );
    let mut writer = TableWriter::new(w, format, &columns)?;
    let mut record = Vec::with_capacity(columns.len());
    for (row, p) in probs.rows().into_iter().enumerate() {
        record.clear();
        record.push(data.id(row).into_owned());
        record.extend(p.iter().map(|v| v.to_string()));
        writer.row(&record)?;
    }
    writer.finish()
}

/// Reads a probability CSV for `data`; `delimiter` as in
/// [`crate::io::csv_source::delimiter_for`]. Rows are not yet checked to sum to 1.
pub(crate) fn read_probs_csv<'a, R: Read>(
    reader: R,
    path: &'a Path,
    data: &Dataset,
    delimiter: Option<u8>,
) -> Result<Loaded<'a>> {
    let mut rdr = CsvFormat::for_path(path, delimiter).reader(reader);
    let mut record = csv::ByteRecord::new();
    let syntax = csv_syntax(path);
    if !rdr.read_byte_record(&mut record).map_err(syntax)? {
        return Err(Error::input(Location::file(path), Problem::Empty));
    }
    let header: Vec<String> = record
        .iter()
        .map(|c| String::from_utf8_lossy(c).trim().to_string())
        .collect();
    let columns = csv_columns(&header, data, Location::line(path, 1), &[])?;
    let mut rows = Rows::new(path, data, &header, &columns);
    while rdr.read_byte_record(&mut record).map_err(syntax)? {
        rows.take(&record)?;
    }
    check_coverage(
        path,
        data,
        &rows.lines,
        rows.count,
        columns.id_field.is_some(),
    )?;
    Ok(Loaded {
        path,
        values: rows.values,
        lines: Some(rows.lines),
        warnings: Vec::new(),
    })
}

/// The rows read so far, in data-row order.
struct Rows<'r> {
    path: &'r Path,
    data: &'r Dataset,
    header: &'r [String],
    columns: &'r CsvColumns,
    /// Id → data row, when rows are joined by id and the data has ids.
    ids: Option<Option<HashMap<&'r str, usize>>>,
    values: Array2<f32>,
    /// File line of each data row's probability row; 0 while it has none.
    lines: Vec<u64>,
    /// Records read.
    count: usize,
}

impl<'r> Rows<'r> {
    fn new(
        path: &'r Path,
        data: &'r Dataset,
        header: &'r [String],
        columns: &'r CsvColumns,
    ) -> Self {
        let (rows, classes) = (data.rows(), data.classes.len());
        Rows {
            path,
            data,
            header,
            columns,
            ids: columns.id_field.map(|_| id_index(data)),
            values: Array2::<f32>::zeros((rows, classes)),
            lines: vec![0u64; rows],
            count: 0,
        }
    }

    /// Stores one record in its data row; records past the data's rows (when not joined
    /// by id) are only counted, for the row-count message.
    fn take(&mut self, record: &csv::ByteRecord) -> Result<()> {
        let line = record.position().map_or(0, |p| p.line());
        if record.len() != self.header.len() {
            let problem = Problem::Ragged {
                expected: self.header.len(),
                found: record.len(),
                hint: String::new(),
            };
            return Err(Error::input(Location::line(self.path, line), problem));
        }
        let rows = self.data.rows();
        let row = match (self.columns.id_field, &self.ids) {
            (Some(field), Some(index)) => join_row(&record[field], index.as_ref(), rows)
                .map_err(|p| Error::input(self.at(line, field), p))?,
            _ => self.count,
        };
        self.count += 1;
        if row >= rows {
            return Ok(());
        }
        if self.lines[row] != 0 {
            let id = self.data.id(row).to_string();
            let first_line = self.lines[row];
            let problem = Problem::DuplicateId {
                id,
                first: format!("line {first_line}"),
            };
            return Err(Error::input(Location::line(self.path, line), problem));
        }
        self.lines[row] = line;
        self.cells(record, row, line)
    }

    /// Reads the class cells of `record` into data row `row`.
    fn cells(&mut self, record: &csv::ByteRecord, row: usize, line: u64) -> Result<()> {
        for (field, class) in self.columns.class_of_field.iter().enumerate() {
            let Some(class) = *class else { continue };
            let text = record[field].trim_ascii();
            let value = std::str::from_utf8(text)
                .ok()
                .and_then(|s| s.parse::<f64>().ok());
            let value = value.ok_or_else(|| {
                Error::input(
                    self.at(line, field),
                    Problem::NotNumber {
                        value: shorten(&String::from_utf8_lossy(text)),
                    },
                )
            })?;
            self.values[[row, class]] =
                checked(value, || String::from_utf8_lossy(text).into_owned())
                    .map_err(|p| Error::input(self.at(line, field), p))?;
        }
        Ok(())
    }

    fn at(&self, line: u64, field: usize) -> Location {
        Location::line(self.path, line).at_column(field, &self.header[field])
    }
}

/// How the CSV's columns map onto the dataset.
/// Which class each column of a probability file holds, and which column is the id.
pub(crate) struct CsvColumns {
    /// For each field, the class it holds (or `None` for the id field).
    pub(crate) class_of_field: Vec<Option<usize>>,
    /// Field index of the id column.
    pub(crate) id_field: Option<usize>,
}

/// Matches a probability file's column names to the data's classes; `at_header` locates
/// problems with the names (the header line of a CSV file, the schema of a columnar one);
/// columns named in `ignored` are skipped.
pub(crate) fn csv_columns(
    header: &[String],
    data: &Dataset,
    at_header: Location,
    ignored: &[&str],
) -> Result<CsvColumns> {
    let class_index: HashMap<&str, usize> = data
        .classes
        .iter()
        .enumerate()
        .map(|(i, c)| (c.as_str(), i))
        .collect();
    let id_names = [
        data.id_column.as_deref(),
        Some(crate::data::roles::DEFAULT_ID),
    ];
    let mut class_of_field = Vec::with_capacity(header.len());
    let mut id_field = None;
    let mut extra = Vec::new();
    let mut seen = vec![false; data.classes.len()];
    for (i, name) in header.iter().enumerate() {
        if let Some(&c) = class_index.get(name.as_str()) {
            if seen[c] {
                let problem = Problem::DuplicateColumn { name: name.clone() };
                let location = at_header.clone().at_column(i, name);
                return Err(Error::input(location, problem));
            }
            seen[c] = true;
            class_of_field.push(Some(c));
        } else if id_field.is_none() && id_names.contains(&Some(name.as_str())) {
            id_field = Some(i);
            class_of_field.push(None);
        } else if ignored.contains(&name.as_str()) {
            class_of_field.push(None);
        } else {
            extra.push(name.clone());
            class_of_field.push(None);
        }
    }
    let classes = data.classes.join(", ");
    if !extra.is_empty() {
        let problem = Problem::ProbExtraColumns {
            extra: extra.join(", "),
            classes,
        };
        return Err(Error::input(at_header, problem));
    }
    let missing: Vec<&str> = data
        .classes
        .iter()
        .zip(&seen)
        .filter(|(_, &s)| !s)
        .map(|(c, _)| c.as_str())
        .collect();
    if !missing.is_empty() {
        let problem = Problem::ProbMissingClasses {
            missing: missing.join(", "),
            classes,
        };
        return Err(Error::input(at_header, problem));
    }
    Ok(CsvColumns {
        class_of_field,
        id_field,
    })
}

/// Maps an id to its data row.
pub(crate) fn id_index(data: &Dataset) -> Option<HashMap<&str, usize>> {
    data.ids
        .as_ref()
        .map(|ids| (0..ids.len()).map(|r| (ids.get(r), r)).collect())
}

/// The data row of a probability row's id. Without an id column in the data, ids are
/// 0-based row numbers.
pub(crate) fn join_row(
    cell: &[u8],
    index: Option<&HashMap<&str, usize>>,
    rows: usize,
) -> Result<usize, Problem> {
    let id = std::str::from_utf8(cell).map_err(|_| Problem::InvalidUtf8)?;
    let unknown = || Problem::ProbUnknownId { id: shorten(id) };
    match index {
        Some(index) => index.get(id).copied().ok_or_else(unknown),
        None => id
            .trim()
            .parse::<usize>()
            .ok()
            .filter(|&r| r < rows)
            .ok_or_else(unknown),
    }
}

pub(crate) fn check_coverage(
    path: &Path,
    data: &Dataset,
    lines: &[u64],
    count: usize,
    joined: bool,
) -> Result<()> {
    let rows = data.rows();
    if !joined && count != rows {
        let hint = if count > rows {
            ""
        } else {
            "; add an id column to join rows by id"
        };
        let problem = Problem::ProbRowCount {
            expected: rows,
            found: count,
            hint: hint.to_string(),
        };
        return Err(Error::input(Location::file(path), problem));
    }
    let unfilled = lines.iter().filter(|&&l| l == 0).count();
    if unfilled > 0 {
        let first = lines.iter().position(|&l| l == 0).unwrap_or(0);
        let problem = Problem::ProbMissingIds {
            count: unfilled,
            example: shorten(&data.id(first)),
        };
        return Err(Error::input(Location::file(path), problem));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{ProbOptions, Probabilities};

    fn data(text: &str) -> Dataset {
        Dataset::from_csv_text(text)
    }

    fn csv(text: &str, d: &Dataset, renormalize: bool) -> Result<Probabilities> {
        let options = ProbOptions {
            renormalize,
            delimiter: None,
        };
        Probabilities::from_csv_reader(text.as_bytes(), Path::new("p.csv"), d, &options)
    }

    const DATA: &str = "id,x,label\nr1,1,a\nr2,2,b\nr3,3,c10\nr4,4,c2\n";

    #[test]
    fn csv_columns_in_any_order_join_by_id() {
        let d = data(DATA);
        assert_eq!(d.classes, ["a", "b", "c2", "c10"]);
        let p = csv(
            "c10,id,a,b,c2\n0,r2,0,1,0\n0.5,r3,0.5,0,0\n0,r1,1,0,0\n0,r4,0,0,1\n",
            &d,
            false,
        )
        .unwrap();
        assert_eq!(p.values.row(0).to_vec(), vec![1.0, 0.0, 0.0, 0.0]);
        assert_eq!(p.values.row(2).to_vec(), vec![0.5, 0.0, 0.0, 0.5]);
        assert_eq!(p.agreement(&d.labels), 0.75 + 0.0); // r3's argmax is 'a' (tie, first)
    }

    #[test]
    fn csv_errors() {
        let d = data(DATA);
        let e = |t: &str| csv(t, &d, false).unwrap_err().to_string();
        assert!(e("a,b,c2\n").contains("no column for the class(es) c10"));
        assert!(
            e("a,b,c2,c10,zz\n").contains("'zz'")
                || e("a,b,c2,c10,zz\n").contains("zz are not classes")
        );
        assert!(e("a,b,c2,c10\n1,0,0,0\n").contains("1 probability rows for 4 data rows"));
        assert!(e("id,a,b,c2,c10\nr9,1,0,0,0\n")
            .contains("line 2, column 1 'id': the id 'r9' is not in the dataset"));
        assert!(e("id,a,b,c2,c10\nr1,1,0,0,0\n").contains("3 data row(s) have no probability row"));
        assert!(e("a,b,c2,c10\n-0.1,1.1,0,0\n")
            .contains("line 2, column 1 'a': the probability -0.1 is outside [0, 1]"));
        assert!(e("a,b,c2,c10\n0.5,0.4,0,0\n1,0,0,0\n1,0,0,0\n1,0,0,0\n")
            .contains("line 2: this row's probabilities sum to 0.9"));
        assert!(e("a,b,c2,c10\nNaN,0,0,0\n").contains("outside [0, 1]"));
    }

    #[test]
    fn renormalize_rescales_with_a_notice() {
        let d = data(DATA);
        let p = csv(
            "a,b,c2,c10\n0.5,0.3,0,0\n1,0,0,0\n1,0,0,0\n0,0,0,0.9\n",
            &d,
            true,
        )
        .unwrap();
        assert!((p.values[[0, 0]] - 0.625).abs() < 1e-6);
        assert!((p.values[[3, 3]] - 1.0).abs() < 1e-6);
        assert!(p.warnings[0].starts_with("2 probability row(s)"));
        let zero = csv("a,b,c2,c10\n0,0,0,0\n1,0,0,0\n1,0,0,0\n1,0,0,0\n", &d, true).unwrap_err();
        assert!(zero.to_string().contains("all zero"));
    }
}
