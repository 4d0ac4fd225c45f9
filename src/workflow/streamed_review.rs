//! The review job over a table too large to hold. A worklist names a few thousand rows;
//! one pass over the table's role columns collects what the review is checked against
//! for those rows alone (observed label, id, earlier trusted label and its origin), and
//! the merged copy is then written part by part ([`crate::io::review::write_merged`]). The
//! checks, the figures and the copy are those of the in-memory job: both read the
//! table through [`ReviewTable`] (tested equal in `tests/streamed.rs`).

use std::borrow::Cow;
use std::path::{Path, PathBuf};

use rustc_hash::FxHashMap as HashMap;

use super::review::{key_file_for, read_reviewed, Reviewed};
use super::streamed::{class_order, code_classes};
use crate::data::origin::Origin;
use crate::data::roles::TableOptions;
use crate::error::Result;
use crate::io::review::named_rows;
use crate::io::review_table::ReviewTable;
use crate::io::stream::{StreamPart, TableStream};

/// A table's facts at the rows a review names, with its row count and classes.
#[derive(Debug, Clone)]
pub struct NamedRows {
    path: PathBuf,
    rows: usize,
    classes: Vec<String>,
    facts: HashMap<usize, RowFacts>,
    trusted_column: Option<String>,
    origin_column: Option<String>,
    /// The table has an id column (else a row's id is its number).
    has_ids: bool,
}

#[derive(Debug, Clone)]
struct RowFacts {
    label: usize,
    id: String,
    trusted: Option<usize>,
    origin: Origin,
}

/// What a row not looked up reads as. Never reached by a review: every row it checks
/// was named by the worklist or key and looked up, and rows past the end are refused
/// before any lookup.
static UNKNOWN: RowFacts = RowFacts {
    label: 0,
    id: String::new(),
    trusted: None,
    origin: Origin::Audit,
};

impl ReviewTable for NamedRows {
    fn path(&self) -> &Path {
        &self.path
    }
    fn rows(&self) -> usize {
        self.rows
    }
    fn classes(&self) -> &[String] {
        &self.classes
    }
    fn label(&self, row: usize) -> usize {
        self.fact(row).label
    }
    fn id(&self, row: usize) -> Cow<'_, str> {
        if self.has_ids {
            Cow::Borrowed(&self.fact(row).id)
        } else {
            Cow::Owned(row.to_string())
        }
    }
    fn trusted(&self, row: usize) -> Option<usize> {
        self.fact(row).trusted
    }
    fn origin(&self, row: usize) -> Origin {
        self.fact(row).origin
    }
    fn trusted_column(&self) -> Option<&str> {
        self.trusted_column.as_deref()
    }
    fn origin_column(&self) -> Option<&str> {
        self.origin_column.as_deref()
    }
}

impl NamedRows {
    fn fact(&self, row: usize) -> &RowFacts {
        self.facts.get(&row).unwrap_or(&UNKNOWN)
    }

    /// Reads `table` (CSV, Parquet or Arrow IPC) once, keeping the facts of `wanted` rows
    /// (ascending).
    pub fn read(table: &Path, options: &TableOptions, wanted: &[usize]) -> Result<Self> {
        let stream = TableStream::open(table, options, table, false)?;
        let plan = stream.plan();
        let name = |field: Option<usize>| field.map(|f| plan.header[f].clone());
        let (trusted_column, origin_column) = (name(plan.trusted), name(plan.origin));
        let has_ids = plan.id.is_some();
        let mut coded = Vec::new();
        let mut names = Vec::new();
        let mut rows = 0;
        stream.for_each_part(&[], Some(wanted), |part| {
            let ids = part.id_text();
            for &i in part.selected.as_deref().unwrap_or(&[]) {
                let id = StreamPart::id(&ids, i);
                let trusted = part.trusted_at(i);
                let origin = part.origins.get(i).copied().unwrap_or(Origin::Audit);
                coded.push((part.first_row + i, part.labels[i], id, trusted, origin));
            }
            rows = part.first_row + part.rows();
            names = part.names;
            Ok(())
        })?;
        let classes = class_order(&names);
        let class_of = code_classes(&names, &classes);
        let facts = coded
            .into_iter()
            .map(|(row, label, id, trusted, origin)| {
                let fact = RowFacts {
                    label: class_of[label as usize] as usize,
                    id,
                    trusted: trusted.map(|t| class_of[t as usize] as usize),
                    origin,
                };
                (row, fact)
            })
            .collect();
        Ok(NamedRows {
            path: table.to_path_buf(),
            rows,
            classes,
            facts,
            trusted_column,
            origin_column,
            has_ids,
        })
    }
}

/// The review job on a table too large to hold: the rows the worklist (and its key)
/// name are looked up in one pass, then the reviewed worklist is read against them.
pub fn review_streamed(
    table: &Path,
    options: &TableOptions,
    worklist: &Path,
    key: Option<&Path>,
) -> Result<(NamedRows, Reviewed)> {
    let mut wanted = named_rows(worklist)?;
    if let Some(key_file) = key_file_for(worklist, key) {
        wanted.extend(named_rows(&key_file)?);
    }
    wanted.sort_unstable();
    wanted.dedup();
    let named = NamedRows::read(table, options, &wanted)?;
    let reviewed = read_reviewed(&named, worklist, key)?;
    Ok((named, reviewed))
}
