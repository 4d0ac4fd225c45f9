//! A reviewed worklist read back (and its key, which says which rows were control rows),
//! and the merged copy of the dataset that carries the verdicts as trusted labels with
//! their origin.

use std::collections::hash_map::Entry;
use std::io::{Read, Write};
use std::path::Path;

use rustc_hash::FxHashMap as HashMap;

use crate::data::origin::{origin_column, Origin};
use crate::error::{shorten, Error, Location, Problem, Result};
use crate::io::columnar::{as_csv_text, guarded, row_of_line, Format};
use crate::io::csv_source::{open, CsvFormat, SkipBom};
use crate::io::review_table::ReviewTable;
use crate::io::worklist::Slice;

/// The review word that confirms the observed label.
pub const KEEP: &str = "keep";

/// One reviewed row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Verdict {
    /// 0-based data row.
    pub row: usize,
    /// The verified class.
    pub label: usize,
    /// Worklist line it came from.
    pub line: u64,
    /// How the row came to be reviewed: a listed suspect unless the worklist's key says
    /// it was a control row.
    pub origin: Origin,
}

/// What a worklist's key says about one row.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KeyRow {
    /// Listed suspect or control row.
    pub slice: Slice,
    /// flipmend's probability that its label was wrong, when the score was one.
    pub p_wrong: Option<f64>,
}

/// A worklist's key: which rows were listed and which were control rows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Key {
    /// By data row.
    pub rows: HashMap<usize, KeyRow>,
}

impl Key {
    /// Rows of each slice on the worklist, (listed, control).
    pub fn counts(&self) -> (usize, usize) {
        let control = self
            .rows
            .values()
            .filter(|k| k.slice == Slice::Control)
            .count();
        (self.rows.len() - control, control)
    }
}

/// What a reviewed worklist says.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Review {
    /// One verdict per reviewed row, in worklist order.
    pub verdicts: Vec<Verdict>,
    /// Worklist rows left blank.
    pub not_reviewed: usize,
}

impl Review {
    /// Gives each verdict the origin its key row says; returns how many verdicts the key
    /// does not know (they stay reviews of suspects, the safe reading).
    pub fn apply_key(&mut self, key: &Key) -> usize {
        let mut unknown = 0;
        for v in &mut self.verdicts {
            match key.rows.get(&v.row) {
                Some(k) => v.origin = k.slice.origin(),
                None => unknown += 1,
            }
        }
        unknown
    }

    /// Verdicts that confirm the observed label.
    pub fn confirmed(&self, data: &dyn ReviewTable) -> usize {
        self.verdicts
            .iter()
            .filter(|v| data.label(v.row) == v.label)
            .count()
    }

    /// Verdicts that change it.
    pub fn changed(&self, data: &dyn ReviewTable) -> usize {
        self.verdicts.len() - self.confirmed(data)
    }
}

/// Reads a reviewed worklist for `data`. The `row` and `review` columns are required;
/// `id` and `observed`, when present, must agree with the data (so a worklist made from
/// another version of the file is caught).
pub fn read_review<R: Read>(reader: R, path: &Path, data: &dyn ReviewTable) -> Result<Review> {
    let (records, header) = open_edited(reader, path)?;
    let find = |name: &str| header.iter().position(|h| h == name);
    let [row_col, review_col] = required(&header, path, "a reviewed worklist", ["row", "review"])?;
    let (id_col, observed_col) = (find("id"), find("observed"));
    let mut seen: HashMap<usize, (usize, u64)> = HashMap::default();
    let mut review = Review {
        verdicts: Vec::new(),
        not_reviewed: 0,
    };
    for record in records {
        let record = record.map_err(crate::error::csv_syntax(path))?;
        let line = record.position().map_or(0, |p| p.line());
        let bad = |col: usize, detail: String| located(path, &header, line, col, detail);
        let cell = |col: usize| record.get(col).unwrap_or("").trim();
        let row = data_row(cell(row_col), data).map_err(|d| bad(row_col, d))?;
        if let Some(col) = id_col {
            same_id(cell(col), row, data).map_err(|d| bad(col, d))?;
        }
        if let Some(col) = observed_col {
            let observed = &data.classes()[data.label(row)];
            if cell(col) != observed {
                return Err(bad(
                    col,
                    format!(
                        "row {row} is labelled '{observed}' in the data, not '{}'",
                        shorten(cell(col))
                    ),
                ));
            }
        }
        let verdict = cell(review_col);
        if verdict.is_empty() {
            review.not_reviewed += 1;
            continue;
        }
        let label = if verdict.eq_ignore_ascii_case(KEEP) {
            data.label(row)
        } else {
            data.classes().iter().position(|c| c == verdict).ok_or_else(|| {
                bad(review_col, format!(
                    "'{}' is not a class; write one of {}, or '{KEEP}' to confirm the observed label, or leave it empty",
                    shorten(verdict),
                    data.classes().join(", ")
                ))
            })?
        };
        match seen.entry(row) {
            Entry::Occupied(first) => {
                let (earlier, first_line) = *first.get();
                if earlier != label {
                    return Err(bad(
                        review_col,
                        format!(
                            "row {row} was reviewed as '{}' on line {first_line}, and as '{}' here",
                            data.classes()[earlier],
                            data.classes()[label]
                        ),
                    ));
                }
            }
            Entry::Vacant(slot) => {
                slot.insert((label, line));
                review.verdicts.push(Verdict {
                    row,
                    label,
                    line,
                    origin: Origin::Review,
                });
            }
        }
    }
    Ok(review)
}

