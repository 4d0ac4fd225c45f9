//! The relabel worklist: written for annotators, read back once they have filled in the
//! `review` column, and merged into a copy of the dataset as trusted labels.

use std::collections::hash_map::Entry;
use std::io::{Read, Write};
use std::path::Path;

use rustc_hash::FxHashMap as HashMap;

use crate::data::Dataset;
use crate::error::{shorten, Error, Location, Problem, Result};
use crate::noise::scores::{RowScore, ScoreKind};

/// The worklist's own columns, in order.
pub const WORKLIST_COLUMNS: [&str; 10] = [
    "rank",
    "row",
    "id",
    "observed",
    "suggested",
    "score",
    "p_wrong",
    "alt",
    "alt_prob",
    "review",
];
/// The review word that confirms the observed label.
pub const KEEP: &str = "keep";

/// Writes the ranked rows; with `with_features` the feature values follow (a feature
/// whose name is one of the worklist's columns gets the prefix `data_`).
pub fn write_worklist(
    out: &mut dyn Write,
    data: &Dataset,
    kind: ScoreKind,
    ranked: &[RowScore],
    with_features: bool,
) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let mut header: Vec<String> = WORKLIST_COLUMNS.iter().map(|c| c.to_string()).collect();
    if with_features {
        for name in &data.feature_names {
            let clash = WORKLIST_COLUMNS.contains(&name.as_str());
            header.push(if clash {
                format!("data_{name}")
            } else {
                name.clone()
            });
        }
    }
    w.write_record(&header)?;
    let mut record: Vec<String> = Vec::with_capacity(header.len());
    for (i, s) in ranked.iter().enumerate() {
        record.clear();
        record.push((i + 1).to_string());
        record.push(s.row.to_string());
        record.push(data.id(s.row).into_owned());
        record.push(data.classes[data.labels[s.row]].clone());
        record.push(data.classes[s.suggested].clone());
        record.push(format!("{:.6}", s.score));
        record.push(
            kind.probability(s.score)
                .map_or(String::new(), |p| format!("{p:.6}")),
        );
        record.push(data.classes[s.alt].clone());
        record.push(format!("{:.6}", s.alt_prob));
        record.push(String::new());
        if with_features {
            record.extend(data.features.row(s.row).iter().map(|v| v.to_string()));
        }
        w.write_record(&record)?;
    }
    w.flush()
}

/// One reviewed row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Verdict {
    /// 0-based data row.
    pub row: usize,
    /// The verified class.
    pub label: usize,
    /// Worklist line it came from.
    pub line: u64,
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
    /// Verdicts that confirm the observed label.
    pub fn confirmed(&self, data: &Dataset) -> usize {
        self.verdicts
            .iter()
            .filter(|v| data.labels[v.row] == v.label)
            .count()
    }

    /// Verdicts that change it.
    pub fn changed(&self, data: &Dataset) -> usize {
        self.verdicts.len() - self.confirmed(data)
    }
}

