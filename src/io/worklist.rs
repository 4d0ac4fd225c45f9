//! The relabel worklist written for annotators, in one of two forms, and its key.
//!
//! - **Ranked** (no control rows): the suspects from most to least suspect, with their
//!   scores and suggested classes.
//! - **Blind** (with control rows, the default): suspects and control rows in a seeded
//!   random order with nothing that tells them apart (no rank, score or suggestion), so
//!   reviewers judge every row alike. The **key** beside it (`NAME.key.csv`) records which
//!   rows were control rows and what flipmend thought of each; `review` reads it.

use std::io::Write;
use std::path::{Path, PathBuf};

use rustc_hash::FxHashMap;

use crate::data::origin::Origin;
use crate::data::Dataset;
use crate::io::columnar::Format;
use crate::io::review::{Verdict, KEEP};
use crate::io::table_out::{CellKind, OutColumn, TableWriter};
use crate::io::write_atomic;
use crate::noise::scores::{RowScore, ScoreKind};

/// The ranked worklist's own columns, in order.
pub const WORKLIST_COLUMNS: [&str; 10] = [
    "rank",
    "row",
    "id",
    "observed",
    "suggested",
    "score",
    "p_wrong",
    "second_choice",
    "second_choice_prob",
    "review",
];

/// The blind worklist's own columns, in order.
pub const BLIND_COLUMNS: [&str; 5] = ["item", "row", "id", "observed", "review"];

/// The key's columns, in order.
pub const KEY_COLUMNS: [&str; 10] = [
    "item",
    "row",
    "id",
    "slice",
    "rank",
    "suggested",
    "score",
    "p_wrong",
    "second_choice",
    "second_choice_prob",
];

/// Why a row is on a worklist.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Slice {
    /// Listed as a suspect.
    Listed,
    /// Drawn at random from the rows not listed, to measure what the list misses.
    Control,
}

impl Slice {
    /// The word in the key's `slice` column.
    pub fn name(self) -> &'static str {
        match self {
            Slice::Listed => "listed",
            Slice::Control => "control",
        }
    }

    /// Reads a `slice` cell.
    pub fn parse(cell: &str) -> Option<Slice> {
        [Slice::Listed, Slice::Control]
            .into_iter()
            .find(|s| s.name().eq_ignore_ascii_case(cell.trim()))
    }

    /// The origin of a trusted label that a review of such a row gives.
    pub fn origin(self) -> Origin {
        match self {
            Slice::Listed => Origin::Review,
            Slice::Control => Origin::Control,
        }
    }
}

/// One row of a worklist, as the reviewers will see them in order.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Item {
    /// The row's verdict.
    pub score: RowScore,
    /// 1-based position in the ranking of every row.
    pub rank: usize,
    /// Why it is listed.
    pub slice: Slice,
}

/// The kind of each of flipmend's own worklist and key columns.
fn kind_of(column: &str) -> CellKind {
    match column {
        "rank" | "row" | "item" => CellKind::Int,
        "score" | "p_wrong" | "second_choice_prob" => CellKind::Float,
        _ => CellKind::Text,
    }
}

/// Where the key of the worklist `worklist` goes: `w.csv` → `w.key.csv`. The key of a
/// Parquet worklist is CSV too (`w.key.csv`): `review` reads keys as text.
pub fn key_path(worklist: &Path) -> PathBuf {
    let stem = worklist
        .file_stem()
        .map_or_else(|| "worklist".into(), |s| s.to_string_lossy().into_owned());
    let extension = match Format::of(worklist) {
        Format::Text => worklist
            .extension()
            .map_or_else(|| "csv".into(), |e| e.to_string_lossy().into_owned()),
        _ => "csv".into(),
    };
    worklist.with_file_name(format!("{stem}.key.{extension}"))
}