/// What the merged copy writes into each reviewed row: the verified class and its
/// origin. A row that already had a trusted label keeps its origin: it was chosen by that
/// audit, not by this review. Shared by the CSV copy and the columnar one
/// ([`crate::io::merged_columnar`]).
pub(crate) fn merged_cells(
    data: &dyn ReviewTable,
    review: &Review,
) -> HashMap<usize, (usize, Origin)> {
    review
        .verdicts
        .iter()
        .filter(|v| v.row < data.rows())
        .map(|v| {
            let had_label = data.trusted(v.row).is_some();
            let origin = if had_label {
                data.origin(v.row)
            } else {
                v.origin
            };
            (v.row, (v.label, origin))
        })
        .collect()
}

/// The merged copy's trusted and origin column names: the table's own, else `trusted`
/// and its origin column `trusted_origin`, added at the end.
pub(crate) fn merged_column_names(data: &dyn ReviewTable) -> (String, String) {
    let trusted = data.trusted_column().map_or_else(
        || crate::data::roles::DEFAULT_TRUSTED.to_string(),
        str::to_string,
    );
    let origin = data
        .origin_column()
        .map_or_else(|| origin_column(&trusted), str::to_string);
    (trusted, origin)
}

/// Copies the dataset file to `out`, putting each verdict into the trusted column (a
/// new last column `trusted` when the data has none) and its origin into the origin
/// column (`trusted_origin`, added likewise). A row that already had a trusted label keeps
/// its origin: it was chosen by that audit, not by this review. Every other cell is
/// copied as read. A Parquet or Arrow IPC table's copy is Parquet
/// ([`crate::io::merged_columnar`]).
pub fn write_merged(
    out: &mut (dyn Write + Send),
    data: &dyn ReviewTable,
    delimiter: u8,
    review: &Review,
) -> std::io::Result<()> {
    if crate::io::columnar::Format::of(data.path()).is_columnar() {
        return crate::io::merged_columnar::write_merged_columnar(out, data, review);
    }
    let file = std::fs::File::open(data.path())?;
    let mut rdr = CsvFormat { delimiter }.reader(file);
    let mut w = csv::WriterBuilder::new()
        .delimiter(delimiter)
        .from_writer(out);
    let verdicts = merged_cells(data, review);
    let mut record = csv::ByteRecord::new();
    if !rdr.read_byte_record(&mut record)? {
        return Ok(());
    }
    // The header as the table reader names its columns (trimmed).
    let header: Vec<String> = record
        .iter()
        .map(|c| String::from_utf8_lossy(c).trim().to_string())
        .collect();
    let position = |name: Option<&str>| name.and_then(|name| header.iter().position(|h| h == name));
    let (trusted_name, origin_name) = merged_column_names(data);
    let (trusted_field, new_trusted) = match position(data.trusted_column()) {
        Some(i) => (i, false),
        None => {
            record.push_field(trusted_name.as_bytes());
            (record.len() - 1, true)
        }
    };
    let (origin_field, new_origin) = match position(data.origin_column()) {
        Some(i) => (i, false),
        None => {
            record.push_field(origin_name.as_bytes());
            (record.len() - 1, true)
        }
    };
    w.write_byte_record(&record)?;
    let mut row = 0usize;
    let mut fields: Vec<Vec<u8>> = Vec::new();
    while rdr.read_byte_record(&mut record)? {
        fields.clear();
        fields.extend(record.iter().map(<[u8]>::to_vec));
        fields.extend((0..usize::from(new_trusted) + usize::from(new_origin)).map(|_| Vec::new()));
        if let Some(&(label, origin)) = verdicts.get(&row) {
            if let Some(cell) = fields.get_mut(trusted_field) {
                *cell = data.classes()[label].as_bytes().to_vec();
            }
            if let Some(cell) = fields.get_mut(origin_field) {
                *cell = origin.name().as_bytes().to_vec();
            }
        }
        w.write_record(&fields)?;
        row += 1;
    }
    w.flush()
}

