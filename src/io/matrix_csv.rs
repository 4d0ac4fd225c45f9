//! The flip matrix's CSV file: header `class,<class names…>`, then one row per true class
//! (rows and columns in any order). Written with commas whatever the file is called, and
//! read the same way, so a written matrix always reads back bit for bit.

use std::io::{Read, Write};
use std::path::Path;

use ndarray::Array2;

use crate::error::{shorten, Error, Location, Problem, Result};
use crate::io::csv_source::{open, CsvFormat};
use crate::noise::matrix::MATRIX_ROW_TOLERANCE;

/// Opens and reads the matrix file `path` (see [`read_matrix_csv`]).
pub fn load_matrix_csv(
    path: &Path,
    classes: &[String],
    renormalize: bool,
) -> Result<(Array2<f64>, Vec<String>)> {
    read_matrix_csv(open(path)?, path, classes, renormalize)
}

/// Reads a matrix CSV for the classes `classes` (rows and columns may come in any
/// order). Returns the matrix in class order and any warnings.
pub fn read_matrix_csv<R: Read>(
    reader: R,
    path: &Path,
    classes: &[String],
    renormalize: bool,
) -> Result<(Array2<f64>, Vec<String>)> {
    let mut rdr = CsvFormat::COMMA.reader(reader);
    let mut records = rdr.records();
    let syntax = crate::error::csv_syntax(path);
    let header = match records.next() {
        Some(r) => r.map_err(syntax)?,
        None => return Err(Error::input(Location::file(path), Problem::Empty)),
    };
    let at_line = |line: u64, detail: String| {
        Error::input(Location::line(path, line), Problem::Matrix { detail })
    };
    if header.get(0).map(str::trim) != Some("class") {
        return Err(at_line(
            1,
            "the header must start with 'class', then the class names".into(),
        ));
    }
    let columns = class_positions(header.iter().skip(1), classes).map_err(|d| at_line(1, d))?;
    let k = classes.len();
    let mut t = Array2::<f64>::from_elem((k, k), f64::NAN);
    let mut seen = vec![false; k];
    let mut line = 1u64;
    for record in records {
        let record = record.map_err(syntax)?;
        line = record.position().map_or(line + 1, |p| p.line());
        let name = record.get(0).unwrap_or("").trim();
        let row = classes.iter().position(|c| c == name).ok_or_else(|| {
            at_line(
                line,
                format!("'{}' is not a class of the data", shorten(name)),
            )
        })?;
        if std::mem::replace(&mut seen[row], true) {
            return Err(at_line(line, format!("the class '{name}' has two rows")));
        }
        if record.len() != k + 1 {
            return Err(at_line(
                line,
                format!(
                    "this row has {} values; expected {k}",
                    record.len().saturating_sub(1)
                ),
            ));
        }
        for (field, &col) in columns.iter().enumerate() {
            let text = record.get(field + 1).unwrap_or("").trim();
            let value = text
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite() && *v >= 0.0)
                .ok_or_else(|| {
                    Error::input(
                        Location::line(path, line).at_column(field + 1, &header[field + 1]),
                        Problem::Matrix {
                            detail: format!("'{}' is not a non-negative number", shorten(text)),
                        },
                    )
                })?;
            t[[row, col]] = value;
        }
    }
    if let Some(missing) = seen.iter().position(|s| !s) {
        return Err(Error::input(
            Location::file(path),
            Problem::Matrix {
                detail: format!("no row for the class '{}'", classes[missing]),
            },
        ));
    }
    let warnings = check_row_sums(&mut t, path, classes, renormalize)?;
    Ok((t, warnings))
}

fn class_positions<'a>(
    names: impl Iterator<Item = &'a str>,
    classes: &[String],
) -> std::result::Result<Vec<usize>, String> {
    let mut columns = Vec::new();
    for name in names {
        let name = name.trim();
        let col = classes.iter().position(|c| c == name).ok_or_else(|| {
            format!(
                "the column '{}' is not a class of the data (classes: {})",
                shorten(name),
                classes.join(", ")
            )
        })?;
        if columns.contains(&col) {
            return Err(format!("the class '{name}' has two columns"));
        }
        columns.push(col);
    }
    if columns.len() != classes.len() {
        let missing: Vec<&str> = classes
            .iter()
            .enumerate()
            .filter(|(i, _)| !columns.contains(i))
            .map(|(_, c)| c.as_str())
            .collect();
        return Err(format!(
            "no column for the class(es) {}",
            missing.join(", ")
        ));
    }
    Ok(columns)
}

