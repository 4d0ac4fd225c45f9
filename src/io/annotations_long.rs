//! Several annotators' labels as a long file: one line per (row id, annotator, label),
//! joined to the table by id (`--annotations FILE`). The columns are found by name:
//! `id`, `annotator` and `label`.

use std::path::Path;

use rustc_hash::FxHashMap as HashMap;

use crate::error::{Conflict, Error, Location, Problem, Result};
use crate::io::csv_source::CsvFormat;

/// The columns a long annotations file must have.
pub const LONG_COLUMNS: [&str; 3] = ["id", "annotator", "label"];

/// One file's annotations, not yet joined to a table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LongAnnotations {
    /// Every (id, annotator, label) once, in file order.
    pub entries: Vec<(String, String, String)>,
    /// The line of each entry, for messages.
    pub lines: Vec<u64>,
    /// Lines that repeat an earlier (id, annotator, label) exactly (dropped).
    pub repeated: usize,
}

/// Reads `path`. A second line for the same id and annotator with another label is an
/// error naming both lines; an exact repeat is dropped and counted.
pub fn read_long(path: &Path, delimiter: u8) -> Result<LongAnnotations> {
    let mut rdr = CsvFormat { delimiter }.open(path)?;
    let syntax = crate::error::csv_syntax(path);
    let mut record = csv::StringRecord::new();
    rdr.read_record(&mut record).map_err(syntax)?;
    let header: Vec<String> = record.iter().map(|h| h.trim().to_string()).collect();
    let column = |name: &str| {
        header.iter().position(|h| h == name).ok_or_else(|| {
            Error::Usage(format!(
                "{}: an annotations file needs the columns {}; its header is {}",
                path.display(),
                LONG_COLUMNS.join(", "),
                header.join(", ")
            ))
        })
    };
    let [id, annotator, label] = [column("id")?, column("annotator")?, column("label")?];
    let mut seen: HashMap<(String, String), (String, u64)> = HashMap::default();
    let mut out = LongAnnotations {
        entries: Vec::new(),
        lines: Vec::new(),
        repeated: 0,
    };
    while rdr.read_record(&mut record).map_err(syntax)? {
        let line = record.position().map_or(0, |p| p.line());
        let cell = |i: usize| record.get(i).unwrap_or("").trim().to_string();
        let (row, who, class) = (cell(id), cell(annotator), cell(label));
        if class.is_empty() {
            continue;
        }
        match seen.get(&(row.clone(), who.clone())) {
            Some((earlier, _)) if *earlier == class => out.repeated += 1,
            Some((earlier, first_line)) => {
                let problem = Problem::ConflictingAnnotation(Box::new(Conflict {
                    id: row,
                    annotator: who,
                    first: earlier.clone(),
                    first_line: *first_line,
                    second: class,
                }));
                return Err(Error::input(Location::line(path, line), problem));
            }
            None => {
                seen.insert((row.clone(), who.clone()), (class.clone(), line));
                out.entries.push((row, who, class));
                out.lines.push(line);
            }
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(text: &str) -> Result<LongAnnotations> {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.csv");
        std::fs::write(&path, text).unwrap();
        read_long(&path, b',')
    }

    #[test]
    fn entries_in_file_order_with_repeats_dropped() {
        let long =
            read("annotator,id,label\nann,r1,cat\nbob,r1,dog\nann,r1,cat\nbob,r2,\n").unwrap();
        assert_eq!(long.entries.len(), 2);
        assert_eq!(long.entries[1], ("r1".into(), "bob".into(), "dog".into()));
        assert_eq!((long.repeated, long.lines.clone()), (1, vec![2, 3]));
    }

    #[test]
    fn a_conflicting_repeat_names_both_lines() {
        let err = read("id,annotator,label\nr1,ann,cat\nr1,ann,dog\n")
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("line 3") && err.contains("line 2") && err.contains("'ann'"),
            "{err}"
        );
    }

    #[test]
    fn missing_columns_are_named() {
        let err = read("id,who,label\nr1,ann,cat\n").unwrap_err().to_string();
        assert!(
            err.contains("id, annotator, label") && err.contains("who"),
            "{err}"
        );
    }
}