/// Reads the reviewed worklist file at `path` for `data` (see [`read_review`]).
pub fn load_review(path: &Path, data: &dyn ReviewTable) -> Result<Review> {
    let format = Format::of(path);
    if format.is_columnar() {
        // A worklist is small: read as CSV text, with locations turned back into rows.
        let text = guarded(path, format, || as_csv_text(path, format))?;
        return read_review(&text[..], path, data).map_err(row_of_line);
    }
    read_review(open(path)?, path, data)
}

/// The data rows a worklist or key at `path` names (its `row` column), ascending and
/// without repeats: the rows a review of a table too large to hold must look up. Cells
/// that are not row numbers are skipped here; reading the file for real reports them
/// with their line and column.
pub fn named_rows(path: &Path) -> Result<Vec<usize>> {
    let format = Format::of(path);
    let text = if format.is_columnar() {
        guarded(path, format, || as_csv_text(path, format))?
    } else {
        let mut bytes = Vec::new();
        open(path)?
            .read_to_end(&mut bytes)
            .map_err(|source| Error::Read {
                path: path.to_path_buf(),
                source,
            })?;
        bytes
    };
    let (records, header) = open_edited(&text[..], path)?;
    let [row_col] = required(&header, path, "a worklist or key", ["row"])?;
    let mut rows = Vec::new();
    for record in records {
        let record = record.map_err(crate::error::csv_syntax(path))?;
        rows.extend(
            record
                .get(row_col)
                .and_then(|c| c.trim().parse::<usize>().ok()),
        );
    }
    rows.sort_unstable();
    rows.dedup();
    Ok(rows)
}

/// Reads the key file at `path` for `data` (see [`read_key`]).
pub fn load_key(path: &Path, data: &dyn ReviewTable) -> Result<Key> {
    read_key(open(path)?, path, data)
}

/// Reads a worklist's key for `data`: the `row` and `slice` columns are required; `id`,
/// when present, must agree with the data, and `p_wrong` is read when it has a value.
pub fn read_key<R: Read>(reader: R, path: &Path, data: &dyn ReviewTable) -> Result<Key> {
    let (records, header) = open_edited(reader, path)?;
    let find = |name: &str| header.iter().position(|h| h == name);
    let [row_col, slice_col] = required(&header, path, "a worklist key", ["row", "slice"])?;
    let (id_col, p_col) = (find("id"), find("p_wrong"));
    let mut key = Key::default();
    for record in records {
        let record = record.map_err(crate::error::csv_syntax(path))?;
        let line = record.position().map_or(0, |p| p.line());
        let bad = |col: usize, detail: String| located(path, &header, line, col, detail);
        let cell = |col: usize| record.get(col).unwrap_or("").trim();
        let row = data_row(cell(row_col), data).map_err(|d| bad(row_col, d))?;
        if let Some(col) = id_col {
            same_id(cell(col), row, data).map_err(|d| bad(col, d))?;
        }
        let slice = Slice::parse(cell(slice_col)).ok_or_else(|| {
            bad(
                slice_col,
                format!(
                    "'{}' is not a slice; write listed or control",
                    shorten(cell(slice_col))
                ),
            )
        })?;
        let p_wrong = p_col.and_then(|c| cell(c).parse::<f64>().ok());
        key.rows.insert(row, KeyRow { slice, p_wrong });
    }
    Ok(key)
}

