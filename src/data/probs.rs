//! Out-of-sample class probabilities from any model, one row per data row.
//!
//! Probabilities are stored as `f32`: they lie in [0, 1], where f32 keeps about seven
//! significant digits, far finer than any model's calibration, and halves the memory of
//! a million-row, hundred-class array. Sums and means over them are taken in f64.

use rustc_hash::FxHashMap as HashMap;
use std::fs::File;
use std::io::{BufReader, Read};
use std::path::{Path, PathBuf};

use ndarray::Array2;

use rayon::prelude::*;

use super::table::Dataset;
use crate::error::{shorten, Error, Location, Problem, Result};
use crate::io::csv_source::CsvFormat;
use crate::io::npy::{self, Dtype};

/// Largest allowed distance of a row sum from 1 before the row is refused (or rescaled).
pub const ROW_SUM_TOLERANCE: f64 = 1e-3;

/// How to read a probability file.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ProbOptions {
    /// Rescale rows whose sum is off by more than [`ROW_SUM_TOLERANCE`] instead of failing.
    pub renormalize: bool,
    /// CSV delimiter; `None`: tab for `.tsv`, else comma.
    pub delimiter: Option<u8>,
}

/// A validated `rows × classes` probability array aligned with a [`Dataset`].
#[derive(Debug, Clone)]
pub struct Probabilities {
    /// The file it came from.
    pub path: PathBuf,
    /// Row `i` is p(class | row `i` of the dataset); columns in the dataset's class order.
    pub values: Array2<f32>,
    /// Things done to the input (e.g. rows renormalised).
    pub notices: Vec<String>,
}

impl Probabilities {
    /// Loads `path` as `.npy` (by extension or magic bytes) or CSV, aligned to `data`.
    pub fn load(path: &Path, data: &Dataset, options: &ProbOptions) -> Result<Self> {
        let read_err = |source| Error::Read {
            path: path.to_path_buf(),
            source,
        };
        let mut file = File::open(path).map_err(read_err)?;
        let size = file.metadata().map_err(read_err)?.len();
        let mut magic = [0u8; 6];
        let n = read_up_to(&mut file, &mut magic).map_err(read_err)?;
        let is_npy = &magic[..n] == npy::MAGIC
            || path
                .extension()
                .and_then(|e| e.to_str())
                .is_some_and(|e| e.eq_ignore_ascii_case("npy"));
        let file = File::open(path).map_err(read_err)?;
        let mut loaded = if is_npy {
            read_npy(
                BufReader::with_capacity(1 << 20, file),
                path,
                Some(size),
                data,
            )?
        } else {
            read_csv(file, path, data, options)?
        };
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            notices: loaded.notices,
        })
    }

    /// Builds from an `.npy` byte stream (used by tests and fuzzing).
    pub fn from_npy_reader<R: Read>(
        reader: R,
        path: &Path,
        data: &Dataset,
        options: &ProbOptions,
    ) -> Result<Self> {
        let mut loaded = read_npy(reader, path, None, data)?;
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            notices: loaded.notices,
        })
    }

    /// Builds from a CSV byte stream (used by tests and fuzzing).
    pub fn from_csv_reader<R: Read>(
        reader: R,
        path: &Path,
        data: &Dataset,
        options: &ProbOptions,
    ) -> Result<Self> {
        let mut loaded = read_csv(reader, path, data, options)?;
        loaded.check_rows(options.renormalize)?;
        Ok(Probabilities {
            path: path.to_path_buf(),
            values: loaded.values,
            notices: loaded.notices,
        })
    }

    /// Mean over rows of the largest probability.
    pub fn mean_max(&self) -> f64 {
        let total: f64 = self
            .values
            .rows()
            .into_iter()
            .map(|r| r.iter().fold(0.0f32, |m, &v| m.max(v)) as f64)
            .sum();
        total / self.values.nrows().max(1) as f64
    }

    /// Share of rows whose most probable class is the observed label (ties: first class).
    pub fn agreement(&self, labels: &[usize]) -> f64 {
        let hits = self
            .values
            .rows()
            .into_iter()
            .zip(labels)
            .filter(|(r, &y)| argmax(r.as_slice().unwrap_or(&[])) == y)
            .count();
        hits as f64 / labels.len().max(1) as f64
    }
}