/// Reads a reviewed worklist for `data`. The `row` and `review` columns are required;
/// `id` and `observed`, when present, must agree with the data (so a worklist made from
/// another version of the file is caught).
pub fn read_review<R: Read>(reader: R, path: &Path, data: &Dataset) -> Result<Review> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(reader);
    let mut records = rdr.records();
    let syntax = crate::error::csv_syntax(path);
    let header: Vec<String> = match records.next() {
        Some(r) => r
            .map_err(syntax)?
            .iter()
            .map(|h| h.trim().trim_start_matches('\u{feff}').to_string())
            .collect(),
        None => return Err(Error::input(Location::file(path), Problem::Empty)),
    };
    let find = |name: &str| header.iter().position(|h| h == name);
    let (Some(row_col), Some(review_col)) = (find("row"), find("review")) else {
        let detail = format!(
            "a reviewed worklist needs the columns 'row' and 'review'; this header has: {}",
            header.join(", ")
        );
        return Err(Error::input(
            Location::line(path, 1),
            Problem::Review { detail },
        ));
    };
    let (id_col, observed_col) = (find("id"), find("observed"));
    let mut seen: HashMap<usize, (usize, u64)> = HashMap::default();
    let mut review = Review {
        verdicts: Vec::new(),
        not_reviewed: 0,
    };
    for record in records {
        let record = record.map_err(syntax)?;
        let line = record.position().map_or(0, |p| p.line());
        let bad = |col: usize, detail: String| {
            Error::input(
                Location::line(path, line).at_column(col, &header[col]),
                Problem::Review { detail },
            )
        };
        let cell = |col: usize| record.get(col).unwrap_or("").trim();
        let row = cell(row_col)
            .parse::<usize>()
            .ok()
            .filter(|&r| r < data.rows())
            .ok_or_else(|| {
                bad(
                    row_col,
                    format!(
                        "'{}' is not a data row (0 to {})",
                        shorten(cell(row_col)),
                        data.rows() - 1
                    ),
                )
            })?;
        if let Some(col) = id_col {
            if cell(col) != data.id(row) {
                return Err(bad(
                    col,
                    format!(
                        "row {row} has the id '{}' in the data, not '{}'",
                        data.id(row),
                        shorten(cell(col))
                    ),
                ));
            }
        }
        if let Some(col) = observed_col {
            let observed = &data.classes[data.labels[row]];
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
            data.labels[row]
        } else {
            data.classes.iter().position(|c| c == verdict).ok_or_else(|| {
                bad(review_col, format!(
                    "'{}' is not a class; write one of {}, or '{KEEP}' to confirm the observed label, or leave it empty",
                    shorten(verdict),
                    data.classes.join(", ")
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
                            data.classes[earlier], data.classes[label]
                        ),
                    ));
                }
            }
            Entry::Vacant(slot) => {
                slot.insert((label, line));
                review.verdicts.push(Verdict { row, label, line });
            }
        }
    }
    Ok(review)
}

/// Copies the dataset file to `out`, putting each verdict into the trusted column (a
/// new last column `trusted` when the data has none). Every other cell is copied as read.
pub fn write_merged(
    out: &mut dyn Write,
    data: &Dataset,
    delimiter: u8,
    review: &Review,
) -> std::io::Result<()> {
    let file = std::fs::File::open(&data.path)?;
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .delimiter(delimiter)
        .from_reader(file);
    let mut w = csv::WriterBuilder::new()
        .delimiter(delimiter)
        .from_writer(out);
    let verdicts: HashMap<usize, usize> =
        review.verdicts.iter().map(|v| (v.row, v.label)).collect();
    let mut record = csv::ByteRecord::new();
    if !rdr.read_byte_record(&mut record)? {
        return Ok(());
    }
    let existing = data
        .trusted_column
        .as_ref()
        .and_then(|name| data.header.iter().position(|h| h == name));
    let trusted_field = existing.unwrap_or(record.len());
    if existing.is_none() {
        record.push_field(crate::data::roles::DEFAULT_TRUSTED.as_bytes());
    }
    w.write_byte_record(&record)?;
    let mut row = 0usize;
    let mut fields: Vec<Vec<u8>> = Vec::new();
    while rdr.read_byte_record(&mut record)? {
        fields.clear();
        fields.extend(record.iter().map(<[u8]>::to_vec));
        if existing.is_none() {
            fields.push(Vec::new());
        }
        if let Some(&label) = verdicts.get(&row) {
            if let Some(cell) = fields.get_mut(trusted_field) {
                *cell = data.classes[label].as_bytes().to_vec();
            }
        }
        w.write_record(&fields)?;
        row += 1;
    }
    w.flush()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::TableOptions;

    fn data() -> Dataset {
        let text = "id,x,label\nr0,1,cat\nr1,2,dog\nr2,3,cat\n";
        Dataset::from_reader(
            text.as_bytes(),
            Path::new("d.csv"),
            None,
            &TableOptions::default(),
        )
        .unwrap()
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