/// Refuses (or, when asked, rescales) rows whose sum is off by more than the tolerance.
/// Rows within it are kept exactly as written, so a matrix file reads back bit for bit.
fn check_row_sums(
    t: &mut Array2<f64>,
    path: &Path,
    classes: &[String],
    renormalize: bool,
) -> Result<Vec<String>> {
    let mut fixed = Vec::new();
    for (i, mut row) in t.rows_mut().into_iter().enumerate() {
        let sum: f64 = row.sum();
        if (sum - 1.0).abs() > MATRIX_ROW_TOLERANCE {
            if !renormalize || sum <= 0.0 {
                let detail = format!(
                    "the row of '{}' sums to {sum}, not 1 (tolerance {MATRIX_ROW_TOLERANCE}); pass --renormalize to rescale it",
                    classes[i]
                );
                return Err(Error::input(
                    Location::file(path),
                    Problem::Matrix { detail },
                ));
            }
            row.mapv_inplace(|v| v / sum);
            fixed.push(classes[i].clone());
        }
    }
    let warnings = if fixed.is_empty() {
        Vec::new()
    } else {
        vec![format!(
            "matrix rows rescaled to sum to 1 (--renormalize): {}",
            fixed.join(", ")
        )]
    };
    Ok(warnings)
}

/// Writes the matrix CSV. Values use the shortest text that reads back to the same f64.
pub fn write_matrix_csv(
    out: &mut dyn Write,
    t: &Array2<f64>,
    classes: &[String],
) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let mut header = vec!["class".to_string()];
    header.extend(classes.iter().cloned());
    w.write_record(&header)?;
    for (i, row) in t.rows().into_iter().enumerate() {
        let mut record = vec![classes[i].clone()];
        record.extend(row.iter().map(|v| v.to_string()));
        w.write_record(&record)?;
    }
    w.flush()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::noise::matrix::validate;

    fn classes() -> Vec<String> {
        vec!["a".into(), "b".into(), "c".into()]
    }

    fn read(text: &str, renormalize: bool) -> Result<(Array2<f64>, Vec<String>)> {
        read_matrix_csv(text.as_bytes(), Path::new("m.csv"), &classes(), renormalize)
    }

    #[test]
    fn round_trip_in_any_order() {
        let (t, warnings) =
            read("class,c,a,b\nb,0,0.1,0.9\na,0,0.8,0.2\nc,1,0,0\n", false).unwrap();
        assert!(warnings.is_empty());
        assert_eq!(t.row(0).to_vec(), vec![0.8, 0.2, 0.0]);
        assert_eq!(t.row(2).to_vec(), vec![0.0, 0.0, 1.0]);
        let mut bytes = Vec::new();
        write_matrix_csv(&mut bytes, &t, &classes()).unwrap();
        let (again, _) = read(std::str::from_utf8(&bytes).unwrap(), false).unwrap();
        assert_eq!(t, again);
    }

    #[test]
    fn bad_matrices_are_refused() {
        let e = |t: &str| read(t, false).unwrap_err().to_string();
        assert!(e("class,a,b\na,1,0\nb,0,1\n").contains("no column for the class(es) c"));
        assert!(e("class,a,b,c\na,1,0,0\nb,0,1,0\n").contains("no row for the class 'c'"));
        assert!(
            e("class,a,b,c\na,1,0,0\nb,0,1,0\nz,0,0,1\n").contains("line 4: 'z' is not a class")
        );
        assert!(e("class,a,b,c\na,1.5,-0.5,0\nb,0,1,0\nc,0,0,1\n")
            .contains("line 2, column 3 'b': '-0.5' is not a non-negative"));
        assert!(e("class,a,b,c\na,0.5,0.4,0\nb,0,1,0\nc,0,0,1\n")
            .contains("the row of 'a' sums to 0.9"));
        assert!(e("name,a,b,c\n").contains("must start with 'class'"));
    }

    #[test]
    fn renormalize_with_a_notice() {
        let (t, warnings) = read("class,a,b,c\na,0.5,0.4,0.1\nb,0,2,0\nc,0,0,1\n", true).unwrap();
        assert_eq!(t.row(1).to_vec(), vec![0.0, 1.0, 0.0]);
        assert!(warnings[0].contains("b"));
        assert!(validate(&t).is_ok());
    }
}