/// Index of the largest value; the first one on ties.
pub fn argmax(row: &[f32]) -> usize {
    let mut best = 0;
    for (i, &v) in row.iter().enumerate() {
        if v > row[best] {
            best = i;
        }
    }
    best
}

fn read_up_to<R: Read>(reader: &mut R, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match reader.read(&mut buf[n..])? {
            0 => break,
            k => n += k,
        }
    }
    Ok(n)
}

/// Probabilities read but not yet checked row by row.
struct Loaded<'a> {
    path: &'a Path,
    values: Array2<f32>,
    /// File line of each row (CSV), for messages.
    lines: Option<Vec<u64>>,
    notices: Vec<String>,
}

impl Loaded<'_> {
    fn locate(&self, row: usize) -> Location {
        match &self.lines {
            Some(lines) => Location::line(self.path, lines[row]),
            None => Location::row(self.path, row),
        }
    }

    /// Refuses rows that do not sum to 1, or rescales them when asked.
    fn check_rows(&mut self, renormalize: bool) -> Result<()> {
        let mut fixed = 0usize;
        // The sums are checked on every core; the (usually no) rows that fail are then
        // handled in order, so the first one is the one reported.
        let row_sum = |row: ndarray::ArrayView1<f32>| row.iter().map(|&v| v as f64).sum::<f64>();
        let off: Vec<usize> = (0..self.values.nrows())
            .into_par_iter()
            .with_min_len(4096)
            .filter(|&row| (row_sum(self.values.row(row)) - 1.0).abs() > ROW_SUM_TOLERANCE)
            .collect();
        for row in off {
            let sum = row_sum(self.values.row(row));
            if !renormalize {
                return Err(Error::input(self.locate(row), Problem::ProbRowSum { sum }));
            }
            if sum <= 0.0 {
                return Err(Error::input(self.locate(row), Problem::ProbZeroRow));
            }
            self.values
                .row_mut(row)
                .mapv_inplace(|v| (v as f64 / sum) as f32);
            fixed += 1;
        }
        if fixed > 0 {
            self.notices.push(format!(
                "{fixed} probability row(s) did not sum to 1 within {ROW_SUM_TOLERANCE} and were rescaled (--renormalize)"
            ));
        }
        Ok(())
    }
}

/// Checks one value, as read, for the range [0, 1] (a hair above 1 from rounding is let
/// through and clipped).
fn checked(value: f64, text: impl FnOnce() -> String) -> Result<f32, Problem> {
    if !(0.0..=1.0 + 1e-6).contains(&value) {
        return Err(Problem::ProbOutOfRange { value: text() });
    }
    Ok(value.min(1.0) as f32)
}

/// Elements per read of an `.npy` body (16 MiB of f32).
const NPY_READ_ELEMENTS: usize = 1 << 22;
/// Elements per parallel work item when decoding.
const DECODE_CHUNK: usize = 1 << 16;

fn total_elements(rows: usize, classes: usize) -> usize {
    rows.saturating_mul(classes)
}

/// (row, column) of the `element`-th stored value.
fn position(element: usize, rows: usize, classes: usize, fortran_order: bool) -> (usize, usize) {
    if fortran_order {
        (element % rows, element / rows)
    } else {
        (element / classes, element % classes)
    }
}

/// Decodes `bytes` into `out` on every core, each value through [`checked`]; returns the
/// offset and the problem of the first value out of range. The element reader is chosen
/// once, outside the loop (a match per element made decoding about a third slower).
fn decode_checked(
    bytes: &[u8],
    dtype: Dtype,
    big_endian: bool,
    out: &mut [f32],
) -> Option<(usize, Problem)> {
    fn run(
        bytes: &[u8],
        size: usize,
        out: &mut [f32],
        read: impl Fn(&[u8]) -> f64 + Sync,
    ) -> Option<(usize, Problem)> {
        out.par_chunks_mut(DECODE_CHUNK)
            .zip(bytes.par_chunks(DECODE_CHUNK * size))
            .enumerate()
            .find_map_first(|(chunk, (out, bytes))| {
                for (i, (dst, element)) in out.iter_mut().zip(bytes.chunks_exact(size)).enumerate()
                {
                    let value = read(element);
                    match checked(value, || value.to_string()) {
                        Ok(v) => *dst = v,
                        Err(problem) => return Some((chunk * DECODE_CHUNK + i, problem)),
                    }
                }
                None
            })
    }
    let size = dtype.size();
    let four = |b: &[u8]| -> [u8; 4] { b.try_into().unwrap_or([0; 4]) };
    let eight = |b: &[u8]| -> [u8; 8] { b.try_into().unwrap_or([0; 8]) };
    match (dtype, big_endian) {
        (Dtype::F32, false) => run(bytes, size, out, |b| f32::from_le_bytes(four(b)) as f64),
        (Dtype::F32, true) => run(bytes, size, out, |b| f32::from_be_bytes(four(b)) as f64),
        (Dtype::F64, false) => run(bytes, size, out, |b| f64::from_le_bytes(eight(b))),
        (Dtype::F64, true) => run(bytes, size, out, |b| f64::from_be_bytes(eight(b))),
    }
}