/// The records of a worklist or key (a small CSV that people edit, so rows may be
/// ragged) after its header, and the header, trimmed and without a byte-order mark.
fn open_edited<R: Read>(
    reader: R,
    path: &Path,
) -> Result<(csv::StringRecordsIntoIter<SkipBom<R>>, Vec<String>)> {
    let mut records = CsvFormat::COMMA.reader(reader).into_records();
    let header = match records.next() {
        Some(r) => r
            .map_err(crate::error::csv_syntax(path))?
            .iter()
            .map(|h| h.trim().to_string())
            .collect(),
        None => return Err(Error::input(Location::file(path), Problem::Empty)),
    };
    Ok((records, header))
}

/// A problem with the cell at `line` and column `col` of an edited worklist or key.
fn located(path: &Path, header: &[String], line: u64, col: usize, detail: String) -> Error {
    Error::input(
        Location::line(path, line).at_column(col, &header[col]),
        Problem::Review { detail },
    )
}

/// The positions of the `names` that `what` cannot do without, or an error listing the
/// header.
fn required<const N: usize>(
    header: &[String],
    path: &Path,
    what: &str,
    names: [&str; N],
) -> Result<[usize; N]> {
    let mut found = [0; N];
    for (slot, name) in found.iter_mut().zip(names) {
        *slot = header.iter().position(|h| h == name).ok_or_else(|| {
            let detail = format!(
                "{what} needs the columns {}; this header has: {}",
                names.map(|n| format!("'{n}'")).join(" and "),
                header.join(", ")
            );
            Error::input(Location::line(path, 1), Problem::Review { detail })
        })?;
    }
    Ok(found)
}

/// A 0-based data row number of `data`, from a cell.
fn data_row(cell: &str, data: &dyn ReviewTable) -> std::result::Result<usize, String> {
    cell.parse::<usize>()
        .ok()
        .filter(|&r| r < data.rows())
        .ok_or_else(|| {
            format!(
                "'{}' is not a data row (0 to {})",
                shorten(cell),
                data.rows() - 1
            )
        })
}

/// Checks that an id cell names `row`'s id (a worklist or key made from another version
/// of the table is caught here).
fn same_id(cell: &str, row: usize, data: &dyn ReviewTable) -> std::result::Result<(), String> {
    if cell == data.id(row) {
        return Ok(());
    }
    Err(format!(
        "row {row} has the id '{}' in the data, not '{}'",
        data.id(row),
        shorten(cell)
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::Dataset;

    fn data() -> Dataset {
        let text = "id,x,label\nr0,1,cat\nr1,2,dog\nr2,3,cat\n";
        Dataset::from_csv_text(text)
    }

    fn read(text: &str) -> Result<Review> {
        read_review(text.as_bytes(), Path::new("w.csv"), &data())
    }

    #[test]
    fn verdicts_keep_and_blank() {
        let r = read("rank,row,id,observed,review\n1,1,r1,dog,cat\n2,0,r0,cat,KEEP\n3,2,r2,cat,\n")
            .unwrap();
        assert_eq!(
            r.verdicts
                .iter()
                .map(|v| (v.row, v.label))
                .collect::<Vec<_>>(),
            vec![(1, 0), (0, 0)]
        );
        assert_eq!(r.not_reviewed, 1);
        assert_eq!((r.confirmed(&data()), r.changed(&data())), (1, 1));
    }

    #[test]
    fn malformed_reviews_name_line_and_column() {
        let e = |t: &str| read(t).unwrap_err().to_string();
        assert!(e("rank,id\n").contains("needs the columns 'row' and 'review'"));
        assert!(e("row,review\n7,cat\n")
            .contains("w.csv, line 2, column 1 'row': '7' is not a data row (0 to 2)"));
        assert!(e("row,review\nx,cat\n").contains("'x' is not a data row"));
        assert!(e("row,id,review\n1,r9,cat\n")
            .contains("column 2 'id': row 1 has the id 'r1' in the data, not 'r9'"));
        assert!(
            e("row,observed,review\n1,cat,cat\n").contains("row 1 is labelled 'dog' in the data")
        );
        assert!(e("row,review\n1,bird\n").contains("column 2 'review': 'bird' is not a class"));
        assert!(e("row,review\n1,cat\n1,dog\n")
            .contains("line 3, column 2 'review': row 1 was reviewed as 'cat' on line 2"));
        assert!(
            read("row,review\n1,cat\n1,cat\n").is_ok(),
            "a repeated identical verdict is fine"
        );
    }
}