/// Writes the worklist `items` to `path`: blind, with its key beside it, when they hold
/// control rows (returns where the key went); otherwise ranked, in rank order. The key
/// is written first, so a blind worklist never stands without it.
pub fn write_worklist_files(
    path: &Path,
    data: &Dataset,
    kind: ScoreKind,
    items: &[Item],
    extras: Extras,
) -> crate::error::Result<Option<PathBuf>> {
    if items.iter().all(|i| i.slice == Slice::Listed) {
        let mut ranked = items.to_vec();
        ranked.sort_by_key(|i| i.rank);
        let ranked: Vec<RowScore> = ranked.iter().map(|i| i.score).collect();
        let format = Format::of(path);
        write_atomic(path, |w| {
            write_worklist(w, format, data, kind, &ranked, extras)
        })?;
        return Ok(None);
    }
    let key = key_path(path);
    write_atomic(&key, |w| write_key(w, data, kind, items, extras))?;
    let format = Format::of(path);
    write_atomic(path, |w| write_blind(w, format, data, items, extras))?;
    Ok(Some(key))
}

/// What a worklist carries besides its own columns.
#[derive(Debug, Clone, Copy, Default)]
pub struct Extras<'a> {
    /// The rows' feature values after the worklist's columns.
    pub with_features: bool,
    /// Verdicts already given (the app's in-app review): their rows' review cells are
    /// filled, so the file reads back through `review` like one reviewed by hand.
    pub verdicts: &'a [Verdict],
    /// The table row of each row of `data`, when `data` holds only the worklist's rows
    /// (a streamed run); `None`: `data` is the whole table.
    pub table_rows: Option<&'a [usize]>,
}

impl Extras<'_> {
    /// The table row of `data`'s row `row`, as the `row` column shows it.
    fn table_row(&self, row: usize) -> usize {
        self.table_rows.map_or(row, |rows| rows[row])
    }

    /// The review cell of every row with a verdict: the class name, or [`KEEP`] when it
    /// confirms the observed label.
    fn review_cells(&self, data: &Dataset) -> FxHashMap<usize, String> {
        self.verdicts
            .iter()
            .map(|v| {
                let cell = if data.labels[v.row] == v.label {
                    KEEP.to_string()
                } else {
                    data.classes[v.label].clone()
                };
                (v.row, cell)
            })
            .collect()
    }
}

/// The key beside `worklist` ([`key_path`]), when that file exists.
pub fn key_beside(worklist: &Path) -> Option<PathBuf> {
    let key = key_path(worklist);
    key.exists().then_some(key)
}

/// The column that carries each row's label source, when the table has one.
pub const SOURCE_COLUMN: &str = "source";

/// The header: `own` columns, [`SOURCE_COLUMN`] when the table names a source column,
/// then with `with_features` the feature names (a feature whose name is one of those
/// gets the prefix `data_`).
fn header(own: &[&str], data: &Dataset, with_features: bool) -> Vec<OutColumn> {
    let mut header: Vec<OutColumn> = own.iter().map(|c| OutColumn::new(*c, kind_of(c))).collect();
    if data.sources.is_some() {
        header.push(OutColumn::new(SOURCE_COLUMN, CellKind::Text));
    }
    if with_features {
        for name in &data.feature_names {
            let clash =
                own.contains(&name.as_str()) || (data.sources.is_some() && name == SOURCE_COLUMN);
            let name = if clash {
                format!("data_{name}")
            } else {
                name.clone()
            };
            header.push(OutColumn::new(name, CellKind::Float));
        }
    }
    header
}

/// Writes the ranked rows (the ranked form).
pub fn write_worklist(
    out: &mut (dyn Write + Send),
    format: Format,
    data: &Dataset,
    kind: ScoreKind,
    ranked: &[RowScore],
    extras: Extras,
) -> std::io::Result<()> {
    let with_features = extras.with_features;
    let reviews = extras.review_cells(data);
    let mut w = TableWriter::new(out, format, &header(&WORKLIST_COLUMNS, data, with_features))?;
    let mut record: Vec<String> = Vec::with_capacity(WORKLIST_COLUMNS.len());
    for (i, s) in ranked.iter().enumerate() {
        record.clear();
        record.push((i + 1).to_string());
        record.push(extras.table_row(s.row).to_string());
        record.push(data.id(s.row).into_owned());
        record.push(data.classes[data.labels[s.row]].clone());
        push_verdict(&mut record, data, kind, s);
        record.push(reviews.get(&s.row).cloned().unwrap_or_default());
        push_source(&mut record, data, s.row);
        if with_features {
            record.extend(data.features.row(s.row).iter().map(|v| v.to_string()));
        }
        w.row(&record)?;
    }
    w.finish()
}