fn read_npy<'a, R: Read>(
    mut reader: R,
    path: &'a Path,
    size: Option<u64>,
    data: &Dataset,
) -> Result<Loaded<'a>> {
    let file_err = |problem| Error::input(Location::file(path), problem);
    let (header, consumed) =
        npy::read_header(&mut reader).map_err(|detail| file_err(Problem::NpyHeader { detail }))?;
    let dtype = header.dtype.ok_or_else(|| {
        file_err(Problem::NpyDtype {
            descr: header.descr.clone(),
        })
    })?;
    let (rows, classes) = (data.rows(), data.classes.len());
    if header.shape != [rows as u64, classes as u64] {
        let dims: Vec<String> = header.shape.iter().map(u64::to_string).collect();
        let shape = format!(
            "({}{})",
            dims.join(", "),
            if dims.len() == 1 { "," } else { "" }
        );
        return Err(file_err(Problem::NpyShape {
            shape,
            rows,
            classes,
        }));
    }
    let expected = (rows * classes * dtype.size()) as u64;
    if let Some(size) = size {
        if size.saturating_sub(consumed) != expected {
            return Err(file_err(Problem::NpySize {
                expected,
                found: size.saturating_sub(consumed),
            }));
        }
    }
    let mut values = Array2::<f32>::zeros((rows, classes));
    let flat = values
        .as_slice_mut()
        .ok_or_else(|| Error::Internal("probability array not contiguous".into()))?;
    // Large reads decoded on every core: a 400 MB array is read at the speed of the disk
    // cache instead of one element at a time.
    let mut buf =
        vec![0u8; NPY_READ_ELEMENTS.min(total_elements(rows, classes)).max(1) * dtype.size()];
    let mut decoded = Vec::new();
    let mut element = 0usize;
    let total = rows * classes;
    while element < total {
        let want = ((total - element) * dtype.size()).min(buf.len());
        let got = read_up_to(&mut reader, &mut buf[..want]).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        if got < want {
            let found = (element * dtype.size() + got) as u64;
            return Err(file_err(Problem::NpySize { expected, found }));
        }
        let count = want / dtype.size();
        let target = if header.fortran_order {
            decoded.resize(count, 0.0);
            &mut decoded[..]
        } else {
            &mut flat[element..element + count]
        };
        if let Some((bad, problem)) = decode_checked(&buf[..want], dtype, header.big_endian, target)
        {
            let (row, col) = position(element + bad, rows, classes, header.fortran_order);
            return Err(Error::input(
                Location::row(path, row).at_column(col, &data.classes[col]),
                problem,
            ));
        }
        if header.fortran_order {
            for (i, &v) in decoded.iter().enumerate() {
                let (row, col) = position(element + i, rows, classes, true);
                flat[row * classes + col] = v;
            }
        }
        element += count;
    }
    let mut extra = [0u8; 1];
    if size.is_none() && read_up_to(&mut reader, &mut extra).unwrap_or(0) > 0 {
        return Err(file_err(Problem::NpySize {
            expected,
            found: expected + 1,
        }));
    }
    Ok(Loaded {
        path,
        values,
        lines: None,
        notices: Vec::new(),
    })
}

/// How the CSV's columns map onto the dataset.
struct CsvColumns {
    /// For each CSV field, the class it holds (or `None` for the id field).
    class_of_field: Vec<Option<usize>>,
    /// Field index of the id column.
    id_field: Option<usize>,
}

