//! Several labels per row: one column per annotator (`--labels a1,a2,a3`), an empty cell
//! where that annotator did not label the row. The table's observed label is then their
//! majority (ties to the class first in natural order) until the consensus of
//! `noise::annotators` replaces it.

use std::path::Path;

use ndarray::Array2;
use rustc_hash::FxHashMap as HashMap;

use super::natural::natural_cmp;
use super::Dataset;
use crate::error::{Error, Location, Problem, Result};
use crate::io::annotations_long::LongAnnotations;
use crate::io::table_chunk::NONE;
use crate::noise::annotators::{majority_vote, AnnotatorLabels};

/// The annotators' labels of every row.
#[derive(Debug, Clone, PartialEq)]
pub struct Annotations {
    /// The annotators' column names, in the order given.
    pub columns: Vec<String>,
    /// Rows × annotators: the class each annotator gave, `None` where it gave none.
    pub labels: Array2<Option<u32>>,
}

impl Annotations {
    /// The annotations from label codes in read order (row-major, [`NONE`] for an empty
    /// cell), `order` mapping a code to its class index.
    pub(crate) fn from_codes(columns: Vec<String>, codes: &[u32], order: &[usize]) -> Self {
        let annotators = columns.len();
        let rows = codes.len() / annotators.max(1);
        let labels = Array2::from_shape_fn((rows, annotators), |(r, a)| {
            let code = codes[r * annotators + a];
            (code != NONE).then(|| order[code as usize] as u32)
        });
        Annotations { columns, labels }
    }

    /// The majority label of every row, ties to the lowest class index; `None` for a row
    /// nobody labelled.
    pub fn majority(&self, classes: usize) -> Vec<Option<usize>> {
        majority_vote(&AnnotatorLabels {
            classes,
            labels: self.labels.view(),
        })
    }

    /// Rows each annotator labelled.
    pub fn counts(&self) -> Vec<usize> {
        self.labels
            .columns()
            .into_iter()
            .map(|c| c.iter().filter(|l| l.is_some()).count())
            .collect()
    }
}

/// Joins a long annotations file (read from `path`) to `data`'s rows by id: annotators
/// in natural order become the annotation columns, the classes grow by any label the
/// table did not have (its labels and trusted labels are renumbered), and the observed
/// label becomes the annotators' majority. An id the table lacks, a row nobody labelled
/// and fewer than two annotators are errors.
pub fn attach_long(data: &mut Dataset, long: &LongAnnotations, path: &Path) -> Result<()> {
    let mut annotators: Vec<String> = long.entries.iter().map(|e| e.1.clone()).collect();
    annotators.sort_by(|a, b| natural_cmp(a, b));
    annotators.dedup();
    if annotators.len() < 2 {
        return Err(Error::Usage(format!(
            "{}: several annotators are needed, and it names {}",
            path.display(),
            annotators.len()
        )));
    }
    let classes = widened_classes(data, long);
    let class_of: HashMap<&str, u32> = classes
        .iter()
        .enumerate()
        .map(|(i, c)| (c.as_str(), i as u32))
        .collect();
    let annotator_of: HashMap<&str, usize> = annotators
        .iter()
        .enumerate()
        .map(|(i, a)| (a.as_str(), i))
        .collect();
    let row_of: HashMap<String, usize> = (0..data.rows())
        .map(|r| (data.id(r).into_owned(), r))
        .collect();
    let mut labels = Array2::<Option<u32>>::from_elem((data.rows(), annotators.len()), None);
    for ((id, who, class), &line) in long.entries.iter().zip(&long.lines) {
        let row = *row_of.get(id.as_str()).ok_or_else(|| {
            let problem = Problem::ProbUnknownId { id: id.clone() };
            Error::input(Location::line(path, line), problem)
        })?;
        labels[[row, annotator_of[who.as_str()]]] = Some(class_of[class.as_str()]);
    }
    if let Some(row) = (0..data.rows()).find(|&r| labels.row(r).iter().all(Option::is_none)) {
        let problem = Problem::RowWithoutAnnotation {
            id: data.id(row).into_owned(),
        };
        return Err(Error::input(Location::file(path), problem));
    }
    renumber_trusted(data, &class_of);
    let annotations = Annotations {
        columns: annotators,
        labels,
    };
    data.labels = annotations
        .majority(classes.len())
        .into_iter()
        .map(|l| l.unwrap_or(0))
        .collect();
    data.classes = classes;
    data.annotations = Some(annotations);
    if long.repeated > 0 {
        data.warnings.push(format!(
            "{}: {} lines repeat an earlier (id, annotator, label) and were read once",
            path.display(),
            long.repeated
        ));
    }
    Ok(())
}

/// The table's classes and every label of the file, in natural order.
fn widened_classes(data: &Dataset, long: &LongAnnotations) -> Vec<String> {
    let mut classes: Vec<String> = data.classes.clone();
    classes.extend(long.entries.iter().map(|e| e.2.clone()));
    classes.sort_by(|a, b| natural_cmp(a, b));
    classes.dedup();
    classes
}

/// The trusted labels renumbered into the widened classes.
fn renumber_trusted(data: &mut Dataset, class_of: &HashMap<&str, u32>) {
    let old = data.classes.clone();
    if let Some(trusted) = &mut data.trusted {
        for t in trusted.iter_mut().flatten() {
            *t = class_of[old[*t].as_str()] as usize;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_become_classes_and_the_majority_breaks_ties_low() {
        // Codes in order of first appearance: 0 = "b", 1 = "a"; classes sorted: a, b.
        let order = [1, 0];
        let codes = [0, 0, NONE, 1, 0, NONE, NONE, NONE, 1];
        let a = Annotations::from_codes(vec!["x".into(), "y".into(), "z".into()], &codes, &order);
        assert_eq!(a.labels[[0, 0]], Some(1));
        assert_eq!(a.labels[[1, 0]], Some(0));
        assert_eq!(a.counts(), [2, 2, 1]);
        // Row 0: b, b; row 1: a vs b, a tie broken toward a; row 2: a.
        assert_eq!(a.majority(2), [Some(1), Some(0), Some(0)]);
    }
}