/// The row's source name, when the table has a source column.
fn push_source(record: &mut Vec<String>, data: &Dataset, row: usize) {
    if let Some(sources) = &data.sources {
        record.push(sources.names[sources.of_row[row] as usize].clone());
    }
}

/// suggested, score, p_wrong, second_choice, second_choice_prob.
fn push_verdict(record: &mut Vec<String>, data: &Dataset, kind: ScoreKind, s: &RowScore) {
    record.push(data.classes[s.suggested].clone());
    record.push(format!("{:.6}", kind.written(s.score)));
    record.push(
        kind.probability(s.score)
            .map_or(String::new(), |p| format!("{p:.6}")),
    );
    record.push(data.classes[s.second_choice].clone());
    record.push(format!("{:.6}", s.second_choice_prob));
}

/// Writes `items` in their order with nothing that tells a control row from a suspect
/// (the blind form).
pub fn write_blind(
    out: &mut (dyn Write + Send),
    format: Format,
    data: &Dataset,
    items: &[Item],
    extras: Extras,
) -> std::io::Result<()> {
    let with_features = extras.with_features;
    let reviews = extras.review_cells(data);
    let mut w = TableWriter::new(out, format, &header(&BLIND_COLUMNS, data, with_features))?;
    let mut record: Vec<String> = Vec::with_capacity(BLIND_COLUMNS.len());
    for (i, item) in items.iter().enumerate() {
        let row = item.score.row;
        start_item(&mut record, data, i, row, &extras);
        record.push(data.classes[data.labels[row]].clone());
        record.push(reviews.get(&row).cloned().unwrap_or_default());
        push_source(&mut record, data, row);
        if with_features {
            record.extend(data.features.row(row).iter().map(|v| v.to_string()));
        }
        w.row(&record)?;
    }
    w.finish()
}

/// Starts `record` with the item's number (1-based), its data row and its id: the first
/// columns of the blind worklist and of its key, which must agree line by line.
fn start_item(record: &mut Vec<String>, data: &Dataset, i: usize, row: usize, extras: &Extras) {
    record.clear();
    record.push((i + 1).to_string());
    record.push(extras.table_row(row).to_string());
    record.push(data.id(row).into_owned());
}

/// Writes the key of a blind worklist: each item's slice, rank and verdict.
pub fn write_key(
    out: &mut (dyn Write + Send),
    data: &Dataset,
    kind: ScoreKind,
    items: &[Item],
    extras: Extras,
) -> std::io::Result<()> {
    let columns: Vec<OutColumn> = KEY_COLUMNS
        .iter()
        .map(|c| OutColumn::new(*c, kind_of(c)))
        .collect();
    let mut w = TableWriter::new(out, Format::Text, &columns)?;
    let mut record: Vec<String> = Vec::with_capacity(KEY_COLUMNS.len());
    for (i, item) in items.iter().enumerate() {
        start_item(&mut record, data, i, item.score.row, &extras);
        record.push(item.slice.name().to_string());
        record.push(item.rank.to_string());
        push_verdict(&mut record, data, kind, &item.score);
        w.row(&record)?;
    }
    w.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_key_sits_beside_the_worklist() {
        assert_eq!(
            key_path(Path::new("out/w.csv")),
            PathBuf::from("out/w.key.csv")
        );
        assert_eq!(key_path(Path::new("w.tsv")), PathBuf::from("w.key.tsv"));
        assert_eq!(key_path(Path::new("list")), PathBuf::from("list.key.csv"));
        assert_eq!(key_path(Path::new("w.parquet")), PathBuf::from("w.key.csv"));
    }

    #[test]
    fn slices_round_trip_and_give_origins() {
        for s in [Slice::Listed, Slice::Control] {
            assert_eq!(Slice::parse(s.name()), Some(s));
        }
        assert_eq!(Slice::Listed.origin(), Origin::Review);
        assert_eq!(Slice::Control.origin(), Origin::Control);
        assert_eq!(Slice::parse("random"), None);
    }
}