fn csv_columns(path: &Path, header: &[String], data: &Dataset) -> Result<CsvColumns> {
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
                return Err(Error::input(
                    Location::line(path, 1).at_column(i, name),
                    problem,
                ));
            }
            seen[c] = true;
            class_of_field.push(Some(c));
        } else if id_field.is_none() && id_names.contains(&Some(name.as_str())) {
            id_field = Some(i);
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
        return Err(Error::input(Location::line(path, 1), problem));
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
        return Err(Error::input(Location::line(path, 1), problem));
    }
    Ok(CsvColumns {
        class_of_field,
        id_field,
    })
}

/// Maps an id to its data row.
fn id_index(data: &Dataset) -> Option<HashMap<&str, usize>> {
    data.ids
        .as_ref()
        .map(|ids| (0..ids.len()).map(|r| (ids.get(r), r)).collect())
}

fn read_csv<'a, R: Read>(
    reader: R,
    path: &'a Path,
    data: &Dataset,
    options: &ProbOptions,
) -> Result<Loaded<'a>> {
    let mut rdr = CsvFormat::for_path(path, options.delimiter).reader(reader);
    let mut record = csv::ByteRecord::new();
    let syntax = crate::error::csv_syntax(path);
    if !rdr.read_byte_record(&mut record).map_err(syntax)? {
        return Err(Error::input(Location::file(path), Problem::Empty));
    }
    let header: Vec<String> = record
        .iter()
        .map(|c| String::from_utf8_lossy(c).trim().to_string())
        .collect();
    let columns = csv_columns(path, &header, data)?;
    let ids = columns.id_field.map(|_| id_index(data));
    let (rows, classes) = (data.rows(), data.classes.len());
    let mut values = Array2::<f32>::zeros((rows, classes));
    let mut lines = vec![0u64; rows];
    let mut count = 0usize;
    while rdr.read_byte_record(&mut record).map_err(syntax)? {
        let line = record.position().map_or(0, |p| p.line());
        let at = |field: usize| Location::line(path, line).at_column(field, &header[field]);
        if record.len() != header.len() {
            let problem = Problem::Ragged {
                expected: header.len(),
                found: record.len(),
                hint: String::new(),
            };
            return Err(Error::input(Location::line(path, line), problem));
        }
        let row = match (columns.id_field, &ids) {
            (Some(field), Some(index)) => join_row(&record[field], index.as_ref(), rows)
                .map_err(|p| Error::input(at(field), p))?,
            _ => count,
        };
        if row >= rows {
            count += 1;
            continue;
        }
        if lines[row] != 0 {
            let id = data.id(row).to_string();
            return Err(Error::input(
                Location::line(path, line),
                Problem::DuplicateId {
                    id,
                    first_line: lines[row],
                },
            ));
        }
        lines[row] = line;
        for (field, class) in columns.class_of_field.iter().enumerate() {
            let Some(class) = *class else { continue };
            let text = record[field].trim_ascii();
            let value = std::str::from_utf8(text)
                .ok()
                .and_then(|s| s.parse::<f64>().ok())
                .ok_or_else(|| {
                    Error::input(
                        at(field),
                        Problem::NotNumber {
                            value: shorten(&String::from_utf8_lossy(text)),
                        },
                    )
                })?;
            values[[row, class]] = checked(value, || String::from_utf8_lossy(text).into_owned())
                .map_err(|p| Error::input(at(field), p))?;
        }
        count += 1;
    }
    check_coverage(path, data, &lines, count, columns.id_field.is_some())?;
    Ok(Loaded {
        path,
        values,
        lines: Some(lines),
        notices: Vec::new(),
    })
}

/// The data row of a probability row's id. Without an id column in the data, ids are
/// 0-based row numbers.
fn join_row(
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

fn check_coverage(
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
    use crate::data::roles::TableOptions;

    fn data(text: &str) -> Dataset {
        Dataset::from_reader(
            text.as_bytes(),
            Path::new("d.csv"),
            None,
            &TableOptions::default(),
        )
        .unwrap()
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
        assert!(p.notices[0].starts_with("2 probability row(s)"));
        let zero = csv("a,b,c2,c10\n0,0,0,0\n1,0,0,0\n1,0,0,0\n1,0,0,0\n", &d, true).unwrap_err();
        assert!(zero.to_string().contains("all zero"));
    }

    /// Replaces the first occurrence of `from` with `to` (same length) in a header.
    fn replace_bytes(bytes: &mut [u8], from: &[u8], to: &[u8]) {
        let at = bytes.windows(from.len()).position(|w| w == from).unwrap();
        bytes[at..at + to.len()].copy_from_slice(to);
    }

    #[test]
    fn npy_f64_and_fortran_order() {
        let d = data("x,label\n1,a\n2,b\n3,a\n");
        let rows = [[0.9, 0.1], [0.2, 0.8], [0.6, 0.4]];
        let flat: Vec<f64> = rows.iter().flatten().copied().collect();
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, 3, 2, &flat).unwrap();
        let p = Probabilities::from_npy_reader(
            &bytes[..],
            Path::new("p.npy"),
            &d,
            &ProbOptions::default(),
        )
        .unwrap();
        assert_eq!(p.values[[1, 1]], 0.8f32);
        // The same array stored column by column.
        let column_major: Vec<f64> = (0..2)
            .flat_map(|c| rows.iter().map(move |r| r[c]))
            .collect();
        let mut f = Vec::new();
        npy::write_2d(&mut f, 3, 2, &column_major).unwrap();
        replace_bytes(&mut f, b"False", b"True ");
        let q =
            Probabilities::from_npy_reader(&f[..], Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap();
        assert_eq!(p.values, q.values);
    }

    #[test]
    fn npy_errors() {
        let d = data("x,label\n1,a\n2,b\n3,a\n");
        let load = |bytes: &[u8]| {
            Probabilities::from_npy_reader(bytes, Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap_err()
                .to_string()
        };
        let mut wrong_shape = Vec::new();
        npy::write_2d(&mut wrong_shape, 2, 2, &[0.5f32; 4]).unwrap();
        assert!(load(&wrong_shape).contains("shape (2, 2); expected (3, 2)"));
        let mut short = Vec::new();
        npy::write_2d(&mut short, 3, 2, &[0.5f32; 6]).unwrap();
        short.truncate(short.len() - 3);
        assert!(load(&short).contains("the .npy data has 21 bytes but its header announces 24"));
        let mut ints_bytes = wrong_shape.clone();
        replace_bytes(&mut ints_bytes, b"<f4", b"<i4");
        let msg = load(&ints_bytes);
        assert!(msg.contains("holds '<i4'"), "{msg}");
        let mut bad_value = Vec::new();
        npy::write_2d(&mut bad_value, 3, 2, &[0.5f32, 0.5, 0.5, 0.5, 2.0, -1.0]).unwrap();
        assert!(
            load(&bad_value).contains("p.npy, row 2, column 1 'a': the probability 2 is outside")
        );
        assert!(load(b"garbage").contains("not a readable .npy file"));
    }

    #[test]
    fn npy_bad_values_are_located_past_the_first_decoding_chunk() {
        // 70,000 rows × 2 classes is more than one decoding chunk; the first bad value in
        // file order is the one named, in C and in Fortran order.
        let rows = 70_000;
        let mut text = String::from("x,label\n");
        for r in 0..rows {
            text.push_str(if r % 2 == 0 { "1,a\n" } else { "2,b\n" });
        }
        let d = data(&text);
        let load = |bytes: &[u8]| {
            Probabilities::from_npy_reader(bytes, Path::new("p.npy"), &d, &ProbOptions::default())
                .unwrap_err()
                .to_string()
        };
        let mut c_order = vec![0.5f32; rows * 2];
        c_order[50_000 * 2 + 1] = 1.5;
        c_order[69_999 * 2] = -1.0;
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, rows, 2, &c_order).unwrap();
        let message = load(&bytes);
        assert!(
            message.contains("row 50000, column 2 'b': the probability 1.5"),
            "{message}"
        );
        let mut f_order = vec![0.5f32; rows * 2];
        f_order[rows + 50_000] = 1.5;
        f_order[69_999] = -1.0;
        let mut bytes = Vec::new();
        npy::write_2d(&mut bytes, rows, 2, &f_order).unwrap();
        replace_bytes(&mut bytes, b"False", b"True ");
        let message = load(&bytes);
        assert!(
            message.contains("row 69999, column 1 'a': the probability -1"),
            "{message}"
        );
    }
}
